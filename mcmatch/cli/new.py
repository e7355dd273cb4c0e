"""`mcmatch new TEMPLATE [--out FILE]`: write a commented starter config that runs as written."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path
from typing import TYPE_CHECKING

import mcmatch
from mcmatch.errors import ConfigError

if TYPE_CHECKING:
    from mcmatch.config.schema import Measure

#: The technology library beside the package in a source checkout (configs/technologies/NAME.toml).
TECHNOLOGY_LIBRARY = Path(mcmatch.__file__).resolve().parent.parent / "configs" / "technologies"

#: Used inline when the library is not reachable (an installed package): the values of demo180.toml, invented.
INLINE_TECHNOLOGY = """\
[technology]   # inline: illustrative 180 nm-class process, INVENTED values (not a foundry's data)
name = "Illustrative 180 nm-class process (invented values)"
nominal_temperature = "27 degC"
[technology.nmos]
model = "square-law"
kprime = "300 uA/V^2"
vth0 = "0.45 V"
lambda_l = "0.08 um/V"
gamma = "0.45 V^0.5"
phi = "0.85 V"
slope = 1.3
a_vt = "4.5 mV*um"
a_beta = "1 %*um"
vth_tempco = "-1 mV/K"
mobility_exponent = -1.5
[technology.pmos]
model = "square-law"
kprime = "70 uA/V^2"
vth0 = "0.48 V"
lambda_l = "0.10 um/V"
gamma = "0.40 V^0.5"
phi = "0.80 V"
slope = 1.35
a_vt = "5.0 mV*um"
a_beta = "1.1 %*um"
vth_tempco = "-1.2 mV/K"
mobility_exponent = -1.4
[technology.corners.ff]
nmos = { vth_shift = "-40 mV", kprime_scale = 1.08 }
pmos = { vth_shift = "-40 mV", kprime_scale = 1.08 }
[technology.corners.ss]
nmos = { vth_shift = "40 mV", kprime_scale = 0.92 }
pmos = { vth_shift = "40 mV", kprime_scale = 0.92 }
[technology.corners.fs]
nmos = { vth_shift = "-40 mV", kprime_scale = 1.08 }
pmos = { vth_shift = "40 mV", kprime_scale = 0.92 }
[technology.corners.sf]
nmos = { vth_shift = "40 mV", kprime_scale = 0.92 }
pmos = { vth_shift = "-40 mV", kprime_scale = 1.08 }
"""

MEASURE_MEANINGS = {
    "current": "channel current [A]",
    "voltage": "node voltage to gnd [V]",
    "ratio": "ratio error against the ideal ratio [fraction]",
    "resistance": "small-signal resistance from the node to gnd [ohm]",
    "port_resistance": "small-signal resistance seen by the voltage source, dV/dI [ohm]",
}


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("new", help="write a commented starter config for a template (see `mcmatch templates`)")
    p.add_argument("template", help="template name, e.g. simple_mirror")
    p.add_argument("--out", help="file to write (default: print to standard output)")
    p.add_argument("--type", choices=("nmos", "pmos"), default="nmos", help="polarity of the mirror (default nmos)")
    p.add_argument(
        "--technology",
        default="demo180",
        help="technology file, or the name of one in configs/technologies (default demo180)",
    )
    p.add_argument("--expanded", action="store_true", help="write the expanded netlist instead of the template")
    p.add_argument("--force", action="store_true", help="overwrite an existing --out file")
    p.set_defaults(execute=execute)


def _technology_file(choice: str) -> Path | None:
    """The technology file meant by `choice` (a path, or a name in the library); None if only inline is possible."""
    given = Path(choice)
    if given.suffix == ".toml" or len(given.parts) > 1:
        if not given.is_file():
            raise ConfigError(f"technology file '{choice}' not found", "command line", "--technology")
        return given.resolve()
    candidate = TECHNOLOGY_LIBRARY / f"{choice}.toml"
    if candidate.is_file():
        return candidate
    if choice == "demo180":
        return None
    known = sorted(p.stem for p in TECHNOLOGY_LIBRARY.glob("*.toml")) if TECHNOLOGY_LIBRARY.is_dir() else []
    raise ConfigError(
        f"no technology '{choice}' (expected a .toml path" + (f" or one of: {', '.join(known)})" if known else ")"),
        "command line",
        "--technology",
    )


def technology_line(choice: str, folder: Path) -> tuple[str, str]:
    """(top-level `technology = ...` line, trailing inline table or "") for a config written into `folder`."""
    from mcmatch.config.templates import toml_value

    tech = _technology_file(choice)
    if tech is not None:
        try:
            relative = Path(os.path.relpath(tech, folder.resolve())).as_posix()
        except ValueError:  # another drive: no relative path exists
            relative = None
        if relative is not None:
            return f"technology = {toml_value(relative)}   # path relative to this file", ""
        return f"technology = {toml_value(tech.as_posix())}", ""
    return "", INLINE_TECHNOLOGY


def _measure_table(measure: Measure) -> str:
    from mcmatch.config.templates import toml_value

    fields = measure.model_dump(exclude_none=True)
    if "ratio" in fields:
        fields["ratio"] = list(fields["ratio"])
        ideal = fields.get("ideal")
        if ideal is not None and float(ideal).is_integer():
            fields["ideal"] = int(ideal)
    return toml_value(fields)


def _parameter_lines(name: str, polarity: str, supply: float) -> list[str]:
    """`key = value` lines of every template parameter, each under a comment saying what it means."""
    from mcmatch.config.templates import TEMPLATES, parameter_names, toml_value
    from mcmatch.config.topologies import DEFAULT_WIDTH
    from mcmatch.units import format_quantity

    model = TEMPLATES[name].parameters
    lines = []
    for key in parameter_names(name):
        info = model.model_fields[key]
        lines.append(f"# {info.description}")
        if key == "type":
            lines.append(f"type = {toml_value(polarity)}")
        elif key == "w":
            lines.append(f"w = {toml_value(format_quantity(DEFAULT_WIDTH[polarity], 'm'))}")
        elif key == "output_voltage":
            lines.append(f"output_voltage = {toml_value(format_quantity(supply / 2, 'V'))}")
        elif info.default is None:
            example = {
                "load_current": '"40 uA"',
                "reference_units": "2",
                "cascode_bias": '"0.9 V"',
                "bias_current": '"10 uA"',
            }.get(key, '""')
            lines.append(f"# {key} = {example}")
        else:
            lines.append(f"{key} = {toml_value(info.default)}")
    return lines


def starter_config(name: str, polarity: str, technology: str, folder: Path, expanded: bool = False) -> str:
    """The text of a commented starter config for template `name`, to be written into directory `folder`."""
    from mcmatch.config.schema import Netlist
    from mcmatch.config.templates import expand_template, get_template, netlist_toml, toml_value

    template = get_template(name, "command line")
    tech_line, inline = technology_line(technology, folder)
    defaults = template.parameters.model_validate({"type": polarity})
    netlist, measures = expand_template({"template": name, "type": polarity}, "(starter)")
    title = f"{name.replace('_', ' ')} ({polarity}), starter (illustrative)"
    lines = [
        f"# mcmatch starter config: {template.summary}.",
        f"# Written by `mcmatch new {name}`. Every value is an illustrative starting point; edit it to your design.",
        "# Next: `mcmatch check THIS_FILE` shows each device's region, overdrive and headroom at the nominal point;",
        "#       `mcmatch run THIS_FILE` runs the Monte Carlo mismatch study and writes summary.json and samples.",
        '# Quantities are strings with units ("4 um", "10 uA") or plain numbers in SI units.',
        f"title = {toml_value(title)}",
    ]
    if tech_line:
        lines.append(tech_line)
    lines += ['temperature = "27 degC"', ""]
    if expanded:
        lines += [f"# The netlist of template {name!r} with its default parameters, ready to edit.", ""]
        lines.append(netlist_toml(Netlist.model_validate({k: v for k, v in netlist.items() if k != "template"})))
    else:
        if template.notes:
            lines.append(f"# {name}: {template.notes}.")
        lines += ["[circuit]", f"template = {toml_value(name)}", *_parameter_lines(name, polarity, defaults.supply), ""]
    lines += [
        "[measures]",
        "# The template records these by default (uncomment a line to change it, or add measures of your own):"
        if not expanded
        else "# What is recorded for every sample:",
    ]
    for key, measure in measures.items():
        line = f"{key} = {_measure_table(measure)}"
        lines.append(f"{'' if expanded else '# '}{line:<56} # {MEASURE_MEANINGS[measure.kind]}")
    lines += [
        "",
        "[specs]",
        "# Limits per measure, in its unit; the yield is the fraction of samples inside all of them.",
    ]
    errors = [key for key in measures if key.startswith("err")]
    for key in errors:
        lines.append(f'{key} = {{ min = "-5 %", max = "5 %" }}')
    if not errors:
        lines.append('# v_nb = { min = "0.55 V", max = "0.75 V" }')
    lines += [
        "",
        "[analysis]",
        "samples = 20000   # Monte Carlo samples (mcmatch run --samples overrides)",
        "seed = 1          # same seed, same numbers",
    ]
    text = "\n".join(lines) + "\n"
    if inline:
        text += "\n" + inline
    return text


def execute(args: argparse.Namespace) -> int:
    from mcmatch.config.loading import config_from_dict
    from mcmatch.config.templates import get_template
    from mcmatch.results.atomic import write_text_atomic
    from mcmatch.results.folder import check_output_file

    get_template(args.template, "command line")
    out = None if args.out is None else Path(check_output_file(args.out, "--out"))  # "" is an error too
    folder = out.parent if out is not None else Path.cwd()
    if out is not None and out.exists() and not args.force:
        raise ConfigError("the file exists; choose another --out or add --force", str(out), "--out")
    text = starter_config(args.template, args.type, args.technology, folder, args.expanded)
    # the starter must run as written: validate it where it will live before writing anything
    import tomllib

    from mcmatch.run.loads import resolve_loads

    resolve_loads(config_from_dict(tomllib.loads(text), (folder / (out.name if out else "starter.toml")), text))
    if out is None:
        sys.stdout.write(text)
        return 0
    write_text_atomic(out, text)
    print(f"wrote {out}: next `mcmatch check {out}`, then `mcmatch run {out}`", file=sys.stderr)
    return 0
