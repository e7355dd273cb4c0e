"""Tests for mcmatch.stats.corners and the corner study, and the analyses in a whole in-process run."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

import mcmatch.studies.analyses
from mcmatch.cli import main
from mcmatch.config.loading import config_from_dict
from mcmatch.config.schema import Limits
from mcmatch.errors import SolveError
from mcmatch.model.devices import thermal_voltage
from mcmatch.model.technology import device_parameters
from mcmatch.stats.corners import CRITERION_MARGIN, CRITERION_SPREAD, corner_grid, worst_corners
from mcmatch.studies.analyses import run_corners

ROOT = Path(__file__).resolve().parents[1]


def mirror_config(corners: dict | None = None, lam: float = 0.0, feed: str = "resistor") -> object:
    """1:1 NMOS mirror (invented process), lambda = 0 by default, its reference fed by a resistor from VDD (so the
    supply matters) or by an ideal 10 uA current source (feed = "source")."""
    if feed == "resistor":
        feeds = {"resistor": [{"name": "RB", "a": "vdd", "b": "nb", "value": "100 kohm"}]}
    else:
        feeds = {"current_source": [{"name": "IREF", "from": "vdd", "to": "nb", "value": "10 uA"}]}
    raw = {
        "title": "corner mirror",
        "technology": {
            "name": "inline test process (invented values)",
            "nominal_temperature": "27 degC",
            "nmos": {
                "kprime": "50 uA/V^2",
                "vth0": "0.45 V",
                "lambda": lam,
                "a_vt": "5 mV*um",
                "a_beta": "1 %*um",
                "vth_tempco": "-1 mV/K",
                "mobility_exponent": -1.5,
            },
            "corners": {
                "ss": {"nmos": {"vth_shift": "60 mV"}},
                "ff": {"nmos": {"vth_shift": "-60 mV"}},
                "sk": {"nmos": {"vth_shift": "30 mV", "kprime_scale": 0.9}},
            },
        },
        "circuit": {
            "mosfet": [
                {"name": "M1", "type": "nmos", "drain": "nb", "gate": "nb", "source": "gnd", "w": "10 um", "l": "1 um"},
                {
                    "name": "M2",
                    "type": "nmos",
                    "drain": "out",
                    "gate": "nb",
                    "source": "gnd",
                    "w": "10 um",
                    "l": "1 um",
                },
            ],
            **feeds,
            "voltage_source": [
                {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"},
                {"name": "VOUT", "plus": "out", "minus": "gnd", "value": "0.9 V"},
            ],
        },
        "measures": {"err": {"ratio": ["M2", "M1"], "ideal": 1}, "i_out": {"current": "M2"}, "v_nb": {"voltage": "nb"}},
        "specs": {"err": {"min": "-3 %", "max": "3 %"}},
        "analysis": {"samples": 400, "seed": 5, **({"corners": corners} if corners is not None else {})},
    }
    return config_from_dict(raw, Path("inline.toml"))


def test_thermal_voltage_at_300_kelvin():
    # U_T = k T / q with the exact SI constants (2019 SI): 25.852 mV at 300 K
    assert thermal_voltage(300.0) == pytest.approx(25.852e-3, abs=5e-7)
    config = mirror_config()
    assert device_parameters(config.circuit, config.technology, 300.0).ut == pytest.approx(25.852e-3, abs=5e-7)


def test_the_written_out_constants_are_scipys_codata_values():
    # k and e are exact in the SI since 2019 (CODATA 2018, as scipy.constants gives them); the device model writes
    # them out instead of importing scipy.constants at start-up
    import scipy.constants

    from mcmatch.model.devices import BOLTZMANN, ELEMENTARY_CHARGE

    assert (scipy.constants.k, scipy.constants.e) == (BOLTZMANN, ELEMENTARY_CHARGE)
    assert thermal_voltage(300.0) == scipy.constants.k * 300.0 / scipy.constants.e


def test_kprime_falls_with_temperature_by_the_mobility_exponent():
    # mobility ~ T^-1.5 (lattice scattering; e.g. Sze, Physics of Semiconductor Devices): from 27 to 125 degC k'
    # becomes (398.15/300.15)^-1.5 = 0.65454 of its value (the task brief's "0.6546" is this, rounded up)
    config = mirror_config()
    cold = device_parameters(config.circuit, config.technology, 300.15)
    hot = device_parameters(config.circuit, config.technology, 398.15)
    assert hot.beta[0] / cold.beta[0] == pytest.approx(0.65454, abs=5e-6)
    assert hot.beta[0] / cold.beta[0] == pytest.approx((398.15 / 300.15) ** -1.5, rel=1e-12)
    assert hot.vth[0] - cold.vth[0] == pytest.approx(-1e-3 * 98.0)  # vth_tempco -1 mV/K over 98 K


def test_grid_crosses_process_temperature_and_supply():
    config = mirror_config({"temperature": ["-40 degC", "125 degC"], "supply_scale": [0.9, 1.1], "samples": 50})
    grid = corner_grid(config)
    assert [g.process for g in grid[:4]] == ["tt"] * 4  # default: tt, then the technology's corners
    assert {g.process for g in grid} == {"tt", "ss", "ff", "sk"}
    assert len(grid) == 4 * 2 * 2
    assert {g.temperature for g in grid} == {233.15, 398.15}
    assert {g.supply for g in grid} == {("VDD", 1.62), ("VDD", 1.98)}  # 0.9 and 1.1 times the 1.8 V of VDD
    default = corner_grid(mirror_config({"process": ["SS"]}))
    assert [(g.process, g.temperature, g.supply) for g in default] == [("ss", config.temperature, ("VDD", 1.8))]


def test_equal_vt_shift_leaves_a_lambda_zero_mirror_unchanged():
    # square law with lambda = 0: I2/I1 = beta2 (VGS - Vt2)^2 / (beta1 (VGS - Vt1)^2); a global shift of both Vt moves
    # VGS with it (Razavi, Design of Analog CMOS Integrated Circuits, ch. 5), so the nominal ratio is unchanged
    config = mirror_config({"process": ["tt", "ss", "ff"], "samples": 300})
    entries, worst = run_corners(config, {"measures": {"err": {"nominal": 0.0}, "i_out": {"nominal": 1e-5}}})
    for e in entries:
        assert e["measures"]["err"]["nominal"] == pytest.approx(0.0, abs=1e-9)
    # ... while the current itself moves with the corner (the reference resistor sees a different VGS)
    currents = [e["measures"]["i_out"]["nominal"] for e in entries]
    assert currents[1] < currents[0] < currents[2]
    assert worst["i_out"]["criterion"] == CRITERION_SPREAD
    # with an ideal reference current VGS - Vt does not move at all, so with common random numbers (one seed for every
    # grid point) the ratio's whole distribution is the same sample by sample
    config = mirror_config({"process": ["tt", "ss", "ff"], "samples": 300}, feed="source")
    entries, _ = run_corners(config, {"measures": {"err": {"nominal": 0.0}}})
    ratios = [e["measures"]["err"] for e in entries]
    for r in ratios:
        assert r["nominal"] == pytest.approx(0.0, abs=1e-9)
        assert r["mean"] == pytest.approx(ratios[0]["mean"], abs=1e-9)
        assert r["std"] == pytest.approx(ratios[0]["std"], rel=1e-6)


def test_supply_and_temperature_reach_the_solve():
    # I = (VDD - VGS) / R: a higher supply gives more current; common practice, no source
    config = mirror_config({"process": ["tt"], "supply": ["1.6 V", "2.0 V"], "temperature": ["27 degC"], "samples": 50})
    entries, _ = run_corners(config, {"measures": {"err": {"nominal": 0.0}}})
    low, high = (e["measures"]["i_out"]["nominal"] for e in entries)
    assert high > low
    assert entries[0]["supply"] == pytest.approx(1.6) and entries[1]["supply"] == pytest.approx(2.0)
    assert entries[0]["temperature"] == pytest.approx(300.15)
    for e in entries:
        assert set(e) >= {"process", "temperature", "supply", "measures", "yield", "failed_solves"}
        assert set(e["yield"]) >= {"fraction", "ci95", "passed", "total"}
        assert e["yield"]["total"] == 50 and e["failed_solves"] == 0


def test_a_corner_without_operating_point_is_reported_not_raised(monkeypatch):
    real = mcmatch.studies.analyses.prepare

    def failing(config, corner="tt", **kwargs):
        if corner == "ss":
            raise SolveError("the operating point could not be found")
        return real(config, corner=corner, **kwargs)

    monkeypatch.setattr(mcmatch.studies.analyses, "prepare", failing)
    config = mirror_config({"process": ["tt", "ss", "ff"], "samples": 50})
    entries, worst = run_corners(config, {"measures": {"err": {"nominal": 0.0}}})
    assert [("error" in e) for e in entries] == [False, True, False]
    assert "could not be found" in entries[1]["error"]
    assert entries[1]["process"] == "ss"
    assert worst["err"]["process"] in {"tt", "ff"}


def test_worst_corner_is_smallest_sigma_margin_or_largest_spread():
    # common practice, no source: with a spec, worst = smallest min((max - mean)/std, (mean - min)/std); without one,
    # the largest |mean - nominal| + 3 std
    def entry(process, fraction, mean, std, samples=1000):
        return {
            "process": process,
            "temperature": 300.15,
            "supply": 1.8,
            "measures": {"a": {"mean": mean, "std": std}, "b": {"mean": mean, "std": std}},
            "yield": {"fraction": fraction, "specs": {"a": {"fraction": fraction}}},
            "samples": samples,
            "failed_solves": 0,
        }

    # margins: p1 3.0 sigma, p2 (3 - 0.1) / 0.5 = 5.8, p3 (-2 + 3) / 0.5 = 2.0 (to the min limit)
    entries = [entry("p1", 0.99, 0.0, 1.0), entry("p2", 0.95, 0.1, 0.5), entry("p3", 0.999, -2.0, 0.5)]
    worst = worst_corners(entries, {"a": {"nominal": 0.0}, "b": {"nominal": 0.0}}, {"a": Limits(min=-3, max=3)})
    assert worst["a"]["process"] == "p3" and worst["a"]["value"] == pytest.approx(2.0)
    assert worst["a"]["margin_sigma"] == pytest.approx(2.0) and worst["a"]["limit"] == "min"
    assert worst["a"]["criterion"] == CRITERION_MARGIN and worst["a"]["spec_yield"] == 0.999
    # standard error of the margin: sqrt(1/N + z^2 / (2 (N - 1))), the normal-theory first-order error
    assert worst["a"]["margin_error"] == pytest.approx(math.sqrt(1 / 1000 + 4 / (2 * 999)))
    assert [t["process"] for t in worst["a"]["tied"]] == ["p3"]  # p1 is 1 sigma away: ~14 standard errors
    assert worst["b"]["process"] == "p3" and worst["b"]["value"] == pytest.approx(3.5)
    assert worst["b"]["criterion"] == CRITERION_SPREAD


def test_a_spread_that_does_not_depend_on_the_supply_is_worst_at_any_supply():
    # common practice, no source: a measure identical at every supply of the worst process/temperature (a current
    # reference the supply does not reach) has no single worst supply; the summary names "any supply"
    def entry(process, supply, std):
        return {
            "process": process,
            "temperature": 233.15,
            "supply": supply,
            "measures": {"b": {"mean": 1.0, "std": std}},
            "samples": 100,
            "failed_solves": 0,
        }

    entries = [entry(p, v, 0.2 if p == "ff" else 0.1) for p in ("tt", "ff") for v in (1.62, 1.8, 1.98)]
    worst = worst_corners(entries, {"b": {"nominal": 1.0}}, {})
    assert worst["b"]["process"] == "ff" and worst["b"]["value"] == pytest.approx(0.6)
    assert [(t["process"], t["supply"]) for t in worst["b"]["tied"]] == [("ff", 1.62), ("ff", 1.8), ("ff", 1.98)]
    assert worst["b"]["label"] == "ff, -40 degC, any supply"
    # a spread larger by one part in a million is not a tie
    entries[4]["measures"]["b"]["std"] = 0.2 * (1 + 1e-6)
    assert "tied" not in worst_corners(entries, {"b": {"nominal": 1.0}}, {})["b"]


def test_corners_within_sampling_error_are_reported_together():
    # common practice, no source: margins 2.00 and 2.03 sigma from 200 samples each (standard error about 0.12)
    # cannot be told apart; 2.6 sigma can (about 3.4 combined standard errors away)
    def entry(process, temperature, supply, mean):
        return {
            "process": process,
            "temperature": temperature,
            "supply": supply,
            "measures": {"a": {"mean": mean, "std": 1.0}},
            "yield": {"specs": {"a": {"fraction": 0.99}}},
            "samples": 200,
            "failed_solves": 0,
        }

    entries = [
        entry("ss", 233.15, 1.62, 8.0),
        entry("ss", 233.15, 1.98, 7.97),
        entry("tt", 233.15, 1.62, 7.4),
        entry("tt", 233.15, 1.98, 7.4),
    ]
    worst = worst_corners(entries, {"a": {"nominal": 0.0}}, {"a": Limits(min=None, max=10.0)})["a"]
    assert worst["process"] == "ss" and worst["supply"] == 1.62
    assert {t["supply"] for t in worst["tied"]} == {1.62, 1.98}
    assert worst["label"] == "ss, -40 degC, any supply"


@pytest.mark.slow
def test_demo_run_in_process_writes_the_analyses(tmp_path):
    # DESIGN.md section 3: summary.json carries corners, area and contributions with these field names
    out = tmp_path / "demo"
    assert main(["run", str(ROOT / "configs" / "demo.toml"), "--samples", "2000", "--out", str(out), "--quiet"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    corners = summary["corners"]
    assert isinstance(corners, list) and len(corners) == 5 * 3 * 3
    for c in corners:
        assert {"process", "temperature", "supply", "measures", "yield", "failed_solves"} <= set(c)
        assert set(c["yield"]) >= {"fraction", "ci95"}
        for m in c["measures"].values():
            assert set(m) >= {"nominal", "mean", "std"}
    assert {c["temperature"] for c in corners} == {233.15, 300.15, 398.15}
    assert {c["supply"] for c in corners} == {1.62, 1.8, 1.98}
    assert set(summary["corners_worst"]) == set(summary["measures"])
    area = summary["area"]
    assert area["mode"] == "aspect" and area["devices"] == ["MREF", "MOUT"]
    assert [p["scale"] for p in area["points"]] == [0.25, 0.5, 1, 2, 4]
    for p in area["points"]:
        assert p["area"] == pytest.approx(p["scale"] * (4 * 2 + 4 * 4 * 2) * 1e-12)  # m W L of MREF + MOUT
        assert all(set(m) >= {"mean", "std"} for m in p["measures"].values())
    assert all(set(f) >= {"k", "floor"} for f in area["fit"].values())
    assert set(area["minimum"]["gain_error"]) >= {"scale", "area", "std", "yield", "confirmed"}
    contributions = summary["contributions"]
    assert set(contributions) == set(summary["measures"])
    for name, c in contributions.items():
        assert set(c) >= {"linear_std", "mc_std", "terms"}
        assert c["mc_std"] == summary["measures"][name]["std"]
        assert sum(t["share"] for t in c["terms"]) == pytest.approx(1.0)
        for t in c["terms"]:
            assert set(t) >= {"device", "parameter", "sensitivity", "std", "share"}
            assert t["parameter"] in {"vth", "beta"}
    target = summary["yield"]["target"]
    assert target["samples_needed"] == math.ceil(math.log(0.05) / math.log(0.9973))
    assert set(summary["yield"]["specs"]["gain_error"]) >= {"cp", "cpk", "gaussian_tail_estimate"}
    text = (out / "summary.json").read_text()
    assert "NaN" not in text and "Infinity" not in text
