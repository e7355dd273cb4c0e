"""Shared helpers: a small copy of the demo project in a temporary folder, and byte-for-byte snapshots of a tree."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def demo_project(tmp_path: Path) -> Path:
    """tmp_path/project/demo.toml with its technology file beside it (technologies/demo180.toml); returns the config."""
    project = tmp_path / "project"
    (project / "technologies").mkdir(parents=True)
    shutil.copy(ROOT / "configs" / "demo.toml", project / "demo.toml")
    shutil.copy(ROOT / "configs" / "technologies" / "demo180.toml", project / "technologies" / "demo180.toml")
    (project / "notes.txt").write_text("my notes\n")
    return project / "demo.toml"


def snapshot(root: Path) -> dict[str, bytes | None]:
    """Every file and folder under root (root itself included): path -> file bytes, or None for a folder."""
    out: dict[str, bytes | None] = {".": None if root.is_dir() else root.read_bytes()}
    if root.is_dir():
        for path in sorted(root.rglob("*")):
            out[path.relative_to(root).as_posix()] = None if path.is_dir() else path.read_bytes()
    return out
