"""Checks of ``[analysis] variation`` against the technology's ``[statistics]`` and the configured studies."""

from __future__ import annotations

from mcmatch.config.analysis import Analysis
from mcmatch.config.schema import Technology
from mcmatch.errors import ConfigError


def check_variation(analysis: Analysis, technology: Technology, file: str) -> None:
    """A global spread needs the technology's [statistics]; every configured study must be able to take it."""
    mode = analysis.variation
    if mode == "local":
        return
    if technology.statistics is None:
        raise ConfigError(
            f"variation = '{mode}' needs the global process spread of the technology: add a [statistics] table "
            "([statistics.nmos] / [statistics.pmos] with vth_sigma and kprime_sigma, and polarity_correlation) to "
            "the technology, or set variation = 'local'",
            file=file,
            key="analysis.variation",
        )
