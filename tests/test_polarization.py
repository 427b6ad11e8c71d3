"""Jones matrices, Stokes vectors and the polarization ellipse.

Sources
-------
[sympy] sympy.physics.optics.polarization (SymPy): ``phase_retarder``, ``quarter_wave_retarder``,
    ``half_wave_retarder``, ``jones_vector``, ``jones_2_stokes``.  Its ``jones_2_stokes`` gives
    S3 = -2 Im(Ex Ey*), the opposite sign to ours (S3 = +2 Im(Ex Ey*) > 0 for a field turning
    clockwise looking toward the source), so every S3 taken from sympy is negated before
    comparing; the Jones matrices themselves are the same.
[Hecht] E. Hecht, Optics (Addison-Wesley), chapter on polarization: a quarter-wave plate with its
    fast axis vertical turns +45 deg linear light into right-circular light, which turns clockwise
    as seen looking toward the source (from memory).
[Born-Wolf] M. Born and E. Wolf, Principles of Optics (Cambridge): right-handed = clockwise
    looking toward the source; Stokes parameters and the ellipse angles 2psi = atan2(S2, S1),
    sin 2chi = S3/P (from memory).
[Malus] Malus' law, I = I0 cos^2(angle between polarizer and analyzer) (any optics text, e.g.
    Hecht).
[time-domain] Derived for this suite: the real field E(t) = Re[(Ex, Ey) exp(-i w t)] is sampled
    over a period; its largest and smallest magnitudes give the ellipse axes and its turning sense
    the rotation, independently of any Stokes formula.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from hypothesis import given
from hypothesis import strategies as st
from sympy.physics.optics import polarization as spol

from tolerance.polarization import (
    EXTINCTION_CAP_DB,
    analyzer_extinction_db,
    ellipse,
    extinction_db,
    fidelity,
    goal_vector,
    handedness_name,
    jones_to_stokes,
    linear_jones,
    retarder_jones,
    rotation_name,
    stokes_from_ellipse,
)

# ----------------------------------------------------------------------------- sympy references

_th, _de = sp.symbols("theta delta", real=True)
_a, _b, _c, _d = sp.symbols("a b c d", real=True)
SYM_RETARDER = sp.lambdify((_th, _de), spol.phase_retarder(_th, _de), "numpy")
SYM_QWP = sp.lambdify(_th, spol.quarter_wave_retarder(_th), "numpy")
SYM_HWP = sp.lambdify(_th, spol.half_wave_retarder(_th), "numpy")
SYM_JONES = sp.lambdify((_th, _de), spol.jones_vector(_th, _de), "numpy")
SYM_STOKES = sp.lambdify(
    (_a, _b, _c, _d), spol.jones_2_stokes(sp.Matrix([_a + sp.I * _b, _c + sp.I * _d])), "numpy"
)


def sympy_stokes_ours(E):
    """Stokes of a Jones vector from sympy's jones_2_stokes, S3 negated to our sign [sympy]."""
    ex, ey = complex(E[0]), complex(E[1])
    s = np.asarray(SYM_STOKES(ex.real, ex.imag, ey.real, ey.imag), dtype=float).ravel()
    s[3] = -s[3]
    return s


def field_trace(E, n=7200):
    """[time-domain] the real field over one period, t from 0 to T."""
    wt = np.linspace(0.0, 2 * np.pi, n, endpoint=False)
    ph = np.exp(-1j * wt)
    return np.real(E[0] * ph), np.real(E[1] * ph)


def traced_ellipse(E):
    """[time-domain] major-axis azimuth [deg, mod 180], b/a, and the turning sense.

    Turning sense: +1 clockwise looking toward the source (angle decreasing, with angles counted
    counter-clockwise from x as seen looking toward the source), -1 counter-clockwise, 0 linear.
    """
    x, y = field_trace(E)
    r = np.hypot(x, y)
    i = int(np.argmax(r))
    az = np.degrees(np.arctan2(y[i], x[i])) % 180.0
    ratio = r.min() / r.max()
    lz = np.mean(x * np.gradient(y) - y * np.gradient(x))  # angular momentum sign
    sense = 0 if ratio < 1e-6 else (1 if lz < 0 else -1)
    return az, ratio, sense


def same_axis(a, b, tol=1e-6):
    """Two axis directions equal modulo 180 deg."""
    d = (a - b) % 180.0
    return min(d, 180.0 - d) < tol


angles = st.floats(-360.0, 360.0, allow_nan=False)
retardances = st.floats(0.0, 4 * np.pi, allow_nan=False)


# ----------------------------------------------------------------------------- Jones matrices


@given(theta=angles, delta=retardances)
def test_retarder_equals_sympy_phase_retarder(theta, delta):
    # [sympy] phase_retarder(theta [rad], delta): same matrix, theta = fast axis.
    ours = retarder_jones(delta, theta)
    ref = np.asarray(SYM_RETARDER(np.radians(theta), delta), dtype=complex)
    np.testing.assert_allclose(ours, ref, atol=1e-12)


@given(theta=angles)
def test_quarter_and_half_wave_equal_sympy(theta):
    # [sympy] quarter_wave_retarder, half_wave_retarder.
    t = np.radians(theta)
    np.testing.assert_allclose(
        retarder_jones(np.pi / 2, theta), np.asarray(SYM_QWP(t), dtype=complex), atol=1e-12
    )
    np.testing.assert_allclose(
        retarder_jones(np.pi, theta), np.asarray(SYM_HWP(t), dtype=complex), atol=1e-12
    )


@given(theta=angles, delta=retardances)
def test_retarder_unitary_det_one(theta, delta):
    J = retarder_jones(delta, theta)
    np.testing.assert_allclose(J @ J.conj().T, np.eye(2), atol=1e-12)
    assert np.linalg.det(J) == pytest.approx(1.0, abs=1e-12)


def test_retarder_broadcasts():
    J = retarder_jones(np.linspace(0, np.pi, 5)[:, None], np.array([0.0, 30.0, 60.0]))
    assert J.shape == (5, 3, 2, 2)
    np.testing.assert_allclose(J[2, 1], retarder_jones(np.pi / 2, 30.0))


@given(
    plates=st.lists(st.tuples(retardances, angles), min_size=1, max_size=6),
    psi=angles,
    chi=st.floats(-45.0, 45.0),
)
def test_lossless_stack_preserves_intensity_and_stokes_match_sympy(plates, psi, chi):
    # A stack of retarders is lossless; Stokes of the output vs [sympy] jones_2_stokes (S3 flipped).
    E = np.asarray(SYM_JONES(np.radians(psi), np.radians(chi)), dtype=complex).ravel()
    J = np.eye(2, dtype=complex)
    for delta, theta in plates:
        J = retarder_jones(delta, theta) @ J
    out = J @ E
    assert np.vdot(out, out).real == pytest.approx(np.vdot(E, E).real, abs=1e-12)
    S = jones_to_stokes(out)
    np.testing.assert_allclose(S, sympy_stokes_ours(out), atol=1e-12)
    assert S[0] ** 2 == pytest.approx(S[1] ** 2 + S[2] ** 2 + S[3] ** 2, abs=1e-12)


@given(psi=st.floats(-89.0, 89.0), chi=st.floats(-44.0, 44.0))
def test_sympy_jones_vector_ellipse(psi, chi):
    # [sympy] jones_vector(psi, chi) has tilt psi and, in sympy's S3 sign, circularity chi; in ours
    # the ellipticity angle is -chi.
    E = np.asarray(SYM_JONES(np.radians(psi), np.radians(chi)), dtype=complex).ravel()
    e = ellipse(jones_to_stokes(E))
    assert same_axis(float(e["azimuth_deg"]), psi, tol=1e-7)
    assert float(e["ellipticity_angle_deg"]) == pytest.approx(-chi, abs=1e-7)


@given(psi=angles, chi=st.floats(-45.0, 45.0), dop=st.floats(0.0, 1.0))
def test_stokes_from_ellipse_round_trip(psi, chi, dop):
    # [Born-Wolf] S = S0 (1, P cos2chi cos2psi, P cos2chi sin2psi, P sin2chi).
    S = stokes_from_ellipse(psi, chi, dop=dop)
    e = ellipse(S)
    assert float(e["dop"]) == pytest.approx(dop, abs=1e-12)
    if dop > 1e-6:
        assert float(e["ellipticity_angle_deg"]) == pytest.approx(chi, abs=1e-5)
        if abs(chi) < 44.0:
            assert same_axis(float(e["azimuth_deg"]), psi, tol=1e-6)


# ----------------------------------------------------------------------------- ellipse facts


@given(theta=angles, d=st.floats(0.5, 44.5))
def test_qwp_less_than_45_from_fast_axis(theta, d):
    # Linear input at alpha = theta - d, 0 < d < 45: major axis on the fast axis, b/a = tan d,
    # clockwise looking toward the source (the field turns from the fast axis toward the input).
    alpha = theta - d
    out = retarder_jones(np.pi / 2, theta) @ linear_jones(alpha)
    e = ellipse(jones_to_stokes(out))
    assert same_axis(float(e["azimuth_deg"]), theta)
    assert float(e["axial_ratio"]) == pytest.approx(np.tan(np.radians(d)), abs=1e-9)
    assert int(e["rotation"]) == 1 and rotation_name(e["rotation"]) == "clockwise"
    # [time-domain] independent of the Stokes formulas
    az, ratio, sense = traced_ellipse(out)
    assert same_axis(az, theta, tol=0.1)
    assert ratio == pytest.approx(np.tan(np.radians(d)), abs=1e-5)
    assert sense == 1


@given(theta=angles, d=st.floats(45.5, 89.5))
def test_qwp_more_than_45_from_fast_axis(theta, d):
    # 45 < theta - alpha < 90: major axis on the slow axis (theta + 90), b/a = cot d.
    out = retarder_jones(np.pi / 2, theta) @ linear_jones(theta - d)
    e = ellipse(jones_to_stokes(out))
    assert same_axis(float(e["azimuth_deg"]), theta + 90.0)
    assert float(e["axial_ratio"]) == pytest.approx(1 / np.tan(np.radians(d)), abs=1e-9)
    assert int(e["rotation"]) == 1
    az, ratio, sense = traced_ellipse(out)  # [time-domain]
    assert same_axis(az, theta + 90.0, tol=0.1) and sense == 1


@given(theta=angles, d=st.floats(0.5, 89.5))
def test_qwp_input_on_the_other_side_turns_counterclockwise(theta, d):
    # theta < alpha: the mirror case turns counter-clockwise.
    out = retarder_jones(np.pi / 2, theta) @ linear_jones(theta + d)
    e = ellipse(jones_to_stokes(out))
    assert int(e["rotation"]) == -1 and rotation_name(e["rotation"]) == "counterclockwise"
    assert traced_ellipse(out)[2] == -1  # [time-domain]


@given(theta=angles, alpha=angles)
def test_hwp_mirrors_linear_input(theta, alpha):
    # Half-wave plate: linear at alpha -> linear at 2 theta - alpha (mod 180) (common practice).
    out = retarder_jones(np.pi, theta) @ linear_jones(alpha)
    e = ellipse(jones_to_stokes(out))
    assert same_axis(float(e["azimuth_deg"]), 2 * theta - alpha)
    assert float(e["axial_ratio"]) == pytest.approx(0.0, abs=1e-9)
    assert int(e["rotation"]) == 0 and rotation_name(0) == "linear"


def test_hecht_right_circular():
    # [Hecht] QWP fast axis vertical, +45 deg linear -> right-circular, clockwise looking toward
    # the source ([Born-Wolf] the same naming).
    out = retarder_jones(np.pi / 2, 90.0) @ linear_jones(45.0)
    S = jones_to_stokes(out)
    np.testing.assert_allclose(S, [1.0, 0.0, 0.0, 1.0], atol=1e-12)
    e = ellipse(S)
    assert handedness_name(e["rotation"]) == "right"
    assert rotation_name(e["rotation"]) == "clockwise"
    assert float(e["ellipticity_angle_deg"]) == pytest.approx(45.0)
    assert float(e["axial_ratio"]) == pytest.approx(1.0)
    assert traced_ellipse(out)[2] == 1  # [time-domain] clockwise
    # and sympy calls the same field S3 = -1 in its own sign [sympy]
    assert sympy_stokes_ours(out)[3] == pytest.approx(1.0)


@pytest.mark.parametrize(
    "S",
    [
        [1.0, 0.0, 0.0, 1.0],
        [1.0, 0.0, 0.0, -1.0],
        [1.0, 0.0, 0.0, 1.0 + 4e-16],
        [1.0, 1e-17, -1e-17, -1.0 - 4e-16],
        [1.0, 1.0, 0.0, 0.0],
        [1.0, -1.0, 0.0, 0.0],
        [1.0, 0.0, 1.0, 0.0],
        [1.0, 0.0, 0.0, 0.0],
        [0.0, 0.0, 0.0, 0.0],
    ],
)
def test_exactly_circular_linear_or_unpolarized_no_nan(S):
    e = ellipse(np.array(S))
    for k, v in e.items():
        assert np.all(np.isfinite(v)), k
    assert -90.0 < float(e["azimuth_deg"]) <= 90.0
    assert 0.0 <= float(e["axial_ratio"]) <= 1.0 + 1e-12


def test_circular_from_a_real_qwp_no_nan():
    out = retarder_jones(np.pi / 2, 45.0) @ linear_jones(0.0)
    e = ellipse(jones_to_stokes(out))
    assert float(e["axial_ratio"]) == pytest.approx(1.0)
    assert np.isfinite(float(e["ellipticity_angle_deg"]))


@given(S=st.tuples(st.floats(-1, 1), st.floats(-1, 1), st.floats(-1, 1)))
def test_azimuth_range(S):
    e = ellipse(np.array([2.0, *S]))
    assert -90.0 < float(e["azimuth_deg"]) <= 90.0


@pytest.mark.parametrize("az, expect", [(-90.0, 90.0), (90.0, 90.0), (270.0, 90.0), (-45.0, -45.0),
                                        (135.0, -45.0), (0.0, 0.0), (180.0, 0.0)])
def test_azimuth_folding(az, expect):
    e = ellipse(jones_to_stokes(linear_jones(az)))
    assert float(e["azimuth_deg"]) == pytest.approx(expect, abs=1e-9)


def test_ellipse_vectorised():
    S = stokes_from_ellipse(np.array([[0.0, 30.0], [60.0, -30.0]]), 10.0)
    e = ellipse(S)
    assert e["azimuth_deg"].shape == (2, 2)
    np.testing.assert_allclose(e["azimuth_deg"], [[0.0, 30.0], [60.0, -30.0]], atol=1e-9)


# ----------------------------------------------------------------------------- figures of merit


@pytest.mark.parametrize(
    "goal", [goal_vector("circular", handedness=1), goal_vector("circular", handedness=-1),
             goal_vector("linear", 0.0), goal_vector("linear", 37.0)],
)
def test_unpolarized_fidelity_is_half_and_extinction_zero(goal):
    S = np.array([1.0, 0.0, 0.0, 0.0])
    assert float(fidelity(S, goal)) == pytest.approx(0.5)
    assert float(extinction_db(S, goal)) == pytest.approx(0.0, abs=1e-12)
    assert float(fidelity(3.0 * S, goal)) == pytest.approx(0.5)  # normalised by S0


def test_fidelity_of_pure_states():
    right = stokes_from_ellipse(0.0, 45.0)
    assert float(fidelity(right, goal_vector("circular", handedness=1))) == pytest.approx(1.0)
    assert float(fidelity(right, goal_vector("circular", handedness=-1))) == pytest.approx(0.0)
    # [Malus] linear at a to a linear goal at b: cos^2(a - b)
    for a, b in [(0.0, 30.0), (10.0, -50.0), (0.0, 90.0)]:
        f = float(fidelity(stokes_from_ellipse(a, 0.0), goal_vector("linear", b)))
        assert f == pytest.approx(np.cos(np.radians(a - b)) ** 2, abs=1e-12)


@pytest.mark.parametrize("a, b", [(0.0, 30.0), (10.0, 80.0), (0.0, 45.0), (5.0, 5.5), (0.0, 89.0)])
def test_extinction_db_is_malus_ratio(a, b):
    # [Malus] pass / block through an analyzer at b and crossed to it: cos^2 / sin^2.
    S = jones_to_stokes(linear_jones(a))
    expect = 10 * np.log10(np.cos(np.radians(a - b)) ** 2 / np.sin(np.radians(a - b)) ** 2)
    assert float(analyzer_extinction_db(S, b)) == pytest.approx(expect, rel=1e-9, abs=1e-9)


def test_extinction_db_formula_partial_polarization_and_cap():
    # 10 log10((1 + s.g) / (1 - s.g)) with s normalised by S0.
    S = stokes_from_ellipse(0.0, 0.0, dop=0.8, intensity=2.0)
    g = goal_vector("linear", 0.0)
    assert float(extinction_db(S, g)) == pytest.approx(10 * np.log10(1.8 / 0.2))
    exact = jones_to_stokes(linear_jones(0.0))
    assert float(extinction_db(exact, g)) == pytest.approx(EXTINCTION_CAP_DB)
    assert float(extinction_db(exact, goal_vector("linear", 90.0))) == pytest.approx(
        -EXTINCTION_CAP_DB
    )
