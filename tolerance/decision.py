"""The plate decision: rank candidates for the spec's source and tolerances, with a reason.

Rule (documented in README): candidates whose yield confidence intervals overlap the best
candidate's are statistically tied on yield; among tied candidates the one whose error-free
output, averaged over the source spectrum, is closest to the goal *counting the unpolarized part*
(spectral fidelity (1 + s·g)/2) ranks first, then the larger acceptance half-angle, then the
smaller temperature coefficient.  The rest follow by yield.
"""

from __future__ import annotations

import numpy as np


def rank(names, yields, lows, highs, fidelity, acceptance, temp_coeff):
    """Ranks (1 = best) and one-line reasons; all arguments are sequences over candidates."""
    n = len(names)
    order_y = sorted(range(n), key=lambda i: (-yields[i], -fidelity[i]))
    best = order_y[0]
    tied = [i for i in range(n) if highs[i] >= lows[best]]
    rest = [i for i in order_y if i not in tied]
    tied.sort(key=lambda i: (-round(fidelity[i], 6), -acceptance[i], abs(temp_coeff[i])))
    order = tied + rest
    ranks = [0] * n
    reasons = [""] * n
    for r, i in enumerate(order, start=1):
        ranks[i] = r
        y = f"yield {100 * yields[i]:.1f}% [{100 * lows[i]:.1f}, {100 * highs[i]:.1f}]"
        extra = (f"spectral fidelity {fidelity[i]:.4f}, acceptance ±{acceptance[i]:.2g}°, "
                 f"{temp_coeff[i]:+.3g}°/K")
        if r == 1:
            if len(tied) > 1:
                others = ", ".join(names[j] for j in tied if j != i)
                reasons[i] = (f"pick: {y}, tied within the interval with {others}; ranked first on "
                              f"{extra}")
            else:
                reasons[i] = f"pick: highest {y}; {extra}"
        elif i in tied:
            reasons[i] = f"tied on {y}, behind on {extra}"
        else:
            lead = names[order[0]]
            reasons[i] = f"{y}, below {lead}'s interval; {extra}"
    return np.array(ranks), np.array(reasons, dtype=object)
