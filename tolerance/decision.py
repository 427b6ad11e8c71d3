"""The plate decision: rank candidates for the spec's source and tolerances, with a reason.

Rule (documented in README): candidates whose yield confidence intervals overlap the best
candidate's are statistically tied on yield; among tied candidates the one whose error-free
output, averaged over the source spectrum, is closest to the goal *counting the unpolarized part*
(spectral fidelity (1 + s·g)/2, compared in steps of 0.001) ranks first, then the larger
acceptance half-angle, then the smaller temperature coefficient.  The yield used is the goal's,
except that an axial-ratio goal over the spectrum is judged by spectral fidelity (so that
unpolarized light counts against a plate).  The rest follow by yield.
"""

from __future__ import annotations

import numpy as np

#: Spectral fidelities closer than this rank as equal. [1]
FIDELITY_STEP = 1e-3


def rank(names, yields, lows, highs, fidelity, acceptance, temp_coeff):
    """Ranks (1 = best) and one-line reasons; all arguments are sequences over candidates."""
    n = len(names)
    order_y = sorted(range(n), key=lambda i: (-yields[i], -fidelity[i]))
    best = order_y[0]
    tied = [i for i in range(n) if highs[i] >= lows[best]]
    rest = [i for i in order_y if i not in tied]
    # fidelities within FIDELITY_STEP of each other count as equal, so that a difference of
    # 1e-5 in polarization does not outweigh a wider field of view or a steadier temperature
    tied.sort(
        key=lambda i: (
            -np.floor(fidelity[i] / FIDELITY_STEP + 1e-9),
            -acceptance[i],
            abs(temp_coeff[i]),
        )
    )
    order = tied + rest
    ranks = [0] * n
    reasons = [""] * n
    for r, i in enumerate(order, start=1):
        ranks[i] = r
        y = f"yield {100 * yields[i]:.1f}% [{100 * lows[i]:.1f}, {100 * highs[i]:.1f}]"
        extra = (
            f"spectral fidelity {fidelity[i]:.4f}, acceptance ±{acceptance[i]:.2g}°, "
            f"{temp_coeff[i]:+.3g}°/K"
        )
        if r == 1:
            if len(tied) > 1:
                others = ", ".join(names[j] for j in tied if j != i)
                reasons[i] = (
                    f"pick: {y}, tied within the interval with {others}; ranked first on {extra}"
                )
            else:
                reasons[i] = f"pick: highest {y}; {extra}"
        elif i in tied:
            reasons[i] = f"tied on {y}, behind on {extra}"
        else:
            lead = names[order[0]]
            reasons[i] = f"{y}, below {lead}'s interval; {extra}"
    return np.array(ranks), np.array(reasons, dtype=object)
