"""The typed, versioned summary of a run: the pydantic model of summary.json, the check made where a summary is
finished, and loading a saved summary back.

The JSON written is the dict the pipeline builds (insertion order, as DESIGN.md section 3 fixes its names), plus
``schema_version``; :func:`finish_summary` validates that dict against :class:`Summary`, so a wrong type is an
internal error at its source rather than a broken report later. :func:`read_summary` and :func:`load_summary` read a
summary.json back (a damaged file is a ConfigError naming the file and the key). Field reference: docs/summary.md,
generated from these models by tools/summary_reference.py.
"""

from __future__ import annotations

import json
import math
import os
import re
from pathlib import Path
from typing import Any

from pydantic import Field, ValidationError

from mcmatch.errors import ConfigError, McmatchError
from mcmatch.results.summary_blocks import (
    Block,
    Conditions,
    DeviceOperatingPoint,
    MainYield,
    MeasureStats,
    NominalNodes,
    RunInfo,
    Sampling,
    SpecLimits,
    StreamStatistics,
)
from mcmatch.results.summary_design import Compliance, Sizing, Variation
from mcmatch.results.summary_studies import (
    AreaStudy,
    Bank,
    Contribution,
    CornerEntry,
    HighSigma,
    PlacementEntry,
    WorstCorner,
)

#: Version of the summary's layout. Raised by one whenever a key is added; keys are never renamed or removed, so a
#: reader of version n reads every later file. 0: a summary written before the field existed.
SCHEMA_VERSION = 2


class SummaryError(McmatchError):
    """A summary made by this run does not match its model: a bug, reported as an internal error."""


class Summary(Block):
    """summary.json: the main Monte Carlo run, then every configured study. SI units throughout."""

    schema_version: int = Field(0, description="layout version of this file; 0: written before the field existed")
    title: str = Field(description="the config's title")
    samples: int = Field(description="Monte Carlo samples of the main run")
    seed: int = Field(description="random seed")
    failed_solves: int = Field(description="main-run samples whose solve failed (they fail the yield)")
    measures: dict[str, MeasureStats] = Field(description="per measure of [measures]")
    yield_: MainYield = Field(alias="yield", description="joint yield against [specs], with per-spec yields")
    sampling: Sampling = Field(description="how the mismatch was drawn; standard errors of the estimates")
    failed_examples: list[dict[str, int | float]] = Field(
        description="the first failed samples: `sample` (index), `dvth_<device>` [V], `dbeta_<device>` [1]"
    )
    statistics: StreamStatistics = Field(description="how the statistics were streamed")
    nominal_operating_point: NominalNodes = Field(description="nominal node voltages")
    operating_point: list[DeviceOperatingPoint] = Field(description="per MOSFET at the nominal point")
    conditions: Conditions = Field(description="the main run's corner and temperature")
    circuit: dict[str, Any] = Field(description="the expanded netlist as validated (config keys, SI values)")
    technology: dict[str, Any] = Field(description="the technology as validated (config keys, SI values)")
    specs: dict[str, SpecLimits] = Field(description="per spec'd measure: limits and unit")
    run: RunInfo = Field(description="provenance")
    corners: list[CornerEntry] | None = Field(None, description="[analysis.corners]: one entry per grid point")
    corners_worst: dict[str, WorstCorner] | None = Field(None, description="the worst grid point per measure")
    area: AreaStudy | None = Field(None, description="[analysis.area]: area versus accuracy")
    contributions: dict[str, Contribution] | None = Field(None, description="linearised mismatch budget per measure")
    placements: list[PlacementEntry] | None = Field(None, description="[placement]: one entry per candidate")
    placement_best: str | None = Field(None, description="name of the best candidate")
    high_sigma: dict[str, HighSigma] | None = Field(None, description="[analysis.high_sigma]: per spec'd measure")
    bank: Bank | None = Field(None, description="[analysis.bank] or a detected bank: die yield of all channels")
    compliance: Compliance | None = Field(None, description="saturation margin of the main run")
    variation: Variation | None = Field(
        None, description='[analysis] variation "global"/"both": local and global parts'
    )
    sizing: Sizing | None = Field(None, description="[analysis.sizing]: the W and L for the target")
    non_finite_values: list[str] | None = Field(
        None, description="key paths whose value was NaN or inf, written as null (JSON has no NaN)"
    )

    def to_dict(self) -> dict[str, Any]:
        """The summary as summary.json's dict (aliases such as "yield", only the keys that were given)."""
        return self.model_dump(by_alias=True, exclude_unset=True)


def _message(exc: ValidationError) -> tuple[str, str]:
    """(key path, what was wrong) of a validation error's first problem."""
    err = exc.errors()[0]
    path = ""
    for part in err["loc"]:
        path += f"[{part}]" if isinstance(part, int) else (f".{part}" if path else str(part))
    return path, err["msg"]


def finish_summary(summary: dict[str, Any]) -> dict[str, Any]:
    """The finished summary dict: ``schema_version`` first, then the keys as built; checked against :class:`Summary`.

    Raises SummaryError (an internal error) naming the key whose value has the wrong type or is missing.
    """
    finished = {"schema_version": SCHEMA_VERSION, **{k: v for k, v in summary.items() if k != "schema_version"}}
    try:
        Summary.model_validate(finished)
    except ValidationError as exc:
        key, msg = _message(exc)
        raise SummaryError(f"summary key '{key}': {msg} ({exc.error_count()} problem(s) in all)") from exc
    return finished


_PART = re.compile(r"\[(\d+)\]|([^.\[\]]+)")


def _restore_non_finite(data: Any, paths: list[Any]) -> Any:
    """A copy of `data` with NaN put back where summary.json lists a non-finite value (written as null)."""
    data = json.loads(json.dumps(data))
    for path in paths:
        if not isinstance(path, str):
            continue
        parts = [int(i) if i else key for i, key in _PART.findall(path)]
        node = data
        try:
            for part in parts[:-1]:
                node = node[part]
            if parts and node[parts[-1]] is None:
                node[parts[-1]] = math.nan
        except (KeyError, IndexError, TypeError):
            continue
    return data


def validate_summary(data: Any, file: str = "summary.json") -> Summary:
    """A summary.json document (as parsed) as a :class:`Summary`; ConfigError naming the file and the key if not."""
    if not isinstance(data, dict):
        raise ConfigError("expected a JSON object: the summary of a run", file=file)
    try:
        return Summary.model_validate(_restore_non_finite(data, data.get("non_finite_values") or []))
    except ValidationError as exc:
        key, msg = _message(exc)
        raise ConfigError(f"not a run summary this version can read: {msg}", file=file, key=key or None) from None


def _read_json(path: Path) -> Any:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError("no summary.json: expected a run folder written by 'mcmatch run'", file=str(path)) from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ConfigError(f"expected the JSON summary of a run ({exc})", file=str(path)) from None
    return data


def read_summary(path: str | os.PathLike) -> dict[str, Any]:
    """summary.json as written (a plain dict, nulls as written), after checking it against :class:`Summary`."""
    data = _read_json(Path(path))
    validate_summary(data, str(path))
    return data


def load_summary(path: str | os.PathLike) -> Summary:
    """summary.json as a :class:`Summary` (NaN where the file lists a non-finite value)."""
    return validate_summary(_read_json(Path(path)), str(path))
