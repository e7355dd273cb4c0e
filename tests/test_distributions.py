"""mcmatch.stats.distributions against scipy.stats (the reference library) and published values."""

from __future__ import annotations

import math

import pytest
from scipy import stats

from mcmatch.stats import distributions as dist


@pytest.mark.parametrize("x", [-8.0, -3.0, -0.5, 0.0, 1.2, 4.5])
def test_normal_functions_match_scipy(x):
    # scipy.stats.norm as the reference
    assert dist.normal_cdf(x) == pytest.approx(stats.norm.cdf(x), rel=1e-12, abs=1e-300)
    assert dist.normal_sf(x) == pytest.approx(stats.norm.sf(x), rel=1e-12, abs=1e-300)
    q = stats.norm.cdf(x)
    if 0 < q < 1:
        assert dist.normal_ppf(q) == pytest.approx(stats.norm.ppf(q), rel=1e-10, abs=1e-12)
        assert dist.normal_isf(q) == pytest.approx(stats.norm.isf(q), rel=1e-10, abs=1e-12)


@pytest.mark.parametrize(("q", "dof"), [(0.025, 3), (0.5, 10), (0.99, 1), (0.975, 19999)])
def test_chi2_and_beta_quantiles_match_scipy(q, dof):
    assert dist.chi2_ppf(q, dof) == pytest.approx(stats.chi2.ppf(q, dof), rel=1e-10)
    assert dist.beta_ppf(q, 3.0, dof) == pytest.approx(stats.beta.ppf(q, 3.0, dof), rel=1e-10)


@pytest.mark.parametrize(("k", "n"), [(0, 1000), (1000, 1000), (995, 1000), (19950, 20000), (3, 7)])
def test_intervals_match_scipy(k, n):
    # scipy's binomtest: exact (Clopper-Pearson, found by root finding) and Wilson score intervals
    exact = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    assert dist.clopper_pearson(k, n) == pytest.approx((exact.low, exact.high), rel=1e-9, abs=1e-12)
    score = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    assert dist.wilson(k, n) == pytest.approx((score.low, score.high), rel=1e-12, abs=1e-15)


def test_zero_failures_in_1000():
    # DESIGN.md section 4 (Clopper-Pearson, Biometrika 1934): 0 failures in 1000 bound the failure fraction by 0.0036821
    lo, _ = dist.clopper_pearson(1000, 1000)
    assert 1.0 - lo == pytest.approx(0.0036821, abs=5e-8)
    assert math.isclose(dist.clopper_pearson(0, 1000)[1], 1.0 - lo, rel_tol=1e-12)
