"""A template's load current sources: symbolic while loading, sized by the run layer (mcmatch.run.loads).

Config loading never solves (DESIGN.md section 2); a load left to be sized is the output current with the output
held at output_voltage, found once at the nominal condition (common practice, no source).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from mcmatch.cli import main
from mcmatch.config.loading import config_from_dict
from mcmatch.config.schema import AUTO
from mcmatch.errors import ConfigError, SolveError
from mcmatch.run import loads
from mcmatch.run.loads import resolve_loads
from mcmatch.run.study import nominal_measures, prepare
from mcmatch.stats.area import scaled_netlist

ROOT = Path(__file__).resolve().parent.parent
TECH_FILE = ROOT / "configs" / "technologies" / "demo180.toml"
CONFIG_PATH = ROOT / "configs" / "test_loads.toml"  # never written; locates the technology and names errors
FED = {"template": "simple_mirror", "ratio": 2, "output_load": "current"}


def _config(circuit: dict):
    return config_from_dict({"technology": str(TECH_FILE), "circuit": circuit}, CONFIG_PATH)


def _write(tmp_path: Path, circuit: str) -> Path:
    path = tmp_path / "fed.toml"
    path.write_text(f"technology = {json.dumps(str(TECH_FILE))}\n[circuit]\n{circuit}\n", encoding="utf-8")
    return path


def test_loading_imports_no_solver_and_leaves_the_load_symbolic(tmp_path):
    # common practice, no source: which modules a fresh interpreter holds after loading shows what loading uses
    path = _write(tmp_path, 'template = "mirror_bank"\nratios = [1, 2]\noutput_load = "current"')
    code = (
        "import sys, json\n"
        "from mcmatch.config.loading import load_config\n"
        f"config = load_config({str(path)!r})\n"
        "print(json.dumps({'values': [c.value for c in config.circuit.current_source],\n"
        "                  'modules': sorted(m for m in sys.modules if m.startswith('mcmatch.'))}))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=120)
    out = json.loads(done.stdout)
    assert out["values"][1:] == [AUTO, AUTO]  # IREF is a number; ILOAD1, ILOAD2 wait for the run layer
    banned = ("mcmatch.run", "mcmatch.solve", "mcmatch.model", "mcmatch.draws", "mcmatch.stats")
    assert [m for m in out["modules"] if m.startswith(banned)] == []
    assert "mcmatch.config.loading" in out["modules"]  # the check can fail: it sees the modules loading does use


def test_loading_does_not_solve_but_preparing_does(monkeypatch):
    def refuse(*args, **kwargs):
        raise AssertionError("solved")

    monkeypatch.setattr(loads, "nominal_point", refuse)  # where the load sizing looks it up
    config = _config(FED)  # no solve while loading
    assert config.circuit.device("ILOAD1").value == AUTO
    with pytest.raises(AssertionError, match="solved"):
        resolve_loads(config)


def test_the_load_is_the_held_output_current_and_sized_once():
    fed, held = _config(FED), _config({**FED, "output_load": "voltage"})
    resolved = resolve_loads(fed)
    load = resolved.circuit.device("ILOAD1").value
    assert load == pytest.approx(nominal_measures(prepare(held))["i_out1"], rel=1e-9)
    assert resolved.circuit.load_sizing is None and resolve_loads(resolved) is resolved
    # prepare sizes it too, to the same current: the output then sits where the voltage source held it (0.9 V)
    study = prepare(fed)
    assert study.x_nominal[study.circuit.nodes.index("out1")] == pytest.approx(0.9, abs=1e-6)
    # an area point scales the devices, not the load: it is sized on the netlist as designed
    doubled, _ = scaled_netlist(fed.circuit, ["MOUT1"], 2.0, "units")
    assert resolve_loads(fed.with_circuit(doubled)).circuit.device("ILOAD1").value == load


def test_an_output_without_current_asks_for_load_current():
    config = _config({**FED, "output_voltage": "0 V"})  # an nmos output held at gnd carries nothing
    with pytest.raises(ConfigError) as info:
        resolve_loads(config)
    assert info.value.key == "circuit.load_current" and "give load_current" in str(info.value)


def test_check_exits_2_when_the_load_cannot_be_sized(tmp_path, monkeypatch, capsys):
    path = _write(tmp_path, 'template = "simple_mirror"\noutput_load = "current"\noutput_voltage = "0 V"')
    assert main(["check", str(path)]) == 2
    assert "circuit.load_current" in capsys.readouterr().err

    def no_point(circuit, guess=None):
        raise SolveError("no convergence")

    monkeypatch.setattr(loads, "nominal_point", no_point)
    path = _write(tmp_path, 'template = "simple_mirror"\noutput_load = "current"')
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "sizing the load current sources" in err and "give load_current" in err and str(path) in err
    assert "no nominal operating point" not in err  # the sizing message, not the check's own


def test_only_a_template_may_leave_a_current_to_be_sized():
    plain = {
        "mosfet": [{"name": "M1", "type": "nmos", "drain": "nb", "gate": "nb", "source": "gnd", "w": 4e-6, "l": 2e-6}],
        "voltage_source": [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": 1.8}],
        "current_source": [{"name": "I1", "from": "vdd", "to": "nb", "value": AUTO}],
    }
    with pytest.raises(ConfigError) as info:
        _config(plain)
    assert info.value.key == "circuit.current_source[0].value"
    with pytest.raises(ConfigError) as info:
        _config({**plain, "current_source": [], "load_sizing": {"held": {}, "loads": {}}})
    assert info.value.key == "circuit.load_sizing"
    beside = {**FED, "current_source": [{"name": "IX", "from": "vdd", "to": "out1", "value": AUTO}]}
    with pytest.raises(ConfigError) as info:
        _config(beside)
    assert info.value.key == "circuit.current_source[2].value"
