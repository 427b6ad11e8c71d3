"""The tolerances a spec may give: what each one perturbs, its unit and its physical bounds.

:data:`TOLERANCES` is the registry: the spec validator, the grid's ``tolerance`` names, the
report's words and the CLI all read it.  Each entry's ``extra`` carries ``short`` (the name in the
results grid), ``per_layer`` (drawn independently for each layer), ``max_reach`` (the largest
deviation that is physically sensible, or None) and ``unit_kind`` ("length" when a width may be
written with a unit such as ``"0.2um"``).
"""

from __future__ import annotations

from .distributions import Distribution
from .errors import RetolError
from .registry import Registry

TOLERANCES = Registry("tolerance")
TOLERANCES.add(
    "thickness_um",
    "each plate's thickness, independently",
    unit="um",
    short="thickness",
    per_layer=True,
    max_reach=None,
    unit_kind="length",
)
TOLERANCES.add(
    "retardance_waves",
    "the plate's retardance at `at` (default: design wavelength): one scale on all thicknesses",
    unit="waves",
    short="retardance",
    per_layer=False,
    max_reach=0.5,
    unit_kind=None,
)
TOLERANCES.add(
    "clocking_deg",
    "the whole plate's fast-axis angle in its mount",
    unit="deg",
    short="clocking",
    per_layer=False,
    max_reach=45.0,
    unit_kind=None,
)
TOLERANCES.add(
    "crossing_deg",
    "each later plate's axis relative to the first",
    unit="deg",
    short="crossing",
    per_layer=True,
    max_reach=45.0,
    unit_kind=None,
)
TOLERANCES.add(
    "tilt_deg",
    "angle of incidence; plane-of-incidence azimuth uniform",
    unit="deg",
    short="tilt",
    per_layer=False,
    max_reach=89.0,
    unit_kind=None,
)
TOLERANCES.add(
    "temperature_c",
    "plate temperature",
    unit="degC",
    short="temperature",
    per_layer=False,
    max_reach=None,
    unit_kind=None,
)
TOLERANCES.add(
    "input_azimuth_deg",
    "azimuth of the linear input",
    unit="deg",
    short="input_azimuth",
    per_layer=False,
    max_reach=45.0,
    unit_kind=None,
)
TOLERANCES.add(
    "reflectance",
    "each reflecting face's power reflectance, absolute offset, independently per face "
    "(candidates with faces only; clipped to [0, 0.999999])",
    unit="1",
    short="reflectance",
    per_layer=False,
    max_reach=1.0,
    unit_kind=None,
)
#: The laser's centre drift is given in ``[source]`` but acts as a tolerance.
DRIFT = "drift"
#: Grid names, in the order the grid lists tolerances.
SHORT = {**{k: e.extra["short"] for k, e in TOLERANCES.items()}, DRIFT: "drift"}
UNITS = {**{k: e.extra["unit"] for k, e in TOLERANCES.items()}, DRIFT: "nm"}


def check_bounds(key: str, dist: Distribution, field: str) -> Distribution:
    """Refuse distributions that reach physically impossible values."""
    extra = TOLERANCES[key].extra
    reach = extra["max_reach"]
    if key == "tilt_deg" and dist.reach >= reach:
        raise RetolError(
            field,
            f"reaches an angle of incidence of {reach:g} deg or more",
            "tilts are a few degrees; give a smaller width",
        )
    if key == "retardance_waves":
        if dist.reach > reach:
            raise RetolError(
                field,
                f"reaches a retardance error of more than {reach:g} wave",
                "vendors quote small fractions of a wave, e.g. { tolerance = 0.003 }",
            )
        return dist
    if key == "reflectance":
        if dist.reach >= reach:
            raise RetolError(
                field,
                "reaches a reflectance offset of 1 (100 %) or more",
                "coating tolerances are fractions of a percent, e.g. { sigma = 0.001 }",
            )
        return dist
    if reach is not None and key != "tilt_deg" and dist.reach > reach:
        raise RetolError(
            field, f"reaches more than {reach:g} deg", "angle errors are small; check the unit"
        )
    if key == "temperature_c" and dist.kind == "range" and dist.low < -273.15:
        raise RetolError(f"{field}.low", "is below absolute zero", "give a temperature in deg C")
    return dist
