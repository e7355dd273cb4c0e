"""Yield against specs with confidence intervals. Failed solves count as failed samples."""

from __future__ import annotations

import math

import numpy as np

from mcmatch.config.schema import Limits
from mcmatch.stats import distributions as dist


def clopper_pearson(passed: int, total: int, confidence: float = 0.95) -> tuple[float, float]:
    """Exact two-sided binomial interval on a proportion (Clopper and Pearson, Biometrika 1934), beta-quantile form."""
    if total <= 0:
        return (0.0, 1.0)
    return dist.clopper_pearson(int(passed), int(total), confidence)


def wilson(passed: int, total: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval on a proportion."""
    if total <= 0:
        return (0.0, 1.0)
    return dist.wilson(int(passed), int(total), confidence)


def passes(values: np.ndarray, limits: Limits) -> np.ndarray:
    """Boolean mask of samples inside the limits; NaN (a failed solve) never passes."""
    v = np.asarray(values, dtype=float)
    ok = np.isfinite(v)
    if limits.min is not None:
        ok &= v >= limits.min
    if limits.max is not None:
        ok &= v <= limits.max
    return ok


def joint_passes(columns: dict[str, np.ndarray], specs: dict[str, Limits]) -> np.ndarray:
    """Boolean mask of the samples that converged and meet every spec (one die in spec)."""
    joint = np.asarray(columns["converged"], dtype=bool).copy()
    for name, limits in specs.items():
        joint &= passes(columns[name], limits)
    return joint


def samples_needed(target_yield: float, confidence: float) -> int:
    """Zero-failure samples that demonstrate `target_yield` at `confidence`: N >= ln(1 - C) / ln(Y)."""
    return int(math.ceil(math.log(1.0 - confidence) / math.log(target_yield) - 1e-12))


def yield_block(passed: int, total: int, confidence: float = 0.95) -> dict:
    """The summary.json yield object: passed, total, fraction, ci95 (Clopper-Pearson), method, wilson95."""
    lo, hi = clopper_pearson(passed, total, confidence)
    wl, wh = wilson(passed, total, confidence)
    return {
        "passed": int(passed),
        "total": int(total),
        "fraction": passed / total if total else None,
        "ci95": [lo, hi],
        "method": "clopper-pearson",
        "wilson95": [wl, wh],
    }


# --------------------------------------------------------------------------------------------- extras
def lower_bound(passed: int, total: int, confidence: float = 0.95) -> float:
    """One-sided Clopper-Pearson lower bound on the pass fraction at `confidence` [1].

    With zero failures it is (1 - C)^(1/N), so it reaches a target Y exactly when N >= ln(1 - C) / ln(Y).
    """
    if total <= 0:
        return 0.0
    if passed <= 0:
        return 0.0
    return dist.beta_ppf(1.0 - confidence, passed, total - passed + 1)


def zero_failure_upper_bound(total: int, confidence: float = 0.95, two_sided: bool = True) -> float:
    """Clopper-Pearson upper bound on the failure fraction when none of `total` samples failed [1].

    Two-sided at 95 %: 1 - 0.025^(1/N) (0.0036821 for N = 1000); one-sided: 1 - 0.05^(1/N).
    """
    alpha = 1.0 - confidence
    tail = alpha / 2.0 if two_sided else alpha
    return float(-math.expm1(math.log(tail) / total))


def rule_of_three(total: int) -> float:
    """Approximate one-sided 95 % upper bound 3/N on a failure fraction with zero failures (Hanley, Lippman-Hand,
    JAMA 1983) [1]."""
    return 3.0 / total


def process_capability(mean: float, std: float, limits: Limits) -> tuple[float | None, float | None]:
    """Cp = (max - min) / (6 std) (two-sided specs only) and Cpk = min distance of the mean to a limit / (3 std).

    Returns (None, None) when std is zero or unknown: the ratios are then unbounded.
    """
    if mean is None or std is None or not std > 0:
        return None, None
    cp = (limits.max - limits.min) / (6.0 * std) if limits.min is not None and limits.max is not None else None
    sides = []
    if limits.max is not None:
        sides.append((limits.max - mean) / (3.0 * std))
    if limits.min is not None:
        sides.append((mean - limits.min) / (3.0 * std))
    return cp, min(sides)


def gaussian_tail(mean: float, std: float, limits: Limits) -> float | None:
    """Probability outside the limits of a normal distribution with this mean and std [1]; an estimate, not a bound.

    None when std is unknown; with std = 0 it is 0 or 1 by where the mean lies.
    """
    if mean is None or std is None:
        return None
    if not std > 0:
        inside = (limits.min is None or mean >= limits.min) and (limits.max is None or mean <= limits.max)
        return 0.0 if inside else 1.0
    p = 0.0
    if limits.max is not None:
        p += dist.normal_sf((limits.max - mean) / std)
    if limits.min is not None:
        p += dist.normal_cdf((limits.min - mean) / std)
    return min(p, 1.0)


def normal_yield(mean: float | np.ndarray, std: float | np.ndarray, limits: Limits) -> float | np.ndarray:
    """Fraction inside the limits of a normal distribution N(mean, std^2) [1]; vectorised over mean and std."""
    mean = np.asarray(mean, dtype=float)
    std = np.maximum(np.asarray(std, dtype=float), 1e-300)
    upper = dist.normal_cdf_array((limits.max - mean) / std) if limits.max is not None else 1.0
    lower = dist.normal_cdf_array((limits.min - mean) / std) if limits.min is not None else 0.0
    out = np.clip(upper - lower, 0.0, 1.0)
    return float(out) if out.ndim == 0 else out


def spec_extras(block: dict, measure: dict, limits: Limits, confidence: float = 0.95) -> dict:
    """Cp, Cpk, the failure fraction's upper bound and a labelled Gaussian-tail estimate for one spec.

    block: the spec's yield block (passed, total); measure: the measure's summary (mean, std) [SI].
    """
    passed, total = int(block["passed"]), int(block["total"])
    cp, cpk = process_capability(measure.get("mean"), measure.get("std"), limits)
    failed = total - passed
    out = {
        "cp": cp,
        "cpk": cpk,
        "failed": failed,
        "failure_upper_bound": 1.0 - clopper_pearson(passed, total, confidence)[0] if total else 1.0,
        "gaussian_tail_estimate": gaussian_tail(measure.get("mean"), measure.get("std"), limits),
    }
    if failed == 0 and total > 0:
        out["zero_failures"] = {
            "failure_upper_bound": zero_failure_upper_bound(total, confidence),
            "rule_of_three": rule_of_three(total),
            "note": "no sample failed: the interval gives only a bound; gaussian_tail_estimate assumes a normal "
            "distribution with the sample mean and std",
        }
    return out


def target_block(passed: int, total: int, target_yield: float, confidence: float) -> dict:
    """Whether a run demonstrates `target_yield` at `confidence` (one-sided Clopper-Pearson lower bound)."""
    bound = lower_bound(passed, total, confidence)
    return {
        "yield": target_yield,
        "confidence": confidence,
        "samples_needed": samples_needed(target_yield, confidence),
        "lower_bound": bound,
        "met": bool(bound >= target_yield),
        "method": "one-sided clopper-pearson lower bound",
    }


def yield_extras(
    yield_summary: dict, measures: dict, specs: dict[str, Limits], target_yield: float, confidence: float
) -> dict:
    """The summary's yield block with Cp/Cpk, bounds and tail estimates per spec and the target check, merged in.

    Uses only the summary (measure mean/std, pass counts); returns a new dict.
    """
    out = {**yield_summary, "specs": {k: dict(v) for k, v in yield_summary.get("specs", {}).items()}}
    tails = []
    for name, limits in specs.items():
        block = out["specs"].get(name)
        if block is None:
            continue
        block.update(spec_extras(block, measures.get(name, {}), limits))
        tails.append(block["gaussian_tail_estimate"])
    passed, total = int(out["passed"]), int(out["total"])
    if total > 0:
        out["failure_upper_bound"] = 1.0 - float(out["ci95"][0])
        if passed == total:
            out["zero_failures"] = {
                "failure_upper_bound": zero_failure_upper_bound(total),
                "rule_of_three": rule_of_three(total),
            }
    if tails and all(t is not None for t in tails):
        # union bound over the specs: exact for one spec, an upper estimate for several
        out["gaussian_tail_estimate"] = min(1.0, float(sum(tails)))
    out["target"] = target_block(passed, total, target_yield, confidence)
    return out


def paired_difference(this: np.ndarray, other: np.ndarray, confidence: float = 0.95) -> dict:
    """Yield of `this` minus yield of `other` on the same samples (common random numbers), with its interval.

    Both masks mark the samples that pass, sample i of one facing sample i of the other. Only the discordant
    samples carry the difference: b pass here and fail there, c the reverse; difference = (b - c) / n. The interval
    is Newcombe's hybrid score interval for paired proportions (Newcombe, Statistics in Medicine 17, 1998, method
    10): the Wilson intervals of both yields combined through their phi correlation. It stays inside [-1, 1] and is
    sound at zero discordant samples, where the Wald interval collapses to a point.
    """
    a_mask, b_mask = np.asarray(this, dtype=bool), np.asarray(other, dtype=bool)
    if a_mask.shape != b_mask.shape:
        raise ValueError("paired masks must have the same length")
    n = int(a_mask.size)
    both = int((a_mask & b_mask).sum())
    only_this = int((a_mask & ~b_mask).sum())
    only_other = int((~a_mask & b_mask).sum())
    neither = n - both - only_this - only_other
    if n == 0:
        return {"difference": None, "ci95": [-1.0, 1.0], "only_this": 0, "only_other": 0, "samples": 0}
    p1, p2 = (both + only_this) / n, (both + only_other) / n
    l1, u1 = wilson(both + only_this, n, confidence)
    l2, u2 = wilson(both + only_other, n, confidence)
    denominator = (both + only_this) * (only_other + neither) * (both + only_other) * (only_this + neither)
    phi = (both * neither - only_this * only_other) / math.sqrt(denominator) if denominator > 0 else 0.0
    diff = p1 - p2
    lower = diff - math.sqrt(max(0.0, (p1 - l1) ** 2 - 2.0 * phi * (p1 - l1) * (u2 - p2) + (u2 - p2) ** 2))
    upper = diff + math.sqrt(max(0.0, (u1 - p1) ** 2 - 2.0 * phi * (u1 - p1) * (p2 - l2) + (p2 - l2) ** 2))
    return {
        "difference": diff,
        "ci95": [max(-1.0, lower), min(1.0, upper)],
        "only_this": only_this,
        "only_other": only_other,
        "samples": n,
    }
