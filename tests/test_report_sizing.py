"""The report's sizing section: the W and L to draw with its confirmation, the front table, the trade-off figure and
the infeasible case, each read back against the summary it was rendered from.

Source for the layout checks: common practice, no source (a design review shows the answer, how it was checked and
what it traded). The numbers themselves are checked against Kinget's area rule and the Monte Carlo in test_sizing.py.
"""

from __future__ import annotations

import copy
import re

import pytest

from mcmatch.report.figure_sizing import HEADROOM_CLASSES, headroom_class
from mcmatch.report.format import condition_text, eng, interval_text, yield_text
from mcmatch.report.render import render_report
from mcmatch.report.sections.scope import scope_lines
from mcmatch.report.sections.sizing import area_text, linear_yield_text
from mcmatch.studies.sizing import LINEAR_DRAWS, run_sizing
from tests.test_sizing import mirror


@pytest.fixture(scope="module")
def sized() -> dict:
    """summary["sizing"] of a real search on the 1:1 test mirror (sigma target 0.99 joint yield)."""
    return run_sizing(mirror({"samples": 4000}))


@pytest.fixture(scope="module")
def infeasible() -> dict:
    """A search whose max_area no design can meet."""
    return run_sizing(mirror({"samples": 2000, "max_area": "1 um^2"}))


def text_of(html: str, section: str) -> str:
    start = html.index(f'<section id="{section}"')
    body = html[start : html.index("</section>", start)]
    return re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", body)).replace("&#39;", "'")


def test_the_chosen_w_and_l_and_their_confirmation_are_stated(sized):
    html = render_report({"title": "t", "sizing": sized}, None, "")
    text = text_of(html, "sizing")
    d = sized["designs"][sized["chosen"]["index"]]
    conf = sized["chosen"]["confirmed"]
    for g in d["groups"].values():
        assert f"W = {eng(g['w'], 'm')}, L = {eng(g['l'], 'm')}" in text
    assert yield_text(conf["yield"]) in text and interval_text(conf["ci95"]) in text
    assert f"{conf['samples']:,} samples at {condition_text(conf['corner'])}" in text
    assert "degC" not in text and "\u00b0C" in text  # the report writes degrees as everywhere else
    # areas in um^2 with thousands separated, never an exponent (common practice, no source)
    assert area_text(4.95e-8) == "49,500 \u00b5m\u00b2" and area_text(2.64e-10) == "264 \u00b5m\u00b2"
    assert f"{sized['chosen']['confirmations']} confirmation(s)" in text
    # the verdict's scope carries the answer too
    lines = scope_lines({"sizing": sized})
    assert any(line["text"].startswith("Sizing: draw ") for line in lines)


def test_the_front_table_has_a_row_per_front_design_and_the_design_as_drawn(sized):
    html = render_report({"title": "t", "sizing": sized}, None, "")
    start = html.index("The Pareto front")
    table = html[start : html.index("</table>", start)]
    rows = re.findall(r"<tr[ >]", table)
    assert len(rows) - 1 == len(sized["pareto"]) + 1  # header row, front rows, "as drawn"
    assert f"#{sized['chosen']['index']} chosen" in table


def test_the_trade_off_figure_draws_every_solved_design_with_its_numbers_in_the_title(sized):
    html = render_report({"title": "t", "sizing": sized}, None, "")
    start = html.index('<section id="sizing"')
    svg = html[html.index("<svg", start) : html.index("</svg>", start)]
    solved = [d for d in sized["designs"] if "error" not in d]
    classes = re.findall(r'class="(head-[a-z]+)(?: cross)?"', svg)
    legend = len(HEADROOM_CLASSES) + 2  # four headroom swatches, the cross and the triangle
    assert len(classes) - legend == 2 * len(solved)  # one marker per design in each of the two panels
    title = re.search(r"<title>(.*?)</title>", svg).group(1)
    d = sized["designs"][sized["chosen"]["index"]]
    assert area_text(d["area"]) in title and f"{len(sized['designs'])} designs" in title
    assert "base64" not in svg


def test_an_infeasible_search_says_why_and_names_no_design(infeasible):
    assert "chosen" not in infeasible and infeasible["infeasible"]
    html = render_report({"title": "t", "sizing": infeasible}, None, "")
    text = text_of(html, "sizing")
    assert "no design meets the target" in text
    assert "max_area" in text and "The W and L to draw" not in text


def test_a_confirmation_is_called_a_demonstration_only_when_its_interval_clears_the_target(sized):
    summary = {"title": "t", "sizing": copy.deepcopy(sized)}
    target = summary["sizing"]["target"]["yield"]
    conf = summary["sizing"]["chosen"]["confirmed"]
    conf["ci95"] = [target + 0.2 * (1 - target), 1.0]
    assert "target demonstrated" in text_of(render_report(summary, None, ""), "sizing")
    conf["ci95"] = [target - 0.2 * (1 - target), 1.0]
    text = text_of(render_report(summary, None, ""), "sizing")
    assert "do not demonstrate the target" in text and "target demonstrated" not in text


def test_a_linear_yield_of_one_is_a_bound_not_a_hundred_percent():
    # The quasi-random draws bound the failure rate by one draw in LINEAR_DRAWS (common practice, no source).
    assert linear_yield_text(1.0) == f"> {yield_text(1 - 1 / LINEAR_DRAWS)}"
    assert "100.0" not in linear_yield_text(1.0)


def test_headroom_colours_follow_the_limit():
    limit = 0.05  # [V]
    assert headroom_class(-0.01, limit) == "head-out"
    assert headroom_class(0.03, limit) == "head-low"
    assert headroom_class(0.07, limit) == "head-ok"
    assert headroom_class(0.2, limit) == "head-high"
