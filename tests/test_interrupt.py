"""Interrupted runs leave the previous complete output untouched and no temporary folders behind."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import psutil
import pytest

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
    # wait until the run is well under way (CPU time, not wall time: robust on a loaded machine)
    child = psutil.Process(proc.pid)
    deadline = time.monotonic() + 120
    while proc.poll() is None and time.monotonic() < deadline:
        times = child.cpu_times()
        if times.user + times.system > 3.0:
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
