"""Monte Carlo engine: nominal solve, sample chunks, joblib-parallel map. The only module that imports joblib.

A :class:`Study` holds everything a worker needs as plain numpy arrays and floats, so it pickles cheaply and
identically to any process or Dask worker. Chunks are contiguous sample ranges; the random stream is tied to
fixed-size blocks (see :mod:`mcmatch.mismatch`), so results do not depend on the chunking or the worker count.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace

import numpy as np

from mcmatch.circuit import GMIN, Circuit, compile_circuit, evaluate_measures, residual_jacobian, voltage_mask
from mcmatch.config import Config, Measure
from mcmatch.errors import SolveError
from mcmatch.mismatch import BLOCK, mismatch_from_normals, perturbed, standard_normals
from mcmatch.solver import solve_batch, solve_operating_point
from mcmatch.technology import device_parameters

#: Below this many samples a run stays in-process: a process pool costs more than it saves on 2 cores.
POOL_THRESHOLD = 200_000


@dataclass(frozen=True)
class Study:
    """One Monte Carlo condition, ready to solve: compiled circuit, measures, nominal unknowns and seed."""

    circuit: Circuit
    measures: dict[str, Measure]
    x_nominal: np.ndarray
    seed: int
    stream: int = 0
    corner: str = "tt"
    temperature: float = 300.15

    @property
    def device_names(self) -> tuple[str, ...]:
        return self.circuit.mosfet_names


def build_circuit(
    config: Config, corner: str = "tt", temperature: float | None = None, supply: tuple[str, float] | None = None
) -> Circuit:
    """Compile the config's netlist at a global corner, temperature [K] and optional supply (source name, volts)."""
    temperature = config.temperature if temperature is None else temperature
    params = device_parameters(config.circuit, config.technology, temperature, corner)
    circuit = compile_circuit(config.circuit, params)
    if supply is not None:
        circuit = circuit.with_voltage(*supply)
    return circuit


def system_for(circuit: Circuit, vth: np.ndarray, beta: np.ndarray) -> Callable[..., tuple[np.ndarray, np.ndarray]]:
    """The Newton system of `circuit` with per-sample parameters vth, beta (S, n_devices)."""

    def system(x: np.ndarray, rows: np.ndarray, source_scale: float = 1.0, gmin: float = GMIN):
        return residual_jacobian(circuit, x, vth[rows], beta[rows], source_scale=source_scale, gmin=gmin)

    return system


def nominal_point(circuit: Circuit, guess: np.ndarray | None = None) -> np.ndarray:
    """Unknowns (n,) of the circuit with no mismatch; SolveError if no strategy finds them."""
    p = circuit.params
    system = system_for(circuit, p.vth[None, :], p.beta[None, :])

    def single(x: np.ndarray, rows: np.ndarray, source_scale: float = 1.0, gmin: float = GMIN):
        return system(x, np.zeros(len(rows), dtype=np.intp), source_scale, gmin)

    return solve_operating_point(single, circuit.n_unknowns, voltage_mask(circuit), GMIN, guess=guess)[0]


def prepare(
    config: Config,
    corner: str = "tt",
    temperature: float | None = None,
    supply: tuple[str, float] | None = None,
    stream: int = 0,
    guess: np.ndarray | None = None,
) -> Study:
    """Compile and solve the nominal point of one condition."""
    circuit = build_circuit(config, corner, temperature, supply)
    try:
        x0 = nominal_point(circuit, guess)
    except SolveError as exc:
        where = f"corner {corner}, T = {circuit.params.ut:.4g} V thermal voltage"
        raise SolveError(f"{exc.message} [{where}]", exc.partial) from None
    return Study(
        circuit=circuit,
        measures=dict(config.measures),
        x_nominal=x0,
        seed=config.analysis.seed,
        stream=stream,
        corner=corner,
        temperature=config.temperature if temperature is None else temperature,
    )


def nominal_measures(study: Study) -> dict[str, float]:
    """Every measure at the nominal point (no mismatch) [SI]."""
    p = study.circuit.params
    values = evaluate_measures(study.circuit, study.measures, study.x_nominal[None, :], p.vth[None, :], p.beta[None, :])
    return {k: float(v[0]) for k, v in values.items()}


def solve_samples(study: Study, dvth: np.ndarray, dbeta: np.ndarray) -> dict[str, np.ndarray]:
    """Solve the samples with deviations dvth [V], dbeta [1] (S, n_devices); measures NaN where not converged."""
    circuit = study.circuit
    vth, beta = perturbed(circuit.params, dvth, dbeta)
    system = system_for(circuit, vth, beta)
    x0 = np.broadcast_to(study.x_nominal, (len(vth), circuit.n_unknowns)).copy()
    result = solve_batch(system, x0, voltage_mask(circuit))
    _, jac = residual_jacobian(circuit, result.x, vth, beta)
    ok = result.converged & np.isfinite(jac).all(axis=(1, 2))
    jac = np.where(ok[:, None, None], jac, np.eye(circuit.n_unknowns))
    values = evaluate_measures(circuit, study.measures, result.x, vth, beta, jac)
    out: dict[str, np.ndarray] = {}
    for v in values.values():
        ok &= np.isfinite(v)
    for key, v in values.items():
        out[key] = np.where(ok, v, np.nan)
    out["converged"] = ok
    out["iterations"] = result.iterations
    out["retried"] = result.retried
    return out


def run_chunk(study: Study, start: int, stop: int) -> dict[str, np.ndarray]:
    """Draw and solve samples start <= i < stop; columns: sample, measures, converged, dvth_*, dbeta_*."""
    params = study.circuit.params
    z = standard_normals(study.seed, start, stop, 2 * params.count, study.stream)
    dvth, dbeta = mismatch_from_normals(params, z)
    out = {"sample": np.arange(start, stop, dtype=np.int64)}
    out.update(solve_samples(study, dvth, dbeta))
    for k, name in enumerate(params.names):
        out[f"dvth_{name}"] = dvth[:, k]
        out[f"dbeta_{name}"] = dbeta[:, k]
    return out


def chunk_ranges(samples: int, jobs: int) -> list[tuple[int, int]]:
    """Contiguous ranges covering 0..samples, whole random blocks each, a few per worker for balance."""
    if samples <= 0:
        return []
    per_chunk = max(BLOCK, int(np.ceil(samples / max(1, 4 * jobs) / BLOCK)) * BLOCK)
    per_chunk = min(per_chunk, 8 * BLOCK)
    return [(s, min(samples, s + per_chunk)) for s in range(0, samples, per_chunk)]


def resolve_jobs(jobs: int | None, samples: int) -> int:
    """Worker count: default all cores; in-process below POOL_THRESHOLD samples."""
    cores = os.cpu_count() or 1
    if jobs is None or jobs == 0:
        jobs = cores if samples >= POOL_THRESHOLD else 1
    if jobs < 0:
        jobs = max(1, cores + 1 + jobs)
    return max(1, jobs)


def map_chunks(
    study: Study, ranges: list[tuple[int, int]], jobs: int, backend: str | None = None
) -> Iterator[dict[str, np.ndarray]]:
    """Yield run_chunk results in order, in-process for jobs == 1, else through joblib."""
    if jobs == 1 and backend is None:
        for start, stop in ranges:
            yield run_chunk(study, start, stop)
        return
    from joblib import Parallel, delayed, parallel_config

    with parallel_config(backend=backend or "loky", n_jobs=jobs):
        parallel = Parallel(return_as="generator")
        yield from parallel(delayed(run_chunk)(study, start, stop) for start, stop in ranges)


def monte_carlo(
    study: Study,
    samples: int,
    jobs: int | None = None,
    progress: Callable[[int], None] | None = None,
    backend: str | None = None,
) -> dict[str, np.ndarray]:
    """Run `samples` Monte Carlo samples; returns concatenated columns. `progress(n)` is called per finished chunk."""
    jobs = resolve_jobs(jobs, samples)
    ranges = chunk_ranges(samples, jobs)
    parts = []
    for part in map_chunks(study, ranges, jobs, backend):
        parts.append(part)
        if progress is not None:
            progress(len(part["sample"]))
    if not parts:
        raise ValueError("no samples requested")
    return {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}


def with_seed(study: Study, seed: int) -> Study:
    return replace(study, seed=seed)
