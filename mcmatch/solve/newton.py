"""Batched damped Newton on arrays of shape (n_samples, n_unknowns), with a per-sample `converged` mask.

The system is a callable ``system(x, rows, source_scale, gmin) -> (F, J)`` evaluating the residual (S, n) and the
Jacobian (S, n, n) for the batch rows ``rows`` (indices into the caller's sample axis). Converged samples are frozen;
the others continue. A sample that never converges is reported in the mask, never hidden.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from mcmatch.errors import SolveError

System = Callable[..., tuple[np.ndarray, np.ndarray]]


@dataclass(frozen=True)
class NewtonOptions:
    """Solver settings, one place for all of them.

    max_iterations: Newton steps per attempt; max_step [V]: largest node-voltage change per step (the whole step is
    scaled down so the largest change equals it); voltage_tolerance [V] and relative_tolerance [1]: a sample has
    converged when a full, undamped step changes no node voltage by more than voltage_tolerance + relative_tolerance
    * |V| and no branch current by more than current_tolerance [A] + relative_tolerance * |I|.
    """

    max_iterations: int = 80
    max_step: float = 0.5
    voltage_tolerance: float = 1e-11
    current_tolerance: float = 1e-17
    relative_tolerance: float = 1e-12
    clip_each: bool = False  # newton() only: clip each node voltage's change to max_step on its own (no scaling)


SOLVER_DEFAULTS = NewtonOptions()


@dataclass(frozen=True)
class SolveResult:
    """x: unknowns (S, n); converged: (S,) bool; iterations: (S,) Newton steps taken; retried: (S,) bool."""

    x: np.ndarray
    converged: np.ndarray
    iterations: np.ndarray
    retried: np.ndarray


def solve_linear(jac: np.ndarray, rhs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Solve J y = rhs for a stack (S, n, n), (S, n). Returns (y, ok); singular or non-finite rows get ok = False."""
    finite = np.isfinite(jac).all(axis=(1, 2)) & np.isfinite(rhs).all(axis=1)
    if not finite.all():
        jac = np.where(finite[:, None, None], jac, np.eye(jac.shape[1]))
        rhs = np.where(finite[:, None], rhs, 0.0)
    try:
        y = np.linalg.solve(jac, rhs[..., None])[..., 0]
        ok = finite & np.isfinite(y).all(axis=1)
    except np.linalg.LinAlgError:
        y = np.zeros_like(rhs)
        ok = np.zeros(len(rhs), dtype=bool)
        for i in np.flatnonzero(finite):
            try:
                y[i] = np.linalg.solve(jac[i], rhs[i])
                ok[i] = np.isfinite(y[i]).all()
            except np.linalg.LinAlgError:
                ok[i] = False
    return y, ok


def newton(
    system: System,
    x0: np.ndarray,
    voltage_mask: np.ndarray,
    rows: np.ndarray | None = None,
    options: NewtonOptions = SOLVER_DEFAULTS,
    source_scale: float = 1.0,
    gmin: float | None = None,
) -> SolveResult:
    """Damped Newton from x0 (S, n) for the batch rows `rows` (default all)."""
    x = np.array(x0, dtype=float, copy=True)
    n_samples = x.shape[0]
    rows = np.arange(n_samples) if rows is None else np.asarray(rows)
    converged = np.zeros(n_samples, dtype=bool)
    iterations = np.zeros(n_samples, dtype=np.int64)
    active = np.arange(n_samples)
    extra = {} if gmin is None else {"gmin": gmin}
    vmask = np.asarray(voltage_mask, dtype=bool)
    for _ in range(options.max_iterations):
        if active.size == 0:
            break
        xa = x[active]
        f, jac = system(xa, rows[active], source_scale=source_scale, **extra)
        dx, ok = solve_linear(jac, -f)
        dv = np.abs(dx[:, vmask]).max(axis=1, initial=0.0)
        scale = np.minimum(1.0, options.max_step / np.maximum(dv, 1e-300))
        if options.clip_each:  # a node that runs away (reached only through GMIN) no longer stalls the others
            xa = xa + np.where(vmask, np.clip(dx, -options.max_step, options.max_step), dx)
        else:
            xa = xa + scale[:, None] * dx
        iterations[active] += 1
        size = np.abs(xa)
        tol = np.where(vmask, options.voltage_tolerance, options.current_tolerance) + options.relative_tolerance * size
        done = ok & (scale >= 1.0) & (np.abs(dx) <= tol).all(axis=1) & np.isfinite(xa).all(axis=1)
        x[active] = np.where(ok[:, None], xa, x[active])
        converged[active[done]] = True
        # a sample whose linear solve failed stops here: it is retried by the caller
        active = active[~done & ok]
    return SolveResult(x=x, converged=converged, iterations=iterations, retried=np.zeros(n_samples, dtype=bool))


def solve_batch(
    system: System,
    x0: np.ndarray,
    voltage_mask: np.ndarray,
    options: NewtonOptions = SOLVER_DEFAULTS,
) -> SolveResult:
    """Newton from x0; stragglers retried with heavier damping, then by source stepping from zero."""
    result = newton(system, x0, voltage_mask, options=options)
    x, converged, iterations = result.x, result.converged, result.iterations
    retried = ~converged
    if converged.all():
        return SolveResult(x, converged, iterations, retried)
    idx = np.flatnonzero(~converged)
    damped = replace(options, max_step=options.max_step / 5.0, max_iterations=options.max_iterations * 4)
    again = newton(system, x0[idx], voltage_mask, rows=idx, options=damped)
    x[idx] = np.where(again.converged[:, None], again.x, x[idx])
    converged[idx] = again.converged
    iterations[idx] += again.iterations
    idx = np.flatnonzero(~converged)
    if idx.size:
        stepped = source_stepping(system, np.zeros((idx.size, x0.shape[1])), voltage_mask, rows=idx, options=damped)
        x[idx] = np.where(stepped.converged[:, None], stepped.x, x[idx])
        converged[idx] = stepped.converged
        iterations[idx] += stepped.iterations
    return SolveResult(x, converged, iterations, retried)


def source_stepping(
    system: System,
    x0: np.ndarray,
    voltage_mask: np.ndarray,
    rows: np.ndarray | None = None,
    options: NewtonOptions = SOLVER_DEFAULTS,
    steps: int = 20,
) -> SolveResult:
    """Ramp every independent source from 0 to its value in `steps` stages, each solved from the previous one."""
    x = np.array(x0, dtype=float, copy=True)
    total = np.zeros(x.shape[0], dtype=np.int64)
    ok = np.ones(x.shape[0], dtype=bool)
    for scale in np.linspace(1.0 / steps, 1.0, steps):
        stage = newton(system, x, voltage_mask, rows=rows, options=options, source_scale=float(scale))
        x = np.where(stage.converged[:, None], stage.x, x)
        ok &= stage.converged
        total += stage.iterations
    return SolveResult(x, ok, total, np.ones(x.shape[0], dtype=bool))


def gmin_stepping(
    system: System,
    x0: np.ndarray,
    voltage_mask: np.ndarray,
    gmin_final: float,
    options: NewtonOptions = SOLVER_DEFAULTS,
) -> SolveResult:
    """Solve with a large conductance across every channel, then lower it decade by decade to `gmin_final` [S]."""
    x = np.array(x0, dtype=float, copy=True)
    ok = np.ones(x.shape[0], dtype=bool)
    total = np.zeros(x.shape[0], dtype=np.int64)
    for g in [*np.logspace(-3, np.log10(gmin_final), 19)[:-1], gmin_final]:
        stage = newton(system, x, voltage_mask, options=options, gmin=float(g))
        x = np.where(stage.converged[:, None], stage.x, x)
        ok &= stage.converged
        total += stage.iterations
    return SolveResult(x, ok, total, np.ones(x.shape[0], dtype=bool))


def solve_operating_point(
    system: System, n_unknowns: int, voltage_mask: np.ndarray, gmin_final: float, guess: np.ndarray | None = None
) -> np.ndarray:
    """Robust single operating point (1, n): plain damped Newton, then source stepping, then gmin stepping.

    Raises SolveError (carrying the last iterate) when every strategy fails.
    """
    x0 = np.zeros((1, n_unknowns)) if guess is None else np.asarray(guess, dtype=float).reshape(1, n_unknowns)
    attempts = [
        lambda: newton(system, x0, voltage_mask),
        lambda: newton(system, x0, voltage_mask, options=replace(SOLVER_DEFAULTS, clip_each=True, max_iterations=400)),
        lambda: newton(system, x0, voltage_mask, options=replace(SOLVER_DEFAULTS, max_step=0.05, max_iterations=2000)),
        lambda: source_stepping(system, np.zeros_like(x0), voltage_mask),
        lambda: gmin_stepping(system, np.zeros_like(x0), voltage_mask, gmin_final),
    ]
    last = None
    for attempt in attempts:
        last = attempt()
        if last.converged.all():
            return last.x
    raise SolveError("the operating point could not be found (Newton, source stepping and gmin stepping failed)", last)


# --------------------------------------------------------------------------------------------------------------------
# Fast path: sample axis last, sparse Jacobian with a pivot order fixed from the nominal point.
# --------------------------------------------------------------------------------------------------------------------

Sparse = dict[tuple[int, int], np.ndarray]


@dataclass(frozen=True)
class SparseElimination:
    """Gaussian elimination of J y = b for stacks of small sparse systems, J given as ``{(row, col): (S,) array}``.

    The pivot order (which equation eliminates which unknown) and the fill-in are fixed once, from a representative
    matrix (the nominal point's): partial pivoting there, then the same order for every sample. This replaces a
    stacked LAPACK call with a few elementwise array operations per nonzero. A sample whose pivot is zero or whose
    result is not finite is reported in the `ok` mask, so Newton stops it and the caller retries it the robust way.
    """

    size: int
    order: tuple[int, ...]
    eliminate: tuple[tuple[int, tuple[tuple[int, tuple[int, ...]], ...]], ...]
    back: tuple[tuple[int, tuple[int, ...]], ...]

    @staticmethod
    def build(pattern: frozenset[tuple[int, int]] | set[tuple[int, int]], nominal: np.ndarray) -> SparseElimination:
        """Pivot order and fill-in for matrices with nonzeros `pattern`, chosen by partial pivoting on `nominal`."""
        n = nominal.shape[0]
        a = np.array(nominal, dtype=float, copy=True)
        nz = set(pattern)
        remaining = list(range(n))
        order, eliminate = [], []
        for k in range(n):
            candidates = [e for e in remaining if (e, k) in nz]
            if not candidates:
                raise ValueError(f"structurally singular system: no equation holds unknown {k}")
            pivot = max(candidates, key=lambda e: (abs(a[e, k]), -e))
            order.append(pivot)
            remaining.remove(pivot)
            cols = tuple(j for j in range(k + 1, n) if (pivot, j) in nz)
            rows = []
            for e in remaining:
                if (e, k) not in nz:
                    continue
                if a[pivot, k] != 0.0:
                    a[e, k + 1 :] -= a[e, k] / a[pivot, k] * a[pivot, k + 1 :]
                nz.update((e, j) for j in cols)
                rows.append(e)
            eliminate.append((pivot, tuple((e, cols) for e in rows)))
        back = tuple((order[k], tuple(j for j in range(k + 1, n) if (order[k], j) in nz)) for k in range(n))
        return SparseElimination(size=n, order=tuple(order), eliminate=tuple(eliminate), back=back)

    def solve(self, jac: Sparse, rhs: np.ndarray, check: bool = True) -> tuple[np.ndarray, np.ndarray | None]:
        """y (n, S) with J y = rhs (n, S), and ok (S,): False where a pivot vanished or y is not finite (None when
        not `check`ed: a caller that reduces y anyway can test the reduction instead)."""
        if self.size == 1:
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                y = rhs / jac[(0, 0)]
            return y, np.isfinite(y[0]) if check else None
        a = dict(jac)
        b = list(rhs)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            for k, (pivot, rows) in enumerate(self.eliminate):
                p = a[(pivot, k)]
                for e, cols in rows:
                    factor = a[(e, k)] / p
                    for j in cols:
                        a[(e, j)] = a[(e, j)] - factor * a[(pivot, j)] if (e, j) in a else -(factor * a[(pivot, j)])
                    b[e] = b[e] - factor * b[pivot]
            y = np.empty_like(rhs)
            for k in range(self.size - 1, -1, -1):
                pivot, cols = self.back[k]
                s = b[pivot]
                for j in cols:
                    s = s - a[(pivot, j)] * y[j]
                y[k] = s / a[(pivot, k)]
        return y, np.isfinite(y).all(axis=0) if check else None


class ColumnSystem:
    """What :func:`newton_columns` needs from a batch: ``evaluate(u) -> (F (m, S), J sparse)``; ``keep(mask)``, which
    drops the samples (columns) that left the iteration from the batch's own per-sample data; and ``accept(done,
    finished, whole)``, told which samples of the last evaluation converged (local mask, their original column
    indices, whether the batch was still whole, and the final correction dx (m, S) applied to them), so it can
    keep what it computed there."""

    def evaluate(self, u: np.ndarray) -> tuple[np.ndarray, Sparse]:  # pragma: no cover - interface
        raise NotImplementedError

    def keep(self, mask: np.ndarray) -> None:  # pragma: no cover - interface
        raise NotImplementedError

    def accept(self, done: np.ndarray, finished: np.ndarray, whole: bool, dx: np.ndarray) -> None:
        """Default: nothing to keep."""


def newton_columns(
    system: ColumnSystem,
    u0: np.ndarray,
    voltage_rows: np.ndarray,
    linear: SparseElimination,
    options: NewtonOptions = SOLVER_DEFAULTS,
    scale: np.ndarray | None = None,
) -> SolveResult:
    """Damped Newton on u (m, S), the sample axis last: the steps and damping of :func:`newton`, and a stopping
    test that needs one evaluation less once convergence is quadratic.

    Let s_k be the largest ratio, over the unknowns, of the full correction dx_k to its tolerance (voltage_tolerance
    or current_tolerance, plus relative_tolerance * |u|, with |u| taken from `scale` (m,) [V or A], a typical
    magnitude per unknown such as the nominal point, when given, else from the iterate). A sample has converged, and
    u_k + dx_k is its result, when the step is undamped and either s_k <= 1 (the test of :func:`newton`) or the
    previous step was undamped too and theta / (1 - theta) * s_k <= 1 with theta = s_k / s_(k-1) < 1: that product
    bounds the error left in u_k + dx_k relative to the tolerance (Hairer and Wanner, Solving Ordinary Differential
    Equations II, 2nd ed., 1996, sec. IV.8). ``system.accept`` hears of u_k and dx_k, so it can carry what it
    evaluated at u_k along to first order. `voltage_rows` (m,) bool must be a leading block (node voltages first,
    then branch currents). Returns a SolveResult whose x is (m, S). Converged samples leave the batch
    (`system.keep`), so each sample's iterates depend only on its own data.
    """
    u = np.array(u0, dtype=float, copy=True)
    m, n_samples = u.shape
    out = u.copy()
    converged = np.zeros(n_samples, dtype=bool)
    iterations = np.zeros(n_samples, dtype=np.int64)
    if m == 0:
        return SolveResult(x=out, converged=~converged, iterations=iterations, retried=converged.copy())
    index = np.arange(n_samples)
    vmask = np.asarray(voltage_rows, dtype=bool)
    nv = int(np.count_nonzero(vmask))
    if not np.all(vmask[:nv]) or nv == 0:
        raise ValueError("node voltages must come first, and there must be one")
    absolute = np.where(vmask, options.voltage_tolerance, options.current_tolerance)
    inverse = None if scale is None else 1.0 / (absolute + options.relative_tolerance * np.abs(np.asarray(scale)))
    previous = None  # s_(k-1) per sample, NaN after a damped step
    for _ in range(options.max_iterations):
        if index.size == 0:
            break
        f, jac = system.evaluate(u)
        dx, _ = linear.solve(jac, -f, check=False)
        adx = np.abs(dx)
        if inverse is not None:
            ratio = adx[0] * inverse[0] if m == 1 else (adx * inverse[:, None]).max(axis=0)
        else:
            ratio = (adx / (absolute[:, None] + options.relative_tolerance * np.abs(u))).max(axis=0)
        with np.errstate(invalid="ignore"):
            ok = np.isfinite(ratio)  # a vanished pivot or an overflow shows here (NaN / inf propagate)
            dv = adx[0] if nv == 1 else adx[:nv].max(axis=0)
        if index.size == n_samples:
            iterations += 1
        else:
            iterations[index] += 1
        all_ok = bool(ok.all())
        if all_ok and np.max(dv) <= options.max_step:
            full = ok
            unew = u + dx
        else:
            with np.errstate(invalid="ignore"):
                full = ok & (dv <= options.max_step)
                unew = u + np.where(full, 1.0, options.max_step / np.maximum(dv, 1e-300)) * dx
        with np.errstate(invalid="ignore"):
            done = full & (ratio <= 1.0)
            if previous is not None:
                done |= full & (ratio < previous) & (ratio * ratio <= previous - ratio)
        n_done = int(np.count_nonzero(done))
        if n_done == 0 and all_ok:
            previous = ratio if full is ok else np.where(full, ratio, np.nan)
            u = unew
            continue
        whole = index.size == n_samples  # nothing has left yet: write whole rows instead of scattering
        if whole:
            out[...] = unew  # samples that stay are written again when they leave
            converged[:] = done
            finished = index
        else:
            finished = index[done]
            out[:, finished] = unew[:, done]
            converged[finished] = True
        if n_done:
            system.accept(done, finished, whole, dx)
        if not all_ok:  # a sample whose linear solve failed keeps its last good iterate and stops
            failed = ~ok
            out[:, index[failed]] = u[:, failed]
        if n_done == index.size:
            index = index[:0]
            break
        stay = ~done & ok if not all_ok else ~done
        u = unew[:, stay]
        previous = np.where(full, ratio, np.nan)[stay]
        index = np.flatnonzero(stay) if whole else index[stay]
        if index.size:
            system.keep(stay)
    if index.size:
        out[:, index] = u
    return SolveResult(x=out, converged=converged, iterations=iterations, retried=np.zeros(n_samples, dtype=bool))
