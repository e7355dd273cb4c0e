"""The result table (one row per sample, SI columns) and the writers of its files (JSON, CSV, Parquet).

These write into a run folder that :func:`mcmatch.results.atomic.write_run_folder` makes atomic as a whole."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd


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
