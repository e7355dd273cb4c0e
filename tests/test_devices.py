"""Tests for mcmatch.model.devices: textbook limits, analytic derivatives, symmetry and vectorisation."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.constants

from mcmatch.model.devices import (
    ekv,
    ekv_inversion_coefficient,
    square_law,
    square_law_saturation_voltage,
    square_law_threshold,
    thermal_voltage,
)

UT = float(thermal_voltage(300.0))
SQUARE = {"vth0": 0.5, "beta": 3e-4, "lam": 0.08, "gamma": 0.45, "phi": 0.8}
EKV = {"vth0": 0.45, "beta": 3e-4, "lam": 0.05, "slope": 1.35, "ut": UT}
FD_STEP = 1e-7  # [V]; every test point lies at least 1e-6 V from a region boundary
FD_RTOL = 1e-6
TERMINALS = ("vd", "vg", "vs", "vb")


def _square(vd, vg, vs, vb, **params):
    return square_law(vd, vg, vs, vb, **{**SQUARE, **params})


def _ekv(vd, vg, vs, vb, **params):
    return ekv(vd, vg, vs, vb, **{**EKV, **params})


def _central_differences(model, volts: dict[str, np.ndarray], step: float) -> list[np.ndarray]:
    """d i / d v_terminal by central differences, one terminal at a time."""
    gradients = []
    for name in TERMINALS:
        up = {**volts, name: volts[name] + step}
        down = {**volts, name: volts[name] - step}
        gradients.append((model(**up)[0] - model(**down)[0]) / (2.0 * step))
    return gradients


def _assert_gradients_match(model, volts: dict[str, np.ndarray]) -> None:
    """Analytic and finite-difference gradients agree to FD_RTOL of the largest gradient component at each point."""
    _, *analytic = model(**volts)
    numeric = _central_differences(model, volts, FD_STEP)
    scale = np.max(np.abs(np.stack(analytic)), axis=0)
    for name, exact, approx in zip(TERMINALS, analytic, numeric, strict=True):
        # central difference, truncation error h^2 f'''/6: Burden, Faires, Numerical Analysis, 9th ed., 2011, ch. 4
        error = np.abs(approx - exact)
        worst = np.argmax(error - FD_RTOL * scale)
        assert np.all(error <= FD_RTOL * scale), f"d i/d {name} at point {worst}: {exact[worst]} vs {approx[worst]}"


# --- thermal voltage -------------------------------------------------------------------------------------------------


def test_thermal_voltage_at_300_kelvin():
    # U_T = k T / q with the exact SI (2019) constants k = 1.380649e-23 J/K and e = 1.602176634e-19 C
    assert thermal_voltage(300.0) == pytest.approx(25.852e-3, abs=0.5e-6)
    assert thermal_voltage(1.0) == pytest.approx(1.380649e-23 / 1.602176634e-19, rel=1e-15)
    # scipy.constants as reference library
    temperatures = np.array([233.15, 300.15, 398.15])
    np.testing.assert_allclose(thermal_voltage(temperatures), scipy.constants.k * temperatures / scipy.constants.e)


# --- square law ------------------------------------------------------------------------------------------------------


def test_square_law_diode_connected_currents():
    # I = (k'/2)(W/L)(V - Vt)^2 above threshold, 0 below: Razavi, Design of Analog CMOS Integrated Circuits, 2nd ed.,
    # 2017, ch. 2; k'W/L = 100 uA/V^2, Vt = 1 V -> 50, 200, 450 uA at 2, 3, 4 V
    v = np.array([0.5, 1.0, 2.0, 3.0, 4.0])
    i, *_ = square_law(v, v, 0.0, 0.0, vth0=1.0, beta=1e-4, lam=0.0)
    np.testing.assert_allclose(i, [0.0, 0.0, 50e-6, 200e-6, 450e-6], rtol=1e-12, atol=0.0)
    assert i[1] == 0.0  # exactly at threshold


def test_square_law_region_formulas_and_small_signal():
    beta, vth0, lam = 2e-4, 0.5, 0.1
    vgs, vds_sat, vds_tri = 1.3, 1.5, 0.3
    vov = vgs - vth0
    i_sat, gds_sat, gm_sat, *_ = square_law(vds_sat, vgs, 0.0, 0.0, vth0, beta, lam)
    i_tri, *_ = square_law(vds_tri, vgs, 0.0, 0.0, vth0, beta, lam)
    # saturation I = (beta/2) Vov^2 (1 + lambda VDS): Razavi, Design of Analog CMOS ..., 2nd ed., 2017, ch. 2
    assert i_sat == pytest.approx(0.5 * beta * vov**2 * (1 + lam * vds_sat), rel=1e-14)
    # triode I = beta (Vov VDS - VDS^2/2): Razavi, Design of Analog CMOS Integrated Circuits, 2nd ed., 2017, ch. 2
    assert i_tri == pytest.approx(beta * (vov * vds_tri - vds_tri**2 / 2) * (1 + lam * vds_tri), rel=1e-14)
    # gm = 2 I / Vov, ro = 1/gds = (1 + lambda VDS)/(lambda I): Razavi, Design of Analog CMOS ..., 2nd ed., 2017, ch. 2
    assert gm_sat == pytest.approx(2 * i_sat / vov, rel=1e-14)
    assert gds_sat == pytest.approx(lam * i_sat / (1 + lam * vds_sat), rel=1e-14)


def test_square_law_body_effect_threshold():
    vth0, gamma, phi = 0.45, 0.4, 0.8
    vsb = np.array([0.0, 0.5, 1.0, 2.0, 3.0])
    vt = square_law_threshold(vsb, vth0, gamma, phi)
    # Vt = Vth0 + gamma (sqrt(2 phi_F + VSB) - sqrt(2 phi_F)): Razavi, Design of Analog CMOS ..., 2nd ed., 2017, ch. 2
    np.testing.assert_allclose(vt, vth0 + gamma * (np.sqrt(phi + vsb) - np.sqrt(phi)), rtol=1e-15)
    # hand value: sqrt(1.8) - sqrt(0.8) = sqrt(0.2), so Vt(VSB = 1 V) = 0.45 + 0.4 sqrt(0.2) = 0.628885 V
    assert vt[2] == pytest.approx(0.6288854382, rel=1e-10)
    assert np.all(np.diff(vt) > 0.0)
    # the current sees the same threshold: saturation with source at VSB above the bulk (Razavi, 2nd ed., 2017, ch. 2)
    beta, vgs = 1e-4, 1.5
    i, *_ = square_law(vsb + 3.0, vsb + vgs, vsb, 0.0, vth0, beta, 0.0, gamma, phi)
    np.testing.assert_allclose(i, 0.5 * beta * (vgs - vt) ** 2, rtol=1e-14)
    np.testing.assert_allclose(square_law_saturation_voltage(vgs, vsb, vth0, gamma, phi), vgs - vt, rtol=1e-14)
    assert square_law_saturation_voltage(0.3, 0.0, vth0) == 0.0  # below threshold: clipped at 0


def test_square_law_body_transconductance():
    beta, vth0, gamma, phi, vsb = 2e-4, 0.5, 0.4, 0.8, 0.7
    _, _, gm, _, gmb = square_law(3.0, vsb + 1.4, vsb, 0.0, vth0, beta, 0.05, gamma, phi)
    # gmb = eta gm with eta = gamma / (2 sqrt(2 phi_F + VSB)): Razavi, Design of Analog CMOS ..., 2nd ed., 2017, ch. 2
    assert gmb == pytest.approx(gm * gamma / (2.0 * np.sqrt(phi + vsb)), rel=1e-14)


def test_square_law_threshold_clamp():
    vth0, gamma, phi = 0.45, 0.4, 0.8
    vsb = np.array([-0.75, -1.0, -2.0])  # phi + vsb below 0.1 phi: clamped, the square root stays real
    vt = square_law_threshold(vsb, vth0, gamma, phi)
    np.testing.assert_allclose(vt, vth0 + gamma * (np.sqrt(0.1 * phi) - np.sqrt(phi)), rtol=1e-15)
    _, _, gm, _, gmb = square_law(1.0, vsb + 1.5, vsb, 0.0, vth0, 1e-4, 0.0, gamma, phi)
    assert np.all(gm > 0.0)
    np.testing.assert_array_equal(gmb, 0.0)


def test_square_law_continuity_at_saturation_edge():
    beta, vth0, lam, vgs = 2e-4, 0.5, 0.1, 1.5
    vov = vgs - vth0
    delta = 1e-9
    below = square_law(vov - delta, vgs, 0.0, 0.0, vth0, beta, lam)  # triode
    above = square_law(vov + delta, vgs, 0.0, 0.0, vth0, beta, lam)  # saturation
    at = square_law(vov, vgs, 0.0, 0.0, vth0, beta, lam)
    # triode and saturation formulas meet with equal value and slope at VDS = Vov (Razavi, 2nd ed., 2017, ch. 2)
    edge_value = 0.5 * beta * vov**2 * (1 + lam * vov)
    edge_slope = 0.5 * beta * vov**2 * lam
    for value in (below[0], above[0], at[0]):
        assert value == pytest.approx(edge_value, rel=1e-8)
    for slope in (below[1], above[1], at[1]):
        assert slope == pytest.approx(edge_slope, rel=1e-6)
    np.testing.assert_allclose(below[2], above[2], rtol=1e-8)


def test_square_law_continuity_at_cutoff():
    beta, vth0, lam = 2e-4, 0.5, 0.1
    delta = 1e-9
    for vds in (0.3, 1e-10):  # saturation side and triode side of the edge
        on = square_law(vds, vth0 + delta, 0.0, 0.0, vth0, beta, lam)
        off = square_law(vds, vth0 - delta, 0.0, 0.0, vth0, beta, lam)
        # I -> 0 and gm = beta Vov -> 0 as Vov -> 0 (Razavi, Design of Analog CMOS ..., 2nd ed., 2017, ch. 2)
        assert np.all(np.abs(np.array(on)) <= beta * 2 * delta)
        np.testing.assert_array_equal(np.array(off), 0.0)


# --- EKV -------------------------------------------------------------------------------------------------------------


def test_ekv_strong_inversion_limit():
    beta, vth0, slope = 1e-4, 0.45, 1.3
    x = np.array([6.0, 10.0, 20.0, 30.0, 40.0])  # (V_P - V_S)/U_T
    vg = vth0 + slope * x * UT
    i, *_ = ekv(3.0, vg, 0.0, 0.0, vth0, beta, 0.0, slope, UT)
    # strong inversion, saturation: I = (beta/(2n)) (V_G - V_T0 - n V_S)^2 (Enz, Krummenacher, Vittoz, 1995)
    i_square = beta / (2 * slope) * (vg - vth0) ** 2
    rel = i / i_square - 1.0
    assert np.all(rel > 0.0)
    assert np.all(np.diff(rel) < 0.0)
    assert rel[0] < 0.05
    assert rel[3] < 1e-6
    # leading correction: ln(1 + e^(x/2)) = x/2 + e^(-x/2) + ..., so I / I_square - 1 ~ 4 e^(-x/2) / x
    np.testing.assert_allclose(rel[1:], 4.0 * np.exp(-x[1:] / 2) / x[1:], rtol=1e-2)
    # source above the bulk (Enz, Krummenacher, Vittoz, 1995)
    vs = 0.2
    vg_s = vth0 + slope * (vs + 40 * UT)
    i_s, *_ = ekv(3.0, vg_s, vs, 0.0, vth0, beta, 0.0, slope, UT)
    assert i_s == pytest.approx(beta / (2 * slope) * (vg_s - vth0 - slope * vs) ** 2, rel=1e-6)


def test_ekv_weak_inversion_limit():
    beta, vth0, slope = 1e-4, 0.45, 1.3
    i_spec = 2 * slope * beta * UT**2
    for vs in (0.0, 0.15):
        vg = vth0 + slope * (vs - 40 * UT)  # V_P - V_S = -40 U_T
        vp = (vg - vth0) / slope
        i, _, gm, gms_neg, _ = ekv(vs + 0.5, vg, vs, 0.0, vth0, beta, 0.0, slope, UT)
        # weak inversion, saturation: I = I_S exp((V_P - V_S)/U_T) (Enz, Krummenacher, Vittoz, 1995)
        assert i == pytest.approx(i_spec * np.exp((vp - vs) / UT), rel=1e-6)
        # gm / I = 1 / (n U_T) (Enz, Krummenacher, Vittoz, 1995)
        assert gm / i == pytest.approx(1.0 / (slope * UT), rel=1e-6)
        h = 1e-6
        dlog = (
            np.log(ekv(vs + 0.5, vg + h, vs, 0.0, vth0, beta, 0.0, slope, UT)[0])
            - np.log(ekv(vs + 0.5, vg - h, vs, 0.0, vth0, beta, 0.0, slope, UT)[0])
        ) / (2 * h)
        assert dlog == pytest.approx(1.0 / (slope * UT), rel=1e-6)
        # source transconductance gms = n gm in saturation (Enz, Krummenacher, Vittoz, 1995)
        assert -gms_neg == pytest.approx(slope * gm, rel=1e-6)


def test_ekv_inversion_coefficient():
    beta, slope = 3e-4, 1.35
    # I_S = 2 n beta U_T^2 (Enz, Krummenacher, Vittoz, 1995)
    i_spec = 2 * slope * beta * UT**2
    np.testing.assert_allclose(
        ekv_inversion_coefficient(np.array([0.1, 1.0, 10.0]) * i_spec, beta, slope, UT), [0.1, 1.0, 10.0], rtol=1e-14
    )


def test_ekv_no_overflow_at_large_arguments():
    vth0, beta, slope = 0.45, 3e-4, 1.3
    x = np.array([-1e3, -1e2, 1e2, 1e3])  # (V_P - V_S)/U_T
    vg = vth0 + slope * x * UT
    with warnings.catch_warnings(), np.errstate(over="raise", divide="raise", invalid="raise"):
        warnings.simplefilter("error")
        out = ekv(0.5, vg, 0.0, 0.0, vth0, beta, 0.0, slope, UT)
    for value in out:
        assert np.all(np.isfinite(value))
    # F(x) = ln^2(1 + e^(x/2)) -> (x/2)^2 for large x (Enz, Krummenacher, Vittoz, 1995); reverse term from V_D = 0.5 V
    i_spec = 2 * slope * beta * UT**2
    xr = x[-1] - 0.5 / UT
    assert out[0][-1] == pytest.approx(i_spec * ((x[-1] / 2) ** 2 - (xr / 2) ** 2), rel=1e-12)
    assert 0.0 <= out[0][0] < 1e-300


# --- both models -----------------------------------------------------------------------------------------------------


def _square_points(rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    volts = {
        "vd": rng.uniform(-0.5, 3.0, n),
        "vg": rng.uniform(-0.5, 3.5, n),
        "vs": rng.uniform(-0.5, 3.0, n),
        "vb": rng.uniform(-1.5, 1.0, n),
    }
    vlow = np.minimum(volts["vd"], volts["vs"])
    vds = np.abs(volts["vd"] - volts["vs"])
    vsb = vlow - volts["vb"]
    vov = volts["vg"] - vlow - square_law_threshold(vsb, SQUARE["vth0"], SQUARE["gamma"], SQUARE["phi"])
    clamp_edge = SQUARE["phi"] + vsb - 0.1 * SQUARE["phi"]
    margin = 1e-6
    keep = (np.abs(vov) > margin) & (np.abs(vds - vov) > margin) & (vds > margin) & (np.abs(clamp_edge) > margin)
    regions = {
        "cutoff": vov < 0,
        "triode": (vov > 0) & (vds < vov),
        "saturation": (vov > 0) & (vds > vov),
        "reversed": volts["vd"] < volts["vs"],
        "body bias": vsb > 0.3,
        "clamped": clamp_edge < 0,
    }
    for region, mask in regions.items():
        assert np.count_nonzero(mask & keep) >= 30, region
    assert np.count_nonzero(regions["reversed"] & regions["triode"] & keep) >= 30
    return {k: v[keep] for k, v in volts.items()}


def _ekv_points(rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    vb = rng.uniform(-0.5, 0.2, n)
    vs = vb + rng.uniform(0.0, 0.8, n)
    vd = vs + rng.uniform(-0.6, 1.2, n)
    vg = vb + rng.uniform(-0.3, 2.5, n)
    keep = np.abs(vd - vs) > 1e-6
    i, *_ = ekv(vd, vg, vs, vb, **EKV)
    ic = ekv_inversion_coefficient(np.abs(i), EKV["beta"], EKV["slope"], EKV["ut"])
    regions = {
        "weak": ic < 0.1,
        "moderate": (ic > 0.1) & (ic < 10),
        "strong": ic > 10,
        "reversed": vd < vs,
        "deep weak": ic < 1e-6,
    }
    for region, mask in regions.items():
        assert np.count_nonzero(mask & keep) >= 30, region
    return {"vd": vd[keep], "vg": vg[keep], "vs": vs[keep], "vb": vb[keep]}


@pytest.mark.parametrize(("model", "points"), [(_square, _square_points), (_ekv, _ekv_points)], ids=["square", "ekv"])
def test_derivatives_match_central_differences(model, points):
    volts = points(np.random.default_rng(20240611), 3000)
    _assert_gradients_match(model, volts)


@pytest.mark.parametrize(("model", "points"), [(_square, _square_points), (_ekv, _ekv_points)], ids=["square", "ekv"])
def test_translation_invariance_of_bulk_derivative(model, points):
    volts = points(np.random.default_rng(7), 2000)
    _, di_dvd, di_dvg, di_dvs, di_dvb = model(**volts)
    # shifting all four terminals by the same voltage leaves the current unchanged, so the derivatives sum to zero
    scale = np.max(np.abs(np.stack([di_dvd, di_dvg, di_dvs, di_dvb])), axis=0)
    assert np.all(np.abs(di_dvb + di_dvd + di_dvg + di_dvs) <= 1e-12 * scale)


@pytest.mark.parametrize(("model", "points"), [(_square, _square_points), (_ekv, _ekv_points)], ids=["square", "ekv"])
def test_swapping_drain_and_source_negates_current(model, points):
    volts = points(np.random.default_rng(11), 2000)
    i, di_dvd, di_dvg, di_dvs, di_dvb = model(**volts)
    swapped = model(vd=volts["vs"], vg=volts["vg"], vs=volts["vd"], vb=volts["vb"])
    # the MOSFET is a symmetric device (Razavi, Design of Analog CMOS Integrated Circuits, 2nd ed., 2017, ch. 2)
    np.testing.assert_array_equal(swapped[0], -i)
    np.testing.assert_array_equal(swapped[1], -di_dvs)
    np.testing.assert_array_equal(swapped[2], -di_dvg)
    np.testing.assert_array_equal(swapped[3], -di_dvd)
    np.testing.assert_array_equal(swapped[4], -di_dvb)
    # zero current at VDS = 0
    np.testing.assert_array_equal(model(vd=volts["vs"], vg=volts["vg"], vs=volts["vs"], vb=volts["vb"])[0], 0.0)


@pytest.mark.parametrize("model", [square_law, ekv], ids=["square", "ekv"])
def test_vectorised_calls_equal_elementwise_calls(model):
    rng = np.random.default_rng(3)
    n = 1000
    params = SQUARE if model is square_law else EKV
    volts = {
        "vd": rng.uniform(-0.5, 2.5, n),
        "vg": rng.uniform(-0.5, 2.5, n),
        "vs": rng.uniform(0.0, 1.0, n),
        "vb": rng.uniform(-0.5, 0.0, n),
    }
    per_sample = {
        **params,
        "vth0": params["vth0"] + rng.normal(0.0, 0.01, n),
        "beta": params["beta"] * (1 + rng.normal(0.0, 0.01, n)),
    }
    batched = np.stack(model(**volts, **per_sample))
    assert batched.shape == (5, n)
    assert batched.dtype == np.float64
    single = np.array(
        [model(**{k: float(v[j]) if np.ndim(v) else v for k, v in {**volts, **per_sample}.items()}) for j in range(n)]
    ).T
    np.testing.assert_allclose(batched, single, rtol=1e-14, atol=0.0)
    # one array argument, the rest scalars
    batched = np.stack(model(volts["vd"], 1.2, 0.1, 0.0, **params))
    single = np.array([model(float(vd), 1.2, 0.1, 0.0, **params) for vd in volts["vd"]]).T
    np.testing.assert_allclose(batched, single, rtol=1e-14, atol=0.0)
    # scalars in, float64 scalars out; general broadcasting
    assert all(isinstance(value, float) for value in model(1.0, 1.2, 0.1, 0.0, **params))
    out = model(np.linspace(0.0, 2.0, 3)[:, None], np.linspace(0.5, 2.0, 4)[None, :], 0.0, 0.0, **params)
    assert all(np.shape(value) == (3, 4) for value in out)
