"""Semantic checks of a validated config across its tables: netlist, measures, specs, analysis, placement.

Each raises :class:`~mcmatch.errors.ConfigError` naming the file, the key path and what was expected.
"""

from __future__ import annotations

import difflib

from mcmatch.config.analysis import Analysis, Placement, SizingStudy
from mcmatch.config.schema import AUTO, GROUND, RESERVED_COLUMNS, Limits, Measure, Netlist, Spec, Technology, terminals
from mcmatch.errors import ConfigError
from mcmatch.units import UnitError, parse_quantity


def check_netlist(netlist: Netlist, technology: Technology, file: str) -> None:
    """Names unique, models present, every node DC-connected to gnd, no loop of voltage sources."""
    if not netlist.mosfet:
        raise ConfigError("the circuit has no MOSFET; at least one is needed", file=file, key="circuit.mosfet")
    seen: dict[str, str] = {}
    for kind in ("mosfet", "current_source", "voltage_source", "resistor"):
        for i, element in enumerate(getattr(netlist, kind)):
            path = f"circuit.{kind}[{i}].name"
            if element.name in seen:
                raise ConfigError(
                    f"duplicate name '{element.name}' (already used at {seen[element.name]}); names must be unique",
                    file=file,
                    key=path,
                )
            if element.name == GROUND:
                raise ConfigError("'gnd' is the ground node, not a device name", file=file, key=path)
            seen[element.name] = path
    nodes = set(netlist.nodes)
    clash = nodes & set(seen)
    if clash:
        name = sorted(clash)[0]
        raise ConfigError(f"'{name}' is used both as a node and as a device name", file=file, key=seen[name])
    for i, m in enumerate(netlist.mosfet):
        if getattr(technology, m.type) is None:
            raise ConfigError(
                f"the technology has no [{m.type}] table but this device is {m.type}",
                file=file,
                key=f"circuit.mosfet[{i}].type",
            )
        if m.drain == m.source:
            raise ConfigError("drain and source are the same node", file=file, key=f"circuit.mosfet[{i}].source")
    for i, r in enumerate(netlist.resistor):
        if r.a == r.b:
            raise ConfigError("both ends on the same node", file=file, key=f"circuit.resistor[{i}].b")
    sized = set(netlist.load_sizing.loads) if netlist.load_sizing is not None else set()
    for i, c in enumerate(netlist.current_source):
        if c.from_ == c.to:
            raise ConfigError("both ends on the same node", file=file, key=f"circuit.current_source[{i}].to")
        if c.value == AUTO and c.name not in sized:
            raise ConfigError(
                f"expected a quantity in A such as '10 uA', got '{AUTO}' (only a template's current loads are sized "
                "automatically)",
                file=file,
                key=f"circuit.current_source[{i}].value",
            )

    # loops of voltage sources, by union-find over their terminals
    parent: dict[str, str] = {}

    def find(x: str) -> str:
        parent.setdefault(x, x)
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for i, v in enumerate(netlist.voltage_source):
        a, b = find(v.plus), find(v.minus)
        if a == b:
            raise ConfigError(
                "this voltage source closes a loop of voltage sources (its two nodes are already fixed against each "
                "other); remove it or put a resistor in the loop",
                file=file,
                key=f"circuit.voltage_source[{i}]",
            )
        parent[a] = b

    # DC path to gnd: through resistors, voltage sources and MOSFET channels (not gates, not current sources)
    adjacency: dict[str, set[str]] = {n: set() for n in [*nodes, GROUND]}

    def link(a: str, b: str) -> None:
        adjacency[a].add(b)
        adjacency[b].add(a)

    for r in netlist.resistor:
        link(r.a, r.b)
    for v in netlist.voltage_source:
        link(v.plus, v.minus)
    for m in netlist.mosfet:
        link(m.drain, m.source)
    reached = {GROUND}
    stack = [GROUND]
    while stack:
        for nxt in adjacency[stack.pop()]:
            if nxt not in reached:
                reached.add(nxt)
                stack.append(nxt)
    for node in netlist.nodes:
        if node not in reached:
            where = _first_use(netlist, node)
            raise ConfigError(
                f"node '{node}' has no DC path to gnd (only gates or current sources reach it)", file=file, key=where
            )


_TERMINAL_KEYS = {
    "mosfet": ("drain", "gate", "source", "bulk"),
    "current_source": ("from", "to"),
    "voltage_source": ("plus", "minus"),
    "resistor": ("a", "b"),
}


def _first_use(netlist: Netlist, node: str) -> str:
    for kind in ("mosfet", "current_source", "voltage_source", "resistor"):
        for i, element in enumerate(getattr(netlist, kind)):
            for key, name in zip(_TERMINAL_KEYS[kind], terminals(element), strict=True):
                if name == node:
                    return f"circuit.{kind}[{i}].{key}"
    return "circuit"


def check_measures(measures: dict[str, Measure], netlist: Netlist, file: str) -> None:
    names = {e.name for e in netlist.elements}
    nodes = set(netlist.nodes)
    sources = {v.name for v in netlist.voltage_source}
    for key, measure in measures.items():
        path = f"measures.{key}"
        if key in RESERVED_COLUMNS or key.startswith(("dvth_", "dbeta_")):
            raise ConfigError(
                f"'{key}' is a column the sample table already has; name the measure otherwise", file, path
            )
        if measure.current is not None and measure.current not in names:
            raise ConfigError(_unknown("device", measure.current, names), file=file, key=f"{path}.current")
        if measure.ratio is not None:
            for i, name in enumerate(measure.ratio):
                if name not in names:
                    raise ConfigError(_unknown("device", name, names), file=file, key=f"{path}.ratio[{i}]")
        if measure.voltage is not None and measure.voltage not in nodes | {GROUND}:
            raise ConfigError(_unknown("node", measure.voltage, nodes), file=file, key=f"{path}.voltage")
        if measure.resistance is not None and measure.resistance not in nodes:
            raise ConfigError(_unknown("node", measure.resistance, nodes), file=file, key=f"{path}.resistance")
        if measure.port_resistance is not None and measure.port_resistance not in sources:
            what = _unknown("voltage source", measure.port_resistance, sources)
            raise ConfigError(what, file=file, key=f"{path}.port_resistance")


def _unknown(kind: str, name: str, known: set[str]) -> str:
    guess = difflib.get_close_matches(name, sorted(known), n=1)
    hint = f"; did you mean '{guess[0]}'?" if guess else ""
    return f"unknown {kind} '{name}'{hint} (expected one of: {', '.join(sorted(known))})"


def parse_specs(specs: dict[str, Spec], measures: dict[str, Measure], file: str) -> dict[str, Limits]:
    out: dict[str, Limits] = {}
    for key, spec in specs.items():
        if key not in measures:
            raise ConfigError(_unknown("measure", key, set(measures)), file=file, key=f"specs.{key}")
        unit = measures[key].unit
        bounds: dict[str, float | None] = {}
        for side in ("min", "max"):
            value = getattr(spec, side)
            if value is None:
                bounds[side] = None
                continue
            try:
                bounds[side] = parse_quantity(value, unit)
            except UnitError as exc:
                raise ConfigError(str(exc), file=file, key=f"specs.{key}.{side}") from None
        if bounds["min"] is not None and bounds["max"] is not None and bounds["min"] > bounds["max"]:
            raise ConfigError("min is above max", file=file, key=f"specs.{key}")
        out[key] = Limits(**bounds)
    return out


def check_analysis(analysis: Analysis, netlist: Netlist, technology: Technology, file: str) -> None:
    if analysis.corners is not None:
        for i, name in enumerate(analysis.corners.process or []):
            try:
                technology.corner(name)
            except KeyError:
                known = set(technology.corner_names)
                raise ConfigError(
                    _unknown("corner", name, known), file=file, key=f"analysis.corners.process[{i}]"
                ) from None
        if analysis.corners.supply is not None or analysis.corners.supply_scale is not None:
            sources = {v.name for v in netlist.voltage_source}
            if analysis.corners.supply_source not in sources:
                raise ConfigError(
                    _unknown("voltage source", analysis.corners.supply_source, sources),
                    file=file,
                    key="analysis.corners.supply_source",
                )
    if analysis.sizing is not None:
        check_sizing(analysis.sizing, netlist, file)
    if analysis.area is not None:
        mosfets = {m.name for m in netlist.mosfet}
        for i, name in enumerate(analysis.area.devices):
            if name not in mosfets:
                raise ConfigError(_unknown("MOSFET", name, mosfets), file=file, key=f"analysis.area.devices[{i}]")


def check_sizing(sizing: SizingStudy, netlist: Netlist, file: str) -> None:
    """Sizing groups name MOSFETs, each in at most one group."""
    mosfets = {m.name for m in netlist.mosfet}
    seen: dict[str, str] = {}
    for group, names in (sizing.groups or {}).items():
        if not names:
            key = f"analysis.sizing.groups.{group}"
            raise ConfigError("a sizing group needs at least one MOSFET", file=file, key=key)
        for i, name in enumerate(names):
            key = f"analysis.sizing.groups.{group}[{i}]"
            if name not in mosfets:
                raise ConfigError(_unknown("MOSFET", name, mosfets), file=file, key=key)
            if name in seen:
                raise ConfigError(f"'{name}' is already in group '{seen[name]}'", file=file, key=key)
            seen[name] = group


def check_placement(placement: Placement | None, netlist: Netlist, file: str) -> None:
    """Placement letters name MOSFETs of the netlist."""
    if placement is None:
        return
    mosfets = {m.name for m in netlist.mosfet}
    for letter, name in placement.devices.items():
        if name not in mosfets:
            raise ConfigError(_unknown("MOSFET", name, mosfets), file=file, key=f"placement.devices.{letter}")


def check_spec_references(analysis: Analysis, specs: dict[str, Limits], file: str) -> None:
    """Names in [analysis.high_sigma] and [analysis.bank] must be spec'd measures; sizing needs specs."""
    if analysis.sizing is not None and not specs:
        raise ConfigError(
            "sizing aims at the joint yield of the specs; add [specs] on the measures the design must meet",
            file=file,
            key="analysis.sizing",
        )
    for table in ("high_sigma", "bank"):
        study = getattr(analysis, table, None)
        if study is None:
            continue
        if table == "bank" and not specs:
            raise ConfigError(
                "a bank yield needs specs on its channels; add a [specs] entry per channel measure",
                file=file,
                key="analysis.bank",
            )
        for i, name in enumerate(getattr(study, "measures", None) or []):
            if name not in specs:
                raise ConfigError(
                    f"'{name}' is not a spec'd measure (expected one of: {', '.join(specs) or 'none'})",
                    file=file,
                    key=f"analysis.{table}.measures[{i}]",
                )
