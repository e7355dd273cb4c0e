"""A whole study: nominal point, Monte Carlo, analyses -> summary dict and result table. No printing, no files."""

from __future__ import annotations

import platform
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np

from mcmatch import __version__
from mcmatch.config.schema import Config, Measure
from mcmatch.draws.mismatch import BLOCK, SOBOL_SCRAMBLINGS
from mcmatch.model.operating_point import device_operating_points
from mcmatch.results.tables import Columns, to_frame
from mcmatch.run.chunks import CHUNK_QUANTUM, resolve_jobs, run_chunk, stream_chunks
from mcmatch.run.loads import resolve_loads
from mcmatch.run.prefetch import prefetch
from mcmatch.run.study import Study, nominal_measures, prepare
from mcmatch.stats.compliance import compliance_block
from mcmatch.stats.describe import describe
from mcmatch.stats.histogram import HISTOGRAM_BINS, Grid
from mcmatch.stats.moments import STAT_BLOCK
from mcmatch.stats.streaming import ChunkReducer, RunAccumulator, sampling_summary
from mcmatch.stats.yields import joint_passes, passes, yield_block

if TYPE_CHECKING:
    import pandas as pd

#: What only the summary needs, imported while the workers solve (run/prefetch.py): about 0.2 s of every run.
SUMMARY_MODULES = ("scipy.special", "mcmatch.results.summary")
#: Failed samples whose parameters are listed in the summary, as examples.
FAILED_EXAMPLES = 5

# streamed moments fold per STAT_BLOCK: every chunk boundary (the pilot's end, multiples of the quantum) must be one
assert CHUNK_QUANTUM % STAT_BLOCK == 0 and BLOCK % STAT_BLOCK == 0


@dataclass
class RunOptions:
    jobs: int | None = None
    backend: str | None = None
    progress: Callable[[int], None] | None = None
    keep_samples: int | None = None  # rows kept for the table; None: config analysis.keep_samples
    chunk_size: int | None = None  # samples per chunk (rounded to chunks.CHUNK_QUANTUM); None: chunks' choice


@dataclass
class RunResult:
    """A study's summary dict, its kept sample rows as columns (SI) and the prepared study."""

    summary: dict
    columns: Columns
    study: Study
    extras: dict = field(default_factory=dict)

    @cached_property
    def table(self) -> pd.DataFrame:
        """The kept rows as a pandas table (built on first use: the command line writes and reports without it)."""
        return to_frame(self.columns)


def spec_yields(columns: dict[str, np.ndarray], config: Config, confidence: float = 0.95) -> dict:
    """Joint yield and per-spec yields; failed solves fail every spec."""
    converged = np.asarray(columns["converged"], dtype=bool)
    total = int(converged.size)
    joint = joint_passes(columns, config.specs)
    per_spec = {}
    for name, limits in config.specs.items():
        ok = passes(columns[name], limits) & converged
        per_spec[name] = {"min": limits.min, "max": limits.max, **yield_block(int(ok.sum()), total, confidence)}
    block = yield_block(int(joint.sum()), total, confidence)
    block["specs"] = per_spec
    return block


def failed_examples(columns: dict[str, np.ndarray], limit: int = FAILED_EXAMPLES) -> list[dict]:
    """Parameter values of the first failed samples, so a designer can reproduce them."""
    failed = np.flatnonzero(~np.asarray(columns["converged"], dtype=bool))[:limit]
    keys = [k for k in columns if k == "sample" or k.startswith(("dvth_", "dbeta_"))]
    return [{k: float(columns[k][i]) if k != "sample" else int(columns[k][i]) for k in keys} for i in failed]


def measure_head(measure: Measure) -> dict:
    """What a measure's summary block says of the measure itself: unit, kind and its definition."""
    return {"unit": measure.unit, "kind": measure.kind, "definition": measure.definition}


def measure_summaries(columns: dict[str, np.ndarray], study: Study, nominal: dict[str, float]) -> dict:
    out = {}
    for name, measure in study.measures.items():
        out[name] = {**measure_head(measure), **describe(columns[name], nominal[name])}
    return out


def streamed_yields(stats: RunAccumulator, config: Config, confidence: float = 0.95) -> dict:
    """:func:`spec_yields` from streamed counts: joint yield and per-spec yields; failed solves fail every spec."""
    total = int(stats.samples)
    per_spec = {}
    for name, limits in config.specs.items():
        per_spec[name] = {
            "min": limits.min,
            "max": limits.max,
            **yield_block(stats.spec_passed[name], total, confidence),
        }
    block = yield_block(stats.joint_passed, total, confidence)
    block["specs"] = per_spec
    return block


def stream_statistics(
    study: Study, config: Config, nominal: dict[str, float], options: RunOptions
) -> tuple[RunAccumulator, dict[str, np.ndarray], dict]:
    """Monte Carlo of the study, streamed: statistics over every sample, rows kept for the first `keep` samples only;
    with its wall time [s] and worker count (summary run.monte_carlo_time_s and run.workers).

    A pilot chunk (the first random block) is solved here first: it sets the quantile histograms' range. Every
    later chunk is solved and reduced where it runs, then folded here in sample order.
    """
    samples = int(config.analysis.samples)
    keep = int(config.analysis.keep_samples if options.keep_samples is None else options.keep_samples)
    measures = tuple(study.measures)
    specs = dict(config.specs)
    pilot_stop = min(samples, BLOCK)
    started = time.perf_counter()
    pilot = run_chunk(study, 0, pilot_stop)
    per_sample = (time.perf_counter() - started) / max(1, pilot_stop)  # [s]: decides whether a pool pays
    grids = None
    if keep < samples:
        grids = {m: Grid.from_pilot(pilot[m], nominal[m]) for m in measures}
    # Sobol' sampling: moments and passes per scrambling (samples i % R), for the randomised-QMC error estimate
    replicates = SOBOL_SCRAMBLINGS if study.sampling == "sobol" else 1
    reducer = ChunkReducer(measures=measures, specs=specs, keep=keep, grids=grids, replicates=replicates)
    stats = RunAccumulator(reducer)
    stats.add(reducer(pilot))
    del pilot
    if options.progress is not None:
        options.progress(pilot_stop)
    jobs = resolve_jobs(options.jobs, samples, None if options.backend else per_sample * (samples - pilot_stop))
    loader = None
    for part in stream_chunks(
        study, samples, jobs, options.backend, reduce=reducer, start=pilot_stop, chunk_size=options.chunk_size
    ):
        stats.add(part)
        if loader is None and jobs > 1:  # the workers are forked by now (all at the first chunk): a thread is safe
            loader = prefetch(SUMMARY_MODULES)
        if options.progress is not None:
            options.progress(part.stop - part.start)
    if loader is not None:
        loader.join()  # done long before in practice; no import may be in flight at a later fork (an analysis's pool)
    timing = {"monte_carlo_time_s": time.perf_counter() - started, "workers": int(jobs)}
    kept = stats.kept_columns()
    if not kept:  # keep = 0: an empty table with the run's columns
        kept = {k: v[:0] for k, v in run_chunk(study, 0, 1).items()}
    return stats, kept, timing


def run_study(config: Config, options: RunOptions | None = None) -> RunResult:
    """Nominal solve and Monte Carlo of the config's main condition, with summary statistics and yield."""
    options = options or RunOptions()
    started = time.perf_counter()
    config = resolve_loads(config)  # the summary and every analysis see the sized load currents
    study = prepare(config)
    nominal = nominal_measures(study)
    samples = config.analysis.samples
    stats, kept, timing = stream_statistics(study, config, nominal, options)
    summary: dict = {
        "title": config.title,
        "samples": int(samples),
        "seed": int(config.analysis.seed),
        "failed_solves": int(stats.failed),
        "measures": {
            name: {**measure_head(m), **stats.describe(name, nominal[name], kept)} for name, m in study.measures.items()
        },
        "yield": streamed_yields(stats, config),
        "sampling": sampling_summary(stats, config.analysis.sampling),
        "failed_examples": stats.failed_examples,
        "statistics": {
            "streamed": True,
            "chunks": stats.chunks,
            "stat_block": STAT_BLOCK,
            "keep_samples": int(stats.reducer.keep),
            "kept_samples": int(len(kept["sample"])),
            "quantiles": "exact" if stats.all_kept else "histogram",
            "histogram_bins": None if stats.all_kept else HISTOGRAM_BINS,
            "retried_solves": int(stats.retried),
        },
        "nominal_operating_point": {
            "nodes": {n: float(study.x_nominal[i]) for i, n in enumerate(study.circuit.nodes)},
        },
        "operating_point": device_operating_points(study.circuit, study.x_nominal),
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
    summary["compliance"] = compliance_block(summary["operating_point"], stats.out_of_saturation, stats.samples)
    # analyses (corners, area, contributions, yield extras) work from the summary, never from raw main-run rows
    from mcmatch.studies.analyses import run_analyses  # local: keeps this hook a one-place edit

    summary.update(run_analyses(config, study, summary, options))
    from mcmatch.studies.extra import run_extra_analyses  # placements, high-sigma yield, bank yield

    summary.update(run_extra_analyses(config, study, summary, options))
    from mcmatch.studies.variation import run_variation  # local and global parts of the spread (variation mode)

    summary.update(run_variation(config, study, summary))
    summary["run"]["run_time_s"] = time.perf_counter() - started
    summary["run"].update(timing)
    from mcmatch.results.summary import finish_summary  # local: prefetched while the workers solved

    summary = finish_summary(summary)  # schema_version added; checked against results.summary.Summary
    return RunResult(summary=summary, columns=kept, study=study)
