"""Hostile circuits: samples with no physical operating point are counted, reported and fail the yield."""

from __future__ import annotations

import json
import math

import pytest
from scipy import stats

from mcmatch.cli import main

# A current source forces 0.75 uA into the drain of M1, whose gate sits 0.1 V above its nominal threshold.
# Square law with lambda = 0 and no body effect (Razavi, Design of Analog CMOS Integrated Circuits, ch. 2): M1 can
# carry at most beta/2 (Vov - dVt)^2 = 1.5 uA (1 - dVt/Vov)^2 (in saturation; less in triode). When that falls below
# 0.75 uA, no operating point exists: the node would have to rise without bound. That happens exactly when
# dVt > Vov (1 - 1/sqrt(2)), so the failing fraction is norm.sf(Vov (1 - 1/sqrt 2) / sigma_Vt) (scipy reference).
# sigma_Vt per device = A_VT / sqrt(2 W L) (Pelgrom, Duinmaijer, Welbers, IEEE JSSC 1989): 20 mV um, 1 x 1 um.
CONFIG = """
title = "current source beyond the device's reach (hostile test case)"
[technology]
name = "hostile test technology"
[technology.nmos]
kprime = "300 uA/V^2"
vth0 = "0.45 V"
lambda = 0.0
a_vt = "20 mV*um"
a_beta = "0 %*um"

[[circuit.mosfet]]
name = "M1"
type = "nmos"
drain = "out"
gate = "g"
source = "gnd"
w = "1 um"
l = "1 um"

[[circuit.current_source]]
name = "IFORCE"
from = "vdd"
to = "out"
value = "0.75 uA"

[[circuit.voltage_source]]
name = "VG"
plus = "g"
minus = "gnd"
value = "0.55 V"

[[circuit.voltage_source]]
name = "VDD"
plus = "vdd"
minus = "gnd"
value = "1.8 V"

[measures]
v_out = { voltage = "out" }
i_m1 = { current = "M1" }

[specs]
v_out = { max = "1.8 V" }

[analysis]
samples = 10000
seed = 5
contributions = false
"""


def test_unsolvable_samples_are_counted_and_fail_the_yield(tmp_path):
    path = tmp_path / "hostile.toml"
    path.write_text(CONFIG)
    out = tmp_path / "run"
    assert main(["run", str(path), "--out", str(out), "--quiet", "--no-report"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    n = summary["samples"]
    sigma = 20e-3 * 1e-6 / math.sqrt(2 * 1e-12)
    p = stats.norm.sf(0.1 * (1 - 1 / math.sqrt(2)) / sigma)
    failed = summary["failed_solves"]
    # binomial count: within 4 standard deviations of n p (common practice, no source)
    assert abs(failed - n * p) < 4 * math.sqrt(n * p * (1 - p)), (failed, n * p)
    y = summary["yield"]
    assert y["total"] == n and y["passed"] <= n - failed
    for name, m in summary["measures"].items():
        assert m["count"] == n - failed, name
        for key in ("mean", "std", "min", "max"):
            assert math.isfinite(m[key]), (name, key)
        assert all(math.isfinite(v) for v in m["quantiles"].values())
    # the examples are real failing draws: their threshold shift is beyond the limit
    examples = summary["failed_examples"]
    assert examples and all(e["dvth_M1"] > 0.1 * (1 - 1 / math.sqrt(2)) - 1e-6 for e in examples)
    # the table keeps every sample; failed ones carry NaN measures and converged = False
    import pandas as pd

    table = pd.read_csv(out / "samples.csv")
    bad = table[~table["converged"]]
    assert len(bad) == min(failed, len(table)) and bad["v_out"].isna().all()


def test_nominal_point_beyond_any_device_exits_2(tmp_path, capsys):
    # Gate below threshold: M1 is cut off, so the forced current has nowhere to go (fact of the trade).
    path = tmp_path / "cutoff.toml"
    path.write_text(CONFIG.replace('value = "0.55 V"', 'value = "0.3 V"'))
    assert main(["run", str(path), "--out", str(tmp_path / "o"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "operating point" in err  # "could not be found" or "no physical operating point"
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize("samples", [1])
def test_single_sample_run(tmp_path, samples):
    # Common practice, no source: the smallest run still writes a complete, finite summary.
    path = tmp_path / "one.toml"
    path.write_text(CONFIG)
    assert main(["run", str(path), "--samples", str(samples), "--out", str(tmp_path / "r"), "--quiet"]) == 0
    summary = json.loads((tmp_path / "r" / "summary.json").read_text())
    assert summary["samples"] == 1
