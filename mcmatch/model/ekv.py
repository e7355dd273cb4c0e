"""The EKV all-region MOSFET: current, first and second derivatives, inversion coefficient and saturation voltage.

Written once and used by every path (reference MNA, fast reduced system, sensitivities, operating points). Voltages in
the n-channel sense, referred to the bulk: V_P = (V_G - vth0)/n, I_S = 2 n beta U_T^2, F(v) = ln^2(1 + e^(v/2)),
i = I_S [F((V_P - V_S)/U_T) - F((V_P - V_D)/U_T)] (1 + lam |vd - vs|) (Enz, Krummenacher, Vittoz, Analog Integrated
Circuits and Signal Processing 8, 1995).
"""

from __future__ import annotations

import numpy as np

from mcmatch.model.state import DeviceCurrents, DeviceState, FloatArray, as_arrays, finish

#: An EKV device carrying less than this fraction of its specific current is reported as cut off (about 7 n U_T below
#: threshold: its current is negligible for a bias circuit).
EKV_CUTOFF_IC = 1e-3


def _interpolation(x: np.ndarray, second: bool = False) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """F(x) = ln^2(1 + e^(x/2)) [1], F'(x) and (if `second`) F''(x), overflow-free for large |x|.

    With s = 1/(1 + e^(-x/2)): F' = s ln(1 + e^(x/2)) and F'' = s^2/2 + s (1 - s) ln(1 + e^(x/2)) / 2.
    """
    from scipy.special import expit  # on first use: only EKV runs pay scipy.special's import (0.1-0.2 s)

    half = 0.5 * x
    soft = np.logaddexp(0.0, half)
    sig = expit(half)
    curvature = 0.5 * sig * sig + 0.5 * soft * sig * (1.0 - sig) if second else None
    return soft**2, soft * sig, curvature


def ekv_state(
    vd: FloatArray,
    vg: FloatArray,
    vs: FloatArray,
    vb: FloatArray,
    vth0: FloatArray,
    beta: FloatArray,
    lam: FloatArray,
    slope: FloatArray,
    ut: FloatArray,
) -> DeviceState:
    """EKV current [A] and its four first derivatives [S] at broadcastable inputs (floats for fixed terminals).

    Parameters: terminal voltages vd, vg, vs, vb [V]; zero-bias threshold vth0 [V]; beta = k' (W/L) m (1 + dbeta)
    [A/V^2]; channel-length modulation lam [1/V]; slope factor n [1]; thermal voltage ut [V].
    """
    vd, vg, vs, vb, vth0, beta, lam, slope, ut = as_arrays(vd, vg, vs, vb, vth0, beta, lam, slope, ut)
    with np.errstate(under="ignore"):
        vp = (vg - vb - vth0) / slope
        f_fwd, df_fwd, _ = _interpolation((vp - (vs - vb)) / ut)
        f_rev, df_rev, _ = _interpolation((vp - (vd - vb)) / ut)
        i_spec = 2.0 * slope * beta * ut**2
        i0 = i_spec * (f_fwd - f_rev)
        scale = i_spec / ut
        vds = vd - vs
        clm = 1.0 + lam * np.abs(vds)
        dclm = lam * np.sign(vds)
        di0_dvg = scale * (df_fwd - df_rev) / slope
        di0_dvb = scale * (df_fwd - df_rev) * (1.0 - 1.0 / slope)
        return DeviceState(
            i0 * clm,
            scale * df_rev * clm + i0 * dclm,
            di0_dvg * clm,
            -scale * df_fwd * clm - i0 * dclm,
            di0_dvb * clm,
            vds,
        )


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
    """:func:`ekv_state` as ``(i, di_dvd, di_dvg, di_dvs, di_dvb)`` [A, S]; scalars in give float64 scalars out."""
    return ekv_state(vd, vg, vs, vb, vth0, beta, lam, slope, ut).currents()


def ekv_hessian(
    vd: FloatArray,
    vg: FloatArray,
    vs: FloatArray,
    vb: FloatArray,
    vth0: FloatArray,
    beta: FloatArray,
    lam: FloatArray,
    slope: FloatArray,
    ut: FloatArray,
) -> np.ndarray:
    """Hessian of the EKV current in (vd, vg, vs, vb) [A/V^2], shape (..., 4, 4); arguments as :func:`ekv_state`.

    i = i0 clm with i0 = I_S (F(x_f) - F(x_r)) and x_f, x_r linear in the terminal voltages: i0's Hessian is
    I_S (F''(x_f) g_f g_f^T - F''(x_r) g_r g_r^T); clm = 1 + lam |vds| adds the cross terms grad i0 c^T + c grad i0^T.
    """
    vd, vg, vs, vb, vth0, beta, lam, slope, ut = as_arrays(vd, vg, vs, vb, vth0, beta, lam, slope, ut)
    with np.errstate(under="ignore"):
        vp = (vg - vb - vth0) / slope
        i_spec = 2.0 * slope * beta * ut**2
        zero, one, inv = np.zeros_like(vd), np.ones_like(vd), 1.0 / slope
        grad_f = np.stack([zero, inv, -one, 1.0 - inv], axis=-1) / ut[..., None]
        grad_r = np.stack([-one, inv, zero, 1.0 - inv], axis=-1) / ut[..., None]
        _, f1_f, f2_f = _interpolation((vp - (vs - vb)) / ut, second=True)
        _, f1_r, f2_r = _interpolation((vp - (vd - vb)) / ut, second=True)
        grad0 = i_spec[..., None] * (f1_f[..., None] * grad_f - f1_r[..., None] * grad_r)
        outer_f = grad_f[..., :, None] * grad_f[..., None, :]
        outer_r = grad_r[..., :, None] * grad_r[..., None, :]
        hess0 = i_spec[..., None, None] * (f2_f[..., None, None] * outer_f - f2_r[..., None, None] * outer_r)
        vds = vd - vs
        clm = 1.0 + lam * np.abs(vds)
        c = (lam * np.sign(vds))[..., None] * np.array([1.0, 0.0, -1.0, 0.0])
        cross = grad0[..., :, None] * c[..., None, :]
        return hess0 * clm[..., None, None] + cross + np.swapaxes(cross, -1, -2)


def ekv_threshold(vsb: FloatArray, vth0: FloatArray, slope: FloatArray) -> FloatArray:
    """Threshold seen from the source, vth0 + (n - 1) vsb [V]: V_P = V_S where V_G - V_S equals it.

    Parameters: source-to-bulk voltage vsb [V], zero-bias threshold vth0 [V], slope factor n [1].
    """
    vsb_, vth0_, slope_ = as_arrays(vsb, vth0, slope)
    return finish(vth0_ + (slope_ - 1.0) * vsb_)


def ekv_inversion_coefficient(i: FloatArray, beta: FloatArray, slope: FloatArray, ut: FloatArray) -> FloatArray:
    """Inversion coefficient IC = i / I_S [1] with specific current I_S = 2 n beta U_T^2 [A].

    Parameters: drain current i [A], beta [A/V^2], slope factor n [1], thermal voltage ut [V].
    """
    i_, beta_, slope_, ut_ = as_arrays(i, beta, slope, ut)
    return finish(i_ / (2.0 * slope_ * beta_ * ut_**2))


def ekv_saturation_voltage(ic: FloatArray, ut: FloatArray) -> FloatArray:
    """Drain saturation voltage [V] for inversion coefficient `ic` [1]: 2 U_T sqrt(IC + 0.25) + 3 U_T.

    The usual moderate-inversion estimate (Enz, Vittoz, Charge-based MOS transistor modeling, 2006): 4 U_T in weak
    inversion (IC -> 0) and about 2 U_T sqrt(IC) = (Vgs - Vt) / n, the pinch-off voltage above the source, in strong
    inversion. Parameters: ic [1], thermal voltage ut [V].
    """
    ic_, ut_ = as_arrays(ic, ut)
    return finish(2.0 * ut_ * np.sqrt(ic_ + 0.25) + 3.0 * ut_)
