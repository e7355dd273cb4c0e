"""The Monte Carlo of one analysed condition (a corner, an area point, a placement, a high-sigma or bank check, a
sizing confirmation) under the run's options: shared by every analysis, so none imports another for it."""

from __future__ import annotations

from typing import Protocol

import numpy as np

from mcmatch.run.chunks import monte_carlo
from mcmatch.run.pool import threshold
from mcmatch.run.study import Study


class Options(Protocol):
    """What the studies use of pipeline.RunOptions."""

    jobs: int | None
    backend: str | None


def condition_mc(study: Study, samples: int, options: Options | None) -> dict[str, np.ndarray]:
    """Monte Carlo of one condition; runs below the selected pool's threshold (run.pool.THRESHOLD) stay in-process (a
    pool costs more than it saves there), whatever the options say. The numbers are the same either way."""
    if samples < threshold():
        return monte_carlo(study, samples, jobs=1)
    return monte_carlo(study, samples, jobs=getattr(options, "jobs", None), backend=getattr(options, "backend", None))
