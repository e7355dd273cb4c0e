"""Streamed run statistics against in-memory ones; chunking, worker count and batch size do not change a number."""

from __future__ import annotations

import json
import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from mcmatch.cli import main
from mcmatch.config.loading import load_config
from mcmatch.config.schema import Limits
from mcmatch.draws.mismatch import BLOCK
from mcmatch.results.tables import read_samples
from mcmatch.run import chunks
from mcmatch.run.chunks import monte_carlo, run_chunk
from mcmatch.run.study import nominal_measures, prepare
from mcmatch.solve import fast
from mcmatch.solve.newton import SOLVER_DEFAULTS
from mcmatch.stats import histogram, moments
from mcmatch.stats.describe import describe
from mcmatch.stats.histogram import Grid, Histogram, HistogramPart
from mcmatch.stats.moments import Moments, block_moments, block_starts, fold_blocks
from mcmatch.stats.streaming import ChunkReducer, RunAccumulator
from mcmatch.studies.pipeline import RunOptions, run_study, spec_yields

# A 1:4 NMOS mirror on invented, illustrative process values (not a foundry's); no corners, area or contributions,
# so a run is only the main Monte Carlo.
CONFIG = """
title = "streaming test mirror (illustrative)"
[technology]
name = "illustrative test process (invented values)"
[technology.nmos]
kprime = "300 uA/V^2"
vth0 = "0.45 V"
lambda_l = "0.08 um/V"
gamma = "0.45 V^0.5"
phi = "0.85 V"
a_vt = "4.5 mV*um"
a_beta = "1 %*um"
[[circuit.mosfet]]
name = "MREF"
type = "nmos"
drain = "nb"
gate = "nb"
source = "gnd"
w = "4 um"
l = "2 um"
[[circuit.mosfet]]
name = "MOUT"
type = "nmos"
drain = "out"
gate = "nb"
source = "gnd"
w = "4 um"
l = "2 um"
m = 4
[[circuit.current_source]]
name = "IREF"
from = "vdd"
to = "nb"
value = "10 uA"
[[circuit.voltage_source]]
name = "VDD"
plus = "vdd"
minus = "gnd"
value = "1.8 V"
[[circuit.voltage_source]]
name = "VOUT"
plus = "out"
minus = "gnd"
value = "0.9 V"
[measures]
i_out = { current = "MOUT" }
gain_error = { ratio = ["MOUT", "IREF"], ideal = 4 }
v_nb = { voltage = "nb" }
r_nb = { resistance = "nb" }
[specs]
gain_error = { min = "-2 %", max = "3.5 %" }
v_nb = { max = "0.633 V" }
[analysis]
samples = 20000
seed = 7
contributions = false
"""

#: More than the pilot block, so that later chunks are streamed and merged.
STREAMED = BLOCK + 3 * moments.STAT_BLOCK + 517


@pytest.fixture(scope="module")
def config_path(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("cfg") / "mirror.toml"
    path.write_text(CONFIG, encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def config(config_path):
    return load_config(config_path).with_analysis(samples=STREAMED)


@pytest.fixture(scope="module")
def in_memory(config):
    study = prepare(config)
    return study, monte_carlo(study, STREAMED, jobs=1), nominal_measures(study)


def _check_against_memory(summary: dict, columns: dict, nominal: dict, config, histogram: bool) -> None:
    for name, got in summary["measures"].items():
        want = describe(columns[name], nominal[name])
        assert got["count"] == want["count"]  # exact: counts are integers
        # moments: same numbers summed in another order; float rounding only (common practice, no source)
        assert got["mean"] == pytest.approx(want["mean"], rel=1e-12, abs=1e-300)
        assert got["std"] == pytest.approx(want["std"], rel=1e-10)
        assert got["min"] == want["min"] and got["max"] == want["max"]
        for q, value in want["quantiles"].items():
            if histogram:  # the streamed histogram puts each quantile within one bin of numpy's
                assert got["quantile_method"] == "histogram"
                assert abs(got["quantiles"][q] - value) <= got["quantile_bin_width"] * (1 + 1e-9), (name, q)
            else:
                assert got["quantile_method"] == "exact"
                assert got["quantiles"][q] == value
    want_yield = spec_yields(columns, config)
    for key in ("passed", "total", "fraction"):
        assert summary["yield"][key] == want_yield[key]
    for spec, block in want_yield["specs"].items():
        assert summary["yield"]["specs"][spec]["passed"] == block["passed"]
    assert summary["failed_solves"] == int((~columns["converged"]).sum())


def test_streamed_statistics_equal_in_memory_ones_with_histogram_quantiles(config, in_memory):
    # Common practice, no source: a streamed summary must equal the in-memory one on a run small enough to hold.
    study, columns, nominal = in_memory
    result = run_study(config, RunOptions(jobs=1, keep_samples=1000))
    _check_against_memory(result.summary, columns, nominal, config, histogram=True)
    assert result.summary["statistics"]["quantiles"] == "histogram"
    assert len(result.table) == 1000
    assert result.summary["yield"]["total"] == STREAMED


def test_all_samples_kept_gives_exact_quantiles(config, in_memory):
    # Common practice, no source: with every row kept, quantiles are numpy's own (linear interpolation).
    study, columns, nominal = in_memory
    result = run_study(config, RunOptions(jobs=1, keep_samples=STREAMED))
    _check_against_memory(result.summary, columns, nominal, config, histogram=False)
    assert len(result.table) == STREAMED


def test_same_summary_for_any_chunk_size_and_worker_count(config):
    # Common practice, no source: same seed, same numbers, whatever the chunking or the number of workers.
    runs = [
        run_study(config, RunOptions(jobs=1, keep_samples=500)),
        run_study(config, RunOptions(jobs=1, keep_samples=500, chunk_size=moments.STAT_BLOCK)),
        run_study(config, RunOptions(jobs=2, keep_samples=500, chunk_size=3 * moments.STAT_BLOCK)),
    ]
    keys = ("measures", "yield", "failed_solves", "failed_examples", "samples")
    first = {k: runs[0].summary[k] for k in keys}
    for other in runs[1:]:
        assert {k: other.summary[k] for k in keys} == first
        assert other.table.equals(runs[0].table)
    assert runs[1].summary["statistics"]["chunks"] > runs[0].summary["statistics"]["chunks"]


def test_keep_samples_writes_exactly_k_rows(config_path, tmp_path):
    # Project contract (issue 6): --keep-samples K writes the first K sample rows; statistics cover every sample.
    out = tmp_path / "run"
    args = ["run", str(config_path), "--samples", "3000", "--keep-samples", "123", "--out", str(out), "--quiet"]
    assert main(args) == 0
    table = read_samples(out / "samples.csv")
    assert len(table) == 123
    assert table["sample"].tolist() == list(range(123))
    summary = json.loads((out / "summary.json").read_text())
    assert summary["statistics"]["kept_samples"] == 123
    assert all(m["count"] == 3000 for m in summary["measures"].values())
    assert summary["yield"]["total"] == 3000
    assert main([*args[:-3], "--keep-samples", "-1", "--out", str(tmp_path / "bad"), "--quiet"]) == 2
    assert not (tmp_path / "bad").exists()


def test_keep_zero_writes_an_empty_table_with_the_columns(config):
    # Project contract (issue 6): keep = 0 keeps no row but still names the columns.
    result = run_study(config.with_analysis(samples=2000), RunOptions(jobs=1, keep_samples=0))
    assert len(result.table) == 0
    assert {"sample", "converged", "gain_error", "dvth_MREF"} <= set(result.table.columns)
    assert result.summary["measures"]["gain_error"]["count"] == 2000


def test_sample_results_do_not_depend_on_the_batch_they_are_solved_in(config, monkeypatch):
    # Common practice, no source: the fast path is elementwise per sample, so batch size and chunk boundaries
    # cannot change a single bit.
    study = prepare(config)
    whole = run_chunk(study, 0, 9000)
    monkeypatch.setattr(chunks, "FAST_BATCH", 1000)  # the batches run_chunk draws and solves
    pieces = [run_chunk(study, a, b) for a, b in ((0, 17), (17, 4096), (4096, 9000))]
    for key, values in whole.items():
        np.testing.assert_array_equal(np.concatenate([p[key] for p in pieces]), values, err_msg=key)


def test_stragglers_are_retried_by_the_reference_path(config, monkeypatch):
    # Common practice, no source: a sample the fast Newton leaves unconverged is solved again, the robust way, and
    # flagged; here every sample is forced to need that, and the answers must not change beyond the tolerance.
    study = prepare(config)
    normal = run_chunk(study, 0, 300)
    original = fast.newton_columns

    def one_step(*args, **kwargs):  # one Newton step, and no sample reported converged
        result = original(*args, **{**kwargs, "options": replace(SOLVER_DEFAULTS, max_iterations=1)})
        return replace(result, converged=np.zeros_like(result.converged))

    monkeypatch.setattr(fast, "newton_columns", one_step)
    retried = run_chunk(study, 0, 300)
    assert retried["retried"].all() and retried["converged"].all()
    assert not normal["retried"].any()
    for key in study.measures:  # both within Newton's tolerance of the same root
        np.testing.assert_allclose(retried[key], normal[key], rtol=1e-9, atol=1e-15)


def test_failed_samples_are_counted_and_fail_every_spec():
    # DESIGN.md section 3 contract: failed solves are counted, never dropped, and fail the yield.
    n = 40
    columns = {
        "sample": np.arange(100, 100 + n),
        "converged": np.ones(n, dtype=bool),
        "err": np.linspace(-0.02, 0.02, n),
        "dvth_M1": np.linspace(0, 1, n),
    }
    columns["converged"][[3, 7, 30]] = False
    columns["err"][[3, 7, 30]] = np.nan
    reducer = ChunkReducer(measures=("err",), specs={"err": Limits(min=-0.01, max=None)}, keep=0)
    part = reducer(columns)
    assert part.failed == 3
    assert [e["sample"] for e in part.failed_examples] == [103, 107, 130]
    ok = columns["converged"] & (np.nan_to_num(columns["err"], nan=-1) >= -0.01)
    assert part.spec_passed["err"] == int(ok.sum()) == part.joint_passed


def test_moments_merge_like_one_pass():
    # Chan, Golub, LeVeque, "Updating formulae and a pairwise algorithm for computing sample variances", 1979:
    # merged partial moments equal the one-pass ones up to rounding.
    rng = np.random.default_rng(3)
    v = rng.standard_normal(10_000) * 3.0 + 1e3
    v[[5, 50, 500]] = np.nan
    starts = block_starts(12_288, 12_288 + v.size, 4096)
    total = fold_blocks(Moments(), block_moments(v, starts))
    finite = v[np.isfinite(v)]
    assert total.count == finite.size
    assert total.mean == pytest.approx(finite.mean(), rel=1e-13)
    assert total.std == pytest.approx(finite.std(ddof=1), rel=1e-11)
    assert (total.min, total.max) == (finite.min(), finite.max())
    assert starts.tolist() == [0, 4096, 8192]
    assert block_starts(100, 9000, 4096).tolist() == [0, 4096 - 100, 8192 - 100]


def test_histogram_quantiles_within_one_bin_with_tails_and_coarsening(monkeypatch):
    # Common practice, no source: a fine histogram gives each quantile within one bin width; values beyond the
    # pilot's range are kept exactly, and merging bins pairwise keeps the bound at the coarser width.
    rng = np.random.default_rng(11)
    pilot = rng.standard_normal(2000)
    grid = Grid.from_pilot(pilot, bins=1024)
    data = rng.standard_t(2, 60_000)  # heavy tails: plenty of values beyond the pilot's range
    monkeypatch.setattr(histogram, "OVERFLOW_CAP", 500)
    hist = Histogram(grid)
    for piece in np.array_split(data, 7):
        hist.add(HistogramPart.of(piece, grid))
    assert hist.level > 0  # the cap forced coarsening
    qs = (0.00135, 0.02275, 0.5, 0.97725, 0.99865)
    got = hist.quantiles(qs, float(data.min()), float(data.max()))
    want = np.quantile(data, qs)
    for g, w in zip(got, want, strict=True):
        assert abs(g - w) <= hist.bin_width * (1 + 1e-9)
    assert int(hist.counts.sum()) + sum(len(o) for o in hist.outside) == data.size


def test_accumulator_rejects_chunks_out_of_order():
    # Common practice, no source: moments fold in sample order, so a gap or a swap is an error, not a silent mix.
    reducer = ChunkReducer(measures=("x",), specs={}, keep=0)
    acc = RunAccumulator(reducer)
    cols = {"sample": np.arange(8192, 8200), "converged": np.ones(8, dtype=bool), "x": np.ones(8)}
    with pytest.raises(ValueError):
        acc.add(reducer(cols))
    assert math.isinf(Moments().min)
