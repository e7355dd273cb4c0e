"""Saturation headroom Vds - Vdsat of every MOSFET on sample batches: the batched form of the headroom that
:func:`mcmatch.model.operating_point.device_operating_points` reports for one point.

Same definitions: magnitudes in the designer's convention (a pmos's Vsd), a device conducting backwards seen with
drain and source swapped; Vdsat is Vov = Vgs - Vt (with body effect, clipped at 0) for the square law and
2 U_T sqrt(IC + 0.25) + 3 U_T for EKV (:func:`mcmatch.model.operating_point.ekv_saturation_voltage`). Pure numpy,
leading sample axis.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from mcmatch.config.schema import RESERVED_COLUMNS
from mcmatch.model.circuit import Circuit
from mcmatch.model.devices import ekv, ekv_inversion_coefficient, square_law_threshold
from mcmatch.model.reduced import ReducedCircuit
from mcmatch.model.technology import EKV

#: Column of the per-sample smallest headroom [V] in the engine's sample tables (a reserved name, config/schema.py).
HEADROOM_COLUMN = "min_headroom"
assert HEADROOM_COLUMN in RESERVED_COLUMNS

Terminal = Callable[[int], "np.ndarray | float"]


def headroom_rows(circuit: Circuit, terminal: Terminal, vth: np.ndarray, beta: np.ndarray) -> list:
    """Headroom Vds - Vdsat [V] of each device, one (S,) row (or a float) per device, sample-last.

    terminal(node): the voltage [V] of MNA node index `node` (gnd included) as an (S,) row, or a float for a node
    held at a fixed voltage; vth, beta: (n_devices, S) per-sample threshold magnitude [V] and beta [A/V^2].
    """
    p = circuit.params
    rows = []
    for k in range(p.count):
        pol = float(p.polarity[k])
        nodes = (circuit.drain[k], circuit.gate[k], circuit.source[k], circuit.bulk[k])
        vd, vg, vs, vb = (terminal(int(n)) if pol > 0 else -terminal(int(n)) for n in nodes)
        reverse = np.less(vd, vs)
        if np.any(reverse):  # conducting backwards: seen with drain and source swapped
            vd, vs = np.where(reverse, vs, vd), np.where(reverse, vd, vs)
        if p.model[k] == EKV:
            i = ekv(vd, vg, vs, vb, vth[k], beta[k], p.lam[k], p.slope[k], p.ut)[0]
            ic = ekv_inversion_coefficient(np.maximum(i, 0.0), beta[k], p.slope[k], p.ut)
            vdsat = 2.0 * p.ut * np.sqrt(ic + 0.25) + 3.0 * p.ut
        else:
            # square_law_saturation_voltage, with the body effect computed once where the source and bulk are held
            body = square_law_threshold(vs - vb, 0.0, p.gamma[k], p.phi[k]) if p.gamma[k] != 0.0 else 0.0
            vdsat = np.maximum((vg - vs) - (vth[k] + body), 0.0)
        rows.append((vd - vs) - vdsat)
    return rows


def device_headroom(circuit: Circuit, xe: np.ndarray, vth: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Headroom Vds - Vdsat [V] per sample and device, (S, n_devices), at extended MNA unknowns xe (S, n + 1)
    (:func:`mcmatch.model.circuit.extend`; only node voltages are read); vth, beta: (S, n_devices)."""
    xt = np.ascontiguousarray(np.asarray(xe).T)
    rows = headroom_rows(circuit, lambda node: xt[node], np.asarray(vth).T, np.asarray(beta).T)
    out = np.empty((xt.shape[1], circuit.params.count))
    for k, row in enumerate(rows):
        out[:, k] = row
    return out


def min_headroom(circuit: Circuit, terminal: Terminal, vth: np.ndarray, beta: np.ndarray, n_samples: int) -> np.ndarray:
    """The smallest headroom over the devices [V] per sample, (S,), sample-last inputs as in :func:`headroom_rows`;
    +inf for a circuit without MOSFETs."""
    out = np.full(n_samples, np.inf)
    with np.errstate(all="ignore"):  # unconverged samples hold meaningless voltages; the caller masks them
        for row in headroom_rows(circuit, terminal, vth, beta):
            np.minimum(out, row, out=out)
    return out


def mna_terminal(xe: np.ndarray) -> Terminal:
    """:data:`Terminal` reading extended MNA unknowns xe (S, n + 1) (a copy, sample-last)."""
    xt = np.ascontiguousarray(np.asarray(xe).T)
    return lambda node: xt[node]


def reduced_terminal(reduced: ReducedCircuit, u: np.ndarray) -> Terminal:
    """:data:`Terminal` reading reduced unknowns u (m, S) of the fast path; held nodes give floats."""
    circuit = reduced.circuit

    def terminal(node: int) -> np.ndarray | float:
        if node == circuit.ground:
            return 0.0
        r = reduced.position[node]
        return u[r] if r >= 0 else float(reduced.node_voltage[node])

    return terminal
