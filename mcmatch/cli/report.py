"""`mcmatch report RUN_DIR`: re-render report.html of a saved run folder, without solving again."""

from __future__ import annotations

import argparse
from pathlib import Path


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "report",
        help="re-render the HTML design-review report of a run folder from its saved results",
        description="Re-render RUN_DIR/report.html from summary.json, samples.csv (or .parquet) and config.toml "
        "written by 'mcmatch run'. Nothing is solved again; the file is replaced atomically.",
    )
    p.add_argument("run_dir", metavar="RUN_DIR", help="run folder written by 'mcmatch run'")
    p.add_argument(
        "--out", help="write the report here instead of RUN_DIR/report.html (a new .html file or an mcmatch report)"
    )
    p.add_argument("--quiet", action="store_true", help="do not print where the report was written")
    p.set_defaults(execute=execute)


def execute(args: argparse.Namespace) -> int:
    from mcmatch.report.render import write_report
    from mcmatch.results.folder import check_report_target

    folder = Path(args.run_dir)
    target = None
    if args.out is not None:
        target = check_report_target(args.out)
    elif folder.is_dir():  # else write_report says what a run folder is
        target = check_report_target(folder / "report.html")
    path = write_report(folder, target)
    if not args.quiet:
        print(f"report written to {path}")
    return 0
