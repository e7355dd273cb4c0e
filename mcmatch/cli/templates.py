"""`mcmatch templates [NAME]`: the built-in circuit templates with their parameters and defaults."""

from __future__ import annotations

import argparse


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("templates", help="list the built-in circuit templates, their parameters and defaults")
    p.add_argument("name", nargs="?", help="show only this template")
    p.set_defaults(execute=execute)


def describe(name: str) -> str:
    """A template's name, summary, notes and one line per parameter: name, default, meaning."""
    from mcmatch.config.templates import TEMPLATES, parameter_rows

    template = TEMPLATES[name]
    lines = [f"{name}: {template.summary}"]
    if template.notes:
        lines.append(f"  ({template.notes})")
    rows = parameter_rows(name)
    width = max(len(p) for p, _, _ in rows)
    default_width = max(len(d or "(auto)") for _, d, _ in rows)
    for parameter, default, meaning in rows:
        lines.append(f"    {parameter:<{width}} = {default or '(auto)':<{default_width}}  {meaning}")
    return "\n".join(lines)


def execute(args: argparse.Namespace) -> int:
    from mcmatch.config.templates import TEMPLATES, get_template

    names = [get_template(args.name, "command line").name] if args.name else list(TEMPLATES)
    print(
        'Use one in a config as [circuit] template = "NAME" plus its parameters; "mcmatch new NAME" writes a starter.'
    )
    print("Devices MREF, MOUT1.., nodes nb, out1.., sources IREF, VDD, VOUT1..; quantities as strings with units;")
    print("(auto): the default described beside it.")
    for name in names:
        print()
        print(describe(name))
    return 0
