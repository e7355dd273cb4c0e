"""Tests for mcmatch.model.operating_point and `mcmatch check`: regions, textbook small-signal values, EKV inversion,
designer's warnings, and the command line."""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

from mcmatch.cli import main
from mcmatch.config.loading import config_from_dict
from mcmatch.model.devices import thermal_voltage
from mcmatch.model.operating_point import device_operating_points, ekv_saturation_voltage, warnings_for
from mcmatch.run.study import nominal_measures, prepare
from mcmatch.units import parse_quantity

ROOT = Path(__file__).resolve().parent.parent
TECHNOLOGIES = ROOT / "configs" / "technologies"
TECH180 = tomllib.loads((TECHNOLOGIES / "demo180.toml").read_text())
TECH65 = tomllib.loads((TECHNOLOGIES / "demo65.toml").read_text())
CONFIG_PATH = ROOT / "configs" / "test_check.toml"  # never written


def _config(circuit: dict, technology: dict = TECH180):
    return config_from_dict({"technology": technology, "circuit": circuit}, CONFIG_PATH)


def _check(config):
    study = prepare(config)
    points = device_operating_points(study.circuit, study.x_nominal)
    return {p["name"]: p for p in points}, warnings_for(config, points, study.x_nominal), study


def _q(table: dict, key: str, unit: str) -> float:
    return parse_quantity(table[key], unit)


# --- regions ---------------------------------------------------------------------------------------------------------
def test_a_device_below_threshold_is_cut_off():
    # Razavi, Design of Analog CMOS Integrated Circuits, 2nd ed., 2017, ch. 2: no channel current for Vgs < Vt
    circuit = {
        "mosfet": [
            {"name": "MREF", "type": "nmos", "drain": "nb", "gate": "nb", "source": "gnd", "w": "4 um", "l": "2 um"},
            {"name": "MX", "type": "nmos", "drain": "vdd", "gate": "ng", "source": "gnd", "w": "4 um", "l": "2 um"},
        ],
        "current_source": [{"name": "IREF", "from": "vdd", "to": "nb", "value": "10 uA"}],
        "voltage_source": [
            {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"},
            {"name": "VG", "plus": "ng", "minus": "gnd", "value": "0.3 V"},
        ],
    }
    points, warnings, _ = _check(_config(circuit))
    assert points["MX"]["region"] == "cutoff"
    assert points["MX"]["vgs"] == pytest.approx(0.3) and points["MX"]["vth"] == pytest.approx(0.45)
    assert points["MX"]["id"] == 0.0 and points["MX"]["gm_id"] is None
    assert points["MREF"]["region"] == "saturation"
    assert any(w.startswith("MX is cut off") for w in warnings)
    assert not any("MREF" in w for w in warnings)


@pytest.mark.parametrize("polarity", ["nmos", "pmos"])
def test_a_diode_connected_device_is_never_in_triode(polarity):
    # Razavi 2017, ch. 2: with Vds = Vgs and Vt > 0, Vds > Vgs - Vt: a diode is saturated, with headroom exactly Vt
    for current in np.logspace(-9, -3.5, 7):
        circuit = {"template": "diode_reference", "type": polarity, "reference_current": float(current)}
        points, warnings, _ = _check(_config(circuit))
        ref = points["MREF"]
        assert ref["diode_connected"] and ref["region"] == "saturation"
        assert ref["headroom"] == pytest.approx(ref["vth"], rel=1e-12)
        assert not [w for w in warnings if "triode" in w]


def test_ekv_diodes_are_saturated_from_weak_to_strong_inversion():
    # Enz, Krummenacher, Vittoz, Analog Integrated Circuits and Signal Processing 8, 1995: a diode's Vds = Vgs stays
    # above the saturation voltage (about 4 U_T in weak inversion) for Vt > 0
    for current in np.logspace(-8, -3, 6):
        points, _, _ = _check(_config({"template": "diode_reference", "reference_current": float(current)}, TECH65))
        assert points["MREF"]["region"] == "saturation"


def test_triode_output_is_reported_with_its_compliance_voltage():
    # Razavi 2017, ch. 5: a simple nmos mirror's output needs Vds >= Vov; below that the device is in triode
    points, warnings, _ = _check(_config({"template": "simple_mirror", "ratio": 2, "output_voltage": "0.1 V"}))
    out = points["MOUT1"]
    assert out["region"] == "triode"
    assert out["vdsat"] == pytest.approx(out["vgs"] - out["vth"])
    assert out["headroom"] == pytest.approx(0.1 - out["vov"])
    text = next(w for w in warnings if w.startswith("MOUT1 is in triode"))
    assert "'out1'" in text and "VOUT1" in text and f"{out['vov']:.3f} V" in text and "compliance" in text


def test_pmos_triode_output_names_the_highest_output_it_allows():
    # a pmos mirror's output must stay below Vdd - Vov (Razavi 2017, ch. 5)
    points, warnings, _ = _check(_config({"template": "simple_mirror", "type": "pmos", "output_voltage": "1.75 V"}))
    out = points["MOUT1"]
    assert out["region"] == "triode" and out["vds"] == pytest.approx(0.05)
    text = next(w for w in warnings if w.startswith("MOUT1 is in triode"))
    assert "above its compliance voltage" in text and f"{1.8 - out['vov']:.3f} V" in text


def test_nodes_outside_the_rails_are_reported():
    # common practice, no source: an output forced beyond the supply is a mistake worth a warning
    _, warnings, _ = _check(_config({"template": "simple_mirror", "output_voltage": "2.5 V"}))
    assert any("'out1'" in w and "above the highest supply rail" in w and "VOUT1" in w for w in warnings)
    _, warnings, _ = _check(_config({"template": "simple_mirror", "type": "pmos", "output_voltage": "-0.3 V"}))
    assert any("'out1'" in w and "below the lowest supply rail" in w for w in warnings)
    _, warnings, _ = _check(_config({"template": "cascode_mirror"}))
    assert warnings == []


# --- textbook values at the solved point ---------------------------------------------------------------------------
def test_square_law_values_match_the_textbook():
    # Razavi 2017, ch. 2: Id = (beta/2) Vov^2 (1 + lambda Vds), gm = 2 Id / Vov, gds = lambda (beta/2) Vov^2,
    # gmb = gm gamma / (2 sqrt(phi + Vsb)), Vt = Vth0 + gamma (sqrt(phi + Vsb) - sqrt(phi))
    config = _config({"template": "wilson_mirror", "ratio": 2})
    points, _, study = _check(config)
    out = points["MOUT1"]  # its source sits above gnd: body effect
    n = TECH180["nmos"]
    kprime, vth0 = _q(n, "kprime", "A/V^2"), _q(n, "vth0", "V")
    gamma, phi = _q(n, "gamma", "V^0.5"), _q(n, "phi", "V")
    lam = _q(n, "lambda_l", "m/V") / 2e-6
    beta = kprime * 2 * 4e-6 / 2e-6  # two units of 4/2 um
    assert out["vsb"] > 0.3
    assert out["vth"] == pytest.approx(vth0 + gamma * (math.sqrt(phi + out["vsb"]) - math.sqrt(phi)), rel=1e-12)
    vov = out["vgs"] - out["vth"]
    assert out["vov"] == pytest.approx(vov, rel=1e-12) and out["vdsat"] == pytest.approx(vov, rel=1e-12)
    assert out["id"] == pytest.approx(beta / 2 * vov**2 * (1 + lam * out["vds"]), rel=1e-12)
    assert out["gm"] == pytest.approx(2 * out["id"] / vov, rel=1e-12)
    assert out["gds"] == pytest.approx(lam * beta / 2 * vov**2, rel=1e-12)
    assert out["gmb"] == pytest.approx(out["gm"] * gamma / (2 * math.sqrt(phi + out["vsb"])), rel=1e-12)
    assert out["gm_id"] == pytest.approx(2 / vov, rel=1e-12)
    assert out["id"] == pytest.approx(nominal_measures(study)["i_out1"], rel=1e-12)


@pytest.mark.parametrize("target", [0.01, 1.0, 100.0])
def test_ekv_inversion_coefficient_and_gm_over_id(target):
    # Enz, Krummenacher, Vittoz 1995: I_S = 2 n beta U_T^2, IC = I / I_S; with F(v) = ln^2(1 + e^(v/2)) a saturated
    # device has gm n U_T / Id = (1 - exp(-sqrt(IC))) / sqrt(IC), which tends to 1 in weak inversion
    n = TECH65["nmos"]
    slope, kprime = n["slope"], _q(n, "kprime", "A/V^2")
    ut = float(thermal_voltage(300.15))
    beta_unit = kprime * 8e-6 / 4e-6
    i_spec = 2 * slope * 2 * beta_unit * ut**2  # output of two units
    circuit = {
        "template": "simple_mirror",
        "ratio": 2,
        "w": "8 um",
        "l": "4 um",
        "supply": "1.2 V",
        "output_voltage": "0.8 V",
        "reference_current": target * i_spec / 2,
    }
    points, _, _ = _check(_config(circuit, TECH65))
    out = points["MOUT1"]
    assert out["ic"] == pytest.approx(out["id"] / i_spec, rel=1e-9)
    assert out["ic"] == pytest.approx(target, rel=0.05)  # the output copies the reference to within a few %
    assert out["inversion"] == {0.01: "weak", 1.0: "moderate", 100.0: "strong"}[target]
    assert out["vdsat"] == pytest.approx(2 * ut * math.sqrt(out["ic"] + 0.25) + 3 * ut, rel=1e-12)
    lam = _q(n, "lambda_l", "m/V") / 4e-6
    root = math.sqrt(out["ic"] / (1 + lam * out["vds"]))  # F counts the channel charge, without length modulation
    # the formula leaves out the drain's (reverse) term, below 1e-5 here with Vds - Vdsat over 10 U_T
    assert out["gm_id"] * slope * ut == pytest.approx((1 - math.exp(-root)) / root, rel=1e-5)
    assert out["region"] == "saturation"


def test_ekv_saturation_voltage_limits():
    # Enz, Vittoz, Charge-based MOS transistor modeling, 2006: about 4 U_T in weak inversion, growing as sqrt(IC)
    ut = 0.025852
    assert ekv_saturation_voltage(0.0, ut) == pytest.approx(4 * ut)
    assert ekv_saturation_voltage(1e4, ut) / (2 * ut * 100) == pytest.approx(1.0, abs=0.02)


# --- command line ----------------------------------------------------------------------------------------------------
def test_check_prints_one_row_per_device(capsys):
    assert main(["check", str(ROOT / "configs" / "precision_mirror.toml")]) == 0
    out = capsys.readouterr().out
    header = next(line for line in out.splitlines() if line.startswith("device"))
    for column in ("region", "inversion", "Vgs", "Vds", "Vov", "Vdsat", "headroom", "Id", "gm", "gds", "gm/Id"):
        assert column in header
    rows = [line for line in out.splitlines() if line.startswith(("MREF", "MCREF", "MOUT1", "MCAS1"))]
    assert len(rows) == 4 and all("saturation" in row for row in rows)
    assert "no warnings" in out and "err1" in out


def test_check_json_and_conditions(capsys, tmp_path):
    path = str(ROOT / "configs" / "demo.toml")
    assert main(["check", path, "--json"]) == 0
    nominal = json.loads(capsys.readouterr().out)
    assert [d["name"] for d in nominal["devices"]] == ["MREF", "MOUT"]
    assert nominal["warnings"] == []
    # a slow corner raises the threshold: Vgs of the diode goes up by about the shift (Razavi 2017, ch. 2)
    assert main(["check", path, "--json", "--corner", "ss", "--temperature", "27 degC", "--supply", "1.62 V"]) == 0
    slow = json.loads(capsys.readouterr().out)
    shift = parse_quantity(TECH180["corners"]["ss"]["nmos"]["vth_shift"], "V")
    assert slow["devices"][0]["vth"] - nominal["devices"][0]["vth"] == pytest.approx(shift, rel=1e-9)
    assert slow["nodes"]["vdd"] == pytest.approx(1.62)
    assert main(["check", path, "--corner", "xx"]) == 2
    assert "--corner" in capsys.readouterr().err
    assert main(["check", path, "--temperature", "hot"]) == 2
    assert "--temperature" in capsys.readouterr().err


def test_check_shows_the_expansion(capsys):
    assert main(["check", str(ROOT / "configs" / "lowvoltage_cascode.toml"), "--netlist"]) == 0
    out = capsys.readouterr().out
    assert "[[circuit.mosfet]]" in out and 'name = "MBIAS"' in out and 'l = "44.4444 um"' in out


def test_check_warns_in_words(tmp_path, capsys):
    path = tmp_path / "low.toml"
    path.write_text(
        f'technology = "{(TECHNOLOGIES / "demo180.toml").as_posix()}"\n[circuit]\ntemplate = "cascode_mirror"\n'
        'output_voltage = "0.5 V"\n'
    )
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "warning: MCAS1 is in triode" in out and "raise the output voltage" in out


@pytest.mark.slow
def test_check_exits_2_when_the_nominal_point_cannot_be_found(tmp_path, capsys):
    # a current source into a node whose only way out is a cut-off device: no operating point within the rails
    path = tmp_path / "stuck.toml"
    path.write_text(
        f'technology = "{(TECHNOLOGIES / "demo180.toml").as_posix()}"\n'
        '[[circuit.mosfet]]\nname = "MX"\ntype = "nmos"\ndrain = "nx"\ngate = "ng"\nsource = "gnd"\nw = "4 um"\n'
        'l = "2 um"\n[[circuit.current_source]]\nname = "IREF"\nfrom = "vdd"\nto = "nx"\nvalue = "10 uA"\n'
        '[[circuit.voltage_source]]\nname = "VDD"\nplus = "vdd"\nminus = "gnd"\nvalue = "1.8 V"\n'
        '[[circuit.voltage_source]]\nname = "VG"\nplus = "ng"\nminus = "gnd"\nvalue = "0 V"\n'
    )
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "no nominal operating point" in err and str(path) in err and "'nx'" in err
