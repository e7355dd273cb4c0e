"""summary["variation"]: the local (mismatch) and global (process) parts of each measure's spread, linearised.

With g the measure's sensitivities along the parameter axis (every device's vth [unit/V], then dbeta/beta [unit]) at
the nominal point (:func:`mcmatch.model.sensitivity.measure_sensitivities`, implicit function theorem):
var_local = sum_i (g_i sigma_i)^2 over the independent single-device Pelgrom sigmas (Pelgrom 1989), and
var_global = g^T C g with C = A A^T the covariance of the global shifts (:mod:`mcmatch.draws.process`): every device
of a polarity moves alike, so this is the per-polarity summed sensitivities weighted by the technology's sigmas and
polarity correlation. The parts the run's mode leaves out are 0; std_total = sqrt(var_local + var_global).
"""

from __future__ import annotations

import math

import numpy as np

from mcmatch.config.schema import Config
from mcmatch.draws.process import PROCESS_STREAM
from mcmatch.model.sensitivity import measure_sensitivities, parameter_sigmas
from mcmatch.run.study import Study

METHOD_NOTE = (
    "first order at the nominal point: var_local = sum_i (dm/dp_i sigma_i)^2 over the per-device Pelgrom "
    "deviations, var_global = g^T C g with g the sensitivities summed per polarity and C from the technology's "
    "vth_sigma, kprime_sigma and polarity_correlation"
)


def variation_parts(gradient: np.ndarray, sigmas: np.ndarray, loading: np.ndarray, local: bool) -> dict[str, float]:
    """std_local, std_global, std_total [unit] of a measure with sensitivities `gradient` (2 n_devices,), local
    sigmas `sigmas` (2 n_devices,) and global loading (2 n_devices, 4); the local part is 0 unless `local`."""
    g = np.asarray(gradient, dtype=float)
    var_local = float(np.sum((g * sigmas) ** 2)) if local else 0.0
    var_global = float(np.sum((g @ loading) ** 2))
    return {
        "std_local": math.sqrt(var_local),
        "std_global": math.sqrt(var_global),
        "std_total": math.sqrt(var_local + var_global),
    }


def run_variation(config: Config, study: Study, summary: dict) -> dict:
    """{"variation": ...} for a run with a global spread (variation "global" or "both"); {} for "local"."""
    spread = study.variation
    if spread is None:
        return {}
    gradients = measure_sensitivities(study.circuit, study.measures, study.x_nominal)
    sigmas = parameter_sigmas(study.circuit)
    measures: dict[str, dict] = {}
    for name in study.measures:
        gradient = gradients.get(name)
        if gradient is None:
            measures[name] = {"std_local": None, "std_global": None, "std_total": None, "note": "not linearised"}
        else:
            measures[name] = variation_parts(gradient, sigmas, spread.loading, spread.local)
        measures[name]["mc_std"] = summary["measures"].get(name, {}).get("std")
    stats = config.technology.statistics
    return {
        "variation": {
            "mode": spread.mode,
            "method": "linearised",
            "method_note": METHOD_NOTE,
            "statistics": stats.model_dump() if stats is not None else None,
            "random_stream": PROCESS_STREAM + study.stream,
            "measures": measures,
        }
    }
