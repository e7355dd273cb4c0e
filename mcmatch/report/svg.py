"""A small SVG writer for the report's figures: inline SVG with real text, no external reference, deterministic.

A :class:`Canvas` is one plot area inside a fixed viewBox [px of the viewBox]: margins around it, a linear or log
scale per axis, and elements appended as escaped SVG markup. Styles are CSS classes of the report's stylesheet (the
SVG is inlined into the page), so a figure stays small and its text is searchable, selectable and read by screen
readers through its <title> and <desc>. Hatching is drawn as explicit line segments: the report holds no ``url()``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence

import numpy as np
from markupsafe import Markup, escape

#: Tick and legend text size [px of the viewBox]; labels and titles are a little larger (see style.css).
FONT = 12.0
#: Charts wider than this [px of the viewBox] keep a width of 500 px on a narrow screen (style.css) and scroll
#: inside their figure rather than shrink their text below about 10 px.
NARROW = 420.0
#: Average advance of one character of FONT-sized sans text [px], for margins sized without a layout engine.
CHAR = 0.6 * FONT


def _f(v: float) -> str:
    """A coordinate with one decimal, without a trailing ".0" (smaller files, the same picture)."""
    text = f"{v:.1f}"
    return text[:-2] if text.endswith(".0") else text


def nice_ticks(lo: float, hi: float, count: int = 6) -> list[float]:
    """About `count` round tick values (steps 1, 2, 2.5, 5 x 10^k) inside [lo, hi]."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo] if math.isfinite(lo) else []
    raw = (hi - lo) / max(count, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 2.5, 5, 10) if m * power >= raw * 0.999)
    first = math.ceil(lo / step - 1e-9)
    ticks = [k * step for k in range(first, int(math.floor(hi / step + 1e-9)) + 1)]
    return [0.0 if abs(t) < step * 1e-9 else t for t in ticks]


def tick_labels(ticks: Sequence[float]) -> list[str]:
    """Tick texts with just enough decimals to tell the ticks apart: [0, 2.5, 5] -> ["0", "2.5", "5"]."""
    if len(ticks) < 2:
        return [f"{t:.4g}" for t in ticks]
    step = min(abs(b - a) for a, b in zip(ticks, ticks[1:], strict=False)) or 1.0
    decimals = max(0, -math.floor(math.log10(step) + 1e-9))
    if round(step * 10**decimals, 6) % 1:  # a 2.5 step needs one more
        decimals += 1
    texts = [f"{t:.{decimals}f}" for t in ticks]
    return ["0" if float(x) == 0 else x for x in texts]


def log_ticks(lo: float, hi: float) -> list[float]:
    """1, 2, 5 x 10^k inside [lo, hi] (only 1 x 10^k when that gives more than nine ticks)."""
    if lo <= 0 or hi <= lo:
        return []
    decades = range(math.floor(math.log10(lo)), math.ceil(math.log10(hi)) + 1)
    ticks = [m * 10.0**k for k in decades for m in (1, 2, 5) if lo * 0.999 <= m * 10.0**k <= hi * 1.001]
    if len(ticks) > 9:
        ticks = [t for t in ticks if math.isclose(10 ** round(math.log10(t)), t)]
    return ticks


def sparse_log_ticks(lo: float, hi: float, most: int = 6) -> list[float]:
    """Log ticks that stay readable: 1-2-5 per decade, decades only when that gives more than `most`."""
    ticks = log_ticks(lo, hi)
    decades = [t for t in ticks if math.isclose(10 ** round(math.log10(t)), t)]
    return decades if len(ticks) > most and len(decades) >= 2 else ticks


class Scale:
    """Data [display units] to pixels [px]: linear or log10, from (lo, hi) onto (a, b)."""

    def __init__(self, lo: float, hi: float, a: float, b: float, log: bool = False) -> None:
        self.log = log and lo > 0 and hi > 0
        self.lo, self.hi = (math.log10(lo), math.log10(hi)) if self.log else (lo, hi)
        if not (math.isfinite(self.lo) and math.isfinite(self.hi)):
            self.lo, self.hi = 0.0, 1.0
        if self.hi == self.lo:  # one value: centre it in a unit-wide range (hi < lo draws the axis reversed)
            self.lo, self.hi = self.lo - 0.5 * (abs(self.lo) or 1.0), self.hi + 0.5 * (abs(self.hi) or 1.0)
        self.a, self.b = a, b
        self.lo_data, self.hi_data = lo, hi

    def __call__(self, v: float | np.ndarray) -> np.ndarray:
        v = np.asarray(v, dtype=float)
        if self.log:
            v = np.log10(np.maximum(v, 1e-300))
        return self.a + (v - self.lo) / (self.hi - self.lo) * (self.b - self.a)

    def px(self, v: float) -> float:
        return float(self(v))


class Canvas:
    """One figure: a viewBox of `width` x `height` [px] with a plot area inside `margins` (left, right, bottom, top)."""

    def __init__(
        self, width: float, height: float, margins: tuple[float, float, float, float] = (50, 12, 40, 24)
    ) -> None:
        self.width, self.height = float(width), float(height)
        left, right, bottom, top = margins
        self.x0, self.x1 = float(left), float(width - right)
        self.y0, self.y1 = float(top), float(height - bottom)  # y0 is the top edge
        self.parts: list[str] = []
        self.x = Scale(0.0, 1.0, self.x0, self.x1)
        self.y = Scale(0.0, 1.0, self.y1, self.y0)
        self.title = ""
        self.desc = ""
        self.artists = 0  # elements drawn in data coordinates (so a caller can tell an empty figure)

    # ------------------------------------------------------------------------------------------------ setup
    def set_x(self, lo: float, hi: float, log: bool = False) -> None:
        self.x = Scale(lo, hi, self.x0, self.x1, log)

    def set_y(self, lo: float, hi: float, log: bool = False) -> None:
        self.y = Scale(lo, hi, self.y1, self.y0, log)

    def has_data(self) -> bool:
        return self.artists > 0

    # ------------------------------------------------------------------------------------------------ elements
    def add(self, markup: str) -> None:
        self.parts.append(markup)

    def path(self, d: str, cls: str) -> None:
        if d:
            self.add(f'<path class="{cls}" d="{d}"/>')

    def line(self, xs: Iterable[float], ys: Iterable[float], cls: str) -> None:
        """A polyline through data points (non-finite points break it)."""
        px, py = self.x(np.asarray(list(xs), float)), self.y(np.asarray(list(ys), float))
        d, pen = [], "M"
        for a, b in zip(px, py, strict=True):
            if not (math.isfinite(a) and math.isfinite(b)):
                pen = "M"
                continue
            d.append(f"{pen}{_f(a)} {_f(b)}")
            pen = "L"
        self.path("".join(d), cls)
        self.artists += 1

    def vline(self, x: float, cls: str) -> None:
        p = self.x.px(x)
        self.path(f"M{_f(p)} {_f(self.y0)}V{_f(self.y1)}", cls)
        self.artists += 1

    def hline(self, y: float, cls: str) -> None:
        p = self.y.px(y)
        self.path(f"M{_f(self.x0)} {_f(p)}H{_f(self.x1)}", cls)
        self.artists += 1

    def rect_px(self, x: float, y: float, w: float, h: float, cls: str, extra: str = "") -> None:
        self.add(f'<rect class="{cls}" x="{_f(x)}" y="{_f(y)}" width="{_f(w)}" height="{_f(h)}"{extra}/>')

    def marker(self, x: float, y: float, shape: str, size: float, cls: str) -> None:
        """A marker at a data point: "o" circle, "D" diamond, "*" star, "s" square, "^" triangle [size px]."""
        px, py = self.x.px(x), self.y.px(y)
        self.add(marker_markup(px, py, shape, size, cls))
        self.artists += 1

    def text(self, x: float, y: float, text: object, cls: str = "", anchor: str = "start", extra: str = "") -> None:
        """Text at pixel position (x, y) [px]; anchor "start", "middle" or "end"; the text is escaped."""
        a = f' text-anchor="{anchor}"' if anchor != "start" else ""
        c = f' class="{cls}"' if cls else ""
        self.add(f'<text x="{_f(x)}" y="{_f(y)}"{a}{c}{extra}>{escape(str(text))}</text>')

    def hatch_px(self, x0: float, x1: float, y0: float, y1: float, cls: str = "out", spacing: float = 6.0) -> None:
        """A pale box with 45 degree hatching lines from (x0, y0) to (x1, y1) [px], for a region outside the spec."""
        x0, x1, y0, y1 = min(x0, x1), max(x0, x1), min(y0, y1), max(y0, y1)
        if x1 - x0 < 0.5 or y1 - y0 < 0.5:
            return
        self.rect_px(x0, y0, x1 - x0, y1 - y0, f"{cls}-fill")
        d = []
        c = x0 - (y1 - y0)  # lines x - (y1 - y) = c rising to the right
        while c < x1:
            ax, ay = max(x0, c), y1 - max(0.0, x0 - c)
            bx, by = min(x1, c + (y1 - y0)), y1 - min(y1 - y0, x1 - c)
            if bx > ax:
                d.append(f"M{_f(ax)} {_f(ay)}L{_f(bx)} {_f(by)}")
            c += spacing
        self.path("".join(d), f"{cls}-hatch")

    def hatch_x(self, a: float, b: float, cls: str = "out") -> None:
        """Hatch the full-height band between data x = a and b (clipped to the plot)."""
        pa, pb = sorted((self.x.px(a), self.x.px(b)))
        self.hatch_px(max(pa, self.x0), min(pb, self.x1), self.y0, self.y1, cls)

    def hatch_y(self, a: float, b: float, cls: str = "out") -> None:
        pa, pb = sorted((self.y.px(a), self.y.px(b)))
        self.hatch_px(self.x0, self.x1, max(pa, self.y0), min(pb, self.y1), cls)

    # ------------------------------------------------------------------------------------------------ axes
    def x_axis(self, ticks: Sequence[float], labels: Sequence[str] | None = None, label: str = "") -> None:
        labels = tick_labels(ticks) if labels is None else labels
        grid, marks = [], []
        for t, text in zip(ticks, labels, strict=True):
            p = self.x.px(t)
            if self.x0 - 0.5 <= p <= self.x1 + 0.5:
                grid.append(f"M{_f(p)} {_f(self.y0)}V{_f(self.y1)}")
                marks.append(f"M{_f(p)} {_f(self.y1)}v4")
                self.text(p, self.y1 + 16, text, "tick", "middle")
        self.path("".join(grid), "grid")
        self.path(f"M{_f(self.x0)} {_f(self.y1)}H{_f(self.x1)}" + "".join(marks), "axis")
        if label:
            self.text((self.x0 + self.x1) / 2, self.y1 + 33, label, "label", "middle")

    def y_axis(
        self, ticks: Sequence[float], labels: Sequence[str] | None = None, label: str = "", grid: bool = True
    ) -> None:
        labels = tick_labels(ticks) if labels is None else labels
        lines, marks = [], []
        for t, text in zip(ticks, labels, strict=True):
            p = self.y.px(t)
            if self.y0 - 0.5 <= p <= self.y1 + 0.5:
                lines.append(f"M{_f(self.x0)} {_f(p)}H{_f(self.x1)}")
                marks.append(f"M{_f(self.x0)} {_f(p)}h-4")
                self.text(self.x0 - 6, p + 4, text, "tick", "end")
        if grid:
            self.path("".join(lines), "grid")
        self.path(f"M{_f(self.x0)} {_f(self.y0)}V{_f(self.y1)}" + "".join(marks), "axis")
        if label:
            x, y = 13.0, (self.y0 + self.y1) / 2
            self.text(x, y, label, "label", "middle", f' transform="rotate(-90 {_f(x)} {_f(y)})"')

    def heading(self, text: str) -> None:
        """The figure's visible title, top left."""
        self.text(4, 15, text, "heading")

    def legend(self, items: Sequence[tuple[str, str, str]], x: float, y: float, step: float = 17.0) -> None:
        """Legend rows at (x, y) [px]: (kind "line" / "box" / "hatch" / marker shape, css class, text)."""
        for i, (kind, cls, text) in enumerate(items):
            cy = y + i * step
            if kind == "line":
                self.path(f"M{_f(x)} {_f(cy)}h22", cls)
            elif kind == "box":
                self.rect_px(x, cy - 5, 22, 10, cls)
            elif kind == "hatch":
                self.hatch_px(x, x + 22, cy - 5, cy + 5, cls)
            else:
                self.add(marker_markup(x + 11, cy, kind, 8, cls))
            self.text(x + 28, cy + 4, text, "legend")

    # ------------------------------------------------------------------------------------------------ output
    def svg(self, cls: str = "") -> Markup:
        """The figure as inline SVG markup (safe: every text in it was escaped when added)."""
        classes = " ".join(c for c in ("chart", "wide" if self.width > NARROW else "", cls) if c)
        head = (
            f'<svg class="{classes}" viewBox="0 0 {_f(self.width)} {_f(self.height)}" '
            f'width="{_f(self.width)}" height="{_f(self.height)}" '
            f'style="max-width: {_f(self.width * 1.3)}px" role="img">'
        )
        meta = f"<title>{escape(self.title)}</title>" + (f"<desc>{escape(self.desc)}</desc>" if self.desc else "")
        return Markup(head + meta + "".join(self.parts) + "</svg>")


def marker_markup(px: float, py: float, shape: str, size: float, cls: str) -> str:
    """SVG of one marker centred at (px, py) [px]."""
    r = size / 2
    if shape == "o":
        return f'<circle class="{cls}" cx="{_f(px)}" cy="{_f(py)}" r="{_f(r)}"/>'
    if shape == "s":
        return f'<rect class="{cls}" x="{_f(px - r)}" y="{_f(py - r)}" width="{_f(size)}" height="{_f(size)}"/>'
    if shape == "*":
        pts = []
        for k in range(10):
            rad = r * (1.0 if k % 2 == 0 else 0.42)
            angle = math.pi / 2 + k * math.pi / 5
            pts.append(f"{_f(px + rad * math.cos(angle))},{_f(py - rad * math.sin(angle))}")
        return f'<polygon class="{cls}" points="{" ".join(pts)}"/>'
    if shape in "^v":
        tip, base = (py - r, py + r) if shape == "^" else (py + r, py - r)
        return f'<polygon class="{cls}" points="{_f(px)},{_f(tip)} {_f(px + r)},{_f(base)} {_f(px - r)},{_f(base)}"/>'
    if shape == "X":
        q = r * 0.8
        return (
            f'<path class="{cls} cross" d="M{_f(px - q)} {_f(py - q)}L{_f(px + q)} {_f(py + q)}'
            f'M{_f(px - q)} {_f(py + q)}L{_f(px + q)} {_f(py - q)}"/>'
        )
    # "D": a diamond
    points = f"{_f(px)},{_f(py - r)} {_f(px + r)},{_f(py)} {_f(px)},{_f(py + r)} {_f(px - r)},{_f(py)}"
    return f'<polygon class="{cls}" points="{points}"/>'
