"""The square-law (long-channel) MOSFET: current, first and second derivatives, threshold and saturation voltage.

Written once and used by every path: the reference MNA system, the fast reduced system, the sensitivities and the
operating-point descriptions. Voltages are in the n-channel sense (a p-channel caller mirrors them). With
vt = vth0 + gamma (sqrt(phi + vsb) - sqrt(phi)) and vov = vgs - vt: cutoff (vov <= 0) i = 0; triode (vds < vov)
i = beta (vov vds - vds^2/2)(1 + lam vds); saturation (vds >= vov) i = beta/2 vov^2 (1 + lam vds) (Razavi, Design of
Analog CMOS Integrated Circuits, ch. 2). The device is symmetric: for vd < vs the lower terminal acts as the source
(also for the body effect) and the current is negative.
"""

from __future__ import annotations

import numpy as np

from mcmatch.model.state import DeviceCurrents, DeviceState, FloatArray, as_arrays, finish, is_zero, minimum

PHI_CLAMP_FRACTION = 0.1
"""``phi + vsb`` is clamped from below at this fraction of ``phi`` so the body-effect square root stays real."""


def _body_threshold(
    vsb: np.ndarray | float, vth0: np.ndarray, gamma: FloatArray, phi: FloatArray, derivative: bool
) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
    """Threshold with body effect vt [V], d vt / d vsb [1] (zero where clamped; None unless `derivative`) and the
    clamped square root sqrt(max(phi + vsb, PHI_CLAMP_FRACTION phi)) [V^0.5].

    The clamp's np.maximum and np.where run only when some entry is clamped; they leave the other entries' bits
    unchanged, so an entry's result never depends on the batch around it.
    """
    floor = PHI_CLAMP_FRACTION * phi
    arg = phi + vsb
    clamped = minimum(arg) < floor if np.ndim(floor) == 0 else bool(np.any(arg < floor))
    root = np.sqrt(np.maximum(arg, floor) if clamped else arg)
    body = gamma * (root - np.sqrt(phi))
    vt = vth0 if is_zero(body) else vth0 + body
    dvt = None
    if derivative:
        dvt = (0.5 * gamma) / root
        if clamped:
            dvt = np.where(arg < floor, 0.0, dvt)
    return vt, dvt, root


def square_law_state(
    vd: np.ndarray | float,
    vg: np.ndarray | float,
    vs: np.ndarray | float,
    vb: np.ndarray | float,
    vth0: np.ndarray | float,
    beta: np.ndarray | float,
    lam: FloatArray,
    gamma: FloatArray = 0.0,
    phi: FloatArray = 0.8,
    need: str = "dgsb",
) -> DeviceState:
    """Square-law current and the first derivatives named in `need` (letters of "dgsb"; others may be None).

    Parameters: terminal voltages vd, vg, vs, vb [V] (arrays of one shape, or floats for fixed terminals); zero-bias
    threshold vth0 [V] and beta = k' (W/L) m (1 + dbeta) [A/V^2] per sample; channel-length modulation lam [1/V];
    body-effect coefficient gamma [V^0.5]; surface potential phi [V]. The saturation formulas are always computed;
    triode, cutoff, reverse conduction and the body-effect clamp are computed and selected only when some entry of
    the batch needs them, by expressions that leave the other entries' bits unchanged (x - 0.0 and x + 0.0 are
    skipped for the same reason: they return x exactly). The bulk derivative is None without body effect.
    """
    vdiff = vd if is_zero(vs) else vd - vs
    forward = minimum(vdiff) >= 0.0
    if forward:
        vlow, vds = vs, vdiff
    else:
        vlow, vds = np.minimum(vd, vs), np.abs(vdiff)
        need = "dgsb"
    dvt = None
    vt = vth0
    has_body = gamma != 0.0 if np.ndim(gamma) == 0 else bool(np.any(gamma != 0.0))
    if has_body:
        vsb = vlow if is_zero(vb) else vlow - vb
        vt, dvt, _ = _body_threshold(vsb, vth0, gamma, phi, "b" in need or "s" in need)
    vov = (vg if is_zero(vlow) else vg - vlow) - vt
    clm = 1.0 + lam * vds
    bv = beta * vov
    gm = bv * clm
    half = (0.5 * bv) * vov
    i = half * clm
    gds = half * lam
    if not (minimum(vov) > 0.0 and minimum(vds - vov) >= 0.0):
        on = vov > 0.0
        sat = vds >= vov
        core = vov * vds - 0.5 * vds * vds
        i_t = (beta * core) * clm
        gm_t = (beta * vds) * clm
        gds_t = beta * ((vov - vds) * clm + core * lam)
        i = np.where(on, np.where(sat, i, i_t), 0.0)
        gm = np.where(on, np.where(sat, gm, gm_t), 0.0)
        gds = np.where(on, np.where(sat, gds, gds_t), 0.0)
    gmb = None if dvt is None else gm * dvt
    d_low = None
    if "s" in need:
        d_low = -(gds + gm) if gmb is None else -((gds + gm) + gmb)
    if forward:
        return DeviceState(i, gds, gm, d_low, gmb, vdiff)
    rev = vdiff < 0.0
    return DeviceState(
        np.where(rev, -i, i),
        np.where(rev, -d_low, gds),
        np.where(rev, -gm, gm),
        np.where(rev, -gds, d_low),
        None if gmb is None else np.where(rev, -gmb, gmb),
        vdiff,
    )


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
    """:func:`square_law_state` on broadcast float64 arrays, as ``(i, di_dvd, di_dvg, di_dvs, di_dvb)`` [A, S].

    Parameters as :func:`square_law_state`, any broadcastable shapes; scalars in give numpy float64 scalars out.
    """
    arrays = as_arrays(vd, vg, vs, vb, vth0, beta, lam, gamma, phi)
    return square_law_state(*arrays).currents()


def square_law_hessian(
    vd: FloatArray,
    vg: FloatArray,
    vs: FloatArray,
    vb: FloatArray,
    vth0: FloatArray,
    beta: FloatArray,
    lam: FloatArray,
    gamma: FloatArray = 0.0,
    phi: FloatArray = 0.8,
) -> np.ndarray:
    """Hessian of the square-law current in (vd, vg, vs, vb) [A/V^2], shape (..., 4, 4); arguments as square_law.

    In the forward frame (higher terminal as drain) i = beta core(vov, vds) clm(vds): the chain rule through vov
    (whose own curvature comes from the body-effect threshold, vt'' = -vt' / (2 (phi + vsb)), zero where clamped)
    and vds, region by region; zero in cutoff. Reverse conduction: i(vd, vg, vs, vb) = -i_forward(vs, vg, vd, vb).
    """
    vd, vg, vs, vb, vth0, beta, lam, gamma, phi = as_arrays(vd, vg, vs, vb, vth0, beta, lam, gamma, phi)
    reverse = vd < vs
    high, low = np.maximum(vd, vs), np.minimum(vd, vs)
    vt, dvt, root = _body_threshold(low - vb, vth0, gamma, phi, derivative=True)
    d2vt = -0.5 * dvt / root**2
    gm = square_law_state(high, vg, low, vb, vth0, beta, lam, gamma, phi).di_dvg  # beta c_o clm, 0 in cutoff
    vov = vg - low - vt
    vds = high - low
    on = vov > 0.0
    sat = vds >= vov
    clm = 1.0 + lam * vds
    # second derivatives of beta core clm in (vov, vds): saturation core = vov^2/2, triode core = vov vds - vds^2/2
    g_oo = np.where(on & sat, beta * clm, 0.0)
    g_od = np.where(on, np.where(sat, beta * vov * lam, beta * (clm + vds * lam)), 0.0)
    g_dd = np.where(on & ~sat, beta * (2.0 * (vov - vds) * lam - clm), 0.0)
    zero, one = np.zeros_like(vd), np.ones_like(vd)
    a = np.stack([zero, one, -1.0 - dvt, dvt], axis=-1)  # gradient of vov in (high, gate, low, bulk)
    b = np.stack([one, zero, -one, zero], axis=-1)  # gradient of vds
    curv = np.zeros(vd.shape + (4, 4))  # Hessian of vov, from the threshold's curvature in vsb
    curv[..., 2, 2], curv[..., 2, 3], curv[..., 3, 2], curv[..., 3, 3] = -d2vt, d2vt, d2vt, -d2vt
    aa = a[..., :, None] * a[..., None, :]
    ab = a[..., :, None] * b[..., None, :]
    bb = b[..., :, None] * b[..., None, :]
    hess = (
        g_oo[..., None, None] * aa
        + g_od[..., None, None] * (ab + np.swapaxes(ab, -1, -2))
        + g_dd[..., None, None] * bb
        + np.asarray(gm)[..., None, None] * curv
    )
    perm = [2, 1, 0, 3]
    swapped = -hess[..., perm, :][..., :, perm]
    return np.where(reverse[..., None, None], swapped, hess)


def square_law_threshold(
    vsb: FloatArray, vth0: FloatArray, gamma: FloatArray = 0.0, phi: FloatArray = 0.8
) -> FloatArray:
    """Threshold voltage with body effect vt = vth0 + gamma (sqrt(phi + vsb) - sqrt(phi)) [V].

    Parameters: source-to-bulk voltage vsb [V], zero-bias threshold vth0 [V], body-effect coefficient gamma [V^0.5],
    surface potential phi [V]. ``phi + vsb`` is clamped from below at ``PHI_CLAMP_FRACTION * phi``.
    """
    vsb_, vth0_, gamma_, phi_ = as_arrays(vsb, vth0, gamma, phi)
    return finish(np.asarray(_body_threshold(vsb_, vth0_, gamma_, phi_, derivative=False)[0]))


def square_law_saturation_voltage(
    vgs: FloatArray, vsb: FloatArray, vth0: FloatArray, gamma: FloatArray = 0.0, phi: FloatArray = 0.8
) -> FloatArray:
    """Square-law saturation voltage vdsat = vov = vgs - vt, clipped at 0 [V].

    Parameters: gate-to-source voltage vgs [V], source-to-bulk voltage vsb [V], zero-bias threshold vth0 [V],
    body-effect coefficient gamma [V^0.5], surface potential phi [V].
    """
    vgs_, vsb_, vth0_, gamma_, phi_ = as_arrays(vgs, vsb, vth0, gamma, phi)
    vt, _, _ = _body_threshold(vsb_, vth0_, gamma_, phi_, derivative=False)
    return finish(np.maximum(vgs_ - vt, 0.0))
