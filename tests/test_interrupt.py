"""Interrupted runs leave the previous complete output untouched and no temporary folders behind."""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import psutil
import pytest

from mcmatch.cli import main
from mcmatch.draws.mismatch import BLOCK

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "demo.toml"


def _start(out: Path, samples: int) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.Popen(
        [sys.executable, "-m", "mcmatch", "run", str(DEMO), "--samples", str(samples), "--out", str(out), "--quiet"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        env=env,
        cwd=ROOT,
    )


@pytest.mark.slow
@pytest.mark.parametrize(("sig", "status"), [(signal.SIGINT, 130), (signal.SIGTERM, 143)], ids=["SIGINT", "SIGTERM"])
def test_signal_mid_run_keeps_previous_output(tmp_path, sig, status):
    # Common practice, no source: an interrupted job must not destroy or half-replace the last good result.
    out = tmp_path / "run"
    first = _start(out, 2000)
    assert first.wait(timeout=300) == 0, first.stderr.read().decode()
    before = (out / "summary.json").read_bytes()
    assert json.loads(before)["samples"] == 2000

    proc = _start(out, 50_000_000)
    # wait until the run is well under way (CPU time, not wall time: robust on a loaded machine), counting its pool
    # workers: forked workers do the solving while the command itself mostly waits
    child = psutil.Process(proc.pid)
    deadline = time.monotonic() + 120
    while proc.poll() is None and time.monotonic() < deadline:
        busy = 0.0
        for member in (child, *child.children(recursive=True)):
            with contextlib.suppress(psutil.Error):  # a worker that just ended
                busy += sum(member.cpu_times()[:2])  # user + system
        if busy > 3.0:
            break
        time.sleep(0.2)
    assert proc.poll() is None, proc.stderr.read().decode()
    proc.send_signal(sig)
    try:
        code = proc.wait(timeout=60)
    except subprocess.TimeoutExpired:
        proc.kill()
        raise
    err = proc.stderr.read().decode()
    assert code == status, err
    assert "nothing was written" in err
    assert (out / "summary.json").read_bytes() == before
    leftovers = [p.name for p in tmp_path.iterdir() if p.name != "run"]
    assert leftovers == []


class _Finaliser:
    """Delivers a signal from inside __del__: Python prints "Exception ignored" and swallows the exception there."""

    def __init__(self, sig: int) -> None:
        self.sig = sig

    def __del__(self) -> None:
        signal.raise_signal(self.sig)


def _swallow(sig: int) -> None:
    _Finaliser(sig)  # created and collected at once: the signal's exception is lost inside __del__


@pytest.mark.parametrize(("sig", "status"), [(signal.SIGINT, 130), (signal.SIGTERM, 143)], ids=["SIGINT", "SIGTERM"])
def test_a_signal_lost_in_a_finaliser_still_ends_the_run(demo_project, tmp_path, capsys, monkeypatch, sig, status):
    # Common practice, no source: a signal must end the run even where Python itself drops its exception
    # ("Exception ignored in ... __del__"), and the previous result must survive it.
    import mcmatch.studies.pipeline

    out = tmp_path / "run"
    args = ["run", str(demo_project), "--out", str(out), "--quiet", "--no-report", "--jobs", "1"]
    assert main([*args, "--samples", "100"]) == 0
    before = (out / "summary.json").read_bytes()
    solved = []
    real_chunk = mcmatch.studies.pipeline.run_chunk

    def chunk_then_signal(study, start, stop):
        solved.append((start, stop))
        columns = real_chunk(study, start, stop)
        if len(solved) == 1:
            _swallow(sig)
        return columns

    lost = []  # what Python reports as "Exception ignored in ..."
    monkeypatch.setattr(sys, "unraisablehook", lambda u: lost.append(u.exc_type))
    monkeypatch.setattr(mcmatch.studies.pipeline, "run_chunk", chunk_then_signal)
    monkeypatch.setattr(mcmatch.run.chunks, "run_chunk", chunk_then_signal)  # the chunk task of map_chunks
    assert main([*args, "--samples", str(3 * BLOCK)]) == status
    assert len(lost) == 1 and not issubclass(lost[0], Exception)  # the exception was indeed lost where raised
    assert "nothing was written" in capsys.readouterr().err
    assert len(solved) == 1  # stopped at the next safe point: no further chunk was solved
    assert (out / "summary.json").read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["project", "run"]


def test_a_signal_lost_while_writing_keeps_the_previous_run(demo_project, tmp_path, capsys, monkeypatch):
    # Common practice, no source: the last safe point is just before the new folder replaces the old one
    import mcmatch.results.tables as run_command  # `mcmatch run` imports write_samples from here when it runs

    out = tmp_path / "run"
    args = ["run", str(demo_project), "--out", str(out), "--quiet", "--samples", "100"]
    assert main(args) == 0
    before = (out / "summary.json").read_bytes()
    real_write = run_command.write_samples

    def write_then_signal(path, table):
        real_write(path, table)
        _swallow(signal.SIGINT)

    lost = []
    monkeypatch.setattr(sys, "unraisablehook", lambda u: lost.append(u.exc_type))
    monkeypatch.setattr(run_command, "write_samples", write_then_signal)
    assert main([*args, "--seed", "7"]) == 130
    assert lost == [KeyboardInterrupt]
    assert "nothing was written" in capsys.readouterr().err
    assert (out / "summary.json").read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["project", "run"]
