"""The config's pydantic models: validated, frozen objects in SI units (technology, netlist, measures, specs,
analysis, placement, the resolved :class:`Config`).

Quantities go through :mod:`mcmatch.units`. Reading TOML and turning validation errors into
:class:`~mcmatch.errors.ConfigError` live in :mod:`mcmatch.config.loading`; semantic checks across tables in
:mod:`mcmatch.config.checks`.
"""

from __future__ import annotations

import hashlib
from typing import Annotated, Any, Literal

from pydantic import (
    Field,
    ValidationError,
    ValidationInfo,
    ValidatorFunctionWrapHandler,
    WrapValidator,
    field_validator,
    model_validator,
)

from mcmatch.config.analysis import Analysis, Placement
from mcmatch.config.fields import Frozen, Name, Number, Q

GROUND = "gnd"

MEASURE_UNITS = {"current": "A", "voltage": "V", "ratio": "1", "resistance": "ohm", "port_resistance": "ohm"}
MEASURE_KINDS = tuple(MEASURE_UNITS)
#: Sample-table columns written beside the measures (and dvth_<device>, dbeta_<device>): no measure may take them.
RESERVED_COLUMNS = ("sample", "converged", "iterations", "retried", "min_headroom")


# --------------------------------------------------------------------------------------------- technology
class PolarityParameters(Frozen):
    """Process parameters of one polarity (magnitudes for pmos), SI units."""

    model: Literal["square-law", "ekv"] = "square-law"
    kprime: Q("A/V^2") = Field(gt=0, le=1.0)
    vth0: Q("V") = Field(ge=-100, le=100)
    lambda_: Q("1/V") | None = Field(default=None, alias="lambda", ge=0, le=100)
    lambda_l: Q("m/V") | None = Field(default=None, ge=0, le=1e-3)
    gamma: Q("V^0.5") = Field(default=0.0, ge=0, le=100)
    phi: Q("V") = Field(default=0.8, gt=0, le=100)
    slope: Number = Field(default=1.3, ge=1.0, le=5.0)
    a_vt: Q("V*m") = Field(default=0.0, ge=0, le=1e-6)
    a_beta: Q("m") = Field(default=0.0, ge=0, le=1e-4)
    vth_tempco: Q("V/K") = Field(default=0.0, ge=-1, le=1)
    mobility_exponent: Number = Field(default=-1.5, ge=-5, le=5)

    @model_validator(mode="after")
    def _one_lambda(self) -> PolarityParameters:
        if self.lambda_ is not None and self.lambda_l is not None:
            raise ValueError("give either 'lambda' or 'lambda_l', not both")
        return self

    def channel_length_modulation(self, length: float) -> float:
        """lambda [1/V] for a device of channel length `length` [m]."""
        if self.lambda_l is not None:
            return self.lambda_l / length
        return self.lambda_ or 0.0


class CornerShift(Frozen):
    """A global process shift of one polarity: threshold shift [V] and k' scale factor [1]."""

    vth_shift: Q("V") = Field(default=0.0, ge=-10, le=10)
    kprime_scale: Number = Field(default=1.0, gt=0, le=10)


class Corner(Frozen):
    nmos: CornerShift = CornerShift()
    pmos: CornerShift = CornerShift()


class PolarityStatistics(Frozen):
    """Die-to-die (global) spread of one polarity: threshold sigma [V], relative k' sigma [1]."""

    vth_sigma: Q("V") = Field(default=0.0, ge=0, le=1)
    kprime_sigma: Q("1") = Field(default=0.0, ge=0, le=1)


class Statistics(Frozen):
    """Global process statistics: one draw per die (sample); nmos and pmos draws of one quantity correlated."""

    nmos: PolarityStatistics = PolarityStatistics()
    pmos: PolarityStatistics = PolarityStatistics()
    polarity_correlation: Number = Field(default=0.0, ge=-1, le=1)


class Technology(Frozen):
    name: Name
    description: str = ""
    nominal_temperature: Q("K") = Field(default=300.15, ge=1, le=1000)
    nmos: PolarityParameters | None = None
    pmos: PolarityParameters | None = None
    corners: dict[Name, Corner] = Field(default_factory=dict)
    statistics: Statistics | None = None

    @field_validator("corners")
    @classmethod
    def _corner_names(cls, corners: dict[str, Corner]) -> dict[str, Corner]:
        lowered = [name.lower() for name in corners]
        if len(set(lowered)) != len(lowered):
            raise ValueError("corner names must be unique ignoring case")
        return {name.lower(): corner for name, corner in corners.items()}

    def corner(self, name: str) -> Corner:
        """The global shift of corner `name`; "tt" is the unshifted technology unless defined."""
        key = name.lower()
        if key in self.corners:
            return self.corners[key]
        if key == "tt":
            return Corner()
        raise KeyError(name)

    @property
    def corner_names(self) -> list[str]:
        names = ["tt"] + [n for n in self.corners if n != "tt"]
        return names


# --------------------------------------------------------------------------------------------- netlist
class Mosfet(Frozen):
    name: Name
    type: Literal["nmos", "pmos"]
    drain: Name
    gate: Name
    source: Name
    bulk: Name | None = None
    w: Q("m") = Field(gt=0, le=0.1)
    l: Q("m") = Field(gt=0, le=0.1)  # noqa: E741 - the trade's name
    m: int = Field(default=1, ge=1, le=1_000_000)

    @property
    def area(self) -> float:
        """Gate area m*W*L [m^2]."""
        return self.m * self.w * self.l

    @property
    def bulk_node(self) -> str:
        """Bulk defaults to gnd for nmos and to the source for pmos."""
        if self.bulk is not None:
            return self.bulk
        return GROUND if self.type == "nmos" else self.source


#: The value of a template's load current source until the run layer sizes it (:mod:`mcmatch.run.loads`).
AUTO = "auto"
#: Validation context under which a netlist may hold AUTO values and a load sizing: a template's expansion only.
FROM_TEMPLATE = {"from_template": True}


def _current_or_auto(value: object, handler: ValidatorFunctionWrapHandler, info: ValidationInfo) -> object:
    """AUTO where a template put it (validated under FROM_TEMPLATE); otherwise a current [A] as usual."""
    if value == AUTO and (info.context or {}).get("from_template"):
        return AUTO
    return handler(value)


class CurrentSource(Frozen):
    name: Name
    from_: Name = Field(alias="from")
    to: Name
    #: [A], or AUTO for a template's load current until it is sized (config loading never solves)
    value: Annotated[Q("A"), WrapValidator(_current_or_auto)] = Field(ge=-100, le=100)


class VoltageSource(Frozen):
    name: Name
    plus: Name
    minus: Name
    value: Q("V") = Field(ge=-1e4, le=1e4)


class Resistor(Frozen):
    name: Name
    a: Name
    b: Name
    value: Q("ohm") = Field(ge=1e-6, le=1e18)


class Netlist(Frozen):
    mosfet: list[Mosfet] = Field(default_factory=list)
    current_source: list[CurrentSource] = Field(default_factory=list)
    voltage_source: list[VoltageSource] = Field(default_factory=list)
    resistor: list[Resistor] = Field(default_factory=list)
    template: str | None = None  # the template this netlist was expanded from, if any
    load_sizing: LoadSizing | None = None  # how a template's AUTO load currents are sized (set by templates only)

    @field_validator("load_sizing", mode="before")
    @classmethod
    def _only_from_template(cls, value: object, info: ValidationInfo) -> object:
        if value is not None and not (info.context or {}).get("from_template"):
            raise ValueError('set only by a circuit template (output_load = "current"), never in a config')
        return value

    @property
    def auto_sources(self) -> list[str]:
        """Names of the current sources whose value is still AUTO."""
        return [c.name for c in self.current_source if c.value == AUTO]

    @property
    def elements(self) -> list[Frozen]:
        return [*self.mosfet, *self.current_source, *self.voltage_source, *self.resistor]

    @property
    def nodes(self) -> list[str]:
        """All node names but gnd, in order of first appearance."""
        seen: dict[str, None] = {}
        for element in self.elements:
            for node in terminals(element):
                if node != GROUND:
                    seen.setdefault(node, None)
        return list(seen)

    def device(self, name: str) -> Frozen:
        for element in self.elements:
            if element.name == name:
                return element
        raise KeyError(name)


class LoadSizing(Frozen):
    """How a template's load current sources are sized, when a condition is prepared (never while loading).

    Load ``name`` of `loads` gets `sign` times the current that voltage source ``loads[name]`` delivers out of its
    plus terminal in `held`: the template's own netlist with every output held at its output_voltage, solved once
    with no mismatch at the nominal corner and the config's temperature.
    """

    held: Netlist
    loads: dict[Name, Name]
    sign: Literal[1, -1] = 1


Netlist.model_rebuild()  # its load_sizing refers to LoadSizing, defined after it


def terminals(element: Frozen) -> list[str]:
    """The nodes an element connects to."""
    if isinstance(element, Mosfet):
        return [element.drain, element.gate, element.source, element.bulk_node]
    if isinstance(element, CurrentSource):
        return [element.from_, element.to]
    if isinstance(element, VoltageSource):
        return [element.plus, element.minus]
    return [element.a, element.b]


# --------------------------------------------------------------------------------------------- measures, specs
class Measure(Frozen):
    """What is recorded per sample: exactly one of current, voltage, ratio, resistance, port_resistance."""

    current: Name | None = None
    voltage: Name | None = None
    ratio: tuple[Name, Name] | None = None
    ideal: Number | None = None
    resistance: Name | None = None
    port_resistance: Name | None = None  # a voltage source: dV/dI looking into the circuit [ohm]

    @model_validator(mode="after")
    def _exactly_one(self) -> Measure:
        given = [k for k in MEASURE_KINDS if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError(f"a measure needs exactly one of {', '.join(repr(k) for k in MEASURE_KINDS)}")
        if self.ideal is not None and self.ratio is None:
            raise ValueError("'ideal' belongs to a ratio measure")
        if self.ideal is not None and not 1e-9 <= abs(self.ideal) <= 1e9:
            raise ValueError("'ideal' must be a ratio between 1e-9 and 1e9 in magnitude")
        return self

    @property
    def kind(self) -> str:
        for k in MEASURE_KINDS:
            if getattr(self, k) is not None:
                return k
        raise AssertionError

    @property
    def unit(self) -> str:
        return MEASURE_UNITS[self.kind]

    @property
    def definition(self) -> dict:
        """The measure's table as given or as a template set it: {"ratio": ["MOUT1", "IREF"], "ideal": 2}."""
        return self.model_dump(mode="json", exclude_none=True)


class Spec(Frozen):
    """Limits of one measure, in the measure's SI unit (parsed later, once the unit is known)."""

    min: Any = None
    max: Any = None

    @model_validator(mode="after")
    def _at_least_one(self) -> Spec:
        if self.min is None and self.max is None:
            raise ValueError("a spec needs 'min', 'max' or both")
        return self


class Limits(Frozen):
    min: float | None
    max: float | None


# --------------------------------------------------------------------------------------------- top level
class RawConfig(Frozen):
    title: str = Field(default="", max_length=500)
    technology: str | dict[str, Any]
    temperature: Q("K") | None = Field(default=None, ge=1, le=1000)
    circuit: dict[str, Any]
    measures: dict[Name, Measure] = Field(default_factory=dict)
    specs: dict[Name, Spec] = Field(default_factory=dict)
    analysis: Analysis = Analysis()
    placement: Placement | None = None
    notes: str = ""


class Config(Frozen):
    """A validated study: everything downstream needs, in SI units."""

    title: str
    path: str
    technology: Technology
    technology_path: str | None
    temperature: float
    circuit: Netlist
    measures: dict[str, Measure]
    specs: dict[str, Limits]
    analysis: Analysis
    placement: Placement | None = None
    notes: str = ""
    text: str = ""
    technology_text: str = ""

    @property
    def digest(self) -> str:
        """sha256 of the config text and the technology text: identifies the inputs of a run."""
        h = hashlib.sha256(self.text.encode())
        h.update(self.technology_text.encode())
        return h.hexdigest()

    def with_analysis(self, **changes: Any) -> Config:
        """A copy with analysis settings replaced (command-line overrides)."""
        changes = {k: v for k, v in changes.items() if v is not None}
        if not changes:
            return self
        from mcmatch.config.checks import check_spec_references  # they build on these models
        from mcmatch.config.loading import validation_to_config_error

        try:
            analysis = Analysis.model_validate({**self.analysis.model_dump(by_alias=True), **changes})
        except ValidationError as exc:  # the overrides come from the command line (or an API caller)
            raise validation_to_config_error(exc, "command line", Analysis, prefix="analysis") from None
        check_spec_references(analysis, self.specs, self.path)
        from mcmatch.config.variation import check_variation  # its own module: [statistics] against the studies

        check_variation(analysis, self.technology, self.path)
        return self.model_copy(update={"analysis": analysis})

    def with_circuit(self, circuit: Netlist) -> Config:
        return self.model_copy(update={"circuit": circuit})

    def with_technology(self, technology: Technology) -> Config:
        return self.model_copy(update={"technology": technology})
