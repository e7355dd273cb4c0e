"""A run as data (:class:`Result`: summary model, sample table, input texts) and the files of its run folder.

:func:`write_run` writes a Result into a run folder through :func:`mcmatch.results.atomic.write_run_folder` (the
marker, the previous run kept until the new one is complete); :func:`load_run` reads a run folder back. The report
is rendered a layer above (``mcmatch.render_report``) and handed in as text.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from mcmatch.errors import ConfigError
from mcmatch.results.atomic import write_run_folder
from mcmatch.results.folder import check_run_target
from mcmatch.results.summary import Summary, load_summary

if TYPE_CHECKING:
    import pandas as pd

#: File names inside a run folder.
SUMMARY_FILE = "summary.json"
SAMPLE_FILES = {"csv": "samples.csv", "parquet": "samples.parquet"}
CONFIG_FILE = "config.toml"
TECHNOLOGY_FILE = "technology.toml"
REPORT_FILE = "report.html"


@dataclass
class Result:
    """One run: the typed summary, the kept sample rows (SI columns; None if the folder has no table) and the texts of
    the config and technology files as run (technology_text is "" for an inline technology)."""

    summary: Summary
    table: pd.DataFrame | None
    config_text: str = ""
    technology_text: str = ""
    folder: Path | None = None  # where it was loaded from or saved to


def write_run_files(folder: Path, result: Result, samples_format: str = "csv", report_html: str | None = None) -> None:
    """The files of a run folder, written into `folder` (a temporary folder of write_run_folder)."""
    from mcmatch.results.tables import write_json, write_samples

    if samples_format not in SAMPLE_FILES:
        raise ConfigError(f"expected one of {', '.join(SAMPLE_FILES)}, got '{samples_format}'", key="samples_format")
    write_json(folder / SUMMARY_FILE, result.summary.to_dict())
    if result.table is not None:
        write_samples(folder / SAMPLE_FILES[samples_format], result.table)
    (folder / CONFIG_FILE).write_text(result.config_text, encoding="utf-8")
    if result.technology_text:
        (folder / TECHNOLOGY_FILE).write_text(result.technology_text, encoding="utf-8")
    if report_html is not None:
        (folder / REPORT_FILE).write_text(report_html, encoding="utf-8")


def write_run(
    result: Result,
    folder: str | os.PathLike,
    *,
    force: bool = False,
    samples_format: str = "csv",
    report_html: str | None = None,
) -> Path:
    """Save `result` as a run folder, atomically; returns the folder.

    The place is checked first (ConfigError, nothing written): a missing, empty or run folder is replaced, a folder
    of your own only with `force`, a file never.
    """
    target = check_run_target(folder, force=force)
    write_run_folder(target, lambda tmp: write_run_files(tmp, result, samples_format, report_html), force=force)
    result.folder = Path(folder)
    return Path(folder)


def load_run(folder: str | os.PathLike) -> Result:
    """A run folder written by ``mcmatch run`` (or :func:`write_run`) as a :class:`Result`; ConfigError naming the
    file when it is not one."""
    from mcmatch.results.tables import read_samples

    folder = Path(folder)
    if not folder.is_dir():
        raise ConfigError("expected a run folder written by 'mcmatch run'", file=str(folder))
    summary = load_summary(folder / SUMMARY_FILE)
    table = None
    for name in SAMPLE_FILES.values():
        if (folder / name).exists():
            table = read_samples(folder / name)
            break

    def text(name: str) -> str:
        path = folder / name
        return path.read_text(encoding="utf-8") if path.exists() else ""

    return Result(summary, table, text(CONFIG_FILE), text(TECHNOLOGY_FILE), folder)
