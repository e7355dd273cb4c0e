"""`mcmatch --help` and `--version` start without the numerical stack (issue 17: fast from the first keystroke).

Common practice, no source: a command line answers its help at once; each command imports its work only when it
runs. Checked by what the interpreter reports it imported (`python -X importtime`), not by timing.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest
from conftest import ROOT

#: Libraries that only a command's work may import (each costs from tens of milliseconds to a second).
HEAVY = ("numpy", "scipy", "pandas", "pydantic", "pint", "matplotlib", "joblib", "dask", "jinja2", "tqdm")


def imported_packages(*argv: str) -> tuple[set[str], subprocess.CompletedProcess]:
    """Top-level packages `python -X importtime -m mcmatch ARGV` imported, and the finished process."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    done = subprocess.run(
        [sys.executable, "-X", "importtime", "-m", "mcmatch", *argv], capture_output=True, text=True, env=env
    )
    names = set()
    for line in done.stderr.splitlines():
        if line.startswith("import time:") and line.count("|") == 2:
            name = line.rsplit("|", 1)[1].strip()
            if name != "imported package":  # the header line
                names.add(name.split(".")[0])
    return names, done


@pytest.mark.parametrize("argv", [["--version"], ["--help"], ["run", "--help"], ["bench", "--help"]])
def test_help_and_version_import_no_heavy_library(argv):
    names, done = imported_packages(*argv)
    assert done.returncode == 0, done.stderr[-2000:]
    assert "mcmatch" in names  # the report is read right: our own package is listed
    assert sorted(names & set(HEAVY)) == []
    if argv == ["--version"]:
        assert done.stdout.startswith("mcmatch ")


def test_a_command_still_imports_its_work():
    # the check above can fail: `templates` needs pydantic (its parameter models), and the report shows it
    names, done = imported_packages("templates", "simple_mirror")
    assert done.returncode == 0, done.stderr[-2000:]
    assert "pydantic" in names


def test_a_run_writes_its_samples_table_without_pandas(tmp_path):
    # `mcmatch run` writes samples.csv and the report from the run's numpy columns: pandas (about 0.3 s of imports)
    # is for the Python API's table and for parquet only
    out = tmp_path / "run"
    names, done = imported_packages("run", str(ROOT / "configs" / "demo.toml"), "--quiet", "--out", str(out))
    assert done.returncode == 0, done.stderr[-2000:]
    assert (out / "samples.csv").exists() and (out / "report.html").exists()
    assert "numpy" in names and "pandas" not in names


def test_the_header_run_time_is_the_whole_command(tmp_path):
    # issue 16 item 8 (common practice, no source): the run time in the summary and the report header covers the
    # whole command from its process start (interpreter and imports included), so it lies between the study's own
    # time and the wall time the caller measured around the process
    import json
    import time

    out = tmp_path / "run"
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    before = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "mcmatch", "run", str(ROOT / "configs" / "demo.toml"), "--quiet", "--out", str(out)],
        capture_output=True,
        text=True,
        env=env,
    )
    wall = time.perf_counter() - before
    assert done.returncode == 0, done.stderr[-2000:]
    run = json.loads((out / "summary.json").read_text(encoding="utf-8"))["run"]
    assert run["run_time_s"] < run["command_time_s"] <= wall
    # the main Monte Carlo is part of the study; 20,000 samples do not pay for a pool: solved in this process
    assert 0.0 < run["monte_carlo_time_s"] < run["run_time_s"] and run["workers"] == 1
    html = (out / "report.html").read_text(encoding="utf-8")
    assert f"{run['command_time_s']:.3g} s (whole command); study {run['run_time_s']:.3g} s" in html


def test_a_one_unknown_monte_carlo_needs_no_scipy():
    # issue 17 (common practice, no source): everything before a simple mirror's first chunk is serial start-up;
    # loading, preparing and solving a chunk import no scipy (its first import costs 0.2-0.3 s), so a pool starts
    # that much sooner; scipy.special comes with the summary. The cascode (three unknowns) still orders its blocks
    # with scipy.sparse.csgraph: the check below can fail
    code = (
        "import sys\n"
        "from mcmatch.config.loading import load_config\n"
        "from mcmatch.run.chunks import run_chunk\n"
        "from mcmatch.run.study import nominal_measures, prepare\n"
        "study = prepare(load_config(sys.argv[1]))\n"
        "nominal_measures(study)\n"
        "run_chunk(study, 0, 4096)\n"
        "print(sorted(m for m in sys.modules if m.split('.')[0] == 'scipy')[:3])\n"
    )
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    outputs = {}
    for name in ("throughput", "lowvoltage_cascode"):
        config = str(ROOT / "configs" / f"{name}.toml")
        done = subprocess.run([sys.executable, "-c", code, config], capture_output=True, text=True, env=env)
        assert done.returncode == 0, done.stderr[-2000:]
        outputs[name] = done.stdout.strip()
    assert outputs["throughput"] == "[]"
    assert outputs["lowvoltage_cascode"] != "[]"
