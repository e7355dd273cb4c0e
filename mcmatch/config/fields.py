"""The building blocks of the config's pydantic models: quantity fields parsed into SI units, finite numbers,
names, and the frozen, extra-forbidding base model."""

from __future__ import annotations

import math
from functools import partial
from typing import Annotated

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field

from mcmatch.errors import quote
from mcmatch.units import UnitError, parse_quantity


def _quantity(value: object, unit: str) -> float:
    try:
        return parse_quantity(value, unit)
    except UnitError as exc:
        raise ValueError(str(exc)) from None


def Q(unit: str):  # noqa: N802 - reads like a type annotation
    """Annotated float parsed from a quantity string in `unit` [SI]."""
    return Annotated[float, BeforeValidator(partial(_quantity, unit=unit))]


def _finite_number(value: object) -> object:
    if isinstance(value, bool):
        raise ValueError(f"expected a number, got {quote(value)}")
    if isinstance(value, float) and not math.isfinite(value):
        raise ValueError(f"expected a finite number, got {quote(value)}")
    return value


Number = Annotated[float, BeforeValidator(_finite_number)]
Name = Annotated[str, Field(min_length=1, max_length=200)]


class Frozen(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, strict=False)
