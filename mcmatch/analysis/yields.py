"""Yield against specs with confidence intervals. Failed solves count as failed samples."""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from mcmatch.config import Limits


def clopper_pearson(passed: int, total: int, confidence: float = 0.95) -> tuple[float, float]:
    """Exact two-sided binomial interval on a proportion (Clopper and Pearson, Biometrika 1934), via scipy.stats."""
    if total <= 0:
        return (0.0, 1.0)
    ci = stats.binomtest(int(passed), int(total)).proportion_ci(confidence_level=confidence, method="exact")
    return (float(ci.low), float(ci.high))


def wilson(passed: int, total: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval on a proportion, via scipy.stats."""
    if total <= 0:
        return (0.0, 1.0)
    ci = stats.binomtest(int(passed), int(total)).proportion_ci(confidence_level=confidence, method="wilson")
    return (float(ci.low), float(ci.high))


def passes(values: np.ndarray, limits: Limits) -> np.ndarray:
    """Boolean mask of samples inside the limits; NaN (a failed solve) never passes."""
    v = np.asarray(values, dtype=float)
    ok = np.isfinite(v)
    if limits.min is not None:
        ok &= v >= limits.min
    if limits.max is not None:
        ok &= v <= limits.max
    return ok


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
