"""A multi-output bank: the chance that every channel is in spec, against the number of channels, beside the estimate
for independent channels; the per-channel yields, the worst channel and the mean correlation between channels."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import finite, interval_text, yield_cells, yield_text
from mcmatch.report.tables import cell, num, row, table
from mcmatch.report.targets import target_of


def bank_section(summary: dict, figures: bool = True) -> dict | None:
    """The bank block of the summary (see docs/summary.md, "bank") as a figure, a summary table and a per-k table."""
    bank = summary.get("bank")
    if not isinstance(bank, Mapping) or not bank:
        return None
    by_k = [s for s in bank.get("by_k") or [] if isinstance(s, Mapping)]
    out = {"table": _summary_table(bank), "steps": _steps_table(bank, by_k), "figure": None, "note": _note(bank)}
    if figures and by_k:
        from mcmatch.report.figure_bank import bank_yield

        target = target_of(summary)
        ax = bank_yield(by_k, target=float(target["yield"]) if target["given"] else None)
        ax.title = f"bank yield against the number of channels: {_key_numbers(bank)}"
        out["figure"] = {
            "svg": ax.svg(),
            "alt": ax.title,
            "cls": "fig-bank",
            "caption": "Share of the samples with the first k channels all in spec (dots; bars: 95 % Clopper-Pearson "
            "interval) and the product of the k per-channel yields (triangles, dashed), which is what the bank would "
            "give if its channels were independent." + _reading(bank),
        }
    return out


def _reading(bank: Mapping) -> str:
    """One sentence on how the counted yield of all channels compares with the independent estimate."""
    counted = finite((bank.get("all_in_spec") or {}).get("fraction"))
    ind = finite(_independent(bank))
    if counted is None or ind is None or abs(counted - ind) < 1e-12:
        return ""
    if counted > ind:
        return (
            " Here the counted yield stays above the product: the channels are positively correlated (a shared "
            "reference moves every channel the same way)."
        )
    return " Here the counted yield falls below the product: failures of different channels rarely coincide."


def _key_numbers(bank: Mapping) -> str:
    """The figure's accessible text: joint yield, its interval, the independent estimate, worst channel, correlation."""
    a = bank.get("all_in_spec") if isinstance(bank.get("all_in_spec"), Mapping) else {}
    parts = [
        f"all {bank.get('channels', '?')} channels in spec {yield_text(a.get('fraction'))} "
        f"(95 % interval {interval_text(a.get('ci95'))})",
        f"if independent {independent_text(_independent(bank))}",
    ]
    worst = bank.get("worst_channel")
    if isinstance(worst, Mapping):
        parts.append(f"worst channel {worst.get('measure')} {yield_text(worst.get('fraction'))}")
    rho = finite(bank.get("mean_correlation"))
    if rho is not None:
        parts.append(f"mean correlation {rho:.3f}")
    return "; ".join(parts)


def independent_text(value: object) -> str:
    """The product of the channel yields; a product of one means no channel failed, never shown as "100.0 %"."""
    v = finite(value)
    return "no failure counted" if v is not None and v >= 1.0 else yield_text(v)


def _independent(bank: Mapping) -> object:
    ind = bank.get("independent_estimate")
    return ind.get("fraction") if isinstance(ind, Mapping) else ind


def _summary_table(bank: Mapping) -> dict:
    rows = [row([cell("channels", "name"), num(str(bank.get("channels", "\u2013")))])]
    if bank.get("samples"):
        rows.append(row([cell("samples", "name"), num(f"{int(bank['samples']):,}")]))
    a = bank.get("all_in_spec")
    if isinstance(a, Mapping):
        head, tail = yield_cells(a)
        rows.append(row([cell("all channels in spec (counted)", "name"), num(f"{head} ({tail})")], "joint"))
    if _independent(bank) is not None:
        rows.append(
            row(
                [
                    cell("if channels were independent (product of the channel yields)", "name"),
                    num(independent_text(_independent(bank))),
                ]
            )
        )
    worst = bank.get("worst_channel")
    if isinstance(worst, Mapping):
        rows.append(
            row([cell("worst channel", "name"), num(f"{worst.get('measure')}: {yield_text(worst.get('fraction'))}")])
        )
    rho = finite(bank.get("mean_correlation"))
    if "mean_correlation" in bank:
        rows.append(
            row([cell("mean correlation between channels", "name"), num(f"{rho:.3f}" if rho is not None else "\u2013")])
        )
    if bank.get("failed_solves"):
        rows.append(row([cell("failed solves (fail every channel)", "name"), num(f"{int(bank['failed_solves']):,}")]))
    per_channel = [c for c in bank.get("per_channel") or [] if isinstance(c, Mapping)]
    total = bank.get("samples")
    for c in per_channel:
        count = f" ({int(c['passed']):,} of {int(total):,})" if c.get("passed") is not None and total else ""
        cls = "worst" if isinstance(worst, Mapping) and c.get("measure") == worst.get("measure") else ""
        value = yield_text(c.get("fraction")) + count
        if total and c.get("passed") is not None and int(c["passed"]) == int(total):
            value = f"0 of {int(total):,} failed"  # never "100.0 %" from a finite sample (no interval is kept here)
        rows.append(row([cell(f"channel {c.get('measure')}", "name"), num(value)], cls))
    return table(
        ["quantity", ("value", "num")], rows, "Multi-output bank: the chance that every channel is in spec", "compact"
    )


def _steps_table(bank: Mapping, by_k: list) -> dict | None:
    """One row per k: the first k channels all in spec, counted (with interval) and as if independent."""
    if not by_k:
        return None
    measures = list(bank.get("measures") or [])
    rows = []
    for s in by_k:
        k = int(s.get("k", 0))
        added = measures[k - 1] if 0 < k <= len(measures) else ""
        head, tail = yield_cells(s if "total" in s else {**s, "total": bank.get("samples")})
        rows.append(
            row(
                [
                    num(str(k)),
                    cell(added, "name"),
                    num(head),
                    num(tail),
                    num(independent_text(s.get("independent_estimate"))),
                ]
            )
        )
    return table(
        [
            ("k", "num"),
            "channel added",
            ("all k in spec", "num"),
            ("95 % interval", "num"),
            ("if independent", "num"),
        ],
        rows,
        "Yield of the first k channels together",
        "compact",
    )


def _note(bank: Mapping) -> str:
    detected = bank.get("detected")
    if detected and detected != "configured":
        return f"Bank channels found automatically: {detected}."
    return ""
