"""Saturation compliance of a condition: which device has the least headroom Vds - Vdsat, which devices are out of
saturation at the nominal point, and what fraction of the Monte Carlo samples has any device below zero headroom.

Tables in, dicts out (SI units). The nominal headroom comes from the operating-point dicts of
:func:`mcmatch.model.operating_point.device_operating_points`; the per-sample smallest headroom is the engine's
``min_headroom`` column (:mod:`mcmatch.model.headroom`), or its streamed count.
"""

from __future__ import annotations

import numpy as np

from mcmatch.model.headroom import HEADROOM_COLUMN


def out_of_saturation_count(columns: dict[str, np.ndarray]) -> int:
    """Samples with any device below zero headroom (failed solves, NaN, are not counted here: they are failures)."""
    values = columns.get(HEADROOM_COLUMN)
    return 0 if values is None else int(np.count_nonzero(np.asarray(values) < 0.0))


def compliance_block(points: list[dict], out_of_saturation: int | None = None, samples: int | None = None) -> dict:
    """``{"min_headroom", "limiting_device", "devices_out_of_saturation", "samples_out_of_saturation"}``.

    points: the nominal operating points of the condition's devices; out_of_saturation, samples: the Monte Carlo
    count of samples with any device below zero headroom and the number of samples (the fraction is None without).
    """
    if points:
        limiting = min(points, key=lambda p: p["headroom"])
        min_headroom, device = float(limiting["headroom"]), limiting["name"]
    else:
        min_headroom, device = None, None
    fraction = None
    if out_of_saturation is not None and samples:
        fraction = out_of_saturation / samples
    return {
        "min_headroom": min_headroom,
        "limiting_device": device,
        "devices_out_of_saturation": [p["name"] for p in points if p["headroom"] < 0.0],
        "samples_out_of_saturation": fraction,
    }


def compliance_of_columns(points: list[dict], columns: dict[str, np.ndarray]) -> dict:
    """:func:`compliance_block` with the fraction from a condition's sample table."""
    return compliance_block(points, out_of_saturation_count(columns), len(columns["converged"]))
