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
    """The generator of sample block `block` (samples block*BLOCK ... (block+1)*BLOCK - 1).

    SFC64 bits: numpy's ziggurat normals come about 15-20 % faster from it than from PCG64 on this project's
    machines, and the draws are the largest single cost of a vectorised run. Like BLOCK, the choice is part of
    the reproducibility contract.
    """
    return np.random.Generator(np.random.SFC64(np.random.SeedSequence(seed, spawn_key=(stream, block))))


def standard_normals(seed: int, start: int, stop: int, n_dims: int, stream: int = 0) -> np.ndarray:
    """Standard normal draws (stop - start, n_dims) for samples start <= i < stop; identical for any split."""
    return np.ascontiguousarray(standard_normals_t(seed, start, stop, n_dims, stream).T)


#: Rows drawn per call into a small scratch buffer: keeps the draws cache-resident and allocation-free.
DRAW_ROWS = 8192


def standard_normals_t(seed: int, start: int, stop: int, n_dims: int, stream: int = 0) -> np.ndarray:
    """The draws of :func:`standard_normals`, sample axis last: (n_dims, stop - start), each row contiguous."""
    return NormalStream(seed, start, n_dims, stream).take(max(0, stop - start))


class NormalStream:
    """Consecutive draws from sample `start` on, in pieces: ``take(n)`` returns the next n samples' normals as
    (n_dims, n), the sample axis last, exactly as :func:`standard_normals` would give them.

    Each block's generator yields its rows in order, so the rows of the first block before `start` are drawn and
    dropped; drawing in pieces gives the same numbers as one call (the generator consumes its stream sequentially).
    """

    def __init__(self, seed: int, start: int, n_dims: int, stream: int = 0) -> None:
        self.seed, self.n_dims, self.stream = seed, n_dims, stream
        self.position = start  # next sample to hand out
        self._block = -1
        self._generator: np.random.Generator | None = None
        self._drawn = 0  # rows of the current block drawn so far
        self._scratch = np.empty((DRAW_ROWS, n_dims))

    def _draw(self, rows: int) -> np.ndarray:
        piece = self._scratch[:rows]
        self._generator.standard_normal(out=piece)
        self._drawn += rows
        return piece

    def take(self, n: int) -> np.ndarray:
        out = np.empty((self.n_dims, n))
        done = 0
        while done < n:
            block, offset = divmod(self.position, BLOCK)
            if block != self._block or offset < self._drawn:
                self._block, self._drawn = block, 0
                self._generator = block_generator(self.seed, block, self.stream)
            while self._drawn < offset:  # skip to the first wanted row of the block
                self._draw(min(DRAW_ROWS, offset - self._drawn))
            rows = min(DRAW_ROWS, n - done, BLOCK - offset)
            out[:, done : done + rows] = self._draw(rows).T
            done += rows
            self.position += rows
        return out


def mismatch_from_normals(params: DeviceParameters, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-device deviations from standard normals z (S, 2 n_devices): columns [vth of each device, beta of each].

    Returns dvth [V] and dbeta/beta [1], each (S, n_devices), with the single-device Pelgrom sigmas.
    """
    nd = params.count
    return z[:, :nd] * params.sigma_vth, z[:, nd : 2 * nd] * params.sigma_beta


def mismatch_from_normals_t(params: DeviceParameters, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`mismatch_from_normals` sample-last: z (2 n_devices, S) -> dvth [V], dbeta [1], each (n_devices, S)."""
    nd = params.count
    return z[:nd] * params.sigma_vth[:, None], z[nd : 2 * nd] * params.sigma_beta[:, None]


def perturbed(params: DeviceParameters, dvth: np.ndarray, dbeta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-sample threshold magnitude [V] and beta [A/V^2], each (S, n_devices).

    beta = beta0 (1 + dbeta/beta), floored at 1e-3 beta0 so a far-tail draw cannot make it negative.
    """
    vth = params.vth + dvth
    beta = params.beta * np.maximum(1.0 + dbeta, 1e-3)
    return vth, beta
