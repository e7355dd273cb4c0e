"""MOSFET device models: one entry point per question, dispatching to the square law or EKV.

The equations live once, in :mod:`mcmatch.model.square_law` and :mod:`mcmatch.model.ekv`; every path (the reference
MNA system, the fast reduced system, the sensitivities and the operating-point descriptions) reaches them through
here. Pure numpy, vectorised over broadcastable arrays (typically a leading sample axis), float64. Voltages are in the
n-channel sense: the caller mirrors a p-channel device by negating its four terminal voltages and negating the
returned current and derivatives. Currents flow from drain to source [A]; derivatives are with respect to the drain,
gate, source and bulk voltages [S], second derivatives [A/V^2].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mcmatch.model.ekv import (
    EKV_CUTOFF_IC,
    ekv,
    ekv_hessian,
    ekv_inversion_coefficient,
    ekv_saturation_voltage,
    ekv_state,
    ekv_threshold,
)
from mcmatch.model.square_law import (
    PHI_CLAMP_FRACTION,
    square_law,
    square_law_hessian,
    square_law_saturation_voltage,
    square_law_state,
    square_law_threshold,
)
from mcmatch.model.state import DeviceCurrents, DeviceState, FloatArray, as_arrays, finish

__all__ = [
    "EKV",
    "EKV_CUTOFF_IC",
    "PHI_CLAMP_FRACTION",
    "REGIONS",
    "SQUARE_LAW",
    "DeviceCurrents",
    "DevicePoint",
    "DeviceState",
    "device_point",
    "ekv",
    "ekv_hessian",
    "ekv_inversion_coefficient",
    "ekv_saturation_voltage",
    "ekv_threshold",
    "mosfet_hessian",
    "mosfet_state",
    "square_law",
    "square_law_hessian",
    "square_law_saturation_voltage",
    "square_law_threshold",
    "thermal_voltage",
]

#: Boltzmann constant [J/K] and elementary charge [C]: exact by the definition of the SI (2019), so written out here
#: rather than imported (scipy.constants would cost every run 0.1-0.2 s of start-up; a test checks the two agree).
BOLTZMANN = 1.380649e-23
ELEMENTARY_CHARGE = 1.602176634e-19

#: Model codes (DeviceParameters.model).
SQUARE_LAW = 0
EKV = 1

#: Region codes of :class:`DevicePoint` and their names.
CUTOFF, TRIODE, SATURATION = 0, 1, 2
REGIONS = ("cutoff", "triode", "saturation")


def thermal_voltage(temperature: FloatArray) -> FloatArray:
    """Thermal voltage U_T = k T / q [V] at absolute temperature [K], with the exact SI constants k and e.

    300 K gives 25.852 mV.
    """
    t = np.asarray(temperature, dtype=np.float64)
    return finish(BOLTZMANN * t / ELEMENTARY_CHARGE)


def mosfet_state(
    model: int,
    vd: np.ndarray | float,
    vg: np.ndarray | float,
    vs: np.ndarray | float,
    vb: np.ndarray | float,
    vth0: np.ndarray | float,
    beta: np.ndarray | float,
    lam: FloatArray,
    gamma: FloatArray,
    phi: FloatArray,
    slope: FloatArray,
    ut: FloatArray,
    need: str = "dgsb",
) -> DeviceState:
    """Current and first derivatives of one MOSFET of `model` (SQUARE_LAW or EKV) at a batch of points.

    Parameters: terminal voltages [V] (arrays of one shape, floats for fixed terminals); vth0 [V], beta [A/V^2] per
    sample; lam [1/V]; gamma [V^0.5] and phi [V] (square law); slope factor n [1] and ut [V] (EKV). `need` names
    the derivatives wanted, of "dgsb" (the square law may leave the others None; EKV computes all).
    """
    if model == EKV:
        return ekv_state(vd, vg, vs, vb, vth0, beta, lam, slope, ut)
    return square_law_state(vd, vg, vs, vb, vth0, beta, lam, gamma, phi, need)


def mosfet_hessian(
    model: int,
    vd: FloatArray,
    vg: FloatArray,
    vs: FloatArray,
    vb: FloatArray,
    vth0: FloatArray,
    beta: FloatArray,
    lam: FloatArray,
    gamma: FloatArray,
    phi: FloatArray,
    slope: FloatArray,
    ut: FloatArray,
) -> np.ndarray:
    """Hessian (..., 4, 4) [A/V^2] of the current in (vd, vg, vs, vb); arguments as :func:`mosfet_state`."""
    if model == EKV:
        return ekv_hessian(vd, vg, vs, vb, vth0, beta, lam, slope, ut)
    return square_law_hessian(vd, vg, vs, vb, vth0, beta, lam, gamma, phi)


@dataclass(frozen=True)
class DevicePoint:
    """A MOSFET's operating point, described in its conducting frame (the higher of drain and source acts as drain).

    reversed: conducting with drain and source swapped; vgs, vds, vsb [V]; vth [V] (square law: with body effect;
    EKV: vth0 + (n - 1) vsb); vov = vgs - vth [V]; vdsat [V] (square law: vov clipped at 0; EKV: 2 U_T sqrt(IC + 0.25)
    + 3 U_T); headroom = vds - vdsat [V]; i [A], gm, gds, gmb [S]; ic = max(i, 0) / (2 n beta U_T^2) [1]; region:
    CUTOFF (square law vov <= 0; EKV IC < EKV_CUTOFF_IC), TRIODE (vds < vdsat) or SATURATION. Arrays of the
    broadcast input shape (0-d for scalar inputs).
    """

    reversed: np.ndarray
    vgs: np.ndarray
    vds: np.ndarray
    vsb: np.ndarray
    vth: np.ndarray
    vov: np.ndarray
    vdsat: np.ndarray
    headroom: np.ndarray
    i: np.ndarray
    gm: np.ndarray
    gds: np.ndarray
    gmb: np.ndarray
    ic: np.ndarray
    region: np.ndarray


def device_point(
    model: int,
    vd: FloatArray,
    vg: FloatArray,
    vs: FloatArray,
    vb: FloatArray,
    vth0: FloatArray,
    beta: FloatArray,
    lam: FloatArray,
    gamma: FloatArray,
    phi: FloatArray,
    slope: FloatArray,
    ut: FloatArray,
) -> DevicePoint:
    """Operating point of one MOSFET of `model` at a batch of points; arguments as :func:`mosfet_state`."""
    vd, vg, vs, vb, vth0, beta, lam, gamma, phi, slope, ut = as_arrays(
        vd, vg, vs, vb, vth0, beta, lam, gamma, phi, slope, ut
    )
    reverse = vd < vs
    high, low = np.where(reverse, vs, vd), np.where(reverse, vd, vs)
    vgs, vds, vsb = vg - low, high - low, low - vb
    state = mosfet_state(model, high, vg, low, vb, vth0, beta, lam, gamma, phi, slope, ut)
    i, gds, gm, _, gmb = (np.asarray(v) for v in state.currents())
    ic = np.asarray(ekv_inversion_coefficient(np.maximum(i, 0.0), beta, slope, ut))
    if model == EKV:
        vth = np.asarray(ekv_threshold(vsb, vth0, slope))
        vdsat = np.asarray(ekv_saturation_voltage(ic, ut))
        cutoff = ic < EKV_CUTOFF_IC
    else:
        vth = np.asarray(square_law_threshold(vsb, vth0, gamma, phi))
        vdsat = np.asarray(square_law_saturation_voltage(vgs, vsb, vth0, gamma, phi))
        cutoff = vgs - vth <= 0.0
    region = np.where(cutoff, CUTOFF, np.where(vds < vdsat, TRIODE, SATURATION))
    return DevicePoint(reverse, vgs, vds, vsb, vth, vgs - vth, vdsat, vds - vdsat, i, gm, gds, gmb, ic, region)
