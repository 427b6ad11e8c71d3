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


# ----------------------------------------------------------------------------- Sobol' points

#: Layers whose per-layer streams have a fixed Sobol' dimension (more layers add dimensions).
SOBOL_LAYERS = 16
#: Extra streams drawn beside the tolerances (the tilt's plane-of-incidence azimuth).
EXTRA_STREAMS = ("tilt_azimuth",)
#: Streams with one index per reflecting face (up to two per layer), given Sobol' dimensions
#: after all the others (see :meth:`tolerance.montecarlo.Engine._sobol_draws`).
LATE_STREAMS = ("reflectance",)
#: The smallest and largest uniform a Sobol' coordinate may give (so that ndtri stays finite).
_U_MIN = 2.0**-54
_U_MAX = 1.0 - 2.0**-53


def sobol_layout(streams_first, per_layer, layers: int = SOBOL_LAYERS) -> dict:
    """The Sobol' dimension of each (stream, layer), fixed by the registry's order.

    Layer 0 of every stream comes first (in ``streams_first`` order), then layer 1 of the
    per-layer streams, and so on, so the low (best-distributed) dimensions go to the streams
    every plate has, and a dimension never depends on which candidates a study holds.

    Parameters
    ----------
    streams_first : sequence of str
        Every stream name, in a fixed order.
    per_layer : collection of str
        The streams drawn once per layer.
    layers : int
        Layers given a dimension.

    Returns
    -------
    dict
        (name, layer) -> dimension index.
    """
    out = {(name, 0): d for d, name in enumerate(streams_first)}
    per = [n for n in streams_first if n in per_layer]
    for j in range(1, layers):
        for p, name in enumerate(per):
            out[(name, j)] = len(streams_first) + (j - 1) * len(per) + p
    return out


@lru_cache(maxsize=256)
def _sobol_scramble_seed(seed: int, replicate: int) -> tuple:
    ss = np.random.SeedSequence(seed, spawn_key=(_key("sobol"), replicate))
    return tuple(int(k) for k in ss.generate_state(4, np.uint32))


def sobol_points(seed: int, replicate: int, dims: int, start: int, stop: int) -> np.ndarray:
    """Points [start, stop) of one scrambled Sobol' sequence, shape (stop − start, dims).

    Replicate ``r`` of seed ``s`` is the Sobol' sequence (Joe & Kuo direction numbers) with
    its own linear matrix scrambling and digital shift, seeded by ``SeedSequence(s,
    spawn_key=("sobol", r))``.  Point i is the same whichever block asks for it (the
    generator is fast-forwarded to ``start``), so results do not depend on the chunking.
    Coordinates are clipped into [2⁻⁵⁴, 1 − 2⁻⁵³] so their normal quantiles are finite.

    References
    ----------
    .. [1] I. M. Sobol', "On the distribution of points in a cube and the approximate
       evaluation of integrals," USSR Comput. Math. Math. Phys. 7, 86-112 (1967).
    .. [2] A. B. Owen, "Scrambling Sobol' and Niederreiter-Xing points," J. Complexity 14,
       466-489 (1998).
    """
    import warnings

    from scipy.stats import qmc

    rng = np.random.default_rng(np.random.SeedSequence(list(_sobol_scramble_seed(seed, replicate))))
    eng = qmc.Sobol(dims, scramble=True, rng=rng)
    if start:
        eng.fast_forward(start)
    with warnings.catch_warnings():
        # balance is a property of the whole replicate, which is a power of two long
        warnings.simplefilter("ignore", UserWarning)
        pts = eng.random(stop - start)
    return np.clip(pts, _U_MIN, _U_MAX)


def sobol_block(seed: int, per_replicate: int, dims: int, block: int) -> np.ndarray:
    """Uniform Sobol' coordinates (BLOCK, dims) of samples [block·BLOCK, (block+1)·BLOCK).

    Sample i is point ``i mod per_replicate`` of replicate ``i // per_replicate``.
    """
    out = np.empty((BLOCK, dims))
    i = block * BLOCK
    stop = i + BLOCK
    while i < stop:
        r, j = divmod(i, per_replicate)
        take = min(stop - i, per_replicate - j)
        out[i - block * BLOCK : i - block * BLOCK + take] = sobol_points(seed, r, dims, j, j + take)
        i += take
    return out


class SobolDraws:
    """Standard draws from scrambled Sobol' points, by the same call as the random draws.

    Each (stream, layer) is one Sobol' dimension (:func:`sobol_layout`); its uniform
    coordinate u gives the uniform draw and z = Φ⁻¹(u) the normal one, so every distribution
    is sampled through its inverse CDF.  Samples come in ``replicates`` independent scramblings
    of ``per_replicate`` points each (a power of two): sample i is point ``i mod
    per_replicate`` of replicate ``i // per_replicate``.

    Parameters
    ----------
    seed : int
        The run's seed.
    per_replicate : int
        Points per scrambling (a power of two keeps the net's balance).
    replicates : int
        Independent scramblings.
    layout : dict
        (stream, layer) -> dimension, from :func:`sobol_layout`.
    cache_bytes : int
        Blocks of points kept for reuse across candidates and calls.
    """

    def __init__(self, seed, per_replicate, replicates, layout, cache_bytes=512 * 2**20):
        self.seed = int(seed)
        self.per_replicate = int(per_replicate)
        self.replicates = int(replicates)
        self.layout = dict(layout)
        self.dims = max(self.layout.values()) + 1
        self._cache: dict = {}
        self._bytes = 0
        self._limit = cache_bytes

    def dimension(self, name: str, index: int) -> int:
        d = self.layout.get((name, index))
        if d is None:
            from .errors import RetolError

            raise RetolError(
                "sampling",
                f"Sobol' points have no dimension for {name} of layer {index}",
                f'plates of more than {SOBOL_LAYERS} layers need sampling = "random"',
            )
        return d

    def _block(self, b: int):
        hit = self._cache.get(b)
        if hit is not None:
            return hit
        from scipy.special import ndtri

        u = sobol_block(self.seed, self.per_replicate, self.dims, b)
        z = ndtri(u)
        if self._bytes + u.nbytes + z.nbytes <= self._limit:
            u.flags.writeable = False
            z.flags.writeable = False
            self._cache[b] = (z, u)
            self._bytes += u.nbytes + z.nbytes
        return z, u

    def __call__(self, name: str, index: int, start: int, stop: int):
        d = self.dimension(name, index)
        n = stop - start
        z = np.empty(n)
        u = np.empty(n)
        for b in range(start // BLOCK, (stop + BLOCK - 1) // BLOCK):
            zb, ub = self._block(b)
            lo = b * BLOCK - start
            a = max(lo, 0)
            e = min(lo + BLOCK, n)
            z[a:e] = zb[a - lo : e - lo, d]
            u[a:e] = ub[a - lo : e - lo, d]
        return z, u
