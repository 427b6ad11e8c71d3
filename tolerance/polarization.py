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

from .errors import RetolError

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


def goal_vector(
    state: str,
    azimuth_deg: float = 0.0,
    handedness: int = 1,
    *,
    axial_ratio=None,
    ellipticity_deg=None,
    stokes=None,
):
    """Normalised Stokes 3-vector (s1, s2, s3) of a goal state.

    ``state`` is "circular" (``handedness`` +1 right/clockwise, −1 left), "linear" at
    ``azimuth_deg``, "elliptical" (``azimuth_deg`` with ``axial_ratio`` or ``ellipticity_deg``
    and ``handedness``; see :func:`elliptical_goal_vector`) or "stokes" (``stokes`` = (s1, s2,
    s3); see :func:`stokes_goal_vector`).
    """
    if state == "elliptical":
        return elliptical_goal_vector(azimuth_deg, axial_ratio, handedness, ellipticity_deg)
    if state == "stokes":
        return stokes_goal_vector(stokes)
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


# ----------------------------------------------------------------------------- any state
#
# Goals and inputs of any polarization state, elements as Mueller matrices, and the distances
# between states.  Goal vectors are normalised Stokes 3-vectors (s1, s2, s3) like
# :func:`goal_vector`; inputs and outputs are Stokes 4-vectors [S0, S1, S2, S3].


def _finite(field: str, value, fix: str = "give a finite number"):
    """``value`` as a float array; a NaN or infinity raises a one-line RetolError."""
    try:
        a = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise RetolError(field, f"cannot read {value!r} as a number", fix) from None
    if not np.all(np.isfinite(a)):
        raise RetolError(field, f"must be finite, got {value!r}", fix)
    return a


def handedness_sign(value, field: str = "handedness") -> int:
    """+1 for right-handed, −1 for left-handed, from a name or a sign.

    Parameters
    ----------
    value : str or int
        "right" (clockwise looking toward the source, S3 > 0, as in Hecht) or "left", also
        "clockwise"/"counterclockwise"; or +1 / −1.

    Examples
    --------
    >>> handedness_sign("right"), handedness_sign("left"), handedness_sign(-1)
    (1, -1, -1)
    """
    names = {"right": 1, "clockwise": 1, "left": -1, "counterclockwise": -1}
    if isinstance(value, str):
        key = value.strip().lower()
        if key in names:
            return names[key]
    elif isinstance(value, int | float | np.integer | np.floating) and value in (1, -1):
        return int(value)
    raise RetolError(field, f"cannot read {value!r}", "use right or left")


def ellipticity_from_axial_ratio(axial_ratio, handedness=1):
    """Ellipticity angle χ of an ellipse of axial ratio b/a and a handedness. [deg]

    Parameters
    ----------
    axial_ratio : array_like
        Minor over major axis b/a, in [0, 1]. [1]
    handedness : array_like
        +1 right-handed (clockwise looking toward the source), −1 left-handed.

    Returns
    -------
    ndarray
        χ = ±atan(b/a) in [−45, 45], positive for right-handed light. [deg]

    References
    ----------
    .. [1] R. M. A. Azzam and N. M. Bashara, *Ellipsometry and Polarized Light* (North-Holland,
       1977), sec. 1.3: tan χ = ±b/a.

    Examples
    --------
    >>> float(ellipticity_from_axial_ratio(1.0, -1))
    -45.0
    """
    r = np.asarray(axial_ratio, dtype=float)
    return np.sign(handedness) * np.degrees(np.arctan(r))


def elliptical_goal_vector(
    azimuth_deg=0.0, axial_ratio=None, handedness=None, ellipticity_deg=None
):
    """Normalised Stokes 3-vector (s1, s2, s3) of a pure elliptical goal state. [(..., 3)]

    Give the ellipse by ``axial_ratio`` with ``handedness``, or by the signed
    ``ellipticity_deg`` (whose sign is the handedness).  Validated: every mistake raises a
    one-line :class:`~tolerance.errors.RetolError` naming the key.

    Parameters
    ----------
    azimuth_deg : array_like
        Azimuth ψ of the major axis from x, counter-clockwise looking toward the source;
        irrelevant for circular light. [deg]
    axial_ratio : array_like, optional
        b/a in [0, 1]: 0 linear, 1 circular. [1]
    handedness : str or int, optional
        "right"/+1 (clockwise looking toward the source, S3 > 0) or "left"/−1; required for
        ``axial_ratio`` > 0, ignored for linear light.  With ``ellipticity_deg`` it may be given
        but must agree with the sign.
    ellipticity_deg : array_like, optional
        Ellipticity angle χ in [−45, 45], tan|χ| = b/a, positive right-handed. [deg]

    Returns
    -------
    ndarray (..., 3)
        (cos 2χ cos 2ψ, cos 2χ sin 2ψ, sin 2χ).

    References
    ----------
    .. [1] R. M. A. Azzam and N. M. Bashara, *Ellipsometry and Polarized Light* (North-Holland,
       1977), sec. 1.5 (Stokes parameters from ψ and χ).
    .. [2] D. H. Goldstein, *Polarized Light*, 3rd ed. (CRC Press, 2011), ch. 4.

    Examples
    --------
    >>> np.round(elliptical_goal_vector(0.0, axial_ratio=1.0, handedness="right"), 12) + 0.0
    array([0., 0., 1.])
    """
    psi = _finite("azimuth_deg", azimuth_deg, "give the major-axis azimuth in degrees")
    if (axial_ratio is None) == (ellipticity_deg is None):
        raise RetolError(
            "axial_ratio", "give exactly one of axial_ratio and ellipticity_deg", "e.g. 0.5"
        )
    if ellipticity_deg is not None:
        chi = _finite("ellipticity_deg", ellipticity_deg, "give an angle in [-45, 45] degrees")
        if np.any(np.abs(chi) > 45.0):
            raise RetolError(
                "ellipticity_deg", f"must lie in [-45, 45], got {ellipticity_deg!r}", "e.g. 20"
            )
        if handedness is not None:
            h = handedness_sign(handedness)
            if np.any(chi * h < 0):
                raise RetolError(
                    "handedness",
                    f"{handedness!r} disagrees with the sign of the ellipticity angle",
                    "positive ellipticity is right-handed; drop one of the two",
                )
    else:
        r = _finite("axial_ratio", axial_ratio, "give b/a in [0, 1]")
        if np.any((r < 0.0) | (r > 1.0)):
            raise RetolError(
                "axial_ratio", f"must lie in [0, 1], got {axial_ratio!r}", "give minor/major b/a"
            )
        if np.any(r > 0.0) and handedness is None:
            raise RetolError(
                "handedness", "is required for an elliptical or circular goal", "right or left"
            )
        h = handedness_sign(handedness) if handedness is not None else 1
        chi = ellipticity_from_axial_ratio(r, h)
    return stokes_from_ellipse(psi, chi)[..., 1:]


def stokes_goal_vector(stokes):
    """A goal given as a normalised Stokes 3-vector (s1, s2, s3), checked and renormalised.

    Parameters
    ----------
    stokes : array_like (..., 3)
        s1, s2, s3 with s1² + s2² + s3² = 1 (a pure state), to within 1e-3. [1]

    Returns
    -------
    ndarray (..., 3)
        The vector divided by its length, so that round-off in the user's digits is removed.

    Examples
    --------
    >>> stokes_goal_vector([0.6, 0.0, 0.8]).tolist()
    [0.6, 0.0, 0.8]
    """
    s = _finite("stokes", stokes, "give three finite numbers s1, s2, s3")
    if s.shape[-1:] != (3,):
        raise RetolError("stokes", f"needs three numbers s1, s2, s3, got {stokes!r}", "e.g. 0,0,1")
    n = np.linalg.norm(s, axis=-1, keepdims=True)
    if np.any(np.abs(n - 1.0) > 1e-3):
        raise RetolError(
            "stokes",
            f"must have s1^2 + s2^2 + s3^2 = 1 (a pure state), got length {np.ravel(n)[0]:.6g}",
            "divide by its length; a goal is fully polarized",
        )
    return s / n


def input_stokes(azimuth_deg=0.0, ellipticity_deg=0.0, dop=1.0, intensity=1.0):
    """Stokes 4-vector of an input state: any ellipse, partially polarized. [(..., 4)]

    Validated like a spec key: NaN, |χ| > 45°, DOP outside [0, 1] or a non-positive intensity
    raise a one-line :class:`~tolerance.errors.RetolError`.

    Parameters
    ----------
    azimuth_deg : array_like
        Major-axis azimuth ψ of the polarized part. [deg]
    ellipticity_deg : array_like
        Ellipticity angle χ in [−45, 45], positive right-handed (clockwise looking toward the
        source); 0 for linear light. [deg]
    dop : array_like
        Degree of polarization P in [0, 1]. [1]
    intensity : array_like
        S0, positive. [any intensity unit]

    Returns
    -------
    ndarray (..., 4)
        S0·[1, P cos 2χ cos 2ψ, P cos 2χ sin 2ψ, P sin 2χ].

    References
    ----------
    .. [1] D. H. Goldstein, *Polarized Light*, 3rd ed. (CRC Press, 2011), ch. 4 (Stokes
       parameters of partially polarized light).

    Examples
    --------
    >>> input_stokes(0.0, 0.0, dop=0.5).tolist()
    [1.0, 0.5, 0.0, 0.0]
    """
    psi = _finite("azimuth_deg", azimuth_deg)
    chi = _finite("ellipticity_deg", ellipticity_deg, "give an angle in [-45, 45] degrees")
    p = _finite("dop", dop, "give a degree of polarization in [0, 1]")
    i0 = _finite("intensity", intensity, "give a positive intensity")
    if np.any(np.abs(chi) > 45.0):
        raise RetolError(
            "ellipticity_deg", f"must lie in [-45, 45], got {ellipticity_deg!r}", "e.g. 10"
        )
    if np.any((p < 0.0) | (p > 1.0)):
        raise RetolError("dop", f"must lie in [0, 1], got {dop!r}", "e.g. 0.98")
    if np.any(i0 <= 0.0):
        raise RetolError("intensity", f"must be positive, got {intensity!r}", "e.g. 1")
    return stokes_from_ellipse(psi, chi, p, i0)


def rotate_jones(J, angle_deg):
    """An element's Jones matrix after rotating it by ``angle_deg`` about the beam. [(..., 2, 2)]

    R(−θ)·J·R(θ) with R(θ) = [[cos θ, sin θ], [−sin θ, cos θ]]: the same rotation that puts a
    retarder's fast axis at θ (:func:`retarder_jones`).
    """
    t = np.radians(np.asarray(angle_deg, dtype=float))
    c, s = np.cos(t), np.sin(t)
    R = np.empty(t.shape + (2, 2))
    R[..., 0, 0], R[..., 0, 1], R[..., 1, 0], R[..., 1, 1] = c, s, -s, c
    return np.swapaxes(R, -1, -2) @ np.asarray(J) @ R


#: Stokes from the coherency vector E ⊗ E* = (ExEx*, ExEy*, EyEx*, EyEy*), with S3 = 2 Im(ExEy*).
_A = np.array([[1, 0, 0, 1], [1, 0, 0, -1], [0, 1, 1, 0], [0, -1j, 1j, 0]])
_A_INV = np.linalg.inv(_A)


def jones_to_mueller(J):
    """Mueller matrix of a non-depolarizing element from its Jones matrix. [(..., 4, 4)]

    Notes
    -----
    M = A·(J ⊗ J*)·A⁻¹, with A mapping the coherency vector to [S0, S1, S2, S3] in this
    package's sign of S3 (S3 = 2 Im(Eₓ E_y*)).

    References
    ----------
    .. [1] D. H. Goldstein, *Polarized Light*, 3rd ed. (CRC Press, 2011), ch. 6 (relation
       between the Jones and Mueller calculi).
    """
    J = np.asarray(J, dtype=complex)
    K = np.einsum("...ij,...kl->...ikjl", J, np.conj(J)).reshape(J.shape[:-2] + (4, 4))
    return (_A @ K @ _A_INV).real


def retarder_mueller(retardance_rad, fast_axis_deg):
    """Mueller matrix of an ideal linear retarder. [(..., 4, 4)]

    Parameters
    ----------
    retardance_rad : array_like
        Retardance δ. [rad]
    fast_axis_deg : array_like
        Fast-axis angle θ from x. [deg]

    Notes
    -----
    With c = cos 2θ, s = sin 2θ, the lower-right 3×3 block is the rotation of (S1, S2, S3) by −δ
    about the axis (c, s, 0) on the Poincaré sphere:
    [[c² + s² cos δ, cs(1 − cos δ), −s sin δ], [cs(1 − cos δ), s² + c² cos δ, c sin δ],
    [s sin δ, −c sin δ, cos δ]].  It equals :func:`jones_to_mueller` of :func:`retarder_jones`.

    References
    ----------
    .. [1] D. H. Goldstein, *Polarized Light*, 3rd ed. (CRC Press, 2011), ch. 5 (Mueller matrix
       of a rotated linear retarder).
    """
    d = np.asarray(retardance_rad, dtype=float)
    t = np.radians(np.asarray(fast_axis_deg, dtype=float))
    d, t = np.broadcast_arrays(d, t)
    c, s = np.cos(2 * t), np.sin(2 * t)
    cd, sd = np.cos(d), np.sin(d)
    M = np.zeros(d.shape + (4, 4))
    M[..., 0, 0] = 1.0
    M[..., 1, 1] = c * c + s * s * cd
    M[..., 1, 2] = M[..., 2, 1] = c * s * (1 - cd)
    M[..., 1, 3] = -s * sd
    M[..., 2, 2] = s * s + c * c * cd
    M[..., 2, 3] = c * sd
    M[..., 3, 1] = s * sd
    M[..., 3, 2] = -c * sd
    M[..., 3, 3] = cd
    return M


def _extinction_ratio(extinction_db):
    """Minor over major intensity transmittance 10^(−ER/10); ER = inf gives 0."""
    er = np.asarray(extinction_db, dtype=float)
    if np.any(np.isnan(er)) or np.any(er <= 0):
        raise RetolError(
            "extinction_db", f"must be a positive number of dB, got {extinction_db!r}", "e.g. 30"
        )
    return 10.0 ** (-er / 10.0)


def polarizer_jones(azimuth_deg, extinction_db=np.inf):
    """Jones matrix of a linear polarizer with a finite extinction ratio. [(..., 2, 2)]

    Parameters
    ----------
    azimuth_deg : array_like
        Transmission axis from x. [deg]
    extinction_db : array_like
        Extinction ratio 10·log10(k₁/k₂) of the intensity transmittances along and across the
        axis; ``inf`` for an ideal polarizer. [dB]

    Notes
    -----
    R(−θ)·diag(1, √(k₂/k₁))·R(θ), the major transmittance k₁ taken as 1.
    """
    r = np.sqrt(_extinction_ratio(extinction_db))
    a, r = np.broadcast_arrays(np.asarray(azimuth_deg, dtype=float), r)
    D = np.zeros(a.shape + (2, 2), dtype=complex)
    D[..., 0, 0] = 1.0
    D[..., 1, 1] = r
    return rotate_jones(D, a)


def polarizer_mueller(azimuth_deg, extinction_db=np.inf, transmittance=1.0):
    """Mueller matrix of a linear polarizer (diattenuator) with a finite extinction ratio.

    Parameters
    ----------
    azimuth_deg : array_like
        Transmission axis from x. [deg]
    extinction_db : array_like
        Extinction ratio ER = 10·log10(k₁/k₂), k₁ and k₂ the intensity transmittances along and
        across the axis; ``inf`` for an ideal polarizer. [dB]
    transmittance : array_like
        k₁, the intensity transmittance along the axis. [1]

    Returns
    -------
    ndarray (..., 4, 4)

    Notes
    -----
    With c = cos 2θ, s = sin 2θ and k₂ = k₁·10^(−ER/10):
    M = ½·[[k₁+k₂, (k₁−k₂)c, (k₁−k₂)s, 0],
    [(k₁−k₂)c, (k₁+k₂)c² + 2√(k₁k₂) s², (k₁+k₂−2√(k₁k₂)) cs, 0],
    [(k₁−k₂)s, (k₁+k₂−2√(k₁k₂)) cs, (k₁+k₂)s² + 2√(k₁k₂) c², 0],
    [0, 0, 0, 2√(k₁k₂)]].

    References
    ----------
    .. [1] D. H. Goldstein, *Polarized Light*, 3rd ed. (CRC Press, 2011), ch. 5 (Mueller matrix
       of a linear diattenuator).
    .. [2] R. M. A. Azzam and N. M. Bashara, *Ellipsometry and Polarized Light* (North-Holland,
       1977), sec. 2.4 (partial polarizers).
    """
    k1 = _finite("transmittance", transmittance, "give a transmittance in (0, 1]")
    k2 = k1 * _extinction_ratio(extinction_db)
    t = np.radians(np.asarray(azimuth_deg, dtype=float))
    t, k1, k2 = np.broadcast_arrays(t, k1, k2)
    c, s = np.cos(2 * t), np.sin(2 * t)
    p, m, g = k1 + k2, k1 - k2, 2 * np.sqrt(k1 * k2)
    M = np.zeros(t.shape + (4, 4))
    M[..., 0, 0] = p
    M[..., 0, 1] = M[..., 1, 0] = m * c
    M[..., 0, 2] = M[..., 2, 0] = m * s
    M[..., 1, 1] = p * c * c + g * s * s
    M[..., 1, 2] = M[..., 2, 1] = (p - g) * c * s
    M[..., 2, 2] = p * s * s + g * c * c
    M[..., 3, 3] = g
    return 0.5 * M


def polarizer_output_stokes(azimuth_deg, extinction_db=np.inf, stokes_in=(1.0, 0.0, 0.0, 0.0)):
    """The state behind a linear polarizer of finite extinction ratio. [(..., 4)]

    Parameters
    ----------
    azimuth_deg : array_like
        Transmission axis from x. [deg]
    extinction_db : array_like
        Extinction ratio of the polarizer. [dB]
    stokes_in : array_like (..., 4)
        The light arriving; unpolarized light of unit intensity by default.

    Returns
    -------
    ndarray (..., 4)
        Normalised to S0 = 1.  From unpolarized light: linear at ``azimuth_deg`` with degree of
        polarization (k₁ − k₂)/(k₁ + k₂) = (ER − 1)/(ER + 1), ER the linear extinction ratio.

    Examples
    --------
    >>> round(float(polarizer_output_stokes(0.0, 20.0)[1]), 6)  # (100 - 1) / (100 + 1)
    0.980198
    """
    S = np.einsum("...ij,...j->...i", polarizer_mueller(azimuth_deg, extinction_db), stokes_in)
    return S / S[..., :1]


def polarized_direction(stokes):
    """Unit vector (s1, s2, s3) of the polarized part of a Stokes vector. [(..., 3)]

    Accepts a 4-vector [S0, S1, S2, S3] or a 3-vector (S1, S2, S3).  Unpolarized light has no
    direction and gives (0, 0, 0).
    """
    S = np.asarray(stokes, dtype=float)
    v = S[..., 1:4] if S.shape[-1] == 4 else S
    n = np.linalg.norm(v, axis=-1, keepdims=True)
    return np.where(n > 0, v / np.where(n > 0, n, 1.0), 0.0)


def sphere_angle_deg(a, b):
    """Angle on the Poincaré sphere between two polarization states. [deg, 0..180]

    Parameters
    ----------
    a, b : array_like (..., 4) or (..., 3)
        Stokes 4-vectors or 3-vectors (s1, s2, s3), broadcast against each other.  Only the
        polarized part's direction counts; unpolarized light (no direction) is 90° from every
        state, the angle whose cosine is its s·g = 0.

    Notes
    -----
    Θ = atan2(|â × b̂|, â·b̂), accurate also for nearly equal states.  For pure states the
    fidelity is cos²(Θ/2); two linear states at azimuths a and b are 2|a − b| apart (mod 180°),
    orthogonal states 180°.

    References
    ----------
    .. [1] R. M. A. Azzam and N. M. Bashara, *Ellipsometry and Polarized Light* (North-Holland,
       1977), sec. 2.6 (the Poincaré sphere).
    .. [2] D. H. Goldstein, *Polarized Light*, 3rd ed. (CRC Press, 2011), ch. 12.

    Examples
    --------
    >>> round(float(sphere_angle_deg([1, 0, 0], [0, 1, 0])), 9)  # linear 0 and 45 deg
    90.0
    """
    u, v = np.broadcast_arrays(polarized_direction(a), polarized_direction(b))
    cross = np.linalg.norm(np.cross(u, v), axis=-1)
    theta = np.degrees(np.arctan2(cross, np.sum(u * v, axis=-1)))
    none = (np.sum(u * u, axis=-1) == 0) | (np.sum(v * v, axis=-1) == 0)
    return np.where(none, 90.0, theta)


def _azimuth_and_chi(v):
    """Azimuth [deg] and ellipticity angle [deg] of unit 3-vectors, with their 'circular' mask."""
    rho = np.hypot(v[..., 0], v[..., 1])
    psi = 0.5 * np.degrees(np.arctan2(v[..., 1], v[..., 0]))
    chi = 0.5 * np.degrees(np.arctan2(v[..., 2], rho))
    return psi, chi, rho <= CIRCULAR_TOLERANCE


def azimuth_error_deg(stokes, goal):
    """Major-axis azimuth of a state minus that of the goal, folded into (−90, 90]. [deg]

    Parameters
    ----------
    stokes : array_like (..., 4) or (..., 3)
        The state (its polarized part counts).
    goal : array_like (..., 3)
        The goal, a normalised Stokes 3-vector.

    Returns
    -------
    ndarray
        Signed error ψ − ψ_goal modulo 180° (an ellipse at 89° and one at −89° are 2° apart);
        the metric is its absolute value.  A circular goal has no major axis and so asks for
        none: the error is 0.  A circular (or unpolarized) state under a goal that has a major
        axis has none to offer: the error is 90°, the largest there is.  Near circular the
        azimuth turns fast with small changes of the state; :func:`sphere_angle_deg` is the
        measure that stays smooth there.
    """
    u = polarized_direction(stokes)
    g = polarized_direction(goal)
    u, g = np.broadcast_arrays(u, g)
    psi, _, circ = _azimuth_and_chi(u)
    psi_g, _, circ_g = _azimuth_and_chi(g)
    d = (psi - psi_g + 90.0) % 180.0 - 90.0
    d = np.where(d == -90.0, 90.0, d)
    return np.where(circ_g, 0.0, np.where(circ, 90.0, d))


def ellipticity_error_deg(stokes, goal):
    """Ellipticity angle of a state minus that of the goal, handedness signed. [deg, −90..90]

    χ is positive for right-handed light (S3 > 0), so the wrong handedness shows as a large
    error: right- against left-circular is 90°.  The metric is the absolute value; an
    unpolarized state counts as χ = 0.

    Notes
    -----
    χ = ½·atan2(s3, (s1² + s2²)^½), the latitude on the Poincaré sphere halved.

    References
    ----------
    .. [1] R. M. A. Azzam and N. M. Bashara, *Ellipsometry and Polarized Light* (North-Holland,
       1977), sec. 1.3.
    """
    u = polarized_direction(stokes)
    g = polarized_direction(goal)
    _, chi, _ = _azimuth_and_chi(u)
    _, chi_g, _ = _azimuth_and_chi(g)
    return chi - chi_g
