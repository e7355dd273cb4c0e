"""The one atomic file writer: a reader sees the old file or the new one, never half of one (common practice, no
source: write a temporary in the same folder, fsync, os.replace)."""

from __future__ import annotations

import os
import stat

import pytest

from mcmatch.results.atomic import atomic_file, write_text_atomic


def test_a_new_file_is_written_whole_and_no_temporary_is_left(tmp_path):
    target = tmp_path / "sub" / "report.html"
    write_text_atomic(target, "<html>\u00b5</html>\n")
    assert target.read_text(encoding="utf-8") == "<html>\u00b5</html>\n"
    assert sorted(p.name for p in target.parent.iterdir()) == ["report.html"]


def test_a_failure_while_writing_keeps_the_previous_file_and_removes_the_temporary(tmp_path):
    target = tmp_path / "drawing.svg"
    target.write_bytes(b"old")
    with pytest.raises(RuntimeError), atomic_file(target, "wb") as handle:
        handle.write(b"half of the new one")
        raise RuntimeError("the renderer failed")
    assert target.read_bytes() == b"old"
    assert [p.name for p in tmp_path.iterdir()] == ["drawing.svg"]


def test_a_replaced_file_keeps_its_mode(tmp_path):
    target = tmp_path / "starter.toml"
    target.write_text("old", encoding="utf-8")
    os.chmod(target, 0o640)
    write_text_atomic(target, "new")
    assert target.read_text(encoding="utf-8") == "new"
    assert stat.S_IMODE(target.stat().st_mode) == 0o640


def test_only_write_modes_are_accepted(tmp_path):
    with pytest.raises(ValueError), atomic_file(tmp_path / "x", "a"):
        pass
