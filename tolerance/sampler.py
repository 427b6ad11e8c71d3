"""Seeded, reproducible draws of the tolerances, per fixed block of samples.

Each (tolerance, layer) has its own Philox stream keyed by ``SeedSequence(seed, spawn_key=(...))``
and each block of samples its own counter range, so
that the draws of sample i never depend on the chunk size or the number of workers, and every
candidate in a run sees the same standardised draws of a shared tolerance (common random
numbers).  A stream gives standard normal variates and uniform variates in [0, 1).
"""

from __future__ import annotations

import zlib
from functools import lru_cache

import numpy as np

#: Samples per block of draws; chunks are whole numbers of blocks.
BLOCK = 512


def _key(name: str) -> int:
    return zlib.crc32(name.encode())


@lru_cache(maxsize=4096)
def _stream_key(seed: int, name: str, index: int) -> tuple:
    """The 128-bit Philox key of one stream, hashed from (seed, tolerance, layer)."""
    ss = np.random.SeedSequence(seed, spawn_key=(_key(name), index))
    return tuple(int(k) for k in ss.generate_state(2, np.uint64))


def standard_draws(seed: int, name: str, index: int, start: int, stop: int):
    """Standard normal and uniform [0, 1) variates for samples [start, stop) of one stream.

    Block b of a stream is drawn from Philox with the stream's key and the counter's top word
    set to b, so every block is a fixed, independent stretch of the stream whatever the chunking
    (Salmon et al., "Parallel random numbers: as easy as 1, 2, 3", SC11, 2011).
    """
    n = stop - start
    z = np.empty(n)
    u = np.empty(n)
    key = np.array(_stream_key(seed, name, index), dtype=np.uint64)
    bitgen = np.random.Philox(key=key)
    gen = np.random.Generator(bitgen)
    b0 = start // BLOCK
    b1 = (stop + BLOCK - 1) // BLOCK
    for b in range(b0, b1):
        bitgen.state = {
            "bit_generator": "Philox",
            "state": {"counter": np.array([0, 0, 0, b], dtype=np.uint64), "key": key},
            "buffer": np.zeros(4, dtype=np.uint64),
            "buffer_pos": 4,
            "has_uint32": 0,
            "uinteger": 0,
        }
        zb = gen.standard_normal(BLOCK)
        ub = gen.random(BLOCK)
        lo = b * BLOCK - start
        a = max(lo, 0)
        e = min(lo + BLOCK, n)
        z[a:e] = zb[a - lo : e - lo]
        u[a:e] = ub[a - lo : e - lo]
    return z, u
