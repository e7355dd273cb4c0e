"""The sizing trade-off as inline SVG: every evaluated design's gate area against its spec margin and its headroom.

Two panels share the log area axis: the worst spec margin [sigma] over the conditions (points coloured by headroom),
and the smallest headroom Vds - Vdsat [V] over the conditions with the min_headroom limit. The Pareto front is a
dashed line, the chosen design a star and the design as drawn a diamond. Shapes carry the meaning as well as the
colours, so the figure reads printed in black and white. Pure numpy and :mod:`mcmatch.report.svg`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from mcmatch.report.svg import Canvas, nice_ticks, sparse_log_ticks

#: The margin panel shows margins down to this [sigma]; a design further below is drawn on the lower edge.
MARGIN_FLOOR = -3.0
#: Headroom classes (css class, legend text) by headroom over min_headroom: out of saturation, short, met, ample.
HEADROOM_CLASSES = (
    ("head-out", "out of saturation"),
    ("head-low", "below min_headroom"),
    ("head-ok", "headroom met"),
    ("head-high", "over 2 \u00d7 min_headroom"),
)


def headroom_class(headroom: float, limit: float) -> str:
    """The css class of a design's point by its smallest headroom [V] against min_headroom [V]."""
    if not math.isfinite(headroom) or headroom < 0:
        return HEADROOM_CLASSES[0][0]
    if headroom < limit:
        return HEADROOM_CLASSES[1][0]
    return HEADROOM_CLASSES[3][0] if limit > 0 and headroom >= 2 * limit else HEADROOM_CLASSES[2][0]


def _points(designs: list) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Area [µm²], margin [sigma], headroom [V] and feasibility of every design that was solved."""
    rows = [d for d in designs if isinstance(d, Mapping) and "error" not in d]
    get = lambda key, f=1.0: np.array([float(d.get(key) if d.get(key) is not None else np.nan) * f for d in rows])  # noqa: E731
    return (
        get("area", 1e12),
        get("margin_sigma"),
        get("min_headroom"),
        np.array([bool(d.get("feasible")) for d in rows]),
    )


def sizing_tradeoff(sizing: Mapping, title: str = "", desc: str = "", heading: str = "") -> Canvas:
    """Both panels of summary["sizing"] (designs, pareto, chosen, present, min_headroom [V]) on one canvas; `title`
    and `desc` are the accessible name and description, `heading` the visible line above the panels."""
    designs = [d for d in sizing.get("designs") or [] if isinstance(d, Mapping)]
    solved = [i for i, d in enumerate(designs) if "error" not in d]
    index = {i: k for k, i in enumerate(solved)}
    area, margin, head, feasible = _points(designs)
    present = sizing.get("present") if isinstance(sizing.get("present"), Mapping) else {}
    present_ok = bool(present) and "error" not in present and present.get("area") is not None
    limit = float(sizing.get("min_headroom") or 0.0)
    ax = Canvas(820, 310, (64, 182, 44, 46 if heading else 26))
    ax.title, ax.desc = title or "sizing trade-off", desc
    if heading:
        ax.heading(heading)
    xs = [*area[np.isfinite(area) & (area > 0)], *([present["area"] * 1e12] if present_ok else [])]
    if not xs:
        ax.text(ax.width / 2, ax.height / 2, "no design could be solved", "label", "middle")
        return ax
    x_lo, x_hi = min(xs) / 1.5, max(xs) * 1.5
    gap, mid = 56.0, (ax.x0 + ax.x1) / 2
    panels = ((ax.x0, mid - gap / 2), (mid + gap / 2, ax.x1))
    chosen = (sizing.get("chosen") or {}).get("index") if isinstance(sizing.get("chosen"), Mapping) else None
    front = [index[i] for i in sizing.get("pareto") or [] if i in index]
    front.sort(key=lambda k: area[k])
    pm = (present.get("margin_sigma"), present.get("min_headroom")) if present_ok else (None, None)
    for panel, (values, extra, label) in enumerate(
        ((margin, pm[0], "worst spec margin [sigma]"), (head * 1e3, _milli(pm[1]), "smallest headroom [mV]"))
    ):
        ax.x0, ax.x1 = panels[panel]
        ax.set_x(x_lo, x_hi, log=True)
        shown = [v for v in (*values[np.isfinite(values)], extra) if v is not None and math.isfinite(v)]
        if panel == 0:
            shown = [max(v, MARGIN_FLOOR) for v in shown]
        if panel == 1 and limit > 0:
            shown.append(limit * 1e3)
        y_lo, y_hi = (min(shown), max(shown)) if shown else (0.0, 1.0)
        pad = 0.08 * (y_hi - y_lo or 1.0)
        ax.set_y(y_lo - pad, y_hi + pad)
        ticks = sparse_log_ticks(x_lo, x_hi, 5)
        ax.x_axis(ticks, [f"{t:,.6g}" for t in ticks], "total gate area [\u00b5m\u00b2]")
        ax.y_axis(nice_ticks(y_lo - pad, y_hi + pad, 5), label="")
        ax.text(ax.x0, ax.y0 - 6, label, "label")
        if panel == 1 and limit > 0:
            ax.hline(limit * 1e3, "limit")
        clip = MARGIN_FLOOR if panel == 0 else -math.inf
        if front:
            ax.line(area[front], np.maximum(values[front], clip), "fit dashed")
        for k in range(len(area)):
            if not (math.isfinite(area[k]) and math.isfinite(values[k])):
                continue
            shape = "o" if feasible[k] else "X"
            if values[k] < clip:
                shape = "v"  # below the panel's view: drawn on its edge
            ax.marker(float(area[k]), float(max(values[k], clip)), shape, 9, headroom_class(head[k], limit))
        if extra is not None and math.isfinite(extra):
            ax.marker(present["area"] * 1e12, max(extra, clip), "D", 13, "nominal-mark")
        if chosen in index:
            k = index[chosen]
            ax.marker(float(area[k]), float(max(values[k], clip)), "*", 18, "minimum")
    ax.x0, ax.x1 = panels[0][0], panels[1][1]
    items = [("o", cls, text) for cls, text in HEADROOM_CLASSES]
    items += [
        ("X", "head-ok", "misses target or limit"),
        ("v", "head-ok", f"margin below {MARGIN_FLOOR:g} sigma"),
        ("line", "fit dashed", "Pareto front"),
        ("*", "minimum", "chosen design"),
    ]
    if present_ok:
        items.append(("D", "nominal-mark", "design as drawn"))
    ax.legend(items, ax.x1 + 14, ax.y0 + 8)
    return ax


def _milli(value: object) -> float | None:
    return None if value is None else float(value) * 1e3
