"""Figures of a run: data in, ``ax=None``, return ``ax``. The only module that imports matplotlib and seaborn.

Every function draws SI values multiplied by ``scale`` and labels the axis with ``unit`` (the display unit chosen by
the caller, for example ``scale=1e6, unit="µA"``). The look is the report's own: ink lines on a pale steel fill, spec
limits dashed with hatched out-of-spec regions, the nominal point dotted, so every figure still reads when printed in
black and white. With ``ax=None`` a function sizes its own figure (fixed margins in inches, no layout engine: the report
renders in a few seconds); figures are :class:`matplotlib.figure.Figure` objects, outside pyplot's global state.
Embed one in HTML with :func:`data_uri`.
"""

from __future__ import annotations

import base64
import io
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402 - the backend must be chosen first
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import seaborn as sns  # noqa: E402
from matplotlib.axes import Axes  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.patches import Patch  # noqa: E402
from matplotlib.ticker import FuncFormatter, LogLocator, MaxNLocator, NullFormatter  # noqa: E402
from scipy import stats  # noqa: E402

#: Report palette: deep ink, slate, a pale steel fill, a brick red for limits, an ochre for the nominal point.
INK = "#1d2b3a"
SLATE = "#5a6b7d"
FILL = "#b9cbdc"
FILL_DARK = "#7c99b4"
LIMIT = "#a8322d"
NOMINAL = "#b7791f"
GRID = "#dde2e8"
#: Colour and hatch per mismatch parameter in contribution bars: either alone tells them apart.
#: (Dotted hatches are avoided: matplotlib writes every dot as a path and the SVG grows to hundreds of kB.)
PARAMETER_STYLE = {"vth": (FILL_DARK, "////"), "beta": ("#e3c58f", "\\\\\\\\"), "other": ("#c9c9c9", "xx")}
LIMIT_DASH = (0, (5, 2.5))
#: Width of one character of tick or legend text [inch] at the style's 7.5 pt, for margins sized without drawing.
CHAR = 0.058

STYLE = {
    **sns.axes_style("ticks"),
    "font.family": "DejaVu Sans",
    "font.size": 8.5,
    "axes.titlesize": 9.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.titlepad": 5.0,
    "axes.labelsize": 8.5,
    "axes.labelcolor": INK,
    "axes.edgecolor": SLATE,
    "axes.linewidth": 0.7,
    "axes.grid": True,
    "axes.axisbelow": True,
    "axes.formatter.useoffset": False,
    "grid.color": GRID,
    "grid.linewidth": 0.6,
    "xtick.color": SLATE,
    "ytick.color": SLATE,
    "xtick.labelcolor": INK,
    "ytick.labelcolor": INK,
    "xtick.labelsize": 7.5,
    "ytick.labelsize": 7.5,
    "text.color": INK,
    "legend.fontsize": 7.5,
    "legend.frameon": False,
    "legend.borderaxespad": 0.3,
    "hatch.linewidth": 0.6,
    "hatch.color": LIMIT,
    "svg.fonttype": "path",  # text drawn as outlines: looks the same on any machine, years from now
    "svg.hashsalt": "mcmatch",  # deterministic element ids: the same data give the same file
    "figure.dpi": 100,
    "figure.facecolor": "white",
}


@contextmanager
def style() -> Iterator[None]:
    """The report's matplotlib style, for building and saving figures inside the block."""
    with matplotlib.rc_context(STYLE):
        yield


def new_axes(
    width: float = 6.4, height: float = 2.6, margins: tuple[float, float, float, float] = (0.6, 0.15, 0.45, 0.3)
) -> Axes:
    """One Axes on a fresh figure (no pyplot state): size and margins (left, right, bottom, top) [inch]."""
    left, right, bottom, top = margins
    with style():
        fig = Figure(figsize=(width, height))
        fig.subplots_adjust(
            left=min(left / width, 0.8),
            right=max(1 - right / width, 0.2),
            bottom=min(bottom / height, 0.8),
            top=max(1 - top / height, 0.2),
        )
        return fig.add_subplot()


def data_uri(ax: Axes | Figure, fmt: str = "svg") -> str:
    """The figure holding `ax` as a ``data:`` URI (SVG or PNG, base64), ready for an <img src>. Closes the figure."""
    fig = ax if isinstance(ax, Figure) else ax.figure
    buf = io.BytesIO()
    with style():
        if fmt == "svg":
            fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
            mime = "image/svg+xml"
        else:
            fig.savefig(buf, format="png", dpi=130, metadata={"Software": None})
            mime = "image/png"
    plt.close(fig)  # harmless for a pyplot-free figure; frees one a caller made through pyplot
    return f"data:{mime};base64,{base64.b64encode(buf.getvalue()).decode('ascii')}"


def label(text: object) -> str:
    """A user-supplied name made safe for matplotlib text: '$' would start mathtext."""
    return str(text).replace("$", r"\$")


# --------------------------------------------------------------------------------------------- helpers
def _values(data: object, column: str | None) -> np.ndarray:
    if isinstance(data, pd.DataFrame):
        data = data[column] if column is not None else data.iloc[:, 0]
    v = np.asarray(data, dtype=float).ravel()
    return v[np.isfinite(v)]


def _scaled(limits: Mapping | None, scale: float) -> dict[str, float | None]:
    """The "min" and "max" of a spec [SI] in display units; other keys (such as "unit") are ignored."""
    out: dict[str, float | None] = {}
    for side in ("min", "max"):
        value = (limits or {}).get(side)
        out[side] = None if value is None else float(value) * scale
    return out


def _limits_in_view(limits: dict[str, float | None], lo: float, hi: float) -> dict[str, float]:
    """Spec limits [display units] near enough to the data to draw; farther ones are named in text only."""
    span = max(hi - lo, 1e-300)
    return {s: v for s, v in limits.items() if v is not None and lo - 1.5 * span <= v <= hi + 1.5 * span}


def _shade_out_of_spec(ax: Axes, limits: dict[str, float], vertical: bool = True) -> None:
    """Hatch the regions outside the spec and draw the limits as dashed lines (keeps the current view)."""
    lo, hi = ax.get_xlim() if vertical else ax.get_ylim()
    span = ax.axvspan if vertical else ax.axhspan
    line = ax.axvline if vertical else ax.axhline
    for side, value in limits.items():
        a, b = (lo, value) if side == "min" else (value, hi)
        if b > a:
            span(a, b, facecolor="#f6e9e8", edgecolor=LIMIT, hatch="////", linewidth=0, alpha=0.55, zorder=0)
        line(value, color=LIMIT, linestyle=LIMIT_DASH, linewidth=1.3, zorder=3)
    (ax.set_xlim if vertical else ax.set_ylim)(lo, hi)


def _far_limits(ax: Axes, limits: dict[str, float | None], shown: dict[str, float], unit: str) -> None:
    """Name the spec limits too far from the data to draw, at the plot's edge with an arrow."""
    for side, value in limits.items():
        if value is None or side in shown:
            continue
        text = f"\u2190 min {value:.4g} {unit}" if side == "min" else f"max {value:.4g} {unit} \u2192"
        ax.text(
            0.01 if side == "min" else 0.99,
            0.97,
            text,
            transform=ax.transAxes,
            ha="left" if side == "min" else "right",
            va="top",
            color=LIMIT,
            fontsize=7,
        )


def _tick_chars(ax: Axes, axis: str = "y") -> int:
    """Longest tick label of an axis in characters (for a margin sized without drawing)."""
    a = ax.yaxis if axis == "y" else ax.xaxis
    lo, hi = a.get_view_interval()
    ticks = [t for t in a.get_majorticklocs() if min(lo, hi) <= t <= max(lo, hi)]
    return max((len(s) for s in a.get_major_formatter().format_ticks(ticks)), default=4)


def _legend_right(ax: Axes, **kwargs) -> None:
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), **kwargs)


# --------------------------------------------------------------------------------------------- plots
def histogram(
    data: pd.DataFrame | np.ndarray | Sequence[float],
    ax: Axes | None = None,
    *,
    column: str | None = None,
    mean: float | None = None,
    std: float | None = None,
    nominal: float | None = None,
    limits: Mapping | None = None,
    scale: float = 1.0,
    unit: str = "",
    name: str | None = None,
    title: str | None = None,
    legend: str = "right",
) -> Axes:
    """Density histogram of one measure with its fitted normal, nominal value and hatched out-of-spec regions.

    data: samples [SI] (or a DataFrame and `column`); mean, std: the fitted normal [SI] (default: from the data);
    nominal: the no-mismatch value [SI]; limits: {"min", "max"} [SI or None]; scale, unit: display conversion;
    name: the measure's name for the axis label; legend: "right" (beside the axes), "inside" or "none".
    """
    if ax is None:
        if legend == "right":
            ax = new_axes(5.6, 2.5, (0.3, 1.55, 0.45, 0.3 if title else 0.12))
        else:
            ax = new_axes(4.2, 2.3, (0.3, 0.15, 0.45, 0.3 if title else 0.12))
    v = _values(data, column) * scale
    if v.size == 0:
        ax.text(0.5, 0.5, "no converged samples", transform=ax.transAxes, ha="center", va="center")
        return ax
    mu = float(v.mean()) if mean is None else mean * scale
    sigma = float(v.std(ddof=1) if v.size > 1 else 0.0) if std is None else std * scale
    bins = int(np.clip(np.sqrt(v.size) * 0.9, 12, 70))
    limits_d = _scaled(limits, scale)
    with style():
        sns.histplot(
            x=v,
            ax=ax,
            bins=bins,
            stat="density",
            color=FILL,
            edgecolor=FILL_DARK,
            linewidth=0.5,
            alpha=1.0,
            label=f"samples (n = {v.size:,})",
        )
        lo, hi = float(v.min()), float(v.max())
        if sigma > 0:
            lo, hi = min(lo, mu - 4 * sigma), max(hi, mu + 4 * sigma)
            x = np.linspace(lo, hi, 240)
            ax.plot(x, stats.norm.pdf(x, mu, sigma), color=INK, linewidth=1.4, label="normal fit")
        shown = _limits_in_view(limits_d, lo, hi)
        lo, hi = min([lo, *shown.values()]), max([hi, *shown.values()])
        pad = 0.04 * (hi - lo or abs(mu) or 1.0)
        ax.set_xlim(lo - pad, hi + pad)
        ax.xaxis.set_major_locator(MaxNLocator(nbins=8 if legend == "right" else 5, steps=[1, 2, 2.5, 5, 10]))
        if nominal is not None:
            ax.axvline(nominal * scale, color=NOMINAL, linestyle=":", linewidth=1.8, label="nominal", zorder=4)
        _shade_out_of_spec(ax, shown)
        _far_limits(ax, limits_d, shown, unit)
        if shown:
            ax.plot([], [], color=LIMIT, linestyle=LIMIT_DASH, linewidth=1.3, label="spec limit")
            ax.fill_between(
                [], [], facecolor="#f6e9e8", edgecolor=LIMIT, hatch="////", linewidth=0, label="outside spec"
            )
        text = label(name or column or "value")
        ax.set_xlabel(f"{text} [{unit}]" if unit else text)
        ax.set_ylabel("density")
        handles, names = ax.get_legend_handles_labels()
        order = sorted(range(len(names)), key=lambda i: (not names[i].startswith("samples"), i))
        handles, names = [handles[i] for i in order], [names[i] for i in order]
        if legend == "right":
            ax.legend(handles, names, loc="upper left", bbox_to_anchor=(1.01, 1))
        elif legend == "inside":
            ax.legend(
                handles,
                names,
                loc="upper left",
                fontsize=6.5,
                frameon=True,
                facecolor="white",
                edgecolor="none",
                framealpha=0.85,
            )
        ax.set_yticklabels([])
        ax.tick_params(axis="y", length=0)
        ax.set_ylim(0, None)
        if title:
            ax.set_title(label(title))
        sns.despine(ax=ax)
    return ax


def probability_plot(
    data: pd.DataFrame | np.ndarray | Sequence[float],
    ax: Axes | None = None,
    *,
    column: str | None = None,
    limits: Mapping | None = None,
    scale: float = 1.0,
    unit: str = "",
    title: str | None = "normal probability",
    max_points: int = 1500,
) -> Axes:
    """Normal-probability plot (scipy.stats.probplot): ordered samples against normal quantiles [sigma].

    A straight line means normal tails; bending at the ends shows where a normal extrapolation of yield would err.
    Every point of the tails is drawn; the middle is thinned to about `max_points` for file size.
    """
    own = ax is None
    if ax is None:
        ax = new_axes(2.9, 2.5, (0.6, 0.1, 0.45, 0.3 if title else 0.12))
    v = _values(data, column) * scale
    if v.size < 3:
        ax.text(0.5, 0.5, "too few samples", transform=ax.transAxes, ha="center", va="center")
        return ax
    (osm, osr), (slope, intercept, _r) = stats.probplot(v, dist="norm")
    keep = _thin(osm.size, max_points)
    limits_d = _scaled(limits, scale)
    with style():
        ax.plot(
            osm[keep],
            osr[keep],
            linestyle="none",
            marker="o",
            markersize=2.2,
            markerfacecolor=FILL,
            markeredgecolor=INK,
            markeredgewidth=0.4,
            rasterized=keep.size > 600,
            label="samples",
        )
        q = np.array([osm[0], osm[-1]])
        fit = intercept + slope * q
        ax.plot(q, fit, color=INK, linewidth=1.1, linestyle="--", label="normal")
        lo, hi = float(min(osr[0], fit.min())), float(max(osr[-1], fit.max()))
        shown = _limits_in_view(limits_d, lo, hi)
        lo, hi = min([lo, *shown.values()]), max([hi, *shown.values()])
        pad = 0.05 * (hi - lo or 1.0)
        ax.set_ylim(lo - pad, hi + pad)
        _shade_out_of_spec(ax, shown, vertical=False)
        ax.set_xlabel("normal quantile [sigma]")
        ax.set_ylabel(f"[{unit}]" if unit else "value")
        ax.set_xticks(np.arange(np.ceil(osm[0]), np.floor(osm[-1]) + 1))
        if title:
            ax.set_title(label(title))
        sns.despine(ax=ax)
        if own:  # widen the left margin to the tick labels actually used
            width = ax.figure.get_figwidth()
            ax.figure.subplots_adjust(left=min((0.32 + CHAR * _tick_chars(ax)) / width, 0.5))
    return ax


def _thin(n: int, max_points: int, tail: int = 150) -> np.ndarray:
    """Indices of sorted samples to draw: every point of both tails, an even subset of the middle."""
    if n <= max_points:
        return np.arange(n)
    middle = np.linspace(tail, n - tail - 1, max(max_points - 2 * tail, 2)).round().astype(int)
    return np.unique(np.concatenate([np.arange(tail), middle, np.arange(n - tail, n)]))


def area_sigma(
    area: Mapping,
    ax: Axes | None = None,
    *,
    measure: str,
    scale: float = 1.0,
    unit: str = "",
    title: str | None = None,
) -> Axes:
    """Sigma of one measure against summed gate area, log-log, with the fit and the minimum-area point.

    area: summary["area"] ({points: [{area [m^2], measures: {name: {std}}}], fit: {name: {k, floor}},
    minimum: {name: {area, std}}}); the fit line is sigma = sqrt(k^2 / area + floor^2) (Pelgrom's law with a floor).
    """
    if ax is None:
        ax = new_axes(6.2, 2.7, (0.75, 1.85, 0.45, 0.3 if title else 0.12))
    points = [p for p in area.get("points", []) if measure in (p.get("measures") or {})]
    a = np.array([p.get("area", np.nan) for p in points], dtype=float) * 1e12
    s = np.array([p["measures"][measure].get("std") or np.nan for p in points], dtype=float) * scale
    ok = np.isfinite(a) & np.isfinite(s) & (a > 0) & (s > 0)
    with style():
        fit = (area.get("fit") or {}).get(measure) or {}
        k, floor = fit.get("k"), fit.get("floor") or 0.0
        if k is not None and ok.any():
            x = np.geomspace(a[ok].min() / 1.6, a[ok].max() * 1.6, 100)
            y = np.sqrt(float(k) ** 2 / (x * 1e-12) + float(floor) ** 2) * scale
            ax.plot(x, y, color=INK, linewidth=1.2, label="fit \u221a(k\u00b2/area + floor\u00b2)", zorder=3)
            if floor > 0:
                ax.axhline(floor * scale, color=SLATE, linestyle="-.", linewidth=0.9, label="floor")
        ax.plot(
            a[ok],
            s[ok],
            linestyle="none",
            marker="o",
            markersize=5.5,
            markerfacecolor=FILL,
            markeredgecolor=INK,
            markeredgewidth=0.9,
            label="Monte Carlo",
            zorder=4,
        )
        minimum = (area.get("minimum") or {}).get(measure) or {}
        if minimum.get("area") and minimum.get("std"):
            ax.plot(
                [minimum["area"] * 1e12],
                [minimum["std"] * scale],
                linestyle="none",
                marker="*",
                markersize=14,
                markerfacecolor=NOMINAL,
                markeredgecolor=INK,
                markeredgewidth=0.8,
                label="minimum area for spec",
                zorder=5,
            )
            ax.axvline(minimum["area"] * 1e12, color=NOMINAL, linestyle=":", linewidth=1.2, zorder=2)
        ax.set_xscale("log")
        ax.set_yscale("log")
        for axis in (ax.xaxis, ax.yaxis):  # plain numbers (20, 50, 100), not powers of ten
            axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
            axis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
            axis.set_minor_formatter(NullFormatter())
        ax.set_xlabel("gate area m\u00b7W\u00b7L of the scaled devices [\u00b5m\u00b2]")
        ax.set_ylabel(f"sigma [{unit}]" if unit else "sigma")
        ax.grid(True, which="major", linewidth=0.6)
        ax.grid(True, which="minor", linewidth=0.3, color=GRID)
        if title:
            ax.set_title(label(title))
        _legend_right(ax)
        sns.despine(ax=ax)
    return ax


def contributions(
    terms: Sequence[Mapping] | pd.DataFrame, ax: Axes | None = None, *, top: int = 10, title: str | None = None
) -> Axes:
    """Horizontal bars: each (device, parameter) term's share of the measure's variance [%], largest first.

    terms: summary["contributions"][name]["terms"] ({device, parameter, share, ...}); terms beyond `top` are lumped.
    """
    df = pd.DataFrame(list(terms) if not isinstance(terms, pd.DataFrame) else terms)
    if df.empty:
        return ax if ax is not None else new_axes(5.0, 1.0)
    df = df.assign(share=pd.to_numeric(df["share"], errors="coerce").fillna(0.0)).sort_values(
        "share", ascending=False, kind="stable"
    )
    if len(df) > top:
        rest = {"device": f"{len(df) - top} others", "parameter": "other", "share": float(df["share"].iloc[top:].sum())}
        df = pd.concat([df.iloc[:top], pd.DataFrame([rest])], ignore_index=True)
    names = [f"{label(d)} \u00b7 {label(p)}" for d, p in zip(df["device"], df["parameter"], strict=True)]
    if ax is None:
        left = min(0.25 + CHAR * max(len(n) for n in names), 2.0)
        ax = new_axes(4.2, 0.75 + 0.24 * len(df) + (0.2 if title else 0.0), (left, 0.3, 0.45, 0.3 if title else 0.1))
    with style():
        for i, (share, parameter) in enumerate(zip(df["share"], df["parameter"], strict=True)):
            color, hatch = PARAMETER_STYLE.get(str(parameter), PARAMETER_STYLE["other"])
            with matplotlib.rc_context({"hatch.color": INK, "hatch.linewidth": 0.5}):
                ax.barh(i, 100 * share, color=color, edgecolor=INK, linewidth=0.6, hatch=hatch, height=0.68)
            ax.text(100 * share + 1.0, i, f"{100 * share:.1f} %", va="center", fontsize=7.5)
        ax.set_yticks(np.arange(len(df)), names)
        ax.set_ylim(len(df) - 0.5, -0.5)
        ax.set_xlim(0, max(100 * float(df["share"].max()) * 1.2, 10))
        ax.set_xlabel("share of the linearised variance [%]")
        ax.grid(False, axis="y")
        present = set(df["parameter"].astype(str))
        with matplotlib.rc_context({"hatch.color": INK}):
            handles = [
                Patch(facecolor=c, edgecolor=INK, hatch=h, label=n)
                for n, (c, h) in PARAMETER_STYLE.items()
                if n in present
            ]
        ax.legend(handles=handles, loc="lower right", handleheight=1.4, handlelength=2.2)
        if title:
            ax.set_title(label(title))
        sns.despine(ax=ax)
    return ax


def corner_spread(
    corners: Sequence[Mapping],
    ax: Axes | None = None,
    *,
    measure: str,
    limits: Mapping | None = None,
    worst: int | None = None,
    scale: float = 1.0,
    unit: str = "",
    title: str | None = None,
) -> Axes:
    """Mean and mean +- 3 sigma of one measure at every corner, one row each, with the spec and the worst corner.

    corners: summary["corners"] ({process, temperature [K], supply [V], measures: {name: {mean, std}}});
    worst: index into `corners` of the worst corner, drawn thick with a diamond.
    """
    rows = [(i, c) for i, c in enumerate(corners) if measure in (c.get("measures") or {})]
    labels = [
        f"{str(c.get('process', '?')):>4} {_celsius(c.get('temperature'))} {_volts(c.get('supply'))}" for _, c in rows
    ]
    if ax is None:
        left = 0.3 + 0.062 * max((len(t) for t in labels), default=8)
        ax = new_axes(7.0, 0.75 + 0.125 * len(rows) + (0.2 if title else 0.0), (left, 0.2, 0.45, 0.3 if title else 0.1))
    limits_d = _scaled(limits, scale)
    lo, hi = np.inf, -np.inf
    with style():
        for y, (i, c) in enumerate(rows):
            m = c["measures"][measure]
            mu, sd = m.get("mean"), m.get("std") or 0.0
            if mu is None:
                continue
            a, b = (mu - 3 * sd) * scale, (mu + 3 * sd) * scale
            lo, hi = min(lo, a), max(hi, b)
            bad = i == worst
            ax.plot([a, b], [y, y], color=LIMIT if bad else SLATE, linewidth=2.6 if bad else 1.1, solid_capstyle="butt")
            ax.plot(
                [mu * scale],
                [y],
                linestyle="none",
                marker="D" if bad else "o",
                markersize=5.5 if bad else 3.5,
                markerfacecolor=LIMIT if bad else FILL,
                markeredgecolor=INK,
                markeredgewidth=0.6,
            )
        for y in range(1, len(rows)):  # a rule between process corners
            if rows[y][1].get("process") != rows[y - 1][1].get("process"):
                ax.axhline(y - 0.5, color=SLATE, linewidth=0.5, zorder=1)
        ax.set_yticks(np.arange(len(rows)), [label(t) for t in labels], fontsize=6.5, family="DejaVu Sans Mono")
        ax.set_ylim(len(rows) - 0.5, -0.5)
        if np.isfinite(lo):
            shown = _limits_in_view(limits_d, lo, hi)
            lo, hi = min([lo, *shown.values()]), max([hi, *shown.values()])
            ax.set_xlim(lo - 0.03 * (hi - lo or 1.0), hi + 0.03 * (hi - lo or 1.0))
            _shade_out_of_spec(ax, shown)
            _far_limits(ax, limits_d, shown, unit)
        text = f"{label(measure)}: mean \u00b1 3 sigma"
        ax.set_xlabel(f"{text} [{unit}]" if unit else text)
        ax.grid(False, axis="y")
        if title:
            ax.set_title(label(title))
        sns.despine(ax=ax)
    return ax


def _celsius(kelvin: float | None) -> str:
    return "" if kelvin is None else f"{kelvin - 273.15:4.0f}\u00b0C"


def _volts(volts: float | None) -> str:
    return "" if volts is None else f"{volts:5.3g} V"
