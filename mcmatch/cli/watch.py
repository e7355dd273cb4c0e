"""`mcmatch watch CONFIG`: run again each time the config or its technology file is saved, in one warm process.

The edit-run-look loop: the imports and the first scipy call are paid once, so a re-run of the demo takes a fraction
of the cold command's time. Each run is exactly `mcmatch run` with the same options (same seed, same numbers) and
replaces only its own run folder. A config saved with an error is reported like the command reports it (file, key,
what was expected) and the previous run folder is left as it was; the next save is tried again. Ctrl-C stops
watching (exit 0 between runs; during a run it ends like an interrupted run, 130, the previous folder kept).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from mcmatch.cli import error_text, run, signals
from mcmatch.cli.options import check_integer
from mcmatch.errors import ConfigError, SolveError

#: How often the watched files' modification times are read [s], by default.
INTERVAL = 0.25


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = run.add_parser(
        sub,
        name="watch",
        help="run again each time the config or its technology file is saved (one warm process: a re-run of the "
        "demo in well under a second); the options are those of 'run'; Ctrl-C stops",
    )
    p.add_argument(
        "--interval", type=float, default=INTERVAL, metavar="SECONDS", help=f"polling interval (default {INTERVAL})"
    )
    p.add_argument("--runs", type=int, default=0, metavar="N", help="stop after N runs (default 0: until Ctrl-C)")
    p.set_defaults(execute=execute)


def _stamp(paths: list[Path]) -> tuple:
    """What changes when a watched file is saved: (mtime [ns], size) per path, None for a missing file."""
    out = []
    for p in paths:
        try:
            st = p.stat()
        except OSError:
            out.append(None)
        else:
            out.append((st.st_mtime_ns, st.st_size))
    return tuple(out)


def _watched(args: argparse.Namespace) -> list[Path]:
    """The config and, when it names one that exists, its technology file."""
    paths = [Path(args.config)]
    try:
        import tomllib

        raw = tomllib.loads(paths[0].read_text(encoding="utf-8"))
        tech = raw.get("technology") if isinstance(raw, dict) else None
        if isinstance(tech, str) and tech.strip():
            from mcmatch.config.loading import technology_file

            candidate = technology_file(tech, paths[0])
            if candidate.is_file():
                paths.append(candidate)
    except (OSError, ValueError):  # unreadable or not TOML yet: the run reports it
        pass
    return paths


def execute(args: argparse.Namespace) -> int:
    if not args.interval > 0:
        raise ConfigError(f"expected a positive number of seconds, got {args.interval}", "command line", "--interval")
    check_integer("--runs", args.runs, 0, None)
    runs, status, seen, running = 0, 0, None, False
    say = (lambda text: None) if args.quiet else (lambda text: print(text, file=sys.stderr, flush=True))
    try:
        while not args.runs or runs < args.runs:
            paths = _watched(args)
            stamp = _stamp(paths)
            if stamp == seen:
                time.sleep(args.interval)
                continue
            seen = stamp
            args.started, args.warm, args.written = time.perf_counter(), runs > 0, None
            running = True
            try:
                status = run.execute(args)
            except (ConfigError, SolveError) as exc:
                if isinstance(exc, ConfigError) and exc.file == "command line":
                    raise  # an option no edit of the config can mend: exit 2 at once
                print(error_text(exc, args.config), file=sys.stderr, flush=True)
                status = 2
            running = False
            runs += 1
            names = ", ".join(os.fspath(p) for p in paths)
            word = "written" if status == 0 else "not written, the previous run folder kept"
            say(f"mcmatch watch: run {runs} {word}; watching {names} (Ctrl-C stops)")
    except KeyboardInterrupt:
        if running:  # inside a run: it ends as an interrupted run does (130, the previous folder kept)
            raise
        signals.forget()  # between runs: stopping is the normal end of a watch
        say("mcmatch watch: stopped")
    return status
