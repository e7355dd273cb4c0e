"""Operating point of every MOSFET at a solved point, and the warnings a designer wants from it.

Pure functions on a compiled :class:`~mcmatch.model.circuit.Circuit` and its unknowns; nothing is printed or solved
here. Voltages and currents are magnitudes in the designer's convention: for a pmos, vgs means Vsg, vds means Vsd and
so on. A device conducting backwards (drain below source for nmos) is described with its terminals' roles swapped.
"""

from __future__ import annotations

import math

import numpy as np

from mcmatch.config.schema import GROUND, Config
from mcmatch.model.circuit import Circuit
from mcmatch.model.devices import EKV, REGIONS, device_point

# Re-exported: the device model owns these (mcmatch.model.ekv); callers have imported them from here.
from mcmatch.model.devices import EKV_CUTOFF_IC as EKV_CUTOFF_IC
from mcmatch.model.devices import ekv_saturation_voltage as ekv_saturation_voltage

#: Inversion coefficient limits: weak below 0.1, strong above 10, moderate between (Enz, Vittoz, Charge-based MOS
#: transistor modeling, 2006; Binkley, Tradeoffs and optimization in analog CMOS design, 2008).
WEAK_INVERSION_IC = 0.1
STRONG_INVERSION_IC = 10.0
#: A saturated device with less headroom Vds - Vdsat than this [V] gets a warning: mismatch or a corner may push it
#: into triode.
LOW_HEADROOM = 0.05
#: Tolerance [V] before a node counts as outside the supply rails.
RAIL_TOLERANCE = 1e-3


def inversion_level(ic: float) -> str:
    """'weak', 'moderate' or 'strong' for an inversion coefficient `ic` [1]."""
    if ic < WEAK_INVERSION_IC:
        return "weak"
    if ic > STRONG_INVERSION_IC:
        return "strong"
    return "moderate"


def _node_name(circuit: Circuit, index: int) -> str:
    return GROUND if index == circuit.ground else circuit.nodes[index]


def _none_if_bad(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def device_operating_points(circuit: Circuit, x: np.ndarray) -> list[dict]:
    """One dict per MOSFET at unknowns `x` (n,) [V and A] of `circuit` (no mismatch: the circuit's own parameters).

    Keys (SI floats, magnitudes for pmos): name, type, model, drain, gate, source, bulk (node names), diode_connected,
    reversed (conducting with drain and source swapped), region ("cutoff" | "triode" | "saturation"), inversion
    ("weak" | "moderate" | "strong"), ic (inversion coefficient I / (2 n beta U_T^2) [1]; for square-law devices it is
    derived from the same formula with the technology's slope factor, the square law itself having no weak
    inversion), vgs, vds, vsb, vth (with body effect), vov = vgs - vth, vdsat, headroom = vds - vdsat [V],
    id [A], gm, gds, gmb [S] (the device's analytic derivatives; the solver's GMIN across the channel is not in gds),
    gm_id [1/V] (None where the current is zero). Thresholds, vdsat and regions are the device model's own
    (:class:`mcmatch.model.devices.DevicePoint`).
    """
    p = circuit.params
    xe = np.append(np.asarray(x, dtype=float).reshape(-1), 0.0)
    points = []
    for k, name in enumerate(circuit.mosfet_names):
        pol = float(p.polarity[k])
        d, g, s, b = (int(circuit.drain[k]), int(circuit.gate[k]), int(circuit.source[k]), int(circuit.bulk[k]))
        vd, vg, vs, vb = (pol * xe[i] for i in (d, g, s, b))
        pt = device_point(
            p.model[k], vd, vg, vs, vb, p.vth[k], p.beta[k], p.lam[k], p.gamma[k], p.phi[k], p.slope[k], p.ut
        )
        i, gm, ic = float(pt.i), float(pt.gm), float(pt.ic)
        points.append(
            {
                "name": name,
                "type": "nmos" if pol > 0 else "pmos",
                "model": "ekv" if p.model[k] == EKV else "square-law",
                "drain": _node_name(circuit, d),
                "gate": _node_name(circuit, g),
                "source": _node_name(circuit, s),
                "bulk": _node_name(circuit, b),
                "diode_connected": d == g,
                "reversed": bool(pt.reversed),
                "region": REGIONS[int(pt.region)],
                "inversion": inversion_level(ic),
                "ic": ic,
                "vgs": float(pt.vgs),
                "vds": float(pt.vds),
                "vsb": float(pt.vsb),
                "vth": float(pt.vth),
                "vov": float(pt.vov),
                "vdsat": float(pt.vdsat),
                "headroom": float(pt.headroom),
                "id": i,
                "gm": gm,
                "gds": float(pt.gds),
                "gmb": float(pt.gmb),
                "gm_id": _none_if_bad(gm / i) if i > 0 else None,
            }
        )
    return points


def _supply_nodes(config: Config) -> list[str]:
    """Terminals of the supply source (analysis.corners.supply_source, default VDD), else of every voltage source."""
    name = config.analysis.corners.supply_source if config.analysis.corners is not None else "VDD"
    sources = [v for v in config.circuit.voltage_source if v.name == name] or list(config.circuit.voltage_source)
    return [node for v in sources for node in (v.plus, v.minus)]


def _fmt(volts: float) -> str:
    return f"{volts:.3f} V"


def warnings_for(config: Config, points: list[dict], x: np.ndarray) -> list[str]:
    """Plain-words warnings about an operating point: devices out of saturation, cut off, nodes beyond the rails.

    `points` come from :func:`device_operating_points` at unknowns `x` (n,) of the config's circuit. A
    diode-connected device cannot leave saturation for Vt > 0, so triode warnings concern the others (outputs,
    cascodes); each names the drain node and the voltage it would need.
    """
    nodes = config.circuit.nodes
    x = np.asarray(x, dtype=float).reshape(-1)
    volts = {GROUND: 0.0, **{n: float(x[i]) for i, n in enumerate(nodes)}}
    held = {v.plus: v.name for v in config.circuit.voltage_source if v.minus == GROUND}
    out: list[str] = []
    for pt in points:
        name, sign = pt["name"], 1.0 if pt["type"] == "nmos" else -1.0
        drain = pt["source"] if pt["reversed"] else pt["drain"]
        if pt["region"] == "cutoff":
            if pt["model"] == "ekv":
                why = f"inversion coefficient {pt['ic']:.2g}, far below threshold"
            else:
                why = f"Vgs {_fmt(pt['vgs'])} is below its threshold {_fmt(pt['vth'])}"
            out.append(f"{name} is cut off ({why}): it carries almost no current ({pt['id']:.3g} A)")
        elif pt["region"] == "triode" and not pt["diode_connected"]:
            need = volts[drain] - sign * pt["headroom"]
            side, move = ("below", "raise") if sign > 0 else ("above", "lower")
            numbers = f"(Vds {_fmt(pt['vds'])} < Vdsat {_fmt(pt['vdsat'])})"
            if drain in held:
                out.append(
                    f"{name} is in triode, not saturation: the output '{drain}' (held by {held[drain]}) at "
                    f"{_fmt(volts[drain])} is {side} its compliance voltage of about {_fmt(need)} {numbers}; "
                    f"{move} the output voltage or lower the overdrive, or it stops acting as a current source"
                )
            else:
                out.append(
                    f"{name} is in triode, not saturation: its drain '{drain}' at {_fmt(volts[drain])} needs to be "
                    f"{'above' if sign > 0 else 'below'} about {_fmt(need)} {numbers}; the bias leaves it too little "
                    "room, so it stops acting as a current source"
                )
        elif pt["region"] == "saturation" and not pt["diode_connected"] and pt["headroom"] < LOW_HEADROOM:
            out.append(
                f"{name} is saturated with only {pt['headroom'] * 1e3:.0f} mV of headroom (Vds - Vdsat); mismatch, a "
                "corner or temperature may push it into triode"
            )
        if pt["reversed"]:
            out.append(f"{name} conducts backwards: its drain '{pt['drain']}' is on the source side")
    rails = [volts[n] for n in _supply_nodes(config)] + [0.0]
    low, high = min(rails), max(rails)
    for node in nodes:
        v = volts[node]
        by = f" (held there by {held[node]})" if node in held else ""
        if v > high + RAIL_TOLERANCE:
            out.append(f"node '{node}' sits at {_fmt(v)}, above the highest supply rail {_fmt(high)}{by}")
        elif v < low - RAIL_TOLERANCE:
            out.append(f"node '{node}' sits at {_fmt(v)}, below the lowest supply rail {_fmt(low)}{by}")
    return out
