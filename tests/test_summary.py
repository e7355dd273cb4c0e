"""The typed, versioned summary (mcmatch.results.summary): every bundled config's summary matches the model, a wrong
type fails where the summary is finished, and a saved summary.json loads back. Schema checks are common practice, no
source; the numbers come from the runs themselves."""

from __future__ import annotations

import copy
import json
import math
import re

import pytest
from conftest import ROOT
from pydantic import BaseModel

from mcmatch.cli import main
from mcmatch.config.loading import load_config
from mcmatch.errors import ConfigError
from mcmatch.results.summary import (
    SCHEMA_VERSION,
    Summary,
    SummaryError,
    finish_summary,
    load_summary,
    read_summary,
    validate_summary,
)
from mcmatch.results.tables import write_json
from mcmatch.studies.pipeline import run_study

CONFIGS = sorted(p.stem for p in (ROOT / "configs").glob("*.toml"))


def small(name: str):
    """The bundled config with every study cut to a few hundred samples (same keys, less work)."""
    config = load_config(ROOT / "configs" / f"{name}.toml")
    changes: dict = {"samples": 512}
    analysis = config.analysis.model_dump(by_alias=True)
    for study in ("corners", "high_sigma", "bank", "area"):
        if analysis.get(study) is not None:
            changes[study] = {**analysis[study], "samples": 256 if study != "high_sigma" else 512}
    config = config.with_analysis(**changes)
    if config.placement is not None:
        config = config.model_copy(update={"placement": config.placement.model_copy(update={"samples": 256})})
    return config


def undeclared(model: object, where: str = "") -> list[str]:
    """Key paths the model holds as extras: keys the code writes that the model does not declare."""
    found = []
    if isinstance(model, BaseModel):
        found += [f"{where}.{k}" for k in model.model_extra or {}]
        for name in type(model).model_fields:
            found += undeclared(getattr(model, name), f"{where}.{name}")
    elif isinstance(model, dict):
        for key, value in model.items():
            found += undeclared(value, f"{where}.{key}")
    elif isinstance(model, list):
        for i, value in enumerate(model):
            found += undeclared(value, f"{where}[{i}]")
    return found


@pytest.fixture(scope="module")
def summaries() -> dict[str, dict]:
    return {name: run_study(small(name)).summary for name in CONFIGS}


@pytest.mark.parametrize("name", CONFIGS)
def test_every_bundled_config_writes_a_summary_the_model_declares_whole(summaries, name):
    summary = summaries[name]
    assert next(iter(summary)) == "schema_version" and summary["schema_version"] == SCHEMA_VERSION
    model = Summary.model_validate(summary)
    # the model names every key the code writes today (other helpers' new keys are allowed, not needed here)
    assert undeclared(model) == []
    # and gives them back unchanged (key for key, value for value)
    assert model.to_dict() == summary


def test_the_studies_keys_are_typed(summaries):
    demo, placement, bank = summaries["demo"], summaries["placement"], summaries["bank_yield"]
    assert Summary.model_validate(demo).corners[0].yield_.ci95[0] <= demo["corners"][0]["yield"]["fraction"]
    assert Summary.model_validate(demo).area.mode == "aspect"
    assert Summary.model_validate(placement).placement_best == placement["placement_best"]
    assert Summary.model_validate(bank).bank.channels == bank["bank"]["channels"] >= 2
    assert Summary.model_validate(summaries["high_sigma"]).high_sigma


@pytest.mark.parametrize(
    ("path", "value", "key"),
    [
        (("samples",), "512", "samples"),
        (("yield", "passed"), 1.5, "yield.passed"),
        (("measures", "gain_error", "std"), "0.01", "measures.gain_error.std"),
        (("corners", 0, "temperature"), "233 K", "corners[0].temperature"),
        (("operating_point", 0, "type"), "nfet", "operating_point[0].type"),
    ],
)
def test_a_wrong_type_fails_where_the_summary_is_finished(summaries, path, value, key):
    broken = copy.deepcopy(summaries["demo"])
    node = broken
    for part in path[:-1]:
        node = node[part]
    node[path[-1]] = value
    with pytest.raises(SummaryError, match=re.escape(f"summary key '{key}'")):
        finish_summary(broken)


def test_a_missing_key_fails_and_new_keys_are_welcome(summaries):
    missing = copy.deepcopy(summaries["demo"])
    del missing["yield"]["target"]
    with pytest.raises(SummaryError, match="yield.target"):
        finish_summary(missing)
    grown = copy.deepcopy(summaries["demo"])
    grown["supply_rejection"] = {"ratio_db": 40.0}  # DESIGN.md section 3: add keys, never rename
    grown["corners"][0]["supply_rejection"] = {"ratio_db": 38.0}
    grown["measures"]["gain_error"]["skew"] = 0.1
    model = Summary.model_validate(finish_summary(grown))
    assert model.to_dict()["supply_rejection"] == {"ratio_db": 40.0}
    assert model.corners[0].model_extra == {"supply_rejection": {"ratio_db": 38.0}}


def test_a_saved_summary_loads_back_with_its_non_finite_values(summaries, tmp_path):
    summary = copy.deepcopy(summaries["demo"])
    summary["measures"]["gain_error"]["nominal"] = math.nan  # e.g. a ratio whose reference carries no current
    path = tmp_path / "summary.json"
    write_json(path, summary)
    data = json.loads(path.read_text())
    assert data["measures"]["gain_error"]["nominal"] is None
    assert data["non_finite_values"] == ["measures.gain_error.nominal"]
    assert read_summary(path) == data  # as written
    loaded = load_summary(path)
    assert math.isnan(loaded.measures["gain_error"].nominal)
    assert loaded.samples == summary["samples"] and loaded.yield_.fraction == summary["yield"]["fraction"]


def test_a_damaged_summary_names_the_file_and_the_key(tmp_path, summaries):
    bad = copy.deepcopy(summaries["demo"])
    bad["yield"]["total"] = "many"
    with pytest.raises(ConfigError) as info:
        validate_summary(json.loads(json.dumps(bad)), "run/summary.json")
    assert info.value.file == "run/summary.json" and info.value.key == "yield.total"
    with pytest.raises(ConfigError):
        validate_summary([1, 2], "x.json")


def test_report_refuses_a_damaged_summary_with_exit_2(demo_project, tmp_path, capsys):
    out = tmp_path / "run"
    assert main(["run", str(demo_project), "--samples", "64", "--out", str(out), "--quiet", "--no-report"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["schema_version"] == SCHEMA_VERSION
    summary["measures"] = {"gain_error": {"unit": 1}}
    (out / "summary.json").write_text(json.dumps(summary))
    assert main(["report", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "summary.json" in err and "measures.gain_error" in err
    assert not (out / "report.html").exists()


def test_every_field_says_what_it_holds():
    """Each field of every block carries a description (the reference page is generated from them)."""
    seen: set[type] = set()

    def visit(model: type[BaseModel]) -> None:
        if model in seen:
            return
        seen.add(model)
        for name, info in model.model_fields.items():
            assert info.description, f"{model.__name__}.{name} has no description"
            for arg in _models_in(info.annotation):
                visit(arg)

    visit(Summary)
    assert len(seen) > 30


def _models_in(annotation: object) -> list[type[BaseModel]]:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation]
    return [m for arg in getattr(annotation, "__args__", ()) for m in _models_in(arg)]


def test_entries_of_points_without_an_operating_point_are_valid(summaries):
    # a corner, an area point, a confirmation and a placement whose nominal solve failed keep only their keys and
    # an error (studies/analyses.py, studies/extra.py); the model must take them as they are written
    demo = copy.deepcopy(summaries["demo"])
    demo["corners"].append({"process": "ss", "temperature": 233.15, "supply": None, "error": "no operating point"})
    demo["area"]["points"].append({"scale": 0.01, "requested_scale": 0.01, "area": 4e-13, "error": "no point"})
    name = next(iter(demo["area"]["minimum"]))
    demo["area"]["minimum"][name]["confirmed"] = {"scale": 2.0, "requested_scale": 2.0, "area": 8e-11, "error": "x"}
    placement = copy.deepcopy(summaries["placement"])
    entry = placement["placements"][0]
    placement["placements"].append(
        {k: entry[k] for k in ("name", "rows", "centroids", "cells", "shifts", "warnings", "layout")} | {"error": "x"}
    )
    for summary in (demo, placement):
        assert Summary.model_validate(finish_summary(summary)).to_dict() == finish_summary(summary)
