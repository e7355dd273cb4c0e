"""The design-review report: one self-contained HTML file per run, from the summary, the sample table and the config.

:func:`render_report` is pure (data in, HTML string out): each section module of :mod:`mcmatch.report.sections` turns
its part of the summary into display strings and tables, figures are inline SVG from :mod:`mcmatch.report.figures`,
the CSS is inlined, nothing is fetched from anywhere. The template (:mod:`mcmatch.report.template`) is jinja2 with
autoescape on, so every string from the user (title, names, notes, the config text) is escaped. :func:`write_report`
re-renders a saved run folder. Values stay SI until the formatting helpers of :mod:`mcmatch.report.format`.
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path
from typing import TYPE_CHECKING

from mcmatch.errors import ConfigError
from mcmatch.report import template
from mcmatch.report.format import celsius, eng, percent, yield_text
from mcmatch.report.sections.area import area_section
from mcmatch.report.sections.assumptions import assumptions
from mcmatch.report.sections.bank import bank_section
from mcmatch.report.sections.circuit import circuit_section
from mcmatch.report.sections.contributions import contributions_section
from mcmatch.report.sections.corners import corners_section
from mcmatch.report.sections.distributions import distributions
from mcmatch.report.sections.high_sigma import high_sigma_table
from mcmatch.report.sections.measures import measures_table, sampling_section, sampling_text
from mcmatch.report.sections.operating_point import nodes_table, operating_point_tables
from mcmatch.report.sections.placements import placement_drawing, placement_note, placements_table
from mcmatch.report.sections.sizing import sizing_section
from mcmatch.report.sections.variation import variation_table
from mcmatch.report.sections.verdict import header_items, verdict_section
from mcmatch.report.sections.yields import failed_section, yield_section
from mcmatch.report.targets import MAX_KEY_MEASURES, key_measures

if TYPE_CHECKING:
    import pandas as pd

#: Names other modules and tests import from here (the report's public face).
__all__ = [
    "MAX_KEY_MEASURES",
    "build_context",
    "celsius",
    "eng",
    "percent",
    "render_report",
    "sampling_section",
    "sampling_text",
    "write_report",
    "yield_text",
]


def _parse_config(config_text: str) -> dict:
    try:
        return tomllib.loads(config_text) if config_text else {}
    except tomllib.TOMLDecodeError:
        return {}


#: The caution printed at the foot of every page.
PAGE_CAUTION = "Pre-layout estimate from compact models, not sign-off"


def page_identity(summary: dict) -> str:
    """The run's identity printed at the head of every page: title, run date, samples, seed, config digest."""
    run = summary.get("run") or {}
    digest = str(run.get("config_digest") or "")[:12]
    parts = [
        str(summary.get("title") or "Untitled circuit")[:90],
        f"run {str(run.get('started_utc') or '?')[:16].replace('T', ' ')} UTC",
        f"{summary.get('samples', 0):,} samples, seed {summary.get('seed', '?')}",
    ]
    if digest:
        parts.append(f"config {digest}")
    return " \u00b7 ".join(parts)


def build_context(summary: dict, table: pd.DataFrame | None, config_text: str, figures: bool = True) -> dict:
    """Everything the template shows, as display strings and data URIs; sections without data are None or empty."""
    from mcmatch import __version__

    config = _parse_config(config_text)
    keys = key_measures(summary)
    if figures:
        dist = distributions(summary, table, keys)
        corners = corners_section(summary, keys, figures)
        area = area_section(summary, keys, figures)
        contrib = contributions_section(summary, figures, keys)
    else:
        dist = []
        corners = corners_section(summary, keys, False)
        area = area_section(summary, keys, False)
        contrib = contributions_section(summary, False, keys)
    ctx = {
        "title": summary.get("title") or "Untitled circuit",
        "renderer_version": __version__,
        "header": header_items(summary),
        "notes": config.get("notes") if isinstance(config.get("notes"), str) else "",
        "verdict": verdict_section(summary, keys) if summary.get("measures") else None,
        "sizing": sizing_section(summary, figures),
        "circuit": circuit_section(summary, config),
        "operating_point": operating_point_tables(summary.get("operating_point")),
        "nodes": nodes_table(summary.get("nominal_operating_point")),
        "measures": measures_table(summary),
        "sampling": sampling_section(summary),
        "distributions": dist,
        "yields": yield_section(summary),
        "corners": corners,
        "area": area,
        "contributions": contrib,
        "placements": placements_table(summary, keys),
        "placement_drawing": placement_drawing(summary),
        "placement_notes": placement_note(summary, keys) if summary.get("placements") else [],
        "high_sigma": high_sigma_table(summary),
        "bank": bank_section(summary, figures),
        "variation": variation_table(summary),
        "failed": failed_section(summary),
        "assumptions": assumptions(summary, config),
        "config_text": config_text,
        "config_path": (summary.get("run") or {}).get("config", "config.toml"),
        "page_identity": page_identity(summary),
        "page_caution": PAGE_CAUTION,
    }
    sections = [
        ("verdict", "Verdict", ctx["verdict"]),
        ("sizing", "Sizing for the die-yield target", ctx["sizing"]),
        ("circuit", "Circuit and technology", ctx["circuit"]),
        ("operating-point", "Nominal operating point", ctx["operating_point"] or ctx["nodes"]),
        ("measures", "Measures", ctx["measures"]),
        ("distributions", "Distributions and tails", ctx["distributions"]),
        ("yield", "Yield", ctx["yields"]),
        ("corners", "Corners", ctx["corners"]),
        ("area", "Area versus accuracy", ctx["area"]),
        ("contributions", "Mismatch contributions", ctx["contributions"]),
        ("placements", "Placements", ctx["placements"]),
        ("high-sigma", "High-sigma failure estimate", ctx["high_sigma"]),
        ("bank", "Output bank", ctx["bank"]),
        ("variation", "Local and global variation", ctx["variation"]),
        ("failed-solves", "Failed solves", ctx["failed"]),
        ("assumptions", "Assumptions and cautions", ctx["assumptions"]),
        ("config", "Configuration, for reproduction", ctx["config_text"]),
    ]
    ctx["toc"] = [{"id": i, "title": t} for i, t, present in sections if present]
    return ctx


def render_report(summary: dict, table: pd.DataFrame | None, config_text: str) -> str:
    """The self-contained HTML report of one run: summary.json's dict, the sample table (or None) and the config text.

    Pure: no files read or written. Sections whose data are absent from the summary are left out.
    """
    return template.render(build_context(summary, table, config_text or ""))


def write_report(run_dir: str | os.PathLike, out: str | os.PathLike | None = None) -> Path:
    """Re-render ``report.html`` of a saved run folder (summary.json, samples.csv/parquet, config.toml), atomically.

    Raises ConfigError naming the file when the folder is not a readable run folder. Returns the report's path.
    """
    from mcmatch.results.summary import read_summary
    from mcmatch.results.tables import read_samples

    folder = Path(run_dir)
    summary_path = folder / "summary.json"
    if not folder.is_dir():
        raise ConfigError("expected a run folder written by 'mcmatch run'", file=str(folder))
    summary = read_summary(summary_path)  # checked against results.summary.Summary; ConfigError if damaged
    samples = None
    for name in ("samples.parquet", "samples.csv"):
        path = folder / name
        if path.exists():
            try:
                samples = read_samples(path)
            except ImportError:
                raise ConfigError(
                    "reading samples.parquet needs pyarrow; install the extra mcmatch[parquet]", file=str(path)
                ) from None
            except Exception as exc:  # pandas raises many kinds on a damaged table
                raise ConfigError(
                    f"expected the samples table of a run ({type(exc).__name__}: {exc})", file=str(path)
                ) from None
            break
    config_path = folder / "config.toml"
    config_text = config_path.read_text(encoding="utf-8") if config_path.exists() else ""
    html = render_report(summary, samples, config_text)
    target = Path(out) if out is not None else folder / "report.html"
    from mcmatch.results.atomic import write_text_atomic

    write_text_atomic(target, html)
    return target
