"""High-sigma yield by importance sampling: exact normal tails of a linear measure, brute-force Monte Carlo at about
3.4 sigma, and the estimator's pieces against scipy."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from mcmatch.config.loading import config_from_dict, load_config
from mcmatch.config.schema import Limits
from mcmatch.run.chunks import monte_carlo
from mcmatch.run.study import prepare
from mcmatch.stats import high_sigma as hs
from mcmatch.stats.yields import passes
from mcmatch.studies.extra import run_extra_analyses, run_high_sigma

CONFIGS = Path(__file__).resolve().parent.parent / "configs"

# A diode-connected device fed by a current source, lambda = 0, no body effect, no beta mismatch: its gate voltage
# V = Vt + sqrt(2 I / beta) is exactly linear in the threshold deviation (square law, Razavi, Design of Analog CMOS
# Integrated Circuits, 2nd ed., 2017, ch. 5), so V is normal with sigma = A_VT / sqrt(2 W L) (Pelgrom, Duinmaijer,
# Welbers, IEEE JSSC 1989: 1.1180 mV for A_VT = 5 mV um, W/L = 10/1 um).
KPRIME, VT0, CURRENT, W, L, A_VT = 100e-6, 0.5, 10e-6, 10e-6, 1e-6, 5e-9
SIGMA_V = A_VT / math.sqrt(2 * W * L)
V0 = VT0 + math.sqrt(2 * CURRENT / (KPRIME * W / L))


def diode_config(vmin: float | None, vmax: float | None, samples: int = 4000, seed: int = 3):
    spec = {k: v for k, v in (("min", vmin), ("max", vmax)) if v is not None}
    raw = {
        "title": "linear diode voltage",
        "technology": {
            "name": "square law, threshold mismatch only (test values)",
            "nmos": {"kprime": KPRIME, "vth0": VT0, "lambda": 0.0, "a_vt": A_VT, "a_beta": 0.0},
        },
        "circuit": {
            "mosfet": [{"name": "MD", "type": "nmos", "drain": "nb", "gate": "nb", "source": "gnd", "w": W, "l": L}],
            "current_source": [{"name": "IREF", "from": "vdd", "to": "nb", "value": CURRENT}],
            "voltage_source": [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": 1.8}],
        },
        "measures": {"v_nb": {"voltage": "nb"}},
        "specs": {"v_nb": spec},
        "analysis": {"samples": 100, "seed": seed, "high_sigma": {"samples": samples}},
    }
    return config_from_dict(raw, CONFIGS / "high_sigma_test.toml")


def inside(value: float, interval: list[float]) -> bool:
    return interval[0] <= value <= interval[1]


def test_five_sigma_tail_of_a_linear_measure_is_inside_the_interval():
    # exact tail: P(V > V0 + 5 sigma) = norm.sf(5) (scipy.stats as the reference)
    config = diode_config(None, V0 + 5 * SIGMA_V)
    out = run_high_sigma(config, prepare(config))["v_nb"]
    exact = float(stats.norm.sf(5.0))
    assert inside(exact, out["ci95"])
    # the implicit-function linearisation puts the failure point at 5 sigma (hand value above), and the refined
    # shift agrees with it for a linear measure
    assert out["sides"][0]["linear_beta"] == pytest.approx(5.0, rel=1e-6)
    assert out["shift"] == pytest.approx(5.0, rel=1e-3)
    assert out["sigma_level"] == pytest.approx(float(stats.norm.isf(out["fail_probability"])), rel=1e-12)
    # the interval is tight: relative standard error well under 10 % with 4000 draws (common practice, no source)
    assert out["std_error"] < 0.1 * exact
    assert out["method"] == "importance" and out["samples"] == 4000


def test_two_sided_linear_tail_sums_both_regions():
    # exact: norm.sf(5) + norm.cdf(-4.5) (scipy.stats); one shifted distribution per side
    config = diode_config(V0 - 4.5 * SIGMA_V, V0 + 5 * SIGMA_V)
    out = run_high_sigma(config, prepare(config))["v_nb"]
    exact = float(stats.norm.sf(5.0) + stats.norm.cdf(-4.5))
    assert inside(exact, out["ci95"])
    assert [s["side"] for s in out["sides"]] == ["min", "max"]
    assert [s["shift"] for s in out["sides"]] == pytest.approx([4.5, 5.0], rel=1e-3)
    assert out["effective_samples"] > 100  # enough weighted failures to trust the normal interval


@pytest.mark.slow
def test_importance_sampling_agrees_with_brute_force_at_about_3_4_sigma():
    # A 1:1 mirror's ratio error is not linear in the mismatch (square law, beta and threshold both mismatched).
    # Spec +-3 % with sigma about 0.89 %: two-sided failure about 8e-4. Brute force with N samples has standard
    # error sqrt(p (1 - p) / N); the two estimates must agree within 4 combined standard errors and their 95 %
    # intervals must overlap (common practice, no source).
    config = load_config(CONFIGS / "high_sigma.toml")
    config = config.model_copy(update={"specs": {"gain_error": Limits(min=-0.03, max=0.03)}})
    config = config.with_analysis(high_sigma={"samples": 4000})
    study = prepare(config)
    out = run_high_sigma(config, study)["gain_error"]
    n = 300_000
    columns = monte_carlo(study, n, jobs=1)
    failed = ~passes(columns["gain_error"], config.specs["gain_error"])
    p_mc = float(failed.mean())
    se_mc = math.sqrt(p_mc * (1 - p_mc) / n)
    ci_mc = stats.binomtest(int(failed.sum()), n).proportion_ci(confidence_level=0.95, method="exact")
    assert failed.sum() > 100
    assert abs(out["fail_probability"] - p_mc) < 4 * math.hypot(se_mc, out["std_error"])
    assert out["ci95"][0] <= ci_mc.high and ci_mc.low <= out["ci95"][1]


def test_summary_block_is_reproducible_and_json_clean():
    # same seed, same numbers (DESIGN.md section 3 reproducibility); summary keys of the file contract
    config = diode_config(V0 - 4.5 * SIGMA_V, V0 + 5 * SIGMA_V, samples=500)
    study = prepare(config)
    first = run_extra_analyses(config, study, {})
    second = run_extra_analyses(config, study, {})
    assert first == second
    block = first["high_sigma"]["v_nb"]
    assert {"fail_probability", "ci95", "effective_samples", "sigma_level", "samples", "shift", "method"} <= set(block)
    json.dumps(first, allow_nan=False)
    other = run_extra_analyses(config.with_analysis(seed=4), prepare(config.with_analysis(seed=4)), {})
    assert other["high_sigma"]["v_nb"]["fail_probability"] != block["fail_probability"]


# ----------------------------------------------------------------------------------------------- estimator pieces
def test_mixture_weights_match_scipy_densities():
    # w = phi(z) / sum_c alpha_c phi(z - mu_c), against scipy.stats.multivariate_normal
    rng = np.random.default_rng(1)
    z = rng.standard_normal((50, 3)) * 2.0
    shifts = np.array([[3.0, -1.0, 0.5], [-2.0, 0.0, 4.0]])
    alpha = np.array([0.3, 0.7])
    mvn = stats.multivariate_normal
    expected = mvn(mean=np.zeros(3)).pdf(z) / (
        alpha[0] * mvn(mean=shifts[0]).pdf(z) + alpha[1] * mvn(mean=shifts[1]).pdf(z)
    )
    np.testing.assert_allclose(np.exp(hs.mixture_log_weights(z, shifts, alpha)), expected, rtol=1e-10)


def test_unshifted_estimate_is_the_plain_fraction():
    # with zero shift every weight is 1: p is the failing fraction, Kish's count over the failure terms is the number
    # of failures, and the interval is the normal-approximation binomial one (common practice, no source)
    rng = np.random.default_rng(2)
    failed = rng.random(5000) < 0.02
    out = hs.estimate(np.ones(5000), failed)
    p = failed.mean()
    assert out["fail_probability"] == pytest.approx(p)
    assert out["effective_samples"] == pytest.approx(failed.sum())
    half = stats.norm.ppf(0.975) * np.std(failed.astype(float), ddof=1) / math.sqrt(5000)
    assert out["ci95"] == pytest.approx([p - half, p + half])
    assert out["sigma_level"] == pytest.approx(stats.norm.isf(p))


def test_failed_solves_count_as_failures():
    # DESIGN.md section 3: a failed solve is a failed sample, never dropped
    values = np.array([0.0, 0.0, np.nan, 0.5])
    converged = np.array([True, False, True, True])
    assert hs.fails(values, converged, -1.0, 1.0).tolist() == [False, True, True, False]


def test_boundary_search_on_a_known_function():
    # m(z) = a . z crosses L at t* = L / |a| along a / |a| (hand calculation)
    a = np.array([0.3, -0.4, 1.2])

    def evaluate(z):
        return z @ a, np.ones(len(z), dtype=bool)

    beta, u = hs.linear_design_point(0.0, a, "max", 6.5)
    assert beta == pytest.approx(6.5 / np.linalg.norm(a))
    t, found = hs.boundary_along(evaluate, u, "max", 6.5, start=1.0)
    assert found and t == pytest.approx(6.5 / np.linalg.norm(a), rel=1e-5)
    beta_min, u_min = hs.linear_design_point(0.0, a, "min", -2.6)
    np.testing.assert_allclose(u_min, -u)
    assert beta_min == pytest.approx(2.6 / np.linalg.norm(a))
