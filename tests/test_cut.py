"""The crystal cut error ``cut_deg``: a layer's optic axis tipped out of its face.

The kernel's retardance with a cut angle (alone and with a tilt) is checked against a numerical
solution of the Fresnel equation written here, the normal-incidence limit against the textbook
n_e(θ), ``cut_deg = 0`` against no cut bit for bit, and the sensitivity machinery against the
trade's expectation that thick (multi-order, compound) plates feel the cut and thin ones do not.

Sources
-------
- [YY] A. Yariv, P. Yeh, *Optical Waves in Crystals* (Wiley, 1984), sec. 4.2: plane waves in an
  anisotropic medium obey k × (k × E) + k₀²·ε·E = 0, so the allowed wave vectors are the zeros
  of det(k kᵀ − k²·I + ε) (the Fresnel equation); a uniaxial crystal has
  ε = n_o²·I + (n_e² − n_o²)·ĉĉᵀ.  Solved here numerically for k_z at a given tangential k.
- [BW] M. Born, E. Wolf, *Principles of Optics*, 7th ed. (Cambridge, 1999), sec. 15.3:
  n_e(θ) = n_o·n_e / sqrt(n_o²·sin²θ + n_e²·cos²θ) for a wave at θ from the optic axis.
- [VPG] F. E. Veiras, L. I. Perez, M. T. Garea, Appl. Opt. 49, 2769 (2010): the phase difference
  of the two waves across a plate is k₀·d·(N_e − N_o), N the normal components of their wave
  vectors (the tangential component is shared, Snell).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.polynomial import Polynomial
from scipy.optimize import brentq

import tolerance
from tolerance import montecarlo
from tolerance.dispersion import get_material, indices
from tolerance.errors import RetolError
from tolerance.etalon import parse_faces
from tolerance.kernel import WavelengthOptics, per_wavelength_values
from tolerance.kernel_faces import values_one_faces
from tolerance.retardance import cut_index_difference
from tolerance.spec import loads

QUARTZ = get_material("quartz")
CALCITE = get_material("calcite")


# ----------------------------------------------------------------------------- the reference


def fresnel_kz(n_o: float, n_e: float, axis, kt) -> tuple[float, float]:
    """Forward normal components (k_z/k₀) of the o- and e-waves from the Fresnel equation [YY].

    det M(k_z) with M = k kᵀ − (k·k)·I + ε, k = (k_x, k_y, k_z), is a quartic in k_z; its
    coefficients come from polynomial arithmetic, its roots from numpy, and each forward (k_z >
    0) root is polished by bracketing the numerical determinant (scipy brentq).  The o-wave is
    the root with k·k = n_o².
    """
    c = np.asarray(axis, dtype=float)
    c = c / np.linalg.norm(c)
    eps = n_o**2 * np.eye(3) + (n_e**2 - n_o**2) * np.outer(c, c)
    k = [Polynomial([kt[0]]), Polynomial([kt[1]]), Polynomial([0.0, 1.0])]
    kk = k[0] * k[0] + k[1] * k[1] + k[2] * k[2]
    M = [[k[i] * k[j] - (kk if i == j else 0.0) + eps[i, j] for j in range(3)] for i in range(3)]
    det = (
        M[0][0] * (M[1][1] * M[2][2] - M[1][2] * M[2][1])
        - M[0][1] * (M[1][0] * M[2][2] - M[1][2] * M[2][0])
        + M[0][2] * (M[1][0] * M[2][1] - M[1][1] * M[2][0])
    )
    roots = det.roots()
    fwd = sorted(r.real for r in roots if abs(r.imag) < 1e-9 and r.real > 0)
    assert len(fwd) == 2, roots

    def d(z):
        kv = np.array([kt[0], kt[1], z])
        return np.linalg.det(np.outer(kv, kv) - kv @ kv * np.eye(3) + eps)

    pol = [brentq(d, r - 1e-7, r + 1e-7, xtol=1e-16, rtol=1e-15) for r in fwd]
    t2 = kt[0] ** 2 + kt[1] ** 2
    o = min(pol, key=lambda z: abs(z * z + t2 - n_o**2))
    e = pol[1] if o == pol[0] else pol[0]
    return o, e


def plate_geometry(kappa_deg, beta_deg, aoi_deg, poi_deg):
    """Optic axis tipped by κ out of the face in the plane of its projection (azimuth β) and the
    normal; tangential wave vector sin θᵢ·(cos ψ, sin ψ) for a plane of incidence at ψ."""
    k, b = math.radians(kappa_deg), math.radians(beta_deg)
    axis = (math.cos(k) * math.cos(b), math.cos(k) * math.sin(b), math.sin(k))
    s, p = math.sin(math.radians(aoi_deg)), math.radians(poi_deg)
    return axis, (s * math.cos(p), s * math.sin(p))


def reference_retardance(material, d_um, lam_nm, kappa, beta, aoi, poi) -> float:
    """k₀·d·|k_ze − k_zo| [rad] from :func:`fresnel_kz` [VPG]."""
    n_o, n_e = (float(x) for x in indices(material, lam_nm))
    axis, kt = plate_geometry(kappa, beta, aoi, poi)
    o, e = fresnel_kz(n_o, n_e, axis, kt)
    return 2e3 * math.pi / lam_nm * d_um * abs(e - o)


# ----------------------------------------------------------------------------- the kernel


def one_layer_optics(material, wl):
    n_o, n_e = indices(material, wl)
    c = np.ascontiguousarray
    return WavelengthOptics(
        c(2e3 * np.pi / wl), c((n_o**2)[:, None]), c((n_e**2)[:, None]),
        c((n_e**2 / n_o**2)[:, None]), c((n_e - n_o)[:, None]),
    )  # fmt: skip


def kernel_retardance(material, d_um, wl, kappa, aoi, phi):
    """The kernel's retardance [rad] of one layer (fast axis at 0, plane of incidence at φ from
    the optic axis's projection, cut angle κ), through :func:`per_wavelength_values`."""
    s2i = math.sin(math.radians(aoi)) ** 2
    k = math.radians(kappa)
    cut = np.array([[math.sin(k), math.sin(math.radians(aoi)) * math.cos(k) *
                     math.cos(math.radians(phi))]])  # fmt: skip
    f = np.array
    sample = (
        f([d_um]), f([1.0]), f([1.0]), f([0.0]), s2i, f([math.cos(math.radians(phi)) ** 2]),
        f([math.sin(math.radians(phi)) ** 2]), 1.0, 0.0, 0.0, 0.0, 1.0, cut,
    )  # fmt: skip
    out = np.empty((4, wl.size))
    per_wavelength_values(
        one_layer_optics(material, wl), sample, f([1.0]), f([0.0, 0.0, 1.0]), 0, out
    )
    return 2.0 * np.pi * out[0]


CASES = [
    # material, thickness [µm], cut κ [deg], aoi [deg], plane of incidence from the axis [deg]
    (QUARTZ, 17.5, 1.0, 0.0, 0.0),  # zero-order plate, cut alone
    (QUARTZ, 1500.0, 3.0, 0.0, 0.0),  # thick multi-order plate, cut alone
    (QUARTZ, 900.0, 2.0, 10.0, 30.0),  # cut and tilt
    (QUARTZ, 900.0, -2.0, 10.0, 30.0),  # tipped the other way
    (QUARTZ, 900.0, 5.0, 25.0, 180.0),  # plane of incidence along the axis, reversed
    (QUARTZ, 900.0, 0.5, 40.0, 90.0),  # plane of incidence across the axis
    (CALCITE, 80.0, 4.0, 15.0, 60.0),  # a negative crystal, large birefringence
]


@pytest.mark.parametrize("material, d, kappa, aoi, phi", CASES)
def test_kernel_matches_the_fresnel_equation(material, d, kappa, aoi, phi):
    """The kernel's retardance equals k₀·d·|k_ze − k_zo| of the numerically solved Fresnel
    equation [YY], [VPG] to 1e-9 relative (the reference's own root polishing is ~1e-12)."""
    wl = np.array([450.0, 632.8, 1000.0])
    got = kernel_retardance(material, d, wl, kappa, aoi, phi)
    want = [reference_retardance(material, d, lam, kappa, 0.0, aoi, phi) for lam in wl]
    np.testing.assert_allclose(got, want, rtol=1e-9, atol=0)
    # and the numpy form the docs show
    n_o, n_e = indices(material, wl)
    dn = cut_index_difference(n_o, n_e, aoi, phi, kappa)
    np.testing.assert_allclose(2e3 * np.pi * d * np.abs(dn) / wl, want, rtol=1e-9, atol=0)


def test_normal_incidence_limit_is_the_textbook_extraordinary_index():
    """At normal incidence N_e = n_e(θ) with θ = 90° − κ from the optic axis [BW]."""
    n_o, n_e = indices(QUARTZ, np.linspace(400.0, 1500.0, 12))
    for kappa in (0.1, 1.0, 10.0, 45.0, 80.0):
        th = math.radians(90.0 - kappa)
        ne_th = n_o * n_e / np.sqrt(n_o**2 * math.sin(th) ** 2 + n_e**2 * math.cos(th) ** 2)
        for phi in (0.0, 77.0):  # no plane of incidence at normal incidence: φ cannot matter
            dn = cut_index_difference(n_o, n_e, 0.0, phi, kappa)
            np.testing.assert_allclose(dn + n_o, ne_th, rtol=1e-14)  # N_e itself
            np.testing.assert_allclose(dn, ne_th - n_o, rtol=1e-10)  # its difference


def test_in_face_axis_is_the_existing_oblique_formula():
    """κ = 0 reduces to the in-face formula (the case [VPG] treat for waveplates)."""
    from tolerance.retardance import oblique_index_difference

    n_o, n_e = indices(QUARTZ, np.array([500.0, 800.0]))
    for aoi, phi in ((5.0, 20.0), (30.0, 135.0)):
        np.testing.assert_allclose(
            cut_index_difference(n_o, n_e, aoi, phi, 0.0),
            oblique_index_difference(n_o, n_e, aoi, phi),
            rtol=1e-13,
        )


def test_cut_and_plus_180_plane_of_incidence_are_one_plate():
    """(κ, φ) and (−κ, φ + 180°) describe the same optic axis (a line, not an arrow) [YY]."""
    n_o, n_e = indices(QUARTZ, np.array([633.0]))
    a = cut_index_difference(n_o, n_e, 12.0, 40.0, 3.0)
    b = cut_index_difference(n_o, n_e, 12.0, 220.0, -3.0)
    np.testing.assert_allclose(a, b, rtol=1e-13)


# ----------------------------------------------------------------------------- the engine

SPEC = """
title = "cut test"
[wavelength]
start = "631.8nm"
stop = "633.8nm"
step = "1nm"
[source]
shape = "laser"
center = "632.8nm"
[input]
azimuth_deg = 0
[goal]
metric = "axial_ratio"
min = 0.98
[[candidate]]
name = "zero"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "632.8nm"
axis_deg = 45
[[candidate]]
name = "multi"
construction = "multi-order"
material = "quartz"
order = 12
waves = 0.25
design = "632.8nm"
axis_deg = 45
[tolerances]
TOLERANCES
[run]
samples = 2048
seed = 5
sensitivity_samples = 2048
variance_samples = 0
"""


def study(tolerances: str, extra: str = ""):
    return loads(SPEC.replace("TOLERANCES", tolerances) + extra, "cut.toml")


def one(inputs, i):
    return tuple(a[i] for a in inputs)


def test_engine_samples_match_the_fresnel_equation():
    """Each sample's cut angle and plane of incidence reach the kernel as drawn: a fixed cut of
    2° and tilt of 8° with the engine's own plane-of-incidence azimuths give the retardance of
    the Fresnel equation [YY] for every sample (multi-order plate, 1e-9 relative); the faces
    branch with reflectance 0 carries the same cut."""
    s = study("cut_deg = { low = 2, high = 2 }\ntilt_deg = { low = 8, high = 8 }")
    eng = montecarlo.Engine(s)
    case = eng.cases[1]
    inputs, _ = montecarlo.sample_inputs(case, s, eng.draws, 0, 512)
    poi = 360.0 * eng.draws("tilt_azimuth", 0, 0, 512)[1]
    la = case.plate.layers[0]
    wl = eng.grid
    optics = eng.optics(case.plate)
    faces = montecarlo.face_optics(
        case.plate, parse_faces({"reflectance": 0.0}), False, wl
    )
    for i in (0, 1, 17, 300):
        out = np.empty((4, wl.size))
        per_wavelength_values(optics, one(inputs, i), case.plate.signs(), case.goal, 0, out)
        want = [reference_retardance(QUARTZ, la.thickness_um, lam, 2.0, la.optic_axis_deg, 8.0,
                                     poi[i]) for lam in wl]  # fmt: skip
        np.testing.assert_allclose(2 * np.pi * out[0], want, rtol=1e-9)
        fo = np.empty((4, wl.size))
        values_one_faces(optics, faces, one(inputs, i), case.plate.signs(), case.goal, 0, fo,
                         np.empty((wl.size, 3)))  # fmt: skip
        np.testing.assert_allclose(fo[0], out[0], rtol=1e-12)


def test_zero_cut_is_no_cut_bit_for_bit():
    """cut_deg = 0 (as a zero width or as the fixed value 0) leaves every number of the run
    as it is without the key (common practice: an absent tolerance is exactly zero)."""
    base = "thickness_um = { sigma = 0.3 }\ntilt_deg = { sigma = 3 }\n"
    ref = tolerance.run(study(base), samples=1024)
    for extra in ("cut_deg = { sigma = 0 }", "cut_deg = { low = 0, high = 0 }"):
        got = tolerance.run(study(base + extra), samples=1024)
        for k in ref.data_vars:
            x, y = ref[k].values, got[k].values
            if x.dtype.kind in "fc":
                np.testing.assert_array_equal(x, y, err_msg=k)


def test_multi_order_plate_feels_the_cut_and_zero_order_does_not():
    """The cut shortens each plate's retardance by about δ·sin²κ [BW] (to leading order), so a
    12th-order plate (δ ≈ 12.25 waves) loses ~49 times what a zero-order one (0.25 wave) does:
    at κ ~ 1.5° that is ~0.008 wave (axial ratio ~0.95) against ~2e-4 wave; an axial ratio of
    0.98 needs |κ| below ~0.9° for the multi-order plate (closed form, derived here: b/a =
    tan(45° − πε) for a retardance error of ε wave, ε = 12.25·sin²κ).  The sensitivity machinery
    names the cut dominant for the multi-order plate and shows it in the grid."""
    s = study("cut_deg = { sigma = 1.5 }\nclocking_deg = { sigma = 0.1 }")
    ds = tolerance.run(s)
    assert "cut" in ds["tolerance_name"].values.tolist()
    alone = ds["sensitivity_alone"].sel(tolerance_name="cut")
    gain = ds["margin_gain"].sel(tolerance_name="cut")
    assert float(alone.sel(candidate="zero")) > 0.99
    assert float(alone.sel(candidate="multi")) < 0.9
    assert float(gain.sel(candidate="multi")) > 20 * float(gain.sel(candidate="zero"))
    assert str(ds["dominant"].sel(candidate="multi").values) == "cut"
    # the retardance spread at the design wavelength: ~49 times wider, within a factor 2
    w = int(np.argmin(np.abs(ds["wavelength"].values - 632.8)))
    sd = ds["retardance_std"].isel(wavelength=w)
    ratio = float(sd.sel(candidate="multi")) / float(sd.sel(candidate="zero"))
    assert 25 < ratio < 100, ratio


@pytest.mark.parametrize(
    "value, words",
    [
        ("{ sigma = 50 }", "reaches more than 45 deg"),
        ("{ sigma = -1 }", "cut_deg"),
        ('"1deg"', "cut_deg"),
        ("{ sigma = nan }", "cut_deg"),
    ],
)
def test_bad_cut_is_one_line_naming_the_field(value, words):
    with pytest.raises(RetolError) as exc:
        study(f"cut_deg = {value}")
    msg = str(exc.value)
    assert "\n" not in msg and "[tolerances].cut_deg" in msg and words in msg, msg


def test_a_cluster_run_carries_the_cut(monkeypatch):
    """The dask path (whole-block tasks) gives the local run's bits with a cut acting."""
    pytest.importorskip("distributed")
    from tolerance import cluster

    monkeypatch.setattr(cluster, "TASK_BLOCKS", 1)
    s = study("cut_deg = { sigma = 2 }\ntilt_deg = { sigma = 4 }")
    local = tolerance.run(s, samples=1024)
    with cluster.client(workers=1) as c:
        remote = tolerance.run(s, samples=1024, client=c)
    for k in local.data_vars:
        x, y = local[k].values, remote[k].values
        if x.dtype.kind in "fc":
            np.testing.assert_array_equal(x, y, err_msg=k)
    assert float(local["sensitivity_alone"].sel(tolerance_name="cut", candidate="multi")) < 1.0


def test_readme_spec_example_gives_a_cut():
    """README's "Spec files" example validates and carries ``cut_deg`` as written there
    (tolerance 0.5° read as 3 σ, the README's distribution rule)."""
    import re
    from pathlib import Path

    text = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    sec = re.search(r"^## Spec files\n(.*?)(?=^## )", text, re.S | re.M).group(1)
    block = re.search(r"```toml\n(.*?)```", sec, re.S).group(1)
    s = loads(block, "readme.toml")
    d = s.tolerances_for(s.candidates[0])["cut_deg"]
    assert d.kind == "normal" and d.sigma == pytest.approx(0.5 / 3)


@pytest.mark.parametrize("faces", [None, "{ reflectance = 0.0 }"], ids=["ideal", "faces"])
def test_source_lines_see_the_cut(faces):
    """A laser line off the grid's weights goes through the kernels' one-wavelength path: with a
    cut and a tilt its source-averaged state equals the grid's state at the same wavelength
    (to rounding), and differs from the uncut plate's (the cut acts there too)."""
    extra = f"faces = {faces}\n" if faces else ""
    spec = SPEC.replace('name = "multi"\n', 'name = "multi"\n' + extra)
    tol = "cut_deg = { sigma = 3 }\ntilt_deg = { sigma = 5 }"
    s = loads(spec.replace("TOLERANCES", tol), "cut.toml")
    plain = loads(spec.replace("TOLERANCES", "tilt_deg = { sigma = 5 }"), "cut.toml")
    got = []
    for st in (s, plain):
        eng = montecarlo.Engine(st)
        case = eng.cases[1]
        assert case.candidate.face_model.ideal == (faces is None)
        inputs, extra_ = montecarlo.sample_inputs(case, st, eng.draws, 0, 512)
        stats = eng._stats(None, 512, False, np.zeros(eng.grid.size))
        _, spec_st, des_st = eng._call(case, inputs, extra_, stats, 512)
        assert case.w_design == 1 and eng.spectrum.lines_nm.tolist() == [632.8]
        np.testing.assert_allclose(spec_st, des_st, atol=1e-12)
        got.append(spec_st)
    assert np.max(np.abs(got[0] - got[1])) > 1e-3


def test_a_tolerance_with_nothing_to_act_on_gives_no_sobol_indices():
    """Crossing on a single plate has no stream (nothing to cross): the variance-based
    sensitivity gives no indices and the rare-reject search is skipped, instead of failing
    (a case the differential fuzzing met; common practice: nothing varies, nothing to split)."""
    spec = SPEC.replace("TOLERANCES", "crossing_deg = { sigma = 3 }").replace(
        "variance_samples = 0", "variance_samples = 64"
    )
    ds = tolerance.run(loads(spec, "cut.toml"), samples=512)
    assert np.all(np.isnan(ds["sobol_pass_total"].values))
