"""A multi-output bank: the chance that every channel is in spec."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import interval_text, yield_text
from mcmatch.report.tables import cell, num, row, table


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
