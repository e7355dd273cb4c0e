"""MOSFET drain-current models with analytic derivatives: square law and EKV.

Pure numpy functions, vectorised over broadcastable arrays (typically a leading sample axis), computed in float64.
Voltages are in the n-channel sense: the caller mirrors a p-channel device by negating its four terminal voltages and
negating the returned current and derivatives. Both models return ``(i, di_dvd, di_dvg, di_dvs, di_dvb)``: the channel
current flowing from drain to source [A] and its partial derivatives [S] with respect to the drain, gate, source and
bulk voltages [V]. Scalar inputs give numpy float64 scalars; array inputs give arrays of the broadcast shape.
"""

from __future__ import annotations

import numpy as np
import scipy.constants
from scipy.special import expit

FloatArray = float | np.ndarray
DeviceCurrents = tuple[FloatArray, FloatArray, FloatArray, FloatArray, FloatArray]

PHI_CLAMP_FRACTION = 0.1
"""``phi + vsb`` is clamped from below at this fraction of ``phi`` so the body-effect square root stays real."""


def _as_arrays(*values: FloatArray) -> list[np.ndarray]:
    """Convert to float64 and broadcast to one common shape (read-only views, no copies)."""
    return np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in values))


def _finish(value: np.ndarray) -> FloatArray:
    """Return a numpy float64 scalar for 0-d results, the array otherwise."""
    return value[()] if np.ndim(value) == 0 else value


def thermal_voltage(temperature: FloatArray) -> FloatArray:
    """Thermal voltage U_T = k T / q [V] at absolute temperature [K], with the exact SI constants k and e.

    300 K gives 25.852 mV.
    """
    t = np.asarray(temperature, dtype=np.float64)
    return _finish(scipy.constants.k * t / scipy.constants.e)


def _threshold(vsb: np.ndarray, vth0: np.ndarray, gamma: np.ndarray, phi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Threshold with body effect [V] and its derivative d vt / d vsb [1]; zero derivative where clamped."""
    floor = PHI_CLAMP_FRACTION * phi
    arg = phi + vsb
    root = np.sqrt(np.maximum(arg, floor))
    vt = vth0 + gamma * (root - np.sqrt(phi))
    dvt_dvsb = np.where(arg < floor, 0.0, 0.5 * gamma / root)
    return vt, dvt_dvsb


def square_law_threshold(
    vsb: FloatArray, vth0: FloatArray, gamma: FloatArray = 0.0, phi: FloatArray = 0.8
) -> FloatArray:
    """Threshold voltage with body effect vt = vth0 + gamma (sqrt(phi + vsb) - sqrt(phi)) [V].

    Parameters: source-to-bulk voltage vsb [V], zero-bias threshold vth0 [V], body-effect coefficient gamma [V^0.5],
    surface potential phi [V]. ``phi + vsb`` is clamped from below at ``PHI_CLAMP_FRACTION * phi``.
    """
    vsb_, vth0_, gamma_, phi_ = _as_arrays(vsb, vth0, gamma, phi)
    return _finish(_threshold(vsb_, vth0_, gamma_, phi_)[0])


def square_law_saturation_voltage(
    vgs: FloatArray, vsb: FloatArray, vth0: FloatArray, gamma: FloatArray = 0.0, phi: FloatArray = 0.8
) -> FloatArray:
    """Square-law saturation voltage vdsat = vgs - vt, clipped at 0 [V].

    Parameters: gate-to-source voltage vgs [V], source-to-bulk voltage vsb [V], zero-bias threshold vth0 [V],
    body-effect coefficient gamma [V^0.5], surface potential phi [V].
    """
    vgs_, vsb_, vth0_, gamma_, phi_ = _as_arrays(vgs, vsb, vth0, gamma, phi)
    vt, _ = _threshold(vsb_, vth0_, gamma_, phi_)
    return _finish(np.maximum(vgs_ - vt, 0.0))


def square_law(
    vd: FloatArray,
    vg: FloatArray,
    vs: FloatArray,
    vb: FloatArray,
    vth0: FloatArray,
    beta: FloatArray,
    lam: FloatArray,
    gamma: FloatArray = 0.0,
    phi: FloatArray = 0.8,
) -> DeviceCurrents:
    """Square-law (long-channel) drain current and its analytic derivatives.

    Parameters: terminal voltages vd, vg, vs, vb [V]; zero-bias threshold vth0 [V]; beta = k' (W/L) m (1 + dbeta)
    [A/V^2]; channel-length modulation lam [1/V]; body-effect coefficient gamma [V^0.5]; surface potential phi [V].

    With vov = vgs - vt(vsb): cutoff (vov <= 0) i = 0; triode (vds < vov) i = beta (vov vds - vds^2/2)(1 + lam vds);
    saturation (vds >= vov) i = beta/2 vov^2 (1 + lam vds). The device is symmetric: for vd < vs the lower terminal acts
    as the source (also for the body effect) and the current is negative.

    Returns ``(i, di_dvd, di_dvg, di_dvs, di_dvb)``: drain-to-source current [A] and its partial derivatives [S].
    """
    vd, vg, vs, vb, vth0, beta, lam, gamma, phi = _as_arrays(vd, vg, vs, vb, vth0, beta, lam, gamma, phi)
    reverse = vd < vs
    vds = np.abs(vd - vs)
    vlow = np.minimum(vd, vs)
    vt, dvt_dvsb = _threshold(vlow - vb, vth0, gamma, phi)
    vov = vg - vlow - vt
    on = vov > 0.0
    sat = vds >= vov
    clm = 1.0 + lam * vds
    core = np.where(sat, 0.5 * vov**2, vov * vds - 0.5 * vds**2)
    dcore_dvov = np.where(sat, vov, vds)
    dcore_dvds = np.where(sat, 0.0, vov - vds)
    # Current and conductances in the frame where the higher terminal is the drain.
    i_fwd = np.where(on, beta * core * clm, 0.0)
    gm = np.where(on, beta * dcore_dvov * clm, 0.0)
    gds = np.where(on, beta * (dcore_dvds * clm + core * lam), 0.0)
    gmb = gm * dvt_dvsb
    d_high = gds
    d_low = -(gds + gm + gmb)
    sign = np.where(reverse, -1.0, 1.0)
    return (
        _finish(sign * i_fwd),
        _finish(np.where(reverse, -d_low, d_high)),
        _finish(sign * gm),
        _finish(np.where(reverse, -d_high, d_low)),
        _finish(sign * gmb),
    )


def _ekv_interpolation(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """EKV interpolation F(x) = ln^2(1 + e^(x/2)) [1] and dF/dx [1], overflow-free for large |x|."""
    half = 0.5 * x
    soft = np.logaddexp(0.0, half)
    return soft**2, soft * expit(half)


def ekv(
    vd: FloatArray,
    vg: FloatArray,
    vs: FloatArray,
    vb: FloatArray,
    vth0: FloatArray,
    beta: FloatArray,
    lam: FloatArray,
    slope: FloatArray,
    ut: FloatArray,
) -> DeviceCurrents:
    """EKV all-region drain current and its analytic derivatives.

    Parameters: terminal voltages vd, vg, vs, vb [V]; zero-bias threshold vth0 [V]; beta = k' (W/L) m (1 + dbeta)
    [A/V^2]; channel-length modulation lam [1/V]; slope factor n [1]; thermal voltage ut [V].

    With voltages referred to the bulk, V_P = (V_G - vth0)/n, I_S = 2 n beta U_T^2 and F(v) = ln^2(1 + e^(v/2)):
    i = I_S [F((V_P - V_S)/U_T) - F((V_P - V_D)/U_T)] (1 + lam |vd - vs|).

    Returns ``(i, di_dvd, di_dvg, di_dvs, di_dvb)``: drain-to-source current [A] and its partial derivatives [S].
    """
    vd, vg, vs, vb, vth0, beta, lam, slope, ut = _as_arrays(vd, vg, vs, vb, vth0, beta, lam, slope, ut)
    with np.errstate(under="ignore"):
        vp = (vg - vb - vth0) / slope
        f_fwd, df_fwd = _ekv_interpolation((vp - (vs - vb)) / ut)
        f_rev, df_rev = _ekv_interpolation((vp - (vd - vb)) / ut)
        i_spec = 2.0 * slope * beta * ut**2
        i0 = i_spec * (f_fwd - f_rev)
        scale = i_spec / ut
        vds = vd - vs
        clm = 1.0 + lam * np.abs(vds)
        dclm = lam * np.sign(vds)
        di0_dvg = scale * (df_fwd - df_rev) / slope
        di0_dvb = scale * (df_fwd - df_rev) * (1.0 - 1.0 / slope)
        return (
            _finish(i0 * clm),
            _finish(scale * df_rev * clm + i0 * dclm),
            _finish(di0_dvg * clm),
            _finish(-scale * df_fwd * clm - i0 * dclm),
            _finish(di0_dvb * clm),
        )


def ekv_inversion_coefficient(i: FloatArray, beta: FloatArray, slope: FloatArray, ut: FloatArray) -> FloatArray:
    """Inversion coefficient IC = i / I_S [1] with specific current I_S = 2 n beta U_T^2 [A].

    Parameters: drain current i [A], beta [A/V^2], slope factor n [1], thermal voltage ut [V].
    """
    i_, beta_, slope_, ut_ = _as_arrays(i, beta, slope, ut)
    return _finish(i_ / (2.0 * slope_ * beta_ * ut_**2))
