"""The fine quantile histogram of a streamed measure: a fixed grid set from a pilot chunk, the values beyond it
kept exactly, bins merged pairwise (exactly) when those overflow. A quantile lies within one bin width of the exact
one."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

#: Bins of the quantile histogram of each measure.
HISTOGRAM_BINS = 1 << 15
#: The histogram spans the pilot's range widened by this fraction of it on each side.
HISTOGRAM_MARGIN = 0.5
#: Values beyond the histogram kept exactly, per measure, before the bins are coarsened.
OVERFLOW_CAP = 1 << 18


@dataclass(frozen=True)
class Grid:
    """Level-0 histogram bins: bin k covers [origin + k width, origin + (k + 1) width), 0 <= k < bins."""

    origin: float
    width: float
    bins: int = HISTOGRAM_BINS

    @classmethod
    def from_pilot(cls, values: np.ndarray, fallback: float = 0.0, bins: int = HISTOGRAM_BINS) -> Grid:
        """A grid over the pilot values' range widened by HISTOGRAM_MARGIN each side (around `fallback` if the
        pilot holds no finite value)."""
        v = np.asarray(values, dtype=float)
        v = v[np.isfinite(v)]
        lo, hi = (float(v.min()), float(v.max())) if v.size else (fallback, fallback)
        if not math.isfinite(lo):
            lo = hi = 0.0
        span = hi - lo
        if not span > 0:
            span = max(abs(lo) * 1e-9, 1e-300)
        origin = lo - HISTOGRAM_MARGIN * span
        return cls(origin=origin, width=(1.0 + 2.0 * HISTOGRAM_MARGIN) * span / bins, bins=bins)

    def position(self, values: np.ndarray) -> np.ndarray:
        """Position of each value on the level-0 grid in bins (its bin is the floor) [1]."""
        return (np.asarray(values, dtype=float) - self.origin) * (1.0 / self.width)

    def index(self, values: np.ndarray) -> np.ndarray:
        """Level-0 bin index of each (finite) value, int64; may lie outside 0..bins-1."""
        return np.clip(np.floor(self.position(values)), -(2.0**62), 2.0**62).astype(np.int64)


@dataclass
class HistogramPart:
    """One chunk's histogram on a level-0 grid: counts of bins offset.., and the values beyond the grid."""

    offset: int
    counts: np.ndarray
    outside: np.ndarray

    @classmethod
    def of(cls, values: np.ndarray, grid: Grid, all_finite: bool = False) -> HistogramPart:
        v = np.asarray(values, dtype=float)
        if not all_finite:
            v = v[np.isfinite(v)]
        t = grid.position(v)
        if v.size and t.min() >= 0.0 and t.max() < grid.bins:  # the usual case: nothing beyond the grid
            counts = np.bincount(t.astype(np.int64), minlength=grid.bins)  # truncation is the floor here
            nz = np.flatnonzero(counts)
            return cls(int(nz[0]), counts[nz[0] : nz[-1] + 1].astype(np.int64), v[:0])
        v = v[np.isfinite(v)]
        k = grid.index(v)
        inside = (k >= 0) & (k < grid.bins)
        counts = np.bincount(k[inside], minlength=grid.bins)
        nz = np.flatnonzero(counts)
        if nz.size == 0:
            return cls(0, np.zeros(0, dtype=np.int64), v[~inside])
        return cls(int(nz[0]), counts[nz[0] : nz[-1] + 1].astype(np.int64), v[~inside])


@dataclass
class Histogram:
    """Merged histogram: bins at `level` (width grid.width * 2**level), the window's first bin index `first` at that
    level, and the finite values beyond the window kept exactly."""

    grid: Grid
    level: int = 0
    first: int = 0
    counts: np.ndarray = field(default=None)  # type: ignore[assignment]
    outside: list[np.ndarray] = field(default_factory=list)
    n_outside: int = 0

    def __post_init__(self) -> None:
        if self.counts is None:
            self.counts = np.zeros(self.grid.bins, dtype=np.int64)

    @property
    def bin_width(self) -> float:
        return self.grid.width * 2.0**self.level

    def add(self, part: HistogramPart) -> None:
        if part.counts.size:
            k = (part.offset + np.arange(part.counts.size, dtype=np.int64)) >> self.level
            j = k - self.first  # the level-0 window always lies inside the current one
            if self.level == 0 and self.first == 0:
                self.counts[part.offset : part.offset + part.counts.size] += part.counts
            else:
                np.add.at(self.counts, j, part.counts)
        if part.outside.size:
            self._add_values(part.outside)

    def _add_values(self, values: np.ndarray) -> None:
        j = (self.grid.index(values) >> self.level) - self.first
        inside = (j >= 0) & (j < self.grid.bins)
        if inside.any():
            np.add.at(self.counts, j[inside], 1)
        rest = values[~inside]
        if rest.size:
            self.outside.append(rest)
            self.n_outside += rest.size
            if self.n_outside > OVERFLOW_CAP:
                self._coarsen()

    def _coarsen(self) -> None:
        """Merge bins pairwise (raising the level) until every kept outside value fits in the window."""
        values = np.concatenate(self.outside)
        k0 = self.grid.index(values)
        lo = min(int(k0.min()), 0)
        hi = max(int(k0.max()), self.grid.bins - 1)
        level = self.level + 1
        while (hi >> level) - (lo >> level) + 1 > self.grid.bins:
            level += 1
        used = (hi >> level) - (lo >> level) + 1
        first = (lo >> level) - (self.grid.bins - used) // 2
        old = (self.first + np.arange(self.grid.bins, dtype=np.int64)) >> (level - self.level)
        counts = np.zeros(self.grid.bins, dtype=np.int64)
        np.add.at(counts, old - first, self.counts)
        self.level, self.first, self.counts = level, first, counts
        self.outside, self.n_outside = [], 0
        self._add_values(values)

    def quantiles(self, qs: tuple[float, ...], minimum: float, maximum: float) -> list[float | None]:
        """Quantiles (numpy's linear interpolation of order statistics), each within one bin width of the exact one;
        values beyond the bins are exact. minimum, maximum: the exact extremes (estimates are clipped to them)."""
        outside = np.sort(np.concatenate(self.outside)) if self.outside else np.zeros(0)
        edge = self.grid.origin + self.first * self.bin_width
        top = edge + self.grid.bins * self.bin_width
        below, above = outside[outside < edge], outside[outside >= top]
        cum = np.cumsum(self.counts)
        total = below.size + int(cum[-1]) + above.size
        if total == 0:
            return [None for _ in qs]

        def order_statistic(i: int) -> float:
            if i < below.size:
                return float(below[i])
            r = i - below.size
            if r >= cum[-1]:
                return float(above[r - int(cum[-1])])
            b = int(np.searchsorted(cum, r, side="right"))
            before = int(cum[b - 1]) if b else 0
            within = (r - before + 0.5) / int(self.counts[b])
            return float(min(max(edge + (b + within) * self.bin_width, minimum), maximum))

        out: list[float | None] = []
        for q in qs:
            h = q * (total - 1)
            i = int(math.floor(h))
            value = order_statistic(i)
            if h > i and i + 1 < total:
                value += (h - i) * (order_statistic(i + 1) - value)
            out.append(value)
        return out
