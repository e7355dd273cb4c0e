"""Speed check: the batched engine against a per-sample ``scipy.optimize.root`` loop on the same equations.

Both solve the full MNA equations of :func:`mcmatch.model.circuit.residual_jacobian` (the engine through its reduced
fast path, the reference through scipy's hybrid method with the analytic Jacobian, one sample at a time, from the
nominal point). The reference runs on a subset of the samples and its per-sample cost is extrapolated; the engine runs
all of them, warm (one untimed pass first), with sampling and the small-signal resistance included. The circuits are
explicit netlists on a bundled, invented technology: illustrative values, no foundry's data.
"""

from __future__ import annotations

import resource
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import optimize

from mcmatch.config.loading import config_from_dict
from mcmatch.config.schema import Config
from mcmatch.draws.mismatch import mismatch_from_normals, perturbed, standard_normals
from mcmatch.model.circuit import residual_jacobian
from mcmatch.run.chunks import chunk_ranges, run_chunk
from mcmatch.run.study import Study, prepare, solve_unknowns
from mcmatch.solve.measures import mna_measures

#: Illustrative 180 nm-class technology, INVENTED VALUES (same spirit as configs/technologies/demo180.toml).
TECHNOLOGY: dict = {
    "name": "Illustrative 180 nm-class process for mcmatch bench (invented values)",
    "nominal_temperature": "27 degC",
    "nmos": {
        "model": "square-law",
        "kprime": "300 uA/V^2",
        "vth0": "0.45 V",
        "lambda_l": "0.08 um/V",
        "gamma": "0.45 V^0.5",
        "phi": "0.85 V",
        "a_vt": "4.5 mV*um",
        "a_beta": "1 %*um",
    },
    "pmos": {
        "model": "square-law",
        "kprime": "70 uA/V^2",
        "vth0": "0.48 V",
        "lambda_l": "0.10 um/V",
        "gamma": "0.40 V^0.5",
        "phi": "0.80 V",
        "a_vt": "5.0 mV*um",
        "a_beta": "1.1 %*um",
    },
}

CIRCUITS = ("simple", "cascode", "bank")
POLARITIES = ("nmos", "pmos")
#: Channels of the multi-output bank.
BANK_CHANNELS = 8
#: Samples solved by the scipy reference (its cost per sample is extrapolated from these).
REFERENCE_SAMPLES = 2000
#: Agreement required between the engine and the reference, relative.
TOLERANCE = 1e-9


def _mos(name: str, kind: str, drain: str, gate: str, source: str, m: int = 1, bulk: str | None = None) -> dict:
    width = "4 um" if kind == "nmos" else "16 um"  # pmos k' is about 4x lower: 4x wider for the same overdrive
    device = {"name": name, "type": kind, "drain": drain, "gate": gate, "source": source, "w": width, "l": "2 um"}
    device["m"] = m
    if bulk is not None:
        device["bulk"] = bulk
    return device


def _netlist(circuit: str, kind: str) -> tuple[dict, dict]:
    """Netlist and measures of a bench circuit; pmos is the mirror image hanging from vdd."""
    n = kind == "nmos"
    rail = "gnd" if n else "vdd"  # the sources' rail
    other = "vdd" if n else "gnd"
    out_v = "0.9 V"
    iref = {"name": "IREF", "from": other, "to": "nb", "value": "10 uA"} if n else None
    if not n:
        iref = {"name": "IREF", "from": "nb", "to": other, "value": "10 uA"}
    vsources = [{"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"}]
    if circuit == "simple":
        mosfets = [_mos("MREF", kind, "nb", "nb", rail), _mos("MOUT", kind, "out", "nb", rail, m=4)]
        vsources.append({"name": "VOUT", "plus": "out", "minus": "gnd", "value": out_v})
        measures = {
            "i_out": {"current": "MOUT"},
            "gain_error": {"ratio": ["MOUT", "IREF"], "ideal": 4},
            "v_nb": {"voltage": "nb"},
            "r_nb": {"resistance": "nb"},
        }
    elif circuit == "cascode":
        # reference stack: M3 (diode, on the rail) under M4 (diode, cascode bias); output M1 under the cascode M2
        iref = {**iref, "to": "nc"} if n else {**iref, "from": "nc"}
        mosfets = [
            _mos("M3", kind, "n1", "n1", rail),
            _mos("M4", kind, "nc", "nc", "n1", bulk=rail),
            _mos("M1", kind, "x", "n1", rail),
            _mos("M2", kind, "out", "nc", "x", bulk=rail),
        ]
        vsources.append({"name": "VOUT", "plus": "out", "minus": "gnd", "value": "1.2 V" if n else "0.6 V"})
        measures = {
            "i_out": {"current": "M2"},
            "gain_error": {"ratio": ["M2", "IREF"], "ideal": 1},
            "v_x": {"voltage": "x"},
            "r_nc": {"resistance": "nc"},
        }
    elif circuit == "bank":
        mosfets = [_mos("MREF", kind, "nb", "nb", rail)]
        measures = {"r_nb": {"resistance": "nb"}}
        for c in range(BANK_CHANNELS):
            mosfets.append(_mos(f"MCH{c}", kind, f"ch{c}", "nb", rail, m=2))
            vsources.append({"name": f"VCH{c}", "plus": f"ch{c}", "minus": "gnd", "value": out_v})
            measures[f"i_ch{c}"] = {"current": f"MCH{c}"}
            measures[f"err_ch{c}"] = {"ratio": [f"MCH{c}", "IREF"], "ideal": 2}
    else:
        raise ValueError(f"unknown bench circuit {circuit!r}; expected one of {', '.join(CIRCUITS)}")
    netlist = {"mosfet": mosfets, "current_source": [iref], "voltage_source": vsources}
    return netlist, measures


def bench_config(circuit: str = "simple", kind: str = "nmos", samples: int = 1_000_000, seed: int = 1) -> Config:
    """The validated config of a bench circuit ("simple", "cascode", "bank") in polarity `kind`."""
    if kind not in POLARITIES:
        raise ValueError(f"unknown polarity {kind!r}; expected nmos or pmos")
    netlist, measures = _netlist(circuit, kind)
    raw = {
        "title": f"bench: {circuit} mirror, {kind} (illustrative)",
        "technology": TECHNOLOGY,
        "circuit": netlist,
        "measures": measures,
        "analysis": {"samples": samples, "seed": seed},
    }
    return config_from_dict(raw, Path(f"<bench {circuit} {kind}>"))


def reference_solve(study: Study, vth: np.ndarray, beta: np.ndarray) -> tuple[np.ndarray, bool]:
    """One sample by scipy.optimize.root (hybrid method, analytic Jacobian) from the nominal point.

    vth [V], beta [A/V^2]: (n_devices,). Returns the MNA unknowns (n,) and whether scipy converged (or stopped at
    machine precision with a vanishing residual).
    """
    circuit = study.circuit

    def fun(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        f, j = residual_jacobian(circuit, x[None, :], vth[None, :], beta[None, :])
        return f[0], j[0]

    sol = optimize.root(fun, study.x_nominal.copy(), jac=True, method="hybr", options={"xtol": 1e-14})
    return sol.x, bool(sol.success or np.abs(sol.fun).max() < 1e-18)


def reference_run(study: Study, start: int, stop: int) -> tuple[np.ndarray, dict[str, np.ndarray], np.ndarray]:
    """Samples start..stop the reference way: the engine's draws, then one scipy solve and measure per sample.

    Returns unknowns (S, n), measures {name: (S,)} and the converged mask (S,).
    """
    p = study.circuit.params
    dvth, dbeta = mismatch_from_normals(p, standard_normals(study.seed, start, stop, 2 * p.count, study.stream))
    vth, beta = perturbed(p, dvth, dbeta)
    n = stop - start
    xs = np.empty((n, study.circuit.n_unknowns))
    ok = np.zeros(n, dtype=bool)
    values: dict[str, np.ndarray] = {key: np.empty(n) for key in study.measures}
    for s in range(n):
        xs[s], ok[s] = reference_solve(study, vth[s], beta[s])
        one = mna_measures(study.circuit, study.measures, xs[s : s + 1], vth[s : s + 1], beta[s : s + 1])
        for key, v in one.items():
            values[key][s] = v[0]
    return xs, values, ok


def relative_difference(a: np.ndarray, b: np.ndarray) -> float:
    """max |a - b| / max(|a|, |b|) over entries (0 where both are 0)."""
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    scale = np.maximum(np.abs(a), np.abs(b))
    diff = np.abs(a - b)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(scale > 0, diff / scale, 0.0)
    return float(rel.max(initial=0.0))


@dataclass
class BenchResult:
    circuit: str
    polarity: str
    samples: int
    reference_samples: int
    engine_seconds: float
    reference_seconds: float
    max_rel_diff: float
    failed_solves: int
    reference_failures: int
    peak_rss_bytes: int

    @property
    def engine_samples_per_s(self) -> float:
        return self.samples / self.engine_seconds

    @property
    def reference_samples_per_s(self) -> float:
        return self.reference_samples / self.reference_seconds

    @property
    def speedup(self) -> float:
        return self.engine_samples_per_s / self.reference_samples_per_s

    @property
    def agree(self) -> bool:
        return self.max_rel_diff <= TOLERANCE and self.reference_failures == 0

    def as_dict(self) -> dict:
        return {
            "circuit": self.circuit,
            "polarity": self.polarity,
            "samples": self.samples,
            "engine_samples_per_s": self.engine_samples_per_s,
            "reference_samples_per_s": self.reference_samples_per_s,
            "speedup": self.speedup,
            "max_rel_diff": self.max_rel_diff,
            "tolerance": TOLERANCE,
            "agree": self.agree,
            "reference_samples": self.reference_samples,
            "engine_seconds": self.engine_seconds,
            "reference_seconds": self.reference_seconds,
            "failed_solves": self.failed_solves,
            "reference_failures": self.reference_failures,
            "peak_rss_bytes": self.peak_rss_bytes,
        }


def agreement(study: Study, samples: int) -> tuple[float, int, float]:
    """Engine versus reference on samples 0..samples: (max relative difference, reference failures, reference time).

    Compared: every MNA unknown (node voltages, source currents) and every measure (a ratio measure r/ideal - 1 as
    the ratio itself, so a near-zero error is not divided by itself).
    """
    started = time.perf_counter()
    x_ref, m_ref, ok = reference_run(study, 0, samples)
    seconds = time.perf_counter() - started
    p = study.circuit.params
    dvth, dbeta = mismatch_from_normals(p, standard_normals(study.seed, 0, samples, 2 * p.count, study.stream))
    x_eng, converged = solve_unknowns(study, dvth, dbeta)
    m_eng = run_chunk(study, 0, samples)
    both = ok & converged
    worst = relative_difference(x_eng[both], x_ref[both])
    for key, measure in study.measures.items():
        shift = 1.0 if measure.kind == "ratio" else 0.0
        worst = max(worst, relative_difference(m_eng[key][both] + shift, m_ref[key][both] + shift))
    failures = int((~ok).sum() + (ok & ~converged).sum())
    return worst, failures, seconds


def time_engine(study: Study, samples: int, repeats: int = 1) -> tuple[float, int]:
    """Best wall time [s] of solving `samples` samples in-process, chunk by chunk as a run does; failed solves."""
    ranges = chunk_ranges(samples, 1)
    best, failed = float("inf"), 0
    for _ in range(max(1, repeats)):
        failed = 0
        started = time.perf_counter()
        for start, stop in ranges:
            failed += int((~run_chunk(study, start, stop)["converged"]).sum())
        best = min(best, time.perf_counter() - started)
    return best, failed


def run_bench(
    circuit: str = "simple",
    samples: int = 1_000_000,
    polarity: str = "nmos",
    reference_samples: int = REFERENCE_SAMPLES,
    repeats: int = 1,
    seed: int = 1,
) -> BenchResult:
    """Warm engine run of `samples` samples and the scipy reference on the first `reference_samples` of them."""
    config = bench_config(circuit, polarity, samples, seed)
    study = prepare(config)
    n_ref = max(1, min(samples, reference_samples))
    run_chunk(study, 0, min(samples, 65536))  # warm: plan, allocator, caches
    engine_seconds, failed = time_engine(study, samples, repeats)
    worst, failures, ref_seconds = agreement(study, n_ref)
    return BenchResult(
        circuit=circuit,
        polarity=polarity,
        samples=samples,
        reference_samples=n_ref,
        engine_seconds=engine_seconds,
        reference_seconds=ref_seconds,
        max_rel_diff=worst,
        failed_solves=failed,
        reference_failures=failures,
        peak_rss_bytes=peak_rss_bytes(),
    )


def peak_rss_bytes() -> int:
    """Peak resident memory of this process so far [bytes] (Linux reports kilobytes, macOS bytes)."""
    import sys

    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak if sys.platform == "darwin" else peak * 1024)
