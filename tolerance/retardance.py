"""Retardance of one birefringent layer: optic axis in the plate's face, or tipped out of it.

Retardance δ is the phase by which the slow wave lags the fast wave, in radians inside and in
waves or degrees at the reporting boundary.  Lengths in µm, wavelengths in nm, angles in degrees
at the API.
"""

from __future__ import annotations

import numpy as np

from .dispersion import Material, indices, thermal_factor


def normal_incidence(birefringence, thickness_um, wavelength_nm):
    """Retardance 2π·d·|Δn|/λ of a plate at normal incidence. [rad]

    Parameters
    ----------
    birefringence : array_like
        n_e − n_o. [1]
    thickness_um : array_like
        Plate thickness. [µm]
    wavelength_nm : array_like
        Vacuum wavelength. [nm]

    Examples
    --------
    >>> round(float(normal_incidence(0.01, 25.0, 1000.0) / (2 * np.pi)), 6)
    0.25
    """
    return 2.0 * np.pi * np.abs(birefringence) * np.asarray(thickness_um) * 1e3 / wavelength_nm


def oblique_index_difference(n_o, n_e, aoi_deg, azimuth_deg):
    """Normal-component index difference N_e − N_o of a tilted plate, optic axis in the face.

    With the tangential wave vector k₀·sin θᵢ shared by both waves (Snell), the normal components
    of the two refracted wave vectors, in units of k₀, are

        N_o = sqrt(n_o² − sin²θᵢ)
        N_e = sqrt(n_e² − sin²θᵢ·sin²φ − (n_e²/n_o²)·sin²θᵢ·cos²φ)

    with φ the azimuth of the plane of incidence measured from the optic axis.  The retardance
    of a plate of thickness d is then δ = 2π·d·|N_e − N_o|/λ, which at normal incidence reduces to
    2π·d·|n_e − n_o|/λ.

    Parameters
    ----------
    n_o, n_e : array_like
        Ordinary and extraordinary indices. [1]
    aoi_deg : array_like
        Angle of incidence in air. [deg]
    azimuth_deg : array_like
        Azimuth of the plane of incidence from the optic axis. [deg]

    References
    ----------
    .. [1] F. E. Veiras, L. I. Perez, M. T. Garea, "Phase shift formulas in uniaxial media: an
       application to waveplates," Appl. Opt. 49, 2769-2777 (2010), the case of the optic axis
       parallel to the faces.
    .. [2] J. M. Beckers, Appl. Opt. 11, 681 (1972): field of view of retarders, the change being
       second order in the index difference near 45° plane-of-incidence azimuth.
    """
    s2 = np.sin(np.radians(aoi_deg)) ** 2
    phi = np.radians(azimuth_deg)
    n_o = np.asarray(n_o, dtype=float)
    n_e = np.asarray(n_e, dtype=float)
    N_o = np.sqrt(n_o**2 - s2)
    N_e = np.sqrt(n_e**2 - s2 * np.sin(phi) ** 2 - (n_e**2 / n_o**2) * s2 * np.cos(phi) ** 2)
    return N_e - N_o


def cut_index_difference(n_o, n_e, aoi_deg, azimuth_deg, cut_deg):
    """Normal-component index difference N_e − N_o, optic axis tipped out of the face. [1]

    Geometry: z is the plate normal (the light goes towards +z), the plane of incidence is at
    azimuth φ from the projection of the optic axis on the face, and the optic axis makes the
    angle κ (the cut error) with the face, tipped in the plane of that projection and the normal:
    ĉ = (cos κ·â, sin κ) with â the unit vector of the projection.  Both waves share the
    tangential wave vector k₀·sin θᵢ (Snell), so in units of k₀ the o-wave has
    N_o = sqrt(n_o² − sin²θᵢ) and the e-wave's normal component N_e is the forward root of the
    extraordinary index surface (k·ĉ)²/n_o² + (k² − (k·ĉ)²)/n_e² = 1, a quadratic in N_e:

        A·N_e² + 2B·N_e + C = 0,   N_e = (−B + sqrt(B² − A·C))/A,
        A = n_o² + (n_e² − n_o²)·sin²κ,
        B = (n_e² − n_o²)·sin κ·p,   p = sin θᵢ·cos κ·cos φ  (tangential k along ĉ),
        C = (n_e² − n_o²)·p² + n_o²·(sin²θᵢ − n_e²).

    At normal incidence N_e = n_o·n_e/sqrt(n_o²·cos²κ + n_e²·sin²κ), the textbook n_e(θ) for a
    wave at θ = 90° − κ from the optic axis; at κ = 0 it is :func:`oblique_index_difference`.
    The e-wave's polarization at normal incidence lies in the plane of ĉ and the normal, so the
    fast-axis azimuth is that of â whatever κ: the cut changes the retardance only.  (κ, φ) and
    (−κ, φ + 180°) are the same plate.

    Parameters
    ----------
    n_o, n_e : array_like
        Ordinary and extraordinary indices. [1]
    aoi_deg : array_like
        Angle of incidence in air. [deg]
    azimuth_deg : array_like
        Azimuth of the plane of incidence from the optic axis's projection on the face. [deg]
    cut_deg : array_like
        Angle κ between the optic axis and the face, positive towards the exit side. [deg]

    References
    ----------
    .. [1] F. E. Veiras, L. I. Perez, M. T. Garea, "Phase shift formulas in uniaxial media: an
       application to waveplates," Appl. Opt. 49, 2769-2777 (2010), the general optic-axis
       orientation (their k_ze for an arbitrary axis).
    .. [2] M. Born, E. Wolf, *Principles of Optics*, 7th ed. (1999), sec. 15.3: n_e(θ).

    Examples
    --------
    >>> n = cut_index_difference(1.5, 1.6, 0.0, 0.0, 90.0)  # axis along the normal
    >>> abs(float(n)) < 1e-15
    True
    """
    n_o = np.asarray(n_o, dtype=float)
    n_e = np.asarray(n_e, dtype=float)
    si = np.sin(np.radians(aoi_deg))
    k = np.radians(cut_deg)
    cz = np.sin(k)
    p = si * np.cos(k) * np.cos(np.radians(azimuth_deg))
    dd = n_e**2 - n_o**2
    A = n_o**2 + dd * cz**2
    B = dd * cz * p
    C = dd * p**2 + n_o**2 * (si**2 - n_e**2)
    N_e = (np.sqrt(B * B - A * C) - B) / A
    return N_e - np.sqrt(n_o**2 - si**2)


def layer_retardance(
    material: Material,
    thickness_um,
    wavelength_nm,
    temperature_c=None,
    aoi_deg=0.0,
    azimuth_deg=0.0,
    extrapolate: bool = False,
):
    """Retardance of one plate of ``material``, optic axis in the face. [rad]

    Parameters
    ----------
    material : Material
    thickness_um : array_like
        Plate thickness. [µm]
    wavelength_nm : array_like
        Vacuum wavelength. [nm]
    temperature_c : array_like, optional
        Plate temperature; None means the material's reference temperature. [°C]
    aoi_deg : array_like
        Angle of incidence. [deg]
    azimuth_deg : array_like
        Azimuth of the plane of incidence from the optic axis. [deg]

    Notes
    -----
    δ(T) = δ(T_ref)·(1 + γ·(T − T_ref)) with γ the material's relative temperature coefficient
    of retardance (Etzel, Rose & Wang, Appl. Opt. 39, 5796 (2000)).

    Examples
    --------
    >>> from tolerance.dispersion import get_material
    >>> q = get_material("quartz")
    >>> round(float(layer_retardance(q, 17.49, 632.8) / (2 * np.pi)), 3)
    0.25
    """
    n_o, n_e = indices(material, wavelength_nm, extrapolate=extrapolate)
    dN = oblique_index_difference(n_o, n_e, aoi_deg, azimuth_deg)
    delta = 2.0 * np.pi * np.abs(dN) * np.asarray(thickness_um) * 1e3 / np.asarray(wavelength_nm)
    if temperature_c is not None:
        delta = delta * thermal_factor(material, temperature_c)
    return delta


def waves(delta_rad):
    """Retardance in waves. [waves]"""
    return np.asarray(delta_rad) / (2.0 * np.pi)


def degrees(delta_rad):
    """Retardance in degrees. [deg]"""
    return np.degrees(delta_rad)
