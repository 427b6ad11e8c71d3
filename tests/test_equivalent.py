"""Equivalent retarder (Jones equivalence theorem) and Mueller matrices of plates.

Sources
-------
[Hurwitz-Jones] H. Hurwitz and R. C. Jones, J. Opt. Soc. Am. 31, 493-499 (1941): any lossless
    non-depolarizing element equals a linear retarder followed by a rotator.
[sympy] sympy.physics.optics.polarization: ``phase_retarder(theta, delta)`` (the same Jones
    matrix as ours, fast axis at theta) and ``mueller_matrix(J)``.  Conventions: sympy's
    ``mueller_matrix`` builds A (J x J*) A^-1 with the same A as ours, so its Mueller matrices equal
    ours element by element; its ``jones_2_stokes`` alone uses the opposite sign of S3
    (S3 = -2 Im(Ex Ey*)); the Mueller matrices are checked here without any sign change.
[Gil-Bernabeu] J. J. Gil and E. Bernabeu, Opt. Acta 32, 259-261 (1985): depolarization index 1 for
    a non-depolarizing Mueller matrix, below 1 otherwise.
[Cloude] S. R. Cloude, Optik 75, 26-36 (1986): a Mueller matrix is physically realizable (a
    convex sum of non-depolarizing elements) when its coherency matrix has no negative
    eigenvalue; a non-depolarizing one has a coherency matrix of rank 1.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from click.testing import CliRunner
from sympy.physics.optics import polarization as spol

from tolerance.equivalent import (
    broadband_mueller,
    coherency_matrix,
    depolarization_index,
    equivalent_retarder,
    plate_equivalent,
    plate_mueller,
)
from tolerance.etalon import Faces
from tolerance.plates import design_plate, plate_retardance
from tolerance.polarization import retarder_jones

_th, _de = sp.symbols("theta delta", real=True)
_t1, _d1, _t2, _d2 = sp.symbols("t1 d1 t2 d2", real=True)
SYM_PAIR = sp.lambdify(
    (_t1, _d1, _t2, _d2), spol.phase_retarder(_t2, _d2) * spol.phase_retarder(_t1, _d1), "numpy"
)
SYM_MUELLER = sp.lambdify((_th, _de), spol.mueller_matrix(spol.phase_retarder(_th, _de)), "numpy")


def rotator(rho_deg):
    r = np.radians(rho_deg)
    return np.array([[np.cos(r), -np.sin(r)], [np.sin(r), np.cos(r)]])


def same_up_to_phase(A, B, atol=1e-12):
    k = np.vdot(B.ravel(), A.ravel()) / np.vdot(B.ravel(), B.ravel())
    assert abs(abs(k) - 1) < atol
    np.testing.assert_allclose(A, k * B, atol=atol)


@pytest.mark.parametrize("crossing", [0.0, 0.5, -2.0, 7.0])
@pytest.mark.parametrize("d1, d2", [(2.6, 2.0), (20.3, 18.7), (1.0, 0.2)])
def test_two_crossed_plates_against_sympy(d1, d2, crossing):
    # [Hurwitz-Jones], [sympy]: the product of two sympy retarders, second crossed with an error
    t1 = np.radians(10.0)
    t2 = np.radians(100.0 + crossing)
    J = np.asarray(SYM_PAIR(t1, d1, t2, d2), dtype=complex)
    e = equivalent_retarder(J, d1 - d2, 10.0)
    rebuilt = rotator(e.rotation_deg) @ retarder_jones(e.retardance_rad, e.fast_axis_deg)
    same_up_to_phase(J, rebuilt)
    # the order is kept: near d1 - d2 (several waves for the thick pair)
    assert abs(e.retardance_rad - (d1 - d2)) < 0.1 + abs(np.radians(crossing)) * 2 * d1
    if crossing == 0.0:
        assert e.retardance_rad == pytest.approx(d1 - d2, abs=1e-12)
        assert e.fast_axis_deg == pytest.approx(10.0, abs=1e-9)
        assert e.rotation_deg == pytest.approx(0.0, abs=1e-9)
    else:
        assert abs(e.rotation_deg) > 0  # a crossing error makes a rotator


def test_compound_plate_with_crossing_keeps_its_order():
    p = design_plate("compound", "quartz", 0.25, 632.8, thick_plate_um=1000.0)
    wl = np.linspace(600, 660, 7)
    e, _ = plate_equivalent(p, wl)
    np.testing.assert_allclose(e.retardance_rad, plate_retardance(p, wl), atol=1e-9)
    e1, J = plate_equivalent(p, wl, crossing_deg=0.3)
    for k in range(len(wl)):
        rebuilt = rotator(e1.rotation_deg[k]) @ retarder_jones(
            e1.retardance_rad[k], e1.fast_axis_deg[k]
        )
        same_up_to_phase(J[k], rebuilt)


@pytest.mark.parametrize("theta, delta", [(0.0, 0.3), (0.4, 1.57), (1.1, 3.0), (-0.7, 5.5)])
def test_mueller_against_sympy(theta, delta):
    # [sympy]: mueller_matrix of phase_retarder; same A as ours, no sign change needed
    p = design_plate("zero-order", "quartz", delta / (2 * np.pi), 632.8, axis_deg=np.degrees(theta))
    M = plate_mueller(p, 632.8)
    np.testing.assert_allclose(
        M, np.asarray(SYM_MUELLER(theta, delta), dtype=complex).real, atol=1e-9
    )


def test_plate_with_faces_mueller_is_a_weak_diattenuator():
    p = design_plate("zero-order", "quartz", 0.25, 632.8)
    M = plate_mueller(p, np.linspace(620, 645, 51), Faces("uncoated"))
    assert np.all(M[..., 0, 0] <= 1.0 + 1e-12) and np.all(M[..., 0, 0] > 0.8)
    diatt = np.hypot(M[..., 0, 1], M[..., 0, 2]) / M[..., 0, 0]
    # [derived] |t|^2 = (1-R)^2/(1 - 2R cos 2phi + R^2) lies in [((1-R)/(1+R))^2, 1]: the
    # diattenuation (Tmax - Tmin)/(Tmax + Tmin) is at most (1 - q)/(1 + q), q = ((1-R)/(1+R))^2
    R = 0.0475  # Fresnel reflectance at n = 1.56, above both quartz indices here
    q = ((1 - R) / (1 + R)) ** 2
    assert 0.05 < diatt.max() <= (1 - q) / (1 + q) + 1e-3
    # non-depolarizing: index 1, coherency rank 1 [Gil-Bernabeu], [Cloude]
    np.testing.assert_allclose(depolarization_index(M), 1.0, atol=1e-12)
    ev = np.linalg.eigvalsh(coherency_matrix(M))
    assert np.all(ev[..., :3] > -1e-12) and np.all(abs(ev[..., :3]) < 1e-12)


@pytest.mark.parametrize("faces", [Faces("ideal"), Faces("uncoated"), Faces("coated", 0.0025)])
def test_broadband_mueller_is_realizable_and_depolarizes(faces):
    # [Cloude]: non-negative eigenvalues; [Gil-Bernabeu]: index below 1 for a broad band
    p = design_plate("multi-order", "quartz", 0.25, 632.8, order=10)
    wl = np.linspace(600, 660, 241)
    M = broadband_mueller(plate_mueller(p, wl, faces), np.exp(-(((wl - 630) / 15) ** 2)))
    ev = np.linalg.eigvalsh(coherency_matrix(M))
    assert np.all(ev > -1e-12)
    assert depolarization_index(M) < 0.9


def test_broadband_bad_weights():
    with pytest.raises(ValueError):
        broadband_mueller(np.zeros((3, 4, 4)), [1.0, np.nan, 1.0])


def test_cli_plate_equivalent_and_mueller():
    import json

    from tolerance.cli.main import cli

    r = CliRunner().invoke(
        cli,
        [
            "plate", "--material", "quartz", "--construction", "compound", "--thick-plate",
            "500um", "--design", "632.8nm", "--from", "630nm", "--to", "635nm", "--step", "5nm",
            "--crossing", "1", "--faces", "uncoated", "--mueller", "--json",
        ],
    )  # fmt: skip
    assert r.exit_code == 0, r.output
    d = json.loads(r.output)
    row = d["table"][0]
    for k in ("equivalent_retardance_waves", "equivalent_fast_axis_deg", "rotation_deg"):
        assert np.isfinite(row[k])
    assert np.array(row["mueller"]).shape == (4, 4)
    assert d["faces"] == "uncoated" and d["crossing_deg"] == 1.0
    r = CliRunner().invoke(cli, ["plate", "--material", "quartz", "--design", "632.8nm",
                                 "--faces", "shiny"])  # fmt: skip
    assert r.exit_code == 2 and "faces" in r.output
