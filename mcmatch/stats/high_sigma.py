"""High-sigma failure probability by importance sampling in the standard-normal mismatch space.

The mismatch of a circuit is a vector z of 2 n_devices independent standard normals (every device's dVt, then its
dbeta/beta, scaled by the Pelgrom sigmas: see :func:`mcmatch.draws.mismatch.mismatch_from_normals`). A spec side is a
failure region of z. Plain Monte Carlo needs about 100 / p samples to see a probability p; at 5 sigma (p ~ 3e-7)
that is hopeless. Importance sampling draws z from normals shifted to the failure region instead and reweights:

1. Linearise the measure at the nominal point, m(z) ~ m0 + a . z, with a = d m / d z from the implicit-function
   sensitivities (:mod:`mcmatch.model.sensitivity`, no finite differences). On a spec side with limit L the most
   probable failure point of the linear model is z* = (L - m0) a / |a|^2, at distance beta_lin = |L - m0| / |a| from the
   origin (the first-order reliability estimate is Phi(-beta_lin)).
2. Refine along that direction with real solves: the boundary m(t u) = L is bracketed and then narrowed by
   multisection (several points per batched solve); the shift is mu = t* u. A failed solve counts as a failure
   there, which only moves the shift, never the estimate's expectation.
3. Draw N samples from the mixture q(z) = sum_c alpha_c phi(z - mu_c), one component per spec side (a two-sided spec
   has two failure regions), with a deterministic allocation alpha_c = N_c / N. Weight w = phi(z) / q(z),
   estimate p = mean(w * fail), standard error std(w * fail) / sqrt(N), confidence interval by the normal
   approximation (Owen and Zhou, JASA 2000, on deterministic mixtures: unbiased; the iid variance is then
   conservative). A sample whose solve fails counts as failing: conservative, never hidden.
4. Effective samples: Kish's (sum v)^2 / sum v^2 over the weighted failure terms v = w * fail. With it the estimate's
   relative standard error is about sqrt(1/n_eff - 1/N): the estimate is as good as a plain Monte Carlo run that saw
   n_eff failures. (Kish's count over all the weights would be about N exp(-|mu|^2), tiny at 5 sigma whatever the
   accuracy: it measures the sample's use for every expectation under the nominal distribution, not for p.)

sigma_level is the one-sided normal equivalent of p: scipy.stats.norm.isf(p).
Pure numpy and scipy; the solves come in as a callable.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

from mcmatch.stats.distributions import normal_isf, normal_ppf

#: Farthest the boundary search looks along the linearised direction [sigma of z].
SEARCH_LIMIT = 40.0
#: Points per multisection round and rounds: the bracket shrinks by (POINTS + 1)^ROUNDS.
SEARCH_POINTS = 31
SEARCH_ROUNDS = 4

#: Evaluates measures at standard-normal points z (S, d): returns (values (S,), converged (S,)).
Evaluate = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]


@dataclass(frozen=True)
class Side:
    """One spec side: "min" or "max", its limit [SI], the linearised distance beta_lin [sigma] and the shift mu."""

    side: str
    limit: float
    linear_beta: float
    shift: np.ndarray
    boundary_found: bool


def fails(values: np.ndarray, converged: np.ndarray, limit_min: float | None, limit_max: float | None) -> np.ndarray:
    """Failure mask: outside the limits, not finite, or not converged (failed solves count as failures)."""
    v = np.asarray(values, dtype=float)
    bad = ~np.asarray(converged, dtype=bool) | ~np.isfinite(v)
    with np.errstate(invalid="ignore"):
        if limit_min is not None:
            bad |= v < limit_min
        if limit_max is not None:
            bad |= v > limit_max
    return bad


def linear_design_point(nominal: float, gradient_z: np.ndarray, side: str, limit: float) -> tuple[float, np.ndarray]:
    """Distance beta_lin [sigma] and unit direction u of the most probable failure point of the linear model.

    nominal: m0 [SI]; gradient_z: d m / d z (d,) [SI per sigma]; side: "min" or "max"; limit: L [SI]. u points towards
    the failing side; beta_lin is negative when the nominal value already fails that side. A zero gradient gives
    (inf, 0): the linear model never reaches the limit.
    """
    a = np.asarray(gradient_z, dtype=float)
    norm = float(np.linalg.norm(a))
    if norm == 0.0 or not np.isfinite(norm):
        return float("inf"), np.zeros_like(a)
    sign = 1.0 if side == "max" else -1.0
    return float(sign * (limit - nominal) / norm), sign * a / norm


def boundary_along(
    evaluate: Evaluate,
    direction: np.ndarray,
    side: str,
    limit: float,
    start: float,
    search_limit: float = SEARCH_LIMIT,
) -> tuple[float, bool]:
    """Distance t* [sigma] along unit `direction` at which the measure crosses `limit` on `side` ("min"/"max").

    Brackets the crossing from `start` (growing by 1.5x up to `search_limit`) with t = 0 as the passing end, then
    narrows the bracket by batched multisection. Returns (t*, found); when no failure is met up to the search limit,
    (start clipped to the limit, False).
    """
    lo_limit, hi_limit = (limit, None) if side == "min" else (None, limit)

    def failing(ts: np.ndarray) -> np.ndarray:
        values, converged = evaluate(ts[:, None] * direction[None, :])
        return fails(values, converged, lo_limit, hi_limit)

    start = float(np.clip(start, 1e-3, search_limit))
    # bracket: a few candidates per batch, growing geometrically
    ts = np.unique(np.clip(start * 1.5 ** np.arange(-2, 12), 1e-3, search_limit))
    bad = failing(ts)
    if not bad.any():
        return start, False
    first = int(np.argmax(bad))
    hi = float(ts[first])
    lo = float(ts[first - 1]) if first > 0 else 0.0
    for _ in range(SEARCH_ROUNDS):
        grid = np.linspace(lo, hi, SEARCH_POINTS + 2)[1:-1]
        bad = failing(grid)
        if bad.any():
            k = int(np.argmax(bad))
            hi = float(grid[k])
            lo = float(grid[k - 1]) if k > 0 else lo
        else:
            lo = float(grid[-1])
    return 0.5 * (lo + hi), True


def mixture_log_weights(z: np.ndarray, shifts: np.ndarray, fractions: np.ndarray) -> np.ndarray:
    """log w = log phi(z) - log sum_c alpha_c phi(z - mu_c) for z (S, d), shifts (C, d), fractions alpha (C,)."""
    # log phi(z - mu) - log phi(z) = z . mu - |mu|^2 / 2
    terms = z @ shifts.T - 0.5 * np.sum(shifts**2, axis=1)[None, :] + np.log(fractions)[None, :]
    return -logsumexp(terms, axis=1)


def allocation(samples: int, components: int) -> np.ndarray:
    """Samples per mixture component: as equal as possible, the first ones taking the remainder."""
    base = np.full(components, samples // components, dtype=int)
    base[: samples % components] += 1
    return base


def shifted_draws(normals: np.ndarray, shifts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mixture draws: consecutive blocks of `normals` (S, d) moved by each shift (C, d). Returns z and alpha (C,)."""
    counts = allocation(len(normals), len(shifts))
    offsets = np.repeat(shifts, counts, axis=0)
    return normals + offsets, counts / counts.sum()


def kish(values: np.ndarray) -> float:
    """Kish's effective sample count (sum v)^2 / sum v^2 of non-negative weights v; 0 when all are zero."""
    v = np.asarray(values, dtype=float)
    total = float(np.sum(v**2))
    return float(np.sum(v) ** 2 / total) if total > 0 else 0.0


def estimate(weights: np.ndarray, failed: np.ndarray, confidence: float = 0.95) -> dict:
    """Importance-sampling estimate of a failure probability from weights w and a failure mask (S,).

    Returns fail_probability, ci95 (normal approximation, clipped to [0, 1]), std_error, effective_samples (Kish over
    w * fail), failures (count of failing draws), weight_kish (Kish over all weights) and sigma_level
    (norm.isf(p); None when p = 0, then "sigma_level_at_least" from the upper end of the interval).
    With no failing draw the interval's upper end is a heuristic bound: 3 / N times the largest weight of any draw
    (the rule of three on the most heavily weighted draw), labelled in "note".
    """
    w = np.asarray(weights, dtype=float)
    f = np.asarray(failed, dtype=bool)
    n = w.size
    terms = np.where(f, w, 0.0)
    p = float(terms.mean())
    se = float(terms.std(ddof=1) / np.sqrt(n)) if n > 1 else 0.0
    zq = normal_ppf(0.5 + confidence / 2.0)
    out: dict = {
        "fail_probability": p,
        "std_error": se,
        "failures": int(f.sum()),
        "effective_samples": kish(terms),
        "weight_kish": kish(w),
    }
    if f.any():
        out["ci95"] = [max(0.0, p - zq * se), min(1.0, p + zq * se)]
    else:
        bound = float(min(1.0, 3.0 / n * float(w.max()))) if n else 1.0
        out["ci95"] = [0.0, bound]
        out["note"] = (
            "no draw failed: the upper end of ci95 is a heuristic bound (3 / N times the largest weight), "
            "not a confidence limit"
        )
    out["sigma_level"] = sigma_level(p)
    if out["sigma_level"] is None:
        out["sigma_level_at_least"] = sigma_level(out["ci95"][1])
    return out


def sigma_level(p: float) -> float | None:
    """One-sided normal equivalent of a probability: norm.isf(p) [sigma].

    None for p = 0 (unbounded above) and for p >= 1 (every draw fails: no finite sigma level; JSON holds no -inf).
    """
    if not 0 < p < 1:
        return None
    return normal_isf(p)
