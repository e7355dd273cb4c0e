"""Mismatch contributions: linearised variance of each measure split into shares per device and parameter.

sigma_lin^2 = sum_p (d measure / d p)^2 sigma_p^2 over the independent single-device deviations p (every device's
dVt and dbeta/beta, Pelgrom 1989); each term's share is its part of that sum. Arrays in, dicts out (SI units).
"""

from __future__ import annotations

import math

import numpy as np

from mcmatch.stats.distributions import chi2_ppf

#: Terms listed in "top": the largest contributors, at most this many.
TOP = 3

NOT_LINEARISED = "not linearised: the ratio's denominator is zero at the operating point"


def std_interval(std: float, count: int, confidence: float = 0.95) -> list[float] | None:
    """Chi-square confidence interval on a population sigma from a sample std over `count` samples [unit]."""
    if std is None or count is None or count < 2:
        return None
    dof = count - 1
    lo = std * math.sqrt(dof / chi2_ppf(0.5 + confidence / 2.0, dof))
    hi = std * math.sqrt(dof / chi2_ppf(0.5 - confidence / 2.0, dof))
    return [float(lo), float(hi)]


def contribution_table(
    gradient: np.ndarray | None,
    sigmas: np.ndarray,
    labels: list[tuple[str, str]],
    mc_std: float | None = None,
    mc_count: int | None = None,
    note: str | None = None,
) -> dict:
    """One measure's entry of summary["contributions"].

    gradient: d measure / d p along the parameter axis [unit/V or unit]; sigmas: the parameters' sigmas [V or 1];
    labels: (device, "vth"|"beta") per parameter; mc_std, mc_count: the Monte Carlo std [unit] and its sample count.
    Terms are sorted by share, descending; shares sum to 1 (all 0 if the measure does not depend on mismatch).
    """
    out: dict = {"linear_std": None, "mc_std": mc_std, "mc_std_ci95": std_interval(mc_std, mc_count)}
    if gradient is None:
        out.update(terms=[], top=[], devices={}, note=note or NOT_LINEARISED)
        return out
    gradient = np.asarray(gradient, dtype=float) + 0.0  # no negative zeros in the output
    parts = (gradient * sigmas) ** 2
    total = float(parts.sum())
    shares = parts / total if total > 0 else np.zeros_like(parts)
    order = np.argsort(-shares, kind="stable")
    terms = [
        {
            "device": labels[i][0],
            "parameter": labels[i][1],
            "sensitivity": float(gradient[i]),
            "sigma": float(sigmas[i]),
            "std": float(abs(gradient[i]) * sigmas[i]),
            "share": float(shares[i]),
        }
        for i in order
    ]
    devices: dict[str, float] = {}
    for t in terms:
        devices[t["device"]] = devices.get(t["device"], 0.0) + t["share"]
    out["linear_std"] = math.sqrt(total)
    out["terms"] = terms
    out["top"] = [
        {"device": t["device"], "parameter": t["parameter"], "share": t["share"]} for t in terms[:TOP] if t["share"] > 0
    ]
    out["devices"] = dict(sorted(devices.items(), key=lambda kv: -kv[1]))
    ci = out["mc_std_ci95"]
    if ci is not None:
        out["within_mc_ci95"] = bool(ci[0] <= out["linear_std"] <= ci[1])
    if total == 0:
        out["note"] = "the measure does not depend on mismatch to first order; shares are all zero"
    elif note:
        out["note"] = note
    return out
