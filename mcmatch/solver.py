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
