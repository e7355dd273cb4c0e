"""A histogram per measure and normal-probability plots of the worst tails."""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np

from mcmatch.report.format import display_scale, eng, limits_text
from mcmatch.report.targets import tail_measures

if TYPE_CHECKING:
    import pandas as pd


def distributions(
    summary: dict, samples: pd.DataFrame | Mapping[str, np.ndarray] | None, keys: list[str]
) -> list[dict]:
    """A histogram per measure, and a normal-probability plot beside it for the key measures with the worst tails."""
    if samples is None or "converged" in samples and len(samples["converged"]) == 0:
        return []
    from mcmatch.report import figures as plots

    keys = tail_measures(summary, keys)

    specs = summary.get("specs") or {}
    converged = np.asarray(samples["converged"]).astype(bool) if "converged" in samples else None
    out = []
    for name, m in (summary.get("measures") or {}).items():
        if name not in samples:
            continue
        column = np.asarray(samples[name])  # a pandas column or the run's own numpy column
        if column.dtype.kind not in "fiub":  # text in a numeric column: read what parses
            import pandas as pd

            column = pd.to_numeric(column, errors="coerce")
        values = np.asarray(column, dtype=float)
        if converged is not None:
            values = values[converged]
        values = values[np.isfinite(values)]
        if values.size == 0:
            continue
        unit = m.get("unit", "")
        scale, label = display_scale([m.get("mean"), m.get("nominal"), *values[:1]], unit)
        ax = plots.histogram(
            values,
            mean=m.get("mean"),
            std=m.get("std"),
            nominal=m.get("nominal"),
            limits=specs.get(name),
            scale=scale,
            unit=label,
            name=name,
            title=name,
            legend="right" if name in keys else "inside",
        )
        ax.title = (
            f"histogram of {name}: {values.size:,} samples, mean {eng(m.get('mean'), unit)}, sigma "
            f"{eng(m.get('std'), unit)}, nominal {eng(m.get('nominal'), unit)}"
            + (f", spec {limits_text(specs[name], unit)}" if name in specs else "")
        )
        item = {
            "name": name,
            "hist": {"svg": ax.svg(), "alt": f"histogram of {name}", "cls": "fig-hist"},
            "prob": None,
            "caption": (
                f"{name}: {values.size:,} samples shown"
                + (f" of {m.get('count', values.size):,}" if m.get("count", values.size) != values.size else "")
                + f"; normal fit mean {eng(m.get('mean'), unit)}, sigma {eng(m.get('std'), unit)}; nominal "
                f"{eng(m.get('nominal'), unit)} (dotted)"
                + (f"; spec {limits_text(specs[name], unit)} (dashed, outside hatched)" if name in specs else "")
                + "."
            ),
        }
        if name in keys:
            ax = plots.probability_plot(values, limits=specs.get(name), scale=scale, unit=label)
            ax.title = (
                f"normal probability plot of {name}: samples from {eng(values.min(), unit)} to "
                f"{eng(values.max(), unit)} against normal quantiles"
            )
            item["prob"] = {
                "svg": ax.svg(),
                "alt": f"normal probability plot of {name}",
                "cls": "fig-probplot",
            }
            item["caption"] += (
                " Right: ordered samples against normal quantiles; bending away from the line at the ends "
            )
            item["caption"] += "means the tails are not normal."
        out.append(item)
    return out
