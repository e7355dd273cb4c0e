"""`mcmatch placements CONFIG`: compare the [placement] candidates side by side and name the best."""

from __future__ import annotations

import argparse
import json
import sys

from mcmatch.cli.options import check_jobs, check_overrides
from mcmatch.errors import ConfigError


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "placements",
        help="compare unit-cell placement patterns under process gradients (systematic error, sigma, yield)",
    )
    p.add_argument("config", help="circuit config (TOML) with a [placement] table")
    p.add_argument("--samples", type=int, help="Monte Carlo samples per candidate (overrides placement.samples)")
    p.add_argument("--seed", type=int, help="random seed (overrides analysis.seed)")
    p.add_argument("--jobs", type=int, help="worker processes (default: in-process below 200k samples)")
    p.add_argument("--json", action="store_true", help="print the comparison as JSON instead of a table")
    p.add_argument("--plot", metavar="FILE", help="also draw every pattern into FILE (.svg or .png)")
    p.set_defaults(execute=execute)


def _percent_or_si(value: float | None, unit: str) -> str:
    if value is None:
        return "-"
    if unit == "1":
        return f"{100.0 * value:+.4f} %"
    return f"{value:+.5g} {unit}"


def execute(args: argparse.Namespace) -> int:
    from mcmatch.config.analysis import Analysis, Placement
    from mcmatch.config.loading import load_config
    from mcmatch.results.folder import check_output_file
    from mcmatch.run.study import prepare
    from mcmatch.studies.extra import run_placements

    check_overrides(Placement, samples=args.samples)
    check_overrides(Analysis, seed=args.seed)
    check_jobs(args.jobs)
    if args.plot is not None:  # checked before the solves: a bad place must not cost the whole comparison
        check_output_file(args.plot, "--plot", (".svg", ".png"))
    config = load_config(args.config).with_analysis(seed=args.seed)
    if config.placement is None:
        raise ConfigError(
            "this config has no [placement] table; add one with pitch, devices and [[placement.candidate]] entries",
            file=config.path,
            key="placement",
        )

    class _Options:
        jobs = args.jobs
        backend = None

    study = prepare(config)
    entries, best = run_placements(config, study, _Options(), samples=args.samples)
    if args.plot:
        from mcmatch.report.figure_placement import placement_figure
        from mcmatch.results.atomic import atomic_file

        with atomic_file(args.plot, "wb") as handle:  # never half a drawing
            placement_figure(entries).savefig(handle, format=args.plot.rsplit(".", 1)[-1].lower())
    if args.json:
        json.dump({"placements": entries, "placement_best": best}, sys.stdout, indent=2, allow_nan=False)
        print()
        return 0
    print(f"{config.title}: {len(entries)} placement candidates")
    for entry in entries:
        print(f"\n  {entry['name']}   rows: {' / '.join(entry['rows'])}")
        for warning in entry["warnings"]:
            print(f"    warning: {warning}")
        if "error" in entry:
            print(f"    error: {entry['error']}")
            continue
        for name, m in entry["measures"].items():
            unit = config.measures[name].unit
            print(
                f"    {name:>16}: systematic {_percent_or_si(m['systematic'], unit):>14}  "
                f"mean {_percent_or_si(m['mean'], unit):>14}  sigma {_percent_or_si(m['std'], unit).lstrip('+'):>12}"
            )
        y = entry["yield"]
        print(
            f"    {'yield':>16}: {y['fraction']:.5f} (95 % CI {y['ci95'][0]:.5f} .. {y['ci95'][1]:.5f}, "
            f"{y['passed']}/{y['total']})"
        )
        paired = entry.get("versus_best")
        if paired and paired.get("difference") is not None:
            lo, hi = paired["ci95"]
            print(
                f"    {'vs ' + paired['best']:>16}: {100.0 * paired['difference']:+.3f} % yield "
                f"(paired, 95 % CI {100.0 * lo:+.3f} .. {100.0 * hi:+.3f} %; {paired['only_this']} samples pass "
                f"only here, {paired['only_other']} only there)"
            )
    print(f"\nbest: {best}" if best is not None else "\nbest: none (no candidate could be solved)")
    return 0
