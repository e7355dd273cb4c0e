"""Table cells, rows and tables as the template draws them; status words."""

from __future__ import annotations

import re

from markupsafe import Markup


def cell(text: object, cls: str = "", title: str = "") -> dict:
    """A table cell; text is escaped by the template unless it is Markup (only the module's own constant labels)."""
    return {"text": "" if text is None else text if isinstance(text, Markup) else str(text), "cls": cls, "title": title}


def sub(text: str) -> Markup:
    """A constant label with subscripts written as X_ab: "V_GS" -> V<sub>GS</sub>. Never for user strings."""
    return Markup(re.sub(r"([A-Za-z])_([A-Za-z0-9,]+)", r"\1<sub>\2</sub>", str(Markup.escape(text))))


def num(text: object) -> dict:
    return cell(text, "num")


def table(columns: list[str | tuple[str, str]], rows: list[dict], caption: str = "", cls: str = "") -> dict:
    """Template table: columns are labels or (label, css class); rows {"cells": [...], "cls": ""}."""
    cols = [{"label": c, "cls": ""} if isinstance(c, str) else {"label": c[0], "cls": c[1]} for c in columns]
    for c in cols:
        if c["label"] == "status" and not c["cls"]:
            c["cls"] = "status-col"  # kept in view on a narrow screen (style.css)
    return {"columns": cols, "rows": rows, "caption": caption, "cls": cls}


def row(cells: list, cls: str = "") -> dict:
    return {"cells": [c if isinstance(c, dict) else cell(c) for c in cells], "cls": cls}


STATUS = {
    "pass": ("\u2713 PASSES", "status-pass"),
    "fail": ("\u2717 FAILS", "status-fail"),
    "marginal": ("? NOT DEMONSTRATED", "status-marginal"),
}


def status_cell(status: str) -> dict:
    text, cls = STATUS[status]
    return cell(text, f"status {cls}")
