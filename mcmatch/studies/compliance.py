"""Saturation compliance over the corner grid at the nominal point of each corner (no Monte Carlo): what
`mcmatch check --corners` shows. The Monte Carlo fractions come with the corner study (studies/analyses.py)."""

from __future__ import annotations

from mcmatch.config.schema import Config
from mcmatch.errors import SolveError
from mcmatch.model.operating_point import device_operating_points
from mcmatch.run.study import prepare
from mcmatch.stats.compliance import compliance_block
from mcmatch.stats.corners import GridPoint, corner_grid, point_keys


def check_grid(config: Config) -> list[GridPoint]:
    """The config's corner grid, or without [analysis.corners] the technology's corners at the config's temperature
    and nominal supply."""
    grid = corner_grid(config)
    if grid:
        return grid
    return [GridPoint(name, float(config.temperature), None) for name in config.technology.corner_names]


def corner_compliance(config: Config) -> list[dict]:
    """Per grid point: its keys and the compliance block at its nominal point (or "error" when it has none)."""
    rows, guess = [], None
    for point in check_grid(config):
        try:
            study = prepare(config, point.process, point.temperature, point.supply, guess=guess)
        except SolveError as exc:
            rows.append({**point_keys(point), "error": exc.message})
            continue
        guess = study.x_nominal
        rows.append({**point_keys(point), **compliance_block(device_operating_points(study.circuit, guess))})
    return rows
