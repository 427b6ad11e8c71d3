"""How large is what the tilt model leaves out?  README's numbers against a full calculation.

retol's tilt changes the retardance only (exact phase, axes and transmissions as at normal
incidence).  Here an uncoated zero-order quartz quarter-wave plate at 632.8 nm (optic axis in the
face) is solved exactly at oblique incidence: the plane-wave modes of the crystal from the wave
equation, the boundary conditions (tangential E and H continuous) at both faces, one pass
through the plate (the faces' multiple reflections are the ``faces`` model's business and are
left out on both sides).  The Jones matrix of that plate, in the transmitted beam's own
transverse frame (p, s), is compared with retol's retarder at the same retardance and the
normal-incidence axes.  README's section "Tilt: what is left out" states the results; this test
recomputes them and reads the README line.

Sources
-------
- [YY] A. Yariv, P. Yeh, *Optical Waves in Crystals* (Wiley, 1984), sec. 4.2 (plane waves in a
  uniaxial crystal: det(k kᵀ − k²·I + ε) = 0 and E the null vector) and sec. 4.6 / 5.1 (the
  boundary conditions at an interface: tangential E and H = k × E/(ωμ₀) continuous).
- [BW] M. Born, E. Wolf, *Principles of Optics*, 7th ed. (1999), sec. 1.5: Fresnel transmission
  of s and p waves, used here as a check of the solver at an isotropic face.
- [CH] R. A. Chipman, W. S. T. Lam, G. Young, *Polarized Light and Optical Systems* (CRC, 2018),
  ch. 5 and 6: diattenuation D = (T_max − T_min)/(T_max + T_min) from the singular values of a
  Jones matrix; eigenpolarizations of a Jones matrix.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
from numpy.polynomial import Polynomial

from tolerance.dispersion import get_material, indices
from tolerance.environment import acceptance_half_angle
from tolerance.plates import design_plate, plate_retardance

README = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
LAM = 632.8


# ----------------------------------------------------------------------------- the full solution


def crystal_modes(eps, xi):
    """The four plane-wave modes with tangential wave vector (ξ, 0) [k₀] in a medium of
    relative permittivity ``eps`` [YY]: k_z (4,) and the tangential field columns F (4, 4) of
    (E_x, E_y, H_x, H_y), H = k × E in units of the vacuum admittance (μ = 1)."""
    k = [Polynomial([xi]), Polynomial([0.0]), Polynomial([0.0, 1.0])]
    kk = k[0] * k[0] + k[2] * k[2]
    M = [[k[i] * k[j] - (kk if i == j else 0.0) + eps[i, j] for j in range(3)] for i in range(3)]
    det = (
        M[0][0] * (M[1][1] * M[2][2] - M[1][2] * M[2][1])
        - M[0][1] * (M[1][0] * M[2][2] - M[1][2] * M[2][0])
        + M[0][2] * (M[1][0] * M[2][1] - M[1][1] * M[2][0])
    )
    kz = np.sort(det.roots().real)  # propagating: every root real here
    F = np.empty((4, 4), dtype=complex)
    for pair in ((0, 1), (2, 3)):  # the backward, then the forward pair
        z = kz[list(pair)]
        double = abs(z[1] - z[0]) < 1e-6  # isotropic: one root, two polarizations
        if double:
            kz[list(pair)] = z.mean()
        for j, m in enumerate(pair):
            kv = np.array([xi, 0.0, kz[m]])
            A = np.outer(kv, kv) - kv @ kv * np.eye(3) + eps
            vh = np.linalg.svd(A)[2]
            E = vh[-1 - j] if double else vh[-1]  # the null vector(s)
            H = np.cross(kv, E)
            F[:, m] = (E[0], E[1], H[0], H[1])
    return kz, F


def air_modes(xi):
    """s and p modes in air, forward (+z) then backward: k_z and (E_x, E_y, H_x, H_y) [BW]."""
    cz = math.sqrt(1.0 - xi * xi)
    cols = []
    for z in (cz, -cz):
        kv = np.array([xi, 0.0, z])
        for E in (np.array([0.0, 1.0, 0.0]), np.cross(np.array([0.0, 1.0, 0.0]), kv)):
            H = np.cross(kv, E)
            cols.append((E[0], E[1], H[0], H[1]))
    return np.array([cz, cz, -cz, -cz]), np.array(cols, dtype=complex).T


def slab_jones(n_o, n_e, d_um, lam_nm, aoi_deg, phi_deg):
    """Single-pass Jones matrix of a uniaxial plate (optic axis in the face at φ from the plane
    of incidence) at angle of incidence θ, in the transmitted beam's frame (p, s) — p = (cos θ,
    0, −sin θ), s = (0, 1, 0), p × s along the beam, as x and y are at normal incidence.

    Entry face: incident (s, p) + reflected (s, p) = the two forward crystal modes; exit face:
    the forward modes = transmitted (s, p) + the two backward crystal modes.  Field continuity
    of (E_x, E_y, H_x, H_y) gives each as a 4 × 4 linear solve; the modes' phases
    exp(i k₀ k_z d) carry the light across (time dependence exp(i(kz − ωt))).
    """
    th = math.radians(aoi_deg)
    xi = math.sin(th)
    ph = math.radians(phi_deg)
    c = np.array([math.cos(ph), math.sin(ph), 0.0])
    eps = n_o**2 * np.eye(3) + (n_e**2 - n_o**2) * np.outer(c, c)
    kz, F = crystal_modes(eps, xi)
    fwd = [i for i in range(4) if kz[i] > 0]
    bwd = [i for i in range(4) if kz[i] < 0]
    _, G = air_modes(xi)
    # s, p amplitudes as unit E; the p column above is s × k (unit length, in the plane)
    G_in, G_back = G[:, :2], G[:, 2:]
    # entry: F_f t − G_back r = G_in a
    T_in = np.linalg.solve(np.hstack([F[:, fwd], -G_back]), G_in)[:2]  # (f1, f2) <- (s, p)
    P = np.diag(np.exp(1j * 2e3 * math.pi / lam_nm * d_um * kz[fwd]))
    # exit: G_in w − F_b v = F_f u
    T_out = np.linalg.solve(np.hstack([G_in, -F[:, bwd]]), F[:, fwd])[:2]  # (s, p) <- (f1, f2)
    J_sp = T_out @ P @ T_in
    # p column of air_modes is s × k = (cos θ, 0, −sin θ) = p: (s, p) -> (p, s) order
    swap = np.array([[0.0, 1.0], [1.0, 0.0]])
    return swap @ J_sp @ swap


def retarder(delta, fast_deg):
    """retol's retarder R(−θ)·diag(e^{−iδ/2}, e^{+iδ/2})·R(θ) (README "Conventions")."""
    t = math.radians(fast_deg)
    R = np.array([[math.cos(t), math.sin(t)], [-math.sin(t), math.cos(t)]])
    return R.T @ np.diag([np.exp(-0.5j * delta), np.exp(0.5j * delta)]) @ R


def stokes(E):
    s0 = np.vdot(E, E).real
    return np.array([abs(E[0]) ** 2 - abs(E[1]) ** 2, 2 * (E[0] * E[1].conj()).real,
                     2 * (E[0].conj() * E[1]).imag]) / s0  # fmt: skip


def sphere_angle(a, b):
    return math.degrees(math.atan2(np.linalg.norm(np.cross(a, b)), float(a @ b)))


def axis_azimuth(v):
    """Major-axis azimuth [deg] of a Jones vector."""
    s = stokes(v)
    return 0.5 * math.degrees(math.atan2(s[1], s[0]))


def neglected(aoi_deg, n_phi=72):
    """Largest over the plane-of-incidence azimuth of: the eigenpolarizations' rotation from
    retol's axes [deg], the diattenuation [CH], and the sphere angle between the exact and
    retol's output for a linear input at 45° to the fast axis [deg]."""
    q = get_material("quartz")
    plate = design_plate("zero-order", q, waves=0.25, design_nm=LAM, axis_deg=0.0)
    d = plate.layers[0].thickness_um
    n_o, n_e = (float(x) for x in indices(q, LAM))
    rot = dia = ang = 0.0
    for phi in np.linspace(0.0, 180.0, n_phi, endpoint=False):
        # the optic axis at φ from the plane of incidence; quartz is positive: fast axis at φ+90
        fast = phi + 90.0
        J = slab_jones(n_o, n_e, d, LAM, aoi_deg, phi)
        delta = float(plate_retardance(plate, LAM, aoi_deg=aoi_deg, incidence_azimuth_deg=phi + 90))
        M = retarder(delta, fast)
        w, V = np.linalg.eig(J)
        for k in range(2):
            a = axis_azimuth(V[:, k]) - fast
            a = (a + 90.0) % 180.0 - 90.0
            a = min(abs(a), abs(abs(a) - 90.0))  # either eigenvector: the fast or the slow one
            rot = max(rot, a)
        sv = np.linalg.svd(J, compute_uv=False) ** 2
        dia = max(dia, (sv[0] - sv[1]) / (sv[0] + sv[1]))
        t = math.radians(fast + 45.0)
        E = np.array([math.cos(t), math.sin(t)])
        ang = max(ang, sphere_angle(stokes(J @ E), stokes(M @ E)))
    return rot, dia, ang


def test_solver_gives_fresnel_transmission_for_an_isotropic_plate():
    """With n_o = n_e the slab is a glass plate: single-pass amplitude transmissions are the
    products of Fresnel's t_s and t_p at both faces [BW], and no s–p mixing."""
    n = 1.5
    th = math.radians(30.0)
    ct = math.cos(th)
    ctt = math.sqrt(1 - (math.sin(th) / n) ** 2)
    ts = 2 * ct / (ct + n * ctt) * 2 * n * ctt / (n * ctt + ct)
    tp = 2 * ct / (n * ct + ctt) * 2 * n * ctt / (ctt + n * ct)
    J = slab_jones(n, n, 10.0, LAM, 30.0, 20.0)
    phase = np.exp(1j * 2e3 * math.pi / LAM * 10.0 * n * ctt)
    np.testing.assert_allclose(np.abs(J), [[abs(tp), 0], [0, abs(ts)]], atol=1e-12)
    np.testing.assert_allclose(J[1, 1], ts * phase, rtol=1e-12)


def test_normal_incidence_is_the_retarder_times_the_face_transmission():
    """At normal incidence the exact plate is retol's retarder times each wave's Fresnel
    transmission 4n/(1 + n)² [BW]: no rotation, and a tiny o/e diattenuation."""
    rot, dia, ang = neglected(0.0, n_phi=4)
    assert rot < 1e-9
    n_o, n_e = (float(x) for x in indices(get_material("quartz"), LAM))
    t_o, t_e = 4 * n_o / (1 + n_o) ** 2, 4 * n_e / (1 + n_e) ** 2
    assert dia == pytest.approx(abs(t_o**2 - t_e**2) / (t_o**2 + t_e**2), rel=1e-6)
    m = re.search(r"at normal incidence\s+the o/e diattenuation of uncoated faces, ([\d.]+)",
                  README)  # fmt: skip
    assert m and float(m.group(1)) == pytest.approx(dia, rel=0.05)


def readme_numbers():
    """The acceptance angle and table rows of README's section "Tilt: what is left out"."""
    sec = re.search(r"^### Tilt: what is left out\n(.*?)(?=^##)", README, re.S | re.M)
    assert sec, "README has no section 'Tilt: what is left out'"
    text = sec.group(1)
    m = re.search(r"^At (?P<a>[\d.]+)° \(the acceptance half-angle", text, re.M)
    assert m, "README has no acceptance-angle line in 'Tilt: what is left out'"
    rows = re.findall(
        r"^\| ([\d.]+)° (?:\(acceptance\) )?\| ([\d.]+)° \| ([\d.e-]+) \| ([\d.]+)° \|$",
        text,
        re.M,
    )
    assert len(rows) == 3, rows
    return float(m.group("a")), [tuple(float(x) for x in r) for r in rows]


def test_readme_states_the_neglected_part():
    """README's table: at the acceptance half-angle for 0.01 wave, 5° and 10°, the rotation of
    the eigenpolarizations, the diattenuation and the sphere angle of the output, as computed by
    the full solution above (to the digits written)."""
    q = get_material("quartz")
    plate = design_plate("zero-order", q, waves=0.25, design_nm=LAM, axis_deg=0.0)
    acc = acceptance_half_angle(plate, 0.01)
    a_readme, rows = readme_numbers()
    assert a_readme == pytest.approx(acc, abs=0.05)
    for aoi, rot, dia, ang in rows:
        if aoi not in (5.0, 10.0):
            assert aoi == pytest.approx(acc, abs=0.05)
            aoi = acc
        r, dd, a = neglected(aoi)
        assert r == pytest.approx(rot, rel=0.05, abs=0.0005), (aoi, r)
        assert dd == pytest.approx(dia, rel=0.05), (aoi, dd)
        assert a == pytest.approx(ang, rel=0.05, abs=0.0005), (aoi, a)


if __name__ == "__main__":  # print the README's numbers
    q = get_material("quartz")
    p = design_plate("zero-order", q, waves=0.25, design_nm=LAM, axis_deg=0.0)
    acc = acceptance_half_angle(p, 0.01)
    print("acceptance", acc)
    for aoi in (acc, 5.0, 10.0):
        print(aoi, neglected(aoi))
