"""Linearised sensitivities of the measures to every device's threshold and beta, by the implicit function theorem.

At a solved operating point F(x, p) = 0, so dx/dp = -J^-1 dF/dp with J = dF/dx the MNA Jacobian. dF/dp is analytic:
a threshold shift enters the square law and EKV exactly like a gate-voltage shift of opposite sign, so in a device's
own (n-channel mirrored) frame d i / d vth = -d i / d vg; both models are linear in beta, so d i / d(dbeta/beta) = i.
A p-channel device's drain-leaving current is polarity * i(polarity * V); its vth is the threshold magnitude.
Measures that are functions of x (currents, voltages, ratios) chain through. A node resistance r = e^T J^-1 e needs
the derivative of J itself: dr/dp = -e^T J^-1 (dJ/dp) J^-1 e, with dJ/dp from the analytic Hessian of each device
current in its four terminal voltages (:func:`mcmatch.model.devices.mosfet_hessian`), applied along dx/dp, plus the
direct terms of vth (minus the gate column) and beta.

Pure numpy on one operating point; no finite differences.
"""

from __future__ import annotations

import numpy as np

from mcmatch.config.schema import Measure
from mcmatch.model.circuit import Circuit, extend, mosfet_currents, residual_jacobian
from mcmatch.model.devices import mosfet_hessian
from mcmatch.model.small_signal import branch_unknown, port_resistance

VTH = "vth"
BETA = "beta"


def parameter_labels(circuit: Circuit) -> list[tuple[str, str]]:
    """(device, parameter) of every column of the parameter axis: each device's vth, then each device's beta."""
    names = circuit.mosfet_names
    return [(n, VTH) for n in names] + [(n, BETA) for n in names]


def parameter_sigmas(circuit: Circuit) -> np.ndarray:
    """Single-device Pelgrom sigmas along the parameter axis: vth [V], then dbeta/beta [1]; shape (2 n_devices,)."""
    p = circuit.params
    return np.concatenate([p.sigma_vth, p.sigma_beta]).astype(float)


def _nominal(circuit: Circuit, x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    p = circuit.params
    return np.asarray(x, dtype=float).reshape(1, -1), p.vth[None, :], p.beta[None, :]


def residual_parameter_derivatives(circuit: Circuit, x: np.ndarray) -> np.ndarray:
    """dF/dp (n, 2 n_devices) at unknowns x (n,): columns vth [A/V], then dbeta/beta [A]."""
    x1, vth, beta = _nominal(circuit, x)
    xe = extend(x1)
    nd = len(circuit.mosfet_names)
    n = circuit.n_unknowns
    dfdp = np.zeros((n + 1, 2 * nd))
    for k in range(nd):
        i, _, di_g, _, _ = mosfet_currents(circuit, xe, vth, beta, k)
        pol = circuit.params.polarity[k]
        d, s = circuit.drain[k], circuit.source[k]
        for col, value in ((k, -pol * di_g[0]), (nd + k, pol * i[0])):
            dfdp[d, col] += value
            dfdp[s, col] -= value
    return dfdp[:n]


def state_sensitivities(circuit: Circuit, x: np.ndarray) -> np.ndarray:
    """dx/dp (n, 2 n_devices) = -J^-1 dF/dp at the solved unknowns x (n,) [V/V, V, A/V, A]."""
    x1, vth, beta = _nominal(circuit, x)
    _, jac = residual_jacobian(circuit, x1, vth, beta)
    return -np.linalg.solve(jac[0], residual_parameter_derivatives(circuit, x))


def _current_and_gradient(circuit: Circuit, xe: np.ndarray, dxe: np.ndarray, name: str) -> tuple[float, np.ndarray]:
    """Element current [A] (signed as in circuit.element_current) and its gradient along the parameter axis."""
    p = circuit.params
    nd = len(circuit.mosfet_names)
    if name in circuit.mosfet_names:
        k = circuit.mosfet_names.index(name)
        i, di_d, di_g, di_s, di_b = (float(v[0]) for v in mosfet_currents(circuit, xe, p.vth[None], p.beta[None], k))
        pol = p.polarity[k]
        grad = pol * (
            di_d * dxe[circuit.drain[k]]
            + di_g * dxe[circuit.gate[k]]
            + di_s * dxe[circuit.source[k]]
            + di_b * dxe[circuit.bulk[k]]
        )
        grad[k] -= di_g
        grad[nd + k] += i
        return i, grad
    if name in circuit.isource_names:
        return float(circuit.isource_value[circuit.isource_names.index(name)]), np.zeros(2 * nd)
    if name in circuit.vsource_names:
        row = circuit.n_nodes + circuit.vsource_names.index(name)
        return float(xe[0, row]), dxe[row].copy()
    k = circuit.resistor_names.index(name)
    g, a, b = circuit.resistor_conductance[k], circuit.resistor_a[k], circuit.resistor_b[k]
    return float(g * (xe[0, a] - xe[0, b])), g * (dxe[a] - dxe[b])


def device_hessian(circuit: Circuit, x: np.ndarray, k: int) -> np.ndarray:
    """Hessian (4, 4) of MOSFET k's current in its own (n-channel mirrored) frame, order drain, gate, source, bulk."""
    p = circuit.params
    xe = extend(np.asarray(x, dtype=float).reshape(1, -1))[0]
    pol = p.polarity[k]
    volts = [pol * xe[node] for node in (circuit.drain[k], circuit.gate[k], circuit.source[k], circuit.bulk[k])]
    return mosfet_hessian(p.model[k], *volts, p.vth[k], p.beta[k], p.lam[k], p.gamma[k], p.phi[k], p.slope[k], p.ut)


def jacobian_parameter_derivatives(circuit: Circuit, x: np.ndarray) -> np.ndarray:
    """Total derivative of the MNA Jacobian along each parameter, dJ/dp (2 n_devices, n, n), at the solved x (n,).

    dJ/dp = dJ/dp|_x + sum_j dJ/dx_j dx_j/dp; only MOSFET entries change (resistors and sources are constant).
    """
    x1, vth, beta = _nominal(circuit, x)
    xe = extend(x1)
    dx = state_sensitivities(circuit, x)
    dxe = np.vstack([dx, np.zeros((1, dx.shape[1]))])
    nd = len(circuit.mosfet_names)
    n = circuit.n_unknowns
    out = np.zeros((2 * nd, n + 1, n + 1))
    for k in range(nd):
        _, *first = mosfet_currents(circuit, xe, vth, beta, k)
        first = np.array([float(v[0]) for v in first])
        hess = device_hessian(circuit, x, k)
        nodes = [circuit.drain[k], circuit.gate[k], circuit.source[k], circuit.bulk[k]]
        pol = circuit.params.polarity[k]
        d_first = hess @ (pol * dxe[nodes])  # (4, 2 nd): change of each conductance along each parameter
        d_first[:, k] -= hess[:, 1]  # vth acts as minus the gate voltage
        d_first[:, nd + k] += first  # linear in beta
        for row, sign in ((circuit.drain[k], 1.0), (circuit.source[k], -1.0)):
            for y, node in enumerate(nodes):
                out[:, row, node] += sign * d_first[y]
    return out[:, :n, :n]


def resistance_sensitivity(circuit: Circuit, x: np.ndarray, node: int) -> np.ndarray:
    """d r / d p for the resistance r = e^T J^-1 e seen at unknown `node` [ohm/V, ohm]: -e^T J^-1 (dJ/dp) J^-1 e."""
    x1, vth, beta = _nominal(circuit, x)
    _, jac = residual_jacobian(circuit, x1, vth, beta)
    e = np.zeros(circuit.n_unknowns)
    e[node] = 1.0
    right = np.linalg.solve(jac[0], e)
    left = np.linalg.solve(jac[0].T, e)
    return -np.einsum("i,pij,j->p", left, jacobian_parameter_derivatives(circuit, x), right)


def measure_sensitivities(
    circuit: Circuit, measures: dict[str, Measure], x: np.ndarray
) -> dict[str, np.ndarray | None]:
    """d(measure)/d(parameter) along the parameter axis of :func:`parameter_labels`, per measure [SI].

    Per volt for vth, per unit fraction for beta. None for a ratio whose denominator is zero at the operating point.
    """
    x1, _, _ = _nominal(circuit, x)
    xe = extend(x1)
    dx = state_sensitivities(circuit, x)
    dxe = np.vstack([dx, np.zeros((1, dx.shape[1]))])  # the ground row: always 0 V
    out: dict[str, np.ndarray | None] = {}
    for key, measure in measures.items():
        if measure.voltage is not None:
            out[key] = dxe[circuit.node_index(measure.voltage)].copy()
        elif measure.current is not None:
            out[key] = _current_and_gradient(circuit, xe, dxe, measure.current)[1]
        elif measure.ratio is not None:
            num, dnum = _current_and_gradient(circuit, xe, dxe, measure.ratio[0])
            den, dden = _current_and_gradient(circuit, xe, dxe, measure.ratio[1])
            ideal = 1.0 if measure.ideal is None else measure.ideal
            out[key] = (dnum / den - num * dden / den**2) / ideal if den != 0 else None
        elif measure.port_resistance is not None:  # r = 1 / (e_b^T J^-1 e_b): dr = -r^2 d(e_b^T J^-1 e_b)
            b = branch_unknown(circuit, measure.port_resistance)
            r = port_resistance(circuit, residual_jacobian(circuit, *_nominal(circuit, x))[1], measure.port_resistance)
            out[key] = -(float(r[0]) ** 2) * resistance_sensitivity(circuit, x, b)
        else:
            out[key] = resistance_sensitivity(circuit, x, circuit.node_index(measure.resistance))
    return out
