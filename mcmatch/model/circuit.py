"""A netlist compiled to index arrays, and its modified-nodal-analysis residual and Jacobian on sample batches.

Unknowns, per sample: the node voltages [V] (gnd excluded) followed by the voltage sources' branch currents [A]
(current delivered out of `plus` into the circuit). Residual rows: the current leaving each node through the
elements [A] (Kirchhoff's current law), then V(plus) - V(minus) - value [V] per voltage source.
Arrays carry a leading sample axis; this module knows nothing of files, random numbers or parallelism.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from mcmatch.config.schema import GROUND, Netlist
from mcmatch.model.devices import mosfet_state
from mcmatch.model.technology import DeviceParameters

#: Conductance across every MOSFET channel [S]; keeps a cut-off device's nodes defined. Part of the model, so the
#: reference solver and the batched one solve the same equations.
GMIN = 1e-12


@dataclass(frozen=True)
class Circuit:
    """Index form of a netlist. Node index `ground` (== n_unknowns) stands for gnd and is always 0 V."""

    nodes: tuple[str, ...]
    mosfet_names: tuple[str, ...]
    drain: np.ndarray
    gate: np.ndarray
    source: np.ndarray
    bulk: np.ndarray
    params: DeviceParameters
    vsource_names: tuple[str, ...]
    vsource_plus: np.ndarray
    vsource_minus: np.ndarray
    vsource_value: np.ndarray
    isource_names: tuple[str, ...]
    isource_from: np.ndarray
    isource_to: np.ndarray
    isource_value: np.ndarray
    resistor_names: tuple[str, ...]
    resistor_a: np.ndarray
    resistor_b: np.ndarray
    resistor_conductance: np.ndarray

    @property
    def n_nodes(self) -> int:
        return len(self.nodes)

    @property
    def n_unknowns(self) -> int:
        return len(self.nodes) + len(self.vsource_names)

    @property
    def ground(self) -> int:
        return self.n_unknowns

    def node_index(self, name: str) -> int:
        return self.ground if name == GROUND else self.nodes.index(name)

    def with_params(self, params: DeviceParameters) -> Circuit:
        return replace(self, params=params)

    def with_voltage(self, name: str, value: float) -> Circuit:
        """A copy with voltage source `name` set to `value` [V]."""
        values = self.vsource_value.copy()
        values[self.vsource_names.index(name)] = value
        return replace(self, vsource_value=values)


def compile_circuit(netlist: Netlist, params: DeviceParameters) -> Circuit:
    """Index arrays of `netlist` with device parameters `params` (from technology.device_parameters)."""
    nodes = tuple(netlist.nodes)
    n_unknowns = len(nodes) + len(netlist.voltage_source)

    def idx(name: str) -> int:
        return n_unknowns if name == GROUND else nodes.index(name)

    def arr(values: list[int]) -> np.ndarray:
        return np.array(values, dtype=np.intp)

    ms = netlist.mosfet
    return Circuit(
        nodes=nodes,
        mosfet_names=tuple(m.name for m in ms),
        drain=arr([idx(m.drain) for m in ms]),
        gate=arr([idx(m.gate) for m in ms]),
        source=arr([idx(m.source) for m in ms]),
        bulk=arr([idx(m.bulk_node) for m in ms]),
        params=params,
        vsource_names=tuple(v.name for v in netlist.voltage_source),
        vsource_plus=arr([idx(v.plus) for v in netlist.voltage_source]),
        vsource_minus=arr([idx(v.minus) for v in netlist.voltage_source]),
        vsource_value=np.array([v.value for v in netlist.voltage_source], dtype=float),
        isource_names=tuple(c.name for c in netlist.current_source),
        isource_from=arr([idx(c.from_) for c in netlist.current_source]),
        isource_to=arr([idx(c.to) for c in netlist.current_source]),
        isource_value=np.array([c.value for c in netlist.current_source], dtype=float),
        resistor_names=tuple(r.name for r in netlist.resistor),
        resistor_a=arr([idx(r.a) for r in netlist.resistor]),
        resistor_b=arr([idx(r.b) for r in netlist.resistor]),
        resistor_conductance=np.array([1.0 / r.value for r in netlist.resistor], dtype=float),
    )


def extend(x: np.ndarray) -> np.ndarray:
    """Append the always-zero ground entry: (S, n) -> (S, n + 1)."""
    return np.concatenate([x, np.zeros((x.shape[0], 1))], axis=1)


def mosfet_currents(
    circuit: Circuit, xe: np.ndarray, vth: np.ndarray, beta: np.ndarray, k: int
) -> tuple[np.ndarray, ...]:
    """Channel current of MOSFET k [A] (positive in normal conduction) and d(drain-leaving current)/d(vd, vg, vs, vb).

    Derivatives in [S].

    xe: extended unknowns (S, n + 1); vth, beta: (S, n_devices) per-sample threshold magnitude [V] and beta [A/V^2].
    """
    p = circuit.params
    pol = p.polarity[k]
    vd = pol * xe[:, circuit.drain[k]]
    vg = pol * xe[:, circuit.gate[k]]
    vs = pol * xe[:, circuit.source[k]]
    vb = pol * xe[:, circuit.bulk[k]]
    state = mosfet_state(
        p.model[k], vd, vg, vs, vb, vth[:, k], beta[:, k], p.lam[k], p.gamma[k], p.phi[k], p.slope[k], p.ut
    )
    return state.currents()


def residual_jacobian(
    circuit: Circuit, x: np.ndarray, vth: np.ndarray, beta: np.ndarray, source_scale: float = 1.0, gmin: float = GMIN
) -> tuple[np.ndarray, np.ndarray]:
    """MNA residual F (S, n) and Jacobian dF/dx (S, n, n) at unknowns x (S, n).

    vth, beta: (S, n_devices) per-sample device parameters; source_scale scales every independent source
    (source stepping); gmin [S] is placed across every MOSFET channel.
    """
    n_samples, n = x.shape
    xe = extend(x)
    f = np.zeros((n_samples, n + 1))
    jac = np.zeros((n_samples, n + 1, n + 1))
    nn = circuit.n_nodes
    for k in range(len(circuit.mosfet_names)):
        i, di_d, di_g, di_s, di_b = mosfet_currents(circuit, xe, vth, beta, k)
        d, g, s, b = circuit.drain[k], circuit.gate[k], circuit.source[k], circuit.bulk[k]
        pol = circuit.params.polarity[k]
        leave = pol * i + gmin * (xe[:, d] - xe[:, s])
        f[:, d] += leave
        f[:, s] -= leave
        for node, sign in ((d, 1.0), (s, -1.0)):
            jac[:, node, d] += sign * (di_d + gmin)
            jac[:, node, g] += sign * di_g
            jac[:, node, s] += sign * (di_s - gmin)
            jac[:, node, b] += sign * di_b
    for a, b, g in zip(circuit.resistor_a, circuit.resistor_b, circuit.resistor_conductance, strict=True):
        i = g * (xe[:, a] - xe[:, b])
        f[:, a] += i
        f[:, b] -= i
        jac[:, a, a] += g
        jac[:, a, b] -= g
        jac[:, b, a] -= g
        jac[:, b, b] += g
    for a, b, value in zip(circuit.isource_from, circuit.isource_to, circuit.isource_value, strict=True):
        f[:, a] += value * source_scale
        f[:, b] -= value * source_scale
    for k, (plus, minus, value) in enumerate(
        zip(circuit.vsource_plus, circuit.vsource_minus, circuit.vsource_value, strict=True)
    ):
        row = nn + k
        branch = x[:, row]
        f[:, plus] -= branch
        f[:, minus] += branch
        jac[:, plus, row] -= 1.0
        jac[:, minus, row] += 1.0
        f[:, row] = xe[:, plus] - xe[:, minus] - value * source_scale
        jac[:, row, plus] += 1.0
        jac[:, row, minus] -= 1.0
    return f[:, :n], jac[:, :n, :n]


def voltage_mask(circuit: Circuit) -> np.ndarray:
    """Boolean (n,) mask of the unknowns that are node voltages (not branch currents)."""
    mask = np.zeros(circuit.n_unknowns, dtype=bool)
    mask[: circuit.n_nodes] = True
    return mask
