"""Process spread and mismatch in one Monte Carlo: [statistics] in the technology, [analysis] variation.

Statistical tolerances come from the sample count: a sample sigma from N samples has relative standard error about
1/sqrt(2(N-1)) (common practice, no source); checks allow 4 of them.
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
import tomli_w

from mcmatch.cli import main
from mcmatch.config.loading import config_from_dict, load_config
from mcmatch.config.schema import Technology
from mcmatch.draws.mismatch import mismatch_from_normals, standard_normals
from mcmatch.draws.process import with_process
from mcmatch.errors import ConfigError
from mcmatch.run.chunks import monte_carlo, run_chunk
from mcmatch.run.study import prepare
from mcmatch.studies.pipeline import run_study
from mcmatch.studies.variation import run_variation

ROOT = Path(__file__).resolve().parents[1]

# Test technology: round square-law numbers (value from memory of typical textbook examples), not a process.
# lambda = 0 and gamma = 0 keep the hand formulas exact; the Pelgrom coefficients are large so that a local part
# left in by mistake would show.
STATS = {
    "polarity_correlation": 0.5,
    "nmos": {"vth_sigma": "15 mV", "kprime_sigma": "3 %"},
    "pmos": {"vth_sigma": "18 mV", "kprime_sigma": "3 %"},
}
TECH = {
    "name": "textbook square law with process statistics",
    "nmos": {"kprime": "200 uA/V^2", "vth0": "0.45 V", "lambda": "0 1/V", "a_vt": "20 mV*um", "a_beta": "2 %*um"},
    "pmos": {"kprime": "50 uA/V^2", "vth0": "0.48 V", "lambda": "0 1/V", "a_vt": "20 mV*um", "a_beta": "2 %*um"},
    "statistics": STATS,
}


def mos(name, kind, drain, gate, source, w="2 um", l="1 um"):  # noqa: E741
    return {"name": name, "type": kind, "drain": drain, "gate": gate, "source": source, "w": w, "l": l}


def vsource(name, plus, value):
    return {"name": name, "plus": plus, "minus": "gnd", "value": value}


def config(circuit, measures, variation=None, tech=None, tmp=Path("t.toml"), specs=None, **analysis):
    raw_analysis = {"samples": 10000, "seed": 3, **analysis}
    if variation is not None:
        raw_analysis["variation"] = variation
    raw = {
        "title": "variation test",
        "technology": tech or TECH,
        "circuit": circuit,
        "measures": measures,
        "specs": specs or {},
        "analysis": {**raw_analysis, "contributions": False},
    }
    return config_from_dict(raw, tmp)


def rel_se(n: int) -> float:
    """Relative standard error of a sample sigma from n samples (common practice, no source)."""
    return 1.0 / math.sqrt(2.0 * (n - 1))


# ---------------------------------------------------------------------------------------------- single device
SINGLE = {
    "mosfet": [mos("M1", "nmos", "d", "g", "gnd")],
    "voltage_source": [vsource("VG", "g", "0.65 V"), vsource("VD", "d", "1 V")],
}


def test_single_nmos_global_spread_matches_the_square_law():
    # Square law (Razavi, Design of Analog CMOS Integrated Circuits): I = (beta/2) Vov^2, so with the gate voltage
    # held, I/I0 = (1 - dVt/Vov)^2 (1 + dk) and, to first order, sigma(I)/I = sqrt((gm/I)^2 sv^2 + sk^2) with
    # gm/I = 2/Vov (common practice, no source). The exact moments of that product of independent normals:
    # x = dVt/Vov ~ N(0, s^2): Var((1-x)^2) = 4 s^2 + 2 s^4, E(1-x)^2 = 1 + s^2; Var(XY) for independent X, Y with
    # E[Y] = 1: Var(X)(1 + sk^2) + E[X]^2 sk^2.
    n = 20000
    cfg = config(SINGLE, {"i": {"current": "M1"}}, variation="global", samples=n)
    study = prepare(cfg)
    cols = monte_carlo(study, n, jobs=1)
    i = cols["i"]
    assert cols["converged"].all()
    vov, sv, sk = 0.65 - 0.45, 0.015, 0.03
    first_order = math.sqrt((2.0 / vov) ** 2 * sv**2 + sk**2)
    s = sv / vov
    exact = math.sqrt((4 * s**2 + 2 * s**4) * (1 + sk**2) + (1 + s**2) ** 2 * sk**2) / (1 + s**2)
    bias = abs(exact / first_order - 1.0)  # the first-order model's own error, here about 0.2 %
    assert bias < 0.01
    measured = i.std(ddof=1) / i.mean()
    assert measured == pytest.approx(exact, rel=4 * rel_se(n))
    assert measured == pytest.approx(first_order, rel=4 * rel_se(n) + bias)
    # "global" alone: no local Pelgrom part (every device column is the one die-wide draw: one device, one polarity)
    dvth = cols["dvth_M1"]
    assert dvth.std(ddof=1) == pytest.approx(sv, rel=4 * rel_se(n))
    # the linearised summary gives the first-order formula exactly (relative to the nominal current)
    nominal = 0.5 * 200e-6 * 2 * vov**2
    block = run_variation(cfg, study, {"measures": {"i": {"std": float(i.std(ddof=1))}}})["variation"]
    assert block["mode"] == "global" and block["method"] == "linearised"
    assert block["measures"]["i"]["std_local"] == 0.0
    assert block["measures"]["i"]["std_global"] / nominal == pytest.approx(first_order, rel=1e-9)


def test_both_keeps_the_local_draws_and_adds_the_global_ones():
    # the mismatch draws of "both" are those of "local" (own stream), the global ones those of "global"
    n = 3000
    parts = {}
    for mode in ("local", "global", "both"):
        study = prepare(config(SINGLE, {"i": {"current": "M1"}}, variation=mode, samples=n))
        parts[mode] = run_chunk(study, 0, n)
    for key in ("dvth_M1", "dbeta_M1"):
        assert np.array_equal(parts["both"][key], parts["local"][key] + parts["global"][key])
    # the local draws are the documented block-seeded stream scaled by the Pelgrom sigmas (mismatch_from_normals)
    study = prepare(config(SINGLE, {"i": {"current": "M1"}}, variation="local", samples=n))
    z = standard_normals(study.seed, 0, n, 2, study.stream)
    dvth, _ = mismatch_from_normals(study.circuit.params, z)
    assert np.array_equal(parts["local"]["dvth_M1"], dvth[:, 0])
    # what placement's own draw loop adds is the same per-sample global draw
    zero = np.zeros((n, 1))
    g_vth, g_beta = with_process(
        prepare(config(SINGLE, {"i": {"current": "M1"}}, variation="global")).variation, study.seed, 0, zero, zero
    )
    assert np.array_equal(g_vth[:, 0], parts["global"]["dvth_M1"])
    assert np.array_equal(g_beta[:, 0], parts["global"]["dbeta_M1"])


@pytest.mark.parametrize("sampling", ["random", "sobol"])
def test_global_draws_do_not_depend_on_the_chunking(sampling):
    # reproducibility contract (DESIGN.md section 3): same seed, same numbers whatever the chunking
    study = prepare(config(SINGLE, {"i": {"current": "M1"}}, variation="both", sampling=sampling))
    whole = run_chunk(study, 0, 5000)
    pieces = [run_chunk(study, a, b) for a, b in ((0, 1234), (1234, 4097), (4097, 5000))]
    for key in ("i", "dvth_M1", "dbeta_M1"):
        assert np.array_equal(whole[key], np.concatenate([p[key] for p in pieces]))


# ---------------------------------------------------------------------------------------------- 1:1 mirror
def mirror(lam: str = "0.02 1/V"):
    tech = {**TECH, "nmos": {**TECH["nmos"], "lambda": lam}}
    circuit = {
        "mosfet": [mos("MREF", "nmos", "g", "g", "gnd"), mos("MOUT", "nmos", "out", "g", "gnd")],
        "resistor": [{"name": "RREF", "a": "vdd", "b": "g", "value": "50 kohm"}],
        "voltage_source": [vsource("VDD", "vdd", "1.8 V"), vsource("VOUT", "out", "0.9 V")],
    }
    measures = {
        "i_out": {"current": "MOUT"},
        "err": {"ratio": ["MOUT", "MREF"], "ideal": 1},
        "v_g": {"voltage": "g"},
    }
    return circuit, measures, tech


@pytest.mark.slow
def test_mirror_ratio_cancels_global_shifts_and_variances_add():
    n = 20000
    circuit, measures, tech = mirror()
    cols, studies = {}, {}
    for mode in ("local", "global", "both"):
        cfg = config(circuit, measures, variation=mode, tech=tech, samples=n)
        studies[mode] = (cfg, prepare(cfg))
        cols[mode] = monte_carlo(studies[mode][1], n, jobs=1)
        assert cols[mode]["converged"].all()
    # "global" only: both devices see the same vth and beta and the same V_GS, so with channel-length modulation
    # (square law with lambda, Razavi) the ratio is exactly (1 + lambda V_out)/(1 + lambda V_GS), sample by sample:
    # zero to first order in the global shifts but for lambda times the shift of V_GS
    lam, v_out = 0.02, 0.9
    g = cols["global"]
    assert np.allclose(g["err"], (1 + lam * v_out) / (1 + lam * g["v_g"]) - 1.0, rtol=0, atol=1e-9)
    assert g["err"].std() < 0.05 * cols["local"]["err"].std()
    # ... while the output current follows the reference current (V_DD - V_GS)/R, which the global shifts move
    rel_i = g["i_out"].std(ddof=1) / g["i_out"].mean()
    assert rel_i > 0.01
    # "both": var_total = var_local + var_global (independent draws) within sampling error (4 SE of a variance,
    # relative SE sqrt(2/(N-1)))
    for name in ("i_out", "err", "v_g"):
        total = cols["both"][name].var(ddof=1)
        parts = cols["local"][name].var(ddof=1) + cols["global"][name].var(ddof=1)
        assert total == pytest.approx(parts, rel=4 * math.sqrt(2.0 / (n - 1)))
    # the linearised summary agrees with the Monte Carlo of "both" (first order; 4 SE of a sigma)
    cfg, study = studies["both"]
    summary = {"measures": {k: {"std": float(cols["both"][k].std(ddof=1))} for k in measures}}
    block = run_variation(cfg, study, summary)["variation"]
    for name in ("i_out", "v_g"):
        m = block["measures"][name]
        assert m["std_total"] == pytest.approx(math.hypot(m["std_local"], m["std_global"]), rel=1e-12)
        assert m["std_total"] == pytest.approx(m["mc_std"], rel=4 * rel_se(n) + 0.01)
        assert m["std_local"] == pytest.approx(cols["local"][name].std(ddof=1), rel=4 * rel_se(n) + 0.01)
        assert m["std_global"] == pytest.approx(cols["global"][name].std(ddof=1), rel=4 * rel_se(n) + 0.01)


# ---------------------------------------------------------------------------------------------- both polarities
def pmos_mirror(rho: float):
    # an nmos sink (gate held by VG) drawing from a diode-connected pmos MP1 that a pmos MP2 mirrors into VOUT;
    # kprime_sigma = 0 makes the node voltage below exactly linear in the two global threshold draws
    stats = {
        "polarity_correlation": rho,
        "nmos": {"vth_sigma": "15 mV", "kprime_sigma": "0 %"},
        "pmos": {"vth_sigma": "18 mV", "kprime_sigma": "0 %"},
    }
    tech = {**TECH, "statistics": stats}
    circuit = {
        "mosfet": [
            mos("MN", "nmos", "p", "g", "gnd", w="2 um", l="1 um"),  # beta_n = 200 uA/V^2 * 2 = 400 uA/V^2
            mos("MP1", "pmos", "p", "p", "vdd", w="8 um", l="1 um"),  # beta_p = 50 uA/V^2 * 8 = 400 uA/V^2
            mos("MP2", "pmos", "out", "p", "vdd", w="8 um", l="1 um"),
        ],
        "voltage_source": [
            vsource("VDD", "vdd", "1.8 V"),
            vsource("VG", "g", "0.75 V"),
            vsource("VOUT", "out", "0.9 V"),
        ],
    }
    return circuit, {"v_p": {"voltage": "p"}, "i_out": {"current": "MP2"}}, tech


@pytest.mark.slow
def test_polarity_correlation_shows_in_a_circuit_with_both_polarities():
    # Square law (Razavi): MN carries (beta_n/2)(V_G - V_tn)^2, MP1's V_SG = |V_tp| + sqrt(2 I / beta_p), so
    # v_p = V_DD - |V_tp| - sqrt(beta_n/beta_p) (V_G - V_tn): dv_p = -dV_tp + r dV_tn with r = 1 here, and
    # var = s_p^2 + r^2 s_n^2 - 2 rho r s_n s_p (exact: linear in the draws).
    n = 10000
    rho, sn, sp, r = 0.5, 0.015, 0.018, 1.0
    circuit, measures, tech = pmos_mirror(rho)
    cfg = config(circuit, measures, variation="global", tech=tech, samples=n)
    study = prepare(cfg)
    cols = monte_carlo(study, n, jobs=1)
    assert cols["converged"].all()
    with_rho = math.sqrt(sp**2 + r**2 * sn**2 - 2 * rho * r * sn * sp)
    without = math.sqrt(sp**2 + r**2 * sn**2)
    measured = cols["v_p"].std(ddof=1)
    assert measured == pytest.approx(with_rho, rel=4 * rel_se(n))
    assert abs(measured / without - 1.0) > 8 * rel_se(n)
    block = run_variation(cfg, study, {"measures": {}})["variation"]
    assert block["measures"]["v_p"]["std_global"] == pytest.approx(with_rho, rel=1e-6)
    # the same circuit with correlation 0: the linear model (and the Monte Carlo) give the uncorrelated sum
    circuit0, _, tech0 = pmos_mirror(0.0)
    cfg0 = config(circuit0, measures, variation="global", tech=tech0, samples=n)
    study0 = prepare(cfg0)
    assert run_variation(cfg0, study0, {"measures": {}})["variation"]["measures"]["v_p"]["std_global"] == (
        pytest.approx(without, rel=1e-6)
    )
    assert monte_carlo(study0, n, jobs=1)["v_p"].std(ddof=1) == pytest.approx(without, rel=4 * rel_se(n))


@pytest.mark.slow
def test_high_sigma_samples_the_global_draws():
    # with "global" alone and kprime_sigma = 0 the diode node of the pmos mirror is exactly linear in the two
    # correlated threshold draws (see above), so a limit 4.5 sigma above nominal fails with probability
    # norm.sf(4.5) = 3.4e-6 (scipy.stats.norm); the importance-sampling estimate must hold it within 4 of its
    # standard errors, with samples that plain Monte Carlo would never see fail
    from scipy import stats

    from mcmatch.run.study import nominal_measures
    from mcmatch.studies.extra import run_high_sigma

    rho, sn, sp = 0.5, 0.015, 0.018
    sigma = math.sqrt(sp**2 + sn**2 - 2 * rho * sn * sp)
    circuit, measures, tech = pmos_mirror(rho)
    probe = prepare(config(circuit, measures, variation="global", tech=tech))
    limit = nominal_measures(probe)["v_p"] + 4.5 * sigma
    cfg = config(
        circuit,
        measures,
        variation="global",
        tech=tech,
        specs={"v_p": {"max": f"{limit!r} V"}},
        high_sigma={"samples": 4000},
    )
    out = run_high_sigma(cfg, prepare(cfg))["v_p"]
    exact = float(stats.norm.sf(4.5))
    assert abs(out["fail_probability"] - exact) < 4 * out["std_error"]
    assert out["std_error"] < 0.2 * exact  # the shift found the failure region
    assert out["sigma_level"] == pytest.approx(4.5, abs=0.1)


# ---------------------------------------------------------------------------------------------- local unchanged
def test_local_summary_equals_the_default():
    circuit, measures, tech = mirror()
    a = run_study(config(circuit, measures, tech=tech, samples=3000))
    b = run_study(config(circuit, measures, variation="local", tech=tech, samples=3000))
    assert "variation" not in a.summary and "variation" not in b.summary
    for key in ("measures", "yield", "failed_solves", "nominal_operating_point", "operating_point"):
        assert a.summary[key] == b.summary[key]
    assert a.table.equals(b.table)


def test_demo_runs_with_both(demo_project, capsys):
    # the bundled demo with variation = "both": the console says the mode, summary["variation"] splits the spread
    text = demo_project.read_text().replace("seed = 1\n", 'seed = 1\nvariation = "both"\n')
    demo_project.write_text(text.split("[analysis.corners]")[0])  # the main run only
    out = demo_project.parent / "out"
    assert main(["run", str(demo_project), "--samples", "4000", "--out", str(out), "--no-report"]) == 0
    assert "variation both" in capsys.readouterr().out
    block = json.loads((out / "summary.json").read_text())["variation"]
    assert block["mode"] == "both"
    # the diode voltage follows the global threshold; the current-fed mirror's output current hardly does (the
    # reference current sets it whatever the global shift: first order, the mirror cancels it)
    v_nb, i_out = block["measures"]["v_nb"], block["measures"]["i_out"]
    assert v_nb["std_global"] > 5 * v_nb["std_local"]
    assert i_out["std_global"] < 0.2 * i_out["std_local"]
    # the report's variation table carries every measure of the split, with the global share of the variance
    from mcmatch.report.format import plain
    from mcmatch.report.render import render_report

    html = render_report(json.loads((out / "summary.json").read_text()), None, "")
    section = html[html.index('<section id="variation"') :]
    section = section[: section.index("</section>")]
    for name in block["measures"]:
        assert f">{name}<" in section
    share = v_nb["std_global"] ** 2 / (v_nb["std_global"] ** 2 + v_nb["std_local"] ** 2)
    assert share > 25 / 26 and f"{plain(share * 100, 3)} %" in section


# ---------------------------------------------------------------------------------------------- validation
def write_tech(tmp_path: Path, statistics: dict) -> Path:
    tech = {**{k: v for k, v in TECH.items() if k != "statistics"}, "statistics": statistics}
    path = tmp_path / "tech.toml"
    path.write_text(tomli_w.dumps(tech))
    cfg = {
        "technology": "tech.toml",
        "circuit": SINGLE,
        "measures": {"i": {"current": "M1"}},
        "analysis": {"samples": 100, "variation": "global"},
    }
    out = tmp_path / "c.toml"
    out.write_text(tomli_w.dumps(cfg))
    return out


@pytest.mark.parametrize(
    ("statistics", "key"),
    [
        ({"nmos": {"vth_sigma": "-1 mV"}}, "statistics.nmos.vth_sigma"),
        ({"pmos": {"kprime_sigma": "-3 %"}}, "statistics.pmos.kprime_sigma"),
        ({"polarity_correlation": 1.5}, "statistics.polarity_correlation"),
        ({"nmos": {"vth_sigma": "3 V/s"}}, "statistics.nmos.vth_sigma"),
        ({"nmos": {"vth_spread": "3 mV"}}, "statistics.nmos.vth_spread"),
    ],
)
def test_bad_statistics_exit_2_naming_file_and_key(tmp_path, capsys, statistics, key):
    path = write_tech(tmp_path, statistics)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert info.value.file.endswith("tech.toml") and info.value.key == key
    assert main(["run", str(path), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "tech.toml" in err and key in err
    assert not (tmp_path / "out").exists()


def test_global_without_statistics_is_refused():
    bare = {k: v for k, v in TECH.items() if k != "statistics"}
    with pytest.raises(ConfigError) as info:
        config(SINGLE, {"i": {"current": "M1"}}, variation="both", tech=bare)
    assert info.value.key == "analysis.variation" and "[statistics]" in info.value.message
    with pytest.raises(ConfigError) as info:
        config(SINGLE, {"i": {"current": "M1"}}, variation="sometimes")
    assert info.value.key == "analysis.variation"
    # local needs no statistics; an override through the public API is checked the same way
    local = config(SINGLE, {"i": {"current": "M1"}}, tech=bare)
    assert local.analysis.variation == "local"
    with pytest.raises(ConfigError) as info:
        local.with_analysis(variation="global")
    assert info.value.key == "analysis.variation"


def test_bundled_technologies_carry_statistics():
    for path in sorted((ROOT / "configs" / "technologies").glob("*.toml")):
        tech = Technology.model_validate(tomllib.loads(path.read_text()))
        assert tech.statistics is not None, path.name
        assert tech.statistics.nmos.vth_sigma > 0 and tech.statistics.pmos.kprime_sigma > 0
        assert abs(tech.statistics.polarity_correlation) <= 1
