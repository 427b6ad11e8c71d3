"""The equivalent retarder of any construction, and Mueller matrices (single and broadband).

By the Jones equivalence theorem any lossless, non-depolarizing element is a linear retarder
followed by a rotator.  A plate with reflecting faces is also a weak diattenuator: its retarder
part is taken from the polar decomposition J = U·H (U unitary, H Hermitian positive).  The
equivalent linear retardance is reported with its order kept (chosen nearest a reference, the
layer-projection retardance of :func:`tolerance.plates.plate_retardance`).  Angles in degrees at
the API, retardance in radians; wavelengths in nm.

Broadband light sums the Mueller matrices of each wavelength with the source's power weights;
the result depolarizes, measured by the depolarization index of Gil & Bernabeu, and stays
physically realizable (its Cloude coherency matrix has no negative eigenvalue).

References
----------
.. [1] H. Hurwitz and R. C. Jones, "A new calculus for the treatment of optical systems. II.
   Proof of three general equivalence theorems," J. Opt. Soc. Am. 31, 493-499 (1941).
.. [2] S.-Y. Lu and R. A. Chipman, "Interpretation of Mueller matrices based on polar
   decomposition," J. Opt. Soc. Am. A 13, 1106-1113 (1996) (J = U·H).
.. [3] J. J. Gil and E. Bernabeu, "A depolarization criterion in Mueller matrices," Opt. Acta 32,
   259-261 (1985).
.. [4] S. R. Cloude, "Group theory and polarisation algebra," Optik 75, 26-36 (1986).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .etalon import IDEAL, Faces, plate_jones_faces
from .polarization import _A, _A_INV, jones_to_mueller


@dataclass(frozen=True)
class EquivalentRetarder:
    """Linear retardance [rad] (order kept), its fast axis [deg, (−90, 90]] and the rotation of
    the rotator that follows it [deg, (−90, 90], counter-clockwise positive]."""

    retardance_rad: np.ndarray
    fast_axis_deg: np.ndarray
    rotation_deg: np.ndarray


def retarder_part(J):
    """Unitary factor U of the polar decomposition J = U·H, with det U = 1. [(..., 2, 2)]"""
    J = np.asarray(J, dtype=complex)
    W, _, Vh = np.linalg.svd(J)
    U = W @ Vh
    det = np.linalg.det(U)
    return U / np.sqrt(det)[..., None, None]


def _wrap90(deg):
    """Angle in (−90, 90]. [deg]"""
    a = np.mod(np.asarray(deg) + 90.0, 180.0) - 90.0
    return np.where(a == -90.0, 90.0, a)


def equivalent_retarder(J, reference_rad=None, reference_axis_deg=0.0) -> EquivalentRetarder:
    """Equivalent linear retarder and rotator of a Jones matrix (Hurwitz & Jones).

    Parameters
    ----------
    J : array_like (..., 2, 2)
        Jones matrix (global phase and diattenuation are discarded).
    reference_rad : array_like, optional
        Retardance whose order is kept: the result is the branch nearest it. [rad]
    reference_axis_deg : array_like
        Fast axis the result is referred to (of the two axes of the retarder, the nearer). [deg]

    Notes
    -----
    With U = a₀·I − i(a₁Σ₁ + a₂Σ₂ + a₃Σ₃) (Σ₁ = diag(1, −1), Σ₂ = [[0, 1], [1, 0]],
    Σ₃ = [[0, −i], [i, 0]]), the product of a rotator R(ρ) = cos ρ·I − i sin ρ·Σ₃ and a linear
    retarder L(δ, θ) = cos(δ/2)·I − i sin(δ/2)(cos 2θ·Σ₁ + sin 2θ·Σ₂) has a₀ = cos ρ cos(δ/2),
    a₃ = sin ρ cos(δ/2), a₁ + i·a₂ = sin(δ/2)·e^{i(2θ + ρ)}: so ρ = atan(a₃/a₀),
    δ/2 = atan2(√(a₁² + a₂²), √(a₀² + a₃²)), 2θ = arg(a₁ + i·a₂) − ρ.  Then J ∝ R(ρ)·L(δ, θ).
    """
    U = retarder_part(J)
    a0 = U[..., 0, 0].real
    a1 = -U[..., 0, 0].imag
    a2 = -U[..., 0, 1].imag
    a3 = -U[..., 0, 1].real
    flip = (a0 < 0) | ((a0 == 0) & (a3 < 0))
    sign = np.where(flip, -1.0, 1.0)
    a0, a1, a2, a3 = (sign * a for a in (a0, a1, a2, a3))
    rho = np.arctan2(a3, a0)
    half = np.arctan2(np.hypot(a1, a2), np.hypot(a0, a3))
    theta = np.degrees(0.5 * (np.arctan2(a2, a1) - rho))
    delta = 2.0 * half
    theta = _wrap90(theta)
    if reference_rad is not None:
        ref_axis = np.asarray(reference_axis_deg, dtype=float)
        off = np.abs(_wrap90(theta - ref_axis))
        swap = off > 45.0  # the other axis is nearer: δ → −δ, θ → θ + 90°
        delta = np.where(swap, -delta, delta)
        theta = np.where(swap, _wrap90(theta + 90.0), theta)
        m = np.round((np.asarray(reference_rad) - delta) / (2.0 * np.pi))
        delta = delta + 2.0 * np.pi * m
    return EquivalentRetarder(delta, theta, np.degrees(rho))


def plate_equivalent(
    plate,
    wavelength_nm,
    faces: Faces = IDEAL,
    air_gap: bool = False,
    crossing_deg: float = 0.0,
    temperature_c=None,
    extrapolate=False,
):
    """Equivalent retarder of a plate (faces, crossing error) vs wavelength, with its Jones
    matrix; the order is that of :func:`tolerance.plates.plate_retardance`."""
    from .plates import plate_retardance

    J = plate_jones_faces(
        plate,
        wavelength_nm,
        faces,
        air_gap,
        temperature_c=temperature_c,
        crossing_deg=crossing_deg,
        extrapolate=extrapolate,
    )
    ref = plate_retardance(plate, wavelength_nm, temperature_c, extrapolate=extrapolate)
    return equivalent_retarder(J, ref, plate.axis_deg), J


def plate_mueller(
    plate,
    wavelength_nm,
    faces: Faces = IDEAL,
    air_gap=False,
    crossing_deg=0.0,
    temperature_c=None,
    extrapolate=False,
):
    """Mueller matrix of a plate vs wavelength (faces: transmittance and diattenuation
    included). [(..., 4, 4)]"""
    J = plate_jones_faces(
        plate,
        wavelength_nm,
        faces,
        air_gap,
        temperature_c=temperature_c,
        crossing_deg=crossing_deg,
        extrapolate=extrapolate,
    )
    return jones_to_mueller(J)


def broadband_mueller(M, weights, axis=0):
    """Power-weighted mean of Mueller matrices over a spectral axis. [(..., 4, 4)]

    Incoherent superposition of wavelengths: Stokes vectors add, so Mueller matrices add with
    the source's power weights (normalised here to sum 1).
    """
    M = np.moveaxis(np.asarray(M, dtype=float), axis, 0)
    w = np.asarray(weights, dtype=float)
    if w.shape != M.shape[:1] or not np.all(np.isfinite(w)) or np.any(w < 0) or w.sum() <= 0:
        raise ValueError("weights: need one finite, non-negative weight per wavelength")
    return np.tensordot(w / w.sum(), M, axes=(0, 0))


def depolarization_index(M):
    """Gil & Bernabeu depolarization index √(Σm²ᵢⱼ − m²₀₀)/(√3·m₀₀): 1 non-depolarizing,
    0 an ideal depolarizer. [1]"""
    M = np.asarray(M, dtype=float)
    m00 = M[..., 0, 0]
    return np.sqrt(np.maximum(np.sum(M * M, axis=(-2, -1)) - m00**2, 0.0)) / (np.sqrt(3.0) * m00)


def coherency_matrix(M):
    """Cloude's coherency matrix of a Mueller matrix: Hermitian, positive semi-definite exactly
    when M is a convex sum of non-depolarizing elements. [(..., 4, 4) complex]

    Notes
    -----
    K = A⁻¹·M·A = J ⊗ J* for a Jones matrix J (the inverse of
    :func:`tolerance.polarization.jones_to_mueller`); reordering its indices,
    H₍ᵢⱼ₎₍ₖₗ₎ = K₍ᵢₖ₎₍ⱼₗ₎ = Jᵢⱼ·J*ₖₗ = vec(J)·vec(J)ᴴ.  Linear in M, so a weighted sum of
    Mueller matrices of Jones matrices gives a sum of such positive rank-1 terms.
    """
    M = np.asarray(M, dtype=float)
    K = _A_INV @ M @ _A
    K = K.reshape(M.shape[:-2] + (2, 2, 2, 2))  # [i, k, j, l]
    H = np.swapaxes(K, -3, -2)  # [i, j, k, l]
    return H.reshape(M.shape[:-2] + (4, 4))
