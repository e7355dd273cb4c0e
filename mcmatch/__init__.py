"""mcmatch: pre-layout Monte Carlo mismatch analysis of MOS bias circuits.

The public API (everything in ``__all__``; names are imported on first use, so ``import mcmatch`` loads no numpy,
scipy, pandas or pydantic)::

    import mcmatch
    config = mcmatch.load_config("configs/demo.toml")
    config = mcmatch.with_overrides(config, samples=4000, seed=2)   # checked like the command-line options
    result = mcmatch.run_config(config, jobs=1)                      # Result: .summary (typed), .table (pandas)
    result.summary.yield_.fraction, result.summary.measures["gain_error"].std
    mcmatch.save_run(result, "reports/demo")                         # the run folder `mcmatch run` writes
    again = mcmatch.load_run("reports/demo")
    html = mcmatch.render_report(again)

Bad input raises :class:`ConfigError` (file, key and what was expected), before any work. The run function is
``run_config``, not ``run``: ``mcmatch.run`` is the engine's subpackage, and Python's import system sets that
attribute to the subpackage whenever any module imports it.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

__all__ = [
    "SCHEMA_VERSION",
    "Config",
    "ConfigError",
    "McmatchError",
    "Result",
    "SolveError",
    "Summary",
    "__version__",
    "load_config",
    "load_run",
    "render_report",
    "run_config",
    "save_run",
    "with_overrides",
]

#: Names served from their modules on first use (module attribute access, PEP 562).
_LAZY = {
    "Config": "mcmatch.config.schema",
    "load_config": "mcmatch.config.loading",
    "ConfigError": "mcmatch.errors",
    "McmatchError": "mcmatch.errors",
    "SolveError": "mcmatch.errors",
    "Summary": "mcmatch.results.summary",
    "SCHEMA_VERSION": "mcmatch.results.summary",
    "Result": "mcmatch.results.run_folder",
    "load_run": "mcmatch.results.run_folder",
    "with_overrides": "mcmatch.api",
    "run_config": "mcmatch.api",
    "save_run": "mcmatch.api",
    "render_report": "mcmatch.api",
}
# No static import of a subpackage here: the layered packages import this module (for __version__), so a static
# import from it would chain a lower layer to a higher one (and make `import mcmatch` heavy).


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'mcmatch' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
