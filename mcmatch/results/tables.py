"""The result table (one row per sample, SI columns) and the writers of its files (JSON, CSV, Parquet).

These write into a run folder that :func:`mcmatch.results.atomic.write_run_folder` makes atomic as a whole."""

from __future__ import annotations

import csv
import json
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

#: The kept sample rows as columns of equal length: `sample`, `converged`, measures, draws dvth_* [V], dbeta_* [1].
Columns = dict[str, np.ndarray]
#: Float text of the samples table: 17 significant digits round-trip every double.
FLOAT_FORMAT = "%.17g"


def to_frame(columns: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """Tidy pandas table of the columns (pandas is imported here only: a run writes its CSV without it)."""
    import pandas as pd

    return pd.DataFrame(dict(columns))


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


def write_samples(path: Path, table: Mapping[str, np.ndarray] | pd.DataFrame) -> None:
    """CSV with full float precision (repr round-trips), or parquet for a .parquet path; from columns or a table."""
    if path.suffix == ".parquet":
        frame = table if hasattr(table, "to_parquet") else to_frame(table)
        frame.to_parquet(path, index=False)
        return
    columns = {str(k): np.asarray(table[k]) for k in table}  # a DataFrame iterates over its column names too
    texts = [_column_text(v) for v in columns.values()]
    if any(t is None for t in texts):  # a text column: pandas' own quoting
        to_frame(columns).to_csv(path, index=False, float_format=FLOAT_FORMAT)
        return
    with open(path, "w", encoding="utf-8", newline="") as f:
        out = csv.writer(f, lineterminator="\n")
        out.writerow(columns)
        out.writerows(zip(*texts, strict=True))


def _column_text(values: np.ndarray) -> list[str] | None:
    """One column as the texts pandas' CSV writer gives with FLOAT_FORMAT (NaN empty), or None for text columns."""
    kind = values.dtype.kind
    if kind == "b":
        return ["True" if v else "False" for v in values.tolist()]
    if kind in "iu":
        return [str(v) for v in values.tolist()]
    if kind == "f":
        return ["" if v != v else FLOAT_FORMAT % v for v in values.tolist()]
    return None


def read_samples(path: Path) -> pd.DataFrame:
    import pandas as pd

    if Path(path).suffix == ".parquet":
        return pd.read_parquet(path)
    return pd.read_csv(path)
