"""docs/summary.md is generated from the summary's models and must be current (common practice, no source: a
committed generator script, checked in the suite)."""

from __future__ import annotations

import importlib.util

from conftest import ROOT


def _tool():
    spec = importlib.util.spec_from_file_location("summary_reference", ROOT / "tools" / "summary_reference.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_the_field_reference_page_is_current():
    tool = _tool()
    page = (ROOT / "docs" / "summary.md").read_text(encoding="utf-8")
    assert page == tool.render(), "docs/summary.md is stale: run python tools/summary_reference.py"
    assert tool.main(["--check"]) == 0


def test_the_page_names_every_key_of_the_contract():
    # DESIGN.md section 3: the summary.json names users rely on
    page = (ROOT / "docs" / "summary.md").read_text(encoding="utf-8")
    for key in (
        "title",
        "samples",
        "seed",
        "failed_solves",
        "nominal",
        "quantiles",
        "ci95",
        "method",
        "corners",
        "area",
        "fit",
        "minimum",
        "contributions",
        "sensitivity",
        "share",
        "placements",
        "high_sigma",
        "fail_probability",
        "effective_samples",
        "sigma_level",
        "bank",
        "all_in_spec",
        "independent_estimate",
        "schema_version",
    ):
        assert f"`{key}`" in page, key
