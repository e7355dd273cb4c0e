"""The analyses beyond the main Monte Carlo run: yield extras, corners, area versus accuracy, mismatch contributions.

:func:`run_analyses` works from the main run's summary (measure statistics, yield counts) and its own solves; it
never reads the main run's sample rows. Each study below solves its conditions through :mod:`mcmatch.run` and
hands the tables to the matching :mod:`mcmatch.analysis` module.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from mcmatch.config.schema import Config
from mcmatch.errors import SolveError
from mcmatch.model.operating_point import device_operating_points
from mcmatch.model.sensitivity import measure_sensitivities, parameter_labels, parameter_sigmas
from mcmatch.run.study import Study, nominal_measures, prepare
from mcmatch.stats.area import (
    SEARCH_SPAN,
    fit_sigma,
    gate_area,
    halving_cost,
    mean_model,
    minimum_area,
    scaled_netlist,
)
from mcmatch.stats.compliance import compliance_of_columns
from mcmatch.stats.contributions import contribution_table
from mcmatch.stats.corners import corner_entry, corner_grid, error_entry, worst_corners
from mcmatch.stats.describe import describe
from mcmatch.stats.yields import joint_passes, passes, yield_block, yield_extras
from mcmatch.studies.condition import Options, condition_mc

#: Samples per area point when [analysis.area] gives none: the main run's count, capped at this.
AREA_DEFAULT_SAMPLES = 4000
#: ... and never fewer than this.
AREA_MIN_SAMPLES = 200
#: Random stream of the minimum-area confirmation run: independent of the sweep (which shares stream 0, the main
#: run's, across its points: common random numbers), so the confirmation is a fresh estimate.
CONFIRM_STREAM = 2


# --------------------------------------------------------------------------------------------- corners
def run_corners(config: Config, summary: dict, options: Options | None = None) -> tuple[list[dict], dict]:
    """Nominal solve and Monte Carlo at every grid point of [analysis.corners], common random numbers (one seed).

    Returns (summary["corners"], summary["corners_worst"]). A point without an operating point gets an "error".
    """
    samples = config.analysis.corners.samples
    entries: list[dict] = []
    guess = None
    for point in corner_grid(config):
        try:
            study = prepare(
                config, corner=point.process, temperature=point.temperature, supply=point.supply, guess=guess
            )
        except SolveError as exc:
            entries.append(error_entry(point, exc.message))
            continue
        guess = study.x_nominal
        columns = condition_mc(study, samples, options)
        entries.append(corner_entry(point, nominal_measures(study), columns, config.specs))
        entries[-1]["compliance"] = compliance_of_columns(device_operating_points(study.circuit, guess), columns)
    return entries, worst_corners(entries, summary["measures"], config.specs)


# --------------------------------------------------------------------------------------------- area
def _area_samples(config: Config) -> int:
    given = config.analysis.area.samples
    if given is not None:
        return given
    return max(AREA_MIN_SAMPLES, min(config.analysis.samples, AREA_DEFAULT_SAMPLES))


def _scaled_run(
    config: Config, scale: float, samples: int, options: Options | None, round_up: bool = False, stream: int = 0
) -> tuple[dict, dict[str, np.ndarray] | None]:
    """Solve one area point: returns its keys (scale, area, ...) and its columns (None on a failed nominal solve)."""
    spec = config.analysis.area
    netlist, actual = scaled_netlist(config.circuit, spec.devices, scale, spec.mode, round_up=round_up)
    keys = {
        "scale": float(f"{actual:.12g}"),
        "requested_scale": float(scale),
        "area": float(f"{gate_area(netlist, spec.devices):.12g}"),
    }
    try:
        study = prepare(config.with_circuit(netlist), stream=stream)
    except SolveError as exc:
        return {**keys, "error": exc.message}, None
    columns = condition_mc(study, samples, options)
    keys["nominal"] = nominal_measures(study)
    return keys, columns


def run_area(config: Config, options: Options | None = None) -> dict:
    """Sweep the gate area of [analysis.area]'s devices, fit sigma(area) per measure, solve and confirm the minimum
    area per spec, and the area cost of halving sigma. Returns summary["area"]."""
    spec = config.analysis.area
    target = config.analysis.target
    samples = _area_samples(config)
    base_area = gate_area(config.circuit, spec.devices)
    points: list[dict] = []
    for scale in spec.scale:
        keys, columns = _scaled_run(config, scale, samples, options)
        if columns is None:
            points.append(keys)
            continue
        nominal = keys.pop("nominal")
        measures = {}
        for name in config.measures:
            d = describe(columns[name], nominal[name])
            measures[name] = {"nominal": d["nominal"], "mean": d["mean"], "std": d["std"], "count": d["count"]}
        converged = np.asarray(columns["converged"], dtype=bool)
        joint = joint_passes(columns, config.specs)
        points.append(
            {
                **keys,
                "measures": measures,
                "yield": float(joint.mean()),
                "yield_ci95": yield_block(int(joint.sum()), int(joint.size))["ci95"],
                "samples": int(converged.size),
                "failed_solves": int((~converged).sum()),
            }
        )
    good = [p for p in points if "error" not in p]
    fits, minimum, halving = {}, {}, {}
    areas = np.array([p["area"] for p in good])
    for name in config.measures:
        stats = [p["measures"][name] for p in good]
        valid = [i for i, s in enumerate(stats) if s["std"] is not None]
        if len(valid) < 2:
            fits[name] = {"k": None, "floor": None, "note": "fewer than two area points with statistics"}
            continue
        fit = fit_sigma(
            areas[valid], np.array([stats[i]["std"] for i in valid]), np.array([stats[i]["count"] for i in valid])
        )
        fits[name] = fit.to_dict()
        if not fit.falls_with_area:
            fits[name]["flag"] = "sigma does not fall with area: mismatch of these devices does not set it"
        halving[name] = halving_cost(fit, base_area)
        if name not in config.specs:
            continue
        mean_at = mean_model(areas[valid], np.array([stats[i]["mean"] for i in valid]))
        found = minimum_area(
            fit,
            mean_at,
            config.specs[name],
            (float(areas.min()) / SEARCH_SPAN, float(areas.max()) * SEARCH_SPAN),
            target.yield_,
            target.k_sigma,
        )
        if found["area"] is None:
            minimum[name] = {"scale": None, **found}
            continue
        entry = {"scale": found["area"] / base_area, **found}
        if target.k_sigma is None:
            entry["target_yield"] = target.yield_
        else:
            entry["k_sigma"] = target.k_sigma
        entry["confirmed"] = _confirm(config, name, entry["scale"], samples, options)
        minimum[name] = entry
    return {
        "mode": spec.mode,
        "devices": list(spec.devices),
        "base_area": base_area,
        "samples": samples,
        "points": points,
        "fit": fits,
        "minimum": minimum,
        "halving_cost": halving,
    }


def _confirm(config: Config, name: str, scale: float, samples: int, options: Options | None) -> dict:
    """One Monte Carlo run at the minimum area (units mode rounds up): the measure's std and its spec yield."""
    keys, columns = _scaled_run(config, scale, samples, options, round_up=True, stream=CONFIRM_STREAM)
    if columns is None:
        return keys
    converged = np.asarray(columns["converged"], dtype=bool)
    ok = passes(columns[name], config.specs[name]) & converged
    block = yield_block(int(ok.sum()), int(converged.size))
    d = describe(columns[name], keys["nominal"][name])
    return {
        "scale": keys["scale"],
        "area": keys["area"],
        "mean": d["mean"],
        "std": d["std"],
        "yield": block["fraction"],
        "ci95": block["ci95"],
        "samples": int(converged.size),
        "failed_solves": int((~converged).sum()),
        "random_stream": CONFIRM_STREAM,
    }


# --------------------------------------------------------------------------------------------- contributions
def run_contributions(study: Study, summary: dict) -> dict:
    """Linearised mismatch contributions at the main run's nominal point, beside the Monte Carlo std."""
    circuit = study.circuit
    gradients = measure_sensitivities(circuit, study.measures, study.x_nominal)
    labels = parameter_labels(circuit)
    sigmas = parameter_sigmas(circuit)
    out = {}
    for name in study.measures:
        stats = summary["measures"].get(name, {})
        out[name] = contribution_table(gradients[name], sigmas, labels, stats.get("std"), stats.get("count"))
    return out


# --------------------------------------------------------------------------------------------- all
def run_analyses(config: Config, study: Study, summary: dict, options: Any = None) -> dict:
    """The summary keys the analyses add: "yield" (the main yield with extras merged in), "corners",
    "corners_worst", "area" and "contributions" (each only when configured)."""
    target = config.analysis.target
    out: dict = {
        "yield": yield_extras(summary["yield"], summary["measures"], config.specs, target.yield_, target.confidence)
    }
    if config.analysis.corners is not None:
        out["corners"], out["corners_worst"] = run_corners(config, summary, options)
    if config.analysis.area is not None:
        out["area"] = run_area(config, options)
    if config.analysis.contributions:
        out["contributions"] = run_contributions(study, summary)
    if config.analysis.sizing is not None:
        from mcmatch.studies.sizing import run_sizing  # local: only a config with [analysis.sizing] needs it

        out["sizing"] = run_sizing(config, options)
    return out
