"""Goal metrics: how close the output is to the goal state, one registry entry each.

Each entry carries its unit, long name, the goal states it applies to, the range its limit
may take, the code the kernel uses (:mod:`tolerance.kernel` reads the codes from here) and its
sense: "min" when a larger value is better (the goal gives ``min``), "max" when a smaller value
is better (the goal gives ``max``; the worst over the band is then the largest value).
"""

from __future__ import annotations

import math

from .registry import Registry

METRICS = Registry("metric")
#: Every goal state a goal may name.
ALL_STATES = ("circular", "linear", "elliptical", "stokes")
METRICS.add(
    "axial_ratio",
    "axial ratio b/a of the output, signed negative for the wrong hand",
    unit="1",
    long_name="axial ratio b/a of the output, signed negative for the wrong hand",
    states=("circular",),
    range=(0.0, 1.0),
    code=0,
    sense="min",
)
METRICS.add(
    "fidelity",
    "fidelity (1 + s·g)/2 of the output to the goal state",
    unit="1",
    long_name="fidelity (1 + s·g)/2 of the output to the goal state",
    states=("circular", "linear", "elliptical", "stokes"),
    range=(0.0, 1.0),
    code=1,
    sense="min",
)
METRICS.add(
    "extinction_db",
    "extinction ratio through an analyzer that passes the goal state",
    unit="dB",
    long_name="extinction ratio through an analyzer that passes the goal state",
    states=("circular", "linear", "elliptical", "stokes"),
    range=(-math.inf, math.inf),
    code=2,
    sense="min",
)
METRICS.add(
    "sphere_angle_deg",
    "angle on the Poincaré sphere between the output and the goal state (smaller is better)",
    unit="deg",
    long_name="angle on the Poincaré sphere between the output and the goal state",
    states=ALL_STATES,
    range=(0.0, 180.0),
    code=3,
    sense="max",
)
METRICS.add(
    "azimuth_error_deg",
    "|major-axis azimuth of the output - that of the goal|, in [0, 90] (smaller is better)",
    unit="deg",
    long_name="absolute major-axis azimuth error of the output against the goal",
    states=ALL_STATES,
    range=(0.0, 90.0),
    code=4,
    sense="max",
)
METRICS.add(
    "ellipticity_error_deg",
    "|ellipticity angle of the output - that of the goal|, handedness signed (smaller is better)",
    unit="deg",
    long_name="absolute ellipticity-angle error of the output against the goal",
    states=ALL_STATES,
    range=(0.0, 90.0),
    code=5,
    sense="max",
)
#: metric name -> kernel code
CODES = {name: e.extra["code"] for name, e in METRICS.items()}
#: metric name -> "min" (larger is better) or "max" (smaller is better)
SENSE = {name: e.extra["sense"] for name, e in METRICS.items()}
