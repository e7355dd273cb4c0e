"""Display formatting: SI values to engineering units, percent, yields, intervals, temperatures. Values stay SI
until here; nothing else in the report converts units."""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from statistics import NormalDist

SI_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "\u00b5", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}


UNIT_SYMBOLS = {"ohm": "\u03a9", "A/V^2": "A/V\u00b2", "V^0.5": "V^\u00bd"}


def finite(value: object) -> float | None:
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def eng(value: object, unit: str = "", digits: int = 4) -> str:
    """A value [SI `unit`] in engineering notation: 4.042e-05, "A" -> "40.42 µA"; unit "1" -> percent."""
    v = finite(value)
    if v is None:
        return "\u2013"
    if unit == "1":
        return percent(v, digits)
    symbol = UNIT_SYMBOLS.get(unit, unit)
    if v == 0:
        return f"0 {symbol}".strip()
    exp = max(-15, min(9, 3 * math.floor(math.log10(abs(v)) / 3)))
    text = f"{v / 10**exp:.{digits}g}"
    if abs(float(text)) >= 1000 and exp < 9:  # rounding carried into the next prefix
        exp += 3
        text = f"{v / 10**exp:.{digits}g}"
    return f"{text} {SI_PREFIXES[exp]}{symbol}".strip()


def percent(fraction: object, digits: int = 4) -> str:
    """A dimensionless fraction as percent (ppm below 10 ppm): 0.0105 -> "1.052 %"."""
    v = finite(fraction)
    if v is None:
        return "\u2013"
    if v != 0 and abs(v) < 1e-5:
        return f"{v * 1e6:.{digits}g} ppm"
    return f"{v * 100:.{digits}g} %"


def fixed(value: object, factor: float, unit: str, digits: int = 4) -> str:
    """value * factor in a fixed display unit: fixed(4.5e-9, 1e9, "mV·µm") -> "4.5 mV·µm"."""
    v = finite(value)
    return "\u2013" if v is None else f"{v * factor:.{digits}g} {unit}".strip()


def plain(value: object, digits: int = 4) -> str:
    """A plain number to `digits` significant digits, without an exponent below a billion: 4670.2 -> "4,670"."""
    v = finite(value)
    if v is None:
        return "\u2013"
    if 10**digits <= abs(v) < 1e9:
        return f"{v:,.0f}"
    return f"{v:.{digits}g}"


def yield_text(fraction: object) -> str:
    """A yield in percent with enough decimals to show two digits of the failure fraction: 0.99873 -> "99.873 %"."""
    v = finite(fraction)
    if v is None:
        return "\u2013"
    fail = (1.0 - v) * 100
    decimals = 1 if fail <= 0 else max(1, min(6, 1 - math.floor(math.log10(fail))))
    text = f"{v * 100:.{decimals}f}"
    if v < 1 and float(text) >= 100:  # never print 100 % for a yield below one
        text = f"{math.floor(v * 100 * 10**decimals) / 10**decimals:.{decimals}f}"
    return f"{text} %"


def interval_text(ci: object) -> str:
    if not isinstance(ci, (list, tuple)) or len(ci) != 2:
        return "\u2013"
    return f"{yield_text(ci[0])} \u2026 {yield_text(ci[1])}"


def celsius(kelvin: object) -> str:
    v = finite(kelvin)
    return "\u2013" if v is None else f"{v - 273.15:.4g} \u00b0C"


def sigma_equivalent(fraction: object) -> str:
    """Two-sided normal-equivalent of a yield: 0.9973 -> "±3.00 sigma"."""
    v = finite(fraction)
    if v is None or v <= 0:
        return "\u2013"
    if v >= 1:
        return "no failing sample"
    return f"\u00b1{NormalDist().inv_cdf(0.5 + v / 2):.2f} sigma"


def limits_text(limits: Mapping | None, unit: str) -> str:
    if not limits:
        return "\u2013"
    lo, hi = limits.get("min"), limits.get("max")
    if lo is not None and hi is not None:
        return f"{eng(lo, unit)} \u2026 {eng(hi, unit)}"
    if lo is not None:
        return f"\u2265 {eng(lo, unit)}"
    if hi is not None:
        return f"\u2264 {eng(hi, unit)}"
    return "\u2013"


def display_scale(values: Iterable[object], unit: str) -> tuple[float, str]:
    """(factor, label) that puts SI `values` of `unit` into one engineering unit for an axis: ("A", 4e-5) -> 1e6 µA."""
    if unit == "1":
        return 100.0, "%"
    magnitudes = [abs(v) for v in (finite(x) for x in values) if v]
    symbol = UNIT_SYMBOLS.get(unit, unit)
    if not magnitudes:
        return 1.0, symbol
    exp = max(-15, min(9, 3 * math.floor(math.log10(max(magnitudes)) / 3)))
    return 10.0**-exp, f"{SI_PREFIXES[exp]}{symbol}"
