"""`mcmatch watch`: one warm process re-runs the config on every save, with the numbers of a cold `mcmatch run`.

Sources: common practice, no source (an edit-run-look loop must give what the batch command gives, keep the last good
result when an edit is broken, and stop cleanly on Ctrl-C). No timing is asserted here: the latency is measured by
the benchmark (docs/performance.md).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

from conftest import ROOT

from mcmatch.cli import main


def _config(folder: Path, seed: int, extra: str = "") -> Path:
    """A small 1:4 mirror run (no analyses) next to its technology file."""
    tech = folder / "technologies"
    tech.mkdir(parents=True, exist_ok=True)
    (tech / "demo180.toml").write_bytes((ROOT / "configs" / "technologies" / "demo180.toml").read_bytes())
    text = (ROOT / "configs" / "demo.toml").read_text(encoding="utf-8")
    text = text[: text.index("[analysis.corners]")].replace("samples = 20000", "samples = 3000")
    text = text.replace("seed = 1", f"seed = {seed}") + extra
    path = folder / "mirror.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _start(config: Path, out: Path, runs: int) -> tuple[subprocess.Popen, list[str]]:
    """The watch as a process, and the list its stderr lines are read into as they come."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    command = [sys.executable, "-m", "mcmatch", "watch", str(config), "--out", str(out), "--interval", "0.05"]
    proc = subprocess.Popen(
        [*command, "--runs", str(runs), "--no-report"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
        cwd=config.parent,
    )
    lines: list[str] = []
    threading.Thread(target=lambda: lines.extend(iter(proc.stderr.readline, "")), daemon=True).start()
    return proc, lines


def _wait_for(condition, proc: subprocess.Popen, timeout: float = 120.0) -> None:
    deadline = time.monotonic() + timeout
    while not condition():
        assert proc.poll() is None, f"the watch ended with {proc.returncode}"
        assert time.monotonic() < deadline, "the watch did not get there in time"
        time.sleep(0.05)


def _numbers(summary: dict) -> dict:
    """The summary less what differs between two runs of the same seed (when, how long, which process)."""
    out = json.loads(json.dumps(summary))
    for key in ("started_utc", "run_time_s", "command_time_s", "monte_carlo_time_s", "warm", "config"):
        out["run"].pop(key, None)
    return out


def _runs_seen(out: Path) -> int:
    """Changes of the run folder's summary, counted by the seed written."""
    try:
        return json.loads((out / "summary.json").read_text(encoding="utf-8"))["seed"]
    except (OSError, ValueError, KeyError):
        return -1


def test_a_saved_edit_is_run_again_with_the_numbers_of_a_cold_run(tmp_path):
    config = _config(tmp_path / "project", seed=1)
    out = tmp_path / "watched"
    proc, lines = _start(config, out, runs=3)
    _wait_for(lambda: _runs_seen(out) == 1, proc)
    first = (out / "summary.json").read_bytes()
    # a broken edit: reported with its file and key, the last good run folder left as it was
    good = config.read_text(encoding="utf-8")
    config.write_text(good.replace("samples = 3000", "samples = -5"), encoding="utf-8")
    _wait_for(lambda: any("run 2 not written" in line for line in lines), proc)
    assert (out / "summary.json").read_bytes() == first
    config.write_text(good.replace("seed = 1", "seed = 7"), encoding="utf-8")  # mended, with another seed
    assert proc.wait(timeout=120) == 0, "".join(lines)
    time.sleep(0.2)  # the reader thread takes the last lines
    stderr = "".join(lines)
    (error,) = [line for line in lines if line.startswith("mcmatch: error:")]
    assert "mirror.toml" in error and "analysis.samples" in error
    assert stderr.count("mcmatch watch: run") == 3 and "run 3 written" in stderr
    warm = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert warm["seed"] == 7 and warm["run"]["warm"] is True
    # the same config run cold by `mcmatch run` gives the same numbers
    cold_out = tmp_path / "cold"
    assert main(["run", str(config), "--out", str(cold_out), "--quiet", "--no-report"]) == 0
    cold = json.loads((cold_out / "summary.json").read_text(encoding="utf-8"))
    assert "warm" not in cold["run"] or cold["run"]["warm"] is None
    assert _numbers(warm) == _numbers(cold)
    assert (out / "samples.csv").read_bytes() == (cold_out / "samples.csv").read_bytes()


def test_ctrl_c_between_runs_stops_the_watch_cleanly(tmp_path):
    config = _config(tmp_path / "project", seed=1)
    out = tmp_path / "watched"
    proc, lines = _start(config, out, runs=0)
    _wait_for(lambda: any("run 1 written" in line for line in lines), proc)
    written = (out / "summary.json").read_bytes()
    time.sleep(0.3)  # idle, polling
    proc.send_signal(signal.SIGINT)
    assert proc.wait(timeout=60) == 0, "".join(lines)
    time.sleep(0.2)
    assert "mcmatch watch: stopped" in "".join(lines)
    assert (out / "summary.json").read_bytes() == written


def test_a_bad_option_ends_the_watch_before_any_work(tmp_path, capsys):
    config = _config(tmp_path / "project", seed=1)
    out = tmp_path / "watched"
    assert main(["watch", str(config), "--out", str(out), "--interval", "0"]) == 2
    assert "--interval" in capsys.readouterr().err
    assert main(["watch", str(config), "--out", str(out), "--jobs", "-99", "--runs", "1"]) == 2
    assert "--jobs" in capsys.readouterr().err
    assert not out.exists()


def test_the_report_header_says_a_warm_re_run_is_not_a_whole_command():
    # common practice, no source: a time is labelled with what it covers
    from mcmatch.report.sections.verdict import header_items

    run = {"run_time_s": 0.36, "command_time_s": 0.59}
    cold = dict((label, value) for label, value, _ in header_items({"run": run}))
    warm = dict((label, value) for label, value, _ in header_items({"run": {**run, "warm": True}}))
    assert any(v == "0.59 s (whole command); study 0.36 s" for v in cold.values())
    assert any(v == "0.59 s (warm re-run in mcmatch watch); study 0.36 s" for v in warm.values())


def test_the_report_header_gives_the_main_monte_carlos_time_and_workers():
    # common practice, no source: the header says how long the main Monte Carlo took and on how many processes,
    # so a designer reads the throughput apart from the start-up (summary run.monte_carlo_time_s, run.workers)
    from mcmatch.report.sections.verdict import header_items

    run = {"run_time_s": 2.31, "command_time_s": 2.62, "monte_carlo_time_s": 2.05, "workers": 2}
    pooled = dict((label, value) for label, value, _ in header_items({"run": run}))["Run time"]
    alone = dict((label, value) for label, value, _ in header_items({"run": {**run, "workers": 1}}))["Run time"]
    assert pooled == "2.62 s (whole command); study 2.31 s; main Monte Carlo 2.05 s on 2 workers"
    assert alone.endswith("main Monte Carlo 2.05 s in this process")
