"""`mcmatch check CONFIG`: validate, solve the nominal point and show every device's operating point."""

from __future__ import annotations

import argparse
import json

from mcmatch.errors import ConfigError, SolveError

COLUMNS = (
    ("device", "name"),
    ("type", "type"),
    ("region", "region"),
    ("inversion (IC)", "inversion"),
    ("Vgs [V]", "vgs"),
    ("Vds [V]", "vds"),
    ("Vth [V]", "vth"),
    ("Vov [V]", "vov"),
    ("Vdsat [V]", "vdsat"),
    ("headroom [V]", "headroom"),
    ("Id", "id"),
    ("gm", "gm"),
    ("gds", "gds"),
    ("gm/Id [1/V]", "gm_id"),
)


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "check",
        help="validate a config, solve its nominal operating point and show every device's region and margins",
    )
    p.add_argument("config", help="circuit config (TOML)")
    p.add_argument("--corner", help="process corner to check at (default tt)")
    p.add_argument("--temperature", help="temperature, e.g. '125 degC' (default the config's)")
    p.add_argument("--supply", help="supply voltage, e.g. '1.62 V', applied to the supply source (default VDD)")
    p.add_argument("--netlist", action="store_true", help="also print the netlist (a template's expansion) as TOML")
    p.add_argument("--json", action="store_true", help="print the operating point as JSON instead of tables")
    p.add_argument("--corners", action="store_true", help="also show every device's headroom over the corner grid")
    p.set_defaults(execute=execute)


def _cell(point: dict, key: str) -> str:
    from mcmatch.units import format_quantity

    value = point[key]
    if key == "inversion":
        return f"{value} ({point['ic']:.3g})"
    if value is None:
        return "-"
    if isinstance(value, str):
        return value
    if key == "id":
        return format_quantity(value, "A", 4)
    if key in ("gm", "gds"):
        return format_quantity(value, "S", 4)
    if key == "gm_id":
        return f"{value:.3g}"
    return f"{value:.3f}"


def device_table(points: list[dict]) -> str:
    """The operating points as an aligned text table, one row per device."""
    rows = [[title for title, _ in COLUMNS]] + [[_cell(p, key) for _, key in COLUMNS] for p in points]
    widths = [max(len(row[i]) for row in rows) for i in range(len(COLUMNS))]
    lines = []
    for r, row in enumerate(rows):
        cells = [c.ljust(w) if i < 4 else c.rjust(w) for i, (c, w) in enumerate(zip(row, widths, strict=True))]
        lines.append("  ".join(cells).rstrip())
        if r == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


def _conditions(args: argparse.Namespace, config) -> tuple[str, float, tuple[str, float] | None]:
    from mcmatch.units import UnitError, parse_quantity

    corner = (args.corner or "tt").lower()
    try:
        config.technology.corner(corner)
    except KeyError:
        known = ", ".join(config.technology.corner_names)
        raise ConfigError(
            f"unknown corner '{args.corner}' (expected one of: {known})", "command line", "--corner"
        ) from None
    temperature = config.temperature
    if args.temperature is not None:
        try:
            temperature = parse_quantity(args.temperature, "K")
        except UnitError as exc:
            raise ConfigError(str(exc), "command line", "--temperature") from None
        if temperature <= 0:
            raise ConfigError("expected a temperature above absolute zero", "command line", "--temperature")
    supply = None
    if args.supply is not None:
        name = config.analysis.corners.supply_source if config.analysis.corners is not None else "VDD"
        if name not in {v.name for v in config.circuit.voltage_source}:
            raise ConfigError(f"the circuit has no supply source '{name}' to set", "command line", "--supply")
        try:
            supply = (name, parse_quantity(args.supply, "V"))
        except UnitError as exc:
            raise ConfigError(str(exc), "command line", "--supply") from None
    return corner, temperature, supply


def _runaway(config, partial: object) -> str:
    """Name the nodes the failed solve drove far beyond the supply, if the partial result shows any."""
    import numpy as np

    try:
        x = np.asarray(partial.x, dtype=float).reshape(-1)  # type: ignore[attr-defined]
    except (AttributeError, TypeError, ValueError):
        return ""
    nodes = config.circuit.nodes
    limit = max([abs(v.value) for v in config.circuit.voltage_source] + [0.0]) + 1.0
    far = [f"'{n}' ({x[i]:.3g} V)" for i, n in enumerate(nodes) if i < x.size and abs(x[i]) > limit]
    if not far:
        return ""
    return f" The last attempt left node{'s' if len(far) > 1 else ''} {', '.join(far)} far outside the rails."


def execute(args: argparse.Namespace) -> int:
    from mcmatch.cli.corner_table import compliance_table
    from mcmatch.config.loading import load_config
    from mcmatch.config.templates import netlist_toml
    from mcmatch.model.operating_point import LOW_HEADROOM, device_operating_points, warnings_for
    from mcmatch.run.loads import resolve_loads
    from mcmatch.run.multistart import other_operating_points, several_points_warning
    from mcmatch.run.study import nominal_measures, prepare
    from mcmatch.studies.compliance import corner_compliance
    from mcmatch.units import format_quantity

    config = resolve_loads(load_config(args.config))  # sized before anything is shown: --netlist prints them
    corner, temperature, supply = _conditions(args, config)
    try:
        study = prepare(config, corner=corner, temperature=temperature, supply=supply)
    except SolveError as exc:
        raise SolveError(
            f"{config.path}: no nominal operating point: {exc.message}.{_runaway(config, exc.partial)} Usual causes: "
            "a supply too low for the stacked devices, a current source driving a node that no device can carry the "
            "current away from, or an output held where no device can conduct its current",
            exc.partial,
        ) from None
    x = study.x_nominal
    points = device_operating_points(study.circuit, x)
    warnings = warnings_for(config, points, x)
    nominal = nominal_measures(study)
    nodes = {n: float(x[i]) for i, n in enumerate(study.circuit.nodes)}
    others = other_operating_points(study)
    if others:
        warnings.append(several_points_warning(nodes, others))
    corners = corner_compliance(config) if args.corners else None  # studies/compliance.py
    if args.json:
        document = {
            "title": config.title,
            "config": config.path,
            "corner": corner,
            "temperature": temperature,
            "supply": dict([supply]) if supply else None,
            "nodes": nodes,
            "devices": points,
            "measures": nominal,
            "warnings": warnings,
            "other_operating_points": others,
            **({"corners": corners} if corners is not None else {}),
        }
        print(json.dumps(document, indent=2))
        return 0
    template = f", template {config.circuit.template}" if config.circuit.template else ""
    print(f"{config.title}  ({config.path})")
    print(
        f"technology: {config.technology.name}; corner {corner}, {temperature - 273.15:.1f} degC"
        + (f", {supply[0]} = {supply[1]:g} V" if supply else "")
        + template
    )
    if args.netlist:
        print()
        print(netlist_toml(config.circuit))
    print()
    print("nodes [V]: " + "  ".join(f"{n} {v:.4f}" for n, v in nodes.items()))
    print()
    print("operating point (magnitudes; for pmos Vgs means Vsg, Vds means Vsd):")
    print(device_table(points))
    print()
    print("nominal measures:")
    for name, value in nominal.items():
        unit = config.measures[name].unit
        shown = f"{value:.6g}" if unit in ("1",) else format_quantity(value, unit, 6)
        print(f"  {name:>16} = {shown}" + (f"  ({value * 100:+.4f} %)" if unit == "1" else ""))
    print()
    if corners is not None:
        print("saturation headroom (Vds - Vdsat) at each corner's nominal point:")
        print(compliance_table(corners))
        print()
    if warnings:
        print(f"{len(warnings)} warning{'s' if len(warnings) > 1 else ''}:")
        for line in warnings:
            print(f"  warning: {line}")
    else:
        print(
            f"no warnings: every device conducts, every non-diode device is saturated with at least "
            f"{LOW_HEADROOM * 1e3:.0f} mV of headroom, every node lies within the supply rails, and solving from "
            "other starting voltages finds no other operating point"
        )
    return 0
