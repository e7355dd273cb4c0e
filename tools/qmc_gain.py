"""Measure what Sobol' quasi-Monte Carlo buys over plain Monte Carlo on the bundled configs (docs/qmc.md table).

For each config and sample count N, the main Monte Carlo run (no corners, area or other analyses) is repeated with
`repeats` independent seeds, once with ``sampling = "random"`` and once with ``sampling = "sobol"``. Reported per
method: the average sigma of the main measure (the first spec'd one) and joint yield, their standard error as the
run itself estimates it (summary["sampling"]: plain Monte Carlo formulas, or the spread over the scramblings), and
the spread actually seen over the seeds. The sample ratio is (plain MC error / QMC error)^2 at equal N: how many
plain Monte Carlo samples give the precision of one QMC sample.

    python tools/qmc_gain.py configs/demo.toml configs/lowvoltage_cascode.toml --samples 4096 16384 --repeats 8
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

from mcmatch.config.loading import load_config
from mcmatch.config.schema import Config
from mcmatch.run.study import nominal_measures, prepare
from mcmatch.stats.streaming import sampling_summary
from mcmatch.studies.pipeline import RunOptions, stream_statistics


def one_run(config: Config, samples: int, seed: int, sampling: str) -> dict:
    """summary["sampling"] of the main run alone."""
    config = config.with_analysis(samples=samples, seed=seed, sampling=sampling, keep_samples=0)
    study = prepare(config)
    stats, _ = stream_statistics(study, config, nominal_measures(study), RunOptions(jobs=1, keep_samples=0))
    return sampling_summary(stats, sampling)


def spread(values: list[float]) -> float:
    return float(np.std(values, ddof=1)) if len(values) > 1 else math.nan


def measure(path: str, samples: int, repeats: int, first_seed: int = 100) -> dict:
    config = load_config(path)
    name = next(iter(config.specs), None) or next(iter(config.measures))
    study = prepare(config)
    out: dict = {"config": path, "measure": name, "samples": samples, "devices": len(study.device_names)}
    for sampling in ("random", "sobol"):
        started = time.perf_counter()
        runs = [one_run(config, samples, first_seed + k, sampling) for k in range(repeats)]
        out[sampling] = {
            "seconds_per_run": (time.perf_counter() - started) / repeats,
            "sigma": float(np.mean([r["measures"][name]["std"] for r in runs])),
            "sigma_se_estimated": float(np.sqrt(np.mean([r["measures"][name]["std_error"] ** 2 for r in runs]))),
            "sigma_se_seen": spread([r["measures"][name]["std"] for r in runs]),
            "yield": float(np.mean([r["yield"]["fraction"] for r in runs])),
            "yield_se_estimated": float(np.sqrt(np.mean([r["yield"]["std_error"] ** 2 for r in runs]))),
            "yield_se_seen": spread([r["yield"]["fraction"] for r in runs]),
        }
    r, s = out["random"], out["sobol"]
    out["sigma_ratio_estimated"] = (r["sigma_se_estimated"] / s["sigma_se_estimated"]) ** 2
    out["sigma_ratio_seen"] = (r["sigma_se_seen"] / s["sigma_se_seen"]) ** 2
    out["yield_ratio_estimated"] = (r["yield_se_estimated"] / s["yield_se_estimated"]) ** 2
    out["yield_ratio_seen"] = (r["yield_se_seen"] / s["yield_se_seen"]) ** 2
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("configs", nargs="+")
    parser.add_argument("--samples", type=int, nargs="+", default=[4096, 16384])
    parser.add_argument("--repeats", type=int, default=8, help="independent seeds per method")
    args = parser.parse_args()
    print(
        "| config | devices | N | sigma | s.e. MC (est / seen) | s.e. QMC (est / seen) | ratio (est / seen) "
        "| yield | failing/run | s.e. MC (est / seen) | s.e. QMC (est / seen) | ratio (est / seen) |"
    )
    print("|" + "---|" * 13)
    for path in args.configs:
        for n in args.samples:
            m = measure(path, n, args.repeats)
            r, s = m["random"], m["sobol"]
            print(
                f"| {path} ({m['measure']}) | {m['devices']} | {n} | {s['sigma']:.5g} "
                f"| {r['sigma_se_estimated']:.2g} / {r['sigma_se_seen']:.2g} "
                f"| {s['sigma_se_estimated']:.2g} / {s['sigma_se_seen']:.2g} "
                f"| {m['sigma_ratio_estimated']:.3g} / {m['sigma_ratio_seen']:.3g} "
                f"| {s['yield']:.5f} | {n * (1 - s['yield']):.3g} "
                f"| {r['yield_se_estimated']:.2g} / {r['yield_se_seen']:.2g} "
                f"| {s['yield_se_estimated']:.2g} / {s['yield_se_seen']:.2g} "
                f"| {m['yield_ratio_estimated']:.3g} / {m['yield_ratio_seen']:.3g} |",
                flush=True,
            )


if __name__ == "__main__":
    main()
