"""Aiming: the mount angles that turn an input state into a target state.

A plate in a rotation mount is a :class:`Mount`: its Jones matrix at mount angle 0 (fast axis
along x) as a function of wavelength; turning the mount by θ rotates the matrix,
R(−θ)·J·R(θ).  Light meets element 0 of a train first; angles are degrees from x,
counter-clockwise looking toward the source, and solutions are given modulo 180°.

* :func:`aim_plate` — one plate of any retardance (ideal or real): the angles that reach the
  target, or the closest reachable state and why the target is out of reach.
* :func:`aim_hwp_qwp` — an ideal half-wave plate then an ideal quarter-wave plate: every
  solution in closed form, for any input state.
* :func:`aim_train` — real plates (any construction): least squares on the mount angles,
  seeded from the ideal solutions.
* :func:`aim` — the registry :data:`PLATE_SETS` ("qwp", "hwp+qwp") over those.
* :func:`band_states` — the output over a band at fixed angles.

The states are Stokes vectors (inputs [S0, S1, S2, S3], possibly partially polarized; targets
unit 3-vectors (s1, s2, s3), see :func:`tolerance.polarization.elliptical_goal_vector`).  A
retarder turns the polarized part on the Poincaré sphere and keeps its degree of
polarization, so reaching a target means reaching its direction.

References
----------
.. [1] R. M. A. Azzam and N. M. Bashara, *Ellipsometry and Polarized Light* (North-Holland,
   1977), sec. 2.6: retarders as rotations of the Poincaré sphere.
.. [2] D. H. Goldstein, *Polarized Light*, 3rd ed. (CRC Press, 2011), ch. 5 and 12.
.. [3] E. Hecht, *Optics*, 4th ed. (Addison-Wesley, 2002), sec. 8.7: a quarter-wave plate turns
   linear light into an ellipse whose axes lie along the plate's axes.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from .errors import RetolError
from .plates import Plate, equivalent_retardance, plate_jones
from .polarization import (
    ellipse,
    jones_to_mueller,
    polarized_direction,
    retarder_jones,
    rotate_jones,
    sphere_angle_deg,
)

#: A target closer than this on the Poincaré sphere counts as reached. [deg]
REACH_TOLERANCE_DEG = 1e-6
#: Solutions whose angles agree to this (modulo 180°) are one solution. [deg]
SAME_ANGLE_DEG = 1e-5
#: Below this a Stokes component counts as zero (circular, linear or equal states).
_TINY = 1e-12


# ----------------------------------------------------------------------------- records


@dataclass(frozen=True)
class Mount:
    """A plate in a rotation mount.

    Attributes
    ----------
    label : str
        What the plate is, for tables ("ideal quarter-wave plate", "zero-order quartz 0.25").
    jones0 : callable
        ``jones0(wavelength_nm)`` -> Jones matrix (..., 2, 2) at mount angle 0 (fast axis on x);
        ``wavelength_nm`` is ignored by an ideal plate.
    ideal : bool
        True for an ideal (wavelength-independent) plate.
    """

    label: str
    jones0: Callable[[object], np.ndarray]
    ideal: bool = False

    def mueller(self, angle_deg, wavelength_nm=None) -> np.ndarray:
        """Mueller matrix at a mount angle [deg] and wavelength [nm]. [(..., 4, 4)]"""
        return jones_to_mueller(rotate_jones(self.jones0(wavelength_nm), angle_deg))


@dataclass(frozen=True)
class Solution:
    """One setting of the mounts.

    Attributes
    ----------
    angles_deg : tuple of float
        Mount angle of each element, light meeting element 0 first, in [0, 180). [deg]
    stokes : ndarray (4,)
        Output Stokes vector, normalised to S0 = 1.
    sphere_angle_deg : float
        Angle on the Poincaré sphere from the output to the target. [deg]
    """

    angles_deg: tuple[float, ...]
    stokes: np.ndarray
    sphere_angle_deg: float


@dataclass(frozen=True)
class Aim:
    """The result of aiming.

    Attributes
    ----------
    solutions : tuple of Solution
        Every solution (modulo 180° per mount) when the target is reachable; otherwise the
        settings that come closest.  Sorted by sphere angle, then by angles.
    reachable : bool
        True when a solution lies within :data:`REACH_TOLERANCE_DEG` of the target.
    reason : str or None
        One sentence on why the target is out of reach (None when reachable).
    family : str or None
        When the solutions form a continuum (e.g. a circular target from linear light through
        a half-wave and a quarter-wave plate), a sentence describing it; ``solutions`` then
        holds representatives.
    wavelength_nm : float or None
        The wavelength aimed at (None for ideal plates). [nm]
    """

    solutions: tuple[Solution, ...]
    reachable: bool
    reason: str | None = None
    family: str | None = None
    wavelength_nm: float | None = None


# ----------------------------------------------------------------------------- mounts


def ideal_plate(waves: float, label: str | None = None) -> Mount:
    """An ideal linear retarder of ``waves`` waves of retardance, in a rotation mount.

    Parameters
    ----------
    waves : float
        Retardance, positive and finite. [waves]
    """
    w = float(waves)
    if not np.isfinite(w) or w <= 0:
        raise RetolError("waves", f"must be positive and finite, got {waves!r}", "e.g. 0.25")
    names = {0.25: "ideal quarter-wave plate", 0.5: "ideal half-wave plate"}
    J = retarder_jones(2 * np.pi * w, 0.0)

    def jones0(wavelength_nm=None):
        shape = np.shape(wavelength_nm) if wavelength_nm is not None else ()
        return np.broadcast_to(J, shape + (2, 2))

    return Mount(label or names.get(w, f"ideal {w:g}-wave plate"), jones0, ideal=True)


def real_plate(
    plate: Plate, temperature_c=None, extrapolate: bool = False, label: str | None = None
) -> Mount:
    """A designed plate (:func:`tolerance.plates.design_plate`) in a rotation mount.

    The mount angle is the angle of the plate's fast axis (its ``axis_deg`` is taken out), at
    normal incidence and ``temperature_c`` [°C] (default: the materials' reference).
    """

    def jones0(wavelength_nm):
        J = plate_jones(plate, wavelength_nm, temperature_c=temperature_c, extrapolate=extrapolate)
        return rotate_jones(J, -plate.axis_deg)

    return Mount(label or f"{plate.name} {plate.waves:g}-wave plate", jones0, ideal=False)


# ----------------------------------------------------------------------------- forward


def train_mueller(mounts, angles_deg, wavelength_nm=None) -> np.ndarray:
    """Mueller matrix of a train of mounted plates, element 0 met first. [(..., 4, 4)]

    ``angles_deg`` has shape (..., n_elements); the wavelength [nm] broadcasts against it.
    """
    a = np.asarray(angles_deg, dtype=float)
    M = None
    for k, m in enumerate(mounts):
        Mk = m.mueller(a[..., k], wavelength_nm)
        M = Mk if M is None else Mk @ M
    return M


def output_stokes(stokes_in, mounts, angles_deg, wavelength_nm=None) -> np.ndarray:
    """Stokes vector behind a train, normalised to S0 = 1. [(..., 4)]"""
    M = train_mueller(mounts, angles_deg, wavelength_nm)
    S = np.einsum("...ij,...j->...i", M, np.asarray(stokes_in, dtype=float))
    return S / S[..., :1]


def band_states(stokes_in, mounts, angles_deg, wavelengths_nm, target=None) -> dict:
    """The output over a band at fixed mount angles.

    Parameters
    ----------
    stokes_in : array_like (4,)
        Input Stokes vector.
    mounts : sequence of Mount
    angles_deg : sequence of float
        One angle per mount. [deg]
    wavelengths_nm : array_like (n,)
        [nm]
    target : array_like (3,), optional
        Target 3-vector; when given, the sphere angle to it is returned too.

    Returns
    -------
    dict of ndarray
        ``wavelength_nm`` (n,), ``stokes`` (n, 4) with S0 = 1, the ellipse of
        :func:`tolerance.polarization.ellipse` and, with a target, ``sphere_angle_deg`` (n,).
    """
    wl = np.asarray(wavelengths_nm, dtype=float)
    a = np.broadcast_to(np.asarray(angles_deg, dtype=float), wl.shape + (len(mounts),))
    S = output_stokes(stokes_in, mounts, a, wl)
    out = {"wavelength_nm": wl, "stokes": S, **ellipse(S)}
    if target is not None:
        out["sphere_angle_deg"] = sphere_angle_deg(S, target)
    return out


# ----------------------------------------------------------------------------- one plate


def _closed_form_single(s, t):
    """Mount angles [deg] where a linear retarder can map s to t (axis ⊥ to s − t in S1-S2).

    A linear retarder turns the sphere about an axis (cos 2θ, sin 2θ, 0) and so keeps each
    state's component along that axis: (cos 2θ, sin 2θ)·(s − t)₁₂ = 0.  Two angles 90° apart;
    none when s and t have the same S1-S2 part (then any axis keeps the component).
    """
    d = s[:2] - t[:2]
    if np.hypot(*d) < _TINY:
        return []
    th = 0.5 * np.degrees(np.arctan2(d[1], d[0])) + 45.0
    return [th, th + 90.0]


def _grid_minima(residual, n):
    """Local minima of |residual(θ)|² over [0, 180) on an n-point grid, then polished.

    Each grid minimum is refined with Brent's method (``scipy.optimize.minimize_scalar``) and
    polished by ``scipy.optimize.least_squares`` on the residual vector, which is linear in θ
    near a solution and so finds it to round-off (the squared norm alone only to √ε).
    """
    grid = np.arange(n) * (180.0 / n)
    vals = np.sum(residual(grid[:, None]) ** 2, axis=-1)
    if np.ptp(vals) < 1e-24:  # the output does not depend on the angle
        return list(grid[:1]), True
    lo = (vals <= np.roll(vals, 1)) & (vals <= np.roll(vals, -1))
    step = 180.0 / n
    found = []
    for g in grid[lo]:
        r = optimize.minimize_scalar(
            lambda x: float(np.sum(residual(np.array([[x]])) ** 2)),
            bounds=(g - step, g + step),
            method="bounded",
            options={"xatol": 1e-10},
        )
        p = optimize.least_squares(
            lambda x: residual(x[None, :])[0],
            [r.x],
            method="lm",
            xtol=1e-15,
            ftol=1e-15,
            gtol=1e-15,
        )
        found.append(float(p.x[0]))
    return found, False


def _collect(stokes_in, mounts, t, candidates, wavelength_nm):
    """Evaluate candidate settings; keep the reachable ones (or the closest), deduplicated."""
    cand = np.mod(np.asarray(candidates, dtype=float).reshape(-1, len(mounts)), 180.0)
    S = output_stokes(stokes_in, mounts, cand, wavelength_nm)
    ang = sphere_angle_deg(S, t)
    best = float(np.min(ang))
    reachable = best < REACH_TOLERANCE_DEG
    keep = ang < REACH_TOLERANCE_DEG if reachable else ang <= best + 1e-7
    order = np.lexsort((*cand.T[::-1], ang))
    sols: list[Solution] = []
    for i in order:
        if not keep[i]:
            continue
        a = cand[i]
        if any(_same_angles(a, s.angles_deg) for s in sols):
            continue
        a = np.where(a >= 180.0, a - 180.0, a) + 0.0  # np.mod(-tiny, 180) rounds to 180
        sols.append(Solution(tuple(float(x) for x in a), S[i], float(ang[i])))
    sols.sort(key=lambda s: (round(s.sphere_angle_deg, 9), s.angles_deg))
    return tuple(sols), reachable


def _same_angles(a, b):
    d = np.mod(np.asarray(a) - np.asarray(b), 180.0)
    return bool(np.all(np.minimum(d, 180.0 - d) < SAME_ANGLE_DEG))


def aim_plate(stokes_in, target, mount: Mount, wavelength_nm=None) -> Aim:
    """Mount angles of one plate that turn ``stokes_in`` into ``target``.

    Parameters
    ----------
    stokes_in : array_like (4,)
        Input Stokes vector (any state, partially polarized allowed).
    target : array_like (3,)
        Target, a unit Stokes 3-vector.
    mount : Mount
        The plate (:func:`ideal_plate` of any retardance, or :func:`real_plate`).
    wavelength_nm : float, optional
        Wavelength for a real plate. [nm]

    Returns
    -------
    Aim
        Every angle reaching the target (modulo 180°), or the closest reachable state and why.

    Notes
    -----
    A linear retarder keeps the state's component along its axis (cos 2θ, sin 2θ, 0), so the
    candidates are the two angles with (cos 2θ, sin 2θ)·(s − t)₁₂ = 0 [1]; each is verified by
    the forward product.  A grid of 360 angles, refined with Brent's method
    (``scipy.optimize.minimize_scalar``) on |ŝ_out − t|² and polished by least squares on
    ŝ_out − t, finds the closest state when none reaches the target, and the solutions of an
    elliptical retarder (a general stack).

    References
    ----------
    .. [1] R. M. A. Azzam and N. M. Bashara, *Ellipsometry and Polarized Light* (North-Holland,
       1977), sec. 2.6.
    """
    S_in = np.asarray(stokes_in, dtype=float)
    s, t = polarized_direction(S_in), np.asarray(target, dtype=float)
    _check_polarized(S_in)

    def residual(th):
        return polarized_direction(output_stokes(S_in, [mount], th, wavelength_nm)) - t

    grid, flat = _grid_minima(residual, 360)
    sols, reachable = _collect(S_in, [mount], t, _closed_form_single(s, t) + grid, wavelength_nm)
    family = None
    if flat:
        family = "the plate leaves this input unchanged at every angle"
    reason = None if reachable else _why_single(S_in, t, mount, wavelength_nm, sols)
    return Aim(sols, reachable, reason, family, wavelength_nm)


def _why_single(S_in, t, mount, wavelength_nm, sols):
    """One sentence on why one plate cannot reach the target."""
    delta = float(np.degrees(equivalent_retardance(mount.jones0(wavelength_nm))))
    e_in = ellipse(S_in)
    gap = sols[0].sphere_angle_deg
    if abs(delta - 90.0) < 1e-6 and int(e_in["rotation"]) == 0:
        alpha = float(e_in["azimuth_deg"])
        e_t = ellipse(np.concatenate([[1.0], t]))
        psi = float(e_t["azimuth_deg"])
        d = np.radians(abs(psi - alpha) % 90.0)
        ratio = min(np.tan(d), 1.0 / np.tan(d)) if d > 0 else 0.0
        return (
            f"a quarter-wave plate turns linear light at {alpha:g} deg into an ellipse whose axes "
            f"lie along the plate's axes with axial ratio tan|theta - {alpha:g} deg| (or its "
            f"inverse): with its axes along the target's ({psi:.4g} and {psi + 90:.4g} deg) it "
            f"gives axial ratio {ratio:.4g}, not {float(e_t['axial_ratio']):.4g}; the closest "
            f"reachable state is {gap:.4g} deg away on the Poincare sphere"
        )
    return (
        f"one plate of {delta:.4g} deg retardance turns the input about an axis on the Poincare "
        f"sphere's equator, so it reaches only a one-parameter family of states; the closest is "
        f"{gap:.4g} deg from the target"
    )


def _check_polarized(S_in):
    if np.linalg.norm(S_in[1:4]) <= _TINY * max(S_in[0], 1e-300):
        raise RetolError(
            "input",
            "unpolarized light cannot be aimed: plates leave it unpolarized",
            "give a degree of polarization above 0",
        )


# ----------------------------------------------------------------------------- HWP + QWP


def _psi(v):
    """Azimuth [deg] of the major axis of a 3-vector."""
    return 0.5 * np.degrees(np.arctan2(v[1], v[0]))


def _hwp_qwp_settings(s, t):
    """Closed-form (h, q) pairs for ideal plates, or None when out of reach.

    The quarter-wave plate at q undoes to u = Mq⁻¹ t with u3 = ρ sin(2ψ_t − 2q), ρ = |t₁₂|; the
    half-wave plate negates S3, so u3 = −s3: sin(2ψ_t − 2q) = −s3/ρ.  The half-wave plate then
    mirrors the azimuth, ψ_u = 2h − ψ_s, so h = (ψ_u + ψ_s)/2 modulo 90°.
    """
    rho, s3 = np.hypot(t[0], t[1]), s[2]
    psi_t = _psi(t)
    qwp = ideal_plate(0.25).mueller
    if rho < _TINY:  # circular target: any q works if the input is linear
        if abs(s3) > 1e-9:
            return None, None
        qs = [_psi(s) + 45.0, _psi(s) + 135.0]
        family = (
            "a circular target from linear light: any quarter-wave angle q works, with the "
            "half-wave plate at (input azimuth + q -/+ 45 deg)/2; representatives shown"
        )
    else:
        x = -s3 / rho
        if abs(x) > 1.0 + 1e-12:
            return None, None
        a = 0.5 * np.degrees(np.arcsin(np.clip(x, -1.0, 1.0)))
        qs = [psi_t - a, psi_t - 90.0 + a]
        family = None
    pairs = []
    circular_in = np.hypot(s[0], s[1]) < _TINY
    for q in qs:
        u = qwp(q)[1:, 1:].T @ t
        if circular_in:
            hs = [0.0, 45.0, 90.0, 135.0]
            family = (
                "circular input: the half-wave plate only reverses the handedness, so any "
                "half-wave angle works; representatives shown"
            )
        else:
            h = 0.5 * (_psi(u) + _psi(s))
            hs = [h, h + 90.0]
        pairs += [(h, q) for h in hs]
    return pairs, family


def aim_hwp_qwp(stokes_in, target) -> Aim:
    """All settings of an ideal half-wave plate then quarter-wave plate that reach a target.

    Parameters
    ----------
    stokes_in : array_like (4,)
        Input Stokes vector (any state, partially polarized allowed).
    target : array_like (3,)
        Target, a unit Stokes 3-vector.

    Returns
    -------
    Aim
        ``angles_deg`` = (half-wave angle, quarter-wave angle) modulo 180°.  From linear input:
        the quarter-wave plate lies along the target's major axis or across it (two choices),
        the half-wave plate at two angles 90° apart for each (the same matrix up to sign):
        four settings.

    Notes
    -----
    Inverting the quarter-wave plate at q maps the target t to u with
    u₃ = ρ·sin(2ψ_t − 2q), ρ = (t₁² + t₂²)^½.  The half-wave plate reverses S3 and mirrors the
    azimuth about its axis, ψ_u = 2h − ψ_s, so u₃ = −s₃ fixes q,
    sin(2ψ_t − 2q) = −s₃/ρ, and h = (ψ_u + ψ_s)/2 (mod 90°).  From linear input (s₃ = 0):
    q = ψ_t or ψ_t + 90°.  An elliptical input (ellipticity χ_in) reaches only states with
    |χ| ≤ 45° − |χ_in|; beyond, the closest state is on that boundary at the target's azimuth.
    Each setting is verified by the forward product.

    References
    ----------
    .. [1] R. M. A. Azzam and N. M. Bashara, *Ellipsometry and Polarized Light* (North-Holland,
       1977), sec. 2.6 (retarders as rotations of the Poincaré sphere).
    .. [2] E. Hecht, *Optics*, 4th ed. (Addison-Wesley, 2002), sec. 8.7 (half- and quarter-wave
       plates).
    """
    S_in = np.asarray(stokes_in, dtype=float)
    _check_polarized(S_in)
    s, t = polarized_direction(S_in), polarized_direction(target)
    mounts = hwp_qwp_ideal()
    pairs, family = _hwp_qwp_settings(s, t)
    reason = None
    if pairs is None:
        # out of reach: aim at the nearest reachable state, |t3| = |s12|, at the target's azimuth
        rho_in = float(np.hypot(s[0], s[1]))
        rho_t = float(np.hypot(t[0], t[1]))
        sign = 1.0 if t[2] >= 0 else -1.0
        lat_rho = abs(s[2])
        if rho_t > _TINY:
            nearest = np.array([t[0] / rho_t * lat_rho, t[1] / rho_t * lat_rho, sign * rho_in])
        else:
            nearest = np.array([lat_rho, 0.0, sign * rho_in])
        pairs, family = _hwp_qwp_settings(s, nearest / np.linalg.norm(nearest))
        chi_in = 0.5 * np.degrees(np.arcsin(np.clip(s[2], -1, 1)))
        chi_t = 0.5 * np.degrees(np.arcsin(np.clip(t[2], -1, 1)))
        reason = (
            f"a half-wave plate keeps the size of the input's ellipticity angle "
            f"({abs(chi_in):.4g} deg), so the quarter-wave plate after it reaches ellipticity "
            f"angles only up to 45 - {abs(chi_in):.4g} = {45 - abs(chi_in):.4g} deg in size; "
            f"the target's is {abs(chi_t):.4g} deg"
        )
    sols, reachable = _collect(S_in, mounts, t, pairs, None)
    if reachable:
        reason = None
    elif reason is None:  # pragma: no cover - the closed form failed its own check
        reason = "no setting reaches the target"
    return Aim(sols, reachable, reason, family, None)


def hwp_qwp_ideal() -> tuple[Mount, Mount]:
    """An ideal half-wave plate then an ideal quarter-wave plate."""
    return ideal_plate(0.5), ideal_plate(0.25)


# ----------------------------------------------------------------------------- real trains


def aim_train(
    stokes_in, target, mounts, wavelength_nm, seeds, family=None, grid_step_deg=30.0
) -> Aim:
    """Mount angles of a train of (real) plates, by least squares from seed settings.

    Parameters
    ----------
    stokes_in : array_like (4,)
        Input Stokes vector.
    target : array_like (3,)
        Target, a unit Stokes 3-vector.
    mounts : sequence of Mount
        The plates, light meeting element 0 first.
    wavelength_nm : float
        Wavelength aimed at. [nm]
    seeds : array_like (k, n_elements)
        Starting settings [deg], e.g. the ideal solutions of :func:`aim_hwp_qwp`.
    family : str, optional
        Carried into the result (from the ideal solution) when the seeds are representatives of
        a continuum; then only the seeds are refined.
    grid_step_deg : float
        Spacing of a grid of further starting settings over [0, 180) per mount (0: none). [deg]

    Notes
    -----
    Each start is refined with ``scipy.optimize.least_squares`` on the residual ŝ_out − t (three
    components, unit vectors); results are verified, deduplicated modulo 180° and, when none
    reaches the target, the closest kept.  Real plates designed at ``wavelength_nm`` are ideal
    there, so the seeds are already the answer; elsewhere they move a little.
    """
    S_in = np.asarray(stokes_in, dtype=float)
    _check_polarized(S_in)
    t = polarized_direction(target)

    def residual(a):
        return polarized_direction(output_stokes(S_in, mounts, a, wavelength_nm)) - t

    starts = [np.atleast_2d(np.asarray(seeds, dtype=float))]
    if family is None and grid_step_deg:
        # a coarse grid of starts as well, so that no solution of plates far from ideal is missed
        g = np.arange(0.0, 180.0, grid_step_deg)
        mesh = np.meshgrid(*([g] * len(mounts)), indexing="ij")
        starts.append(np.stack([m.ravel() for m in mesh], axis=-1))
    found = []
    for x0 in np.concatenate(starts):
        r = optimize.least_squares(
            residual, x0, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15, x_scale=90.0
        )
        found.append(r.x)
    sols, reachable = _collect(S_in, mounts, t, found, wavelength_nm)
    reason = None
    if not reachable:
        gap = sols[0].sphere_angle_deg
        where = f"at {wavelength_nm:g} nm " if wavelength_nm is not None else ""
        reason = (
            f"{where}these plates come no closer than {gap:.4g} deg to the target on the "
            f"Poincare sphere"
        )
    return Aim(sols, reachable, reason, family, wavelength_nm)


# ----------------------------------------------------------------------------- registry


@dataclass(frozen=True)
class PlateSet:
    """A named set of plates that ``retol aim`` can aim.

    Attributes
    ----------
    waves : tuple of float
        Retardance of each plate, light meeting the first first. [waves]
    names : tuple of str
        Short names of the plates, in order ("hwp", "qwp").
    help : str
        One line for the CLI.
    """

    waves: tuple[float, ...]
    names: tuple[str, ...]
    help: str


#: Name -> plate set; the CLI's ``--plates`` choices are read from it.
PLATE_SETS = {
    "qwp": PlateSet((0.25,), ("qwp",), "one quarter-wave plate"),
    "hwp+qwp": PlateSet(
        (0.5, 0.25), ("hwp", "qwp"), "a half-wave plate, then a quarter-wave plate"
    ),
}


def plate_mounts(plates: str, design=None, extrapolate: bool = False) -> list[Mount]:
    """The mounts of a plate set of :data:`PLATE_SETS`.

    Parameters
    ----------
    plates : str
        A key of :data:`PLATE_SETS`.
    design : callable, optional
        ``design(waves) -> Plate`` building each real plate, e.g.
        ``lambda w: design_plate("zero-order", "quartz", w, 632.8)``; absent, ideal plates.
    extrapolate : bool
        Let real plates be evaluated outside their materials' valid range (with a warning).
    """
    if plates not in PLATE_SETS:
        raise RetolError(
            "plates", f"unknown plate set {plates!r}", f"use {' or '.join(PLATE_SETS)}"
        )
    ps = PLATE_SETS[plates]
    if design is None:
        return [ideal_plate(w) for w in ps.waves]
    return [real_plate(design(w), extrapolate=extrapolate) for w in ps.waves]


def aim(stokes_in, target, plates: str = "qwp", mounts=None, wavelength_nm=None) -> Aim:
    """Aim a plate set of :data:`PLATE_SETS` at a target.

    Parameters
    ----------
    stokes_in : array_like (4,)
        Input Stokes vector (any state).
    target : array_like (3,)
        Target, a unit Stokes 3-vector.
    plates : str
        A key of :data:`PLATE_SETS`.
    mounts : sequence of Mount, optional
        Real plates from :func:`plate_mounts`; absent, ideal plates (solved in closed form).
    wavelength_nm : float
        Wavelength to aim real plates at (e.g. their design wavelength). [nm]

    Returns
    -------
    Aim
    """
    ideal = plate_mounts(plates)
    if mounts is None:
        if plates == "hwp+qwp":
            return aim_hwp_qwp(stokes_in, target)
        return aim_plate(stokes_in, target, ideal[0])
    if len(mounts) != len(ideal):
        raise RetolError("plates", f"{plates} needs {len(ideal)} plates", "give one per plate")
    if wavelength_nm is None and not all(m.ideal for m in mounts):
        raise RetolError("wavelength", "real plates need a wavelength to aim at", "e.g. 632.8nm")
    if len(mounts) == 1:
        return aim_plate(stokes_in, target, mounts[0], wavelength_nm)
    first = aim_hwp_qwp(stokes_in, target)
    seeds = [s.angles_deg for s in first.solutions]
    return aim_train(stokes_in, target, mounts, wavelength_nm, seeds, family=first.family)
