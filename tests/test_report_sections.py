"""Report sections from hand-made summaries: the verdict's scope, zero-failure bounds, units, definitions, folding."""

from __future__ import annotations

import copy
import math
import re
from html.parser import HTMLParser

import pytest

from mcmatch.report.render import render_report


class Text(HTMLParser):
    """The visible text of each section, by id (tags stripped, entities decoded)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.section = ""
        self.text: dict[str, list[str]] = {}

    def handle_starttag(self, tag: str, attrs: list) -> None:
        if tag == "section":
            self.section = dict(attrs).get("id", "")

    def handle_data(self, data: str) -> None:
        self.text.setdefault(self.section, []).append(data)


def sections(html: str) -> dict[str, str]:
    parser = Text()
    parser.feed(html)
    return {k: re.sub(r"\s+", " ", " ".join(v)) for k, v in parser.text.items()}


def base_summary(samples: int = 20000, passed: int | None = None) -> dict:
    """A small summary in the contract's shape (DESIGN.md section 3): one ratio measure with a spec."""
    passed = samples if passed is None else passed
    # two-sided 95 % Clopper-Pearson lower end for zero failures: 0.025^(1/N) (Clopper, Pearson, Biometrika 1934)
    low = 0.025 ** (1 / samples) if passed == samples else 0.97
    block = {"passed": passed, "total": samples, "fraction": passed / samples, "ci95": [low, 1.0]}
    return {
        "title": "sections",
        "samples": samples,
        "seed": 1,
        "failed_solves": 0,
        "conditions": {"corner": "tt", "temperature": 300.15},
        "measures": {
            "err": {
                "unit": "1",
                "nominal": -3.125e-6,
                "mean": -3.1e-6,
                "std": 5.166e-5,
                "min": -2e-4,
                "max": 2e-4,
                "quantiles": {"0.00135": -1.5e-4, "0.5": -3e-6, "0.99865": 1.5e-4},
            },
            "i_out": {
                "unit": "A",
                "nominal": 4.042e-5,
                "mean": 4.043e-5,
                "std": 5.733e-7,
                "min": 3.8e-5,
                "max": 4.3e-5,
            },
        },
        "specs": {"err": {"min": -0.01, "max": 0.01}},
        "yield": {**block, "method": "clopper-pearson", "specs": {"err": {"min": -0.01, "max": 0.01, **block}}},
    }


def test_verdict_always_says_pre_layout_and_names_the_conditions():
    text = sections(render_report(base_summary(), None, ""))["verdict"]
    assert "Pre-layout estimate, not sign-off" in text  # the caution the report must keep (DESIGN.md section 1)
    assert "Conditions analysed: tt / 27 \u00b0C only, no corners run (20,000 samples)." in text
    s = base_summary()
    s["corners"] = [
        {"process": p, "temperature": t, "supply": v, "samples": 500, "measures": {}}
        for p in ("ss", "ff")
        for t in (233.15, 398.15)
        for v in (1.62, 1.98)
    ]
    text = sections(render_report(s, None, ""))["verdict"]
    assert "8 corners: process ss, ff \u00d7 temperature -40 \u00b0C, 125 \u00b0C \u00d7 supply 1.62 V, 1.98 V" in text
    assert "(500 samples each)" in text


def test_zero_failures_give_a_bound_not_a_hundred_percent():
    s = base_summary()
    # the sampling-error table too: sqrt(p(1-p)/N) is 0 at p = 1, which would read as a certain yield
    s["sampling"] = {
        "method": "random",
        "error_estimate": "plain Monte Carlo",
        "measures": {"err": {"std": 5.166e-5, "std_error": 2.6e-7, "mc_std_error": 2.6e-7}},
        "yield": {"fraction": 1.0, "std_error": 0.0, "mc_std_error": 0.0},
    }
    html = render_report(s, None, "")
    text = sections(html)
    assert "joint yield 0 of 20,000 failed failure rate below 0.0184 % (95 %, two-sided)" in text["measures"]
    assert " 0 %" not in text["measures"]
    # 0 failures in 20,000: two-sided 95 % Clopper-Pearson upper bound 1 - 0.025^(1/20000) = 0.01844 % (Clopper,
    # Pearson, Biometrika 1934; DESIGN.md section 4 gives 0.0036821 for N = 1000 by the same formula)
    assert pytest.approx(0.0036821, abs=5e-8) == 1 - 0.025 ** (1 / 1000)
    assert "0 of 20,000 failed" in text["verdict"]
    assert "failure rate below 0.0184 % (95 %, two-sided Clopper-Pearson)" in text["verdict"]
    assert "0 of 20,000 failed" in text["yield"] and "failure rate below 0.0184 % (95 %, two-sided)" in text["yield"]
    assert "100.0 %" not in html
    one_failure = sections(render_report(base_summary(passed=19999), None, ""))
    assert "99.9950 %" in one_failure["verdict"] and "failed; failure rate" not in one_failure["verdict"]


def test_operating_point_warnings_reach_the_verdict():
    s = base_summary()
    s["operating_point"] = [
        {"name": "MREF", "region": "saturation", "headroom": 0.45},
        {"name": "MCAS", "region": "triode", "headroom": -0.012},
    ]
    text = sections(render_report(s, None, ""))["verdict"]
    assert "CAUTION MCAS at the nominal point: in triode" in text and "-12 mV" in text
    assert "MREF at the nominal point" not in text


def test_compliance_blocks_show_in_the_verdict_and_the_corner_table():
    # keys of the compliance capability (DESIGN.md section 3): min_headroom [V], limiting_device,
    # devices_out_of_saturation, samples_out_of_saturation [fraction]
    s = base_summary()
    s["compliance"] = {
        "min_headroom": 0.042,
        "limiting_device": "MCAS1",
        "devices_out_of_saturation": [],
        "samples_out_of_saturation": 0.0,
    }
    good = {
        "min_headroom": 0.11,
        "limiting_device": "MOUT",
        "devices_out_of_saturation": [],
        "samples_out_of_saturation": 0,
    }
    bad = {
        "min_headroom": -0.008,
        "limiting_device": "MCAS1",
        "devices_out_of_saturation": ["MCAS1"],
        "samples_out_of_saturation": 0.63,
    }
    corner = {"temperature": 233.15, "supply": 1.08, "samples": 2000, "measures": {"err": {"mean": 0.0, "std": 1e-4}}}
    s["corners"] = [{**corner, "process": "tt", "compliance": good}, {**corner, "process": "ss", "compliance": bad}]
    text = sections(render_report(s, None, ""))
    verdict = text["verdict"]
    assert "minimum V_DS \u2212 V_DS,sat 42 mV (MCAS1)" in verdict and "every device stays in saturation" in verdict
    assert "CAUTION Headroom at the corners: lowest -8 mV (MCAS1) at ss, -40 \u00b0C, 1.08 V" in verdict
    assert "63 %" in verdict
    corners = text["corners"]
    assert "min headroom" in corners and "-8 mV (MCAS1)" in corners and "110 mV (MOUT)" in corners


def test_unknown_keys_render_without_error():
    s = base_summary()
    s["a_future_analysis"] = {"nested": [1, {"x": None}], "text": "<b>"}
    s["measures"]["err"]["a_new_statistic"] = [1, 2, 3]
    s["yield"]["specs"]["err"]["extra"] = {"k": 1}
    s["corners"] = [{"process": "tt", "temperature": 300.15, "measures": {"err": {"mean": 0.0}}, "new": {"a": 1}}]
    s["compliance"] = {"min_headroom": "not a number", "limiting_device": None}
    html = render_report(s, None, "")
    assert "<b>" not in html and "sections" in html  # renders, and nothing unknown is echoed unescaped


def test_one_unit_per_measure_across_a_row():
    text = sections(render_report(base_summary(), None, ""))["measures"]
    # the err row: every value in percent (common practice, no source): -3.125 ppm is -0.0003125 %
    assert "-0.0003125 %" in text and "0.005166 %" in text and "ppm" not in text
    # the i_out row in one prefix: 40.43 µA beside 0.5733 µA, not 573.3 nA
    assert "40.43 \u00b5A" in text and "0.5733 \u00b5A" in text and "nA" not in text


def test_measures_table_defines_every_measure():
    config = """
[measures]
err1 = { ratio = ["MOUT1", "IREF"], ideal = 2 }
i_out = { current = "MOUT1" }
v_nb = { voltage = "nb" }
r_nb = { resistance = "nb" }
"""
    s = base_summary()
    s["circuit"] = {"mosfet": [{"name": "MOUT1", "type": "nmos", "w": 4e-6, "l": 2e-6, "m": 1}]}
    s["measures"]["err1"] = copy.deepcopy(s["measures"]["err"])
    s["measures"]["v_nb"] = {"unit": "V", "nominal": 0.63, "mean": 0.63, "std": 1e-3}
    s["measures"]["r_nb"] = {"unit": "ohm", "nominal": 9e3, "mean": 9e3, "std": 11.0}
    text = sections(render_report(s, None, config))["circuit"]
    assert "err1 = I(MOUT1) / (2 \u00d7 I(IREF)) \u2212 1" in text
    assert "i_out = I(MOUT1)" in text and "v_nb = V(nb)" in text and "r_nb" in text
    assert "err: not defined in the config text of this run" in text  # a measure the summary has but the config lacks


def test_contribution_terms_under_a_tenth_of_a_percent_fold_into_others():
    from mcmatch.report.figures import fold_terms

    terms = [
        {"device": "MREF", "parameter": "vth", "share": 0.9, "std": 0.9},
        {"device": "MOUT", "parameter": "vth", "share": 0.0995, "std": 0.3},
        {"device": "MREF", "parameter": "beta", "share": 0.0004, "std": 0.02},
        {"device": "MOUT", "parameter": "beta", "share": 0.0001, "std": 0.01},
    ]
    folded = fold_terms(terms)
    assert [t["device"] for t in folded] == ["MREF", "MOUT", "others (2 terms)"]
    assert folded[-1]["share"] == pytest.approx(0.0005)
    assert folded[-1]["std"] == pytest.approx(math.hypot(0.02, 0.01))  # independent terms add in variance
    assert sum(t["share"] for t in folded) == pytest.approx(sum(t["share"] for t in terms))


def test_contributions_table_has_one_unit_per_column_and_folds_small_terms():
    s = base_summary()
    s["measures"]["v_nb"] = {"unit": "V", "nominal": 0.63, "mean": 0.63, "std": 1.144e-3}
    s["contributions"] = {
        "v_nb": {
            "linear_std": 1.143e-3,
            "mc_std": 1.144e-3,
            "terms": [
                {
                    "device": "MREF",
                    "parameter": "vth",
                    "sensitivity": 0.9965,
                    "sigma": 1.125e-3,
                    "std": 1.121e-3,
                    "share": 0.961,
                },
                {
                    "device": "MREF",
                    "parameter": "beta",
                    "sensitivity": -0.08984,
                    "sigma": 2.5e-3,
                    "std": 2.246e-4,
                    "share": 0.0386,
                },
                {"device": "MOUT", "parameter": "vth", "sensitivity": 0.0, "sigma": 5.6e-4, "std": 0.0, "share": 0.0},
                {"device": "MOUT", "parameter": "beta", "sensitivity": 0.0, "sigma": 1.2e-3, "std": 0.0, "share": 0.0},
                # rounding noise of a finite-difference sensitivity: shown as 0, not as 0.000000000000008
                {
                    "device": "MOUT",
                    "parameter": "vth",
                    "sensitivity": 1e-14,
                    "sigma": 5.6e-4,
                    "std": 8e-18,
                    "share": 5e-29,
                },
            ],
        }
    }
    text = sections(render_report(s, None, ""))["contributions"]
    # contributions 1.121 mV and 224.6 uV in one column unit (mV); zero terms folded (common practice, no source)
    assert "contribution to sigma [mV]" in text and "1.121" in text and "0.2246" in text and "224.6" not in text
    assert "others (3 terms)" in text and "3 smaller terms" in text and "0 V" not in text
    assert "0.000000" not in text
    # sensitivity per parameter unit: 0.9965 V/V is 996.5 uV per mV; -0.08984 V per unit is -898.4 uV per %
    assert "sensitivity [\u00b5V per parameter unit]" in text and "996.5" in text and "-898.4" in text


def test_corner_spread_draws_every_corner_or_says_how_many():
    from mcmatch.report.figures import corner_rows

    corners = [
        {"process": "tt", "temperature": 300.0 + i, "measures": {"x": {"mean": 0.0, "std": 1.0}}} for i in range(50)
    ]
    assert corner_rows(corners, "x", 49, 120) == list(range(50))  # every corner when they fit
    assert corner_rows(corners, "x", 49, 10) == [*range(9), 49]  # else the first ones and the worst
    assert corner_rows(corners, "x", 3, 10) == list(range(10))
    s = base_summary()
    s["corners"] = [{**c, "measures": {"err": c["measures"]["x"]}} for c in corners]
    s["corners_worst"] = {"err": {"process": "tt", "temperature": 349.0, "supply": None}}
    html = render_report(s, None, "")
    caption = sections(html)["corners"]
    assert "err at every corner (50)" in caption
    import mcmatch.report.sections.corners as section

    saved, section.MAX_CORNER_ROWS = section.MAX_CORNER_ROWS, 10
    try:
        caption = sections(render_report(s, None, ""))["corners"]
    finally:
        section.MAX_CORNER_ROWS = saved
    assert "err at the first 9 of 50 corners and the worst" in caption


def test_worst_corner_table_names_each_measures_corner_and_marks_its_own_cells():
    # issue 16 item 3 (common practice, no source): one row per measure with its worst corner, the value that made it
    # the worst, the criterion, ties named together; in the full table only that measure's cells are marked
    s = base_summary()
    s["measures"]["i_out"] = {"unit": "A", "nominal": 2e-5, "mean": 2e-5, "std": 4e-7}
    s["corners"] = [
        {
            "process": p,
            "temperature": 233.15,
            "supply": v,
            "measures": {"err": {"mean": 0.001 * k, "std": 0.002}, "i_out": {"mean": 2e-5, "std": 4e-7 * (1 + k)}},
        }
        for k, (p, v) in enumerate([("tt", 1.62), ("tt", 1.98), ("ss", 1.62), ("ss", 1.98)])
    ]
    s["corners_worst"] = {
        "err": {
            "process": "ss", "temperature": 233.15, "supply": 1.98, "value": 1.8, "margin_sigma": 1.8,
            "margin_error": 0.03, "limit": "max", "spec_yield": 0.964, "criterion": "smallest spec margin",
            "tied": [{"process": "ss", "temperature": 233.15, "supply": v, "margin_sigma": 1.8} for v in (1.62, 1.98)],
            "label": "ss, -40 degC, any supply",
        },
        "i_out": {"process": "tt", "temperature": 233.15, "supply": 1.62, "value": 1.2e-6, "criterion": "spread"},
    }  # fmt: skip
    html = render_report(s, None, "")
    text = sections(html)["corners"]
    assert "Worst corner per measure" in text
    assert "err ss, -40 °C, any supply (2 corners within sampling error) 1.8 sigma ± 0.03" in text
    assert "smallest spec margin (upper limit)" in text and "96.4 %" in text
    assert "i_out tt, -40 °C, 1.62 V 1.2 µA" in text
    # markers: the err mean and sigma cells of the ss/1.98 V row, nothing else (i_out has no spec, so the full table
    # shows no column of it; its worst corner is in the small table only)
    table = html[html.find('<table class="corners">') :]
    table = table[: table.find("</table>")]
    rows = re.findall(r"<tr>(.*?)</tr>", table, flags=re.S)[1:]
    marked = [[i for i, c in enumerate(re.findall(r"<td[^>]*>", r)) if "worst-cell" in c] for r in rows]
    assert marked == [[], [], [], [3, 4]]


def test_svg_scales_and_ticks():
    from mcmatch.report.svg import Scale, log_ticks, nice_ticks, tick_labels

    # common practice, no source: round steps of 1, 2, 2.5, 5 x 10^k; 1-2-5 ticks per decade on a log axis
    assert nice_ticks(-4.3, 6.8, 6) == [-4.0, -2.0, 0.0, 2.0, 4.0, 6.0]
    assert tick_labels([8.95, 8.975, 9.0, 9.025]) == ["8.950", "8.975", "9.000", "9.025"]
    assert log_ticks(6.0, 260.0) == [10.0, 20.0, 50.0, 100.0, 200.0]
    down = Scale(3.6, -0.6, 100.0, 0.0)  # rows listed top to bottom: row 0 near the top edge
    assert down.px(-0.6) == 0.0 and down.px(3.6) == 100.0 and down.px(0.0) < down.px(1.0)
    log = Scale(1.0, 100.0, 0.0, 200.0, log=True)
    assert log.px(10.0) == 100.0


def test_placement_grid_draws_every_cell_as_text_and_shapes():
    from mcmatch.report.placement_grid import candidate_svg

    # common practice, no source: one square per cell, its letter as text, one centroid marker per device
    entry = {
        "name": "quad <cc>",
        "rows": ["DABD", "DBAD"],
        "centroids": {"MREF": [0.0, 0.0], "MOUT": [0.0, 0.0]},
        "layout": {"pitch": [4e-6, 4e-6], "letters": {"A": "MREF", "B": "MOUT"}, "dummy": "D", "origin": "center"},
        "yield": {"fraction": 0.99},
    }
    svg = str(candidate_svg(entry).svg())
    assert svg.count('<rect class="cell') == 8 and svg.count('class="cell dummy"') == 4
    assert len(re.findall(r'class="cell-letter">[AB]</text>', svg)) == 4
    assert "quad &lt;cc&gt;  (yield 99.0 %)" in svg  # the name is escaped text; the yield as the table writes it
    assert "centroid of A (MREF)" in svg and "centroid of B (MOUT)" in svg


def test_operating_point_rows_keep_one_prefix_across_devices():
    s = base_summary()
    s["operating_point"] = [
        {"name": "MREF", "region": "saturation", "gds": 3.902e-7, "gm": 1.109e-4},
        {"name": "MOUT", "region": "saturation", "gds": 1.561e-6, "gm": 4.483e-4},
    ]
    text = sections(render_report(s, None, ""))["operating-point"]
    # common practice, no source: 390.2 nS beside 1.561 uS reads as 0.3902 uS; 1/g_ds 2.563 MOhm and 0.6406 MOhm
    assert "0.3902 \u00b5S" in text and "1.561 \u00b5S" in text and "nS" not in text
    assert "2.563 M\u03a9" in text and "0.6406 M\u03a9" in text


def test_scope_says_which_variation_each_sample_draws():
    # Common practice, no source: the report states the statistical model its numbers come from.
    from mcmatch.report.sections.scope import variation_text

    assert "per-device mismatch only" in variation_text({})
    summary = {
        "measures": {"v_nb": {"unit": "V"}, "err": {"unit": "1"}},
        "variation": {
            "mode": "both",
            "measures": {
                "v_nb": {"std_local": 1.14e-3, "std_global": 15.2e-3, "std_total": 15.24e-3},
                "err": {"std_local": 0.014, "std_global": 0.0006, "std_total": 0.014},
            },
        },
    }
    text = variation_text(summary)
    assert "mismatch plus die-to-die" in text
    assert "v_nb std 1.14 mV local, 15.2 mV global" in text
    assert "err std" in text and "%" in text


def test_a_bank_corner_table_keeps_four_measure_columns_and_says_which():
    # review of the 16-channel sizing report (common practice, no source): 16 measures x mean and sigma made the full
    # corner table scroll sideways; it keeps the 3 with the lowest spec yield at their worst corner, says so, and the
    # worst-corner table still names all 16
    from mcmatch.report.sections.corners import MAX_CORNER_MEASURES

    s = base_summary()
    names = [f"err{i}" for i in range(1, 9)]
    s["measures"] = {n: {"unit": "1", "nominal": 0.0, "mean": 0.0, "std": 0.002} for n in names}
    s["specs"] = {n: {"min": -0.01, "max": 0.01} for n in names}
    block = s["yield"]["specs"].pop("err")
    s["yield"]["specs"] = {n: dict(block) for n in names}
    s["corners"] = [
        {"process": p, "temperature": 300.15, "supply": 1.8, "measures": {n: {"mean": 0.0, "std": 2e-3} for n in names}}
        for p in ("tt", "ss")
    ]
    spec_yield = {n: 0.99 - 0.01 * ((i * 5) % 8) for i, n in enumerate(names)}  # lowest: err2, err7, err4, err1
    s["corners_worst"] = {
        n: {"process": "ss", "temperature": 300.15, "supply": 1.8, "margin_sigma": 2.0, "spec_yield": spec_yield[n]}
        for n in names
    }
    html = render_report(s, None, "")
    text = sections(html)["corners"]
    lowest = sorted(names, key=spec_yield.get)[:MAX_CORNER_MEASURES]
    kept = [n for n in names if n in lowest]
    table = html[html.find('<table class="corners">') :]
    head = table[: table.find("</thead>")]
    assert [n for n in names if f">{n} mean" in head] == kept
    assert f"Mean and sigma columns for {', '.join(kept)}: the 3 of 8 measures" in text
    small = text[text.index("Worst corner per measure") : text.index("Mean and sigma columns")]
    assert all(f" {n} ss" in small for n in names)
    assert "◀ worst of 8 measures" in text


def test_the_same_nominal_miss_is_said_once_for_every_channel():
    # review of the 16-channel sizing report (common practice, no source): sixteen identical "nominal outside the
    # spec" lines are one line naming the channels
    s = base_summary(passed=0)
    names = [f"err{i}" for i in range(1, 6)]
    s["measures"] = {n: {"unit": "1", "nominal": 0.0126, "mean": 0.0126, "std": 0.02} for n in names}
    s["specs"] = {n: {"min": -0.01, "max": 0.01} for n in names}
    block = {**s["yield"].pop("specs")["err"], "passed": 6000, "fraction": 0.3, "ci95": [0.29, 0.31]}
    s["yield"]["specs"] = {n: dict(block) for n in names}
    text = sections(render_report(s, None, ""))["verdict"]
    line = "5 specs (err1, err2, err3, err4, err5): the nominal value 1.26 % is outside the spec -1 % … 1 % before any"
    assert text.count("the nominal value") == 1 and line in text


def test_a_templates_default_measures_are_defined_from_the_summary():
    # issue 16 item 4 (common practice, no source): a template's default measures are not in the config text, so the
    # run records each measure's definition in the summary and the table reads it from there
    from conftest import ROOT

    import mcmatch

    config = mcmatch.load_config(ROOT / "configs" / "lowvoltage_cascode.toml")
    summary = mcmatch.run_config(mcmatch.with_overrides(config, samples=200), jobs=1).summary.to_dict()
    assert summary["measures"]["err1"]["definition"] == {"ratio": ["MOUT1", "IREF"], "ideal": 2.0}
    text = sections(render_report(summary, None, (ROOT / "configs" / "lowvoltage_cascode.toml").read_text()))
    table = text["circuit"][text["circuit"].index("Measures recorded") :]
    assert "err1 = I(MOUT1) / (2 \u00d7 I(IREF)) \u2212 1" in table
    assert "r_out1 = dV/dI seen by VOUT1" in table and "v_nb = V(nb)" in table and "r_nb = dV/dI at nb" in table
    assert "not defined" not in table and table.count("(set by the template 'wide_swing_cascode')") == 5
