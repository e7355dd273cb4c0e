"""Core engine against textbook results and scipy: square law, diode resistance, Pelgrom, mirror error, seeds."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize

from mcmatch.cli import main
from mcmatch.config.loading import config_from_dict
from mcmatch.draws.mismatch import BLOCK, standard_normals
from mcmatch.model.circuit import GMIN, residual_jacobian
from mcmatch.model.technology import pair_sigma, pelgrom_sigma
from mcmatch.results.tables import read_samples
from mcmatch.run.chunks import monte_carlo, run_chunk
from mcmatch.run.study import nominal_measures, prepare, solve_samples

# Test technologies: round textbook-style numbers (value from memory of typical classroom examples), not a process.
TEXTBOOK = {
    "name": "textbook square law",
    "nmos": {"kprime": "100 uA/V^2", "vth0": "1 V", "lambda": "0 1/V"},
    "pmos": {"kprime": "40 uA/V^2", "vth0": "0.8 V", "lambda": "0 1/V"},
}
REALISTIC = {
    "name": "square law with lambda and body effect",
    "nmos": {
        "kprime": "300 uA/V^2",
        "vth0": "0.45 V",
        "lambda_l": "0.08 um/V",
        "gamma": "0.45 V^0.5",
        "phi": "0.85 V",
        "a_vt": "4.5 mV*um",
        "a_beta": "1 %*um",
    },
    "pmos": {
        "kprime": "70 uA/V^2",
        "vth0": "0.48 V",
        "lambda_l": "0.1 um/V",
        "gamma": "0.4 V^0.5",
        "phi": "0.8 V",
        "a_vt": "5 mV*um",
        "a_beta": "1 %*um",
    },
}
EKV_TECH = {
    "name": "EKV",
    "nmos": {
        "model": "ekv",
        "kprime": "300 uA/V^2",
        "vth0": "0.45 V",
        "lambda": "0.05 1/V",
        "slope": 1.3,
        "a_vt": "4.5 mV*um",
        "a_beta": "1 %*um",
    },
    "pmos": {
        "model": "ekv",
        "kprime": "70 uA/V^2",
        "vth0": "0.48 V",
        "lambda": "0.05 1/V",
        "slope": 1.35,
        "a_vt": "5 mV*um",
        "a_beta": "1 %*um",
    },
}


def mos(name, kind, d, g, s, w="4 um", l="2 um", m=1, **extra):  # noqa: E741
    return {"name": name, "type": kind, "drain": d, "gate": g, "source": s, "w": w, "l": l, "m": m, **extra}


def build(technology, mosfets, isources=(), vsources=(), measures=None, specs=None, analysis=None, path="t.toml"):
    raw = {
        "title": "test",
        "technology": technology,
        "circuit": {"mosfet": list(mosfets), "current_source": list(isources), "voltage_source": list(vsources)},
        "measures": measures or {},
        "specs": specs or {},
        "analysis": analysis or {"samples": 1000, "seed": 3},
    }
    return config_from_dict(raw, Path(path))


def diode(kind, technology, iref="10 uA"):
    if kind == "nmos":
        return build(
            technology,
            [mos("M1", "nmos", "nb", "nb", "gnd")],
            [{"name": "IREF", "from": "vdd", "to": "nb", "value": iref}],
            [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"}],
            {"v": {"voltage": "nb"}, "r": {"resistance": "nb"}, "i": {"current": "M1"}},
        )
    return build(
        technology,
        [mos("M1", "pmos", "nb", "nb", "vdd")],
        [{"name": "IREF", "from": "nb", "to": "gnd", "value": iref}],
        [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"}],
        {"v": {"voltage": "nb"}, "r": {"resistance": "nb"}, "i": {"current": "M1"}},
    )


def simple_mirror(kind, technology, ratio=1):
    if kind == "nmos":
        ms = [mos("MREF", "nmos", "nb", "nb", "gnd"), mos("MOUT", "nmos", "out", "nb", "gnd", m=ratio)]
        isrc = [{"name": "IREF", "from": "vdd", "to": "nb", "value": "10 uA"}]
        vout = {"name": "VOUT", "plus": "out", "minus": "gnd", "value": "0.9 V"}
    else:
        ms = [mos("MREF", "pmos", "nb", "nb", "vdd"), mos("MOUT", "pmos", "out", "nb", "vdd", m=ratio)]
        isrc = [{"name": "IREF", "from": "nb", "to": "gnd", "value": "10 uA"}]
        vout = {"name": "VOUT", "plus": "out", "minus": "gnd", "value": "0.9 V"}
    return build(
        technology,
        ms,
        isrc,
        [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"}, vout],
        {"i_out": {"current": "MOUT"}, "err": {"ratio": ["MOUT", "IREF"], "ideal": ratio}, "r": {"resistance": "nb"}},
    )


def cascode_mirror(kind, technology):
    if kind == "nmos":
        ms = [
            mos("M1", "nmos", "nb", "nb", "gnd"),
            mos("M2", "nmos", "x", "nb", "gnd"),
            mos("M3", "nmos", "nc", "nc", "nb"),
            mos("M4", "nmos", "out", "nc", "x"),
        ]
        isrc = [{"name": "IREF", "from": "vdd", "to": "nc", "value": "10 uA"}]
    else:
        ms = [
            mos("M1", "pmos", "nb", "nb", "vdd"),
            mos("M2", "pmos", "x", "nb", "vdd"),
            mos("M3", "pmos", "nc", "nc", "nb"),
            mos("M4", "pmos", "out", "nc", "x"),
        ]
        isrc = [{"name": "IREF", "from": "nc", "to": "gnd", "value": "10 uA"}]
    return build(
        technology,
        ms,
        isrc,
        [
            {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "3.3 V"},
            {"name": "VOUT", "plus": "out", "minus": "gnd", "value": "1.6 V"},
        ],
        {"i_out": {"current": "M4"}, "v_x": {"voltage": "x"}, "err": {"ratio": ["M4", "IREF"]}},
    )


def test_square_law_diode_voltages():
    # Fact of the trade (Razavi, Design of Analog CMOS Integrated Circuits, 2nd ed., 2017, ch. 2):
    # k'W/L = 100 uA/V^2, Vt = 1 V: I = 50, 200, 450 uA at V = 2, 3, 4 V. W = L = 1 um gives k'W/L = k'.
    tech = {**TEXTBOOK, "nmos": {**TEXTBOOK["nmos"]}}
    for current, volts in ((50e-6, 2.0), (200e-6, 3.0), (450e-6, 4.0)):
        cfg = build(
            tech,
            [mos("M1", "nmos", "nb", "nb", "gnd", w="1 um", l="1 um")],
            [{"name": "IREF", "from": "vdd", "to": "nb", "value": current}],
            [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "5 V"}],
            {"v": {"voltage": "nb"}, "i": {"current": "M1"}},
        )
        nominal = nominal_measures(prepare(cfg))
        # gmin (1e-12 S across the channel) takes gmin*V of the current: a 1e-12 relative effect at most here
        assert nominal["v"] == pytest.approx(volts, rel=1e-7)
        assert nominal["i"] == pytest.approx(current - GMIN * volts, rel=1e-12)


@pytest.mark.parametrize("kind", ["nmos", "pmos"])
@pytest.mark.parametrize("technology", [REALISTIC, EKV_TECH], ids=["square-law", "ekv"])
def test_diode_node_resistance_is_one_over_gm_plus_gds(kind, technology):
    # Razavi, Design of Analog CMOS Integrated Circuits, 2nd ed., 2017, ch. 3: a diode-connected device looks like
    # 1/(gm + gds) (plus gmb where the source is not at the bulk; here source = bulk). gmin is part of our model.
    cfg = diode(kind, technology)
    study = prepare(cfg)
    nominal = nominal_measures(study)
    from mcmatch.model.circuit import extend, mosfet_currents

    p = study.circuit.params
    xe = extend(study.x_nominal[None, :])
    i, di_d, di_g, di_s, di_b = mosfet_currents(study.circuit, xe, p.vth[None, :], p.beta[None, :], 0)
    gm, gds = float(di_g[0]), float(di_d[0])
    assert gm > 0 and gds > 0
    assert nominal["r"] == pytest.approx(1.0 / (gm + gds + GMIN), rel=1e-10)
    # and the diode sits above threshold in saturation by construction
    assert abs(nominal["v"]) > 0


def _reference_solve(study, vth, beta):
    """scipy.optimize.root on one sample of the same equations (the reference library of DESIGN.md section 4)."""
    circuit = study.circuit

    def fun(x):
        f, j = residual_jacobian(circuit, x[None, :], vth[None, :], beta[None, :])
        return f[0], j[0]

    sol = optimize.root(fun, study.x_nominal.copy(), jac=True, method="hybr", options={"xtol": 1e-14})
    # hybr may stop with "xtol too small" once at machine precision; the residual is the real test
    assert sol.success or np.abs(sol.fun).max() < 1e-18, sol.message
    return sol.x


@pytest.mark.parametrize("kind", ["nmos", "pmos"])
@pytest.mark.parametrize("builder", [diode, simple_mirror, cascode_mirror], ids=["diode", "mirror", "cascode"])
@pytest.mark.parametrize("technology", [REALISTIC, EKV_TECH], ids=["square-law", "ekv"])
def test_batched_solve_matches_scipy_root(kind, builder, technology):
    # Reference library: scipy.optimize.root on each single sample must agree with the batched solver to 1e-9.
    cfg = builder(kind, technology)
    study = prepare(cfg)
    p = study.circuit.params
    rng = np.random.default_rng(7)
    n = 40
    dvth = rng.standard_normal((n, p.count)) * 5e-3
    dbeta = rng.standard_normal((n, p.count)) * 1e-2
    batched = solve_samples(study, dvth, dbeta)
    assert batched["converged"].all()
    from mcmatch.draws.mismatch import perturbed
    from mcmatch.solve.measures import mna_measures

    vth, beta = perturbed(p, dvth, dbeta)
    for s in range(n):
        x = _reference_solve(study, vth[s], beta[s])
        ref = mna_measures(study.circuit, study.measures, x[None, :], vth[s : s + 1], beta[s : s + 1])
        for key, values in ref.items():
            if study.measures[key].kind == "ratio":  # ratio/ideal - 1: compare the ratio itself, 1e-9 relative
                assert batched[key][s] + 1 == pytest.approx(values[0] + 1, rel=1e-9), (key, s)
            else:
                assert batched[key][s] == pytest.approx(values[0], rel=1e-9, abs=1e-15), (key, s)


def test_pelgrom_pair_convention_numbers():
    # Pelgrom, Duinmaijer, Welbers, "Matching properties of MOS transistors", IEEE JSSC 24(5), 1989:
    # A_VT = 5 mV um, W/L = 10/1 um -> pair difference sigma 1.5811 mV, per device 1.1180 mV.
    a_vt, area = 5e-3 * 1e-6, 10e-6 * 1e-6
    assert pair_sigma(a_vt, area) == pytest.approx(1.5811e-3, rel=1e-4)
    assert float(pelgrom_sigma(a_vt, area)) == pytest.approx(1.1180e-3, rel=1e-4)
    # unequal areas: sigma^2 = (A^2/2)(1/A1 + 1/A2)
    assert pair_sigma(a_vt, area, 4 * area) == pytest.approx(math.sqrt(a_vt**2 / 2 * (1 / area + 1 / (4 * area))))


def test_pelgrom_draws_give_pair_sigma():
    # Pelgrom 1989 pair convention, checked on the engine's own draws: the difference of two identical devices'
    # dVt has sigma A_VT/sqrt(WL). Tolerance: 4 standard errors of a sample sigma, 1/sqrt(2(N-1)) relative.
    tech = {**REALISTIC, "nmos": {**REALISTIC["nmos"], "a_vt": "5 mV*um"}}
    cfg = simple_mirror("nmos", tech)
    cfg = cfg.with_circuit(
        cfg.circuit.model_copy(
            update={"mosfet": [m.model_copy(update={"w": 10e-6, "l": 1e-6}) for m in cfg.circuit.mosfet]}
        )
    )
    study = prepare(cfg)
    n = 40000
    cols = run_chunk(study, 0, n)
    diff = cols["dvth_MOUT"] - cols["dvth_MREF"]
    tol = 4 / math.sqrt(2 * (n - 1))
    assert np.std(diff, ddof=1) == pytest.approx(1.5811e-3, rel=tol)


def test_one_to_one_mirror_sigma_matches_pelgrom_kinget():
    # Pelgrom 1989; Kinget, "Device mismatch and tradeoffs in the design of analog circuits", IEEE JSSC 40(6), 2005:
    # sigma^2(dI/I) = sigma^2(dbeta/beta) + (gm/I)^2 sigma^2(dVt), gm/I = 2/Vov. A_VT = 5 mV um, A_beta = 1 % um,
    # W/L = 10/1 um, Vov = 0.2 V gives 1.6125 %. lambda = 0 so the drain voltage does not matter.
    # I = k'/2 (W/L) Vov^2 = 200e-6/2 * 10 * 0.04 = 40 uA.
    tech = {
        "name": "Kinget example",
        "nmos": {"kprime": "200 uA/V^2", "vth0": "0.4 V", "lambda": 0.0, "a_vt": "5 mV*um", "a_beta": "1 %*um"},
    }
    cfg = build(
        tech,
        [
            mos("MREF", "nmos", "nb", "nb", "gnd", w="10 um", l="1 um"),
            mos("MOUT", "nmos", "out", "nb", "gnd", w="10 um", l="1 um"),
        ],
        [{"name": "IREF", "from": "vdd", "to": "nb", "value": "40 uA"}],
        [
            {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"},
            {"name": "VOUT", "plus": "out", "minus": "gnd", "value": "1.0 V"},
        ],
        {"err": {"ratio": ["MOUT", "IREF"]}, "v": {"voltage": "nb"}},
        analysis={"samples": 40000, "seed": 11},
    )
    study = prepare(cfg)
    assert nominal_measures(study)["v"] == pytest.approx(0.6, rel=1e-6)
    cols = monte_carlo(study, 40000, jobs=1)
    n = int(cols["converged"].sum())
    assert n == 40000
    expected = math.sqrt(0.01**2 / 10 + (2 / 0.2) ** 2 * (5e-3) ** 2 / 10)
    assert expected == pytest.approx(0.016125, rel=1e-4)
    # 4 standard errors of a sample sigma; the square law's second-order terms add well under 0.1 % of sigma here
    tol = 4 / math.sqrt(2 * (n - 1))
    assert np.std(cols["err"], ddof=1) == pytest.approx(expected, rel=tol)


def test_random_stream_independent_of_chunking():
    # Common practice, no source: the draws of sample i depend only on (seed, i).
    whole = standard_normals(5, 0, 2 * BLOCK + 17, 4)
    parts = np.concatenate(
        [standard_normals(5, a, b, 4) for a, b in ((0, 1000), (1000, BLOCK + 3), (BLOCK + 3, 2 * BLOCK + 17))]
    )
    assert np.array_equal(whole, parts)
    assert not np.array_equal(standard_normals(6, 0, 10, 4), whole[:10])


DEMO = Path(__file__).resolve().parents[1] / "configs" / "demo.toml"


def test_same_seed_same_table_for_one_and_two_jobs(tmp_path):
    # Common practice, no source: reproducibility must not depend on the worker count.
    args = ["run", str(DEMO), "--samples", str(2 * BLOCK + 1000), "--seed", "4", "--quiet"]
    assert main([*args, "--jobs", "1", "--out", str(tmp_path / "a")]) == 0
    assert main([*args, "--jobs", "2", "--out", str(tmp_path / "b")]) == 0
    a = read_samples(tmp_path / "a" / "samples.csv")
    b = read_samples(tmp_path / "b" / "samples.csv")
    assert a.equals(b)
    assert (tmp_path / "a" / "summary.json").read_text() != ""


def test_run_writes_contract_fields(tmp_path):
    # DESIGN.md section 3 contract (project's own file contract).
    import json

    assert main(["run", str(DEMO), "--samples", "3000", "--out", str(tmp_path / "r"), "--quiet"]) == 0
    summary = json.loads((tmp_path / "r" / "summary.json").read_text())
    for key in ("title", "samples", "seed", "failed_solves", "measures", "yield"):
        assert key in summary
    assert summary["samples"] == 3000
    m = summary["measures"]["gain_error"]
    for key in ("unit", "nominal", "mean", "std", "min", "max", "quantiles"):
        assert key in m
    assert set(m["quantiles"]) >= {"0.00135", "0.5", "0.99865"}
    y = summary["yield"]
    assert y["method"] == "clopper-pearson" and y["total"] == 3000
    assert y["ci95"][0] <= y["fraction"] <= y["ci95"][1]
    table = read_samples(tmp_path / "r" / "samples.csv")
    assert len(table) == 3000 and table["converged"].all()
