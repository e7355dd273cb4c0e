"""Distribution summaries of one measure over the converged samples."""

from __future__ import annotations

import numpy as np

#: Quantiles reported for every measure: -3, -2, -1, 0, +1, +2, +3 sigma of a normal distribution.
QUANTILES = (0.00135, 0.02275, 0.15866, 0.5, 0.84134, 0.97725, 0.99865)


def quantile_key(q: float) -> str:
    """'0.00135' style keys, as summary.json uses them."""
    return f"{q:g}"


def describe(values: np.ndarray, nominal: float, quantiles: tuple[float, ...] = QUANTILES) -> dict:
    """nominal, mean, std (ddof = 1), min, max, quantiles and count over the finite entries of `values` [SI]."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    out: dict = {"nominal": float(nominal), "count": int(v.size)}
    if v.size == 0:
        out.update(mean=None, std=None, min=None, max=None, quantiles={quantile_key(q): None for q in quantiles})
        return out
    out["mean"] = float(v.mean())
    out["std"] = float(v.std(ddof=1)) if v.size > 1 else 0.0
    out["min"] = float(v.min())
    out["max"] = float(v.max())
    qs = np.quantile(v, quantiles)
    out["quantiles"] = {quantile_key(q): float(x) for q, x in zip(quantiles, qs, strict=True)}
    return out
