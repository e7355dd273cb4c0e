"""Spec margins in sigma units, their sampling error, and a plain-words label for a group of corners.

The margin of a measure against its spec at one condition is min over the given limits of (max - mean) / std and
(mean - min) / std [sigma]: how many standard deviations of the Monte Carlo spread lie between the mean and the
nearer limit (negative when the mean is outside). Its standard error from N samples, to first order with the mean's
error std/sqrt(N) and the std's relative error 1/sqrt(2(N-1)) (normal samples), is sqrt(1/N + z^2 / (2(N-1))).
"""

from __future__ import annotations

import math

from mcmatch.config.schema import Limits

#: Corners whose margins differ by less than this many combined standard errors are reported together.
TIE_SIGMAS = 2.0


def spec_margin(mean: float | None, std: float | None, limits: Limits) -> tuple[float | None, str | None]:
    """(margin [sigma], "min" or "max": the limit it is measured to); (None, None) without statistics.

    A zero std gives +-inf (the mean on the passing or failing side of the limit).
    """
    if mean is None or std is None or not math.isfinite(mean) or not math.isfinite(std):
        return None, None
    candidates = []
    for name, distance in (
        ("max", None if limits.max is None else limits.max - mean),
        ("min", None if limits.min is None else mean - limits.min),
    ):
        if distance is None:
            continue
        if std > 0:
            candidates.append((distance / std, name))
        else:
            candidates.append((math.inf if distance >= 0 else -math.inf, name))
    if not candidates:
        return None, None
    return min(candidates)


def margin_error(margin: float, samples: int) -> float:
    """Standard error [sigma] of a margin estimated from `samples` samples (inf below two samples)."""
    if samples < 2 or not math.isfinite(margin):
        return math.inf if samples < 2 else 0.0
    return math.sqrt(1.0 / samples + margin * margin / (2.0 * (samples - 1)))


def within_error(margin: float, error: float, best: float, best_error: float) -> bool:
    """Whether `margin` (with its error) cannot be told apart from the smallest margin `best`."""
    if math.isinf(best) or math.isinf(margin):
        return margin == best
    return margin - best <= TIE_SIGMAS * math.sqrt(error * error + best_error * best_error)


def temperature_label(kelvin: float) -> str:
    return f"{kelvin - 273.15:.6g} degC"


def supply_label(volts: float | None) -> str:
    return "nominal supply" if volts is None else f"{volts:.6g} V"


AXES = (("process", str), ("temperature", temperature_label), ("supply", supply_label))


def group_label(points: list[dict], grid: list[dict]) -> str:
    """Plain words for corner `points` ({process, temperature, supply} each) within `grid` (every corner): a
    product of axis values reads "ss, -40 degC, any supply"; any other set lists its corners, "; "-separated."""
    keys = [tuple(p[axis] for axis, _ in AXES) for p in points]
    values = [sorted({k[i] for k in keys}, key=_order) for i in range(len(AXES))]
    product = math.prod(len(v) for v in values)
    if product != len(set(keys)):
        return "; ".join(", ".join(fmt(v) for (_, fmt), v in zip(AXES, k, strict=True)) for k in keys)
    parts = []
    for i, (axis, fmt) in enumerate(AXES):
        everything = {g[axis] for g in grid}
        if len(everything) > 1 and set(values[i]) == everything:
            parts.append(f"any {axis}")
        else:
            parts.append("/".join(fmt(v) for v in values[i]))
    return ", ".join(parts)


def _order(value: object) -> tuple:
    return (value is None, str(value) if isinstance(value, str) else 0, value if isinstance(value, float) else 0.0)
