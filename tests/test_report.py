"""The design-review report: one self-contained, escaped, parseable HTML file whose sections follow the summary."""

from __future__ import annotations

import copy
import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from mcmatch.cli import main
from mcmatch.report.render import MAX_KEY_MEASURES, celsius, eng, render_report, write_report, yield_text
from mcmatch.results.tables import read_samples

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "demo.toml"
TECHNOLOGY = ROOT / "configs" / "technologies" / "demo180.toml"

#: Section ids in the order a reviewer reads them (the template's order).
ORDER = [
    "verdict",
    "circuit",
    "operating-point",
    "measures",
    "distributions",
    "yield",
    "corners",
    "area",
    "contributions",
    "placements",
    "high-sigma",
    "bank",
    "failed-solves",
    "assumptions",
    "config",
]
#: The sections a run of the demo (specs, [analysis.corners], [analysis.area], contributions) must show.
DEMO_SECTIONS = {
    "verdict",
    "circuit",
    "operating-point",
    "measures",
    "distributions",
    "yield",
    "corners",
    "area",
    "contributions",
    "assumptions",
    "config",
}
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}

# A config with no [analysis.*] tables and no specs; the title and notes carry markup that must come out escaped.
PLAIN = """
title = "<script>alert(1)</script>"
notes = "<img src=x onerror=alert(2)> & more"
technology = "{technology}"
[[circuit.mosfet]]
name = "MREF"
type = "nmos"
drain = "nb"
gate = "nb"
source = "gnd"
w = "4 um"
l = "2 um"
[[circuit.mosfet]]
name = "MOUT"
type = "nmos"
drain = "out"
gate = "nb"
source = "gnd"
w = "4 um"
l = "2 um"
[[circuit.current_source]]
name = "IREF"
from = "vdd"
to = "nb"
value = "10 uA"
[[circuit.voltage_source]]
name = "VDD"
plus = "vdd"
minus = "gnd"
value = "1.8 V"
[[circuit.voltage_source]]
name = "VOUT"
plus = "out"
minus = "gnd"
value = "0.9 V"
[measures]
i_out = {{ current = "MOUT" }}
"a<b>" = {{ voltage = "nb" }}
[analysis]
samples = 400
seed = 5
"""


class Page(HTMLParser):
    """Collects tags, attributes, section ids and text; checks that non-void elements nest and close properly."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.tags: list[tuple[str, dict]] = []
        self.sections: list[str] = []
        self.text: list[str] = []
        self.section_text: dict[str, list[str]] = {}
        self.doctype = False

    def handle_decl(self, decl: str) -> None:
        self.doctype = self.doctype or decl.lower() == "doctype html"

    def handle_starttag(self, tag: str, attrs: list) -> None:
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "section":
            self.sections.append(a.get("id", ""))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag: str, attrs: list) -> None:
        self.tags.append((tag, dict(attrs)))

    def handle_endtag(self, tag: str) -> None:
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
            return
        self.stack.pop()

    def handle_data(self, data: str) -> None:
        self.text.append(data)
        if "section" in self.stack and self.sections:
            self.section_text.setdefault(self.sections[-1], []).append(data)


def parse(html: str) -> Page:
    page = Page()
    page.feed(html)
    page.close()
    return page


def check_self_contained(html: str, page: Page) -> None:
    """No external reference of any kind: only data: URIs and #anchors in src/href; no scripts, links or url()."""
    assert page.doctype
    assert not page.errors, page.errors[:5]
    assert page.stack == [], page.stack
    for tag, attrs in page.tags:
        for key in ("src", "href", "srcset", "action", "poster", "data"):
            value = attrs.get(key)
            if value is not None:
                assert value.startswith(("data:", "#")), (tag, key, value[:80])
    lowered = html.lower()
    for forbidden in ("http://", "https://", "<script", "<link", "<iframe", "@import", "url("):
        assert forbidden not in lowered, forbidden
    assert not re.search(r"""(src|href)\s*=\s*["']?//""", lowered)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "run"
    assert main(["run", str(DEMO), "--samples", "2000", "--out", str(out), "--quiet"]) == 0
    return out


@pytest.fixture(scope="module")
def plain_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("plain")
    config = folder / "plain.toml"
    config.write_text(PLAIN.format(technology=TECHNOLOGY.as_posix()), encoding="utf-8")
    out = folder / "run"
    assert main(["run", str(config), "--out", str(out), "--quiet"]) == 0
    return out


def expected_sections(summary: dict) -> set[str]:
    """The sections a summary supports (the template must show exactly these)."""
    present = {"verdict", "circuit", "measures", "distributions", "assumptions", "config"}
    if summary.get("operating_point") or summary.get("nominal_operating_point"):
        present.add("operating-point")
    if summary.get("specs"):
        present.add("yield")
    for key, section in (
        ("corners", "corners"),
        ("area", "area"),
        ("contributions", "contributions"),
        ("placements", "placements"),
        ("high_sigma", "high-sigma"),
        ("bank", "bank"),
    ):
        if summary.get(key):
            present.add(section)
    if summary.get("failed_solves"):
        present.add("failed-solves")
    return present


def load(run: Path) -> tuple[dict, str]:
    return json.loads((run / "summary.json").read_text()), (run / "report.html").read_text(encoding="utf-8")


# --------------------------------------------------------------------------------------------- the demo report
def test_demo_report_is_self_contained_and_has_every_section(demo_run):
    summary, html = load(demo_run)
    page = parse(html)
    check_self_contained(html, page)
    assert expected_sections(summary) >= DEMO_SECTIONS  # the demo configures every analysis
    assert set(page.sections) == expected_sections(summary)
    assert page.sections == [s for s in ORDER if s in page.sections]  # reading order
    assert len(html.encode()) < 3_000_000
    assert "@page" in html and "@media print" in html


def test_reports_are_valid_html5(demo_run, plain_run):
    html5lib = pytest.importorskip("html5lib", reason="html5lib (a test extra) is not installed")
    for run in (demo_run, plain_run):
        # strict mode raises on any parse error of the WHATWG HTML parsing algorithm
        html5lib.HTMLParser(strict=True).parse((run / "report.html").read_text(encoding="utf-8"))


def test_demo_report_figures_are_inline_svg_with_real_text(demo_run):
    summary, html = load(demo_run)
    page = parse(html)
    assert not [a for tag, a in page.tags if tag == "img"]  # no image files, no data: URIs
    assert "base64" not in html
    charts = [a for tag, a in page.tags if tag == "svg"]
    classes = [a.get("class", "") for tag, a in page.tags if tag == "figure"]
    assert len(classes) == len(charts)  # one chart per figure
    # one histogram per measure, a normal-probability plot per measure with a spec (common practice, no source)
    assert classes.count("fig-hist") == len(summary["measures"])
    assert classes.count("fig-probplot") == len(summary["specs"])
    assert "fig-area" in classes and "fig-contrib" in classes and "fig-corners" in classes
    for a in charts:
        assert a.get("role") == "img" and a.get("viewbox")
    # every chart carries an accessible name with its key numbers, and its axis labels are text, not outlines
    titles = re.findall(r"<svg[^>]*><title>([^<]+)</title>", html)
    assert len(titles) == len(charts)
    m = summary["measures"]["gain_error"]
    hist = next(t for t in titles if t.startswith("histogram of gain_error"))
    assert eng(m["mean"], "1") in hist and eng(m["std"], "1") in hist
    assert re.search(r"<text[^>]*>gain_error \[%\]</text>", html)
    assert re.search(r"<text[^>]*>normal quantile \[sigma\]</text>", html)
    assert "<path" in html and "<glyph" not in html and "<use" not in html


def test_every_measure_with_a_spec_gets_a_probability_plot():
    # issue 16 item 9: a probability plot for every measure with a spec, however many (here 6, more than the
    # MAX_KEY_MEASURES drawn when no measure has a spec); common practice, no source
    rng = np.random.default_rng(5)
    names = [f"err{i}" for i in range(1, 7)]
    columns = {n: rng.normal(0.0, 0.01, 500) for n in names}
    columns["converged"] = np.ones(500, dtype=bool)
    block = {"passed": 480, "total": 500, "fraction": 0.96, "ci95": [0.94, 0.975]}
    measures = {n: {"unit": "1", "nominal": 0.0, "mean": 0.0, "std": 0.01, "count": 500} for n in names}
    summary = {
        "title": "six specs",
        "samples": 500,
        "seed": 1,
        "failed_solves": 0,
        "measures": measures,
        "specs": {n: {"min": -0.02, "max": 0.02, "unit": "1"} for n in names},
        "yield": {**block, "specs": {n: dict(block) for n in names}},
    }
    html = render_report(summary, columns, "")
    assert len(names) > MAX_KEY_MEASURES
    assert html.count('class="fig-probplot"') == len(names)
    for n in names:
        assert f"normal probability plot of {n}:" in html
    del summary["specs"]
    assert render_report(summary, columns, "").count('class="fig-probplot"') == MAX_KEY_MEASURES


def test_demo_report_states_the_verdict_and_the_worst_corner(demo_run):
    summary, html = load(demo_run)
    page = parse(html)
    verdict = " ".join(page.section_text["verdict"])
    y = summary["yield"]
    target = y["target"]["yield"]
    # judged by the interval against the target, in words (Clopper & Pearson, Biometrika 1934)
    if y["target"]["met"]:
        assert "MEETS TARGET" in verdict
    elif y["ci95"][1] < target:
        assert "FAILS TARGET" in verdict
    else:
        assert "NOT DEMONSTRATED" in verdict
    assert yield_text(y["fraction"]) in verdict and yield_text(target) in verdict
    failing = [name for name, block in y["specs"].items() if block["ci95"][1] < target]
    for name in failing:  # named after the word FAILS (one line each, or one line for more than three)
        pattern = rf"FAILS\s+{re.escape(name)}:" if len(failing) <= 3 else rf"FAILS\s+{len(failing)} specs \(.*{name}"
        assert re.search(pattern, verdict), name
    # the worst corner of each spec'd measure is named in the verdict and marked in the corner table
    corners = " ".join(page.section_text["corners"])
    for name in summary["specs"]:
        worst = summary["corners_worst"][name]
        assert f"{worst['process']}, {celsius(worst['temperature'])}" in verdict
        assert f"worst: {name}" in corners or f", {name}" in corners


def test_demo_report_converts_units_for_display(demo_run):
    summary, html = load(demo_run)
    text = " ".join(parse(html).section_text["measures"])
    for name, m in summary["measures"].items():
        assert eng(m["mean"], m["unit"]) in text, name
    circuit = " ".join(parse(html).section_text["circuit"])
    assert "4 \u00b5m" in circuit and "10 \u00b5A" in circuit and "4.5" in circuit  # W, IREF, A_VT in mV*um
    assert "\u00b0C" in " ".join(parse(html).section_text["corners"])


def test_report_command_rerenders_without_solving(demo_run, monkeypatch, tmp_path):
    run = tmp_path / "copy"
    shutil.copytree(demo_run, run)
    original = (run / "report.html").read_bytes()
    (run / "report.html").unlink()

    def no_solving(*args, **kwargs):
        raise AssertionError("mcmatch report must not solve")

    # every place a command looks the solving entry points up
    for target in ("mcmatch.studies.pipeline.prepare", "mcmatch.studies.analyses.prepare", "mcmatch.run.study.prepare"):
        monkeypatch.setattr(target, no_solving)
    for target in ("mcmatch.studies.condition.monte_carlo", "mcmatch.run.chunks.monte_carlo"):
        monkeypatch.setattr(target, no_solving)
    assert main(["report", str(run), "--quiet"]) == 0
    # same summary, same samples (CSV round-trips floats exactly), same seed-free figures: the same bytes
    assert (run / "report.html").read_bytes() == original
    assert sorted(p.name for p in run.iterdir()) == [
        ".mcmatch-run",
        "config.toml",
        "report.html",
        "samples.csv",
        "summary.json",
        "technology.toml",
    ]


def test_report_write_is_atomic(demo_run, monkeypatch, tmp_path):
    run = tmp_path / "copy"
    shutil.copytree(demo_run, run)
    before = (run / "report.html").read_bytes()

    def broken(*args, **kwargs):
        raise RuntimeError("renderer failed")

    monkeypatch.setattr("mcmatch.report.render.render_report", broken)
    with pytest.raises(RuntimeError):
        write_report(run)
    assert (run / "report.html").read_bytes() == before  # untouched, no temporary file left
    assert sorted(p.name for p in run.iterdir()) == [
        ".mcmatch-run",
        "config.toml",
        "report.html",
        "samples.csv",
        "summary.json",
        "technology.toml",
    ]


def test_report_command_rejects_a_folder_that_is_not_a_run(tmp_path, capsys):
    assert main(["report", str(tmp_path / "missing")]) == 2
    (tmp_path / "empty").mkdir()
    assert main(["report", str(tmp_path / "empty")]) == 2
    err = capsys.readouterr().err
    assert "summary.json" in err and "empty" in err
    assert list((tmp_path / "empty").iterdir()) == []
    (tmp_path / "bad").mkdir()
    (tmp_path / "bad" / "summary.json").write_text("{not json")
    assert main(["report", str(tmp_path / "bad")]) == 2
    assert "summary.json" in capsys.readouterr().err


# ------------------------------------------------------------------------------------ absent sections, escaping
def test_plain_run_omits_absent_sections_cleanly(plain_run):
    summary, html = load(plain_run)
    page = parse(html)
    check_self_contained(html, page)
    assert set(page.sections) == expected_sections(summary)
    for absent in ("yield", "corners", "area", "placements", "high-sigma", "bank", "failed-solves"):
        assert absent not in page.sections
    assert "NO SPECS" in " ".join(page.section_text["verdict"])
    assert not re.search(r"\b(None|Undefined|nan)\b", " ".join(page.text))
    assert not re.search(r"<tbody>\s*</tbody>", html)  # no empty tables
    assert not re.search(r"<section[^>]*>\s*<h2>[^<]*</h2>\s*</section>", html)  # no empty sections


def test_user_strings_are_escaped(plain_run):
    _, html = load(plain_run)
    page = parse(html)
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "<script" not in html.lower()
    assert not [a for tag, a in page.tags if tag == "img" and a.get("src") == "x"]
    assert "&lt;img src=x onerror=alert(2)&gt; &amp; more" in html  # the notes
    assert "a&lt;b&gt;" in html and "<b>" not in html  # a measure name
    assert "<script>alert(1)</script>" in "".join(page.text)  # and the reader still sees the title as typed


def test_render_report_is_pure_and_tolerates_a_bare_summary():
    # the smallest summary the contract allows (DESIGN.md section 3), no table, no config text
    summary = {
        "title": "bare",
        "samples": 10,
        "seed": 1,
        "failed_solves": 0,
        "measures": {
            "x": {
                "unit": "A",
                "nominal": 1e-5,
                "mean": 1e-5,
                "std": 1e-7,
                "min": 9e-6,
                "max": 1.1e-5,
                "quantiles": {"0.00135": 9.7e-6, "0.5": 1e-5, "0.99865": 1.03e-5},
            }
        },
        "yield": {"passed": 10, "total": 10, "fraction": 1.0, "ci95": [0.69, 1.0], "method": "clopper-pearson"},
    }
    html = render_report(summary, None, "")
    page = parse(html)
    check_self_contained(html, page)
    assert page.sections == ["verdict", "measures", "assumptions"]
    assert "10 \u00b5A" in html


def test_optional_analyses_render_when_present(plain_run):
    summary, _ = load(plain_run)
    table = read_samples(plain_run / "samples.csv")
    s = copy.deepcopy(summary)
    s["specs"] = {"i_out": {"min": 9e-6, "max": 11e-6, "unit": "A"}}
    s["yield"] = {
        "passed": 390,
        "total": 400,
        "fraction": 0.975,
        "ci95": [0.955, 0.988],
        "method": "clopper-pearson",
        "specs": {
            "i_out": {"min": 9e-6, "max": 11e-6, "passed": 390, "total": 400, "fraction": 0.975, "ci95": [0.955, 0.988]}
        },
    }
    s["failed_solves"] = 3
    s["failed_examples"] = [{"sample": 17, "dvth_MREF": 0.0123, "dbeta_MREF": -0.021}]
    s["placements"] = [
        {
            "name": "common centroid",
            "measures": {"i_out": {"nominal": 1e-5, "mean": 1e-5, "std": 1e-7}},
            "yield": {"fraction": 0.99, "ci95": [0.98, 0.995]},
        }
    ]
    s["high_sigma"] = {
        "i_out": {"fail_probability": 2.5e-7, "ci95": [1e-7, 5e-7], "effective_samples": 800.0, "sigma_level": 5.03}
    }
    s["bank"] = {"channels": 16, "all_in_spec": {"fraction": 0.96, "ci95": [0.95, 0.97]}, "independent_estimate": 0.955}
    s["operating_point"] = [
        {
            "name": "MREF",
            "type": "nmos",
            "region": "saturation",
            "vgs": 0.63,
            "vds": 0.63,
            "vov": 0.18,
            "vdsat": 0.18,
            "headroom": 0.45,
            "id": 1e-5,
            "gm": 1.1e-4,
            "gds": 4e-7,
            "gm_id": 11.0,
        }
    ]
    html = render_report(s, table, "title = 'x'")
    page = parse(html)
    check_self_contained(html, page)
    assert set(page.sections) == expected_sections(s)
    text = {k: " ".join(v) for k, v in page.section_text.items()}
    failed = text["failed-solves"]
    assert "3 of 400" in failed and "12.3 mV" in failed and "-2.1 %" in failed
    assert "common centroid" in text["placements"] and "16" in text["bank"] and "5.03" in text["high-sigma"]
    assert "630 mV" in text["operating-point"] and "10 \u00b5A" in text["operating-point"]
    assert "FAILS" in text["yield"]  # 97.5 % against the default +-3 sigma reference 99.73 %


# --------------------------------------------------------------------------------------------- formatting, plots
def test_engineering_units():
    # SI prefixes (BIPM, The International System of Units, 9th ed., 2019), common practice for display
    assert eng(4.042088e-5, "A") == "40.42 \u00b5A"
    assert eng(8984.16, "ohm") == "8.984 k\u03a9"
    assert eng(0.63031, "V") == "630.3 mV"
    assert eng(-0.0313, "1") == "-3.13 %"
    assert eng(999.96e-6, "A") == "1 mA"  # rounding carries into the next prefix
    assert eng(float("nan"), "V") == eng(None, "V") == "\u2013"
    assert celsius(233.15) == "-40 \u00b0C" and celsius(398.15) == "125 \u00b0C"
    assert yield_text(0.9835) == "98.3 %" or yield_text(0.9835) == "98.4 %"  # two digits of the 1.65 % failures
    assert yield_text(0.99987) == "99.987 %"
    assert yield_text(0.9999999) != "100.0 %"  # a yield below one never prints as 100 %
    # and a yield above zero never as 0.0 %: two digits of a small yield (2 of 20,000 is 0.010 %)
    assert yield_text(2 / 20000) == "0.010 %" and yield_text(1.2e-5) == "0.0012 %" and yield_text(0.009) == "0.90 %"
    assert yield_text(3e-9) == "< 0.0001 %" and yield_text(0.0) == "0 %" and yield_text(0.304) == "30.4 %"
    # the two-sided normal equivalent of a 0.01 % yield is z = inv_Phi(0.50005) = 1.25e-4 (scipy.stats.norm.ppf)
    from scipy.stats import norm

    from mcmatch.report.format import sigma_equivalent

    assert sigma_equivalent(1e-4) == f"\u00b1{norm.ppf(0.50005):.2g} sigma two-sided" == "\u00b10.00013 sigma two-sided"
    assert sigma_equivalent(0.9973) == "\u00b13.00 sigma two-sided"


def test_plot_functions_take_and_return_axes():
    from mcmatch.report import figures as plots

    rng = np.random.default_rng(1)
    values = rng.normal(1e-5, 1e-7, 500)
    terms = [{"device": "M<1>", "parameter": "vth", "share": 0.7}, {"device": "M2", "parameter": "beta", "share": 0.3}]
    area = {
        "points": [{"area": a, "measures": {"x": {"std": 1e-9 / np.sqrt(a)}}} for a in (1e-12, 4e-12, 1.6e-11)],
        "fit": {"x": {"k": 1e-9, "floor": 0.0}},
        "minimum": {"x": {"area": 3e-12, "std": 1e-9 / np.sqrt(3e-12)}},
    }
    corners = [{"process": "tt", "temperature": 300.15, "supply": 1.8, "measures": {"x": {"mean": 1e-5, "std": 1e-7}}}]
    calls = [
        (plots.histogram, (values,), {"limits": {"min": 9.8e-6, "max": None}, "scale": 1e6, "unit": "uA"}),
        (plots.probability_plot, (values,), {}),
        (plots.area_sigma, (area,), {"measure": "x"}),
        (plots.contributions, (terms,), {}),
        (plots.corner_spread, (corners,), {"measure": "x", "worst": 0}),
    ]
    for function, args, kwargs in calls:
        ax = function(*args, **kwargs)
        assert ax.has_data()
        mine = plots.new_axes()
        assert function(*args, ax=mine, **kwargs) is mine
        svg = str(ax.svg())
        assert svg.startswith("<svg") and svg.endswith("</svg>") and "<title>" in svg and "<text" in svg
        assert "url(" not in svg and "http" not in svg  # no reference out of the page
    assert "M&lt;1&gt; \u00b7 vth" in str(plots.contributions(terms).svg())  # names are escaped text


# --------------------------------------------------------------------------------------------- a real browser
def _browser() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


def test_a_browser_renders_the_demo_report(demo_run, tmp_path):
    browser = _browser()
    if browser is None:
        pytest.skip("no browser binary (chromium, chromium-browser or google-chrome) on PATH")
    shot = tmp_path / "report.png"
    command = [
        browser,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}",
        f"--screenshot={shot}",
        "--window-size=1200,3000",
        (demo_run / "report.html").resolve().as_uri(),
    ]
    subprocess.run(command, capture_output=True, timeout=180, check=False)
    assert shot.exists(), "the browser wrote no screenshot"
    from matplotlib import image

    pixels = image.imread(shot)[..., :3]
    assert pixels.shape[:2] == (3000, 1200)
    rgb = (pixels * 255).round().astype(np.int32).reshape(-1, 3)
    colours = np.unique(rgb[:, 0] << 16 | rgb[:, 1] << 8 | rgb[:, 2])
    assert len(colours) > 200  # text, tables, verdict box and figures, not a blank page
    ink = (pixels.mean(axis=2) < 0.4).mean()
    assert 0.005 < ink < 0.5  # dark text on a light page
    page = pixels[:, 100:1100]  # the report's paper, inside the grey desk
    assert (page.mean(axis=2) > 0.97).mean() > 0.3
