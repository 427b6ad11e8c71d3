"""Faces of a plate: the Airy sum per eigenwave and the Jones matrix of a plate with faces.

Sources
-------
[BW-1.6] M. Born and E. Wolf, Principles of Optics, 7th ed. (Cambridge, 1999), sec. 1.6.2: the
    characteristic matrix of a homogeneous layer, M = [[cos b, -(i/n) sin b], [-i n sin b, cos b]]
    with b = k0 n d, and its transmission t = 2/(m11 + m12 + m21 + m22) between two air half
    spaces (normal incidence); time dependence exp(-i w t), as ours.
[BW-7.6] ibid. sec. 7.6.1: the Airy formulae; a lossless plate transmits and reflects all light.
[Holmes] D. A. Holmes, "Exact theory of retardation plates," J. Opt. Soc. Am. 54, 1115-1120
    (1964): the o- and e-waves of a birefringent plate with faces are independent etalons, and the
    effective retardance is the difference of the phases of their Airy transmissions.
[derived] The retardance ripple, derived here: t_j = (1 - R_j) e^{i phi_j}/(1 - R_j e^{2 i phi_j}),
    so arg t_j = phi_j + eps_j with eps_j = arg 1/(1 - R_j e^{2 i phi_j})
    = atan2(R_j sin 2phi_j, 1 - R_j cos 2phi_j).  Hence delta_eff - delta = eps_s - eps_f, which to
    first order in R is R_s sin 2phi_s - R_f sin 2phi_f (error below R_s^2 + R_f^2), and, since the
    point 1 - R e^{ix} lies on a circle of radius R about 1, |eps_j| <= arcsin R_j, so
    |delta_eff - delta| <= arcsin R_s + arcsin R_f.  For R_s = R_f = R:
    sin 2phi_s - sin 2phi_f = 2 cos(phi_s + phi_f) sin(delta): the ripple of a quarter-wave plate
    has amplitude 2R and follows the mean phase, with period lambda^2/(2 n d) in wavelength.
[issue] The issue's number for an uncoated zero-order quartz quarter-wave plate at 632.8 nm:
    about 85 deg instead of 90, swinging by about +-5 deg (2R = 0.091 rad = 5.2 deg for the
    Fresnel reflectance of quartz, R = 0.0456).
"""

from __future__ import annotations

import numpy as np
import pytest

from tolerance.errors import RetolError
from tolerance.etalon import (
    Faces,
    airy_reflection,
    airy_transmission,
    fresnel_reflectance,
    fringe_period_nm,
    layer_phases,
    parse_faces,
    plate_jones_faces,
    ripple_exact,
)
from tolerance.plates import design_plate, plate_jones, plate_retardance


def bw_characteristic_t(n, phase):
    """[BW-1.6] amplitude transmission of a layer of index n between air half spaces."""
    c, s = np.cos(phase), np.sin(phase)
    m11, m12, m21, m22 = c, -1j * s / n, -1j * n * s, c
    return 2.0 / (m11 + m12 + m21 + m22)


@pytest.fixture(scope="module")
def qwp():
    return design_plate("zero-order", "quartz", 0.25, 632.8)


def test_airy_matches_characteristic_matrix():
    # [BW-1.6] vs [BW-7.6]: two independent derivations of the uncoated slab
    n = np.array([1.3, 1.5, 1.9, 2.4])[:, None]
    phase = np.linspace(0.0, 40.0, 301)[None, :]
    ours = airy_transmission(phase, fresnel_reflectance(n))
    np.testing.assert_allclose(ours, bw_characteristic_t(n, phase), rtol=0, atol=1e-13)


@pytest.mark.parametrize("R", [0.0, 0.0025, 0.0456, 0.3, 0.9])
def test_lossless_plate_conserves_energy(R):
    # [BW-7.6]: |t|^2 + |r|^2 = 1 for each eigenwave of a lossless plate
    phase = np.linspace(-20.0, 20.0, 1001)
    t = airy_transmission(phase, R)
    r = airy_reflection(phase, R)
    np.testing.assert_allclose(abs(t) ** 2 + abs(r) ** 2, 1.0, rtol=0, atol=1e-13)


def test_retardance_ripple_closed_form(qwp):
    # [Holmes], [derived]: exact, first order and bound
    wl = np.linspace(600.0, 660.0, 601)
    faces = Faces("uncoated")
    J = plate_jones_faces(qwp, wl, faces)
    ph = layer_phases(qwp, wl)
    R_f = fresnel_reflectance(ph.n_fast[0])
    R_s = fresnel_reflectance(ph.n_slow[0])
    delta = plate_retardance(qwp, wl)
    got = delta + np.angle(J[..., 1, 1] / J[..., 0, 0] * np.exp(-1j * delta))
    exact = delta + ripple_exact(ph.phase_fast[0], ph.phase_slow[0], R_f, R_s)
    np.testing.assert_allclose(got, exact, rtol=0, atol=1e-12)
    first = R_s * np.sin(2 * ph.phase_slow[0]) - R_f * np.sin(2 * ph.phase_fast[0])
    assert np.max(abs(got - delta - first)) < np.max(R_s**2 + R_f**2)
    bound = np.arcsin(R_s) + np.arcsin(R_f)
    assert np.all(abs(got - delta) <= bound + 1e-15)
    # the bound is reached within a fringe: the ripple amplitude is 2R (quarter-wave: sin delta=1)
    assert np.max(abs(got - delta)) > 0.97 * np.max(bound)


def test_issue_number_uncoated_quartz_qwp(qwp):
    # [issue]: about 85 deg at 632.8 nm, swinging about +-5 deg over 620-645 nm
    J = plate_jones_faces(qwp, 632.8, Faces("uncoated"))
    deg = np.degrees(np.angle(J[1, 1] / J[0, 0]))
    assert 84.0 < deg < 86.0  # we get 84.78 deg
    wl = np.linspace(620.0, 645.0, 501)
    J = plate_jones_faces(qwp, wl, Faces("uncoated"))
    ripple = np.degrees(np.angle(J[..., 1, 1] / J[..., 0, 0])) - np.degrees(
        plate_retardance(qwp, wl)
    )
    assert 5.0 < np.max(abs(ripple)) < 5.3  # 2 arcsin(0.0456) = 5.2 deg
    # a 0.25 % coating: 2 arcsin(0.0025) = 0.29 deg
    J = plate_jones_faces(qwp, wl, Faces("coated", 0.0025))
    ripple = np.degrees(np.angle(J[..., 1, 1] / J[..., 0, 0])) - np.degrees(
        plate_retardance(qwp, wl)
    )
    assert 0.25 < np.max(abs(ripple)) <= np.degrees(2 * np.arcsin(0.0025)) + 1e-12


def test_ideal_faces_is_the_ideal_plate(qwp):
    wl = np.linspace(500.0, 800.0, 31)
    for p in (qwp, design_plate("compound", "quartz", 0.25, 632.8, thick_plate_um=500.0)):
        np.testing.assert_allclose(plate_jones_faces(p, wl), plate_jones(p, wl), atol=1e-12)


def test_cemented_aligned_stack_is_one_etalon_per_eigenwave():
    # [derived]: crossed layers cemented: each eigenwave of the stack crosses both layers with
    # the accumulated phase, and one cavity (the outer faces) gives its Airy sum
    p = design_plate("compound", "quartz", 0.25, 632.8, thick_plate_um=300.0)
    wl = np.linspace(630.0, 636.0, 41)
    ph = layer_phases(p, wl)
    # polarization along layer 0's fast axis: fast in layer 0, slow in the crossed layer 1
    pa = ph.phase_fast[0] + ph.phase_slow[1]
    pb = ph.phase_slow[0] + ph.phase_fast[1]
    Ra_in, Ra_out = fresnel_reflectance(ph.n_fast[0]), fresnel_reflectance(ph.n_slow[1])
    Rb_in, Rb_out = fresnel_reflectance(ph.n_slow[0]), fresnel_reflectance(ph.n_fast[1])
    ta = airy_transmission(pa, Ra_in, Ra_out)
    tb = airy_transmission(pb, Rb_in, Rb_out)
    J = plate_jones_faces(p, wl, Faces("uncoated"))
    common = np.exp(1j * 0.5 * (ph.phase_fast + ph.phase_slow).sum(axis=0))
    np.testing.assert_allclose(J[..., 0, 0] * common, ta, atol=1e-12)
    np.testing.assert_allclose(J[..., 1, 1] * common, tb, atol=1e-12)
    np.testing.assert_allclose(J[..., 0, 1], 0.0, atol=1e-12)


def test_air_gap_makes_each_layer_an_etalon():
    p = design_plate("compound", "quartz", 0.25, 632.8, thick_plate_um=300.0)
    wl = np.linspace(630.0, 636.0, 11)
    ph = layer_phases(p, wl)
    J = plate_jones_faces(p, wl, Faces("coated", 0.01), air_gap=True)
    t = [
        (airy_transmission(ph.phase_fast[i], 0.01), airy_transmission(ph.phase_slow[i], 0.01))
        for i in (0, 1)
    ]
    common = np.exp(1j * 0.5 * (ph.phase_fast + ph.phase_slow).sum(axis=0))
    # layer 1 is crossed: its slow wave is along layer 0's fast axis
    np.testing.assert_allclose(J[..., 0, 0] * common, t[0][0] * t[1][1], atol=1e-12)
    np.testing.assert_allclose(J[..., 1, 1] * common, t[0][1] * t[1][0], atol=1e-12)


def test_non_aligned_stack_with_faces_is_passive():
    # a lossless cavity cannot amplify: singular values of J at most 1
    p = design_plate(
        "stack",
        layers=[
            {"material": "quartz", "thickness_um": 40.0, "axis_deg": 0.0},
            {"material": "mgf2", "thickness_um": 30.0, "axis_deg": 33.0},
        ],
        design_nm=632.8,
    )
    J = plate_jones_faces(p, np.linspace(600, 660, 121), Faces("uncoated"), crossing_deg=2.0)
    sv = np.linalg.svd(J, compute_uv=False)
    assert np.all(sv <= 1.0 + 1e-12) and np.all(sv > 0.8)


def test_fringe_period():
    # lambda^2/(2 n d) for the quarter-wave plate: 7.4 nm (the issue's "620-645 nm" holds ~3)
    assert fringe_period_nm(632.8, 1.543, 17.49) == pytest.approx(7.42, abs=0.01)


@pytest.mark.parametrize(
    "value, field",
    [
        ("shiny", "faces"),
        ({"reflectance": 1.5}, "faces.reflectance"),
        ({"reflectance": float("nan")}, "faces.reflectance"),
        ({"reflect": 0.01}, "faces"),
        (True, "faces"),
        ("1.2", "faces.reflectance"),
    ],
)
def test_bad_faces(value, field):
    with pytest.raises(RetolError) as e:
        parse_faces(value)
    assert e.value.field == field


def test_parse_faces():
    assert parse_faces("Uncoated") == Faces("uncoated")
    assert parse_faces({"reflectance": 0.0025}) == Faces("coated", 0.0025)
    assert parse_faces("0.01") == Faces("coated", 0.01)
