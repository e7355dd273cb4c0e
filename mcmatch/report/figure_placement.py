"""Drawings of placement candidates: unit cells as coloured, hatched squares with their letters, centroids marked.

Data in (one entry of summary["placements"]), ``ax=None``, return ``ax``. Matplotlib is imported here only, with the
Agg backend; figures are built on :class:`matplotlib.figure.Figure` directly (no pyplot state), for
``mcmatch placements --plot`` (``fig.savefig`` to PNG or SVG). The report draws the same cells as inline SVG with
:mod:`mcmatch.report.placement_grid`, which holds the shared palette. Colour and hatch both tell the devices apart, so
the drawing still reads in black and white.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import matplotlib

matplotlib.use("Agg")

from matplotlib.axes import Axes  # noqa: E402 - the backend must be chosen first
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.patches import Rectangle  # noqa: E402

from mcmatch.draws.placement import cell_layout  # noqa: E402
from mcmatch.report.placement_grid import CELL_FILL, DEVICE_STYLE, DUMMY_STYLE  # noqa: E402 - one palette

INK = "#1d2b3a"
SLATE = "#5a6b7d"
MICRON = 1e6


def plot_placement(candidate_data: Mapping, ax: Axes | None = None) -> Axes:
    """Draw one candidate: every cell at its position [um], letters inside, each device's centroid marked.

    candidate_data: an entry of summary["placements"] (keys name, rows, centroids, layout {pitch [m], letters,
    dummy, origin}; measures and yield are used for the caption when present).
    """
    if ax is None:
        fig = Figure(figsize=(4.0, 2.4), layout="constrained")
        ax = fig.add_subplot(1, 1, 1)
    layout = candidate_data["layout"]
    pitch = tuple(float(p) for p in layout["pitch"])
    letters: dict[str, str] = dict(layout["letters"])
    dummy = layout.get("dummy", "D")
    geometry = cell_layout(list(candidate_data["rows"]), pitch, layout.get("origin", "center"))
    styles = {letter: DEVICE_STYLE[i % len(DEVICE_STYLE)] for i, letter in enumerate(sorted(letters))}
    w, h = pitch[0] * CELL_FILL * MICRON, pitch[1] * CELL_FILL * MICRON
    for letter, (x, y) in zip(geometry.letters, geometry.positions * MICRON, strict=True):
        fill, hatch, _ = styles.get(letter, DUMMY_STYLE) if letter != dummy else DUMMY_STYLE
        ax.add_patch(
            Rectangle(
                (x - w / 2, y - h / 2),
                w,
                h,
                facecolor=fill,
                edgecolor=SLATE if letter != dummy else "#9a9a9a",
                hatch=hatch,
                linewidth=0.8,
                linestyle="-" if letter != dummy else (0, (2, 2)),
                zorder=1,
            )
        )
        ax.text(x, y, letter, ha="center", va="center", fontsize=9, fontweight="bold", color=INK, zorder=3)
    centroids = candidate_data.get("centroids", {})
    for i, letter in enumerate(sorted(letters)):
        name = letters[letter]
        if name not in centroids:
            continue
        cx, cy = (float(v) * MICRON for v in centroids[name])
        fill, _, marker = styles[letter]
        ax.plot(
            cx,
            cy,
            marker=marker,
            markersize=11 - 2.5 * i,
            markerfacecolor=fill,
            markeredgecolor=INK,
            markeredgewidth=1.1,
            linestyle="none",
            zorder=4 + i,
            label=f"centroid of {letter} ({name})",
        )
    pos = geometry.positions * MICRON
    if len(pos):
        pad_x, pad_y = pitch[0] * MICRON * 0.7, pitch[1] * MICRON * 0.7
        ax.set_xlim(pos[:, 0].min() - pad_x, pos[:, 0].max() + pad_x)
        ax.set_ylim(pos[:, 1].min() - pad_y, pos[:, 1].max() + pad_y)
    ax.set_aspect("equal")
    ax.set_xlabel("x [µm]")
    ax.set_ylabel("y [µm]")
    ax.grid(False)
    ax.set_title(_caption(candidate_data), fontsize=9, loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7, frameon=False, borderaxespad=0.0)
    return ax


def _caption(entry: Mapping) -> str:
    title = str(entry.get("name", ""))
    y = entry.get("yield") or {}
    if y.get("fraction") is not None:
        title += f"  (yield {y['fraction']:.4f})"
    return title


def placement_figure(entries: Sequence[Mapping], width: float = 6.4) -> Figure:
    """One figure with every candidate drawn by :func:`plot_placement`, one row each."""
    entries = list(entries)
    heights = [0.9 + 0.45 * len(entry.get("rows", [""])) for entry in entries] or [1.0]
    fig = Figure(figsize=(width, sum(heights) + 0.3), layout="constrained")
    axes = fig.subplots(max(1, len(entries)), 1, squeeze=False, height_ratios=heights)[:, 0]
    for entry, ax in zip(entries, axes, strict=False):
        plot_placement(entry, ax=ax)
    return fig
