"""Linearised mismatch contributions: variance shares per device and parameter."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.format import eng, finite, fixed, percent, plain
from mcmatch.report.tables import cell, num, row, table
from mcmatch.report.targets import spec_unit

#: Measures drawn as contribution bars, at most (every measure still gets its table).
MAX_CONTRIBUTION_FIGURES = 6


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
        unit = spec_unit(summary, name)
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
                ax.title = f"variance shares of {name}: " + ", ".join(
                    f"{t.get('device')} {t.get('parameter')} {percent(t.get('share'), 3)}"
                    for t in plots.fold_terms(terms)
                )
                item["figure"] = {
                    "svg": ax.svg(),
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
    v = finite(value)
    return None if v is None else v * factor
