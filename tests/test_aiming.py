"""Aiming: mount angles of a quarter-wave plate, or a half-wave then a quarter-wave plate.

Every solution is checked by a forward Jones product built from sympy, not by the code under
test.

Sources
-------
[sympy] sympy.physics.optics.polarization (SymPy): ``jones_vector(psi, chi)``,
    ``quarter_wave_retarder(theta)``, ``half_wave_retarder(theta)``, ``phase_retarder(theta,
    delta)``, ``jones_2_stokes``; its ``jones_2_stokes`` gives S3 = -2 Im(Ex Ey*), the opposite
    sign to this package's, so S3 from it is negated, and ``jones_vector(psi, chi)`` has our
    ellipticity angle -chi.
[Hecht] E. Hecht, Optics (Addison-Wesley), sec. on retarders: a quarter-wave plate turns linear
    light at alpha into an ellipse whose axes lie along the plate's axes, axial ratio
    tan|theta - alpha| or its inverse; the component along the fast axis leads by a quarter
    period (common practice; from memory).
[AB] R. M. A. Azzam and N. M. Bashara, Ellipsometry and Polarized Light (North-Holland, 1977),
    sec. 2.6: a retarder turns the Poincare sphere about its axis; a half-wave plate reverses
    S3 (from memory).
[derived] Derived in the test's docstring.
"""

from __future__ import annotations

import json
import re
import shlex
from pathlib import Path

import numpy as np
import pytest
import sympy as sp
from hypothesis import assume, given
from hypothesis import strategies as st
from sympy.physics.optics import polarization as spol

from tolerance.aiming import (
    PLATE_SETS,
    aim,
    aim_hwp_qwp,
    aim_plate,
    band_states,
    ideal_plate,
    plate_mounts,
    real_plate,
)
from tolerance.errors import RetolError
from tolerance.plates import design_plate, plate_jones
from tolerance.polarization import (
    elliptical_goal_vector,
    goal_vector,
    input_stokes,
    jones_to_mueller,
    sphere_angle_deg,
)

_th, _de, _psi, _chi = sp.symbols("theta delta psi chi", real=True)
_a, _b, _c, _d = sp.symbols("a b c d", real=True)
SYM_QWP = sp.lambdify(_th, spol.quarter_wave_retarder(_th), "numpy")
SYM_HWP = sp.lambdify(_th, spol.half_wave_retarder(_th), "numpy")
SYM_RETARDER = sp.lambdify((_th, _de), spol.phase_retarder(_th, _de), "numpy")
SYM_JONES = sp.lambdify((_psi, _chi), spol.jones_vector(_psi, _chi), "numpy")
SYM_STOKES = sp.lambdify(
    (_a, _b, _c, _d), spol.jones_2_stokes(sp.Matrix([_a + sp.I * _b, _c + sp.I * _d])), "numpy"
)


def sym_field(psi_deg, chi_deg=0.0):
    """[sympy] Jones vector of an ellipse at psi with our ellipticity chi (sympy's -chi)."""
    return np.asarray(SYM_JONES(np.radians(psi_deg), -np.radians(chi_deg)), dtype=complex).ravel()


def sym_stokes(E):
    """[sympy] jones_2_stokes, S3 negated to our sign; normalised to S0 = 1."""
    ex, ey = complex(E[0]), complex(E[1])
    s = np.asarray(SYM_STOKES(ex.real, ex.imag, ey.real, ey.imag), dtype=float).ravel()
    s[3] = -s[3]
    return s / s[0]


def sym_qwp(theta_deg):
    return np.asarray(SYM_QWP(np.radians(theta_deg)), dtype=complex)


def sym_hwp(theta_deg):
    return np.asarray(SYM_HWP(np.radians(theta_deg)), dtype=complex)


def qwp_rule_target(alpha, theta):
    """[Hecht] the ellipse a QWP at theta makes from linear light at alpha, from the rules alone.

    With d = theta - alpha folded into (-90, 90]: the major axis is the fast axis (theta) when
    |d| < 45, the slow axis (theta + 90) when |d| > 45; b/a = tan|d| or cot|d|.  Handedness
    [derived]: in the plate's frame the output is (cos d' e^{-i pi/4}, sin d' e^{+i pi/4}),
    d' = alpha - theta; the real field Re[E e^{-i w t}] has its fast component peaking at
    w t = -pi/4, a quarter period before the slow one (the fast component leads), so the field
    turns from the fast axis toward sign(sin d' cos d') times the slow axis: counter-clockwise
    (left) looking toward the source when sin 2d' > 0, clockwise (right) when sin 2(theta -
    alpha) > 0.
    """
    d = (theta - alpha + 90.0) % 180.0 - 90.0
    t = np.tan(np.radians(abs(d)))
    if abs(d) < 45.0:
        az, ratio = theta, t
    else:
        az, ratio = theta + 90.0, 1.0 / t
    hand = "right" if np.sin(2 * np.radians(theta - alpha)) > 0 else "left"
    return az, ratio, hand


def same_mod180(a, b, tol=1e-7):
    d = (a - b) % 180.0
    return min(d, 180.0 - d) < tol


# ----------------------------------------------------------------------------- one QWP


@given(alpha=st.floats(-180.0, 180.0), theta=st.floats(-180.0, 180.0))
def test_qwp_ellipse_rules_against_sympy_and_aiming(alpha, theta):
    d = (theta - alpha) % 90.0
    assume(0.5 < d < 44.5 or 45.5 < d < 89.5)  # away from linear and circular outputs
    az, ratio, hand = qwp_rule_target(alpha, theta)
    target = elliptical_goal_vector(az, axial_ratio=ratio, handedness=hand)
    # the rules agree with sympy's forward product [Hecht][sympy]
    out = sym_stokes(sym_qwp(theta) @ sym_field(alpha))
    assert float(sphere_angle_deg(out, target)) < 1e-9
    # aiming finds theta, and only it (mod 180), and every solution passes the forward product
    res = aim_plate(input_stokes(alpha), target, ideal_plate(0.25))
    assert res.reachable and res.reason is None
    assert [same_mod180(s.angles_deg[0], theta) for s in res.solutions] == [True]
    for s in res.solutions:
        fwd = sym_stokes(sym_qwp(s.angles_deg[0]) @ sym_field(alpha))
        assert float(sphere_angle_deg(fwd, target)) < 1e-9


def test_qwp_unreachable_target_closest_state_and_reason():
    """Linear input at 10 deg, target at 30 deg with b/a = 0.5: a QWP needs an axis along 30 or
    120 deg [Hecht], where it gives b/a = tan 20 deg = 0.364 [derived], so it is out of reach.
    The closest state is checked against a brute-force scan of the sympy forward product."""
    target = elliptical_goal_vector(30.0, axial_ratio=0.5, handedness="right")
    res = aim_plate(input_stokes(10.0), target, ideal_plate(0.25))
    assert not res.reachable
    assert "0.364" in res.reason and "30" in res.reason and "120" in res.reason
    thetas = np.linspace(0.0, 180.0, 36001)
    scan = [
        float(sphere_angle_deg(sym_stokes(sym_qwp(t) @ sym_field(10.0)), target)) for t in thetas
    ]
    best = min(scan)
    (sol,) = res.solutions
    assert sol.sphere_angle_deg == pytest.approx(best, abs=1e-5)  # scan step 0.005 deg
    assert sol.sphere_angle_deg <= best + 1e-9
    fwd = sym_stokes(sym_qwp(sol.angles_deg[0]) @ sym_field(10.0))
    assert float(sphere_angle_deg(fwd, target)) == pytest.approx(sol.sphere_angle_deg, abs=1e-9)


def test_qwp_circular_target_two_hands():
    # [Hecht] linear light at alpha, a QWP at alpha -/+ 45 deg: right- or left-circular.
    for hand, expect in (("right", 55.0), ("left", 145.0)):
        g = goal_vector("circular", handedness=1 if hand == "right" else -1)
        res = aim_plate(input_stokes(10.0), g, ideal_plate(0.25))
        assert res.reachable
        assert [s.angles_deg[0] for s in res.solutions] == pytest.approx([expect], abs=1e-9)


def test_qwp_linear_target_only_the_input_itself():
    # A QWP keeps linear light linear only with an axis along it (common practice).
    res = aim_plate(input_stokes(10.0), goal_vector("linear", 10.0), ideal_plate(0.25))
    assert res.reachable
    assert sorted(s.angles_deg[0] for s in res.solutions) == pytest.approx([10.0, 100.0])
    other = aim_plate(input_stokes(10.0), goal_vector("linear", 40.0), ideal_plate(0.25))
    assert not other.reachable


@given(
    waves=st.floats(0.05, 0.95),
    theta0=st.floats(0.0, 180.0),
    psi=st.floats(-90.0, 90.0),
    chi=st.floats(-40.0, 40.0),
)
def test_any_retardance_plate_reaches_what_it_makes(waves, theta0, psi, chi):
    """A target made by the plate itself at theta0 is reachable, and every solution passes the
    forward product with [sympy] phase_retarder."""
    E = sym_field(psi, chi)
    delta = 2 * np.pi * waves
    target = sym_stokes(np.asarray(SYM_RETARDER(np.radians(theta0), delta), complex) @ E)[1:]
    res = aim_plate(input_stokes(psi, chi), target, ideal_plate(waves))
    assert res.reachable
    assert any(same_mod180(s.angles_deg[0], theta0, 1e-5) for s in res.solutions) or res.family
    for s in res.solutions:
        J = np.asarray(SYM_RETARDER(np.radians(s.angles_deg[0]), delta), complex)
        assert float(sphere_angle_deg(sym_stokes(J @ E), target)) < 1e-6


# ----------------------------------------------------------------------------- HWP + QWP


def random_targets(n, seed):
    """n states uniform on the Poincare sphere (normalised Gaussian vectors)."""
    v = np.random.default_rng(seed).normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1, keepdims=True)


def test_hwp_qwp_reaches_200_random_targets():
    """From linear input, an ideal HWP then QWP reaches every state [AB]; each of the four
    settings (QWP along the target's major axis or across it [derived in aiming.aim_hwp_qwp],
    HWP at h or h + 90) passes the [sympy] forward product to 1e-9 deg on the sphere."""
    rng = np.random.default_rng(13)
    for t in random_targets(200, 2013):
        alpha = float(rng.uniform(-90.0, 90.0))
        res = aim_hwp_qwp(input_stokes(alpha), t)
        assert res.reachable and res.family is None
        assert len(res.solutions) == 4
        psi_t = 0.5 * np.degrees(np.arctan2(t[1], t[0]))
        for s in res.solutions:
            h, q = s.angles_deg
            assert 0.0 <= h < 180.0 and 0.0 <= q < 180.0
            assert same_mod180(q, psi_t, 1e-7) or same_mod180(q, psi_t + 90.0, 1e-7)
            out = sym_stokes(sym_qwp(q) @ sym_hwp(h) @ sym_field(alpha))
            assert float(sphere_angle_deg(out, t)) < 1e-9


@given(
    psi_in=st.floats(-90.0, 90.0),
    chi_in=st.floats(-44.0, 44.0),
    psi_t=st.floats(-90.0, 90.0),
    chi_t=st.floats(-45.0, 45.0),
)
def test_hwp_qwp_from_elliptical_input(psi_in, chi_in, psi_t, chi_t):
    """[derived] the HWP maps the input to ellipticity -chi_in (it reverses S3 [AB]); the QWP at
    q then gives u3 = rho_t sin(2 psi_t - 2 q) before it, so a setting exists iff
    |sin 2chi_in| <= cos 2chi_t, i.e. |chi_t| <= 45 - |chi_in|.  Beyond, the nearest reachable
    state lies on that boundary at the target's azimuth, 2(|chi_t| - 45 + |chi_in|) away."""
    margin = abs(chi_t) - (45.0 - abs(chi_in))
    assume(abs(margin) > 1e-3 and abs(chi_t) < 44.99)
    target = elliptical_goal_vector(psi_t, ellipticity_deg=chi_t)
    res = aim_hwp_qwp(input_stokes(psi_in, chi_in), target)
    assert res.reachable == (margin < 0)
    for s in res.solutions:
        h, q = s.angles_deg
        out = sym_stokes(sym_qwp(q) @ sym_hwp(h) @ sym_field(psi_in, chi_in))
        got = float(sphere_angle_deg(out, target))
        if res.reachable:
            assert got < 1e-9
        else:
            assert got == pytest.approx(2 * margin, abs=1e-7)
            assert "45" in res.reason


def test_hwp_qwp_circular_target_is_a_family():
    res = aim_hwp_qwp(input_stokes(10.0), goal_vector("circular", handedness=-1))
    assert res.reachable and "any quarter-wave angle" in res.family
    assert len(res.solutions) >= 2
    for s in res.solutions:
        h, q = s.angles_deg
        out = sym_stokes(sym_qwp(q) @ sym_hwp(h) @ sym_field(10.0))
        assert out[3] == pytest.approx(-1.0, abs=1e-12)


def test_hwp_qwp_circular_input_any_hwp():
    # circular light through a HWP stays circular (reversed) [AB]: then a QWP makes it linear.
    res = aim_hwp_qwp(input_stokes(0.0, 45.0), goal_vector("linear", 25.0))
    assert res.reachable and "any half-wave angle" in res.family
    for s in res.solutions:
        h, q = s.angles_deg
        out = sym_stokes(sym_qwp(q) @ sym_hwp(h) @ sym_field(0.0, 45.0))
        assert float(sphere_angle_deg(out, goal_vector("linear", 25.0))) < 1e-9


@pytest.mark.parametrize("dop", [1.0, 0.6, 0.05])
def test_partially_polarized_input_same_angles_dop_kept(dop):
    """A retarder train acts on the polarized part only and keeps the degree of polarization
    (its Mueller matrix is a rotation) [AB]: the same angles as for the pure input."""
    target = elliptical_goal_vector(30.0, axial_ratio=0.5, handedness="right")
    pure = aim_hwp_qwp(input_stokes(10.0), target)
    part = aim_hwp_qwp(input_stokes(10.0, 0.0, dop), target)
    assert np.array([s.angles_deg for s in part.solutions]) == pytest.approx(
        np.array([s.angles_deg for s in pure.solutions]), abs=1e-9
    )
    for s in part.solutions:
        assert np.linalg.norm(s.stokes[1:]) == pytest.approx(dop, abs=1e-12)
        assert s.sphere_angle_deg < 1e-9


def test_unpolarized_input_is_refused():
    with pytest.raises(RetolError, match="input"):
        aim_hwp_qwp(input_stokes(0.0, 0.0, 0.0), goal_vector("linear", 0.0))


# ----------------------------------------------------------------------------- real plates


def quartz(waves, design=632.8, construction="zero-order", **keys):
    return design_plate(construction, "quartz", waves, design, **keys)


def test_real_zero_order_plates_at_design_match_ideal():
    """A zero-order plate is exactly a quarter (half) wave at its design wavelength, so the real
    train's angles are the ideal ones; checked by an independent forward product through
    plate_jones with the mount angle as clocking."""
    target = elliptical_goal_vector(30.0, axial_ratio=0.5, handedness="right")
    S_in = input_stokes(10.0)
    ideal = aim(S_in, target, "hwp+qwp")
    mounts = plate_mounts("hwp+qwp", quartz)
    real = aim(S_in, target, "hwp+qwp", mounts, 632.8)
    assert real.reachable and len(real.solutions) == 4
    assert np.array([s.angles_deg for s in real.solutions]) == pytest.approx(
        np.array([s.angles_deg for s in ideal.solutions]), abs=1e-8
    )
    hwp, qwp = quartz(0.5), quartz(0.25)
    for s in real.solutions:
        h, q = s.angles_deg
        J = plate_jones(qwp, 632.8, clocking_deg=q) @ plate_jones(hwp, 632.8, clocking_deg=h)
        out = jones_to_mueller(J) @ S_in
        assert float(sphere_angle_deg(out, target)) < 1e-9


def test_real_plates_off_design_are_solved_numerically():
    # At 700 nm the quartz plates are no longer quarter and half wave; the least-squares
    # solutions still reach the target (forward product through plate_jones).
    target = elliptical_goal_vector(-20.0, axial_ratio=0.3, handedness="left")
    S_in = input_stokes(0.0)
    res = aim(S_in, target, "hwp+qwp", plate_mounts("hwp+qwp", quartz), 700.0)
    assert res.reachable and res.wavelength_nm == 700.0
    hwp, qwp = quartz(0.5), quartz(0.25)
    for s in res.solutions:
        h, q = s.angles_deg
        J = plate_jones(qwp, 700.0, clocking_deg=q) @ plate_jones(hwp, 700.0, clocking_deg=h)
        assert float(sphere_angle_deg(jones_to_mueller(J) @ S_in, target)) < 1e-9


def test_real_single_qwp_and_band():
    """A multi-order quartz QWP aimed at its design wavelength: the band is exact there and
    drifts away from it; the state at each wavelength equals plate_jones' forward product."""
    plate = quartz(0.25, 780.0, "multi-order", order=3)
    mount = real_plate(plate)
    target = elliptical_goal_vector(40.0, axial_ratio=np.tan(np.radians(30.0)), handedness="right")
    S_in = input_stokes(10.0)
    res = aim(S_in, target, "qwp", [mount], 780.0)
    assert res.reachable
    (sol,) = res.solutions
    assert sol.angles_deg[0] == pytest.approx(40.0, abs=1e-8)  # [Hecht] axis along the target
    wl = np.array([760.0, 770.0, 780.0, 790.0, 800.0])
    b = band_states(S_in, [mount], sol.angles_deg, wl, target)
    assert b["sphere_angle_deg"][2] < 1e-9
    assert np.all(b["sphere_angle_deg"][[0, 1, 3, 4]] > 1e-3)
    for k, w in enumerate(wl):
        out = jones_to_mueller(plate_jones(plate, w, clocking_deg=sol.angles_deg[0])) @ S_in
        np.testing.assert_allclose(b["stokes"][k], out / out[0], atol=1e-12)


def test_plate_sets_registry_and_errors():
    assert set(PLATE_SETS) == {"qwp", "hwp+qwp"}
    with pytest.raises(RetolError, match="plates"):
        plate_mounts("hwp")
    with pytest.raises(RetolError, match="waves"):
        ideal_plate(float("nan"))
    with pytest.raises(RetolError, match="wavelength"):
        aim(input_stokes(0.0), goal_vector("linear", 0.0), "qwp", plate_mounts("qwp", quartz))


# ----------------------------------------------------------------------------- CLI

KEYS = {"azimuth_deg", "axial_ratio", "handedness", "stokes"}
ISSUE = "--input 10 --target-azimuth 30 --target-axial-ratio 0.5 --handedness right"
REAL = "--material quartz --construction zero-order --design 633nm"


def run_aim(invoke, line):
    return invoke("aim", *shlex.split(line))


def ok_json(result):
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def test_cli_issue_command_json(invoke):
    out = ok_json(run_aim(invoke, f"{ISSUE} --json"))
    assert out["reachable"] is False and "0.364" in out["reason"]
    assert {"solutions", "reachable"} <= set(out)
    for s in out["solutions"]:
        assert {"angles_deg", "output", "sphere_angle_deg"} <= set(s)
        assert KEYS <= set(s["output"]) and len(s["output"]["stokes"]) == 4
        assert len(s["angles_deg"]) == 1


def test_cli_hwp_qwp_real_plates_with_band(invoke):
    band = "--from 600nm --to 660nm --step 20nm"
    out = ok_json(run_aim(invoke, f"{ISSUE} --plates hwp+qwp {REAL} {band} --json"))
    assert out["reachable"] is True and len(out["solutions"]) == 4
    assert out["wavelength_nm"] == 633.0
    for s in out["solutions"]:
        assert len(s["angles_deg"]) == 2 and s["sphere_angle_deg"] < 1e-9
        assert [r["wavelength_nm"] for r in s["band"]] == [600.0, 620.0, 640.0, 660.0]
        assert all(KEYS | {"sphere_angle_deg"} <= set(r) for r in s["band"])
    text = run_aim(invoke, f"{ISSUE} --plates hwp+qwp {REAL} {band}")
    assert text.exit_code == 0
    assert "hwp [deg]" in text.output and "qwp [deg]" in text.output
    assert "holds the target best over the band" in text.output


def test_cli_other_target_and_input_forms(invoke):
    ratio = float(np.tan(np.radians(20.0)))
    by_ratio = ok_json(
        run_aim(
            invoke, f"--target-azimuth 20 --target-axial-ratio {ratio!r} --handedness right --json"
        )
    )
    by_chi = ok_json(run_aim(invoke, "--target-azimuth 20 --target-ellipticity 20 --json"))
    assert by_ratio["reachable"] and by_chi["reachable"]
    assert by_chi["solutions"][0]["angles_deg"] == pytest.approx([20.0], abs=1e-9)
    assert by_ratio["solutions"][0]["angles_deg"] == pytest.approx([20.0], abs=1e-9)
    st_ = ok_json(run_aim(invoke, "--target-stokes 0,0,-1 --plates hwp+qwp --json"))
    assert st_["reachable"] and st_["family"]
    part = ok_json(
        run_aim(
            invoke,
            "--input 5 --input-ellipticity 10 --input-dop 0.8 --target-azimuth 0 "
            "--target-axial-ratio 0 --plates hwp+qwp --json",
        )
    )
    assert part["reachable"]
    assert part["solutions"][0]["output"]["dop"] == pytest.approx(0.8, abs=1e-12)
    circ = run_aim(invoke, "--target-axial-ratio 1 --handedness left")
    assert circ.exit_code == 0 and "left-circular" in circ.output


LIN = "--target-azimuth 3 --target-axial-ratio 0"


@pytest.mark.parametrize(
    "line, words",
    [
        (
            "--target-azimuth 30 --target-axial-ratio 1.5 --handedness right",
            ["--target-axial-ratio", "[0, 1]"],
        ),
        (
            "--target-azimuth 30 --target-axial-ratio -0.2 --handedness right",
            ["--target-axial-ratio"],
        ),
        ("--target-azimuth 30 --target-axial-ratio 0.5", ["--handedness"]),
        ("--target-azimuth nan --target-axial-ratio 0", ["--target-azimuth"]),
        (f"--input inf {LIN}", ["--input"]),
        (f"{ISSUE} --plates hwp", ["--plates"]),
        ("--target-axial-ratio 0.5 --handedness right", ["--target-azimuth"]),
        ("--target-azimuth 30", ["--target-axial-ratio"]),
        ("--target-stokes 1,1,0", ["--target-stokes"]),
        ("--target-stokes 0,0,1 --target-azimuth 3", ["--target-stokes"]),
        (f"{LIN} --at 600nm", ["--at"]),
        (f"{LIN} --input-dop 1.5", ["--input-dop"]),
        (f"{LIN} --handedness up", ["--handedness"]),
        (f"{LIN} --material quartz", ["--design"]),
        (f"{LIN} {REAL} --at 5000nm", ["--at", "valid range"]),
        (f"{LIN} {REAL} --from 600nm", ["--from/--to"]),
    ],
)
def test_cli_bad_input_one_line_exit_2(invoke, line, words):
    r = run_aim(invoke, line)
    assert r.exit_code == 2, r.output
    assert "Traceback" not in r.output
    lines = [ln for ln in r.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("retol: error:"), r.output
    for w in words:
        assert w in lines[0]


def test_cli_help_lists_aim(invoke):
    assert "aim" in invoke("--help").output
    assert invoke("aim", "--help").exit_code == 0


def readme_aim_commands():
    """The `retol aim` lines of README.md's "Aiming" section, continuation lines joined."""
    text = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    section = text.split("## Aiming", 1)[1].split("\n## ", 1)[0]
    blocks = re.findall(r"```bash\n(.*?)```", section, flags=re.S)
    lines = "\n".join(blocks).replace("\\\n", " ").splitlines()
    return [ln.split("#", 1)[0].strip() for ln in lines if ln.strip().startswith("retol aim")]


def test_readme_aiming_examples_run(invoke):
    commands = readme_aim_commands()
    assert len(commands) >= 2
    for cmd in commands:
        args = shlex.split(cmd)[1:]
        r = invoke(*args)
        assert r.exit_code == 0, f"{cmd}\n{r.output}"
