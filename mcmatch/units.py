"""Quantities at the edge: strings ("4 um", "5 mV*um", "1 %*um", "27 degC") to SI floats, and SI floats back to
strings with an engineering prefix (:func:`format_quantity`).

This is the only module that uses pint. Nothing it returns is a pint object: callers get plain floats in the SI
unit they asked for, so nothing unit-aware ever crosses a process boundary.
"""

from __future__ import annotations

import math
import re
from functools import lru_cache

from mcmatch.errors import QUOTE_LIMIT, quote

_NUMBER = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")

#: Human-readable examples per SI unit, used in error messages.
EXAMPLES = {
    "m": "'4 um'",
    "A": "'10 uA'",
    "V": "'1.8 V'",
    "K": "'27 degC' or '300 K'",
    "ohm": "'10 kohm'",
    "1": "'1 %' or 0.01",
    "A/V^2": "'300 uA/V^2'",
    "1/V": "'0.05 1/V'",
    "m/V": "'0.08 um/V'",
    "V^0.5": "'0.4 V^0.5'",
    "V*m": "'5 mV*um'",
    "V/K": "'-1 mV/K'",
    "V/m": "'0.02 mV/um'",
    "1/m": "'0.001 %/um'",
    "S": "'1 uS'",
}


class UnitError(ValueError):
    """A value that is not a quantity of the expected dimension; the message says what was expected."""


@lru_cache(maxsize=1)
def _registry():
    import pint

    registry = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
    return registry


@lru_cache(maxsize=512)
def _unit_factor(unit_text: str, target: str) -> tuple[float, float]:
    """Return (scale, offset) with value_in_target = scale * number + offset for `unit_text`; raise UnitError.

    The spellings of the bundled configs come from a table pint generated (mcmatch/unit_table.py), so loading them
    never imports pint; anything else asks pint."""
    from mcmatch.unit_table import FACTORS

    known = FACTORS.get((unit_text.strip(), target))
    if known is not None:
        return known
    return _pint_factor(unit_text, target)


def _pint_factor(unit_text: str, target: str) -> tuple[float, float]:
    """:func:`_unit_factor` by pint."""
    registry = _registry()
    text = unit_text.replace("%", " percent ").replace("Ω", "ohm").replace("µ", "u").strip()
    if text in ("", "1"):
        text = "dimensionless"
    target_text = "dimensionless" if target == "1" else target
    try:
        unit = registry.parse_units(text) if text != "dimensionless" else registry.dimensionless
        target_unit = registry.parse_units(target_text) if target_text != "dimensionless" else registry.dimensionless
        q0 = registry.Quantity(0.0, unit).to(target_unit).magnitude
        q1 = registry.Quantity(1.0, unit).to(target_unit).magnitude
    except Exception as exc:  # pint raises many kinds on odd input; all mean the same to a user
        raise UnitError(f"unit {quote(unit_text)} is not a unit of {target_text}: {type(exc).__name__}") from None
    return float(q1 - q0), float(q0)


def parse_quantity(value: object, unit: str) -> float:
    """Parse `value` (a string with a unit, or a plain number meaning SI) into a finite float in `unit`.

    `unit` is the SI unit wanted, for example "m", "A/V^2", "K" or "1" for dimensionless.
    Raises UnitError with an example of what is expected.
    """
    example = EXAMPLES.get(unit, f"a quantity in {unit}")
    expected = f"expected a quantity in {unit} such as {example}"
    if isinstance(value, bool):
        raise UnitError(f"{expected}, got {quote(value)}")
    if isinstance(value, (int, float)):
        try:
            number = float(value)
        except OverflowError:  # an integer beyond any float
            raise UnitError(f"{expected}, got an integer of {value.bit_length()} bits, beyond any float") from None
        if not math.isfinite(number):
            raise UnitError(f"{expected}, got the non-finite number {quote(value)}")
        return number
    if not isinstance(value, str):
        raise UnitError(f"{expected}, got {type(value).__name__} {quote(value)}")
    if len(value) > QUOTE_LIMIT:  # no quantity is this long; pint's parser is not for megabytes
        raise UnitError(f"{expected}, got a string of {len(value)} characters")
    match = _NUMBER.match(value)
    if not match:
        raise UnitError(f"{expected}, got {quote(value)}")
    number_text, unit_text = match.groups()
    if unit_text == "":  # a bare number in a string means SI, as a plain number does
        return parse_quantity(float(number_text), unit)
    try:
        scale, offset = _unit_factor(unit_text, unit)
    except UnitError as exc:
        raise UnitError(f"{expected}, got {quote(value)} ({exc})") from None
    result = scale * float(number_text) + offset
    if not math.isfinite(result):
        raise UnitError(f"{expected}, got {quote(value)}, which is not finite in SI")
    return result


#: Engineering prefixes, largest first: (scale, ASCII prefix as the parser reads it, display prefix).
PREFIXES = (
    (1e9, "G", "G"),
    (1e6, "M", "M"),
    (1e3, "k", "k"),
    (1.0, "", ""),
    (1e-3, "m", "m"),
    (1e-6, "u", "\u00b5"),
    (1e-9, "n", "n"),
    (1e-12, "p", "p"),
    (1e-15, "f", "f"),
)
#: Display forms of units (``symbols=True``).
UNIT_SYMBOLS = {"ohm": "\u03a9", "A/V^2": "A/V\u00b2", "V^0.5": "V^\u00bd"}


def format_quantity(value: float, unit: str, digits: int = 6, *, symbols: bool = False) -> str:
    """An SI `value` in `unit` as a quantity string with an engineering prefix and `digits` significant digits.

    4e-06, "m" -> "4 um"; 0.9, "V" -> "0.9 V" (voltages from 0.1 V to 1 kV stay in volts); 0.0125, "1" -> "1.25 %".
    The ASCII form parses back with :func:`parse_quantity` to `digits` significant digits; ``symbols=True`` gives the
    display form ("4 \u00b5m", "22 k\u03a9") for reports. Zero and non-finite values carry no prefix ("0 A", "nan A").
    """
    symbol = UNIT_SYMBOLS.get(unit, unit) if symbols else unit
    if unit == "1":
        return f"{float(f'{value * 100:.{digits}g}'):.{digits}g} %"
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {symbol}"
    magnitude = abs(value)
    if unit == "V" and 0.1 <= magnitude < 1000:  # node voltages read best in volts
        return f"{float(f'{value:.{digits}g}'):.{digits}g} {symbol}"
    index = next((i for i, (s, _, _) in enumerate(PREFIXES) if magnitude >= s * 0.9999999), len(PREFIXES) - 1)
    number = float(f"{value / PREFIXES[index][0]:.{digits}g}")
    if abs(number) >= 1000 and index > 0:  # rounding carried into the next prefix: 999.9996 u -> 1 m
        index -= 1
        number = float(f"{value / PREFIXES[index][0]:.{digits}g}")
    scale, ascii_prefix, display_prefix = PREFIXES[index]
    return f"{number:.{digits}g} {display_prefix if symbols else ascii_prefix}{symbol}"
