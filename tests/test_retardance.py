"""Retardance of one layer: normal and oblique incidence, temperature.

Sources
-------
[Veiras2010] F. E. Veiras, L. I. Perez, M. T. Garea, "Phase shift formulas in uniaxial media: an
    application to waveplates," Appl. Opt. 49, 2769-2777 (2010).
[Beckers1972] J. M. Beckers, Appl. Opt. 11, 681 (1972): the field-of-view change of a retarder's
    retardance is second order in the birefringence for a plane of incidence near 45 deg to the
    optic axis.
[Etzel2000] S. M. Etzel, A. Rose, E. Wang, Appl. Opt. 39, 5796-5800 (2000): relative
    temperature coefficient of retardance of crystal quartz, gamma = -1.23e-4 /K.
[Ghosh1999] G. Ghosh, Opt. Commun. 163, 95-102 (1999): quartz dispersion coefficients.
[derived] Derived by hand for this suite: the plane-wave dispersion relations of a uniaxial
    crystal with its optic axis along x (in the plate face, z the plate normal),
        ordinary       kz^2 = n_o^2 k0^2 - kx^2 - ky^2,
        extraordinary  kx^2/n_o^2 + (ky^2 + kz^2)/n_e^2 = k0^2,
    and their small-angle expansions.  The numerical reference solves the wave equation
    k x (k x E) + k0^2 eps E = 0 for kz directly (det = 0), independent of both closed forms.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from tolerance.dispersion import get_material, indices
from tolerance.plates import design_plate, plate_retardance
from tolerance.retardance import (
    degrees,
    layer_retardance,
    normal_incidence,
    oblique_index_difference,
    waves,
)

# [Etzel2000]
GAMMA_QUARTZ = -1.23e-4


def wave_equation_kz(n_o, n_e, aoi_deg, azimuth_deg):
    """Both normal components kz/k0 of a uniaxial plate (optic axis along x) [derived].

    Solves det(k k^T - |k|^2 I + eps) = 0 with eps = diag(n_e^2, n_o^2, n_o^2) and the tangential
    wave vector (sin i cos phi, sin i sin phi) fixed by Snell's law.  The determinant is a quadratic
    in u = kz^2 (it is even in kz), fitted exactly through three points and solved.
    """
    s = np.sin(np.radians(aoi_deg))
    kx, ky = s * np.cos(np.radians(azimuth_deg)), s * np.sin(np.radians(azimuth_deg))
    eps = np.diag([n_e**2, n_o**2, n_o**2])

    def det(u):
        k = np.array([kx, ky, np.sqrt(u)])
        return np.linalg.det(np.outer(k, k) - (k @ k) * np.eye(3) + eps)

    us = np.array([0.0, 1.0, 2.0])
    coeffs = np.linalg.solve(np.vander(us, 3), [det(u) for u in us])
    return np.sort(np.sqrt(np.roots(coeffs).real))


def closed_form_kz(n_o, n_e, aoi_deg, azimuth_deg):
    """kz/k0 of the ordinary and extraordinary waves from the two dispersion relations [derived]."""
    s = np.sin(np.radians(aoi_deg))
    kx, ky = s * np.cos(np.radians(azimuth_deg)), s * np.sin(np.radians(azimuth_deg))
    kz_o = np.sqrt(n_o**2 - kx**2 - ky**2)
    kz_e = np.sqrt(n_e**2 * (1.0 - kx**2 / n_o**2) - ky**2)
    return kz_o, kz_e


def test_normal_incidence_formula():
    # delta = 2 pi d dn / lambda (common practice); 25 um, dn 0.01, 1000 nm -> a quarter wave.
    assert float(normal_incidence(0.01, 25.0, 1000.0)) == pytest.approx(np.pi / 2)
    assert float(normal_incidence(-0.01, 25.0, 1000.0)) == pytest.approx(np.pi / 2)
    assert float(waves(np.pi)) == pytest.approx(0.5)
    assert float(degrees(np.pi / 2)) == pytest.approx(90.0)


@pytest.mark.parametrize("name", ["quartz", "mgf2", "sapphire", "calcite"])
def test_layer_at_normal_incidence_is_2pi_d_dn_over_lambda(name):
    m = get_material(name)
    wl = np.array([450.0, 632.8, 1064.0])
    n_o, n_e = indices(m, wl)
    expect = 2 * np.pi * 100.0e3 * np.abs(n_e - n_o) / wl
    np.testing.assert_allclose(layer_retardance(m, 100.0, wl), expect, rtol=1e-13)
    # the azimuth does not matter at normal incidence
    np.testing.assert_allclose(layer_retardance(m, 100.0, wl, azimuth_deg=37.0), expect, rtol=1e-13)
    assert float(oblique_index_difference(1.5, 1.51, 0.0, 12.0)) == pytest.approx(0.01, abs=1e-15)


@pytest.mark.parametrize(
    "aoi, phi",
    [(0, 0), (5, 0), (10, 90), (20, 45), (30, 17), (45, 63), (60, 20), (80, 70), (89, 135)],
)
@pytest.mark.parametrize("n_o, n_e", [(1.5426, 1.5517), (1.7659, 1.7579), (1.6557, 1.4852)])
def test_oblique_matches_wave_equation(n_o, n_e, aoi, phi):
    # [Veiras2010] closed form against [derived] det(wave equation) = 0, positive and negative
    # crystals (quartz-, sapphire- and calcite-like indices at 633 nm).
    roots = wave_equation_kz(n_o, n_e, aoi, phi)
    kz_o, kz_e = closed_form_kz(n_o, n_e, aoi, phi)
    np.testing.assert_allclose(sorted([kz_o, kz_e]), roots, rtol=1e-12)
    dN = float(oblique_index_difference(n_o, n_e, aoi, phi))
    assert dN == pytest.approx(kz_e - kz_o, rel=1e-9, abs=1e-13)
    assert abs(dN) == pytest.approx(roots[1] - roots[0], rel=1e-9, abs=1e-13)


@given(
    aoi=st.floats(0.0, 85.0),
    phi=st.floats(-360.0, 360.0),
    n_o=st.floats(1.3, 2.5),
    dn=st.floats(-0.2, 0.2).filter(lambda x: abs(x) > 1e-3),
)
def test_oblique_matches_wave_equation_random(aoi, phi, n_o, dn):
    # [derived] wave-equation reference, random indices and geometry.
    n_e = n_o + dn
    roots = wave_equation_kz(n_o, n_e, aoi, phi)
    dN = float(oblique_index_difference(n_o, n_e, aoi, phi))
    assert abs(dN) == pytest.approx(roots[1] - roots[0], rel=1e-7, abs=1e-12)


def test_oblique_is_symmetric_in_azimuth_and_tilt_sign():
    n_o, n_e = 1.5426, 1.5517
    base = oblique_index_difference(n_o, n_e, 20.0, 30.0)
    for phi in (-30.0, 150.0, 210.0, 390.0):
        assert float(oblique_index_difference(n_o, n_e, 20.0, phi)) == pytest.approx(float(base))
    assert float(oblique_index_difference(n_o, n_e, -20.0, 30.0)) == pytest.approx(float(base))


@pytest.mark.parametrize("name", ["quartz", "sapphire", "mgf2"])
@pytest.mark.parametrize("aoi", [1.0, 3.0, 5.0])
def test_small_angle_limits(name, aoi):
    # [derived] plane of incidence containing the optic axis (azimuth 0):
    #     delta ~ delta0 (1 - sin^2 i / (2 n_o^2));
    # plane of incidence perpendicular to it (azimuth 90):
    #     delta ~ delta0 (1 + sin^2 i / (2 n_o n_e)).
    m = get_material(name)
    wl = 632.8
    n_o, n_e = (float(x) for x in indices(m, wl))
    s2 = np.sin(np.radians(aoi)) ** 2
    d0 = float(layer_retardance(m, 500.0, wl))
    d_par = float(layer_retardance(m, 500.0, wl, aoi_deg=aoi, azimuth_deg=0.0))
    d_perp = float(layer_retardance(m, 500.0, wl, aoi_deg=aoi, azimuth_deg=90.0))
    # next-order terms are O(sin^2 i) relative to the first-order change
    assert d_par / d0 - 1 == pytest.approx(-s2 / (2 * n_o**2), rel=3 * s2 + 1e-3)
    assert d_perp / d0 - 1 == pytest.approx(s2 / (2 * n_o * n_e), rel=3 * s2 + 1e-3)


@pytest.mark.parametrize("name", ["quartz", "sapphire", "mgf2"])
def test_change_near_45_deg_is_second_order(name):
    # [Beckers1972]: near 45 deg azimuth the field-of-view change is second order in the
    # birefringence, so far smaller than at 0 or 90 deg.
    m = get_material(name)
    wl, aoi = 632.8, 3.0
    d0 = float(layer_retardance(m, 500.0, wl))
    ch = {phi: float(layer_retardance(m, 500.0, wl, aoi_deg=aoi, azimuth_deg=phi)) - d0
          for phi in (0.0, 45.0, 90.0)}
    assert abs(ch[45.0]) < 0.02 * abs(ch[0.0])
    assert abs(ch[45.0]) < 0.02 * abs(ch[90.0])


@pytest.mark.parametrize("b", [0.005, 0.01, 0.02, -0.01])
def test_change_at_45_deg_hand_formula(b):
    # [derived] at azimuth 45 deg, to O(sin^2 i):
    #     N_e - N_o - (n_e - n_o) = -sin^2 i (n_e - n_o)^2 / (4 n_o^2 n_e),
    # quadratic in the birefringence [Beckers1972].  The O(sin^4 i) term is linear in it, so the
    # angle is kept small (0.3 deg) for it to stay below 1 % of the quadratic term.
    n_o = 1.5
    n_e = n_o + b
    s2 = np.sin(np.radians(0.3)) ** 2
    change = float(oblique_index_difference(n_o, n_e, 0.3, 45.0)) - b
    assert change == pytest.approx(-s2 * b * b / (4 * n_o**2 * n_e), rel=0.02)


def test_temperature_coefficient_of_a_multi_order_quartz_plate():
    # [Etzel2000]: d(delta)/dT = gamma delta, gamma = -1.23e-4 /K for quartz, on a 10.25-wave plate.
    q = get_material("quartz")
    assert q.retardance_temperature_coefficient == pytest.approx(GAMMA_QUARTZ)
    p = design_plate("multi-order", "quartz", 0.25, 632.8, order=10)
    t0 = q.reference_temperature_c
    d0 = float(plate_retardance(p, 632.8))
    assert d0 / (2 * np.pi) == pytest.approx(10.25, abs=1e-9)
    d1 = float(plate_retardance(p, 632.8, temperature_c=t0 + 1.0))
    assert (d1 - d0) == pytest.approx(GAMMA_QUARTZ * d0, rel=1e-9)
    # in waves: 10.25 * 1.23e-4 = 1.26e-3 waves per kelvin, linear in T
    d10 = float(plate_retardance(p, 632.8, temperature_c=t0 + 10.0))
    assert (d10 - d0) / (2 * np.pi) == pytest.approx(10 * 10.25 * GAMMA_QUARTZ, rel=1e-9)
    # the layer function agrees
    la = p.layers[0]
    assert float(layer_retardance(q, la.thickness_um, 632.8, temperature_c=t0 + 1.0)) == \
        pytest.approx(d1, rel=1e-12)


def test_array_broadcasting_over_wavelength_and_angle():
    q = get_material("quartz")
    wl = np.linspace(500.0, 700.0, 5)[:, None]
    aoi = np.array([0.0, 5.0, 10.0])[None, :]
    d = layer_retardance(q, 20.0, wl, aoi_deg=aoi, azimuth_deg=0.0)
    assert d.shape == (5, 3)
    assert np.all(np.diff(d, axis=1) < 0)  # tilting in the optic-axis plane lowers retardance
