"""Environment maps of a nominal plate: retardance error versus temperature and field of view.

Pure numpy physics over :func:`tolerance.plates.plate_retardance`; all at the plate's design
wavelength.  Angles in degrees, temperatures in °C, retardance in waves.
"""

from __future__ import annotations

import numpy as np

from .plates import Plate, plate_retardance

TWO_PI = 2.0 * np.pi


def target_waves(plate: Plate) -> float:
    """The retardance a plate is built for at its design wavelength, order included. [waves]

    ``order + waves`` for a multi-order plate, ``waves`` for the other constructions; an explicit
    stack, which has no target of its own, is measured against its nominal retardance.
    """
    if plate.construction == "stack" or not np.isfinite(plate.waves):
        return nominal_waves(plate)
    return float(plate.details.get("order", 0) + plate.waves)


def nominal_waves(plate: Plate) -> float:
    """Retardance of the error-free plate at its design wavelength, normal incidence. [waves]"""
    return float(plate_retardance(plate, plate.design_nm) / TWO_PI)


def temperature_error(plate: Plate, temperatures_c) -> np.ndarray:
    """Retardance change with temperature at the design wavelength. [waves]

    δ(T) − δ(T_ref): zero at the materials' reference temperature, where the plate is cut.  The
    plate's own offset from its target at the design wavelength (an achromat matched at two
    other wavelengths) is not part of it; it shows in ``nominal_retardance``.
    """
    t = np.asarray(temperatures_c, dtype=float)
    d = plate_retardance(plate, plate.design_nm, temperature_c=t) / TWO_PI
    return d - nominal_waves(plate)


def temperature_coefficient(plate: Plate, temperature_c: float = 20.0) -> float:
    """d δ / dT of the nominal plate at the design wavelength. [deg/K]

    Notes
    -----
    Σᵢ cos 2(θᵢ − θ)·δᵢ·γᵢ in degrees per kelvin, with γ the measured relative temperature
    coefficient of retardance of each layer's material (Etzel, Rose & Wang, Appl. Opt. 39, 5796
    (2000) for quartz and MgF2).  Evaluated by a central difference of ±0.5 K.
    """
    t = np.array([temperature_c - 0.5, temperature_c + 0.5])
    d = np.degrees(plate_retardance(plate, plate.design_nm, temperature_c=t))
    return float(d[1] - d[0])


def tilt_error(plate: Plate, tilts_deg, azimuths_deg) -> np.ndarray:
    """Retardance change from normal incidence versus tilt and plane-of-incidence azimuth.

    Parameters
    ----------
    tilts_deg : array_like (n,)
        Angles of incidence. [deg]
    azimuths_deg : array_like (m,)
        Azimuths of the plane of incidence, measured from the plate's fast axis. [deg]

    Returns
    -------
    ndarray (n, m)
        Retardance change δ(θᵢ, φ) − δ(0) at the design wavelength. [waves]

    References
    ----------
    .. [1] F. E. Veiras, L. I. Perez, M. T. Garea, Appl. Opt. 49, 2769 (2010).
    """
    i = np.asarray(tilts_deg, dtype=float)[:, None]
    a = np.asarray(azimuths_deg, dtype=float)[None, :] + plate.axis_deg
    d = plate_retardance(plate, plate.design_nm, aoi_deg=i, incidence_azimuth_deg=a) / TWO_PI
    return d - nominal_waves(plate)


def acceptance_half_angle(
    plate: Plate,
    limit_waves: float = 0.01,
    max_deg: float = 60.0,
    step_deg: float = 0.01,
    n_azimuths: int = 72,
) -> float:
    """Largest angle of incidence within which |δ(θᵢ, φ) − δ(0)| ≤ limit for every azimuth. [deg]

    The field of view of the error-free plate at its design wavelength: the retardance change
    that tilt causes (J. M. Beckers, Appl. Opt. 11, 681 (1972)); the plate's own offset from its
    target is reported apart (``nominal_retardance``).  Scanned on a grid of ``step_deg`` up to
    ``max_deg`` and refined linearly between the last good and first bad angle; ``max_deg`` when
    the limit is never reached.
    """
    tilts = np.arange(0.0, max_deg + step_deg / 2, step_deg)
    az = np.linspace(0.0, 180.0, n_azimuths, endpoint=False)
    err = np.max(np.abs(tilt_error(plate, tilts, az)), axis=1)
    bad = np.nonzero(err > limit_waves)[0]
    if bad.size == 0:
        return float(max_deg)
    j = int(bad[0])
    if j == 0:
        return 0.0
    e0, e1 = err[j - 1], err[j]
    frac = (limit_waves - e0) / (e1 - e0) if e1 > e0 else 0.0
    return float(tilts[j - 1] + frac * step_deg)
