"""The printed report: the run's identity and the caution at every page's margin, written safely into the stylesheet.

Source: common practice, no source (a printed review page must say which run it belongs to and what it is not);
CSS Paged Media Module Level 3 (W3C) for the page-margin boxes; CSS Syntax Module Level 3 (W3C) for string escapes.
"""

from __future__ import annotations

import re

from mcmatch.report.render import PAGE_CAUTION, page_identity, render_report
from mcmatch.report.template import css_string

SUMMARY = {
    "title": "Bias bank",
    "samples": 20000,
    "seed": 7,
    "run": {"started_utc": "2026-12-02T21:39:00+00:00", "config_digest": "7659d7d973e54693a30f1ba0"},
}


def page_boxes(html: str) -> dict[str, str]:
    style = html[html.index("<style>") : html.index("</style>")]
    return dict(re.findall(r"@(top-left|bottom-left) \{ content: (\"[^\"]*\")", style))


def unescape_css(literal: str) -> str:
    return re.sub(r"\\([0-9a-f]{6})", lambda m: chr(int(m.group(1), 16)), literal[1:-1])


def test_every_printed_page_names_the_run_and_carries_the_caution():
    boxes = page_boxes(render_report(SUMMARY, None, ""))
    identity = unescape_css(boxes["top-left"])
    assert identity == page_identity(SUMMARY)
    assert "Bias bank" in identity and "2026-12-02 21:39 UTC" in identity and "seed 7" in identity
    assert "config 7659d7d973e5" in identity and "20,000 samples" in identity
    assert unescape_css(boxes["bottom-left"]) == PAGE_CAUTION and "not sign-off" in PAGE_CAUTION


def test_a_hostile_title_cannot_leave_the_stylesheet():
    title = 'x"; } body { visibility: collapse } </style><script>alert(1)</script>\\'
    html = render_report({**SUMMARY, "title": title}, None, "")
    style = html[html.index("<style>") : html.index("</style>")]
    assert "<script>" not in html and "</style><script>" not in html
    outside_strings = re.sub(r'"(?:[^"\\]|\\.)*"', '""', style)
    assert "visibility: collapse" not in outside_strings  # the title stayed inside its string literal
    assert unescape_css(page_boxes(html)["top-left"]).startswith(title)


def test_css_string_escapes_quotes_backslashes_angle_brackets_and_non_ascii():
    assert css_string('a"b') == '"a\\000022b"'
    assert css_string("\\") == '"\\00005c"'
    assert css_string("<µ>") == '"\\00003c\\0000b5\\00003e"'
    assert css_string("plain text 1.8 V") == '"plain text 1.8 V"'
