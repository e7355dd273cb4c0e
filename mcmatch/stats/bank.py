"""Die yield of a multi-output bank: the probability that all K channels are in spec at once.

The outputs of a bank share one reference device, so their errors are correlated: a reference that comes out low
moves every channel the same way. The die yield is then not the per-channel yield to the power K. For channel errors
e_k = r + o_k with a common part r and independent parts o_k, P(all pass) = E_r[P(pass | r)^K] >= (E_r P(pass | r))^K
by Jensen's inequality (x^K is convex): the shared reference makes the joint yield higher than the independent
estimate, and it never exceeds the worst single channel's yield.

Arrays in, dicts out: a boolean pass matrix (samples, K) from one Monte Carlo run, failed solves already marked as
failing every channel.
"""

from __future__ import annotations

import numpy as np

from mcmatch.stats.yields import passes, yield_block


def channel_passes(columns: dict[str, np.ndarray], measures: list[str], limits: dict) -> np.ndarray:
    """Pass matrix (S, K): sample inside channel k's limits and converged; NaN and failed solves fail."""
    converged = np.asarray(columns["converged"], dtype=bool)
    return np.stack([passes(columns[m], limits[m]) & converged for m in measures], axis=1)


def mean_correlation(columns: dict[str, np.ndarray], measures: list[str]) -> float | None:
    """Mean pairwise Pearson correlation of the channel measures over samples where all are finite; None if K < 2."""
    if len(measures) < 2:
        return None
    values = np.stack([np.asarray(columns[m], dtype=float) for m in measures], axis=1)
    values = values[np.isfinite(values).all(axis=1)]
    if len(values) < 3 or np.any(values.std(axis=0) == 0):
        return None
    corr = np.corrcoef(values, rowvar=False)
    k = len(measures)
    return float((corr.sum() - k) / (k * (k - 1)))


def bank_yield(passed: np.ndarray, measures: list[str], confidence: float = 0.95) -> dict:
    """Joint ("all_in_spec") and per-channel yields of a bank, the independent estimate, and their growth with K.

    passed: (S, K) booleans, one column per channel in `measures` order. Returns the summary["bank"] block:
    channels, measures, all_in_spec (Clopper-Pearson block), independent_estimate (product of the per-channel
    fractions: the per-channel yield to the power K when channels are alike), per_channel and by_k (the first k
    channels, k = 1..K).
    """
    passed = np.asarray(passed, dtype=bool)
    if passed.ndim != 2 or passed.shape[1] != len(measures):
        raise ValueError("passed must be (samples, channels) with one column per measure")
    total, k_all = passed.shape
    fractions = passed.mean(axis=0) if total else np.zeros(k_all)
    per_channel = [
        {"measure": m, "fraction": float(f), "passed": int(n)}
        for m, f, n in zip(measures, fractions, passed.sum(axis=0), strict=True)
    ]
    running = np.ones(total, dtype=bool)
    by_k = []
    for k in range(k_all):
        running &= passed[:, k]
        block = yield_block(int(running.sum()), total, confidence)
        by_k.append(
            {
                "k": k + 1,
                "fraction": block["fraction"],
                "ci95": block["ci95"],
                "passed": block["passed"],
                "independent_estimate": float(np.prod(fractions[: k + 1])),
            }
        )
    joint = yield_block(int(passed.all(axis=1).sum()), total, confidence)
    worst = int(np.argmin(fractions)) if k_all else None
    return {
        "channels": int(k_all),
        "measures": list(measures),
        "samples": int(total),
        "all_in_spec": joint,
        "independent_estimate": float(np.prod(fractions)),
        "worst_channel": None if worst is None else {"measure": measures[worst], "fraction": float(fractions[worst])},
        "per_channel": per_channel,
        "by_k": by_k,
    }
