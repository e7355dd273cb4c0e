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
import math
from collections.abc import Callable
from dataclasses import dataclass
from fractions import Fraction
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, ValidationError

from mcmatch.config.loading import validation_to_config_error
from mcmatch.config.schema import AUTO, GROUND, LoadSizing, Measure, Netlist, Q
from mcmatch.errors import ConfigError
from mcmatch.units import format_quantity

#: Largest number of unit devices in the reference that a ratio may need (ratio 1/3 needs 3).
MAX_REFERENCE_UNITS = 100
#: Largest number of unit devices in any one device of an expansion.
MAX_UNITS = 10_000
#: Netlist element lists that may be given beside a template; they are appended to its expansion.
ELEMENT_KINDS = ("mosfet", "current_source", "voltage_source", "resistor")
#: Default unit widths per polarity: about 0.18 V of overdrive at 10 uA and L = 2 um in the demo 180 nm process.
DEFAULT_WIDTH = {"nmos": 4e-6, "pmos": 16e-6}
SUPPLY = "VDD"
SUPPLY_NODE = "vdd"


# --------------------------------------------------------------------------------------------- parameter types
def _ratio(value: object) -> Fraction:
    """A positive output/reference ratio from a number or a fraction string ("3/2"), buildable from whole units."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str, Fraction)):
        raise ValueError(f"expected a positive number or a fraction such as '3/2', got {value!r}")
    try:
        exact = Fraction(str(value).strip()) if not isinstance(value, Fraction) else value
    except (ValueError, ZeroDivisionError):
        raise ValueError(f"expected a positive number or a fraction such as '3/2', got {value!r}") from None
    if exact <= 0:
        raise ValueError(f"expected a positive ratio, got {value!r}")
    if exact.denominator > MAX_REFERENCE_UNITS:
        raise ValueError(
            f"ratio {value!r} needs {exact.denominator} reference units; give it as a fraction with a denominator of "
            f"at most {MAX_REFERENCE_UNITS}, such as '1/3'"
        )
    return exact


def _as_list(value: object) -> object:
    return value if isinstance(value, list) or value is None else [value]


Ratio = Annotated[Fraction, BeforeValidator(_ratio)]


class TemplateParameters(BaseModel):
    """Parameters every template takes."""

    model_config = ConfigDict(extra="forbid", frozen=True, validate_default=True)

    type: Literal["nmos", "pmos"] = Field(
        "nmos", description='polarity: "nmos" (the mirror sinks current) or "pmos" (it sources current)'
    )
    w: Q("m") | None = Field(None, gt=0, description="width of one unit device (default 4 um nmos, 16 um pmos)")
    l: Q("m") = Field("2 um", gt=0, description="length of every unit device")  # noqa: E741 - the trade's name
    reference_current: Q("A") = Field("10 uA", gt=0, description="reference current fed into the diode")
    supply: Q("V") = Field("1.8 V", gt=0, description="supply voltage (source VDD, node vdd)")
    default_measures: bool = Field(
        True, description="record the template's usual measures (false: only the config's own [measures])"
    )

    @property
    def width(self) -> float:
        """Unit width [m], the polarity's default when not given."""
        return self.w if self.w is not None else DEFAULT_WIDTH[self.type]


class ReferenceParameters(TemplateParameters):
    units: int = Field(1, ge=1, le=MAX_UNITS, description="parallel unit devices in the diode")


class OutputParameters(TemplateParameters):
    """Parameters of a template with outputs."""

    output_voltage: Annotated[list[Q("V")] | None, BeforeValidator(_as_list)] = Field(
        None, description="voltage at which each output is held (default half the supply)"
    )
    output_load: Literal["voltage", "current"] = Field(
        "voltage",
        description='"voltage": outputs held by sources VOUT<k>; "current": fed by ideal current sources ILOAD<k> '
        "(for output resistance)",
    )
    load_current: Q("A") | None = Field(
        None, gt=0, description="current of each load source (default the nominal output current at output_voltage)"
    )
    reference_units: int | None = Field(
        None, ge=1, le=MAX_REFERENCE_UNITS, description="unit devices in the reference (default the fewest that work)"
    )

    @property
    def output_ratios(self) -> list[Fraction]:
        return [self.ratio]  # type: ignore[attr-defined]


class MirrorParameters(OutputParameters):
    ratio: Ratio = Field(1, description="output current / reference current, e.g. 4 or '3/2'")


class BankParameters(OutputParameters):
    ratios: list[Ratio] = Field([1, 1, 1, 1], min_length=1, max_length=256, description="one ratio per output")

    @property
    def output_ratios(self) -> list[Fraction]:
        return list(self.ratios)


class WideSwingParameters(MirrorParameters):
    cascode_bias: Q("V") | None = Field(
        None, description="cascode gate voltage to gnd from a source VCASB (default: a bias branch makes it)"
    )
    bias_current: Q("A") | None = Field(
        None, gt=0, description="bias-branch current (default the reference current per unit device)"
    )
    bias_aspect: float = Field(
        0.16,
        gt=0,
        le=1,
        description="bias diode W/L as a fraction of the unit's (1/4 gives Vt + 2 Vov: no margin; smaller adds some)",
    )


class DegeneratedParameters(MirrorParameters):
    degeneration: Q("ohm") = Field(
        "20 kohm", gt=0, description="resistor under the reference; each output gets degeneration / ratio"
    )


# --------------------------------------------------------------------------------------------- netlist builder
@dataclass
class _Builder:
    """Collects elements of one polarity; `rail` is the devices' source rail (gnd for nmos, vdd for pmos)."""

    params: TemplateParameters

    def __post_init__(self) -> None:
        self.elements: dict[str, list[dict[str, Any]]] = {k: [] for k in ELEMENT_KINDS}
        self.elements["voltage_source"].append(
            {"name": SUPPLY, "plus": SUPPLY_NODE, "minus": GROUND, "value": self.params.supply}
        )

    @property
    def rail(self) -> str:
        return GROUND if self.params.type == "nmos" else SUPPLY_NODE

    def mos(self, name: str, drain: str, gate: str, source: str, m: int, l: float | None = None) -> None:  # noqa: E741
        if m > MAX_UNITS:
            raise ParameterError(
                f"{name} would need {m} unit devices (at most {MAX_UNITS}); use smaller ratios", "ratio"
            )
        self.elements["mosfet"].append(
            {
                "name": name,
                "type": self.params.type,
                "drain": drain,
                "gate": gate,
                "source": source,
                "w": self.params.width,
                "l": self.params.l if l is None else l,
                "m": int(m),
            }
        )

    def feed(self, name: str, node: str, value: float) -> None:
        """A current source delivering `value` [A] into the node (nmos) or drawing it out of the node (pmos)."""
        ends = (SUPPLY_NODE, node) if self.params.type == "nmos" else (node, GROUND)
        self.elements["current_source"].append({"name": name, "from": ends[0], "to": ends[1], "value": value})

    def hold(self, name: str, node: str, value: float) -> None:
        self.elements["voltage_source"].append({"name": name, "plus": node, "minus": GROUND, "value": value})

    def resistor(self, name: str, a: str, b: str, value: float) -> None:
        self.elements["resistor"].append({"name": name, "a": a, "b": b, "value": value})


class ParameterError(ValueError):
    """A template parameter that cannot be built; `key` names it (without the "circuit." prefix)."""

    def __init__(self, message: str, key: str) -> None:
        super().__init__(message)
        self.key = key


def unit_counts(ratios: list[Fraction], reference_units: int | None = None) -> tuple[int, list[int]]:
    """Unit devices of the reference and of each output for output/reference `ratios`.

    The reference gets the least common multiple of the ratios' denominators (or `reference_units`, which must be a
    multiple of it); output k gets ratio_k times as many.
    """
    need = math.lcm(*(r.denominator for r in ratios))
    if reference_units is not None:
        if reference_units % need:
            raise ParameterError(
                f"reference_units = {reference_units} cannot make the ratios {[str(r) for r in ratios]} from whole "
                f"units; use a multiple of {need}",
                "reference_units",
            )
        need = reference_units
    return need, [int(r * need) for r in ratios]


def _output_voltages(p: OutputParameters) -> list[float]:
    n = len(p.output_ratios)
    given = p.output_voltage or [p.supply / 2.0]
    if len(given) not in (1, n):
        raise ParameterError(f"expected one output voltage or one per output ({n}), got {len(given)}", "output_voltage")
    return given * n if len(given) == 1 else list(given)


def _outputs(b: _Builder, p: OutputParameters, drains: list[str]) -> None:
    """Hold each output drain node at its voltage (or feed it the load current; filled in later)."""
    for k, (node, v) in enumerate(zip(drains, _output_voltages(p), strict=True), start=1):
        b.hold(f"VOUT{k}", node, v)


# --------------------------------------------------------------------------------------------- topologies
def _diode_reference(b: _Builder, p: ReferenceParameters) -> None:
    b.mos("MREF", "nb", "nb", b.rail, p.units)
    b.feed("IREF", "nb", p.reference_current)


def _simple(b: _Builder, p: OutputParameters) -> None:
    ref, outs = unit_counts(p.output_ratios, p.reference_units)
    b.mos("MREF", "nb", "nb", b.rail, ref)
    b.feed("IREF", "nb", p.reference_current)
    for k, m in enumerate(outs, start=1):
        b.mos(f"MOUT{k}", f"out{k}", "nb", b.rail, m)
    _outputs(b, p, [f"out{k}" for k in range(1, len(outs) + 1)])


def _cascode(b: _Builder, p: MirrorParameters) -> None:
    ref, (out,) = unit_counts(p.output_ratios, p.reference_units)
    b.mos("MREF", "nb", "nb", b.rail, ref)
    b.mos("MCREF", "nc", "nc", "nb", ref)
    b.feed("IREF", "nc", p.reference_current)
    b.mos("MOUT1", "x1", "nb", b.rail, out)
    b.mos("MCAS1", "out1", "nc", "x1", out)
    _outputs(b, p, ["out1"])


def _wide_swing(b: _Builder, p: WideSwingParameters) -> None:
    ref, (out,) = unit_counts(p.output_ratios, p.reference_units)
    b.mos("MREF", "nr", "nb", b.rail, ref)
    b.mos("MCREF", "nb", "ncb", "nr", ref)
    b.feed("IREF", "nb", p.reference_current)
    b.mos("MOUT1", "x1", "nb", b.rail, out)
    b.mos("MCAS1", "out1", "ncb", "x1", out)
    if p.cascode_bias is not None:
        b.hold("VCASB", "ncb", p.cascode_bias)
    else:
        b.mos("MBIAS", "ncb", "ncb", b.rail, 1, l=p.l / p.bias_aspect)
        b.feed("IBIAS", "ncb", p.bias_current if p.bias_current is not None else p.reference_current / ref)
    _outputs(b, p, ["out1"])


def _wilson(b: _Builder, p: MirrorParameters) -> None:
    ref, (out,) = unit_counts(p.output_ratios, p.reference_units)
    b.mos("MREF", "nb", "nm", b.rail, ref)
    b.mos("MFB", "nm", "nm", b.rail, out)
    b.mos("MOUT1", "out1", "nb", "nm", out)
    b.feed("IREF", "nb", p.reference_current)
    _outputs(b, p, ["out1"])


def _improved_wilson(b: _Builder, p: MirrorParameters) -> None:
    ref, (out,) = unit_counts(p.output_ratios, p.reference_units)
    b.mos("MREF", "nd", "nm", b.rail, ref)
    b.mos("MEQ", "nb", "nb", "nd", ref)
    b.mos("MFB", "nm", "nm", b.rail, out)
    b.mos("MOUT1", "out1", "nb", "nm", out)
    b.feed("IREF", "nb", p.reference_current)
    _outputs(b, p, ["out1"])


def _degenerated(b: _Builder, p: DegeneratedParameters) -> None:
    ref, (out,) = unit_counts(p.output_ratios, p.reference_units)
    b.mos("MREF", "nb", "nb", "sref", ref)
    b.resistor("RREF", "sref", b.rail, p.degeneration)
    b.feed("IREF", "nb", p.reference_current)
    b.mos("MOUT1", "out1", "nb", "s1", out)
    b.resistor("ROUT1", "s1", b.rail, p.degeneration / float(p.ratio))
    _outputs(b, p, ["out1"])


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
