"""What the sections judge against: the target yield, the pass/fail rule, the key measures, the worst corners."""

from __future__ import annotations

import math
from collections.abc import Mapping

from mcmatch.report.format import celsius, eng, finite

#: Reference yield when a summary carries no target: +-3 sigma of a normal distribution, two-sided [1].
DEFAULT_TARGET = 0.9973


#: Measures shown with a normal-probability plot when none has a spec, at most this many.
MAX_KEY_MEASURES = 4


def target_of(summary: dict) -> dict:
    """Target yield, confidence and whether it is the summary's or the default reference."""
    t = summary.get("yield", {}).get("target")
    if isinstance(t, Mapping) and finite(t.get("yield")) is not None:
        return {**t, "given": True, "confidence": t.get("confidence", 0.95)}
    if finite(t) is not None:
        return {"yield": float(t), "confidence": 0.95, "given": True}
    return {"yield": DEFAULT_TARGET, "confidence": 0.95, "given": False}


def judge(block: Mapping, target: float, lower_bound: float | None = None) -> str:
    """pass: the interval lies at or above the target; fail: above it nowhere; marginal: the interval straddles it."""
    ci = block.get("ci95") or [None, None]
    lo = finite(lower_bound) if lower_bound is not None else finite(ci[0])
    hi = finite(ci[1])
    frac = finite(block.get("fraction"))
    if lo is not None and lo >= target:
        return "pass"
    if (hi is not None and hi < target) or (hi is None and frac is not None and frac < target):
        return "fail"
    return "marginal"


def spec_unit(summary: dict, name: str) -> str:
    return summary.get("measures", {}).get(name, {}).get("unit") or summary.get("specs", {}).get(name, {}).get(
        "unit", ""
    )


def corner_label(c: Mapping) -> str:
    parts = [str(c.get("process", "?")), celsius(c.get("temperature"))]
    if c.get("supply") is not None:
        parts.append(eng(c.get("supply"), "V"))
    return ", ".join(parts)


def worst_indices(summary: dict) -> dict[str, int]:
    """Index into summary["corners"] of the worst corner per measure (summary["corners_worst"])."""
    corners = summary.get("corners") or []
    out = {}
    for name, w in (summary.get("corners_worst") or {}).items():
        if not isinstance(w, Mapping):
            continue
        for i, c in enumerate(corners):
            same_t = finite(c.get("temperature")) is not None and abs(c["temperature"] - w.get("temperature", 0)) < 1e-6
            same_v = (c.get("supply") is None and w.get("supply") is None) or (
                c.get("supply") is not None
                and w.get("supply") is not None
                and abs(float(c["supply"]) - float(w["supply"])) < 1e-9
            )
            if c.get("process") == w.get("process") and same_t and same_v:
                out[name] = i
                break
    return out


def key_measures(summary: dict) -> list[str]:
    """Measures with a spec, in the summary's order; without specs, the first few measures."""
    measures = list((summary.get("measures") or {}).keys())
    specs = summary.get("specs") or {}
    keyed = [m for m in measures if m in specs]
    return keyed or measures[:MAX_KEY_MEASURES]


def tail_measures(summary: dict, keys: list[str]) -> list[str]:
    """The key measures whose tails are drawn, lowest spec yield first (then lowest Cpk): every measure with a spec,
    or, with no spec at all, the first MAX_KEY_MEASURES."""
    blocks = (summary.get("yield") or {}).get("specs") or {}

    def rank(name: str) -> tuple[float, float]:
        block = blocks.get(name) or {}
        fraction = finite(block.get("fraction"))
        cpk = finite(block.get("cpk"))
        return (1.0 if fraction is None else fraction, math.inf if cpk is None else cpk)

    ranked = sorted(keys, key=rank)
    specs = summary.get("specs") or {}
    spec_d = [m for m in ranked if m in specs]
    return spec_d or ranked[:MAX_KEY_MEASURES]
