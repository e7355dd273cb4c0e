"""TOML config -> validated, frozen objects in SI units. The only module that reads input files.

Validation is pydantic's; quantities go through :mod:`mcmatch.units`. Every problem becomes a
:class:`~mcmatch.errors.ConfigError` naming the file, the key path (``circuit.mosfet[1].w``) and what was expected.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import tomllib
from functools import partial
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, ValidationError, field_validator, model_validator

from mcmatch.errors import ConfigError, quote
from mcmatch.units import UnitError, parse_quantity

GROUND = "gnd"

MEASURE_UNITS = {"current": "A", "voltage": "V", "ratio": "1", "resistance": "ohm"}


def _quantity(value: object, unit: str) -> float:
    try:
        return parse_quantity(value, unit)
    except UnitError as exc:
        raise ValueError(str(exc)) from None


def Q(unit: str):  # noqa: N802 - reads like a type annotation
    """Annotated float parsed from a quantity string in `unit` [SI]."""
    return Annotated[float, BeforeValidator(partial(_quantity, unit=unit))]


def _finite_number(value: object) -> object:
    if isinstance(value, bool):
        raise ValueError(f"expected a number, got {quote(value)}")
    if isinstance(value, float) and not math.isfinite(value):
        raise ValueError(f"expected a finite number, got {quote(value)}")
    return value


Number = Annotated[float, BeforeValidator(_finite_number)]
Name = Annotated[str, Field(min_length=1, max_length=200)]


class Frozen(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, strict=False)


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


class CurrentSource(Frozen):
    name: Name
    from_: Name = Field(alias="from")
    to: Name
    value: Q("A") = Field(ge=-100, le=100)


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
    """What is recorded per sample: exactly one of current, voltage, ratio, resistance."""

    current: Name | None = None
    voltage: Name | None = None
    ratio: tuple[Name, Name] | None = None
    ideal: Number | None = None
    resistance: Name | None = None

    @model_validator(mode="after")
    def _exactly_one(self) -> Measure:
        given = [k for k in ("current", "voltage", "ratio", "resistance") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("a measure needs exactly one of 'current', 'voltage', 'ratio', 'resistance'")
        if self.ideal is not None and self.ratio is None:
            raise ValueError("'ideal' belongs to a ratio measure")
        if self.ideal is not None and not 1e-9 <= abs(self.ideal) <= 1e9:
            raise ValueError("'ideal' must be a ratio between 1e-9 and 1e9 in magnitude")
        return self

    @property
    def kind(self) -> str:
        for k in ("current", "voltage", "ratio", "resistance"):
            if getattr(self, k) is not None:
                return k
        raise AssertionError

    @property
    def unit(self) -> str:
        return MEASURE_UNITS[self.kind]


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


# --------------------------------------------------------------------------------------------- analysis
class Target(Frozen):
    yield_: Number = Field(default=0.9973, alias="yield", gt=0, lt=1)
    confidence: Number = Field(default=0.95, gt=0, lt=1)
    k_sigma: Number | None = Field(default=None, gt=0, le=20)


class CornerStudy(Frozen):
    process: list[Name] | None = None
    temperature: list[Q("K")] | None = None
    supply: list[Q("V")] | None = None
    supply_scale: list[Number] | None = None
    supply_source: Name = "VDD"
    samples: int = Field(default=2000, ge=10, le=100_000_000)

    @model_validator(mode="after")
    def _supply(self) -> CornerStudy:
        if self.supply is not None and self.supply_scale is not None:
            raise ValueError("give 'supply' (absolute volts) or 'supply_scale' (factors), not both")
        for t in self.temperature or []:
            if not 1 <= t <= 1000:
                raise ValueError("temperatures must lie between 1 K and 1000 K")
        for v in self.supply or []:
            if not -1e4 <= v <= 1e4:
                raise ValueError("supply voltages must lie within +-10 kV")
        for s in self.supply_scale or []:
            if not 0 < s < 10:
                raise ValueError("supply_scale factors must lie between 0 and 10")
        return self


class AreaStudy(Frozen):
    devices: list[Name] = Field(min_length=1)
    scale: list[Annotated[Number, Field(gt=0, le=1e4)]] = Field(default=[0.25, 0.5, 1, 2, 4], min_length=2)
    mode: Literal["aspect", "units"] = "aspect"
    samples: int | None = Field(default=None, ge=100, le=100_000_000)


class HighSigma(Frozen):
    method: Literal["importance"] = "importance"
    samples: int = Field(default=20000, ge=100, le=100_000_000)
    measures: list[Name] | None = None  # spec'd measures to estimate (default: every spec'd measure)


class Bank(Frozen):
    """Joint yield of a multi-output bank: the channels are these spec'd measures (default: every spec'd measure)."""

    measures: list[Name] | None = Field(default=None, min_length=1)
    samples: int | None = Field(default=None, ge=10, le=100_000_000)


class Analysis(Frozen):
    samples: int = Field(default=10000, ge=1, le=10_000_000_000)
    seed: int = Field(default=1, ge=0, le=2**63 - 1)
    sampling: Literal["random", "sobol"] = "random"
    variation: Literal["local", "global", "both"] = "local"  # mismatch, global process spread, or both
    keep_samples: int = Field(default=100_000, ge=0)
    target: Target = Target()
    corners: CornerStudy | None = None
    area: AreaStudy | None = None
    high_sigma: HighSigma | None = None
    bank: Bank | None = None
    contributions: bool = True


# --------------------------------------------------------------------------------------------- placement
class PlacementCandidate(Frozen):
    """One arrangement of unit cells: one string per row, one letter per cell, first row at y = 0."""

    name: Name
    rows: list[Annotated[str, Field(min_length=1, max_length=400)]] = Field(min_length=1, max_length=400)


class Placement(Frozen):
    """Unit-cell patterns of matched devices under systematic process gradients (SI units).

    vth_gradient [V/m] and beta_gradient [1/m]: linear terms (d/dx, d/dy); *_quadratic [V/m^2], [1/m^2]: the x^2 and
    y^2 terms; *_saddle: the x*y term; s_vt [V/m] and s_beta [1/m]: Pelgrom's distance terms (sigma grows as S*D).
    """

    pitch: tuple[Q("m"), Q("m")]
    devices: dict[Annotated[str, Field(min_length=1, max_length=1)], Name]
    dummy: Annotated[str, Field(min_length=1, max_length=1)] = "D"
    vth_gradient: tuple[Q("V/m"), Q("V/m")] = (0.0, 0.0)
    beta_gradient: tuple[Q("1/m"), Q("1/m")] = (0.0, 0.0)
    vth_quadratic: tuple[Q("V/m^2"), Q("V/m^2")] = (0.0, 0.0)
    beta_quadratic: tuple[Q("1/m^2"), Q("1/m^2")] = (0.0, 0.0)
    vth_saddle: Q("V/m^2") = 0.0
    beta_saddle: Q("1/m^2") = 0.0
    origin: Literal["corner", "center"] = "center"
    s_vt: Q("V/m") = Field(default=0.0, ge=0)
    s_beta: Q("1/m") = Field(default=0.0, ge=0)
    samples: int | None = Field(default=None, ge=10, le=100_000_000)  # Monte Carlo samples per candidate
    candidate: list[PlacementCandidate] = Field(min_length=1)

    @model_validator(mode="after")
    def _letters(self) -> Placement:
        if self.pitch[0] <= 0 or self.pitch[1] <= 0:
            raise ValueError("pitch must be positive in x and y")
        if self.dummy in self.devices:
            raise ValueError(f"letter '{self.dummy}' is the dummy cell; choose another letter for the device")
        allowed = set(self.devices) | {self.dummy}
        names = [c.name for c in self.candidate]
        if len(set(names)) != len(names):
            raise ValueError("candidate names must be unique")
        for c in self.candidate:
            for row in c.rows:
                bad = set(row) - allowed
                if bad:
                    raise ValueError(
                        f"candidate '{c.name}' uses letters {sorted(bad)}; expected only {sorted(allowed)}"
                    )
            for letter in self.devices:
                if not any(letter in row for row in c.rows):
                    raise ValueError(f"candidate '{c.name}' places no cell of device letter '{letter}'")
        return self


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


# --------------------------------------------------------------------------------------------- errors
def key_path(loc: tuple[Any, ...], prefix: str = "") -> str:
    """('circuit', 'mosfet', 1, 'w') -> 'circuit.mosfet[1].w'."""
    out = prefix
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif str(part).startswith("function-") or str(part) in ("literal['square-law','ekv']",):
            continue
        else:
            out = f"{out}.{part}" if out else str(part)
    return out


def _known_fields(model: type[BaseModel], loc: tuple[Any, ...]) -> list[str]:
    """Field names (by alias) of the model at `loc`, for spelling suggestions."""
    current: Any = model
    for part in loc[:-1]:
        if isinstance(part, int) or current is None:
            continue
        fields = getattr(current, "model_fields", None)
        if not fields:
            return []
        match = next((f for n, f in fields.items() if (f.alias or n) == part), None)
        if match is None:
            return []
        annotation = match.annotation
        current = _model_in(annotation)
    fields = getattr(current, "model_fields", None) or {}
    return [f.alias or n for n, f in fields.items()]


def _model_in(annotation: Any) -> Any:
    import typing

    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in typing.get_args(annotation):
        found = _model_in(arg)
        if found is not None:
            return found
    return None


def validation_to_config_error(
    exc: ValidationError, file: str, model: type[BaseModel], prefix: str = ""
) -> ConfigError:
    """The first problem of a pydantic ValidationError as a ConfigError with file, key path and expectation."""
    errors = exc.errors(include_url=False)
    # a misspelt key shows up as one unknown key plus one missing key: report the unknown one, naming the missing
    extra = [e for e in errors if e.get("type") == "extra_forbidden"]
    err = extra[0] if extra else errors[0]
    parent = tuple(err["loc"][:-1])
    missing = [str(e["loc"][-1]) for e in errors if e.get("type") == "missing" and tuple(e["loc"][:-1]) == parent]
    loc = tuple(err.get("loc", ()))
    loc = tuple(p for p in loc if not (isinstance(p, str) and (p.startswith("function-") or p in _UNION_TAGS)))
    path = key_path(loc, prefix)
    kind = err.get("type", "")
    msg = str(err.get("msg", "invalid value"))
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, ") :]
    if kind == "extra_forbidden":
        known = _known_fields(model, loc)
        guess = difflib.get_close_matches(str(loc[-1]), known, n=1) if loc else []
        if not guess and missing:
            guess = missing[:1]
        msg = "unknown key" + (f"; did you mean '{guess[0]}'?" if guess else "")
        if known:
            msg += f" (expected one of: {', '.join(sorted(known))})"
    elif kind == "missing":
        msg = "required key is missing"
    else:
        value = err.get("input")
        if kind not in ("value_error",) and not isinstance(value, (dict, list)):
            msg = f"{msg}; got {quote(value)}"
    return ConfigError(msg, file=file, key=path or None)


_UNION_TAGS = {"str", "dict[str,any]", "float", "int", "none", "list[...]", "tuple[str, str]"}


# --------------------------------------------------------------------------------------------- loading
def read_toml(path: Path) -> tuple[dict[str, Any], str]:
    """Parse a TOML file; ConfigError naming the file, line and column on failure."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError("file not found", file=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"cannot read file: {exc}", file=str(path)) from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML: {exc}", file=str(path)) from None
    except RecursionError:  # tomllib recurses once per level of nested arrays and inline tables
        raise ConfigError(_TOO_DEEP, file=str(path)) from None
    except ValueError as exc:  # an integer beyond Python's 4300-digit conversion limit
        raise ConfigError(f"not valid TOML: {exc}", file=str(path)) from None
    check_nesting(raw, str(path))
    return raw, text


#: Levels of tables and arrays inside each other a document may have; a real config needs about five.
MAX_NESTING = 32
_TOO_DEEP = f"arrays or tables nested more than {MAX_NESTING} levels deep; a config needs only a few"


def check_nesting(data: object, file: str, limit: int = MAX_NESTING) -> None:
    """ConfigError naming the key path where `data` nests tables/arrays deeper than `limit` (walked without
    recursion, so no depth can exhaust the stack)."""
    stack: list[tuple[object, tuple[Any, ...]]] = [(data, ())]
    while stack:
        value, loc = stack.pop()
        if len(loc) > limit:
            raise ConfigError(_TOO_DEEP, file=file, key=key_path(loc[: limit + 1]))
        if isinstance(value, dict):
            stack.extend((v, (*loc, k)) for k, v in value.items())
        elif isinstance(value, list):
            stack.extend((v, (*loc, i)) for i, v in enumerate(value))


def load_technology(data: str | dict[str, Any], config_path: Path) -> tuple[Technology, str | None, str]:
    """Resolve a technology: a path relative to the config file, or an inline table."""
    if isinstance(data, str):
        tech_path = (config_path.parent / data).resolve()
        if not tech_path.is_file():
            raise ConfigError(
                f"technology file '{data}' not found (looked at {tech_path})", file=str(config_path), key="technology"
            )
        raw, text = read_toml(tech_path)
        try:
            return Technology.model_validate(raw), str(tech_path), text
        except ValidationError as exc:
            raise validation_to_config_error(exc, str(tech_path), Technology) from None
    try:
        return Technology.model_validate(data), None, ""
    except ValidationError as exc:
        raise validation_to_config_error(exc, str(config_path), Technology, prefix="technology") from None


def load_config(path: str | Path) -> Config:
    """Read, validate and resolve a circuit config file."""
    path = Path(path)
    raw, text = read_toml(path)
    return config_from_dict(raw, path, text)


def config_from_dict(raw: dict[str, Any], path: Path, text: str = "") -> Config:
    """Validate a parsed config document; `path` locates relative files and names the file in errors."""
    file = str(path)
    if not isinstance(raw, dict):
        raise ConfigError("expected a TOML table at the top level", file=file)
    check_nesting(raw, file)
    try:
        parsed = RawConfig.model_validate(raw)
    except ValidationError as exc:
        raise validation_to_config_error(exc, file, RawConfig) from None
    technology, tech_path, tech_text = load_technology(parsed.technology, path)
    circuit_raw = dict(parsed.circuit)
    measures = dict(parsed.measures)
    if "template" in circuit_raw:
        from mcmatch.config.templates import expand_template  # templates build on config's types

        circuit_raw, default_measures = expand_template(circuit_raw, file, technology, parsed.temperature)
        measures = {**default_measures, **measures}
    try:
        netlist = Netlist.model_validate(circuit_raw)
    except ValidationError as exc:
        raise validation_to_config_error(exc, file, Netlist, prefix="circuit") from None
    check_netlist(netlist, technology, file)
    if not measures:
        measures = {f"i_{m.name}": Measure(current=m.name) for m in netlist.mosfet}
    check_measures(measures, netlist, file)
    specs = parse_specs(parsed.specs, measures, file)
    check_analysis(parsed.analysis, netlist, technology, file)
    from mcmatch.config.variation import check_variation  # its own module: [statistics] against the studies

    check_variation(parsed.analysis, technology, file)
    check_spec_references(parsed.analysis, specs, file)
    check_placement(parsed.placement, netlist, file)
    temperature = parsed.temperature if parsed.temperature is not None else technology.nominal_temperature
    return Config(
        title=parsed.title or path.stem,
        path=file,
        technology=technology,
        technology_path=tech_path,
        temperature=temperature,
        circuit=netlist,
        measures=measures,
        specs=specs,
        analysis=parsed.analysis,
        placement=parsed.placement,
        notes=parsed.notes,
        text=text,
        technology_text=tech_text,
    )


# --------------------------------------------------------------------------------------------- semantic checks
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
    for i, c in enumerate(netlist.current_source):
        if c.from_ == c.to:
            raise ConfigError("both ends on the same node", file=file, key=f"circuit.current_source[{i}].to")

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
    for key, measure in measures.items():
        path = f"measures.{key}"
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
    if analysis.area is not None:
        mosfets = {m.name for m in netlist.mosfet}
        for i, name in enumerate(analysis.area.devices):
            if name not in mosfets:
                raise ConfigError(_unknown("MOSFET", name, mosfets), file=file, key=f"analysis.area.devices[{i}]")


def check_placement(placement: Placement | None, netlist: Netlist, file: str) -> None:
    """Placement letters name MOSFETs of the netlist."""
    if placement is None:
        return
    mosfets = {m.name for m in netlist.mosfet}
    for letter, name in placement.devices.items():
        if name not in mosfets:
            raise ConfigError(_unknown("MOSFET", name, mosfets), file=file, key=f"placement.devices.{letter}")


def check_spec_references(analysis: Analysis, specs: dict[str, Limits], file: str) -> None:
    """Names in [analysis.high_sigma] and [analysis.bank] must be spec'd measures."""
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
