"""The plate decision: rank candidates for the spec's source and tolerances, with a reason.

Rule (documented in README): candidates whose yield confidence intervals overlap the best
candidate's are statistically tied on yield; among tied candidates the one whose error-free
output, averaged over the source spectrum, is closest to the goal *counting the unpolarized part*
(spectral fidelity (1 + s·g)/2, compared in steps of 0.001) ranks first, then the larger
acceptance half-angle, then the smaller temperature coefficient.  The yield used is the goal's,
except that an axial-ratio goal over the spectrum is judged by spectral fidelity (so that
unpolarized light counts against a plate).  The rest follow by yield.

A candidate *meets the goal* when its yield reaches the goal's required yield (``[goal] yield``);
with no required yield, when its yield is above zero.  The recommendation is the best-ranked
candidate that meets the goal, or none.
"""

from __future__ import annotations

import math

import numpy as np

#: Spectral fidelities closer than this rank as equal. [1]
FIDELITY_STEP = 1e-3
#: Acceptance half-angles closer than this rank as equal (they are printed to 0.01°). [deg]
ACCEPTANCE_STEP = 0.01
#: Temperature coefficients closer than this rank as equal (printed to 1e-4 °/K). [deg/K]
TEMPCO_STEP = 1e-4


def pct_digits(y: float, lo: float, hi: float, most: int = 6) -> int:
    """Decimals of a percentage needed for the interval bounds to differ from the estimate.

    At least one decimal; more until a bound that differs from the estimate also prints
    differently (0 of 10 000 passing: 0.00 % with upper bound 0.04 %, not 0.0–0.0).

    Examples
    --------
    >>> pct_digits(0.0, 0.0, 0.000384)
    2
    >>> pct_digits(0.5, 0.49, 0.51)
    1
    """
    vals = [100.0 * v for v in (y, lo, hi)]
    for d in range(1, most + 1):
        ys, ls, hs = (f"{v:.{d}f}" for v in vals)
        if (ls != ys or lo == y) and (hs != ys or hi == y):
            return d
    return most


def pct_interval(y: float, lo: float, hi: float) -> tuple[str, str, str]:
    """A yield and its interval as percent strings with :func:`pct_digits` decimals (no sign)."""
    if not all(math.isfinite(v) for v in (y, lo, hi)):
        return tuple("—" if not math.isfinite(v) else f"{100 * v:.1f}" for v in (y, lo, hi))
    d = pct_digits(y, lo, hi)
    return tuple(f"{100.0 * v:.{d}f}" for v in (y, lo, hi))


def yield_text(y: float, lo: float, hi: float) -> str:
    """E.g. ``"0.00 % (0.00–0.04)"``: the one wording of a yield with its interval."""
    ys, ls, hs = pct_interval(y, lo, hi)
    return f"{ys} % ({ls}–{hs})"


def goal_rule(required: float | None) -> str:
    """The rule by which a candidate meets the goal, in words."""
    if required is None:
        return (
            "a candidate meets the goal when its yield is above zero (the spec sets no "
            "required yield; add [goal] yield = 0.95 to require 95 %)"
        )
    return f"a candidate meets the goal when its yield reaches {100 * required:g} %"


def meets_goal(yields, required: float | None) -> np.ndarray:
    """Boolean per candidate: yield ≥ required (or > 0 when no yield is required)."""
    y = np.asarray(yields, dtype=float)
    if required is None:
        return y > 0.0
    # a yield is k/n; compare with a hair of slack so 0.95 = 19/20 counts as reaching 0.95
    return y >= required - 1e-12


def recommended(names, ranks, meets) -> str | None:
    """The best-ranked candidate that meets the goal, or None."""
    ok = [(int(r), str(n)) for n, r, m in zip(names, ranks, meets, strict=True) if m]
    return min(ok)[1] if ok else None


def _criteria(i, fidelity, acceptance, temp_coeff):
    """Tie-break keys of candidate i (smaller is better) with their printed values."""
    return [
        (
            "spectral fidelity",
            -math.floor(fidelity[i] / FIDELITY_STEP + 1e-9),
            f"{math.floor(fidelity[i] / FIDELITY_STEP + 1e-9) * FIDELITY_STEP:.3f}",
        ),
        (
            "acceptance half-angle",
            -round(acceptance[i] / ACCEPTANCE_STEP),
            f"±{acceptance[i]:.2f}°",
        ),
        (
            "temperature coefficient",
            round(abs(temp_coeff[i]) / TEMPCO_STEP),
            f"{temp_coeff[i]:+.4f}°/K",
        ),
    ]


def _versus(i, j, fidelity, acceptance, temp_coeff) -> str:
    """How candidate i compares with j: the tied criteria, then the one that decided."""
    a = _criteria(i, fidelity, acceptance, temp_coeff)
    b = _criteria(j, fidelity, acceptance, temp_coeff)
    tied = []
    for (name, ka, va), (_, kb, vb) in zip(a, b, strict=True):
        if ka != kb:
            word = "ahead" if ka < kb else "behind"
            lead = "; ".join(f"{t} tied" for t in tied) + "; " if tied else ""
            return f"{lead}{word} on {name} ({va} vs {vb})"
        tied.append(f"{name} {va}")
    return "tied on every criterion (" + "; ".join(tied) + "); kept in spec order"


def rank(names, yields, lows, highs, fidelity, acceptance, temp_coeff):
    """Ranks (1 = best) and one-line reasons; all arguments are sequences over candidates.

    The reason names the criterion that decided between a candidate and its neighbour, and
    prints values that count as equal (within the comparison steps) as tied.
    """
    n = len(names)
    order_y = sorted(range(n), key=lambda i: (-yields[i], -fidelity[i]))
    best = order_y[0]
    tied = [i for i in range(n) if highs[i] >= lows[best]]
    rest = [i for i in order_y if i not in tied]
    # fidelities within FIDELITY_STEP of each other count as equal, so that a difference of
    # 1e-5 in polarization does not outweigh a wider field of view or a steadier temperature
    tied.sort(key=lambda i: [k for _, k, _ in _criteria(i, fidelity, acceptance, temp_coeff)])
    order = tied + rest
    ranks = [0] * n
    reasons = [""] * n
    for r, i in enumerate(order, start=1):
        ranks[i] = r
        y = "yield " + yield_text(yields[i], lows[i], highs[i])
        if r == 1:
            if len(tied) > 1:
                others = ", ".join(names[j] for j in tied if j != i)
                nxt = order[1]
                reasons[i] = (
                    f"pick: {y}, tied within the interval with {others}; "
                    f"first on the tie-break against {names[nxt]}: "
                    + _versus(i, nxt, fidelity, acceptance, temp_coeff)
                )
            else:
                reasons[i] = f"pick: highest {y}, above every other candidate's interval"
        elif i in tied:
            prev = order[r - 2]
            reasons[i] = f"tied on yield ({y}); behind {names[prev]} on the tie-break: " + _versus(
                i, prev, fidelity, acceptance, temp_coeff
            )
        else:
            lead = names[order[0]]
            reasons[i] = f"{y}, below {lead}'s interval"
    return np.array(ranks), np.array(reasons, dtype=object)


def separation_warning(names, yields, lows, highs, ranks, samples: int, confidence=0.95):
    """A warning when the top two candidates are tied on yield only for want of samples.

    Returns None when the top two are apart, or their yields are equal (more samples would not
    separate them).  Otherwise a sentence with a rough sample count that would separate them:
    n ≈ (2 z)² p (1 − p) / Δ², two intervals of half-width z √(p(1 − p)/n) that just touch
    (normal approximation, common practice; common random numbers make the real need smaller).
    """
    from scipy.stats import norm

    order = np.argsort(np.asarray(ranks))
    if len(order) < 2:
        return None
    a, b = int(order[0]), int(order[1])
    if not highs[b] >= lows[a] or not lows[b] <= highs[a]:
        return None
    gap = abs(yields[a] - yields[b])
    if gap <= 0:
        return None
    p = 0.5 * (yields[a] + yields[b])
    z = float(norm.ppf(0.5 + confidence / 2))
    need = max(1, (2 * z) ** 2 * p * (1 - p) / gap**2)
    need = int(10 ** math.ceil(math.log10(need)))
    return (
        f"{samples} samples cannot separate {names[a]} and {names[b]} on yield "
        f"({100 * yields[a]:.2f} % vs {100 * yields[b]:.2f} %, overlapping "
        f"{confidence:.0%} intervals); the order between them rests on the tie-break. "
        f"About {need:,} samples would separate them (--samples)."
    )


def tolerance_applies(short: str, n_layers: int, goal_over: str, has_faces: bool = True) -> bool:
    """Whether a tolerance can act on a candidate at all.

    The crossing between plates needs two or more layers; the laser's centre drift moves the
    line within the band, which a goal judged at every wavelength of the band ("band") does not
    see; the faces' reflectance needs reflecting faces (not ``faces = "ideal"``).  Such
    tolerances are shown as "not applicable", not as an effect of +0.0.
    """
    from .tolerances import split_key

    short = split_key(short)[0]  # a train element's tolerance: the same rule
    if short in ("crossing", "crossing_deg"):
        return n_layers > 1
    if short == "reflectance":
        return has_faces
    if short == "drift":
        return goal_over == "spectrum"
    return True


def candidate_has_faces(attrs, c: int) -> bool:
    """Whether candidate ``c`` of a results grid has reflecting faces, read from the stored
    spec (``attrs["spec"]``, JSON); False when the grid does not say."""
    import json

    try:
        spec = json.loads(attrs["spec"])
        faces = spec["candidates"][c].get("faces")
    except (KeyError, IndexError, TypeError, ValueError, AttributeError):
        return False
    return faces not in (None, "ideal")
