"""`mcmatch bench`: the engine agrees with per-sample scipy.optimize.root references (the circuit's own KCL residual
and the general MNA residual); JSON output; the latency figures of fresh processes."""

from __future__ import annotations

import json

import numpy as np
import pytest

from mcmatch.cli import main
from mcmatch.run.bench import (
    CIRCUITS,
    POLARITIES,
    TOLERANCE,
    agreement,
    bench_config,
    designer_agreement,
    latency,
)
from mcmatch.run.bench_reference import designer_reference, mna_solve
from mcmatch.run.chunks import run_chunk
from mcmatch.run.study import nominal_measures, prepare


@pytest.mark.parametrize("kind", POLARITIES)
@pytest.mark.parametrize("circuit", CIRCUITS)
def test_engine_agrees_with_scipy_root(circuit, kind):
    # Reference library (DESIGN.md section 4): scipy.optimize.root on each single sample of the same MNA equations
    # must agree with the batched engine to 1e-9 relative, unknowns and measures alike.
    study = prepare(bench_config(circuit, kind, samples=1000))
    worst, failures, _ = agreement(study, 25)
    assert failures == 0
    assert worst <= TOLERANCE


@pytest.mark.parametrize("kind", POLARITIES)
@pytest.mark.parametrize("circuit", CIRCUITS)
def test_engine_agrees_with_the_circuits_own_residual(circuit, kind):
    # Reference library (DESIGN.md section 4): scipy.optimize.root on the KCL residual written by hand for the one
    # circuit (Razavi, Design of Analog CMOS Integrated Circuits, ch. 2 and 5: saturation square law with
    # channel-length modulation and body effect) agrees with the engine to 1e-9 relative on every measure.
    study = prepare(bench_config(circuit, kind, samples=1000))
    worst, failures, _ = designer_agreement(study, circuit, kind, 25)
    assert failures == 0
    assert worst <= TOLERANCE


def test_the_circuits_own_residual_gives_the_textbook_mirror_at_the_nominal_point():
    # Razavi, Design of Analog CMOS Integrated Circuits, ch. 5: with equal devices (no mismatch) a 1:4 mirror copies
    # Iout/Iref = 4 (1 + lambda Vout) / (1 + lambda Vgs), Vgs the reference's own gate voltage; its diode presents
    # 1/(gm + gds). The engine's GMIN (1e-12 S across each channel) moves the ratio by GMIN Vgs / Iref ~ 6e-8,
    # below the 1e-6 relative tolerance on the ratio.
    study = prepare(bench_config("simple", "nmos"))
    p = study.circuit.params
    values, ok = designer_reference(study, "simple", "nmos").solve(p.vth.copy(), p.beta.copy())
    assert ok
    lam = float(p.lam[0])
    vgs = values["v_nb"]
    assert 1 + values["gain_error"] == pytest.approx((1 + lam * 0.9) / (1 + lam * vgs), rel=1e-6)
    vov = vgs - float(p.vth[0])
    gm, gds = float(p.beta[0]) * vov * (1 + lam * vgs), 0.5 * float(p.beta[0]) * vov**2 * lam
    assert values["r_nb"] == pytest.approx(1 / (gm + gds), rel=1e-6)


@pytest.mark.parametrize("kind", POLARITIES)
def test_bench_circuits_bias_as_designed(kind):
    # Razavi, Design of Analog CMOS Integrated Circuits, 2nd ed., 2017, ch. 5: a 1:4 mirror copies four times
    # the reference within its channel-length modulation error, (1 + lambda Vout) / (1 + lambda Vgs) - 1 (< 4 % with
    # lambda = 0.04 1/V here); the cascode copies 1:1 far more closely (its drain is shielded from the output).
    simple = nominal_measures(prepare(bench_config("simple", kind)))
    cascode = nominal_measures(prepare(bench_config("cascode", kind)))
    assert 0 < abs(simple["gain_error"]) < 0.04
    assert abs(cascode["gain_error"]) < abs(simple["gain_error"]) / 10
    assert simple["r_nb"] > 0 and cascode["r_nc"] > 0


def test_reference_solves_the_nominal_point_without_mismatch():
    # Reference library (DESIGN.md section 4): with no mismatch scipy must stay on the engine's nominal point.
    study = prepare(bench_config("cascode", "pmos"))
    p = study.circuit.params
    x, ok = mna_solve(study, p.vth.copy(), p.beta.copy())
    assert ok
    np.testing.assert_allclose(x, study.x_nominal, rtol=1e-10, atol=1e-16)


def test_bench_command_prints_one_json_object(capsys):
    # Project contract (issue 6): the JSON keys of `mcmatch bench --json`; no timing is asserted.
    # Keys added by issue 17 (two references, latency) come beside the earlier ones, never instead of them.
    argv = ["bench", "--circuit", "simple", "--samples", "20000", "--reference-samples", "200", "--json"]
    assert main([*argv, "--no-latency"]) == 0
    out = json.loads(capsys.readouterr().out)
    for key in (
        "circuit",
        "samples",
        "engine_samples_per_s",
        "reference_samples_per_s",
        "speedup",
        "max_rel_diff",
        "peak_rss_bytes",
        "reference_mna_samples_per_s",
        "speedup_mna",
        "max_rel_diff_circuit",
        "max_rel_diff_mna",
        "latency",
    ):
        assert key in out
    assert out["circuit"] == "simple" and out["samples"] == 20000
    assert out["max_rel_diff"] <= TOLERANCE and out["agree"]
    assert out["speedup"] == pytest.approx(out["engine_samples_per_s"] / out["reference_samples_per_s"])
    assert out["speedup_mna"] == pytest.approx(out["engine_samples_per_s"] / out["reference_mna_samples_per_s"])
    assert out["peak_rss_bytes"] > 0
    assert out["latency"] is None  # --no-latency


def test_latency_times_fresh_processes(demo_project):
    # Common practice, no source: the figures are medians of whole processes that did their work (a failed run
    # raises instead of being timed); no duration is asserted beyond being positive.
    text = demo_project.read_text()
    small = text.split("[analysis.target]")[0].replace("samples = 20000", "samples = 2000")
    demo_project.write_text(small)
    figures = latency(runs=1, config=demo_project)
    assert figures["runs"] == 1 and figures["version_s"] > 0 and figures["demo_run_s"] > 0
    demo_project.write_text("not toml [")
    with pytest.raises(RuntimeError, match="exited with 2"):
        latency(runs=1, config=demo_project)


def test_bench_rejects_bad_counts(capsys):
    # DESIGN.md section 3: invalid input exits 2 with a message naming the key.
    assert main(["bench", "--samples", "0"]) == 2
    assert "--samples" in capsys.readouterr().err


def test_bank_channels_share_one_reference_solve():
    # Common practice, no source: the bank's channels hang on one reference node, solved once per sample; each
    # channel's error is its own device's mismatch, so channel errors are correlated only through the reference.
    study = prepare(bench_config("bank", "nmos"))
    cols = run_chunk(study, 0, 4000)
    assert cols["converged"].all()
    errors = np.array([cols[f"err_ch{c}"] for c in range(4)])
    corr = np.corrcoef(errors)
    off = corr[~np.eye(4, dtype=bool)]
    assert (off > 0).all() and (off < 0.9).all()


def test_scaling_pairs_one_worker_with_the_pool_on_the_same_numbers():
    # Common practice, no source (DESIGN.md section 3: same seed, same numbers whatever the workers): the two-core
    # figure is a ratio of paired runs of the run's own Monte Carlo; both worker counts must give the same
    # statistics; no duration is asserted beyond being positive
    from mcmatch.studies.scaling import monte_carlo_scaling

    figures = monte_carlo_scaling(bench_config("simple", "nmos", samples=300_000), rounds=2, workers=2)
    assert figures["samples"] == 300_000 and figures["workers"] == 2 and figures["rounds"] == 2
    assert figures["same_numbers"] is True
    assert all(t > 0 for t in figures["one_worker_s"] + figures["workers_s"])
    ratios = [a / b for a, b in zip(figures["one_worker_s"], figures["workers_s"], strict=True)]
    assert figures["ratios"] == ratios and figures["ratio"] == pytest.approx(float(np.median(ratios)))


def test_scaling_is_in_the_json_and_a_negative_round_count_is_refused(capsys):
    # DESIGN.md section 3: invalid input exits 2 naming the key; the JSON keeps every earlier key and adds scaling
    assert main(["bench", "--scaling", "-1", "--no-latency"]) == 2
    assert "--scaling" in capsys.readouterr().err
    argv = ["bench", "--samples", "20000", "--reference-samples", "50", "--no-latency", "--json", "--scaling", "1"]
    assert main(argv) == 0
    out = json.loads(capsys.readouterr().out)
    from mcmatch.run.chunks import usable_cores

    if usable_cores() == 1:  # nothing to compare on one core, and the JSON says so
        assert out["scaling"] is None
    else:
        assert out["scaling"]["same_numbers"] and out["scaling"]["rounds"] == 1 and out["agree"]
    assert main([*argv[:-2]]) == 0
    assert json.loads(capsys.readouterr().out)["scaling"] is None  # not asked for
