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
from mcmatch.stats.histogram import Grid, Histogram, HistogramPart
from mcmatch.stats.moments import (
    Moments,
    block_moments,
    block_starts,
    fold_blocks,
    replicate_block_moments,
)
from mcmatch.stats.yields import passes

#: Failed samples whose parameters are listed in the summary, as examples.
FAILED_EXAMPLES = 5


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
