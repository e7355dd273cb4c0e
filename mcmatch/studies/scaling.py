"""Two cores against one, as `mcmatch run` uses them: the main Monte Carlo of a config (pilot chunk, then every
chunk solved and reduced where it runs and folded here in sample order, studies.pipeline.stream_statistics) on one
worker and on a pool, paired and alternated in one warm process so the ratio holds while the machine's speed
drifts. Both must give the same statistics. Used by `mcmatch bench --scaling`; no printing, no files."""

from __future__ import annotations

import json
import statistics

from mcmatch.config.schema import Config
from mcmatch.draws.mismatch import BLOCK
from mcmatch.run.chunks import usable_cores
from mcmatch.run.loads import resolve_loads
from mcmatch.run.study import nominal_measures, prepare
from mcmatch.studies.pipeline import RunOptions, stream_statistics


def monte_carlo_scaling(config: Config, rounds: int = 3, workers: int | None = None) -> dict | None:
    """Wall time [s] of the config's main Monte Carlo on 1 worker and on `workers` (default: all cores), `rounds`
    pairs, the order swapped every round after an untimed warm-up; ratios per pair, their median, the throughputs
    [samples/s] at the median times, and whether both worker counts gave the same statistics. None when there is
    only one worker to give it (nothing to compare)."""
    workers = workers or usable_cores()
    if workers < 2:
        return None
    config = resolve_loads(config)
    study = prepare(config)
    nominal = nominal_measures(study)
    samples = int(config.analysis.samples)

    def once(jobs: int, of: Config = config) -> tuple[float, str]:
        stats, kept, timing = stream_statistics(study, of, nominal, RunOptions(jobs=jobs))
        described = {name: stats.describe(name, nominal[name], kept) for name in study.measures}
        counts = (stats.samples, stats.failed, stats.joint_passed, sorted(stats.spec_passed.items()))
        return timing["monte_carlo_time_s"], json.dumps([described, counts], sort_keys=True, default=str)

    once(1, config.with_analysis(samples=min(samples, 2 * BLOCK)))  # untimed: first calls, plan, caches
    one, pooled, same = [], [], True
    for r in range(max(1, rounds)):
        order = (1, workers) if r % 2 == 0 else (workers, 1)
        got = {jobs: once(jobs) for jobs in order}
        one.append(got[1][0])
        pooled.append(got[workers][0])
        same = same and got[1][1] == got[workers][1]
    ratios = [a / b for a, b in zip(one, pooled, strict=True)]
    return {
        "samples": samples,
        "workers": workers,
        "rounds": len(ratios),
        "one_worker_s": one,
        "workers_s": pooled,
        "ratios": ratios,
        "ratio": statistics.median(ratios),
        "one_worker_samples_per_s": samples / statistics.median(one),
        "workers_samples_per_s": samples / statistics.median(pooled),
        "same_numbers": same,
    }
