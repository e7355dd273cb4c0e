"""Local mismatch against die-to-die process spread: summary["variation"] per measure, one unit per row."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import DisplayUnit, plain
from mcmatch.report.tables import cell, num, row, table
from mcmatch.report.targets import spec_unit

#: The linearised parts, then the Monte Carlo's own sigma (the check on the linear split).
PARTS = ("std_local", "std_global", "std_total", "mc_std")


def variation_table(summary: dict) -> dict | None:
    """Per measure the linearised std_local, std_global, std_total and the Monte Carlo sigma; None if no global part."""
    block = summary.get("variation")
    if not isinstance(block, Mapping) or not isinstance(block.get("measures"), Mapping):
        return None
    measures = summary.get("measures") or {}
    rows = []
    for name, m in block["measures"].items():
        if not isinstance(m, Mapping):
            continue
        mc = m.get("mc_std")
        if mc is None:
            mc = (measures.get(name) or {}).get("std") if isinstance(measures.get(name), Mapping) else None
        values = [m.get(k) for k in PARTS[:3]] + [mc]
        show = DisplayUnit(values, spec_unit(summary, name))
        local, glob = m.get("std_local"), m.get("std_global")
        share = None
        if isinstance(local, (int, float)) and isinstance(glob, (int, float)) and local**2 + glob**2 > 0:
            share = glob**2 / (local**2 + glob**2)
        rows.append(
            row(
                [
                    cell(name, "name"),
                    *(num(show(v)) for v in values),
                    num("\u2013" if share is None else f"{plain(share * 100, 3)} %"),
                ]
            )
        )
    if not rows:
        return None
    return table(
        [
            "measure",
            ("std local", "num"),
            ("std global", "num"),
            ("std total", "num"),
            ("Monte Carlo std", "num"),
            ("global share of the variance", "num"),
        ],
        rows,
        "Spread by source, linearised at the nominal point (std total\u00b2 = std local\u00b2 + std global\u00b2), "
        "beside the Monte Carlo's own sigma",
        "compact",
    )
