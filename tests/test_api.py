"""The public API (mcmatch.__all__): the demo run through it gives the same summary as the command line for the same
seed (common practice, no source: one engine behind both entry points), and `import mcmatch` stays light."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import mcmatch

FAST = 256


def _without_timing(summary: dict) -> dict:
    """The summary less what differs between two runs of the same seed: when and how long (run and Monte Carlo).

    command_time_s is set by the command only (the API cannot see the whole process).
    """
    out = json.loads(json.dumps(summary))
    for key in ("started_utc", "run_time_s", "command_time_s", "monte_carlo_time_s"):
        out["run"].pop(key, None)
    return out


@pytest.fixture(scope="module")
def api_and_cli(tmp_path_factory):
    from conftest import ROOT

    folder = tmp_path_factory.mktemp("api")
    config_path = ROOT / "configs" / "demo.toml"
    config = mcmatch.with_overrides(mcmatch.load_config(config_path), samples=FAST, seed=5)
    result = mcmatch.run_config(config, jobs=1)
    from mcmatch.cli import main

    cli_dir = folder / "cli"
    assert (
        main(
            [
                "run",
                str(config_path),
                "--samples",
                str(FAST),
                "--seed",
                "5",
                "--out",
                str(cli_dir),
                "--quiet",
                "--no-report",
            ]
        )
        == 0
    )
    return result, cli_dir, folder


def test_import_is_light_and_every_public_name_resolves():
    code = (
        "import sys, mcmatch\n"
        "heavy = [m for m in ('numpy', 'scipy', 'pandas', 'pydantic', 'matplotlib') if m in sys.modules]\n"
        "print(heavy)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"
    import mcmatch.run.study  # noqa: F401  (the subpackage mcmatch.run must not hide a public name)

    for name in mcmatch.__all__:
        assert getattr(mcmatch, name) is not None
    assert callable(mcmatch.run_config) and callable(mcmatch.save_run)
    with pytest.raises(AttributeError):
        mcmatch.no_such_name  # noqa: B018


def test_the_api_run_gives_the_command_lines_summary_and_table(api_and_cli):
    result, cli_dir, _ = api_and_cli
    written = json.loads((cli_dir / "summary.json").read_text())
    assert result.summary.schema_version == written["schema_version"] == mcmatch.SCHEMA_VERSION
    assert _without_timing(result.summary.to_dict()) == _without_timing(written)
    assert result.summary.samples == FAST and result.summary.seed == 5
    table = pd.read_csv(cli_dir / "samples.csv")
    assert list(table.columns) == list(result.table.columns)
    for column in table.columns:
        assert np.array_equal(table[column].to_numpy(), result.table[column].to_numpy())


def test_save_and_load_round_trip_and_render(api_and_cli):
    result, cli_dir, folder = api_and_cli
    out = mcmatch.save_run(result, folder / "saved", report=False)
    assert sorted(p.name for p in out.iterdir()) == sorted(p.name for p in cli_dir.iterdir() if p.name != "report.html")
    again = mcmatch.load_run(out)
    assert again.summary == result.summary
    assert again.config_text == result.config_text and again.technology_text == result.technology_text
    pd.testing.assert_frame_equal(again.table, pd.read_csv(cli_dir / "samples.csv"))
    html = mcmatch.render_report(again)
    assert html.lstrip().lower().startswith("<!doctype html") and result.summary.title in html


def test_save_run_never_replaces_a_folder_of_yours(api_and_cli):
    result, _, folder = api_and_cli
    mine = folder / "mine"
    mine.mkdir()
    (mine / "notes.txt").write_text("keep me")
    with pytest.raises(mcmatch.ConfigError, match="not a run folder"):
        mcmatch.save_run(result, mine)
    assert [p.name for p in mine.iterdir()] == ["notes.txt"]


def test_overrides_are_checked_like_the_config(api_and_cli):
    from conftest import ROOT

    config = mcmatch.load_config(ROOT / "configs" / "demo.toml")
    with pytest.raises(mcmatch.ConfigError) as info:
        mcmatch.with_overrides(config, samples=0)
    assert "samples" in str(info.value)
    assert mcmatch.with_overrides(config, seed=None) is config
