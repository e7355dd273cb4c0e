"""`mcmatch bench`: engine speed against per-sample scipy.optimize.root loops, with agreement checks; latency."""

from __future__ import annotations

import argparse
import json
import statistics
import sys

from mcmatch.run.bench import CIRCUITS, LATENCY_RUNS, POLARITIES, REFERENCE_SAMPLES, TOLERANCE


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "bench",
        help="time the batched engine against per-sample scipy.optimize.root loops on the same circuit and samples, "
        "and the latency of fresh processes",
        description="Times the batched engine (warm, one process) against scipy.optimize.root one sample at a time, "
        "on the residual a designer would write for that circuit (the speed-up) and on the general MNA residual "
        "(second column); both must agree with the engine to 1e-9 relative. Then the median wall time of fresh "
        "processes: 'mcmatch --version' and a whole 'mcmatch run configs/demo.toml --quiet'. With --scaling, the "
        "main Monte Carlo on one worker against all cores, paired in the same run, with the same numbers required.",
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
    p.add_argument(
        "--latency-runs",
        type=int,
        default=LATENCY_RUNS,
        metavar="N",
        help=f"fresh processes timed per latency figure, median reported (default: {LATENCY_RUNS})",
    )
    p.add_argument("--no-latency", action="store_true", help="skip the end-to-end latency figures")
    p.add_argument(
        "--scaling",
        type=int,
        default=0,
        metavar="ROUNDS",
        help="also time the main Monte Carlo of --samples samples (as 'mcmatch run' does it) on one worker and on all "
        "cores, ROUNDS pairs alternated in this process, and report the median ratio (use --samples 20000000; "
        "default 0: skip)",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    p.set_defaults(execute=execute)


def execute(args: argparse.Namespace) -> int:
    from mcmatch.cli.options import check_overrides
    from mcmatch.config.analysis import Analysis
    from mcmatch.errors import ConfigError
    from mcmatch.run.bench import DEMO_CONFIG, run_bench

    check_overrides(Analysis, samples=args.samples)
    if args.scaling < 0:
        raise ConfigError(f"expected an integer >= 0, got {args.scaling}", file="command line", key="--scaling")
    for name in ("samples", "reference_samples", "repeats", "latency_runs"):
        value = getattr(args, name)
        if value < 1:
            flag = "--" + name.replace("_", "-")
            raise ConfigError(f"expected an integer >= 1, got {value}", file="command line", key=flag)
    latency_runs = 0 if args.no_latency else args.latency_runs
    if latency_runs and not DEMO_CONFIG.is_file():
        raise ConfigError(
            f"the demo config {DEMO_CONFIG} is not there (an installed package); add --no-latency",
            file="command line",
            key="--latency-runs",
        )
    result = run_bench(
        args.circuit, args.samples, args.polarity, args.reference_samples, args.repeats, latency_runs=latency_runs
    )
    scaling = None
    if args.scaling:
        from mcmatch.run.bench import bench_config
        from mcmatch.studies.scaling import monte_carlo_scaling

        scaling = monte_carlo_scaling(bench_config(args.circuit, args.polarity, args.samples), args.scaling)
    d = {**result.as_dict(), "scaling": scaling}
    if args.json:
        print(json.dumps(d, allow_nan=False))
    else:
        print(f"mcmatch bench: {d['circuit']} mirror ({d['polarity']}), {d['samples']} samples, warm, one process")
        print(f"  engine     {d['engine_samples_per_s']:14,.0f} samples/s  ({d['engine_seconds']:.3f} s)")
        n_ref = d["reference_samples"]
        print(f"  reference (scipy.optimize.root per sample, {n_ref} samples, analytic Jacobians):")
        print(
            f"    circuit KCL residual {d['reference_samples_per_s']:12,.0f} samples/s   speed-up "
            f"{d['speedup']:10,.0f} x   max rel. diff {d['max_rel_diff_circuit']:.2e}"
        )
        print(
            f"    general MNA residual {d['reference_mna_samples_per_s']:12,.0f} samples/s   speed-up "
            f"{d['speedup_mna']:10,.0f} x   max rel. diff {d['max_rel_diff_mna']:.2e}"
        )
        print(f"  agreement  required <= {TOLERANCE:g} relative for both: {'yes' if d['agree'] else 'NO'}")
        print(f"  peak RSS   {d['peak_rss_bytes'] / 2**20:10.0f} MiB; failed solves {d['failed_solves']}")
        if d["latency"] is not None:
            lat = d["latency"]
            print(f"  latency    fresh processes, median of {lat['runs']}:")
            print(f"    mcmatch --version                 {lat['version_s']:8.2f} s")
            print(f"    mcmatch run demo.toml --quiet      {lat['demo_run_s']:8.2f} s  (summary, samples, report)")
        if args.scaling:
            _print_scaling(scaling)
    if scaling is not None and not scaling["same_numbers"]:
        print("mcmatch: error: one worker and the pool gave different statistics", file=sys.stderr)
        return 1
    if not result.agree:
        print(
            f"mcmatch: error: engine and reference disagree (max relative difference {result.max_rel_diff:.3g}, "
            f"{result.reference_failures} reference failures)",
            file=sys.stderr,
        )
        return 1
    return 0


def _print_scaling(scaling: dict | None) -> None:
    """The two-core lines of the table."""
    if scaling is None:
        print("  two cores  this machine gives the command one core: nothing to compare")
        return
    lo, hi = min(scaling["ratios"]), max(scaling["ratios"])
    print(
        f"  two cores  main Monte Carlo as 'mcmatch run' does it, {scaling['samples']} samples, warm, "
        f"{scaling['rounds']} pairs alternated:"
    )
    print(
        f"    1 worker {statistics.median(scaling['one_worker_s']):8.2f} s ({scaling['one_worker_samples_per_s']:.3g} "
        f"samples/s)   {scaling['workers']} workers {statistics.median(scaling['workers_s']):6.2f} s "
        f"({scaling['workers_samples_per_s']:.3g} samples/s)   ratio {scaling['ratio']:.2f}x ({lo:.2f}-{hi:.2f}); "
        f"same numbers: {'yes' if scaling['same_numbers'] else 'NO'}"
    )
