"""Sizing arithmetic: the linearised joint yield, the area a design needs for a target, the Pareto front.

Pure functions on arrays; the solves happen in :mod:`mcmatch.studies.sizing`.

At a fixed operating point every Pelgrom sigma of a device falls as 1/sqrt(W L) (Pelgrom, Duinmaijer, Welbers,
IEEE JSSC 1989), so the linearised deviation of every measure from the sized devices scales by t = sqrt(A_e / A)
when their unit area goes from A_e to A. For each draw of the linear model the largest t at which all specs still
pass is closed-form (:func:`largest_passing_scale`); the joint yield at scale t is the fraction of draws whose
largest scale is at least t, and the area that meets a yield target follows from one quantile of it
(:func:`required_area`). This is Kinget's area rule (IEEE JSSC 2005) applied to the joint yield of all specs, the
correlation through shared devices included because every draw moves every measure at once.
"""

from __future__ import annotations

import numpy as np


def largest_passing_scale(
    nominal: np.ndarray, scaled: np.ndarray, fixed: np.ndarray | None, low: np.ndarray, high: np.ndarray
) -> np.ndarray:
    """Per draw, the largest t >= 0 with low <= nominal + t*scaled + fixed <= high for every measure.

    nominal, low, high: (n_measures,) [SI] (limits +-inf where absent); scaled, fixed: (n_draws, n_measures), the
    linear deviations from the devices being sized and from the others (None: none). 0 where a spec fails even at
    t = 0; inf where no spec limits t.
    """
    base = np.broadcast_to(nominal, scaled.shape) if fixed is None else nominal[None, :] + fixed
    # the limit the deviation heads for: high where it grows, low where it shrinks (either is +-inf when absent)
    room = np.where(scaled > 0, high[None, :] - base, low[None, :] - base)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = room / scaled  # >= 0 inside the spec; nan or inf where scaled is 0 (that spec never limits t)
    t[~(t >= 0)] = np.inf  # a spec that never binds; outside-at-t=0 is caught below
    t = t.min(axis=1)
    inside = ((base >= low[None, :]) & (base <= high[None, :])).all(axis=1)
    t[~inside] = 0.0
    return t


def linear_yield(t_max: np.ndarray, scale: float = 1.0) -> float:
    """Fraction of draws that pass all specs at deviation scale `scale` [1]."""
    return float(np.mean(t_max >= scale))


def required_area(t_max: np.ndarray, area: float, target: float) -> float:
    """Unit area [m^2] at which the linear joint yield reaches `target`, from draws evaluated at unit area `area`.

    inf when the target cannot be met at any area (too many draws fail at t = 0, a systematic error).
    """
    failing = 1.0 - target
    t_star = float(np.quantile(t_max, failing, method="lower"))
    if not t_star > 0:
        return float("inf")
    return area / t_star**2


def sigma_margin(nominal: np.ndarray, std: np.ndarray, low: np.ndarray, high: np.ndarray) -> float:
    """Worst spec margin in sigma units: min over measures and limits of (limit - nominal)/std, signed inward [1]."""
    with np.errstate(divide="ignore", invalid="ignore"):
        up = np.where(np.isfinite(high), (high - nominal) / std, np.inf)
        down = np.where(np.isfinite(low), (nominal - low) / std, np.inf)
    value = float(np.minimum(up, down).min())
    return value


def pareto_front(area: np.ndarray, margin: np.ndarray, headroom: np.ndarray) -> list[int]:
    """Indices of the designs no other design beats: smaller or equal area, larger or equal margin and headroom,
    one of them strictly. Sorted by area."""
    n = len(area)
    keep = []
    for i in range(n):
        dominated = False
        for j in range(n):
            if j == i:
                continue
            no_worse = area[j] <= area[i] and margin[j] >= margin[i] and headroom[j] >= headroom[i]
            better = area[j] < area[i] or margin[j] > margin[i] or headroom[j] > headroom[i]
            if no_worse and better:
                dominated = True
                break
        if not dominated:
            keep.append(i)
    return sorted(keep, key=lambda k: area[k])


def aspect_grid(w_range: tuple[float, float], l_range: tuple[float, float], points: int) -> np.ndarray:
    """W/L ratios [1], log-spaced over what the W and L ranges allow."""
    low = w_range[0] / l_range[1]
    high = w_range[1] / l_range[0]
    return np.geomspace(low, high, points)


def area_range(aspect: float, w_range: tuple[float, float], l_range: tuple[float, float]) -> tuple[float, float]:
    """Unit areas W L [m^2] reachable at W/L = aspect inside the W and L ranges (empty when low > high)."""
    low = max(w_range[0] ** 2 / aspect, l_range[0] ** 2 * aspect)
    high = min(w_range[1] ** 2 / aspect, l_range[1] ** 2 * aspect)
    return low, high


def width_length(aspect: float, area: float) -> tuple[float, float]:
    """W and L [m] of unit area `area` [m^2] at ratio `aspect`."""
    return float(np.sqrt(area * aspect)), float(np.sqrt(area / aspect))
