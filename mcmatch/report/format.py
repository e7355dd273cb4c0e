"""Display formatting: SI values to engineering units, percent, yields, intervals, temperatures. Values stay SI
until here; nothing else in the report converts units."""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping
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
    """A yield in percent with two digits of the failure fraction (0.99873 -> "99.873 %") or, below 10 %, of the
    yield itself (0.0001 -> "0.010 %"); never "100.0 %" below one, never "0.0 %" above zero."""
    v = finite(fraction)
    if v is None:
        return "\u2013"
    if v == 0:
        return "0 %"
    if v < 1e-6:  # never print 0.0 % for a yield above zero
        return "< 0.0001 %"
    if v < 0.1:  # two digits of a small yield: 0.0001 -> "0.010 %"
        return f"{v * 100:.{max(1, 1 - math.floor(math.log10(v * 100)))}f} %"
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


def condition_text(label: object) -> str:
    """A condition label of the summary ("ss/-40 degC/1.8 V") as the report writes it ("ss/-40 °C/1.8 V")."""
    return str(label).replace(" degC", " \u00b0C")


def celsius(kelvin: object) -> str:
    v = finite(kelvin)
    return "\u2013" if v is None else f"{v - 273.15:.4g} \u00b0C"


def sigma_equivalent(fraction: object) -> str:
    """Two-sided normal-equivalent of a yield: 0.9973 -> "±3.00 sigma two-sided" (high-sigma levels are one-sided)."""
    v = finite(fraction)
    if v is None or v <= 0:
        return "\u2013"
    if v >= 1:
        return "no failing sample"
    z = NormalDist().inv_cdf(0.5 + v / 2)
    return f"\u00b1{z:.2f} sigma two-sided" if z >= 0.1 else f"\u00b1{z:.2g} sigma two-sided"  # never ±0.00


def limits_text(limits: Mapping | None, unit: str, shown: Callable[[object], str] | None = None) -> str:
    """A spec's limits [SI `unit`]: "-2 % … 6 %", "≥ 38 µA"; `shown` formats each value (default :func:`eng`)."""
    if not limits:
        return "\u2013"
    show = shown or (lambda v: eng(v, unit))
    lo, hi = limits.get("min"), limits.get("max")
    if lo is not None and hi is not None:
        return f"{show(lo)} \u2026 {show(hi)}"
    if lo is not None:
        return f"\u2265 {show(lo)}"
    if hi is not None:
        return f"\u2264 {show(hi)}"
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


def significant(x: float, digits: int = 4) -> str:
    """`x` to `digits` significant digits in fixed-point notation, never an exponent: 0.0005166 -> "0.0005166"."""
    if x == 0 or not math.isfinite(x):
        return "0" if x == 0 else "\u2013"
    decimals = max(0, min(15, digits - 1 - math.floor(math.log10(abs(x)))))
    text = f"{x:.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if float(text) == 0 else text


class DisplayUnit:
    """One display unit for a group of values of one measure (a table row or column): every value in it is shown
    with the same prefix, so -3.1e-6 and 5.2e-5 of a fraction read "-0.0003125 %" and "0.005166 %", never ppm beside
    percent. Built from the SI values it must show; unit "1" always shows percent."""

    def __init__(self, values: Iterable[object], unit: str) -> None:
        self.factor, self.label = display_scale(values, unit)

    def __call__(self, value: object, digits: int = 4, with_unit: bool = True) -> str:
        v = finite(value)
        if v is None:
            return "\u2013"
        text = significant(v * self.factor, digits)
        return f"{text} {self.label}".strip() if with_unit else text

    def header(self, text: str) -> str:
        """A column heading with the unit: "i_out mean [µA]"."""
        return f"{text} [{self.label}]" if self.label else text


def zero_failure_text(total: object, ci95: object) -> str | None:
    """With no failed sample: "0 of 20,000 failed; failure rate below 0.0184 % (95 %, two-sided Clopper-Pearson)".

    The bound is 1 - the lower end of the summary's two-sided 95 % Clopper-Pearson interval (computed at run time by
    mcmatch.stats.yields); for zero failures that is 1 - 0.025^(1/N). None when the numbers are missing.
    """
    n, lo = finite(total), finite(ci95[0]) if isinstance(ci95, (list, tuple)) and ci95 else None
    if not n or lo is None:
        return None
    return f"0 of {int(n):,} failed; failure rate below {percent(1.0 - lo, 3)} (95 %, two-sided Clopper-Pearson)"


def yield_cells(block: object) -> tuple[str, str]:
    """(yield, 95 % interval) texts of a yield block; with no failed sample ("0 of 2,000 failed", "failure rate below
    0.184 % (95 %, two-sided)") instead of a yield of "100.0 %"."""
    if not isinstance(block, Mapping):
        return yield_text(block), "\u2013"
    total, passed = block.get("total"), block.get("passed")
    zero = zero_failure_text(total, block.get("ci95")) if total and passed == total else None
    if zero:
        head, tail = zero.split("; ", 1)
        return head, tail.replace(" Clopper-Pearson", "")
    return yield_text(block.get("fraction")), interval_text(block.get("ci95"))
