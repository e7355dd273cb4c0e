"""Area versus accuracy: scaled netlists, the Pelgrom fit sigma(A) = sqrt(k^2/A + floor^2), minimum area, halving cost.

Pelgrom, Duinmaijer, Welbers, IEEE JSSC 1989: a mismatch-limited sigma falls as 1/sqrt(area). Kinget, IEEE JSSC 2005:
the area a mirror needs for a ratio sigma is WL = (A_beta^2 + (gm/I)^2 A_VT^2) / sigma^2.
Tables in, dicts out (SI units); the solves happen in :mod:`mcmatch.studies.analyses`.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from mcmatch.config.schema import Limits, Mosfet, Netlist
from mcmatch.stats.distributions import chi2_ppf
from mcmatch.stats.yields import normal_yield

#: Delta chi-square (1 degree of freedom) a floor term must gain over the pure Pelgrom fit to be kept: the 99 % point.
FLOOR_CHI2 = chi2_ppf(0.99, 1)
#: A measure whose fitted log-log slope of sigma against area is above this is flagged as not falling with area.
FALLING_SLOPE = -0.1
#: The minimum-area search spans the swept areas divided and multiplied by this factor.
SEARCH_SPAN = 1e4


def pelgrom_area(sigma: float, a_vt: float, a_beta: float, gm_over_i: float) -> float:
    """Gate area W L of each device of a 1:1 mirror for a current-ratio sigma [m^2] (Kinget 2005).

    sigma: target sigma of the ratio [1]; a_vt [V*m] and a_beta [m]: pair-convention Pelgrom coefficients;
    gm_over_i [1/V]: 2/Vov in strong inversion.
    """
    return (a_beta**2 + gm_over_i**2 * a_vt**2) / sigma**2


def gate_area(netlist: Netlist, devices: list[str]) -> float:
    """Summed gate area m W L of the named MOSFETs [m^2]."""
    by_name = {m.name: m for m in netlist.mosfet}
    return float(sum(by_name[d].area for d in devices))


def scale_device(device: Mosfet, scale: float, mode: str, round_up: bool = False) -> Mosfet:
    """A copy of `device` with its gate area times `scale`.

    mode "aspect": W and L each times sqrt(scale) (W/L kept); "units": m times scale, rounded to an integer >= 1
    (up when `round_up`).
    """
    if mode == "aspect":
        root = math.sqrt(scale)
        return device.model_copy(update={"w": device.w * root, "l": device.l * root})
    units = device.m * scale
    m = math.ceil(units - 1e-9) if round_up else round(units)
    return device.model_copy(update={"m": max(1, int(m))})


def scaled_netlist(
    netlist: Netlist, devices: list[str], scale: float, mode: str, round_up: bool = False
) -> tuple[Netlist, float]:
    """The netlist with the named devices scaled; returns it and the actual area scale (differs in "units" mode)."""
    chosen = set(devices)
    mosfets = [scale_device(m, scale, mode, round_up) if m.name in chosen else m for m in netlist.mosfet]
    scaled = netlist.model_copy(update={"mosfet": mosfets})
    actual = gate_area(scaled, devices) / gate_area(netlist, devices)
    return scaled, actual


# --------------------------------------------------------------------------------------------- fit
@dataclass(frozen=True)
class SigmaFit:
    """sigma(A) = sqrt(k^2 / A + floor^2): k [unit * m], floor [unit]; slope: free log-log slope [1]."""

    k: float
    floor: float
    slope: float | None
    delta_chi2: float | None
    falls_with_area: bool

    def std(self, area: float | np.ndarray) -> float | np.ndarray:
        """Predicted sigma at gate area `area` [m^2]."""
        return np.sqrt(self.k**2 / np.asarray(area, dtype=float) + self.floor**2)

    def to_dict(self) -> dict:
        return {
            "k": self.k,
            "floor": self.floor,
            "slope": self.slope,
            "floor_test": {
                "delta_chi2": self.delta_chi2,
                "threshold": FLOOR_CHI2,
                "kept": self.floor > 0,
                "rule": "floor kept only if it lowers the weighted chi-square of the variances by more than the 99 % "
                "point of chi-square(1)",
            },
            "falls_with_area": self.falls_with_area,
        }


def _weighted_fit(x: np.ndarray, v: np.ndarray, dof: np.ndarray, floor: bool) -> tuple[np.ndarray, float]:
    """Weighted least squares of variances v = a x (+ b), weights from var(s^2) = 2 sigma^4 / (N - 1).

    x = 1/A. Two reweighting passes with the model's own variances; returns (coefficients, chi-square).
    """
    design = np.column_stack([x, np.ones_like(x)]) if floor else x[:, None]
    model = v.copy()
    coef = np.zeros(design.shape[1])
    for _ in range(3):
        sd = np.sqrt(2.0 / dof) * np.maximum(model, 1e-300)
        coef, *_ = np.linalg.lstsq(design / sd[:, None], v / sd, rcond=None)
        if floor and coef[1] < 0:  # a negative floor is meaningless: fall back to the pure model
            return _weighted_fit(x, v, dof, floor=False)
        coef = np.maximum(coef, 0.0)
        model = design @ coef
    sd = np.sqrt(2.0 / dof) * np.maximum(model, 1e-300)
    chi2 = float((((v - model) / sd) ** 2).sum())
    if not floor:
        coef = np.append(coef, 0.0)
    return coef, chi2


def fit_sigma(area: np.ndarray, std: np.ndarray, count: np.ndarray) -> SigmaFit:
    """Fit sigma = k / sqrt(A), adding a floor sqrt(k^2/A + floor^2) only where the data demand it.

    area [m^2], std [unit], count: converged samples behind each std. Points with a missing or zero std are ignored
    for the weights; if every std is zero the fit is k = floor = 0, flagged as not falling with area.
    """
    area = np.asarray(area, dtype=float)
    std = np.asarray(std, dtype=float)
    count = np.asarray(count, dtype=float)
    ok = np.isfinite(std) & np.isfinite(area) & (area > 0) & (count > 1) & (std > 0)
    if ok.sum() < 2:
        return SigmaFit(0.0, float(np.nanmax(std, initial=0.0)), None, None, False)
    a, s, dof = area[ok], std[ok], count[ok] - 1.0
    slope = float(np.polyfit(np.log(a), np.log(s), 1)[0])
    x, v = 1.0 / a, s**2
    (pure_a, _), chi2_pure = _weighted_fit(x, v, dof, floor=False)
    k, floor, delta = math.sqrt(pure_a), 0.0, None
    if ok.sum() >= 3:
        (fa, fb), chi2_floor = _weighted_fit(x, v, dof, floor=True)
        delta = chi2_pure - chi2_floor
        if fb > 0 and delta > FLOOR_CHI2:
            k, floor = math.sqrt(fa), math.sqrt(fb)
    return SigmaFit(k, floor, slope, delta, bool(slope < FALLING_SLOPE and k > 0))


def halving_cost(fit: SigmaFit, area: float) -> float | None:
    """Area ratio that halves sigma from its value at `area` [m^2]; 4 in the Pelgrom regime, None if a floor forbids."""
    if fit.k <= 0:
        return None
    var = fit.k**2 / area + fit.floor**2
    room = var / 4.0 - fit.floor**2
    if room <= 0:
        return None
    return float(fit.k**2 / room / area)


# --------------------------------------------------------------------------------------------- minimum area
def mean_model(area: np.ndarray, mean: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
    """Mean of a measure against area: linear in log(area) between the swept points, held constant outside."""
    order = np.argsort(area)
    la, mu = np.log(np.asarray(area, dtype=float)[order]), np.asarray(mean, dtype=float)[order]

    def at(a: np.ndarray) -> np.ndarray:
        return np.interp(np.log(a), la, mu)

    return at


def minimum_area(
    fit: SigmaFit,
    mean_at: Callable[[np.ndarray], np.ndarray],
    limits: Limits,
    area_range: tuple[float, float],
    target_yield: float,
    k_sigma: float | None = None,
) -> dict:
    """Smallest area whose predicted distribution meets the spec [m^2].

    Criterion: the normal model N(mean(A), sigma(A)^2) gives at least `target_yield` inside the limits, or, with
    `k_sigma`, mean +- k_sigma sigma(A) lies inside them. Returns {"area", "std", "yield", "criterion"} or
    {"area": None, "reason"} when no area in `area_range` meets it.
    """
    from scipy.optimize import brentq  # imported only when an area study runs (start-up of every run)

    if k_sigma is not None:
        criterion = f"mean +- {k_sigma:g} sigma inside the limits (normal model)"

        def margin(a: np.ndarray) -> np.ndarray:
            mu, sd = mean_at(a), fit.std(a)
            sides = []
            if limits.max is not None:
                sides.append((limits.max - mu) / sd - k_sigma)
            if limits.min is not None:
                sides.append((mu - limits.min) / sd - k_sigma)
            return np.min(sides, axis=0)
    else:
        criterion = f"predicted yield >= {target_yield:g} (normal model)"

        def margin(a: np.ndarray) -> np.ndarray:
            return normal_yield(mean_at(a), fit.std(a), limits) - target_yield

    grid = np.geomspace(area_range[0], area_range[1], 801)
    values = np.asarray(margin(grid))
    good = np.flatnonzero(values >= 0)
    if good.size == 0:
        reason = "a variation floor keeps sigma too large" if fit.floor > 0 else "the mean lies too close to a limit"
        return {"area": None, "criterion": criterion, "reason": f"no area in the search range meets the spec: {reason}"}
    i = int(good[0])
    if i == 0:
        found, note = float(grid[0]), "met at the smallest area searched"
    else:
        found = float(brentq(lambda a: float(margin(np.array(a))), grid[i - 1], grid[i], xtol=1e-30, rtol=1e-10))
        found = max(found, float(grid[i - 1]))
        note = None
    sd = float(fit.std(found))
    out = {
        "area": found,
        "std": sd,
        "mean": float(mean_at(np.array(found))),
        "yield": float(normal_yield(mean_at(np.array(found)), sd, limits)),
        "criterion": criterion,
    }
    if note:
        out["note"] = note
    return out
