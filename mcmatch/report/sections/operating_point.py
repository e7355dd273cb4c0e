"""The nominal operating point: one column per device, node voltages."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import DisplayUnit, eng, finite, fixed, plain
from mcmatch.report.sections.scope import OP_HEADROOM, op_warning
from mcmatch.report.tables import cell, num, row, sub, table

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
    derived = all(finite(p.get("gm")) and finite(p.get("gds")) for p in points)
    tables = []
    for start in range(0, len(points), OP_DEVICES_PER_TABLE):
        chunk = points[start : start + OP_DEVICES_PER_TABLE]
        rows = []
        for k in keys:
            label, unit = OP_ROWS.get(k, (k.replace("_", " "), ""))
            cells = [cell(label)]
            shown = DisplayUnit([p.get(k) for p in chunk if not isinstance(p.get(k), (bool, str))], unit or "")
            for p in chunk:
                v = p.get(k)
                warn = (k == "region" and op_warning(p) is not None) or (
                    k == "headroom" and finite(v) is not None and v < OP_HEADROOM
                )
                if isinstance(v, bool):
                    text = "yes" if v else "no"
                elif unit is None or v is None or isinstance(v, str):
                    text = "\u2013" if v is None else str(v)
                elif unit == "1/V":
                    text = fixed(v, 1.0, "/V", 3)
                elif unit:
                    text = shown(v)  # one prefix across the devices of a row
                else:
                    text = plain(v, 3)
                cells.append(cell(text, "num warn" if warn else "num"))
            rows.append(row(cells))
        if derived:
            rows.append(
                row([cell(sub("intrinsic gain g_m/g_ds")), *[num(plain(p["gm"] / p["gds"], 3)) for p in chunk]])
            )
            ro = DisplayUnit([1.0 / p["gds"] for p in chunk], "ohm")
            rows.append(row([cell(sub("r_o = 1/g_ds")), *[num(ro(1.0 / p["gds"])) for p in chunk]]))
        columns = ["quantity", *[(str(p.get("name", "?")), "num device") for p in chunk]]
        part = f" ({start // OP_DEVICES_PER_TABLE + 1})" if len(points) > OP_DEVICES_PER_TABLE else ""
        tables.append(table(columns, rows, f"Device operating points (no mismatch, nominal corner){part}", "compact"))
    return tables


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
