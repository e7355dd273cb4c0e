"""`mcmatch size CONFIG`: the W and L of [analysis.sizing]'s device groups for the target, in a run folder."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from mcmatch.cli import run
from mcmatch.errors import ConfigError


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = run.add_parser(
        sub,
        name="size",
        help="size the unit W and L of device groups for the joint-yield target under a headroom limit "
        "([analysis.sizing]); writes a run folder like 'run', the sizing in summary.json and the report",
    )
    p.set_defaults(execute=execute)


def execute(args: argparse.Namespace) -> int:
    from mcmatch.config.loading import load_config

    config = load_config(args.config)
    if config.analysis.sizing is None:
        raise ConfigError(
            "'mcmatch size' needs an [analysis.sizing] table: w = [min, max], l = [min, max], and optionally "
            "groups, min_headroom, max_area",
            file=args.config,
            key="analysis.sizing",
        )
    status = run.execute(args)
    if status == 0 and not args.quiet:
        summary = json.loads((Path(args.written) / "summary.json").read_text(encoding="utf-8"))
        for line in describe(summary["sizing"]):
            print(line)
    return status


def _um(value: float) -> str:
    return f"{value * 1e6:.4g} um"


def describe(sizing: dict) -> list[str]:
    """Console lines: the chosen W and L per group, area, headroom and the confirming Monte Carlo."""
    if "chosen" not in sizing:
        return [f"  sizing: no design meets the target: {sizing.get('infeasible', 'unknown reason')}"]
    d = sizing["designs"][sizing["chosen"]["index"]]
    c = sizing["chosen"]["confirmed"]
    groups = "; ".join(f"{g}: W = {_um(s['w'])}, L = {_um(s['l'])}" for g, s in d["groups"].items())
    return [
        f"  sizing: {groups}; total gate area {d['area'] * 1e12:,.0f} um^2 ({len(sizing['designs'])} designs, "
        f"{len(sizing['pareto'])} on the front)",
        f"  headroom {d['min_headroom'] * 1e3:.1f} mV at {d['headroom_corner']} ({d['limiting_device']}); "
        f"linear die yield {d['linear_yield']:.5f} at {d['linear_yield_corner']}",
        f"  confirmed at {c['corner']}: yield {c['yield']:.5f} (95 % CI {c['ci95'][0]:.5f} .. {c['ci95'][1]:.5f}), "
        f"{c['samples']} samples, {sizing['chosen']['confirmations']} confirmation(s)",
    ]
