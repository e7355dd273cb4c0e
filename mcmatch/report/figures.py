"""Figures of a run as inline SVG with real text: data in, ``ax=None``, return ``ax`` (a :class:`~.svg.Canvas`).

Every function draws SI values multiplied by ``scale`` and labels the axis with ``unit`` (the display unit chosen by
the caller, for example ``scale=1e6, unit="µA"``). The look: ink lines on a pale steel fill, spec limits dashed with
hatched out-of-spec regions, the nominal point dotted, so every figure still reads printed in black and white. With
``ax=None`` a function sizes its own canvas; pass ``title`` (the accessible name) and ``desc`` (its key numbers) and
embed ``ax.svg()`` in the page. Pure numpy and the standard library: no plotting library, so a report renders in a
fraction of a second.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from statistics import NormalDist

import numpy as np

from mcmatch.report.svg import CHAR, Canvas, log_ticks, nice_ticks, sparse_log_ticks

#: Share of the variance below which a contribution term is folded into "others" [1].
MIN_SHARE = 0.001
#: Marker and hatch per mismatch parameter in contribution bars: either alone tells them apart.
PARAMETER_CLASS = {"vth": "bar-vth", "beta": "bar-beta", "other": "bar-other"}


def new_axes(
    width: float = 560, height: float = 250, margins: tuple[float, float, float, float] = (50, 12, 42, 26)
) -> Canvas:
    """One empty canvas: size and margins (left, right, bottom, top) [px of the viewBox]."""
    return Canvas(width, height, margins)


def _values(data: object) -> np.ndarray:
    v = np.asarray(data, dtype=float).ravel()
    return v[np.isfinite(v)]


def _scaled(limits: Mapping | None, scale: float) -> dict[str, float]:
    """The "min" and "max" of a spec [SI] in display units (absent sides left out)."""
    return {s: float(limits[s]) * scale for s in ("min", "max") if limits and limits.get(s) is not None}


def _in_view(limits: dict[str, float], lo: float, hi: float) -> dict[str, float]:
    """Spec limits near enough to the data to draw; farther ones are named at the edge in text only."""
    span = max(hi - lo, 1e-300)
    return {s: v for s, v in limits.items() if lo - 1.5 * span <= v <= hi + 1.5 * span}


def _spec_x(ax: Canvas, limits: dict[str, float], shown: dict[str, float], unit: str) -> None:
    """Hatch outside the spec along x, draw the limits dashed, and name limits out of view at the top edge."""
    for side, value in shown.items():
        if side == "min":
            ax.hatch_x(ax.x.lo_data, value)
        else:
            ax.hatch_x(value, ax.x.hi_data)
    for value in shown.values():
        ax.vline(value, "limit")
    for side, value in limits.items():
        if side not in shown:
            text = f"\u2190 min {value:.4g} {unit}" if side == "min" else f"max {value:.4g} {unit} \u2192"
            x, anchor = (ax.x0 + 4, "start") if side == "min" else (ax.x1 - 4, "end")
            ax.text(x, ax.y0 + 12, text, "limit-text", anchor)


def _legend_items(nominal: bool, spec: bool, n: int) -> list[tuple[str, str, str]]:
    items = [("box", "bar", f"samples (n = {n:,})"), ("line", "fit", "normal fit")]
    items += [("line", "nominal", "nominal")] if nominal else []
    items += [("line", "limit", "spec limit"), ("hatch", "out", "outside spec")] if spec else []
    return items


def histogram(
    data: Sequence[float] | np.ndarray,
    ax: Canvas | None = None,
    *,
    mean: float | None = None,
    std: float | None = None,
    nominal: float | None = None,
    limits: Mapping | None = None,
    scale: float = 1.0,
    unit: str = "",
    name: str = "value",
    title: str | None = None,
    legend: str = "right",
    desc: str = "",
) -> Canvas:
    """Density histogram of one measure with its fitted normal, nominal value and hatched out-of-spec regions.

    data: samples [SI]; mean, std: the fitted normal [SI] (default: from the data); nominal: the no-mismatch value
    [SI]; limits: {"min", "max"} [SI or None]; scale, unit: display conversion; legend: "right" or "inside".
    """
    top = 26 if title else 10
    if ax is None:
        ax = new_axes(560, 250, (24, 168, 42, top)) if legend == "right" else new_axes(420, 240, (24, 12, 42, top))
    ax.title = title or f"histogram of {name}"
    ax.desc = desc
    v = _values(data) * scale
    if title:
        ax.heading(title)
    if v.size == 0:
        ax.text((ax.x0 + ax.x1) / 2, (ax.y0 + ax.y1) / 2, "no converged samples", "label", "middle")
        return ax
    mu = float(v.mean()) if mean is None else mean * scale
    sigma = float(v.std(ddof=1) if v.size > 1 else 0.0) if std is None else std * scale
    lo, hi = float(v.min()), float(v.max())
    if sigma > 0:
        lo, hi = min(lo, mu - 4 * sigma), max(hi, mu + 4 * sigma)
    spec = _scaled(limits, scale)
    shown = _in_view(spec, lo, hi)
    lo, hi = min([lo, *shown.values()]), max([hi, *shown.values()])
    pad = 0.04 * (hi - lo or abs(mu) or 1.0)
    lo, hi = lo - pad, hi + pad
    bins = int(np.clip(np.sqrt(v.size) * 0.9, 12, 70))
    counts, edges = np.histogram(v, bins=bins, density=True)
    x = np.linspace(lo, hi, 160)
    pdf = np.exp(-0.5 * ((x - mu) / sigma) ** 2) / (sigma * math.sqrt(2 * math.pi)) if sigma > 0 else None
    peak = max(float(counts.max()), float(pdf.max()) if pdf is not None else 0.0)
    ax.set_x(lo, hi)
    ax.set_y(0.0, peak * 1.08 or 1.0)
    ticks = nice_ticks(lo, hi, 7 if legend == "right" else 5)
    ax.x_axis(ticks, label=f"{name} [{unit}]" if unit else name)
    _spec_x(ax, spec, shown, unit)
    xs = np.repeat(edges, 2)
    ys = np.concatenate([[0.0], np.repeat(counts, 2), [0.0]])
    px, py = ax.x(xs), ax.y(ys)
    ax.path("M" + "L".join(f"{a:.1f} {b:.1f}" for a, b in zip(px, py, strict=True)) + "Z", "bar")
    ax.artists += 1
    if pdf is not None:
        ax.line(x, pdf, "fit")
    if nominal is not None:
        ax.vline(nominal * scale, "nominal")
    ax.path(f"M{ax.x0:.1f} {ax.y1:.1f}H{ax.x1:.1f}", "axis")
    x, y = ax.x0 - 8, (ax.y0 + ax.y1) / 2
    ax.text(x, y, "density", "tick", "middle", f' transform="rotate(-90 {x:.1f} {y:.1f})"')
    items = _legend_items(nominal is not None, bool(shown), v.size)
    if legend == "right":
        ax.legend(items, ax.x1 + 14, ax.y0 + 8)
    elif legend == "inside":
        ax.legend(items[:2], ax.x0 + 8, ax.y0 + 24, 15)
    return ax


def probability_plot(
    data: Sequence[float] | np.ndarray,
    ax: Canvas | None = None,
    *,
    limits: Mapping | None = None,
    scale: float = 1.0,
    unit: str = "",
    title: str | None = "normal probability",
    max_points: int = 600,
    desc: str = "",
) -> Canvas:
    """Normal-probability plot: ordered samples against normal quantiles [sigma], with the fitted normal's line.

    Positions are Filliben's order-statistic medians (as scipy.stats.probplot); a straight line means normal tails,
    bending at the ends shows where a normal extrapolation of yield would err. Every point of the far tails is drawn,
    the middle is thinned to about `max_points`.
    """
    v = np.sort(_values(data)) * scale
    if ax is None:
        chars = max(len(f"{t:g}") for t in nice_ticks(float(v[0]), float(v[-1]), 5)) if v.size >= 3 else 4
        ax = new_axes(300, 250, (22 + CHAR * chars, 10, 42, 26 if title else 10))
    ax.title = title or "normal probability plot"
    ax.desc = desc
    if title:
        ax.heading(title)
    n = v.size
    if n < 3:
        ax.text((ax.x0 + ax.x1) / 2, (ax.y0 + ax.y1) / 2, "too few samples", "label", "middle")
        return ax
    keep = _thin(n, max_points)
    positions = (keep + 1 - 0.3175) / (n + 0.365)
    positions[keep == 0], positions[keep == n - 1] = 1 - 0.5 ** (1 / n), 0.5 ** (1 / n)
    normal = NormalDist()
    osm = np.array([normal.inv_cdf(float(p)) for p in positions])
    osr = v[keep]
    mu, sd = float(v.mean()), float(v.std(ddof=1))
    q = np.array([osm[0], osm[-1]])
    fit = mu + sd * q
    lo, hi = float(min(osr[0], fit.min())), float(max(osr[-1], fit.max()))
    spec = _scaled(limits, scale)
    shown = _in_view(spec, lo, hi)
    lo, hi = min([lo, *shown.values()]), max([hi, *shown.values()])
    pad = 0.05 * (hi - lo or 1.0)
    ax.set_x(float(q[0]) - 0.2, float(q[1]) + 0.2)
    ax.set_y(lo - pad, hi + pad)
    ax.x_axis([float(k) for k in range(math.ceil(q[0]), math.floor(q[1]) + 1)], label="normal quantile [sigma]")
    ax.y_axis(nice_ticks(lo - pad, hi + pad, 5), label=f"[{unit}]" if unit else "value")
    for side, value in shown.items():
        ax.hatch_y(ax.y.lo_data, value) if side == "min" else ax.hatch_y(value, ax.y.hi_data)
        ax.hline(value, "limit")
    ax.line(q, fit, "fit dashed")
    px, py = ax.x(osm), ax.y(osr)
    ax.path("".join(f"M{a:.1f} {b:.1f}h0" for a, b in zip(px, py, strict=True)), "dots")
    ax.artists += 1
    return ax


def _thin(n: int, max_points: int, tail: int = 100) -> np.ndarray:
    """Indices of sorted samples to draw: every point of both tails, an even subset of the middle."""
    if n <= max_points:
        return np.arange(n)
    middle = np.linspace(tail, n - tail - 1, max(max_points - 2 * tail, 2)).round().astype(int)
    return np.unique(np.concatenate([np.arange(tail), middle, np.arange(n - tail, n)]))


def area_sigma(
    area: Mapping,
    ax: Canvas | None = None,
    *,
    measure: str,
    scale: float = 1.0,
    unit: str = "",
    title: str | None = None,
    desc: str = "",
    present: float | None = None,
) -> Canvas:
    """Sigma of one measure against summed gate area, log-log, with the fit, the minimum-area point and the design
    as drawn (`present`, its gate area [m^2], drawn on the fit).

    area: summary["area"] ({points: [{area [m^2], measures: {name: {std}}}], fit: {name: {k, floor}},
    minimum: {name: {area, std}}}); the fit line is sigma = sqrt(k^2 / area + floor^2) (Pelgrom's law with a floor).
    """
    if ax is None:
        ax = new_axes(620, 270, (64, 196, 42, 26 if title else 10))
    ax.title = title or f"sigma of {measure} against gate area"
    ax.desc = desc
    if title:
        ax.heading(title)
    points = [p for p in area.get("points", []) if measure in (p.get("measures") or {})]
    a = np.array([p.get("area", np.nan) for p in points], dtype=float) * 1e12
    s = np.array([p["measures"][measure].get("std") or np.nan for p in points], dtype=float) * scale
    ok = np.isfinite(a) & np.isfinite(s) & (a > 0) & (s > 0)
    if not ok.any():
        ax.text((ax.x0 + ax.x1) / 2, (ax.y0 + ax.y1) / 2, "no swept point", "label", "middle")
        return ax
    fit = (area.get("fit") or {}).get(measure) or {}
    k, floor = fit.get("k"), float(fit.get("floor") or 0.0)
    minimum = (area.get("minimum") or {}).get(measure) or {}
    xs = [*a[ok], *([minimum["area"] * 1e12] if minimum.get("area") else []), *([present * 1e12] if present else [])]
    ys = [*s[ok], *([minimum["std"] * scale] if minimum.get("std") else [])]
    x_lo, x_hi = min(xs) / 1.6, max(xs) * 1.6
    curve_x = np.geomspace(x_lo, x_hi, 60)
    curve_y = np.sqrt(float(k) ** 2 / (curve_x * 1e-12) + floor**2) * scale if k is not None else None
    if curve_y is not None:
        ys += [float(curve_y.min()), float(curve_y.max())]
    y_lo, y_hi = min(ys) / 1.25, max(ys) * 1.25
    ax.set_x(x_lo, x_hi, log=True)
    ax.set_y(y_lo, y_hi, log=True)
    ticks = sparse_log_ticks(x_lo, x_hi)
    ax.x_axis(ticks, [f"{t:,.6g}" for t in ticks], "gate area m\u00b7W\u00b7L [\u00b5m\u00b2]")
    ax.y_axis(log_ticks(y_lo, y_hi), [f"{t:g}" for t in log_ticks(y_lo, y_hi)], f"sigma [{unit}]" if unit else "sigma")
    items: list[tuple[str, str, str]] = []
    if curve_y is not None:
        ax.line(curve_x, curve_y, "fit")
        items.append(("line", "fit", "fit \u221a(k\u00b2/area + floor\u00b2)"))
        if floor > 0 and y_lo < floor * scale < y_hi:
            ax.hline(floor * scale, "floor")
            items.append(("line", "floor", "floor"))
    for x, y in zip(a[ok], s[ok], strict=True):
        ax.marker(float(x), float(y), "o", 9, "mc")
    items.append(("o", "mc", "Monte Carlo"))
    if minimum.get("area") and minimum.get("std"):
        ax.vline(minimum["area"] * 1e12, "nominal")
        ax.marker(minimum["area"] * 1e12, minimum["std"] * scale, "*", 17, "minimum")
        items.append(("*", "minimum", "minimum area for spec"))
    if present and curve_y is not None:
        ax.marker(present * 1e12, math.sqrt(float(k) ** 2 / present + floor**2) * scale, "D", 12, "nominal-mark")
        items.append(("D", "nominal-mark", "design as drawn"))
    ax.legend(items, ax.x1 + 14, ax.y0 + 8)
    return ax


def fold_terms(terms: Sequence[Mapping], top: int = 10, min_share: float = MIN_SHARE) -> list[dict]:
    """Terms by share, largest first; those beyond `top` or under `min_share` summed into one "others" entry.

    The "others" entry carries count (terms folded), share (their summed share) and std (root-sum-square).
    """
    rows = sorted((dict(t) for t in terms), key=lambda t: -_num(t.get("share")))
    kept = [t for i, t in enumerate(rows) if i < top and _num(t.get("share")) >= min_share]
    rest = rows[len(kept) :]
    if rest:
        kept.append(
            {
                "device": f"others ({len(rest)} term{'s' if len(rest) > 1 else ''})",
                "parameter": "other",
                "share": sum(_num(t.get("share")) for t in rest),
                "std": math.sqrt(sum(_num(t.get("std")) ** 2 for t in rest)),
                "count": len(rest),
            }
        )
    return kept


def _num(v: object) -> float:
    try:
        f = float(v)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return 0.0
    return f if math.isfinite(f) else 0.0


def contributions(
    terms: Sequence[Mapping], ax: Canvas | None = None, *, top: int = 10, title: str | None = None, desc: str = ""
) -> Canvas:
    """Horizontal bars: each (device, parameter) term's share of the measure's variance [%], largest first.

    terms: summary["contributions"][name]["terms"] ({device, parameter, share, ...}); folded by :func:`fold_terms`.
    """
    rows = fold_terms(terms, top)
    names = [str(t["device"]) if "count" in t else f"{t.get('device')} \u00b7 {t.get('parameter')}" for t in rows]
    if ax is None:
        left = min(16 + CHAR * max((len(n) for n in names), default=4), 200)
        ax = new_axes(440, 58 + 24 * len(rows) + (16 if title else 0), (left, 24, 40, 26 if title else 10))
    ax.title = title or "variance shares"
    ax.desc = desc
    if title:
        ax.heading(title)
    if not rows:
        return ax
    biggest = max(100 * _num(t.get("share")) for t in rows)
    ax.set_x(0.0, max(biggest * 1.22, 10.0))
    ax.set_y(len(rows) - 0.4, -0.6)
    ax.x_axis(nice_ticks(0.0, max(biggest * 1.22, 10.0), 5), label="share of the linearised variance [%]")
    for i, (t, name) in enumerate(zip(rows, names, strict=True)):
        share = 100 * _num(t.get("share"))
        cls = PARAMETER_CLASS.get(str(t.get("parameter")), PARAMETER_CLASS["other"])
        y, h = ax.y.px(i - 0.34), ax.y.px(i + 0.34) - ax.y.px(i - 0.34)
        ax.rect_px(ax.x0, y, max(ax.x.px(share) - ax.x0, 0.5), h, cls)
        ax.artists += 1
        text = f"{share:.1f} %" if share >= 0.05 or share == 0 else "< 0.1 %"
        ax.text(ax.x.px(share) + 4, ax.y.px(i) + 4, text, "tick")
        ax.text(ax.x0 - 6, ax.y.px(i) + 4, name, "tick", "end")
    ax.path(f"M{ax.x0:.1f} {ax.y0:.1f}V{ax.y1:.1f}", "axis")
    return ax


def corner_rows(corners: Sequence[Mapping], measure: str, worst: int | None, max_rows: int) -> list[int]:
    """Indices of the corners drawn: all of them up to `max_rows`, else the first ones and the worst."""
    idx = [i for i, c in enumerate(corners) if measure in (c.get("measures") or {})]
    if len(idx) <= max_rows:
        return idx
    shown = idx[: max_rows - 1] if worst is not None and worst not in idx[:max_rows] else idx[:max_rows]
    return sorted({*shown, *([worst] if worst in idx else [])})


def corner_spread(
    corners: Sequence[Mapping],
    ax: Canvas | None = None,
    *,
    measure: str,
    limits: Mapping | None = None,
    worst: int | None = None,
    scale: float = 1.0,
    unit: str = "",
    title: str | None = None,
    max_rows: int = 120,
    desc: str = "",
) -> Canvas:
    """Mean and mean +- 3 sigma of one measure at every corner, one row each, with the spec and the worst corner.

    corners: summary["corners"] ({process, temperature [K], supply [V], measures: {name: {mean, std}}});
    worst: index into `corners` of the worst corner, drawn thick with a diamond; at most `max_rows` rows (the worst
    always among them).
    """
    idx = corner_rows(corners, measure, worst, max_rows)
    labels = [_corner_text(corners[i]) for i in idx]
    if ax is None:
        left = 16 + 0.62 * 11 * max((len(t) for t in labels), default=8)
        ax = new_axes(560, 62 + 13 * len(idx) + (16 if title else 0), (left, 14, 42, 26 if title else 10))
    ax.title = title or f"corner spread of {measure}"
    ax.desc = desc
    if title:
        ax.heading(title)
    spans = []
    for i in idx:
        m = corners[i]["measures"][measure]
        if m.get("mean") is not None:
            sd = m.get("std") or 0.0
            spans.append(((m["mean"] - 3 * sd) * scale, m["mean"] * scale, (m["mean"] + 3 * sd) * scale))
    if not spans:
        return ax
    lo, hi = min(s[0] for s in spans), max(s[2] for s in spans)
    spec = _scaled(limits, scale)
    shown = _in_view(spec, lo, hi)
    lo, hi = min([lo, *shown.values()]), max([hi, *shown.values()])
    pad = 0.03 * (hi - lo or 1.0)
    ax.set_x(lo - pad, hi + pad)
    ax.set_y(len(idx) - 0.5, -0.5)
    ax.x_axis(nice_ticks(lo - pad, hi + pad, 7), label=f"{measure}: mean \u00b1 3 sigma [{unit}]" if unit else measure)
    _spec_x(ax, spec, shown, unit)
    plain, bad = [], []
    for row, i in enumerate(idx):
        m = corners[i]["measures"][measure]
        if m.get("mean") is None:
            continue
        sd = m.get("std") or 0.0
        a, b = ax.x.px((m["mean"] - 3 * sd) * scale), ax.x.px((m["mean"] + 3 * sd) * scale)
        y = ax.y.px(row)
        (bad if i == worst else plain).append(f"M{a:.1f} {y:.1f}H{b:.1f}")
        ax.text(ax.x0 - 6, y + 3.5, labels[row], "mono", "end")
        if row and corners[idx[row - 1]].get("process") != corners[i].get("process"):
            ax.hline(row - 0.5, "rule")
    ax.path("".join(plain), "spread")
    ax.path("".join(bad), "spread worst")
    ax.artists += 1
    for row, i in enumerate(idx):
        m = corners[i]["measures"][measure]
        if m.get("mean") is not None:
            ax.marker(
                m["mean"] * scale,
                row,
                "D" if i == worst else "o",
                8 if i == worst else 5,
                "worst" if i == worst else "mc",
            )
    ax.path(f"M{ax.x0:.1f} {ax.y0:.1f}V{ax.y1:.1f}", "axis")
    return ax


def _corner_text(c: Mapping) -> str:
    t = c.get("temperature")
    v = c.get("supply")
    temp = "" if t is None else f"{t - 273.15:4.0f} \u00b0C"
    volts = "" if v is None else f"{v:5.3g} V"
    return " ".join(x for x in (f"{c.get('process', '?')!s:>3}", temp, volts) if x)
