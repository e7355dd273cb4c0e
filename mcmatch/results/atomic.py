"""The one atomic writer of mcmatch: single files (a temporary sibling, fsync, os.replace) and whole run folders.

Every file mcmatch writes outside a run folder (a re-rendered report, a starter config, a placement drawing) goes
through :func:`atomic_file`; every run folder through :func:`write_run_folder`. A reader never sees half a file and a
failure never leaves a temporary behind; what was there before stays untouched until the new content is complete.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import IO, Any

from mcmatch.errors import ConfigError
from mcmatch.results.folder import MARKER, MARKER_TEXT, refusal, stale_temporaries, temporary_name


def _fsync_folder(folder: Path) -> None:
    """Make a rename inside `folder` durable (POSIX); silently skipped where folders cannot be opened."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


@contextmanager
def atomic_file(path: str | os.PathLike, mode: str = "w") -> Iterator[IO[Any]]:
    """Open a temporary sibling of `path` for writing ("w": text, UTF-8; "wb": bytes); on a clean exit it is flushed,
    fsynced and renamed over `path` (os.replace), else removed.

    The new file follows the umask; a replaced file keeps its mode. The parent folder is created if missing.
    """
    if mode not in ("w", "wb"):
        raise ValueError(f"mode must be 'w' or 'wb', got {mode!r}")
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.parent / f".{path.name}.{os.getpid()}-{os.urandom(4).hex()}.tmp"
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)  # the umask applies, as for any new file
    try:
        if path.exists():
            os.chmod(tmp, path.stat().st_mode & 0o777)
        with os.fdopen(fd, mode, **({"encoding": "utf-8"} if mode == "w" else {})) as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    _fsync_folder(path.parent)


def write_text_atomic(path: str | os.PathLike, text: str) -> None:
    """Write `text` (UTF-8) to `path` atomically: never a half-written file."""
    with atomic_file(path, "w") as handle:
        handle.write(text)


def write_run_folder(out_dir: Path, writer: Callable[[Path], None], force: bool = False) -> None:
    """Write a whole run folder atomically: `writer` fills a temporary sibling folder, which then replaces out_dir.

    A previous complete run in out_dir stays untouched until the new one is complete; on any error the temporary
    folder is removed and nothing is left half-written. The folder gets the run marker (:data:`folder.MARKER`);
    out_dir is replaced only if it is missing, empty or a run folder (any folder with force; never a file), checked
    again here just before the replacement. Folders and files follow the umask. Temporary folders left by a killed
    run into the same place are removed first.
    """
    out_dir = Path(out_dir)
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    for stale in stale_temporaries(out_dir):
        shutil.rmtree(stale, ignore_errors=True)
    tmp = out_dir.parent / temporary_name(out_dir, "tmp")
    tmp.mkdir()  # mode 0o777 less the umask (tempfile.mkdtemp would make it private)
    try:
        writer(tmp)
        (tmp / MARKER).write_text(MARKER_TEXT, encoding="utf-8")
        for f in tmp.iterdir():
            if f.is_file():
                with open(f, "rb") as handle:
                    os.fsync(handle.fileno())
        _fsync_folder(tmp)
        reason = refusal(out_dir, force)
        if reason is not None:
            raise ConfigError(f"'{out_dir}' {reason}", file="command line", key="--out")
        old = None
        if out_dir.exists():
            old = out_dir.parent / temporary_name(out_dir, "old")
            os.replace(out_dir, old)
        os.replace(tmp, out_dir)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    _fsync_folder(out_dir.parent)
