"""Tests for saturation compliance (mcmatch.model.headroom, mcmatch.stats.compliance): the batched headroom against
the operating-point report, the streamed fraction of samples out of saturation, `check --corners`, and the designer's
case of a pmos wide-swing cascode whose cascode device enters triode at one corner."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from mcmatch.cli import main
from mcmatch.config.loading import config_from_dict
from mcmatch.model.circuit import extend
from mcmatch.model.headroom import HEADROOM_COLUMN, device_headroom
from mcmatch.model.operating_point import device_operating_points
from mcmatch.run.study import prepare, solve_samples
from mcmatch.solve.reference import solve_reference
from mcmatch.studies.pipeline import RunOptions, run_study

ROOT = Path(__file__).resolve().parent.parent
TECH180 = str(ROOT / "configs" / "technologies" / "demo180.toml")
TECH65 = str(ROOT / "configs" / "technologies" / "demo65.toml")
CONFIG_PATH = ROOT / "configs" / "test_compliance.toml"  # never written; names errors only

#: The designer's case (illustrative, invented scenario): a 1:1 pmos wide-swing cascode source at 1.2 V in the
#: illustrative 65 nm technology for an interface that runs at -40 degC, output held at 0.65 V. Its cascode MCAS1
#: keeps about 7 mV of headroom at tt, -40 degC, 1.08 V (mcmatch check --corners) but loses it at ss, where its
#: output resistance collapses, so the spec on r_out1 fails there first. (With ideal bias currents this cascode
#: loses headroom when hot, not cold: at 27 degC its reference cascode MCREF is already in triode, so the grid
#: stays at -40 degC.)
DESIGNER = {
    "title": "pmos wide-swing cascode at 1.2 V, cold corners (illustrative)",
    "technology": TECH65,
    "temperature": "-40 degC",
    "circuit": {
        "template": "wide_swing_cascode",
        "type": "pmos",
        "w": "16 um",
        "l": "2 um",
        "reference_current": "5 uA",
        "supply": "1.2 V",
        "output_voltage": "0.65 V",
        "bias_aspect": 0.05,
    },
    "specs": {"r_out1": {"min": "250 Mohm"}, "err1": {"min": "-3 %", "max": "3 %"}},
    "analysis": {
        "samples": 2000,
        "seed": 1,
        "contributions": False,
        "corners": {
            "process": ["tt", "ss", "ff"],
            "temperature": ["-40 degC"],
            "supply": ["1.08 V", "1.2 V", "1.32 V"],
            "samples": 400,
        },
    },
}


def solve_samples_mna(study, dvth, dbeta):
    """The reference (full MNA) path for a prepared study's deviations (S, n_devices)."""
    return solve_reference(study.circuit, study.measures, study.x_nominal, dvth, dbeta)


def _config(raw: dict):
    return config_from_dict(raw, CONFIG_PATH)


@pytest.mark.parametrize(
    ("technology", "circuit"),
    [
        (TECH180, {"template": "cascode_mirror", "type": "nmos", "ratio": 2, "output_voltage": "0.9 V"}),
        (TECH180, {"template": "simple_mirror", "type": "pmos", "output_voltage": "1.7 V"}),  # triode output
        (TECH65, {"template": "wide_swing_cascode", "type": "pmos", "supply": "1.2 V"}),
        (TECH65, {"template": "wilson_mirror", "type": "nmos", "supply": "1.2 V"}),
    ],
)
def test_batched_headroom_equals_the_operating_point_report(technology, circuit):
    # one fact in one place (common practice, no source): the batched headroom of every device equals the
    # operating-point report's Vds - Vdsat at the nominal point, square law (with body effect) and EKV
    study = prepare(_config({"technology": technology, "circuit": circuit}))
    p = study.circuit.params
    batched = device_headroom(study.circuit, extend(study.x_nominal[None, :]), p.vth[None, :], p.beta[None, :])[0]
    report = [pt["headroom"] for pt in device_operating_points(study.circuit, study.x_nominal)]
    np.testing.assert_allclose(batched, report, rtol=1e-12, atol=1e-15)
    if circuit["template"] == "simple_mirror":
        assert min(report) < 0  # the triode case is really in the check


def test_fast_and_reference_paths_give_the_same_headroom_column():
    # the fast path and the full MNA reference agree sample by sample (common practice, no source)
    study = prepare(_config({"technology": TECH65, "circuit": DESIGNER["circuit"]}))
    p = study.circuit.params
    rng = np.random.default_rng(5)
    dvth = 2 * rng.standard_normal((200, p.count)) * p.sigma_vth
    dbeta = 2 * rng.standard_normal((200, p.count)) * p.sigma_beta
    fast, reference = solve_samples(study, dvth, dbeta), solve_samples_mna(study, dvth, dbeta)
    np.testing.assert_allclose(fast[HEADROOM_COLUMN], reference[HEADROOM_COLUMN], rtol=1e-9, atol=1e-12)
    # and a sample's value does not depend on the batch it is solved in
    s = 7
    one = solve_samples_mna(study, dvth[s : s + 1], dbeta[s : s + 1])
    assert one[HEADROOM_COLUMN][0] == pytest.approx(fast[HEADROOM_COLUMN][s], rel=1e-9)


def test_main_run_streams_the_fraction_of_samples_out_of_saturation():
    # the streamed count equals the count over the whole sample table, whatever the chunking (DESIGN.md section 3:
    # same numbers whatever the chunking); the simple pmos mirror's output at 1.6141 V sits at the triode edge
    raw = {
        "technology": TECH180,
        "circuit": {"template": "simple_mirror", "type": "pmos", "output_voltage": "1.6141 V"},
        "analysis": {"samples": 20000, "seed": 3, "keep_samples": 20000, "contributions": False},
    }
    config = _config(raw)
    result = run_study(config, RunOptions(jobs=1, chunk_size=8192))
    block = result.summary["compliance"]
    table = result.table
    expected = float(np.mean(table[HEADROOM_COLUMN].to_numpy() < 0))
    assert 0.01 < expected < 0.99  # a real fraction, not 0 or 1
    assert block["samples_out_of_saturation"] == pytest.approx(expected, abs=1e-15)
    points = result.summary["operating_point"]
    assert block["min_headroom"] == pytest.approx(min(p["headroom"] for p in points))
    assert block["limiting_device"] == "MOUT1"
    again = run_study(config, RunOptions(jobs=1, chunk_size=16384, keep_samples=0))
    assert again.summary["compliance"] == block


def test_designer_case_names_the_cascode_and_its_corner(tmp_path, capsys):
    # the designer's case (DESIGNER above): fine at tt, the cascode MCAS1 in triode at ss, -40 degC, 1.08 V; that
    # corner's entry names it and it is the worst corner of the output-resistance spec
    config_file = tmp_path / "designer.toml"
    import tomli_w

    config_file.write_text(tomli_w.dumps(DESIGNER))
    out = tmp_path / "run"
    assert main(["run", str(config_file), "--out", str(out), "--quiet"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["compliance"]["devices_out_of_saturation"] == []
    assert summary["compliance"]["samples_out_of_saturation"] == 0.0
    corners = {(c["process"], c["supply"]): c for c in summary["corners"]}
    bad = corners[("ss", 1.08)]["compliance"]
    assert bad["limiting_device"] == "MCAS1" and bad["devices_out_of_saturation"] == ["MCAS1"]
    assert bad["min_headroom"] < 0 and bad["samples_out_of_saturation"] > 0.5
    for key, c in corners.items():
        if key[0] == "tt":
            assert c["compliance"]["devices_out_of_saturation"] == [], key
            assert c["compliance"]["samples_out_of_saturation"] == 0.0, key
    worst = summary["corners_worst"]["r_out1"]
    assert (worst["process"], worst["temperature"], worst["supply"]) == ("ss", 233.15, 1.08)
    assert worst["margin_sigma"] < 0 and "margin" in worst["criterion"]
    assert worst["label"].startswith("ss, -40 degC, 1.08 V")
    # check --corners prints the same verdict at the corners' nominal points
    assert main(["check", str(config_file), "--corners"]) == 0
    text = capsys.readouterr().out
    line = next(row for row in text.splitlines() if row.startswith("ss") and "1.08 V" in row)
    assert "MCAS1" in line and line.rstrip().endswith("MCAS1")
    tt_line = next(row for row in text.splitlines() if row.startswith("tt") and "1.08 V" in row)
    assert tt_line.rstrip().endswith("none")


@pytest.mark.parametrize("name", ["min_headroom", "converged", "dvth_MREF"])
def test_a_measure_may_not_take_a_sample_table_column(name):
    # DESIGN.md section 3: invalid input is refused naming file and key (the column would overwrite the measure)
    from mcmatch.errors import ConfigError

    with pytest.raises(ConfigError) as info:
        _config(
            {"technology": TECH180, "circuit": {"template": "simple_mirror"}, "measures": {name: {"voltage": "nb"}}}
        )
    assert info.value.key == f"measures.{name}" and "column" in str(info.value)
