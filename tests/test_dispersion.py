"""Dispersion data: indices against published values, formulas recomputed, material files.

Sources
-------
[Ghosh1999] G. Ghosh, "Dispersion-equation coefficients for the refractive index and
    birefringence of calcite and quartz crystals," Opt. Commun. 163, 95-102 (1999).
    The quartz coefficients used below are the ones printed in the task brief for this suite.
[Dodge1984] M. J. Dodge, "Refractive properties of magnesium fluoride," Appl. Opt. 23,
    1980-1985 (1984).  Sellmeier coefficients recalled from memory, as commonly tabulated.
[Malitson-Dodge] I. H. Malitson and M. J. Dodge, sapphire Sellmeier coefficients (1972), as
    commonly tabulated; recalled from memory.
[Hecht] E. Hecht, Optics (Addison-Wesley), the table of refractive indices of uniaxial
    crystals at lambda0 = 589.3 nm (quartz 1.5443 / 1.5534, calcite 1.6584 / 1.4864); the values
    are quoted from memory.
[memory] Handbook values recalled from memory: MgF2 n_o 1.3777, n_e 1.3895 at 589 nm; sapphire
    n_o 1.768, n_e 1.760 at 589 nm; stretched-film retardance dispersion R(450)/R(550) about 1.08
    for polycarbonate and about 1.02 for PVA.

Tolerances against printed values are one unit in the last printed digit.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from tolerance.dispersion import (
    birefringence,
    get_material,
    indices,
    list_materials,
    load_material_file,
)
from tolerance.errors import OutOfRangeError, RetolError

BUILTIN = ("calcite", "mgf2", "polycarbonate", "pva", "quartz", "sapphire")


# ----------------------------------------------------------------------------- independent formulas


def ghosh_n(lam_um, A, B, C, D, E):
    """n^2 = 1 + A + B l^2/(l^2 - C) + D l^2/(l^2 - E), l in um [Ghosh1999]."""
    l2 = lam_um * lam_um
    return math.sqrt(1.0 + A + B * l2 / (l2 - C) + D * l2 / (l2 - E))


def sellmeier_n(lam_um, terms):
    """n^2 = 1 + sum A_i l^2/(l^2 - l_i^2), l in um."""
    l2 = lam_um * lam_um
    return math.sqrt(1.0 + sum(a * l2 / (l2 - li * li) for a, li in terms))


# [Ghosh1999], coefficients as printed in the brief.
QUARTZ_O = dict(A=0.28604141, B=1.07044083, C=1.00585997e-2, D=1.10202242, E=100.0)
QUARTZ_E = dict(A=0.28851804, B=1.09509924, C=1.02101864e-2, D=1.15662475, E=100.0)
# [Dodge1984], from memory.
MGF2_O = [(0.48755108, 0.04338408), (0.39875031, 0.09461442), (2.3120353, 23.793604)]
MGF2_E = [(0.41344023, 0.03684262), (0.50497499, 0.09076162), (2.4904862, 23.771995)]
# [Malitson-Dodge], from memory.
SAPPHIRE_O = [(1.4313493, 0.0726631), (0.65054713, 0.1193242), (5.3414021, 18.028251)]
SAPPHIRE_E = [(1.5039759, 0.0740288), (0.55069141, 0.1216529), (6.5927379, 20.072248)]


@pytest.mark.parametrize("wl", [250.0, 404.7, 589.3, 632.8, 1064.0, 1550.0, 2000.0])
def test_quartz_matches_ghosh_formula_recomputed(wl):
    # [Ghosh1999] formula and coefficients, recomputed here independently of the library.
    n_o, n_e = indices(get_material("quartz"), wl)
    assert float(n_o) == pytest.approx(ghosh_n(wl / 1e3, **QUARTZ_O), abs=1e-12)
    assert float(n_e) == pytest.approx(ghosh_n(wl / 1e3, **QUARTZ_E), abs=1e-12)


@pytest.mark.parametrize("wl", [250.0, 589.3, 1064.0, 3000.0])
def test_mgf2_matches_dodge_sellmeier_recomputed(wl):
    # [Dodge1984] Sellmeier form; coefficients from memory.
    n_o, n_e = indices(get_material("mgf2"), wl)
    assert float(n_o) == pytest.approx(sellmeier_n(wl / 1e3, MGF2_O), abs=1e-12)
    assert float(n_e) == pytest.approx(sellmeier_n(wl / 1e3, MGF2_E), abs=1e-12)


@pytest.mark.parametrize("wl", [250.0, 589.3, 1064.0, 4000.0])
def test_sapphire_matches_malitson_dodge_recomputed(wl):
    # [Malitson-Dodge] Sellmeier form; coefficients from memory.
    n_o, n_e = indices(get_material("sapphire"), wl)
    assert float(n_o) == pytest.approx(sellmeier_n(wl / 1e3, SAPPHIRE_O), abs=1e-12)
    assert float(n_e) == pytest.approx(sellmeier_n(wl / 1e3, SAPPHIRE_E), abs=1e-12)


# ----------------------------------------------------------------------------- published values

HANDBOOK = [
    # material, wavelength [nm], n_o, n_e, one unit of the last printed digit, source
    ("quartz", 589.3, 1.5443, 1.5534, 1e-4),  # [Hecht] table at 589.3 nm, from memory
    ("mgf2", 589.3, 1.3777, 1.3895, 1e-4),  # [memory]
    ("sapphire", 589.3, 1.768, 1.760, 1e-3),  # [memory]
]


@pytest.mark.parametrize("name, wl, n_o_ref, n_e_ref, tol", HANDBOOK)
def test_indices_match_handbook_values(name, wl, n_o_ref, n_e_ref, tol):
    n_o, n_e = indices(get_material(name), wl)
    assert float(n_o) == pytest.approx(n_o_ref, abs=tol)
    assert float(n_e) == pytest.approx(n_e_ref, abs=tol)
    # The sign of the birefringence follows the handbook values and the file's "kind".
    m = get_material(name)
    assert m.negative == (n_e_ref < n_o_ref)
    assert (float(n_e - n_o) < 0) == m.negative


def test_calcite_ordinary_index_matches_handbook():
    # [Hecht] calcite n_o = 1.6584 at 589.3 nm, from memory.
    n_o, _ = indices(get_material("calcite"), 589.3)
    assert float(n_o) == pytest.approx(1.6584, abs=1e-4)


@pytest.mark.xfail(
    strict=True,
    reason="Ghosh's calcite e-ray fit gives n_e(589.3 nm) = 1.48613, 2.7e-4 below the handbook "
    "1.4864 [Hecht]; the two published sources disagree by more than the printed precision "
    "(reported to the lead to check calcite.toml against the paper).",
)
def test_calcite_extraordinary_index_at_handbook_precision():
    # [Hecht] calcite n_e = 1.4864 at 589.3 nm, from memory.
    _, n_e = indices(get_material("calcite"), 589.3)
    assert float(n_e) == pytest.approx(1.4864, abs=1e-4)


def test_calcite_extraordinary_index_near_handbook():
    # [Hecht] calcite n_e = 1.4864 at 589.3 nm (from memory), against [Ghosh1999]'s fit: the
    # known disagreement of the two sources (2.7e-4) is allowed, nothing more.
    _, n_e = indices(get_material("calcite"), 589.3)
    assert float(n_e) == pytest.approx(1.4864, abs=5e-4)
    assert get_material("calcite").negative


@pytest.mark.parametrize("name, ratio", [("polycarbonate", 1.08), ("pva", 1.02)])
def test_film_retardance_dispersion_ratio(name, ratio):
    # [memory] single-oscillator films: R(450)/R(550) ~ 1.08 (polycarbonate), ~ 1.02 (PVA).
    m = get_material(name)
    r = float(birefringence(m, 450.0) / birefringence(m, 550.0))
    assert r == pytest.approx(ratio, abs=0.01)
    assert m.kind == "film"
    assert float(birefringence(m, 550.0)) > 0


# ----------------------------------------------------------------------------- API behaviour


def test_builtin_list_is_complete_and_ranges_sane():
    mats = {m.name: m for m in list_materials()}
    assert set(BUILTIN) <= set(mats)
    for m in mats.values():
        assert 0 < m.valid_min_nm < m.valid_max_nm
        assert m.source.strip()
        # Evaluates finitely across its whole valid range.
        wl = np.linspace(m.valid_min_nm, m.valid_max_nm, 201)
        n_o, n_e = indices(m, wl)
        assert np.all(np.isfinite(n_o)) and np.all(np.isfinite(n_e))
        assert np.all(n_o > 1) and np.all(n_e > 1)


def test_names_case_insensitive():
    assert get_material("Quartz") is get_material("quartz")
    assert get_material("  MGF2 ") is get_material("mgf2")


def test_out_of_range_raises_retol_error():
    q = get_material("quartz")
    with pytest.raises(OutOfRangeError) as exc:
        indices(q, 2500.0)
    assert isinstance(exc.value, RetolError) and isinstance(exc.value, ValueError)
    assert "2500" in str(exc.value) and "--extrapolate" in str(exc.value)
    with pytest.raises(OutOfRangeError):
        indices(q, [500.0, 150.0])  # one bad value in an array is enough
    with pytest.raises(RetolError):
        indices(q, [500.0, float("nan")])


def test_extrapolate_warns_and_evaluates():
    q = get_material("quartz")
    with pytest.warns(UserWarning, match="extrapolat"):
        n_o, n_e = indices(q, 2200.0, extrapolate=True)
    assert float(n_o) == pytest.approx(ghosh_n(2.2, **QUARTZ_O), abs=1e-12)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        indices(q, 2000.0, extrapolate=True)  # inside the range: no warning


def test_unknown_material_lists_known_ones():
    with pytest.raises(RetolError) as exc:
        get_material("quarz")
    msg = str(exc.value)
    assert "\n" not in msg
    assert "quarz" in msg and "material" in msg
    for name in BUILTIN:
        assert name in msg
    assert "did you mean 'quartz'" in msg


def test_n_dimensional_input_keeps_shape():
    wl = np.linspace(400.0, 1000.0, 12).reshape(3, 4)
    for name in BUILTIN:
        m = get_material(name)
        n_o, n_e = indices(m, wl)
        assert n_o.shape == (3, 4) and n_e.shape == (3, 4)
        flat_o, flat_e = indices(m, wl.ravel())
        np.testing.assert_allclose(n_o.ravel(), flat_o)
        np.testing.assert_allclose(n_e.ravel(), flat_e)
        # birefringence with a temperature array broadcasts too
        dn = birefringence(m, wl[:, :1], temperature_c=np.array([20.0, 30.0, 40.0, 50.0]))
        assert dn.shape == (3, 4)


# ----------------------------------------------------------------------------- user files

QUARTZ_TOML = """
name = "myquartz"
kind = "positive uniaxial"
valid_min_um = 0.2
valid_max_um = 2.0
reference_temperature_c = 20.0
source = "test copy of Ghosh 1999"

[formula]
type = "ghosh"

[formula.ordinary]
A = 0.28604141
B = 1.07044083
C = 1.00585997e-2
D = 1.10202242
E = 100.0

[formula.extraordinary]
A = 0.28851804
B = 1.09509924
C = 1.02101864e-2
D = 1.15662475
E = 100.0
"""

SELLMEIER_TOML = """
name = "mymgf2"
kind = "positive uniaxial"
valid_min_um = 0.2
valid_max_um = 7.0
source = "test copy of Dodge 1984"

[formula]
type = "sellmeier"

[formula.ordinary]
A = [0.48755108, 0.39875031, 2.3120353]
lambda = [0.04338408, 0.09461442, 23.793604]

[formula.extraordinary]
A = [0.41344023, 0.50497499, 2.4904862]
lambda = [0.03684262, 0.09076162, 23.771995]
"""

FILM_TOML = """
name = "myfilm"
kind = "film"
valid_min_um = 0.4
valid_max_um = 1.0
source = "invented film"

[formula]
type = "oscillator-birefringence"
birefringence_inf = 0.002
lambda0 = 0.15
mean_index = 1.55
"""


def test_user_toml_material(tmp_path):
    p = tmp_path / "myquartz.toml"
    p.write_text(QUARTZ_TOML)
    m = get_material(str(p))
    assert m.name == "myquartz" and m.valid_min_nm == pytest.approx(200.0)
    n_o, n_e = indices(m, 632.8)
    # [Ghosh1999], recomputed
    assert float(n_o) == pytest.approx(ghosh_n(0.6328, **QUARTZ_O), abs=1e-12)
    assert float(n_e) == pytest.approx(ghosh_n(0.6328, **QUARTZ_E), abs=1e-12)
    with pytest.raises(OutOfRangeError):
        indices(m, 2040.0)  # the user file's narrower range is honoured


def test_user_sellmeier_and_film_toml(tmp_path):
    p = tmp_path / "mymgf2.toml"
    p.write_text(SELLMEIER_TOML)
    n_o, n_e = indices(get_material(p), 700.0)
    assert float(n_o) == pytest.approx(sellmeier_n(0.7, MGF2_O), abs=1e-12)  # [Dodge1984]
    assert float(n_e) == pytest.approx(sellmeier_n(0.7, MGF2_E), abs=1e-12)
    f = tmp_path / "myfilm.toml"
    f.write_text(FILM_TOML)
    m = get_material(f)
    # single-oscillator birefringence dn = dn_inf l^2/(l^2 - l0^2), recomputed
    assert float(birefringence(m, 500.0)) == pytest.approx(0.002 * 0.25 / (0.25 - 0.0225))
    assert float(indices(m, 500.0)[0]) == pytest.approx(1.55)


def test_user_csv_table_of_indices(tmp_path):
    p = tmp_path / "measured.csv"
    p.write_text(
        "# invented measured plate material\n"
        "wavelength_nm,n_o,n_e\n"
        "600,1.500,1.510\n"
        "400,1.520,1.532\n"
        "800,1.490,1.499\n"
    )
    m = load_material_file(p)
    assert m.valid_min_nm == 400 and m.valid_max_nm == 800
    assert m.kind == "positive uniaxial"
    n_o, n_e = indices(m, [400.0, 500.0, 700.0])
    np.testing.assert_allclose(n_o, [1.520, 1.510, 1.495], atol=1e-12)  # linear interpolation
    np.testing.assert_allclose(n_e, [1.532, 1.521, 1.5045], atol=1e-12)
    with pytest.raises(OutOfRangeError):
        indices(m, 850.0)
    assert get_material(str(p)).name == "measured"


def test_user_csv_table_of_birefringence(tmp_path):
    p = tmp_path / "neg.csv"
    p.write_text("wavelength_nm,birefringence\n500,-0.0100\n600,-0.0090\n700,-0.0085\n")
    m = get_material(p)
    assert m.negative
    assert float(birefringence(m, 550.0)) == pytest.approx(-0.0095, abs=1e-12)


BROKEN_TOML = [
    # (what is wrong, replacement applied to QUARTZ_TOML, word the message must name)
    ("missing source", ('source = "test copy of Ghosh 1999"', ""), "source"),
    ("missing kind", ('kind = "positive uniaxial"', ""), "kind"),
    ("missing coefficient", ("E = 100.0\n\n[formula.extraordinary]", "\n[formula.extraordinary]"),
     "E"),
    ("missing block", ("[formula.extraordinary]", "[formula.other]"), "extraordinary"),
    ("NaN coefficient", ("C = 1.00585997e-2", "C = nan"), "C"),
    ("NaN range", ("valid_max_um = 2.0", "valid_max_um = nan"), "valid"),
    ("bad kind", ('kind = "positive uniaxial"', 'kind = "biaxial"'), "kind"),
    ("bad formula", ('type = "ghosh"', 'type = "cauchy"'), "formula"),
    ("bad TOML", ("[formula]", "[formula"), "TOML"),
]


@pytest.mark.parametrize("what, change, word", BROKEN_TOML, ids=[b[0] for b in BROKEN_TOML])
def test_broken_toml_gives_retol_error_naming_file_and_field(tmp_path, what, change, word):
    text = QUARTZ_TOML.replace(*change, 1)
    assert text != QUARTZ_TOML
    p = tmp_path / "broken.toml"
    p.write_text(text)
    with pytest.raises(RetolError) as exc:
        get_material(str(p))
    msg = str(exc.value)
    assert "broken.toml" in msg and word in msg and "\n" not in msg


@pytest.mark.parametrize(
    "text, change",
    [
        (SELLMEIER_TOML, ("2.3120353", "nan")),
        (SELLMEIER_TOML, ("23.793604", "inf")),
        (FILM_TOML, ("mean_index = 1.55", "mean_index = nan")),
        (FILM_TOML, ("lambda0 = 0.15", "lambda0 = nan")),
    ],
    ids=["sellmeier-A-nan", "sellmeier-lambda-inf", "film-mean-nan", "film-lambda0-nan"],
)
def test_nonfinite_coefficients_rejected_for_every_formula(tmp_path, text, change):
    # A user mistake must raise RetolError (project rule), not load and later evaluate to NaN.
    p = tmp_path / "broken.toml"
    p.write_text(text.replace(*change, 1))
    with pytest.raises(RetolError) as exc:
        get_material(str(p))
    assert "broken.toml" in str(exc.value)


@pytest.mark.parametrize(
    "change, word",
    [
        (("reference_temperature_c = 20.0", 'reference_temperature_c = "warm"'),
         "reference_temperature_c"),
        (("reference_temperature_c = 20.0",
          "reference_temperature_c = 20.0\n[thermal]\nretardance_coefficient_per_k = \"x\""),
         "retardance_coefficient_per_k"),
    ],
    ids=["temperature-text", "thermal-text"],
)
def test_optional_keys_of_wrong_type_rejected(tmp_path, change, word):
    # Optional keys are user input too: a wrong type must give RetolError naming the key, not a
    # bare ValueError (which the CLI would show with a traceback).
    p = tmp_path / "broken.toml"
    p.write_text(QUARTZ_TOML.replace(*change, 1))
    with pytest.raises(RetolError) as exc:
        get_material(str(p))
    assert "broken.toml" in str(exc.value) and word in str(exc.value)


@pytest.mark.parametrize(
    "body, word",
    [
        ("wavelength_nm,n_o,n_e\n500,1.5,1.51\n500,1.5,1.51\n600,1.49,1.5\n", "wavelength_nm"),
        ("wavelength_nm,n_o,n_e\n500,1.5,nan\n600,1.49,1.5\n", "NaN"),
        ("wavelength_nm,n_o,n_e\n500,1.5,abc\n600,1.49,1.5\n", "number"),
        ("lambda,n_o,n_e\n500,1.5,1.51\n600,1.49,1.5\n", "wavelength_nm"),
        ("wavelength_nm,n_o\n500,1.5\n600,1.49\n", "n_e"),
        ("wavelength_nm,n_o,n_e\n500,1.5,1.51\n", "rows"),
    ],
    ids=["duplicate", "nan", "text", "no-wavelength", "no-n_e", "too-short"],
)
def test_broken_csv_gives_retol_error_naming_file(tmp_path, body, word):
    p = tmp_path / "table.csv"
    p.write_text(body)
    with pytest.raises(RetolError) as exc:
        get_material(str(p))
    msg = str(exc.value)
    assert "table.csv" in msg and word in msg and "\n" not in msg


def test_missing_file_path():
    with pytest.raises(RetolError) as exc:
        get_material("/nonexistent/dir/plate.toml")
    assert "plate.toml" in str(exc.value)
