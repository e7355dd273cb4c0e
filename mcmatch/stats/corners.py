"""Process x temperature x supply corners: the grid, one table row per grid point, and the worst point per measure
(the smallest spec margin in sigma, :mod:`mcmatch.stats.margins`).

Tables in, dicts out (SI units); the solves happen in :mod:`mcmatch.studies.analyses`.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from mcmatch.config.schema import Config, Limits
from mcmatch.stats.describe import describe
from mcmatch.stats.margins import TIE_SIGMAS, group_label, margin_error, spec_margin, within_error
from mcmatch.stats.yields import joint_passes, passes, yield_block

CRITERION_YIELD = "lowest spec yield (ties: largest |mean - nominal| + 3 std)"  # the criterion before margins
CRITERION_MARGIN = (
    f"smallest spec margin min((max - mean) / std, (mean - min) / std) [sigma]; corners within {TIE_SIGMAS:g} "
    "combined standard errors of it are reported together"
)
CRITERION_SPREAD = "largest |mean - main nominal| + 3 std"


@dataclass(frozen=True)
class GridPoint:
    """One corner condition: global process corner, temperature [K], supply (source name, volts) or None."""

    process: str
    temperature: float
    supply: tuple[str, float] | None

    @property
    def supply_volts(self) -> float | None:
        return None if self.supply is None else self.supply[1]


def nominal_supply(config: Config, source: str) -> float | None:
    """Value of voltage source `source` in the netlist [V], None if there is no such source."""
    for v in config.circuit.voltage_source:
        if v.name == source:
            return v.value
    return None


def corner_grid(config: Config) -> list[GridPoint]:
    """The process x temperature x supply grid of ``[analysis.corners]`` (process outermost).

    Defaults: the technology's corners (tt first), the config temperature, the nominal supply.
    """
    study = config.analysis.corners
    if study is None:
        return []
    processes = [p.lower() for p in (study.process or config.technology.corner_names)]
    temperatures = list(study.temperature or [config.temperature])
    nominal = nominal_supply(config, study.supply_source)
    if study.supply is not None:
        supplies: list[float | None] = list(study.supply)
    elif study.supply_scale is not None and nominal is not None:
        supplies = [s * nominal for s in study.supply_scale]
    else:
        supplies = [nominal]
    return [
        # rounded to 1e-9 K / 1e-12 V: "-40 degC" is 233.15 K, not 233.14999999999998 K
        GridPoint(p, round(float(t), 9), None if v is None else (study.supply_source, round(float(v), 12)))
        for p, t, v in itertools.product(processes, temperatures, supplies)
    ]


def point_keys(point: GridPoint) -> dict:
    return {"process": point.process, "temperature": point.temperature, "supply": point.supply_volts}


def spec_table_yield(columns: dict[str, np.ndarray], specs: dict[str, Limits]) -> dict:
    """Joint yield block (Clopper-Pearson) plus per-spec pass counts; failed solves fail every spec."""
    converged = np.asarray(columns["converged"], dtype=bool)
    total = int(converged.size)
    joint = joint_passes(columns, specs)
    per_spec = {}
    for name, limits in specs.items():
        ok = passes(columns[name], limits) & converged
        per_spec[name] = {"passed": int(ok.sum()), "fraction": float(ok.mean()) if total else None}
    block = yield_block(int(joint.sum()), total)
    block["specs"] = per_spec
    return block


def corner_entry(
    point: GridPoint, nominal: dict[str, float], columns: dict[str, np.ndarray], specs: dict[str, Limits]
) -> dict:
    """One row of summary["corners"]: nominal, mean and std per measure, yield, failed solves."""
    converged = np.asarray(columns["converged"], dtype=bool)
    measures = {}
    for name, value in nominal.items():
        d = describe(columns[name], value)
        measures[name] = {"nominal": d["nominal"], "mean": d["mean"], "std": d["std"]}
    return {
        **point_keys(point),
        "measures": measures,
        "yield": spec_table_yield(columns, specs),
        "samples": int(converged.size),
        "failed_solves": int((~converged).sum()),
    }


def error_entry(point: GridPoint, message: str) -> dict:
    """A grid point whose nominal operating point could not be found."""
    return {**point_keys(point), "error": message}


def spread(entry_measure: dict, main_nominal: float | None) -> float | None:
    """|mean - main nominal| + 3 std [measure unit], None if the statistics are missing."""
    mean, std = entry_measure.get("mean"), entry_measure.get("std")
    if mean is None or std is None or main_nominal is None:
        return None
    return abs(mean - main_nominal) + 3.0 * std


def worst_corners(entries: list[dict], main_measures: dict, specs: dict[str, Limits]) -> dict:
    """The worst grid point per measure: the smallest spec margin in sigma for measures with a spec
    (:mod:`mcmatch.stats.margins`), else the largest spread; grid points with an error are skipped.

    For a spec'd measure, `value` is that margin [sigma]; `tied` lists every corner within sampling error of it
    (TIE_SIGMAS combined standard errors), `label` names them together. For a spread, `tied` and `label` name the
    corners with the same spread to rounding (a supply the measure does not depend on). main_measures:
    summary["measures"] (each measure's main nominal, for the spread).
    """
    out: dict[str, dict] = {}
    ok_entries = [e for e in entries if "error" not in e]
    grid = [point_keys_of(e) for e in ok_entries]
    for name, stats in main_measures.items():
        nominal = stats.get("nominal")
        if name in specs:
            worst = _worst_margin(ok_entries, grid, name, specs[name], nominal)
            if worst is not None:
                out[name] = worst
            continue
        best_key, best = None, None
        for e in ok_entries:
            s = spread(e["measures"].get(name, {}), nominal)
            key = -np.inf if s is None else s
            if best_key is None or key > best_key:
                best_key, best = key, e
        if best is None:
            continue
        s = spread(best["measures"].get(name, {}), nominal)
        out[name] = {**point_keys_of(best), "value": s, "criterion": CRITERION_SPREAD, "spread": s}
        same = [e for e in ok_entries if _same_spread(spread(e["measures"].get(name, {}), nominal), s)]
        if len(same) > 1:  # e.g. a supply the measure does not depend on: every supply is as bad
            out[name]["tied"] = [{**point_keys_of(e), "spread": spread(e["measures"][name], nominal)} for e in same]
            out[name]["label"] = group_label([point_keys_of(e) for e in same], grid)
    return out


def _same_spread(a: float | None, b: float | None) -> bool:
    """Equal spreads to rounding (1e-9 relative): corners whose statistics do not differ at all, not within noise."""
    return a is not None and b is not None and abs(a - b) <= 1e-9 * max(abs(a), abs(b), 1e-300)


def point_keys_of(entry: dict) -> dict:
    return {"process": entry["process"], "temperature": entry["temperature"], "supply": entry["supply"]}


def _finite(value: float | None) -> float | None:
    return value if value is not None and math.isfinite(value) else None


def _worst_margin(entries: list[dict], grid: list[dict], name: str, limits: Limits, nominal: float | None):
    rows = []
    for e in entries:
        m = e["measures"].get(name, {})
        margin, limit = spec_margin(m.get("mean"), m.get("std"), limits)
        if margin is None:
            continue
        n = int(e.get("samples", 0)) - int(e.get("failed_solves", 0))
        rows.append((margin, margin_error(margin, n), limit, e))
    if not rows:
        return None
    margin, error, limit, entry = min(rows, key=lambda r: r[0])
    tied = [r for r in rows if within_error(r[0], r[1], margin, error)]
    m = entry["measures"][name]
    return {
        **point_keys_of(entry),
        "value": _finite(margin),
        "criterion": CRITERION_MARGIN,
        "spread": spread(m, nominal),
        "margin_sigma": _finite(margin),
        "margin_error": _finite(error),
        "limit": limit,
        "mean": m.get("mean"),
        "std": m.get("std"),
        "spec_yield": ((entry.get("yield") or {}).get("specs") or {}).get(name, {}).get("fraction"),
        "tied": [{**point_keys_of(r[3]), "margin_sigma": _finite(r[0])} for r in tied],
        "label": group_label([point_keys_of(r[3]) for r in tied], grid),
    }
