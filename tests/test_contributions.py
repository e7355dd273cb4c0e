"""Tests for mcmatch.model.sensitivity and mcmatch.stats.contributions: implicit-function sensitivities, device
Hessians, variance shares against Pelgrom / Kinget and against Monte Carlo."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from mcmatch.config.loading import config_from_dict
from mcmatch.model.devices import ekv, ekv_hessian, square_law, square_law_hessian
from mcmatch.model.sensitivity import measure_sensitivities, parameter_labels, parameter_sigmas
from mcmatch.run.chunks import monte_carlo
from mcmatch.run.study import nominal_point, prepare
from mcmatch.solve.measures import mna_measures
from mcmatch.stats.contributions import contribution_table, std_interval
from mcmatch.studies.analyses import run_contributions

UM = 1e-6


def _technology(model: str = "square-law", lam: float = 0.0, gamma: float = 0.0) -> dict:
    """An invented inline process for tests."""
    common = {"model": model, "gamma": gamma, "phi": 0.8, "slope": 1.3, "a_vt": "5 mV*um", "a_beta": "1 %*um"}
    return {
        "name": "inline test process (invented values)",
        "nominal_temperature": "27 degC",
        "nmos": {**common, "kprime": "50 uA/V^2", "vth0": "0.45 V", "lambda": lam},
        "pmos": {**common, "kprime": "20 uA/V^2", "vth0": "0.5 V", "lambda": lam},
    }


def _mos(name, kind, d, g, s, w="10 um", l="1 um", m=1):  # noqa: E741
    return {"name": name, "type": kind, "drain": d, "gate": g, "source": s, "w": w, "l": l, "m": m}


def mirror_config(model: str = "square-law", lam: float = 0.0, **analysis) -> object:
    """1:1 NMOS mirror, W/L = 10/1 um, k' = 50 uA/V^2, 10 uA: Vov = sqrt(2 I / beta) = 0.2 V (square law)."""
    raw = {
        "title": "1:1 mirror",
        "technology": _technology(model, lam),
        "circuit": {
            "mosfet": [_mos("M1", "nmos", "nb", "nb", "gnd"), _mos("M2", "nmos", "out", "nb", "gnd")],
            "current_source": [{"name": "IREF", "from": "vdd", "to": "nb", "value": "10 uA"}],
            "voltage_source": [
                {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"},
                {"name": "VOUT", "plus": "out", "minus": "gnd", "value": "0.9 V"},
            ],
        },
        "measures": {
            "err": {"ratio": ["M2", "IREF"], "ideal": 1},
            "i_out": {"current": "M2"},
            "v_nb": {"voltage": "nb"},
            "r_nb": {"resistance": "nb"},
        },
        "analysis": {"samples": 4000, "seed": 3, **analysis},
    }
    return config_from_dict(raw, Path("inline.toml"))


def cascode_pmos_config(model: str = "square-law") -> object:
    """NMOS cascode mirror (body effect in the upper pair) fed by a PMOS mirror, with a resistor load."""
    raw = {
        "title": "cascode + pmos",
        "technology": _technology(model, lam=0.06, gamma=0.45),
        "circuit": {
            "mosfet": [
                _mos("MN1", "nmos", "n1", "n1", "gnd"),
                _mos("MN3", "nmos", "n2", "n2", "n1"),
                _mos("MN2", "nmos", "n3", "n1", "gnd", m=2),
                _mos("MN4", "nmos", "out", "n2", "n3", m=2),
                _mos("MP1", "pmos", "pb", "pb", "vdd", w="20 um", l="2 um"),
                _mos("MP2", "pmos", "n2", "pb", "vdd", w="20 um", l="2 um"),
            ],
            "current_source": [{"name": "IB", "from": "pb", "to": "gnd", "value": "8 uA"}],
            "voltage_source": [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"}],
            "resistor": [{"name": "RL", "a": "vdd", "b": "out", "value": "20 kohm"}],
        },
        "measures": {
            "i_out": {"current": "MN4"},
            "i_p": {"current": "MP2"},
            "err": {"ratio": ["MN4", "MP2"], "ideal": 2},
            "v_out": {"voltage": "out"},
            "i_vdd": {"current": "VDD"},
            "i_rl": {"current": "RL"},
            "r_n3": {"resistance": "n3"},
            "r_pb": {"resistance": "pb"},
            "r_n1": {"resistance": "n1"},
        },
        "analysis": {"samples": 100, "seed": 1},
    }
    return config_from_dict(raw, Path("inline.toml"))


# --------------------------------------------------------------------------------------------- device Hessians
def _hessian_by_differences(model, volts, params, step=1e-6):
    """Central differences of the analytic first derivatives from mcmatch.model.devices (test only)."""
    out = np.zeros((4, 4))
    for j in range(4):
        up, down = list(volts), list(volts)
        up[j] += step
        down[j] -= step
        out[:, j] = (np.array(model(*up, **params)[1:]) - np.array(model(*down, **params)[1:])) / (2 * step)
    return out


SQUARE = {"vth0": 0.5, "beta": 3e-4, "lam": 0.08, "gamma": 0.45, "phi": 0.8}
EKV = {"vth0": 0.45, "beta": 3e-4, "lam": 0.05, "slope": 1.35, "ut": 0.025852}
POINTS = [
    (1.2, 1.0, 0.1, 0.0),  # saturation
    (0.2, 1.0, 0.1, 0.0),  # triode
    (0.1, 1.0, 0.3, 0.0),  # reversed
    (0.05, 1.0, 0.4, -0.2),  # reversed, body biased
    (0.9, 0.62, 0.0, 0.0),  # near threshold
]


@pytest.mark.parametrize("volts", POINTS)
def test_square_law_hessian_matches_its_first_derivatives(volts):
    # consistency of second with first derivatives; tolerance: central-difference truncation, common practice
    analytic = square_law_hessian(*volts, **SQUARE)
    numeric = _hessian_by_differences(square_law, volts, SQUARE)
    assert np.allclose(analytic, numeric, rtol=0, atol=1e-6 * np.abs(numeric).max())
    assert np.allclose(analytic, analytic.T, atol=1e-12 * np.abs(analytic).max())  # a Hessian is symmetric


@pytest.mark.parametrize("volts", POINTS)
def test_ekv_hessian_matches_its_first_derivatives(volts):
    analytic = ekv_hessian(*volts, **EKV)
    numeric = _hessian_by_differences(ekv, volts, EKV)
    assert np.allclose(analytic, numeric, rtol=0, atol=1e-6 * np.abs(numeric).max())


# --------------------------------------------------------------------------------------------- sensitivities
def _finite_difference_sensitivities(config, step_vth=1e-5, step_beta=1e-5):
    """Re-solve the nominal point with each parameter nudged both ways; central differences (test only)."""
    study = prepare(config)
    circuit = study.circuit
    params = circuit.params
    nd = params.count
    columns = {name: np.zeros(2 * nd) for name in config.measures}
    for col in range(2 * nd):
        values = []
        for sign in (1.0, -1.0):
            dvth, scale = np.zeros(nd), np.ones(nd)
            if col < nd:
                dvth[col] = sign * step_vth
            else:
                scale[col - nd] = 1.0 + sign * step_beta
            shifted = circuit.with_params(params.with_shift(dvth, scale))
            x = nominal_point(shifted, guess=study.x_nominal)
            p = shifted.params
            values.append(mna_measures(shifted, study.measures, x[None], p.vth[None], p.beta[None]))
        step = step_vth if col < nd else step_beta
        for name in columns:
            columns[name][col] = (values[0][name][0] - values[1][name][0]) / (2 * step)
    return study, columns


@pytest.mark.parametrize(
    "config",
    [mirror_config(lam=0.05), cascode_pmos_config(), cascode_pmos_config("ekv"), mirror_config("ekv", lam=0.05)],
    ids=["nmos-mirror", "cascode-pmos-square", "cascode-pmos-ekv", "nmos-mirror-ekv"],
)
def test_implicit_function_sensitivities_match_a_finite_difference_resolve(config):
    # implicit function theorem dx/dp = -J^-1 dF/dp against re-solving the circuit (the test may difference; the code
    # does not); tolerance: central-difference truncation and solver tolerance, common practice
    study, numeric = _finite_difference_sensitivities(config)
    analytic = measure_sensitivities(study.circuit, study.measures, study.x_nominal)
    for name, fd in numeric.items():
        scale = np.abs(fd).max()
        assert analytic[name] is not None, name
        assert np.allclose(analytic[name], fd, rtol=0, atol=1e-5 * scale + 1e-30), name


def test_vth_share_of_a_one_to_one_mirror_is_pelgrom_kinget():
    # Pelgrom, Duinmaijer, Welbers, IEEE JSSC 1989; Kinget, IEEE JSSC 2005: sigma^2(dI/I) = sigma^2(dbeta/beta)
    # + (gm/I)^2 sigma^2(dVt) with pair sigmas A/sqrt(WL); gm/I = 2/Vov; 5 mV um, 1 % um, 10/1 um, 0.2 V: 1.6125 %
    config = mirror_config()
    study = prepare(config)
    gradients = measure_sensitivities(study.circuit, study.measures, study.x_nominal)
    table = contribution_table(gradients["err"], parameter_sigmas(study.circuit), parameter_labels(study.circuit))
    area = 10 * UM * 1 * UM
    sigma_vt_pair = 5e-3 * UM / math.sqrt(area)
    sigma_beta_pair = 0.01 * UM / math.sqrt(area)
    gm_over_i = 2.0 / 0.2
    total = sigma_beta_pair**2 + gm_over_i**2 * sigma_vt_pair**2
    assert table["linear_std"] == pytest.approx(0.016125, abs=5e-7)
    # rel 1e-6: the 1e-12 S gmin across each channel (part of the circuit model) shifts the result by about 1e-8
    assert table["linear_std"] == pytest.approx(math.sqrt(total), rel=1e-6)
    vt_share = sum(t["share"] for t in table["terms"] if t["parameter"] == "vth")
    assert vt_share == pytest.approx(gm_over_i**2 * sigma_vt_pair**2 / total, rel=1e-6)
    assert sum(t["share"] for t in table["terms"]) == pytest.approx(1.0, abs=1e-12)
    # both devices' vth terms: sensitivity -+ gm/I per volt
    by_key = {(t["device"], t["parameter"]): t for t in table["terms"]}
    assert by_key[("M2", "vth")]["sensitivity"] == pytest.approx(-gm_over_i, rel=1e-6)
    assert by_key[("M1", "vth")]["sensitivity"] == pytest.approx(gm_over_i, rel=1e-6)
    assert by_key[("M2", "beta")]["sensitivity"] == pytest.approx(1.0, rel=1e-6)
    assert [t["share"] for t in table["terms"]] == sorted((t["share"] for t in table["terms"]), reverse=True)


@pytest.mark.slow
@pytest.mark.parametrize(
    "config", [mirror_config(lam=0.05), cascode_pmos_config()], ids=["nmos-mirror", "cascode-pmos-square"]
)
def test_linear_sigma_agrees_with_monte_carlo(config):
    # uncertainties-style cross-check: for small mismatch the linearised sigma lies within the Monte Carlo sigma's
    # sampling interval; relative s.e. of a sample sigma ~ 1/sqrt(2(N-1)), 4 standard errors (DESIGN.md section 4)
    samples = 4000
    study = prepare(config)
    columns = monte_carlo(study, samples)
    summary = {"measures": {}}
    for name in config.measures:
        v = columns[name][columns["converged"]]
        summary["measures"][name] = {"std": float(np.std(v, ddof=1)), "count": int(v.size)}
    out = run_contributions(study, summary)
    tolerance = 4.0 / math.sqrt(2 * (samples - 1))
    for name, entry in out.items():
        assert sum(t["share"] for t in entry["terms"]) == pytest.approx(1.0, abs=1e-9), name
        assert entry["linear_std"] == pytest.approx(entry["mc_std"], rel=tolerance), name
        assert entry["top"][0]["share"] == entry["terms"][0]["share"]


def test_a_measure_without_mismatch_dependence_has_zero_shares():
    # common practice, no source: a current source's current does not depend on the devices
    labels = [("M1", "vth"), ("M1", "beta")]
    table = contribution_table(np.zeros(2), np.array([1e-3, 1e-2]), labels, mc_std=0.0, mc_count=100)
    assert table["linear_std"] == 0.0
    assert all(t["share"] == 0.0 for t in table["terms"])
    assert table["top"] == []
    assert "note" in table


def test_std_interval_contains_the_sample_std():
    # chi-square interval on a normal sigma (any statistics text); widths shrink like 1/sqrt(2(N-1))
    lo, hi = std_interval(1.0, 2000)
    assert lo < 1.0 < hi
    assert (hi - lo) / 2 == pytest.approx(1.96 / math.sqrt(2 * 1999), rel=0.02)
