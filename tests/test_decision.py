"""The decision table of ``retol run``: ranks, environment maps and the JSON contract.

Studies of our own (tests/data/broadband/*.toml, invented scenarios, zero or small tolerances)
check that the ranking follows the physics of the constructions, and that the environment maps
(temperature, field of view) agree with closed forms.

Sources
-------
[Etzel2000] S. M. Etzel, A. Rose, E. Wang, "Dispersion of the temperature dependence of the
    retardance in SiO2 and MgF2," Appl. Opt. 39, 5796-5800 (2000): relative temperature
    coefficient of retardance gamma = (1/d) dd/dT of quartz, -1.23e-4 /K (value from memory, as
    carried by materials/quartz.toml); MgF2 -5.37e-5 /K (from memory, materials/mgf2.toml).
[Ghosh1999] G. Ghosh, Opt. Commun. 163, 95-102 (1999): quartz dispersion coefficients,
    recomputed here for n_o and n_e at 780 nm.
[Veiras2010] F. E. Veiras, L. I. Perez, M. T. Garea, "Phase shift formulas in uniaxial media: an
    application to waveplates," Appl. Opt. 49, 2769-2777 (2010): retardance of a tilted plate
    with the optic axis in its faces; its small-angle expansion is derived below.
[Beckers1971] J. M. Beckers, "Achromatic linear retarders," Appl. Opt. 10, 973-975 (1971): two
    crystals of different dispersion, axes crossed, hold the retardance over a wide band.
[Papoulis] A. Papoulis, S. U. Pillai, *Probability, Random Variables and Stochastic Processes*,
    4th ed., McGraw-Hill (2002): characteristic function of a normal variable (used for the
    depolarization estimate, as in test_broadband.py).
[SI] BIPM SI Brochure, 9th ed. (2019): c = 299 792 458 m/s exactly.
[practice] Common practice: compound zero-order plates share the temperature stability of true
    zero-order plates (same material, thickness difference sets the retardance) but have the
    narrow field of view of their thick plates; broad sources want zero-order or achromatic
    plates, not multi-order ones.
[derived] Closed forms derived in the test docstrings.
[decision] The ranking rule documented in tolerance/decision.py and README: candidates whose
    yield intervals overlap the best one's are tied; ties break on spectral fidelity, then the
    larger acceptance half-angle, then the smaller |temperature coefficient|.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

import tolerance
from tolerance.grid import load_grid

DATA = Path(__file__).parent / "data" / "broadband"
C_NM_PER_FS = 299.792458  # [SI]
GAMMA_QUARTZ = -1.23e-4  # [Etzel2000], from memory
GAMMA_MGF2 = -5.37e-5  # [Etzel2000], from memory


def ghosh(lam_nm, A, B, C, D, E):
    l2 = (lam_nm / 1e3) ** 2
    return math.sqrt(1 + A + B * l2 / (l2 - C) + D * l2 / (l2 - E))


def quartz_indices(lam_nm):
    """n_o, n_e of quartz [Ghosh1999], recomputed from the published coefficients."""
    return (
        ghosh(lam_nm, 0.28604141, 1.07044083, 1.00585997e-2, 1.10202242, 100.0),
        ghosh(lam_nm, 0.28851804, 1.09509924, 1.02101864e-2, 1.15662475, 100.0),
    )


def run_file(name, **overrides):
    spec = tolerance.load_spec(DATA / name)
    return tolerance.run(spec, **overrides)


def with_goal(name, tmp_path, line):
    """A copy of a data spec with one more line in its [goal] table."""
    text = (DATA / name).read_text().replace("[goal]\n", f"[goal]\n{line}\n", 1)
    path = tmp_path / name
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def broad():
    return run_file("broad_800_circular.toml")


@pytest.fixture(scope="module")
def laser780():
    return run_file("compound_780.toml")


@pytest.fixture(scope="module")
def laser780_tight(tmp_path_factory):
    path = with_goal("compound_780.toml", tmp_path_factory.mktemp("tight"),
                     "acceptance_limit_waves = 0.001")
    return tolerance.run(tolerance.load_spec(path))


# ----------------------------------------------------------------------------- 4a broad source


def test_broad_source_multi_order_ranks_below_zero_order(broad):
    """[practice], [decision]: for a 40 nm FWHM source at 800 nm an order-10 quartz plate
    depolarizes the output (spectral fidelity far below the 0.99 goal), a zero-order plate does
    not; the zero-order plate has the higher yield with separated intervals, ranks first, and its
    error-free output has the higher DOP."""
    z, m = "quartz zero-order", "quartz multi-order (order 10)"
    rank = broad["rank"]
    assert int(rank.sel(candidate=z)) == 1
    assert int(rank.sel(candidate=m)) == 2
    assert float(broad["yield_low"].sel(candidate=z)) > float(broad["yield_high"].sel(candidate=m))
    assert float(broad["yield"].sel(candidate=z)) > 0.99
    assert float(broad["yield"].sel(candidate=m)) < 0.01
    assert float(broad["nominal_dop"].sel(candidate=z)) > 0.999
    assert float(broad["nominal_dop"].sel(candidate=m)) < 0.5
    assert str(broad["reason"].sel(candidate=z).values).startswith("pick:")
    assert "below" in str(broad["reason"].sel(candidate=m).values)


def test_broad_source_dop_near_frequency_gaussian_estimate(broad):
    """[derived] from [Papoulis]: a wavelength-Gaussian of FWHM 40 nm at 800 nm is close to a
    frequency-Gaussian with sigma_nu = c sigma_lambda / lambda0^2 (fractional width 2 %), so
    DOP ~ exp(-(d' sigma_nu)^2 / 2) with d' = d delta / d nu of the plate.  The asymmetry of the
    wavelength-to-frequency map and the curvature of d(nu) make this an estimate: +-0.02."""
    from tolerance.plates import plate_retardance

    spec = tolerance.load_spec(DATA / "broad_800_circular.toml")
    cand = next(c for c in spec.candidates if c.construction == "multi-order")
    plate = cand.build_plate()
    nu0, h = C_NM_PER_FS / 800.0, 1e-5
    d1 = (float(plate_retardance(plate, C_NM_PER_FS / (nu0 + h)))
          - float(plate_retardance(plate, C_NM_PER_FS / (nu0 - h)))) / (2 * h)
    sigma_nu = C_NM_PER_FS * (40.0 / (2 * math.sqrt(2 * math.log(2)))) / 800.0**2
    estimate = math.exp(-0.5 * (d1 * sigma_nu) ** 2)
    assert float(broad["nominal_dop"].sel(candidate=cand.name)) == pytest.approx(
        estimate, abs=0.02)


# ----------------------------------------------------------------------------- 4b compound


def test_compound_same_temperature_coefficient_narrow_field(laser780):
    """[practice] with the physics of [Veiras2010] and [Etzel2000]: the compound zero-order plate
    (1000 um and ~978 um quartz, crossed) drifts with temperature like the true zero-order plate
    (both layers scale by the same 1 + gamma dT, so their difference does too), but its
    acceptance half-angle is set by the thick plates: at least 5x smaller.  With no tolerances
    both yield 100 %, so they tie and the zero-order plate ranks first on the larger acceptance
    angle ([decision])."""
    z, c = "quartz zero-order", "quartz compound"
    tc = laser780["temperature_coefficient"]
    acc = laser780["acceptance_half_angle"]
    assert float(tc.sel(candidate=c)) == pytest.approx(float(tc.sel(candidate=z)), rel=0.05)
    assert float(acc.sel(candidate=c)) * 5 <= float(acc.sel(candidate=z))
    assert int(laser780["rank"].sel(candidate=z)) == 1
    assert int(laser780["rank"].sel(candidate=c)) > 1
    assert "tied" in str(laser780["reason"].sel(candidate=c).values)


# ----------------------------------------------------------------------------- 4c achromat


@pytest.mark.parametrize("goal_min", [0.90, 0.95])
def test_achromat_beats_zero_order_across_the_visible(tmp_path, goal_min):
    """[Beckers1971], [decision]: across 450-650 nm a single zero-order quartz QWP (designed at
    550 nm) reaches about 0.31 waves at 450 nm (dispersion and 1/lambda), axial ratio ~0.67, while
    a quartz/MgF2 achromat matched at 450 and 650 nm stays near a quarter wave.

    With the goal axial ratio >= 0.90 over the band the achromat passes nearly always and the
    zero-order plate never.  With >= 0.95 (as first asked) this 450/650 nm-matched design falls
    short in mid-band too (nominal worst 0.925 with the shipped dispersion data), so both yields
    are near zero and tie; the achromat still ranks first, on spectral fidelity.
    """
    path = DATA / "visible_achromat.toml"
    if goal_min != 0.90:
        path = tmp_path / "visible_achromat.toml"
        path.write_text((DATA / "visible_achromat.toml").read_text().replace(
            "min = 0.90", f"min = {goal_min}"))
    ds = tolerance.run(tolerance.load_spec(path))
    z, a = "quartz zero-order", "quartz/MgF2 achromat"
    assert int(ds["rank"].sel(candidate=a)) == 1
    assert float(ds["nominal_worst"].sel(candidate=a)) > float(ds["nominal_worst"].sel(candidate=z))
    assert float(ds["nominal_worst"].sel(candidate=z)) < 0.75
    assert float(ds["yield"].sel(candidate=a)) >= float(ds["yield"].sel(candidate=z))
    if goal_min == 0.90:
        assert float(ds["yield_low"].sel(candidate=a)) > float(ds["yield_high"].sel(candidate=z))
        assert float(ds["yield"].sel(candidate=a)) > 0.9


# ----------------------------------------------------------------------------- 4d temperature


def test_temperature_coefficient_of_zero_order_qwp(laser780):
    """[Etzel2000], [derived]: d(T) = d_ref (1 + gamma (T - T_ref)); a zero-order QWP has
    d_ref = 90 deg, so dd/dT = 90 deg x gamma = -0.01107 deg/K for quartz; an order-N plate
    (N + 1/4) x 360 deg x gamma."""
    tc = laser780["temperature_coefficient"]
    assert float(tc.sel(candidate="quartz zero-order")) == pytest.approx(90 * GAMMA_QUARTZ,
                                                                        rel=1e-6)
    assert float(tc.sel(candidate="quartz multi-order (order 5)")) == pytest.approx(
        5.25 * 360 * GAMMA_QUARTZ, rel=1e-6)
    assert tc.attrs["units"] == "deg/K"


def test_temperature_coefficient_mgf2(tmp_path):
    """[Etzel2000]: a zero-order MgF2 QWP drifts by 90 deg x gamma_MgF2 per kelvin."""
    text = (DATA / "compound_780.toml").read_text()
    head = text.split("[[candidate]]")[0]
    tail = text.split("[run]")[1]
    path = tmp_path / "mgf2.toml"
    path.write_text(head + '[[candidate]]\nname = "mgf2"\nconstruction = "zero-order"\n'
                    'material = "mgf2"\nwaves = 0.25\ndesign = "780nm"\naxis_deg = 45\n\n[run]'
                    + tail)
    ds = tolerance.run(tolerance.load_spec(path))
    assert float(ds["temperature_coefficient"].sel(candidate="mgf2")) == pytest.approx(
        90 * GAMMA_MGF2, rel=1e-6)


def test_temperature_map_is_linear_with_the_coefficient_slope(laser780):
    """[Etzel2000], [derived]: retardance_error_temperature = d(T) - d(T_ref) in waves is
    d_waves x gamma x (T - T_ref): linear in T, slope temperature_coefficient / 360 waves/K, zero at
    quartz's reference temperature (20 degC, materials/quartz.toml; plates are designed there)."""
    m = laser780["retardance_error_temperature"]
    T = laser780["temperature"].values
    assert m.attrs["units"] == "1" and m.attrs["display_units"] == "waves"  # pint-parsable
    assert laser780["temperature"].attrs["units"] == "degC"
    assert T[0] == -10 and T[-1] == 50
    for name, waves in (("quartz zero-order", 0.25), ("quartz compound", 0.25),
                        ("quartz multi-order (order 5)", 5.25)):
        y = m.sel(candidate=name).values
        slope, icpt = np.polyfit(T, y, 1)
        assert slope == pytest.approx(waves * GAMMA_QUARTZ, rel=1e-6)
        assert slope == pytest.approx(float(laser780["temperature_coefficient"].sel(
            candidate=name)) / 360.0, rel=1e-6)
        assert np.max(np.abs(y - (slope * T + icpt))) < 1e-12
        assert -icpt / slope == pytest.approx(20.0, abs=1e-6)


# ----------------------------------------------------------------------------- 4e field of view


def _half_angle_closed_form(plate_layers_waves, limit_waves, n_o, n_e):
    """Half-angle [deg] where the worst-azimuth retardance change reaches ``limit_waves``."""
    d1 = plate_layers_waves[0]
    d2 = plate_layers_waves[1] if len(plate_layers_waves) > 1 else 0.0
    # worst azimuth: plane of incidence along the first (thicker) layer's optic axis
    rate = (d1 / n_o + d2 / n_e) / (2 * n_o)  # waves per sin^2 i
    return math.degrees(math.asin(math.sqrt(limit_waves / rate)))


def test_acceptance_half_angle_small_angle_closed_form(laser780_tight):
    """[Veiras2010], [derived]: small-angle field of view of quartz plates, optic axis in the face.

    With s = sin i, N_o = sqrt(n_o^2 - s^2) ~ n_o - s^2/(2 n_o).  Plane of incidence containing the
    optic axis (phi = 0): N_e = n_e sqrt(1 - s^2/n_o^2) ~ n_e - n_e s^2/(2 n_o^2), so
    N_e - N_o ~ dn (1 - s^2/(2 n_o^2)) and d(i) - d0 = -d0 s^2/(2 n_o^2).  Across it (phi = 90):
    N_e ~ n_e - s^2/(2 n_e), so d(i) - d0 = +d0 s^2/(2 n_o n_e).  Quartz is positive (n_e > n_o),
    so phi = 0 is the worse azimuth, and the half-angle for a limit L [waves] is
    asin(sqrt(2 n_o^2 L / d0)).  For a compound plate (d1 at its optic axis, d2 crossed, so at
    phi_2 = 90) the changes add: |d(i) - d0| = s^2/(2 n_o) (d1/n_o + d2/n_e) at the worse azimuth.
    The next term is a relative s^2/(4 n^2), < 0.3 % for the angles here (limit 0.001 waves:
    ~7.9 deg zero-order, ~1.7 deg order 5, ~0.8 deg compound); the test allows 2 %.
    """
    ds = laser780_tight
    assert ds.attrs["acceptance_limit_waves"] == 0.001
    n_o, n_e = quartz_indices(780.0)
    dn = n_e - n_o
    for name in ("quartz zero-order", "quartz compound", "quartz multi-order (order 5)"):
        th = ds["layer_thickness"].sel(candidate=name).values
        waves = [t * 1e3 * dn / 780.0 for t in th if np.isfinite(t)]
        expect = _half_angle_closed_form(waves, 0.001, n_o, n_e)
        got = float(ds["acceptance_half_angle"].sel(candidate=name))
        assert got == pytest.approx(expect, rel=0.02), name


def test_tilt_map_small_angle_signs(laser780):
    """[Veiras2010], [derived] (see above): at a small tilt the map gives +d0 s^2/(2 n_o n_e) with
    the plane of incidence along the fast axis (tilt_azimuth 0; for quartz, a positive crystal, the
    fast axis is across the optic axis) and -d0 s^2/(2 n_o^2) at tilt_azimuth 90 (along the optic
    axis), within 1 %."""
    ds = laser780.sel(candidate="quartz multi-order (order 5)")
    n_o, n_e = quartz_indices(780.0)
    tilt = float(ds["tilt"].values[1])
    s2 = math.sin(math.radians(tilt)) ** 2
    m = ds["retardance_error_tilt"]
    assert float(m.sel(tilt=tilt, tilt_azimuth=0.0)) == pytest.approx(
        5.25 * s2 / (2 * n_o * n_e), rel=0.01)
    assert float(m.sel(tilt=tilt, tilt_azimuth=90.0)) == pytest.approx(
        -5.25 * s2 / (2 * n_o**2), rel=0.01)
    np.testing.assert_allclose(m.sel(tilt=0.0).values, 0.0, atol=1e-12)


# ----------------------------------------------------------------------------- 5. CLI --json


def _run_json(invoke, spec, out):
    r = invoke("run", spec, "--json", "--no-report", "--out", out)
    assert r.exit_code == 0, r.output
    return json.loads(r.stdout)


def test_cli_json_adds_decision_fields(invoke, tmp_path):
    """The JSON of ``retol run`` carries nominal_dop, temperature_coefficient_deg_per_k and
    acceptance_half_angle_deg for every candidate, equal to the saved grid's values; the laser's
    output is fully polarized ([BornWolf] in test_broadband.py) and the zero-order QWP drifts by
    90 deg x gamma per kelvin ([Etzel2000])."""
    out = tmp_path / "out"
    rows = _run_json(invoke, DATA / "compound_780.toml", out)["candidates"]
    ds = load_grid(out / "grid.nc")
    assert [r["name"] for r in rows] == list(ds["candidate"].values)
    for r in rows:
        c = r["name"]
        for key in ("nominal_dop", "temperature_coefficient_deg_per_k",
                    "acceptance_half_angle_deg"):
            assert isinstance(r[key], float), key
        assert r["nominal_dop"] == pytest.approx(float(ds["nominal_dop"].sel(candidate=c)))
        assert r["nominal_dop"] == pytest.approx(1.0, abs=1e-12)
        assert r["temperature_coefficient_deg_per_k"] == pytest.approx(
            float(ds["temperature_coefficient"].sel(candidate=c)))
        assert r["acceptance_half_angle_deg"] == pytest.approx(
            float(ds["acceptance_half_angle"].sel(candidate=c)))
    zero = next(r for r in rows if r["name"] == "quartz zero-order")
    assert zero["temperature_coefficient_deg_per_k"] == pytest.approx(90 * GAMMA_QUARTZ, rel=1e-6)
    assert not list(out.glob("*.html"))


def test_cli_acceptance_limit_changes_half_angle(invoke, tmp_path):
    """[derived] from the small-angle form above: sin i at the half-angle grows as sqrt(limit), so
    a limit 4x tighter (0.0025 vs the default 0.01 waves) halves sin i for the thick plates
    (within 1 %) and lowers every candidate's half-angle; temperature coefficients do not move."""
    loose = _run_json(invoke, DATA / "compound_780.toml", tmp_path / "loose")["candidates"]
    tight_spec = with_goal("compound_780.toml", tmp_path, "acceptance_limit_waves = 0.0025")
    tight = _run_json(invoke, tight_spec, tmp_path / "tight")["candidates"]
    by = {r["name"]: r for r in tight}
    for r in loose:
        t = by[r["name"]]
        assert t["acceptance_half_angle_deg"] < r["acceptance_half_angle_deg"]
        assert t["temperature_coefficient_deg_per_k"] == r["temperature_coefficient_deg_per_k"]
    for name in ("quartz compound", "quartz multi-order (order 5)"):
        s_loose = math.sin(math.radians(next(r for r in loose if r["name"] == name)[
            "acceptance_half_angle_deg"]))
        s_tight = math.sin(math.radians(by[name]["acceptance_half_angle_deg"]))
        assert s_tight / s_loose == pytest.approx(0.5, rel=0.01), name
    assert load_grid(tmp_path / "tight" / "grid.nc").attrs["acceptance_limit_waves"] == 0.0025
