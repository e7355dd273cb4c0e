"""Random mismatch draws by Pelgrom's law, tied to fixed-size sample blocks.

Sample i always gets the same numbers for a given seed, whatever the chunk size or the number of workers: the stream
of block b = i // BLOCK is seeded by ``SeedSequence(seed, spawn_key=(stream, b))`` and rows within a block are drawn
in order (numpy fills a shorter request with a prefix of a longer one from the same generator).

Quasi-Monte Carlo (``sampling = "sobol"``): sample i takes point j = i // R of scrambled Sobol' sequence
r = i % R (R = :data:`SOBOL_SCRAMBLINGS` independent scramblings, interleaved), mapped to standard normals by the
normal quantile. Sequence r is scrambled (linear matrix scramble plus digital shift, scipy.stats.qmc.Sobol) from
``SeedSequence(seed, spawn_key=(stream, SOBOL_KEY + r))``, so again the numbers of sample i depend only on
(seed, stream, i). The R scramblings are independent randomisations of the same point set: the spread of an estimate
over them is the randomised-QMC error estimate (Owen, "Scrambling Sobol' and Niederreiter-Xing points",
J. Complexity 14, 1998; L'Ecuyer and Lemieux, "Recent advances in randomized quasi-Monte Carlo methods", 2002).
"""

from __future__ import annotations

from typing import Literal, Protocol

import numpy as np

from mcmatch.model.technology import DeviceParameters

#: How the standard normals of the mismatch are drawn: pseudo-random, or scrambled Sobol' points (quasi-Monte Carlo).
Sampling = Literal["random", "sobol"]

#: Samples per random-stream block. Changing it changes every result: it is part of the reproducibility contract.
BLOCK = 65536


def block_generator(seed: int, block: int, stream: int = 0) -> np.random.Generator:
    """The generator of sample block `block` (samples block*BLOCK ... (block+1)*BLOCK - 1).

    SFC64 bits: numpy's ziggurat normals come about 15-20 % faster from it than from PCG64 on this project's
    machines, and the draws are the largest single cost of a vectorised run. Like BLOCK, the choice is part of
    the reproducibility contract.
    """
    return np.random.Generator(np.random.SFC64(np.random.SeedSequence(seed, spawn_key=(stream, block))))


def standard_normals(
    seed: int, start: int, stop: int, n_dims: int, stream: int = 0, sampling: Sampling = "random"
) -> np.ndarray:
    """Standard normal draws (stop - start, n_dims) for samples start <= i < stop; identical for any split."""
    return np.ascontiguousarray(standard_normals_t(seed, start, stop, n_dims, stream, sampling).T)


#: Rows drawn per call into a small scratch buffer: keeps the draws cache-resident and allocation-free.
DRAW_ROWS = 8192


def standard_normals_t(
    seed: int, start: int, stop: int, n_dims: int, stream: int = 0, sampling: Sampling = "random"
) -> np.ndarray:
    """The draws of :func:`standard_normals`, sample axis last: (n_dims, stop - start), each row contiguous."""
    return normal_source(seed, start, n_dims, stream, sampling).take(max(0, stop - start))


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


#: Independent scramblings of the Sobol' sequence, interleaved over the samples: sample i belongs to scrambling i % R.
#: Part of the reproducibility contract of ``sampling = "sobol"``, like BLOCK.
SOBOL_SCRAMBLINGS = 8
#: Bits of the Sobol' points: up to 2**32 points per scrambling on a grid of step 2**-32 (normals within about
#: +-6.3 sigma after the clip below; a pseudo-random normal goes beyond that about once in 4e9 draws).
SOBOL_BITS = 32
#: Offset of the scramblings' spawn keys, far from the random blocks' keys (block numbers stay below it).
SOBOL_KEY = 1_000_000
#: The uniforms are clipped into [U_EDGE, 1 - U_EDGE] before the normal quantile: half a grid step from 0 and 1.
U_EDGE = 0.5 * 2.0**-SOBOL_BITS


class NormalSource(Protocol):
    """Consecutive standard normals from a sample index on: ``take(n)`` -> (n_dims, n), the sample axis last."""

    position: int

    def take(self, n: int) -> np.ndarray: ...


def sobol_engine(seed: int, replicate: int, n_dims: int, stream: int = 0):
    """Scrambled Sobol' generator of scrambling `replicate` (scipy.stats.qmc.Sobol, linear matrix scramble and
    digital shift), its randomisation seeded by ``SeedSequence(seed, spawn_key=(stream, SOBOL_KEY + replicate))``."""
    from scipy.stats import qmc

    bits = np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(stream, SOBOL_KEY + replicate))))
    return qmc.Sobol(n_dims, scramble=True, bits=SOBOL_BITS, rng=bits)


def sobol_jump(engine, index: int):
    """Position a fresh Sobol' `engine` so its next point is point `index` of its sequence; returns the engine.

    scipy draws the points in Gray-code order: point k is the digital shift XOR the direction numbers of the set
    bits of gray(k) = k ^ (k >> 1). Setting that state directly costs O(bits * d), where
    ``Sobol.fast_forward`` steps through every skipped point (a few seconds per chunk deep into a 1e9-sample run).
    Falls back to fast_forward if scipy's internals differ from those this relies on.
    """
    if index <= 0:
        return engine
    sv, shift = getattr(engine, "_sv", None), getattr(engine, "_shift", None)
    quasi = getattr(engine, "_quasi", None)
    if engine.num_generated != 0 or sv is None or shift is None or quasi is None or sv.ndim != 2:
        return engine.fast_forward(index)
    # after k points the engine holds point k - 1 and counts k (see scipy's Sobol._random)
    gray = (index - 1) ^ ((index - 1) >> 1)
    state = shift.copy()
    for bit in range(sv.shape[1]):
        if (gray >> bit) & 1:
            state ^= sv[:, bit]
    quasi[:] = state
    engine.num_generated = index
    return engine


class SobolStream:
    """Scrambled Sobol' points mapped to standard normals, sample by sample from `start` on: ``take(n)`` gives the
    next n samples as (n_dims, n), like :class:`NormalStream`.

    Sample i is point i // R of scrambling i % R, R = `scramblings`; each scrambling's generator is kept between
    calls and started afresh (jumped to the wanted point) only where a call does not continue where it stopped.
    """

    def __init__(
        self, seed: int, start: int, n_dims: int, stream: int = 0, scramblings: int = SOBOL_SCRAMBLINGS
    ) -> None:
        self.seed, self.n_dims, self.stream, self.scramblings = seed, n_dims, stream, scramblings
        self.position = start  # next sample to hand out
        self._engines: dict[int, object] = {}
        self._next: dict[int, int] = {}  # next point index of each scrambling's engine

    def _points(self, replicate: int, first: int, count: int) -> np.ndarray:
        """Points first .. first + count - 1 of scrambling `replicate`, uniforms (count, n_dims)."""
        engine = self._engines.get(replicate)
        if engine is None or self._next[replicate] != first:
            engine = sobol_jump(sobol_engine(self.seed, replicate, self.n_dims, self.stream), first)
            self._engines[replicate] = engine
        if engine.num_generated == 0 and count & (count - 1):
            # scipy warns about balance when a fresh sequence is asked for a non-power of 2 (sample counts are the
            # user's choice and the summary says so): the first point alone, then the rest, are the same points
            u = np.concatenate([engine.random(1), engine.random(count - 1)])
        else:
            u = engine.random(count)
        self._next[replicate] = first + count
        return u

    def take(self, n: int) -> np.ndarray:
        from scipy.special import ndtri

        out = np.empty((self.n_dims, n))
        pos, rr = self.position, self.scramblings
        for r in range(rr):
            first = pos + (r - pos) % rr  # first sample of scrambling r at or after pos
            if first >= pos + n:
                continue
            count = (pos + n - 1 - first) // rr + 1
            u = self._points(r, first // rr, count)
            np.clip(u, U_EDGE, 1.0 - U_EDGE, out=u)
            out[:, first - pos :: rr] = ndtri(u).T
        self.position += n
        return out


def normal_source(seed: int, start: int, n_dims: int, stream: int = 0, sampling: Sampling = "random") -> NormalSource:
    """The standard normals of samples start, start + 1, ... for the chosen sampling: block-seeded pseudo-random
    draws (:class:`NormalStream`) or scrambled Sobol' points (:class:`SobolStream`); both depend only on
    (seed, stream, sample index)."""
    if sampling == "random":
        return NormalStream(seed, start, n_dims, stream)
    if sampling == "sobol":
        return SobolStream(seed, start, n_dims, stream)
    raise ValueError(f"unknown sampling {sampling!r}; expected 'random' or 'sobol'")


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
