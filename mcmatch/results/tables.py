"""The result table (one row per sample, SI columns) and atomic writers of a run folder."""

from __future__ import annotations

import json
import os
import shutil
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

from mcmatch.errors import ConfigError
from mcmatch.results.folder import MARKER, MARKER_TEXT, refusal, stale_temporaries, temporary_name


def to_frame(columns: dict[str, np.ndarray]) -> pd.DataFrame:
    """Tidy table: `sample`, `converged`, then measures, then the mismatch draws dvth_* [V] and dbeta_* [1]."""
    return pd.DataFrame(columns)


def write_json(path: Path, data: dict) -> None:
    """JSON with no NaN or inf: a non-finite number becomes null and its key path is listed under
    "non_finite_values", so a gap is visible rather than silent (strict JSON has no NaN)."""
    found: list[str] = []
    clean = _finite(data, "", found)
    if found and isinstance(clean, dict):
        clean["non_finite_values"] = found
    path.write_text(json.dumps(clean, indent=2, allow_nan=False, default=_json_default) + "\n", encoding="utf-8")


def _finite(value: object, where: str, found: list[str]) -> object:
    if isinstance(value, dict):
        return {k: _finite(v, f"{where}.{k}" if where else str(k), found) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite(v, f"{where}[{i}]", found) for i, v in enumerate(value)]
    if isinstance(value, (float, np.floating)) and not np.isfinite(value):
        found.append(where)
        return None
    return value


def _json_default(value: object) -> object:
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def write_samples(path: Path, table: pd.DataFrame) -> None:
    """CSV with full float precision (repr round-trips), or parquet for a .parquet path."""
    if path.suffix == ".parquet":
        table.to_parquet(path, index=False)
    else:
        table.to_csv(path, index=False, float_format="%.17g")


def read_samples(path: Path) -> pd.DataFrame:
    if Path(path).suffix == ".parquet":
        return pd.read_parquet(path)
    return pd.read_csv(path)


def write_run_folder(out_dir: Path, writer: Callable[[Path], None], force: bool = False) -> None:
    """Write a whole run folder atomically: `writer` fills a temporary sibling folder, which then replaces out_dir.

    A previous complete run in out_dir stays untouched until the new one is complete; on any error the temporary
    folder is removed and nothing is left half-written. The folder gets the run marker (:data:`outdir.MARKER`);
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
