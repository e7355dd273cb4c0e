"""Per-measure statistics and the sampling error of the estimates."""

from __future__ import annotations

import math
from collections.abc import Mapping

from mcmatch.report.format import DisplayUnit, finite, limits_text, percent, plain, yield_cells, yield_text
from mcmatch.report.tables import cell, num, row, table


def measures_table(summary: dict) -> dict | None:
    measures = summary.get("measures") or {}
    if not measures:
        return None
    specs = summary.get("specs") or {}
    rows = []
    for name, m in measures.items():
        unit = m.get("unit", "")
        q = m.get("quantiles") or {}
        mean, std = finite(m.get("mean")), finite(m.get("std"))
        rel = percent(std / abs(mean), 3) if mean and std is not None and unit != "1" else "\u2013"
        keys = ("0.00135", "0.5", "0.99865")
        lim = specs.get(name) or {}
        u = DisplayUnit([m.get(k) for k in ("nominal", "mean", "std", "min", "max")] + [q.get(k) for k in keys], unit)
        rows.append(
            row(
                [
                    cell(name, "name"),
                    *(num(u(m.get(k))) for k in ("nominal", "mean", "std")),
                    num(rel),
                    *(num(u(q.get(k))) for k in keys),
                    num(u(m.get("min"))),
                    num(u(m.get("max"))),
                    num(limits_text(lim, unit, u) if lim else "\u2013"),
                ]
            )
        )
    return table(
        [
            "measure",
            ("nominal", "num"),
            ("mean", "num"),
            ("sigma", "num"),
            ("sigma/|mean|", "num"),
            ("q 0.135 % (\u22123\u03c3)", "num"),
            ("median", "num"),
            ("q 99.865 % (+3\u03c3)", "num"),
            ("min", "num"),
            ("max", "num"),
            ("spec", "num"),
        ],
        rows,
        "Per-measure statistics over the converged samples (quantiles at the normal \u00b13 sigma points)",
    )


def sampling_text(sampling: object) -> str:
    """One line for the header: "Sobol' QMC, 8 scramblings x 2,048 points" or "pseudo-random"."""
    if not isinstance(sampling, Mapping):
        return str(sampling)
    if sampling.get("method") == "sobol":
        points = sampling.get("points_per_scrambling")
        each = f" \u00d7 {points:,} points" if isinstance(points, int) else ""
        return f"Sobol' QMC, {sampling.get('scramblings', '?')} scramblings{each}"
    return "pseudo-random" if sampling.get("method") == "random" else str(sampling.get("method", "\u2013"))


def sampling_section(summary: dict) -> dict | None:
    """Standard errors of each sigma and of the joint yield (summary["sampling"]), beside plain Monte Carlo's."""
    sampling = summary.get("sampling")
    if not isinstance(sampling, Mapping) or not isinstance(sampling.get("measures"), Mapping):
        return None
    sobol = sampling.get("method") == "sobol"
    measures = summary.get("measures") or {}
    rows = []
    for name, m in sampling["measures"].items():
        if not isinstance(m, Mapping):
            continue
        unit = (measures.get(name) or {}).get("unit", "")
        u = DisplayUnit([m.get("std"), m.get("std_error"), m.get("mc_std_error")], unit)  # one prefix per row
        cells = [cell(f"sigma of {name}", "name"), num(u(m.get("std"))), num(u(m.get("std_error")))]
        cells.append(num(u(m.get("mc_std_error"))))
        if sobol:
            cells.append(num(plain(m.get("sample_ratio"), 3)))
        rows.append(row(cells))
    y = sampling.get("yield")
    if isinstance(y, Mapping) and summary.get("specs"):
        main = summary.get("yield") or {}
        if main.get("total") and main.get("passed") == main.get("total"):  # sqrt(p(1-p)/N) = 0 says nothing here
            head, bound = yield_cells(main)
            cells = [cell("joint yield", "name"), num(head), num(bound), num("\u2013")]
        else:
            cells = [cell("joint yield", "name"), num(yield_text(y.get("fraction")))]
            cells += [num(percent(y.get("std_error"), 3)), num(percent(y.get("mc_std_error"), 3))]
        if sobol:
            cells.append(num(plain(y.get("sample_ratio"), 3)))
        rows.append(row(cells))
    if not rows:
        return None
    columns: list = ["estimate", ("value", "num"), ("standard error", "num"), ("plain MC s.e., same N", "num")]
    if sobol:
        columns.append(("sample ratio", "num"))
    notes = [f"Error estimate: {sampling.get('error_estimate') or 'not given'}."]
    if sobol:
        notes.append(
            "Sample ratio: plain Monte Carlo samples needed for the same standard error, per sample of this run "
            "((plain MC s.e. / standard error)\u00b2). With few scramblings the standard error is itself uncertain "
            f"(about \u00b1{100 / math.sqrt(2 * max(1, int(sampling.get('scramblings') or 8) - 1)):.0f} %)."
        )
    notes += [str(w) for w in sampling.get("warnings") or []]
    caption = "Sampling error of the estimates (" + sampling_text(sampling) + ")"
    return {"table": table(columns, rows, caption), "notes": notes}
