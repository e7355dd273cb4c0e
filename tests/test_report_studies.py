"""Report sections of the studies (bank, placements, corners, tails, header) from summaries the studies' own
functions build: the numbers of the summary must reach the report, in the places a reviewer looks for them."""

from __future__ import annotations

import re

import numpy as np
from scipy import stats
from test_report_sections import base_summary, sections

from mcmatch.report.format import yield_text
from mcmatch.report.render import render_report
from mcmatch.stats.bank import bank_yield


def figure_titles(html: str, section: str) -> list[str]:
    """The accessible names (<title>) of the SVG figures inside one section."""
    i = html.index(f'<section id="{section}"')
    body = html[i : html.index("</section>", i)]
    return re.findall(r"<svg[^>]*><title>([^<]+)</title>", body)


# --------------------------------------------------------------------------------------------- bank
def bank_block() -> dict:
    """Three channels over 1000 samples with failures placed by hand: channel a fails samples 0-19, b fails 10-39,
    c fails 900-909, so all three pass on 1000 - 40 - 10 = 950 samples."""
    passed = np.ones((1000, 3), dtype=bool)
    passed[0:20, 0] = False
    passed[10:40, 1] = False
    passed[900:910, 2] = False
    block = bank_yield(passed, ["a", "b", "c"])
    block["mean_correlation"] = 0.4213
    block["failed_solves"] = 0
    block["detected"] = "configured"
    return block


def test_bank_section_shows_the_counted_yield_beside_the_independent_estimate():
    s = base_summary()
    s["bank"] = bank_block()
    html = render_report(s, None, "")
    text = sections(html)["bank"]
    # counted by hand: 950 of 1000 pass every channel; two-sided 95 % Clopper-Pearson (Clopper, Pearson, Biometrika
    # 1934) from scipy's beta quantiles
    low, high = stats.beta.ppf(0.025, 950, 51), stats.beta.ppf(0.975, 951, 50)
    assert f"{yield_text(0.95)} ({yield_text(low)} \u2026 {yield_text(high)})" in text
    # the independent-channels estimate is the product of the per-channel yields (common practice, no source)
    independent = 0.98 * 0.97 * 0.99
    assert f"if channels were independent (product of the channel yields) {yield_text(independent)}" in text
    # per channel, worst channel, mean correlation (report layout: common practice, no source)
    assert "channel a 98.0 % (980 of 1,000)" in text and "channel c 99.0 % (990 of 1,000)" in text
    assert "worst channel b: 97.0 %" in text and "mean correlation between channels 0.421" in text
    # one row per k: the first two channels pass together on 1000 - 40 = 960 samples
    assert f"2 b {yield_text(0.96)}" in text and yield_text(0.98 * 0.97) in text
    # the figure's accessible name carries the key numbers
    (title,) = figure_titles(html, "bank")
    assert "all 3 channels in spec 95.0 %" in title and f"if independent {yield_text(independent)}" in title
    assert "worst channel b 97.0 %" in title and "mean correlation 0.421" in title
    # 95 % counted against 94.1 % if independent: the caption says which way the shared reference pushed it
    assert "stays above the product" in text


def test_a_channel_without_failures_is_counted_not_a_hundred_percent():
    # issue 16 item 2 (common practice, no source): a channel that never failed in 1000 samples shows "0 of 1,000
    # failed", and a product of one shows "no failure counted", never "100.0 %"
    passed = np.ones((1000, 2), dtype=bool)
    passed[0:20, 1] = False
    s = base_summary()
    s["bank"] = bank_yield(passed, ["a", "b"])
    text = sections(render_report(s, None, ""))["bank"]
    assert "channel a 0 of 1,000 failed" in text and "channel b 98.0 % (980 of 1,000)" in text
    assert "1 a 0 of 1,000 failed" in text and "no failure counted" in text  # k = 1: the product of one yield of one
    assert "100.0 %" not in text


def test_bank_section_without_steps_keeps_the_table():
    s = base_summary()
    s["bank"] = {"channels": 16, "all_in_spec": {"fraction": 0.96, "ci95": [0.95, 0.97]}, "independent_estimate": 0.9}
    html = render_report(s, None, "")
    text = sections(html)["bank"]
    assert "96.0 % (95.0 % \u2026 97.0 %)" in text and "90.0 %" in text
    assert figure_titles(html, "bank") == []
