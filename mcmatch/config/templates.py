"""Built-in circuit templates: named bias topologies expanded into the ordinary netlist.

A config selects one with ``[circuit] template = "..."`` plus plain-word parameters (unit W and L, reference current,
supply, output voltage(s), ratios, cascode bias). :func:`expand_template` turns them into the same element lists an
explicit ``[[circuit.mosfet]]`` netlist gives, so every later stage (solve, Monte Carlo, report) sees the expansion
and nothing else. Ratios are built from unit devices: a ratio of 3/2 gives a reference of 2 units and an output of 3.

Naming, shared by every template: reference device ``MREF`` and its gate node ``nb``; outputs ``MOUT1`` ... driving
nodes ``out1`` ...; reference current ``IREF``; supply ``VDD`` on node ``vdd``; output voltage sources ``VOUT1`` ...
(or load current sources ``ILOAD1`` ... with ``output_load = "current"``, sized by the run layer unless
``load_current`` is given: expansion never solves). A pmos template is the mirror image: its
sources sit at ``vdd`` and its reference current flows out of ``nb`` to ``gnd``.

Default measures: ``i_out<k>`` (output current [A]), ``err<k>`` (ratio error against the ideal ratio [1]),
``r_out<k>`` (output resistance [ohm]: the port resistance seen by ``VOUT<k>``), ``v_nb`` and ``r_nb`` (voltage [V]
and small-signal resistance [ohm] of node ``nb``). With a current load the output current is forced, so ``v_out<k>``
(output voltage) replaces ``i_out<k>`` and ``err<k>``, and ``r_out<k>`` is the node resistance of ``out<k>``.
Measures given in the config override these by name.
"""

from __future__ import annotations

import difflib
from collections.abc import Callable
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

from pydantic import ValidationError

from mcmatch.config.loading import validation_to_config_error
from mcmatch.config.schema import AUTO, GROUND, LoadSizing, Measure, Netlist
from mcmatch.config.topologies import (
    ELEMENT_KINDS,
    SUPPLY_NODE,
    BankParameters,
    DegeneratedParameters,
    MirrorParameters,
    OutputParameters,
    ParameterError,
    ReferenceParameters,
    TemplateParameters,
    WideSwingParameters,
    _Builder,
    _cascode,
    _degenerated,
    _diode_reference,
    _improved_wilson,
    _simple,
    _wide_swing,
    _wilson,
)
from mcmatch.errors import ConfigError
from mcmatch.units import format_quantity


@dataclass(frozen=True)
class Template:
    """A built-in topology: its name, a one-line description, its parameter model and its netlist builder."""

    name: str
    summary: str
    parameters: type[TemplateParameters]
    build: Callable[[_Builder, Any], None]
    notes: str = ""


TEMPLATES: dict[str, Template] = {
    t.name: t
    for t in (
        Template(
            "diode_reference",
            "current-fed diode-connected reference: the gate voltage a reference current makes",
            ReferenceParameters,
            _diode_reference,
        ),
        Template(
            "simple_mirror",
            "simple current mirror: one output of `ratio` times the reference, built from unit devices",
            MirrorParameters,
            _simple,
            "output resistance 1/gds; needs the output above Vov",
        ),
        Template(
            "cascode_mirror",
            "cascode mirror: stacked diodes bias a cascode device over each mirror device",
            MirrorParameters,
            _cascode,
            "output resistance about gm ro^2; needs the output above Vt + 2 Vov",
        ),
        Template(
            "wide_swing_cascode",
            "wide-swing (low-voltage) cascode mirror with its bias branch (MBIAS, IBIAS) or a given cascode bias",
            WideSwingParameters,
            _wide_swing,
            "cascode output resistance down to an output of about 2 Vov",
        ),
        Template(
            "wilson_mirror",
            "Wilson mirror: feedback through the output device raises the output resistance",
            MirrorParameters,
            _wilson,
            "the reference device's Vds differs from MFB's: a small systematic error remains",
        ),
        Template(
            "improved_wilson_mirror",
            "improved Wilson mirror: an extra diode (MEQ) equalises the drain voltages of MREF and MFB",
            MirrorParameters,
            _improved_wilson,
        ),
        Template(
            "degenerated_mirror",
            "source-degenerated mirror: resistors under the devices cut the threshold mismatch's effect",
            DegeneratedParameters,
            _degenerated,
        ),
        Template(
            "mirror_bank",
            "multi-output bank: one reference distributed to K outputs, each with its own ratio",
            BankParameters,
            _simple,
            "bias distribution to many channels; measures i_out<k> and err<k> per channel",
        ),
    )
}


# --------------------------------------------------------------------------------------------- expansion
def template_names() -> list[str]:
    return list(TEMPLATES)


def get_template(name: object, file: str | None = None) -> Template:
    """The template called `name`; ConfigError (key circuit.template) listing the known names otherwise."""
    if isinstance(name, str) and name in TEMPLATES:
        return TEMPLATES[name]
    guess = difflib.get_close_matches(str(name), list(TEMPLATES), n=1)
    hint = f"; did you mean '{guess[0]}'?" if guess else ""
    raise ConfigError(
        f"unknown template {name!r}{hint} (expected one of: {', '.join(TEMPLATES)})", file=file, key="circuit.template"
    )


def expand_template(circuit_raw: dict[str, Any], file: str) -> tuple[dict[str, Any], dict[str, Measure]]:
    """Expand ``[circuit] template = ...`` into netlist element lists (SI floats) and the default measures.

    Pure: nothing is solved. Element lists given beside the template (``[[circuit.resistor]]`` ...) are appended to
    the expansion. With ``output_load = "current"`` and no ``load_current``, each load source ILOAD<k> has the value
    AUTO and the netlist a ``load_sizing`` (the template's netlist with its outputs held at ``output_voltage``); the
    run layer sizes the loads from it when a condition is prepared (:func:`mcmatch.run.loads.resolve_loads`).
    Raises ConfigError naming ``circuit.<parameter>`` and what was expected.
    """
    raw = dict(circuit_raw)
    template = get_template(raw.pop("template"), file)
    extra = {kind: raw.pop(kind) for kind in ELEMENT_KINDS if kind in raw}
    try:
        params = template.parameters.model_validate(raw)
    except ValidationError as exc:
        raise validation_to_config_error(exc, file, template.parameters, prefix="circuit") from None
    builder = _Builder(params)
    try:
        template.build(builder, params)
    except ParameterError as exc:
        raise ConfigError(str(exc), file=file, key=f"circuit.{exc.key}") from None
    netlist: dict[str, Any] = {kind: items for kind, items in builder.elements.items() if items}
    measures = _default_measures(template, params)
    if isinstance(params, OutputParameters) and params.output_load == "current":
        netlist = _current_loads(netlist, params, file)
    for kind, items in extra.items():
        if not isinstance(items, list):
            raise ConfigError(f"expected a list of [[circuit.{kind}]] tables", file=file, key=f"circuit.{kind}")
        netlist[kind] = [*netlist.get(kind, []), *items]
    netlist["template"] = template.name
    return netlist, measures


def _default_measures(template: Template, params: TemplateParameters) -> dict[str, Measure]:
    measures: dict[str, Measure] = {}
    if not params.default_measures:
        return measures
    if isinstance(params, OutputParameters):
        for k, ratio in enumerate(params.output_ratios, start=1):
            if params.output_load == "voltage":
                measures[f"i_out{k}"] = Measure(current=f"MOUT{k}")
                measures[f"err{k}"] = Measure(ratio=(f"MOUT{k}", "IREF"), ideal=float(ratio))
                measures[f"r_out{k}"] = Measure(port_resistance=f"VOUT{k}")
            else:
                measures[f"v_out{k}"] = Measure(voltage=f"out{k}")
                measures[f"r_out{k}"] = Measure(resistance=f"out{k}")
    measures["v_nb"] = Measure(voltage="nb")
    measures["r_nb"] = Measure(resistance="nb")
    return measures


def _current_loads(netlist: dict[str, Any], params: OutputParameters, file: str) -> dict[str, Any]:
    """Replace the output voltage sources VOUT<k> by current sources ILOAD<k>: of load_current if given, else AUTO
    with a load sizing that holds the outputs where VOUT<k> did."""
    outputs = [v for v in netlist["voltage_source"] if v["name"].startswith("VOUT")]
    sizing = None
    if params.load_current is not None:
        currents: list[float | str] = [params.load_current] * len(outputs)
    else:
        currents = [AUTO] * len(outputs)
        try:
            held = Netlist.model_validate(netlist)
        except ValidationError as exc:
            raise validation_to_config_error(exc, file, Netlist, prefix="circuit") from None
        loads = {f"ILOAD{k}": v["name"] for k, v in enumerate(outputs, start=1)}
        sizing = LoadSizing(held=held, loads=loads, sign=1 if params.type == "nmos" else -1)
    sources = [v for v in netlist["voltage_source"] if not v["name"].startswith("VOUT")]
    loads_out = []
    for k, (v, current) in enumerate(zip(outputs, currents, strict=True), start=1):
        ends = (SUPPLY_NODE, v["plus"]) if params.type == "nmos" else (v["plus"], GROUND)
        loads_out.append({"name": f"ILOAD{k}", "from": ends[0], "to": ends[1], "value": current})
    expanded = {
        **netlist,
        "voltage_source": sources,
        "current_source": [*netlist.get("current_source", []), *loads_out],
    }
    if sizing is not None:
        expanded["load_sizing"] = sizing
    return expanded


# --------------------------------------------------------------------------------------------- describing
#: Order in which parameters are listed and written: the design values first, the options last.
_ORDER = ("type", "w", "l", "units", "reference_current", "ratio", "ratios", "supply", "output_voltage")
_LAST = ("output_load", "load_current", "reference_units", "default_measures")


def parameter_names(name: str) -> list[str]:
    """The parameters of template `name` in listing order."""
    fields = list(TEMPLATES[name].parameters.model_fields)
    first = [f for f in _ORDER if f in fields]
    last = [f for f in _LAST if f in fields]
    return first + [f for f in fields if f not in first and f not in last] + last


def parameter_rows(name: str) -> list[tuple[str, str, str]]:
    """(parameter, default as written in a config, description) for each parameter of template `name`."""
    model = TEMPLATES[name].parameters
    rows = []
    for field_name in parameter_names(name):
        info = model.model_fields[field_name]
        default = info.default
        rows.append((field_name, toml_value(default) if default is not None else "", info.description or ""))
    return rows


def toml_value(value: object) -> str:
    """A Python value as TOML text (strings, numbers, booleans, fractions as strings, lists, inline tables)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, Fraction):
        return str(value.numerator) if value.denominator == 1 else f'"{value}"'
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"no TOML form for {type(value).__name__}")


def netlist_toml(netlist: Netlist) -> str:
    """The netlist as ``[[circuit.*]]`` TOML tables with units, ready to paste into a config."""
    lines: list[str] = []
    if netlist.template:
        lines.append(f"# expanded from template {netlist.template!r}")
    value_units = {"current_source": "A", "voltage_source": "V", "resistor": "ohm"}
    for kind in ELEMENT_KINDS:
        for element in getattr(netlist, kind):
            lines.append(f"[[circuit.{kind}]]")
            for key, value in element.model_dump(by_alias=True, exclude_none=True).items():
                if kind == "mosfet" and key in ("w", "l"):
                    value = format_quantity(value, "m")
                elif key == "value" and value != AUTO:  # AUTO: a load not yet sized (see run.loads)
                    value = format_quantity(value, value_units[kind])
                lines.append(f"{key} = {toml_value(value)}")
            lines.append("")
    return "\n".join(lines)
