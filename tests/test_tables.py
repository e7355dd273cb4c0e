"""The samples table writer: mcmatch writes samples.csv from numpy columns, byte for byte what pandas' CSV writer
gives with the same float format (pandas' DataFrame.to_csv as the reference), and it reads back exactly."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from mcmatch.results.tables import FLOAT_FORMAT, read_samples, write_samples


def columns(n: int = 257) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(5)
    i_out = rng.normal(4e-5, 1e-7, n)
    i_out[[3, 7]] = np.nan  # failed solves leave NaN measures
    i_out[11] = np.inf
    i_out[12] = -0.0
    return {
        "sample": np.arange(n, dtype=np.int64),
        "converged": rng.random(n) > 0.01,
        "iterations": rng.integers(1, 9, n).astype(np.int32),
        "i_out": i_out,
        "gain_error": rng.normal(0.0, 3e-3, n) * 10.0 ** rng.integers(-30, 30, n),
        "dvth_MREF": rng.normal(0.0, 1e-3, n).astype(np.float32).astype(float),
    }


@pytest.mark.parametrize("n", [0, 1, 257])
def test_csv_is_what_pandas_writes(tmp_path, n):
    data = {k: v[:n] for k, v in columns().items()}
    ours, theirs = tmp_path / "ours.csv", tmp_path / "theirs.csv"
    write_samples(ours, data)
    pd.DataFrame(data).to_csv(theirs, index=False, float_format=FLOAT_FORMAT, lineterminator="\n")
    assert ours.read_bytes() == theirs.read_bytes()


def test_csv_round_trips_every_double(tmp_path):
    # 17 significant digits identify every IEEE 754 double (common practice, no source)
    data = columns()
    path = tmp_path / "s.csv"
    write_samples(path, data)
    back = read_samples(path)
    for name, values in data.items():
        np.testing.assert_array_equal(back[name].to_numpy(), values)


def test_a_pandas_table_is_written_the_same(tmp_path):
    data = columns()
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    write_samples(a, data)
    write_samples(b, pd.DataFrame(data))
    assert a.read_bytes() == b.read_bytes()
