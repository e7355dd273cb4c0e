"""Monte Carlo at every process x temperature x supply corner: table and spread figure."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import celsius, display_scale, eng, interval_text, yield_text
from mcmatch.report.tables import cell, num, row, status_cell, table
from mcmatch.report.targets import corner_label, judge, spec_unit, target_of, worst_indices

#: Corner rows drawn in the corner spread figure, at most (the table always lists every corner).
MAX_CORNER_ROWS = 60


def corners_section(summary: dict, key_measures: list[str], figures: bool) -> dict | None:
    corners = summary.get("corners")
    if not isinstance(corners, list) or not corners:
        return None
    target = float(target_of(summary)["yield"])
    specs = summary.get("specs") or {}
    worst = worst_indices(summary)
    worst_of: dict[int, list[str]] = {}
    for name, i in worst.items():
        worst_of.setdefault(i, []).append(name)
    shown = [m for m in key_measures if any(m in (c.get("measures") or {}) for c in corners)]
    columns: list[str | tuple[str, str]] = ["process", ("temperature", "num"), ("supply", "num")]
    for m in shown:
        columns += [(f"{m} mean", "num"), (f"{m} sigma", "num")]
    has_yield = bool(specs) and any("yield" in c for c in corners)
    if has_yield:
        columns += [("yield", "num"), ("95 % interval", "num"), "status"]
    show_failed = any(c.get("failed_solves") for c in corners)
    if show_failed:
        columns.append(("failed solves", "num"))
    columns.append("note")
    rows = []
    for i, c in enumerate(corners):
        cells = [
            cell(c.get("process", "?"), "name"),
            num(celsius(c.get("temperature"))),
            num(eng(c.get("supply"), "V")),
        ]
        if "error" in c:
            cells += [cell("", "")] * (2 * len(shown) + (3 if has_yield else 0))
            cells += [num("\u2013")] if show_failed else []
            cells.append(cell(f"FAILS: no operating point ({c['error']})", "status status-fail"))
            rows.append(row(cells, "error"))
            continue
        for m in shown:
            stats_m = (c.get("measures") or {}).get(m, {})
            unit = spec_unit(summary, m)
            cells += [num(eng(stats_m.get("mean"), unit)), num(eng(stats_m.get("std"), unit))]
        if has_yield:
            y = c.get("yield") or {}
            cells += [
                num(yield_text(y.get("fraction"))),
                num(interval_text(y.get("ci95"))),
                status_cell(judge(y, target)),
            ]
        if show_failed:
            cells.append(num(f"{c.get('failed_solves', 0):,}"))
        note = f"\u25c0 worst: {', '.join(worst_of[i])}" if i in worst_of else ""
        cells.append(cell(note, "worst-note" if note else ""))
        rows.append(row(cells, "worst" if i in worst_of else ""))
    figs = []
    if figures:
        from mcmatch.report import figures as plots

        for m in shown[:2]:
            unit = spec_unit(summary, m)
            values = [(c.get("measures") or {}).get(m, {}).get("mean") for c in corners if "error" not in c]
            scale, label = display_scale(values, unit)
            ax = plots.corner_spread(
                corners, measure=m, limits=specs.get(m), worst=worst.get(m), scale=scale, unit=label
            )
            w = worst.get(m)
            ax.title = f"corner spread of {m}: mean \u00b1 3 sigma at {len(corners)} corners" + (
                f"; worst {corner_label(corners[w])}" if w is not None else ""
            )
            figs.append(
                {
                    "svg": ax.svg(),
                    "alt": f"corner spread of {m}",
                    "cls": "fig-corners",
                    "caption": f"{m} at every corner: mean (dot) and mean \u00b1 3 sigma (bar); the worst corner is "
                    "drawn thick with a diamond; hatched: outside the spec.",
                }
            )
    samples = {c.get("samples") for c in corners if c.get("samples")}
    return {
        "table": table(columns, rows, "Process \u00d7 temperature \u00d7 supply corners", "corners"),
        "figures": figs,
        "samples": ", ".join(f"{s:,}" for s in sorted(samples)),
        "criteria": sorted(
            {
                str(w.get("criterion"))
                for w in (summary.get("corners_worst") or {}).values()
                if isinstance(w, Mapping) and w.get("criterion")
            }
        ),
    }
