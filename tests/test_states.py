"""Any polarization state: goals, inputs, the partial polarizer, Mueller matrices and distances.

Sources
-------
[sympy] sympy.physics.optics.polarization (SymPy): ``stokes_vector(psi, chi, p, I)`` is the
    formula S = I (1, p cos2chi cos2psi, p cos2chi sin2psi, p sin2chi); ``jones_vector``,
    ``phase_retarder``, ``quarter_wave_retarder``, ``linear_polarizer`` and ``mueller_matrix``
    (which maps the coherency vector with S3 = 2 Im(Ex Ey*), this package's sign, so its Mueller
    matrices compare directly); ``jones_2_stokes`` has the opposite sign of S3, so S3 taken from
    it is negated.
[AB] R. M. A. Azzam and N. M. Bashara, Ellipsometry and Polarized Light (North-Holland, 1977):
    tan chi = +/- b/a (sec. 1.3); the Poincare sphere, on which a state sits at longitude 2psi
    and latitude 2chi (sec. 2.6) (from memory).
[Goldstein] D. H. Goldstein, Polarized Light, 3rd ed. (CRC Press, 2011): a retarder's Mueller
    matrix is a rotation, so it keeps S0 and the degree of polarization; the linear
    diattenuator's Mueller matrix (ch. 5) (from memory).
[Hecht] E. Hecht, Optics (Addison-Wesley): right-circular = clockwise looking toward the source;
    a quarter-wave plate with its fast axis vertical turns +45 deg linear light right-circular
    (from memory).
[Malus] Malus' law for a partial polarizer: linear light at angle a to the axis transmits
    k1 cos^2 a + k2 sin^2 a (each field component is attenuated separately; common practice).
[derived] Derived in the test's docstring.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from hypothesis import given
from hypothesis import strategies as st
from sympy.physics.optics import polarization as spol

from tolerance.errors import RetolError
from tolerance.polarization import (
    azimuth_error_deg,
    ellipse,
    elliptical_goal_vector,
    ellipticity_error_deg,
    ellipticity_from_axial_ratio,
    fidelity,
    goal_vector,
    handedness_sign,
    input_stokes,
    jones_to_mueller,
    jones_to_stokes,
    linear_jones,
    polarized_direction,
    polarizer_jones,
    polarizer_mueller,
    polarizer_output_stokes,
    retarder_jones,
    retarder_mueller,
    rotate_jones,
    sphere_angle_deg,
    stokes_from_ellipse,
    stokes_goal_vector,
)

_psi, _chi, _p, _i, _th, _de, _r = sp.symbols("psi chi p I theta delta r", real=True)
_a, _b, _c, _d = sp.symbols("a b c d", real=True)
SYM_STOKES_VECTOR = sp.lambdify((_psi, _chi, _p, _i), spol.stokes_vector(_psi, _chi, _p, _i))
SYM_JONES = sp.lambdify((_psi, _chi), spol.jones_vector(_psi, _chi), "numpy")
SYM_JONES_2_STOKES = sp.lambdify(
    (_a, _b, _c, _d), spol.jones_2_stokes(sp.Matrix([_a + sp.I * _b, _c + sp.I * _d])), "numpy"
)
SYM_RETARDER_MUELLER = sp.lambdify(
    (_th, _de), spol.mueller_matrix(spol.phase_retarder(_th, _de)), "numpy"
)
SYM_POLARIZER_MUELLER = sp.lambdify(
    (_th, _r),
    spol.mueller_matrix(
        spol.linear_polarizer(_th) + sp.sqrt(_r) * spol.linear_polarizer(_th + sp.pi / 2)
    ),
    "numpy",
)


def sympy_stokes_ours(E):
    """[sympy] jones_2_stokes of a Jones vector, S3 negated to this package's sign."""
    ex, ey = complex(E[0]), complex(E[1])
    s = np.asarray(SYM_JONES_2_STOKES(ex.real, ex.imag, ey.real, ey.imag), dtype=float).ravel()
    s[3] = -s[3]
    return s


def sym_stokes_vector(psi_deg, chi_deg, p=1.0, intensity=1.0):
    return np.asarray(
        SYM_STOKES_VECTOR(np.radians(psi_deg), np.radians(chi_deg), p, intensity), dtype=float
    ).ravel()


angles = st.floats(-180.0, 180.0, allow_nan=False)
chis = st.floats(-45.0, 45.0, allow_nan=False)
ratios = st.floats(0.0, 1.0, allow_nan=False)
hands = st.sampled_from(["right", "left"])


# ----------------------------------------------------------------------------- goals


@given(psi=angles, chi=chis)
def test_elliptical_goal_from_ellipticity_equals_sympy_stokes_vector(psi, chi):
    # [sympy] stokes_vector(psi, chi): the same formula, chi > 0 right-handed in both.
    g = elliptical_goal_vector(psi, ellipticity_deg=chi)
    np.testing.assert_allclose(g, sym_stokes_vector(psi, chi)[1:], atol=1e-12)


@given(psi=angles, r=ratios, hand=hands)
def test_elliptical_goal_from_axial_ratio_matches_a_sympy_field(psi, r, hand):
    """[AB] tan chi = +/- b/a; [sympy] jones_vector(psi, chi') in sympy's S3 sign has our
    ellipticity -chi', so the field of our goal is jones_vector(psi, -chi)."""
    h = 1 if hand == "right" else -1
    chi = h * np.degrees(np.arctan(r))
    E = np.asarray(SYM_JONES(np.radians(psi), -np.radians(chi)), dtype=complex).ravel()
    expect = sympy_stokes_ours(E)[1:]
    g = elliptical_goal_vector(psi, axial_ratio=r, handedness=hand)
    np.testing.assert_allclose(g, expect, atol=1e-12)
    e = ellipse(np.concatenate([[1.0], g]))
    assert float(e["axial_ratio"]) == pytest.approx(r, abs=1e-9)
    if r > 1e-6:
        assert int(e["rotation"]) == h


def test_hecht_right_circular_goal():
    # [Hecht] right-circular is S3 = +1, and a QWP with its fast axis vertical makes it from
    # +45 deg linear light.
    g = elliptical_goal_vector(0.0, axial_ratio=1.0, handedness="right")
    np.testing.assert_allclose(g, [0.0, 0.0, 1.0], atol=1e-15)
    out = jones_to_stokes(retarder_jones(np.pi / 2, 90.0) @ linear_jones(45.0))
    assert float(sphere_angle_deg(out, g)) == pytest.approx(0.0, abs=1e-9)
    np.testing.assert_allclose(goal_vector("circular", handedness=1), g, atol=1e-15)


def test_linear_goal_needs_no_handedness_and_agrees_with_goal_vector():
    for psi in (0.0, 30.0, -60.0, 90.0):
        g = elliptical_goal_vector(psi, axial_ratio=0.0)
        np.testing.assert_allclose(g, goal_vector("linear", psi), atol=1e-15)


def test_goal_vector_dispatches_new_states_and_keeps_old_ones():
    np.testing.assert_allclose(
        goal_vector("elliptical", 30.0, "right", axial_ratio=0.5),
        elliptical_goal_vector(30.0, axial_ratio=0.5, handedness="right"),
    )
    np.testing.assert_allclose(goal_vector("stokes", stokes=[0.0, 0.6, -0.8]), [0.0, 0.6, -0.8])
    np.testing.assert_allclose(goal_vector("circular", handedness=-1), [0.0, 0.0, -1.0])
    np.testing.assert_allclose(goal_vector("linear", 45.0), [0.0, 1.0, 0.0], atol=1e-15)


def test_goal_vectorised():
    psi = np.array([[0.0, 30.0, 60.0], [90.0, -30.0, 10.0]])
    g = elliptical_goal_vector(psi, axial_ratio=0.25, handedness=-1)
    assert g.shape == (2, 3, 3)
    np.testing.assert_allclose(np.linalg.norm(g, axis=-1), 1.0)
    np.testing.assert_allclose(
        ellipse(np.concatenate([np.ones((2, 3, 1)), g], -1))["axial_ratio"], 0.25
    )


def test_ellipticity_from_axial_ratio():
    # [AB] chi = atan(b/a), signed by handedness
    assert float(ellipticity_from_axial_ratio(1.0, 1)) == pytest.approx(45.0)
    assert float(ellipticity_from_axial_ratio(np.tan(np.radians(20.0)), -1)) == pytest.approx(-20)
    assert float(ellipticity_from_axial_ratio(0.0, 1)) == 0.0


@pytest.mark.parametrize(
    "kwargs, field",
    [
        ({"axial_ratio": 1.5, "handedness": "right"}, "axial_ratio"),
        ({"axial_ratio": -0.1, "handedness": "right"}, "axial_ratio"),
        ({"axial_ratio": float("nan"), "handedness": "right"}, "axial_ratio"),
        ({"axial_ratio": 0.5}, "handedness"),
        ({"axial_ratio": 0.5, "handedness": "up"}, "handedness"),
        ({}, "axial_ratio"),
        ({"axial_ratio": 0.5, "ellipticity_deg": 10.0, "handedness": "right"}, "axial_ratio"),
        ({"ellipticity_deg": 50.0}, "ellipticity_deg"),
        ({"ellipticity_deg": float("inf")}, "ellipticity_deg"),
        ({"ellipticity_deg": -20.0, "handedness": "right"}, "handedness"),
    ],
)
def test_bad_goal_one_line_error_naming_the_key(kwargs, field):
    with pytest.raises(RetolError) as exc:
        elliptical_goal_vector(30.0, **kwargs)
    assert exc.value.field == field
    assert "\n" not in str(exc.value)


def test_bad_azimuth_rejected():
    with pytest.raises(RetolError, match="azimuth_deg"):
        elliptical_goal_vector(float("nan"), axial_ratio=0.0)


def test_handedness_sign():
    assert handedness_sign("Right") == 1 and handedness_sign(" left ") == -1
    assert handedness_sign("clockwise") == 1 and handedness_sign(-1) == -1
    for bad in ("up", 0, 2, None, "linear"):
        with pytest.raises(RetolError):
            handedness_sign(bad)


def test_stokes_goal_normalises_and_checks():
    np.testing.assert_allclose(
        stokes_goal_vector([0.7071, 0.0, 0.7071]), [np.sqrt(0.5), 0.0, np.sqrt(0.5)], atol=1e-12
    )
    for bad in (
        [1.0, 1.0, 0.0],
        [0.5, 0.0, 0.0],
        [0.0, 0.0, 0.0],
        [1.0, 0.0],
        [float("nan"), 0.0, 1.0],
        "a,b,c",
    ):
        with pytest.raises(RetolError, match="stokes"):
            stokes_goal_vector(bad)


# ----------------------------------------------------------------------------- inputs


@given(psi=angles, chi=chis, p=st.floats(0.0, 1.0), i0=st.floats(0.1, 10.0))
def test_input_stokes_equals_sympy_stokes_vector(psi, chi, p, i0):
    # [sympy] stokes_vector(psi, chi, p, I)
    S = input_stokes(psi, chi, p, i0)
    np.testing.assert_allclose(S, sym_stokes_vector(psi, chi, p, i0), atol=1e-12)
    assert float(ellipse(S)["dop"]) == pytest.approx(p, abs=1e-12)


@pytest.mark.parametrize(
    "kwargs, field",
    [
        ({"dop": 1.2}, "dop"),
        ({"dop": -0.1}, "dop"),
        ({"dop": float("nan")}, "dop"),
        ({"ellipticity_deg": 46.0}, "ellipticity_deg"),
        ({"azimuth_deg": float("inf")}, "azimuth_deg"),
        ({"intensity": 0.0}, "intensity"),
    ],
)
def test_bad_input_state(kwargs, field):
    with pytest.raises(RetolError) as exc:
        input_stokes(**kwargs)
    assert exc.value.field == field


# ----------------------------------------------------------------------------- Mueller


@given(theta=angles, delta=st.floats(0.0, 4 * np.pi))
def test_retarder_mueller_equals_sympy_and_the_jones_route(theta, delta):
    # [sympy] mueller_matrix(phase_retarder(theta, delta)); and A (J x J*) A^-1 of our Jones.
    ref = np.asarray(SYM_RETARDER_MUELLER(np.radians(theta), delta), dtype=complex).real
    np.testing.assert_allclose(retarder_mueller(delta, theta), ref, atol=1e-12)
    np.testing.assert_allclose(jones_to_mueller(retarder_jones(delta, theta)), ref, atol=1e-12)


@given(theta=angles, delta=st.floats(0.0, 4 * np.pi), psi=angles, chi=chis)
def test_mueller_acts_like_jones_on_a_pure_state(theta, delta, psi, chi):
    # The Mueller product of a pure state equals the Stokes vector of the Jones product [sympy].
    E = np.asarray(SYM_JONES(np.radians(psi), np.radians(chi)), dtype=complex).ravel()
    out = retarder_jones(delta, theta) @ E
    np.testing.assert_allclose(
        retarder_mueller(delta, theta) @ jones_to_stokes(E), sympy_stokes_ours(out), atol=1e-12
    )


@given(theta=angles, delta=st.floats(0.0, 4 * np.pi))
def test_rotate_jones_is_the_mounted_retarder(theta, delta):
    np.testing.assert_allclose(
        rotate_jones(retarder_jones(delta, 0.0), theta), retarder_jones(delta, theta), atol=1e-12
    )


@given(
    theta=angles,
    delta=st.floats(0.0, 4 * np.pi),
    psi=angles,
    chi=chis,
    p=st.floats(0.0, 1.0),
)
def test_ideal_retarder_preserves_degree_of_polarization(theta, delta, psi, chi, p):
    """[Goldstein] a retarder's Mueller matrix is a rotation of (S1, S2, S3): it keeps S0 and
    |(S1, S2, S3)|, hence the degree of polarization of a partially polarized input."""
    S = input_stokes(psi, chi, p)
    out = retarder_mueller(delta, theta) @ S
    assert out[0] == pytest.approx(1.0, abs=1e-12)
    assert float(ellipse(out)["dop"]) == pytest.approx(p, abs=1e-12)


# ----------------------------------------------------------------------------- polarizer


@given(theta=angles, er=st.floats(1.0, 60.0))
def test_partial_polarizer_mueller_equals_sympy(theta, er):
    """[sympy] mueller_matrix of the Jones matrix P(theta) + sqrt(r) P(theta + 90), r = k2/k1
    = 10^(-ER/10), P = linear_polarizer; [Goldstein] the closed form of the diattenuator."""
    r = 10 ** (-er / 10)
    ref = np.asarray(SYM_POLARIZER_MUELLER(np.radians(theta), r), dtype=complex).real
    np.testing.assert_allclose(polarizer_mueller(theta, er), ref, atol=1e-12)
    np.testing.assert_allclose(jones_to_mueller(polarizer_jones(theta, er)), ref, atol=1e-12)


def test_ideal_polarizer_equals_sympy_linear_polarizer():
    M = sp.lambdify(_th, spol.mueller_matrix(spol.linear_polarizer(_th)), "numpy")
    for theta in (0.0, 30.0, -75.0):
        ref = np.asarray(M(np.radians(theta)), dtype=complex).real
        np.testing.assert_allclose(polarizer_mueller(theta), ref, atol=1e-12)


@pytest.mark.parametrize("er", [10.0, 20.0, 30.0, 47.0])
@pytest.mark.parametrize("theta", [0.0, 25.0, -60.0])
def test_extinction_ratio_and_malus(er, theta):
    # [Malus] linear light at angle a to the axis: k1 cos^2 a + k2 sin^2 a, k1 = 1.
    k2 = 10 ** (-er / 10)
    M = polarizer_mueller(theta, er)
    for a in (0.0, 20.0, 45.0, 90.0):
        T = (M @ jones_to_stokes(linear_jones(theta + a)))[0]
        c = np.cos(np.radians(a))
        assert T == pytest.approx(c**2 + k2 * (1 - c**2), rel=1e-12)
    along = (M @ jones_to_stokes(linear_jones(theta)))[0]
    across = (M @ jones_to_stokes(linear_jones(theta + 90.0)))[0]
    assert 10 * np.log10(along / across) == pytest.approx(er, rel=1e-12)


@pytest.mark.parametrize("er", [3.0, 20.0, 40.0])
def test_polarizer_output_from_unpolarized_light(er):
    """[derived] unpolarized light (1, 0, 0, 0) leaves with S0 = (k1 + k2)/2 and
    S1' = (k1 - k2)/2 along the axis: DOP = (k1 - k2)/(k1 + k2) = (ER - 1)/(ER + 1)."""
    ratio = 10 ** (er / 10)
    S = polarizer_output_stokes(30.0, er)
    e = ellipse(S)
    assert float(e["dop"]) == pytest.approx((ratio - 1) / (ratio + 1), rel=1e-12)
    assert float(e["azimuth_deg"]) == pytest.approx(30.0, abs=1e-9)
    assert int(e["rotation"]) == 0
    np.testing.assert_allclose(
        polarizer_output_stokes(30.0), stokes_from_ellipse(30.0, 0.0), atol=1e-12
    )


@pytest.mark.parametrize("bad", [0.0, -3.0, float("nan")])
def test_bad_extinction(bad):
    with pytest.raises(RetolError, match="extinction_db"):
        polarizer_mueller(0.0, bad)


# ----------------------------------------------------------------------------- distances


@given(a=angles, b=angles)
def test_sphere_angle_of_two_linear_states(a, b):
    """[AB] a linear state at azimuth a sits at longitude 2a on the equator: two of them are
    2|a - b| apart, folded into [0, 180] (azimuths are modulo 180 deg)."""
    d = (2 * abs(a - b)) % 360.0
    expect = min(d, 360.0 - d)
    got = sphere_angle_deg(jones_to_stokes(linear_jones(a)), goal_vector("linear", b))
    assert float(got) == pytest.approx(expect, abs=1e-9)


@given(p1=angles, c1=chis, p2=angles, c2=chis)
def test_sphere_angle_closed_form_and_fidelity(p1, c1, p2, c2):
    """[derived] the dot product of the unit vectors (cos2c cos2p, cos2c sin2p, sin2c):
    cos T = cos2c1 cos2c2 cos2(p1 - p2) + sin2c1 sin2c2 (spherical law of cosines); for pure
    states fidelity (1 + s.g)/2 = cos^2(T/2)."""
    r = np.radians
    cos_t = np.cos(2 * r(c1)) * np.cos(2 * r(c2)) * np.cos(2 * r(p1 - p2)) + np.sin(
        2 * r(c1)
    ) * np.sin(2 * r(c2))
    S = stokes_from_ellipse(p1, c1)
    g = elliptical_goal_vector(p2, ellipticity_deg=c2)
    t = float(sphere_angle_deg(S, g))
    assert np.cos(np.radians(t)) == pytest.approx(np.clip(cos_t, -1, 1), abs=1e-12)
    assert float(fidelity(S, g)) == pytest.approx(np.cos(np.radians(t) / 2) ** 2, abs=1e-12)


def test_sphere_angle_special_cases_and_precision():
    right, left = goal_vector("circular", handedness=1), goal_vector("circular", handedness=-1)
    assert float(sphere_angle_deg(right, left)) == pytest.approx(180.0)
    assert float(sphere_angle_deg(right, goal_vector("linear", 17.0))) == pytest.approx(90.0)
    # unpolarized light is at the centre: s.g = 0 for every goal
    assert float(sphere_angle_deg([1.0, 0.0, 0.0, 0.0], right)) == pytest.approx(90.0)
    # two linear states 5e-10 deg apart are 1e-9 deg apart on the sphere; arccos would give 0
    t = sphere_angle_deg(jones_to_stokes(linear_jones(20.0)), goal_vector("linear", 20.0 + 5e-10))
    assert float(t) == pytest.approx(1e-9, rel=1e-5)
    # 4-vectors and 3-vectors mix and broadcast
    many = stokes_from_ellipse(np.array([0.0, 45.0, 90.0]), 0.0)
    np.testing.assert_allclose(
        sphere_angle_deg(many, [1.0, 0.0, 0.0]), [0.0, 90.0, 180.0], atol=1e-9
    )


@given(eps=st.floats(-20.0, 20.0))
def test_clocked_qwp_sphere_angle_is_twice_the_clocking(eps):
    """[derived] linear light at 0 through a QWP at 45 + eps: the plate turns s = (1, 0, 0) by 90
    deg about a = (cos 2(45+eps), sin 2(45+eps), 0) = (-sin 2eps, cos 2eps, 0); the output is
    (a.s) a + (a x s)-part with S3 = |a x s| = cos 2eps, so it is 2|eps| from right-circular."""
    S = jones_to_stokes(retarder_jones(np.pi / 2, 45.0 + eps) @ linear_jones(0.0))
    t = float(sphere_angle_deg(S, goal_vector("circular", handedness=1)))
    assert t == pytest.approx(2 * abs(eps), abs=1e-9)


@pytest.mark.parametrize(
    "state, goal, expect",
    [
        (89.0, -89.0, -2.0),
        (-89.0, 89.0, 2.0),
        (10.0, 30.0, -20.0),
        (30.0, 10.0, 20.0),
        (0.0, 90.0, 90.0),
        (45.0, 45.0, 0.0),
    ],
)
def test_azimuth_error_linear(state, goal, expect):
    # [derived] azimuths are directions modulo 180 deg: the error folds into (-90, 90].
    S = jones_to_stokes(linear_jones(state))
    assert float(azimuth_error_deg(S, goal_vector("linear", goal))) == pytest.approx(expect)


@given(p=angles, c=st.floats(-40.0, 40.0), pg=angles, cg=st.floats(-40.0, 40.0))
def test_azimuth_error_is_the_folded_difference(p, c, pg, cg):
    d = float(
        azimuth_error_deg(stokes_from_ellipse(p, c), elliptical_goal_vector(pg, ellipticity_deg=cg))
    )
    assert -90.0 < d <= 90.0
    diff = (p - pg - d) % 180.0
    assert min(diff, 180.0 - diff) < 1e-6


def test_azimuth_error_near_circular():
    right = goal_vector("circular", handedness=1)
    # a circular goal asks for no azimuth
    assert float(azimuth_error_deg(stokes_from_ellipse(37.0, 20.0), right)) == 0.0
    # a circular state has no major axis to offer an elliptical goal: the largest error
    g = elliptical_goal_vector(30.0, axial_ratio=0.5, handedness="right")
    assert float(azimuth_error_deg(stokes_from_ellipse(0.0, 45.0), g)) == 90.0
    # vectorised
    S = stokes_from_ellipse(np.array([10.0, 20.0]), 0.0)
    np.testing.assert_allclose(azimuth_error_deg(S, goal_vector("linear", 0.0)), [10.0, 20.0])


def test_ellipticity_error():
    right, left = goal_vector("circular", handedness=1), goal_vector("circular", handedness=-1)
    assert float(ellipticity_error_deg(stokes_from_ellipse(0.0, 45.0), left)) == pytest.approx(90)
    assert float(ellipticity_error_deg(stokes_from_ellipse(0.0, 40.0), right)) == pytest.approx(-5)
    g = elliptical_goal_vector(30.0, axial_ratio=0.5, handedness="right")
    chi_g = np.degrees(np.arctan(0.5))  # [AB]
    S = stokes_from_ellipse(12.0, 20.0, dop=0.7)
    assert float(ellipticity_error_deg(S, g)) == pytest.approx(20.0 - chi_g, abs=1e-12)
    assert float(ellipticity_error_deg([1.0, 0.0, 0.0, 0.0], g)) == pytest.approx(-chi_g)


def test_polarized_direction():
    np.testing.assert_allclose(polarized_direction([2.0, 0.0, 0.0, 1.0]), [0.0, 0.0, 1.0])
    np.testing.assert_allclose(polarized_direction([0.0, 3.0, 4.0]), [0.0, 0.6, 0.8])
    np.testing.assert_allclose(polarized_direction([1.0, 0.0, 0.0, 0.0]), [0.0, 0.0, 0.0])
