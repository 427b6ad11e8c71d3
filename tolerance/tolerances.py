"""The tolerances a spec may give: what each one perturbs, its unit and its physical bounds.

:data:`TOLERANCES` is the registry: the spec validator, the grid's ``tolerance`` names, the
report's words and the CLI all read it.  Each entry's ``extra`` carries ``short`` (the name in the
results grid), ``per_layer`` (drawn independently for each layer), ``max_reach`` (the largest
deviation that is physically sensible, or None) and ``unit_kind`` ("length" when a width may be
written with a unit such as ``"0.2um"``).

``cut_deg`` is the angle κ between a layer's optic axis and its face, tipped in the plane of the
axis and the normal (the fast axis keeps its azimuth; an error of the axis within the face is
``clocking_deg``).  Its phase is the exact one for an arbitrary optic axis, with the angle of
incidence of ``tilt_deg`` and that tilt's uniform plane-of-incidence azimuth
(:func:`tolerance.retardance.cut_index_difference`; Veiras, Perez & Garea, Appl. Opt. 49, 2769
(2010)); the azimuth of the tip relative to the plane of incidence is therefore uniform.
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
    "the whole plate's fast-axis angle in its mount (each train element's own)",
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
    "azimuth of the input (a polarizer's, or the whole input over the spectrum)",
    unit="deg",
    short="input_azimuth",
    per_layer=False,
    max_reach=45.0,
    unit_kind=None,
)
TOLERANCES.add(
    "cut_deg",
    "each plate's optic axis tipped out of the face (crystal cut error), independently; "
    "exact phase with the tilt",
    unit="deg",
    short="cut",
    per_layer=True,
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


# ----------------------------------------------------------------------------- trains
#: The tolerances each element of a train holds on its own (its plate and its mount); the others
#: (tilt, temperature, input azimuth, drift) act on the whole train at once.
PER_ELEMENT = ("thickness_um", "retardance_waves", "clocking_deg", "crossing_deg")


def element_key(key: str, element: int) -> str:
    """The name of tolerance ``key`` of element ``element`` of a train, e.g.
    ``clocking_deg[element 1]`` (elements count from 0, the first the light meets)."""
    return f"{key}[element {int(element)}]"


def split_key(key: str) -> tuple[str, int | None]:
    """(tolerance, element) of a tolerance name; element None for a single plate's name.

    >>> split_key("clocking_deg[element 1]")
    ('clocking_deg', 1)
    >>> split_key("tilt_deg")
    ('tilt_deg', None)
    """
    if key.endswith("]") and "[element " in key:
        base, _, rest = key.partition("[element ")
        return base, int(rest[:-1])
    return key, None


def short_name(key: str) -> str:
    """The grid's name of a tolerance name: ``clocking`` or ``clocking[element 1]``."""
    base, e = split_key(key)
    s = SHORT.get(base, base)
    return s if e is None else f"{s}[element {e}]"


def key_of_short(short: str) -> str:
    """The tolerance name of a grid name (inverse of :func:`short_name`)."""
    base, e = split_key(short)
    inverse = {v: k for k, v in SHORT.items()}
    k = inverse.get(base, base)
    return k if e is None else element_key(k, e)


def order_key(key: str) -> tuple[int, int]:
    """Sort key of tolerance names: the registry's order, then the element."""
    base, e = split_key(key)
    names = list(SHORT)
    return (names.index(base) if base in names else len(names), -1 if e is None else e)


def expand_train(tolerances, element_tolerances, element_layers) -> dict:
    """A train's tolerances with each element's own: per-element tolerances named by element.

    Parameters
    ----------
    tolerances : mapping of str to Distribution
        The study's tolerances overridden by the candidate's (names without an element act on
        every element, each element drawing its own values).
    element_tolerances : sequence of mapping
        Each element's own tolerance table (overrides the above for that element).
    element_layers : sequence of int
        Layers of each element (crossing needs two or more; 0 for a polarizer element, which
        has only its mount's clocking).

    Returns
    -------
    dict
        Shared tolerances under their names, per-element ones as :func:`element_key` names.
    """
    out = {k: v for k, v in tolerances.items() if split_key(k)[0] not in PER_ELEMENT}
    for e, own in enumerate(element_tolerances):
        for k in PER_ELEMENT:
            if k == "crossing_deg" and element_layers[e] < 2:
                continue
            if element_layers[e] == 0 and k != "clocking_deg":
                continue
            name = element_key(k, e)
            if name in tolerances:
                out[name] = tolerances[name]
            elif k in own:
                out[name] = own[k]
            elif k in tolerances:
                out[name] = tolerances[k]
    return out
