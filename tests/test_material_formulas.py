"""Every shipped material file against its published formula, re-evaluated here.

For EVERY file in ``materials/`` the test reads the coefficients with :mod:`tomllib`, evaluates
the dispersion formula of the cited paper as written below (not through retol), and compares
with :func:`tolerance.dispersion.indices` and :func:`~tolerance.dispersion.birefringence` across
the validity range; it also checks that the loaded record carries the file's range, kind,
reference temperature and thermal coefficient, and compares spot values of the papers.

Formulas (λ in µm, as the papers print them)
--------------------------------------------
- [Ghosh1999] G. Ghosh, "Dispersion-equation coefficients for the refractive index and
  birefringence of calcite and quartz crystals," Opt. Commun. 163, 95-102 (1999), eq. (3):
  n² = A + B/(1 − C/λ²) + D/(1 − E/λ²) with A the constant term written here as 1 + A (the file
  stores n² − 1's constant); B/(1 − C/λ²) ≡ B·λ²/(λ² − C).
- [Dodge1984] M. J. Dodge, "Refractive properties of magnesium fluoride," Appl. Opt. 23,
  1980-1985 (1984): three-term Sellmeier n² − 1 = Σ Aᵢ·λ²/(λ² − λᵢ²).
- [Malitson1972] I. H. Malitson, M. J. Dodge, "Refractive index and birefringence of synthetic
  sapphire," J. Opt. Soc. Am. 62, 1405 (1972), as given in the CRC Handbook of Laser Science and
  Technology Vol. IV (1986): the same three-term Sellmeier form.
- [Films] a single-oscillator birefringence Δn(λ) = Δn∞/(1 − λ₀²/λ²) with n_o the mean index
  (the form the film files name; their numbers are "from memory" there).

Spot values
-----------
Marked "from memory" where recalled, not re-read: quartz n_o = 1.5442, n_e = 1.5533 at 589.3 nm
and 1.5426, 1.5517 at 632.8 nm (handbook tables, from memory); calcite n_o(587.6 nm) = 1.65846 (a
tabulation of Ghosh's formula); MgF2 n_o = 1.3777, n_e = 1.3895 at 589.3 nm (from memory);
sapphire n_o = 1.7681, n_e = 1.7600 at 589.3 nm (from memory).  Tolerances follow the printed
precision (±1 in the last digit, 2e-4 for the 4-decimal values from memory).
"""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

from tolerance.dispersion import birefringence, get_material, indices, list_materials

MATERIALS = Path(__file__).resolve().parent.parent / "materials"
FILES = sorted(MATERIALS.glob("*.toml"))


@pytest.fixture(autouse=True)
def _fresh_caches():
    """Re-read the material files in every test of this module, so that a mutation-testing
    worker forked after a warm-up run (tests/README.md) exercises the loaders instead of the
    records its parent cached."""
    from tolerance import dispersion

    getattr(dispersion._builtin, "cache_clear", lambda: None)()


def ghosh_1999(c, lam_um):
    """[Ghosh1999] n = √(1 + A + B/(1 − C/λ²) + D/(1 − E/λ²)); C, E in µm²."""
    inv = 1.0 / (lam_um * lam_um)
    return np.sqrt(1.0 + c["A"] + c["B"] / (1.0 - c["C"] * inv) + c["D"] / (1.0 - c["E"] * inv))


def sellmeier_three_term(c, lam_um):
    """[Dodge1984], [Malitson1972] n = √(1 + Σ Aᵢ/(1 − (λᵢ/λ)²)); λᵢ in µm."""
    total = 1.0
    for a, li in zip(c["A"], c["lambda"], strict=True):
        total = total + a / (1.0 - (li / lam_um) ** 2)
    return np.sqrt(total)


def oscillator_film(f, lam_um):
    """[Films] n_o = n̄, n_e = n̄ + Δn∞/(1 − (λ₀/λ)²)."""
    n_o = np.full_like(lam_um, f["mean_index"])
    return n_o, n_o + f["birefringence_inf"] / (1.0 - (f["lambda0"] / lam_um) ** 2)


def published(d: dict, lam_nm):
    lam = np.asarray(lam_nm, dtype=float) / 1000.0
    f = d["formula"]
    if f["type"] == "ghosh":
        return ghosh_1999(f["ordinary"], lam), ghosh_1999(f["extraordinary"], lam)
    if f["type"] == "sellmeier":
        return sellmeier_three_term(f["ordinary"], lam), sellmeier_three_term(
            f["extraordinary"], lam
        )
    if f["type"] == "oscillator-birefringence":
        return oscillator_film(f, lam)
    raise AssertionError(f"no published formula for {f['type']!r}: add one to this test")


def load(path):
    with path.open("rb") as fh:
        return tomllib.load(fh)


def test_every_material_file_is_checked():
    """The shipped list and the files agree, so no material escapes the tests below."""
    names = {load(p)["name"] for p in FILES}
    assert names == {m.name for m in list_materials()}
    assert len(FILES) >= 6


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
def test_indices_equal_the_published_formula_across_the_range(path):
    d = load(path)
    m = get_material(d["name"])
    lo, hi = d["valid_min_um"] * 1e3, d["valid_max_um"] * 1e3
    lam = np.geomspace(lo, hi, 23)
    n_o, n_e = published(d, lam)
    got_o, got_e = indices(m, lam)
    np.testing.assert_allclose(got_o, n_o, rtol=1e-14)
    np.testing.assert_allclose(got_e, n_e, rtol=1e-14)
    # the birefringence carries the sign of the file's kind; relative to |Δn| the two
    # evaluation orders differ by ~1e-15/|Δn|
    dn = n_e - n_o
    np.testing.assert_allclose(birefringence(m, lam), dn, rtol=1e-15 / np.min(np.abs(dn)) * 8)
    negative = d["kind"] == "negative uniaxial"
    assert np.all((dn < 0) == negative)
    assert m.negative == negative


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
def test_loaded_record_carries_the_files_data(path):
    """Range (µm in the file, nm in the record), reference temperature, γ and the citation."""
    d = load(path)
    m = get_material(d["name"])
    assert m.valid_min_nm == pytest.approx(d["valid_min_um"] * 1e3, rel=1e-15)
    assert m.valid_max_nm == pytest.approx(d["valid_max_um"] * 1e3, rel=1e-15)
    assert m.reference_temperature_c == d.get("reference_temperature_c", 20.0)
    th = d.get("thermal", {})
    assert m.retardance_temperature_coefficient == th.get("retardance_coefficient_per_k", 0.0)
    assert m.temperature_coefficient_uncertainty == th.get("uncertainty_per_k", 0.0)
    assert m.source == d["source"]
    assert m.kind == d["kind"]


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
def test_temperature_scales_birefringence_by_one_plus_gamma_dt(path):
    """[README] the effective birefringence at T is Δn·(1 + γ(T − T_ref))."""
    d = load(path)
    m = get_material(d["name"])
    lam = np.array([600.0, 800.0])
    gamma = d.get("thermal", {}).get("retardance_coefficient_per_k", 0.0)
    t_ref = d.get("reference_temperature_c", 20.0)
    n_o, n_e = published(d, lam)
    for t in (t_ref - 30.0, t_ref + 17.0):
        np.testing.assert_allclose(
            birefringence(m, lam, temperature_c=t),
            (n_e - n_o) * (1 + gamma * (t - t_ref)),
            rtol=1e-12,
        )


SPOT = [
    # name, wavelength [nm], n_o, n_e (None: not checked), absolute tolerance, provenance
    ("quartz", 589.3, 1.5442, 1.5533, 2e-4, "handbook table, from memory"),
    ("quartz", 632.8, 1.5426, 1.5517, 2e-4, "handbook table, from memory"),
    ("calcite", 587.6, 1.65846, None, 1e-5, "tabulated value of Ghosh's formula"),
    ("mgf2", 589.3, 1.3777, 1.3895, 2e-4, "from memory"),
    ("sapphire", 589.3, 1.7681, 1.7600, 2e-4, "from memory"),
]


@pytest.mark.parametrize(
    "name, lam, n_o, n_e, tol, why", SPOT, ids=[f"{s[0]}-{s[1]}" for s in SPOT]
)
def test_spot_values(name, lam, n_o, n_e, tol, why):
    got_o, got_e = indices(get_material(name), lam)
    assert float(got_o) == pytest.approx(n_o, abs=tol), why
    if n_e is not None:
        assert float(got_e) == pytest.approx(n_e, abs=tol), why


@pytest.mark.parametrize("name", ["quartz", "calcite", "mgf2", "sapphire"])
def test_normal_dispersion_in_the_visible(name):
    """Far from the UV and IR resonances the indices fall with wavelength (normal dispersion,
    common practice) and the formula has no pole in the validity range."""
    m = get_material(name)
    lam = np.linspace(400.0, 700.0, 31)
    n_o, n_e = indices(m, lam)
    assert np.all(np.diff(n_o) < 0) and np.all(np.diff(n_e) < 0)
    assert math.isfinite(float(np.max(n_o)))
