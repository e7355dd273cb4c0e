"""Speed check: the batched engine against per-sample ``scipy.optimize.root`` loops on the same samples.

Two references solve one sample at a time with scipy's hybrid method and analytic Jacobians, from the nominal point
(:mod:`mcmatch.run.bench_reference`): the residual a designer would write for that one circuit (the unknown node
voltages, KCL with the square law; the headline speed-up), and the engine's general MNA residual (every node voltage and
source current unknown; a second column). Both must agree with the engine to TOLERANCE (DESIGN.md section 4). The
references run on a subset of the samples and their per-sample cost is extrapolated; the engine runs all of them, warm
(one untimed pass first), with sampling and the small-signal resistance included. Optionally, the end-to-end latency of
fresh processes: ``mcmatch --version`` and a whole demo run. The circuits are explicit netlists on a bundled, invented
technology: illustrative values, no foundry's data.

The command line reads this module's constants while it builds its parser, so numpy, scipy and the engine are
imported inside the functions that use them.
"""

from __future__ import annotations

import resource
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import numpy as np

    from mcmatch.config.schema import Config
    from mcmatch.run.study import Study

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
#: Samples solved by each scipy reference (its cost per sample is extrapolated from these).
REFERENCE_SAMPLES = 2000
#: Agreement required between the engine and each reference, relative.
TOLERANCE = 1e-9
#: Fresh processes timed per latency figure (the median is reported).
LATENCY_RUNS = 3
#: The config whose whole run (`mcmatch run CONFIG --quiet --out TMP`) the latency figure times.
DEMO_CONFIG = Path(__file__).resolve().parents[2] / "configs" / "demo.toml"


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
    from mcmatch.config.loading import config_from_dict

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


def engine_draws(study: Study, start: int, stop: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The engine's mismatch of samples start..stop: (dvth [V], dbeta [1], vth [V], beta [A/V^2]), each (S, nd)."""
    from mcmatch.draws.mismatch import mismatch_from_normals, perturbed, standard_normals

    p = study.circuit.params
    dvth, dbeta = mismatch_from_normals(p, standard_normals(study.seed, start, stop, 2 * p.count, study.stream))
    vth, beta = perturbed(p, dvth, dbeta)
    return dvth, dbeta, vth, beta


def reference_run(study: Study, start: int, stop: int) -> tuple[np.ndarray, dict[str, np.ndarray], np.ndarray]:
    """Samples start..stop on the general MNA residual: the engine's draws, then one scipy solve and measure each.

    Returns unknowns (S, n), measures {name: (S,)} and the converged mask (S,).
    """
    import numpy as np

    from mcmatch.run.bench_reference import mna_measures

    _, _, vth, beta = engine_draws(study, start, stop)
    n = stop - start
    xs = np.empty((n, study.circuit.n_unknowns))
    ok = np.zeros(n, dtype=bool)
    values: dict[str, np.ndarray] = {key: np.empty(n) for key in study.measures}
    for s in range(n):
        xs[s], one, ok[s] = mna_measures(study, vth[s], beta[s])
        for key, v in one.items():
            values[key][s] = v
    return xs, values, ok


def designer_run(
    study: Study, circuit: str, kind: str, start: int, stop: int
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Samples start..stop by the hand-written residual of the bench circuit: measures {name: (S,)}, converged (S,)."""
    import numpy as np

    from mcmatch.run.bench_reference import designer_reference

    _, _, vth, beta = engine_draws(study, start, stop)
    solve = designer_reference(study, circuit, kind).solve
    n = stop - start
    ok = np.zeros(n, dtype=bool)
    values: dict[str, np.ndarray] = {key: np.empty(n) for key in study.measures}
    for s in range(n):
        one, ok[s] = solve(vth[s], beta[s])
        for key in values:
            values[key][s] = one[key]
    return values, ok


def relative_difference(a: np.ndarray, b: np.ndarray) -> float:
    """max |a - b| / max(|a|, |b|) over entries (0 where both are 0)."""
    import numpy as np

    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    scale = np.maximum(np.abs(a), np.abs(b))
    diff = np.abs(a - b)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(scale > 0, diff / scale, 0.0)
    return float(rel.max(initial=0.0))


def _measure_difference(study: Study, engine: dict, reference: dict, both: np.ndarray) -> float:
    """Worst relative difference over the measures (a ratio measure r/ideal - 1 compared as the ratio itself, so a
    near-zero error is not divided by itself)."""
    worst = 0.0
    for key, measure in study.measures.items():
        shift = 1.0 if measure.kind == "ratio" else 0.0
        worst = max(worst, relative_difference(engine[key][both] + shift, reference[key][both] + shift))
    return worst


def agreement(study: Study, samples: int) -> tuple[float, int, float]:
    """Engine versus the MNA reference on samples 0..samples: (max relative difference, reference failures,
    reference time [s]). Compared: every MNA unknown (node voltages, source currents) and every measure."""
    from mcmatch.run.chunks import run_chunk
    from mcmatch.run.study import solve_unknowns

    started = time.perf_counter()
    x_ref, m_ref, ok = reference_run(study, 0, samples)
    seconds = time.perf_counter() - started
    dvth, dbeta, _, _ = engine_draws(study, 0, samples)
    x_eng, converged = solve_unknowns(study, dvth, dbeta)
    m_eng = run_chunk(study, 0, samples)
    both = ok & converged
    worst = max(relative_difference(x_eng[both], x_ref[both]), _measure_difference(study, m_eng, m_ref, both))
    failures = int((~ok).sum() + (ok & ~converged).sum())
    return worst, failures, seconds


def designer_agreement(study: Study, circuit: str, kind: str, samples: int) -> tuple[float, int, float]:
    """Engine versus the hand-written reference on samples 0..samples: (max relative difference over every measure,
    reference failures, reference time [s])."""
    from mcmatch.run.chunks import run_chunk

    started = time.perf_counter()
    m_ref, ok = designer_run(study, circuit, kind, 0, samples)
    seconds = time.perf_counter() - started
    m_eng = run_chunk(study, 0, samples)
    both = ok & m_eng["converged"]
    failures = int((~both).sum())
    return _measure_difference(study, m_eng, m_ref, both), failures, seconds


def time_engine(study: Study, samples: int, repeats: int = 1) -> tuple[float, int]:
    """Best wall time [s] of solving `samples` samples in-process, chunk by chunk as a run does; failed solves."""
    from mcmatch.run.chunks import chunk_ranges, run_chunk

    ranges = chunk_ranges(samples, 1)
    best, failed = float("inf"), 0
    for _ in range(max(1, repeats)):
        failed = 0
        started = time.perf_counter()
        for start, stop in ranges:
            failed += int((~run_chunk(study, start, stop)["converged"]).sum())
        best = min(best, time.perf_counter() - started)
    return best, failed


def _timed(command: list[str]) -> float:
    """Wall time [s] of one fresh process; RuntimeError (with its stderr) if it fails."""
    import subprocess

    started = time.perf_counter()
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    seconds = time.perf_counter() - started
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(command)} exited with {done.returncode}: {done.stderr.strip()[-2000:]}")
    return seconds


def latency(runs: int = LATENCY_RUNS, config: Path = DEMO_CONFIG) -> dict:
    """End-to-end latency of fresh processes, median of `runs` each [s]: ``mcmatch --version`` and
    ``mcmatch run CONFIG --quiet --out TMP`` (summary, samples and report written), taken in turn."""
    import statistics
    import tempfile

    command = [sys.executable, "-m", "mcmatch"]
    version, run = [], []
    with tempfile.TemporaryDirectory(prefix="mcmatch-bench-") as tmp:
        for i in range(max(1, runs)):
            version.append(_timed([*command, "--version"]))
            run.append(_timed([*command, "run", str(config), "--quiet", "--out", str(Path(tmp) / f"run{i}")]))
    return {
        "runs": len(run),
        "version_s": statistics.median(version),
        "demo_run_s": statistics.median(run),
        "demo_config": str(config),
    }


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
    reference_mna_seconds: float = float("nan")
    max_rel_diff_mna: float = float("nan")
    reference_mna_failures: int = 0
    latency: dict | None = None

    @property
    def engine_samples_per_s(self) -> float:
        return self.samples / self.engine_seconds

    @property
    def reference_samples_per_s(self) -> float:
        """The hand-written circuit residual's rate [samples/s]."""
        return self.reference_samples / self.reference_seconds

    @property
    def reference_mna_samples_per_s(self) -> float:
        """The general MNA residual's rate [samples/s]."""
        return self.reference_samples / self.reference_mna_seconds

    @property
    def speedup(self) -> float:
        """Engine against the hand-written circuit residual."""
        return self.engine_samples_per_s / self.reference_samples_per_s

    @property
    def speedup_mna(self) -> float:
        return self.engine_samples_per_s / self.reference_mna_samples_per_s

    @property
    def agree(self) -> bool:
        worst = max(self.max_rel_diff, self.max_rel_diff_mna)
        return worst <= TOLERANCE and self.reference_failures == 0 and self.reference_mna_failures == 0

    def as_dict(self) -> dict:
        return {
            "circuit": self.circuit,
            "polarity": self.polarity,
            "samples": self.samples,
            "engine_samples_per_s": self.engine_samples_per_s,
            "reference": "scipy.optimize.root per sample on the circuit's own KCL residual (analytic Jacobian)",
            "reference_samples_per_s": self.reference_samples_per_s,
            "speedup": self.speedup,
            "reference_mna": "scipy.optimize.root per sample on the general MNA residual (analytic Jacobian)",
            "reference_mna_samples_per_s": self.reference_mna_samples_per_s,
            "speedup_mna": self.speedup_mna,
            "max_rel_diff": max(self.max_rel_diff, self.max_rel_diff_mna),
            "max_rel_diff_circuit": self.max_rel_diff,
            "max_rel_diff_mna": self.max_rel_diff_mna,
            "tolerance": TOLERANCE,
            "agree": self.agree,
            "reference_samples": self.reference_samples,
            "engine_seconds": self.engine_seconds,
            "reference_seconds": self.reference_seconds,
            "reference_mna_seconds": self.reference_mna_seconds,
            "failed_solves": self.failed_solves,
            "reference_failures": self.reference_failures + self.reference_mna_failures,
            "peak_rss_bytes": self.peak_rss_bytes,
            "latency": self.latency,
        }


def run_bench(
    circuit: str = "simple",
    samples: int = 1_000_000,
    polarity: str = "nmos",
    reference_samples: int = REFERENCE_SAMPLES,
    repeats: int = 1,
    seed: int = 1,
    latency_runs: int = 0,
) -> BenchResult:
    """Warm engine run of `samples` samples, both scipy references on the first `reference_samples` of them, and
    (latency_runs > 0) the end-to-end latency of that many fresh processes of each kind."""
    from mcmatch.run.chunks import run_chunk
    from mcmatch.run.study import prepare

    config = bench_config(circuit, polarity, samples, seed)
    study = prepare(config)
    n_ref = max(1, min(samples, reference_samples))
    run_chunk(study, 0, min(samples, 65536))  # warm: plan, allocator, caches
    engine_seconds, failed = time_engine(study, samples, repeats)
    designer_run(study, circuit, polarity, 0, 1)  # warm the references too: imports and scipy's first call untimed
    reference_run(study, 0, 1)
    worst, failures, ref_seconds = designer_agreement(study, circuit, polarity, n_ref)
    worst_mna, failures_mna, mna_seconds = agreement(study, n_ref)
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
        reference_mna_seconds=mna_seconds,
        max_rel_diff_mna=worst_mna,
        reference_mna_failures=failures_mna,
        latency=latency(latency_runs) if latency_runs > 0 else None,
    )


def peak_rss_bytes() -> int:
    """Peak resident memory of this process so far [bytes] (Linux reports kilobytes, macOS bytes)."""
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak if sys.platform == "darwin" else peak * 1024)
