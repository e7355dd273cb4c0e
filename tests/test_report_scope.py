"""The verdict's scope names a high-sigma estimate with its interval, and every sigma says its convention.

Sources: a two-sided yield Y is a normal-equivalent of z = Phi^-1((1 + Y) / 2) (0.9973 -> 3.00), a one-sided failure
probability p of z = Phi^-1(1 - p) (common practice, no source; Phi from Python's statistics.NormalDist).
"""

from __future__ import annotations

from statistics import NormalDist

from mcmatch.report.format import sigma_equivalent
from mcmatch.report.sections.high_sigma import high_sigma_scope, high_sigma_table
from mcmatch.report.sections.scope import scope_lines

HIGH_SIGMA = {
    "gain_error": {
        "fail_probability": 4.1e-07,
        "ci95": [3.94e-07, 4.26e-07],
        "sigma_level": NormalDist().inv_cdf(1 - 4.1e-07),
        "samples": 20000,
        "effective_samples": 2305.4,
    }
}


def test_the_scope_carries_the_high_sigma_result_with_its_interval():
    texts = [line["text"] for line in scope_lines({"high_sigma": HIGH_SIGMA})]
    (line,) = [t for t in texts if t.startswith("High-sigma estimate of gain_error")]
    assert "4.1e-07" in line and "3.94e-07 \u2026 4.26e-07" in line and "20,000 samples" in line
    assert "4.93 sigma one-sided" in line
    assert high_sigma_scope({}) == []


def test_sigma_conventions_are_labelled():
    assert sigma_equivalent(0.9973) == "\u00b13.00 sigma two-sided"
    header = [c["label"] for c in high_sigma_table({"high_sigma": HIGH_SIGMA})["columns"]]
    assert "sigma level (one-sided)" in header
