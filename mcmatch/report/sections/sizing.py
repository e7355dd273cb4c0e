"""Sizing for a die-yield target (summary["sizing"]): the W and L to draw, its confirmation, the front, the picture."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import condition_text, eng, finite, interval_text, percent, plain, yield_text
from mcmatch.report.tables import cell, num, row, table

UM2 = "\u00b5m\u00b2"


def area_text(area: object, unit: bool = True) -> str:
    """A total gate area [m^2] in um^2 with thousands separated: 1.4383e-9 -> "1,438 um^2"."""
    v = finite(area)
    if v is None:
        return "\u2013"
    um2 = v * 1e12
    return (f"{um2:,.0f}" if abs(um2) >= 1000 else f"{um2:.4g}") + (f" {UM2}" if unit else "")


def linear_yield_text(value: object) -> str:
    """The linearised die yield; a yield of one means no failing draw, shown as a bound, never as "100 %"."""
    from mcmatch.studies.sizing import LINEAR_DRAWS

    v = finite(value)
    if v is not None and v >= 1.0:
        return f"> {yield_text(1.0 - 1.0 / LINEAR_DRAWS)}"
    return yield_text(v)


def _groups_text(design: Mapping) -> str:
    return "; ".join(
        f"{g}: W = {eng(v.get('w'), 'm')}, L = {eng(v.get('l'), 'm')}" for g, v in (design.get("groups") or {}).items()
    )


def _confirmation_text(c: Mapping) -> str:
    if "error" in c:
        return f"Monte Carlo failed: {c['error']}"
    return (
        f"{yield_text(c.get('yield'))} ({interval_text(c.get('ci95'))}) from {c.get('samples', 0):,} samples at "
        f"{condition_text(c.get('corner', '?'))}"
        + (f"; {c['failed_solves']:,} failed solves" if c.get("failed_solves") else "")
    )


def demonstration_text(c: Mapping, target: object) -> str:
    """Whether the confirming Monte Carlo demonstrates the target yield: its interval's lower end above the target."""
    lo, goal = finite((c.get("ci95") or [None])[0]), finite(target)
    if lo is None or goal is None:
        return ""
    if lo >= goal:
        return f"the interval's lower end {yield_text(lo)} is above the target {yield_text(goal)}: target demonstrated"
    return (
        f"the interval reaches below the target {yield_text(goal)}: these samples agree with the linearised yield "
        "but do not demonstrate the target at this confidence (more samples would)"
    )


def sizing_scope(summary: dict) -> str | None:
    """One line on the sizing answer for the verdict's scope, or None without a sizing run."""
    sz = summary.get("sizing")
    if not isinstance(sz, Mapping):
        return None
    designs = sz.get("designs") or []
    chosen = sz.get("chosen") if isinstance(sz.get("chosen"), Mapping) else None
    if chosen is None or not 0 <= int(chosen.get("index", -1)) < len(designs):
        return f"Sizing: no design meets the target: {sz.get('infeasible') or 'no reason recorded'}."
    d = designs[chosen["index"]]
    conf = chosen.get("confirmed") if isinstance(chosen.get("confirmed"), Mapping) else {}
    return (
        f"Sizing: draw {_groups_text(d)} (total gate area {area_text(d.get('area'))}); die yield checked "
        f"by Monte Carlo {_confirmation_text(conf)}; {demonstration_text(conf, (sz.get('target') or {}).get('yield'))}."
        " The verdict above is for the design as drawn in the config."
    )


def _design_cells(d: Mapping, groups: list[str], limit: float) -> list[dict]:
    cells = []
    for g in groups:
        v = (d.get("groups") or {}).get(g) or {}
        cells += [num(eng(v.get("w"), "m")), num(eng(v.get("l"), "m"))]
    if "error" in d:
        return [*cells, *[num("\u2013")] * 6, cell(f"FAILS: {d['error']}", "status status-fail")]
    head = finite(d.get("min_headroom"))
    return [
        *cells,
        num(area_text(d.get("area"), unit=False)),
        num(eng(d.get("vdsat"), "V")),
        num(plain(d.get("gm_over_id"), 3)),
        num(plain(d.get("margin_sigma"), 3)),
        num(f"{linear_yield_text(d.get('linear_yield'))}, {condition_text(d.get('linear_yield_corner', '?'))}"),
        cell(
            f"{eng(head, 'V')}, {condition_text(d.get('headroom_corner', '?'))} ({d.get('limiting_device', '?')})",
            "num" if head is not None and head >= limit else "num status-fail",
        ),
    ]


def _status(d: Mapping) -> dict:
    meets = d.get("meets") or {}
    short = [k.replace("_", " ") for k in ("yield", "headroom", "max_area") if meets.get(k) is False]
    if not short:
        return cell("\u2713 meets", "status status-pass")
    return cell("\u2717 misses " + ", ".join(short), "status status-fail")


def sizing_section(summary: dict, figures: bool) -> dict | None:
    """Tables, figure and texts of the sizing section, or None without summary["sizing"]."""
    sz = summary.get("sizing")
    if not isinstance(sz, Mapping):
        return None
    designs = [d for d in sz.get("designs") or [] if isinstance(d, Mapping)]
    groups = list(sz.get("groups") or {})
    limit = float(sz.get("min_headroom") or 0.0)
    chosen = sz.get("chosen") if isinstance(sz.get("chosen"), Mapping) else None
    pick = chosen.get("index") if chosen else None
    present = sz.get("present") if isinstance(sz.get("present"), Mapping) else None
    columns: list[str | tuple[str, str]] = ["design"]
    for g in groups:
        columns += [(f"{g} W", "num"), (f"{g} L", "num")]
    columns += [
        (f"total gate area [{UM2}]", "num"),
        ("Vdsat", "num"),
        ("gm/Id [1/V]", "num"),
        ("worst margin [sigma]", "num"),
        ("linear die yield, worst condition", "num"),
        ("smallest headroom, condition (device)", "num"),
        "status",
    ]
    rows = []
    for i in sz.get("pareto") or []:
        if 0 <= i < len(designs):
            name = f"#{i}" + (" chosen" if i == pick else "")
            rows.append(
                row(
                    [cell(name, "name"), *_design_cells(designs[i], groups, limit), _status(designs[i])],
                    "worst" if i == pick else "",
                )
            )
    if present:
        rows.append(row([cell("as drawn", "name"), *_design_cells(present, groups, limit), _status(present)]))
    front = table(columns, rows, "The Pareto front (area, margin, headroom), and the design as drawn", "sizing")
    chosen_rows, attempts = [], []
    if chosen is not None and pick is not None and 0 <= pick < len(designs):
        d = designs[pick]
        for g, v in (d.get("groups") or {}).items():
            members = ", ".join((sz.get("groups") or {}).get(g) or [])
            chosen_rows.append(
                row(
                    [
                        cell(g, "name"),
                        cell(members),
                        num(eng(v.get("w"), "m")),
                        num(eng(v.get("l"), "m")),
                        num(plain(v.get("aspect"), 3)),
                    ]
                )
            )
    for a in sz.get("attempts") or []:
        if isinstance(a, Mapping):
            verdict = "consistent with the linear model" if a.get("consistent") else "contradicts the linear model"
            attempts.append(f"design #{a.get('index')}: {_confirmation_text(a)}; {verdict}")
    figure = None
    if figures and designs:
        figure = _figure(sz, designs, pick, present)
    d = designs[pick] if pick is not None and 0 <= pick < len(designs) else None
    conf = (chosen or {}).get("confirmed") or {}
    return {
        "answer": sizing_scope(summary),
        "feasible": d is not None,
        "answer_cls": _answer_class(d is not None, conf, (sz.get("target") or {}).get("yield")),
        "infeasible": sz.get("infeasible"),
        "chosen": table(
            ["group", "devices", ("unit W", "num"), ("unit L", "num"), ("W/L", "num")],
            chosen_rows,
            "The W and L to draw (each device keeps its multiplier m)",
            "compact",
        )
        if chosen_rows
        else None,
        "confirmation": _confirmation_text(conf) if conf else None,
        "confirmations": (chosen or {}).get("confirmations"),
        "attempts": attempts,
        "front": front,
        "figure": figure,
        "method": sz.get("method", ""),
        "target": f"{yield_text((sz.get('target') or {}).get('yield'))} at "
        f"{percent((sz.get('target') or {}).get('confidence'), 3)} confidence",
        "min_headroom": eng(limit, "V"),
        "max_area": area_text(sz.get("max_area")) if sz.get("max_area") is not None else "none",
        "conditions": _conditions_text(sz.get("conditions") or []),
        "designs": len(designs),
        "solves": sz.get("solves"),
    }


def _conditions_text(conditions: list) -> str:
    """Where the headroom limit holds: "tt/27 degC only" or "each of the 16 conditions"."""
    if len(conditions) == 1:
        return f"{condition_text(conditions[0])} only"
    return f"each of the {len(conditions)} conditions"


def _answer_class(feasible: bool, conf: Mapping, target: object) -> str:
    """Green when the confirmation demonstrates the target, amber when it only agrees with the linear model."""
    if not feasible:
        return "status-fail"
    lo, goal = finite((conf.get("ci95") or [None])[0]), finite(target)
    return "status-pass" if lo is not None and goal is not None and lo >= goal else "status-marginal"


def _figure(sz: Mapping, designs: list, pick: int | None, present: Mapping | None) -> dict:
    from mcmatch.report.figure_sizing import sizing_tradeoff

    d = designs[pick] if pick is not None and 0 <= pick < len(designs) else None
    if d is not None:
        title = (
            f"sizing trade-off: chosen {area_text(d.get('area'))}, margin {plain(d.get('margin_sigma'), 3)} "
            f"sigma, headroom {eng(d.get('min_headroom'), 'V')} ({len(designs)} designs)"
        )
    else:
        title = f"sizing trade-off: no design meets the target ({len(designs)} designs)"
    if present and "error" not in present:
        title += f"; as drawn {area_text(present.get('area'))}, margin {plain(present.get('margin_sigma'), 3)} sigma"
    heading = "sizing trade-off: " + (
        f"chosen {area_text(d.get('area'))}" if d is not None else "no design meets the target"
    )
    ax = sizing_tradeoff(sz, title=title, desc=title, heading=heading)
    return {
        "svg": ax.svg(),
        "alt": title,
        "cls": "fig-wide fig-sizing",
        "caption": "Every evaluated design: total gate area against its worst spec margin over the conditions (left) "
        "and its smallest headroom Vds \u2212 Vdsat (right, the dashed red line is min_headroom). Colour: headroom; "
        "a cross misses the target or a limit; the dashed line joins the Pareto front; the star is the chosen design, "
        "the diamond the design as drawn. Margins and yields are from the linearised mismatch model; the chosen "
        "design is confirmed by Monte Carlo.",
    }
