"""The report's area-versus-accuracy section: every swept yield with its interval (never "100.0 %" on zero
failures), the design as drawn on the plot, readable log ticks.

Sources: Clopper & Pearson, "The use of confidence or fiducial limits illustrated in the case of the binomial",
Biometrika 1934 (with no failure among N the two-sided 95 % interval's lower end is 0.025^(1/N)); Pelgrom,
Duinmaijer, Welbers, "Matching properties of MOS transistors", IEEE JSSC 1989 (sigma falls as 1/sqrt(area), so the
sweep's largest area has the fewest failures); layout: common practice, no source.
"""

from __future__ import annotations

import json
import re

import pytest
from conftest import ROOT

from mcmatch.cli import main
from mcmatch.report.format import interval_text, percent
from mcmatch.report.render import render_report
from mcmatch.report.svg import sparse_log_ticks


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> dict:
    out = tmp_path_factory.mktemp("area") / "run"
    assert main(["run", str(ROOT / "configs" / "demo.toml"), "--out", str(out), "--quiet", "--no-report"]) == 0
    return json.loads((out / "summary.json").read_text())


def area_section(summary: dict) -> str:
    html = render_report(summary, None, "")
    start = html.index('<section id="area"')
    return html[start : html.index("</section>", start)]


def test_every_swept_yield_carries_its_interval(demo):
    section = area_section(demo)
    for p in demo["area"]["points"]:
        n = p["samples"]
        lo, hi = p["yield_ci95"]
        assert lo <= p["yield"] <= hi
        if p["yield"] == 1.0:  # no failure: the bound, never "100.0 %"
            assert lo == pytest.approx(0.025 ** (1 / n), rel=1e-9)
            assert f"0 of {n:,} failed" in section and percent(1 - lo, 3) in section
        else:
            assert interval_text([lo, hi]) in section
    assert "100.0 %" not in section


def test_the_design_as_drawn_is_on_the_area_plot(demo):
    section = area_section(demo)
    svg = section[section.index("<svg") : section.index("</svg>")]
    assert "design as drawn" in svg
    assert len(re.findall(r'class="nominal-mark"', svg)) == 2  # the point and its legend swatch


def test_log_area_ticks_thin_to_decades_when_crowded():
    assert sparse_log_ticks(8, 250) == [10, 20, 50, 100, 200]
    assert sparse_log_ticks(150, 60000) == [1000, 10000]  # 1-2-5 would give 8 labels on a half-width panel
