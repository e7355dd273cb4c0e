"""The fast path: block by block batched Newton on the reduced system, samples on the LAST axis, and the full MNA
unknowns rebuilt from the reduced ones. Samples it leaves unconverged go to the reference path.

Every operation is elementwise along the sample axis, so a sample's result does not depend on the batch it is
solved in. Pure numpy on a compiled circuit and its plan; nothing here knows of studies, draws or workers.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from mcmatch.config.schema import Measure
from mcmatch.model.circuit import Circuit
from mcmatch.model.devices import DeviceState
from mcmatch.model.headroom import HEADROOM_COLUMN, min_headroom, reduced_terminal
from mcmatch.model.reduced import DERIVATIVES, device_state, reduced_residual_jacobian
from mcmatch.solve.measures import ReducedPoint, evaluate_measures, grounded_source_currents
from mcmatch.solve.newton import ColumnSystem, newton_columns
from mcmatch.solve.plan import Block, FastPlan
from mcmatch.solve.reference import reference_unknowns, solve_reference, supply_band, within_band

#: Samples solved together on the fast path: small enough that a batch's working arrays stay in the core's cache.
FAST_BATCH = 16384


class _BlockBatch(ColumnSystem):
    """One block's system for one batch of samples. It reads the other unknowns from `context` (m, S), which holds
    the solved earlier blocks; only the devices of the block keep per-sample rows. At convergence it keeps, per
    sample, the currents of the block's `record` devices (carried to the solution to first order), so the current
    measures need no second evaluation. (The Jacobian is not carried: its change over the last step, up to about
    1e-9 V, would show in a resistance at the 1e-9 level, so resistances are evaluated at the solution.)"""

    def __init__(self, block: Block, context: np.ndarray, vth: np.ndarray, beta: np.ndarray) -> None:
        self.block = block
        self.context = context
        self.reads = block.reads
        active = set(block.view.active)
        self.vth: list = [vth[k] if k in active else None for k in range(len(vth))]
        self.beta: list = [beta[k] if k in active else None for k in range(len(beta))]
        self.currents: dict[int, np.ndarray] = {}
        self._last: dict[int, DeviceState] = {}
        self._n = context.shape[1]

    def evaluate(self, u: np.ndarray):
        for i, row in enumerate(self.block.unknowns):
            self.context[row] = u[i]
        states: dict[int, DeviceState] = {}
        f, jac = reduced_residual_jacobian(self.block.view, self.context, self.vth, self.beta, states=states)
        self._last = states
        return f, jac

    def keep(self, mask: np.ndarray) -> None:
        context = np.empty((self.context.shape[0], int(np.count_nonzero(mask))))
        for row in self.reads:  # the rows of earlier blocks this block's elements read; its own are rewritten
            context[row] = self.context[row][mask]
        self.context = context
        self.vth = [None if v is None else v[mask] for v in self.vth]
        self.beta = [None if v is None else v[mask] for v in self.beta]

    def accept(self, done: np.ndarray, finished: np.ndarray, whole: bool, dx: np.ndarray) -> None:
        states = self._last

        def put(store: dict, key, values: np.ndarray, fill: float) -> None:
            # the first acceptance of a whole batch adopts the arrays of that evaluation (they are not used again);
            # later ones scatter their few samples into them
            if key not in store:
                if whole and values.shape == (self._n,):
                    store[key] = values
                    return
                store[key] = np.full(self._n, fill)
            store[key][finished] = values[done]

        for k in self.block.record:
            # the solution is u + dx: carry the current along to first order (the error is O(dx^2), dx < tolerance)
            s, stamp = states[k], self.block.view.stamps[k]
            delta = None
            for c, names in stamp.columns:
                g = None
                for name in names:
                    term = getattr(s, DERIVATIVES[name])
                    g = term if g is None else g + term
                delta = g * dx[c] if delta is None else delta + g * dx[c]
            put(self.currents, k, s.i if delta is None else s.i + stamp.polarity * delta, np.nan)


@dataclass
class FastSolution:
    """Reduced unknowns u (m, S), converged mask, Newton steps (summed over blocks), per-sample parameters
    (n_devices, S), and the device currents the blocks recorded at convergence."""

    u: np.ndarray
    converged: np.ndarray
    iterations: np.ndarray
    vth: np.ndarray
    beta: np.ndarray
    currents: dict[int, np.ndarray]


def fast_newton(plan: FastPlan, dvth: np.ndarray, dbeta: np.ndarray) -> FastSolution:
    """Block by block Newton on the reduced system of `plan` for deviations dvth [V], dbeta [1] (n_devices, S)."""
    params = plan.reduced.circuit.params
    vth = params.vth[:, None] + dvth
    factor = 1.0 + dbeta
    if factor.size and factor.min() < 1e-3:  # same floor as mismatch.perturbed, applied only where it bites
        factor = np.maximum(factor, 1e-3)
    beta = params.beta[:, None] * factor
    n_samples = dvth.shape[1]
    u = np.empty((plan.reduced.size, n_samples))
    converged = np.ones(n_samples, dtype=bool)
    iterations = np.zeros(n_samples, dtype=np.int64)
    currents: dict[int, np.ndarray] = {}
    for block in plan.blocks:
        u0 = np.empty((len(block.unknowns), n_samples))
        for r, row in enumerate(block.unknowns):
            offset = plan.u_nominal[row] - sum(a * plan.u_nominal[j] for j, a in block.upstream[r])
            start = np.full(n_samples, offset)
            for k, a_vth, a_beta in block.params[r]:
                if a_vth:
                    start += a_vth * dvth[k]
                if a_beta:
                    start += a_beta * dbeta[k]
            for j, a in block.upstream[r]:
                start += a * u[j]
            u0[r] = start
        batch = _BlockBatch(block, u, vth, beta)
        scale = plan.u_nominal[list(block.unknowns)]
        result = newton_columns(batch, u0, block.view.voltage_rows, block.linear, scale=scale)
        for i, row in enumerate(block.unknowns):
            u[row] = result.x[i]
        converged &= result.converged
        iterations += result.iterations
        currents.update(batch.currents)
    return FastSolution(u, converged, iterations, vth, beta, currents)


def solve_fast(
    plan: FastPlan, measures: Mapping[str, Measure], dvth: np.ndarray, dbeta: np.ndarray
) -> dict[str, np.ndarray]:
    """Fast path for deviations dvth [V], dbeta [1] given sample-last (n_devices, S); the columns of
    :func:`mcmatch.solve.reference.solve_reference`. Samples the reduced Newton does not converge are solved again
    by the reference path (and flagged `retried`)."""
    circuit = plan.reduced.circuit
    n_samples = dvth.shape[1]
    sol = fast_newton(plan, dvth, dbeta)
    out = evaluate_measures(circuit, measures, ReducedPoint(plan, sol.u, sol.vth, sol.beta, sol.currents))
    terminal = reduced_terminal(plan.reduced, sol.u)  # model/headroom.py: the smallest Vds - Vdsat per sample
    out[HEADROOM_COLUMN] = min_headroom(circuit, terminal, sol.vth, sol.beta, n_samples)
    free = [r for r in (plan.reduced.position[node] for node in range(circuit.n_nodes)) if r >= 0]
    ok = sol.converged & within_band(supply_band(circuit, plan.x_nominal), sol.u[free].T)
    for key in measures:
        ok &= np.isfinite(out[key])
    out["converged"] = ok
    out["iterations"] = sol.iterations
    out["retried"] = np.zeros(n_samples, dtype=bool)
    retry = np.flatnonzero(~sol.converged)
    if retry.size:
        again = solve_reference(
            circuit,
            measures,
            plan.x_nominal,
            np.ascontiguousarray(dvth[:, retry].T),
            np.ascontiguousarray(dbeta[:, retry].T),
        )
        for key in (*measures, HEADROOM_COLUMN):
            out[key][retry] = again[key]
        out["converged"][retry] = again["converged"]
        out["iterations"][retry] += again["iterations"]
        out["retried"][retry] = True
    if not out["converged"].all():
        for key in (*measures, HEADROOM_COLUMN):
            out[key] = np.where(out["converged"], out[key], np.nan)
    return out


def solve_deviations(
    circuit: Circuit,
    measures: Mapping[str, Measure],
    x_nominal: np.ndarray,
    plan: FastPlan | None,
    dvth: np.ndarray,
    dbeta: np.ndarray,
) -> dict[str, np.ndarray]:
    """Solve deviations dvth [V], dbeta [1] given sample-last (n_devices, S): by the fast path FAST_BATCH samples at
    a time where there is a `plan`, else by the reference path from the nominal unknowns x_nominal (n,)."""
    if plan is None:
        return solve_reference(circuit, measures, x_nominal, dvth.T, dbeta.T)
    n_samples = dvth.shape[1]
    if n_samples <= FAST_BATCH:
        return solve_fast(plan, measures, dvth, dbeta)
    out: dict[str, np.ndarray] = {}
    for lo in range(0, n_samples, FAST_BATCH):
        hi = min(n_samples, lo + FAST_BATCH)
        for key, values in solve_fast(plan, measures, dvth[:, lo:hi], dbeta[:, lo:hi]).items():
            if key not in out:
                out[key] = np.empty(n_samples, dtype=values.dtype)
            out[key][lo:hi] = values
    return out


def deviation_unknowns(
    circuit: Circuit, x_nominal: np.ndarray, plan: FastPlan | None, dvth: np.ndarray, dbeta: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Full MNA unknowns x (S, n) and the converged mask (S,) for deviations dvth [V], dbeta [1] (S, n_devices):
    the fast path's own solution (the reference path's for what it leaves), for comparison with a reference solver."""
    dvth, dbeta = np.asarray(dvth, dtype=float), np.asarray(dbeta, dtype=float)
    n_samples = len(dvth)
    if plan is None:
        x, converged = np.empty((n_samples, circuit.n_unknowns)), np.zeros(n_samples, dtype=bool)
        retry = np.arange(n_samples)
    else:
        sol = fast_newton(plan, np.ascontiguousarray(dvth.T), np.ascontiguousarray(dbeta.T))
        x = expand_unknowns(plan, sol.u, sol.vth, sol.beta)
        converged = sol.converged.copy()
        retry = np.flatnonzero(~converged)
    if retry.size:
        x[retry], converged[retry] = reference_unknowns(circuit, x_nominal, dvth[retry], dbeta[retry])
    return x, converged


def expand_unknowns(plan: FastPlan, u: np.ndarray, vth: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Full MNA unknowns (S, n) from reduced ones u (m, S): fixed node voltages filled in, the currents of voltage
    sources tied to gnd from KCL at the nodes they hold."""
    reduced = plan.reduced
    circuit = reduced.circuit
    n_samples = u.shape[1]
    x = np.empty((n_samples, circuit.n_unknowns))
    for node in range(circuit.n_nodes):
        r = reduced.position[node]
        x[:, node] = u[r] if r >= 0 else reduced.node_voltage[node]
    for k in range(len(circuit.vsource_names)):
        r = reduced.position[circuit.n_nodes + k]
        if r >= 0:
            x[:, circuit.n_nodes + k] = u[r]
    if reduced.grounded_sources:
        states: dict[int, DeviceState] = {}

        def state(k: int) -> DeviceState:
            if k not in states:
                states[k] = device_state(reduced, reduced.stamps[k], u, vth[k], beta[k], "")
            return states[k]

        def node_voltage(node: int) -> np.ndarray:
            return np.zeros(n_samples) if node == circuit.ground else x[:, node]

        currents = grounded_source_currents(reduced, u, state, node_voltage)
        for j, k in enumerate(reduced.grounded_sources):
            x[:, circuit.n_nodes + k] = currents[j]
    return x
