"""Studies beyond the main run: placement patterns under gradients, high-sigma yield, bank (die) yield.

:func:`run_extra_analyses` adds the summary keys ``placements`` and ``placement_best`` (when the config has a
``[placement]`` table), ``high_sigma`` (with ``[analysis.high_sigma]`` and specs) and ``bank`` (with
``[analysis.bank]``, or when two or more spec'd ratio measures share one reference). Each study makes its own solves
through :mod:`mcmatch.run.study` and never reads the main run's sample rows; the arithmetic lives in
:mod:`mcmatch.draws.placement`, :mod:`mcmatch.stats.high_sigma` and :mod:`mcmatch.stats.bank`.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

import numpy as np

from mcmatch.config.schema import Config
from mcmatch.draws.mismatch import BLOCK, mismatch_from_normals, standard_normals
from mcmatch.draws.placement import (
    centroid_array,
    count_warnings,
    device_shifts,
    distance_terms,
    pick_best,
    shift_arrays,
)
from mcmatch.draws.process import deviations_from_normals, normal_dims, normal_gradient, with_process
from mcmatch.errors import SolveError
from mcmatch.model.sensitivity import measure_sensitivities, parameter_sigmas
from mcmatch.run.study import Study, nominal_measures, nominal_point, solve_samples
from mcmatch.stats import high_sigma as hs
from mcmatch.stats.bank import bank_yield, channel_passes, mean_correlation
from mcmatch.stats.describe import describe
from mcmatch.stats.distributions import normal_sf
from mcmatch.stats.yields import joint_passes, paired_difference, yield_block
from mcmatch.studies.condition import condition_mc

#: Random stream of the per-die gradient draws of Pelgrom's distance term (device draws keep the main stream).
PLACEMENT_STREAM = 8
#: Random stream of the importance-sampling draws.
HIGH_SIGMA_STREAM = 7
#: Samples per placement candidate when [placement] gives none: the main run's count, capped at this.
PLACEMENT_DEFAULT_SAMPLES = 20_000
#: Samples of the bank run when [analysis.bank] gives none: the main run's count, capped at this.
BANK_DEFAULT_SAMPLES = 200_000


def _finite(value: float | None) -> float | None:
    """A float for JSON, or None for a missing or non-finite value."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


# --------------------------------------------------------------------------------------------- placements
def placement_samples(config: Config) -> int:
    given = config.placement.samples if config.placement is not None else None
    return given if given is not None else min(config.analysis.samples, PLACEMENT_DEFAULT_SAMPLES)


def _placement_mc(
    study: Study, samples: int, centroids: np.ndarray, placed: np.ndarray, s_vt: float, s_beta: float, options: Any
) -> dict[str, np.ndarray]:
    """Monte Carlo of one candidate: the main run's device draws plus, if configured, the random die gradient."""
    if s_vt == 0.0 and s_beta == 0.0:
        return condition_mc(study, samples, options)
    params = study.circuit.params
    parts = []
    for start in range(0, samples, BLOCK):
        stop = min(samples, start + BLOCK)
        z = standard_normals(study.seed, start, stop, 2 * params.count, study.stream, study.sampling)
        dvth, dbeta = mismatch_from_normals(params, z)
        dvth, dbeta = with_process(study.variation, study.seed, start, dvth, dbeta, study.stream, study.sampling)
        g = standard_normals(study.seed, start, stop, 4, PLACEMENT_STREAM)
        extra_vth, extra_beta = distance_terms(centroids, placed, g, s_vt, s_beta)
        parts.append(solve_samples(study, dvth + extra_vth, dbeta + extra_beta))
    return {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}


def run_placements(
    config: Config, study: Study, options: Any = None, samples: int | None = None
) -> tuple[list[dict], str | None]:
    """Every [placement] candidate: systematic shifts, nominal with gradients, Monte Carlo, yield.

    Returns (summary["placements"], summary["placement_best"]). The systematic error of a measure is its nominal value
    with the candidate's gradients minus its nominal value without them [SI]. Device draws use the main run's seed and
    stream, so the candidates differ only by their placement (common random numbers).
    """
    placement = config.placement
    samples = placement_samples(config) if samples is None else samples
    base = nominal_measures(study)
    names = study.device_names
    units = {m.name: m.m for m in config.circuit.mosfet}
    entries = []
    joints: dict[str, np.ndarray] = {}
    for candidate in placement.candidate:
        shifts = device_shifts(candidate.rows, placement)
        vth, scale = shift_arrays(shifts, names)
        circuit = study.circuit.with_params(study.circuit.params.with_shift(vth, scale))
        entry: dict = {
            "name": candidate.name,
            "rows": list(candidate.rows),
            "centroids": {n: list(c) for n, c in shifts.centroids.items()},
            "cells": dict(shifts.cells),
            "shifts": {n: {"vth": shifts.vth[n], "beta": shifts.beta[n]} for n in shifts.cells},
            "warnings": count_warnings(shifts, units),
            "layout": {
                "pitch": list(placement.pitch),
                "letters": dict(placement.devices),
                "dummy": placement.dummy,
                "origin": placement.origin,
            },
        }
        try:
            x0 = nominal_point(circuit, study.x_nominal)
        except SolveError as exc:
            entry["error"] = f"no operating point with this pattern's gradients: {exc.message}"
            entries.append(entry)
            continue
        cstudy = replace(study, circuit=circuit, x_nominal=x0)
        nominal = nominal_measures(cstudy)
        centroids, placed = centroid_array(shifts, names)
        columns = _placement_mc(cstudy, samples, centroids, placed, placement.s_vt, placement.s_beta, options)
        measures = {}
        for name in config.measures:
            d = describe(columns[name], nominal[name])
            measures[name] = {
                "nominal": _finite(d["nominal"]),
                "mean": _finite(d["mean"]),
                "std": _finite(d["std"]),
                "systematic": _finite(nominal[name] - base[name]),
                "count": d["count"],
            }
        converged = np.asarray(columns["converged"], dtype=bool)
        joint = joint_passes(columns, config.specs)
        entry["measures"] = measures
        entry["yield"] = yield_block(int(joint.sum()), int(converged.size))
        entry["samples"] = int(converged.size)
        entry["failed_solves"] = int((~converged).sum())
        entries.append(entry)
        joints[candidate.name] = joint
    first = next(iter(config.specs), None) or next(iter(config.measures), None)
    best = pick_best(entries, first)
    for entry in entries:  # common random numbers: the difference to the best is paired, sample by sample
        if best is not None and entry["name"] != best and entry["name"] in joints:
            paired = paired_difference(joints[entry["name"]], joints[best])
            entry["versus_best"] = {"best": best, **paired}
    return entries, best


# --------------------------------------------------------------------------------------------- high sigma
def _evaluator(study: Study, name: str) -> hs.Evaluate:
    """Solve the measure `name` at standard-normal mismatch points z (S, 2 n_devices)."""
    one = replace(study, measures={name: study.measures[name]})
    params = study.circuit.params

    def evaluate(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        values, converged = [], []
        for start in range(0, len(z), BLOCK):
            dvth, dbeta = deviations_from_normals(params, study.variation, z[start : start + BLOCK])
            out = solve_samples(one, dvth, dbeta)
            values.append(out[name])
            converged.append(out["converged"])
        return np.concatenate(values), np.concatenate(converged)

    return evaluate


def high_sigma_measure(study: Study, name: str, limits, samples: int, gradient: np.ndarray | None) -> dict:
    """Importance-sampling estimate of the failure probability of one spec'd measure (both sides together)."""
    evaluate = _evaluator(study, name)
    nominal = nominal_measures(replace(study, measures={name: study.measures[name]}))[name]
    dims = normal_dims(study.circuit.params.count, study.variation)
    notes = []
    sides = []
    for side in ("min", "max"):
        limit = getattr(limits, side)
        if limit is None:
            continue
        if gradient is None:
            beta, u = float("inf"), np.zeros(dims)
            notes.append("the measure could not be linearised at the nominal point; sampling is not shifted")
        else:
            beta, u = hs.linear_design_point(nominal, gradient, side, limit)
        if not math.isfinite(beta) or beta <= 0.0:
            if math.isfinite(beta):
                notes.append(f"the nominal value already fails the {side} limit; that side is sampled unshifted")
            sides.append(hs.Side(side, limit, beta, np.zeros(dims), False))
            continue
        t, found = hs.boundary_along(evaluate, u, side, limit, beta)
        if not found:
            notes.append(
                f"no failure of the {side} limit found along the linearised direction up to {hs.SEARCH_LIMIT:g} "
                "sigma; shifted to the linear estimate"
            )
        sides.append(hs.Side(side, limit, beta, t * u, found))
    shifts = np.array([s.shift for s in sides])
    normals = standard_normals(study.seed, 0, samples, dims, HIGH_SIGMA_STREAM)
    z, fractions = hs.shifted_draws(normals, shifts)
    weights = np.exp(hs.mixture_log_weights(z, shifts, fractions))
    values, converged = evaluate(z)
    failed = hs.fails(values, converged, limits.min, limits.max)
    result = hs.estimate(weights, failed)
    linear = [normal_sf(s.linear_beta) for s in sides if not math.isnan(s.linear_beta)]
    out = {
        "fail_probability": result["fail_probability"],
        "ci95": result["ci95"],
        "effective_samples": result["effective_samples"],
        "sigma_level": result["sigma_level"],
        "samples": int(samples),
        "shift": float(min(np.linalg.norm(s.shift) for s in sides)),
        "method": "importance",
        "std_error": result["std_error"],
        "failures": result["failures"],
        "failed_solves": int((~np.asarray(converged, dtype=bool)).sum()),
        "weight_kish": result["weight_kish"],
        "linear_estimate": _finite(min(1.0, float(sum(linear)))) if linear else None,
        "nominal": _finite(nominal),
        "sides": [
            {
                "side": s.side,
                "limit": s.limit,
                "linear_beta": _finite(s.linear_beta),
                "shift": float(np.linalg.norm(s.shift)),
                "boundary_found": s.boundary_found,
            }
            for s in sides
        ],
        "failed_solves_count_as": "failures (conservative)",
    }
    for key in ("sigma_level_at_least", "note"):
        if key in result:
            out[key] = result[key]
    if notes:
        out["notes"] = notes
    return out


def run_high_sigma(config: Config, study: Study) -> dict:
    """summary["high_sigma"]: {measure: importance-sampling block} for the spec'd measures of [analysis.high_sigma]."""
    spec = config.analysis.high_sigma
    names = spec.measures or list(config.specs)
    gradients = measure_sensitivities(study.circuit, {n: study.measures[n] for n in names}, study.x_nominal)
    sigmas = parameter_sigmas(study.circuit)
    out = {}
    for name in names:
        g = gradients.get(name)
        gradient_z = None if g is None else normal_gradient(g, sigmas, study.variation)
        out[name] = high_sigma_measure(study, name, config.specs[name], spec.samples, gradient_z)
    return out


# --------------------------------------------------------------------------------------------- bank
def bank_channels(config: Config) -> list[str] | None:
    """The bank's channel measures: [analysis.bank] measures (default every spec'd measure) or, without that table,
    the spec'd ratio measures sharing the most common reference (denominator) when there are at least two."""
    spec = config.analysis.bank
    if spec is not None:
        return list(spec.measures or config.specs)
    groups: dict[str, list[str]] = {}
    for name in config.specs:
        measure = config.measures[name]
        if measure.ratio is not None:
            groups.setdefault(measure.ratio[1], []).append(name)
    best = max(groups.values(), key=len, default=[])
    return best if len(best) >= 2 else None


def run_bank(config: Config, study: Study, options: Any = None) -> dict | None:
    """summary["bank"]: joint (die) yield of the bank's channels from its own Monte Carlo run, or None if no bank."""
    channels = bank_channels(config)
    if not channels:
        return None
    spec = config.analysis.bank
    given = spec.samples if spec is not None else None
    samples = given if given is not None else min(config.analysis.samples, BANK_DEFAULT_SAMPLES)
    columns = condition_mc(study, samples, options)
    passed = channel_passes(columns, channels, config.specs)
    out = bank_yield(passed, channels)
    out["mean_correlation"] = mean_correlation(columns, channels)
    out["failed_solves"] = int((~np.asarray(columns["converged"], dtype=bool)).sum())
    out["detected"] = "configured" if spec is not None else "spec'd ratio measures sharing one reference"
    return out


# --------------------------------------------------------------------------------------------- all
def run_extra_analyses(config: Config, study: Study, summary: dict, options: Any = None) -> dict:
    """The summary keys these studies add, each only when configured: "placements", "placement_best",
    "high_sigma", "bank". `summary` is the main run's summary (read only). The measure names these studies use
    were checked when the config was read (config.check_spec_references)."""
    out: dict = {}
    if config.placement is not None:
        out["placements"], out["placement_best"] = run_placements(config, study, options)
    if config.analysis.high_sigma is not None and config.specs:
        out["high_sigma"] = run_high_sigma(config, study)
    bank = run_bank(config, study, options)
    if bank is not None:
        out["bank"] = bank
    return out
