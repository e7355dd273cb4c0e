"""Scale-out on a Dask cluster: attach to a scheduler (or start a loopback one), check it, hand joblib the backend name.

Only the command line uses this module, and only for ``--cluster``. ``dask.distributed`` is the optional extra
``mcmatch[cluster]`` and is imported inside the functions here, so a core install starts without it. The numbers do
not depend on where a chunk runs: the random stream is tied to fixed-size sample blocks (:mod:`mcmatch.draws.mismatch`),
and a chunk lost with its worker is simply recomputed by Dask from the same inputs.

Before any work is sent, :func:`cluster_session` checks, within one time budget, that the scheduler answers, that
workers have joined, and that the scheduler and every worker import the same mcmatch (version and source digest) and
numpy as this process. Without that check a cluster that cannot load mcmatch's tasks leaves the client waiting
forever: the error shows only in the scheduler's or the workers' logs.
"""

from __future__ import annotations

import logging
import math
import socket
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

from mcmatch.errors import ConfigError

#: Worker processes of ``--cluster local`` when no count is given.
DEFAULT_LOCAL_WORKERS = 2
#: Seconds allowed for connecting and checking the cluster (``--cluster-timeout``).
DEFAULT_TIMEOUT = 10.0
#: Worker threads needed: with a single one joblib would run every chunk in this process instead of on the cluster.
MIN_THREADS = 2
#: The joblib backend name that uses the active ``distributed.Client``.
BACKEND = "dask"

_FILE = "command line"
_KEY = "--cluster"
_EXPECTED = "expected 'tcp://HOST:PORT' (or tls://) of a running Dask scheduler, 'local' or 'local:N' with N >= 1"


@dataclass(frozen=True)
class Target:
    """Where to run: a scheduler address, or a loopback LocalCluster of `workers` processes."""

    address: str | None
    workers: int = 0

    @property
    def local(self) -> bool:
        return self.address is None


def parse_address(text: str) -> Target:
    """``tcp://host:port`` / ``tls://host:port`` / ``host:port`` (tcp) or ``local[:N]``; ConfigError otherwise."""
    value = text.strip()
    if value == "local" or value.startswith("local:"):
        count = value.partition(":")[2] or str(DEFAULT_LOCAL_WORKERS)
        if not count.isdigit() or int(count) < 1:
            raise ConfigError(f"{_EXPECTED}; got {text!r}", file=_FILE, key=_KEY)
        return Target(address=None, workers=int(count))
    scheme, sep, rest = value.partition("://")
    if not sep:
        scheme, rest = "tcp", value
    host, colon, port = rest.rpartition(":")
    if scheme not in ("tcp", "tls") or not colon or not host or "/" in rest or not port.isdigit():
        raise ConfigError(f"{_EXPECTED}; got {text!r}", file=_FILE, key=_KEY)
    if not 0 < int(port) < 65536:
        raise ConfigError(f"port must be 1..65535; got {text!r}", file=_FILE, key=_KEY)
    return Target(address=f"{scheme}://{host}:{int(port)}")


def import_distributed() -> Any:
    """The ``distributed`` module, or ConfigError saying which extra to install."""
    try:
        import distributed
    except ImportError:
        raise ConfigError(
            "dask.distributed is not installed; install mcmatch[cluster] to use it (pip install -e '.[cluster]' in "
            "the mcmatch checkout)",
            file=_FILE,
            key=_KEY,
        ) from None
    return distributed


@contextmanager
def cluster_session(address: str, timeout: float = DEFAULT_TIMEOUT) -> Iterator[str]:
    """Attach a Dask client (starting a loopback LocalCluster for ``local[:N]``), check it, yield the joblib backend.

    address: scheduler address ``tcp://host:port`` or ``local[:N]``; timeout [s]: budget for connecting and the
    checks. Raises ConfigError (exit 2) if the scheduler does not answer, fewer than MIN_THREADS worker threads join,
    or the scheduler or a worker does not import the same mcmatch and numpy. On leaving, by return, error or
    KeyboardInterrupt, the client is closed and a LocalCluster's workers are stopped; workers of an outside scheduler
    keep running.
    """
    target = parse_address(address)
    if not (math.isfinite(timeout) and timeout > 0):
        raise ConfigError(f"expected a positive number of seconds, got {timeout}", file=_FILE, key="--cluster-timeout")
    distributed = import_distributed()
    cluster = client = None
    try:
        if target.local:
            cluster = start_local_cluster(distributed, target.workers)
            scheduler = cluster.scheduler_address
        else:
            scheduler = target.address
        deadline = time.monotonic() + timeout
        client = connect(distributed, scheduler, timeout)
        wait_for_threads(client, scheduler, deadline, timeout)
        check_versions(client, scheduler, max(deadline - time.monotonic(), 0.1))
        yield BACKEND
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()


def start_local_cluster(distributed: Any, workers: int) -> Any:
    """A LocalCluster of `workers` processes; it and its dashboard listen on 127.0.0.1 only.

    One thread per worker (each chunk is vectorised numpy already); a single worker gets two threads so that joblib
    still sends the chunks to it rather than running them in this process.
    """
    return distributed.LocalCluster(
        n_workers=workers,
        threads_per_worker=1 if workers >= MIN_THREADS else MIN_THREADS,
        processes=True,
        host="127.0.0.1",
        dashboard_address="127.0.0.1:0",  # None would still try port 8787 first
        silence_logs=logging.ERROR,
    )


def refused(scheduler: str, timeout: float) -> str | None:
    """Why a TCP connection to the scheduler's host and port fails at once (refused, unknown host), else None.

    Dask's client keeps retrying a refused connection until its timeout; one plain connect tells a port where nothing
    listens from a slow network within milliseconds, so that case fails fast.
    """
    host, _, port = scheduler.partition("://")[2].rpartition(":")
    try:
        with socket.create_connection((host.strip("[]"), int(port)), timeout=timeout):
            return None
    except ConnectionRefusedError:
        return "connection refused: nothing listens on that port"
    except socket.gaierror as exc:
        return f"unknown host ({exc.strerror or exc})"
    except OSError:  # slow or filtered: leave the verdict to the client, within the timeout
        return None


def connect(distributed: Any, scheduler: str, timeout: float) -> Any:
    """A Client of the scheduler, made the default one (joblib's dask backend uses it); ConfigError if none answers."""
    reason = refused(scheduler, timeout)
    if reason is not None:
        raise ConfigError(
            f"could not reach a Dask scheduler at {scheduler} ({reason}); start one with 'dask scheduler --host "
            "<private-ip>' and give its address",
            file=_FILE,
            key=_KEY,
        )
    try:
        return distributed.Client(scheduler, timeout=timeout, set_as_default=True)
    except (OSError, TimeoutError, ValueError, TypeError) as exc:
        if scheduler.startswith("tls://"):
            hint = (
                "for tls:// give this process the CA, its certificate and key through Dask's configuration, e.g. "
                "DASK_DISTRIBUTED__COMM__TLS__CA_FILE, DASK_DISTRIBUTED__COMM__TLS__CLIENT__CERT and "
                "DASK_DISTRIBUTED__COMM__TLS__CLIENT__KEY (docs/cluster.md)"
            )
        else:
            hint = (
                "start one with 'dask scheduler --host <private-ip>' and give its address, or raise --cluster-timeout"
            )
        raise ConfigError(
            f"could not reach a Dask scheduler at {scheduler} within {timeout:g} s ({exc}); {hint}",
            file=_FILE,
            key=_KEY,
        ) from None


def wait_for_threads(client: Any, scheduler: str, deadline: float, timeout: float) -> int:
    """Wait until the workers offer at least MIN_THREADS threads; their total, or ConfigError at the deadline."""
    while True:
        threads = sum(client.nthreads().values())
        if threads >= MIN_THREADS:
            return threads
        if time.monotonic() >= deadline:
            break
        time.sleep(0.1)
    if threads == 0:
        message = f"no Dask worker joined the scheduler at {scheduler} within {timeout:g} s; start workers with "
        message += f"'dask worker {scheduler}' on machines that have mcmatch installed"
    else:
        message = f"the Dask workers at {scheduler} offer {threads} thread, at least {MIN_THREADS} are needed "
        message += "(otherwise joblib runs the chunks in this process); start more workers or use --nthreads 2"
    raise ConfigError(message, file=_FILE, key=_KEY)


def check_versions(client: Any, scheduler: str, timeout: float) -> None:
    """ConfigError unless the scheduler and every worker import this process's mcmatch (version and source digest)
    and numpy version, all answering within timeout [s].

    The scheduler is checked too: it unpickles the submitted tasks, and a scheduler without mcmatch (or with another
    copy of it) drops them with an error in its own log only, leaving this process waiting.
    """
    probe = environment_probe()
    local = probe()

    def ask() -> dict[str, Any]:
        answers: dict[str, Any] = {}
        try:
            answers[f"the scheduler {scheduler}"] = client.run_on_scheduler(probe)
        except Exception as exc:  # reported below with the others
            answers[f"the scheduler {scheduler}"] = exc
        answers.update({f"worker {w}": a for w, a in sorted(client.run(probe, on_error="return").items())})
        return answers

    try:
        answers = call_with_timeout(ask, timeout)
    except TimeoutError:
        raise ConfigError(
            f"the Dask cluster at {scheduler} did not answer a version check within {timeout:.3g} s",
            file=_FILE,
            key=_KEY,
        ) from None
    labels = {"mcmatch": "mcmatch", "numpy": "numpy", "source": "mcmatch source digest"}
    problems = []
    for who, answer in answers.items():
        if isinstance(answer, BaseException):
            problems.append(f"{who} failed the check ({type(answer).__name__}: {answer})")
        elif "error" in answer:
            problems.append(f"{who} cannot import mcmatch ({answer['error']})")
        else:
            problems += [
                f"{who} has {label} {answer.get(key)}, this process {local[key]}"
                for key, label in labels.items()
                if answer.get(key) != local[key]
            ]
    if problems:
        raise ConfigError(
            "the Dask scheduler and workers must run the same mcmatch and numpy as this process (the same seed gives "
            "the same numbers only then, and tasks they cannot load hang the run): " + "; ".join(problems) + ". "
            "Install it everywhere with pip install '.[cluster]' in the same project checkout, and restart the "
            "scheduler and workers after an update",
            file=_FILE,
            key=_KEY,
        )


def environment_probe() -> Callable[[], dict[str, str]]:
    """The check run here, on the scheduler and on each worker: mcmatch and numpy versions and a digest of mcmatch's
    source files, or {"error": ...} if they do not import. A nested function, so cloudpickle ships it by value and a
    process without mcmatch can still run it and say so (a module-level function would be sent by reference)."""

    def probe() -> dict[str, str]:
        import hashlib
        import importlib
        import pathlib

        try:
            package = importlib.import_module("mcmatch")
            numpy = importlib.import_module("numpy")
        except Exception as exc:
            return {"error": f"{type(exc).__name__}: {exc}"}
        root = pathlib.Path(package.__file__).parent
        digest = hashlib.sha256()
        for path in sorted(root.rglob("*.py")):
            digest.update(path.relative_to(root).as_posix().encode() + b"\0" + path.read_bytes() + b"\0")
        return {"mcmatch": package.__version__, "numpy": numpy.__version__, "source": digest.hexdigest()[:12]}

    return probe


def call_with_timeout(function: Callable[[], Any], timeout: float) -> Any:
    """function() in a daemon thread; its result or exception, TimeoutError after timeout [s]."""
    box: dict[str, Any] = {}

    def target() -> None:
        try:
            box["value"] = function()
        except BaseException as exc:  # handed to the caller
            box["error"] = exc

    thread = threading.Thread(target=target, name="mcmatch-cluster-check", daemon=True)
    thread.start()
    thread.join(timeout)
    if thread.is_alive():
        raise TimeoutError(f"no answer within {timeout} s")
    if "error" in box:
        raise box["error"]
    return box["value"]


def worker_threads() -> int:
    """Worker threads of the active Dask client (inside :func:`cluster_session`); sets the chunking."""
    distributed = import_distributed()
    return int(sum(distributed.get_client().nthreads().values()))
