"""Bad input: exit status 2, a message naming the file, the key path and what was expected; nothing written."""

from __future__ import annotations

from pathlib import Path

import pytest

from mcmatch.cli import main
from mcmatch.config.loading import load_config
from mcmatch.errors import ConfigError

ROOT = Path(__file__).resolve().parents[1]
DEMO_TEXT = (ROOT / "configs" / "demo.toml").read_text()
TECH_TEXT = (ROOT / "configs" / "technologies" / "demo180.toml").read_text()


def write_case(tmp_path: Path, text: str, tech: str = TECH_TEXT) -> Path:
    (tmp_path / "technologies").mkdir(exist_ok=True)
    (tmp_path / "technologies" / "demo180.toml").write_text(tech)
    path = tmp_path / "case.toml"
    path.write_text(text)
    return path


# (description, replace-this, with-this, expected key path in the message). All: common practice, no source.
CASES = [
    ("negative width", 'w = "4 um"\nl = "2 um"\nm = 1', 'w = "-4 um"\nl = "2 um"\nm = 1', "circuit.mosfet[0].w"),
    ("nan width", 'w = "4 um"\nl = "2 um"\nm = 1', 'w = "nan um"\nl = "2 um"\nm = 1', "circuit.mosfet[0].w"),
    ("inf length", 'l = "2 um"\nm = 4', "l = inf\nm = 4", "circuit.mosfet[1].l"),
    ("zero units", "m = 4", "m = 0", "circuit.mosfet[1].m"),
    ("fractional units", "m = 4", "m = 2.5", "circuit.mosfet[1].m"),
    ("misspelt key", 'w = "4 um"\nl = "2 um"\nm = 1', 'widht = "4 um"\nl = "2 um"\nm = 1', "circuit.mosfet[0]"),
    ("width in volts", 'w = "4 um"\nl = "2 um"\nm = 1', 'w = "5 V"\nl = "2 um"\nm = 1', "circuit.mosfet[0].w"),
    ("unknown node in measure", 'v_nb = { voltage = "nb" }', 'v_nb = { voltage = "nbb" }', "measures.v_nb.voltage"),
    ("unknown device in ratio", 'ratio = ["MOUT", "IREF"]', 'ratio = ["MOUTT", "IREF"]', "gain_error.ratio[0]"),
    ("spec of unknown measure", "gain_error = { min", "gain_errr = { min", "specs.gain_errr"),
    ("spec in wrong unit", 'min = "-2 %"', 'min = "-2 mV"', "specs.gain_error.min"),
    ("duplicate name", 'name = "MOUT"', 'name = "MREF"', "circuit.mosfet[1].name"),
    ("no DC path", 'drain = "out"\ngate = "nb"', 'drain = "out"\ngate = "floating"', "circuit.mosfet[1]"),
    (
        "voltage source loop",
        'name = "VOUT"\nplus = "out"\nminus = "gnd"',
        'name = "VOUT"\nplus = "vdd"\nminus = "gnd"',
        "circuit.voltage_source[1]",
    ),
    ("unknown top-level key", "[analysis]", "[analysys]", "analysys"),
    ("negative samples", "samples = 20000", "samples = -5", "analysis.samples"),
    ("unknown measure kind", 'r_nb = { resistance = "nb" }', 'r_nb = { impedance = "nb" }', "measures.r_nb"),
    ("missing technology file", "technologies/demo180.toml", "technologies/none.toml", "technology"),
    ("current in ohms", 'value = "10 uA"', 'value = "10 kohm"', "circuit.current_source[0].value"),
    # regressions found by the fuzz tests: values that overflowed to inf in the summary
    ("vanishing ideal ratio", "ideal = 4", "ideal = 1e-300", "measures.gain_error"),
    ("absurd supply", 'value = "1.8 V"', "value = 1e300", "circuit.voltage_source[0].value"),
    ("temperature near absolute zero", 'temperature = "27 degC"', "temperature = 1e-300", "temperature"),
]


@pytest.mark.parametrize(("what", "old", "new", "key"), CASES, ids=[c[0] for c in CASES])
def test_bad_config_exits_2_names_file_and_key(tmp_path, capsys, what, old, new, key):
    assert old in DEMO_TEXT, what
    path = write_case(tmp_path, DEMO_TEXT.replace(old, new, 1))
    out = tmp_path / "out"
    status = main(["run", str(path), "--out", str(out), "--samples", "100", "--quiet"])
    err = capsys.readouterr().err
    assert status == 2, err
    assert key in err, err
    assert str(path) in err or "none.toml" in err, err
    assert not out.exists()
    assert not any(p.name.startswith(".out") for p in tmp_path.iterdir())


TECH_CASES = [
    ("unknown model", 'model = "square-law"', 'model = "cubic"', "nmos.model"),
    ("kprime in volts", 'kprime = "300 uA/V^2"', 'kprime = "300 V"', "nmos.kprime"),
    ("misspelt tech key", 'a_vt = "4.5 mV*um"', 'a_vth = "4.5 mV*um"', "nmos.a_vth"),
    ("both lambdas", 'lambda_l = "0.08 um/V"', 'lambda_l = "0.08 um/V"\nlambda = "0.05 1/V"', "nmos"),
]


@pytest.mark.parametrize(("what", "old", "new", "key"), TECH_CASES, ids=[c[0] for c in TECH_CASES])
def test_bad_technology_names_the_technology_file(tmp_path, capsys, what, old, new, key):
    assert old in TECH_TEXT, what
    path = write_case(tmp_path, DEMO_TEXT, TECH_TEXT.replace(old, new, 1))
    status = main(["run", str(path), "--out", str(tmp_path / "out"), "--samples", "100", "--quiet"])
    err = capsys.readouterr().err
    assert status == 2, err
    assert "demo180.toml" in err and key in err, err
    assert not (tmp_path / "out").exists()


def test_bad_toml_syntax(tmp_path, capsys):
    path = write_case(tmp_path, DEMO_TEXT.replace("[analysis]", "[analysis", 1))
    assert main(["run", str(path), "--out", str(tmp_path / "o"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "case.toml" in err and "TOML" in err


def test_missing_config_file(tmp_path, capsys):
    assert main(["run", str(tmp_path / "nothing.toml"), "--quiet"]) == 2
    assert "not found" in capsys.readouterr().err


def test_command_line_overrides_are_validated(tmp_path, capsys):
    path = write_case(tmp_path, DEMO_TEXT)
    assert main(["run", str(path), "--samples", "0", "--out", str(tmp_path / "o"), "--quiet"]) == 2
    assert "--samples" in capsys.readouterr().err


def test_inline_technology_and_quantities_in_si(tmp_path):
    # Common practice, no source: plain numbers are SI, strings carry units; both give the same config.
    tech_inline = TECH_TEXT
    text = DEMO_TEXT.replace('technology = "technologies/demo180.toml"\n', "")
    text = text.replace('w = "4 um"\nl = "2 um"\nm = 1', "w = 4e-6\nl = 2e-6\nm = 1", 1)
    inline = "\n".join(
        line if not line.startswith("[") else line.replace("[", "[technology.", 1)
        for line in tech_inline.splitlines()
        if not line.startswith("#")
    )
    path = tmp_path / "inline.toml"
    path.write_text(text + "\n[technology]\n" + inline)
    cfg = load_config(path)
    assert cfg.circuit.mosfet[0].w == pytest.approx(4e-6)
    assert cfg.technology.nmos.a_vt == pytest.approx(4.5e-9)
    assert cfg.temperature == pytest.approx(300.15)


def test_config_error_pickles_with_fields():
    import pickle

    err = ConfigError("expected a width", file="a.toml", key="circuit.mosfet[0].w")
    back = pickle.loads(pickle.dumps(err))
    assert str(back) == str(err) and back.key == err.key and back.file == err.file


def test_summary_json_never_holds_nan(tmp_path):
    # Common practice, no source: strict JSON has no NaN; a gap must be visible, not silent.
    import json

    from mcmatch.results.tables import write_json

    write_json(tmp_path / "s.json", {"a": 1.0, "b": {"c": float("nan"), "d": [1.0, float("inf")]}})
    back = json.loads((tmp_path / "s.json").read_text())
    assert back["b"]["c"] is None and back["b"]["d"] == [1.0, None]
    assert back["non_finite_values"] == ["b.c", "b.d[1]"]
