"""Jones matrices, Stokes vectors and the polarization ellipse.

Conventions (stated in README.md):

* Time dependence exp(i(kz − ωt)); a Jones vector (Eₓ, E_y) describes Re[(Eₓ, E_y)·e^{−iωt}].
* A retarder with fast axis at θ delays the slow component by δ:
  J = R(−θ)·diag(e^{−iδ/2}, e^{+iδ/2})·R(θ), the same matrix as sympy's ``phase_retarder``.
* S₃ = 2·Im(Eₓ·E_y*), so that S₃ > 0 means the field turns clockwise as seen looking toward the
  source, which the optics handbooks (Hecht, Optics; Born & Wolf) call right-handed.
  (sympy's ``jones_2_stokes`` uses the opposite sign of S₃.)
* Angles from the x axis, counter-clockwise positive as seen looking toward the source. [deg]
"""

from __future__ import annotations

import numpy as np

ROTATIONS = ("clockwise", "counterclockwise", "linear")
#: Below this |S3|/P the state is called linear.
LINEAR_TOLERANCE = 1e-9
#: Below this (S1² + S2²)^½/P the state is called circular and its azimuth set to 0.
CIRCULAR_TOLERANCE = 1e-9


def retarder_jones(retardance_rad, fast_axis_deg):
    """Jones matrix of a linear retarder. [(..., 2, 2) complex]

    Parameters
    ----------
    retardance_rad : array_like
        Retardance δ (slow behind fast). [rad]
    fast_axis_deg : array_like
        Fast-axis angle from x. [deg]

    Notes
    -----
    J = cos(δ/2)·I − i·sin(δ/2)·[[cos 2θ, sin 2θ], [sin 2θ, −cos 2θ]], unitary with det 1.
    """
    d = np.asarray(retardance_rad, dtype=float)
    t = np.radians(fast_axis_deg)
    d, t = np.broadcast_arrays(d, t)
    c, s = np.cos(d / 2), np.sin(d / 2)
    c2, s2 = np.cos(2 * t), np.sin(2 * t)
    J = np.empty(d.shape + (2, 2), dtype=complex)
    J[..., 0, 0] = c - 1j * s * c2
    J[..., 0, 1] = -1j * s * s2
    J[..., 1, 0] = -1j * s * s2
    J[..., 1, 1] = c + 1j * s * c2
    return J


def linear_jones(azimuth_deg):
    """Jones vector of linear polarization at an azimuth. [(..., 2) complex]"""
    a = np.radians(np.asarray(azimuth_deg, dtype=float))
    return np.stack([np.cos(a), np.sin(a)], axis=-1).astype(complex)


def jones_to_stokes(E):
    """Stokes vector [S0, S1, S2, S3] of a Jones vector (or stack of them). [(..., 4)]

    S3 = 2·Im(Eₓ·E_y*) > 0 for a field turning clockwise looking toward the source.
    """
    E = np.asarray(E)
    ex, ey = E[..., 0], E[..., 1]
    cross = ex * np.conj(ey)
    return np.stack(
        [abs(ex) ** 2 + abs(ey) ** 2, abs(ex) ** 2 - abs(ey) ** 2, 2 * cross.real, 2 * cross.imag],
        axis=-1,
    )


def stokes_from_ellipse(azimuth_deg, ellipticity_deg, dop=1.0, intensity=1.0):
    """Stokes vector from ellipse azimuth ψ and ellipticity angle χ (χ > 0 clockwise). [(..., 4)]"""
    psi = np.radians(azimuth_deg)
    chi = np.radians(ellipticity_deg)
    psi, chi, dop, intensity = np.broadcast_arrays(psi, chi, dop, intensity)
    p = dop * intensity
    return np.stack(
        [
            intensity,
            p * np.cos(2 * chi) * np.cos(2 * psi),
            p * np.cos(2 * chi) * np.sin(2 * psi),
            p * np.sin(2 * chi),
        ],
        axis=-1,
    )


def ellipse(stokes):
    """The polarization ellipse of the polarized part of a Stokes vector.

    Parameters
    ----------
    stokes : array_like (..., 4)
        [S0, S1, S2, S3].

    Returns
    -------
    dict of ndarray
        ``azimuth_deg`` of the major axis in (−90, 90]; ``ellipticity_angle_deg`` χ in [−45, 45]
        (positive clockwise looking toward the source); ``axial_ratio`` b/a in [0, 1];
        ``rotation`` +1 clockwise, −1 counter-clockwise, 0 linear; ``dop`` degree of polarization.

    Notes
    -----
    2ψ = atan2(S2, S1), sin 2χ = S3/P with P = sqrt(S1² + S2² + S3²), b/a = |tan χ|; the ratio is
    clipped to [−1, 1] before arcsin so that exactly circular light gives no NaN.
    """
    S = np.asarray(stokes, dtype=float)
    s0, s1, s2, s3 = S[..., 0], S[..., 1], S[..., 2], S[..., 3]
    P = np.sqrt(s1**2 + s2**2 + s3**2)
    with np.errstate(invalid="ignore", divide="ignore"):
        q = np.where(P > 0, s3 / np.where(P > 0, P, 1.0), 0.0)
        dop = np.where(s0 > 0, P / np.where(s0 > 0, s0, 1.0), 0.0)
    q = np.clip(q, -1.0, 1.0)
    chi = 0.5 * np.arcsin(q)
    psi = 0.5 * np.degrees(np.arctan2(s2, s1))
    psi = np.where(psi <= -90.0, psi + 180.0, psi)
    # exactly circular light has no major axis: report 0 rather than the angle of round-off
    psi = np.where(np.hypot(s1, s2) <= CIRCULAR_TOLERANCE * np.maximum(P, 1e-300), 0.0, psi)
    rotation = np.where(q > LINEAR_TOLERANCE, 1, np.where(q < -LINEAR_TOLERANCE, -1, 0))
    return {
        "azimuth_deg": psi,
        "ellipticity_angle_deg": np.degrees(chi),
        "axial_ratio": np.abs(np.tan(chi)),
        "rotation": rotation,
        "dop": np.clip(dop, 0.0, 1.0),
    }


def rotation_name(rotation) -> str:
    """'clockwise', 'counterclockwise' or 'linear' (as seen looking toward the source)."""
    return {1: "clockwise", -1: "counterclockwise", 0: "linear"}[int(rotation)]


def handedness_name(rotation) -> str:
    """'right' (clockwise looking toward the source, as in Hecht), 'left' or 'linear'."""
    return {1: "right", -1: "left", 0: "linear"}[int(rotation)]


def goal_vector(state: str, azimuth_deg: float = 0.0, handedness: int = 1):
    """Normalised Stokes 3-vector (s1, s2, s3) of a goal state.

    ``state`` is "circular" (``handedness`` +1 right/clockwise, −1 left) or "linear" at
    ``azimuth_deg``.
    """
    if state == "circular":
        return np.array([0.0, 0.0, float(np.sign(handedness) or 1.0)])
    a = np.radians(2.0 * azimuth_deg)
    return np.array([np.cos(a), np.sin(a), 0.0])


def fidelity(stokes, goal):
    """Fidelity (1 + s·g)/2 of a (partially polarized) state to a pure goal state. [1]

    ``s`` is the Stokes vector normalised by S0, so unpolarized light counts against the goal:
    fully unpolarized light has fidelity 1/2 to any pure state.
    """
    S = np.asarray(stokes, dtype=float)
    s = S[..., 1:4] / S[..., :1]
    return 0.5 * (1.0 + np.sum(s * np.asarray(goal), axis=-1))


#: The largest extinction ratio reported, to keep exact matches finite. [dB]
EXTINCTION_CAP_DB = 150.0


def extinction_db(stokes, goal):
    """Extinction ratio through an analyzer that passes the goal state. [dB]

    10·log10(P_pass / P_block) = 10·log10((1 + s·g)/(1 − s·g)), with ``s`` normalised by S0
    (unpolarized light passes both ways equally).  Capped at ``EXTINCTION_CAP_DB``.
    """
    f = fidelity(stokes, goal)
    lo = 10.0 ** (-EXTINCTION_CAP_DB / 10.0)
    return 10.0 * np.log10(np.maximum(f, lo) / np.maximum(1.0 - f, lo))


def analyzer_extinction_db(stokes, analyzer_deg):
    """Extinction ratio through a linear analyzer at ``analyzer_deg`` vs crossed to it. [dB]"""
    return extinction_db(stokes, goal_vector("linear", analyzer_deg))
