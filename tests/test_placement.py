"""Placement patterns under gradients: hand-computed centroid errors, common-centroid cancellation, the distance term,
the circuit-level systematic error and the `mcmatch placements` command."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from mcmatch.cli import main
from mcmatch.config.analysis import Placement
from mcmatch.config.loading import config_from_dict
from mcmatch.draws.placement import (
    cell_layout,
    count_warnings,
    device_shifts,
    distance_terms,
    pick_best,
)
from mcmatch.run.study import prepare
from mcmatch.studies.extra import run_extra_analyses, run_placements

CONFIGS = Path(__file__).resolve().parent.parent / "configs"
P = 4e-6  # cell pitch [m]
G = 20.0  # 0.02 mV/um threshold gradient [V/m]


def placement(rows_list: list, **fields) -> Placement:
    data = {
        "pitch": [P, P],
        "devices": {"A": "MA", "B": "MB"},
        "candidate": [{"name": f"c{i}", "rows": rows} for i, rows in enumerate(rows_list)],
        **fields,
    }
    return Placement.model_validate(data)


def difference(rows: list[str], what: str = "vth", **fields) -> float:
    s = device_shifts(rows, placement([rows], **fields))
    values = s.vth if what == "vth" else s.beta
    return values["MA"] - values["MB"]


# ----------------------------------------------------------------------------------------------- geometry
@pytest.mark.parametrize("origin", ["corner", "center"])
def test_linear_gradient_one_row_hand_values(origin):
    # A linear gradient moves each device by g times its centroid x (hand calculation: AABB has A at 0.5p, B at 2.5p,
    # ABAB A at p, B at 2p, ABBA both at 1.5p). Hastings, The Art of Analog Layout, 2nd ed., 2006, common-centroid rules
    tol = 1e-12 * G * P
    assert difference(["AABB"], vth_gradient=[G, 0.0], origin=origin) == pytest.approx(-2 * P * G, abs=tol)
    assert difference(["ABAB"], vth_gradient=[G, 0.0], origin=origin) == pytest.approx(-P * G, abs=tol)
    assert abs(difference(["ABBA"], vth_gradient=[G, 0.0], origin=origin)) < tol


def test_beta_gradient_follows_the_same_centroid_rule():
    # same hand calculation for dbeta/beta with a gradient of 0.01 %/um = 100 1/m (common practice, no source)
    g = 100.0
    assert difference(["AABB"], "beta", beta_gradient=[g, 0.0]) == pytest.approx(-2 * P * g, rel=1e-12)
    assert difference(["AABB"], "vth", beta_gradient=[g, 0.0]) == 0.0


def test_two_dimensional_common_centroid_cancels_any_linear_gradient():
    # cross-coupled quad AB/BA: both centroids at the array centre, so any linear gradient cancels to rounding
    # (Hastings, The Art of Analog Layout, 2nd ed., 2006, common-centroid rules)
    for gx, gy in [(G, 0.0), (0.0, G), (G, -3 * G), (-0.7 * G, 2.2 * G)]:
        assert abs(difference(["AB", "BA"], vth_gradient=[gx, gy])) < 1e-12 * G * P
        assert abs(difference(["DABBAD", "DBAABD"], vth_gradient=[gx, gy])) < 1e-12 * G * P
    # rows AB/AB: A sits one pitch left of B in every row; a y gradient cancels, an x gradient does not (hand value)
    assert difference(["AB", "AB"], vth_gradient=[0.0, G]) == pytest.approx(0.0, abs=1e-12 * G * P)
    assert difference(["AB", "AB"], vth_gradient=[G, 0.0]) == pytest.approx(-P * G, rel=1e-12)


def test_quadratic_gradient_is_not_cancelled_by_a_one_row_common_centroid():
    # ABBA about the centre: A cells at x = +-1.5p (mean x^2 = 2.25 p^2), B at +-0.5p (0.25 p^2): a q x^2 field leaves
    # q (2.25 - 0.25) p^2 = 2 q p^2 (hand calculation; Hastings 2006 notes common centroid cancels linear terms only)
    q = 3.0e5  # 0.0003 mV/um^2 [V/m^2]
    assert difference(["ABBA"], vth_quadratic=[q, 0.0]) == pytest.approx(2 * q * P**2, rel=1e-12)
    # ... and AABBBBAA (A at +-3.5p, +-2.5p; B at +-1.5p, +-0.5p): q (9.25 - 1.25) p^2 = 8 q p^2 (hand calculation)
    assert difference(["AABBBBAA"], vth_quadratic=[q, 0.0]) == pytest.approx(8 * q * P**2, rel=1e-12)


def test_saddle_term_of_the_cross_coupled_quad():
    # AB/BA about its centre: A at (-p/2, -p/2) and (p/2, p/2): x y = p^2/4; B at the other diagonal: -p^2/4;
    # a saddle s x y leaves s p^2 / 2 (hand calculation)
    s = 2.0e5
    assert difference(["AB", "BA"], vth_saddle=s) == pytest.approx(s * P**2 / 2, rel=1e-12)


def test_centroids_and_origin():
    # corner origin: the first cell of the first row at (0, 0); centre origin: bounding-box centre at (0, 0)
    corner = device_shifts(["AABB"], placement([["AABB"]], origin="corner")).centroids
    assert corner["MA"] == pytest.approx((0.5 * P, 0.0))
    assert corner["MB"] == pytest.approx((2.5 * P, 0.0))
    centre = device_shifts(["AABB"], placement([["AABB"]])).centroids
    assert centre["MA"] == pytest.approx((-P, 0.0))
    layout = cell_layout(["AB", "BA"], (P, 2 * P), "corner")
    np.testing.assert_allclose(layout.cells_of("B"), [[P, 0.0], [0.0, 2 * P]], rtol=1e-12)


def test_cell_count_warning_names_the_device():
    # common practice, no source: a device's cells should be its m parallel units
    shifts = device_shifts(["ABBA"], placement([["ABBA"]]))
    assert count_warnings(shifts, {"MA": 2, "MB": 2}) == []
    warnings = count_warnings(shifts, {"MA": 1, "MB": 2})
    assert len(warnings) == 1 and "MA" in warnings[0] and "m = 1" in warnings[0]


def test_distance_term_gives_pair_sigma_s_times_d():
    # Pelgrom, Duinmaijer, Welbers, IEEE JSSC 1989: the distance term of a pair has sigma S_VT * D. Tolerance: 4
    # standard errors of a sample sigma, 1/sqrt(2(N-1)) relative (common practice, no source)
    n = 20000
    centroids = np.array([[0.0, 0.0], [30e-6, 40e-6], [-10e-6, 5e-6], [30e-6, 40e-6]])
    placed = np.array([True, True, True, True])
    normals = np.random.default_rng(4).standard_normal((n, 4))
    s_vt = 2.0  # 0.002 mV/um [V/m]
    dvth, dbeta = distance_terms(centroids, placed, normals, s_vt, 0.0)
    assert not dbeta.any()
    for i, j in [(0, 1), (1, 2), (0, 2)]:
        d = float(np.linalg.norm(centroids[i] - centroids[j]))
        sample = float(np.std(dvth[:, i] - dvth[:, j], ddof=1))
        assert sample == pytest.approx(s_vt * d, rel=4 / math.sqrt(2 * (n - 1)))
    # equal centroids (a common-centroid pair): no distance term at all
    assert np.array_equal(dvth[:, 1], dvth[:, 3])


def test_pick_best_breaks_ties_on_the_systematic_error():
    # the brief's rule: highest yield, ties to the smallest |systematic| of the first spec'd measure (no source)
    entries = [
        {"name": "a", "yield": {"fraction": 0.9}, "measures": {"e": {"systematic": 0.001}}},
        {"name": "b", "yield": {"fraction": 0.95}, "measures": {"e": {"systematic": -0.004}}},
        {"name": "c", "yield": {"fraction": 0.95}, "measures": {"e": {"systematic": 0.002}}},
        {"name": "d", "error": "no operating point"},
    ]
    assert pick_best(entries, "e") == "c"


# ----------------------------------------------------------------------------------------------- circuit level
LAMBDA_FREE = {
    "name": "square law without channel-length modulation (test values)",
    "nmos": {"kprime": "100 uA/V^2", "vth0": "0.5 V", "lambda": "0 1/V", "a_vt": "5 mV*um", "a_beta": "1 %*um"},
}


def mirror_config(candidates: list[dict], **placement_fields) -> object:
    raw = {
        "title": "1:1 mirror for placement tests",
        "technology": LAMBDA_FREE,
        "circuit": {
            "mosfet": [
                {
                    "name": "MREF",
                    "type": "nmos",
                    "drain": "nb",
                    "gate": "nb",
                    "source": "gnd",
                    "w": "10 um",
                    "l": "1 um",
                    "m": 2,
                },
                {
                    "name": "MOUT",
                    "type": "nmos",
                    "drain": "out",
                    "gate": "nb",
                    "source": "gnd",
                    "w": "10 um",
                    "l": "1 um",
                    "m": 2,
                },
            ],
            "current_source": [{"name": "IREF", "from": "vdd", "to": "nb", "value": "20 uA"}],
            "voltage_source": [
                {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"},
                {"name": "VOUT", "plus": "out", "minus": "gnd", "value": "0.9 V"},
            ],
        },
        "measures": {"err": {"ratio": ["MOUT", "IREF"], "ideal": 1}},
        "specs": {"err": {"min": "-3 %", "max": "3 %"}},
        "analysis": {"samples": 400, "seed": 2},
        "placement": {
            "pitch": ["4 um", "4 um"],
            "devices": {"A": "MREF", "B": "MOUT"},
            "vth_gradient": ["0.1 mV/um", "0 mV/um"],
            "origin": "corner",
            "candidate": candidates,
            **placement_fields,
        },
    }
    return config_from_dict(raw, CONFIGS / "placement_test.toml")


def test_systematic_mirror_error_matches_the_square_law_by_hand():
    # Square law, lambda = 0 (Razavi, Design of Analog CMOS Integrated Circuits, 2nd ed., 2017, ch. 5):
    # I_out / I_ref = ((Vov - dVt) / Vov)^2 with Vov = sqrt(2 I / beta) of the reference and dVt = Vt_out - Vt_ref.
    # AABB with corner origin: Vt_ref + 0.5 p g, Vt_out + 2.5 p g, dVt = 2 p g (hand calculation)
    config = mirror_config([{"name": "side", "rows": ["AABB"]}, {"name": "cc", "rows": ["ABBA"]}])
    study = prepare(config)
    entries, best = run_placements(config, study)
    beta = 100e-6 * 2 * 10 / 1
    vov = math.sqrt(2 * 20e-6 / beta)
    dvt = 2 * 4e-6 * 100.0  # 2 p g with g = 0.1 mV/um = 100 V/m
    expected = ((vov - dvt) / vov) ** 2 - 1.0
    side, cc = entries
    assert side["measures"]["err"]["systematic"] == pytest.approx(expected, rel=1e-7)
    assert side["shifts"]["MOUT"]["vth"] - side["shifts"]["MREF"]["vth"] == pytest.approx(dvt, rel=1e-12)
    # the common-centroid pattern cancels the linear gradient: no systematic ratio error (to solver precision)
    assert abs(cc["measures"]["err"]["systematic"]) < 1e-9
    assert best == "cc"
    assert side["warnings"] == [] and cc["centroids"]["MREF"] == pytest.approx(cc["centroids"]["MOUT"])
    # common random numbers: each candidate's Monte Carlo mean moves by its systematic error, within 4 standard
    # errors of the mean difference (common practice, no source)
    shift = side["measures"]["err"]["mean"] - cc["measures"]["err"]["mean"]
    se = cc["measures"]["err"]["std"] / math.sqrt(cc["samples"])
    assert shift == pytest.approx(expected, abs=4 * se)


def test_run_extra_analyses_adds_placement_keys():
    # summary contract of DESIGN.md section 3: placements list with name, measures, yield; placement_best
    config = mirror_config([{"name": "side", "rows": ["AABB"]}, {"name": "inter", "rows": ["ABAB"]}], s_vt="0.01 mV/um")
    out = run_extra_analyses(config, prepare(config), {})
    assert set(out) == {"placements", "placement_best"}
    for entry in out["placements"]:
        assert {"name", "rows", "measures", "yield", "centroids"} <= set(entry)
        assert {"nominal", "mean", "std", "systematic"} <= set(entry["measures"]["err"])
        assert {"fraction", "ci95", "passed", "total"} <= set(entry["yield"])
    assert out["placement_best"] in {"side", "inter"}
    json.dumps(out, allow_nan=False)


# ----------------------------------------------------------------------------------------------- command line
def test_placements_command_names_the_best(capsys):
    # common practice, no source: the command compares candidates and names the one with the highest yield
    assert main(["placements", str(CONFIGS / "placement.toml"), "--samples", "2000", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    fractions = {e["name"]: e["yield"]["fraction"] for e in data["placements"]}
    assert data["placement_best"] in fractions
    assert fractions[data["placement_best"]] == max(fractions.values())
    assert main(["placements", str(CONFIGS / "placement.toml"), "--samples", "2000"]) == 0
    out = capsys.readouterr().out
    assert f"best: {data['placement_best']}" in out


def test_placements_command_bad_letter_exits_2(tmp_path, capsys):
    # DESIGN.md section 3: invalid input gives exit status 2 and names file and key path
    text = (CONFIGS / "placement.toml").read_text().replace('rows = ["ABABABAB"]', 'rows = ["ABXBABAB"]')
    bad = tmp_path / "bad.toml"
    bad.write_text(text)
    assert main(["placements", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "bad.toml" in err and "key 'placement" in err and "X" in err


def test_placements_command_without_placement_table_exits_2(capsys):
    assert main(["placements", str(CONFIGS / "demo.toml")]) == 2
    assert "key 'placement'" in capsys.readouterr().err


def test_plot_placement_draws_every_cell():
    # common practice, no source: one square per cell, one centroid marker per device
    from mcmatch.report.figure_placement import placement_figure, plot_placement

    config = mirror_config([{"name": "quad", "rows": ["DABD", "DBAD"]}])
    entries, _ = run_placements(config, prepare(config), samples=50)
    ax = plot_placement(entries[0])
    assert len(ax.patches) == 8
    assert len(ax.lines) == 2
    assert len(placement_figure(entries).axes) == 1


def test_distance_term_path_keeps_the_main_draws():
    # The distance-term path draws the device mismatch exactly as the main run does (same seed and stream): a
    # common-centroid quad centred on the origin has no distance term, so it must reproduce the plain run's numbers
    # (DESIGN.md section 3 reproducibility; common practice, no source)
    plain = mirror_config([{"name": "quad", "rows": ["AB", "BA"]}], origin="center")
    with_s = mirror_config([{"name": "quad", "rows": ["AB", "BA"]}], origin="center", s_vt="0.05 mV/um")
    a = run_placements(plain, prepare(plain))[0][0]
    b = run_placements(with_s, prepare(with_s))[0][0]
    assert a["measures"]["err"]["mean"] == pytest.approx(b["measures"]["err"]["mean"], rel=1e-12)
    assert a["measures"]["err"]["std"] == pytest.approx(b["measures"]["err"]["std"], rel=1e-12)
    # ... while a side-by-side pair gains the distance variance (gm/I)^2 (S D)^2 (Pelgrom 1989; Kinget, IEEE JSSC
    # 2005, mirror error). With common device draws, s1^2 - s0^2 = extra^2 + 2 cov: tolerance 4 standard errors of a
    # sample variance (extra^2 sqrt(2/N)) plus of the sample covariance (s0 extra / sqrt(N)) (common practice)
    n = 4000
    side_plain = mirror_config([{"name": "side", "rows": ["AABB"]}], origin="center")
    side_s = mirror_config([{"name": "side", "rows": ["AABB"]}], origin="center", s_vt="0.1 mV/um")
    s0 = run_placements(side_plain, prepare(side_plain), samples=n)[0][0]["measures"]["err"]["std"]
    s1 = run_placements(side_s, prepare(side_s), samples=n)[0][0]["measures"]["err"]["std"]
    vov = math.sqrt(2 * 20e-6 / (100e-6 * 20))
    extra = (2 / vov) * 100.0 * 2 * 4e-6  # gm/I = 2/Vov; S = 0.1 mV/um = 100 V/m; centroid distance D = 2 p
    tol = 4 * (extra**2 * math.sqrt(2 / n) + 2 * s0 * extra / math.sqrt(n))
    assert s1**2 - s0**2 == pytest.approx(extra**2, abs=tol)
