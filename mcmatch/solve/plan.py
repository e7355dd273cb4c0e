"""The fast path's solve plan: the reduced system split into diagonal blocks in block-triangular order, each with
its pivot order and a first-order predictor, fixed once at the nominal point.

Pure structure and arithmetic on a compiled circuit; nothing here knows of studies, draws or workers.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from mcmatch.config.schema import Measure
from mcmatch.model.circuit import Circuit
from mcmatch.model.reduced import (
    ReducedCircuit,
    device_state,
    reduce_circuit,
    reduce_unknowns,
    reduced_residual_jacobian,
    restrict,
)
from mcmatch.solve.newton import SparseElimination


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
    depends only on itself and earlier ones); x_nominal: the full MNA nominal unknowns (n,) [V, A]."""

    reduced: ReducedCircuit
    u_nominal: np.ndarray
    blocks: tuple[Block, ...]
    x_nominal: np.ndarray

    def block_of(self, row: int) -> tuple[int, int]:
        """(block index, local column) of u row `row`."""
        for b, block in enumerate(self.blocks):
            if row in block.unknowns:
                return b, block.unknowns.index(row)
        raise KeyError(row)


def block_order(m: int, pattern: set[tuple[int, int]]) -> list[tuple[list[int], list[int]]]:
    """The diagonal blocks of a square system with nonzeros `pattern` ((equation, unknown) pairs), as (unknowns,
    equations) sorted lists, in a solving order: each block needs only itself and earlier blocks (block-triangular
    form).

    A maximum bipartite matching pairs each unknown with an equation; the strongly connected components of
    "unknown k needs unknown j" (its equation has a nonzero in column j) are the blocks. They do not depend on
    which perfect matching is found. Blocks are ordered by dependency level (a block comes one level after the
    deepest block it needs), within a level by their first unknown. ValueError if the system is structurally
    singular. A single unknown is its own block: no graph to search (and no scipy import, 0.2-0.3 s, for the
    simple mirrors and banks, whose reduced systems have one unknown)."""
    if m == 1:
        if (0, 0) not in pattern:
            raise ValueError("structurally singular system: no equation left for unknown 0")
        return [([0], [0])]
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components, maximum_bipartite_matching

    entries = np.array(sorted(pattern), dtype=np.intp).reshape(-1, 2)
    graph = csr_matrix((np.ones(len(entries)), (entries[:, 0], entries[:, 1])), shape=(m, m))
    equation = maximum_bipartite_matching(graph, perm_type="row")  # equation matched to each unknown
    if (equation < 0).any():
        raise ValueError(f"structurally singular system: no equation left for unknown {int(np.argmin(equation))}")
    needs = graph[equation]  # row k: the unknowns that unknown k's equation reads
    count, labels = connected_components(needs, directed=True, connection="strong")
    members = [np.flatnonzero(labels == c).tolist() for c in range(count)]
    requires = [set(labels[needs[cols].indices].tolist()) - {c} for c, cols in enumerate(members)]
    level: dict[int, int] = {}

    def depth(c: int) -> int:  # the condensation is acyclic; its depth is at most the number of blocks
        if c not in level:
            level[c] = 1 + max((depth(d) for d in requires[c]), default=-1)
        return level[c]

    ordered = sorted(members, key=lambda cols: (depth(int(labels[cols[0]])), cols[0]))
    return [(cols, sorted(int(equation[k]) for k in cols)) for cols in ordered]


def build_fast_plan(circuit: Circuit, x_nominal: np.ndarray, measures: Mapping[str, Measure]) -> FastPlan:
    """Reduce `circuit`, split it into blocks and fix pivot orders and predictors at its nominal unknowns
    `x_nominal` (n,) [V, A]. The blocks record, at convergence, the currents of the MOSFETs that `measures` read."""
    reduced = reduce_circuit(circuit)
    m = reduced.size
    p = circuit.params
    u_nom = reduce_unknowns(reduced, x_nominal[None, :])
    if m == 0:
        return FastPlan(reduced=reduced, u_nominal=np.zeros(0), blocks=(), x_nominal=x_nominal)
    vth, beta = p.vth[:, None], p.beta[:, None]
    _, jac = reduced_residual_jacobian(reduced, u_nom, vth, beta)
    dense = np.zeros((m, m))
    for (r, c), v in jac.items():
        dense[r, c] = float(np.asarray(v).reshape(-1)[0])
    true_pattern = {(r, c) for (r, c) in reduced.pattern if r != c or dense[r, c] != 0.0}
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
    for measure in measures.values():
        measured.update([measure.current] if measure.current else measure.ratio or ())
    views = []
    for cols, eqs in block_order(m, true_pattern):
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
    return FastPlan(reduced=reduced, u_nominal=u_nom[:, 0].copy(), blocks=tuple(blocks), x_nominal=x_nominal)


def check_plan(plan: FastPlan) -> FastPlan:
    """`plan`, or ValueError if a block is one the block solver cannot order: it needs a node voltage, and its
    node voltages first (a floating voltage source's block may break that)."""
    for block in plan.blocks:
        rows = np.asarray(block.view.voltage_rows, dtype=bool)
        count = int(rows.sum())
        if count == 0 or not rows[:count].all():
            raise ValueError("a block the fast path cannot order (e.g. a floating voltage source)")
    return plan
