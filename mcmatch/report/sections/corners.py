"""Monte Carlo at every process x temperature x supply corner: table and spread figure."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import DisplayUnit, celsius, condition_text, eng, finite, percent, yield_cells
from mcmatch.report.tables import cell, num, row, status_cell, table
from mcmatch.report.targets import corner_label, judge, spec_unit, target_of, worst_indices

#: Corner rows drawn in the corner spread figure, at most, the worst among them (the table lists every corner).
MAX_CORNER_ROWS = 120
#: Measures given mean and sigma columns in the full corner table, at most (the worst-corner table names them all).
MAX_CORNER_MEASURES = 3
#: Measures named in a row's "worst" note, at most.
MAX_WORST_NAMES = 3


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
    in_table = _table_measures(summary, shown)
    columns: list[str | tuple[str, str]] = ["process", ("temperature", "num"), ("supply", "num")]
    for m in in_table:
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
            cells += [cell("", "")] * (2 * len(in_table) + (3 if has_yield else 0))
            cells += [num("\u2013")] if show_failed else []
            cells += [num("\u2013")] if show_headroom else []
            cells.append(cell(f"FAILS: no operating point ({c['error']})", "status status-fail"))
            rows.append(row(cells, "error"))
            continue
        for m in in_table:
            stats_m = (c.get("measures") or {}).get(m, {})
            mark = " worst-cell" if worst.get(m) == i else ""  # the marker sits on the measure it belongs to
            title = f"worst corner of {m}" if mark else ""
            cells += [
                cell(units[m](stats_m.get("mean"), with_unit=False), "num" + mark, title),
                cell(units[m](stats_m.get("std"), with_unit=False), "num" + mark, title),
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
        names = worst_of.get(i, [])
        note = f"\u25c0 worst: {', '.join(names)}" if names else ""
        if len(names) > MAX_WORST_NAMES:  # the worst-corner table above names them
            note = f"\u25c0 worst of {len(names)} measures"
        cells.append(cell(note, "worst-note" if note else ""))
        rows.append(row(cells))
    figs = []
    if figures:
        from mcmatch.report import figures as plots

        for m in in_table[:2]:
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
    table_note = (
        f"Mean and sigma columns for {', '.join(in_table)}: the {len(in_table)} of {len(shown)} measures with the "
        "lowest spec yield at their worst corner. The worst-corner table above names every measure's worst corner; "
        "summary.json holds every corner's statistics."
        if len(in_table) < len(shown)
        else ""
    )
    return {
        "table_note": table_note,
        "table": table(columns, rows, "Process \u00d7 temperature \u00d7 supply corners", "corners"),
        "worst": worst_table(summary, shown, units),
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


def _table_measures(summary: dict, shown: list[str]) -> list[str]:
    """The measures given columns in the full corner table: all, or the MAX_CORNER_MEASURES with the lowest spec
    yield at their worst corner (then the largest spread), kept in the summary's order."""
    if len(shown) <= MAX_CORNER_MEASURES:
        return shown
    worst = summary.get("corners_worst") or {}

    def rank(m: str) -> float:
        w = worst.get(m) if isinstance(worst.get(m), Mapping) else {}
        y = finite(w.get("spec_yield"))
        return y if y is not None else 2.0

    chosen = set(sorted(shown, key=rank)[:MAX_CORNER_MEASURES])
    return [m for m in shown if m in chosen]


def _criterion(w: Mapping) -> str:
    """The rule that picked the worst corner, in a few words."""
    if finite(w.get("margin_sigma")) is not None:
        side = {"min": "lower", "max": "upper"}.get(str(w.get("limit")), "")
        return f"smallest spec margin ({side} limit)".replace(" ()", "")
    return "largest |mean \u2212 nominal| + 3 sigma"


def worst_table(summary: dict, shown: list[str], units: Mapping[str, DisplayUnit]) -> dict | None:
    """One row per measure: its worst corner (ties named as "any supply" and counted), the value that made it the
    worst (the spec margin in sigma, or the spread in the measure's unit), mean and sigma there, and the spec yield."""
    worst = summary.get("corners_worst") or {}
    order = [*shown, *[m for m in summary.get("measures") or {} if m not in shown]]
    names = [m for m in order if isinstance(worst.get(m), Mapping)]
    if not names:
        return None
    corners = summary.get("corners") or []
    units = {**{m: DisplayUnit(_values(corners, m), spec_unit(summary, m)) for m in names}, **units}
    at = worst_indices(summary)
    rows = []
    for m in names:
        w = worst[m]
        tied = [t for t in w.get("tied") or [] if isinstance(t, Mapping)]
        label = condition_text(w.get("label") or corner_label(w))
        if len(tied) > 1:
            alike = "within sampling error" if finite(w.get("margin_sigma")) is not None else "with the same value"
            label += f" ({len(tied)} corners {alike})"
        stats_m = ((corners[at[m]].get("measures") or {}).get(m) or {}) if m in at else {}
        margin = finite(w.get("margin_sigma"))
        if margin is not None:
            error = finite(w.get("margin_error"))
            value = f"{margin:.3g} sigma" + (f" \u00b1 {error:.2g}" if error is not None else "")
        else:
            value = units[m](w.get("value")) if m in units else eng(w.get("value"))
        spec_yield = finite(w.get("spec_yield"))
        rows.append(
            row(
                [
                    cell(m, "name"),
                    cell(label),
                    num(value),
                    num(units[m](stats_m.get("mean")) if m in units else "\u2013"),
                    num(units[m](stats_m.get("std")) if m in units else "\u2013"),
                    num(percent(spec_yield, 4) if spec_yield is not None else "\u2013"),
                    cell(_criterion(w)),
                ]
            )
        )
    columns = [
        "measure",
        "worst corner",
        ("value", "num"),
        ("mean there", "num"),
        ("sigma there", "num"),
        ("spec yield there", "num"),
        "criterion",
    ]
    return table(columns, rows, "Worst corner per measure")


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
