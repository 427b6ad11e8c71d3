"""Any target state: elliptical and Stokes goals, angle metrics, real inputs and trains.

Sources
-------
[derived] Derived in the test's docstring.
[Goldstein] D. H. Goldstein, Polarized Light, 3rd ed. (CRC Press, 2011), ch. 5-6: a linear
    retarder's Mueller matrix has first row and column (1, 0, 0, 0), so it passes unpolarized
    light unchanged and keeps the degree of polarization.
[AB] R. M. A. Azzam and N. M. Bashara, Ellipsometry and Polarized Light (North-Holland, 1977),
    sec. 2.6: a retarder of retardance delta turns the Poincare sphere by delta about its axis.
[sympy] sympy.physics.optics.polarization (SymPy): ``jones_vector(psi, chi)`` (our
    ellipticity -chi), ``quarter_wave_retarder(theta)``, ``jones_2_stokes`` (S3 of the opposite
    sign to this package's, so negated).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import sympy as sp
from sympy.physics.optics import polarization as spol

from tolerance.aiming import aim
from tolerance.errors import RetolError
from tolerance.montecarlo import Engine, sample_inputs
from tolerance.polarization import elliptical_goal_vector, input_stokes, sphere_angle_deg
from tolerance.spec import loads

_th, _psi, _chi = sp.symbols("theta psi chi", real=True)
_a, _b, _c, _d = sp.symbols("a b c d", real=True)
SYM_QWP = sp.lambdify(_th, spol.quarter_wave_retarder(_th), "numpy")
SYM_JONES = sp.lambdify((_psi, _chi), spol.jones_vector(_psi, _chi), "numpy")
SYM_STOKES = sp.lambdify(
    (_a, _b, _c, _d), spol.jones_2_stokes(sp.Matrix([_a + sp.I * _b, _c + sp.I * _d])), "numpy"
)

LASER = """
[wavelength]
start = "633nm"
stop = "633nm"
step = "1nm"
[source]
shape = "laser"
center = "633nm"
"""


def qwp_spec(goal: str, inp: str = "azimuth_deg = 45", tol: str = "", axis=0.0) -> str:
    return f"""title = "t"
{LASER}
[input]
{inp}
[goal]
{goal}
[[candidate]]
name = "qwp"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "633nm"
axis_deg = {axis}
[tolerances]
{tol}
"""


def study_of(text):
    return loads(text, "t.toml")


CIRCULAR_SPHERE = 'state = "circular"\nhandedness = "{h}"\nmetric = "sphere_angle_deg"\nmax = {m}'


def _right_hand():
    """Which hand the nominal plate at 0 deg lit at 45 deg gives (our sign of S3)."""
    st = study_of(qwp_spec('state = "circular"\nmetric = "fidelity"\nmin = 0.5'))
    eng = Engine(st, samples=256, seed=1)
    s3 = eng.nominal(eng.case(0)).design_stokes[2]
    return "right" if s3 > 0 else "left"


def test_sphere_angle_yield_clocking_closed_form():
    """[derived] Clocking-only error e ~ U(-w, w) on a quarter-wave plate lit at 45 deg.

    With the plate at e, the input lies 45 - e from its fast axis; a QWP turns the sphere by
    90 deg about the plate's axis (2e on the equator) [AB], which takes the linear state at
    2*45 deg to latitude 2*(45 - |e|): the sphere angle from the circular goal is 2|e|.  So
    yield(max = L) = P(2|e| <= L) = min(1, L / (2w)).  Checked per sample (the drawn clocking)
    to 1e-7 deg with the real zero-order quartz plate at its design wavelength, and the yield
    against the closed form within 4 binomial sigmas.
    """
    w, L, n = 2.0, 2.0, 8192
    st = study_of(
        qwp_spec(
            CIRCULAR_SPHERE.format(h=_right_hand(), m=L), tol=f"clocking_deg = {{uniform = {w}}}"
        )
    )
    eng = Engine(st, samples=n, seed=3)
    case = eng.case(0)
    worst, _ = eng.pass_values(case)
    z, u = eng.draws("clocking_deg", 0, 0, n)
    e = case.tolerances["clocking_deg"].draw(z, u, center=0.0)
    np.testing.assert_allclose(worst, 2 * np.abs(e), atol=1e-7)
    y = eng.pass_rate(case)
    p = min(1.0, L / (2 * w))
    assert abs(y - p) < 4 * np.sqrt(p * (1 - p) / n)
    # smaller is better: a looser max never lowers the yield
    st2 = dataclasses.replace(st, goal=dataclasses.replace(st.goal, max=3.0))
    eng2 = Engine(st2, samples=n, seed=3)
    assert eng2.pass_rate(eng2.case(0)) >= y
    assert abs(eng2.pass_rate(eng2.case(0)) - 0.75) < 4 * np.sqrt(0.75 * 0.25 / n)


def test_fidelity_yield_for_an_elliptical_goal():
    """[derived] An elliptical goal at azimuth 0, b/a = tan 20 deg, from a QWP at 0 lit at
    20 deg (the ellipse's axes along the plate's [sympy]); with clocking e the output is the
    QWP at e acting on linear 20 deg, checked per sample with the [sympy] forward product, and
    the yield of fidelity >= 0.999 equals the share of those sympy fidelities that pass."""
    n = 2048
    hand = _right_hand()
    # the hand of a QWP at 0 lit at 20 deg is the same as lit at 45 deg (0 < 20 < 90)
    goal = (
        f'state = "elliptical"\nazimuth_deg = 0\naxial_ratio = {np.tan(np.radians(20)):.15f}\n'
        f'handedness = "{hand}"\nmetric = "fidelity"\nmin = 0.999'
    )
    st = study_of(qwp_spec(goal, inp="azimuth_deg = 20", tol="clocking_deg = {sigma = 1.5}"))
    eng = Engine(st, samples=n, seed=5)
    case = eng.case(0)
    assert eng.nominal(case).worst == pytest.approx(1.0, abs=1e-9)
    worst, _ = eng.pass_values(case)
    z, u = eng.draws("clocking_deg", 0, 0, n)
    e = case.tolerances["clocking_deg"].draw(z, u, center=0.0)
    E = np.asarray(SYM_JONES(np.radians(20.0), 0.0), dtype=complex).ravel()
    fid = np.empty(n)
    for i in range(n):
        out = np.asarray(SYM_QWP(np.radians(e[i])), dtype=complex) @ E
        s = np.asarray(SYM_STOKES(out[0].real, out[0].imag, out[1].real, out[1].imag), float)
        s = s.ravel() / s.ravel()[0]
        s[3] = -s[3]
        fid[i] = 0.5 * (1 + s[1:] @ case.goal)
    np.testing.assert_allclose(worst, fid, atol=1e-9)
    assert eng.pass_rate(case) == pytest.approx(np.mean(fid >= 0.999), abs=2 / n)


def test_partially_polarized_input_keeps_its_dop():
    """[Goldstein] An ideal retarder keeps the degree of polarization: with a laser, the
    spectral DOP of every sample equals the input's 0.7, with clocking and thickness errors."""
    st = study_of(
        qwp_spec(
            'state = "circular"\nmetric = "fidelity"\nmin = 0.5',
            inp="azimuth_deg = 30\nellipticity_deg = 10\ndop = 0.7",
            tol="clocking_deg = {sigma = 2}\nthickness_um = {sigma = 0.05}",
        )
    )
    eng = Engine(st, samples=512, seed=2)
    case = eng.case(0)
    _, sst = eng.pass_values(case)
    np.testing.assert_allclose(np.linalg.norm(sst, axis=1), 0.7, rtol=1e-12)
    nom = eng.nominal(case)
    assert np.linalg.norm(nom.spec_stokes) == pytest.approx(0.7, rel=1e-12)
    # behind a 20 dB polarizer: (100 - 1) / (100 + 1) [Goldstein]
    st2 = study_of(
        qwp_spec('state = "circular"\nmetric = "fidelity"\nmin = 0.5', "extinction_db = 20")
    )
    e2 = Engine(st2, samples=256, seed=2)
    assert np.linalg.norm(e2.nominal(e2.case(0)).spec_stokes) == pytest.approx(99 / 101, 1e-12)


@pytest.mark.parametrize("psi,chi,theta", [(20.0, 10.0, 0.0), (-35.0, -25.0, 30.0), (80, 44, 7)])
def test_elliptical_input_against_sympy(psi, chi, theta):
    """[sympy] The kernel's output for an elliptical input (psi, chi) through the real QWP at
    theta at its design wavelength equals jones_2_stokes(QWP(theta) . jones_vector(psi, -chi))
    with S3 negated (sympy's sign), to 1e-9; the input alone is input_stokes(psi, chi)."""
    st = study_of(
        qwp_spec(
            'state = "circular"\nmetric = "fidelity"\nmin = 0.5',
            inp=f"azimuth_deg = {psi}\nellipticity_deg = {chi}",
            axis=theta,
        )
    )
    eng = Engine(st, samples=256, seed=2)
    got = eng.nominal(eng.case(0)).design_stokes
    E = np.asarray(SYM_JONES(np.radians(psi), -np.radians(chi)), dtype=complex).ravel()
    s_in = np.asarray(SYM_STOKES(E[0].real, E[0].imag, E[1].real, E[1].imag), float).ravel()
    s_in[3] = -s_in[3]
    np.testing.assert_allclose(s_in / s_in[0], input_stokes(psi, chi), atol=1e-12)
    out = np.asarray(SYM_QWP(np.radians(theta)), dtype=complex) @ E
    s = np.asarray(SYM_STOKES(out[0].real, out[0].imag, out[1].real, out[1].imag), float).ravel()
    s = s / s[0]
    s[3] = -s[3]
    np.testing.assert_allclose(got, s[1:], atol=1e-9)


TRAIN = """title = "train"
{laser}
[input]
azimuth_deg = {inp}
[goal]
state = "elliptical"
azimuth_deg = {az}
axial_ratio = {ar}
handedness = "{hand}"
metric = "sphere_angle_deg"
max = 0.5
[[candidate]]
name = "hwp+qwp"
[[candidate.elements]]
construction = "zero-order"
material = "quartz"
waves = 0.5
design = "633nm"
axis_deg = {h}
[[candidate.elements]]
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "633nm"
axis_deg = {q}
[tolerances]
{tol}
"""


def test_train_aimed_reaches_an_elliptical_target():
    """A half-wave then a quarter-wave plate, angles from tolerance.aiming (ideal plates), reach
    the elliptical goal with the real plates at their design wavelength: 100 % nominal pass
    (sphere angle < 1e-6 deg), and light meets element 0 (the HWP) first: the swapped order
    misses."""
    target = elliptical_goal_vector(30.0, 0.5, "right")
    sol = aim(input_stokes(10.0), target, plates="hwp+qwp").solutions[0]
    h, q = sol.angles_deg
    text = TRAIN.format(laser=LASER, inp=10, az=30, ar=0.5, hand="right", h=h, q=q, tol="")
    st = study_of(text)
    eng = Engine(st, samples=256, seed=1)
    case = eng.case(0)
    nom = eng.nominal(case)
    assert nom.worst < 1e-6
    assert sphere_angle_deg(nom.design_stokes, target) < 1e-6
    assert eng.pass_rate(case) == 1.0
    swapped = text.replace("waves = 0.5\n", "waves = X\n").replace(
        "waves = 0.25\n", "waves = 0.5\n"
    )
    swapped = swapped.replace("waves = X\n", "waves = 0.25\n")
    e2 = Engine(study_of(swapped), samples=256, seed=1)
    assert e2.nominal(e2.case(0)).worst > 1.0


def test_train_clocking_independent_per_element():
    """Each element's mount draws its own clocking (stream index = element): the two layers'
    fast-axis errors are uncorrelated and each has the spec's sigma."""
    st = study_of(
        TRAIN.format(
            laser=LASER,
            inp=0,
            az=0,
            ar=0.5,
            hand="right",
            h=10,
            q=20,
            tol="clocking_deg = {sigma = 1.0}",
        )
    )
    eng = Engine(st, samples=8192, seed=4)
    case = eng.case(0)
    inputs, _ = sample_inputs(case, st, eng.draws, 0, 8192)
    ang = 0.5 * np.degrees(np.arctan2(inputs.s2, inputs.c2))
    e0, e1 = ang[:, 0] - 10.0, ang[:, 1] - 20.0
    assert abs(np.corrcoef(e0, e1)[0, 1]) < 0.05
    assert np.std(e0) == pytest.approx(1.0, rel=0.05)
    assert np.std(e1) == pytest.approx(1.0, rel=0.05)


SPHERE_MAX_1 = 'metric = "sphere_angle_deg"\nmax = 1'
FID_MIN = 'metric = "fidelity"\nmin = 0.9'


@pytest.mark.parametrize(
    "goal,inp,field",
    [
        (
            'state = "elliptical"\nazimuth_deg = 0\naxial_ratio = 0.5\n' + SPHERE_MAX_1,
            "",
            "handedness",
        ),
        (
            'state = "elliptical"\naxial_ratio = 1.5\nhandedness = "right"\n' + FID_MIN,
            "",
            "axial_ratio",
        ),
        (
            'state = "elliptical"\naxial_ratio = 0.5\nhandedness = "right"\n'
            + SPHERE_MAX_1
            + "\nmin = 0",
            "",
            "[goal]",
        ),
        ('state = "circular"\nmetric = "sphere_angle_deg"\nmin = 1', "", "[goal].min"),
        (
            'state = "elliptical"\nhandedness = "right"\nmetric = "fidelity"\nmin = 0.9',
            "",
            "axial_ratio",
        ),
        (
            'state = "stokes"\nstokes = [0.5, 0.5, 0.5]\nmetric = "sphere_angle_deg"\nmax = 1',
            "",
            "stokes",
        ),
        ('state = "linear"\naxial_ratio = 0.5\nmetric = "fidelity"\nmin = 0.9', "", "axial_ratio"),
        ('state = "circular"\nmetric = "axial_ratio"\nmin = 0.9', "dop = 1.2", "dop"),
        (
            'state = "circular"\nmetric = "axial_ratio"\nmin = 0.9',
            "ellipticity_deg = 50",
            "ellipticity_deg",
        ),
        (
            'state = "circular"\nmetric = "axial_ratio"\nmin = 0.9',
            "extinction_db = 30\ndop = 0.9",
            "extinction_db",
        ),
    ],
)
def test_bad_input_one_line(goal, inp, field):
    with pytest.raises(RetolError) as err:
        study_of(qwp_spec(goal, inp=inp or "azimuth_deg = 0"))
    msg = str(err.value)
    assert "\n" not in msg and field in msg


def test_goal_json_round_trip():
    """A max goal and an elliptical input survive Study.to_dict / from_dict."""
    st = study_of(
        qwp_spec(
            'state = "stokes"\nstokes = [0.6, 0.0, 0.8]\nmetric = "sphere_angle_deg"\nmax = 2',
            inp="azimuth_deg = 5\nellipticity_deg = 3\ndop = 0.9",
        )
    )
    d = st.to_dict()
    assert "min" not in d["goal"] and d["goal"]["max"] == 2.0
    back = type(st).from_dict(d)
    assert back.goal == st.goal and back.input == st.input
