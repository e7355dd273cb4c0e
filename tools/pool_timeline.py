"""Where a pool's time goes (docs/performance.md): the throughput config's Monte Carlo stream in one warm process,
one worker against two, alternated; per worker the chunks it solved, its busy time (solve and reduce) and CPU, and
the time from the first chunk's start to the last chunk's end. Idle workers show as busy well below the wall time;
contention shows as more CPU for the same samples with two workers than with one.

    python tools/pool_timeline.py [ROUNDS] [SAMPLES]      # default 2 rounds of 2e7 samples
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

from mcmatch.config.loading import load_config
from mcmatch.draws.mismatch import BLOCK
from mcmatch.run.chunks import chunk_ranges, map_chunks, run_chunk
from mcmatch.run.study import nominal_measures, prepare
from mcmatch.stats.histogram import Grid
from mcmatch.stats.streaming import ChunkReducer, RunAccumulator

CONFIG = Path(__file__).resolve().parents[1] / "configs" / "throughput.toml"


class TimedChunk:
    """Solve and reduce one chunk, as the run does; return the partial and (pid, start, solved, reduced, cpu)."""

    def __init__(self, reducer: ChunkReducer) -> None:
        self.reducer = reducer

    def __call__(self, study, start: int, stop: int):  # noqa: ANN001, ANN204 - a tool
        began, cpu = time.perf_counter(), time.process_time()
        columns = run_chunk(study, start, stop)
        solved = time.perf_counter()
        part = self.reducer(columns)
        return part, (os.getpid(), began, solved, time.perf_counter(), time.process_time() - cpu)


def main(rounds: int = 2, samples: int = 20_000_000) -> None:
    config = load_config(CONFIG)
    study = prepare(config)
    nominal = nominal_measures(study)
    pilot = run_chunk(study, 0, BLOCK)
    grids = {m: Grid.from_pilot(pilot[m], nominal[m]) for m in study.measures}
    reducer = ChunkReducer(measures=tuple(study.measures), specs=dict(config.specs), keep=1000, grids=grids)
    for _ in range(rounds):
        for jobs in (1, 2):
            stats = RunAccumulator(reducer)
            stats.add(reducer(pilot))
            began, workers = time.perf_counter(), {}
            for part, (pid, start, solved, reduced, cpu) in map_chunks(
                study, chunk_ranges(samples, jobs, start=BLOCK), jobs, task=TimedChunk(reducer)
            ):
                stats.add(part)
                workers.setdefault(pid, []).append((start, solved, reduced, cpu))
            wall = time.perf_counter() - began
            cpu_all = sum(c for chunks in workers.values() for *_, c in chunks)
            print(f"jobs {jobs}: wall {wall:.2f} s, chunk CPU {cpu_all:.2f} s, {samples / wall:.3g} samples/s")
            for pid, chunks in workers.items():
                solve = sum(s - b for b, s, _, _ in chunks)
                busy = sum(r - b for b, _, r, _ in chunks)
                print(
                    f"  worker {pid}: {len(chunks)} chunks, busy {busy:.2f} s (solve {solve:.2f}, reduce "
                    f"{busy - solve:.2f}), CPU {sum(c for *_, c in chunks):.2f} s, "
                    f"from +{chunks[0][0] - began:.3f} s to +{chunks[-1][2] - began:.2f} s"
                )
    print(f"load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main(*(int(float(a)) for a in sys.argv[1:3]))
