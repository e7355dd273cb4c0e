"""Bank (die) yield: all K channels in spec at once, against the product of per-channel yields and scipy intervals."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from mcmatch.config.loading import config_from_dict, load_config
from mcmatch.errors import ConfigError
from mcmatch.run.study import prepare
from mcmatch.stats.bank import bank_yield
from mcmatch.studies.extra import bank_channels, run_bank, run_extra_analyses

CONFIGS = Path(__file__).resolve().parent.parent / "configs"


# ----------------------------------------------------------------------------------------------- pure function
def test_independent_channels_give_the_product():
    # Independent Bernoulli channels: P(all pass) = prod p_k. The estimate must lie within 4 binomial standard errors
    # of the product, and its interval is the exact Clopper-Pearson one (Clopper and Pearson, Biometrika 1934, via
    # scipy.stats.binomtest)
    rng = np.random.default_rng(11)
    p = np.array([0.97, 0.9, 0.95, 0.99])
    n = 20000
    passed = rng.random((n, len(p))) < p
    out = bank_yield(passed, ["a", "b", "c", "d"])
    truth = float(np.prod(p))
    se = math.sqrt(truth * (1 - truth) / n)
    assert out["all_in_spec"]["fraction"] == pytest.approx(truth, abs=4 * se)
    assert out["independent_estimate"] == pytest.approx(truth, abs=4 * se)
    ci = stats.binomtest(int(passed.all(axis=1).sum()), n).proportion_ci(confidence_level=0.95, method="exact")
    assert out["all_in_spec"]["ci95"] == pytest.approx([ci.low, ci.high], rel=1e-12)
    assert out["channels"] == 4 and [c["measure"] for c in out["per_channel"]] == ["a", "b", "c", "d"]
    for row in out["by_k"]:
        k = row["k"]
        assert row["independent_estimate"] == pytest.approx(float(np.prod(passed[:, :k].mean(axis=0))))
        assert row["fraction"] == pytest.approx(float(passed[:, :k].all(axis=1).mean()))


def test_joint_yield_never_exceeds_the_worst_channel():
    # all channels passing implies each passes: joint <= min per channel, and by_k cannot grow with k
    # (probability axioms, no source)
    rng = np.random.default_rng(5)
    common = rng.standard_normal((3000, 1))
    passed = np.abs(common + rng.standard_normal((3000, 6))) < 2.2
    out = bank_yield(passed, [f"e{k}" for k in range(6)])
    assert out["all_in_spec"]["fraction"] <= min(c["fraction"] for c in out["per_channel"])
    fractions = [row["fraction"] for row in out["by_k"]]
    assert all(b <= a for a, b in zip(fractions, fractions[1:], strict=False))
    assert out["worst_channel"]["fraction"] == min(c["fraction"] for c in out["per_channel"])


# ----------------------------------------------------------------------------------------------- circuits
def bank_config(reference_units: int, channels: int = 4, spec: str = "2 %", samples: int = 4000, table: bool = True):
    """A 1:1 bank: diode MREF (m = reference_units, W/L scaled to keep the same current density) and K outputs."""
    mosfets = [
        {
            "name": "MREF",
            "type": "nmos",
            "drain": "nb",
            "gate": "nb",
            "source": "gnd",
            "w": "8 um",
            "l": "4 um",
            "m": reference_units,
        }
    ]
    sources = [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"}]
    measures, specs = {}, {}
    for k in range(1, channels + 1):
        mosfets.append(
            {
                "name": f"MOUT{k}",
                "type": "nmos",
                "drain": f"out{k}",
                "gate": "nb",
                "source": "gnd",
                "w": "8 um",
                "l": "4 um",
            }
        )
        sources.append({"name": f"VOUT{k}", "plus": f"out{k}", "minus": "gnd", "value": "0.6 V"})
        measures[f"err{k}"] = {"ratio": [f"MOUT{k}", "IREF"], "ideal": 1.0 / reference_units}
        specs[f"err{k}"] = {"min": f"-{spec}", "max": spec}
    raw = {
        "title": "bank test",
        "technology": "technologies/demo180.toml",
        "circuit": {
            "mosfet": mosfets,
            "current_source": [{"name": "IREF", "from": "vdd", "to": "nb", "value": f"{10 * reference_units} uA"}],
            "voltage_source": sources,
        },
        "measures": measures,
        "specs": specs,
        "analysis": {"samples": samples, "seed": 9, **({"bank": {}} if table else {})},
    }
    return config_from_dict(raw, CONFIGS / "bank_test.toml")


def test_shared_reference_raises_the_die_yield_above_the_independent_estimate():
    # Channel errors e_k = r + o_k share the reference part r: P(all pass) = E_r[P(pass | r)^K] >= (E_r P)^K by
    # Jensen's inequality. With the reference as large as one output the gap is wide; require it to exceed 4
    # standard errors of the joint fraction (binomial), and the joint never to exceed the worst channel
    # (common practice, no source)
    config = load_config(CONFIGS / "bank_yield.toml").with_analysis(samples=5000)
    config = config.model_copy(update={"analysis": config.analysis.model_copy(update={"bank": None})})
    out = run_bank(config, prepare(config))  # auto-detected: eight spec'd ratios sharing IREF
    assert out["channels"] == 8 and out["samples"] == 5000
    joint = out["all_in_spec"]["fraction"]
    se = math.sqrt(joint * (1 - joint) / out["samples"])
    assert joint <= out["worst_channel"]["fraction"]
    assert joint - out["independent_estimate"] > 4 * se
    assert out["mean_correlation"] > 0.2


def test_negligible_reference_mismatch_gives_independent_channels():
    # A reference of 400 unit devices has 1/20 of a unit's mismatch sigma (Pelgrom 1989: sigma ~ 1/sqrt(area)), so
    # the channels are nearly independent and the die yield is the product of channel yields, within 4 binomial
    # standard errors (common practice, no source)
    config = bank_config(reference_units=400, channels=4, spec="1.3 %", samples=6000)
    out = run_bank(config, prepare(config))
    joint = out["all_in_spec"]["fraction"]
    se = math.sqrt(joint * (1 - joint) / out["samples"])
    assert 0.3 < joint < 0.95  # the spec bites, so the check can fail
    assert joint == pytest.approx(out["independent_estimate"], abs=4 * se)
    assert abs(out["mean_correlation"]) < 0.05


def test_bank_summary_keys_and_detection():
    # DESIGN.md section 3: bank {channels, all_in_spec {fraction, ci95}, independent_estimate}
    config = bank_config(reference_units=1, channels=3, samples=500, table=False)
    assert bank_channels(config) == ["err1", "err2", "err3"]
    out = run_extra_analyses(config, prepare(config), {})
    bank = out["bank"]
    assert {"channels", "measures", "all_in_spec", "independent_estimate", "per_channel", "by_k"} <= set(bank)
    assert {"fraction", "ci95", "passed", "total"} <= set(bank["all_in_spec"])
    assert [row["k"] for row in bank["by_k"]] == [1, 2, 3]
    json.dumps(out, allow_nan=False)


def test_bank_measure_must_be_specd(tmp_path):
    # DESIGN.md section 3: bad input names the file and the key path
    config = bank_config(reference_units=1, channels=2, samples=100)
    with pytest.raises(ConfigError) as info:  # checked wherever the analysis settings change
        config.with_analysis(bank={"measures": ["err1", "err9"]})
    assert info.value.key == "analysis.bank.measures[1]" and "err9" in str(info.value)
