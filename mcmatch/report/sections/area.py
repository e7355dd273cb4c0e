"""Area versus accuracy: sigma against gate area, the fit, and the minimum area per spec."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import (
    DisplayUnit,
    display_scale,
    eng,
    finite,
    fixed,
    interval_text,
    plain,
    yield_cells,
    yield_text,
)
from mcmatch.report.tables import cell, num, row, table
from mcmatch.report.targets import MAX_KEY_MEASURES, spec_unit


def area_section(summary: dict, key_measures: list[str], figures: bool) -> dict | None:
    area = summary.get("area")
    if not isinstance(area, Mapping) or not area.get("points"):
        return None
    fits = area.get("fit") or {}
    minimum = area.get("minimum") or {}
    shown = [m for m in key_measures if m in fits] or list(fits)[:MAX_KEY_MEASURES]
    figs = []
    if figures:
        from mcmatch.report import figures as plots

        for m in shown:
            if not isinstance(fits.get(m), Mapping) or fits[m].get("k") is None:
                continue
            unit = spec_unit(summary, m)
            values = [p.get("measures", {}).get(m, {}).get("std") for p in area["points"] if "measures" in p]
            scale, label = display_scale(values, unit)
            ax = plots.area_sigma(area, measure=m, scale=scale, unit=label, title=m, present=area.get("base_area"))
            fit = fits[m]
            low = (minimum.get(m) or {}) if isinstance(minimum.get(m), Mapping) else {}
            ax.title = f"sigma of {m} against gate area: k = {_k_text(fit.get('k'), unit)}" + (
                f"; minimum area {fixed(low.get('area'), 1e12, chr(181) + 'm' + chr(178))}" if low.get("area") else ""
            )
            figs.append(
                {
                    "svg": ax.svg(),
                    "alt": f"sigma of {m} against gate area",
                    "cls": "fig-area",
                    "caption": f"{m}: sigma against the summed gate area of {', '.join(area.get('devices', []))} "
                    f"(mode '{area.get('mode', '?')}'). Fit sigma = \u221a(k\u00b2/area + floor\u00b2), k = "
                    f"{_k_text(fit.get('k'), unit)}, floor = {eng(fit.get('floor'), unit)}"
                    + (
                        f"; free log-log slope {plain(fit.get('slope'), 3)} (Pelgrom: \u22120.5)"
                        if fit.get("slope") is not None
                        else ""
                    )
                    + ".",
                }
            )
    units = {
        m: DisplayUnit([(p.get("measures") or {}).get(m, {}).get("std") for p in area["points"]], spec_unit(summary, m))
        for m in shown
    }
    point_rows = []
    for p in area["points"]:
        cells = [num(plain(p.get("scale"), 4)), num(fixed(p.get("area"), 1e12, "\u00b5m\u00b2"))]
        for m in shown:
            s = (p.get("measures") or {}).get(m, {})
            cells.append(num(units[m](s.get("std"), with_unit=False)))
        if p.get("yield") is not None and p.get("samples"):
            n = int(p["samples"])
            block = {"fraction": p["yield"], "ci95": p.get("yield_ci95"), "total": n, "passed": round(p["yield"] * n)}
            cells += [num(text) for text in yield_cells(block)]
        else:
            cells += [num(yield_text(p.get("yield"))), num("\u2013")]
        cells.append(cell(f"FAILS: {p['error']}", "status status-fail") if "error" in p else cell(""))
        point_rows.append(row(cells))
    points = table(
        [
            ("area scale", "num"),
            ("gate area", "num"),
            *[(units[m].header(f"{m} sigma"), "num") for m in shown],
            ("joint yield", "num"),
            ("95 % interval", "num"),
            "note",
        ],
        point_rows,
        "Swept gate areas",
        "compact",
    )
    min_rows = []
    for m, e in minimum.items():
        unit = spec_unit(summary, m)
        if not isinstance(e, Mapping):
            continue
        conf = e.get("confirmed") if isinstance(e.get("confirmed"), Mapping) else {}
        if e.get("area") is None:
            min_rows.append(
                row(
                    [
                        cell(m, "name"),
                        num("\u2013"),
                        num("\u2013"),
                        num("\u2013"),
                        num("\u2013"),
                        cell(f"FAILS: {e.get('reason', 'no area meets the spec')}", "status status-fail"),
                    ]
                )
            )
            continue
        confirm = ""
        if conf and "error" not in conf:
            confirm = (
                f"confirmed by Monte Carlo at scale {plain(conf.get('scale'), 3)}: sigma {eng(conf.get('std'), unit)}, "
                f"yield {yield_text(conf.get('yield'))} ({interval_text(conf.get('ci95'))})"
            )
        min_rows.append(
            row(
                [
                    cell(m, "name"),
                    num(plain(e.get("scale"), 3)),
                    num(fixed(e.get("area"), 1e12, "\u00b5m\u00b2")),
                    num(eng(e.get("std"), unit)),
                    num(yield_text(e.get("yield"))),
                    cell("; ".join(x for x in (e.get("criterion"), e.get("note"), confirm) if x)),
                ]
            )
        )
    minimum_table = (
        table(
            [
                "measure",
                ("area scale", "num"),
                ("gate area", "num"),
                ("predicted sigma", "num"),
                ("predicted yield", "num"),
                "criterion",
            ],
            min_rows,
            "Minimum gate area meeting each spec (normal model on the fitted sigma)",
        )
        if min_rows
        else None
    )
    halving = area.get("halving_cost") or {}
    halving_text = [
        f"{m}: \u00d7{plain(v, 3)} area" if v is not None else f"{m}: not reachable (floor)"
        for m, v in halving.items()
        if m in shown
    ]
    flags = [f"{m}: {f['flag']}" for m, f in fits.items() if isinstance(f, Mapping) and f.get("flag")]
    return {
        "figures": figs,
        "points": points,
        "minimum": minimum_table,
        "halving": halving_text,
        "flags": flags,
        "base_area": fixed(area.get("base_area"), 1e12, "\u00b5m\u00b2"),
        "samples": area.get("samples"),
    }


def _k_text(k: object, unit: str) -> str:
    """k of sigma = k / sqrt(area) [unit * m] shown as [unit * µm]."""
    v = finite(k)
    if v is None:
        return "\u2013"
    return f"{eng(v * 1e6, unit)}\u00b7\u00b5m"
