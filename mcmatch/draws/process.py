"""Global (die-to-die) process spread: one correlated draw per sample (die) shifts every device of a polarity alike.

Each sample takes four standard normals z of its own block-seeded stream (:data:`PROCESS_STREAM`, drawn like the
mismatch normals by :func:`mcmatch.draws.mismatch.normal_source`, so sample i's draw depends only on (seed, i)):
g_vth = (z0, rho z0 + sqrt(1 - rho^2) z1) for (nmos, pmos), g_k likewise from (z2, z3), rho the technology's
polarity_correlation; threshold and k' draws are independent of each other. Device i of polarity q then moves by
dvth_i = vth_sigma_q g_vth_q [V] (on the threshold magnitude, so a positive draw slows both polarities) and
dbeta_i/beta_i = kprime_sigma_q g_k_q [1] (added to the relative Pelgrom deviation: both are small fractions).

All of it is one linear map, the loading A (2 n_devices, 4) from z to the parameter axis of
:mod:`mcmatch.model.sensitivity` (every device's vth, then every device's dbeta/beta): the global shifts are A z and
their covariance A A^T, which the linearised summary uses too.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mcmatch.config.schema import Statistics
from mcmatch.draws.mismatch import Sampling, mismatch_from_normals, normal_source
from mcmatch.errors import ConfigError
from mcmatch.model.technology import DeviceParameters

#: Random stream of the global draws of a study on mismatch stream s: PROCESS_STREAM + s (the mismatch draws keep
#: stream s, so "both" has exactly the local draws of "local"; a study on a fresh mismatch stream, such as the area
#: confirmation, gets fresh global draws too). Above every mismatch stream in use (0 .. 8).
PROCESS_STREAM = 16
#: Standard normals per sample: nmos vth, pmos vth (independent part), nmos k', pmos k' (independent part).
PROCESS_DIMS = 4

Variation = str  # "local" | "global" | "both"


@dataclass(frozen=True)
class ProcessSpread:
    """How a study's samples vary: `local` keeps the per-device Pelgrom draws (False for "global" alone);
    `loading` (2 n_devices, 4) maps the four global normals to dvth [V] (first n_devices rows) and dbeta/beta [1]."""

    mode: Variation
    local: bool
    loading: np.ndarray

    @property
    def covariance(self) -> np.ndarray:
        """Covariance (2 n_devices, 2 n_devices) of the global shifts along the parameter axis [V^2, V, 1]."""
        return self.loading @ self.loading.T


def polarity_loading(statistics: Statistics, polarity: np.ndarray) -> np.ndarray:
    """The loading A (2 n_devices, 4) of devices with `polarity` (+1 nmos, -1 pmos) under `statistics`."""
    rho = float(statistics.polarity_correlation)
    own = np.sqrt(max(0.0, 1.0 - rho * rho))
    nd = len(polarity)
    a = np.zeros((2 * nd, PROCESS_DIMS))
    for k, pol in enumerate(np.asarray(polarity)):
        if pol > 0:
            s = statistics.nmos
            a[k, 0] = s.vth_sigma
            a[nd + k, 2] = s.kprime_sigma
        else:
            s = statistics.pmos
            a[k, 0:2] = s.vth_sigma * rho, s.vth_sigma * own
            a[nd + k, 2:4] = s.kprime_sigma * rho, s.kprime_sigma * own
    return a


def process_spread(mode: Variation, statistics: Statistics | None, polarity: np.ndarray) -> ProcessSpread | None:
    """The spread of `mode` ("local": None, nothing to add) for devices of `polarity` (+1 nmos, -1 pmos)."""
    if mode == "local":
        return None
    if statistics is None:
        raise ConfigError(
            f"variation = '{mode}' needs a [statistics] table in the technology", key="analysis.variation"
        )
    return ProcessSpread(mode=mode, local=mode == "both", loading=polarity_loading(statistics, polarity))


class ProcessDraws:
    """The global shifts of consecutive samples from `start` on, added in place to the local deviations."""

    def __init__(
        self, spread: ProcessSpread, seed: int, start: int, stream: int = 0, sampling: Sampling = "random"
    ) -> None:
        self.spread = spread
        self.source = normal_source(seed, start, PROCESS_DIMS, PROCESS_STREAM + stream, sampling)

    def apply_t(self, dvth: np.ndarray, dbeta: np.ndarray) -> None:
        """Add the next samples' global shifts to dvth [V], dbeta [1], each (n_devices, n), sample axis last; zero
        the local part first when the spread has none ("global")."""
        n_devices, n = dvth.shape
        z = self.source.take(n)
        if not self.spread.local:
            dvth[...] = 0.0
            dbeta[...] = 0.0
        a = self.spread.loading
        dvth += a[:n_devices] @ z
        dbeta += a[n_devices:] @ z


def process_draws(
    spread: ProcessSpread | None, seed: int, start: int, stream: int = 0, sampling: Sampling = "random"
) -> ProcessDraws | None:
    """:class:`ProcessDraws` from sample `start` on for a study on mismatch stream `stream`, or None when there is no
    global spread (variation "local")."""
    return None if spread is None else ProcessDraws(spread, seed, start, stream, sampling)


def with_process(
    spread: ProcessSpread | None,
    seed: int,
    start: int,
    dvth: np.ndarray,
    dbeta: np.ndarray,
    stream: int = 0,
    sampling: Sampling = "random",
) -> tuple[np.ndarray, np.ndarray]:
    """Local deviations dvth [V], dbeta [1], each (S, n_devices) sample-first for samples start.., with the global
    spread applied (unchanged for "local")."""
    if spread is None:
        return dvth, dbeta
    vt, bt = np.array(dvth, dtype=float).T.copy(), np.array(dbeta, dtype=float).T.copy()
    ProcessDraws(spread, seed, start, stream, sampling).apply_t(vt, bt)
    return vt.T, bt.T


# ------------------------------------------------------------------------------------- standard-normal space
def normal_dims(n_devices: int, spread: ProcessSpread | None) -> int:
    """Dimensions of a sample's standard-normal vector: 2 n_devices mismatch normals, then the PROCESS_DIMS global
    ones when there is a global spread (the layout of :func:`deviations_from_normals`)."""
    return 2 * n_devices + (0 if spread is None else PROCESS_DIMS)


def deviations_from_normals(
    params: DeviceParameters, spread: ProcessSpread | None, z: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """dvth [V], dbeta [1], each (S, n_devices), from standard normals z (S, :func:`normal_dims`): the Pelgrom
    deviations of the first 2 n_devices columns (zero for "global" alone) plus the global shifts A z of the rest."""
    nd = params.count
    dvth, dbeta = mismatch_from_normals(params, z[:, : 2 * nd])
    if spread is None:
        return dvth, dbeta
    if not spread.local:
        dvth, dbeta = np.zeros_like(dvth), np.zeros_like(dbeta)
    shifts = z[:, 2 * nd :] @ spread.loading.T
    return dvth + shifts[:, :nd], dbeta + shifts[:, nd:]


def normal_gradient(gradient: np.ndarray, sigmas: np.ndarray, spread: ProcessSpread | None) -> np.ndarray:
    """d(measure)/dz along the layout of :func:`deviations_from_normals` from d(measure)/d(parameter) `gradient`
    (2 n_devices,) and the local sigmas (2 n_devices,) [unit per standard normal]."""
    g = np.asarray(gradient, dtype=float)
    local = g * sigmas
    if spread is None:
        return local
    return np.concatenate([local if spread.local else np.zeros_like(local), g @ spread.loading])
