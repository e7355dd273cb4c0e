"""The fast path's solve plan: block-triangular order of the reduced system, checked against first principles."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from mcmatch.solve.plan import block_order


def reachable(adjacency: np.ndarray) -> np.ndarray:
    """Transitive-reflexive closure of a boolean adjacency matrix by repeated squaring (no graph library)."""
    closure = adjacency | np.eye(len(adjacency), dtype=bool)
    while True:
        wider = closure | ((closure.astype(np.int64) @ closure.astype(np.int64)) > 0)
        if (wider == closure).all():
            return closure
        closure = wider


def random_pattern(rng: np.random.Generator, m: int, density: float) -> tuple[set[tuple[int, int]], np.ndarray]:
    """A structurally nonsingular pattern: a planted perfect matching (equation rows[k] for unknown k, a random
    permutation) plus random entries; returns the pattern and the planted rows."""
    rows = rng.permutation(m)
    pattern = {(int(rows[k]), k) for k in range(m)}
    extra = rng.random((m, m)) < density
    pattern.update((int(r), int(c)) for r, c in zip(*np.nonzero(extra), strict=True))
    return pattern, rows


@pytest.mark.parametrize("seed", range(40))
def test_blocks_are_the_finest_block_triangular_form(seed):
    # Duff, Erisman, Reid, "Direct Methods for Sparse Matrices" (1986), block triangular form: with a perfect matching
    # fixed, the diagonal blocks are the strongly connected components of the directed graph "unknown k needs unknown
    # j" (Tarjan, "Depth-first search and linear graph algorithms", SIAM J. Computing 1972), and they do not depend on
    # the matching. Checked by brute force: the closure of the graph built from the PLANTED matching, which the code
    # under test never sees (it finds its own).
    rng = np.random.default_rng(seed)
    m = int(rng.integers(1, 25))
    pattern, planted = random_pattern(rng, m, float(rng.choice([0.02, 0.08, 0.2])))
    blocks = block_order(m, pattern)
    unknowns = [k for cols, _ in blocks for k in cols]
    equations = [r for _, eqs in blocks for r in eqs]
    assert sorted(unknowns) == list(range(m)) and sorted(equations) == list(range(m))
    # block-triangular: a block's equations read only unknowns of that block or of earlier ones
    block_of = {k: b for b, (cols, _) in enumerate(blocks) for k in cols}
    for b, (_, eqs) in enumerate(blocks):
        assert all(block_of[c] <= b for r, c in pattern if r in eqs)
    # finest: two unknowns share a block exactly when each needs the other, directly or not
    matrix = np.zeros((m, m), dtype=bool)
    for r, c in pattern:
        matrix[r, c] = True
    assert all(len(eqs) == len(cols) for cols, eqs in blocks)
    closure = reachable(matrix[planted])  # row k: what the planted equation of unknown k reads
    mutual = closure & closure.T
    for k in range(m):
        assert set(np.flatnonzero(mutual[k]).tolist()) == set(blocks[block_of[k]][0])


def test_structurally_singular_system_is_refused():
    # Common practice, no source: two equations that both read only unknown 0 leave unknown 1 without an equation
    with pytest.raises(ValueError, match="structurally singular"):
        block_order(2, {(0, 0), (1, 0)})


def test_one_unknown_is_its_own_block():
    # Common practice, no source: a one-unknown system (the reduced simple mirror and bank) is one 1x1 block, found
    # without the graph library; an unknown that no equation reads is still refused
    assert block_order(1, {(0, 0)}) == [([0], [0])]
    with pytest.raises(ValueError, match="structurally singular"):
        block_order(1, set())


def test_independent_blocks_follow_their_first_unknown():
    # Common practice, no source: a mirror bank's outputs each need the reference node only; they come after it, in
    # the order of their unknowns, so the order (and with it every sample's bits) does not depend on the graph library
    pattern = {(0, 0), (1, 1), (2, 2), (3, 3), (3, 0), (2, 0), (1, 0)}
    assert block_order(4, pattern) == [([0], [0]), ([1], [1]), ([2], [2]), ([3], [3])]


def test_both_solved_points_give_the_same_measures():
    # Common practice, no source: the fast path's reduced point (KCL for the grounded sources' currents, the
    # diagonal block of the Jacobian for a node's resistance) and the full MNA point (branch-current unknowns, the
    # dense Jacobian) are two views of one solution, so the one evaluator must give the same numbers from both.
    # Circuit invented for the test: a diode, a degenerated output into a resistor, a floating voltage source.
    from mcmatch.config.loading import config_from_dict
    from mcmatch.config.schema import Measure
    from mcmatch.run.study import fast_plan, prepare
    from mcmatch.solve.fast import expand_unknowns, fast_newton
    from mcmatch.solve.measures import ReducedPoint, evaluate_measures
    from mcmatch.solve.reference import solve_reference

    nmos = {"type": "nmos", "w": "4 um", "l": "2 um"}
    raw = {
        "technology": "technologies/demo180.toml",
        "circuit": {
            "mosfet": [
                {"name": "M1", "drain": "a", "gate": "a", "source": "gnd", **nmos},
                {"name": "M2", "drain": "b", "gate": "a", "source": "s", **nmos},
            ],
            "current_source": [{"name": "I1", "from": "vdd", "to": "a", "value": "10 uA"}],
            "resistor": [
                {"name": "R1", "a": "s", "b": "gnd", "value": "5 kohm"},
                {"name": "R2", "a": "b", "b": "c", "value": "20 kohm"},
            ],
            "voltage_source": [
                {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"},
                {"name": "VF", "plus": "vdd", "minus": "c", "value": "0.5 V"},
            ],
        },
    }
    config = config_from_dict(raw, Path(__file__).resolve().parents[1] / "configs" / "demo.toml")
    measures = {f"i_{n}": Measure(current=n) for n in ("M1", "M2", "I1", "R1", "R2", "VDD", "VF")}
    measures |= {f"v_{n}": Measure(voltage=n) for n in config.circuit.nodes}
    measures |= {f"r_{n}": Measure(resistance=n) for n in config.circuit.nodes}
    measures["ratio"] = Measure(ratio=("M2", "M1"), ideal=1.0)
    study = prepare(config.model_copy(update={"measures": measures}))
    plan = fast_plan(study)
    assert plan is not None and len(plan.blocks) > 1  # the fast path, with a block-triangular split, is under test
    rng = np.random.default_rng(7)
    p = study.circuit.params
    dvth, dbeta = rng.normal(0, 5e-3, (p.count, 64)), rng.normal(0, 0.01, (p.count, 64))
    sol = fast_newton(plan, dvth, dbeta)
    assert sol.converged.all()
    fast = evaluate_measures(study.circuit, measures, ReducedPoint(plan, sol.u, sol.vth, sol.beta, sol.currents))
    # the MNA Newton, started at the fast solution, finds the branch currents from its own equations
    start = expand_unknowns(plan, sol.u, sol.vth, sol.beta)
    full = solve_reference(study.circuit, measures, study.x_nominal, dvth.T, dbeta.T, x0=start)
    assert full["converged"].all()
    for key in measures:
        np.testing.assert_allclose(fast[key], full[key], rtol=1e-9, atol=1e-15, err_msg=key)
