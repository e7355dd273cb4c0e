"""kill -9 of the command: its pool workers and their helpers end within seconds and leave nothing in /dev/shm.

Common practice, no source: a killed job must not leave processes computing for nobody or shared memory behind.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import psutil
import pytest
from conftest import ROOT

SHM = Path("/dev/shm")
GRACE_S = 10.0  # the workers look at their parent every 0.25 s; this bound leaves room for a loaded machine


def group_members(group: int) -> list[psutil.Process]:
    """Running (not zombie) processes of a process group."""
    found = []
    for proc in psutil.process_iter(["status"]):
        try:
            if os.getpgid(proc.pid) == group and proc.info["status"] != psutil.STATUS_ZOMBIE:
                found.append(proc)
        except (ProcessLookupError, psutil.Error):
            continue
    return found


def shared_memory_of(pid: int) -> list[str]:
    """Entries loky and joblib made in /dev/shm for process pid (semaphores, memory-mapped folders)."""
    if not SHM.is_dir():
        return []
    return sorted(p.name for p in SHM.iterdir() if f"-{pid}-" in p.name or f"_{pid}_" in p.name)


def pool_workers(pid: int, kind: str) -> list[psutil.Process]:
    """The pool workers of process pid: its forked children, or the loky worker processes."""
    children = psutil.Process(pid).children(recursive=True)
    if kind == "fork":
        return children
    return [p for p in children if "popen_loky" in " ".join(p.cmdline())]


@pytest.mark.slow
@pytest.mark.skipif(sys.platform != "linux", reason="process groups and /dev/shm as on Linux")
@pytest.mark.parametrize("kind", ["fork", "loky"])
def test_kill_9_ends_every_worker_of_the_process_group(tmp_path, kind):
    command = [sys.executable, "-m", "mcmatch", "run", str(ROOT / "configs" / "demo.toml"), "--samples", "50000000"]
    command += ["--jobs", "2", "--quiet", "--out", str(tmp_path / "run")]
    env = {**os.environ, "PYTHONPATH": str(ROOT), "MCMATCH_POOL": kind}
    proc = subprocess.Popen(command, start_new_session=True, cwd=ROOT, env=env, stderr=subprocess.PIPE)
    group = proc.pid  # a new session: the command leads its own process group, its workers join it
    try:
        deadline = time.monotonic() + 120
        workers: list[psutil.Process] = []
        while time.monotonic() < deadline and proc.poll() is None:
            workers = pool_workers(proc.pid, kind)
            if len(workers) >= 2:
                break
            time.sleep(0.1)
        assert proc.poll() is None, proc.stderr.read().decode()
        assert len(workers) >= 2, "the pool did not start"
        time.sleep(1.0)  # the workers are inside their first chunk now
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
        deadline = time.monotonic() + GRACE_S
        while group_members(group) and time.monotonic() < deadline:
            time.sleep(0.1)
        survivors = [(p.pid, " ".join(p.cmdline())[:80]) for p in group_members(group)]
        assert survivors == []
        deadline = time.monotonic() + GRACE_S
        while shared_memory_of(proc.pid) and time.monotonic() < deadline:
            time.sleep(0.1)
        assert shared_memory_of(proc.pid) == []
        assert not (tmp_path / "run").exists()
    finally:
        for p in group_members(group):  # never leave the test's own processes behind, whatever failed
            p.kill()
