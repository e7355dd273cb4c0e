"""Placement candidates: the unit-cell drawing, their systematic errors and yields, the best and the paired
differences to it, and what the placement cannot fix."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import DisplayUnit, finite, yield_cells, yield_text
from mcmatch.report.tables import cell, num, row, table
from mcmatch.report.targets import judge, spec_unit, target_of


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


def _points(value: object) -> str:
    """A difference of two yields in percentage points: -0.07145 -> "-7.145"."""
    v = finite(value)
    return "\u2013" if v is None else f"{v * 100:+.3f}".replace("+0.000", "0.000").replace("-0.000", "0.000")


def _paired_cells(entry: Mapping, best: str | None) -> list[dict]:
    if entry.get("name") == best:
        return [num("0 (the best)"), num("\u2013")]
    paired = entry.get("versus_best")
    if not isinstance(paired, Mapping) or finite(paired.get("difference")) is None:
        return [num("\u2013"), num("\u2013")]
    lo, hi = (paired.get("ci95") or [None, None])[:2]
    return [num(_points(paired["difference"])), num(f"{_points(lo)} \u2026 {_points(hi)}")]


def placements_table(summary: dict, key_measures: list[str]) -> dict | None:
    """One row per candidate: per key measure the systematic error, mean and sigma (one unit per measure), the joint
    yield with its interval, the paired yield difference to the best candidate and its interval, and a status."""
    placements = summary.get("placements")
    if not isinstance(placements, list) or not placements:
        return None
    best = summary.get("placement_best")
    shown = [m for m in key_measures if any(m in (p.get("measures") or {}) for p in placements)]
    units = {}
    for m in shown:
        values = [
            v
            for p in placements
            for k, v in ((p.get("measures") or {}).get(m) or {}).items()
            if k in ("systematic", "mean", "std")
        ]
        units[m] = DisplayUnit(values, spec_unit(summary, m))
    rows = []
    for p in placements:
        cells = [cell(p.get("name", "?"), "name")]
        if "error" in p:
            cells += [num("\u2013")] * (3 * len(shown) + 4)
            cells.append(cell("no operating point", "status status-fail", title=str(p["error"])))
            rows.append(row(cells))
            continue
        for m in shown:
            s = (p.get("measures") or {}).get(m, {})
            cells += [num(units[m](s.get(k), with_unit=False)) for k in ("systematic", "mean", "std")]
        y = p.get("yield")
        if isinstance(y, Mapping):
            cells += [num(text) for text in yield_cells(y)]
        else:
            cells += [num(yield_text(y)), num("\u2013")]
        cells += _paired_cells(p, best)
        is_best = p.get("name") == best
        cells.append(cell("\u2605 best" if is_best else "", "status status-pass" if is_best else "status"))
        rows.append(row(cells, "best" if is_best else ""))
    columns = [
        "placement",
        *[
            c
            for m in shown
            for c in (
                (units[m].header(f"{m} systematic"), "num"),
                (units[m].header(f"{m} mean"), "num"),
                (units[m].header(f"{m} sigma"), "num"),
            )
        ],
        ("yield", "num"),
        ("95 % interval", "num"),
        ("yield minus the best's [% points]", "num"),
        ("95 % interval (paired)", "num"),
        "status",
    ]
    caption = (
        "Placement candidates (gradient and placement terms included). Systematic: the nominal value with the "
        "candidate's gradients minus the nominal without them. Every candidate uses the same device draws, so the "
        "difference to the best is paired sample by sample (Newcombe's paired score interval)."
    )
    return table(columns, rows, caption)


def _includes_zero(paired: object) -> bool:
    """Whether a paired difference's interval includes zero: the candidate cannot be told from the best."""
    if not isinstance(paired, Mapping):
        return False
    lo, hi = (finite(v) for v in (paired.get("ci95") or [None, None])[:2])
    return lo is not None and hi is not None and lo <= 0.0 <= hi


def placement_note(summary: dict, key_measures: list[str]) -> list[str]:
    """Sentences under the placement table: the best candidate, the candidates it cannot be told from, and, when no
    candidate reaches the target, whether the systematic error or the random spread is what limits."""
    placements = [p for p in summary.get("placements") or [] if isinstance(p, Mapping) and "error" not in p]
    best_name = summary.get("placement_best")
    best = next((p for p in placements if p.get("name") == best_name), None)
    if best is None:
        return ["No candidate could be solved, so none is named best."] if summary.get("placements") else []
    notes = [f"Best: {best_name} (highest joint yield; ties go to the smallest systematic error)."]
    tied = [p["name"] for p in placements if p is not best and _includes_zero(p.get("versus_best"))]
    if tied:
        notes.append(
            f"{', '.join(tied)} cannot be told from the best on these samples: the paired interval of the "
            "difference includes zero."
        )
    target = target_of(summary)
    y = best.get("yield")
    if not isinstance(y, Mapping) or judge(y, target["yield"]) != "fail":
        return notes
    goal = f"the {yield_text(target['yield'])} target" if target["given"] else f"a {yield_text(target['yield'])} yield"
    text = f"No arrangement meets {goal}: the best reaches {yield_text(y.get('fraction'))}."
    spec = next((m for m in key_measures if m in (summary.get("specs") or {})), None)
    s = (best.get("measures") or {}).get(spec or "", {})
    systematic, sigma = finite(s.get("systematic")), finite(s.get("std"))
    if spec and systematic is not None and sigma:
        unit = DisplayUnit([systematic, sigma], spec_unit(summary, spec))
        if abs(systematic) < sigma:
            text += (
                f" Its systematic {spec} ({unit(systematic)}) is below the random sigma ({unit(sigma)}): "
                "the spread limits the yield, so more gate area, not another placement, is what helps."
            )
        else:
            text += (
                f" Its systematic {spec} ({unit(systematic)}) is at least the random sigma ({unit(sigma)}): "
                "a placement that cancels the gradient better, or a smaller array, helps before more area does."
            )
    notes.append(text)
    return notes
