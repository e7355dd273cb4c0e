"""`mcmatch bench`: engine speed against a per-sample scipy.optimize.root loop, with an agreement check."""

from __future__ import annotations

import argparse
import json

from mcmatch.run.bench import CIRCUITS, POLARITIES, REFERENCE_SAMPLES, TOLERANCE, run_bench


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "bench",
        help="time the batched engine against a per-sample scipy.optimize.root loop on the same circuit and samples",
    )
    p.add_argument("--circuit", choices=CIRCUITS, default="simple", help="bench circuit (default: simple)")
    p.add_argument("--polarity", choices=POLARITIES, default="nmos", help="device polarity (default: nmos)")
    p.add_argument("--samples", type=int, default=1_000_000, help="engine samples (default: 1000000)")
    p.add_argument(
        "--reference-samples",
        type=int,
        default=REFERENCE_SAMPLES,
        help=f"samples solved by the scipy reference, cost extrapolated (default: {REFERENCE_SAMPLES})",
    )
    p.add_argument("--repeats", type=int, default=1, help="timed engine passes, best one reported (default: 1)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    p.set_defaults(execute=execute)


def execute(args: argparse.Namespace) -> int:
    from mcmatch.cli.options import check_overrides
    from mcmatch.config.schema import Analysis
    from mcmatch.errors import ConfigError

    check_overrides(Analysis, samples=args.samples)
    for name in ("samples", "reference_samples", "repeats"):
        value = getattr(args, name)
        if value < 1:
            flag = "--" + name.replace("_", "-")
            raise ConfigError(f"expected an integer >= 1, got {value}", file="command line", key=flag)
    result = run_bench(args.circuit, args.samples, args.polarity, args.reference_samples, args.repeats)
    if args.json:
        print(json.dumps(result.as_dict(), allow_nan=False))
    else:
        d = result.as_dict()
        print(f"mcmatch bench: {d['circuit']} mirror ({d['polarity']}), {d['samples']} samples, warm, one process")
        print(f"  engine     {d['engine_samples_per_s']:14,.0f} samples/s  ({d['engine_seconds']:.3f} s)")
        print(
            f"  reference  {d['reference_samples_per_s']:14,.0f} samples/s  "
            f"(scipy.optimize.root per sample, {d['reference_samples']} samples)"
        )
        print(f"  speed-up   {d['speedup']:14,.0f} x")
        print(f"  agreement  max relative difference {d['max_rel_diff']:.2e} (required <= {TOLERANCE:g})")
        print(f"  peak RSS   {d['peak_rss_bytes'] / 2**20:10.0f} MiB; failed solves {d['failed_solves']}")
    if not result.agree:
        import sys

        print(
            f"mcmatch: error: engine and reference disagree (max relative difference {result.max_rel_diff:.3g}, "
            f"{result.reference_failures} reference failures)",
            file=sys.stderr,
        )
        return 1
    return 0
