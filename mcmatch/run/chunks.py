"""The Monte Carlo over sample chunks: draw and solve one chunk, split a run into chunks, and map them in-process
or over joblib (loky locally, or a Dask cluster). The only module that imports joblib.

Chunks are contiguous sample ranges; the random stream is tied to fixed-size blocks (see
:mod:`mcmatch.draws.mismatch`), so results do not depend on the chunking or the worker count.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np

from mcmatch.draws.mismatch import BLOCK, normal_source
from mcmatch.draws.process import process_draws
from mcmatch.run.allocator import tune_allocator
from mcmatch.run.pool import local_map, startup_seconds, threshold
from mcmatch.run.study import Study, solve_samples_t
from mcmatch.solve.fast import FAST_BATCH

#: Chunk lengths are multiples of this (a divisor of the random BLOCK): the streamed statistics fold per block of it.
CHUNK_QUANTUM = 8192


def run_chunk(study: Study, start: int, stop: int) -> dict[str, np.ndarray]:
    """Draw and solve samples start <= i < stop; columns: sample, measures, converged, iterations, retried, dvth_*,
    dbeta_*. Drawn (pseudo-random or Sobol', as `study.sampling` says) and solved FAST_BATCH samples at a time, so
    the working arrays stay in cache."""
    tune_allocator()
    params = study.circuit.params
    nd = params.count
    n = max(0, stop - start)
    draws = normal_source(study.seed, start, 2 * nd, study.stream, study.sampling)
    spread = process_draws(study.variation, study.seed, start, study.stream, study.sampling)
    dvth, dbeta = np.empty((nd, n)), np.empty((nd, n))
    out: dict[str, np.ndarray] = {"sample": np.arange(start, stop, dtype=np.int64)}
    for lo in range(0, n, FAST_BATCH) if n else [0]:
        hi = min(n, lo + FAST_BATCH)
        z = draws.take(hi - lo)
        # mismatch_from_normals_t, written in place
        np.multiply(z[:nd], params.sigma_vth[:, None], out=dvth[:, lo:hi])
        np.multiply(z[nd:], params.sigma_beta[:, None], out=dbeta[:, lo:hi])
        if spread is not None:  # global process spread, variation "global" or "both"
            spread.apply_t(dvth[:, lo:hi], dbeta[:, lo:hi])
        part = solve_samples_t(study, dvth[:, lo:hi], dbeta[:, lo:hi])
        if lo == 0 and hi == n:
            out.update(part)
            break
        for key, values in part.items():
            if key not in out:
                out[key] = np.empty(n, dtype=values.dtype)
            out[key][lo:hi] = values
    for k, name in enumerate(params.names):
        out[f"dvth_{name}"] = dvth[k]
        out[f"dbeta_{name}"] = dbeta[k]
    return out


def chunk_ranges(samples: int, jobs: int, start: int = 0, size: int | None = None) -> list[tuple[int, int]]:
    """Contiguous ranges covering start..samples, whole random blocks each, a few per worker for balance.

    With several workers the last `jobs` chunks are cut into single blocks (a guided tail): the workers then finish
    within about one block's time of each other instead of one whole chunk's (up to 0.1 s idle on a core measured
    with 524 288-sample chunks). `size` forces the chunk length (then rounded up to a multiple of
    :data:`CHUNK_QUANTUM`), with no guided tail.
    """
    if samples <= start:
        return []
    if size is None:
        per_chunk = max(BLOCK, int(np.ceil((samples - start) / max(1, 4 * jobs) / BLOCK)) * BLOCK)
        per_chunk = min(per_chunk, 8 * BLOCK)
    else:
        per_chunk = max(1, -(-int(size) // CHUNK_QUANTUM)) * CHUNK_QUANTUM
    ranges = [(s, min(samples, s + per_chunk)) for s in range(start, samples, per_chunk)]
    if size is None and jobs > 1 and per_chunk > BLOCK and len(ranges) > jobs:
        cut = ranges[-jobs][0]
        ranges = ranges[:-jobs] + [(s, min(samples, s + BLOCK)) for s in range(cut, samples, BLOCK)]
    return ranges


def usable_cores() -> int:
    """CPU cores this process may run on (its affinity mask where the system has one, else all)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def pool_pays(seconds_in_process: float, jobs: int | None = None) -> bool:
    """Whether `jobs` workers (default: all cores) would finish work that takes `seconds_in_process` [s] here sooner
    than this process alone, counting the pool's start-up (run/pool.py)."""
    jobs = jobs or usable_cores()
    return jobs > 1 and seconds_in_process * (1.0 - 1.0 / jobs) > startup_seconds()


def resolve_jobs(jobs: int | None, samples: int, seconds_in_process: float | None = None) -> int:
    """Worker count: default all cores, but in-process where a pool does not pay: judged from the expected time in
    process [s] when known (:func:`pool_pays`), else from the sample count (the pool's threshold, run/pool.py)."""
    cores = usable_cores()
    if jobs is None or jobs == 0:
        if seconds_in_process is not None:
            jobs = cores if pool_pays(seconds_in_process, cores) else 1
        else:
            jobs = cores if samples >= threshold() else 1
    if jobs < 0:
        jobs = max(1, cores + 1 + jobs)
    return max(1, jobs)


def map_chunks(
    study: Study,
    ranges: list[tuple[int, int]],
    jobs: int,
    backend: str | None = None,
    task: Callable[[Study, int, int], Any] | None = None,
) -> Iterator[Any]:
    """Yield ``task(study, start, stop)`` (default :func:`run_chunk`) per range, in order; in-process for jobs == 1,
    else through the local pool (run/pool.py) or a joblib backend. `task` must pickle (a module-level function or a
    picklable object)."""
    task = run_chunk if task is None else task
    if jobs == 1 and backend is None:
        for start, stop in ranges:
            yield task(study, start, stop)
        return
    if backend is None:  # local workers (forked, or loky by MCMATCH_POOL) that end when this process dies
        yield from local_map(task, study, ranges, jobs)
        return
    from joblib import Parallel, delayed, parallel_config

    with parallel_config(backend=backend, n_jobs=jobs):
        parallel = Parallel(return_as="generator")
        yield from parallel(delayed(task)(study, start, stop) for start, stop in ranges)


@dataclass(frozen=True, eq=False)  # hashed by identity: joblib's dask backend puts tasks in a set
class ReducedChunk:
    """A picklable chunk task: solve the chunk, then hand its columns to `reduce` in the same worker, so only what
    `reduce` returns travels back."""

    reduce: Callable[[dict[str, np.ndarray]], Any]

    def __call__(self, study: Study, start: int, stop: int) -> Any:
        return self.reduce(run_chunk(study, start, stop))


def stream_chunks(
    study: Study,
    samples: int,
    jobs: int | None = None,
    backend: str | None = None,
    reduce: Callable[[dict[str, np.ndarray]], Any] | None = None,
    start: int = 0,
    chunk_size: int | None = None,
) -> Iterator[Any]:
    """The streaming Monte Carlo: yield, in sample order, each chunk of samples start..samples as its columns or as
    ``reduce(columns)`` computed where the chunk was solved. Memory stays bounded by a few chunks."""
    jobs = resolve_jobs(jobs, samples)
    ranges = chunk_ranges(samples, jobs, start=start, size=chunk_size)
    task = run_chunk if reduce is None else ReducedChunk(reduce)
    yield from map_chunks(study, ranges, jobs, backend, task)


def monte_carlo(
    study: Study,
    samples: int,
    jobs: int | None = None,
    progress: Callable[[int], None] | None = None,
    backend: str | None = None,
) -> dict[str, np.ndarray]:
    """Run `samples` Monte Carlo samples; returns concatenated columns. `progress(n)` is called per finished chunk."""
    jobs = resolve_jobs(jobs, samples)
    ranges = chunk_ranges(samples, jobs)
    parts = []
    for part in map_chunks(study, ranges, jobs, backend):
        parts.append(part)
        if progress is not None:
            progress(len(part["sample"]))
    if not parts:
        raise ValueError("no samples requested")
    return {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}
