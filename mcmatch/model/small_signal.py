"""Small-signal port resistance of a voltage source, from the MNA Jacobian at a solved operating point.

The port resistance of voltage source k is dV/dI [ohm]: how much its voltage V must change per unit change of the
current I it delivers out of `plus` into the circuit (DESIGN.md section 3's sign), with every other independent source
held (voltage sources shorted, current sources open). In the MNA system (:mod:`mcmatch.model.circuit`) the branch
current of source k is unknown b = n_nodes + k and its constraint row b reads V(plus) - V(minus) - V = 0, so
dF/dV = -e_b and a change dV moves the solution by dx = J^-1 e_b dV: dI/dV = (J^-1)_bb and r = 1 / (J^-1)_bb.
Batched over a leading sample axis; pure numpy.
"""

from __future__ import annotations

import contextlib

import numpy as np

from mcmatch.model.circuit import Circuit
from mcmatch.model.reduced import ReducedCircuit


def branch_unknown(circuit: Circuit, source: str) -> int:
    """MNA unknown (and constraint row) of voltage source `source`'s branch current."""
    return circuit.n_nodes + circuit.vsource_names.index(source)


def port_resistance(circuit: Circuit, jac: np.ndarray, source: str) -> np.ndarray:
    """Port resistance [ohm] of voltage source `source`, (S,), from the MNA Jacobian `jac` (S, n, n) at the solution.

    Infinite where the circuit draws no incremental current from the source (an open port), NaN where the Jacobian
    is singular.
    """
    n_samples, n, _ = jac.shape
    b = branch_unknown(circuit, source)
    rhs = np.zeros((n_samples, n, 1))
    rhs[:, b, 0] = 1.0
    try:
        conductance = np.linalg.solve(jac, rhs)[:, b, 0]
    except np.linalg.LinAlgError:  # some sample's Jacobian is singular: solve one by one, NaN for those
        conductance = np.full(n_samples, np.nan)
        for s in range(n_samples):
            with contextlib.suppress(np.linalg.LinAlgError):
                conductance[s] = np.linalg.solve(jac[s], rhs[s])[b, 0]
    with np.errstate(divide="ignore", invalid="ignore"):
        return 1.0 / conductance


def node_unknowns(reduced: ReducedCircuit, u: np.ndarray) -> np.ndarray:
    """Full MNA unknowns (S, n) with the node voltages of reduced unknowns u (m, S) [V] and zero branch currents.

    Enough for the Jacobian, which does not depend on the branch currents (they enter the residual linearly).
    """
    circuit = reduced.circuit
    x = np.zeros((u.shape[1], circuit.n_unknowns))
    for node in range(circuit.n_nodes):
        r = reduced.position[node]
        x[:, node] = u[r] if r >= 0 else reduced.node_voltage[node]
    return x
