"""Command line: ``main(argv) -> int``. The cli package is the only place that prints.

Each subcommand lives in its own module with ``add_parser(subparsers)`` and ``execute(args) -> int``.
Exit status: 0 done; 2 invalid input (message on stderr, nothing written); 1 internal error;
130 / 143 interrupted by SIGINT / SIGTERM.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any, TextIO

from mcmatch import __version__
from mcmatch.cli import signals
from mcmatch.errors import ConfigError, SolveError, clean

#: Subcommand modules, in the order `mcmatch --help` lists them.
COMMANDS = ("run", "watch", "size", "check", "templates", "new", "report", "bench", "placements")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="mcmatch",
        description="Pre-layout Monte Carlo mismatch, corner and area analysis of MOS bias circuits.",
    )
    parser.add_argument("--version", action="version", version=f"mcmatch {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        try:
            module = importlib.import_module(f"mcmatch.cli.{name}")
        except ModuleNotFoundError as exc:  # a subcommand not built yet
            if exc.name != f"mcmatch.cli.{name}":
                raise
            continue
        module.add_parser(sub)
    return parser


class EscapedStream:
    """A text stream that writes control characters as escapes (:func:`errors.clean`): no title, name or path from
    the input can move the cursor, recolour or clear the terminal. ``unescaped``: the stream beneath (progress bar)."""

    def __init__(self, stream: TextIO) -> None:
        self.unescaped = stream

    def write(self, text: str) -> int:
        return self.unescaped.write(clean(text))

    def __getattr__(self, name: str) -> Any:
        return getattr(self.unescaped, name)


@contextmanager
def escaped_output() -> Iterator[None]:
    """sys.stdout and sys.stderr escaped (EscapedStream) for the duration."""
    saved = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = (s if isinstance(s, EscapedStream) else EscapedStream(s) for s in saved)
    try:
        yield
    finally:
        sys.stdout, sys.stderr = saved


def error_text(exc: ConfigError | SolveError, config: str | None) -> str:
    """The one-line message of a bad input (exit 2): the file, the key and what was expected."""
    if isinstance(exc, SolveError):
        where = f"{config}: key 'circuit': " if config else ""
        return f"mcmatch: error: {where}{exc.message}"
    return f"mcmatch: error: {exc}"


def main(argv: list[str] | None = None) -> int:
    """The command line: parse argv, run the subcommand, return the exit status (never raises but SystemExit)."""
    with escaped_output():
        return _main(argv)


def _main(argv: list[str] | None) -> int:
    started = time.perf_counter()  # the console reports the whole command's time [s]
    args = None
    with signals.handled(deferred=True):  # first, before the heavy imports: a signal at any time ends cleanly
        try:
            parser = build_parser()  # imports every subcommand (numpy, scipy, pandas, ...)
            signals.deliver()
            try:
                args = parser.parse_args(argv)
            except SystemExit as exc:  # argparse: 2 for usage errors, 0 for --help
                return int(exc.code or 0)
            args.started = started
            if not getattr(args, "command", None):
                parser.print_help(sys.stderr)
                return 2
            status = int(args.execute(args))
            signals.check()  # a signal whose exception a finaliser swallowed still ends the command as interrupted
            return status
        except (ConfigError, SolveError) as exc:  # bad input; a SolveError: the circuit cannot be biased
            print(error_text(exc, getattr(args, "config", None)), file=sys.stderr)
            return 2
        except (KeyboardInterrupt, signals.Terminated) as exc:
            written = getattr(args, "written", None)  # set once a run folder has replaced the previous one
            what = f"{written} was written before the signal" if written else "nothing was written"
            word = "interrupted" if isinstance(exc, KeyboardInterrupt) else "terminated"
            print(f"mcmatch: {word}; {what}", file=sys.stderr)
            return 130 if isinstance(exc, KeyboardInterrupt) else 143
        except BrokenPipeError:
            return 1
        except Exception as exc:  # an internal error: say so, with the traceback for a bug report
            import traceback

            traceback.print_exc(file=sys.stderr)
            print(f"mcmatch: internal error: {type(exc).__name__}: {exc}", file=sys.stderr)
            return 1
