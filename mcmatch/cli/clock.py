"""The whole command's time, interpreter start-up included, for the report header and summary["run"]."""

from __future__ import annotations

import os
import time
from pathlib import Path


def command_seconds(started: float, whole_process: bool = True) -> float:
    """Seconds since this process started [s]: from /proc on Linux (10 ms ticks), so the interpreter's start-up and
    imports before the command line count too; elsewhere, or with whole_process False (a warm re-run in a watch),
    since `started`, a time.perf_counter() taken at the CLI's entry or when the re-run began."""
    since_entry = time.perf_counter() - started
    if not whole_process:
        return since_entry
    try:
        stat = Path("/proc/self/stat").read_text(encoding="ascii")
        start_ticks = int(stat.rsplit(")", 1)[1].split()[19])  # field 22, starttime, counted after "pid (comm)"
        uptime = float(Path("/proc/uptime").read_text(encoding="ascii").split()[0])
        age = uptime - start_ticks / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError, AttributeError):
        return since_entry
    return age if since_entry - 0.05 <= age <= since_entry + 600.0 else since_entry  # an odd clock: the safe one
