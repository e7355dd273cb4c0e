"""The public API's functions that join several layers (config, studies, results, report); ``mcmatch`` serves them
(see its ``__all__``). Outside the layered packages on purpose: it sits above all of them, beside ``cli``.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from mcmatch.config.loading import load_config
from mcmatch.config.schema import Config
from mcmatch.results.folder import check_run_target
from mcmatch.results.run_folder import Result, write_run
from mcmatch.results.summary import Summary


def with_overrides(config: Config, **analysis: Any) -> Config:
    """A copy of `config` with [analysis] settings replaced (samples, seed, keep_samples, sampling, ...), validated
    like the config file: a bad value raises ConfigError naming the key. None leaves a setting as it is."""
    return config.with_analysis(**analysis)


def run_config(
    config: Config | str | os.PathLike,
    jobs: int | None = 1,
    *,
    backend: Any = None,
    keep_samples: int | None = None,
) -> Result:
    """The Monte Carlo study of `config` (a Config or a config file) with every configured analysis, in memory.

    jobs: worker processes (1: this process; None or 0: automatic, as ``mcmatch run``); backend: a Dask client or
    None; keep_samples: sample rows kept in the table (None: the config's analysis.keep_samples). The same seed gives
    the same numbers whatever jobs or backend.
    """
    from mcmatch.studies.pipeline import RunOptions, run_study  # numpy, scipy, pandas: on first use

    if not isinstance(config, Config):
        config = load_config(config)
    done = run_study(config, RunOptions(jobs=jobs or None, backend=backend, keep_samples=keep_samples))
    return Result(Summary.model_validate(done.summary), done.table, config.text, config.technology_text)


def render_report(result: Result) -> str:
    """The self-contained HTML design-review report of a run, as text (nothing is written)."""
    from mcmatch.report.render import render_report as render

    return render(result.summary.to_dict(), result.table, result.config_text)


def save_run(
    result: Result,
    folder: str | os.PathLike,
    *,
    report: bool = True,
    force: bool = False,
    samples_format: str = "csv",
) -> Path:
    """Write `result` as a run folder (summary.json, samples.csv or .parquet, config.toml, technology.toml and,
    with `report`, report.html), atomically and with the run marker; returns the folder.

    The place is checked before anything is written, as for ``mcmatch run --out``: a missing, empty or run folder is
    replaced, a non-empty folder of your own only with `force`, a file never (ConfigError otherwise).
    """
    check_run_target(folder, force=force)  # before rendering: a bad place costs nothing
    html = render_report(result) if report else None
    return write_run(result, folder, force=force, samples_format=samples_format, report_html=html)
