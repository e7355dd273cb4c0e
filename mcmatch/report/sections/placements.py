"""Placement candidates: the unit-cell drawing and their yields."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import DisplayUnit, yield_cells, yield_text
from mcmatch.report.tables import cell, num, row, table
from mcmatch.report.targets import spec_unit


def placement_drawing(summary: dict) -> dict | None:
    """The unit-cell drawing of every placement candidate, as an embedded SVG (None without placements)."""
    placements = summary.get("placements")
    if not isinstance(placements, list) or not placements:
        return None
    from mcmatch.report.placement_grid import placement_drawing_svg

    try:
        svg = placement_drawing_svg(placements)
    except (KeyError, TypeError, ValueError):  # a summary from another version: the table still stands
        return None
    return {"svg": svg, "alt": "unit-cell drawing of every placement candidate", "cls": "fig-wide"}


def placements_table(summary: dict, key_measures: list[str]) -> dict | None:
    placements = summary.get("placements")
    if not isinstance(placements, list) or not placements:
        return None
    shown = [m for m in key_measures if any(m in (p.get("measures") or {}) for p in placements)]
    units = {}
    for m in shown:
        values = [v for p in placements for v in ((p.get("measures") or {}).get(m) or {}).values()]
        units[m] = DisplayUnit(values, spec_unit(summary, m))
    rows = []
    for p in placements:
        cells = [cell(p.get("name", "?"), "name")]
        for m in shown:
            s = (p.get("measures") or {}).get(m, {})
            cells += [num(units[m](s.get("mean"), with_unit=False)), num(units[m](s.get("std"), with_unit=False))]
        y = p.get("yield")
        if isinstance(y, Mapping):
            cells += [num(text) for text in yield_cells(y)]
        else:
            cells += [num(yield_text(y)), num("\u2013")]
        rows.append(row(cells))
    columns = [
        "placement",
        *[c for m in shown for c in ((units[m].header(f"{m} mean"), "num"), (units[m].header(f"{m} sigma"), "num"))],
        ("yield", "num"),
        ("95 % interval", "num"),
    ]
    return table(columns, rows, "Placement candidates (gradient and placement terms included)")
