"""A whole study: nominal point, Monte Carlo, analyses -> summary dict and result table. No printing, no files."""

from __future__ import annotations

import platform
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime

import numpy as np
import pandas as pd

from mcmatch import __version__
from mcmatch.analysis.stats import describe
from mcmatch.analysis.yields import passes, yield_block
from mcmatch.config import Config
from mcmatch.engine import Study, monte_carlo, nominal_measures, prepare
from mcmatch.results import to_frame

#: Failed samples whose parameters are listed in the summary, as examples.
FAILED_EXAMPLES = 5


@dataclass
class RunOptions:
    jobs: int | None = None
    backend: str | None = None
    progress: Callable[[int], None] | None = None
    keep_samples: int | None = None


@dataclass
class RunResult:
    summary: dict
    table: pd.DataFrame
    study: Study
    extras: dict = field(default_factory=dict)


def spec_yields(columns: dict[str, np.ndarray], config: Config, confidence: float = 0.95) -> dict:
    """Joint yield and per-spec yields; failed solves fail every spec."""
    converged = np.asarray(columns["converged"], dtype=bool)
    total = int(converged.size)
    joint = converged.copy()
    per_spec = {}
    for name, limits in config.specs.items():
        ok = passes(columns[name], limits) & converged
        joint &= ok
        per_spec[name] = {"min": limits.min, "max": limits.max, **yield_block(int(ok.sum()), total, confidence)}
    block = yield_block(int(joint.sum()), total, confidence)
    block["specs"] = per_spec
    return block


def failed_examples(columns: dict[str, np.ndarray], limit: int = FAILED_EXAMPLES) -> list[dict]:
    """Parameter values of the first failed samples, so a designer can reproduce them."""
    failed = np.flatnonzero(~np.asarray(columns["converged"], dtype=bool))[:limit]
    keys = [k for k in columns if k == "sample" or k.startswith(("dvth_", "dbeta_"))]
    return [{k: float(columns[k][i]) if k != "sample" else int(columns[k][i]) for k in keys} for i in failed]


def measure_summaries(columns: dict[str, np.ndarray], study: Study, nominal: dict[str, float]) -> dict:
    out = {}
    for name, measure in study.measures.items():
        out[name] = {"unit": measure.unit, "kind": measure.kind, **describe(columns[name], nominal[name])}
    return out


def run_study(config: Config, options: RunOptions | None = None) -> RunResult:
    """Nominal solve and Monte Carlo of the config's main condition, with summary statistics and yield."""
    options = options or RunOptions()
    started = time.perf_counter()
    study = prepare(config)
    nominal = nominal_measures(study)
    samples = config.analysis.samples
    columns = monte_carlo(study, samples, jobs=options.jobs, progress=options.progress, backend=options.backend)
    converged = np.asarray(columns["converged"], dtype=bool)
    summary: dict = {
        "title": config.title,
        "samples": int(samples),
        "seed": int(config.analysis.seed),
        "failed_solves": int((~converged).sum()),
        "measures": measure_summaries(columns, study, nominal),
        "yield": spec_yields(columns, config),
        "failed_examples": failed_examples(columns),
        "nominal_operating_point": {
            "nodes": {n: float(study.x_nominal[i]) for i, n in enumerate(study.circuit.nodes)},
        },
        "conditions": {"corner": "tt", "temperature": float(config.temperature)},
        "circuit": config.circuit.model_dump(by_alias=True, exclude_none=True),
        "technology": config.technology.model_dump(by_alias=True),
        "specs": {k: {"min": v.min, "max": v.max, "unit": config.measures[k].unit} for k, v in config.specs.items()},
        "run": {
            "mcmatch_version": __version__,
            "config": config.path,
            "config_digest": config.digest,
            "technology": config.technology.name,
            "started_utc": datetime.now(UTC).isoformat(timespec="seconds"),
            "python": platform.python_version(),
            "machine": f"{platform.system()} {platform.machine()}, {platform.node()}",
        },
    }
    # analyses (corners, area, contributions, yield extras) work from the summary, never from raw main-run rows
    # -- hook: summary.update(run_analyses(config, study, summary, options))
    table = to_frame(columns)
    summary["run"]["run_time_s"] = time.perf_counter() - started
    return RunResult(summary=summary, table=table, study=study)
