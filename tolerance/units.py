"""Parsing of quantities with units: wavelengths (nm at the API) and lengths (um at the API).

A bare number is read in the API unit (nm for wavelengths, um for lengths).
"""

from __future__ import annotations

import math
import re

from .errors import RetolError

_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_QUANTITY = re.compile(rf"^\s*({_NUMBER})\s*([a-zA-Zµμ]*)\s*$")

#: Length units to nanometres.
_TO_NM = {
    "": 1.0,
    "nm": 1.0,
    "um": 1e3,
    "µm": 1e3,
    "μm": 1e3,
    "micron": 1e3,
    "microns": 1e3,
    "mm": 1e6,
    "pm": 1e-3,
    "a": 0.1,
    "angstrom": 0.1,
    "m": 1e9,
}


def _parse(value, field: str, default_unit: str) -> float:
    if isinstance(value, bool):
        raise RetolError(field, f"expected a number with a unit, got {value!r}", "e.g. 632.8nm")
    if isinstance(value, int | float):
        number, unit = float(value), default_unit
    elif isinstance(value, str):
        m = _QUANTITY.match(value)
        if not m:
            raise RetolError(
                field, f"cannot read {value!r} as a quantity", "write e.g. 632.8nm, 0.6328um or 1mm"
            )
        number, unit = float(m.group(1)), m.group(2).lower() or default_unit
    else:
        raise RetolError(field, f"expected a number with a unit, got {value!r}", "e.g. 632.8nm")
    if unit not in _TO_NM:
        raise RetolError(field, f"unknown unit {unit!r}", "use nm, um or mm")
    out = number * _TO_NM[unit]
    if out != out or out in (float("inf"), float("-inf")):
        raise RetolError(field, f"{value!r} is not finite", "give a finite number")
    return out


def wavelength_nm(value, field: str = "wavelength") -> float:
    """Read a wavelength; a bare number is nm.  Returns nm; must be positive.

    >>> wavelength_nm("0.6328um")
    632.8
    >>> wavelength_nm(1064)
    1064.0
    """
    nm = _parse(value, field, "nm")
    if not nm > 0:
        raise RetolError(field, f"wavelength must be positive, got {value!r}", "e.g. 632.8nm")
    return round(nm, 9)


def interval_nm(value, field: str) -> float:
    """Read a wavelength interval (a step or a width); a bare number is nm.  Returns nm."""
    return round(_parse(value, field, "nm"), 9)


def length_um(value, field: str = "thickness") -> float:
    """Read a length (a plate thickness); a bare number is um.  Returns um.

    >>> length_um("1mm")
    1000.0
    >>> length_um("17.5um")
    17.5
    """
    if isinstance(value, int | float) and not isinstance(value, bool):
        um = float(value)
        if not math.isfinite(um):
            raise RetolError(field, f"{value!r} is not finite", "give a finite length, e.g. 17.5um")
    else:
        um = _parse(value, field, "um") / 1e3
    return round(um, 12)
