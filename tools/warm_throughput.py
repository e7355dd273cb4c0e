"""Throughput of a warm process (as `mcmatch watch` re-runs a config): one worker against two, paired and alternated.

    python tools/warm_throughput.py [ROUNDS] [SAMPLES]      # default 3 rounds of configs/throughput.toml (2e7)

The imports and the first scipy calls are paid by an untimed warm-up run, so what is timed is the study itself
(`studies.pipeline.run_study`: nominal solve, plan, pilot chunk, the Monte Carlo stream, summary); writing the run
folder is not included. Prints the median wall time per worker count, the ratio and the load average.
"""

from __future__ import annotations

import os
import statistics
import sys
import time
from pathlib import Path

from mcmatch.config.loading import load_config
from mcmatch.studies.pipeline import RunOptions, run_study

CONFIG = Path(__file__).resolve().parents[1] / "configs" / "throughput.toml"


def main(rounds: int = 3, samples: int | None = None) -> None:
    config = load_config(CONFIG).with_analysis(samples=samples)
    run_study(config.with_analysis(samples=65536), RunOptions(jobs=2))  # warm-up: imports, scipy, a first fork
    times: dict[int, list[float]] = {1: [], 2: []}
    for r in range(rounds):
        for jobs in (1, 2) if r % 2 == 0 else (2, 1):
            started = time.perf_counter()
            run_study(config, RunOptions(jobs=jobs))
            times[jobs].append(time.perf_counter() - started)
    n = config.analysis.samples
    one, two = statistics.median(times[1]), statistics.median(times[2])
    for jobs, t in ((1, one), (2, two)):
        shown = ", ".join(f"{x:.2f}" for x in times[jobs])
        print(f"jobs {jobs}: median {t:.2f} s ({shown}), {n / t:.3g} samples/s")
    print(f"ratio {one / two:.2f}x at {n:.3g} samples; load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
