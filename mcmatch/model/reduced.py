"""The reduced system: the fast path of the Monte Carlo engine.

Nodes tied to gnd through voltage sources have known voltages, so they need no Newton unknown: the reduced system
keeps the other nodes and the branch currents of floating voltage sources, and the KCL rows of those nodes and the
constraint rows of floating sources. It is an exact elimination of the MNA system above (source_scale = 1, gmin =
GMIN), so both have the same solutions. Arrays here carry the sample axis LAST: u is (m, S), device parameters are
(n_devices, S), so every row is contiguous. Every operation is elementwise along the sample axis, and the shortcuts
taken when a whole batch is in one region give the same bits as the general formulas, so a sample's result never
depends on the batch it is solved in.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from mcmatch.model.circuit import GMIN, Circuit
from mcmatch.model.devices import DeviceState, mosfet_state
from mcmatch.model.technology import EKV


@dataclass(frozen=True)
class DeviceStamp:
    """Where MOSFET `index` enters a reduced system (or a view of some of its rows and columns).

    terminals: (drain, gate, source, bulk), each ``(u row, 0.0)`` for a free node or ``(-1, volts)`` for a fixed one
    (raw voltages, not polarity-mirrored). rows: (residual row of the view, +1 drain / -1 source) of the channel ends
    the view holds. columns: (Jacobian column of the view, the derivatives that sum into it, of "dgsb").
    """

    index: int
    polarity: float
    model: int
    terminals: tuple[tuple[int, float], ...]
    rows: tuple[tuple[int, float], ...]
    columns: tuple[tuple[int, tuple[str, ...]], ...]

    @property
    def need(self) -> str:
        """The derivatives the Jacobian uses, as letters of "dgsb"."""
        return "".join(name for _, names in self.columns for name in names)


@dataclass(frozen=True)
class ResistorStamp:
    """A resistor of conductance [S] between terminals a, b (as in DeviceStamp); rows and columns of the view with
    their signs (+1 for a, -1 for b)."""

    conductance: float
    terminals: tuple[tuple[int, float], tuple[int, float]]
    rows: tuple[tuple[int, float], ...]
    columns: tuple[tuple[int, float], ...]


@dataclass(frozen=True)
class SourceStamp:
    """A floating voltage source: branch-current unknown `branch`, node unknowns plus, minus (u rows); its KCL
    entries (row of the view, sign) for -I at plus and +I at minus, its constraint row (or -1 if outside the view),
    and the view's columns of the branch current and of plus, minus (-1 if outside)."""

    branch: int
    plus: int
    minus: int
    kcl: tuple[tuple[int, float], ...]
    row: int
    branch_column: int
    node_columns: tuple[tuple[int, float], ...]


@dataclass(frozen=True)
class ReducedCircuit:
    """A reduced system (see the section comment), or a view of some of its equations and unknowns.

    unknowns: full-MNA index of each reduced unknown (u row), m of them; equations: u row naming each residual row
    of the view (a node's KCL, or a floating source's constraint); columns: u row of each Jacobian column of the
    view. For the whole system both are range(m).
    """

    circuit: Circuit
    unknowns: tuple[int, ...]
    position: np.ndarray
    node_voltage: np.ndarray
    n_free_nodes: int
    equations: tuple[int, ...]
    columns: tuple[int, ...]
    stamps: tuple[DeviceStamp, ...]
    active: tuple[int, ...]
    constant: np.ndarray
    resistors: tuple[ResistorStamp, ...]
    sources: tuple[SourceStamp, ...]
    grounded_sources: tuple[int, ...]
    fixed_nodes: tuple[int, ...]
    pattern: frozenset[tuple[int, int]]

    @property
    def size(self) -> int:
        """Number of reduced unknowns m (u rows), whatever the view."""
        return len(self.unknowns)

    @property
    def voltage_rows(self) -> np.ndarray:
        """(columns,) True where the view's unknown is a node voltage (they come first)."""
        return np.array([c < self.n_free_nodes for c in self.columns], dtype=bool)


def fixed_node_voltages(circuit: Circuit) -> np.ndarray:
    """Voltage [V] of each node held against gnd by a chain of voltage sources, NaN elsewhere; gnd is the last entry."""
    volts = np.full(circuit.n_nodes + 1, np.nan)
    volts[circuit.n_nodes] = 0.0
    g = circuit.ground
    known = {g: 0.0}
    changed = True
    while changed:
        changed = False
        for plus, minus, value in zip(circuit.vsource_plus, circuit.vsource_minus, circuit.vsource_value, strict=True):
            if minus in known and plus not in known:
                known[plus] = known[minus] + value
                changed = True
            elif plus in known and minus not in known:
                known[minus] = known[plus] - value
                changed = True
    for node, value in known.items():
        volts[circuit.n_nodes if node == g else node] = value
    return volts


def reduce_circuit(circuit: Circuit) -> ReducedCircuit:
    """The whole reduced system of `circuit` (structure only; no sample data)."""
    nn = circuit.n_nodes
    node_volts = fixed_node_voltages(circuit)
    fixed = np.isfinite(node_volts[:nn])
    unknowns = [i for i in range(nn) if not fixed[i]]
    n_free = len(unknowns)
    grounded, floating = [], []
    for k, plus in enumerate(circuit.vsource_plus):
        (grounded if plus == circuit.ground or fixed[plus] else floating).append(k)
    unknowns += [nn + k for k in floating]
    position = np.full(circuit.n_unknowns + 1, -1, dtype=np.intp)
    position[unknowns] = np.arange(len(unknowns))
    m = len(unknowns)
    whole = tuple(range(m))

    def term(node: int) -> tuple[int, float]:
        if node == circuit.ground:
            return (-1, 0.0)
        return (-1, float(node_volts[node])) if fixed[node] else (int(position[node]), 0.0)

    stamps = []
    for k in range(len(circuit.mosfet_names)):
        terminals = tuple(term(int(n)) for n in (circuit.drain[k], circuit.gate[k], circuit.source[k], circuit.bulk[k]))
        rows = tuple((r, sign) for (r, _), sign in ((terminals[0], 1.0), (terminals[2], -1.0)) if r >= 0)
        has_body = circuit.params.model[k] == EKV or circuit.params.gamma[k] != 0.0
        columns: dict[int, list[str]] = {}
        for (r, _), name in zip(terminals, "dgsb", strict=True):
            if r >= 0 and (name != "b" or has_body):
                columns.setdefault(r, []).append(name)
        stamps.append(
            DeviceStamp(
                index=k,
                polarity=float(circuit.params.polarity[k]),
                model=int(circuit.params.model[k]),
                terminals=terminals,
                rows=rows,
                columns=tuple((c, tuple(v)) for c, v in columns.items()),
            )
        )
    constant = np.zeros(m)
    for a, b, value in zip(circuit.isource_from, circuit.isource_to, circuit.isource_value, strict=True):
        if a != circuit.ground and position[a] >= 0:
            constant[position[a]] += value
        if b != circuit.ground and position[b] >= 0:
            constant[position[b]] -= value
    resistors = []
    for a, b, g in zip(circuit.resistor_a, circuit.resistor_b, circuit.resistor_conductance, strict=True):
        ta, tb = term(int(a)), term(int(b))
        ends = tuple((t[0], sign) for t, sign in ((ta, 1.0), (tb, -1.0)) if t[0] >= 0)
        if ends:
            resistors.append(ResistorStamp(float(g), (ta, tb), ends, ends))
    sources = []
    for k in floating:
        branch = int(position[nn + k])
        plus, minus = int(position[circuit.vsource_plus[k]]), int(position[circuit.vsource_minus[k]])
        constant[branch] -= circuit.vsource_value[k]
        sources.append(
            SourceStamp(branch, plus, minus, ((plus, -1.0), (minus, 1.0)), branch, branch, ((plus, 1.0), (minus, -1.0)))
        )
    full = ReducedCircuit(
        circuit=circuit,
        unknowns=tuple(unknowns),
        position=position,
        node_voltage=node_volts,
        n_free_nodes=n_free,
        equations=whole,
        columns=whole,
        stamps=tuple(stamps),
        active=(),
        constant=constant,
        resistors=tuple(resistors),
        sources=tuple(sources),
        grounded_sources=tuple(grounded),
        fixed_nodes=tuple(i for i in range(nn) if not np.isnan(node_volts[i])),
        pattern=frozenset(),
    )
    return _with_structure(full)


def _with_structure(view: ReducedCircuit) -> ReducedCircuit:
    """Fill in `active` and the nonzero `pattern` of a view (every diagonal included, so each unknown has a pivot
    candidate in a square view)."""
    pattern: set[tuple[int, int]] = set()
    for st in view.stamps:
        pattern.update((r, c) for r, _ in st.rows for c, _ in st.columns)
    for rs in view.resistors:
        pattern.update((r, c) for r, _ in rs.rows for c, _ in rs.columns)
    for src in view.sources:
        if src.branch_column >= 0:
            pattern.update((r, src.branch_column) for r, _ in src.kcl)
        if src.row >= 0:
            pattern.update((src.row, c) for c, _ in src.node_columns)
    if len(view.equations) == len(view.columns):
        pattern.update((r, r) for r in range(len(view.columns)))
    active = tuple(st.index for st in view.stamps if st.rows)
    return replace(view, pattern=frozenset(pattern), active=active)


def restrict(reduced: ReducedCircuit, equations: list[int], columns: list[int]) -> ReducedCircuit:
    """A view of the whole reduced system: residual rows `equations` and Jacobian columns `columns` (u rows, in the
    order given). Terminals still read the whole u, so the other unknowns enter as known per-sample values."""
    row_of = {e: i for i, e in enumerate(equations)}
    col_of = {c: i for i, c in enumerate(columns)}

    def rows(entries):
        return tuple((row_of[r], sign) for r, sign in entries if r in row_of)

    stamps = tuple(
        replace(
            st,
            rows=rows(st.rows),
            columns=tuple((col_of[c], names) for c, names in st.columns if c in col_of),
        )
        for st in reduced.stamps
    )
    resistors = tuple(
        replace(rs, rows=rows(rs.rows), columns=tuple((col_of[c], sg) for c, sg in rs.columns if c in col_of))
        for rs in reduced.resistors
    )
    sources = tuple(
        replace(
            src,
            kcl=rows(src.kcl),
            row=row_of.get(src.row, -1),
            branch_column=col_of.get(src.branch_column, -1),
            node_columns=tuple((col_of[c], sg) for c, sg in src.node_columns if c in col_of),
        )
        for src in reduced.sources
    )
    view = replace(
        reduced,
        equations=tuple(equations),
        columns=tuple(columns),
        stamps=stamps,
        constant=np.array([reduced.constant[e] for e in equations]),
        resistors=resistors,
        sources=tuple(src for src in sources if src.kcl or src.row >= 0),
    )
    return _with_structure(view)


def reduce_unknowns(reduced: ReducedCircuit, x: np.ndarray) -> np.ndarray:
    """Reduced unknowns (m, S) from full MNA unknowns x (S, n)."""
    return np.ascontiguousarray(np.asarray(x)[:, list(reduced.unknowns)].T)


def _terminal(u: np.ndarray, terminal: tuple[int, float], polarity: float) -> np.ndarray | float:
    r, value = terminal
    if r < 0:
        return polarity * value
    return u[r] if polarity > 0 else -u[r]


def device_state(
    reduced: ReducedCircuit,
    stamp: DeviceStamp,
    u: np.ndarray,
    vth: np.ndarray,
    beta: np.ndarray,
    need: str = "dgsb",
) -> DeviceState:
    """Current and derivatives (those named in `need`, of "dgsb") of one MOSFET at reduced unknowns u (m, S);
    vth, beta: its (S,) parameters."""
    p = reduced.circuit.params
    k, pol = stamp.index, stamp.polarity
    vd, vg, vs, vb = (_terminal(u, t, pol) for t in stamp.terminals)
    return mosfet_state(
        stamp.model,
        vd,
        vg,
        vs,
        vb,
        vth,
        beta,
        float(p.lam[k]),
        float(p.gamma[k]),
        float(p.phi[k]),
        float(p.slope[k]),
        p.ut,
        need,
    )


DERIVATIVES = {"d": "di_dvd", "g": "di_dvg", "s": "di_dvs", "b": "di_dvb"}


def _accumulate(store: dict, key, value, sign: float = 1.0) -> None:
    if key in store:
        store[key] = store[key] + value if sign > 0 else store[key] - value
    else:
        store[key] = value if sign > 0 else -value


def reduced_residual_jacobian(
    reduced: ReducedCircuit,
    u: np.ndarray,
    vth: np.ndarray,
    beta: np.ndarray,
    gmin: float = GMIN,
    states: dict[int, DeviceState] | None = None,
) -> tuple[np.ndarray, dict[tuple[int, int], np.ndarray]]:
    """Residual F (rows, S) [A or V] of the view's equations and its Jacobian on the view's columns, as
    ``{(row, column): (S,) array}`` (structural zeros absent), at u (m, S) (all reduced unknowns); vth, beta: per
    device (S,) rows (indexable by device). Device states computed on the way are stored into `states`."""
    n_samples = u.shape[1]
    n_rows = len(reduced.equations)
    f = np.empty((n_rows, n_samples))
    f[:] = reduced.constant[:, None]
    jac: dict[tuple[int, int], np.ndarray] = {}
    for k in reduced.active:
        stamp = reduced.stamps[k]
        s = None if states is None else states.get(k)
        if s is None or any(getattr(s, DERIVATIVES[name]) is None for _, names in stamp.columns for name in names):
            s = device_state(reduced, stamp, u, vth[k], beta[k], stamp.need)
            if states is not None:
                states[k] = s
        leave = s.i + gmin * s.vdiff
        for r, sign in stamp.rows:
            if sign * stamp.polarity > 0:
                f[r] += leave
            else:
                f[r] -= leave
        for c, names in stamp.columns:
            value = None
            for name in names:
                term = getattr(s, DERIVATIVES[name])
                if name == "d":
                    term = term + gmin
                elif name == "s":
                    term = term - gmin
                value = term if value is None else value + term
            for r, sign in stamp.rows:
                _accumulate(jac, (r, c), value, sign)
    for rs in reduced.resistors:
        (ta, va), (tb, vb) = rs.terminals
        i = rs.conductance * ((u[ta] if ta >= 0 else va) - (u[tb] if tb >= 0 else vb))
        for r, sign in rs.rows:
            if sign > 0:
                f[r] += i
            else:
                f[r] -= i
            for c, csign in rs.columns:
                _accumulate(jac, (r, c), np.full(n_samples, rs.conductance), sign * csign)
    for src in reduced.sources:
        for r, sign in src.kcl:
            if sign > 0:
                f[r] += u[src.branch]
            else:
                f[r] -= u[src.branch]
            if src.branch_column >= 0:
                _accumulate(jac, (r, src.branch_column), np.full(n_samples, sign))
        if src.row >= 0:
            f[src.row] += u[src.plus] - u[src.minus]
            for c, sign in src.node_columns:
                _accumulate(jac, (src.row, c), np.full(n_samples, sign))
    if n_rows == len(reduced.columns):
        for r in range(n_rows):
            if (r, r) not in jac:
                jac[(r, r)] = np.zeros(n_samples)
    return f, jac
