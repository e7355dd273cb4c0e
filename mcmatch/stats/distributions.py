"""The few distribution functions the run path needs, on ``scipy.special`` (importing ``scipy.stats`` costs about
0.9 s of every run's start-up; ``scipy.special`` a fraction of it). Checked against scipy.stats in the tests.

Normal: ndtr and ndtri. Chi-square quantile: chdtri, the inverse of the survival function. Beta quantile: betaincinv.
Clopper-Pearson (Biometrika 1934) in its beta-quantile form: lower = B^-1(alpha/2; k, n - k + 1), upper =
B^-1(1 - alpha/2; k + 1, n - k). Wilson (JASA 1927) score interval without continuity correction.
"""

from __future__ import annotations

import math
from types import ModuleType


def special() -> ModuleType:
    """scipy.special, imported on first use: a run needs it only for its summary, so the import (0.1-0.2 s) can
    happen while the workers solve (studies.pipeline prefetches it) instead of before the first sample."""
    from scipy import special as module

    return module


def normal_cdf(x: float) -> float:
    return float(special().ndtr(x))


def normal_cdf_array(x):  # noqa: ANN001, ANN201 - numpy in, numpy out
    """Normal cdf elementwise on an array."""
    return special().ndtr(x)


def normal_sf(x: float) -> float:
    return float(special().ndtr(-x))


def normal_ppf(q: float) -> float:
    return float(special().ndtri(q))


def normal_isf(p: float) -> float:
    return float(-special().ndtri(p))


def chi2_ppf(q: float, dof: float) -> float:
    """Quantile q of the chi-square distribution with `dof` degrees of freedom."""
    return float(special().chdtri(dof, 1.0 - q))


def beta_ppf(q: float, a: float, b: float) -> float:
    return float(special().betaincinv(a, b, q))


def clopper_pearson(passed: int, total: int, confidence: float = 0.95) -> tuple[float, float]:
    """Exact two-sided interval on a proportion `passed`/`total` [1]."""
    alpha = 1.0 - confidence
    lo = 0.0 if passed == 0 else beta_ppf(alpha / 2.0, passed, total - passed + 1)
    hi = 1.0 if passed == total else beta_ppf(1.0 - alpha / 2.0, passed + 1, total - passed)
    return lo, hi


def wilson(passed: int, total: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval on a proportion [1]."""
    z = normal_ppf(0.5 + confidence / 2.0)
    p = passed / total
    denominator = 1.0 + z * z / total
    centre = (p + z * z / (2.0 * total)) / denominator
    half = z * math.sqrt(p * (1.0 - p) / total + z * z / (4.0 * total * total)) / denominator
    return max(0.0, centre - half), min(1.0, centre + half)
