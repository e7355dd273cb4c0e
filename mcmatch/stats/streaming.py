"""Statistics of a run streamed chunk by chunk in bounded memory: mergeable accumulators, no solving.

A worker turns each chunk's columns into a small :class:`ChunkPartial` (:class:`ChunkReducer`); the main process
folds the partials in sample order (:class:`RunAccumulator`). What is kept:

- counts, spec pass counts, joint passes, failed solves, the first failed samples: exact;
- moments: count, mean, M2 (sum of squared deviations), min, max per block of :data:`STAT_BLOCK` samples, folded in
  block order with Chan, Golub and LeVeque's pairwise update. Blocks sit at fixed sample indices, so the result does
  not depend on how the run was cut into chunks (chunks start at multiples of STAT_BLOCK) or on the worker count;
- quantiles: exact (numpy's linear interpolation) from the kept rows when every sample is kept; otherwise from a fine
  histogram of :data:`HISTOGRAM_BINS` bins whose range is set from a pilot chunk, with the values beyond it kept
  exactly (few: a fresh sample falls beyond the extremes of an n-sample pilot with probability 2/(n + 1)). If those
  ever exceed :data:`OVERFLOW_CAP`, the bins are merged pairwise (exactly: the grid doubles in place) until they fit.
  A histogram quantile lies within one bin width of the exact one; the summary names the method and the bin width.
- replicate moments and joint passes, per group of samples i % R (R = ``ChunkReducer.replicates``): with Sobol'
  sampling each group is one independent scrambling, and the spread of the groups' estimates is the randomised-QMC
  error estimate (:func:`sampling_summary`). Moments per (block, group), folded in block order: chunking-independent.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from mcmatch.config.schema import Limits
from mcmatch.stats.compliance import out_of_saturation_count
from mcmatch.stats.describe import QUANTILES, quantile_key
from mcmatch.stats.yields import passes

#: Samples per moment partial. Chunk boundaries must be multiples of it for chunking-independent moments.
STAT_BLOCK = 8192
#: Bins of the quantile histogram of each measure.
HISTOGRAM_BINS = 1 << 15
#: The histogram spans the pilot's range widened by this fraction of it on each side.
HISTOGRAM_MARGIN = 0.5
#: Values beyond the histogram kept exactly, per measure, before the bins are coarsened.
OVERFLOW_CAP = 1 << 18
#: Failed samples whose parameters are listed in the summary, as examples.
FAILED_EXAMPLES = 5


# --------------------------------------------------------------------------------------------- moments
@dataclass
class Moments:
    """count, mean, M2 = sum (x - mean)^2, min and max of the finite values seen; mergeable."""

    count: int = 0
    mean: float = 0.0
    m2: float = 0.0
    min: float = math.inf
    max: float = -math.inf

    @classmethod
    def of(cls, values: np.ndarray) -> Moments:
        v = np.asarray(values, dtype=float)
        v = v[np.isfinite(v)]
        if v.size == 0:
            return cls()
        mean = float(v.mean())
        return cls(int(v.size), mean, float(((v - mean) ** 2).sum()), float(v.min()), float(v.max()))

    def merge(self, other: Moments) -> Moments:
        """Chan, Golub, LeVeque (1979) pairwise update; exact for counts, min and max."""
        if other.count == 0:
            return self
        if self.count == 0:
            return Moments(other.count, other.mean, other.m2, other.min, other.max)
        n = self.count + other.count
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.count / n)
        m2 = self.m2 + other.m2 + delta * delta * (self.count * other.count / n)
        return Moments(n, mean, m2, min(self.min, other.min), max(self.max, other.max))

    @property
    def std(self) -> float | None:
        """Sample standard deviation (ddof = 1); 0 for a single value, None for none."""
        if self.count == 0:
            return None
        return math.sqrt(max(self.m2, 0.0) / (self.count - 1)) if self.count > 1 else 0.0


def block_starts(start: int, stop: int, block: int = STAT_BLOCK) -> np.ndarray:
    """Offsets (from `start`) where the block-aligned pieces of samples start..stop begin (blocks at multiples of
    `block` in the run's sample index)."""
    edges = np.arange(-(-start // block) * block, stop, block, dtype=np.int64)
    if edges.size == 0 or edges[0] != start:
        edges = np.concatenate([np.array([start], dtype=np.int64), edges])
    return (edges - start).astype(np.intp)


def block_moments(values: np.ndarray, starts: np.ndarray, all_finite: bool = False) -> tuple[np.ndarray, ...]:
    """(count, mean, m2, min, max) arrays, one entry per block starting at offsets `starts`; finite values only
    (`all_finite`: the caller knows there is no other, which saves the masking)."""
    v = np.asarray(values, dtype=float)
    lengths = np.diff(np.append(starts, len(v)))
    sums = np.add.reduceat(v, starts) if all_finite else None
    if sums is not None and np.isfinite(sums).all():  # a NaN or inf would show in its block's sum
        means = sums / lengths
        dev = v - np.repeat(means, lengths)
        return (
            lengths.astype(np.int64),
            means,
            np.add.reduceat(dev * dev, starts),
            np.minimum.reduceat(v, starts),
            np.maximum.reduceat(v, starts),
        )
    finite = np.isfinite(v)
    counts = np.add.reduceat(finite.astype(np.int64), starts)
    sums = np.add.reduceat(np.where(finite, v, 0.0), starts)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = np.where(counts > 0, sums / np.maximum(counts, 1), 0.0)
    dev = np.where(finite, v - np.repeat(means, lengths), 0.0)
    m2 = np.add.reduceat(dev * dev, starts)
    mins = np.minimum.reduceat(np.where(finite, v, np.inf), starts)
    maxs = np.maximum.reduceat(np.where(finite, v, -np.inf), starts)
    return counts, means, m2, mins, maxs


def fold_blocks(total: Moments, blocks: tuple[np.ndarray, ...]) -> Moments:
    """Fold per-block moments into `total`, in block order."""
    for c, mean, m2, lo, hi in zip(*(b.tolist() for b in blocks), strict=True):
        if c:
            total = total.merge(Moments(int(c), mean, m2, lo, hi))
    return total


def replicate_groups(start: int, n: int, starts: np.ndarray, replicates: int) -> np.ndarray:
    """Group of each of n samples from `start` on: block * replicates + (sample index % replicates), blocks as
    given by `starts` (:func:`block_starts`)."""
    block = np.repeat(np.arange(len(starts), dtype=np.int64), np.diff(np.append(starts, n)))
    return block * replicates + (start + np.arange(n, dtype=np.int64)) % replicates


def replicate_block_moments(
    values: np.ndarray, start: int, starts: np.ndarray, replicates: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(count, mean, m2) of the finite values of samples start.. per block (offsets `starts`) and group
    i % replicates, each (n_blocks, replicates).

    A whole block of finite values (the usual case) is reduced as a (rows, replicates) array; any other block
    through :func:`replicate_moments`. The choice depends on the block alone, so the numbers do not depend on the
    chunk it came in."""
    v = np.asarray(values, dtype=float)
    n_blocks, rr = len(starts), int(replicates)
    lengths = np.diff(np.append(starts, len(v)))
    full = 0  # leading whole blocks of STAT_BLOCK samples starting at a multiple of rr
    if start % rr == 0 and STAT_BLOCK % rr == 0:
        while full < n_blocks and lengths[full] == STAT_BLOCK:
            full += 1
    counts = np.zeros((n_blocks, rr), dtype=np.int64)
    means = np.zeros((n_blocks, rr))
    m2 = np.zeros((n_blocks, rr))
    slow = list(range(full, n_blocks))
    if full:
        rows = STAT_BLOCK // rr
        cube = v[: full * STAT_BLOCK].reshape(full, rows, rr)
        with np.errstate(invalid="ignore", over="ignore"):
            means[:full] = cube.sum(axis=1) * (1.0 / rows)
            dev = cube - means[:full, None, :]
            m2[:full] = np.einsum("brk,brk->bk", dev, dev)
        counts[:full] = rows
        # a block holding a failed sample (NaN) shows in its m2; it goes the masked way
        slow = [int(b) for b in np.flatnonzero(~np.isfinite(m2[:full]).all(axis=1))] + slow
    for b in slow:
        lo = int(starts[b])
        part = v[lo : lo + int(lengths[b])]
        groups = (start + lo + np.arange(part.size, dtype=np.int64)) % rr
        counts[b], means[b], m2[b] = replicate_moments(part, groups, rr)
    return counts, means, m2


def replicate_moments(
    values: np.ndarray, groups: np.ndarray, n_groups: int, all_finite: bool = False
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(count, mean, m2) of the finite values per group (:func:`replicate_groups`), each (n_groups,)."""
    v = np.asarray(values, dtype=float)
    finite = None if all_finite else np.isfinite(v)
    if finite is not None and finite.all():
        finite = None
    if finite is None:
        counts = np.bincount(groups, minlength=n_groups).astype(np.int64)
        sums = np.bincount(groups, weights=v, minlength=n_groups)
    else:
        counts = np.bincount(groups[finite], minlength=n_groups).astype(np.int64)
        sums = np.bincount(groups, weights=np.where(finite, v, 0.0), minlength=n_groups)
    means = sums / np.maximum(counts, 1)
    dev = v - means[groups]
    if finite is not None:
        dev = np.where(finite, dev, 0.0)
    return counts, means, np.bincount(groups, weights=dev * dev, minlength=n_groups)


# --------------------------------------------------------------------------------------------- histogram
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


# --------------------------------------------------------------------------------------------- chunk partials
@dataclass
class ChunkPartial:
    """Everything the run keeps of one chunk: a few numbers per measure, spec counts and the kept rows."""

    start: int
    stop: int
    failed: int
    retried: int
    moments: dict[str, tuple[np.ndarray, ...]]
    histograms: dict[str, HistogramPart]
    spec_passed: dict[str, int]
    joint_passed: int
    failed_examples: list[dict]
    kept: dict[str, np.ndarray] | None
    # per (block, group i % replicates), each (n_blocks, replicates): (count, mean, m2) of each measure
    replicate_moments: dict[str, tuple[np.ndarray, ...]] = field(default_factory=dict)
    replicate_passed: np.ndarray | None = None  # joint passes per group (replicates,)
    replicate_total: np.ndarray | None = None  # samples per group (replicates,)
    out_of_saturation: int = 0  # samples with any device below zero headroom (stats/compliance.py)


@dataclass(frozen=True)
class ChunkReducer:
    """Picklable: turns one chunk's columns (run.chunks.run_chunk) into a ChunkPartial, in the worker that solved it.

    measures: measure names; specs: {measure: Limits}; keep: rows with sample index < keep are returned whole;
    grids: {measure: Grid} for the quantile histograms (None: no histogram, quantiles come from kept rows);
    replicates: groups i % replicates with their own moments and joint passes (1: none).
    """

    measures: tuple[str, ...]
    specs: dict[str, Limits]
    keep: int
    grids: dict[str, Grid] | None = None
    replicates: int = 1

    def __call__(self, columns: dict[str, np.ndarray]) -> ChunkPartial:
        sample = columns["sample"]
        start, stop = int(sample[0]), int(sample[-1]) + 1
        converged = np.asarray(columns["converged"], dtype=bool)
        starts = block_starts(start, stop)
        all_finite = bool(converged.all())  # the engine sets a measure NaN exactly where a sample failed
        joint = converged.copy()
        spec_passed = {}
        for name, limits in self.specs.items():
            ok = passes(columns[name], limits) & converged
            joint &= ok
            spec_passed[name] = int(ok.sum())
        failed_rows = np.flatnonzero(~converged)[:FAILED_EXAMPLES]
        keys = [k for k in columns if k == "sample" or k.startswith(("dvth_", "dbeta_"))]
        examples = [
            {k: int(columns[k][i]) if k == "sample" else float(columns[k][i]) for k in keys} for i in failed_rows
        ]
        rep_moments: dict[str, tuple[np.ndarray, ...]] = {}
        rep_passed = rep_total = None
        rr = int(self.replicates)
        if rr > 1:
            for m in self.measures:
                rep_moments[m] = replicate_block_moments(columns[m], start, starts, rr)
            first = start + (np.arange(rr) - start) % rr  # first sample of each group in the chunk
            rep_total = np.maximum(0, (stop - 1 - first) // rr + 1).astype(np.int64)
            failing = start + np.flatnonzero(~joint)
            rep_passed = rep_total - np.bincount(failing % rr, minlength=rr).astype(np.int64)
        kept = None
        if start < self.keep:
            n = min(stop, self.keep) - start
            kept = {k: np.array(v[:n], copy=True) for k, v in columns.items()}
        return ChunkPartial(
            start=start,
            stop=stop,
            failed=int((~converged).sum()),
            retried=int(np.asarray(columns.get("retried", np.zeros(0, dtype=bool)), dtype=bool).sum()),
            moments={m: block_moments(columns[m], starts, all_finite) for m in self.measures},
            histograms={m: HistogramPart.of(columns[m], g, all_finite) for m, g in (self.grids or {}).items()},
            spec_passed=spec_passed,
            joint_passed=int(joint.sum()),
            failed_examples=examples,
            kept=kept,
            replicate_moments=rep_moments,
            replicate_passed=rep_passed,
            replicate_total=rep_total,
            out_of_saturation=out_of_saturation_count(columns),
        )


class RunAccumulator:
    """Folds ChunkPartials in sample order into run-wide statistics."""

    def __init__(self, reducer: ChunkReducer) -> None:
        self.reducer = reducer
        self.samples = 0
        self.failed = 0
        self.retried = 0
        self.chunks = 0
        self.moments = {m: Moments() for m in reducer.measures}
        self.histograms = {m: Histogram(g) for m, g in (reducer.grids or {}).items()}
        self.spec_passed = {name: 0 for name in reducer.specs}
        self.joint_passed = 0
        self.out_of_saturation = 0
        self.failed_examples: list[dict] = []
        self.kept: list[dict[str, np.ndarray]] = []
        rr = max(1, int(reducer.replicates))
        self.replicate_moments = {m: [Moments() for _ in range(rr)] for m in reducer.measures} if rr > 1 else {}
        self.replicate_passed = np.zeros(rr, dtype=np.int64)
        self.replicate_total = np.zeros(rr, dtype=np.int64)

    def add(self, part: ChunkPartial) -> None:
        if part.start != self.samples:
            raise ValueError(f"chunks out of order: expected samples from {self.samples}, got {part.start}")
        self.samples = part.stop
        self.chunks += 1
        self.failed += part.failed
        self.retried += part.retried
        for m in self.reducer.measures:
            self.moments[m] = fold_blocks(self.moments[m], part.moments[m])
        for m, h in part.histograms.items():
            self.histograms[m].add(h)
        for name, n in part.spec_passed.items():
            self.spec_passed[name] += n
        self.joint_passed += part.joint_passed
        self.out_of_saturation += part.out_of_saturation
        room = FAILED_EXAMPLES - len(self.failed_examples)
        if room > 0:
            self.failed_examples.extend(part.failed_examples[:room])
        if part.kept is not None:
            self.kept.append(part.kept)
        for m, (counts, means, m2s) in part.replicate_moments.items():
            groups = self.replicate_moments[m]
            for row in zip(counts.tolist(), means.tolist(), m2s.tolist(), strict=True):  # blocks in order
                for r, (c, mean, m2) in enumerate(zip(*row, strict=True)):
                    if c:
                        groups[r] = groups[r].merge(Moments(int(c), mean, m2))
        if part.replicate_passed is not None:
            self.replicate_passed += part.replicate_passed
            self.replicate_total += part.replicate_total

    def kept_columns(self) -> dict[str, np.ndarray]:
        """The kept rows (the first `keep` samples), concatenated."""
        if not self.kept:
            return {}
        return {k: np.concatenate([p[k] for p in self.kept]) for k in self.kept[0]}

    @property
    def all_kept(self) -> bool:
        return self.reducer.keep >= self.samples

    def describe(self, name: str, nominal: float, kept: dict[str, np.ndarray] | None = None) -> dict:
        """The summary.json entry of one measure: nominal, count, mean, std, min, max, quantiles, and how the
        quantiles were obtained ("exact" from all rows, or "histogram" with its bin width)."""
        mo = self.moments[name]
        out: dict = {"nominal": float(nominal), "count": int(mo.count)}
        if mo.count == 0:
            out.update(mean=None, std=None, min=None, max=None, quantiles={quantile_key(q): None for q in QUANTILES})
            out.update(quantile_method="none", quantile_bin_width=None)
            return out
        out.update(mean=mo.mean, std=mo.std, min=mo.min, max=mo.max)
        if self.all_kept and kept is not None:
            v = np.asarray(kept[name], dtype=float)
            v = v[np.isfinite(v)]
            qs = [float(x) for x in np.quantile(v, QUANTILES)]
            out["quantiles"] = {quantile_key(q): x for q, x in zip(QUANTILES, qs, strict=True)}
            out.update(quantile_method="exact", quantile_bin_width=None)
        else:
            h = self.histograms[name]
            qs = h.quantiles(QUANTILES, mo.min, mo.max)
            out["quantiles"] = {quantile_key(q): x for q, x in zip(QUANTILES, qs, strict=True)}
            out.update(quantile_method="histogram", quantile_bin_width=h.bin_width)
        return out


# --------------------------------------------------------------------------------------------- sampling error
def spread_error(estimates: list[float]) -> float | None:
    """Standard error of the average of R independent replicate estimates: their sample std (ddof = 1) / sqrt(R)."""
    values = [e for e in estimates if e is not None and math.isfinite(e)]
    if len(values) < 2 or len(values) < len(estimates):
        return None
    return float(np.std(values, ddof=1) / math.sqrt(len(values)))


def _ratio(plain: float | None, error: float | None) -> float | None:
    """(plain / error)^2: plain Monte Carlo samples needed per sample for the same standard error."""
    if plain is None or error is None or not error > 0:
        return None
    return float((plain / error) ** 2)


def sampling_summary(stats: RunAccumulator, method: str) -> dict:
    """summary["sampling"]: how the mismatch was drawn, and the standard errors of each measure's sigma and mean and
    of the joint yield.

    For "sobol" the standard error is the spread over the R independent scramblings (groups i % R) divided by
    sqrt(R) (randomised QMC; Owen, J. Complexity 1998; L'Ecuyer and Lemieux 2002). For "random" it is the plain
    Monte Carlo formula: sigma / sqrt(2(N - 1)) for sigma (normal approximation), sigma / sqrt(N) for the mean,
    sqrt(p(1 - p) / N) for the yield. Both give the formulas as `mc_*` so a designer can compare at equal N;
    `sample_ratio` = (mc_std_error / std_error)^2 is how many plain Monte Carlo samples one QMC sample is worth.
    """
    sobol = method == "sobol"
    rr = max(1, int(stats.reducer.replicates)) if sobol else 1
    totals = stats.replicate_total.tolist() if rr > 1 else [stats.samples]
    points = min(totals) if totals else 0
    warnings: list[str] = []
    if sobol and rr > 1:
        if len(set(totals)) > 1:
            warnings.append(
                f"samples ({stats.samples}) is not a multiple of the {rr} scramblings: they hold {min(totals)} to "
                f"{max(totals)} points"
            )
        if points & (points - 1):
            up = 1 << int(points).bit_length()
            warnings.append(
                f"{points} points per scrambling is not a power of 2: Sobol' points are balanced only at powers of "
                f"2, so the error is larger than it could be (samples = {rr * up} gives {up} per scrambling)"
            )
    measures: dict = {}
    for name in stats.reducer.measures:
        mo = stats.moments[name]
        std = mo.std
        mc_std = std / math.sqrt(2.0 * (mo.count - 1)) if std is not None and mo.count > 1 else None
        mc_mean = std / math.sqrt(mo.count) if std is not None and mo.count > 0 else None
        groups = stats.replicate_moments.get(name, []) if sobol else []
        stds = [g.std if g.count > 1 else None for g in groups]
        std_error = spread_error(stds) if sobol else mc_std
        mean_error = spread_error([g.mean if g.count else None for g in groups]) if sobol else mc_mean
        measures[name] = {
            "std": std,
            "std_error": std_error,
            "relative_std_error": std_error / std if std_error is not None and std else None,
            "mean": mo.mean if mo.count else None,
            "mean_error": mean_error,
            "mc_std_error": mc_std,
            "mc_mean_error": mc_mean,
            "sample_ratio": _ratio(mc_std, std_error) if sobol else None,
            "replicate_std": stds,
        }
    total = int(stats.samples)
    fraction = stats.joint_passed / total if total else None
    mc_yield = math.sqrt(fraction * (1.0 - fraction) / total) if fraction is not None else None
    fractions: list = []
    if sobol and rr > 1:
        pairs = zip(stats.replicate_passed.tolist(), stats.replicate_total.tolist(), strict=True)
        fractions = [p / t if t else None for p, t in pairs]
    yield_error = spread_error(fractions) if sobol else mc_yield
    if sobol and yield_error == 0.0:
        warnings.append(
            f"every scrambling gave the same yield fraction ({fraction:.6g}): their spread is 0 and bounds nothing; "
            "use the Clopper-Pearson interval"
        )
    return {
        "method": method,
        "scramblings": rr if sobol else None,
        "points_per_scrambling": points if sobol else None,
        "balanced": (len(set(totals)) == 1 and points > 0 and points & (points - 1) == 0) if sobol else None,
        "error_estimate": (
            f"spread over {rr} independent scramblings / sqrt({rr}) (randomised quasi-Monte Carlo)"
            if sobol
            else "plain Monte Carlo: sigma/sqrt(2(N-1)) for sigma, sigma/sqrt(N) for the mean, sqrt(p(1-p)/N) for "
            "the yield"
        ),
        "measures": measures,
        "yield": {
            "fraction": fraction,
            "std_error": yield_error,
            "mc_std_error": mc_yield,
            "sample_ratio": _ratio(mc_yield, yield_error) if sobol else None,
            "replicate_fraction": fractions,
        },
        "warnings": warnings,
    }
