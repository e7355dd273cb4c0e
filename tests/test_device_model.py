"""Property tests of the one device model (mcmatch.model.square_law, mcmatch.model.ekv via mcmatch.model.devices).

Every path reaches the same equations: the fast reduced system (reduced.device_state: sample axis last, fixed
terminals as floats, only the derivatives a Jacobian needs, batch-wide region shortcuts) and the reference MNA system
(circuit.mosfet_currents: sample axis first, all derivatives). Hypothesis draws points region by region (cutoff,
triode, saturation; weak, moderate, strong inversion), both drain/source orientations, with and without body effect
(also on the phi clamp), nmos and pmos, square law and EKV; every example is a batch holding one point of each
region x orientation (x clamp) combination, so each example covers them all. It checks
- the fast and the reference form agree (value and first derivatives), and a sample's result does not depend on the
  batch around it;
- the values against the textbook formulas written out here independently (Razavi, Design of Analog CMOS Integrated
  Circuits, ch. 2; Enz, Krummenacher, Vittoz, Analog Integrated Circuits and Signal Processing 8, 1995);
- first derivatives against central differences of the current, second derivatives (the sensitivities' Hessians)
  against central differences of the first derivatives (common practice, no source);
- the operating-point description (region, Vdsat, threshold) against the same textbook formulas.
The Razavi diode values (50, 200, 450 uA) are checked in tests/test_devices.py. Examples are bounded and derandomised
so the file runs in seconds and the same on every machine.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from mcmatch.config.schema import Netlist
from mcmatch.model.circuit import compile_circuit, extend, mosfet_currents
from mcmatch.model.devices import (
    EKV,
    REGIONS,
    SQUARE_LAW,
    device_point,
    mosfet_hessian,
    mosfet_state,
    thermal_voltage,
)
from mcmatch.model.reduced import device_state, reduce_circuit, reduce_unknowns
from mcmatch.model.technology import DeviceParameters

MARGIN = 1e-3  # [V] every drawn point lies this far from a region edge, so a difference stencil stays in one region
STEP = 1e-6  # [V] central-difference step
FD_RTOL = 1e-6  # of the largest derivative at the point: truncation h^2 f'''/6 and rounding eps f/h both far below
AGREE_RTOL = 1e-12  # fast and reference form; textbook values
VDD = 1.2  # [V] the fixed drain of the second device, in its own (n-channel) frame
PROPERTY = settings(max_examples=8, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])

_NETLISTS: dict[str, Netlist] = {}


def _netlist(kind: str) -> Netlist:
    """M1 with its four terminals on free nodes (each to gnd through 1 kohm); M2 with its drain on a supply held by
    VDD and source and bulk on gnd, so the fast form sees them as fixed floats. Parsed once per polarity."""
    if kind not in _NETLISTS:

        def mos(name, d, g, s, b):
            return {"name": name, "type": kind, "drain": d, "gate": g, "source": s, "bulk": b, "w": 1e-5, "l": 1e-6}

        resistors = [{"name": f"R{n}", "a": n, "b": "gnd", "value": 1e3} for n in ("d", "g", "s", "b", "g2")]
        sign = 1.0 if kind == "nmos" else -1.0
        raw = {
            "mosfet": [mos("M1", "d", "g", "s", "b"), mos("M2", "vdd", "g2", "gnd", "gnd")],
            "resistor": resistors,
            "voltage_source": [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": sign * VDD}],
        }
        _NETLISTS[kind] = Netlist.model_validate(raw)
    return _NETLISTS[kind]


# --------------------------------------------------------------------------------------------- strategies
#: Model families, each run for nmos and pmos: the square law without body effect (gamma = 0: the bulk derivative is
#: structurally zero), with body effect (reverse-biased bulk, and forward-biased onto the phi clamp), and EKV.
FAMILIES = {"square-law": (SQUARE_LAW, False), "square-law-body": (SQUARE_LAW, True), "ekv": (EKV, False)}
POLARITIES = pytest.mark.parametrize("polarity", [1.0, -1.0], ids=["nmos", "pmos"])
EACH_FAMILY = pytest.mark.parametrize("family", list(FAMILIES))


@st.composite
def technologies(draw, family: str, polarity: float) -> dict:
    """Device parameters of one example (shared by both devices)."""
    model, body = FAMILIES[family]
    return {
        "model": model,
        "polarity": polarity,
        "vth0": draw(st.floats(0.3, 0.7)),
        "beta": draw(st.floats(1e-5, 1e-3)),
        "lam": draw(st.sampled_from([0.0, 0.08]) | st.floats(0.0, 0.3)),
        "gamma": draw(st.floats(0.1, 0.9)) if body else 0.0,
        "phi": draw(st.floats(0.6, 0.95)),
        "slope": draw(st.floats(1.1, 1.6)),
        "ut": float(thermal_voltage(draw(st.floats(233.15, 398.15)))),
    }


def _textbook_threshold(vsb: float, vth: float, gamma: float, phi: float) -> float:
    """vt = vth0 + gamma (sqrt(phi + vsb) - sqrt(phi)) (Razavi, ch. 2), phi + vsb floored at 0.1 phi (our clamp)."""
    return vth + gamma * (math.sqrt(max(phi + vsb, 0.1 * phi)) - math.sqrt(phi))


def _oriented(low: float, vds: float, reverse: bool) -> tuple[float, float]:
    """(vd, vs) with the lower terminal at `low` and |vd - vs| = vds; reversed puts the drain low."""
    return (low, low + vds) if reverse else (low + vds, low)


@st.composite
def square_point(draw, tech: dict, vth: float, region: str, reverse: bool, clamped: bool) -> dict:
    """A square-law point in the device's own frame in `region`, at least MARGIN from every region edge and from the
    clamp edge; `vth` includes the mismatch."""
    phi = tech["phi"]
    # clamped: phi + vsb below the 0.1 phi floor (forward-biased bulk), where the body term is constant
    low_vsb, high_vsb = (-phi - 0.5, -0.9 * phi - MARGIN) if clamped else (-0.9 * phi + MARGIN, 1.5)
    vsb = draw(st.floats(low_vsb, high_vsb))
    if region == "cutoff":
        vov, vds = draw(st.floats(-0.8, -MARGIN)), draw(st.floats(MARGIN, 2.0))
    elif region == "triode":
        vov = draw(st.floats(3 * MARGIN, 1.5))
        vds = draw(st.floats(MARGIN, vov - MARGIN))
    else:
        vov = draw(st.floats(MARGIN, 1.5))
        vds = draw(st.floats(vov + MARGIN, vov + 2.0))
    vb = draw(st.floats(-1.0, 0.5))
    low = vb + vsb
    vg = low + _textbook_threshold(vsb, vth, tech["gamma"], phi) + vov
    vd, vs = _oriented(low, vds, reverse)
    return {"vd": vd, "vg": vg, "vs": vs, "vb": vb, "region": region, "reversed": reverse}


@st.composite
def ekv_point(draw, tech: dict, vth: float, inversion: str, saturated: bool, reverse: bool) -> dict:
    """An EKV point in the device's own frame: forward argument x = (V_P - V_S)/U_T in weak (down to -30), moderate or
    strong inversion; |vds| linear (up to 50 mV) or saturated, never within MARGIN of vds = 0 (the kink of |vds|)."""
    x = draw(
        {"weak": st.floats(-30.0, -4.0), "moderate": st.floats(-4.0, 4.0), "strong": st.floats(4.0, 80.0)}[inversion]
    )
    vds = draw(st.floats(0.05, 1.5) if saturated else st.floats(MARGIN, 0.05))
    vb, vsb = draw(st.floats(-1.0, 0.5)), draw(st.floats(0.0, 1.0))
    vg = vb + vth + tech["slope"] * (vsb + x * tech["ut"])  # V_P referred to the bulk
    vd, vs = _oriented(vb + vsb, vds, reverse)
    return {"vd": vd, "vg": vg, "vs": vs, "vb": vb, "region": inversion, "reversed": reverse}


@st.composite
def cases(draw, family: str, polarity: float) -> tuple[dict, list[dict]]:
    """Parameters and a batch holding one point of every region x orientation (x clamp) combination, so each example
    covers them all; each point carries its own mismatch (dvth [V], dbeta [1]) for both devices and a gate voltage
    for M2, whose other terminals are fixed."""
    tech = draw(technologies(family, polarity))
    if tech["model"] == EKV:
        combos = [
            (ekv_point, inv, sat, rev) for inv in ("weak", "moderate", "strong") for sat in (0, 1) for rev in (0, 1)
        ]
    else:
        clamps = (False, True) if tech["gamma"] else (False,)
        combos = [(square_point, region, rev, c) for region in REGIONS for rev in (False, True) for c in clamps]
    points = []
    for strategy, *where in combos:
        dvth = [draw(st.floats(-0.03, 0.03)) for _ in range(2)]
        dbeta = [draw(st.floats(-0.05, 0.05)) for _ in range(2)]
        point = draw(strategy(tech, tech["vth0"] + dvth[0], *where))
        points.append({**point, "vg2": draw(st.floats(-0.5, 2.5)), "dvth": dvth, "dbeta": dbeta})
    return tech, points


# --------------------------------------------------------------------------------------------- helpers
def _circuit(tech: dict):
    """The two-device test circuit compiled with `tech` (both devices alike)."""
    kind = "nmos" if tech["polarity"] > 0 else "pmos"
    two = np.ones(2)
    params = DeviceParameters(
        names=("M1", "M2"),
        polarity=tech["polarity"] * two,
        model=np.full(2, tech["model"], dtype=int),
        vth=tech["vth0"] * two,
        beta=tech["beta"] * two,
        lam=tech["lam"] * two,
        gamma=tech["gamma"] * two,
        phi=tech["phi"] * two,
        slope=tech["slope"] * two,
        ut=tech["ut"],
        sigma_vth=0.0 * two,
        sigma_beta=0.0 * two,
    )
    return compile_circuit(_netlist(kind), params)


def _unknowns(circuit, tech: dict, points: list[dict]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """MNA unknowns x (S, n) holding the points (node voltages are polarity times the device-frame voltages), and the
    per-sample vth [V], beta [A/V^2] (S, 2)."""
    pol = tech["polarity"]
    x = np.zeros((len(points), circuit.n_unknowns))
    for j, pt in enumerate(points):
        for node, key in (("d", "vd"), ("g", "vg"), ("s", "vs"), ("b", "vb"), ("g2", "vg2")):
            x[j, circuit.node_index(node)] = pol * pt[key]
        x[j, circuit.node_index("vdd")] = pol * VDD
    vth = tech["vth0"] + np.array([pt["dvth"] for pt in points])
    beta = tech["beta"] * (1.0 + np.array([pt["dbeta"] for pt in points]))
    return x, vth, beta


def _fast(reduced, x: np.ndarray, vth: np.ndarray, beta: np.ndarray, k: int, need: str = "dgsb"):
    """Device k through the fast reduced path: sample axis last, fixed terminals as floats."""
    u = reduce_unknowns(reduced, x)
    return device_state(reduced, reduced.stamps[k], u, vth[:, k].copy(), beta[:, k].copy(), need)


def _rest(tech: dict) -> tuple[float, ...]:
    """The model arguments after vth0 and beta: lam, gamma, phi, slope, ut."""
    return tuple(tech[k] for k in ("lam", "gamma", "phi", "slope", "ut"))


def _assert_close(actual, expected, scale, rtol: float, what: str) -> None:
    error = np.abs(np.asarray(actual, dtype=float) - np.asarray(expected, dtype=float))
    assert np.all(error <= rtol * scale), f"{what}: {actual} vs {expected} (scale {scale})"


# --------------------------------------------------------------------------------------------- properties
@EACH_FAMILY
@POLARITIES
@PROPERTY
@given(data=st.data())
def test_fast_and_reference_forms_agree(family, polarity, data):
    tech, points = data.draw(cases(family, polarity))
    circuit = _circuit(tech)
    reduced = reduce_circuit(circuit)
    x, vth, beta = _unknowns(circuit, tech, points)
    xe = extend(x)
    for k in range(2):
        reference = mosfet_currents(circuit, xe, vth, beta, k)
        fast = _fast(reduced, x, vth, beta, k)
        scale = np.max(np.abs(np.stack(reference[1:])), axis=0)
        _assert_close(fast.i, reference[0], np.abs(reference[0]), AGREE_RTOL, f"M{k + 1} current")
        for name, ref in zip(("di_dvd", "di_dvg", "di_dvs", "di_dvb"), reference[1:], strict=True):
            value = getattr(fast, name)
            _assert_close(np.zeros_like(ref) if value is None else value, ref, scale, AGREE_RTOL, f"M{k + 1} {name}")
        # a sample's result does not depend on the batch it is evaluated in (shortcuts keep the bits), and asking for
        # fewer derivatives leaves the others unchanged
        for need in ("dgsb", reduced.stamps[k].need, ""):
            for j in range(len(points)):
                alone = _fast(reduced, x[j : j + 1], vth[j : j + 1], beta[j : j + 1], k, need)
                for name in ("i", "di_dvd", "di_dvg", "di_dvs", "di_dvb"):
                    if getattr(alone, name) is not None:
                        np.testing.assert_array_equal(np.asarray(getattr(alone, name)), getattr(fast, name)[j : j + 1])


def _square_textbook(vd, vg, vs, vb, vth, beta, lam, gamma, phi):
    """Square-law i, gm, gds, gmb in the conducting frame, region by region (Razavi, ch. 2); reverse: -i(swapped)."""
    sign = -1.0 if vd < vs else 1.0
    high, low = max(vd, vs), min(vd, vs)
    vds, vsb = high - low, low - vb
    vov = vg - low - _textbook_threshold(vsb, vth, gamma, phi)
    clamped = phi + vsb < 0.1 * phi
    eta = 0.0 if clamped else gamma / (2.0 * math.sqrt(phi + vsb))  # gmb = eta gm (Razavi, ch. 2)
    if vov <= 0.0:
        return 0.0, 0.0, 0.0, 0.0, sign
    if vds >= vov:  # saturation: beta/2 vov^2 (1 + lam vds)
        i, gm, gds = 0.5 * beta * vov**2 * (1 + lam * vds), beta * vov * (1 + lam * vds), 0.5 * beta * vov**2 * lam
    else:  # triode: beta (vov vds - vds^2/2)(1 + lam vds)
        core = vov * vds - 0.5 * vds**2
        i, gm = beta * core * (1 + lam * vds), beta * vds * (1 + lam * vds)
        gds = beta * ((vov - vds) * (1 + lam * vds) + core * lam)
    return i, gm, gds, eta * gm, sign


def _ekv_textbook(vd, vg, vs, vb, vth, beta, lam, slope, ut):
    """EKV i (Enz, Krummenacher, Vittoz 1995) with F(v) = ln^2(1 + e^(v/2)) in math; returns (i, scale of the two
    terms) so the tolerance can allow for their cancellation at small vds."""

    def f(v):
        soft = v / 2 + math.log1p(math.exp(-v / 2)) if v > 0 else math.log1p(math.exp(v / 2))
        return soft * soft

    vp = (vg - vb - vth) / slope
    i_spec = 2.0 * slope * beta * ut**2
    clm = 1.0 + lam * abs(vd - vs)
    ff, fr = f((vp - (vs - vb)) / ut), f((vp - (vd - vb)) / ut)
    return i_spec * (ff - fr) * clm, i_spec * (ff + fr) * clm


@EACH_FAMILY
@PROPERTY
@given(data=st.data())
def test_values_match_the_textbook_formulas(family, data):
    tech, points = data.draw(cases(family, 1.0))  # the n-channel frame; mirroring is tested at circuit level
    for pt in points:
        vth, beta = tech["vth0"] + pt["dvth"][0], tech["beta"] * (1.0 + pt["dbeta"][0])
        volts = (pt["vd"], pt["vg"], pt["vs"], pt["vb"])
        state = mosfet_state(tech["model"], *volts, vth, beta, *_rest(tech))
        if tech["model"] == EKV:
            i, scale = _ekv_textbook(*volts, vth, beta, tech["lam"], tech["slope"], tech["ut"])
            _assert_close(state.i, i, scale, AGREE_RTOL, "EKV current")
            continue
        i, gm, gds, gmb, sign = _square_textbook(*volts, vth, beta, tech["lam"], tech["gamma"], tech["phi"])
        db = 0.0 if state.di_dvb is None else state.di_dvb
        conductance = max(gm, gds, gmb)
        _assert_close(state.i, sign * i, abs(i), AGREE_RTOL, "current")
        _assert_close(state.di_dvg, sign * gm, conductance, AGREE_RTOL, "gm")
        _assert_close(db, sign * gmb, conductance, AGREE_RTOL, "gmb")
        # forward: d i/d vd = gds, d i/d vs = -(gm + gds + gmb); reversed the roles of drain and source swap
        d_high, d_low = gds, -(gm + gds + gmb)
        _assert_close(state.di_dvd, -d_low if pt["reversed"] else d_high, conductance, AGREE_RTOL, "d i/d vd")
        _assert_close(state.di_dvs, -d_high if pt["reversed"] else d_low, conductance, AGREE_RTOL, "d i/d vs")


@EACH_FAMILY
@POLARITIES
@PROPERTY
@given(data=st.data())
def test_first_derivatives_match_central_differences(family, polarity, data):
    # at the circuit level, so the pmos mirroring is covered: d(polarity * i)/d(node voltage) is what the Jacobian uses
    tech, points = data.draw(cases(family, polarity))
    circuit = _circuit(tech)
    x, vth, beta = _unknowns(circuit, tech, points)
    pol = tech["polarity"]
    _, *analytic = mosfet_currents(circuit, extend(x), vth, beta, 0)
    scale = np.max(np.abs(np.stack(analytic)), axis=0)
    for node, exact in zip(("d", "g", "s", "b"), analytic, strict=True):
        col = circuit.node_index(node)
        up, down = x.copy(), x.copy()
        up[:, col] += STEP
        down[:, col] -= STEP
        numeric = (
            pol
            * (
                mosfet_currents(circuit, extend(up), vth, beta, 0)[0]
                - mosfet_currents(circuit, extend(down), vth, beta, 0)[0]
            )
            / (2 * STEP)
        )
        _assert_close(exact, numeric, scale, FD_RTOL, f"d i/d v{node}")


@EACH_FAMILY
@PROPERTY
@given(data=st.data())
def test_second_derivatives_match_central_differences_of_the_first(family, data):
    tech, points = data.draw(cases(family, 1.0))  # the n-channel frame; mirroring is tested at circuit level
    for pt in points:
        vth, beta = tech["vth0"] + pt["dvth"][0], tech["beta"] * (1.0 + pt["dbeta"][0])
        volts = np.array([pt["vd"], pt["vg"], pt["vs"], pt["vb"]])
        rest = (vth, beta, *_rest(tech))
        hess = mosfet_hessian(tech["model"], *volts, *rest)
        assert hess.shape == (4, 4)
        numeric = np.zeros((4, 4))
        for j in range(4):
            up, down = volts.copy(), volts.copy()
            up[j] += STEP
            down[j] -= STEP
            first_up = np.array(mosfet_state(tech["model"], *up, *rest).currents()[1:])
            first_down = np.array(mosfet_state(tech["model"], *down, *rest).currents()[1:])
            numeric[:, j] = (first_up - first_down) / (2 * STEP)
        scale = np.abs(numeric).max()
        _assert_close(hess, numeric, scale, FD_RTOL, "Hessian")
        _assert_close(hess, hess.T, scale, 1e-12, "Hessian symmetry")  # a Hessian is symmetric


@EACH_FAMILY
@PROPERTY
@given(data=st.data())
def test_hessian_is_vectorised_over_the_sample_axis(family, data):
    tech, points = data.draw(cases(family, 1.0))  # the n-channel frame; mirroring is tested at circuit level
    volts = [np.array([pt[k] for pt in points]) for k in ("vd", "vg", "vs", "vb")]
    vth = tech["vth0"] + np.array([pt["dvth"][0] for pt in points])
    batched = mosfet_hessian(tech["model"], *volts, vth, tech["beta"], *_rest(tech))
    assert batched.shape == (len(points), 4, 4)
    for j in range(len(points)):
        single = mosfet_hessian(tech["model"], *(v[j] for v in volts), vth[j], tech["beta"], *_rest(tech))
        np.testing.assert_allclose(batched[j], single, rtol=1e-14, atol=0.0)


@EACH_FAMILY
@PROPERTY
@given(data=st.data())
def test_operating_point_description_matches_the_textbook(family, data):
    tech, points = data.draw(cases(family, 1.0))  # the n-channel frame; mirroring is tested at circuit level
    for pt in points:
        vth, beta = tech["vth0"] + pt["dvth"][0], tech["beta"] * (1.0 + pt["dbeta"][0])
        op = device_point(tech["model"], pt["vd"], pt["vg"], pt["vs"], pt["vb"], vth, beta, *_rest(tech))
        assert bool(op.reversed) == pt["reversed"]
        low = min(pt["vd"], pt["vs"])
        vsb, vgs, vds = low - pt["vb"], pt["vg"] - low, abs(pt["vd"] - pt["vs"])
        assert float(op.vds) == vds and float(op.vsb) == vsb
        if tech["model"] == EKV:
            # threshold seen from the source vth0 + (n - 1) vsb; IC = I / (2 n beta U_T^2) (Enz, Krummenacher, Vittoz)
            assert math.isclose(float(op.vth), vth + (tech["slope"] - 1.0) * vsb, rel_tol=1e-12, abs_tol=1e-15)
            i_spec = 2.0 * tech["slope"] * beta * tech["ut"] ** 2
            assert math.isclose(float(op.ic), max(float(op.i), 0.0) / i_spec, rel_tol=1e-12)
            assert float(op.i) > 0.0  # the conducting frame: current flows from the higher terminal
            continue
        vt = _textbook_threshold(vsb, vth, tech["gamma"], tech["phi"])
        # Vdsat = Vov = Vgs - Vt in the square law (Razavi, ch. 2); the region is the one the point was drawn in
        assert math.isclose(float(op.vth), vt, rel_tol=1e-12)
        assert math.isclose(float(op.vdsat), max(vgs - vt, 0.0), rel_tol=1e-9, abs_tol=1e-12)
        assert REGIONS[int(op.region)] == pt["region"]
        assert math.isclose(float(op.headroom), vds - float(op.vdsat), rel_tol=1e-12, abs_tol=1e-15)
