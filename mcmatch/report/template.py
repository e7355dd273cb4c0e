"""The jinja2 template of the report, with autoescape on, and its inlined stylesheet (package data)."""

from __future__ import annotations

from functools import lru_cache
from importlib import resources

from jinja2 import Environment, PackageLoader, StrictUndefined
from markupsafe import Markup


@lru_cache(maxsize=1)
def environment() -> Environment:
    env = Environment(
        loader=PackageLoader("mcmatch.report", "assets"),
        autoescape=True,  # every user string (title, names, notes, config text) is escaped
        undefined=StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters["css_string"] = css_string
    return env


def css_string(text: object) -> Markup:
    """A CSS string literal of `text` for the inline stylesheet, where HTML escaping does not apply: quotes,
    backslashes, "<" (so no "</style>" can close the sheet) and every character outside printable ASCII are written
    as CSS hexadecimal escapes."""
    out = []
    for ch in str(text):
        if " " <= ch <= "~" and ch not in "\\\"'<>&":
            out.append(ch)
        else:
            out.append(f"\\{ord(ch):06x}")
    return Markup('"' + "".join(out) + '"')


@lru_cache(maxsize=1)
def _css() -> str:
    return resources.files("mcmatch.report").joinpath("assets/style.css").read_text(encoding="utf-8")


def render(context: dict) -> str:
    """The report's HTML from a context of display strings, tables and Markup figures (see render.build_context)."""
    return environment().get_template("report.html.j2").render(**context, css=Markup(_css()))
