"""Command-line values checked before any work: ranges taken from the config schema, worker counts, optional extras.

Not a subcommand: helpers shared by the command modules. Every failure is a ConfigError naming "command line", the
option and the accepted range (exit 2).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from mcmatch.errors import ConfigError

if TYPE_CHECKING:  # pydantic only for the annotation: building the parser must stay light
    from pydantic import BaseModel

_FILE = "command line"


def schema_bounds(model: type[BaseModel], name: str) -> tuple[int | None, int | None]:
    """(lowest, highest) accepted integer of field `name` of a config model (None: unbounded), from its ge/le."""
    low = high = None
    for item in model.model_fields[name].metadata:
        low = getattr(item, "ge", low)
        high = getattr(item, "le", high)
    return low, high


def check_integer(option: str, value: int | None, low: int | None, high: int | None, note: str = "") -> None:
    """ConfigError unless value is None or low <= value <= high."""
    if value is None or ((low is None or value >= low) and (high is None or value <= high)):
        return
    if low is not None and high is not None:
        expected = f"an integer from {low} to {high}"
    elif low is not None:
        expected = f"an integer >= {low}"
    else:
        expected = f"an integer <= {high}"
    raise ConfigError(f"expected {expected}{note}, got {value}", file=_FILE, key=option)


def check_overrides(model: type[BaseModel], **values: Any) -> None:
    """Check command-line overrides of `model`'s fields (``keep_samples=`` is option ``--keep-samples``) against the
    same bounds the config file obeys."""
    for name, value in values.items():
        check_integer("--" + name.replace("_", "-"), value, *schema_bounds(model, name))


def check_jobs(jobs: int | None, cluster: bool = False) -> None:
    """--jobs: 0 (automatic), 1..C or -1..-C (C usable cores; -1 all, -2 all but one) on this machine; with a
    cluster, 0 (one per worker thread) or a positive count. Locally, also the pool that MCMATCH_POOL selects."""
    if cluster:
        check_integer("--jobs", jobs, 0, None, " (0: one per worker thread of the cluster)")
        return
    from mcmatch.run.chunks import usable_cores
    from mcmatch.run.pool import pool_kind

    pool_kind()  # MCMATCH_POOL names a pool this machine has, or exit 2 before any work
    cores = usable_cores()
    note = f" (this machine runs {cores} at once; 0: automatic, -1: all cores, -2: all but one)"
    check_integer("--jobs", jobs, -cores, cores, note)


def check_format(fmt: str) -> None:
    """--format parquet needs pyarrow (the extra mcmatch[parquet]); say so before the run, not after it."""
    if fmt != "parquet":
        return
    try:
        importlib.import_module("pyarrow")
    except ImportError:
        raise ConfigError(
            "--format parquet needs pyarrow, which is not installed; install the extra mcmatch[parquet] (pip "
            "install -e '.[parquet]' in the mcmatch checkout) or use --format csv",
            file=_FILE,
            key="--format",
        ) from None
