"""The circuit, its technology and process corners, and the measures recorded for every sample."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import UNIT_SYMBOLS, celsius, eng, finite, fixed, plain
from mcmatch.report.tables import cell, num, row, table

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
                w, length, mult = finite(m.get("w")), finite(m.get("l")), finite(m.get("m")) or 1
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
    defined = config.get("measures") if isinstance(config.get("measures"), Mapping) else {}
    circuit_cfg = config.get("circuit") if isinstance(config.get("circuit"), Mapping) else {}
    names = list(dict.fromkeys([*defined, *(summary.get("measures") or {})]))
    for name in names:
        unit = ((summary.get("measures") or {}).get(name) or {}).get("unit", "")
        definition = defined.get(name)
        if not isinstance(definition, Mapping):  # a template's default: the run recorded how it set it
            definition = ((summary.get("measures") or {}).get(name) or {}).get("definition")
        if isinstance(definition, Mapping) and definition:
            text, meaning = measure_definition(name, definition)
            if name not in defined and circuit_cfg.get("template"):
                meaning = f"{meaning} (set by the template '{circuit_cfg['template']}')".lstrip()
        elif circuit_cfg.get("template"):
            text, meaning = f"{name}: set by the circuit template '{circuit_cfg['template']}'", ""
        else:
            text, meaning = f"{name}: not defined in the config text of this run", ""
        shown = UNIT_SYMBOLS.get(unit, unit) if unit != "1" else "1 (shown in %)"
        measures.append(row([cell(name, "name"), text, meaning, shown]))
    return {
        "tables": tables,
        "measures": table(
            ["measure", "definition", "meaning", "unit"], measures, "Measures recorded for every sample", "compact"
        )
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


def measure_definition(name: str, definition: Mapping) -> tuple[str, str]:
    """(formula, meaning) of a measure from its config table: ratio ["MOUT1", "IREF"], ideal 2 ->
    ("err1 = I(MOUT1) / (2 × I(IREF)) − 1", "relative error of the current ratio"). Element currents follow the
    sign conventions of DESIGN.md section 3."""
    if isinstance(definition.get("ratio"), (list, tuple)) and len(definition["ratio"]) == 2:
        a, b = definition["ratio"]
        ideal = definition.get("ideal", 1)
        scaled = f"({plain(ideal)} \u00d7 I({b}))" if ideal not in (1, 1.0) else f"I({b})"
        return f"{name} = I({a}) / {scaled} \u2212 1", "relative error of the current ratio"
    if definition.get("current") is not None:
        return f"{name} = I({definition['current']})", "current of the element, positive in normal conduction"
    if definition.get("voltage") is not None:
        return f"{name} = V({definition['voltage']})", "node voltage to gnd"
    if definition.get("resistance") is not None:
        return f"{name} = dV/dI at {definition['resistance']}", "small-signal resistance from the node to gnd"
    if definition.get("port_resistance") is not None:
        source = definition["port_resistance"]
        return (
            f"{name} = dV/dI seen by {source}",
            "small-signal resistance looking into the circuit from the source (other sources shorted/open)",
        )
    text = "; ".join(
        f"{k} = {v if not isinstance(v, list) else ' / '.join(map(str, v))}" for k, v in definition.items()
    )
    return f"{name}: {text}", ""
