"""Monte Carlo at every process x temperature x supply corner: table and spread figure."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import DisplayUnit, celsius, eng, finite, percent, yield_cells
from mcmatch.report.tables import cell, num, row, status_cell, table
from mcmatch.report.targets import corner_label, judge, spec_unit, target_of, worst_indices

#: Corner rows drawn in the corner spread figure, at most, the worst among them (the table lists every corner).
MAX_CORNER_ROWS = 120


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
    units = {m: DisplayUnit(_values(corners, m), spec_unit(summary, m)) for m in shown}
    columns: list[str | tuple[str, str]] = ["process", ("temperature", "num"), ("supply", "num")]
    for m in shown:
        columns += [(units[m].header(f"{m} mean"), "num"), (units[m].header(f"{m} sigma"), "num")]
    has_yield = bool(specs) and any("yield" in c for c in corners)
    if has_yield:
        columns += [("yield", "num"), ("95 % interval", "num"), "status"]
    show_failed = any(c.get("failed_solves") for c in corners)
    if show_failed:
        columns.append(("failed solves", "num"))
    headrooms = [(c.get("compliance") or {}).get("min_headroom") for c in corners if isinstance(c, Mapping)]
    show_headroom = any(isinstance(c.get("compliance"), Mapping) for c in corners)
    volts = DisplayUnit(headrooms, "V")
    if show_headroom:
        columns.append(("min headroom (device, samples out of saturation)", "num"))
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
            cells += [num("\u2013")] if show_headroom else []
            cells.append(cell(f"FAILS: no operating point ({c['error']})", "status status-fail"))
            rows.append(row(cells, "error"))
            continue
        for m in shown:
            stats_m = (c.get("measures") or {}).get(m, {})
            cells += [
                num(units[m](stats_m.get("mean"), with_unit=False)),
                num(units[m](stats_m.get("std"), with_unit=False)),
            ]
        if has_yield:
            y = c.get("yield") or {}
            cells += [
                *(num(text) for text in yield_cells(y)),
                status_cell(judge(y, target)),
            ]
        if show_failed:
            cells.append(num(f"{c.get('failed_solves', 0):,}"))
        if show_headroom:
            cells.append(_headroom_cell(c.get("compliance"), volts))
        note = f"\u25c0 worst: {', '.join(worst_of[i])}" if i in worst_of else ""
        cells.append(cell(note, "worst-note" if note else ""))
        rows.append(row(cells, "worst" if i in worst_of else ""))
    figs = []
    if figures:
        from mcmatch.report import figures as plots

        for m in shown[:2]:
            w = worst.get(m)
            drawn = plots.corner_rows(corners, m, w, MAX_CORNER_ROWS)
            total = sum(1 for c in corners if m in (c.get("measures") or {}))
            ax = plots.corner_spread(
                corners,
                measure=m,
                limits=specs.get(m),
                worst=w,
                scale=units[m].factor,
                unit=units[m].label,
                max_rows=MAX_CORNER_ROWS,
            )
            which = (
                f"every corner ({total})"
                if len(drawn) == total
                else f"the first {len(drawn) - (1 if w in drawn and drawn.index(w) == len(drawn) - 1 else 0)} of "
                f"{total} corners and the worst"
            )
            ax.title = f"corner spread of {m}: mean \u00b1 3 sigma at {which}" + (
                f"; worst {corner_label(corners[w])}" if w is not None else ""
            )
            figs.append(
                {
                    "svg": ax.svg(),
                    "alt": f"corner spread of {m}",
                    "cls": "fig-corners",
                    "caption": f"{m} at {which}: mean (dot) and mean \u00b1 3 sigma (bar); the worst corner is "
                    "drawn thick with a diamond; hatched: outside the spec. The table lists every corner.",
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


def _values(corners: list, measure: str) -> list:
    """Every mean and sigma of `measure` over the corners [SI], for choosing one display unit."""
    out = []
    for c in corners:
        m = (c.get("measures") or {}).get(measure) if isinstance(c, Mapping) else None
        if isinstance(m, Mapping):
            out += [m.get("mean"), m.get("std")]
    return out


def _headroom_cell(comp: object, volts: DisplayUnit) -> dict:
    """The corner's compliance block (min_headroom [V], limiting_device, samples_out_of_saturation [1]) in one cell."""
    if not isinstance(comp, Mapping):
        return num("\u2013")
    text = volts(comp.get("min_headroom"), 3)
    if comp.get("limiting_device"):
        text += f" ({comp['limiting_device']})"
    share = finite(comp.get("samples_out_of_saturation"))
    if share:
        text += f", {percent(share, 3)} out of saturation"
    h = finite(comp.get("min_headroom"))
    return cell(text, "num warn" if (h is not None and h < 0) or share else "num")
