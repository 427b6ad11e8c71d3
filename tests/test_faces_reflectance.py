"""Coatings given as a table of reflectance against wavelength, and the ``reflectance`` tolerance.

Sources
-------
[airy] M. Born and E. Wolf, *Principles of Optics*, 7th ed. (Cambridge, 1999), sec. 7.6.1: the
    Airy transmission t = τ·e^{iφ}/(1 − ρ·e^{2iφ}) of a plane-parallel plate, ρ = √(R₁R₂),
    τ = √((1 − R₁)(1 − R₂)); its phase beyond φ is ε = atan2(ρ sin 2φ, 1 − ρ cos 2φ).
[holmes] D. A. Holmes, "Exact theory of retardation plates," J. Opt. Soc. Am. 54, 1115-1120
    (1964): each eigenwave of a birefringent plate is its own etalon, so the retardance of a
    plate with reflecting faces is δ + ε_slow − ε_fast.
[fresnel] Born & Wolf sec. 1.5.3: an uncoated face reflects ((n − 1)/(n + 1))² at normal
    incidence.

The coating tables below are invented for the tests (no vendor's data).
"""

from __future__ import annotations

import json
import os
from importlib import resources
from pathlib import Path

import numpy as np
import pytest

import tolerance
from tolerance.decision import candidate_has_faces, tolerance_applies
from tolerance.distributions import parse as parse_distribution
from tolerance.errors import RetolError
from tolerance.etalon import fresnel_reflectance, layer_phases
from tolerance.montecarlo import Engine, sample_inputs
from tolerance.spec import load_spec, loads
from tolerance.study import Study

#: An invented broadband AR coating: 0.6 % at the band edges, 0.15 % at its centre.
COATING_CSV = """# invented AR curve for tests: wavelength [nm], power reflectance per face
wavelength_nm,reflectance
600,0.0060
620,0.0030
635,0.0015
650,0.0030
670,0.0060
"""

SPEC = """
title = "coating table"
[wavelength]
start = "625nm"
stop = "645nm"
step = "0.25nm"
[source]
shape = "laser"
center = "635nm"
[goal]
state = "circular"
metric = "axial_ratio"
min = 0.95
over = "spectrum"
[[candidate]]
name = "coated"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "635nm"
axis_deg = 45
faces = FACES
[tolerances]
thickness_um = { sigma = 0.05 }
"""


def _spec(tmp_path: Path, faces: str, csv: str | None = COATING_CSV, name="coating.csv") -> Path:
    if csv is not None:
        (tmp_path / name).write_text(csv)
    p = tmp_path / "spec.toml"
    p.write_text(SPEC.replace("FACES", faces))
    return p


# ----------------------------------------------------------------------------- the CSV form


def test_csv_is_read_relative_to_the_spec_and_interpolated(tmp_path):
    study = load_spec(_spec(tmp_path, '{ reflectance = "coating.csv" }'))
    faces = study.candidates[0].faces
    assert faces.tabulated and faces.file == "coating.csv"
    # linear interpolation between the rows (closed form: 0.003 + (627.5−620)/15·(0.0015−0.003))
    np.testing.assert_allclose(faces.at([620.0, 627.5, 635.0]), [0.003, 0.00225, 0.0015])


def test_stored_spec_round_trips_without_the_file(tmp_path):
    study = load_spec(_spec(tmp_path, '{ reflectance = "coating.csv" }'))
    d = json.loads(json.dumps(study.to_dict()))
    os.remove(tmp_path / "coating.csv")  # the stored spec carries the table inline
    back = Study.from_dict(d)
    assert back.candidates[0].faces == study.candidates[0].faces
    assert back.to_dict() == study.to_dict()


def test_grid_attrs_round_trip_and_report_words(tmp_path):
    from tolerance.report import _faces_words

    study = load_spec(_spec(tmp_path, '{ reflectance = "coating.csv" }'))
    grid = tolerance.run(study, samples=512, seed=3)
    spec = json.loads(grid.attrs["spec"])
    assert Study.from_dict(spec).candidates[0].faces == study.candidates[0].faces
    words = _faces_words(spec)
    assert "coating.csv" in words and "0.15–0.6 %" in words


def test_a_flat_table_is_the_constant_coating_bit_for_bit(tmp_path):
    flat = "wavelength_nm,reflectance\n600,0.0025\n700,0.0025\n"
    table = load_spec(_spec(tmp_path, '{ reflectance = "flat.csv" }', flat, "flat.csv"))
    const = loads(SPEC.replace("FACES", "{ reflectance = 0.0025 }"))
    a = Engine(table, samples=512, seed=4)
    b = Engine(const, samples=512, seed=4)
    wa, sa = a.pass_values(a.cases[0])
    wb, sb = b.pass_values(b.cases[0])
    np.testing.assert_array_equal(wa, wb)
    np.testing.assert_array_equal(sa, sb)
    np.testing.assert_array_equal(a.nominal(a.cases[0]).values, b.nominal(b.cases[0]).values)


BAD_CSV = [
    ("600,0.003\n700,1.0\n", "row 2, column reflectance"),
    ("600,0.003\n700,-0.001\n", "row 2, column reflectance"),
    ("600,nan\n700,0.003\n", "row 1, column reflectance"),
    ("600,0.003\ninf,0.003\n", "row 2, column wavelength_nm"),
    ("700,0.003\n600,0.003\n", "row 2, column wavelength_nm: 600 nm is below"),
    ("600,0.003\n600,0.004\n700,0.003\n", "row 2, column wavelength_nm: 600 nm repeats"),
    ("600,0.003\n", "1 row(s)"),
    ("600,0.003,1\n700,0.003,1\n", "line 1: expected 2 columns"),
    ("wavelength_nm,reflectance\n600,abc\n", "line 2: cannot read"),
    ("630,0.003\n640,0.003\n", "covers 630–640 nm, but [wavelength] spans 625–645 nm"),
]


@pytest.mark.parametrize(("csv", "words"), BAD_CSV)
def test_bad_coating_files_are_refused_in_one_line(tmp_path, csv, words):
    with pytest.raises(RetolError) as exc:
        load_spec(_spec(tmp_path, '{ reflectance = "coating.csv" }', csv))
    msg = str(exc.value)
    assert "\n" not in msg
    assert "faces.reflectance" in msg and words in msg
    assert "coating.csv" in msg


def test_missing_or_special_coating_file(tmp_path):
    with pytest.raises(RetolError, match="no such file"):
        load_spec(_spec(tmp_path, '{ reflectance = "nothere.csv" }'))
    (tmp_path / "dir.csv").mkdir()
    with pytest.raises(RetolError, match="is a folder"):
        load_spec(_spec(tmp_path, '{ reflectance = "dir.csv" }'))


# ----------------------------------------------------------------------------- the tolerance

LASER = Path(str(resources.files("tolerance.examples").joinpath("laser_faces.toml")))


@pytest.fixture(scope="module")
def laser():
    return load_spec(LASER)


def _with(study, index, **extra):
    tol = dict(study.tolerances_for(study.candidates[index]))
    tol.update({k: parse_distribution(v, k) for k, v in extra.items()})
    return tol


@pytest.mark.parametrize("index", [0, 1])
def test_zero_width_reflectance_tolerance_is_no_tolerance_bit_for_bit(laser, index):
    eng = Engine(laser, samples=1024, seed=11)
    plain = eng.case(index)
    zero = eng.case(index, tolerances=_with(laser, index, reflectance={"sigma": 0.0}))
    for a, b in zip(eng.pass_values(plain), eng.pass_values(zero), strict=True):
        np.testing.assert_array_equal(a, b)
    ra, rb = eng.evaluate(plain), eng.evaluate(zero)
    np.testing.assert_array_equal(ra.quantiles, rb.quantiles)
    np.testing.assert_array_equal(ra.worst, rb.worst)
    assert ra.yield_ == rb.yield_


def test_air_gap_zero_width_bit_for_bit():
    text = SPEC.replace("FACES", '"uncoated"\nair_gap = true').replace(
        'construction = "zero-order"', 'construction = "compound"\nthick_plate = "300um"'
    )
    study = loads(text)
    eng = Engine(study, samples=512, seed=2)
    tol = _with(study, 0, reflectance={"sigma": 0.0})
    for a, b in zip(
        eng.pass_values(eng.case(0)), eng.pass_values(eng.case(0, tolerances=tol)), strict=True
    ):
        np.testing.assert_array_equal(a, b)


def test_a_clipped_offset_is_the_reflection_free_coating_bit_for_bit():
    """R = 0.0025 with a fixed offset of −1 % clips to R = 0 (the documented clip)."""
    coated = loads(SPEC.replace("FACES", "{ reflectance = 0.0025 }"))
    bare = loads(SPEC.replace("FACES", "{ reflectance = 0.0 }"))
    a = Engine(coated, samples=512, seed=6)
    b = Engine(bare, samples=512, seed=6)
    tol = _with(coated, 0, reflectance={"low": -0.01, "high": -0.01})
    for x, y in zip(
        a.pass_values(a.case(0, tolerances=tol)), b.pass_values(b.cases[0]), strict=True
    ):
        np.testing.assert_array_equal(x, y)


def test_each_face_has_its_own_stream(laser):
    eng = Engine(laser, samples=2048, seed=8)
    case = eng.case(0, tolerances=_with(laser, 0, reflectance={"sigma": 0.001}))
    _, extra = sample_inputs(case, laser, eng.draws, 0, 2048)
    dr = extra["face_dr"]
    assert dr.shape == (2048, 2)  # one cavity: entrance and exit face
    z0, _ = eng.draws("reflectance", 0, 0, 2048)
    z1, _ = eng.draws("reflectance", 1, 0, 2048)
    np.testing.assert_array_equal(dr[:, 0], 0.001 * z0)
    np.testing.assert_array_equal(dr[:, 1], 0.001 * z1)
    assert abs(np.corrcoef(dr[:, 0], dr[:, 1])[0, 1]) < 0.1  # independent (4.5σ for n = 2048)
    ideal = eng.case(2, tolerances=_with(laser, 2, reflectance={"sigma": 0.001}))
    assert sample_inputs(ideal, laser, eng.draws, 0, 8)[1]["face_dr"] is None


def test_retardance_ripple_of_offset_faces_matches_the_airy_phase(laser):
    """Per sample: δ + ε_s − ε_f with ε = atan2(ρ sin 2φ, 1 − ρ cos 2φ), ρ = √(R₁R₂), each face
    R = Fresnel(n of the wave) + its drawn offset ([airy], [holmes], [fresnel])."""
    eng = Engine(laser, samples=512, seed=9)
    tol = {"reflectance": parse_distribution({"sigma": 0.01}, "r")}
    case = eng.case(0, tolerances=tol)  # uncoated; only the reflectance varies
    res = eng.evaluate(case, keep_samples=True)
    _, extra = sample_inputs(case, laser, eng.draws, 0, 512)
    dr = extra["face_dr"]
    wl = eng.grid
    ph = layer_phases(case.plate, wl, laser.environment.temperature_c)
    Rf = fresnel_reflectance(ph.n_fast[0])
    Rs = fresnel_reflectance(ph.n_slow[0])

    def eps(phase, R, d0, d1):
        r1 = np.clip(R + d0, 0.0, 1 - 1e-6)
        r2 = np.clip(R + d1, 0.0, 1 - 1e-6)
        rho = np.sqrt(r1 * r2)
        return np.arctan2(rho * np.sin(2 * phase), 1 - rho * np.cos(2 * phase))

    delta = ph.phase_slow[0] - ph.phase_fast[0]
    worst_ripple = 0.0
    for s in (0, 1, 17, 200, 511):
        d0, d1 = dr[s]
        expect = (delta + eps(ph.phase_slow[0], Rs, d0, d1) - eps(ph.phase_fast[0], Rf, d0, d1)) / (
            2 * np.pi
        )
        got = res.kept[s, 0].astype(float)  # retardance [waves], kept as float32
        np.testing.assert_allclose(got, expect, rtol=0, atol=2e-7)
        nominal = (delta + eps(ph.phase_slow[0], Rs, 0, 0) - eps(ph.phase_fast[0], Rf, 0, 0)) / (
            2 * np.pi
        )
        worst_ripple = max(worst_ripple, np.max(np.abs(got - nominal)))
    assert worst_ripple > 1e-4  # the offsets really moved the ripple


def test_yield_falls_as_the_reflectance_tolerance_widens(laser):
    """The AR-coated candidate of the narrow-laser example: wider coating variation, more
    etalon ripple, lower yield (common draws, so the comparison is not sampling noise)."""
    eng = Engine(laser, samples=4096, seed=13)
    ys = [
        eng.pass_rate(eng.case(1, tolerances=_with(laser, 1, reflectance={"sigma": s})))
        for s in (0.0, 0.005, 0.02, 0.05)
    ]
    assert all(b <= a for a, b in zip(ys, ys[1:], strict=False)), ys
    assert ys[-1] < ys[0] - 0.05, ys


def test_not_applicable_to_ideal_faces_and_shown_in_sensitivity(tmp_path):
    text = (
        LASER.read_text()
        .replace("[tolerances]", "[tolerances]\nreflectance = { sigma = 0.002 }")
        .replace("samples = 20000", "samples = 1024")
    )
    study = loads(text)
    grid = tolerance.run(study, samples=1024, seed=11)
    names = [str(t) for t in grid["tolerance_name"].values]
    assert "reflectance" in names
    assert [candidate_has_faces(grid.attrs, c) for c in range(3)] == [True, True, False]
    assert tolerance_applies("reflectance", 1, "spectrum", has_faces=True)
    assert not tolerance_applies("reflectance", 1, "spectrum", has_faces=False)
    j = names.index("reflectance")
    alone = grid["sensitivity_alone"].values[:, j]
    assert np.all(np.isfinite(alone[:2]))
    # the uncoated plate loses yield to coating variation alone more than the AR-coated one
    assert alone[0] <= alone[1]
    from tolerance.report import assumptions

    words = " ".join(assumptions(grid))
    assert "independently per face, clipped to [0, 0.999999]" in words


def test_reflectance_tolerance_bounds():
    text = SPEC.replace("FACES", '"uncoated"').replace(
        "[tolerances]", "[tolerances]\nreflectance = { sigma = 0.2 }"
    )
    with pytest.raises(RetolError, match=r"\[tolerances\]\.reflectance.*100 %"):
        loads(text)


def test_sobol_layout_keeps_the_older_dimensions(laser):
    from tolerance import sampler
    from tolerance.tolerances import SHORT, TOLERANCES

    text = LASER.read_text().replace("[run]", '[run]\nsampling = "sobol"\nreplicates = 2')
    study = loads(text)
    eng = Engine(study, samples=1024, seed=1)
    layout = eng.draws.layout
    per = {k for k, e in TOLERANCES.items() if e.extra["per_layer"]}
    old = sampler.sobol_layout(
        tuple(k for k in SHORT if k != "reflectance") + sampler.EXTRA_STREAMS, per, 16
    )
    assert {k: v for k, v in layout.items() if k[0] != "reflectance"} == old
    assert ("reflectance", 0) in layout and ("reflectance", 31) in layout


def test_cli_plate_reads_a_coating_file(tmp_path, monkeypatch):
    from click.testing import CliRunner

    from tolerance.cli.main import cli

    monkeypatch.chdir(tmp_path)
    (tmp_path / "coating.csv").write_text(COATING_CSV)
    base = ["plate", "--material", "quartz", "--design", "635nm", "--from", "625nm"]
    r = CliRunner().invoke(cli, [*base, "--to", "645nm", "--faces", "coating.csv", "--json"])
    assert r.exit_code == 0, r.output
    flat = CliRunner().invoke(cli, [*base, "--to", "645nm", "--faces", "0.0015", "--json"])
    doc = json.loads(r.output)
    assert doc["faces"]["file"] == "coating.csv"
    rows = doc["table"]
    # at 635 nm the table gives 0.15 %: the same row as the constant coating of 0.15 %
    rows_flat = json.loads(flat.output)["table"]
    at = [i for i, x in enumerate(rows) if abs(x["wavelength_nm"] - 635.0) < 1e-9][0]
    assert rows[at]["retardance_waves"] == pytest.approx(
        rows_flat[at]["retardance_waves"], abs=1e-12
    )
    bad = CliRunner().invoke(cli, [*base, "--to", "700nm", "--faces", "coating.csv"])
    assert bad.exit_code == 2
    assert "--faces" in bad.output and "covers 600–670 nm" in bad.output
    assert len(bad.output.strip().splitlines()) == 1


@pytest.mark.parametrize("tilt", [False, True])
def test_single_layer_fused_path_matches_the_general_path(tilt):
    """A single layer takes the fused loop when cemented and the general per-row path with an
    air gap (one layer: the same cavity, the same physics); they agree to rounding (τ is
    1 − R on one path and √((1 − R)(1 − R)) on the other)."""
    tol = "tilt_deg = { sigma = 0.5 }\n" if tilt else ""
    text = SPEC.replace("FACES", '"uncoated"').replace(
        "[tolerances]", "[tolerances]\n" + tol + "reflectance = { sigma = 0.002 }"
    )
    fused = loads(text)
    general = loads(text.replace('faces = "uncoated"', 'faces = "uncoated"\nair_gap = true'))
    a = Engine(fused, samples=512, seed=21)
    b = Engine(general, samples=512, seed=21)
    wa, sa = a.pass_values(a.cases[0])
    wb, sb = b.pass_values(b.cases[0])
    np.testing.assert_allclose(wa, wb, rtol=0, atol=1e-12)
    np.testing.assert_allclose(sa, sb, rtol=0, atol=1e-13)
    na, nb = a.nominal(a.cases[0]), b.nominal(b.cases[0])
    np.testing.assert_allclose(na.stokes, nb.stokes, rtol=0, atol=1e-14)
    np.testing.assert_allclose(na.values[0], nb.values[0], rtol=0, atol=1e-14)


@pytest.mark.parametrize("gap", [False, True])
def test_fixed_offset_on_a_compound_plate_is_the_coating_it_adds_up_to(gap):
    """A fixed offset of +0.1 % on R = 0.25 % faces gives the R = 0.35 % coating (general
    path: two layers, cemented or with air gaps), to rounding of R + ΔR."""
    extra = "\nair_gap = true" if gap else ""
    text = SPEC.replace(
        'construction = "zero-order"', 'construction = "compound"\nthick_plate = "300um"'
    )
    a_study = loads(text.replace("FACES", "{ reflectance = 0.0025 }" + extra))
    b_study = loads(text.replace("FACES", "{ reflectance = 0.0035 }" + extra))
    a = Engine(a_study, samples=512, seed=6)
    b = Engine(b_study, samples=512, seed=6)
    tol = _with(a_study, 0, reflectance={"low": 0.001, "high": 0.001})
    for x, y in zip(
        a.pass_values(a.case(0, tolerances=tol)), b.pass_values(b.cases[0]), strict=True
    ):
        np.testing.assert_allclose(x, y, rtol=0, atol=1e-12)
    wa, _ = a.pass_values(a.cases[0])
    wb, _ = b.pass_values(b.cases[0])
    assert np.max(np.abs(wa - wb)) > 1e-6  # the two coatings do differ


def test_reflectance_draws_travel_to_a_cluster_bit_identically(monkeypatch):
    """The per-face offsets are made inside each task (from the seed), so a distributed run
    equals the local one bit for bit."""
    pytest.importorskip("distributed")
    from tolerance import cluster

    monkeypatch.setattr(cluster, "TASK_BLOCKS", 1)
    text = LASER.read_text().replace(
        "[tolerances]", "[tolerances]\nreflectance = { sigma = 0.002 }"
    )
    study = loads(text)
    local = tolerance.run(study, samples=1024, seed=5)
    with cluster.client(workers=2) as c:
        remote = tolerance.run(study, samples=1024, seed=5, client=c)
    for k in local.data_vars:
        x, y = local[k].values, remote[k].values
        if x.dtype.kind in "fc":
            np.testing.assert_array_equal(x, y, err_msg=k)
        else:
            assert x.tolist() == y.tolist(), k
