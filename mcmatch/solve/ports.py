"""Port resistances on the fast path: a voltage source's dV/dI from the reduced system, without dense matrices.

The reduced system (:mod:`mcmatch.model.circuit`) eliminates every node a voltage source holds, and with it the port.
Replacing source k by a test current (an open for small signals, every other source still held) gives a circuit with
the same operating point in which the port's node(s) are free: its node resistance there, (J'^-1) e_plus at plus
minus that at minus, is the port resistance. J' is that circuit's reduced Jacobian, evaluated at the solution and
eliminated sparsely with a pivot order fixed once at the nominal point (so a sample's bits never depend on its batch).
Samples whose fixed pivots vanish are solved again densely (:mod:`mcmatch.model.small_signal`).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from mcmatch.model.circuit import Circuit, residual_jacobian
from mcmatch.model.reduced import ReducedCircuit, reduce_circuit, reduced_residual_jacobian
from mcmatch.model.small_signal import node_unknowns, port_resistance
from mcmatch.solve.newton import SparseElimination


@dataclass(frozen=True)
class PortSystem:
    """The reduced system of `circuit` with voltage source `source` opened, and its sparse elimination; `plus`,
    `minus`: u rows of the port's terminals in it (-1 for a node still held, e.g. gnd)."""

    reduced: ReducedCircuit
    linear: SparseElimination
    plus: int
    minus: int


def without_source(circuit: Circuit, source: str) -> Circuit:
    """`circuit` with voltage source `source` removed (its branch-current unknown with it)."""
    keep = np.array([name != source for name in circuit.vsource_names], dtype=bool)
    return replace(
        circuit,
        vsource_names=tuple(n for n in circuit.vsource_names if n != source),
        vsource_plus=_renumber(circuit, circuit.vsource_plus[keep]),
        vsource_minus=_renumber(circuit, circuit.vsource_minus[keep]),
        vsource_value=circuit.vsource_value[keep],
        drain=_renumber(circuit, circuit.drain),
        gate=_renumber(circuit, circuit.gate),
        source=_renumber(circuit, circuit.source),
        bulk=_renumber(circuit, circuit.bulk),
        isource_from=_renumber(circuit, circuit.isource_from),
        isource_to=_renumber(circuit, circuit.isource_to),
        resistor_a=_renumber(circuit, circuit.resistor_a),
        resistor_b=_renumber(circuit, circuit.resistor_b),
    )


def _renumber(circuit: Circuit, nodes: np.ndarray) -> np.ndarray:
    """Node indices after one branch unknown is dropped: gnd (== n_unknowns) moves down by one."""
    return np.where(nodes == circuit.ground, circuit.ground - 1, nodes).astype(np.intp)


def port_system(circuit: Circuit, source: str, u_nominal: np.ndarray, reduced: ReducedCircuit) -> PortSystem:
    """Build the opened system of `source`; u_nominal (m,): the nominal reduced unknowns of `reduced` (the
    original circuit's reduced system), which fix the pivot order. ValueError if it does not reduce."""
    opened = without_source(circuit, source)
    port = reduce_circuit(opened)
    if port.size == 0:
        raise ValueError("no free node at the port")
    x0 = node_unknowns(reduced, u_nominal[:, None])
    u0 = _opened_unknowns(port, x0)
    p = circuit.params
    _, jac = reduced_residual_jacobian(port, u0, p.vth[:, None], p.beta[:, None])
    dense = np.zeros((port.size, port.size))
    for (r, c), v in jac.items():
        dense[r, c] = float(np.asarray(v).reshape(-1)[0])
    k = circuit.vsource_names.index(source)
    ends = (circuit.vsource_plus[k], circuit.vsource_minus[k])
    rows = [int(port.position[n]) if n < circuit.n_nodes else -1 for n in ends]
    return PortSystem(port, SparseElimination.build(port.pattern, dense), rows[0], rows[1])


def _opened_unknowns(port: ReducedCircuit, x: np.ndarray) -> np.ndarray:
    """Reduced unknowns (m', S) of the opened system from full unknowns x (S, n) of the original circuit: node
    voltages carried over; branch currents zero (the Jacobian does not depend on them)."""
    nn = port.circuit.n_nodes
    u = np.zeros((port.size, x.shape[0]))
    for row, unknown in enumerate(port.unknowns):
        if unknown < nn:
            u[row] = x[:, unknown]
    return u


_SYSTEMS: list[tuple[Circuit, str, PortSystem | None]] = []


def cached_port_system(circuit: Circuit, source: str, u_nominal: np.ndarray, reduced: ReducedCircuit):
    """:func:`port_system`, cached for the last few (circuit, source) pairs seen; None when it does not reduce."""
    for cached, name, system in _SYSTEMS:
        if cached is circuit and name == source:
            return system
    try:
        system = port_system(circuit, source, u_nominal, reduced)
    except ValueError:
        system = None
    _SYSTEMS.insert(0, (circuit, source, system))
    del _SYSTEMS[32:]
    return system


def reduced_port_resistances(
    reduced: ReducedCircuit,
    u: np.ndarray,
    vth: np.ndarray,
    beta: np.ndarray,
    sources: list[str],
    u_nominal: np.ndarray,
) -> dict[str, np.ndarray]:
    """Port resistance [ohm] of each voltage source in `sources`, (S,) each, at a solution u (m, S) of `reduced`;
    vth, beta: (n_devices, S) sample-last; u_nominal (m,): the nominal solution (fixes pivot orders)."""
    circuit = reduced.circuit
    x = node_unknowns(reduced, u)
    out: dict[str, np.ndarray] = {}
    for source in sources:
        system = cached_port_system(circuit, source, u_nominal, reduced)
        if system is None:
            out[source] = _dense(circuit, x, vth, beta, source)
            continue
        up = _opened_unknowns(system.reduced, x)
        _, jac = reduced_residual_jacobian(system.reduced, up, vth, beta)
        rhs = np.zeros((system.reduced.size, u.shape[1]))
        if system.plus >= 0:
            rhs[system.plus] += 1.0
        if system.minus >= 0:
            rhs[system.minus] -= 1.0
        y, ok = system.linear.solve(jac, rhs)
        r = (y[system.plus] if system.plus >= 0 else 0.0) - (y[system.minus] if system.minus >= 0 else 0.0)
        r = np.array(r, dtype=float, copy=True)
        bad = np.flatnonzero(~ok)
        if bad.size:
            r[bad] = _dense(circuit, x[bad], vth[:, bad], beta[:, bad], source)
        out[source] = r
    return out


def _dense(circuit: Circuit, x: np.ndarray, vth: np.ndarray, beta: np.ndarray, source: str) -> np.ndarray:
    """The reference: full MNA Jacobian at node voltages x (S, n) and a dense solve."""
    _, jac = residual_jacobian(circuit, x, np.asarray(vth).T, np.asarray(beta).T)
    return port_resistance(circuit, jac, source)
