"""The saturation-compliance table over the corner grid that `mcmatch check --corners` prints."""

from __future__ import annotations

from mcmatch.stats.margins import supply_label, temperature_label


def compliance_table(rows: list[dict]) -> str:
    """One line per corner: process, temperature, supply, smallest headroom, its device, devices out of saturation."""
    header = ["process", "temperature", "supply", "min headroom", "limiting device", "out of saturation"]
    lines = [header]
    for r in rows:
        keys = [r["process"], temperature_label(r["temperature"]), supply_label(r["supply"])]
        if "error" in r:
            lines.append([*keys, "-", "-", f"no operating point: {r['error']}"])
            continue
        headroom = "-" if r["min_headroom"] is None else f"{r['min_headroom'] * 1e3:.1f} mV"
        out = ", ".join(r["devices_out_of_saturation"]) or "none"
        lines.append([*keys, headroom, r["limiting_device"] or "-", out])
    widths = [max(len(line[i]) for line in lines) for i in range(len(header) - 1)]
    text = []
    for n, line in enumerate(lines):
        cells = [c.rjust(w) if i == 3 else c.ljust(w) for i, (c, w) in enumerate(zip(line, widths, strict=False))]
        text.append("  ".join([*cells, line[-1]]).rstrip())
        if n == 0:
            text.append("  ".join("-" * w for w in [*widths, len(header[-1])]))
    return "\n".join(text)
