"""The reference solve path: the full MNA system, stacked Jacobians and :func:`solve_batch` with its retries; the
nominal point (:func:`nominal_point`, no mismatch); the band of plausible node voltages that tells a physical
operating point from a runaway one.

Used for circuits the fast path cannot reduce and for the samples it leaves unconverged. Pure numpy on a compiled
circuit; nothing here knows of studies, draws or workers.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

import numpy as np

from mcmatch.config.schema import Measure
from mcmatch.draws.mismatch import perturbed
from mcmatch.model.circuit import GMIN, Circuit, extend, residual_jacobian, voltage_mask
from mcmatch.model.headroom import HEADROOM_COLUMN, min_headroom, mna_terminal
from mcmatch.solve.measures import mna_measures
from mcmatch.solve.newton import solve_batch, solve_operating_point

#: Margin [V] and fraction of the nominal voltage span beyond which a node's voltage is implausible (supply_band).
RAIL_MARGIN = 1.0
RAIL_MARGIN_FRACTION = 0.5


def supply_band(circuit: Circuit, x: np.ndarray) -> tuple[float, float]:
    """[lo, hi] [V]: the voltages of the nodes held by voltage sources at unknowns x (n,), and gnd, widened by
    RAIL_MARGIN_FRACTION of their span and at least RAIL_MARGIN. An ideal current source can push a node far beyond
    it (a device out of compliance); such a sample has no physical operating point and is counted as a failed solve,
    not reported as a current."""
    nodes = [int(n) for n in (*circuit.vsource_plus, *circuit.vsource_minus) if n < circuit.n_nodes]
    held = [0.0, *(float(x[n]) for n in nodes)]
    lo, hi = min(held), max(held)
    margin = max(RAIL_MARGIN, RAIL_MARGIN_FRACTION * (hi - lo))
    return lo - margin, hi + margin


def within_band(band: tuple[float, float], node_voltages: np.ndarray) -> np.ndarray:
    """Per-sample mask: every node voltage [V] in `node_voltages` (S, k) lies inside band = (lo, hi) [V]."""
    lo, hi = band
    v = np.asarray(node_voltages)
    return ((v >= lo) & (v <= hi)).all(axis=1) if v.size else np.ones(v.shape[0], dtype=bool)


def system_for(circuit: Circuit, vth: np.ndarray, beta: np.ndarray) -> Callable[..., tuple[np.ndarray, np.ndarray]]:
    """The Newton system of `circuit` with per-sample parameters vth [V], beta [A/V^2] (S, n_devices)."""

    def system(x: np.ndarray, rows: np.ndarray, source_scale: float = 1.0, gmin: float = GMIN):
        return residual_jacobian(circuit, x, vth[rows], beta[rows], source_scale=source_scale, gmin=gmin)

    return system


def reference_start(circuit: Circuit, x_nominal: np.ndarray, n_samples: int) -> np.ndarray:
    """Newton start (S, n): the nominal unknowns x_nominal (n,) [V, A] for every sample."""
    return np.broadcast_to(x_nominal, (n_samples, circuit.n_unknowns)).copy()


def solve_reference(
    circuit: Circuit,
    measures: Mapping[str, Measure],
    x_nominal: np.ndarray,
    dvth: np.ndarray,
    dbeta: np.ndarray,
    x0: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Solve the samples with deviations dvth [V], dbeta [1] (S, n_devices) on the full MNA system, from x0 (S, n)
    or the nominal unknowns x_nominal (n,). Columns: every measure (NaN where not converged), `converged` (Newton
    converged, the Jacobian is finite, every node lies within :func:`supply_band`, every measure is finite),
    `iterations` and `retried`."""
    vth, beta = perturbed(circuit.params, dvth, dbeta)
    if x0 is None:
        x0 = reference_start(circuit, x_nominal, len(vth))
    result = solve_batch(system_for(circuit, vth, beta), x0, voltage_mask(circuit))
    _, jac = residual_jacobian(circuit, result.x, vth, beta)
    band = supply_band(circuit, x_nominal)
    ok = result.converged & np.isfinite(jac).all(axis=(1, 2)) & within_band(band, result.x[:, : circuit.n_nodes])
    jac = np.where(ok[:, None, None], jac, np.eye(circuit.n_unknowns))
    values = mna_measures(circuit, measures, result.x, vth, beta, jac)
    out: dict[str, np.ndarray] = {}
    for v in values.values():
        ok &= np.isfinite(v)
    values[HEADROOM_COLUMN] = min_headroom(circuit, mna_terminal(extend(result.x)), vth.T, beta.T, len(ok))
    for key, v in values.items():
        out[key] = np.where(ok, v, np.nan)
    out["converged"] = ok
    out["iterations"] = result.iterations
    out["retried"] = result.retried
    return out


def reference_unknowns(
    circuit: Circuit, x_nominal: np.ndarray, dvth: np.ndarray, dbeta: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Full MNA unknowns x (S, n) and the Newton converged mask (S,) for deviations dvth [V], dbeta [1]
    (S, n_devices), from the nominal unknowns x_nominal (n,)."""
    vth, beta = perturbed(circuit.params, dvth, dbeta)
    result = solve_batch(
        system_for(circuit, vth, beta), reference_start(circuit, x_nominal, len(vth)), voltage_mask(circuit)
    )
    return result.x, result.converged


def nominal_point(circuit: Circuit, guess: np.ndarray | None = None) -> np.ndarray:
    """Unknowns (n,) of the circuit with no mismatch; SolveError if no strategy finds them."""
    p = circuit.params
    system = system_for(circuit, p.vth[None, :], p.beta[None, :])

    def single(x: np.ndarray, rows: np.ndarray, source_scale: float = 1.0, gmin: float = GMIN):
        return system(x, np.zeros(len(rows), dtype=np.intp), source_scale, gmin)

    if guess is None:  # start with grounded voltage sources' nodes at their values (a Wilson mirror needs it)
        guess = np.zeros(circuit.n_unknowns)
        grounded = circuit.vsource_minus == circuit.ground
        guess[circuit.vsource_plus[grounded]] = circuit.vsource_value[grounded]
    return solve_operating_point(single, circuit.n_unknowns, voltage_mask(circuit), GMIN, guess=guess)[0]
