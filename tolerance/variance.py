"""Variance-based sensitivity: first- and total-order Sobol' indices of each tolerance.

The one-at-a-time yields (``sensitivity_alone`` / ``sensitivity_without``) miss interactions;
Sobol' indices split the variance of an output Y among the tolerances.  The first-order index
Sᵢ = Var(E[Y|Xᵢ]) / Var(Y) is the share tolerance i explains alone, the total index
Sₜᵢ = E[Var(Y|X₋ᵢ)] / Var(Y) the share it has a hand in, interactions included; Sₜᵢ − Sᵢ is its
interaction share.  Each tolerance key is one group (all its layers, and a tilt's azimuth with
the tilt).

Estimators (pick-freeze on two independent sample matrices A and B of the standard-normal draws,
and A_B^(i), A with group i's columns from B): Saltelli's first order
Sᵢ ≈ mean(f(B)·(f(A_B^(i)) − f(A))) / V and Jansen's total order
Sₜᵢ ≈ mean((f(A) − f(A_B^(i)))²) / (2V), with V the variance of f over A and B; N·(k + 2) model
evaluations for k groups and N base samples.  Intervals are bootstrap percentiles over the N rows.

References
----------
.. [1] I. M. Sobol', "Global sensitivity indices for nonlinear mathematical models and their
   Monte Carlo estimates," Math. Comput. Simul. 55, 271-280 (2001).
.. [2] A. Saltelli et al., "Variance based sensitivity analysis of model output. Design and
   estimator for the total sensitivity index," Comput. Phys. Commun. 181, 259-270 (2010),
   Table 2 (estimators b and f).
.. [3] M. J. W. Jansen, "Analysis of variance designs for model output," Comput. Phys. Commun.
   117, 35-43 (1999).
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np

from . import sampler
from .standard import evaluate_points, keyed_streams

#: Bootstrap resamples of the index intervals.
BOOTSTRAP = 400
#: Fewest rejects (and passes) among the A and B rows for pass/fail indices; NaN below.
MIN_OUTCOMES = 10
#: The six numbers of one tolerance's indices (the ``run --json`` contract).
FIELDS = ("first", "first_low", "first_high", "total", "total_low", "total_high")


@dataclass(frozen=True)
class SobolIndices:
    """Indices of one candidate, by spec key: each ``{field: value}`` for :data:`FIELDS`."""

    metric: Mapping[str, Mapping[str, float]]  # of the worst goal metric over the band
    passing: Mapping[str, Mapping[str, float]]  # of pass/fail (1 or 0)
    dominant: str  # largest total index of pass/fail, or "none"
    base_samples: int
    evaluations: int


def saltelli_jansen(fA, fB, fAB, confidence=0.95, n_boot=BOOTSTRAP, rng=None) -> dict:
    """First- and total-order indices with bootstrap intervals from pick-freeze samples.

    Parameters
    ----------
    fA, fB : array_like
        (N,) outputs at the rows of A and B.
    fAB : array_like
        (k, N) outputs at A with group i's columns taken from B.
    confidence : float
        Two-sided level of the percentile intervals.
    n_boot : int
        Bootstrap resamples (rows drawn with replacement, the same rows for every group).
    rng : numpy.random.Generator, optional

    Returns
    -------
    dict
        Each of :data:`FIELDS` -> (k,) array; NaN when the output does not vary.
    """
    fA = np.asarray(fA, dtype=float)
    fB = np.asarray(fB, dtype=float)
    fAB = np.atleast_2d(np.asarray(fAB, dtype=float))
    if not (np.all(np.isfinite(fA)) and np.all(np.isfinite(fB)) and np.all(np.isfinite(fAB))):
        raise ValueError("model outputs must be finite for Sobol' indices")
    n = fA.size
    rng = rng if rng is not None else np.random.default_rng(0)

    def est(a, b, ab):
        # centring on the sample mean keeps the first-order estimator's variance from growing
        # with the output's mean (as scipy.stats.sobol_indices also does)
        both = np.concatenate([a, b], axis=-1)
        mu = np.mean(both, axis=-1, keepdims=True)
        a, b, ab = a - mu, b - mu, ab - mu[..., None, :]
        v = np.var(both, axis=-1)
        with np.errstate(divide="ignore", invalid="ignore"):
            first = np.mean(b[..., None, :] * (ab - a[..., None, :]), axis=-1) / v[..., None]
            total = 0.5 * np.mean((a[..., None, :] - ab) ** 2, axis=-1) / v[..., None]
        bad = ~(v > 0)
        first[bad] = np.nan
        total[bad] = np.nan
        return first, total

    first, total = est(fA[None], fB[None], fAB[None])
    idx = rng.integers(0, n, size=(n_boot, n))
    bf, bt = est(fA[idx], fB[idx], np.moveaxis(fAB[:, idx], 0, 1))
    q = (0.5 - confidence / 2.0, 0.5 + confidence / 2.0)
    with warnings.catch_warnings():
        # a resample in which the output does not vary has no indices: leave it out
        warnings.simplefilter("ignore", RuntimeWarning)
        fl, fh = np.nanquantile(bf, q, axis=0)
        tl, th = np.nanquantile(bt, q, axis=0)
    return {
        "first": first[0],
        "first_low": fl,
        "first_high": fh,
        "total": total[0],
        "total_low": tl,
        "total_high": th,
    }


def pick_freeze_points(seed: int, streams, groups, n: int) -> np.ndarray:
    """Stacked rows A, B, A_B^(1..k) of standard-normal draws, shape (n·(k + 2), d).

    A and B come from their own seeded streams per (tolerance, layer), so adding a candidate or
    a tolerance does not change another's columns.
    """
    d = len(streams)
    A = np.empty((n, d))
    B = np.empty((n, d))
    for i, (name, index) in enumerate(streams):
        A[:, i] = sampler.standard_draws(seed, f"variance-a/{name}", index, 0, n)[0]
        B[:, i] = sampler.standard_draws(seed, f"variance-b/{name}", index, 0, n)[0]
    blocks = [A, B]
    for cols in groups:
        ab = A.copy()
        ab[:, cols] = B[:, cols]
        blocks.append(ab)
    return np.concatenate(blocks)


def sobol_indices(eng, case, n_base: int, n_boot: int = BOOTSTRAP) -> SobolIndices:
    """Sobol' indices of each active tolerance of ``case`` for the worst metric and pass/fail.

    Parameters
    ----------
    eng : tolerance.montecarlo.Engine
    case : tolerance.montecarlo.Case
    n_base : int
        Base samples N; the cost is N·(k + 2) kernel evaluations for k tolerances.
    n_boot : int
        Bootstrap resamples.
    """
    keyed = keyed_streams(case)
    streams = tuple(s for _, s in keyed)
    groups = {key: [i for i, (k, _) in enumerate(keyed) if k == key] for key in case.active}
    # a tolerance with no stream here (crossing on a single plate) does nothing: no index
    keys = [k for k, cols in groups.items() if cols]
    if not keys:  # nothing acts on this plate: no indices, and no evaluations spent
        empty = MappingProxyType({})
        return SobolIndices(empty, empty, "none", int(n_base), 0)
    groups = [groups[k] for k in keys]
    xi = pick_freeze_points(eng.seed, streams, groups, n_base)
    worst, pm = evaluate_points(eng, case, streams, xi)
    passed = eng.study.goal.passes(pm).astype(float)
    conf = eng.study.run.confidence
    out = {}
    for label, f in (("metric", worst), ("passing", passed)):
        f = f.reshape(len(keys) + 2, n_base)
        rng = np.random.default_rng(np.random.SeedSequence(eng.seed, spawn_key=(16, len(out))))
        r = saltelli_jansen(f[0], f[1], f[2:], conf, n_boot, rng)
        if label == "passing" and min(np.sum(f[:2] == 0), np.sum(f[:2] == 1)) < MIN_OUTCOMES:
            # a handful of rejects (or passes) cannot split a variance: say so, not a number
            r = {fld: np.full(len(keys), np.nan) for fld in FIELDS}
        out[label] = MappingProxyType(
            {
                k: MappingProxyType({fld: float(r[fld][i]) for fld in FIELDS})
                for i, k in enumerate(keys)
            }
        )
    totals = {k: v["total"] for k, v in out["passing"].items() if np.isfinite(v["total"])}
    dominant = max(totals, key=totals.get) if totals and max(totals.values()) > 0 else "none"
    return SobolIndices(out["metric"], out["passing"], dominant, int(n_base), int(xi.shape[0]))
