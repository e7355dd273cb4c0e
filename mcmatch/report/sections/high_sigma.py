"""The high-sigma (importance sampling) estimate of the failure probability."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import finite, percent, plain
from mcmatch.report.tables import cell, num, row, table


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
            ("sigma level (one-sided)", "num"),
        ],
        rows,
        "High-sigma estimate of the failure probability (importance sampling)",
    )


def high_sigma_scope(summary: dict) -> list[str]:
    """One line per measure of the high-sigma estimate for the verdict's scope: its failure probability, interval and
    one-sided sigma level; empty when none was run."""
    hs = summary.get("high_sigma")
    lines = []
    for name, h in hs.items() if isinstance(hs, Mapping) else []:
        if not isinstance(h, Mapping):
            continue
        if h.get("fail_probability") is None:
            lines.append(f"High-sigma estimate of {name}: {h.get('error') or h.get('note') or 'not available'}.")
            continue
        samples = h.get("samples")
        lines.append(
            f"High-sigma estimate of {name} (importance sampling"
            + (f", {samples:,} samples" if isinstance(samples, int) else "")
            + f"): failure probability {_probability(h.get('fail_probability'))} (95 % interval "
            f"{_probability(_pick(h.get('ci95'), 0))} \u2026 {_probability(_pick(h.get('ci95'), 1))}), "
            f"{plain(h.get('sigma_level'), 3)} sigma one-sided."
        )
    return lines


def _pick(seq: object, i: int) -> object:
    return seq[i] if isinstance(seq, (list, tuple)) and len(seq) > i else None


def _probability(p: object) -> str:
    v = finite(p)
    return "\u2013" if v is None else (f"{v:.3g}" if v < 1e-3 else percent(v, 3))
