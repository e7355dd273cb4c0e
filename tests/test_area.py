"""Tests for mcmatch.stats.area and the area study: Pelgrom scaling, the Kinget minimum area, fit and search."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from mcmatch.config.loading import config_from_dict
from mcmatch.config.schema import Limits
from mcmatch.stats.area import (
    FLOOR_CHI2,
    SigmaFit,
    fit_sigma,
    gate_area,
    halving_cost,
    minimum_area,
    pelgrom_area,
    scaled_netlist,
)
from mcmatch.studies.analyses import run_area

UM = 1e-6
A_VT = 5e-3 * UM  # 5 mV um [V m]
A_BETA = 0.01 * UM  # 1 % um [m]


def test_kinget_minimum_area_closed_form():
    # Kinget, IEEE JSSC 40(6), 2005: WL = (A_beta^2 + (gm/I)^2 A_VT^2) / sigma^2; gm/I = 2/Vov, Vov = 0.2 V, 0.1 %:
    # (1e-4 + 100 * 2.5e-5) um^2 / 1e-6 = 2600 um^2
    assert pelgrom_area(1e-3, A_VT, A_BETA, 2.0 / 0.2) == pytest.approx(2600 * UM**2, rel=1e-12)


def mirror_config(**area) -> object:
    """Lambda = 0, 1:1 NMOS mirror at Vov = 0.2 V: W/L = 160/16 um, k' = 50 uA/V^2, 10 uA (invented process)."""
    raw = {
        "title": "area sweep",
        "technology": {
            "name": "inline test process (invented values)",
            "nmos": {"kprime": "50 uA/V^2", "vth0": "0.45 V", "lambda": 0.0, "a_vt": "5 mV*um", "a_beta": "1 %*um"},
        },
        "circuit": {
            "mosfet": [
                {
                    "name": "M1",
                    "type": "nmos",
                    "drain": "nb",
                    "gate": "nb",
                    "source": "gnd",
                    "w": "160 um",
                    "l": "16 um",
                },
                {
                    "name": "M2",
                    "type": "nmos",
                    "drain": "out",
                    "gate": "nb",
                    "source": "gnd",
                    "w": "160 um",
                    "l": "16 um",
                },
            ],
            "current_source": [{"name": "IREF", "from": "vdd", "to": "nb", "value": "10 uA"}],
            "voltage_source": [
                {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"},
                {"name": "VOUT", "plus": "out", "minus": "gnd", "value": "0.9 V"},
            ],
        },
        "measures": {"err": {"ratio": ["M2", "IREF"], "ideal": 1}, "i_ref": {"current": "IREF"}},
        "specs": {"err": {"min": "-0.3 %", "max": "0.3 %"}},
        "analysis": {
            "samples": 4000,
            "seed": 7,
            "target": {"k_sigma": 3},
            "area": {"devices": ["M1", "M2"], "scale": [0.25, 0.5, 1, 2, 4], **area},
        },
    }
    return config_from_dict(raw, Path("inline.toml"))


def test_aspect_scaling_keeps_w_over_l():
    # "aspect" mode: W and L each times sqrt(scale); gate area m W L times scale
    config = mirror_config()
    scaled, actual = scaled_netlist(config.circuit, ["M2"], 4.0, "aspect")
    m2 = scaled.device("M2")
    assert m2.w == pytest.approx(320 * UM) and m2.l == pytest.approx(32 * UM)
    assert actual == pytest.approx(4.0)
    assert scaled.device("M1") == config.circuit.device("M1")
    assert config.circuit.device("M2").w == pytest.approx(160 * UM)  # the original is untouched


def test_units_scaling_rounds_m_and_reports_the_actual_scale():
    config = mirror_config()
    scaled, actual = scaled_netlist(config.circuit, ["M1", "M2"], 2.6, "units")
    assert [m.m for m in scaled.mosfet] == [3, 3]
    assert actual == pytest.approx(3.0)
    scaled, actual = scaled_netlist(config.circuit, ["M1"], 0.25, "units")
    assert scaled.device("M1").m == 1  # never below one unit
    assert actual == 1.0
    up, actual = scaled_netlist(config.circuit, ["M1", "M2"], 2.2, "units", round_up=True)
    assert [m.m for m in up.mosfet] == [3, 3]
    assert gate_area(up, ["M1", "M2"]) == pytest.approx(6 * 160 * 16 * UM**2)


def test_fit_recovers_pelgrom_and_keeps_no_floor_on_exact_pelgrom_data():
    # Pelgrom 1989: sigma = k / sqrt(A) exactly -> k recovered, no floor, slope -1/2, halving costs a factor 4
    area = np.array([1, 2, 4, 8, 16]) * 1e-11
    k = 3e-8
    fit = fit_sigma(area, k / np.sqrt(area), np.full(5, 4000))
    assert fit.k == pytest.approx(k, rel=1e-9)
    assert fit.floor == 0.0
    assert fit.slope == pytest.approx(-0.5, abs=1e-9)
    assert fit.falls_with_area
    assert halving_cost(fit, 4e-11) == pytest.approx(4.0, rel=1e-12)


def test_fit_keeps_a_floor_the_data_demand():
    # sigma^2 = k^2/A + floor^2 with a floor comparable to the mismatch term: the floor is kept and recovered, and
    # halving then costs more than 4 (or is impossible once the floor is over half the sigma)
    area = np.array([1, 2, 4, 8, 16]) * 1e-11
    k, floor = 3e-8, 5e-3
    fit = fit_sigma(area, np.sqrt(k**2 / area + floor**2), np.full(5, 4000))
    assert fit.delta_chi2 > FLOOR_CHI2
    assert fit.k == pytest.approx(k, rel=1e-6)
    assert fit.floor == pytest.approx(floor, rel=1e-6)
    assert halving_cost(fit, 1e-11) > 4.0
    assert halving_cost(fit, 16e-11) is None  # sigma there is under twice the floor


def test_fit_flags_a_sigma_that_does_not_fall():
    area = np.array([1, 2, 4, 8]) * 1e-11
    fit = fit_sigma(area, np.full(4, 1e-3), np.full(4, 2000))
    assert not fit.falls_with_area
    fit = fit_sigma(area, np.zeros(4), np.full(4, 2000))
    assert not fit.falls_with_area and fit.k == 0.0


def test_minimum_area_solves_the_normal_model():
    # a centred two-sided spec +-L with N(0, k^2/A): yield Y needs L/sigma = z = isf((1 - Y)/2), A = (k z / L)^2;
    # the k-sigma rule gives A = (k K / L)^2 (normal distribution, any statistics text)
    fit = SigmaFit(k=2e-8, floor=0.0, slope=-0.5, delta_chi2=None, falls_with_area=True)
    limits = Limits(min=-0.003, max=0.003)

    def zero_mean(a):
        return np.zeros_like(np.asarray(a, dtype=float))

    found = minimum_area(fit, zero_mean, limits, (1e-14, 1e-6), 0.999)
    z = stats.norm.isf(0.0005)
    assert found["area"] == pytest.approx((2e-8 * z / 0.003) ** 2, rel=1e-8)
    assert found["yield"] == pytest.approx(0.999, abs=1e-9)
    found = minimum_area(fit, zero_mean, limits, (1e-14, 1e-6), 0.999, k_sigma=3)
    assert found["area"] == pytest.approx((2e-8 * 3 / 0.003) ** 2, rel=1e-8)
    # a mean offset from the centre needs more area
    shifted = minimum_area(fit, lambda a: zero_mean(a) + 0.001, limits, (1e-14, 1e-6), 0.999)
    assert shifted["area"] > (2e-8 * z / 0.003) ** 2
    # a floor above the allowed sigma makes the spec unreachable
    floored = SigmaFit(k=2e-8, floor=0.002, slope=-0.1, delta_chi2=50.0, falls_with_area=True)
    assert minimum_area(floored, zero_mean, limits, (1e-14, 1e-6), 0.999, k_sigma=3)["area"] is None


@pytest.mark.slow
def test_monte_carlo_sweep_follows_pelgrom_and_finds_the_kinget_area():
    # Pelgrom 1989: sigma(ratio) = sqrt(2 (A_beta^2 + (gm/I)^2 A_VT^2) / area) with area = 2 WL summed over the pair;
    # Kinget 2005: sigma = 0.1 % needs WL = 2600 um^2 per device. Tolerances: 4 standard errors of a sample sigma,
    # 1/sqrt(2(N-1)) relative; an area goes as 1/sigma^2, so twice that relative (DESIGN.md section 4).
    config = mirror_config()
    samples = config.analysis.samples
    result = run_area(config)
    rel_se = 1.0 / math.sqrt(2 * (samples - 1))
    k_true = math.sqrt(2 * (A_BETA**2 + (2.0 / 0.2) ** 2 * A_VT**2))
    for point in result["points"]:
        std = point["measures"]["err"]["std"]
        assert std * math.sqrt(point["area"]) == pytest.approx(k_true, rel=4 * rel_se), point["scale"]
    fit = result["fit"]["err"]
    assert fit["k"] == pytest.approx(k_true, rel=4 * rel_se)
    assert fit["floor"] == 0.0 and fit["falls_with_area"]
    assert result["halving_cost"]["err"] == pytest.approx(4.0)
    minimum = result["minimum"]["err"]
    assert minimum["area"] / 2 == pytest.approx(pelgrom_area(1e-3, A_VT, A_BETA, 10.0), rel=2 * 4 * rel_se)
    assert minimum["scale"] == pytest.approx(minimum["area"] / (2 * 160 * 16 * UM**2))
    confirmed = minimum["confirmed"]
    assert confirmed["area"] == pytest.approx(minimum["area"])
    assert confirmed["std"] == pytest.approx(1e-3, rel=2 * 4 * rel_se)
    assert confirmed["samples"] == samples and confirmed["failed_solves"] == 0
    # a current-source current does not depend on area: fitted but flagged
    assert not result["fit"]["i_ref"]["falls_with_area"] and "flag" in result["fit"]["i_ref"]
    assert set(result) >= {"mode", "devices", "points", "fit", "minimum", "halving_cost"}
