"""--out: a run replaces only a run folder (marker), never the user's files; the location is checked before any work.

Every check here is common practice, no source: a tool must not delete what it did not write, and must refuse an
unusable output place before spending the run's time.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import ROOT, snapshot

from mcmatch.cli import main
from mcmatch.errors import ConfigError
from mcmatch.results.atomic import write_run_folder
from mcmatch.results.folder import MARKER, host_tag

FAST = ["--samples", "20", "--quiet", "--no-report"]


def run(config: Path, out: str | Path, *extra: str) -> int:
    return main(["run", str(config), "--out", str(out), *FAST, *extra])


def test_missing_folder_is_created_with_the_marker_and_a_run_folder_is_replaced(demo_project, tmp_path):
    out = tmp_path / "new" / "run"
    assert run(demo_project, out, "--seed", "1") == 0
    assert (out / MARKER).is_file()
    first = (out / "summary.json").read_bytes()
    assert run(demo_project, out, "--seed", "2") == 0
    assert json.loads((out / "summary.json").read_bytes())["seed"] == 2 != json.loads(first)["seed"]
    assert sorted(p.name for p in out.parent.iterdir()) == ["run"]  # no temporary folder left


def test_an_empty_existing_folder_is_used(demo_project, tmp_path):
    out = tmp_path / "empty"
    out.mkdir()
    assert run(demo_project, out) == 0
    assert (out / "summary.json").is_file()


def test_a_folder_that_is_not_a_run_folder_is_refused_and_kept(demo_project, tmp_path, capsys):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "draft.toml").write_text("title = 'keep me'\n")
    (out / "sub").mkdir()
    (out / "sub" / "data.bin").write_bytes(bytes(range(256)))
    before = snapshot(tmp_path)
    assert run(demo_project, out) == 2
    err = capsys.readouterr().err
    assert "--out" in err and "'" + str(out) + "'" in err and "not a run folder" in err and "--force" in err
    assert "Traceback" not in err
    assert snapshot(tmp_path) == before


def test_force_replaces_a_non_run_folder(demo_project, tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "old.txt").write_text("old")
    assert run(demo_project, out, "--force") == 0
    assert (out / MARKER).is_file() and not (out / "old.txt").exists()


@pytest.mark.parametrize("force", [[], ["--force"]], ids=["plain", "force"])
def test_an_existing_file_is_never_replaced(demo_project, tmp_path, capsys, force):
    out = tmp_path / "notes.txt"
    out.write_text("precious\n")
    before = snapshot(tmp_path)
    assert run(demo_project, out, *force) == 2
    err = capsys.readouterr().err
    assert "--out" in err and "existing file" in err and "never replaces a file" in err
    assert snapshot(tmp_path) == before


@pytest.mark.parametrize(
    ("where", "words"),
    [
        (".", "current folder"),
        ("..", "current folder"),
        ("project", "holds the input file demo.toml"),
        ("project/technologies", "holds the input file demo180.toml"),
        ("project/demo.toml", "is the input file"),
        ("", "expected a folder name"),
    ],
    ids=["dot", "dotdot", "config-folder", "technology-folder", "config-itself", "empty"],
)
def test_the_input_and_the_current_folder_are_never_replaced(demo_project, tmp_path, capsys, monkeypatch, where, words):
    project = demo_project.parent
    (project / MARKER).write_text("")  # even a folder that looks like a run folder
    monkeypatch.chdir(project if where in (".", "..") else tmp_path)
    before = snapshot(tmp_path)
    for extra in ([], ["--force"]):
        assert run(demo_project, where, *extra) == 2
        err = capsys.readouterr().err
        assert "--out" in err and words in err, err
    assert snapshot(tmp_path) == before


def test_a_path_blocked_by_a_file_is_refused_before_the_run(demo_project, tmp_path, capsys):
    (tmp_path / "file").write_text("x")
    before = snapshot(tmp_path)
    assert run(demo_project, tmp_path / "file" / "run") == 2
    err = capsys.readouterr().err
    assert "--out" in err and "is a file, not a folder" in err
    assert snapshot(tmp_path) == before


def test_a_read_only_place_is_refused_before_the_run(demo_project, tmp_path, capsys, monkeypatch):
    locked = tmp_path / "locked"
    locked.mkdir()
    if os.geteuid() == 0:  # root writes anywhere: make the permission check itself answer "no"
        real = os.access
        monkeypatch.setattr(os, "access", lambda p, mode: False if Path(p) == locked else real(p, mode))
    else:
        locked.chmod(0o500)
    before = snapshot(tmp_path)
    try:
        assert run(demo_project, locked / "run") == 2
    finally:
        locked.chmod(0o700)
    err = capsys.readouterr().err
    assert "--out" in err and "no permission" in err and str(locked) in err
    assert snapshot(tmp_path) == before


def test_a_place_that_cannot_be_entered_is_refused_before_the_run(demo_project, tmp_path, capsys, monkeypatch):
    closed = tmp_path / "closed"
    closed.mkdir()
    before = snapshot(tmp_path)
    if os.geteuid() == 0:  # root enters anything: make looking inside fail as it does for other users
        real = Path.is_symlink

        def is_symlink(self: Path) -> bool:
            if closed in self.parents:
                raise PermissionError(13, "Permission denied")
            return real(self)

        monkeypatch.setattr(Path, "is_symlink", is_symlink)
    else:
        closed.chmod(0)
    try:
        assert run(demo_project, closed / "run") == 2
    finally:
        closed.chmod(0o700)
    err = capsys.readouterr().err
    assert "--out" in err and "cannot be examined" in err and "Permission denied" in err and "Traceback" not in err
    assert snapshot(tmp_path) == before


@pytest.mark.parametrize("mask", [0o022, 0o002])
def test_run_folders_follow_the_umask(demo_project, tmp_path, mask):
    # POSIX open(2)/mkdir(2): a new file gets 0666 & ~umask, a new folder 0777 & ~umask
    old = os.umask(mask)
    try:
        assert main(["run", str(demo_project), "--out", str(tmp_path / "run"), "--samples", "20", "--quiet"]) == 0
    finally:
        os.umask(old)
    out = tmp_path / "run"
    assert out.stat().st_mode & 0o777 == 0o777 & ~mask
    for name in ("summary.json", "samples.csv", "report.html", "config.toml", MARKER):
        assert (out / name).stat().st_mode & 0o777 == 0o666 & ~mask, name


def test_a_temporary_folder_left_by_a_killed_run_is_removed_by_the_next(demo_project, tmp_path):
    out = tmp_path / "run"
    writer = (
        "import sys, time\nfrom pathlib import Path\nfrom mcmatch.results.atomic import write_run_folder\n"
        "def fill(folder):\n    (folder / 'summary.json').write_text('{}')\n    print(folder, flush=True)\n"
        "    time.sleep(600)\n"
        f"write_run_folder(Path({str(out)!r}), fill)\n"
    )
    proc = subprocess.Popen([sys.executable, "-c", writer], stdout=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        stale = Path(proc.stdout.readline().strip())  # the writer is inside the temporary folder now
        assert stale.is_dir() and stale.parent == tmp_path
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
    assert stale.exists()  # kill -9 leaves it behind
    live = tmp_path / f".run.tmp-{host_tag()}-{os.getpid()}-0123abcd"  # a run still writing (this process)
    live.mkdir()
    assert run(demo_project, out) == 0
    assert not stale.exists() and live.exists()
    assert sorted(p.name for p in tmp_path.iterdir() if p.name != "project") == sorted(["run", live.name])


def test_the_writer_checks_the_place_again_just_before_replacing(tmp_path):
    out = tmp_path / "mine"
    out.mkdir()

    def fill(folder: Path) -> None:
        (out / "arrived meanwhile.txt").write_text("mine")  # the folder became the user's after the first check
        (folder / "summary.json").write_text("{}")

    with pytest.raises(ConfigError, match="not a run folder"):
        write_run_folder(out, fill)
    assert [p.name for p in out.iterdir()] == ["arrived meanwhile.txt"]
    assert [p.name for p in tmp_path.iterdir()] == ["mine"]


def test_report_out_never_replaces_another_file(demo_project, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert main(["run", str(demo_project), "--out", str(run_dir), "--samples", "20", "--quiet"]) == 0
    other = tmp_path / "page.html"
    other.write_text("<html>my page</html>")
    before = snapshot(tmp_path)
    for target in (other, demo_project, tmp_path):
        assert main(["report", str(run_dir), "--out", str(target), "--quiet"]) == 2
        err = capsys.readouterr().err
        assert "--out" in err and ("never replaced" in err or "ending in .html" in err or "is a folder" in err), err
    assert snapshot(tmp_path) == before
    copy = tmp_path / "copy.html"
    assert main(["report", str(run_dir), "--out", str(copy), "--quiet"]) == 0
    assert main(["report", str(run_dir), "--out", str(copy), "--quiet"]) == 0  # a report it wrote may be replaced


def test_placements_plot_place_is_checked_before_the_solves(tmp_path, capsys):
    (tmp_path / "file").write_text("x")
    before = snapshot(tmp_path)
    config = ROOT / "configs" / "placement.toml"
    assert main(["placements", str(config), "--plot", str(tmp_path / "file" / "p.svg")]) == 2
    err = capsys.readouterr().err
    assert "--plot" in err and "is a file, not a folder" in err
    assert snapshot(tmp_path) == before


@pytest.mark.parametrize("force", [[], ["--force"]], ids=["plain", "force"])
def test_new_out_is_checked_like_every_output(tmp_path, capsys, force):
    (tmp_path / "folder").mkdir()
    (tmp_path / "file").write_text("x")
    before = snapshot(tmp_path)
    for target, words in (
        (tmp_path / "folder", "is a folder"),
        (tmp_path / "file" / "new.toml", "is a file, not a folder"),
        ("", "expected a file name"),
    ):
        assert main(["new", "simple_mirror", "--out", str(target), *force]) == 2
        err = capsys.readouterr().err
        assert "--out" in err and words in err and "Traceback" not in err, err
    assert snapshot(tmp_path) == before
