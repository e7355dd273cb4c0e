"""`mcmatch check` warns when the circuit has more than one DC operating point (solved again from other starts).

The reference circuit is a cross-coupled nmos pair with resistor loads: with loop gain (gm R)^2 above one it has an
unstable symmetric point and two stable states, one side on and the other off (the regenerative latch: Razavi,
Design of Analog CMOS Integrated Circuits, positive-feedback latches). The states are checked against the square
law (Razavi, ch. 2: saturation I = beta/2 (Vgs - Vt)^2; triode I = beta ((Vgs - Vt) Vds - Vds^2 / 2), lambda = 0),
solved independently with scipy.optimize.brentq (scipy as the reference library).
"""

from __future__ import annotations

import json

from conftest import ROOT
from scipy.optimize import brentq

from mcmatch.cli import main

KPRIME, VT, W_OVER_L, R, VDD = 300e-6, 0.45, 10.0, 20e3, 1.8
BETA = KPRIME * W_OVER_L  # [A/V^2]

LATCH = f"""
title = "cross-coupled nmos pair with resistor loads"
[technology]
name = "latch test technology"
[technology.nmos]
kprime = "{KPRIME * 1e6:g} uA/V^2"
vth0 = "{VT} V"
lambda = 0.0
[[circuit.mosfet]]
name = "M1"
type = "nmos"
drain = "a"
gate = "b"
source = "gnd"
w = "10 um"
l = "1 um"
[[circuit.mosfet]]
name = "M2"
type = "nmos"
drain = "b"
gate = "a"
source = "gnd"
w = "10 um"
l = "1 um"
[[circuit.resistor]]
name = "R1"
a = "vdd"
b = "a"
value = "{R / 1e3:g} kohm"
[[circuit.resistor]]
name = "R2"
a = "vdd"
b = "b"
value = "{R / 1e3:g} kohm"
[[circuit.voltage_source]]
name = "VDD"
plus = "vdd"
minus = "gnd"
value = "{VDD} V"
[measures]
v_a = {{ voltage = "a" }}
"""


def check_json(path, capsys) -> dict:
    assert main(["check", str(path), "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_a_cross_coupled_pair_gets_the_warning(tmp_path, capsys):
    path = tmp_path / "latch.toml"
    path.write_text(LATCH)
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "more than one DC operating point" in out and "no warnings" not in out
    assert "'a' at" in out and "'b' at" in out and "start-up" in out


def test_the_points_found_are_the_textbook_latch_states(tmp_path, capsys):
    path = tmp_path / "latch.toml"
    path.write_text(LATCH)
    document = check_json(path, capsys)
    # symmetric point: both devices diode-like in saturation, (VDD - v) / R = beta/2 (v - Vt)^2
    symmetric = brentq(lambda v: (VDD - v) / R - BETA / 2 * (v - VT) ** 2, VT, VDD)
    assert abs(document["nodes"]["a"] - symmetric) < 1e-6 and abs(document["nodes"]["b"] - symmetric) < 1e-6
    # one side on in triode with its gate near VDD, the other off (its drain at VDD but for gmin's nanoamps)
    low = brentq(lambda v: (VDD - v) / R - BETA * ((VDD - VT) * v - v * v / 2), 0.0, VDD - VT)
    others = document["other_operating_points"]
    assert len(others) == 2
    states = sorted((round(o["a"], 4), round(o["b"], 4)) for o in others)
    assert abs(states[0][0] - low) < 1e-4 and abs(states[0][1] - VDD) < 1e-4  # a low, b high
    assert abs(states[1][0] - VDD) < 1e-4 and abs(states[1][1] - low) < 1e-4  # a high, b low
    assert any("more than one DC operating point" in w for w in document["warnings"])


def test_a_simple_mirror_has_one_operating_point(capsys):
    # common practice, no source: a current-fed diode and its mirror have one DC solution; no warning
    document = check_json(ROOT / "configs" / "demo.toml", capsys)
    assert document["other_operating_points"] == []
    assert not any("more than one" in w for w in document["warnings"])
