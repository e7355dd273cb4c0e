"""More than one DC operating point: solve the nominal circuit again from starts near each rail and compare.

A circuit with positive feedback (a cross-coupled pair, a latch, a self-biased reference with its zero-current
state) has several DC solutions. Newton finds the one nearest its start, and every Monte Carlo sample starts from
the nominal point, so a run can sit on the unstable symmetric point of a latch without a hint. Here the nominal
circuit is solved again in one batch from starts with the free nodes near the low rail, near the high rail, and
each node alone on the other side; converged solutions inside the rails that differ from the nominal point by more
than DISTINCT in some node are reported.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from mcmatch.model.circuit import Circuit, voltage_mask
from mcmatch.run.study import Study
from mcmatch.solve.newton import SOLVER_DEFAULTS, newton
from mcmatch.solve.reference import supply_band, system_for

#: Node voltage difference [V] beyond which two converged solutions are different operating points.
DISTINCT = 0.01
#: Fraction of the supply span from the rail where the starts put the free nodes [1].
RAIL_INSET = 0.1
#: Nodes that get starts of their own (each high with the rest low, and each low with the rest high) at most.
MAX_SINGLE_NODE_STARTS = 16


def starting_points(circuit: Circuit, x_nominal: np.ndarray) -> np.ndarray:
    """Starting unknowns (S, n): nodes held by grounded voltage sources at their values, branch currents 0, the other
    nodes near the low or the high rail in the patterns all-low, all-high and one-node-apart."""
    plus, minus, ground = circuit.vsource_plus, circuit.vsource_minus, circuit.ground
    fixed = np.unique(np.concatenate([plus[minus == ground], minus[plus == ground]])).astype(np.intp)
    fixed = fixed[fixed < circuit.n_nodes]  # nodes a voltage source holds against gnd
    held = np.zeros(circuit.n_nodes, dtype=bool)
    held[fixed] = True
    rails = [0.0, *(float(x_nominal[n]) for n in fixed)]
    low, high = min(rails), max(rails)
    span = high - low
    if span <= 0:
        return np.zeros((0, circuit.n_unknowns))
    near_low, near_high = low + RAIL_INSET * span, high - RAIL_INSET * span
    free = np.flatnonzero(~held)
    patterns = [np.zeros(free.size, dtype=bool), np.ones(free.size, dtype=bool)]
    for k in range(min(free.size, MAX_SINGLE_NODE_STARTS)):
        alone = np.zeros(free.size, dtype=bool)
        alone[k] = True
        patterns += [alone, ~alone]
    unique = {p.tobytes(): p for p in patterns}
    starts = np.zeros((len(unique), circuit.n_unknowns))
    for row, pattern in enumerate(unique.values()):
        starts[row, fixed] = x_nominal[fixed]
        starts[row, free] = np.where(pattern, near_high, near_low)
    return starts


def other_operating_points(study: Study) -> list[dict[str, float]]:
    """Converged DC solutions of the nominal circuit other than study.x_nominal, as {node: voltage [V]}; [] when
    every start found the nominal point again (or failed)."""
    circuit, x0 = study.circuit, np.asarray(study.x_nominal, dtype=float)
    starts = starting_points(circuit, x0)
    if starts.shape[0] == 0:
        return []
    p = circuit.params
    system = system_for(circuit, p.vth[None, :], p.beta[None, :])
    rows = np.zeros(starts.shape[0], dtype=np.intp)
    mask = voltage_mask(circuit)
    result = newton(system, starts, mask, rows=rows)
    x, converged = result.x.copy(), result.converged.copy()
    retry = np.flatnonzero(~converged)
    if retry.size:  # small steps, as the nominal solve's own retries
        again = newton(system, starts[retry], mask, rows=rows[retry], options=replace(SOLVER_DEFAULTS, max_step=0.05))
        x[retry], converged[retry] = again.x, again.converged
    lo, hi = supply_band(circuit, x0)
    nodes = slice(0, circuit.n_nodes)
    found: list[np.ndarray] = []
    for row in np.flatnonzero(converged):
        v = x[row, nodes]
        if not (np.isfinite(v).all() and ((v >= lo) & (v <= hi)).all()):
            continue
        if np.abs(v - x0[nodes]).max() <= DISTINCT or any(np.abs(v - f).max() <= DISTINCT for f in found):
            continue
        found.append(v)
    return [{name: float(v[i]) for i, name in enumerate(circuit.nodes)} for v in found]


def several_points_warning(nominal: dict[str, float], others: list[dict[str, float]]) -> str:
    """The check command's warning, in plain words, naming the nodes whose voltage differs [V]."""
    described = []
    for other in others[:3]:
        moved = [n for n in nominal if abs(other[n] - nominal[n]) > DISTINCT]
        described.append(", ".join(f"'{n}' at {other[n]:.4g} V instead of {nominal[n]:.4g} V" for n in moved))
    more = f" (and {len(others) - 3} more)" if len(others) > 3 else ""
    count = len(others) + 1
    return (
        f"the circuit may have more than one DC operating point: solving again from other starting voltages found "
        f"{count - 1} other{'s' if count > 2 else ''}{more}, with node " + "; with node ".join(described) + ". The "
        "Monte Carlo starts every sample from the point shown here, which may be the one the real circuit never "
        "rests in (an unstable balance of positive feedback, or a zero-current state); add a start-up path or "
        "change the circuit so that only one point exists"
    )
