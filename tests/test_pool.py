"""Local worker pools (run/pool.py): forked workers by default, loky by MCMATCH_POOL; same numbers either way.

Common practice, no source: a pool changes how fast, never what is computed; Ctrl-C belongs to the parent; a map
left early ends the workers it started; an unknown setting is refused before any work.
"""

from __future__ import annotations

import json
import os
import signal
import sys
import time

import pytest
from conftest import ROOT, snapshot

from mcmatch.cli import main
from mcmatch.draws.mismatch import BLOCK
from mcmatch.results.tables import read_samples
from mcmatch.run import pool
from mcmatch.run.chunks import map_chunks, run_chunk
from mcmatch.run.study import prepare

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the fork pool is the Linux default")

DEMO = ROOT / "configs" / "demo.toml"
THROUGHPUT = ROOT / "configs" / "throughput.toml"  # the demo mirror without analyses: the main run alone


def _numbers(folder):
    summary = json.loads((folder / "summary.json").read_text())
    return {k: summary[k] for k in ("samples", "failed_solves", "measures", "yield")}, read_samples(
        folder / "samples.csv"
    )


def test_same_seed_same_numbers_with_one_or_two_workers_and_either_pool(tmp_path, monkeypatch):
    # Common practice, no source (DESIGN.md section 3): same seed, same numbers whatever the workers or backend;
    # the streamed statistics (histogram quantiles, keep < samples) and the kept rows alike.
    args = [
        "run",
        str(THROUGHPUT),
        "--samples",
        str(3 * BLOCK + 1000),
        "--seed",
        "9",
        "--keep-samples",
        "500",
        "--quiet",
    ]
    args += ["--no-report"]
    assert main([*args, "--jobs", "1", "--out", str(tmp_path / "one")]) == 0
    monkeypatch.setenv("MCMATCH_POOL", "fork")
    assert main([*args, "--jobs", "2", "--out", str(tmp_path / "fork")]) == 0
    monkeypatch.setenv("MCMATCH_POOL", "loky")
    assert main([*args, "--jobs", "2", "--out", str(tmp_path / "loky")]) == 0
    one, one_rows = _numbers(tmp_path / "one")
    for other in ("fork", "loky"):
        numbers, rows = _numbers(tmp_path / other)
        assert numbers == one
        assert rows.equals(one_rows)


def test_an_unknown_pool_is_refused_before_any_work(demo_project, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("MCMATCH_POOL", "threads")
    before = snapshot(tmp_path)
    assert main(["run", str(demo_project), "--out", str(tmp_path / "r"), "--samples", "20", "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "MCMATCH_POOL" in err and "'threads'" in err and "'fork'" in err and "'loky'" in err
    assert "Traceback" not in err
    assert snapshot(tmp_path) == before


@pytest.fixture
def study():
    from mcmatch.config.loading import load_config

    return prepare(load_config(DEMO))


def _workers() -> list:
    """The worker processes of the fork pools running now."""
    return [p for executor, _ in pool._running.values() for p in (getattr(executor, "_processes", None) or {}).values()]


def _slow_chunk(study, start, stop):
    time.sleep(0.5)
    return run_chunk(study, start, stop)


def test_fork_workers_ignore_ctrl_c_and_end_with_their_map(study, monkeypatch):
    monkeypatch.setenv("MCMATCH_POOL", "fork")
    ranges = [(i * 100, (i + 1) * 100) for i in range(4)]
    parts = map_chunks(study, ranges, 2, task=_slow_chunk)
    first = next(parts)
    workers = _workers()
    assert len(workers) == 2
    for process in workers:
        os.kill(process.pid, signal.SIGINT)  # what Ctrl-C sends to the whole foreground process group
    rest = list(parts)  # the workers carried on
    assert [int(p["sample"][0]) for p in [first, *rest]] == [0, 100, 200, 300]
    alone = list(map_chunks(study, ranges, 1))  # the same numbers in one process
    for a, b in zip([first, *rest], alone, strict=True):
        assert (a["gain_error"] == b["gain_error"]).all()
    assert not any(p.is_alive() for p in workers)  # the map's end shut its pool down


def test_a_map_left_early_ends_its_workers(study, monkeypatch):
    monkeypatch.setenv("MCMATCH_POOL", "fork")
    parts = map_chunks(study, [(i * 100, (i + 1) * 100) for i in range(8)], 2, task=_slow_chunk)
    assert len(next(parts)["sample"]) == 100
    workers = _workers()
    parts.close()  # the consumer stops: chunks still in flight are not wanted
    deadline = time.monotonic() + 10
    while any(p.is_alive() for p in workers) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert workers and not any(p.is_alive() for p in workers)
    assert len(list(map_chunks(study, [(0, 100), (100, 200)], 2))) == 2  # a fresh pool serves the next map


def _failing_chunk(study, start, stop):
    if start >= 200:
        raise ValueError(f"chunk {start} failed")
    return run_chunk(study, start, stop)


def test_a_failure_in_a_worker_reaches_the_caller(study, monkeypatch):
    monkeypatch.setenv("MCMATCH_POOL", "fork")
    with pytest.raises(ValueError, match="chunk 200 failed"):
        list(map_chunks(study, [(0, 100), (100, 200), (200, 300)], 2, task=_failing_chunk))
    assert len(list(map_chunks(study, [(0, 100), (100, 200)], 2))) == 2


def test_a_pools_chunks_end_in_single_blocks():
    # Common practice (guided scheduling), no source: with several workers the last chunk of each is cut into
    # single random blocks so the workers finish close together; the ranges still cover every sample once, in order,
    # on block boundaries; one worker, or a forced size, keeps equal chunks
    from mcmatch.run.chunks import CHUNK_QUANTUM, chunk_ranges

    samples, start = 20_000_000, BLOCK
    for jobs in (1, 2, 4):
        ranges = chunk_ranges(samples, jobs, start=start)
        flat = [edge for r in ranges for edge in r]
        assert flat[0] == start and flat[-1] == samples
        assert all(a == b for a, b in zip(flat[1:-1:2], flat[2::2], strict=True))  # contiguous
        assert all(stop > begin and begin % CHUNK_QUANTUM == 0 for begin, stop in ranges)
        sizes = [stop - begin for begin, stop in ranges]
        if jobs == 1:
            assert len(set(sizes[:-1])) == 1
        else:
            big = max(sizes)
            tail = [k for k, n in enumerate(sizes) if n <= BLOCK]
            assert big == 8 * BLOCK and tail == list(range(tail[0], len(sizes)))
            assert sum(sizes[k] for k in tail) >= (jobs - 1) * big  # the last chunks of the workers, cut up
    forced = chunk_ranges(samples, 2, start=start, size=3 * BLOCK)
    assert {stop - begin for begin, stop in forced[:-1]} == {3 * BLOCK}


def _plan_was_inherited(study, start, stop):
    from mcmatch.run.study import _PLANS

    return any(cached is study for cached, _ in _PLANS), os.getpid()


def test_fork_workers_use_the_study_they_inherited(study, monkeypatch):
    # Common practice, no source: a forked worker already holds the parent's study and its solve plan (built at
    # the pilot); each chunk sends only a key and a range, and the plan is never rebuilt from a pickled copy
    from mcmatch.run.study import fast_plan

    monkeypatch.setenv("MCMATCH_POOL", "fork")
    fast_plan(study)  # built here, before the fork
    found = list(map_chunks(study, [(i * 100, (i + 1) * 100) for i in range(4)], 2, task=_plan_was_inherited))
    assert all(hit for hit, _ in found) and os.getpid() not in {pid for _, pid in found}
    assert pool._inherited == {}  # dropped when the map ended
