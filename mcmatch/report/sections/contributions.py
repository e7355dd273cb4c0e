"""Linearised mismatch contributions: variance shares per device and parameter."""

from __future__ import annotations

from collections.abc import Mapping

from mcmatch.report.figures import fold_terms
from mcmatch.report.format import DisplayUnit, eng, finite, percent, plain, significant
from mcmatch.report.tables import cell, num, row, table
from mcmatch.report.targets import spec_unit

#: Measures drawn as contribution bars, at most (every measure still gets its table).
MAX_CONTRIBUTION_FIGURES = 6
#: Terms listed one by one in a measure's table, at most; the rest (and every term under
#: figures.MIN_SHARE of the variance) are summed into "others".
TABLE_TERMS = 12
#: Variance shares below this are rounding noise of the sensitivities (1e-5 of sigma), shown as 0.
NOISE_SHARE = 1e-10
#: Display of a mismatch parameter: (factor from SI, label with its unit).
PARAMETER_UNITS = {"vth": (1e3, "\u0394Vth [mV]"), "beta": (1e2, "\u0394\u03b2/\u03b2 [%]")}


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
                parts = [
                    f"{t.get('device')}{'' if 'count' in t else ' ' + str(t.get('parameter'))}"
                    f" {percent(t.get('share'), 3)}"
                    for t in plots.fold_terms(terms)
                ]
                ax.title = f"variance shares of {name}: " + ", ".join(parts)
                item["figure"] = {
                    "svg": ax.svg(),
                    "alt": f"variance shares of {name}",
                    "cls": "fig-contrib",
                    "caption": "",
                }
            folded = fold_terms(terms, TABLE_TERMS)
            u = DisplayUnit([t.get("std") for t in folded], unit)
            sens_u = DisplayUnit([_per_unit(t) for t in folded], unit)
            rows = []
            for t in folded:
                parameter = str(t.get("parameter") or "")
                factor, label = PARAMETER_UNITS.get(parameter, (1.0, parameter))
                other = "count" in t
                rows.append(
                    row(
                        [
                            cell("others", "") if other else cell(t.get("device"), "name"),
                            f"{t['count']} smaller term{'s' if t['count'] != 1 else ''}" if other else label,
                            num("\u2013" if other else plain(_mul(t.get("sigma"), factor), 3)),
                            num("\u2013" if other else sens_u(_per_unit(t), with_unit=False)),
                            num(u(_above_noise(t), with_unit=False)),
                            num(significant(100 * (finite(t.get("share")) or 0.0), 3)),
                        ]
                    )
                )
            item["table"] = table(
                [
                    "device",
                    "parameter [its unit]",
                    ("parameter sigma", "num"),
                    (f"sensitivity [{sens_u.label or '1'} per parameter unit]", "num"),
                    (u.header("contribution to sigma"), "num"),
                    ("share of variance [%]", "num"),
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


def _above_noise(term: Mapping) -> object:
    """A term's contribution to sigma, or 0 when its share of the variance is numerical noise (below NOISE_SHARE)."""
    share = finite(term.get("share"))
    return 0.0 if share is not None and share < NOISE_SHARE else term.get("std")


def _per_unit(term: Mapping) -> float | None:
    """A term's sensitivity per display unit of its parameter [measure SI unit per mV or per %]."""
    factor = PARAMETER_UNITS.get(str(term.get("parameter")), (1.0, ""))[0]
    return _mul(term.get("sensitivity"), 1.0 / factor)
