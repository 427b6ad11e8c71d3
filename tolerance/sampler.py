"""Seeded, reproducible draws of the tolerances, per fixed block of samples.

Each (tolerance, layer, block) has its own stream, ``SeedSequence(seed, spawn_key=(...))``, so
that the draws of sample i never depend on the chunk size or the number of workers, and every
candidate in a run sees the same standardised draws of a shared tolerance (common random
numbers).  A stream gives standard normal variates and uniform variates in [0, 1).
"""

from __future__ import annotations

import zlib

import numpy as np

#: Samples per block of draws; chunks are whole numbers of blocks.
BLOCK = 512


def _key(name: str) -> int:
    return zlib.crc32(name.encode())


def standard_draws(seed: int, name: str, index: int, start: int, stop: int):
    """Standard normal and uniform [0, 1) variates for samples [start, stop) of one stream.

    ``start`` must be a multiple of :data:`BLOCK`.
    """
    n = stop - start
    z = np.empty(n)
    u = np.empty(n)
    b0 = start // BLOCK
    b1 = (stop + BLOCK - 1) // BLOCK
    for b in range(b0, b1):
        g = np.random.Generator(np.random.Philox(
            np.random.SeedSequence(seed, spawn_key=(_key(name), index, b))))
        zb = g.standard_normal(BLOCK)
        ub = g.random(BLOCK)
        lo = b * BLOCK - start
        a = max(lo, 0)
        e = min(lo + BLOCK, n)
        z[a:e] = zb[a - lo:e - lo]
        u[a:e] = ub[a - lo:e - lo]
    return z, u


def scaled(dist: dict | None, z, u, center: float = 0.0):
    """Values of a normalised distribution (see :mod:`tolerance.spec`) from standard draws.

    ``normal``: center + σ·z; ``uniform``: center + h·(2u − 1); ``range``: low + (high − low)·u
    (absolute, ``center`` ignored).  None gives ``center`` exactly.
    """
    if dist is None:
        return np.full_like(z, center)
    k = dist["kind"]
    if k == "normal":
        return center + dist["sigma"] * z
    if k == "uniform":
        return center + dist["half_width"] * (2.0 * u - 1.0)
    if k == "range":
        return dist["low"] + (dist["high"] - dist["low"]) * u
    raise ValueError(f"unknown distribution kind {k!r}")  # pragma: no cover
