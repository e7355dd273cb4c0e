"""Import modules in a background thread while the workers solve: the command is idle then, so what only the
summary needs (scipy.special, the summary's models) costs no wall time after the last chunk.

Start it only once the pool's workers are forked (a fork while another thread holds an import lock can leave the
child waiting on that lock forever), and join it before any later fork. Only the standard library at import time.
"""

from __future__ import annotations

import importlib
import threading
from collections.abc import Iterable


def prefetch(modules: Iterable[str]) -> threading.Thread:
    """A started daemon thread importing `modules` in order. A module that fails to import is left alone here: the
    code that needs it imports it again and raises its error there."""
    names = tuple(modules)

    def load() -> None:
        for name in names:
            try:
                importlib.import_module(name)
            except Exception:  # noqa: BLE001, S112 - reported where the module is really needed
                continue

    thread = threading.Thread(target=load, name="mcmatch-prefetch", daemon=True)
    thread.start()
    return thread
