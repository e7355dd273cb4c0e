"""SIGINT and SIGTERM end the command with 130 / 143, even when the exception they raise is lost.

Python raises a signal's exception wherever the main thread happens to be. Inside a finaliser (``__del__``, a weakref
callback, a generator being closed by the garbage collector) the interpreter prints "Exception ignored in ..." and
carries on, so a rare Ctrl-C let the run continue and replace the previous result. Here every signal is also
recorded: :func:`check` raises it again at the points where stopping is safe (after each chunk, before a run folder
replaces the previous one), and the command's exit status reflects it however the work ended.

While the subcommands are imported, a signal is only recorded and raised once the imports are done (:func:`deliver`,
a fraction of a second later): an exception raised inside a compiled extension's initialisation makes CPython end
the process by SIGINT after its own exit status was chosen.
"""

from __future__ import annotations

import signal
from collections.abc import Iterator
from contextlib import contextmanager
from types import FrameType

#: Exit status per signal: 128 + the signal number, as shells report it.
STATUS = {signal.SIGINT: 130, signal.SIGTERM: 143}

_received: list[int] = []
_deliver = [True]  # raise at once (True) or only record until deliver() (False)


class Terminated(BaseException):  # noqa: N818 - like KeyboardInterrupt: no `except Exception` may swallow it
    """Raised in the main thread on SIGTERM."""


def _raise(signum: int) -> None:
    if signum == signal.SIGINT:
        raise KeyboardInterrupt()
    raise Terminated()


def _handler(signum: int, frame: FrameType | None) -> None:  # noqa: ARG001
    _received.append(signum)
    if _deliver[0]:
        _raise(signum)


@contextmanager
def handled(deferred: bool = False) -> Iterator[None]:
    """Record and raise SIGTERM, and SIGINT unless it is ignored (a background job started with SIGINT ignored
    keeps ignoring it); the previous handlers come back on leaving. Outside the main thread nothing changes.
    deferred: only record until :func:`deliver`."""
    _received.clear()
    _deliver[0] = not deferred
    previous = {}
    try:
        for signum in (signal.SIGTERM, signal.SIGINT):
            if signum == signal.SIGINT and signal.getsignal(signum) is signal.SIG_IGN:
                continue
            previous[signum] = signal.signal(signum, _handler)
    except ValueError:  # not the main thread (tests in threads): leave the signals alone
        pass
    try:
        yield
    finally:
        _deliver[0] = True
        for signum, handler in previous.items():
            signal.signal(signum, handler)


def received() -> int | None:
    """The first signal received inside :func:`handled`, or None."""
    return _received[0] if _received else None


def forget() -> None:
    """Drop the signals recorded so far: one that ended a wait normally (Ctrl-C stopping a watch)."""
    _received.clear()


def check() -> None:
    """Raise KeyboardInterrupt / Terminated again if a signal arrived: call where stopping is safe."""
    if _received:
        _raise(_received[0])


def deliver() -> None:
    """End the deferred phase: raise a signal recorded meanwhile, and raise later ones at once."""
    _deliver[0] = True
    check()
