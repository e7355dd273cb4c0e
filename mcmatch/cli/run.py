"""`mcmatch run CONFIG`: Monte Carlo study written atomically to a run folder."""

from __future__ import annotations

import argparse
import sys
import time
from contextlib import nullcontext
from functools import partial
from pathlib import Path
from typing import Any

from mcmatch.cli import signals
from mcmatch.cli.options import check_format, check_jobs, check_overrides


def add_parser(
    sub: argparse._SubParsersAction,
    name: str = "run",
    help: str = "run the Monte Carlo study of a config and write summary, samples and report",  # noqa: A002
) -> argparse.ArgumentParser:
    p = sub.add_parser(name, help=help)
    p.add_argument("config", help="circuit config (TOML)")
    p.add_argument("--samples", type=int, help="Monte Carlo samples (overrides analysis.samples)")
    p.add_argument("--seed", type=int, help="random seed (overrides analysis.seed)")
    p.add_argument(
        "--jobs",
        type=int,
        help="worker processes, at most the cores of this machine: 0 or none for automatic (all cores when a pool "
        "saves time, judged from the first chunk, else 1), -1 all cores, -2 all but one; with --cluster, chunks in "
        "flight (default: the cluster's worker threads)",
    )
    p.add_argument(
        "--out",
        help="output folder (default: reports/<config stem>/); created if missing; replaced whole only if empty or a "
        "run folder written before (it carries a .mcmatch-run marker)",
    )
    p.add_argument(
        "--force",
        action="store_true",
        help="also replace a non-empty --out folder that is not a run folder, and everything in it (never a file, "
        "the current folder or a folder holding the config)",
    )
    p.add_argument("--format", choices=("csv", "parquet"), default="csv", help="samples table format")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument(
        "--no-report", action="store_true", help="skip report.html (scripted sweeps); 'mcmatch report DIR' adds it"
    )
    p.add_argument(
        "--keep-samples",
        type=int,
        metavar="K",
        help="sample rows written and plotted: the first K (overrides analysis.keep_samples, default 100000); "
        "statistics always cover every sample",
    )
    p.add_argument(
        "--cluster",
        metavar="ADDRESS",
        help="run the chunks on a Dask cluster: tcp://HOST:PORT of a running scheduler, or local[:N] for N loopback "
        "worker processes (default 2); needs mcmatch[cluster], same numbers as a local run",
    )
    p.add_argument(
        "--cluster-timeout",
        type=float,
        default=10.0,
        metavar="SECONDS",
        help="time allowed to reach the scheduler and check its workers (default 10)",
    )
    p.set_defaults(execute=execute)
    return p


def execute(args: argparse.Namespace) -> int:
    started = getattr(args, "started", None) or time.perf_counter()  # set by main(): the whole command is timed
    warm = bool(getattr(args, "warm", False))  # a re-run in `mcmatch watch`: timed from the change, not the process
    from mcmatch.cli.clock import command_seconds
    from mcmatch.config.analysis import Analysis
    from mcmatch.config.loading import load_config
    from mcmatch.results.atomic import write_run_folder
    from mcmatch.results.folder import check_run_target
    from mcmatch.results.tables import write_json, write_samples
    from mcmatch.run.cluster import cluster_session, parse_address, worker_threads
    from mcmatch.studies.pipeline import RunOptions, run_study

    check_overrides(Analysis, samples=args.samples, seed=args.seed, keep_samples=args.keep_samples)
    check_jobs(args.jobs, cluster=args.cluster is not None)
    check_format(args.format)
    target_cluster = parse_address(args.cluster) if args.cluster is not None else None  # "" is an error too
    config = load_config(args.config).with_analysis(
        samples=args.samples, seed=args.seed, keep_samples=args.keep_samples
    )
    out = args.out if args.out is not None else str(Path("reports") / Path(args.config).stem)
    target = check_run_target(out, inputs=(config.path, config.technology_path), force=args.force)
    out_dir = Path(out)
    bar = None
    if not args.quiet and sys.stderr.isatty():
        from tqdm import tqdm

        stream = getattr(sys.stderr, "unescaped", sys.stderr)  # the bar's own \r redraws, no user text
        bar = tqdm(total=config.analysis.samples, unit="sample", unit_scale=True, delay=1.0, file=stream)
    try:
        session = nullcontext() if target_cluster is None else cluster_session(args.cluster, args.cluster_timeout)
        with session as backend:
            jobs = args.jobs if backend is None or args.jobs else worker_threads()
            result = run_study(config, RunOptions(jobs=jobs, backend=backend, progress=partial(_progress, bar)))
    finally:
        if bar is not None:
            bar.close()
    samples_name = "samples.parquet" if args.format == "parquet" else "samples.csv"

    def write(folder: Path) -> None:
        write_samples(folder / samples_name, result.columns)
        (folder / "config.toml").write_text(config.text, encoding="utf-8")
        if config.technology_text:  # the technology file too: the run folder alone reproduces the run
            (folder / "technology.toml").write_text(config.technology_text, encoding="utf-8")
        result.summary["run"]["command_time_s"] = command_seconds(started, not warm)  # all but the report's rendering
        if warm:
            result.summary["run"]["warm"] = True
        write_json(folder / "summary.json", result.summary)
        if args.no_report:
            return
        from mcmatch.report.render import render_report

        try:  # rendered whole, then written: never half a report; a rendering bug must not cost the solved results
            html = render_report(result.summary, result.columns, config.text)
        except Exception as exc:
            print(
                f"mcmatch: warning: report.html not written ({type(exc).__name__}: {exc}); re-render it with "
                f"'mcmatch report {out_dir}'",
                file=sys.stderr,
            )
        else:
            (folder / "report.html").write_text(html, encoding="utf-8")

    def fill(folder: Path) -> None:
        write(folder)
        signals.check()  # last safe point: a lost interrupt must not replace the previous run

    write_run_folder(target, fill, force=args.force)
    args.written = str(out_dir)
    s = result.summary
    y = s["yield"]
    if not args.quiet:
        print(f"{s['title']}: {s['samples']} samples, {s['failed_solves']} failed solves")
        from mcmatch.config.analysis import VARIATION_MODES

        print(f"  variation {config.analysis.variation}: {VARIATION_MODES[config.analysis.variation]}")
        for name, m in s["measures"].items():
            print(
                f"  {name:>16}: nominal {_num(m['nominal'], '.6g')}  mean {_num(m['mean'], '.6g')}  "
                f"std {_num(m['std'], '.4g')} [{m['unit']}]"
            )
        print(f"  yield {_num(y['fraction'], '.5f')} (95 % CI {y['ci95'][0]:.5f} .. {y['ci95'][1]:.5f})")
        report = out_dir / "report.html"
        shown = f"open {report}" if (target / "report.html").exists() else f"no report ('mcmatch report {out_dir}')"
        print(f"  written to {out_dir} in {command_seconds(started, not warm):.1f} s; {shown}")
    return 0


#: What each [analysis] variation mode draws per sample (die), for the console.


def _progress(bar: Any, samples: int) -> None:
    """After each chunk [samples]: stop here if a signal's exception was lost, else advance the bar (if any)."""
    signals.check()
    if bar is not None:
        bar.update(samples)


def _num(value: float | None, spec: str) -> str:
    """A number for the console; 'n/a' where no sample converged."""
    return "n/a" if value is None else format(value, spec)
