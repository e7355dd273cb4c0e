"""The built-in templates' parameters (pydantic models in plain words, SI units) and their netlist builders: one
function per topology writing unit devices, sources and loads into a netlist dict. Pure: nothing is solved."""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field

from mcmatch.config.fields import Q
from mcmatch.config.schema import GROUND

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
