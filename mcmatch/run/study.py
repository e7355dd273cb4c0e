"""A prepared Monte Carlo condition (:class:`Study`): the compiled circuit at a corner, temperature and supply, its
nominal point and measures, and the seed; solving deviations for it through the solve layer.

A Study holds everything a worker needs as plain numpy arrays and floats, so it pickles cheaply and identically to
any process or Dask worker.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from mcmatch.config.schema import Config, Measure
from mcmatch.draws.mismatch import Sampling
from mcmatch.draws.process import ProcessSpread, process_spread
from mcmatch.errors import SolveError
from mcmatch.model.circuit import Circuit, compile_circuit
from mcmatch.model.technology import device_parameters
from mcmatch.run.loads import resolve_loads
from mcmatch.solve.fast import deviation_unknowns, solve_deviations
from mcmatch.solve.measures import mna_measures
from mcmatch.solve.plan import FastPlan, build_fast_plan, check_plan
from mcmatch.solve.reference import nominal_point, supply_band


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
    sampling: Sampling = "random"  # how run_chunk draws the mismatch normals (mismatch.normal_source)
    variation: ProcessSpread | None = None  # global process spread added per sample (draws.process); None: local

    @property
    def device_names(self) -> tuple[str, ...]:
        return self.circuit.mosfet_names

    @property
    def rails(self) -> tuple[float, float]:
        """The band [V] a node may plausibly take (:func:`mcmatch.solve.reference.supply_band` at the nominal
        point); a sample with a node outside it is counted as a failed solve."""
        return supply_band(self.circuit, self.x_nominal)


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


def prepare(
    config: Config,
    corner: str = "tt",
    temperature: float | None = None,
    supply: tuple[str, float] | None = None,
    stream: int = 0,
    guess: np.ndarray | None = None,
) -> Study:
    """Compile and solve the nominal point of one condition."""
    config = resolve_loads(config)  # a template's load currents, sized once at the nominal condition
    circuit = build_circuit(config, corner, temperature, supply)
    kelvin = config.temperature if temperature is None else temperature
    where = f"corner {corner}, {kelvin - 273.15:.4g} degC" + (f", {supply[0]} = {supply[1]:.4g} V" if supply else "")
    try:
        x0 = nominal_point(circuit, guess)
    except SolveError as exc:
        raise SolveError(f"{exc.message} [{where}]", exc.partial) from None
    lo, hi = supply_band(circuit, x0)
    outside = [(n, float(x0[i])) for i, n in enumerate(circuit.nodes) if not lo <= x0[i] <= hi]
    if outside:
        node, volts = outside[0]
        raise SolveError(
            f"no physical operating point: node '{node}' would sit at {volts:.4g} V, far outside the supply rails "
            f"({lo:.3g} .. {hi:.3g} V with margin); a current source drives it and no device can carry that current "
            f"(a device cut off or out of compliance) [{where}]",
            x0,
        )
    study = Study(
        circuit=circuit,
        measures=dict(config.measures),
        x_nominal=x0,
        seed=config.analysis.seed,
        stream=stream,
        corner=corner,
        temperature=config.temperature if temperature is None else temperature,
        sampling=config.analysis.sampling,
        variation=process_spread(config.analysis.variation, config.technology.statistics, circuit.params.polarity),
    )
    bad = [name for name, value in nominal_measures(study).items() if not np.isfinite(value)]
    if bad or not np.isfinite(x0).all():
        what = f"measure '{bad[0]}'" if bad else "the operating point"
        raise SolveError(f"{what} is not finite at the nominal point (a value out of range?) [{where}]", x0)
    return study


def nominal_measures(study: Study) -> dict[str, float]:
    """Every measure at the nominal point (no mismatch) [SI]."""
    p = study.circuit.params
    values = mna_measures(study.circuit, study.measures, study.x_nominal[None, :], p.vth[None, :], p.beta[None, :])
    return {k: float(v[0]) for k, v in values.items()}


def solve_samples(study: Study, dvth: np.ndarray, dbeta: np.ndarray) -> dict[str, np.ndarray]:
    """Solve the samples with deviations dvth [V], dbeta [1] (S, n_devices); measures NaN where not converged.

    Columns: every measure, `converged`, `iterations` (Newton steps) and `retried` (the sample needed the robust
    fallback: heavier damping, then source stepping, on the full MNA system).
    """
    return solve_samples_t(study, np.ascontiguousarray(np.asarray(dvth).T), np.ascontiguousarray(np.asarray(dbeta).T))


def solve_samples_t(study: Study, dvth: np.ndarray, dbeta: np.ndarray) -> dict[str, np.ndarray]:
    """:func:`solve_samples` with the deviations given sample-last, (n_devices, S)."""
    return solve_deviations(study.circuit, study.measures, study.x_nominal, fast_plan(study), dvth, dbeta)


def solve_unknowns(study: Study, dvth: np.ndarray, dbeta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Full MNA unknowns x (S, n) and the converged mask (S,) for deviations dvth [V], dbeta [1] (S, n_devices):
    the engine's own solution, for comparison with a reference solver."""
    return deviation_unknowns(study.circuit, study.x_nominal, fast_plan(study), dvth, dbeta)


_PLANS: list[tuple[Study, FastPlan | None]] = []


def fast_plan(study: Study) -> FastPlan | None:
    """The study's FastPlan (cached for the last few studies seen), or None when the circuit does not reduce."""
    for cached, plan in _PLANS:
        if cached is study:
            return plan
    try:
        plan = check_plan(build_fast_plan(study.circuit, study.x_nominal, study.measures))
    except (ValueError, np.linalg.LinAlgError):
        plan = None  # the full MNA path solves it
    _PLANS.insert(0, (study, plan))
    del _PLANS[8:]
    return plan


def with_seed(study: Study, seed: int) -> Study:
    """A copy of `study` drawing from another seed."""
    return replace(study, seed=seed)
