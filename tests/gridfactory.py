"""Results grids for the report and plot tests, made by the engine itself (small real runs).

The scenario is invented: quarter-wave plates for a 550 nm source (zero-order and multi-order
crystal quartz, and a quartz/MgF2 achromat) turning linear light into circular light, graded by
the extinction ratio through an analyzer that passes the goal state.  Grids come from
``tolerance.run`` on a spec written here, so they always follow the schema the engine really
makes (the schema table in :mod:`tolerance.grid`).
"""

from __future__ import annotations

import functools

import tolerance
from tolerance.spec import loads

_CANDIDATES = [
    ("qwp-zero", 'construction = "zero-order"\nmaterial = "quartz"'),
    ("qwp-multi", 'construction = "multi-order"\nmaterial = "quartz"\norder = 4'),
    (
        "qwp-achro",
        'construction = "achromatic"\nmaterial = "quartz"\npartner = "mgf2"\n'
        'match = ["520nm", "580nm"]',
    ),
]
GOAL_MIN_DB = 25.0


def spec_text(
    n_candidates: int = 3, n_samples: int = 200, broadband: bool = True, over: str = "band"
) -> str:
    """The TOML of the scenario."""
    if broadband:
        head = (
            '[wavelength]\nstart = "510nm"\nstop = "590nm"\nstep = "5nm"\n'
            '[source]\nshape = "gaussian"\ncenter = "550nm"\nfwhm = "30nm"\n'
        )
    else:
        head = (
            '[wavelength]\nstart = "550nm"\nstop = "550nm"\nstep = "1nm"\n'
            '[source]\nshape = "laser"\ncenter = "550nm"\n'
        )
    cands = "".join(
        f'[[candidate]]\nname = "{name}"\n{body}\ndesign = "550nm"\naxis_deg = 45\n'
        for name, body in _CANDIDATES[:n_candidates]
    )
    return (
        'title = "Invented 550 nm scenario for the report tests"\n'
        + head
        + f'[goal]\nstate = "circular"\nmetric = "extinction_db"\nmin = {GOAL_MIN_DB}\n'
        f'over = "{over}"\nhandedness = "right"\n'
        "[environment]\ntemperature_c = 25\ntemperature_range = [0, 50]\ntilt_max_deg = 10\n"
        + cands
        + "[tolerances]\nthickness_um = { sigma = 0.08 }\nclocking_deg = { uniform = 1.0 }\n"
        "tilt_deg = { sigma = 1.0 }\ntemperature_c = { low = 15, high = 35 }\n"
        f"[run]\nsamples = {n_samples}\nseed = 3\n"
    )


@functools.cache
def _grid(n_candidates, n_samples, broadband, over):
    text = spec_text(n_candidates, n_samples, broadband, over)
    return tolerance.run(loads(text, "report_scenario.toml"))


def engine_grid(
    n_candidates: int = 3,
    n_samples: int = 200,
    broadband: bool = True,
    over: str = "band",
    spec_toml: str | None = None,
):
    """A results grid of the scenario from a real (small) engine run; a fresh copy each call.

    ``spec_toml=""`` blanks the stored spec text, as in a grid written before it was kept.
    """
    g = _grid(n_candidates, n_samples, broadband, over).copy(deep=True)
    if spec_toml is not None:
        g.attrs["spec_toml"] = spec_toml
    return g
