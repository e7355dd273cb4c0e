"""Where a run may write: the checks made before any work, and the marker that tells a run folder from the user's own.

A run folder carries a small marker file, :data:`MARKER`. ``--out DIR`` may replace DIR only if it is missing, empty,
or a run folder (marker present); a non-empty folder of the user's is replaced only with ``--force``; a file, the
current folder, a folder that holds an input file, and their parents are never replaced.
"""

from __future__ import annotations

import os
import re
import socket
from collections.abc import Iterable
from pathlib import Path

from mcmatch.errors import ConfigError

#: The marker file of a run folder; its presence is what lets a later run replace the folder.
MARKER = ".mcmatch-run"
MARKER_TEXT = "This folder was written by 'mcmatch run'; a later run with the same --out may replace it whole.\n"

_FILE = "command line"


def host_tag() -> str:
    """This machine's name, reduced to characters safe in a file name (at most 40)."""
    return re.sub(r"[^A-Za-z0-9.]", "_", socket.gethostname())[:40] or "host"


def temporary_name(out_dir: Path, kind: str) -> str:
    """Name of a temporary sibling of out_dir: ``.NAME.KIND-HOST-PID-RANDOM`` (kind "tmp" or "old"), so a later run
    can tell a stale one (its process is gone) from one still being written."""
    return f".{out_dir.name}.{kind}-{host_tag()}-{os.getpid()}-{os.urandom(4).hex()}"


def stale_temporaries(out_dir: Path) -> list[Path]:
    """Temporary siblings of out_dir left by a run of this machine whose process no longer exists (killed)."""
    pattern = re.compile(rf"^\.{re.escape(out_dir.name)}\.(tmp|old)-(?P<host>.+)-(?P<pid>\d+)-[0-9a-f]{{8}}$")
    found = []
    try:
        siblings = list(out_dir.parent.iterdir())
    except OSError:
        return []
    for path in siblings:
        match = pattern.match(path.name)
        if match and match["host"] == host_tag() and not _alive(int(match["pid"])) and path.is_dir():
            found.append(path)
    return found


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except (ProcessLookupError, OverflowError):  # gone, or a number no process can have
        return False
    except PermissionError:  # another user's process
        return True
    return True


def is_run_folder(path: Path) -> bool:
    """Whether path is a folder written by a run (its marker file is present)."""
    return path.is_dir() and (path / MARKER).is_file()


def refusal(out_dir: Path, force: bool = False) -> str | None:
    """Why a run may not replace out_dir as it is now (None: it may): a file, or a non-empty folder without the marker
    (unless force)."""
    if out_dir.is_symlink() and not out_dir.exists():
        return "is a broken symbolic link"
    if not out_dir.exists():
        return None
    if not out_dir.is_dir():
        return "is an existing file; a run writes a folder and never replaces a file"
    if is_run_folder(out_dir) or force:
        return None
    try:
        empty = next(out_dir.iterdir(), None) is None
    except OSError as exc:
        return f"cannot be read ({exc.strerror or exc})"
    if empty:
        return None
    return (
        f"exists and is not a run folder (it has no {MARKER} marker), so it may hold your own files; choose another "
        "--out, empty it, or add --force to replace it and everything in it"
    )


def check_run_target(
    out_dir: str | os.PathLike, inputs: Iterable[str | os.PathLike | None] = (), force: bool = False
) -> Path:
    """The resolved folder a run may write, or ConfigError (exit 2) naming --out and why, before any work.

    inputs: the files the run reads (config, technology); a folder holding one of them is never replaced. Checks
    that the nearest existing parent is a folder this process may write in. Nothing is created or changed.
    """
    text = os.fspath(out_dir)
    if not text.strip():
        raise ConfigError("expected a folder name, got an empty string", file=_FILE, key="--out")
    target = Path(text).expanduser().resolve()
    shown = f"'{text}'"
    cwd = Path.cwd().resolve()
    if target == cwd or target in cwd.parents:
        raise ConfigError(
            f"{shown} is the current folder or contains it; a run replaces its --out folder whole, so give a new "
            "sub-folder such as 'reports/NAME'",
            file=_FILE,
            key="--out",
        )
    for item in inputs:
        if item is None:
            continue
        source = Path(item).resolve()
        if target == source:
            raise ConfigError(f"{shown} is the input file {source}; give a folder", file=_FILE, key="--out")
        if target in source.parents:
            raise ConfigError(
                f"{shown} holds the input file {source.name} ({source}); a run replaces its --out folder whole and "
                "must never delete its input: give another folder",
                file=_FILE,
                key="--out",
            )
    try:
        reason = refusal(target, force)
        if reason is None:
            check_writable_parent(target, "--out", shown)
    except OSError as exc:  # a folder on the way that this user may not enter
        raise ConfigError(f"{shown} cannot be examined: {exc.strerror or exc}", file=_FILE, key="--out") from None
    if reason is not None:
        raise ConfigError(f"{shown} {reason}", file=_FILE, key="--out")
    return target


def check_writable_parent(target: Path, option: str, shown: str | None = None) -> None:
    """ConfigError unless target's parent exists as a writable folder or can be created (its nearest existing
    ancestor is a writable folder, not a file)."""
    shown = shown or f"'{target}'"
    ancestor = target.parent
    while not ancestor.exists() and ancestor != ancestor.parent:
        ancestor = ancestor.parent
    if not ancestor.is_dir():
        raise ConfigError(f"{shown} cannot be created: {ancestor} is a file, not a folder", file=_FILE, key=option)
    if not os.access(ancestor, os.W_OK | os.X_OK):
        raise ConfigError(
            f"{shown} cannot be written: no permission to create files in {ancestor}", file=_FILE, key=option
        )


def check_output_file(path: str | os.PathLike, option: str, suffixes: tuple[str, ...] | None = None) -> Path:
    """An output file named on the command line: expected suffix (if given), not a folder, its folder writable or
    creatable."""
    text = os.fspath(path)
    target = Path(text).expanduser()
    if not text.strip():
        raise ConfigError("expected a file name, got an empty string", file=_FILE, key=option)
    if suffixes is not None and target.suffix.lower() not in suffixes:
        raise ConfigError(
            f"expected a file name ending in {' or '.join(suffixes)}, got '{text}'", file=_FILE, key=option
        )
    try:
        if target.is_dir():
            raise ConfigError(f"'{text}' is a folder; expected a file name", file=_FILE, key=option)
        check_writable_parent(target.resolve(), option, f"'{text}'")
    except OSError as exc:  # a folder on the way that this user may not enter
        raise ConfigError(f"'{text}' cannot be examined: {exc.strerror or exc}", file=_FILE, key=option) from None
    return target


#: The start of every report mcmatch writes carries this generator tag (report.html.j2).
REPORT_TAG = b'<meta name="generator" content="mcmatch'


def check_report_target(path: str | os.PathLike, option: str = "--out") -> Path:
    """A report file to write: .html, not a folder, writable, and if it exists, a report mcmatch wrote before (an
    existing file of another kind is never replaced)."""
    target = check_output_file(path, option, (".html", ".htm"))
    if target.exists():
        try:
            with open(target, "rb") as handle:
                head = handle.read(4096)
        except OSError as exc:
            raise ConfigError(f"'{target}' cannot be read ({exc.strerror or exc})", file=_FILE, key=option) from None
        if REPORT_TAG not in head:
            raise ConfigError(
                f"'{os.fspath(path)}' exists and is not a report written by mcmatch; it is never replaced: choose "
                "another file name",
                file=_FILE,
                key=option,
            )
    return target
