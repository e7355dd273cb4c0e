"""The design-review report: one self-contained HTML file per run, from the summary, the sample table and the config.

:func:`render_report` is pure (data in, HTML string out): figures come from :mod:`mcmatch.report.figures` as ``data:``
URIs, the CSS is inlined, nothing is fetched from anywhere. The template is jinja2 with autoescape on, so every string
from the user (title, names, notes, the config text) is escaped. :func:`write_report` re-renders a saved run folder.
Values stay SI until here; this module only converts them to engineering units for display.
"""

from __future__ import annotations

import json
import math
import os
import re
import tomllib
from collections.abc import Iterable, Mapping
from datetime import datetime
from functools import lru_cache
from importlib import resources
from pathlib import Path

import numpy as np
import pandas as pd
from jinja2 import Environment, PackageLoader, StrictUndefined
from markupsafe import Markup
from scipy import stats

from mcmatch.errors import ConfigError

#: Reference yield when a summary carries no target: +-3 sigma of a normal distribution, two-sided [1].
DEFAULT_TARGET = 0.9973
#: Measures shown with a normal-probability plot when none has a spec, at most this many.
MAX_KEY_MEASURES = 4
#: Measures drawn as contribution bars, at most (every measure still gets its table).
MAX_CONTRIBUTION_FIGURES = 6
#: Specs of one status listed one by one in the verdict; more are summed up in one line.
MAX_FINDINGS = 3
#: Failed-solve examples listed, at most.
MAX_EXAMPLES = 5
#: Corner rows drawn in the corner spread figure, at most (the table always lists every corner).
MAX_CORNER_ROWS = 60

SI_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "\u00b5", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}
UNIT_SYMBOLS = {"ohm": "\u03a9", "A/V^2": "A/V\u00b2", "V^0.5": "V^\u00bd"}

# --------------------------------------------------------------------------------------------- formatting


def _finite(value: object) -> float | None:
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def eng(value: object, unit: str = "", digits: int = 4) -> str:
    """A value [SI `unit`] in engineering notation: 4.042e-05, "A" -> "40.42 µA"; unit "1" -> percent."""
    v = _finite(value)
    if v is None:
        return "\u2013"
    if unit == "1":
        return percent(v, digits)
    symbol = UNIT_SYMBOLS.get(unit, unit)
    if v == 0:
        return f"0 {symbol}".strip()
    exp = max(-15, min(9, 3 * math.floor(math.log10(abs(v)) / 3)))
    text = f"{v / 10**exp:.{digits}g}"
    if abs(float(text)) >= 1000 and exp < 9:  # rounding carried into the next prefix
        exp += 3
        text = f"{v / 10**exp:.{digits}g}"
    return f"{text} {SI_PREFIXES[exp]}{symbol}".strip()


def percent(fraction: object, digits: int = 4) -> str:
    """A dimensionless fraction as percent (ppm below 10 ppm): 0.0105 -> "1.052 %"."""
    v = _finite(fraction)
    if v is None:
        return "\u2013"
    if v != 0 and abs(v) < 1e-5:
        return f"{v * 1e6:.{digits}g} ppm"
    return f"{v * 100:.{digits}g} %"


def fixed(value: object, factor: float, unit: str, digits: int = 4) -> str:
    """value * factor in a fixed display unit: fixed(4.5e-9, 1e9, "mV·µm") -> "4.5 mV·µm"."""
    v = _finite(value)
    return "\u2013" if v is None else f"{v * factor:.{digits}g} {unit}".strip()


def plain(value: object, digits: int = 4) -> str:
    """A plain number to `digits` significant digits, without an exponent below a billion: 4670.2 -> "4,670"."""
    v = _finite(value)
    if v is None:
        return "\u2013"
    if 10**digits <= abs(v) < 1e9:
        return f"{v:,.0f}"
    return f"{v:.{digits}g}"


def yield_text(fraction: object) -> str:
    """A yield in percent with enough decimals to show two digits of the failure fraction: 0.99873 -> "99.873 %"."""
    v = _finite(fraction)
    if v is None:
        return "\u2013"
    fail = (1.0 - v) * 100
    decimals = 1 if fail <= 0 else max(1, min(6, 1 - math.floor(math.log10(fail))))
    text = f"{v * 100:.{decimals}f}"
    if v < 1 and float(text) >= 100:  # never print 100 % for a yield below one
        text = f"{math.floor(v * 100 * 10**decimals) / 10**decimals:.{decimals}f}"
    return f"{text} %"


def interval_text(ci: object) -> str:
    if not isinstance(ci, (list, tuple)) or len(ci) != 2:
        return "\u2013"
    return f"{yield_text(ci[0])} \u2026 {yield_text(ci[1])}"


def celsius(kelvin: object) -> str:
    v = _finite(kelvin)
    return "\u2013" if v is None else f"{v - 273.15:.4g} \u00b0C"


def sigma_equivalent(fraction: object) -> str:
    """Two-sided normal-equivalent of a yield: 0.9973 -> "±3.00 sigma"."""
    v = _finite(fraction)
    if v is None or v <= 0:
        return "\u2013"
    if v >= 1:
        return "no failing sample"
    return f"\u00b1{stats.norm.ppf(0.5 + v / 2):.2f} sigma"


def limits_text(limits: Mapping | None, unit: str) -> str:
    if not limits:
        return "\u2013"
    lo, hi = limits.get("min"), limits.get("max")
    if lo is not None and hi is not None:
        return f"{eng(lo, unit)} \u2026 {eng(hi, unit)}"
    if lo is not None:
        return f"\u2265 {eng(lo, unit)}"
    if hi is not None:
        return f"\u2264 {eng(hi, unit)}"
    return "\u2013"


def display_scale(values: Iterable[object], unit: str) -> tuple[float, str]:
    """(factor, label) that puts SI `values` of `unit` into one engineering unit for an axis: ("A", 4e-5) -> 1e6 µA."""
    if unit == "1":
        return 100.0, "%"
    finite = [abs(v) for v in (_finite(x) for x in values) if v]
    symbol = UNIT_SYMBOLS.get(unit, unit)
    if not finite:
        return 1.0, symbol
    exp = max(-15, min(9, 3 * math.floor(math.log10(max(finite)) / 3)))
    return 10.0**-exp, f"{SI_PREFIXES[exp]}{symbol}"


# --------------------------------------------------------------------------------------------- tables


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


# --------------------------------------------------------------------------------------------- sections


def _target(summary: dict) -> dict:
    """Target yield, confidence and whether it is the summary's or the default reference."""
    t = summary.get("yield", {}).get("target")
    if isinstance(t, Mapping) and _finite(t.get("yield")) is not None:
        return {**t, "given": True, "confidence": t.get("confidence", 0.95)}
    if _finite(t) is not None:
        return {"yield": float(t), "confidence": 0.95, "given": True}
    return {"yield": DEFAULT_TARGET, "confidence": 0.95, "given": False}


def judge(block: Mapping, target: float, lower_bound: float | None = None) -> str:
    """pass: the interval lies at or above the target; fail: above it nowhere; marginal: the interval straddles it."""
    ci = block.get("ci95") or [None, None]
    lo = _finite(lower_bound) if lower_bound is not None else _finite(ci[0])
    hi = _finite(ci[1])
    frac = _finite(block.get("fraction"))
    if lo is not None and lo >= target:
        return "pass"
    if (hi is not None and hi < target) or (hi is None and frac is not None and frac < target):
        return "fail"
    return "marginal"


def _spec_unit(summary: dict, name: str) -> str:
    return summary.get("measures", {}).get(name, {}).get("unit") or summary.get("specs", {}).get(name, {}).get(
        "unit", ""
    )


def _corner_label(c: Mapping) -> str:
    parts = [str(c.get("process", "?")), celsius(c.get("temperature"))]
    if c.get("supply") is not None:
        parts.append(eng(c.get("supply"), "V"))
    return ", ".join(parts)


def _worst_indices(summary: dict) -> dict[str, int]:
    """Index into summary["corners"] of the worst corner per measure (summary["corners_worst"])."""
    corners = summary.get("corners") or []
    out = {}
    for name, w in (summary.get("corners_worst") or {}).items():
        if not isinstance(w, Mapping):
            continue
        for i, c in enumerate(corners):
            same_t = (
                _finite(c.get("temperature")) is not None and abs(c["temperature"] - w.get("temperature", 0)) < 1e-6
            )
            same_v = (c.get("supply") is None and w.get("supply") is None) or (
                c.get("supply") is not None
                and w.get("supply") is not None
                and abs(float(c["supply"]) - float(w["supply"])) < 1e-9
            )
            if c.get("process") == w.get("process") and same_t and same_v:
                out[name] = i
                break
    return out


def verdict_section(summary: dict, key_measures: list[str]) -> dict:
    y = summary.get("yield") or {}
    target = _target(summary)
    specs = summary.get("specs") or {}
    target_yield = float(target["yield"])
    status = judge(y, target_yield, target.get("lower_bound")) if y else "marginal"
    if isinstance(target.get("met"), bool):
        status = "pass" if target["met"] else ("fail" if status == "fail" else "marginal")
    findings = []
    failing: list[str] = []
    fails: list[tuple] = []
    marginals: list[tuple] = []
    for name, block in (y.get("specs") or {}).items():
        s = judge(block, target_yield)
        unit = _spec_unit(summary, name)
        nominal = summary.get("measures", {}).get(name, {}).get("nominal")
        lim = specs.get(name, block)
        outside_nominal = nominal is not None and (
            (lim.get("min") is not None and nominal < lim["min"])
            or (lim.get("max") is not None and nominal > lim["max"])
        )
        if outside_nominal:
            findings.append(
                {
                    "word": "FAILS",
                    "cls": "status-fail",
                    "text": f"{name}: the nominal value {eng(nominal, unit)} is "
                    f"outside the spec {limits_text(lim, unit)} before any mismatch.",
                }
            )
        if s == "fail":
            failing.append(name)
            fails.append((name, block, lim, unit))
        elif s == "marginal":
            marginals.append((name, block, lim, unit))
    findings += _spec_findings(fails, "FAILS", "status-fail", "is below", target_yield)
    findings += _spec_findings(marginals, "NOT DEMONSTRATED", "status-marginal", "does not settle", target_yield)
    corners = summary.get("corners") or []
    worst = _worst_indices(summary)
    corner_lines = []
    for name, i in worst.items():
        if name not in key_measures:
            continue
        c = corners[i]
        w = summary["corners_worst"][name]
        block = (c.get("yield") or {}).get("specs", {}).get(name)
        if block is not None and name in specs:
            frac = block.get("fraction")
            word, cls = (
                ("FAILS", "status-fail") if frac is not None and frac < target_yield else ("meets", "status-pass")
            )
            corner_lines.append(
                {
                    "word": word,
                    "cls": cls,
                    "text": f"{name}: worst corner {_corner_label(c)} with spec yield "
                    f"{yield_text(frac)} ({c.get('samples', '?')} samples).",
                    "rank": frac if frac is not None else 0.0,
                }
            )
        else:
            m = c.get("measures", {}).get(name, {})
            unit = _spec_unit(summary, name)
            corner_lines.append(
                {
                    "word": "worst",
                    "cls": "",
                    "text": f"{name}: largest spread at {_corner_label(c)}: mean "
                    f"{eng(m.get('mean'), unit)}, sigma {eng(m.get('std'), unit)}"
                    + (f" ({w.get('criterion')})." if w.get("criterion") else "."),
                    "rank": 2.0,
                }
            )
    if len(corner_lines) > MAX_FINDINGS:  # the lowest corner yields first, the rest left to the corner table
        corner_lines.sort(key=lambda line: line["rank"])
        more = len(corner_lines) - MAX_FINDINGS
        corner_lines = corner_lines[:MAX_FINDINGS]
        corner_lines.append({"word": "", "cls": "", "text": f"\u2026 and {more} more measures: see the corner table."})
    failed = int(summary.get("failed_solves") or 0)
    if failed:
        findings.append(
            {
                "word": "CAUTION",
                "cls": "status-marginal",
                "text": f"{failed:,} of {summary.get('samples', 0):,} samples "
                "did not converge; they count as failures in every yield above.",
            }
        )
    needed = target.get("samples_needed")
    if needed is None and target_yield < 1:
        from mcmatch.stats.yields import samples_needed

        needed = samples_needed(target_yield, float(target.get("confidence") or 0.95))
    return {
        "status": status,
        "word": {"pass": "MEETS TARGET", "fail": "FAILS TARGET", "marginal": "TARGET NOT DEMONSTRATED"}[status],
        "cls": STATUS[status][1],
        "has_yield": bool(y) and bool(specs),
        "yield": yield_text(y.get("fraction")),
        "ci": interval_text(y.get("ci95")),
        "sigma": sigma_equivalent(y.get("fraction")),
        "passed": y.get("passed"),
        "total": y.get("total"),
        "target": yield_text(target_yield),
        "target_sigma": sigma_equivalent(target_yield),
        "target_given": target["given"],
        "confidence": percent(target.get("confidence"), 3),
        "lower_bound": yield_text(target.get("lower_bound")) if target.get("lower_bound") is not None else None,
        "samples_needed": f"{int(needed):,}" if needed is not None else None,
        "findings": findings,
        "corners": corner_lines,
        "failing": failing,
    }


def _spec_findings(entries: list[tuple], word: str, cls: str, verb: str, target: float) -> list[dict]:
    """Verdict lines for specs of one status: one line each, or one line for all when there are more than three."""
    tail = "; more samples would settle it." if word != "FAILS" else "."
    if len(entries) <= MAX_FINDINGS:
        return [
            {
                "word": word,
                "cls": cls,
                "text": f"{name}: spec yield {yield_text(block.get('fraction'))} (95 % interval "
                f"{interval_text(block.get('ci95'))}) {verb} the target {yield_text(target)}; spec "
                f"{limits_text(lim, unit)}{tail}",
            }
            for name, block, lim, unit in entries
        ]
    fractions = [b.get("fraction") for _, b, _, _ in entries if _finite(b.get("fraction")) is not None]
    lows = [b["ci95"][0] for _, b, _, _ in entries if isinstance(b.get("ci95"), list)]
    names = ", ".join(name for name, *_ in entries)
    spread = f"{yield_text(min(fractions))} \u2026 {yield_text(max(fractions))}" if fractions else "\u2013"
    return [
        {
            "word": word,
            "cls": cls,
            "text": f"{len(entries)} specs ({names}): spec yields {spread}, lowest 95 % bound "
            f"{yield_text(min(lows)) if lows else chr(8211)}; each {verb} the target {yield_text(target)}{tail}",
        }
    ]


def header_items(summary: dict) -> list[tuple[str, str, str]]:
    """(label, value, css class) for the header grid."""
    run = summary.get("run") or {}
    started = run.get("started_utc")
    try:
        date = datetime.fromisoformat(started).strftime("%Y-%m-%d %H:%M UTC") if started else "\u2013"
    except ValueError:
        date = str(started)
    seconds = _finite(run.get("run_time_s"))
    items = [
        ("Run date", date, ""),
        ("mcmatch", str(run.get("mcmatch_version", "\u2013")), ""),
        ("Samples", f"{summary.get('samples', 0):,}", ""),
        ("Seed", str(summary.get("seed", "\u2013")), ""),
        ("Run time", f"{seconds:.3g} s" if seconds is not None else "\u2013", ""),
        ("Machine", str(run.get("machine", "\u2013")), ""),
        ("Python", str(run.get("python", "\u2013")), ""),
        ("Technology", str(run.get("technology") or (summary.get("technology") or {}).get("name", "\u2013")), ""),
    ]
    cond = summary.get("conditions") or {}
    if cond:
        items.append(("Condition", f"{cond.get('corner', 'tt')}, {celsius(cond.get('temperature'))}", ""))
    if run.get("sampling") or summary.get("sampling"):
        items.append(("Sampling", sampling_text(run.get("sampling") or summary.get("sampling")), ""))
    items.append(("Config", str(run.get("config", "\u2013")), "mono"))
    items.append(("Config digest (sha256)", str(run.get("config_digest", "\u2013")), "mono digest"))
    return items


ELEMENT_UNITS = {"current_source": "A", "voltage_source": "V", "resistor": "ohm"}
ELEMENT_TITLES = {
    "mosfet": "MOSFETs",
    "current_source": "Current sources (value flows from 'from' through the source into 'to')",
    "voltage_source": "Voltage sources",
    "resistor": "Resistors",
}


def circuit_section(summary: dict, config: Mapping) -> dict | None:
    circuit = summary.get("circuit")
    tech = summary.get("technology")
    if not circuit and not tech:
        return None
    tables = []
    for kind, elements in (circuit or {}).items():
        if not isinstance(elements, list) or not elements:
            continue
        if kind == "mosfet":
            rows = []
            for m in elements:
                w, length, mult = _finite(m.get("w")), _finite(m.get("l")), _finite(m.get("m")) or 1
                area = w * length * mult if w and length else None
                rows.append(
                    row(
                        [
                            cell(m.get("name"), "name"),
                            m.get("type", ""),
                            m.get("drain", ""),
                            m.get("gate", ""),
                            m.get("source", ""),
                            m.get("bulk") or ("gnd" if m.get("type") == "nmos" else m.get("source", "")),
                            num(fixed(w, 1e6, "\u00b5m")),
                            num(fixed(length, 1e6, "\u00b5m")),
                            num(plain(mult)),
                            num(fixed(area, 1e12, "\u00b5m\u00b2")),
                        ]
                    )
                )
            tables.append(
                table(
                    [
                        "name",
                        "type",
                        "drain",
                        "gate",
                        "source",
                        "bulk",
                        ("W", "num"),
                        ("L", "num"),
                        ("m", "num"),
                        ("gate area m\u00b7W\u00b7L", "num"),
                    ],
                    rows,
                    ELEMENT_TITLES[kind],
                )
            )
        else:
            unit = ELEMENT_UNITS.get(kind, "")
            keys = [k for k in elements[0] if k not in ("name", "value")]
            rows = [
                row([cell(e.get("name"), "name"), *[str(e.get(k, "")) for k in keys], num(eng(e.get("value"), unit))])
                for e in elements
            ]
            tables.append(table(["name", *keys, ("value", "num")], rows, ELEMENT_TITLES.get(kind, kind), "compact"))
    measures = []
    for name, definition in (config.get("measures") or {}).items():
        if isinstance(definition, Mapping):
            text = "; ".join(
                f"{k} = {v if not isinstance(v, list) else ' / '.join(map(str, v))}" for k, v in definition.items()
            )
            unit = summary.get("measures", {}).get(name, {}).get("unit", "")
            measures.append(
                row([cell(name, "name"), text, UNIT_SYMBOLS.get(unit, unit) if unit != "1" else "1 (shown in %)"])
            )
    return {
        "tables": tables,
        "measures": table(["measure", "definition", "unit"], measures, "Measures recorded for every sample", "compact")
        if measures
        else None,
        "technology": technology_table(tech) if tech else None,
        "process_corners": corner_definition_table(tech) if tech else None,
        "technology_name": (tech or {}).get("name"),
        "technology_description": (tech or {}).get("description"),
        "nominal_temperature": celsius((tech or {}).get("nominal_temperature")),
    }


#: Technology parameters: (key, label, display factor, display unit). Pelgrom coefficients in the pair convention.
TECH_PARAMETERS = [
    ("model", "model", None, ""),
    ("kprime", "k' = \u00b5\u00b7Cox", 1e6, "\u00b5A/V\u00b2"),
    ("vth0", "|vth0|", 1e3, "mV"),
    ("lambda", "lambda", 1.0, "1/V"),
    ("lambda_l", "lambda\u00b7L", 1e6, "\u00b5m/V"),
    ("gamma", "gamma (body effect)", 1.0, "V^\u00bd"),
    ("phi", "phi = 2\u00b7phi_F", 1.0, "V"),
    ("slope", "slope factor n", 1.0, ""),
    ("a_vt", "A_VT (pair)", 1e9, "mV\u00b7\u00b5m"),
    ("a_beta", "A_beta (pair)", 1e8, "%\u00b7\u00b5m"),
    ("vth_tempco", "d|vth|/dT", 1e3, "mV/K"),
    ("mobility_exponent", "mobility exponent", 1.0, ""),
]


def technology_table(tech: Mapping) -> dict:
    polarities = [p for p in ("nmos", "pmos") if isinstance(tech.get(p), Mapping)]
    rows = []
    known = {k for k, *_ in TECH_PARAMETERS}
    extra = sorted({k for p in polarities for k in tech[p] if k not in known})
    for key, label, factor, unit in [*TECH_PARAMETERS, *[(k, k, 1.0, "") for k in extra]]:
        values = [tech[p].get(key) for p in polarities]
        if all(v is None for v in values):
            continue
        cells = [cell(label)]
        for v in values:
            if factor is None or not isinstance(v, (int, float)):
                cells.append(num("\u2013" if v is None else str(v)))
            else:
                cells.append(num(f"{v * factor:.4g}"))
        cells.append(cell(unit, "unit"))
        rows.append(row(cells))
    return table(["parameter", *[(p, "num") for p in polarities], "unit"], rows, "Technology parameters")


def corner_definition_table(tech: Mapping) -> dict | None:
    corners = tech.get("corners") or {}
    if not corners:
        return None
    rows = []
    for name, c in corners.items():
        cells = [cell(name, "name")]
        for p in ("nmos", "pmos"):
            shift = (c.get(p) or {}).get("vth_shift")
            scale = (c.get(p) or {}).get("kprime_scale")
            cells += [num(fixed(shift, 1e3, "mV")), num(plain(scale))]
        rows.append(row(cells))
    return table(
        [
            "corner",
            ("nmos vth shift", "num"),
            ("nmos k' scale", "num"),
            ("pmos vth shift", "num"),
            ("pmos k' scale", "num"),
        ],
        rows,
        "Global process corners (tt is the unshifted technology)",
    )


#: Operating-point rows (devices are columns): key -> (label, SI unit; None for text, "" for a plain number).
OP_ROWS = {
    "type": ("type", None),
    "model": ("model", None),
    "region": ("region", None),
    "inversion": ("inversion", None),
    "ic": ("inversion coefficient", ""),
    "id": (sub("I_D"), "A"),
    "vgs": (sub("V_GS"), "V"),
    "vds": (sub("V_DS"), "V"),
    "vsb": (sub("V_SB"), "V"),
    "vbs": (sub("V_BS"), "V"),
    "vth": (sub("V_th"), "V"),
    "vov": (sub("V_ov = V_GS \u2212 V_th"), "V"),
    "vdsat": (sub("V_DS,sat"), "V"),
    "headroom": (sub("headroom V_DS \u2212 V_DS,sat"), "V"),
    "gm": (sub("g_m"), "S"),
    "gmb": (sub("g_mb"), "S"),
    "gds": (sub("g_ds"), "S"),
    "ro": (sub("r_o"), "ohm"),
    "gm_id": (sub("g_m/I_D"), "1/V"),
    "diode_connected": ("diode-connected", None),
}
#: Keys shown elsewhere (the netlist table) or only when they say something.
OP_SKIP = {"name", "drain", "gate", "source", "bulk"}
#: Devices per operating-point table; a bank with more devices gets several tables.
OP_DEVICES_PER_TABLE = 8
#: Headroom below this flags a device as close to leaving saturation [V].
OP_HEADROOM = 0.05


def operating_point_tables(points: object) -> list[dict]:
    """The nominal operating point, one column per device (summary["operating_point"]); [] when absent."""
    if not isinstance(points, list) or not points or not all(isinstance(p, Mapping) for p in points):
        return []
    keys: list[str] = []
    for p in points:
        keys += [k for k in p if k not in keys and k not in OP_SKIP]
    if not any(p.get("reversed") for p in points):
        keys = [k for k in keys if k != "reversed"]
    keys = [k for k in OP_ROWS if k in keys] + [k for k in keys if k not in OP_ROWS]
    derived = all(_finite(p.get("gm")) and _finite(p.get("gds")) for p in points)
    tables = []
    for start in range(0, len(points), OP_DEVICES_PER_TABLE):
        chunk = points[start : start + OP_DEVICES_PER_TABLE]
        rows = []
        for k in keys:
            label, unit = OP_ROWS.get(k, (k.replace("_", " "), ""))
            cells = [cell(label)]
            for p in chunk:
                v = p.get(k)
                warn = (k == "region" and _op_warn(p)) or (
                    k == "headroom" and _finite(v) is not None and v < OP_HEADROOM
                )
                if isinstance(v, bool):
                    text = "yes" if v else "no"
                elif unit is None or v is None or isinstance(v, str):
                    text = "\u2013" if v is None else str(v)
                elif unit == "1/V":
                    text = fixed(v, 1.0, "/V", 3)
                elif unit:
                    text = eng(v, unit)
                else:
                    text = plain(v, 3)
                cells.append(cell(text, "num warn" if warn else "num"))
            rows.append(row(cells))
        if derived:
            rows.append(
                row([cell(sub("intrinsic gain g_m/g_ds")), *[num(plain(p["gm"] / p["gds"], 3)) for p in chunk]])
            )
            rows.append(row([cell(sub("r_o = 1/g_ds")), *[num(eng(1.0 / p["gds"], "ohm")) for p in chunk]]))
        columns = ["quantity", *[(str(p.get("name", "?")), "num device") for p in chunk]]
        part = f" ({start // OP_DEVICES_PER_TABLE + 1})" if len(points) > OP_DEVICES_PER_TABLE else ""
        tables.append(table(columns, rows, f"Device operating points (no mismatch, nominal corner){part}", "compact"))
    return tables


def _op_warn(p: Mapping) -> bool:
    region = str(p.get("region", "")).lower()
    headroom = _finite(p.get("headroom"))
    return (headroom is not None and headroom < OP_HEADROOM) or region not in ("saturation", "sat", "")


def nodes_table(op: object) -> dict | None:
    nodes = (op or {}).get("nodes") if isinstance(op, Mapping) else None
    if not nodes:
        return None
    return table(
        ["node", ("voltage to gnd", "num")],
        [row([cell(n, "name"), num(eng(v, "V"))]) for n, v in nodes.items()],
        "Nominal node voltages",
        "compact",
    )


def measures_table(summary: dict) -> dict | None:
    measures = summary.get("measures") or {}
    if not measures:
        return None
    specs = summary.get("specs") or {}
    rows = []
    for name, m in measures.items():
        unit = m.get("unit", "")
        q = m.get("quantiles") or {}
        mean, std = _finite(m.get("mean")), _finite(m.get("std"))
        rel = percent(std / abs(mean), 3) if mean and std is not None and unit != "1" else "\u2013"
        rows.append(
            row(
                [
                    cell(name, "name"),
                    num(eng(m.get("nominal"), unit)),
                    num(eng(m.get("mean"), unit)),
                    num(eng(m.get("std"), unit)),
                    num(rel),
                    num(eng(q.get("0.00135"), unit)),
                    num(eng(q.get("0.5"), unit)),
                    num(eng(q.get("0.99865"), unit)),
                    num(eng(m.get("min"), unit)),
                    num(eng(m.get("max"), unit)),
                    num(limits_text(specs.get(name), unit)),
                ]
            )
        )
    return table(
        [
            "measure",
            ("nominal", "num"),
            ("mean", "num"),
            ("sigma", "num"),
            ("sigma/|mean|", "num"),
            ("q 0.135 % (\u22123\u03c3)", "num"),
            ("median", "num"),
            ("q 99.865 % (+3\u03c3)", "num"),
            ("min", "num"),
            ("max", "num"),
            ("spec", "num"),
        ],
        rows,
        "Per-measure statistics over the converged samples (quantiles at the normal \u00b13 sigma points)",
    )


def sampling_text(sampling: object) -> str:
    """One line for the header: "Sobol' QMC, 8 scramblings x 2,048 points" or "pseudo-random"."""
    if not isinstance(sampling, Mapping):
        return str(sampling)
    if sampling.get("method") == "sobol":
        points = sampling.get("points_per_scrambling")
        each = f" \u00d7 {points:,} points" if isinstance(points, int) else ""
        return f"Sobol' QMC, {sampling.get('scramblings', '?')} scramblings{each}"
    return "pseudo-random" if sampling.get("method") == "random" else str(sampling.get("method", "\u2013"))


def sampling_section(summary: dict) -> dict | None:
    """Standard errors of each sigma and of the joint yield (summary["sampling"]), beside plain Monte Carlo's."""
    sampling = summary.get("sampling")
    if not isinstance(sampling, Mapping) or not isinstance(sampling.get("measures"), Mapping):
        return None
    sobol = sampling.get("method") == "sobol"
    measures = summary.get("measures") or {}
    rows = []
    for name, m in sampling["measures"].items():
        if not isinstance(m, Mapping):
            continue
        unit = (measures.get(name) or {}).get("unit", "")
        cells = [cell(f"sigma of {name}", "name"), num(eng(m.get("std"), unit)), num(eng(m.get("std_error"), unit))]
        cells.append(num(eng(m.get("mc_std_error"), unit)))
        if sobol:
            cells.append(num(plain(m.get("sample_ratio"), 3)))
        rows.append(row(cells))
    y = sampling.get("yield")
    if isinstance(y, Mapping) and summary.get("specs"):
        cells = [cell("joint yield", "name"), num(yield_text(y.get("fraction")))]
        cells += [num(percent(y.get("std_error"), 3)), num(percent(y.get("mc_std_error"), 3))]
        if sobol:
            cells.append(num(plain(y.get("sample_ratio"), 3)))
        rows.append(row(cells))
    if not rows:
        return None
    columns: list = ["estimate", ("value", "num"), ("standard error", "num"), ("plain MC s.e., same N", "num")]
    if sobol:
        columns.append(("sample ratio", "num"))
    notes = [f"Error estimate: {sampling.get('error_estimate') or 'not given'}."]
    if sobol:
        notes.append(
            "Sample ratio: plain Monte Carlo samples needed for the same standard error, per sample of this run "
            "((plain MC s.e. / standard error)\u00b2). With few scramblings the standard error is itself uncertain "
            f"(about \u00b1{100 / math.sqrt(2 * max(1, int(sampling.get('scramblings') or 8) - 1)):.0f} %)."
        )
    notes += [str(w) for w in sampling.get("warnings") or []]
    caption = "Sampling error of the estimates (" + sampling_text(sampling) + ")"
    return {"table": table(columns, rows, caption), "notes": notes}


def yield_section(summary: dict) -> dict | None:
    y = summary.get("yield") or {}
    specs = summary.get("specs") or {}
    if not y or not specs:
        return None
    target = _target(summary)
    t = float(target["yield"])
    measures = summary.get("measures") or {}
    rows = []
    joint_status = judge(y, t, target.get("lower_bound"))
    if isinstance(target.get("met"), bool):
        joint_status = "pass" if target["met"] else ("fail" if joint_status == "fail" else "marginal")
    tail = _finite(y.get("gaussian_tail_estimate"))
    rows.append(
        row(
            [
                cell("all specs jointly", "name"),
                "",
                num(f"{y.get('passed', 0):,} / {y.get('total', 0):,}"),
                num(yield_text(y.get("fraction"))),
                num(interval_text(y.get("ci95"))),
                num("\u2013"),
                num("\u2013"),
                num(yield_text(1 - tail) if tail is not None else "\u2013"),
                status_cell(joint_status),
            ],
            "joint",
        )
    )
    for name, block in (y.get("specs") or {}).items():
        unit = _spec_unit(summary, name)
        lim = specs.get(name, block)
        m = measures.get(name, {})
        cp, cpk = block.get("cp"), block.get("cpk")
        if cpk is None and "cpk" not in block:  # an older summary: derive them from mean and sigma
            cp, cpk = _capability(m.get("mean"), m.get("std"), lim)
        tail = block.get("gaussian_tail_estimate")
        if tail is None and "gaussian_tail_estimate" not in block:
            tail = _tail(m.get("mean"), m.get("std"), lim)
        rows.append(
            row(
                [
                    cell(name, "name"),
                    num(limits_text(lim, unit)),
                    num(f"{block.get('passed', 0):,} / {block.get('total', 0):,}"),
                    num(yield_text(block.get("fraction"))),
                    num(interval_text(block.get("ci95"))),
                    num(plain(cp, 3)),
                    num(plain(cpk, 3)),
                    num(yield_text(1 - tail) if _finite(tail) is not None else "\u2013"),
                    status_cell(judge(block, t)),
                ]
            )
        )
    notes = []
    needed = target.get("samples_needed")
    if needed is None:
        from mcmatch.stats.yields import samples_needed

        needed = samples_needed(t, float(target.get("confidence") or 0.95))
    total = int(y.get("total") or 0)
    notes.append(
        f"Target {yield_text(t)} ({sigma_equivalent(t)}) at {percent(target.get('confidence'), 3)} confidence"
        + ("" if target["given"] else " (no target in the summary: the \u00b13 sigma reference is used)")
        + f". Demonstrating it needs at least {int(needed):,} samples with zero failures; this run has {total:,}."
    )
    if target.get("lower_bound") is not None:
        notes.append(
            f"One-sided {percent(target.get('confidence'), 3)} lower bound on the joint yield: "
            f"{yield_text(target['lower_bound'])} ({target.get('method', 'Clopper-Pearson')})."
        )
    zf = y.get("zero_failures")
    if isinstance(zf, Mapping):
        notes.append(
            f"No sample failed: the failure fraction is below {percent(zf.get('failure_upper_bound'), 3)} "
            f"(95 %, two-sided Clopper-Pearson); rule of three {percent(zf.get('rule_of_three'), 3)}."
        )
    notes.append(
        "Intervals: two-sided 95 % Clopper-Pearson on the counted yield. Cp, Cpk and the normal-fit yield assume a "
        "normal distribution with the sample mean and sigma; the counted yield does not."
    )
    return {
        "table": table(
            [
                "spec",
                ("limits", "num"),
                ("passed / samples", "num"),
                ("yield", "num"),
                ("95 % interval", "num"),
                ("Cp", "num"),
                ("Cpk", "num"),
                ("normal-fit yield", "num"),
                "status",
            ],
            rows,
            "Yield against the specs (failed solves count as failures)",
        ),
        "notes": notes,
    }


def _capability(mean: object, std: object, lim: Mapping) -> tuple[float | None, float | None]:
    mu, sd = _finite(mean), _finite(std)
    if mu is None or not sd:
        return None, None
    lo, hi = lim.get("min"), lim.get("max")
    cp = (hi - lo) / (6 * sd) if lo is not None and hi is not None else None
    sides = [(hi - mu) / (3 * sd)] if hi is not None else []
    sides += [(mu - lo) / (3 * sd)] if lo is not None else []
    return cp, (min(sides) if sides else None)


def _tail(mean: object, std: object, lim: Mapping) -> float | None:
    mu, sd = _finite(mean), _finite(std)
    if mu is None or not sd:
        return None
    p = stats.norm.sf((lim["max"] - mu) / sd) if lim.get("max") is not None else 0.0
    p += stats.norm.cdf((lim["min"] - mu) / sd) if lim.get("min") is not None else 0.0
    return float(p)


def corners_section(summary: dict, key_measures: list[str], figures: bool) -> dict | None:
    corners = summary.get("corners")
    if not isinstance(corners, list) or not corners:
        return None
    target = float(_target(summary)["yield"])
    specs = summary.get("specs") or {}
    worst = _worst_indices(summary)
    worst_of: dict[int, list[str]] = {}
    for name, i in worst.items():
        worst_of.setdefault(i, []).append(name)
    shown = [m for m in key_measures if any(m in (c.get("measures") or {}) for c in corners)]
    columns: list[str | tuple[str, str]] = ["process", ("temperature", "num"), ("supply", "num")]
    for m in shown:
        columns += [(f"{m} mean", "num"), (f"{m} sigma", "num")]
    has_yield = bool(specs) and any("yield" in c for c in corners)
    if has_yield:
        columns += [("yield", "num"), ("95 % interval", "num"), "status"]
    show_failed = any(c.get("failed_solves") for c in corners)
    if show_failed:
        columns.append(("failed solves", "num"))
    columns.append("note")
    rows = []
    for i, c in enumerate(corners):
        cells = [
            cell(c.get("process", "?"), "name"),
            num(celsius(c.get("temperature"))),
            num(eng(c.get("supply"), "V")),
        ]
        if "error" in c:
            cells += [cell("", "")] * (2 * len(shown) + (3 if has_yield else 0))
            cells += [num("\u2013")] if show_failed else []
            cells.append(cell(f"FAILS: no operating point ({c['error']})", "status status-fail"))
            rows.append(row(cells, "error"))
            continue
        for m in shown:
            stats_m = (c.get("measures") or {}).get(m, {})
            unit = _spec_unit(summary, m)
            cells += [num(eng(stats_m.get("mean"), unit)), num(eng(stats_m.get("std"), unit))]
        if has_yield:
            y = c.get("yield") or {}
            cells += [
                num(yield_text(y.get("fraction"))),
                num(interval_text(y.get("ci95"))),
                status_cell(judge(y, target)),
            ]
        if show_failed:
            cells.append(num(f"{c.get('failed_solves', 0):,}"))
        note = f"\u25c0 worst: {', '.join(worst_of[i])}" if i in worst_of else ""
        cells.append(cell(note, "worst-note" if note else ""))
        rows.append(row(cells, "worst" if i in worst_of else ""))
    figs = []
    if figures:
        from mcmatch.report import figures as plots

        for m in shown[:2]:
            unit = _spec_unit(summary, m)
            values = [(c.get("measures") or {}).get(m, {}).get("mean") for c in corners if "error" not in c]
            scale, label = display_scale(values, unit)
            ax = plots.corner_spread(
                corners[:MAX_CORNER_ROWS], measure=m, limits=specs.get(m), worst=worst.get(m), scale=scale, unit=label
            )
            figs.append(
                {
                    "uri": plots.data_uri(ax),
                    "alt": f"corner spread of {m}",
                    "cls": "fig-corners",
                    "caption": f"{m} at every corner: mean (dot) and mean \u00b1 3 sigma (bar); the worst corner is "
                    "drawn thick with a diamond; hatched: outside the spec.",
                }
            )
    samples = {c.get("samples") for c in corners if c.get("samples")}
    return {
        "table": table(columns, rows, "Process \u00d7 temperature \u00d7 supply corners", "corners"),
        "figures": figs,
        "samples": ", ".join(f"{s:,}" for s in sorted(samples)),
        "criteria": sorted(
            {
                str(w.get("criterion"))
                for w in (summary.get("corners_worst") or {}).values()
                if isinstance(w, Mapping) and w.get("criterion")
            }
        ),
    }


def area_section(summary: dict, key_measures: list[str], figures: bool) -> dict | None:
    area = summary.get("area")
    if not isinstance(area, Mapping) or not area.get("points"):
        return None
    fits = area.get("fit") or {}
    minimum = area.get("minimum") or {}
    shown = [m for m in key_measures if m in fits] or list(fits)[:MAX_KEY_MEASURES]
    figs = []
    if figures:
        from mcmatch.report import figures as plots

        for m in shown:
            if not isinstance(fits.get(m), Mapping) or fits[m].get("k") is None:
                continue
            unit = _spec_unit(summary, m)
            values = [p.get("measures", {}).get(m, {}).get("std") for p in area["points"] if "measures" in p]
            scale, label = display_scale(values, unit)
            ax = plots.area_sigma(area, measure=m, scale=scale, unit=label, title=m)
            fit = fits[m]
            figs.append(
                {
                    "uri": plots.data_uri(ax),
                    "alt": f"sigma of {m} against gate area",
                    "cls": "fig-area",
                    "caption": f"{m}: sigma against the summed gate area of {', '.join(area.get('devices', []))} "
                    f"(mode '{area.get('mode', '?')}'). Fit sigma = \u221a(k\u00b2/area + floor\u00b2), k = "
                    f"{_k_text(fit.get('k'), unit)}, floor = {eng(fit.get('floor'), unit)}"
                    + (
                        f"; free log-log slope {plain(fit.get('slope'), 3)} (Pelgrom: \u22120.5)"
                        if fit.get("slope") is not None
                        else ""
                    )
                    + ".",
                }
            )
    point_rows = []
    for p in area["points"]:
        cells = [num(plain(p.get("scale"), 4)), num(fixed(p.get("area"), 1e12, "\u00b5m\u00b2"))]
        for m in shown:
            s = (p.get("measures") or {}).get(m, {})
            cells.append(num(eng(s.get("std"), _spec_unit(summary, m))))
        cells.append(num(yield_text(p.get("yield")) if p.get("yield") is not None else "\u2013"))
        cells.append(cell(f"FAILS: {p['error']}", "status status-fail") if "error" in p else cell(""))
        point_rows.append(row(cells))
    points = table(
        [
            ("area scale", "num"),
            ("gate area", "num"),
            *[(f"{m} sigma", "num") for m in shown],
            ("joint yield", "num"),
            "note",
        ],
        point_rows,
        "Swept gate areas",
        "compact",
    )
    min_rows = []
    for m, e in minimum.items():
        unit = _spec_unit(summary, m)
        if not isinstance(e, Mapping):
            continue
        conf = e.get("confirmed") if isinstance(e.get("confirmed"), Mapping) else {}
        if e.get("area") is None:
            min_rows.append(
                row(
                    [
                        cell(m, "name"),
                        num("\u2013"),
                        num("\u2013"),
                        num("\u2013"),
                        num("\u2013"),
                        cell(f"FAILS: {e.get('reason', 'no area meets the spec')}", "status status-fail"),
                    ]
                )
            )
            continue
        confirm = ""
        if conf and "error" not in conf:
            confirm = (
                f"confirmed by Monte Carlo at scale {plain(conf.get('scale'), 3)}: sigma {eng(conf.get('std'), unit)}, "
                f"yield {yield_text(conf.get('yield'))} ({interval_text(conf.get('ci95'))})"
            )
        min_rows.append(
            row(
                [
                    cell(m, "name"),
                    num(plain(e.get("scale"), 3)),
                    num(fixed(e.get("area"), 1e12, "\u00b5m\u00b2")),
                    num(eng(e.get("std"), unit)),
                    num(yield_text(e.get("yield"))),
                    cell("; ".join(x for x in (e.get("criterion"), e.get("note"), confirm) if x)),
                ]
            )
        )
    minimum_table = (
        table(
            [
                "measure",
                ("area scale", "num"),
                ("gate area", "num"),
                ("predicted sigma", "num"),
                ("predicted yield", "num"),
                "criterion",
            ],
            min_rows,
            "Minimum gate area meeting each spec (normal model on the fitted sigma)",
        )
        if min_rows
        else None
    )
    halving = area.get("halving_cost") or {}
    halving_text = [
        f"{m}: \u00d7{plain(v, 3)} area" if v is not None else f"{m}: not reachable (floor)"
        for m, v in halving.items()
        if m in shown
    ]
    flags = [f"{m}: {f['flag']}" for m, f in fits.items() if isinstance(f, Mapping) and f.get("flag")]
    return {
        "figures": figs,
        "points": points,
        "minimum": minimum_table,
        "halving": halving_text,
        "flags": flags,
        "base_area": fixed(area.get("base_area"), 1e12, "\u00b5m\u00b2"),
        "samples": area.get("samples"),
    }


def _k_text(k: object, unit: str) -> str:
    """k of sigma = k / sqrt(area) [unit * m] shown as [unit * µm]."""
    v = _finite(k)
    if v is None:
        return "\u2013"
    return f"{eng(v * 1e6, unit)}\u00b7\u00b5m"


def contributions_section(summary: dict, figures: bool, keys: list[str] | None = None) -> dict | None:
    """Variance shares per measure: a bar figure for the key measures first (at most MAX_CONTRIBUTION_FIGURES, so a
    wide bank still renders quickly) and a table of sensitivities for every measure."""
    contributions = summary.get("contributions")
    if not isinstance(contributions, Mapping) or not contributions:
        return None
    keys = keys or []
    drawn = set(sorted(contributions, key=lambda m: m not in keys)[:MAX_CONTRIBUTION_FIGURES])
    items = []
    for name, c in contributions.items():
        if not isinstance(c, Mapping):
            continue
        unit = _spec_unit(summary, name)
        terms = c.get("terms") or []
        item = {
            "name": name,
            "figure": None,
            "table": None,
            "note": c.get("note"),
            "linear": eng(c.get("linear_std"), unit),
            "mc": eng(c.get("mc_std"), unit),
            "mc_ci": f"{eng(c['mc_std_ci95'][0], unit)} \u2026 {eng(c['mc_std_ci95'][1], unit)}"
            if isinstance(c.get("mc_std_ci95"), list)
            else None,
            "agrees": c.get("within_mc_ci95"),
        }
        if terms:
            if figures and name in drawn:
                from mcmatch.report import figures as plots

                ax = plots.contributions(terms)
                item["figure"] = {
                    "uri": plots.data_uri(ax),
                    "alt": f"variance shares of {name}",
                    "cls": "fig-contrib",
                    "caption": "",
                }
            rows = []
            for t in terms[:12]:
                parameter = t.get("parameter")
                if parameter == "vth":
                    sens = f"{eng(_mul(t.get('sensitivity'), 1e-3), unit)} per mV"
                    sig = fixed(t.get("sigma"), 1e3, "mV", 3)
                elif parameter == "beta":
                    sens = f"{eng(_mul(t.get('sensitivity'), 1e-2), unit)} per %"
                    sig = fixed(t.get("sigma"), 1e2, "%", 3)
                else:
                    sens, sig = plain(t.get("sensitivity")), plain(t.get("sigma"))
                rows.append(
                    row(
                        [
                            cell(t.get("device"), "name"),
                            parameter or "",
                            num(sens),
                            num(sig),
                            num(eng(t.get("std"), unit)),
                            num(percent(t.get("share"), 3)),
                        ]
                    )
                )
            item["table"] = table(
                [
                    "device",
                    "parameter",
                    ("sensitivity", "num"),
                    ("parameter sigma", "num"),
                    ("contribution to sigma", "num"),
                    ("share of variance", "num"),
                ],
                rows,
                "",
                "compact",
            )
        items.append(item)
    return {"entries": items} if items else None


def _mul(value: object, factor: float) -> float | None:
    v = _finite(value)
    return None if v is None else v * factor


def placement_drawing(summary: dict) -> dict | None:
    """The unit-cell drawing of every placement candidate, as an embedded SVG (None without placements)."""
    placements = summary.get("placements")
    if not isinstance(placements, list) or not placements:
        return None
    from mcmatch.report import figures as plots
    from mcmatch.report.figure_placement import placement_figure

    try:
        figure = placement_figure(placements)
    except (KeyError, TypeError, ValueError):  # a summary from another version: the table still stands
        return None
    return {"uri": plots.data_uri(figure), "alt": "unit-cell drawing of every placement candidate", "cls": "fig-wide"}


def placements_table(summary: dict, key_measures: list[str]) -> dict | None:
    placements = summary.get("placements")
    if not isinstance(placements, list) or not placements:
        return None
    shown = [m for m in key_measures if any(m in (p.get("measures") or {}) for p in placements)]
    rows = []
    for p in placements:
        cells = [cell(p.get("name", "?"), "name")]
        for m in shown:
            s = (p.get("measures") or {}).get(m, {})
            unit = _spec_unit(summary, m)
            cells += [num(eng(s.get("mean"), unit)), num(eng(s.get("std"), unit))]
        y = p.get("yield")
        if isinstance(y, Mapping):
            cells += [num(yield_text(y.get("fraction"))), num(interval_text(y.get("ci95")))]
        else:
            cells += [num(yield_text(y)), num("\u2013")]
        rows.append(row(cells))
    columns = [
        "placement",
        *[c for m in shown for c in ((f"{m} mean", "num"), (f"{m} sigma", "num"))],
        ("yield", "num"),
        ("95 % interval", "num"),
    ]
    return table(columns, rows, "Placement candidates (gradient and placement terms included)")


def high_sigma_table(summary: dict) -> dict | None:
    hs = summary.get("high_sigma")
    if not isinstance(hs, Mapping) or not hs:
        return None
    rows = []
    for name, h in hs.items():
        if not isinstance(h, Mapping):
            continue
        rows.append(
            row(
                [
                    cell(name, "name"),
                    num(_probability(h.get("fail_probability"))),
                    num(f"{_probability(_pick(h.get('ci95'), 0))} \u2026 {_probability(_pick(h.get('ci95'), 1))}"),
                    num(plain(h.get("effective_samples"), 4)),
                    num(plain(h.get("sigma_level"), 3)),
                ]
            )
        )
    if not rows:
        return None
    return table(
        [
            "measure",
            ("failure probability", "num"),
            ("95 % interval", "num"),
            ("effective samples", "num"),
            ("sigma level", "num"),
        ],
        rows,
        "High-sigma estimate of the failure probability (importance sampling)",
    )


def _pick(seq: object, i: int) -> object:
    return seq[i] if isinstance(seq, (list, tuple)) and len(seq) > i else None


def _probability(p: object) -> str:
    v = _finite(p)
    return "\u2013" if v is None else (f"{v:.3g}" if v < 1e-3 else percent(v, 3))


def bank_table(summary: dict) -> dict | None:
    bank = summary.get("bank")
    if not isinstance(bank, Mapping) or not bank:
        return None
    rows = [row([cell("channels", "name"), num(str(bank.get("channels", "\u2013")))])]
    a = bank.get("all_in_spec")
    if isinstance(a, Mapping):
        rows.append(
            row(
                [
                    cell("all channels in spec", "name"),
                    num(f"{yield_text(a.get('fraction'))} ({interval_text(a.get('ci95'))})"),
                ]
            )
        )
    ind = bank.get("independent_estimate")
    if ind is not None:
        value = ind.get("fraction") if isinstance(ind, Mapping) else ind
        rows.append(row([cell("estimate if channels were independent", "name"), num(yield_text(value))]))
    return table(
        ["quantity", ("value", "num")], rows, "Multi-output bank: the chance that every channel is in spec", "compact"
    )


def failed_section(summary: dict) -> dict | None:
    failed = int(summary.get("failed_solves") or 0)
    if not failed:
        return None
    examples = [e for e in summary.get("failed_examples") or [] if isinstance(e, Mapping)][:MAX_EXAMPLES]
    tab = None
    if examples:
        keys = list(examples[0])
        columns: list[str | tuple[str, str]] = []
        for k in keys:
            columns.append((k.replace("dvth_", "\u0394vth ").replace("dbeta_", "\u0394\u03b2/\u03b2 "), "num"))
        rows = []
        for e in examples:
            cells = []
            for k in keys:
                v = e.get(k)
                if k.startswith("dvth_"):
                    cells.append(num(fixed(v, 1e3, "mV", 4)))
                elif k.startswith("dbeta_"):
                    cells.append(num(fixed(v, 1e2, "%", 4)))
                else:
                    cells.append(num(str(v)))
            rows.append(row(cells))
        tab = table(
            columns,
            rows,
            "Mismatch draws of the first failed samples (re-run with the same seed to reproduce)",
            "compact",
        )
    total = int(summary.get("samples") or 0)
    return {
        "count": f"{failed:,}",
        "total": f"{total:,}",
        "fraction": percent(failed / total, 3) if total else "\u2013",
        "table": tab,
    }


def assumptions(summary: dict, config: Mapping) -> list[str]:
    tech = summary.get("technology") or {}
    models = sorted({str(tech[p].get("model")) for p in ("nmos", "pmos") if isinstance(tech.get(p), Mapping)})
    analysis = config.get("analysis") if isinstance(config.get("analysis"), Mapping) else {}
    sampling = analysis.get("sampling", "random")
    items = [
        "These are pre-layout estimates from compact device models ("
        + (", ".join(models) or "see the technology table")
        + ") and the given mismatch coefficients; they are not sign-off results.",
        "Local mismatch follows Pelgrom's law: each device's threshold and current-factor deviations are independent "
        "and normal, with sigma = A/\u221a(2\u00b7m\u00b7W\u00b7L) per device from the pair-convention "
        "coefficients A_VT and A_beta of the technology table.",
        "Systematic layout effects (gradients, well proximity, stress, orientation, routing IR drop) are not included "
        "unless modelled explicitly in a placement study.",
        "Sign-off uses the foundry's qualified statistical models and the local design rules.",
        f"Samples are drawn with '{sampling}' sampling from seed {summary.get('seed', '?')}; the same seed gives the "
        "same numbers on any machine and with any number of workers.",
        "Failed solves are counted, never dropped: each fails every spec in the yields above. Statistics of a measure "
        "use its converged samples only.",
        "Yield intervals are exact binomial (Clopper-Pearson); the normal-fit figures (Cp, Cpk, normal-fit yield, "
        "area fits) extrapolate a normal distribution and are only as good as the tails in the probability plots.",
    ]
    notes = config.get("notes")
    if isinstance(notes, str) and notes.strip():
        items.append(f"Designer's notes: {notes.strip()}")
    return items


def key_measures(summary: dict) -> list[str]:
    """Measures with a spec, in the summary's order; without specs, the first few measures."""
    measures = list((summary.get("measures") or {}).keys())
    specs = summary.get("specs") or {}
    keyed = [m for m in measures if m in specs]
    return keyed or measures[:MAX_KEY_MEASURES]


def tail_measures(summary: dict, keys: list[str]) -> list[str]:
    """The key measures whose tails are drawn: lowest spec yield first (then lowest Cpk), at most MAX_KEY_MEASURES."""
    blocks = (summary.get("yield") or {}).get("specs") or {}

    def rank(name: str) -> tuple[float, float]:
        block = blocks.get(name) or {}
        fraction = _finite(block.get("fraction"))
        cpk = _finite(block.get("cpk"))
        return (1.0 if fraction is None else fraction, math.inf if cpk is None else cpk)

    return sorted(keys, key=rank)[:MAX_KEY_MEASURES]


def distributions(summary: dict, samples: pd.DataFrame | None, keys: list[str]) -> list[dict]:
    """A histogram per measure, and a normal-probability plot beside it for the key measures with the worst tails."""
    if samples is None or samples.empty:
        return []
    from mcmatch.report import figures as plots

    keys = tail_measures(summary, keys)

    specs = summary.get("specs") or {}
    converged = samples["converged"].astype(bool).to_numpy() if "converged" in samples else None
    out = []
    for name, m in (summary.get("measures") or {}).items():
        if name not in samples:
            continue
        values = pd.to_numeric(samples[name], errors="coerce").to_numpy(dtype=float)
        if converged is not None:
            values = values[converged]
        values = values[np.isfinite(values)]
        if values.size == 0:
            continue
        unit = m.get("unit", "")
        scale, label = display_scale([m.get("mean"), m.get("nominal"), *values[:1]], unit)
        ax = plots.histogram(
            values,
            mean=m.get("mean"),
            std=m.get("std"),
            nominal=m.get("nominal"),
            limits=specs.get(name),
            scale=scale,
            unit=label,
            name=name,
            title=name,
            legend="right" if name in keys else "inside",
        )
        item = {
            "name": name,
            "hist": {"uri": plots.data_uri(ax), "alt": f"histogram of {name}", "cls": "fig-hist"},
            "prob": None,
            "caption": (
                f"{name}: {values.size:,} samples shown"
                + (f" of {m.get('count', values.size):,}" if m.get("count", values.size) != values.size else "")
                + f"; normal fit mean {eng(m.get('mean'), unit)}, sigma {eng(m.get('std'), unit)}; nominal "
                f"{eng(m.get('nominal'), unit)} (dotted)"
                + (f"; spec {limits_text(specs[name], unit)} (dashed, outside hatched)" if name in specs else "")
                + "."
            ),
        }
        if name in keys:
            ax = plots.probability_plot(values, limits=specs.get(name), scale=scale, unit=label)
            item["prob"] = {
                "uri": plots.data_uri(ax),
                "alt": f"normal probability plot of {name}",
                "cls": "fig-probplot",
            }
            item["caption"] += (
                " Right: ordered samples against normal quantiles; bending away from the line at the ends "
            )
            item["caption"] += "means the tails are not normal."
        out.append(item)
    return out


# --------------------------------------------------------------------------------------------- rendering


@lru_cache(maxsize=1)
def _environment() -> Environment:
    env = Environment(
        loader=PackageLoader("mcmatch.report", "assets"),
        autoescape=True,  # every user string (title, names, notes, config text) is escaped
        undefined=StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    return env


@lru_cache(maxsize=1)
def _css() -> str:
    return resources.files("mcmatch.report").joinpath("assets/style.css").read_text(encoding="utf-8")


def _parse_config(config_text: str) -> dict:
    try:
        return tomllib.loads(config_text) if config_text else {}
    except tomllib.TOMLDecodeError:
        return {}


def build_context(summary: dict, table: pd.DataFrame | None, config_text: str, figures: bool = True) -> dict:
    """Everything the template shows, as display strings and data URIs; sections without data are None or empty."""
    from mcmatch import __version__

    config = _parse_config(config_text)
    keys = key_measures(summary)
    if figures:
        from mcmatch.report import figures as plots

        with plots.style():
            dist = distributions(summary, table, keys)
            corners = corners_section(summary, keys, figures)
            area = area_section(summary, keys, figures)
            contrib = contributions_section(summary, figures, keys)
    else:
        dist = []
        corners = corners_section(summary, keys, False)
        area = area_section(summary, keys, False)
        contrib = contributions_section(summary, False, keys)
    ctx = {
        "title": summary.get("title") or "Untitled circuit",
        "renderer_version": __version__,
        "header": header_items(summary),
        "notes": config.get("notes") if isinstance(config.get("notes"), str) else "",
        "verdict": verdict_section(summary, keys) if summary.get("measures") else None,
        "circuit": circuit_section(summary, config),
        "operating_point": operating_point_tables(summary.get("operating_point")),
        "nodes": nodes_table(summary.get("nominal_operating_point")),
        "measures": measures_table(summary),
        "sampling": sampling_section(summary),
        "distributions": dist,
        "yields": yield_section(summary),
        "corners": corners,
        "area": area,
        "contributions": contrib,
        "placements": placements_table(summary, keys),
        "placement_drawing": placement_drawing(summary),
        "high_sigma": high_sigma_table(summary),
        "bank": bank_table(summary),
        "failed": failed_section(summary),
        "assumptions": assumptions(summary, config),
        "config_text": config_text,
        "config_path": (summary.get("run") or {}).get("config", "config.toml"),
        "css": Markup(_css()),  # package data, not user input
    }
    sections = [
        ("verdict", "Verdict", ctx["verdict"]),
        ("circuit", "Circuit and technology", ctx["circuit"]),
        ("operating-point", "Nominal operating point", ctx["operating_point"] or ctx["nodes"]),
        ("measures", "Measures", ctx["measures"]),
        ("distributions", "Distributions and tails", ctx["distributions"]),
        ("yield", "Yield", ctx["yields"]),
        ("corners", "Corners", ctx["corners"]),
        ("area", "Area versus accuracy", ctx["area"]),
        ("contributions", "Mismatch contributions", ctx["contributions"]),
        ("placements", "Placements", ctx["placements"]),
        ("high-sigma", "High-sigma failure estimate", ctx["high_sigma"]),
        ("bank", "Output bank", ctx["bank"]),
        ("failed-solves", "Failed solves", ctx["failed"]),
        ("assumptions", "Assumptions and cautions", ctx["assumptions"]),
        ("config", "Configuration, for reproduction", ctx["config_text"]),
    ]
    ctx["toc"] = [{"id": i, "title": t} for i, t, present in sections if present]
    return ctx


def render_report(summary: dict, table: pd.DataFrame | None, config_text: str) -> str:
    """The self-contained HTML report of one run: summary.json's dict, the sample table (or None) and the config text.

    Pure: no files read or written. Sections whose data are absent from the summary are left out.
    """
    context = build_context(summary, table, config_text or "")
    return _environment().get_template("report.html.j2").render(**context)


def write_report(run_dir: str | os.PathLike, out: str | os.PathLike | None = None) -> Path:
    """Re-render ``report.html`` of a saved run folder (summary.json, samples.csv/parquet, config.toml), atomically.

    Raises ConfigError naming the file when the folder is not a readable run folder. Returns the report's path.
    """
    from mcmatch.results.tables import read_samples

    folder = Path(run_dir)
    summary_path = folder / "summary.json"
    if not folder.is_dir():
        raise ConfigError("expected a run folder written by 'mcmatch run'", file=str(folder))
    try:
        summary = json.loads(summary_path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError("no summary.json: expected a run folder written by 'mcmatch run'", file=str(folder)) from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ConfigError(f"expected the JSON summary of a run ({exc})", file=str(summary_path)) from None
    if not isinstance(summary, dict) or "measures" not in summary:
        raise ConfigError("expected a run summary with a 'measures' object", file=str(summary_path), key="measures")
    samples = None
    for name in ("samples.parquet", "samples.csv"):
        path = folder / name
        if path.exists():
            try:
                samples = read_samples(path)
            except ImportError:
                raise ConfigError(
                    "reading samples.parquet needs pyarrow; install the extra mcmatch[parquet]", file=str(path)
                ) from None
            except Exception as exc:  # pandas raises many kinds on a damaged table
                raise ConfigError(
                    f"expected the samples table of a run ({type(exc).__name__}: {exc})", file=str(path)
                ) from None
            break
    config_path = folder / "config.toml"
    config_text = config_path.read_text(encoding="utf-8") if config_path.exists() else ""
    html = render_report(summary, samples, config_text)
    target = Path(out) if out is not None else folder / "report.html"
    write_text_atomic(target, html)
    return target


def write_text_atomic(path: Path, text: str) -> None:
    """Write `text` to a temporary sibling of `path`, fsync it, then os.replace: never a half-written file."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.parent / f".{path.name}.{os.getpid()}-{os.urandom(4).hex()}.tmp"
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)  # the umask applies, as for any new file
    try:
        if path.exists():
            os.chmod(tmp, path.stat().st_mode & 0o777)  # a replaced report keeps its mode
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
