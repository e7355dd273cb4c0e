"""Tests for the port_resistance measure (mcmatch.model.small_signal, mcmatch.solve.ports): textbook output
resistances against the compact model's own gm, gds, gmb, a finite-difference check, the fast path against the
reference path, sensitivities, and the config check."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from mcmatch.cli import main
from mcmatch.config.loading import config_from_dict
from mcmatch.config.schema import Measure
from mcmatch.errors import ConfigError
from mcmatch.model.circuit import GMIN
from mcmatch.model.operating_point import device_operating_points
from mcmatch.model.sensitivity import measure_sensitivities
from mcmatch.model.small_signal import branch_unknown
from mcmatch.run.study import nominal_measures, nominal_point, prepare, solve_samples
from mcmatch.solve.reference import solve_reference

ROOT = Path(__file__).resolve().parent.parent
TECH180 = str(ROOT / "configs" / "technologies" / "demo180.toml")
TECH65 = str(ROOT / "configs" / "technologies" / "demo65.toml")
CONFIG_PATH = ROOT / "configs" / "test_port_resistance.toml"  # never written; names errors only


def solve_samples_mna(study, dvth, dbeta):
    """The reference (full MNA) path for a prepared study's deviations (S, n_devices)."""
    return solve_reference(study.circuit, study.measures, study.x_nominal, dvth, dbeta)


def _config(circuit: dict, technology: str = TECH180, measures: dict | None = None):
    raw = {"technology": technology, "circuit": circuit}
    if measures:
        raw["measures"] = measures
    return config_from_dict(raw, CONFIG_PATH)


def _points(study) -> dict[str, dict]:
    return {p["name"]: p for p in device_operating_points(study.circuit, study.x_nominal)}


@pytest.mark.parametrize("polarity", ["nmos", "pmos"])
def test_simple_mirror_port_resistance_is_one_over_gds(polarity):
    # Razavi, Design of Analog CMOS Integrated Circuits, ch. 5: a simple mirror's output resistance is ro = 1/gds
    # (here with the model's GMIN across the channel); gds is the compact model's own at the operating point
    study = prepare(_config({"template": "simple_mirror", "type": polarity, "ratio": 2}))
    gds = _points(study)["MOUT1"]["gds"]
    assert study.measures["r_out1"] == Measure(port_resistance="VOUT1")  # the template's default
    assert nominal_measures(study)["r_out1"] == pytest.approx(1.0 / (gds + GMIN), rel=1e-9)


@pytest.mark.parametrize("polarity", ["nmos", "pmos"])
def test_cascode_port_resistance_matches_the_textbook_formula(polarity):
    # Razavi, Design of Analog CMOS Integrated Circuits, ch. 3 and 5: Rout = ro1 + ro2 + (gm2 + gmb2) ro1 ro2
    study = prepare(_config({"template": "cascode_mirror", "type": polarity, "ratio": 2}))
    points = _points(study)
    gds1 = points["MOUT1"]["gds"]
    gm2, gds2, gmb2 = (points["MCAS1"][k] for k in ("gm", "gds", "gmb"))
    if points["MCAS1"]["bulk"] == points["MCAS1"]["source"]:  # the pmos default
        gmb2 = 0.0  # bulk moving with the source: no body effect (Razavi, ch. 3)
    else:
        assert gmb2 > 0.05 * gm2  # nmos bulk at gnd, source above it: the body effect is really in the check
    ro1, ro2 = 1.0 / (gds1 + GMIN), 1.0 / (gds2 + GMIN)
    expected = ro1 + ro2 + (gm2 + gmb2) * ro1 * ro2
    assert nominal_measures(study)["r_out1"] == pytest.approx(expected, rel=1e-7)


@pytest.mark.parametrize(("technology", "polarity"), [(TECH180, "nmos"), (TECH65, "pmos")])
def test_diode_connected_port_resistance_is_one_over_gm_plus_gds(technology, polarity):
    # Razavi, Design of Analog CMOS Integrated Circuits, ch. 3: a diode-connected device looks like 1/(gm + gds)
    # (no body effect: source at the bulk rail); square law and EKV
    if polarity == "nmos":
        mos = {"name": "MD", "type": "nmos", "drain": "d", "gate": "d", "source": "gnd", "w": "4 um", "l": "2 um"}
        sources = [{"name": "VD", "plus": "d", "minus": "gnd", "value": "0.75 V"}]
    else:
        mos = {"name": "MD", "type": "pmos", "drain": "d", "gate": "d", "source": "vdd", "w": "16 um", "l": "2 um"}
        sources = [
            {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.2 V"},
            {"name": "VD", "plus": "d", "minus": "gnd", "value": "0.6 V"},
        ]
    config = _config({"mosfet": [mos], "voltage_source": sources}, technology, {"r_d": {"port_resistance": "VD"}})
    study = prepare(config)
    point = _points(study)["MD"]
    assert point["gm"] > 10 * point["gds"] > 0
    assert nominal_measures(study)["r_d"] == pytest.approx(1.0 / (point["gm"] + point["gds"] + GMIN), rel=1e-9)


@pytest.mark.parametrize(
    ("circuit", "technology"),
    [
        ({"template": "wide_swing_cascode", "type": "pmos", "supply": "1.2 V", "output_voltage": "0.5 V"}, TECH65),
        ({"template": "cascode_mirror", "type": "nmos", "ratio": 3}, TECH180),
        ({"template": "degenerated_mirror", "type": "nmos", "ratio": 2}, TECH180),
    ],
)
def test_port_resistance_matches_a_finite_difference_of_the_source(circuit, technology):
    # common practice, no source: perturb the source voltage by +-h, re-solve, dV/dI by central difference; the
    # O(h^2) truncation and the solver's tolerance stay far below 1e-5 relative at h = 1 mV
    study = prepare(_config(circuit, technology))
    circuit_ = study.circuit
    b = branch_unknown(circuit_, "VOUT1")
    v0 = float(circuit_.vsource_value[circuit_.vsource_names.index("VOUT1")])
    h = 1e-3
    currents = [nominal_point(circuit_.with_voltage("VOUT1", v0 + s * h), study.x_nominal)[b] for s in (1.0, -1.0)]
    finite_difference = 2 * h / (currents[0] - currents[1])
    assert nominal_measures(study)["r_out1"] == pytest.approx(finite_difference, rel=1e-5)


@pytest.mark.parametrize("polarity", ["nmos", "pmos"])
def test_fast_path_port_resistance_equals_the_reference_path(polarity):
    # the reduced fast path and the full MNA reference must give the same numbers sample by sample (common
    # practice, no source); mismatch of 2 sigma keeps every sample away from the operating point's edges
    circuit = {"template": "wide_swing_cascode", "type": polarity, "supply": "1.2 V", "ratio": 2}
    study = prepare(_config(circuit, TECH65))
    p = study.circuit.params
    rng = np.random.default_rng(3)
    dvth = 2 * rng.standard_normal((300, p.count)) * p.sigma_vth
    dbeta = 2 * rng.standard_normal((300, p.count)) * p.sigma_beta
    fast, reference = solve_samples(study, dvth, dbeta), solve_samples_mna(study, dvth, dbeta)
    assert fast["converged"].all() and reference["converged"].all()
    np.testing.assert_allclose(fast["r_out1"], reference["r_out1"], rtol=1e-9)
    assert np.ptp(fast["r_out1"]) > 1e-3 * np.mean(fast["r_out1"])  # mismatch really moves it


def test_port_resistance_sensitivity_matches_a_finite_difference():
    # common practice, no source: d r_out / d vth of each device by central difference of the nominal solve
    study = prepare(_config({"template": "cascode_mirror", "type": "nmos", "ratio": 2}))
    circuit = study.circuit
    gradient = measure_sensitivities(circuit, {"r": Measure(port_resistance="VOUT1")}, study.x_nominal)["r"]
    h = 1e-5
    for k in range(circuit.params.count):
        values = []
        for s in (1.0, -1.0):
            vth = circuit.params.vth.copy()
            vth[k] += s * h
            shifted = circuit.with_params(dataclasses.replace(circuit.params, vth=vth))
            moved = dataclasses.replace(study, circuit=shifted, x_nominal=nominal_point(shifted, study.x_nominal))
            values.append(nominal_measures(moved)["r_out1"])
        numeric = (values[0] - values[1]) / (2 * h)
        assert gradient[k] == pytest.approx(numeric, rel=1e-4, abs=1e-6 * np.abs(gradient).max()), k


def test_port_resistance_must_name_a_voltage_source(tmp_path, capsys):
    # DESIGN.md section 3: invalid input exits 2 naming file and key, before any work
    with pytest.raises(ConfigError) as info:
        _config({"template": "simple_mirror"}, measures={"r": {"port_resistance": "MOUT1"}})
    assert info.value.key == "measures.r.port_resistance"
    assert "voltage source" in str(info.value) and "VOUT1" in str(info.value)
    config = tmp_path / "bad.toml"
    config.write_text(
        f'technology = "{TECH180}"\n[circuit]\ntemplate = "simple_mirror"\n'
        '[measures]\nr = { port_resistance = "X" }\n'
    )
    assert main(["run", str(config), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    assert "measures.r.port_resistance" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()
    assert Measure(port_resistance="VOUT1").unit == "ohm"
