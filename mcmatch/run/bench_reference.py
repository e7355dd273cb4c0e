"""Per-sample reference solvers for ``mcmatch bench``: ``scipy.optimize.root`` one sample at a time.

Two references, both with analytic Jacobians and scipy's hybrid method, started from the nominal point:

- :func:`designer_solve`: the residual a designer would script for that one bench circuit: the unknown node
  voltages only, KCL at each with the saturation square law (channel-length modulation, body effect) written out by
  hand, the measures computed from the solution. It models exactly what the engine models, including the engine's
  tiny conductance GMIN across every channel (without it the two differ by about 1e-7 relative), so the results must
  agree to the bench's tolerance; a device that left saturation would show up as a disagreement.
- :func:`mna_solve`: the engine's general MNA residual (:func:`mcmatch.model.circuit.residual_jacobian`), every node
  voltage and source current unknown.

The bench circuits are mirror images between polarities: a p-channel circuit hangs from vdd. The designer residual
works in voltages measured from the devices' rail (v' = v for nmos, vdd - v for pmos), where both are the same.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from mcmatch.model.circuit import GMIN, residual_jacobian
from mcmatch.run.study import Study
from mcmatch.solve.measures import mna_measures as measures_at

#: Options of scipy.optimize.root (hybrid method) for both references.
ROOT_OPTIONS = {"xtol": 1e-14}


def mna_solve(study: Study, vth: np.ndarray, beta: np.ndarray) -> tuple[np.ndarray, bool]:
    """One sample on the general MNA residual from the nominal point.

    vth [V], beta [A/V^2]: (n_devices,). Returns the MNA unknowns (n,) and whether scipy converged (or stopped at
    machine precision with a vanishing residual).
    """
    circuit = study.circuit

    def fun(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        f, j = residual_jacobian(circuit, x[None, :], vth[None, :], beta[None, :])
        return f[0], j[0]

    sol = optimize.root(fun, study.x_nominal.copy(), jac=True, method="hybr", options=ROOT_OPTIONS)
    return sol.x, bool(sol.success or np.abs(sol.fun).max() < 1e-18)


def mna_measures(study: Study, vth: np.ndarray, beta: np.ndarray) -> tuple[np.ndarray, dict[str, float], bool]:
    """:func:`mna_solve` and every measure at its solution: (unknowns (n,), {measure: value} [SI], converged)."""
    x, ok = mna_solve(study, vth, beta)
    values = measures_at(study.circuit, study.measures, x[None, :], vth[None, :], beta[None, :])
    return x, {key: float(v[0]) for key, v in values.items()}, ok


# ------------------------------------------------------------------------------------------- designer residuals
def saturation(
    vgs: float, vds: float, vsb: float, vth0: float, beta: float, lam: float, gamma: float, phi: float
) -> tuple[float, float, float, float]:
    """Saturation square law of an n-channel-sense device (Razavi, Design of Analog CMOS Integrated Circuits, ch. 2):
    vt = vth0 + gamma (sqrt(phi + vsb) - sqrt(phi)), i = beta/2 (vgs - vt)^2 (1 + lam vds).

    Returns (i [A], gm, gds, gmb [S]): the current and its derivatives by vgs, vds and vsb (gmb = -di/dvsb).
    """
    root = np.sqrt(phi + vsb)
    vov = vgs - vth0 - gamma * (root - np.sqrt(phi))
    clm = 1.0 + lam * vds
    gm = beta * vov * clm
    return 0.5 * beta * vov * vov * clm, gm, 0.5 * beta * vov * vov * lam, gm * 0.5 * gamma / root


@dataclass(frozen=True)
class Designer:
    """A hand-written bench-circuit reference: ``solve(vth, beta)`` -> ({measure: value} [SI], converged)."""

    solve: Callable[[np.ndarray, np.ndarray], tuple[dict[str, float], bool]]


def designer_reference(study: Study, circuit: str, kind: str) -> Designer:
    """The hand-written reference of bench circuit `circuit` ("simple", "cascode", "bank") in polarity `kind`; the
    supply VDD, the reference current IREF and the output voltages (VOUT, VCH0..) are read from the study's netlist."""
    c = study.circuit
    supply = float(c.vsource_value[c.vsource_names.index("VDD")])
    iref = float(c.isource_value[c.isource_names.index("IREF")])
    held = {name: float(v) for name, v in zip(c.vsource_names, c.vsource_value, strict=True)}
    p = study.circuit.params
    index = {name: k for k, name in enumerate(study.circuit.mosfet_names)}
    lam = {name: float(p.lam[k]) for name, k in index.items()}
    gamma = {name: float(p.gamma[k]) for name, k in index.items()}
    phi = {name: float(p.phi[k]) for name, k in index.items()}
    nodes = {name: i for i, name in enumerate(study.circuit.nodes)}
    pmos = kind == "pmos"

    def from_rail(v: float) -> float:  # node voltage [V] -> distance from the devices' rail [V]
        return supply - v if pmos else v

    out = from_rail(held.get("VOUT", 0.0))

    def device(name: str, vth: np.ndarray, beta: np.ndarray, vg: float, vd: float, vs: float, vb: float = 0.0):
        k = index[name]
        return saturation(vg - vs, vd - vs, vs - vb, vth[k], beta[k], lam[name], gamma[name], phi[name])

    def root(fun, guess: np.ndarray) -> tuple[np.ndarray, bool]:
        sol = optimize.root(fun, guess, jac=True, method="hybr", options=ROOT_OPTIONS)
        return sol.x, bool(sol.success or np.abs(sol.fun).max() < 1e-18)

    if circuit in ("simple", "bank"):
        # one unknown, the gate node nb; KCL: iref = I(MREF) + GMIN nb; the outputs at the fixed output voltage
        guess_nb = np.array([from_rail(study.x_nominal[nodes["nb"]])])
        outputs = ["MOUT"] if circuit == "simple" else sorted(n for n in index if n.startswith("MCH"))

        def solve(vth: np.ndarray, beta: np.ndarray) -> tuple[dict[str, float], bool]:
            def fun(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
                i, gm, gds, _ = device("MREF", vth, beta, x[0], x[0], 0.0)
                return np.array([iref - i - GMIN * x[0]]), np.array([[-(gm + gds + GMIN)]])

            x, ok = root(fun, guess_nb)
            nb = float(x[0])
            _, gm, gds, _ = device("MREF", vth, beta, nb, nb, 0.0)
            values = {"v_nb": supply - nb if pmos else nb, "r_nb": 1.0 / (gm + gds + GMIN)}  # Razavi: 1/(gm + gds)
            for name in outputs:
                drain = out if circuit == "simple" else from_rail(held["VCH" + name.removeprefix("MCH")])
                i_out = float(device(name, vth, beta, nb, drain, 0.0)[0])
                if circuit == "simple":
                    values |= {"i_out": i_out, "gain_error": i_out / iref / 4.0 - 1.0}
                else:
                    channel = name.removeprefix("MCH")
                    values |= {f"i_ch{channel}": i_out, f"err_ch{channel}": i_out / iref / 2.0 - 1.0}
            return values, ok

        return Designer(solve)
    if circuit == "cascode":
        # unknowns n1 (M3 diode), nc (M4 diode above it), x (between M1 and the cascode M2); bulks on the rail
        guess = np.array([from_rail(study.x_nominal[nodes[n]]) for n in ("n1", "nc", "x")])

        def solve(vth: np.ndarray, beta: np.ndarray) -> tuple[dict[str, float], bool]:
            def fun(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
                n1, nc, x = u
                i3, gm3, gds3, _ = device("M3", vth, beta, n1, n1, 0.0)
                i4, gm4, gds4, gmb4 = device("M4", vth, beta, nc, nc, n1)
                i1, gm1, gds1, _ = device("M1", vth, beta, n1, x, 0.0)
                i2, gm2, gds2, gmb2 = device("M2", vth, beta, nc, out, x)
                g4 = gm4 + gds4 + GMIN  # d(I4 + GMIN (nc - n1))/d nc; its d/d n1 is -(g4 + gmb4)
                f = np.array(
                    [
                        iref - i4 - GMIN * (nc - n1),  # KCL at nc
                        i4 + GMIN * (nc - n1) - i3 - GMIN * n1,  # KCL at n1
                        i2 + GMIN * (out - x) - i1 - GMIN * x,  # KCL at x
                    ]
                )
                j = np.array(
                    [
                        [g4 + gmb4, -g4, 0.0],
                        [-(g4 + gmb4) - (gm3 + gds3 + GMIN), g4, 0.0],
                        [-gm1, gm2, -(gm2 + gds2 + gmb2 + GMIN) - (gds1 + GMIN)],
                    ]
                )
                return f, j

            u, ok = root(fun, guess)
            n1, nc, x = (float(v) for v in u)
            i2 = float(device("M2", vth, beta, nc, out, x)[0])
            _, gm4, gds4, gmb4 = device("M4", vth, beta, nc, nc, n1)
            _, gm3, gds3, _ = device("M3", vth, beta, n1, n1, 0.0)
            # small-signal resistance at nc: the diode stack M4 over M3 (Razavi, ch. 3: a source-degenerated diode)
            g4, g3 = gm4 + gds4 + GMIN, gm3 + gds3 + GMIN
            r_nc = 1.0 / g4 + (g4 + gmb4) / (g4 * g3)
            values = {"i_out": i2, "gain_error": i2 / iref - 1.0, "v_x": supply - x if pmos else x, "r_nc": r_nc}
            return values, ok

        return Designer(solve)
    raise ValueError(f"no designer reference for bench circuit {circuit!r}")
