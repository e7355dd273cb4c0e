"""Monte Carlo engine: nominal solve, sample chunks, joblib-parallel map. The only module that imports joblib.

A :class:`Study` holds everything a worker needs as plain numpy arrays and floats, so it pickles cheaply and
identically to any process or Dask worker. Chunks are contiguous sample ranges; the random stream is tied to
fixed-size blocks (see :mod:`mcmatch.draws.mismatch`), so results do not depend on the chunking or the worker count.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from mcmatch.config.schema import Config, Measure
from mcmatch.draws.mismatch import BLOCK, Sampling, normal_source, perturbed
from mcmatch.draws.process import ProcessSpread, process_draws, process_spread
from mcmatch.errors import SolveError
from mcmatch.model.circuit import (
    DERIVATIVES,
    GMIN,
    Circuit,
    DeviceState,
    ReducedCircuit,
    compile_circuit,
    device_state,
    evaluate_measures,
    extend,
    reduce_circuit,
    reduce_unknowns,
    reduced_residual_jacobian,
    residual_jacobian,
    restrict,
    voltage_mask,
)
from mcmatch.model.headroom import HEADROOM_COLUMN, min_headroom, mna_terminal, reduced_terminal
from mcmatch.model.technology import device_parameters
from mcmatch.run.loads import resolve_loads
from mcmatch.run.workers import Watched
from mcmatch.solve.newton import ColumnSystem, SparseElimination, newton_columns, solve_batch, solve_operating_point
from mcmatch.solve.ports import reduced_port_resistances

#: Below this many samples a run stays in-process: starting a pool (POOL_STARTUP_S) costs more than it saves on 2
#: cores. Measured with the fast path: a 2-worker pool pays from about 1.5e7 simple-mirror or 1e7 cascode samples.
POOL_THRESHOLD = 10_000_000
#: Wall time to start a local pool of workers that import mcmatch [s] (measured: about 2 s for 2 loky workers).
POOL_STARTUP_S = 2.0

#: glibc allocator settings applied by :func:`tune_allocator`: temporaries below the mmap threshold are recycled from
#: the heap instead of being mapped and page-faulted afresh on every numpy operation (which costs more than the
#: arithmetic at these array sizes); freed memory above the trim threshold still goes back to the system.
MMAP_THRESHOLD = 32 * 1024 * 1024
TRIM_THRESHOLD = 128 * 1024 * 1024
_ALLOCATOR_TUNED: bool | None = None


def tune_allocator() -> bool:
    """Raise glibc's mmap and trim thresholds once per process (no-op elsewhere); True if applied.

    Set MCMATCH_KEEP_MALLOC=1 to leave the allocator alone.
    """
    global _ALLOCATOR_TUNED
    if _ALLOCATOR_TUNED is None:
        _ALLOCATOR_TUNED = False
        if os.environ.get("MCMATCH_KEEP_MALLOC") != "1" and sys.platform.startswith("linux"):
            try:
                import ctypes

                libc = ctypes.CDLL("libc.so.6")
                m_trim_threshold, m_mmap_threshold = -1, -3
                _ALLOCATOR_TUNED = bool(
                    libc.mallopt(m_mmap_threshold, MMAP_THRESHOLD) and libc.mallopt(m_trim_threshold, TRIM_THRESHOLD)
                )
            except (OSError, AttributeError):
                pass
    return _ALLOCATOR_TUNED


#: Chunk lengths are multiples of this (a divisor of the random BLOCK): the streamed statistics fold per block of it.
CHUNK_QUANTUM = 8192

#: Samples solved together on the fast path: small enough that a batch's working arrays stay in the core's cache.
FAST_BATCH = 16384


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
        """The band [V] a node may plausibly take: the nominal node voltages and gnd, widened by
        RAIL_MARGIN_FRACTION of their span and at least RAIL_MARGIN. An ideal current source can push a node far
        beyond it (a device out of compliance); such a sample has no physical operating point and is counted as a
        failed solve, not reported as a current."""
        return supply_band(self.circuit, self.x_nominal)


#: Margin [V] and fraction of the nominal voltage span beyond which a node's voltage is implausible (see Study.rails).
RAIL_MARGIN = 1.0
RAIL_MARGIN_FRACTION = 0.5


def supply_band(circuit: Circuit, x: np.ndarray) -> tuple[float, float]:
    """[lo, hi] [V]: the voltages of the nodes held by voltage sources, and gnd, widened by RAIL_MARGIN_FRACTION of
    their span and at least RAIL_MARGIN."""
    nodes = [int(n) for n in (*circuit.vsource_plus, *circuit.vsource_minus) if n < circuit.n_nodes]
    held = [0.0, *(float(x[n]) for n in nodes)]
    lo, hi = min(held), max(held)
    margin = max(RAIL_MARGIN, RAIL_MARGIN_FRACTION * (hi - lo))
    return lo - margin, hi + margin


def within_rails(study: Study, node_voltages: np.ndarray) -> np.ndarray:
    """Per-sample mask: every node voltage in `node_voltages` (S, k) lies inside study.rails."""
    lo, hi = study.rails
    v = np.asarray(node_voltages)
    return ((v >= lo) & (v <= hi)).all(axis=1) if v.size else np.ones(v.shape[0], dtype=bool)


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

    if guess is None:  # start with grounded voltage sources' nodes at their values (a Wilson mirror needs it)
        guess = np.zeros(circuit.n_unknowns)
        grounded = circuit.vsource_minus == circuit.ground
        guess[circuit.vsource_plus[grounded]] = circuit.vsource_value[grounded]
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
    values = evaluate_measures(study.circuit, study.measures, study.x_nominal[None, :], p.vth[None, :], p.beta[None, :])
    return {k: float(v[0]) for k, v in values.items()}


def solve_samples(study: Study, dvth: np.ndarray, dbeta: np.ndarray) -> dict[str, np.ndarray]:
    """Solve the samples with deviations dvth [V], dbeta [1] (S, n_devices); measures NaN where not converged.

    Columns: every measure, `converged`, `iterations` (Newton steps) and `retried` (the sample needed the robust
    fallback: heavier damping, then source stepping, on the full MNA system).
    """
    return solve_samples_t(study, np.ascontiguousarray(np.asarray(dvth).T), np.ascontiguousarray(np.asarray(dbeta).T))


def solve_samples_t(study: Study, dvth: np.ndarray, dbeta: np.ndarray) -> dict[str, np.ndarray]:
    """:func:`solve_samples` with the deviations given sample-last, (n_devices, S)."""
    plan = fast_plan(study)
    if plan is None:
        return solve_samples_mna(study, dvth.T, dbeta.T)
    n_samples = dvth.shape[1]
    if n_samples <= FAST_BATCH:
        return solve_fast(study, plan, dvth, dbeta)
    out: dict[str, np.ndarray] = {}
    for lo in range(0, n_samples, FAST_BATCH):
        hi = min(n_samples, lo + FAST_BATCH)
        for key, values in solve_fast(study, plan, dvth[:, lo:hi], dbeta[:, lo:hi]).items():
            if key not in out:
                out[key] = np.empty(n_samples, dtype=values.dtype)
            out[key][lo:hi] = values
    return out


def solve_samples_mna(
    study: Study, dvth: np.ndarray, dbeta: np.ndarray, x0: np.ndarray | None = None
) -> dict[str, np.ndarray]:
    """The reference path: full MNA system, stacked Jacobians, :func:`solve_batch` with its retries."""
    circuit = study.circuit
    vth, beta = perturbed(circuit.params, dvth, dbeta)
    system = system_for(circuit, vth, beta)
    if x0 is None:
        x0 = np.broadcast_to(study.x_nominal, (len(vth), circuit.n_unknowns)).copy()
    result = solve_batch(system, x0, voltage_mask(circuit))
    _, jac = residual_jacobian(circuit, result.x, vth, beta)
    ok = result.converged & np.isfinite(jac).all(axis=(1, 2)) & within_rails(study, result.x[:, : circuit.n_nodes])
    jac = np.where(ok[:, None, None], jac, np.eye(circuit.n_unknowns))
    values = evaluate_measures(circuit, study.measures, result.x, vth, beta, jac)
    out: dict[str, np.ndarray] = {}
    for v in values.values():
        ok &= np.isfinite(v)
    values[HEADROOM_COLUMN] = min_headroom(circuit, mna_terminal(extend(result.x)), vth.T, beta.T, len(ok))
    for key, v in values.items():
        out[key] = np.where(ok, v, np.nan)
    out["converged"] = ok
    out["iterations"] = result.iterations
    out["retried"] = result.retried
    return out


# ------------------------------------------------------------------------------------------------------ fast path
@dataclass(frozen=True)
class Block:
    """One diagonal block of the reduced system in block-triangular order: the unknowns (u rows) it solves, once
    every earlier block is solved, with its own elimination order and a first-order predictor. Per local unknown,
    the predictor holds ((device, du/dvth [1], du/d(dbeta) [V]) ...) and ((earlier u row, du/du_row) ...)."""

    view: ReducedCircuit
    linear: SparseElimination
    unknowns: tuple[int, ...]
    params: tuple[tuple[tuple[int, float, float], ...], ...]
    upstream: tuple[tuple[tuple[int, float], ...], ...]
    record: tuple[int, ...]

    @property
    def reads(self) -> tuple[int, ...]:
        """u rows of earlier blocks that the block's elements read."""
        view, rows = self.view, set()
        for k in view.active:
            rows.update(r for r, _ in view.stamps[k].terminals if r >= 0)
        for rs in view.resistors:
            rows.update(r for r, _ in rs.terminals if r >= 0)
        for src in view.sources:
            rows.update((src.branch, src.plus, src.minus))
        return tuple(sorted(rows - set(self.unknowns)))


@dataclass(frozen=True)
class FastPlan:
    """Everything the fast path needs besides the samples: the whole reduced system, its nominal unknowns (m,), and
    its diagonal blocks in solving order (strongly connected components of the Jacobian's pattern, so each block
    depends only on itself and earlier ones)."""

    reduced: ReducedCircuit
    u_nominal: np.ndarray
    blocks: tuple[Block, ...]

    def block_of(self, row: int) -> tuple[int, int]:
        """(block index, local column) of u row `row`."""
        for b, block in enumerate(self.blocks):
            if row in block.unknowns:
                return b, block.unknowns.index(row)
        raise KeyError(row)


def strong_components(n: int, edges: dict[int, set[int]]) -> list[list[int]]:
    """Strongly connected components of a directed graph on 0..n-1 (Tarjan), each listed after every component it
    reaches: with edges k -> j meaning "k needs j", that is a valid solving order."""
    index: dict[int, int] = {}
    low: dict[int, int] = {}
    stack: list[int] = []
    on_stack: set[int] = set()
    out: list[list[int]] = []
    counter = [0]

    def visit(v: int) -> None:
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on_stack.add(v)
        for w in sorted(edges.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            out.append(sorted(component))

    for v in range(n):
        if v not in index:
            visit(v)
    return out


def matching(n: int, pattern: set[tuple[int, int]]) -> list[int]:
    """A perfect matching of equations to unknowns on the nonzeros `pattern` of a square system (equation
    result[k] for unknown k), diagonal entries first (a node's own KCL row), augmenting paths for the rest."""
    by_column: dict[int, list[int]] = {}
    for r, c in sorted(pattern):
        by_column.setdefault(c, []).append(r)
    owner: dict[int, int] = {}  # equation -> unknown
    for k in range(n):
        if (k, k) in pattern:
            owner[k] = k

    def augment(k: int, seen: set[int]) -> bool:
        for r in by_column.get(k, ()):
            if r in seen:
                continue
            seen.add(r)
            if r not in owner or augment(owner[r], seen):
                owner[r] = k
                return True
        return False

    for k in range(n):
        if k not in owner.values() and not augment(k, set()):
            raise ValueError(f"structurally singular system: no equation left for unknown {k}")
    result = [0] * n
    for r, k in owner.items():
        result[k] = r
    return result


def build_fast_plan(study: Study) -> FastPlan:
    """Reduce the study's circuit, split it into blocks and fix pivot orders and predictors at its nominal point."""
    circuit = study.circuit
    reduced = reduce_circuit(circuit)
    m = reduced.size
    p = circuit.params
    u_nom = reduce_unknowns(reduced, study.x_nominal[None, :])
    if m == 0:
        return FastPlan(reduced=reduced, u_nominal=np.zeros(0), blocks=())
    vth, beta = p.vth[:, None], p.beta[:, None]
    _, jac = reduced_residual_jacobian(reduced, u_nom, vth, beta)
    dense = np.zeros((m, m))
    for (r, c), v in jac.items():
        dense[r, c] = float(np.asarray(v).reshape(-1)[0])
    true_pattern = {(r, c) for (r, c) in reduced.pattern if r != c or dense[r, c] != 0.0}
    order = matching(m, true_pattern)  # equation order[k] <-> unknown k
    edges = {k: {j for (r, j) in true_pattern if r == order[k] and j != k} for k in range(m)}
    # dF/dvth = -dI/dvg (vth enters with the gate voltage), dF/d(dbeta) = I (I is proportional to beta)
    sens = np.zeros((m, 2, p.count))
    for k in range(p.count):
        stamp = reduced.stamps[k]
        if not stamp.rows:
            continue
        s = device_state(reduced, stamp, u_nom, vth[k], beta[k])
        for r, sign in stamp.rows:
            sens[r, 0, k] += -sign * stamp.polarity * float(np.asarray(s.di_dvg).reshape(-1)[0])
            sens[r, 1, k] += sign * stamp.polarity * float(np.asarray(s.i).reshape(-1)[0])
    measured = set()
    for measure in study.measures.values():
        measured.update([measure.current] if measure.current else measure.ratio or ())
    components = strong_components(m, edges)
    views = []
    for cols in components:
        eqs = sorted(order[k] for k in cols)
        views.append((cols, eqs, restrict(reduced, eqs, cols)))
    last_block = {}
    for b, (_, _, view) in enumerate(views):
        for k in view.active:
            last_block[k] = b
    blocks = []
    solved: list[int] = []
    for b, (cols, eqs, view) in enumerate(views):
        local = dense[np.ix_(eqs, cols)]
        linear = SparseElimination.build(view.pattern, local)
        rhs = np.concatenate([sens[eqs].reshape(len(eqs), -1), dense[np.ix_(eqs, solved)]], axis=1)
        du = -np.linalg.solve(local, rhs)
        # drop coefficients that are round-off of structural zeros (1e-12 of the row's largest)
        du = np.where(np.abs(du) > 1e-12 * np.abs(du).max(axis=1, keepdims=True, initial=0.0), du, 0.0)
        dp = du[:, : 2 * p.count].reshape(len(cols), 2, p.count)
        params = tuple(
            tuple((k, float(dp[r, 0, k]), float(dp[r, 1, k])) for k in range(p.count) if dp[r, 0, k] or dp[r, 1, k])
            for r in range(len(cols))
        )
        upstream = tuple(
            tuple((j, float(du[r, 2 * p.count + i])) for i, j in enumerate(solved) if du[r, 2 * p.count + i])
            for r in range(len(cols))
        )
        record = tuple(k for k in view.active if last_block[k] == b and circuit.mosfet_names[k] in measured)
        blocks.append(
            Block(
                view=view,
                linear=linear,
                unknowns=tuple(cols),
                params=params,
                upstream=upstream,
                record=record,
            )
        )
        solved += cols
    return FastPlan(reduced=reduced, u_nominal=u_nom[:, 0].copy(), blocks=tuple(blocks))


_PLANS: list[tuple[Study, FastPlan | None]] = []


def fast_plan(study: Study) -> FastPlan | None:
    """The study's FastPlan (cached for the last few studies seen), or None when the circuit does not reduce."""
    for cached, plan in _PLANS:
        if cached is study:
            return plan
    try:
        plan = build_fast_plan(study)
        for block in plan.blocks:  # the block solver needs node voltages first, and at least one
            rows = np.asarray(block.view.voltage_rows, dtype=bool)
            count = int(rows.sum())
            if count == 0 or not rows[:count].all():
                raise ValueError("a block the fast path cannot order (e.g. a floating voltage source)")
    except (ValueError, np.linalg.LinAlgError):
        plan = None  # the full MNA path solves it
    _PLANS.insert(0, (study, plan))
    del _PLANS[8:]
    return plan


class _BlockBatch(ColumnSystem):
    """One block's system for one batch of samples. It reads the other unknowns from `context` (m, S), which holds
    the solved earlier blocks; only the devices of the block keep per-sample rows. At convergence it keeps, per
    sample, the currents of the block's `record` devices (carried to the solution to first order), so the current
    measures need no second evaluation. (The Jacobian is not carried: its change over the last step, up to about
    1e-9 V, would show in a resistance at the 1e-9 level, so resistances are evaluated at the solution.)"""

    def __init__(self, block: Block, context: np.ndarray, vth: np.ndarray, beta: np.ndarray) -> None:
        self.block = block
        self.context = context
        self.reads = block.reads
        active = set(block.view.active)
        self.vth: list = [vth[k] if k in active else None for k in range(len(vth))]
        self.beta: list = [beta[k] if k in active else None for k in range(len(beta))]
        self.currents: dict[int, np.ndarray] = {}
        self._last: dict[int, DeviceState] = {}
        self._n = context.shape[1]

    def evaluate(self, u: np.ndarray):
        for i, row in enumerate(self.block.unknowns):
            self.context[row] = u[i]
        states: dict[int, DeviceState] = {}
        f, jac = reduced_residual_jacobian(self.block.view, self.context, self.vth, self.beta, states=states)
        self._last = states
        return f, jac

    def keep(self, mask: np.ndarray) -> None:
        context = np.empty((self.context.shape[0], int(np.count_nonzero(mask))))
        for row in self.reads:  # the rows of earlier blocks this block's elements read; its own are rewritten
            context[row] = self.context[row][mask]
        self.context = context
        self.vth = [None if v is None else v[mask] for v in self.vth]
        self.beta = [None if v is None else v[mask] for v in self.beta]

    def accept(self, done: np.ndarray, finished: np.ndarray, whole: bool, dx: np.ndarray) -> None:
        states = self._last

        def put(store: dict, key, values: np.ndarray, fill: float) -> None:
            # the first acceptance of a whole batch adopts the arrays of that evaluation (they are not used again);
            # later ones scatter their few samples into them
            if key not in store:
                if whole and values.shape == (self._n,):
                    store[key] = values
                    return
                store[key] = np.full(self._n, fill)
            store[key][finished] = values[done]

        for k in self.block.record:
            # the solution is u + dx: carry the current along to first order (the error is O(dx^2), dx < tolerance)
            s, stamp = states[k], self.block.view.stamps[k]
            delta = None
            for c, names in stamp.columns:
                g = None
                for name in names:
                    term = getattr(s, DERIVATIVES[name])
                    g = term if g is None else g + term
                delta = g * dx[c] if delta is None else delta + g * dx[c]
            put(self.currents, k, s.i if delta is None else s.i + stamp.polarity * delta, np.nan)


@dataclass
class FastSolution:
    """Reduced unknowns u (m, S), converged mask, Newton steps (summed over blocks), per-sample parameters
    (n_devices, S), and the device currents the blocks recorded at convergence."""

    u: np.ndarray
    converged: np.ndarray
    iterations: np.ndarray
    vth: np.ndarray
    beta: np.ndarray
    currents: dict[int, np.ndarray]


def _fast_newton(study: Study, plan: FastPlan, dvth: np.ndarray, dbeta: np.ndarray) -> FastSolution:
    """Block by block Newton on the reduced system for deviations dvth [V], dbeta [1] (n_devices, S)."""
    params = study.circuit.params
    vth = params.vth[:, None] + dvth
    factor = 1.0 + dbeta
    if factor.size and factor.min() < 1e-3:  # same floor as mismatch.perturbed, applied only where it bites
        factor = np.maximum(factor, 1e-3)
    beta = params.beta[:, None] * factor
    n_samples = dvth.shape[1]
    u = np.empty((plan.reduced.size, n_samples))
    converged = np.ones(n_samples, dtype=bool)
    iterations = np.zeros(n_samples, dtype=np.int64)
    currents: dict[int, np.ndarray] = {}
    for block in plan.blocks:
        u0 = np.empty((len(block.unknowns), n_samples))
        for r, row in enumerate(block.unknowns):
            offset = plan.u_nominal[row] - sum(a * plan.u_nominal[j] for j, a in block.upstream[r])
            start = np.full(n_samples, offset)
            for k, a_vth, a_beta in block.params[r]:
                if a_vth:
                    start += a_vth * dvth[k]
                if a_beta:
                    start += a_beta * dbeta[k]
            for j, a in block.upstream[r]:
                start += a * u[j]
            u0[r] = start
        batch = _BlockBatch(block, u, vth, beta)
        scale = plan.u_nominal[list(block.unknowns)]
        result = newton_columns(batch, u0, block.view.voltage_rows, block.linear, scale=scale)
        for i, row in enumerate(block.unknowns):
            u[row] = result.x[i]
        converged &= result.converged
        iterations += result.iterations
        currents.update(batch.currents)
    return FastSolution(u, converged, iterations, vth, beta, currents)


def solve_fast(study: Study, plan: FastPlan, dvth: np.ndarray, dbeta: np.ndarray) -> dict[str, np.ndarray]:
    """Fast path for deviations dvth [V], dbeta [1] given sample-last (n_devices, S); same columns as
    :func:`solve_samples`. Samples the reduced Newton does not converge are solved again by the reference path."""
    n_samples = dvth.shape[1]
    sol = _fast_newton(study, plan, dvth, dbeta)
    out = fast_measures(study, plan, sol)
    terminal = reduced_terminal(plan.reduced, sol.u)  # model/headroom.py: the smallest Vds - Vdsat per sample
    out[HEADROOM_COLUMN] = min_headroom(study.circuit, terminal, sol.vth, sol.beta, n_samples)
    free = [r for r in (plan.reduced.position[node] for node in range(study.circuit.n_nodes)) if r >= 0]
    ok = sol.converged & within_rails(study, sol.u[free].T)
    for key in study.measures:
        ok &= np.isfinite(out[key])
    out["converged"] = ok
    out["iterations"] = sol.iterations
    out["retried"] = np.zeros(n_samples, dtype=bool)
    retry = np.flatnonzero(~sol.converged)
    if retry.size:
        again = solve_samples_mna(
            study, np.ascontiguousarray(dvth[:, retry].T), np.ascontiguousarray(dbeta[:, retry].T)
        )
        for key in (*study.measures, HEADROOM_COLUMN):
            out[key][retry] = again[key]
        out["converged"][retry] = again["converged"]
        out["iterations"][retry] += again["iterations"]
        out["retried"][retry] = True
    if not out["converged"].all():
        for key in (*study.measures, HEADROOM_COLUMN):
            out[key] = np.where(out["converged"], out[key], np.nan)
    return out


def solve_unknowns(study: Study, dvth: np.ndarray, dbeta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Full MNA unknowns x (S, n) and the converged mask (S,) for deviations dvth [V], dbeta [1] (S, n_devices):
    the engine's own solution, for comparison with a reference solver."""
    plan = fast_plan(study)
    circuit = study.circuit
    dvth, dbeta = np.asarray(dvth, dtype=float), np.asarray(dbeta, dtype=float)
    n_samples = len(dvth)
    if plan is None:
        x, converged = np.empty((n_samples, circuit.n_unknowns)), np.zeros(n_samples, dtype=bool)
        retry = np.arange(n_samples)
    else:
        sol = _fast_newton(study, plan, np.ascontiguousarray(dvth.T), np.ascontiguousarray(dbeta.T))
        x = expand_unknowns(plan, sol.u, sol.vth, sol.beta)
        converged = sol.converged.copy()
        retry = np.flatnonzero(~converged)
    if retry.size:
        vth_r, beta_r = perturbed(circuit.params, dvth[retry], dbeta[retry])
        x0 = np.broadcast_to(study.x_nominal, (retry.size, circuit.n_unknowns)).copy()
        again = solve_batch(system_for(circuit, vth_r, beta_r), x0, voltage_mask(circuit))
        x[retry] = again.x
        converged[retry] = again.converged
    return x, converged


def expand_unknowns(plan: FastPlan, u: np.ndarray, vth: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Full MNA unknowns (S, n) from reduced ones u (m, S): fixed node voltages filled in, the currents of voltage
    sources tied to gnd from KCL at the nodes they hold."""
    reduced = plan.reduced
    circuit = reduced.circuit
    n_samples = u.shape[1]
    x = np.empty((n_samples, circuit.n_unknowns))
    for node in range(circuit.n_nodes):
        r = reduced.position[node]
        x[:, node] = u[r] if r >= 0 else reduced.node_voltage[node]
    for k in range(len(circuit.vsource_names)):
        r = reduced.position[circuit.n_nodes + k]
        if r >= 0:
            x[:, circuit.n_nodes + k] = u[r]
    if reduced.grounded_sources:
        states: dict[int, DeviceState] = {}

        def state(k: int) -> DeviceState:
            if k not in states:
                states[k] = device_state(reduced, reduced.stamps[k], u, vth[k], beta[k], "")
            return states[k]

        def node_voltage(node: int) -> np.ndarray:
            return np.zeros(n_samples) if node == circuit.ground else x[:, node]

        currents = grounded_source_currents(reduced, u, state, node_voltage)
        for j, k in enumerate(reduced.grounded_sources):
            x[:, circuit.n_nodes + k] = currents[j]
    return x


def fast_measures(study: Study, plan: FastPlan, sol: FastSolution) -> dict[str, np.ndarray]:
    """Every measure at the fast path's solution; same definitions as :func:`mcmatch.model.circuit.evaluate_measures`.
    Currents recorded at convergence are used where present (entries of unconverged samples are meaningless: those
    samples are solved again or marked failed)."""
    reduced = plan.reduced
    circuit = study.circuit
    u, vth, beta = sol.u, sol.vth, sol.beta
    n_samples = u.shape[1]
    states: dict[int, DeviceState] = {}
    cache: dict = {}

    def state(k: int) -> DeviceState:
        if k not in states:
            states[k] = device_state(reduced, reduced.stamps[k], u, vth[k], beta[k], need="")
        return states[k]

    def channel_current(k: int) -> np.ndarray:
        return sol.currents[k] if k in sol.currents else state(k).i

    def node_voltage(node: int) -> np.ndarray:
        r = reduced.position[node]
        if r >= 0:
            return u[r]
        return np.full(n_samples, reduced.node_voltage[circuit.n_nodes if node == circuit.ground else node])

    def source_currents() -> np.ndarray:
        if "vsrc" not in cache:
            cache["vsrc"] = grounded_source_currents(reduced, u, state, node_voltage)
        return cache["vsrc"]

    def current(name: str) -> np.ndarray:
        if name in circuit.mosfet_names:
            return channel_current(circuit.mosfet_names.index(name))
        if name in circuit.isource_names:
            return np.full(n_samples, circuit.isource_value[circuit.isource_names.index(name)])
        if name in circuit.vsource_names:
            k = circuit.vsource_names.index(name)
            r = reduced.position[circuit.n_nodes + k]
            if r >= 0:
                return u[r].copy()
            return source_currents()[reduced.grounded_sources.index(k)]
        k = circuit.resistor_names.index(name)
        g = circuit.resistor_conductance[k]
        return g * (node_voltage(circuit.resistor_a[k]) - node_voltage(circuit.resistor_b[k]))

    out: dict[str, np.ndarray] = {}
    for key, measure in study.measures.items():
        if measure.current is not None:
            out[key] = np.array(current(measure.current), dtype=float, copy=True)
        elif measure.voltage is not None:
            out[key] = np.array(node_voltage(circuit.node_index(measure.voltage)), dtype=float, copy=True)
        elif measure.ratio is not None:
            ideal = 1.0 if measure.ideal is None else measure.ideal
            with np.errstate(divide="ignore", invalid="ignore"):
                out[key] = current(measure.ratio[0]) / current(measure.ratio[1]) / ideal - 1.0
        elif measure.port_resistance is not None:  # every port at once (solve/ports.py)
            if "ports" not in cache:
                ports = [m.port_resistance for m in study.measures.values() if m.port_resistance is not None]
                cache["ports"] = reduced_port_resistances(reduced, u, vth, beta, ports, plan.u_nominal)
            out[key] = cache["ports"][measure.port_resistance]
        else:
            r = reduced.position[circuit.node_index(measure.resistance)]
            if r < 0:  # a node held by voltage sources: shorted for small signals
                out[key] = np.zeros(n_samples)
                continue
            # block-triangular Jacobian: the diagonal block of its inverse is the inverse of the diagonal block
            b, local = plan.block_of(int(r))
            block = plan.blocks[b]
            if ("jac", b) not in cache:
                _, cache[("jac", b)] = reduced_residual_jacobian(block.view, u, vth, beta, states=states)
            jac = cache[("jac", b)]
            rhs = np.zeros((len(block.unknowns), n_samples))
            rhs[local] = 1.0
            y, ok = block.linear.solve(jac, rhs)
            out[key] = np.where(ok, y[local], np.nan)
    return out


def grounded_source_currents(reduced: ReducedCircuit, u: np.ndarray, state, node_voltage) -> np.ndarray:
    """Currents [A] delivered by the voltage sources tied to gnd, (n_grounded, S), from KCL at the nodes they hold."""
    circuit = reduced.circuit
    fixed = {node: i for i, node in enumerate(reduced.fixed_nodes)}
    n_samples = u.shape[1]
    leave = np.zeros((len(fixed), n_samples))
    for k in range(len(circuit.mosfet_names)):
        d, s = int(circuit.drain[k]), int(circuit.source[k])
        if d not in fixed and s not in fixed:
            continue
        st = state(k)
        current = circuit.params.polarity[k] * (st.i + GMIN * st.vdiff)
        if d in fixed:
            leave[fixed[d]] += current
        if s in fixed:
            leave[fixed[s]] -= current
    for a, b, g in zip(circuit.resistor_a, circuit.resistor_b, circuit.resistor_conductance, strict=True):
        i = g * (node_voltage(a) - node_voltage(b))
        if int(a) in fixed:
            leave[fixed[int(a)]] += i
        if int(b) in fixed:
            leave[fixed[int(b)]] -= i
    for a, b, value in zip(circuit.isource_from, circuit.isource_to, circuit.isource_value, strict=True):
        if int(a) in fixed:
            leave[fixed[int(a)]] += value
        if int(b) in fixed:
            leave[fixed[int(b)]] -= value
    incidence = np.zeros((len(fixed), len(reduced.grounded_sources)))
    for j, k in enumerate(reduced.grounded_sources):
        plus, minus = int(circuit.vsource_plus[k]), int(circuit.vsource_minus[k])
        if plus in fixed:
            incidence[fixed[plus], j] += 1.0
        if minus in fixed:
            incidence[fixed[minus], j] -= 1.0
    return np.linalg.solve(incidence, leave)


def run_chunk(study: Study, start: int, stop: int) -> dict[str, np.ndarray]:
    """Draw and solve samples start <= i < stop; columns: sample, measures, converged, iterations, retried, dvth_*,
    dbeta_*. Drawn (pseudo-random or Sobol', as `study.sampling` says) and solved FAST_BATCH samples at a time, so
    the working arrays stay in cache."""
    tune_allocator()
    params = study.circuit.params
    nd = params.count
    n = max(0, stop - start)
    draws = normal_source(study.seed, start, 2 * nd, study.stream, study.sampling)
    spread = process_draws(study.variation, study.seed, start, study.stream, study.sampling)
    dvth, dbeta = np.empty((nd, n)), np.empty((nd, n))
    out: dict[str, np.ndarray] = {"sample": np.arange(start, stop, dtype=np.int64)}
    for lo in range(0, n, FAST_BATCH) if n else [0]:
        hi = min(n, lo + FAST_BATCH)
        z = draws.take(hi - lo)
        # mismatch_from_normals_t, written in place
        np.multiply(z[:nd], params.sigma_vth[:, None], out=dvth[:, lo:hi])
        np.multiply(z[nd:], params.sigma_beta[:, None], out=dbeta[:, lo:hi])
        if spread is not None:  # global process spread, variation "global" or "both"
            spread.apply_t(dvth[:, lo:hi], dbeta[:, lo:hi])
        part = solve_samples_t(study, dvth[:, lo:hi], dbeta[:, lo:hi])
        if lo == 0 and hi == n:
            out.update(part)
            break
        for key, values in part.items():
            if key not in out:
                out[key] = np.empty(n, dtype=values.dtype)
            out[key][lo:hi] = values
    for k, name in enumerate(params.names):
        out[f"dvth_{name}"] = dvth[k]
        out[f"dbeta_{name}"] = dbeta[k]
    return out


def chunk_ranges(samples: int, jobs: int, start: int = 0, size: int | None = None) -> list[tuple[int, int]]:
    """Contiguous ranges covering start..samples, whole random blocks each, a few per worker for balance.

    `size` forces the chunk length (then rounded up to a multiple of :data:`CHUNK_QUANTUM`).
    """
    if samples <= start:
        return []
    if size is None:
        per_chunk = max(BLOCK, int(np.ceil((samples - start) / max(1, 4 * jobs) / BLOCK)) * BLOCK)
        per_chunk = min(per_chunk, 8 * BLOCK)
    else:
        per_chunk = max(1, -(-int(size) // CHUNK_QUANTUM)) * CHUNK_QUANTUM
    return [(s, min(samples, s + per_chunk)) for s in range(start, samples, per_chunk)]


def usable_cores() -> int:
    """CPU cores this process may run on (its affinity mask where the system has one, else all)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def pool_pays(seconds_in_process: float, jobs: int | None = None) -> bool:
    """Whether `jobs` workers (default: all cores) would finish work that takes `seconds_in_process` [s] here sooner
    than this process alone, counting POOL_STARTUP_S to start them."""
    jobs = jobs or usable_cores()
    return jobs > 1 and seconds_in_process * (1.0 - 1.0 / jobs) > POOL_STARTUP_S


def resolve_jobs(jobs: int | None, samples: int, seconds_in_process: float | None = None) -> int:
    """Worker count: default all cores, but in-process where a pool does not pay: judged from the expected time in
    process [s] when known (:func:`pool_pays`), else from the sample count (POOL_THRESHOLD)."""
    cores = usable_cores()
    if jobs is None or jobs == 0:
        if seconds_in_process is not None:
            jobs = cores if pool_pays(seconds_in_process, cores) else 1
        else:
            jobs = cores if samples >= POOL_THRESHOLD else 1
    if jobs < 0:
        jobs = max(1, cores + 1 + jobs)
    return max(1, jobs)


def map_chunks(
    study: Study,
    ranges: list[tuple[int, int]],
    jobs: int,
    backend: str | None = None,
    task: Callable[[Study, int, int], Any] | None = None,
) -> Iterator[Any]:
    """Yield ``task(study, start, stop)`` (default :func:`run_chunk`) per range, in order; in-process for jobs == 1,
    else through joblib. `task` must pickle (a module-level function or a picklable object)."""
    task = run_chunk if task is None else task
    if jobs == 1 and backend is None:
        for start, stop in ranges:
            yield task(study, start, stop)
        return
    from joblib import Parallel, delayed, parallel_config

    if backend is None:  # local workers end when this process dies (kill -9 included)
        task = Watched(task, os.getpid())
    with parallel_config(backend=backend or "loky", n_jobs=jobs):
        parallel = Parallel(return_as="generator")
        yield from parallel(delayed(task)(study, start, stop) for start, stop in ranges)


@dataclass(frozen=True, eq=False)  # hashed by identity: joblib's dask backend puts tasks in a set
class ReducedChunk:
    """A picklable chunk task: solve the chunk, then hand its columns to `reduce` in the same worker, so only what
    `reduce` returns travels back."""

    reduce: Callable[[dict[str, np.ndarray]], Any]

    def __call__(self, study: Study, start: int, stop: int) -> Any:
        return self.reduce(run_chunk(study, start, stop))


def stream_chunks(
    study: Study,
    samples: int,
    jobs: int | None = None,
    backend: str | None = None,
    reduce: Callable[[dict[str, np.ndarray]], Any] | None = None,
    start: int = 0,
    chunk_size: int | None = None,
) -> Iterator[Any]:
    """The streaming Monte Carlo: yield, in sample order, each chunk of samples start..samples as its columns or as
    ``reduce(columns)`` computed where the chunk was solved. Memory stays bounded by a few chunks."""
    jobs = resolve_jobs(jobs, samples)
    ranges = chunk_ranges(samples, jobs, start=start, size=chunk_size)
    task = run_chunk if reduce is None else ReducedChunk(reduce)
    yield from map_chunks(study, ranges, jobs, backend, task)


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
