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
            ("sigma level", "num"),
        ],
        rows,
        "High-sigma estimate of the failure probability (importance sampling)",
    )


def _pick(seq: object, i: int) -> object:
    return seq[i] if isinstance(seq, (list, tuple)) and len(seq) > i else None


def _probability(p: object) -> str:
    v = finite(p)
    return "\u2013" if v is None else (f"{v:.3g}" if v < 1e-3 else percent(v, 3))
