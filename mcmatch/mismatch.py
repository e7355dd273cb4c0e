"""Random mismatch draws by Pelgrom's law, tied to fixed-size sample blocks.

Sample i always gets the same numbers for a given seed, whatever the chunk size or the number of workers: the stream
of block b = i // BLOCK is seeded by ``SeedSequence(seed, spawn_key=(stream, b))`` and rows within a block are drawn
in order (numpy fills a shorter request with a prefix of a longer one from the same generator).
"""

from __future__ import annotations

import numpy as np

from mcmatch.technology import DeviceParameters

#: Samples per random-stream block. Changing it changes every result: it is part of the reproducibility contract.
BLOCK = 65536


def block_generator(seed: int, block: int, stream: int = 0) -> np.random.Generator:
    """The generator of sample block `block` (samples block*BLOCK ... (block+1)*BLOCK - 1)."""
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(stream, block))))


def standard_normals(seed: int, start: int, stop: int, n_dims: int, stream: int = 0) -> np.ndarray:
    """Standard normal draws (stop - start, n_dims) for samples start <= i < stop; identical for any split."""
    if stop <= start:
        return np.zeros((0, n_dims))
    out = np.empty((stop - start, n_dims))
    first, last = start // BLOCK, (stop - 1) // BLOCK
    for block in range(first, last + 1):
        lo = max(start, block * BLOCK)
        hi = min(stop, (block + 1) * BLOCK)
        rows = block_generator(seed, block, stream).standard_normal((hi - block * BLOCK, n_dims))
        out[lo - start : hi - start] = rows[lo - block * BLOCK :]
    return out


def mismatch_from_normals(params: DeviceParameters, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-device deviations from standard normals z (S, 2 n_devices): columns [vth of each device, beta of each].

    Returns dvth [V] and dbeta/beta [1], each (S, n_devices), with the single-device Pelgrom sigmas.
    """
    nd = params.count
    return z[:, :nd] * params.sigma_vth, z[:, nd : 2 * nd] * params.sigma_beta


def perturbed(params: DeviceParameters, dvth: np.ndarray, dbeta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-sample threshold magnitude [V] and beta [A/V^2], each (S, n_devices).

    beta = beta0 (1 + dbeta/beta), floored at 1e-3 beta0 so a far-tail draw cannot make it negative.
    """
    vth = params.vth + dvth
    beta = params.beta * np.maximum(1.0 + dbeta, 1e-3)
    return vth, beta
