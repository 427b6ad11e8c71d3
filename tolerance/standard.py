"""The engine at chosen points of the standard-normal space of a candidate's tolerances.

Every tolerance stream (a tolerance of one layer, or the tilt's azimuth) turns a standard draw
into a value (:meth:`tolerance.distributions.Distribution.draw`).  Writing each stream's draw as a
standard normal ξ (normal laws take z = ξ, uniform laws u = Φ(ξ)) maps a build of the plate to a
point of Rᵈ with the standard normal density; the rare-reject estimator
(:mod:`tolerance.rare`) searches that space and the variance-based sensitivity
(:mod:`tolerance.variance`) samples it.  Points are evaluated by the engine's own kernel, so a
point is judged exactly as a Monte Carlo sample with the same draws would be.
"""

from __future__ import annotations

import numpy as np

from .tolerances import TOLERANCES, split_key

PER_LAYER = frozenset(k for k in TOLERANCES if TOLERANCES[k].extra["per_layer"])

#: Largest |ξ| passed on (Φ(8.5) rounds to 1 in float64 only beyond ~8.3; keep u < 1 there).
_XI_MAX = 8.0


def case_streams(case) -> tuple[tuple[str, int], ...]:
    """The (stream, layer) pairs that vary for ``case``, in the grid's tolerance order.

    A per-layer tolerance has one stream per layer (crossing from the second layer on); a tilt
    brings its plane-of-incidence azimuth as one more stream; the reflectance one stream per
    reflecting face of a candidate with faces.
    """
    return tuple(s for _, s in keyed_streams(case))


def keyed_streams(case) -> tuple[tuple[str, tuple[str, int]], ...]:
    """(tolerance name, (stream, index)) of every stream that varies for ``case``.

    A train's element tolerance (``clocking_deg[element 1]``) owns the streams of that element:
    its mount's clocking and retardance (index = element), its layers' thickness and crossing
    (index = layer, crossing from the element's second layer on).
    """
    L = len(case.plate.layers)
    train = case.plate.construction == "train"
    owner = case.plate.details.get("element_of_layer") if train else None
    out = []
    for key in case.active:
        base, e = split_key(key)
        if e is not None:
            layers = [j for j in range(L) if owner[j] == e]
            if base in PER_LAYER:
                first = 1 if base == "crossing_deg" else 0
                out += [(key, (base, j)) for j in layers[first:]]
            else:
                out.append((key, (base, e)))
            continue
        if key == "reflectance":
            # one stream per reflecting face; none for ideal faces (it does not act there)
            if not case.candidate.face_model.ideal:
                from .kernel_faces import face_count

                n_faces = face_count(L, case.candidate.air_gap)
                out += [(key, (key, f)) for f in range(n_faces)]
            continue
        if key in PER_LAYER:
            first = 1 if key == "crossing_deg" else 0
            out += [(key, (key, j)) for j in range(first, L)]
        else:
            out.append((key, (key, 0)))
        if key == "tilt_deg":
            out.append((key, ("tilt_azimuth", 0)))
    return tuple(out)


class PointDraws:
    """Draws taken from given standard-normal columns, by the engine's draw call.

    Streams not given read z = 0 and u = 1/2 (the centre of their law).
    """

    def __init__(self, streams, xi: np.ndarray):
        from scipy.special import ndtr

        xi = np.clip(np.asarray(xi, dtype=float), -_XI_MAX, _XI_MAX)
        self._cols = {s: (xi[:, i], ndtr(xi[:, i])) for i, s in enumerate(streams)}
        self.n = xi.shape[0]

    def __call__(self, name: str, index: int, start: int, stop: int):
        hit = self._cols.get((name, index))
        if hit is None:
            return np.zeros(stop - start), np.full(stop - start, 0.5)
        return hit[0][start:stop], hit[1][start:stop]


def evaluate_points(eng, case, streams, xi) -> tuple[np.ndarray, np.ndarray]:
    """Worst metric over the band and the pass-test metric at standard-normal points.

    Parameters
    ----------
    eng : tolerance.montecarlo.Engine
        The engine (its study, grid, source and kernel).
    case : tolerance.montecarlo.Case
        The candidate.
    streams : sequence of (str, int)
        The column order of ``xi`` (:func:`case_streams`).
    xi : array_like
        (n, d) standard-normal coordinates.

    Returns
    -------
    worst, pass_metric : ndarray
        (n,) each, in the goal metric's unit.
    """
    from .montecarlo import _chunks, sample_inputs

    xi = np.atleast_2d(np.asarray(xi, dtype=float))
    n = xi.shape[0]
    if not np.all(np.isfinite(xi)):
        raise ValueError("standard-normal points must be finite")
    draws = PointDraws(streams, xi)
    worst = np.empty(n)
    sst = np.empty((n, 3))
    shift = np.zeros(eng.grid.size)
    for start, stop in _chunks(n, eng.chunk):
        inputs, extra = sample_inputs(case, eng.study, draws, start, stop)
        w, s, _ = eng._call(
            case, inputs, extra, eng._stats(None, stop - start, False, shift), stop - start
        )
        worst[start:stop] = w
        sst[start:stop] = s
    return worst, eng.pass_metric(worst, sst, case.goal)
