"""Tests for mcmatch.stats.yields: intervals, zero-failure bounds, samples needed, Cp/Cpk, Gaussian tails."""

from __future__ import annotations

import math

import pytest
from scipy import stats

from mcmatch.config.schema import Limits
from mcmatch.stats.yields import (
    clopper_pearson,
    gaussian_tail,
    lower_bound,
    normal_yield,
    process_capability,
    rule_of_three,
    samples_needed,
    target_block,
    yield_block,
    yield_extras,
    zero_failure_upper_bound,
)


def test_zero_failures_in_1000_two_sided_bound():
    # Clopper, Pearson, Biometrika 1934; the value 0.0036821 as DESIGN.md section 4 quotes it
    lo, hi = clopper_pearson(1000, 1000)
    assert 1.0 - lo == pytest.approx(0.0036821, abs=5e-8)
    assert hi == 1.0
    assert zero_failure_upper_bound(1000) == pytest.approx(0.0036821, abs=5e-8)


@pytest.mark.parametrize("n", [300, 1000, 20000])
def test_rule_of_three_approximates_the_one_sided_bound(n):
    # Hanley, Lippman-Hand, "If nothing goes wrong, is everything all right?", JAMA 1983: 3/n approximates the
    # one-sided 95 % upper bound 1 - 0.05^(1/n); -ln(0.05) = 2.996, the relative gap is about 0.15 % + 1.5/n
    exact = zero_failure_upper_bound(n, 0.95, two_sided=False)
    assert rule_of_three(n) == pytest.approx(3.0 / n)
    assert exact == pytest.approx(-math.expm1(math.log(0.05) / n), rel=1e-12)
    assert abs(exact - rule_of_three(n)) / exact < 0.02


def test_samples_needed_for_three_sigma_yield():
    # zero-failure demonstration N >= ln(1 - C) / ln(Y): ln(0.05) / ln(0.9973) = 1108.0..., so 1109 samples
    # (binomial success-run theorem, common practice in reliability demonstration)
    assert samples_needed(0.9973, 0.95) == 1109
    assert target_block(1109, 1109, 0.9973, 0.95)["met"] is True
    assert target_block(1108, 1108, 0.9973, 0.95)["met"] is False
    assert target_block(1109, 1109, 0.9973, 0.95)["samples_needed"] == 1109


def test_one_sided_lower_bound_matches_scipy_beta_quantile():
    # Clopper-Pearson one-sided lower limit = Beta(alpha; x, n - x + 1) quantile (Clopper, Pearson 1934); zero failures:
    # (1 - C)^(1/n)
    assert lower_bound(990, 1000, 0.95) == pytest.approx(stats.beta.ppf(0.05, 990, 11), rel=1e-12)
    assert lower_bound(500, 500, 0.9) == pytest.approx(0.1 ** (1 / 500), rel=1e-12)
    # ... and it is tighter than the two-sided 95 % interval's low end
    assert lower_bound(990, 1000, 0.95) > clopper_pearson(990, 1000)[0]


def test_cp_cpk_textbook_definitions():
    # Montgomery, Introduction to Statistical Quality Control: Cp = (USL - LSL)/(6 sigma),
    # Cpk = min(USL - mu, mu - LSL)/(3 sigma)
    limits = Limits(min=-1.0, max=1.0)
    cp, cpk = process_capability(0.0, 1.0 / 3.0, limits)
    assert cp == pytest.approx(1.0)
    assert cpk == pytest.approx(1.0)
    cp, cpk = process_capability(0.5, 1.0 / 3.0, limits)
    assert cp == pytest.approx(1.0)
    assert cpk == pytest.approx(0.5)
    cp, cpk = process_capability(0.2, 0.1, Limits(min=None, max=0.5))
    assert cp is None
    assert cpk == pytest.approx(1.0)
    assert process_capability(0.0, 0.0, limits) == (None, None)


def test_gaussian_tail_three_sigma():
    # a normal distribution puts 0.27 % outside +-3 sigma (2 * Q(3) = 0.0026998, standard normal table)
    assert gaussian_tail(0.0, 1.0, Limits(min=-3.0, max=3.0)) == pytest.approx(0.0026998, abs=1e-7)
    assert gaussian_tail(1.0, 2.0, Limits(min=None, max=7.0)) == pytest.approx(0.0013499, abs=1e-7)
    assert normal_yield(0.0, 1.0, Limits(min=-3.0, max=3.0)) == pytest.approx(1 - 0.0026998, abs=1e-7)
    assert gaussian_tail(0.0, 0.0, Limits(min=-1.0, max=1.0)) == 0.0
    assert gaussian_tail(2.0, 0.0, Limits(min=-1.0, max=1.0)) == 1.0


def _summary(passed: int, total: int, mean: float, std: float, limits: Limits) -> tuple[dict, dict]:
    block = yield_block(passed, total)
    block["specs"] = {"err": {"min": limits.min, "max": limits.max, **yield_block(passed, total)}}
    return block, {"err": {"mean": mean, "std": std}}


def test_yield_extras_zero_failures_are_labelled():
    # common practice, no source: with no failure, report the interval's bound and a labelled normal-model estimate
    limits = Limits(min=-0.03, max=0.03)
    block, measures = _summary(2000, 2000, 0.0, 0.005, limits)
    out = yield_extras(block, measures, {"err": limits}, 0.9973, 0.95)
    spec = out["specs"]["err"]
    assert spec["failed"] == 0
    assert spec["zero_failures"]["failure_upper_bound"] == pytest.approx(1 - 0.025 ** (1 / 2000), rel=1e-9)
    assert spec["gaussian_tail_estimate"] == pytest.approx(2 * stats.norm.sf(6.0), rel=1e-9)
    assert spec["cp"] == pytest.approx(2.0) and spec["cpk"] == pytest.approx(2.0)
    assert out["target"]["met"] is True  # 2000 >= 1109 zero-failure samples
    assert out["passed"] == 2000 and "zero_failures" in out
    assert block["specs"]["err"].get("cp") is None  # the input is not modified


def test_yield_extras_with_failures():
    limits = Limits(min=-0.02, max=0.06)
    block, measures = _summary(19665, 20000, 0.0105, 0.0142, limits)
    out = yield_extras(block, measures, {"err": limits}, 0.9973, 0.95)
    spec = out["specs"]["err"]
    assert "zero_failures" not in spec
    assert spec["failed"] == 335
    assert spec["failure_upper_bound"] == pytest.approx(1 - clopper_pearson(19665, 20000)[0])
    assert out["target"]["met"] is False
    assert out["target"]["lower_bound"] < 19665 / 20000
