"""Scale-out on Dask: same numbers as a local run, a lost worker changes nothing, bad clusters fail fast with exit 2.

All traffic stays on 127.0.0.1. The cluster tests skip where dask.distributed is not installed (the `cluster` extra);
CI installs it. Worker processes are spawned with this interpreter's sys.path, so they import the same mcmatch.
"""

from __future__ import annotations

import faulthandler
import importlib.util
import json
import logging
import os
import signal
import socket
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from mcmatch.cli import main
from mcmatch.config.loading import load_config
from mcmatch.draws.mismatch import BLOCK
from mcmatch.errors import ConfigError
from mcmatch.results.tables import read_samples
from mcmatch.run import chunks
from mcmatch.run.chunks import map_chunks, run_chunk
from mcmatch.run.cluster import cluster_session, parse_address
from mcmatch.run.study import prepare

DEMO = Path(__file__).resolve().parents[1] / "configs" / "demo.toml"

try:
    import distributed
except ImportError:  # the core install: only the tests that need no cluster run
    distributed = None

needs_dask = pytest.mark.skipif(distributed is None, reason="dask.distributed not installed (mcmatch[cluster])")


#: Seconds after which a hung test (a cluster run waiting on a task that never comes back) ends pytest with every
#: thread's traceback, rather than holding CI for its whole time limit.
HANG_LIMIT = 300


@pytest.fixture(autouse=True)
def hang_guard():
    faulthandler.dump_traceback_later(HANG_LIMIT, exit=True)
    yield
    faulthandler.cancel_dump_traceback_later()


def free_port() -> int:
    """A loopback port nothing listens on (bound, then released)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def loopback_cluster(workers: int):
    """A LocalCluster on 127.0.0.1 (dashboard too): worker processes, one thread each."""
    return distributed.LocalCluster(
        n_workers=workers,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address="127.0.0.1:0",
        silence_logs=logging.CRITICAL,
    )


def assert_refused(address: str, timeout: float, match: str) -> None:
    """cluster_session raises ConfigError matching `match` before its body runs."""
    with pytest.raises(ConfigError, match=match), cluster_session(address, timeout):
        pytest.fail("the session must not start")


@pytest.fixture(scope="module")
def demo_study():
    return prepare(load_config(DEMO))


# --- no cluster needed ----------------------------------------------------------------------------------------------


BAD_ADDRESSES = ["localhost", "local:0", "local:two", "http://127.0.0.1:8786", "tcp://:8786", "x:99999"]


@pytest.mark.parametrize("text", BAD_ADDRESSES)
def test_bad_cluster_address_is_exit_2_and_writes_nothing(tmp_path, capsys, text):
    # common practice, no source: invalid command-line input exits 2 naming the option
    out = tmp_path / "r"
    assert main(["run", str(DEMO), "--samples", "100", "--cluster", text, "--out", str(out), "--quiet"]) == 2
    assert "--cluster" in capsys.readouterr().err
    assert not out.exists()


def test_address_forms():
    # common practice, no source: Dask addresses are scheme://host:port, tcp when no scheme is given
    assert parse_address("tcp://127.0.0.1:8786").address == "tcp://127.0.0.1:8786"
    assert parse_address("10.0.0.5:8786").address == "tcp://10.0.0.5:8786"
    assert parse_address("local").workers == 2
    assert parse_address("local:3").workers == 3
    assert parse_address("local:3").local


def test_missing_dask_says_which_extra(tmp_path, capsys, monkeypatch):
    # common practice, no source: an optional extra that is missing is named in the error
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    out = tmp_path / "r"
    assert main(["run", str(DEMO), "--samples", "100", "--cluster", "local", "--out", str(out), "--quiet"]) == 2
    assert "install mcmatch[cluster]" in capsys.readouterr().err
    assert not out.exists()


def test_bad_timeout_is_exit_2(tmp_path, capsys):
    args = ["run", str(DEMO), "--samples", "100", "--cluster", "local", "--cluster-timeout", "0", "--quiet"]
    assert main([*args, "--out", str(tmp_path / "r")]) == 2
    assert "--cluster-timeout" in capsys.readouterr().err


# --- loopback clusters ----------------------------------------------------------------------------------------------


@pytest.mark.cluster
@needs_dask
def test_local_cluster_gives_the_same_samples_as_one_job(tmp_path, monkeypatch):
    # common practice, no source: the random stream is tied to sample blocks, so where a chunk runs cannot matter
    samples = 2 * BLOCK + 1000  # three chunks, spread over both workers
    fmt = "parquet" if importlib.util.find_spec("pyarrow") else "csv"  # parquet only to write faster
    args = ["run", str(DEMO), "--samples", str(samples), "--keep-samples", str(samples), "--format", fmt, "--quiet"]
    sent = []  # chunk ranges handed to the dask backend

    def spy(study, ranges, jobs, backend=None, *rest, **kwargs):
        if backend == "dask":
            sent.extend(ranges)
        return map_chunks(study, ranges, jobs, backend, *rest, **kwargs)

    monkeypatch.setattr(chunks, "map_chunks", spy)  # where stream_chunks looks it up
    assert main([*args, "--cluster", "local:2", "--out", str(tmp_path / "cluster")]) == 0
    assert sum(stop - start for start, stop in sent) > 0  # chunks did go to the cluster (the runner may solve a pilot)
    monkeypatch.undo()
    assert main([*args, "--jobs", "1", "--out", str(tmp_path / "serial")]) == 0
    cluster = read_samples(tmp_path / "cluster" / f"samples.{fmt}")
    serial = read_samples(tmp_path / "serial" / f"samples.{fmt}")
    assert len(cluster) == samples
    pd.testing.assert_frame_equal(cluster, serial, check_exact=True)
    summaries = [json.loads((tmp_path / name / "summary.json").read_text()) for name in ("cluster", "serial")]
    for key in ("measures", "yield", "failed_solves", "failed_examples"):
        assert summaries[0][key] == summaries[1][key], key


@pytest.mark.cluster
@needs_dask
def test_nothing_listening_fails_within_the_timeout(tmp_path, capsys):
    # common practice, no source: an unreachable service is reported within the given time, not after a hang
    timeout = 3.0
    out = tmp_path / "r"
    started = time.monotonic()
    args = ["run", str(DEMO), "--samples", "100", "--out", str(out), "--quiet"]
    code = main([*args, "--cluster", f"tcp://127.0.0.1:{free_port()}", "--cluster-timeout", str(timeout)])
    elapsed = time.monotonic() - started
    assert code == 2
    err = capsys.readouterr().err
    assert "--cluster" in err and "could not reach a Dask scheduler" in err
    assert elapsed < timeout + 15  # a failure bound with a generous margin, not a speed test
    assert not out.exists()


@pytest.mark.cluster
@needs_dask
def test_scheduler_without_workers_fails_within_the_timeout():
    # common practice, no source: zero workers would wait forever; the check gives up at the timeout
    with distributed.LocalCluster(
        n_workers=0, processes=True, host="127.0.0.1", dashboard_address="127.0.0.1:0", silence_logs=logging.CRITICAL
    ) as cluster:
        assert_refused(cluster.scheduler_address, 1.5, "no Dask worker joined")


@pytest.fixture(scope="module")
def shared_cluster():
    if distributed is None:
        pytest.skip("dask.distributed not installed (mcmatch[cluster])")
    with loopback_cluster(2) as cluster:
        yield cluster


@pytest.mark.cluster
@needs_dask
def test_workers_that_cannot_import_mcmatch_are_refused(shared_cluster):
    # common practice, no source: a worker without the package would leave the client hanging; refuse it up front
    with distributed.Client(shared_cluster.scheduler_address, set_as_default=False) as client:
        client.run(lambda: sys.modules.__setitem__("mcmatch", None))  # the workers now fail to import mcmatch
        try:
            assert_refused(shared_cluster.scheduler_address, 10, "cannot import mcmatch")
        finally:
            client.run(lambda: sys.modules.pop("mcmatch", None))


@pytest.mark.cluster
@needs_dask
def test_other_mcmatch_version_on_workers_is_refused(shared_cluster, monkeypatch):
    # common practice, no source: the same seed gives the same numbers only with the same code
    import mcmatch

    monkeypatch.setattr(mcmatch, "__version__", "0.0.0+other")
    assert_refused(shared_cluster.scheduler_address, 10, r"has mcmatch .*, this process 0\.0\.0\+other")


@pytest.mark.cluster
@needs_dask
def test_other_mcmatch_source_with_the_same_version_is_refused(shared_cluster, tmp_path):
    # common practice, no source: an edited or other checkout keeps the version number but may change the numbers
    import mcmatch

    other = tmp_path / "mcmatch"
    other.mkdir()
    (other / "__init__.py").write_text(f"__version__ = {mcmatch.__version__!r}\n# another copy\n")
    init, version = str(other / "__init__.py"), mcmatch.__version__

    def install_other_copy() -> None:
        import types

        module = types.ModuleType("mcmatch")
        module.__file__, module.__version__ = init, version
        sys.modules["mcmatch"] = module

    with distributed.Client(shared_cluster.scheduler_address, set_as_default=False) as client:
        client.run(install_other_copy)
        try:
            assert_refused(shared_cluster.scheduler_address, 10, "has mcmatch source digest")
        finally:
            client.run(lambda: sys.modules.pop("mcmatch", None))


@pytest.mark.cluster
@needs_dask
def test_remote_scheduler_address_runs_on_its_workers(shared_cluster, demo_study):
    # common practice, no source: chunks sent to the cluster come back identical to the in-process ones
    ranges = [(0, 700), (700, 1500), (1500, 2000)]
    with cluster_session(shared_cluster.scheduler_address, 10) as backend, distributed.get_task_stream() as stream:
        parts = list(map_chunks(demo_study, ranges, 2, backend))
    assert {task["worker"] for task in stream.data} <= set(shared_cluster.scheduler_info["workers"])
    assert len(stream.data) >= 1  # the chunks ran on the workers, not in this process
    for (start, stop), part in zip(ranges, parts, strict=True):
        expected = run_chunk(demo_study, start, stop)
        for key, column in expected.items():
            np.testing.assert_array_equal(part[key], column, err_msg=key)


@pytest.mark.cluster
@needs_dask
def test_local_cluster_listens_on_loopback_and_stops_on_interrupt():
    # common practice, no source: nothing reachable from other machines; Ctrl-C leaves no worker process behind
    import psutil

    def workers() -> list:
        children = psutil.Process().children(recursive=True)
        return [p for p in children if "spawn_main" in " ".join(p.cmdline())]  # not multiprocessing's tracker

    def listening(process) -> set:
        return {c.laddr for c in process.net_connections(kind="inet") if c.status == psutil.CONN_LISTEN}

    before = {p.pid for p in workers()}
    mine = listening(psutil.Process())  # whatever this test process already serves is not the session's
    with pytest.raises(KeyboardInterrupt), cluster_session("local:1", 10):
        started = [p for p in workers() if p.pid not in before]
        assert len(started) == 1
        opened = (listening(psutil.Process()) - mine).union(*(listening(p) for p in started))
        assert len(opened) >= 4  # scheduler, its dashboard, the worker, its status page (and the nanny)
        assert all(address.ip == "127.0.0.1" for address in opened), opened
        raise KeyboardInterrupt
    gone, alive = psutil.wait_procs(started, timeout=10)
    assert not alive


@pytest.mark.cluster
@needs_dask
def test_lost_worker_does_not_change_the_result(shared_cluster, demo_study):
    # common practice, no source: Dask recomputes the tasks of a lost worker; the block-tied stream keeps the numbers
    ranges = [(start, start + 3000) for start in range(0, 36_000, 3000)]

    def slow_chunk(study, start, stop):  # nested: shipped by value; slow enough that the kill lands mid-chunk
        time.sleep(0.3)
        return run_chunk(study, start, stop)

    # last in this file: the shared cluster's nanny replaces the killed worker, but later tests need not rely on it
    with cluster_session(shared_cluster.scheduler_address, 20) as backend:
        client = distributed.get_client()
        pids = client.run(os.getpid)
        victim, lost = None, []
        parts = []
        with distributed.get_task_stream(client=client) as stream:
            for part in map_chunks(demo_study, ranges, 2, backend, task=slow_chunk):
                parts.append(part)
                if victim is None:  # first chunk back: the others are still in flight
                    victim, lost = busy_worker(client)
                    os.kill(pids[victim], signal.SIGKILL)
        assert len(parts) == len(ranges)
        assert victim not in client.scheduler_info()["workers"]  # it really died (its nanny started a new one)
    finished_by = {task["key"]: task["worker"] for task in stream.data}
    assert all(finished_by.get(key) not in (None, victim) for key in lost)  # its chunks were recomputed elsewhere
    columns = {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}
    expected = [run_chunk(demo_study, start, stop) for start, stop in ranges]
    for key in columns:
        np.testing.assert_array_equal(columns[key], np.concatenate([e[key] for e in expected]), err_msg=key)


def busy_worker(client, wait: float = 5.0) -> tuple[str, list[str]]:
    """A worker with tasks in flight and their keys (polls up to `wait` seconds)."""
    deadline = time.monotonic() + wait
    while time.monotonic() < deadline:
        for worker, keys in client.processing().items():
            if keys:
                return worker, list(keys)
        time.sleep(0.01)
    raise AssertionError("no worker had a task in flight")
