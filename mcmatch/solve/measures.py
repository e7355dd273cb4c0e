"""The one measure evaluator: currents [A], node voltages [V], ratio errors [1], node and port resistances [ohm] of
solved samples, for both solve paths.

Each measure kind is defined once, in :func:`evaluate_measures`, on four primitives of a solved point (a node's
voltage, a MOSFET's channel current, a voltage source's current, a node's small-signal resistance). Two points
provide them: :class:`MnaPoint` from full MNA unknowns (the reference path) and :class:`ReducedPoint` from the
fast path's reduced unknowns and block plan.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Protocol

import numpy as np

from mcmatch.config.schema import Measure
from mcmatch.model.circuit import GMIN, Circuit, extend, mosfet_currents, residual_jacobian
from mcmatch.model.devices import DeviceState
from mcmatch.model.reduced import ReducedCircuit, device_state, reduced_residual_jacobian
from mcmatch.model.small_signal import port_resistance
from mcmatch.solve.plan import FastPlan
from mcmatch.solve.ports import reduced_port_resistances


class SolvedPoint(Protocol):
    """Solved samples as the evaluator reads them; every method returns an (S,) array."""

    n_samples: int

    def node_voltage(self, node: int) -> np.ndarray:
        """Voltage [V] of node index `node` (circuit.ground for gnd) to gnd."""

    def mosfet_current(self, k: int) -> np.ndarray:
        """Channel current [A] of MOSFET k, positive in normal conduction."""

    def vsource_current(self, k: int) -> np.ndarray:
        """Current [A] delivered by voltage source k out of its plus terminal into the circuit."""

    def resistance(self, node: int) -> np.ndarray:
        """Small-signal resistance [ohm] from node `node` to gnd; voltage sources shorted, current sources open."""

    def port_resistances(self, sources: list[str]) -> dict[str, np.ndarray]:
        """Small-signal resistance [ohm] seen by each named voltage source looking into the circuit (dV/dI, the
        other voltage sources shorted, current sources open)."""


def element_current(circuit: Circuit, point: SolvedPoint, name: str) -> np.ndarray:
    """Current of the element `name` [A], signed as DESIGN.md section 3 states."""
    if name in circuit.mosfet_names:
        return point.mosfet_current(circuit.mosfet_names.index(name))
    if name in circuit.isource_names:
        return np.full(point.n_samples, circuit.isource_value[circuit.isource_names.index(name)])
    if name in circuit.vsource_names:
        return point.vsource_current(circuit.vsource_names.index(name))
    k = circuit.resistor_names.index(name)
    g = circuit.resistor_conductance[k]
    return g * (point.node_voltage(circuit.resistor_a[k]) - point.node_voltage(circuit.resistor_b[k]))


def evaluate_measures(circuit: Circuit, measures: Mapping[str, Measure], point: SolvedPoint) -> dict[str, np.ndarray]:
    """Every measure at `point`: currents [A], voltages [V], ratio errors ratio/ideal - 1 [1], resistances [ohm]."""
    out: dict[str, np.ndarray] = {}
    ports = list(dict.fromkeys(m.port_resistance for m in measures.values() if m.port_resistance is not None))
    port_values = point.port_resistances(ports) if ports else {}  # every port at once: they share a factorisation
    for key, measure in measures.items():
        if measure.port_resistance is not None:
            out[key] = np.array(port_values[measure.port_resistance], dtype=float, copy=True)
        elif measure.current is not None:
            out[key] = np.array(element_current(circuit, point, measure.current), dtype=float, copy=True)
        elif measure.voltage is not None:
            out[key] = np.array(point.node_voltage(circuit.node_index(measure.voltage)), dtype=float, copy=True)
        elif measure.ratio is not None:
            num = element_current(circuit, point, measure.ratio[0])
            den = element_current(circuit, point, measure.ratio[1])
            ideal = 1.0 if measure.ideal is None else measure.ideal
            with np.errstate(divide="ignore", invalid="ignore"):
                out[key] = num / den / ideal - 1.0
        else:
            out[key] = point.resistance(circuit.node_index(measure.resistance))
    return out


class MnaPoint:
    """Samples solved on the full MNA system: unknowns x (S, n), parameters vth [V], beta [A/V^2] (S, n_devices);
    `jac` (S, n, n), the MNA Jacobian at x, is computed on first need when not given."""

    def __init__(
        self, circuit: Circuit, x: np.ndarray, vth: np.ndarray, beta: np.ndarray, jac: np.ndarray | None = None
    ) -> None:
        self.circuit, self.x, self.vth, self.beta, self.jac = circuit, x, vth, beta, jac
        self.xe = extend(x)
        self.n_samples = x.shape[0]

    def node_voltage(self, node: int) -> np.ndarray:
        return self.xe[:, node]

    def mosfet_current(self, k: int) -> np.ndarray:
        return mosfet_currents(self.circuit, self.xe, self.vth, self.beta, k)[0]

    def vsource_current(self, k: int) -> np.ndarray:
        return self.xe[:, self.circuit.n_nodes + k]

    def resistance(self, node: int) -> np.ndarray:
        # a test current of 1 A injected at the node gives dx = J^-1 e_node; the resistance is its entry at the node
        if self.jac is None:
            _, self.jac = residual_jacobian(self.circuit, self.x, self.vth, self.beta)
        rhs = np.zeros((self.n_samples, self.jac.shape[1], 1))
        rhs[:, node, 0] = 1.0
        return np.linalg.solve(self.jac, rhs)[:, node, 0]

    def port_resistances(self, sources: list[str]) -> dict[str, np.ndarray]:
        if self.jac is None:
            _, self.jac = residual_jacobian(self.circuit, self.x, self.vth, self.beta)
        return {name: port_resistance(self.circuit, self.jac, name) for name in sources}


def mna_measures(
    circuit: Circuit,
    measures: Mapping[str, Measure],
    x: np.ndarray,
    vth: np.ndarray,
    beta: np.ndarray,
    jac: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Every measure at full MNA unknowns x (S, n) (see :class:`MnaPoint`)."""
    return evaluate_measures(circuit, measures, MnaPoint(circuit, x, vth, beta, jac))


class ReducedPoint:
    """Samples solved by the fast path: reduced unknowns u (m, S), parameters vth, beta (n_devices, S), and the
    channel currents [A] the blocks recorded at convergence (used where present; entries of unconverged samples
    are meaningless: those samples are solved again or marked failed)."""

    def __init__(
        self, plan: FastPlan, u: np.ndarray, vth: np.ndarray, beta: np.ndarray, currents: Mapping[int, np.ndarray]
    ) -> None:
        self.plan, self.u, self.vth, self.beta, self.currents = plan, u, vth, beta, currents
        self.reduced = plan.reduced
        self.n_samples = u.shape[1]
        self.states: dict[int, DeviceState] = {}
        self._jacobians: dict[int, dict] = {}
        self._grounded: np.ndarray | None = None

    def state(self, k: int) -> DeviceState:
        if k not in self.states:
            self.states[k] = device_state(self.reduced, self.reduced.stamps[k], self.u, self.vth[k], self.beta[k], "")
        return self.states[k]

    def node_voltage(self, node: int) -> np.ndarray:
        r = self.reduced.position[node]
        if r >= 0:
            return self.u[r]
        circuit = self.reduced.circuit
        return np.full(self.n_samples, self.reduced.node_voltage[circuit.n_nodes if node == circuit.ground else node])

    def mosfet_current(self, k: int) -> np.ndarray:
        return self.currents[k] if k in self.currents else self.state(k).i

    def vsource_current(self, k: int) -> np.ndarray:
        r = self.reduced.position[self.reduced.circuit.n_nodes + k]
        if r >= 0:
            return self.u[r]
        if self._grounded is None:
            self._grounded = grounded_source_currents(self.reduced, self.u, self.state, self.node_voltage)
        return self._grounded[self.reduced.grounded_sources.index(k)]

    def resistance(self, node: int) -> np.ndarray:
        r = self.reduced.position[node]
        if r < 0:  # a node held by voltage sources: shorted for small signals
            return np.zeros(self.n_samples)
        # block-triangular Jacobian: the diagonal block of its inverse is the inverse of the diagonal block
        b, local = self.plan.block_of(int(r))
        block = self.plan.blocks[b]
        if b not in self._jacobians:
            _, self._jacobians[b] = reduced_residual_jacobian(
                block.view, self.u, self.vth, self.beta, states=self.states
            )
        rhs = np.zeros((len(block.unknowns), self.n_samples))
        rhs[local] = 1.0
        y, ok = block.linear.solve(self._jacobians[b], rhs)
        return np.where(ok, y[local], np.nan)

    def port_resistances(self, sources: list[str]) -> dict[str, np.ndarray]:
        return reduced_port_resistances(self.reduced, self.u, self.vth, self.beta, sources, self.plan.u_nominal)


def grounded_source_currents(
    reduced: ReducedCircuit,
    u: np.ndarray,
    state: Callable[[int], DeviceState],
    node_voltage: Callable[[int], np.ndarray],
) -> np.ndarray:
    """Currents [A] delivered by the voltage sources tied to gnd, (n_grounded, S), from KCL at the nodes they hold;
    `state(k)` gives MOSFET k's state at u (m, S), `node_voltage(node)` a node's voltage [V]."""
    circuit = reduced.circuit
    fixed = {node: i for i, node in enumerate(reduced.fixed_nodes)}
    n_samples = u.shape[1]
    leave = np.zeros((len(fixed), n_samples))
    for k in range(len(circuit.mosfet_names)):
        d, s = int(circuit.drain[k]), int(circuit.source[k])
        if d not in fixed and s not in fixed:
            continue
        st = state(k)
        current = circuit.params.polarity[k] * (st.i + GMIN * st.vdiff)
        if d in fixed:
            leave[fixed[d]] += current
        if s in fixed:
            leave[fixed[s]] -= current
    for a, b, g in zip(circuit.resistor_a, circuit.resistor_b, circuit.resistor_conductance, strict=True):
        i = g * (node_voltage(a) - node_voltage(b))
        if int(a) in fixed:
            leave[fixed[int(a)]] += i
        if int(b) in fixed:
            leave[fixed[int(b)]] -= i
    for a, b, value in zip(circuit.isource_from, circuit.isource_to, circuit.isource_value, strict=True):
        if int(a) in fixed:
            leave[fixed[int(a)]] += value
        if int(b) in fixed:
            leave[fixed[int(b)]] -= value
    incidence = np.zeros((len(fixed), len(reduced.grounded_sources)))
    for j, k in enumerate(reduced.grounded_sources):
        plus, minus = int(circuit.vsource_plus[k]), int(circuit.vsource_minus[k])
        if plus in fixed:
            incidence[fixed[plus], j] += 1.0
        if minus in fixed:
            incidence[fixed[minus], j] -= 1.0
    return np.linalg.solve(incidence, leave)
