"""Pool workers that do not outlive the process that started them.

A loky worker busy with a long chunk notices its parent's death only when it next talks to it, which can be
minutes later; after a ``kill -9`` of the command it would keep a core busy and hold the pool's semaphores and
memory-mapped folders, which its resource tracker removes only once every worker is gone. Each task sent to the
local pool is wrapped in :class:`Watched`: the first one a worker runs starts a daemon thread that ends the worker
(``os._exit``) within POLL_S of its parent's death. Dask workers are never wrapped: they belong to their cluster.
"""

from __future__ import annotations

import os
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

#: Seconds between two looks at the parent [s].
POLL_S = 0.25
#: Exit status of a worker that found itself orphaned.
ORPHANED = 70

_started: set[int] = set()  # the worker processes (pids) whose watch runs; a fork inherits none


def watch_parent(parent: int, poll: float = POLL_S) -> None:
    """Start, once per process, a daemon thread that ends this process when `parent` [pid] dies: when this process
    is handed to another parent (its parent exited) or `parent` no longer exists."""
    if os.getpid() in _started or os.getpid() == parent:
        return
    _started.add(os.getpid())
    first = os.getppid()

    def loop() -> None:
        while True:
            time.sleep(poll)
            if os.getppid() != first or not _exists(parent):
                os._exit(ORPHANED)

    threading.Thread(target=loop, name="mcmatch-parent-watch", daemon=True).start()


def _exists(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


@dataclass(frozen=True, eq=False)
class Watched:
    """A picklable task that first makes sure its worker watches `parent` [pid], then runs ``task(*args)``."""

    task: Callable[..., Any]
    parent: int

    def __call__(self, *args: Any) -> Any:
        watch_parent(self.parent)
        return self.task(*args)
