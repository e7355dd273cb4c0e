"""The unit-cell drawing of placement candidates as inline SVG: cells as filled, hatched squares with their letters,
each device's centroid marked. Colour and marker both tell the devices apart, so it reads in black and white.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from markupsafe import Markup

from mcmatch.draws.placement import cell_layout
from mcmatch.report.format import yield_text
from mcmatch.report.svg import Canvas, marker_markup

#: (fill, hatch, centroid marker) per device, in letter order; the matplotlib drawing uses the same.
DEVICE_STYLE = (
    ("#7c99b4", "////", "o"),
    ("#e3c58f", "....", "X"),
    ("#a9c8a0", "\\\\\\\\", "D"),
    ("#d4a5a5", "xx", "^"),
    ("#b9b0d6", "--", "s"),
    ("#c9d6df", "++", "v"),
)
DUMMY_STYLE = ("#eeeeee", "", None)
#: Cell drawn as this fraction of the pitch, leaving a gap between neighbours.
CELL_FILL = 0.86
#: Drawn size of one cell pitch [px of the viewBox], at most.
CELL_PX = 34.0


def candidate_svg(entry: Mapping, width: float = 560) -> Canvas:
    """One candidate (an entry of summary["placements"]: name, rows, centroids, layout {pitch [m], letters, dummy,
    origin}) drawn on its own canvas; the title names the candidate and its yield."""
    layout = entry["layout"]
    pitch = (float(layout["pitch"][0]), float(layout["pitch"][1]))
    letters: dict[str, str] = dict(layout["letters"])
    dummy = layout.get("dummy", "D")
    rows = list(entry["rows"])
    geometry = cell_layout(rows, pitch, layout.get("origin", "center"))
    n_rows, n_cols = geometry.shape
    legend_w = 190
    cell = min(CELL_PX, (width - legend_w - 20) / max(n_cols, 1) * 1.0)
    unit = cell / pitch[0]  # px per metre, the same along y (equal aspect)
    plot_w, plot_h = n_cols * cell, n_rows * pitch[1] * unit
    ax = Canvas(width, plot_h + 44, (10, width - 10 - plot_w, 10, 34))
    order = sorted(letters)
    style = {letter: DEVICE_STYLE[i % len(DEVICE_STYLE)] for i, letter in enumerate(order)}
    origin = geometry.positions.min(axis=0) if len(geometry.positions) else (0.0, 0.0)
    y = entry.get("yield") or {}
    caption = str(entry.get("name", ""))
    if isinstance(y, Mapping) and y.get("fraction") is not None:
        caption += f"  (yield {yield_text(y['fraction'])})"  # as the placement table writes it
    ax.heading(caption)
    ax.title = f"unit cells of placement {caption}: rows {' / '.join(rows)}"

    def to_px(x: float, yv: float) -> tuple[float, float]:
        return ax.x0 + (x - origin[0]) * unit + cell / 2, ax.y0 + (yv - origin[1]) * unit + pitch[1] * unit / 2

    w, h = cell * CELL_FILL, pitch[1] * unit * CELL_FILL
    for letter, (x, yv) in zip(geometry.letters, geometry.positions, strict=True):
        fill, _, _ = style.get(letter, DUMMY_STYLE) if letter != dummy else DUMMY_STYLE
        cx, cy = to_px(float(x), float(yv))
        cls = "cell dummy" if letter == dummy else "cell"
        ax.rect_px(cx - w / 2, cy - h / 2, w, h, cls, f' fill="{fill}"')
        ax.text(cx, cy + 4.5, letter, "cell-letter", "middle")
        ax.artists += 1
    centroids = entry.get("centroids") or {}
    items = []
    for i, letter in enumerate(order):
        name = letters[letter]
        fill, _, marker = style[letter]
        if name in centroids:
            cx, cy = to_px(*(float(v) for v in centroids[name]))
            ax.add(marker_markup(cx, cy, marker or "o", 13 - 2.5 * i, "centroid").replace("/>", f' fill="{fill}"/>'))
        items.append((marker or "o", fill, f"centroid of {letter} ({name})"))
    lx = ax.x1 + 18
    for i, (marker, fill, text) in enumerate(items):
        cy = ax.y0 + 8 + 17 * i
        ax.add(marker_markup(lx + 6, cy, marker, 9, "centroid").replace("/>", f' fill="{fill}"/>'))
        ax.text(lx + 18, cy + 4, text, "legend")
    return ax


def placement_drawing_svg(entries: Sequence[Mapping]) -> Markup:
    """Every candidate's drawing, one after another, as inline SVG markup."""
    return Markup("".join(str(candidate_svg(e).svg("placement")) for e in entries))
