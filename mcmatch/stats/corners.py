"""Process x temperature x supply corners: the grid, one table row per grid point, and the worst point per measure.

Tables in, dicts out (SI units); the solves happen in :mod:`mcmatch.studies.analyses`.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from mcmatch.config.schema import Config, Limits
from mcmatch.stats.describe import describe
from mcmatch.stats.yields import passes, yield_block

CRITERION_YIELD = "lowest spec yield (ties: largest |mean - nominal| + 3 std)"
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
    joint = converged.copy()
    per_spec = {}
    for name, limits in specs.items():
        ok = passes(columns[name], limits) & converged
        joint &= ok
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
    """The worst grid point per measure: lowest per-spec yield for measures with a spec, else the largest spread.

    main_measures: summary["measures"] (uses each measure's main nominal). Grid points with an error are skipped.
    """
    out: dict[str, dict] = {}
    ok_entries = [e for e in entries if "error" not in e]
    for name, stats in main_measures.items():
        nominal = stats.get("nominal")
        best_key = None
        best = None
        for e in ok_entries:
            s = spread(e["measures"].get(name, {}), nominal)
            s_key = -np.inf if s is None else s
            if name in specs:
                y = e["yield"]["specs"][name]["fraction"]
                key = (-(y if y is not None else 0.0), s_key)
            else:
                key = (s_key,)
            if best_key is None or key > best_key:
                best_key, best = key, (e, y if name in specs else s)
        if best is None:
            continue
        entry, value = best
        out[name] = {
            "process": entry["process"],
            "temperature": entry["temperature"],
            "supply": entry["supply"],
            "value": value,
            "criterion": CRITERION_YIELD if name in specs else CRITERION_SPREAD,
            "spread": spread(entry["measures"].get(name, {}), nominal),
        }
    return out
