"""Mergeable moments per fixed block of samples (count, mean, M2, min, max), folded in block order with Chan,
Golub and LeVeque's pairwise update, and their per-replicate form (samples i % R). Blocks sit at fixed sample indices,
so a fold does not depend on how a run was cut into chunks."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: Samples per moment partial. Chunk boundaries must be multiples of it for chunking-independent moments.
STAT_BLOCK = 8192


@dataclass
class Moments:
    """count, mean, M2 = sum (x - mean)^2, min and max of the finite values seen; mergeable."""

    count: int = 0
    mean: float = 0.0
    m2: float = 0.0
    min: float = math.inf
    max: float = -math.inf

    @classmethod
    def of(cls, values: np.ndarray) -> Moments:
        v = np.asarray(values, dtype=float)
        v = v[np.isfinite(v)]
        if v.size == 0:
            return cls()
        mean = float(v.mean())
        return cls(int(v.size), mean, float(((v - mean) ** 2).sum()), float(v.min()), float(v.max()))

    def merge(self, other: Moments) -> Moments:
        """Chan, Golub, LeVeque (1979) pairwise update; exact for counts, min and max."""
        if other.count == 0:
            return self
        if self.count == 0:
            return Moments(other.count, other.mean, other.m2, other.min, other.max)
        n = self.count + other.count
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.count / n)
        m2 = self.m2 + other.m2 + delta * delta * (self.count * other.count / n)
        return Moments(n, mean, m2, min(self.min, other.min), max(self.max, other.max))

    @property
    def std(self) -> float | None:
        """Sample standard deviation (ddof = 1); 0 for a single value, None for none."""
        if self.count == 0:
            return None
        return math.sqrt(max(self.m2, 0.0) / (self.count - 1)) if self.count > 1 else 0.0


def block_starts(start: int, stop: int, block: int = STAT_BLOCK) -> np.ndarray:
    """Offsets (from `start`) where the block-aligned pieces of samples start..stop begin (blocks at multiples of
    `block` in the run's sample index)."""
    edges = np.arange(-(-start // block) * block, stop, block, dtype=np.int64)
    if edges.size == 0 or edges[0] != start:
        edges = np.concatenate([np.array([start], dtype=np.int64), edges])
    return (edges - start).astype(np.intp)


def block_moments(values: np.ndarray, starts: np.ndarray, all_finite: bool = False) -> tuple[np.ndarray, ...]:
    """(count, mean, m2, min, max) arrays, one entry per block starting at offsets `starts`; finite values only
    (`all_finite`: the caller knows there is no other, which saves the masking)."""
    v = np.asarray(values, dtype=float)
    lengths = np.diff(np.append(starts, len(v)))
    sums = np.add.reduceat(v, starts) if all_finite else None
    if sums is not None and np.isfinite(sums).all():  # a NaN or inf would show in its block's sum
        means = sums / lengths
        dev = v - np.repeat(means, lengths)
        return (
            lengths.astype(np.int64),
            means,
            np.add.reduceat(dev * dev, starts),
            np.minimum.reduceat(v, starts),
            np.maximum.reduceat(v, starts),
        )
    finite = np.isfinite(v)
    counts = np.add.reduceat(finite.astype(np.int64), starts)
    sums = np.add.reduceat(np.where(finite, v, 0.0), starts)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = np.where(counts > 0, sums / np.maximum(counts, 1), 0.0)
    dev = np.where(finite, v - np.repeat(means, lengths), 0.0)
    m2 = np.add.reduceat(dev * dev, starts)
    mins = np.minimum.reduceat(np.where(finite, v, np.inf), starts)
    maxs = np.maximum.reduceat(np.where(finite, v, -np.inf), starts)
    return counts, means, m2, mins, maxs


def fold_blocks(total: Moments, blocks: tuple[np.ndarray, ...]) -> Moments:
    """Fold per-block moments into `total`, in block order."""
    for c, mean, m2, lo, hi in zip(*(b.tolist() for b in blocks), strict=True):
        if c:
            total = total.merge(Moments(int(c), mean, m2, lo, hi))
    return total


def replicate_groups(start: int, n: int, starts: np.ndarray, replicates: int) -> np.ndarray:
    """Group of each of n samples from `start` on: block * replicates + (sample index % replicates), blocks as
    given by `starts` (:func:`block_starts`)."""
    block = np.repeat(np.arange(len(starts), dtype=np.int64), np.diff(np.append(starts, n)))
    return block * replicates + (start + np.arange(n, dtype=np.int64)) % replicates


def replicate_block_moments(
    values: np.ndarray, start: int, starts: np.ndarray, replicates: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(count, mean, m2) of the finite values of samples start.. per block (offsets `starts`) and group
    i % replicates, each (n_blocks, replicates).

    A whole block of finite values (the usual case) is reduced as a (rows, replicates) array; any other block
    through :func:`replicate_moments`. The choice depends on the block alone, so the numbers do not depend on the
    chunk it came in."""
    v = np.asarray(values, dtype=float)
    n_blocks, rr = len(starts), int(replicates)
    lengths = np.diff(np.append(starts, len(v)))
    full = 0  # leading whole blocks of STAT_BLOCK samples starting at a multiple of rr
    if start % rr == 0 and STAT_BLOCK % rr == 0:
        while full < n_blocks and lengths[full] == STAT_BLOCK:
            full += 1
    counts = np.zeros((n_blocks, rr), dtype=np.int64)
    means = np.zeros((n_blocks, rr))
    m2 = np.zeros((n_blocks, rr))
    slow = list(range(full, n_blocks))
    if full:
        rows = STAT_BLOCK // rr
        cube = v[: full * STAT_BLOCK].reshape(full, rows, rr)
        with np.errstate(invalid="ignore", over="ignore"):
            means[:full] = cube.sum(axis=1) * (1.0 / rows)
            dev = cube - means[:full, None, :]
            m2[:full] = np.einsum("brk,brk->bk", dev, dev)
        counts[:full] = rows
        # a block holding a failed sample (NaN) shows in its m2; it goes the masked way
        slow = [int(b) for b in np.flatnonzero(~np.isfinite(m2[:full]).all(axis=1))] + slow
    for b in slow:
        lo = int(starts[b])
        part = v[lo : lo + int(lengths[b])]
        groups = (start + lo + np.arange(part.size, dtype=np.int64)) % rr
        counts[b], means[b], m2[b] = replicate_moments(part, groups, rr)
    return counts, means, m2


def replicate_moments(
    values: np.ndarray, groups: np.ndarray, n_groups: int, all_finite: bool = False
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(count, mean, m2) of the finite values per group (:func:`replicate_groups`), each (n_groups,)."""
    v = np.asarray(values, dtype=float)
    finite = None if all_finite else np.isfinite(v)
    if finite is not None and finite.all():
        finite = None
    if finite is None:
        counts = np.bincount(groups, minlength=n_groups).astype(np.int64)
        sums = np.bincount(groups, weights=v, minlength=n_groups)
    else:
        counts = np.bincount(groups[finite], minlength=n_groups).astype(np.int64)
        sums = np.bincount(groups, weights=np.where(finite, v, 0.0), minlength=n_groups)
    means = sums / np.maximum(counts, 1)
    dev = v - means[groups]
    if finite is not None:
        dev = np.where(finite, dev, 0.0)
    return counts, means, np.bincount(groups, weights=dev * dev, minlength=n_groups)
