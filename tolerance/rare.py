"""Rare rejects: the reject rate 1 − yield when it is small, to a relative error that plain
Monte Carlo would need far more samples for.

Plain sampling needs about 1/(p·ε²) samples for relative error ε at reject rate p (2·10⁷ for
p = 10⁻⁴ and ε = 0.07).  Here the failure region of the standard-normal space of the
tolerances (:mod:`tolerance.standard`) is first located by a first-order reliability (FORM)
search: rays from the origin along each axis and some random directions find where the goal
is first missed, and :func:`scipy.optimize.minimize` (SLSQP) moves each find to the nearest
failing point, a *design point* ξ*, with reliability index β = |ξ*|.  Then importance sampling
draws from a defensive mixture q = α₀·φ(ξ) + (1 − α₀)/K·Σₖ φ(ξ − ξ*ₖ) with fixed counts per
component, and p ≈ mean(1[fail]·φ/q) (the balance-heuristic estimator, unbiased; the origin
component bounds the weights by 1/α₀).  Its interval is p ± z·se from the per-component
variances.  The interval is honest about sampling noise; like every importance sampler it cannot
see a failure region that neither the search nor the origin component ever reaches.

When plain sampling sees no reject at all, :attr:`RejectEstimate.bound` is the one-sided upper
confidence bound −ln(1 − c)/n on the reject rate (the rule of three, 3/n at c = 0.95).

References
----------
.. [1] A. M. Hasofer and N. C. Lind, "Exact and invariant second-moment code format," J. Eng.
   Mech. Div. ASCE 100, 111-121 (1974).
.. [2] T. Hesterberg, "Weighted average importance sampling and defensive mixture
   distributions," Technometrics 37, 185-194 (1995).
.. [3] A. Owen and Y. Zhou, "Safe and effective importance sampling," J. Am. Stat. Assoc. 95,
   135-143 (2000).
.. [4] B. D. Jovanovic and P. S. Levy, "A look at the rule of three," Am. Stat. 51, 137-139
   (1997).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

from .standard import case_streams, evaluate_points

#: Plain sampling's yield at or above which the rare-reject estimator runs (``rare = "auto"``).
RARE_YIELD = 0.999
#: Model evaluations the estimator may spend per candidate (search and sampling together).
EVALUATIONS = 20000
#: Share of the importance samples drawn from the unshifted (defensive) normal.
DEFENSIVE = 0.1
#: Design points further out than the nearest by more than this (in β) are left out.
BETA_MARGIN = 1.5
#: The search looks no further out than this β (p < 10⁻¹⁵ beyond).
BETA_MAX = 8.0


@dataclass(frozen=True)
class RejectEstimate:
    """The reject rate (1 − yield) of one candidate and how it was found.

    ``method`` is "sampling" (plain Monte Carlo, the yield's own interval), "importance
    sampling" (FORM design points, then a defensive mixture) or "none seen" (no reject in the
    plain samples; ``bound`` then holds the rule-of-three upper bound).  ``beta`` is the
    smallest reliability index found (NaN if no search ran), ``evaluations`` the model runs the
    estimator spent beyond the plain samples.
    """

    rate: float
    low: float
    high: float
    method: str
    bound: float = float("nan")
    beta: float = float("nan")
    design_points: int = 0
    evaluations: int = 0
    note: str = ""

    def to_dict(self) -> dict:
        def num(x):
            return None if not math.isfinite(x) else float(x)

        return {
            "reject_rate": num(self.rate),
            "reject_low": num(self.low),
            "reject_high": num(self.high),
            "method": self.method,
            "bound": num(self.bound),
            "beta": num(self.beta),
            "design_points": int(self.design_points),
            "evaluations": int(self.evaluations),
            "note": self.note,
        }


def zero_reject_bound(n: int, confidence: float) -> float:
    """Upper confidence bound on a reject rate when n independent samples all pass.

    P(no reject in n) = (1 − p)ⁿ ≈ e^(−np) = 1 − c gives p ≤ −ln(1 − c)/n: 3.0/n at c = 0.95
    (the rule of three, Jovanovic & Levy 1997).  Read as Wilks' first-order tolerance limit, it
    also says the worst of n samples bounds a fraction 1 − p of builds with confidence c.
    """
    return -math.log(1.0 - confidence) / n


def reject_estimate(eng, case, res, budget: int = EVALUATIONS) -> RejectEstimate:
    """The reject rate of one evaluated candidate, by importance sampling when it is rare.

    Parameters
    ----------
    eng : tolerance.montecarlo.Engine
    case : tolerance.montecarlo.Case
    res : tolerance.montecarlo.CandidateResult
        The plain Monte Carlo result (its yield decides whether rejects are rare).
    budget : int
        Model evaluations for search and importance sampling.
    """
    run = eng.study.run
    n = res.pass_metric.size
    rejects = n - res.passes
    plain = RejectEstimate(
        1.0 - res.yield_,
        1.0 - res.yield_high,
        1.0 - res.yield_low,
        "sampling" if rejects else "none seen",
        zero_reject_bound(n, run.confidence) if rejects == 0 else float("nan"),
    )
    if run.rare != "auto" or res.yield_ < RARE_YIELD or not case.active:
        return plain
    streams = case_streams(case)
    if not streams:  # nothing acts on this plate (crossing on a single plate)
        return plain
    seed_seq = np.random.SeedSequence(eng.seed, spawn_key=(17, _case_key(case)))
    rng = np.random.default_rng(seed_seq)

    def g(xi):
        return eng.study.goal.margin(evaluate_points(eng, case, streams, xi)[1])

    found = importance_sampling(g, len(streams), rng, budget, run.confidence)
    if found is None:
        return RejectEstimate(
            plain.rate,
            plain.low,
            plain.high,
            plain.method,
            plain.bound,
            evaluations=budget,
            note=f"the design-point search found no failure within beta <= {BETA_MAX:g}",
        )
    return found


def _case_key(case) -> int:
    import zlib

    return zlib.crc32(case.candidate.name.encode())


# ----------------------------------------------------------------------------- FORM search


class _Counted:
    """A limit-state function g (failure where g < 0) that counts its evaluations."""

    def __init__(self, g):
        self.g = g
        self.calls = 0

    def __call__(self, xi):
        xi = np.atleast_2d(xi)
        self.calls += xi.shape[0]
        return np.asarray(self.g(xi), dtype=float)


def ray_starts(g, d: int, rng, radii=None, n_random=None):
    """Failing points on rays from the origin: ± each axis and some random directions.

    Returns a list of (t, point): the first failing radius along each ray that fails.
    """
    radii = np.linspace(0.5, BETA_MAX, 31) if radii is None else radii
    n_random = 2 * d if n_random is None else n_random
    dirs = np.concatenate([np.eye(d), -np.eye(d), rng.standard_normal((n_random, d))])
    dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
    pts = (dirs[:, None, :] * radii[None, :, None]).reshape(-1, d)
    gv = g(pts).reshape(len(dirs), len(radii))
    out = []
    for i in range(len(dirs)):
        fail = np.nonzero(gv[i] < 0)[0]
        if fail.size:
            out.append((float(radii[fail[0]]), dirs[i] * radii[fail[0]]))
    out.sort(key=lambda x: x[0])
    return out


def design_point(g, x0, g0_scale: float, maxiter: int = 40):
    """The failing point nearest the origin from start ``x0`` (SLSQP, forward differences).

    Minimises |ξ|²/2 subject to g(ξ) ≤ 0.  Each gradient is one batch of d + 1 evaluations.
    Returns the point, or None if the optimiser ends off the failure region.
    """
    from scipy.optimize import minimize

    d = x0.size
    h = 1e-4
    cache: dict = {}

    def vals(x):
        key = x.tobytes()
        if key not in cache:
            pts = np.vstack([x, x + h * np.eye(d)])
            gv = g(pts) / g0_scale
            cache[key] = (gv[0], (gv[1:] - gv[0]) / h)
        return cache[key]

    res = minimize(
        lambda x: 0.5 * float(x @ x),
        x0,
        jac=lambda x: x,
        method="SLSQP",
        constraints=[{"type": "ineq", "fun": lambda x: -vals(x)[0], "jac": lambda x: -vals(x)[1]}],
        options={"maxiter": maxiter, "ftol": 1e-8},
    )
    x = np.asarray(res.x, dtype=float)
    gx = g(x[None])[0]
    if gx < 0:
        return x
    # SLSQP stops on the boundary from the safe side: step just past it along the ray
    for f in (1.001, 1.01, 1.05):
        if g((x * f)[None])[0] < 0:
            return x * f
    return None


def design_points(g, d: int, rng, max_starts: int = 6):
    """Distinct design points (nearest failing points) from the ray starts."""
    starts = ray_starts(g, d, rng)
    if not starts:
        return []
    scale = abs(float(g(np.zeros((1, d)))[0])) or 1.0
    points = []
    for _, x0 in starts[:max_starts]:
        x = design_point(g, x0, scale)
        if x is None:
            x = x0
        if all(np.linalg.norm(x - p) > 0.5 for p in points):
            points.append(x)
    beta = min(np.linalg.norm(p) for p in points)
    return [p for p in points if np.linalg.norm(p) <= beta + BETA_MARGIN]


# ----------------------------------------------------------------------------- sampling


def mixture_sample(g, centres, n: int, rng, confidence: float):
    """Importance sampling with a defensive normal mixture around ``centres``.

    Component 0 is the standard normal (share :data:`DEFENSIVE`), the others N(ξ*ₖ, I) in equal
    shares; counts are fixed per component.  Returns (p, se).
    """
    centres = np.vstack([np.zeros(centres.shape[1]), centres])
    K = centres.shape[0]
    d = centres.shape[1]
    alpha = np.full(K, (1.0 - DEFENSIVE) / (K - 1))
    alpha[0] = DEFENSIVE
    counts = np.floor(alpha * n).astype(int)
    counts[0] += n - counts.sum()
    labels = np.repeat(np.arange(K), counts)
    x = centres[labels] + rng.standard_normal((n, d))
    # log q(x) = logsumexp_k (log α_k − |x − μ_k|²/2); log φ(x) = −|x|²/2 (constants cancel)
    sq = np.sum((x[:, None, :] - centres[None, :, :]) ** 2, axis=-1)
    logq = np.logaddexp.reduce(np.log(alpha)[None, :] - 0.5 * sq, axis=1)
    w = np.exp(-0.5 * np.sum(x * x, axis=1) - logq)
    y = (g(x) < 0) * w
    p = float(np.mean(y))
    # stratified variance: Σ_k (n_k/n)² Var_k(y)/n_k
    var = 0.0
    for k in range(K):
        yk = y[labels == k]
        if yk.size > 1:
            var += (yk.size / n) ** 2 * float(np.var(yk, ddof=1)) / yk.size
    return p, math.sqrt(var)


def importance_sampling(g, d: int, rng, budget: int, confidence: float):
    """FORM search then mixture importance sampling within ``budget`` evaluations.

    Returns a :class:`RejectEstimate`, or None if no failure region was found.
    """
    gc = _Counted(g)
    points = design_points(gc, d, rng)
    if not points:
        return None
    left = budget - gc.calls
    if left < 1000:
        left = 1000
    p, se = mixture_sample(gc, np.array(points), left, rng, confidence)
    z = NormalDist().inv_cdf(0.5 + confidence / 2.0)
    beta = float(min(np.linalg.norm(x) for x in points))
    return RejectEstimate(
        p,
        max(0.0, p - z * se),
        min(1.0, p + z * se),
        "importance sampling",
        beta=beta,
        design_points=len(points),
        evaluations=gc.calls,
        note=f"FORM beta {beta:.2f}, {len(points)} design point(s), {left} importance samples",
    )
