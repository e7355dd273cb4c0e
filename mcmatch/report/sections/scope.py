"""The scope lines of the verdict box: what the numbers are (a pre-layout estimate, not sign-off), the conditions
analysed, operating-point warnings and, when the summary has them, headroom compliance."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.config.analysis import VARIATION_MODES
from mcmatch.report.format import celsius, eng, finite, percent
from mcmatch.report.sections.high_sigma import high_sigma_scope
from mcmatch.report.sections.sizing import sizing_scope
from mcmatch.report.targets import corner_label

#: Headroom below this flags a device as close to leaving saturation [V].
OP_HEADROOM = 0.05
#: Warnings listed one by one, at most; more are summed up in one line.
MAX_WARNINGS = 4

CAUTION = ("CAUTION", "status-marginal")
TIMES = " \u00d7 "


def _line(word: str, cls: str, text: str) -> dict:
    return {"word": word, "cls": cls, "text": text}


def op_warning(p: Mapping) -> str | None:
    """Why a device's nominal operating point needs a look (outside saturation, little headroom), or None."""
    region = str(p.get("region", "")).lower()
    headroom = finite(p.get("headroom"))
    reasons = []
    if region not in ("saturation", "sat", ""):
        reasons.append(f"in {region}")
    if headroom is not None and headroom < OP_HEADROOM:
        reasons.append(f"headroom V_DS \u2212 V_DS,sat {eng(headroom, 'V')} (below {eng(OP_HEADROOM, 'V')})")
    return ", ".join(reasons) or None


def conditions_text(summary: dict) -> str:
    """The conditions analysed: "tt / 27 °C only, no corners run" or the main condition and the corner grid."""
    cond = summary.get("conditions") if isinstance(summary.get("conditions"), Mapping) else {}
    main = [str(cond.get("corner", "tt")), celsius(cond.get("temperature"))]
    if cond.get("supply") is not None:
        main.append(eng(cond.get("supply"), "V"))
    samples = summary.get("samples")
    text = " / ".join(main)
    corners = [c for c in summary.get("corners") or [] if isinstance(c, Mapping)]
    if not corners:
        return f"Conditions analysed: {text} only, no corners run" + (
            f" ({samples:,} samples)." if isinstance(samples, int) else "."
        )
    process = list(dict.fromkeys(str(c.get("process", "?")) for c in corners))
    temps = list(dict.fromkeys(c.get("temperature") for c in corners if finite(c.get("temperature")) is not None))
    supplies = list(dict.fromkeys(c.get("supply") for c in corners if finite(c.get("supply")) is not None))
    grid = ["process " + ", ".join(process)]
    grid += ["temperature " + ", ".join(celsius(t) for t in temps)] if temps else []
    grid += ["supply " + ", ".join(eng(v, "V") for v in supplies)] if supplies else []
    each = sorted({c.get("samples") for c in corners if isinstance(c.get("samples"), int)})
    return (
        f"Conditions analysed: main run at {text}"
        + (f" ({samples:,} samples)" if isinstance(samples, int) else "")
        + f"; {len(corners)} corners: {TIMES.join(grid)}"
        + (f" ({', '.join(f'{n:,}' for n in each)} samples each)." if each else ".")
    )


def variation_text(summary: dict) -> str:
    """Which variation each sample draws (summary["variation"]; absent: local mismatch), with the linearised split of
    the spread of the first measures when a global part was drawn."""
    block = summary.get("variation") if isinstance(summary.get("variation"), Mapping) else {}
    mode = str(block.get("mode", "local"))
    text = f"Variation: {VARIATION_MODES.get(mode, mode)}."
    measures = block.get("measures") if isinstance(block.get("measures"), Mapping) else {}
    units = {k: (v.get("unit") or "") for k, v in (summary.get("measures") or {}).items() if isinstance(v, Mapping)}
    parts = []
    for name, m in list(measures.items())[:3]:
        if (
            isinstance(m, Mapping)
            and finite(m.get("std_local")) is not None
            and finite(m.get("std_global")) is not None
        ):
            unit = units.get(name, "")
            fmt = (lambda v: percent(v, 3)) if unit == "1" else (lambda v, u=unit: eng(v, u))
            parts.append(f"{name} std {fmt(m['std_local'])} local, {fmt(m['std_global'])} global")
    if parts:
        text += " Spread split (linearised): " + "; ".join(parts) + "."
    return text


def _compliance_lines(summary: dict) -> list[dict]:
    """Headroom compliance of the main run and the worst corner (summary["compliance"], corners[i]["compliance"])."""
    lines = []
    comp = summary.get("compliance")
    if isinstance(comp, Mapping):
        out = [str(d) for d in comp.get("devices_out_of_saturation") or []]
        share = finite(comp.get("samples_out_of_saturation"))
        text = f"Headroom (main run): minimum V_DS \u2212 V_DS,sat {eng(comp.get('min_headroom'), 'V')}" + (
            f" ({comp['limiting_device']})" if comp.get("limiting_device") else ""
        )
        if out or (share or 0) > 0:
            lines.append(
                _line(
                    *CAUTION,
                    text + f"; out of saturation: {', '.join(out) or 'some device'} in {percent(share or 0, 3)} of "
                    "the samples.",
                )
            )
        else:
            lines.append(_line("SCOPE", "", text + "; every device stays in saturation."))
    corners = [c for c in summary.get("corners") or [] if isinstance(c, Mapping)]
    scored = [
        (finite(c["compliance"].get("min_headroom")), c) for c in corners if isinstance(c.get("compliance"), Mapping)
    ]
    scored = [(h, c) for h, c in scored if h is not None]
    if scored:
        h, c = min(scored, key=lambda item: item[0])
        comp = c["compliance"]
        share = finite(comp.get("samples_out_of_saturation")) or 0.0
        text = (
            f"Headroom at the corners: lowest {eng(h, 'V')}"
            + (f" ({comp['limiting_device']})" if comp.get("limiting_device") else "")
            + f" at {corner_label(c)}"
        )
        if h < 0 or share > 0:
            lines.append(
                _line(*CAUTION, text + f"; out of saturation in {percent(share, 3)} of that corner's samples.")
            )
        else:
            lines.append(_line("SCOPE", "", text + "."))
    return lines


def scope_lines(summary: dict) -> list[dict]:
    """Lines always shown in the verdict box, first the caution, then conditions, warnings and compliance."""
    lines = [
        _line(
            "SCOPE",
            "",
            "Pre-layout estimate, not sign-off: compact device models and the given mismatch coefficients; sign-off "
            "uses the foundry's qualified statistical models and local design rules.",
        ),
        _line("SCOPE", "", conditions_text(summary)),
        _line("SCOPE", "", variation_text(summary)),
    ]
    warnings = []
    points = summary.get("operating_point")
    for p in points if isinstance(points, list) else []:
        reason = op_warning(p) if isinstance(p, Mapping) else None
        if reason:
            warnings.append(f"{p.get('name', '?')} at the nominal point: {reason}.")
    warnings += [str(w) for w in summary.get("warnings") or [] if isinstance(w, str)]
    for c in summary.get("corners") or []:
        if isinstance(c, Mapping) and "error" in c:
            warnings.append(f"no operating point at {corner_label(c)} ({c['error']}).")
    if len(warnings) > MAX_WARNINGS:
        more = len(warnings) - MAX_WARNINGS + 1
        warnings = [*warnings[: MAX_WARNINGS - 1], f"\u2026 and {more} more warnings: see the operating point."]
    lines += [_line(*CAUTION, w) for w in warnings]
    lines += [_line("SCOPE", "", text) for text in high_sigma_scope(summary)]
    sizing = sizing_scope(summary)
    if sizing:
        feasible = isinstance((summary.get("sizing") or {}).get("chosen"), Mapping)
        lines.append(_line("SCOPE", "", sizing) if feasible else _line(*CAUTION, sizing))
    return lines + _compliance_lines(summary)
