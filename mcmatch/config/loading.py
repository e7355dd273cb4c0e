"""TOML config -> validated :class:`~mcmatch.config.schema.Config`. The only module that reads input files.

Validation is pydantic's (:mod:`mcmatch.config.schema`); every problem becomes a :class:`~mcmatch.errors.ConfigError`
naming the file, the key path (``circuit.mosfet[1].w``) and what was expected.
"""

from __future__ import annotations

import difflib
import tomllib
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError

from mcmatch.config.checks import (
    check_analysis,
    check_measures,
    check_netlist,
    check_placement,
    check_spec_references,
    parse_specs,
)
from mcmatch.config.schema import FROM_TEMPLATE, Config, Measure, Netlist, RawConfig, Technology
from mcmatch.errors import ConfigError, quote


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


def technology_file(name: str, config_path: Path) -> Path:
    """Where a config's `technology = "..."` points: the path relative to the config file, resolved."""
    return (config_path.parent / name).resolve()


def load_technology(data: str | dict[str, Any], config_path: Path) -> tuple[Technology, str | None, str]:
    """Resolve a technology: a path relative to the config file, or an inline table."""
    if isinstance(data, str):
        tech_path = technology_file(data, config_path)
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
    context = None
    if "template" in circuit_raw:
        from mcmatch.config.templates import expand_template  # templates build on config's types

        circuit_raw, default_measures = expand_template(circuit_raw, file)
        measures = {**default_measures, **measures}
        context = FROM_TEMPLATE if "load_sizing" in circuit_raw else None  # loads sized when a run starts
    try:
        netlist = Netlist.model_validate(circuit_raw, context=context)
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
