"""Every command-line option is checked before any work: exit 2 naming the option and the accepted range.

All checks: common practice, no source (a tool refuses bad input before it spends time, and names what it expected).
The limits themselves are the config schema's, so a value refused in the file is refused on the command line too.
"""

from __future__ import annotations

import socket
import sys
import time

import pytest
from conftest import ROOT, snapshot

from mcmatch.cli import main
from mcmatch.config.loading import load_config
from mcmatch.errors import ConfigError
from mcmatch.run.chunks import usable_cores

FAST = ["--samples", "20", "--quiet", "--no-report"]


@pytest.fixture
def no_solving(monkeypatch):
    """Fail the test if the Monte Carlo starts: the option must be refused before."""

    def refuse(*args, **kwargs):
        raise AssertionError("the run started although an option was invalid")

    monkeypatch.setattr("mcmatch.studies.pipeline.run_study", refuse)  # `mcmatch run` imports it when it runs
    monkeypatch.setattr("mcmatch.studies.pipeline.prepare", refuse)  # where the run prepares its condition


def refused(argv, capsys, tmp_path, *words):
    before = snapshot(tmp_path)
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    for word in words:
        assert word in err, err
    assert snapshot(tmp_path) == before
    return err


@pytest.mark.parametrize(
    ("option", "value", "words"),
    [
        ("--samples", str(10**12), ["--samples", "from 1 to 10000000000", str(10**12)]),
        ("--samples", "0", ["--samples", "from 1 to"]),
        ("--seed", str(2**70), ["--seed", f"from 0 to {2**63 - 1}", str(2**70)]),
        ("--seed", "-1", ["--seed", "from 0 to"]),
        ("--keep-samples", "-1", ["--keep-samples", ">= 0"]),
    ],
)
def test_samples_and_seed_beyond_their_limits(demo_project, tmp_path, capsys, no_solving, option, value, words):
    argv = ["run", str(demo_project), "--out", str(tmp_path / "r"), *FAST, option, value]
    refused(argv, capsys, tmp_path, "command line", *words)


def test_the_config_file_has_the_same_limits(demo_project, tmp_path, capsys):
    text = demo_project.read_text()
    demo_project.write_text(text.replace("samples = 20000", f"samples = {10**12}"))
    refused(["run", str(demo_project), "--out", str(tmp_path / "r"), "--quiet"], capsys, tmp_path, "analysis.samples")
    demo_project.write_text(text)
    with pytest.raises(ConfigError, match="analysis.seed"):  # an override through the API obeys them too
        load_config(demo_project).with_analysis(seed=2**70)


@pytest.mark.parametrize("jobs", [100 * usable_cores(), usable_cores() + 1, -usable_cores() - 1])
def test_jobs_beyond_this_machine(demo_project, tmp_path, capsys, no_solving, jobs):
    argv = ["run", str(demo_project), "--out", str(tmp_path / "r"), *FAST, "--jobs", str(jobs)]
    refused(argv, capsys, tmp_path, "--jobs", f"from {-usable_cores()} to {usable_cores()}", "0: automatic")


@pytest.mark.parametrize("jobs", ["0", "-1", "1"])
def test_documented_job_counts_run(demo_project, tmp_path, jobs):
    assert main(["run", str(demo_project), "--out", str(tmp_path / "r"), *FAST, "--jobs", jobs]) == 0


def test_placements_options_are_checked_first(tmp_path, capsys, no_solving):
    config = str(ROOT / "configs" / "placement.toml")
    refused(["placements", config, "--jobs", "1000"], capsys, tmp_path, "--jobs")
    refused(["placements", config, "--samples", str(10**10)], capsys, tmp_path, "--samples", "from 10 to 100000000")
    refused(["placements", config, "--seed", str(2**70)], capsys, tmp_path, "--seed")


def test_parquet_without_pyarrow_names_the_extra_first(demo_project, tmp_path, capsys, no_solving, monkeypatch):
    monkeypatch.setitem(sys.modules, "pyarrow", None)  # import pyarrow -> ImportError
    argv = ["run", str(demo_project), "--out", str(tmp_path / "r"), *FAST, "--format", "parquet"]
    refused(argv, capsys, tmp_path, "--format", "pyarrow", "mcmatch[parquet]")


def test_an_empty_cluster_address_is_an_error(demo_project, tmp_path, capsys, no_solving):
    argv = ["run", str(demo_project), "--out", str(tmp_path / "r"), *FAST, "--cluster", ""]
    refused(argv, capsys, tmp_path, "--cluster", "expected 'tcp://HOST:PORT'", "got ''")


def test_a_refused_connection_fails_without_waiting_for_the_client(demo_project, tmp_path, capsys, monkeypatch):
    distributed = pytest.importorskip("distributed")

    def waiting_client(*args, **kwargs):  # the client would retry a refused port until the whole timeout
        raise AssertionError("a refused port must be reported before the Dask client is made")

    monkeypatch.setattr(distributed, "Client", waiting_client)
    with socket.socket() as s:  # a loopback port nothing listens on: bound, then released
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    argv = ["run", str(demo_project), "--out", str(tmp_path / "r"), *FAST, "--cluster", f"tcp://127.0.0.1:{port}"]
    refused([*argv, "--cluster-timeout", "600"], capsys, tmp_path, "--cluster", "connection refused")


def test_the_console_names_the_report_and_times_the_whole_command(demo_project, tmp_path, capsys, monkeypatch):
    import mcmatch.studies.pipeline as pipeline  # `mcmatch run` imports its work from here when it runs

    real_run, real_clock, offset = pipeline.run_study, time.perf_counter, [0.0]

    def slow_run(*args, **kwargs):  # the Monte Carlo "takes" 1000 s on the command's clock
        result = real_run(*args, **kwargs)
        offset[0] += 1000.0
        return result

    monkeypatch.setattr(pipeline, "run_study", slow_run)
    monkeypatch.setattr(time, "perf_counter", lambda: real_clock() + offset[0])
    out = tmp_path / "r"
    assert main(["run", str(demo_project), "--out", str(out), "--samples", "20"]) == 0
    printed = capsys.readouterr().out
    assert f"open {out / 'report.html'}" in printed
    seconds = float(printed.split(" in ")[-1].split(" s")[0])
    assert seconds >= 1000.0  # the whole command, not the write alone
