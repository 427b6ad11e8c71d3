"""Goal metrics: how close the output is to the goal state, one registry entry each.

Each entry carries its unit, long name, the goal states it applies to, the range its ``min``
may take and the code the kernel uses (:mod:`tolerance.kernel` reads the codes from here).
"""

from __future__ import annotations

import math

from .registry import Registry

METRICS = Registry("metric")
METRICS.add(
    "axial_ratio",
    "axial ratio b/a of the output, signed negative for the wrong hand",
    unit="1",
    long_name="axial ratio b/a of the output, signed negative for the wrong hand",
    states=("circular",),
    range=(0.0, 1.0),
    code=0,
)
METRICS.add(
    "fidelity",
    "fidelity (1 + s·g)/2 of the output to the goal state",
    unit="1",
    long_name="fidelity (1 + s·g)/2 of the output to the goal state",
    states=("circular", "linear"),
    range=(0.0, 1.0),
    code=1,
)
METRICS.add(
    "extinction_db",
    "extinction ratio through an analyzer that passes the goal state",
    unit="dB",
    long_name="extinction ratio through an analyzer that passes the goal state",
    states=("circular", "linear"),
    range=(-math.inf, math.inf),
    code=2,
)
#: metric name -> kernel code
CODES = {name: e.extra["code"] for name, e in METRICS.items()}
