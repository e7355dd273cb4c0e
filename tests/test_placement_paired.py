"""Placement candidates compared pairwise: the paired yield difference and its interval, the best candidate in the
CLI and the report, and the report's sentence when no arrangement can meet the target."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from test_report_sections import base_summary, sections

from mcmatch.cli import main
from mcmatch.config.loading import load_config
from mcmatch.report.render import render_report
from mcmatch.run.study import prepare
from mcmatch.stats.yields import paired_difference
from mcmatch.studies.extra import run_placements

CONFIGS = Path(__file__).resolve().parent.parent / "configs"


def masks(both: int, only_this: int, only_other: int, neither: int) -> tuple[np.ndarray, np.ndarray]:
    this = np.array([1] * both + [1] * only_this + [0] * only_other + [0] * neither, dtype=bool)
    other = np.array([1] * both + [0] * only_this + [1] * only_other + [0] * neither, dtype=bool)
    return this, other


# ----------------------------------------------------------------------------------------------- the interval
def test_paired_difference_agrees_with_the_wald_interval_at_large_counts():
    # Agresti, An Introduction to Categorical Data Analysis, 2nd ed., 2007, sec. 8.1.1: the difference of matched
    # proportions (b - c)/n has variance [(b + c)/n - ((b - c)/n)^2]/n; the score interval approaches it for large n
    # (Newcombe, Statistics in Medicine 17, 1998)
    b, c, n = 1017, 2446, 20000
    out = paired_difference(*masks(n - b - c - 2000, b, c, 2000))
    d = (b - c) / n
    half = stats.norm.ppf(0.975) * math.sqrt(((b + c) / n - d * d) / n)
    assert out["difference"] == pytest.approx(d, rel=1e-12)
    assert (out["only_this"], out["only_other"], out["samples"]) == (b, c, n)
    lo, hi = out["ci95"]
    assert lo == pytest.approx(d - half, abs=0.03 * half)
    assert hi == pytest.approx(d + half, abs=0.03 * half)


def test_paired_difference_without_discordant_samples_keeps_a_width():
    # common practice, no source: equal outcomes on every sample give a zero difference, but n samples cannot prove
    # the two yields equal; the interval must include zero and stay open on both sides (Wald's collapses to a point)
    out = paired_difference(*masks(1900, 0, 0, 100))
    assert out["difference"] == 0.0
    lo, hi = out["ci95"]
    assert lo < 0.0 < hi and hi - lo < 0.01


def test_paired_difference_covers_the_true_difference():
    # Newcombe 1998 reports coverage near the nominal 95 % for this interval. 4,000 simulated experiments of n = 400
    # pairs with P(only this) = 0.04, P(only other) = 0.07, true difference -0.03; the tolerance is 4 binomial
    # standard errors of the coverage estimate (derived from the replicate count)
    rng = np.random.default_rng(11)
    reps, n = 4000, 400
    counts = rng.multinomial(n, [0.80, 0.04, 0.07, 0.09], size=reps)
    covered = 0
    for both, b, c, neither in counts:
        lo, hi = paired_difference(*masks(both, b, c, neither))["ci95"]
        covered += lo <= -0.03 <= hi
    se = math.sqrt(0.95 * 0.05 / reps)
    assert abs(covered / reps - 0.95) < 4 * se


# ----------------------------------------------------------------------------------------------- the study
@pytest.fixture(scope="module")
def compared():
    config = load_config(CONFIGS / "placement.toml")
    entries, best = run_placements(config, prepare(config), samples=4000)
    return entries, best


def test_every_other_candidate_carries_its_paired_difference_to_the_best(compared):
    # common random numbers (every candidate sees the same device draws): the paired difference equals the
    # difference of the two counted yields exactly, and only the discordant samples carry it
    entries, best = compared
    by_name = {e["name"]: e for e in entries}
    assert "versus_best" not in by_name[best]
    for entry in entries:
        if entry["name"] == best:
            continue
        paired = entry["versus_best"]
        assert paired["best"] == best and paired["samples"] == entry["yield"]["total"]
        counted = (entry["yield"]["passed"] - by_name[best]["yield"]["passed"]) / entry["yield"]["total"]
        assert paired["difference"] == pytest.approx(counted, abs=1e-15)
        assert paired["only_this"] - paired["only_other"] == entry["yield"]["passed"] - by_name[best]["yield"]["passed"]
        assert paired["ci95"][0] <= paired["difference"] <= paired["ci95"][1]


def test_placements_command_prints_the_paired_difference(capsys):
    assert main(["placements", str(CONFIGS / "placement.toml"), "--samples", "2000", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert main(["placements", str(CONFIGS / "placement.toml"), "--samples", "2000"]) == 0
    out = capsys.readouterr().out
    others = [e for e in data["placements"] if e["name"] != data["placement_best"]]
    assert out.count(f"vs {data['placement_best']}:") == len(others)
    for e in others:
        assert f"{100 * e['versus_best']['difference']:+.3f} % yield (paired" in out


# ----------------------------------------------------------------------------------------------- the report
def placement_summary(entries: list[dict], best: str, spec_max: float) -> dict:
    s = base_summary()
    s["specs"] = {"err": {"min": -spec_max, "max": spec_max, "unit": "1"}}
    s["yield"]["target"] = {"yield": 0.9973, "confidence": 0.95}
    s["placements"] = entries
    s["placement_best"] = best
    return s


def renamed(entries: list[dict]) -> list[dict]:
    """The study's entries with the measure gain_error renamed err, as in base_summary."""
    out = []
    for e in entries:
        e = json.loads(json.dumps(e))
        e["measures"] = {"err": e["measures"]["gain_error"]}
        out.append(e)
    return out


def test_report_table_carries_systematic_error_paired_difference_and_the_best(compared):
    entries, best = compared
    text = sections(render_report(placement_summary(renamed(entries), best, 0.02), None, ""))["placements"]
    assert "err systematic [%]" in text and "yield minus the best's [% points]" in text
    assert "95 % interval (paired)" in text and "★ best" in text
    assert text.count("★ best") == 1
    for e in entries:
        if e["name"] != best:
            assert f"{100 * e['versus_best']['difference']:+.3f}" in text
    assert f"Best: {best}" in text


def test_report_says_when_no_arrangement_meets_the_target(compared):
    # the Tide-4 mirror has sigma(gain_error) about 1.25 % against a +-2 % spec: about 89 % yield whatever the
    # placement, so no arrangement reaches 99.73 % and the random spread, not the gradient, is what limits
    entries, best = compared
    text = sections(render_report(placement_summary(renamed(entries), best, 0.02), None, ""))["placements"]
    assert "No arrangement meets the 99.73 % target" in text
    assert "more gate area, not another placement, is what helps" in text
    # a spec wide enough for every candidate: no such sentence
    wide = renamed(entries)
    for e in wide:
        e["yield"] = {"passed": 4000, "total": 4000, "fraction": 1.0, "ci95": [0.025 ** (1 / 4000), 1.0]}
    assert "No arrangement" not in sections(render_report(placement_summary(wide, best, 0.2), None, ""))["placements"]
