"""Local worker pools for the chunk map: forked workers by default on Linux, loky as the alternative.

A forked worker inherits the parent's memory, so the numerical core it needs is already imported: a 2-worker pool
starts in about 0.1 s instead of the 2-4 s of loky workers that import the whole stack afresh. That lets two cores
pay from a few million samples. Each map forks its own workers and shuts them down when it ends: they carry the
parent's state of that moment, never an earlier one (a pool kept from before would run functions replaced since).
Its workers ignore SIGINT (Ctrl-C reaches the whole foreground process group; the parent alone
decides), take SIGTERM's default action, and end within :data:`mcmatch.run.workers.POLL_S` of their parent's death
(``kill -9`` included). A map left early (an exception, a signal, a generator closed) ends the workers at once: a
chunk in flight is never left computing for nobody.

The environment variable MCMATCH_POOL picks the pool: "fork" (default on Linux) or "loky" (default elsewhere: fork
is unavailable on Windows and unsafe with macOS system libraries). Any other value is refused before any work, with
exit status 2 (:func:`pool_kind`). Chunk results do not depend on the pool: the random stream belongs to sample
blocks, not to workers.

Only the standard library at import time: the command line checks MCMATCH_POOL while it is still light.
"""

from __future__ import annotations

import atexit
import multiprocessing
import os
import signal
import sys
from collections import deque
from collections.abc import Callable, Iterator
from concurrent.futures import Future, ProcessPoolExecutor
from typing import Any

from mcmatch.errors import ConfigError
from mcmatch.run.workers import Watched, watch_parent

#: The environment variable that selects the local pool.
POOL_ENV = "MCMATCH_POOL"
#: Pools a user may select.
POOLS = ("fork", "loky")
#: Wall time to start a 2-worker pool and return its first results [s] (measured on the 2-core development machine:
#: fork 0.04-0.09 s at load 8, rounded up; loky 2-3 s, its workers import mcmatch afresh).
STARTUP_S = {"fork": 0.15, "loky": 2.0}
#: Samples from which a pool of all cores is started when the run's own time is not known in advance: where it
#: saves more than STARTUP_S on 2 cores (a simple mirror solves about 5e6 samples/s per core; 2e6 samples save about
#: 0.2 s on a second core).
THRESHOLD = {"fork": 2_000_000, "loky": 10_000_000}
#: Chunks in flight per worker: enough to keep each busy while the parent folds a result, few enough to keep memory
#: bounded by a few chunks.
IN_FLIGHT_PER_WORKER = 2

_running: dict[int, tuple[ProcessPoolExecutor, int]] = {}  # fork pools not shut down yet: id -> (pool, parent pid)
# what a fork map's workers run: id -> (task, study), in place before the workers are forked, so they inherit the
# very objects (the study's cached solve plan included) and each chunk sends only its key and range
_inherited: dict[int, tuple[Callable[..., Any], Any]] = {}


def pool_kind() -> str:
    """The local pool MCMATCH_POOL selects ("fork" or "loky"); ConfigError (exit 2) for any other value."""
    default = "fork" if sys.platform.startswith("linux") else "loky"
    value = os.environ.get(POOL_ENV, "").strip().lower() or default
    if value not in POOLS:
        raise ConfigError(
            f"unknown local pool {os.environ[POOL_ENV]!r}: expected 'fork' (forked workers, Linux) or 'loky' "
            "(workers that import mcmatch afresh); unset it for the default",
            file="environment",
            key=POOL_ENV,
        )
    if value == "fork" and "fork" not in multiprocessing.get_all_start_methods():
        raise ConfigError("this system cannot fork processes; use 'loky'", file="environment", key=POOL_ENV)
    return value


def startup_seconds() -> float:
    """Wall time [s] to start the selected pool (STARTUP_S)."""
    return STARTUP_S[pool_kind()]


def threshold() -> int:
    """Samples from which the selected pool pays when nothing else is known (THRESHOLD)."""
    return THRESHOLD[pool_kind()]


def local_map(task: Callable[..., Any], study: Any, ranges: list[tuple[int, int]], jobs: int) -> Iterator[Any]:
    """Yield ``task(study, start, stop)`` per range, in order, from `jobs` local worker processes of the selected
    pool. `task` and `study` must pickle."""
    if pool_kind() == "loky":
        yield from _loky_map(task, study, ranges, jobs)
    else:
        yield from _fork_map(task, study, ranges, jobs)


def _loky_map(task: Callable[..., Any], study: Any, ranges: list[tuple[int, int]], jobs: int) -> Iterator[Any]:
    from joblib import Parallel, delayed, parallel_config

    watched = Watched(task, os.getpid())  # loky workers end when this process dies (kill -9 included)
    with parallel_config(backend="loky", n_jobs=jobs):
        parallel = Parallel(return_as="generator")
        yield from parallel(delayed(watched)(study, start, stop) for start, stop in ranges)


def _worker_start(parent: int) -> None:
    """Run first in each forked worker: leave Ctrl-C to the parent, die on SIGTERM, end with the parent."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    watch_parent(parent)


def fork_pool(jobs: int) -> ProcessPoolExecutor:
    """A new pool of `jobs` workers, forked from this process now; :func:`shutdown` ends it."""
    context = multiprocessing.get_context("fork")
    executor = ProcessPoolExecutor(jobs, mp_context=context, initializer=_worker_start, initargs=(os.getpid(),))
    _running[id(executor)] = (executor, os.getpid())
    return executor


def shutdown(executor: ProcessPoolExecutor | None = None, kill: bool = False) -> None:
    """Stop a fork pool (default: every one still running): its workers finish their chunk and exit, or (kill) are
    ended at once."""
    chosen = list(_running) if executor is None else [id(executor)]
    for key in chosen:
        if key not in _running:
            continue
        pool, parent = _running.pop(key)
        if parent != os.getpid():  # inherited by a fork: the pool belongs to another process
            continue
        if kill:
            _kill_workers(pool)
        pool.shutdown(wait=not kill, cancel_futures=True)


def _kill_workers(pool: ProcessPoolExecutor) -> None:
    """End a pool's workers at once, and let its manager thread see them gone.

    A worker killed while it writes a chunk's result leaves half a message in the result pipe; the executor's manager
    thread then waits for the rest forever (this process holds the pipe's write end too), and the interpreter hangs
    at exit joining it (seen about once in 40 interrupted runs). Closing our write end once the workers are dead turns
    that wait into end-of-file, which the manager handles as a broken pool. No public way to do either before
    Python 3.14, hence the private attributes (absent ones are skipped).
    """
    processes = list((getattr(pool, "_processes", None) or {}).values())
    for process in processes:
        if process.is_alive():
            process.kill()
    for process in processes:
        process.join(timeout=5)
    writer = getattr(getattr(pool, "_result_queue", None), "_writer", None)
    if writer is not None:
        writer.close()


atexit.register(shutdown, kill=True)  # a map never finished nor closed (its generator dropped unfinished)


def _run_inherited(key: int, start: int, stop: int) -> Any:
    """In a forked worker: the map's task on its study, both inherited at the fork (:data:`_inherited`)."""
    task, study = _inherited[key]
    return task(study, start, stop)


def _fork_map(task: Callable[..., Any], study: Any, ranges: list[tuple[int, int]], jobs: int) -> Iterator[Any]:
    executor = fork_pool(jobs)
    key = id(executor)
    _inherited[key] = (task, study)  # before the first submit, which forks the workers
    pending: deque[Future] = deque()
    todo = iter(ranges)
    finished = False
    try:
        for start, stop in todo:
            pending.append(executor.submit(_run_inherited, key, start, stop))
            if len(pending) >= IN_FLIGHT_PER_WORKER * jobs:
                break
        while pending:
            result = pending.popleft().result()
            for start, stop in todo:  # one out, one in
                pending.append(executor.submit(_run_inherited, key, start, stop))
                break
            yield result
        finished = True
    finally:
        if not finished:  # left early: nobody wants the chunks in flight
            for future in pending:
                future.cancel()
        shutdown(executor, kill=not finished)
        _inherited.pop(key, None)
