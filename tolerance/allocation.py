"""Tolerance allocation: the widths to write on the drawing and the purchase order for a yield.

For each candidate and on the same draws throughout (common random numbers,
:class:`~tolerance.montecarlo.Engine`):

* **alone** — per varied tolerance, the loosest width that keeps the yield >= Y with the others
  as specified;
* **balanced** — one common scale factor on all varied widths (ranges about their centre) that
  brings the yield to Y;
* **cheapest** — from ``[allocation.cost]`` tables of available widths and costs, the least-cost
  combination with yield >= Y, and the next-cheapest ones.

Yield under common random numbers is a step function of the widths: each pass count changes only
when a sample crosses the goal.  With every draw fixed, a tolerance's value is its width times a
fixed standard draw, so widening moves every sample's error outward; the pass test is then, for
the usual single-optimum goal, non-increasing in each width (checked in the tests), and a search
on the scale factor is a monotone root-finding problem.  We solve it by bracketing (factors of 2)
and then a safeguarded interpolation in log(scale) (:func:`_guess`, bisection whenever a step
does not halve the bracket) on the *first* failure (the monotone envelope: the answer is the
largest scale evaluated whose yield, and that of every smaller scale evaluated, is >= Y), so a
rare non-monotone sample cannot send the search to a far crossing.  The answer is reproducible
for a seed, resolved to :data:`RTOL`, and moves between seeds by about its reported width range:
the widths whose yields reach the ends of the Wilson interval at the answer (the Monte Carlo
uncertainty of the width).

Only the comparison with Y matters at most evaluated points, so an evaluation runs its samples
in steps and stops once the failures seen already exceed n (1 - Y) (:class:`_Yields`):
the full yield is then surely below Y, and the comparison is exact.  The as-given yield (every
scale 1) is evaluated once and shared by all searches.

Where the yield is not monotone in a width: a temperature range whose centre is not the design
temperature (scaling it about its centre first brings the plate nearer its design point, then
away), and two tolerances that act on the same quantity with opposite signs (a thickness error
can cancel a ``retardance_waves`` error, a tilt can cancel a thickness error), so that one
sample may pass at a larger width and fail at a smaller one.  The search copes by the envelope
rule above: it answers the first crossing from below, which is the safe (tighter) width.

References
----------
.. [1] E. B. Wilson, J. Am. Stat. Assoc. 22, 209-212 (1927) (score interval).
.. [2] P. Glasserman, Monte Carlo Methods in Financial Engineering, Springer (2003), sec. 4.2
   (common random numbers for comparing and optimising systems).
"""

from __future__ import annotations

import heapq
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from .distributions import DEFAULT_COVERAGE, Distribution
from .errors import RetolError
from .montecarlo import Engine, nominal_retardance_waves, wilson
from .sampler import BLOCK
from .study import Candidate, Study
from .tolerances import PER_ELEMENT, element_key, order_key, split_key

DEFAULT_TARGET = 0.99
#: Relative resolution of the scale factor at the answer, and of the width range.
RTOL = 0.01
#: Largest number of combinations the cheapest search may evaluate.
MAX_EVALUATIONS = 300
ALTERNATIVES = 3
#: Samples in the first (and any later) step of an evaluation that may stop early, at least.
PREFIX = 2048
#: Physical bounds on a tolerance's reach (6 σ, the half width or half range). [key's unit]
ANGLE_BOUND = {
    "clocking_deg": 45.0,
    "crossing_deg": 45.0,
    "input_azimuth_deg": 45.0,
    "cut_deg": 45.0,
}
TILT_BOUND = 88.0
RETARDANCE_BOUND = 0.5
TEMPERATURE_BOUND = 100.0


# ----------------------------------------------------------------------------- records


@dataclass(frozen=True)
class Point:
    """A yield evaluated at one scale factor: pass count k of n, Wilson interval.

    ``seen`` < n marks a point decided early: its first ``seen`` samples already hold more
    failures than a yield >= the target allows, so the full yield is surely below it; k and the
    interval are then those of the ``seen`` samples (an estimate below the target)."""

    scale: float
    k: int
    n: int
    low: float
    high: float
    seen: int | None = None

    @property
    def yield_(self) -> float:
        return self.k / self.n

    @property
    def exact(self) -> bool:
        return self.seen is None


@dataclass(frozen=True)
class Alone:
    """The loosest width of one tolerance alone (None with a reason when there is none)."""

    key: str
    form: str
    width: float | None
    yield_: float | None
    yield_low: float | None
    yield_high: float | None
    width_low: float | None = None
    width_high: float | None = None
    reason: str | None = None
    bound: float | None = None
    curve: tuple[tuple[float, float], ...] = ()  # (width, yield) evaluated


@dataclass(frozen=True)
class Balanced:
    scale: float
    widths: Mapping[str, float]
    yield_: float
    yield_low: float
    yield_high: float
    scale_low: float
    scale_high: float
    at_bound: bool = False


@dataclass(frozen=True)
class Combination:
    widths: Mapping[str, float]
    cost: float
    yield_: float
    yield_low: float
    yield_high: float


@dataclass(frozen=True)
class Cheapest:
    best: Combination
    alternatives: tuple[Combination, ...]
    evaluations: int
    combinations: int


@dataclass(frozen=True)
class CandidateAllocation:
    name: str
    alone: Mapping[str, Alone]
    balanced: Balanced
    cheapest: Cheapest | None
    given: Mapping[str, Distribution]
    allocated: Mapping[str, Distribution]  # the tolerances the drawing table shows
    basis: str  # "cheapest" or "balanced"
    yield_: float
    #: scale combinations evaluated, and samples run through the kernel over all of them
    evaluations: int = 0
    samples_run: int = 0


@dataclass(frozen=True)
class Allocation:
    target_yield: float
    samples: int
    seed: int
    vary: tuple[str, ...]
    candidates: tuple[CandidateAllocation, ...] = field(default_factory=tuple)


# ----------------------------------------------------------------------------- yields


class _Yields:
    """Cached yields of one candidate at scale factors on some tolerances (same draws).

    Scale factors of exactly 1 are the tolerances as given, so they are left out of the cache
    key: every "alone" search, the balanced one and the as-given yield share that evaluation.
    With ``decide=Y`` the samples are run in steps (:meth:`_step`)
    and the evaluation stops as soon as the failures seen exceed n (1 - Y): the full yield is
    then below Y whatever the remaining samples do, so a comparison with Y is exact.  A point
    decided early is finished (from where it stopped) when its exact yield is asked for.
    """

    def __init__(self, eng: Engine, cand: Candidate, tol: Mapping[str, Distribution]):
        self.eng = eng
        self.cand = cand
        self.tol = dict(tol)
        self.conf = eng.study.run.confidence
        self.cache: dict = {}
        self._partial: dict = {}  # key -> (passes, seen) of a point decided early
        #: distinct scale combinations evaluated (fully or decided early)
        self.evaluations = 0
        #: samples × evaluations run through the kernel
        self.samples_run = 0

    def at(self, scales: Mapping[str, float], decide: float | None = None) -> Point:
        """The yield at ``scales``; with ``decide`` only as far as needed to compare with it."""
        key = tuple(sorted((k, round(float(f), 12)) for k, f in scales.items() if f != 1.0))
        hit = self.cache.get(key)
        n = self.eng.samples
        if hit is not None and (
            hit.exact or (decide is not None and (n - hit.seen + hit.k) / n < decide)
        ):
            return hit  # exact, or decided early and below this target even at best
        if hit is None:
            self.evaluations += 1
        eng = self.eng
        f_mean = float(np.mean(list(scales.values()))) if scales else 1.0
        if eng.client is not None:  # a cluster evaluates whole runs
            k = int(round(eng.pass_rate(self._case(scales)) * n))
            return self._store(key, Point(f_mean, k, n, *wilson(k, n, self.conf)))
        passes, seen = self._partial.pop(key, (0, 0))
        case = self._case(scales)
        while seen < n:
            stop = n if decide is None else min(n, seen + self._step(n, seen, passes, decide))
            passes += int(np.count_nonzero(eng.pass_flags(case, seen, stop)))
            self.samples_run += stop - seen
            seen = stop
            if decide is not None and seen < n and (n - (seen - passes)) / n < decide:
                self._partial[key] = (passes, seen)
                lo, hi = wilson(passes, seen, self.conf)
                return self._store(key, Point(f_mean, passes, seen, lo, hi, seen=seen))
        return self._store(key, Point(f_mean, passes, n, *wilson(passes, n, self.conf)))

    @staticmethod
    def _step(n: int, seen: int, passes: int, decide: float) -> int:
        """Samples to run before the next check: :data:`PREFIX` first, then as many as the
        failure rate seen so far needs to exceed n (1 - Y) failures (whole draw blocks; all
        the rest when that rate cannot get there), so an evaluation takes two or three kernel
        calls rather than one per prefix."""
        if seen == 0:
            return PREFIX
        fails = seen - passes
        need = n * (1.0 - decide) - fails  # more failures before the yield is surely below Y
        if fails == 0:
            return n - seen
        more = 1.1 * need / fails * seen  # 10 % beyond the expected count: one call, usually
        if more >= n - seen:
            return n - seen
        return max(PREFIX, -(-int(more) // BLOCK) * BLOCK)

    def _case(self, scales):
        return self.eng.case(self.cand, tolerances=self.tol, scale=dict(scales))

    def _store(self, key, point: Point) -> Point:
        self.cache[key] = point
        return point


def _largest_passing(
    y, target: float, f_max: float, start: float = 1.0, rtol: float = RTOL, seen: dict | None = None
):
    """The largest scale f in [0, f_max] with y(f) >= target, on the monotone envelope.

    ``y(f, decide)`` returns a :class:`Point` (exact, or decided early against ``decide``).
    Returns (f, point at f, f_fail or None); f is None when even f = 0 fails.  Bracketing by
    factors of 2 from ``start``, then bisection in log f.
    """
    seen = {} if seen is None else seen

    def ev(f):
        if f not in seen:
            seen[f] = y(f, target)
        return seen[f]

    if ev(0.0).yield_ < target:
        return None, seen[0.0], 0.0
    if ev(f_max).yield_ >= target:
        return f_max, seen[f_max], None
    f = min(max(start, 1e-6 * f_max), f_max)
    lo, hi = 0.0, f_max
    if ev(f).yield_ >= target:
        lo = f
        while lo < f_max:
            f = min(2.0 * lo, f_max)
            if ev(f).yield_ >= target:
                lo = f
            else:
                hi = f
                break
    else:
        hi = f
        while True:
            f = hi / 2.0
            if f < 1e-4 * f_max:
                break
            if ev(f).yield_ >= target:
                lo = f
                break
            hi = f
    halve = False
    while hi - lo > rtol * max(lo, 1e-12) and (lo > 0 or hi > 1e-4 * f_max):
        span = math.log(hi / lo) if lo > 0 else math.inf
        if lo == 0:
            mid = hi / 2.0
        elif halve:
            mid = math.sqrt(lo * hi)
        else:
            mid = _guess(lo, hi, seen[lo].yield_, seen[hi].yield_, target, rtol)
        if ev(mid).yield_ >= target:
            lo = mid
        else:
            hi = mid
        # a step that did not halve the bracket (in log f) is followed by a plain bisection
        halve = not halve and lo > 0 and math.log(hi / lo) > 0.5 * span
        if lo == 0 and hi < 1e-4 * f_max:
            break
    return lo, ev(lo), hi


def _guess(lo: float, hi: float, y_lo: float, y_hi: float, target: float, rtol: float) -> float:
    """The next scale inside the bracket: the yield interpolated linearly in log f, kept at least
    one resolution step from either end so that a good guess closes the bracket next time.

    A near-root guess that passes is followed by one that lies a resolution step above it (and
    fails), so a search whose interpolation is good needs about two evaluations per bracket
    instead of the seven of bisection from a factor-2 bracket to 1 % (the safeguarded
    interpolation of Dekker and Brent: R. P. Brent, Algorithms for Minimization without
    Derivatives, Prentice-Hall (1973), ch. 4).
    """
    step = 1.0 + 0.999 * rtol
    a, b = lo * step, hi / step
    if a >= b:
        return math.sqrt(lo * hi)
    t = (y_lo - target) / (y_lo - y_hi) if y_lo > y_hi else 0.5
    g = lo * (hi / lo) ** min(max(t, 0.0), 1.0)
    return min(max(g, a), b)


def reach_offset(dist: Distribution) -> float:
    """How far the values reach from the nominal: 6 σ, the half width or the half range."""
    if dist.kind == "normal":
        return 6.0 * dist.sigma
    if dist.kind == "uniform":
        return dist.half_width
    return 0.5 * (dist.high - dist.low)


def physical_bound(key: str, cand: Candidate) -> float:
    """The largest sensible reach of a tolerance (angles 45°, tilt 88°, retardance 0.5 wave,
    thickness half the thinnest layer, temperature ±100 °C). [key's unit]"""
    key, e = split_key(key)
    if e is not None and cand.elements is not None:
        cand = cand.elements[e]  # a train element's tolerance: bounded by that element
    if key in ANGLE_BOUND:
        return ANGLE_BOUND[key]
    if key == "tilt_deg":
        return TILT_BOUND
    if key == "retardance_waves":
        return RETARDANCE_BOUND
    if key == "thickness_um":
        return 0.5 * min(la.thickness_um for la in cand.plate.layers)
    return TEMPERATURE_BOUND


def _scale_bound(key: str, dist: Distribution, cand: Candidate) -> float:
    return physical_bound(key, cand) / reach_offset(dist)


def _width_range(points: Mapping[float, Point], f_ans: float, f_fail: float | None, exact=None):
    """Scales whose yields reach the ends of the Wilson interval at the answer.

    The yield near the answer is taken as linear in the scale: a least-squares line through
    the evaluated points within a factor 1.3 of the bracket [answer, first failure]; the range
    is where that line meets the interval's ends.  ``exact(f)`` evaluates a point in full: it
    finishes the points in the window that were decided early, and, when the search left no
    point 10-30 % below or above the answer (an interpolating search closes in tightly), adds
    one 20 % away on that side, so that the slope is not taken over a 1 % step where a few
    samples decide it.
    """
    p = points[f_ans]
    hi = f_fail if f_fail is not None else f_ans
    if exact is not None:
        f_top = max(points)
        if not any(f_ans / 1.3 <= f <= f_ans / 1.1 for f in points):
            points[f_ans / 1.2] = exact(f_ans / 1.2)
        if f_ans * 1.2 <= f_top and not any(f_ans * 1.1 <= f <= hi * 1.3 for f in points):
            points[f_ans * 1.2] = exact(f_ans * 1.2)
    near = [f for f in points if f_ans / 1.3 <= f <= hi * 1.3]
    if exact is not None:
        for f in near:
            if not points[f].exact:
                points[f] = exact(f)
    sel = [(f, points[f].yield_) for f in near]
    if len(sel) < 2:
        return f_ans, f_ans
    f, yv = np.array(sel).T
    slope = np.polyfit(f, yv, 1)[0] if np.ptp(f) > 0 else 0.0
    if not slope < 0:
        return f_ans, f_ans
    lo = max(0.0, f_ans + (p.high - p.yield_) / slope)
    up = f_ans + (p.low - p.yield_) / slope
    return min(lo, f_ans), max(up, f_ans)


# ----------------------------------------------------------------------------- the three answers


def allocate_alone(yc: _Yields, key: str, target: float) -> Alone:
    """The loosest width of ``key`` with the others as given."""
    dist = yc.tol[key]
    w0 = dist.width
    f_max = _scale_bound(key, dist, yc.cand)

    def y(f, decide=None):
        return yc.at({key: f}, decide)

    seen: dict = {}
    f, pt, f_fail = _largest_passing(y, target, f_max, seen=seen)

    def curve():
        # (width, yield) of the points evaluated; a point decided early shows its prefix's yield
        return tuple(sorted((s * w0, p.yield_) for s, p in seen.items()))

    if f is None:
        pt = seen[0.0] = y(0.0)
        why = "the others sink it"
        nominal = yc.eng.study.environment.temperature_c if key == "temperature_c" else 0.0
        if dist.kind == "range" and 0.5 * (dist.low + dist.high) != nominal:
            # scaled about an off-nominal centre, the yield need not fall with the width
            why = (
                f"at zero width every sample sits at the range's centre "
                f"{0.5 * (dist.low + dist.high):g}, not the nominal {nominal:g}; move the range "
                "(a wider one may pass more: the yield is not monotone in its width)"
            )
        return Alone(
            key,
            dist.form,
            None,
            None,
            None,
            None,
            reason=f"even zero width gives yield {pt.yield_:.4f} < {target:g}: {why}",
            curve=curve(),
        )
    if f == f_max:
        return Alone(
            key,
            dist.form,
            None,
            None,
            None,
            None,
            reason=f"no width up to the physical bound {f_max * w0:.6g} fails",
            bound=f_max * w0,
            curve=curve(),
        )
    f_lo, f_hi = _width_range(seen, f, f_fail, y)
    return Alone(
        key, dist.form, f * w0, pt.yield_, pt.low, pt.high, f_lo * w0, f_hi * w0, curve=curve()
    )


def allocate_balanced(yc: _Yields, vary: Sequence[str], target: float) -> Balanced:
    """One common scale factor on every varied width that brings the yield to the target."""
    f_max = min(_scale_bound(k, yc.tol[k], yc.cand) for k in vary)

    def y(f, decide=None):
        return yc.at(dict.fromkeys(vary, f), decide)

    seen: dict = {}
    f, pt, f_fail = _largest_passing(y, target, f_max, seen=seen)
    if f is None:
        raise _unreachable(yc, vary, target, y(0.0))
    f_lo, f_hi = (f, f) if f == f_max else _width_range(seen, f, f_fail, y)
    return Balanced(
        f,
        {k: yc.tol[k].width * f for k in vary},
        pt.yield_,
        pt.low,
        pt.high,
        f_lo,
        f_hi,
        at_bound=f == f_max,
    )


def _unreachable(yc: _Yields, vary, target, pt: Point) -> RetolError:
    """Name what blocks the target when every varied width is zero."""
    eng = yc.eng
    nom_case = eng.case(yc.cand, tolerances=yc.tol)
    others = [k for k in nom_case.active if k not in vary]
    blocker, best = "the nominal plate (it misses the goal with no errors at all)", pt.yield_
    if eng.pass_rate(nom_case, active=()) >= 1.0 and others:
        gains = {
            k: eng.pass_rate(nom_case, active=[o for o in others if o != k] + list(nom_case.fixed))
            for k in others
        }
        top = max(gains, key=gains.get)
        best = max(best, gains[top])
        blocker = f"{top} (not varied; add it to --vary)"
    return RetolError(
        f"candidate {yc.cand.name!r}",
        f"target yield {target:g} is unreachable: best yield {best:.4f} with every varied width "
        f"at zero; blocked by {blocker}",
        "lower --target-yield or vary the blocking tolerance",
    )


def allocate_cheapest(
    yc: _Yields, cost: Mapping[str, tuple], vary: Sequence[str], target: float
) -> Cheapest | None:
    """The least-cost combination of available widths with yield >= target (branch and bound).

    Options dominated by a tighter, no dearer one are dropped; each key's loosest useful option
    is found by bisection with every other key at its tightest; then a best-first search in
    cost order from there, skipping without evaluation every combination looser than a known
    failure (yield cannot rise when widths grow) and every one tighter than a known success.
    """
    # a cost table names a tolerance (on a train: every element's width alike) or one element's
    keys = [k for c in cost for k in vary if k == c or (split_key(k)[0] == c and k not in cost)]
    if not keys:
        return None
    opts = {}
    for k in keys:
        w, c = cost[k] if k in cost else cost[split_key(k)[0]]
        pairs = sorted(zip(w, c, strict=True), key=lambda p: -p[0])  # loosest first
        kept = []
        for wi, ci in reversed(pairs):  # tightest first: keep only if cheaper than all tighter
            if not kept or ci < kept[-1][1]:
                kept.append((wi, ci))
        opts[k] = list(reversed(kept))  # loosest (cheapest) first, cost strictly rising
    m = [len(opts[k]) for k in keys]
    evals = [0]

    def y(idx, decide=target) -> Point:
        scales = {k: opts[k][i][0] / yc.tol[k].width for k, i in zip(keys, idx, strict=True)}
        n0 = yc.evaluations
        p = yc.at(scales, decide)
        evals[0] += yc.evaluations - n0
        return p

    tightest = tuple(x - 1 for x in m)
    if y(tightest).yield_ < target:
        raise RetolError(
            f"[allocation.cost] for candidate {yc.cand.name!r}",
            f"target yield {target:g} is unreachable: the tightest widths give yield "
            f"{y(tightest, None).yield_:.4f}",
            "offer tighter widths or lower --target-yield",
        )
    low = []
    for j in range(len(keys)):
        a, b = 0, m[j] - 1  # b is feasible
        while a < b:
            mid = (a + b) // 2
            idx = list(tightest)
            idx[j] = mid
            if y(tuple(idx)).yield_ >= target:
                b = mid
            else:
                a = mid + 1
        low.append(a)

    def total(idx):
        return sum(opts[k][i][1] for k, i in zip(keys, idx, strict=True))

    start = tuple(low)
    heap = [(total(start), start)]
    pushed = {start}
    fails: list[tuple] = []
    found: list[tuple] = []
    while heap and len(found) <= ALTERNATIVES and evals[0] < MAX_EVALUATIONS:
        c, idx = heapq.heappop(heap)
        if any(all(a >= b for a, b in zip(idx, f, strict=True)) for f, _ in found):
            continue  # tighter than a success: dearer and no better an answer
        if any(all(a <= b for a, b in zip(idx, f, strict=True)) for f in fails):
            ok = False
        else:
            p = y(idx)
            ok = p.yield_ >= target
        if ok:
            found.append((idx, p))
            continue
        fails.append(idx)
        for j in range(len(keys)):
            if idx[j] + 1 < m[j]:
                nxt = idx[:j] + (idx[j] + 1,) + idx[j + 1 :]
                if nxt not in pushed:
                    pushed.add(nxt)
                    heapq.heappush(heap, (total(nxt), nxt))
    combos = [
        Combination(
            {k: opts[k][i][0] for k, i in zip(keys, idx, strict=True)},
            total(idx),
            p.yield_,
            p.low,
            p.high,
        )
        for idx, p in found
    ]
    return Cheapest(combos[0], tuple(combos[1:]), evals[0], int(np.prod(m)))


# ----------------------------------------------------------------------------- the whole study


def check_vary(study: Study, vary: Sequence[str] | None) -> tuple[str, ...]:
    """The tolerance keys to vary: those named (each given and non-zero) or all given."""
    given = dict(study.tolerances)
    for c in study.candidates:
        given.update(c.tolerances)
        for e, el in enumerate(c.elements or ()):
            # a train element's own tolerance: allocated under its element name
            given.update({element_key(k, e): d for k, d in el.tolerances.items()})
    if vary is None:
        out = tuple(k for k, d in given.items() if not d.is_zero)
        if not out:
            raise RetolError("--vary", "the spec gives no non-zero tolerance", "add [tolerances]")
        return out
    out = []
    for k in vary:
        base, e = split_key(k)
        if k not in given and e is not None and base in given:
            given[k] = given[base]  # one element of a tolerance every element has
        if k not in given:
            raise RetolError(
                "--vary",
                f"{k!r} is not a tolerance this spec gives",
                f"choose from {', '.join(given)}",
            )
        if given[k].is_zero:
            raise RetolError("--vary", f"{k!r} is zero in the spec", "give it a width first")
        if k not in out:
            out.append(k)
    return tuple(out)


def check_target(target) -> float:
    if isinstance(target, bool) or not isinstance(target, int | float):
        raise RetolError("--target-yield", f"must be a number, got {target!r}", "e.g. 0.99")
    t = float(target)
    if not (math.isfinite(t) and 0.0 < t < 1.0):
        raise RetolError("--target-yield", f"must be in (0, 1), got {target!r}", "e.g. 0.99")
    return t


def allocate(
    study: Study,
    target_yield: float | None = None,
    vary: Sequence[str] | None = None,
    candidates: Sequence[str] | None = None,
    samples: int | None = None,
    seed: int | None = None,
    client=None,
) -> Allocation:
    """Allocate the tolerances of a study to a yield target (alone, balanced, cheapest).

    Parameters
    ----------
    study : Study
        From :func:`tolerance.load_spec`.
    target_yield : float, optional
        In (0, 1); default ``[allocation] target_yield``, else 0.99.
    vary : sequence of str, optional
        Tolerance keys to vary (default: every non-zero one the spec gives).
    candidates : sequence of str, optional
        Candidate names (default: all).
    samples, seed : int, optional
        Override ``[run]``.
    client : distributed.Client, optional
        Evaluate the yields as dask tasks (:mod:`tolerance.cluster`); same answers.

    Returns
    -------
    Allocation
        One :class:`CandidateAllocation` per candidate.  Raises :class:`RetolError` on bad
        input or an unreachable target.
    """
    alloc = study.allocation
    if target_yield is None:
        target_yield = (
            alloc.target_yield if alloc and alloc.target_yield is not None else DEFAULT_TARGET
        )
    target = check_target(target_yield)
    keys = check_vary(study, vary)
    cands = study.candidates if not candidates else [study.candidate(n) for n in candidates]
    eng = Engine(study, samples=samples, seed=seed, client=client)
    cost = dict(alloc.cost) if alloc else {}
    out = []
    for cand in cands:
        tol = dict(study.tolerances_for(cand))
        mine = _varied(keys, tol)
        yc = _Yields(eng, cand, tol)
        alone = {k: allocate_alone(yc, k, target) for k in mine}
        bal = allocate_balanced(yc, mine, target)
        cheap = allocate_cheapest(yc, cost, mine, target)
        if cheap is not None:
            allocated = {**tol, **{k: tol[k].with_width(w) for k, w in cheap.best.widths.items()}}
            basis, y = "cheapest", cheap.best.yield_
        else:
            allocated = {**tol, **{k: tol[k].with_width(w) for k, w in bal.widths.items()}}
            basis, y = "balanced", bal.yield_
        out.append(
            CandidateAllocation(
                cand.name,
                alone,
                bal,
                cheap,
                tol,
                allocated,
                basis,
                y,
                yc.evaluations,
                yc.samples_run,
            )
        )
    return Allocation(target, eng.samples, eng.seed, keys, tuple(out))


def _varied(keys, tol) -> tuple[str, ...]:
    """The candidate's tolerances among ``keys``: on a train a tolerance named without an
    element is varied on each element separately (``clocking_deg[element 0]``, ...)."""
    out: list[str] = []
    for k in keys:
        hits = [k] if k in tol else [t for t in tol if split_key(t)[0] == k]
        out += [t for t in sorted(hits, key=order_key) if not tol[t].is_zero and t not in out]
    return tuple(out)


# ----------------------------------------------------------------------------- JSON


def _combo(c: Combination) -> dict:
    return {
        "widths": dict(c.widths),
        "cost": c.cost,
        "yield": c.yield_,
        "yield_low": c.yield_low,
        "yield_high": c.yield_high,
    }


def to_json(result: Allocation, study: Study) -> dict:
    """The JSON contract of ``retol allocate --json`` (extra keys beside the issue's)."""
    cands = []
    for ca in result.candidates:
        alone = {}
        reasons = {}
        for k, a in ca.alone.items():
            if a.width is None:
                alone[k] = None
                reasons[k] = {"reason": a.reason, "bound": a.bound}
            else:
                alone[k] = {
                    "width": a.width,
                    "form": a.form,
                    "yield": a.yield_,
                    "yield_low": a.yield_low,
                    "yield_high": a.yield_high,
                    "width_low": a.width_low,
                    "width_high": a.width_high,
                }
        b = ca.balanced
        cheap = None
        if ca.cheapest is not None:
            cheap = _combo(ca.cheapest.best)
            cheap["alternatives"] = [_combo(c) for c in ca.cheapest.alternatives]
            cheap["evaluations"] = ca.cheapest.evaluations
            cheap["combinations"] = ca.cheapest.combinations
        cands.append(
            {
                "name": ca.name,
                "alone": alone,
                "alone_reasons": reasons,
                "balanced": {
                    "scale": b.scale,
                    "widths": dict(b.widths),
                    "yield": b.yield_,
                    "yield_low": b.yield_low,
                    "yield_high": b.yield_high,
                    "scale_low": b.scale_low,
                    "scale_high": b.scale_high,
                    "at_bound": b.at_bound,
                },
                "cheapest": cheap,
            }
        )
    return {
        "target_yield": result.target_yield,
        "samples": result.samples,
        "seed": result.seed,
        "vary": list(result.vary),
        "candidates": cands,
    }


# ----------------------------------------------------------------------------- the drawing table


def plus_minus(dist: Distribution | None) -> float:
    """The ± a drawing shows: k σ at the spec's coverage (3 σ by default for normal forms),
    the half width of a uniform, half a range. [key's unit]"""
    if dist is None or dist.is_zero:
        return 0.0
    if dist.kind == "normal":
        return dist.sigma * (dist.coverage if dist.coverage is not None else DEFAULT_COVERAGE)
    if dist.kind == "uniform":
        return dist.half_width
    return 0.5 * (dist.high - dist.low)


def drawing_rows(study: Study, cand: Candidate, tol: Mapping[str, Distribution], yield_: float):
    """The drawing table's rows of one candidate: one for a plate, one per element of a train.

    A train element's row names the element (0 the first the light meets), its construction
    and material, its layers, its nominal fast-axis angle in its mount and its own tolerances
    (``clocking_deg[element e]`` ...); the train-wide ones (tilt, temperature, input azimuth)
    and the train's yield repeat on every row.
    """
    if cand.elements is None:
        return [drawing_row(study, cand, tol, yield_)]
    rows = []
    shared = {k: v for k, v in tol.items() if split_key(k)[0] not in PER_ELEMENT}
    for e, el in enumerate(cand.elements):
        own = {k: tol[element_key(k, e)] for k in PER_ELEMENT if element_key(k, e) in tol}
        if el.is_polarizer:
            rows.append(_polarizer_row(study, cand.name, e, el, {**shared, **own}, yield_))
            continue
        at = el.retardance_at_nm if el.retardance_at_nm is not None else el.plate.design_nm
        head = {
            "candidate": cand.name,
            "element": e,
            "construction": el.construction,
            "material": el.material if el.material is not None else "",
        }
        row = drawing_row(study, el, {**shared, **own}, yield_, at_nm=float(at))
        del row["candidate"]
        rows.append({**head, **row})
    return rows


def drawing_row(
    study: Study,
    cand: Candidate,
    tol: Mapping[str, Distribution],
    yield_: float,
    at_nm: float | None = None,
):
    """One row of the drawing table (numeric columns, units in the names).

    The plate retardance ± combines, in quadrature (GUM 5.1.2), the ``retardance_waves`` ± and
    what each layer's independent thickness ± does to it: ∂R/∂tᵢ = sᵢ Rᵢ / tᵢ.  ``at_nm``: the
    test wavelength (default: the study's for this candidate). [nm]
    """
    plate = cand.plate
    at = study.retardance_at(cand) if at_nm is None else at_nm
    row: dict = {"candidate": cand.name}
    d_t = plus_minus(tol.get("thickness_um"))
    for j, la in enumerate(plate.layers):
        row[f"layer{j + 1}_thickness_um"] = la.thickness_um
        row[f"layer{j + 1}_thickness_tol_um"] = d_t
    r = nominal_retardance_waves(plate, at)
    per_layer = [
        s * nominal_retardance_waves(_only(plate, j), at) / la.thickness_um
        for j, (la, s) in enumerate(zip(plate.layers, plate.signs(), strict=True))
    ]
    d_r = math.hypot(plus_minus(tol.get("retardance_waves")), d_t * math.hypot(*per_layer))
    row["retardance_waves"] = r
    row["retardance_tol_waves"] = d_r
    row["retardance_at_nm"] = at
    row["fast_axis_deg"] = plate.axis_deg
    row["clocking_tol_deg"] = plus_minus(tol.get("clocking_deg"))
    row["crossing_tol_deg"] = (
        plus_minus(tol.get("crossing_deg")) if len(plate.layers) > 1 else float("nan")
    )
    row["tilt_tol_deg"] = plus_minus(tol.get("tilt_deg"))
    t = tol.get("temperature_c")
    t0 = study.environment.temperature_c
    if t is not None and t.kind == "range":
        row["temperature_min_c"], row["temperature_max_c"] = t.low, t.high
    else:
        row["temperature_min_c"] = t0 - plus_minus(t)
        row["temperature_max_c"] = t0 + plus_minus(t)
    row["input_azimuth_tol_deg"] = plus_minus(tol.get("input_azimuth_deg"))
    if "cut_deg" in tol:  # the optic axis within ± this of the face (each plate)
        row["cut_tol_deg"] = plus_minus(tol.get("cut_deg"))
    row["yield"] = yield_
    return row


def _polarizer_row(study: Study, name: str, e: int, el: Candidate, tol, yield_: float) -> dict:
    """A polarizer element's drawing row: its extinction ratio, transmission axis and the ±
    of its azimuth in its mount (the train-wide ones and the yield as on the other rows)."""
    row = {
        "candidate": name,
        "element": e,
        "construction": "polarizer",
        "material": "",
        "extinction_db": el.extinction_db,
        "transmission_axis_deg": el.axis_deg,
        "clocking_tol_deg": plus_minus(tol.get("clocking_deg")),
        "tilt_tol_deg": plus_minus(tol.get("tilt_deg")),
    }
    t = tol.get("temperature_c")
    t0 = study.environment.temperature_c
    if t is not None and t.kind == "range":
        row["temperature_min_c"], row["temperature_max_c"] = t.low, t.high
    else:
        row["temperature_min_c"] = t0 - plus_minus(t)
        row["temperature_max_c"] = t0 + plus_minus(t)
    row["input_azimuth_tol_deg"] = plus_minus(tol.get("input_azimuth_deg"))
    row["yield"] = yield_
    return row


def _only(plate, j):
    import dataclasses

    la = plate.layers[j]
    return dataclasses.replace(plate, layers=(la,), axis_deg=la.axis_deg)


def drawing_rows_for_allocation(result: Allocation, study: Study) -> list[dict]:
    return [
        {**row, "basis": ca.basis}
        for ca in result.candidates
        for row in drawing_rows(study, study.candidate(ca.name), ca.allocated, ca.yield_)
    ]


def drawing_rows_for_grid(grid) -> list[dict]:
    """The drawing table of a ``retol run`` grid: the tolerances as given and their yields."""
    import json

    study = Study.from_dict(json.loads(grid.attrs["spec"]))
    rows = []
    for c in study.candidates:
        y = float(grid["yield"].sel(candidate=c.name))
        rows += [
            {**row, "basis": "as given"}
            for row in drawing_rows(study, c, study.tolerances_for(c), y)
        ]
    return rows


def write_drawing_csv(rows: list[dict], path) -> None:
    """Write the drawing table; columns are the union of the rows' keys, blanks for NaN."""
    import csv

    cols: list[str] = []
    for r in sorted(rows, key=lambda r: r.get("construction") == "polarizer"):
        cols += [k for k in r if k not in cols]  # a plate's columns first
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(cols)
        for r in rows:
            out = []
            for k in cols:
                v = r.get(k, float("nan"))
                if isinstance(v, float):
                    out.append("" if not math.isfinite(v) else f"{v:.6g}")
                else:
                    out.append(v)
            w.writerow(out)
