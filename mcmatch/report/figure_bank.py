"""The bank figure as inline SVG: die yield against the number of channels, counted and as if independent.

Same conventions as :mod:`mcmatch.report.figures`: data in, ``ax=None``, return ``ax`` (a :class:`~.svg.Canvas`).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from mcmatch.report.figures import new_axes
from mcmatch.report.format import finite
from mcmatch.report.svg import Canvas, nice_ticks


def bank_yield(
    by_k: Sequence[Mapping],
    ax: Canvas | None = None,
    *,
    target: float | None = None,
    title: str | None = None,
    desc: str = "",
) -> Canvas:
    """Yield [%] of the first k channels all in spec against k: the counted fraction with its 95 % interval (bar) and
    the independent-channels estimate (product of the k per-channel fractions), with the target yield dotted.

    by_k: summary["bank"]["by_k"] ({k, fraction [1], ci95 [1, 1], independent_estimate [1]}); target [1] or None.
    """
    if ax is None:
        ax = new_axes(620, 270, (58, 206, 42, 26 if title else 10))
    ax.title = title or "bank yield against the number of channels"
    ax.desc = desc
    if title:
        ax.heading(title)
    steps = [s for s in by_k if finite(s.get("k")) is not None and finite(s.get("fraction")) is not None]
    if not steps:
        ax.text((ax.x0 + ax.x1) / 2, (ax.y0 + ax.y1) / 2, "no channel counted", "label", "middle")
        return ax
    ks = [int(s["k"]) for s in steps]
    counted = [100 * float(s["fraction"]) for s in steps]
    intervals = [
        [100 * float(v) for v in s["ci95"]] if isinstance(s.get("ci95"), list) and len(s["ci95"]) == 2 else [c, c]
        for s, c in zip(steps, counted, strict=True)
    ]
    independent = [100 * f if (f := finite(s.get("independent_estimate"))) is not None else None for s in steps]
    values = [*counted, *(v for ci in intervals for v in ci), *(v for v in independent if v is not None)]
    goal = 100 * target if finite(target) is not None else None
    lo, hi = min(values), max(values)
    if goal is not None and lo - 0.5 * (hi - lo or 1.0) <= goal:  # the target in view unless far below the data
        lo, hi = min(lo, goal), max(hi, goal)
    pad = 0.06 * (hi - lo or 1.0)
    lo, hi = lo - pad, min(hi + pad, 100.0 + pad)
    ax.set_x(0.5, max(ks) + 0.5)
    ax.set_y(lo, hi)
    step = max(1, round(len(ks) / 12))
    ax.x_axis([float(k) for k in ks[::step]], [str(k) for k in ks[::step]], "channels counted, k")
    ax.y_axis(nice_ticks(lo, hi, 5), label="all k in spec [%]")
    items: list[tuple[str, str, str]] = []
    if goal is not None and lo <= goal <= hi:
        ax.hline(goal, "floor")
        items.append(("line", "floor", f"target {goal:.4g} %"))
    bars = "".join(
        f"M{ax.x.px(k):.1f} {ax.y.px(a):.1f}V{ax.y.px(b):.1f}" for k, (a, b) in zip(ks, intervals, strict=True)
    )
    ax.path(bars, "spread")
    ax.artists += 1
    shown = [(k, v) for k, v in zip(ks, independent, strict=True) if v is not None]
    if shown:
        ax.line([k for k, _ in shown], [v for _, v in shown], "fit dashed")
        for k, v in shown:
            ax.marker(k, v, "^", 8, "minimum")
        items.append(("^", "minimum", "if channels were independent"))
    ax.line(ks, counted, "fit")
    for k, c in zip(ks, counted, strict=True):
        ax.marker(k, c, "o", 8, "mc")
    items[:0] = [("o", "mc", "counted from the samples"), ("line", "spread", "its 95 % interval")]
    ax.legend(items, ax.x1 + 14, ax.y0 + 8)
    return ax
