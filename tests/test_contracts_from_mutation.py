"""Small contracts that the mutation run (tests/README.md) found unchecked.

Each test names the behaviour it pins down and where that behaviour is promised: README.md
("Conventions", "Commands"), DEVELOPERS.md ("User mistakes raise RetolError(field, problem,
fix)"), or a closed form derived in the docstring.

Sources
-------
- [README] README.md "Conventions": right = clockwise looking toward the source, left, linear.
- [Hecht] E. Hecht, *Optics*, ch. 8: a retarder's Jones matrix; a global phase factor changes
  no observable, so a retardance computed from J must not depend on it.
- [DEVELOPERS] DEVELOPERS.md "Conventions": every user mistake is a one-line RetolError naming
  the field and the fix.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from tolerance.errors import RetolError
from tolerance.plates import design_plate, equivalent_retardance
from tolerance.polarization import (
    fidelity,
    handedness_name,
    retarder_jones,
    rotation_name,
)


def test_handedness_and_rotation_names_follow_the_readme():
    """[README] +1 is clockwise looking toward the source, called right; −1 left; 0 linear."""
    assert [handedness_name(r) for r in (1, -1, 0)] == ["right", "left", "linear"]
    assert [rotation_name(r) for r in (1, -1, 0)] == ["clockwise", "counterclockwise", "linear"]


def test_fidelity_of_a_stack_of_states():
    """(1 + s·g)/2 with s = (S1, S2, S3)/S0, for every state of an (2, 3, 4) stack: the fidelity of
    each state, not a sum over the stack (closed form: s·g per state)."""
    rng = np.random.default_rng(3)
    s = rng.normal(size=(2, 3, 3))
    s /= np.linalg.norm(s, axis=-1, keepdims=True) * rng.uniform(1.0, 2.0, size=(2, 3, 1))
    S0 = rng.uniform(0.5, 3.0, size=(2, 3, 1))
    S = np.concatenate([S0, s * S0], axis=-1)
    g = np.array([0.0, 0.6, 0.8])
    expect = 0.5 * (1.0 + s @ g)
    got = fidelity(S, g)
    assert got.shape == (2, 3)
    np.testing.assert_allclose(got, expect, rtol=1e-14)


@given(
    delta=st.floats(0.01, math.pi - 0.01),
    theta=st.floats(-90, 90),
    phase=st.floats(-math.pi, math.pi),
)
def test_equivalent_retardance_ignores_a_global_phase(delta, theta, phase):
    """[Hecht] e^{iφ}·J describes the same retarder, so its retardance is δ for any φ."""
    J = retarder_jones(delta, theta) * np.exp(1j * phase)
    assert float(equivalent_retardance(J)) == pytest.approx(delta, abs=1e-9)


def test_equivalent_retardance_of_a_stack_of_matrices_and_round_off():
    """Each matrix of an (n, 2, 2) stack gives its own retardance; a matrix a rounding step away
    from unitary (|tr|/(2√det) a hair above 1, as rounding can make it) gives 0, not NaN."""
    delta = np.array([0.3, 1.0, 2.5])
    J = retarder_jones(delta, np.array([10.0, 40.0, -70.0]))
    np.testing.assert_allclose(equivalent_retardance(J), delta, atol=1e-9)
    eps = 1e-6  # 2/√(1 − ε²) exceeds 2 by 1e-12, far above rounding
    near = np.diag([1.0 + eps, 1.0 - eps]).astype(complex)  # tr/√det = 2/√(1 − ε²) > 2
    r = float(equivalent_retardance(near))
    assert r == 0.0


def test_a_stack_with_an_oblique_layer_is_not_aligned():
    """Aligned means every layer parallel or crossed to the plate's axis (|cos 2Δθ| = 1 to
    1e-12): layers at 0° and 90° are; a layer 1e-4° off crossed (1 − |cos 2Δθ| ≈ 6e-12) or at
    30° is not."""

    def plate(axes):
        layers = [{"material": "quartz", "thickness_um": 20.0, "axis_deg": a} for a in axes]
        return design_plate("stack", layers=layers, design_nm=633.0)

    assert plate([0.0, 90.0]).aligned()
    assert not plate([0.0, 90.0 - 1e-4]).aligned()
    assert not plate([0.0, 30.0]).aligned()


BAD_PLATES = [
    # (construction, material, keyword arguments, the field the error must name)
    ("multi-order", "quartz", {}, "order"),
    ("multi-order", "quartz", {"order": 2.5}, "order"),
    ("multi-order", "quartz", {"order": 2, "waves": 0.0}, "waves"),
    ("zero-order", "quartz", {"waves": -0.25}, "waves"),
    ("compound", "quartz", {}, "thick_plate"),
    ("compound", "quartz", {"thick_plate_um": 5.0}, "thick_plate"),
    ("compound", "quartz", {"thick_plate_um": -1.0}, "thick_plate"),
    ("achromatic", "quartz", {}, "partner"),
    ("achromatic", "quartz", {"partner": "quartz"}, "partner"),
    ("achromatic", "quartz", {"partner": "mgf2", "match_nm": [500.0, 500.0]}, "match"),
    ("film", "quartz", {}, "material"),
    ("film", "polycarbonate", {"retardance_nm": -3.0}, "retardance"),
    ("film", "polycarbonate", {"waves": 0.0}, "waves"),
    ("stack", None, {"layers": []}, "layers"),
    ("stack", None, {"layers": ["quartz"]}, "layers[0]"),
    ("stack", None, {"layers": [{"thickness_um": 3.0}]}, "layers[0].material"),
    ("stack", None, {"layers": [{"material": "quartz"}]}, "layers[0].thickness"),
    (
        "stack",
        None,
        {"layers": [{"material": "quartz", "thickness_um": 0.0}]},
        "layers[0].thickness",
    ),
    ("spiral", "quartz", {}, "construction"),
    ("zero-order", None, {}, "material"),
    ("zero-order", "quartz", {"axis_deg": float("nan")}, "axis_deg"),
    ("achromatic", "quartz", {"partner": "mgf2", "waves": 0.0}, "waves"),
    ("compound", "quartz", {"thick_plate_um": 1000.0, "waves": 0.0}, "waves"),
    (
        "stack",
        None,
        {"layers": [{"material": "quartz", "thickness_um": 3.0, "axis_deg": float("nan")}]},
        "layers[0].axis_deg",
    ),
]


@pytest.mark.parametrize("construction, material, kw, field", BAD_PLATES)
def test_bad_plate_input_names_the_field_and_the_fix(construction, material, kw, field):
    """[DEVELOPERS] RetolError(field, problem, fix): the field is the one at fault, the problem
    and the fix are said, in one line."""
    kw = dict(kw)
    waves = kw.pop("waves", 0.25)
    with pytest.raises(RetolError) as info:
        design_plate(construction, material, waves, 633.0, **kw)
    e = info.value
    assert e.field == field
    assert isinstance(e.problem, str) and e.problem.strip()
    assert isinstance(e.fix, str) and e.fix.strip()
    assert "\n" not in str(e)
    assert str(e).startswith(f"{field}: {e.problem}")


QUARTZ_TOML = """
name = "myquartz"
kind = "positive uniaxial"
valid_min_um = 0.4
valid_max_um = 1.0
source = "a test file"
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


def test_a_user_material_without_thermal_data_does_not_drift(tmp_path):
    """README "Data sources": each file carries its thermal data; a file without a [thermal]
    table has γ = 0 and no uncertainty (nothing is invented), its long name defaults to its
    name and its reference temperature to 20 °C (common practice)."""
    from tolerance.dispersion import birefringence, load_material_file

    p = tmp_path / "myquartz.toml"
    p.write_text(QUARTZ_TOML, encoding="utf-8")
    m = load_material_file(p)
    assert m.retardance_temperature_coefficient == 0.0
    assert m.temperature_coefficient_uncertainty == 0.0
    assert m.thermal_source == ""
    assert m.long_name == "myquartz"
    assert m.reference_temperature_c == 20.0
    assert float(birefringence(m, 633.0, temperature_c=80.0)) == float(birefringence(m, 633.0))
    p.write_text(
        QUARTZ_TOML + "[thermal]\nretardance_coefficient_per_k = -1e-4\nuncertainty_per_k = 2e-5\n"
        'source = "measured"\n',
        encoding="utf-8",
    )
    m = load_material_file(p)
    assert (m.retardance_temperature_coefficient, m.temperature_coefficient_uncertainty) == (
        -1e-4,
        2e-5,
    )
    assert m.thermal_source == "measured"


@pytest.mark.parametrize(
    "change, field",
    [
        (("valid_max_um = 1.0", "valid_max_um = 0.4"), "valid_min_um"),
        (('type = "ghosh"', 'type = "table"'), "formula.type"),
        (('kind = "positive uniaxial"', 'kind = "biaxial"'), "kind"),
        (('name = "myquartz"\n', 'wavelength_unit = "nm"\nname = "myquartz"\n'), "wavelength_unit"),
    ],
)
def test_bad_material_file_names_the_field_and_the_fix(tmp_path, change, field):
    """[DEVELOPERS] an empty validity range, a formula type a file cannot carry (a table is a
    CSV), an unknown kind or unit: a one-line RetolError naming the file's field and the fix."""
    from tolerance.dispersion import load_material_file

    p = tmp_path / "bad.toml"
    p.write_text(QUARTZ_TOML.replace(*change), encoding="utf-8")
    with pytest.raises(RetolError) as info:
        load_material_file(p)
    e = info.value
    assert e.field == f"bad.toml: {field}"
    assert isinstance(e.problem, str) and e.problem.strip()
    assert isinstance(e.fix, str) and e.fix.strip()


def test_an_empty_validity_range_says_the_fix(tmp_path):
    from tolerance.dispersion import load_material_file

    p = tmp_path / "bad.toml"
    p.write_text(QUARTZ_TOML.replace("valid_max_um = 1.0", "valid_max_um = 0.4"), encoding="utf-8")
    with pytest.raises(RetolError) as info:
        load_material_file(p)
    assert info.value.fix


def test_a_measured_csv_table_is_read_as_written(tmp_path):
    """README "Commands": a CSV of measured values (wavelength_nm and n_o, n_e, or a
    birefringence with an optional mean index) is a material whose validity range is the
    table's range; it has no thermal data (γ = 0, reference 20 °C: common practice) and its
    indices at the table's own wavelengths are the table's values.  Rows 0.5 nm apart are
    distinct rows; a comment line may be indented."""
    from tolerance.dispersion import indices, load_material_file

    p = tmp_path / "mylot.csv"
    p.write_text(
        "wavelength_nm,birefringence,n_mean\n  # measured on plate 7\n"
        "600.0,0.0091,1.544\n600.5,0.0090,1.544\n700.0,0.0088,1.544\n",
        encoding="utf-8",
    )
    m = load_material_file(p)
    assert (m.valid_min_nm, m.valid_max_nm) == (600.0, 700.0)
    n_o, n_e = indices(m, np.array([600.0, 600.5, 700.0]))
    np.testing.assert_allclose(n_o, 1.544, rtol=1e-15)
    np.testing.assert_allclose(n_e - n_o, [0.0091, 0.0090, 0.0088], rtol=1e-12)
    assert m.kind == "positive uniaxial"
    assert m.reference_temperature_c == 20.0
    assert m.retardance_temperature_coefficient == 0.0
    assert m.temperature_coefficient_uncertainty == 0.0
    assert "mylot.csv" in m.source
    assert m.long_name == "mylot"
    assert m.path == str(p)
    # without a mean index the loader takes n_o = 1.5 (at normal incidence only Δn matters)
    p2 = tmp_path / "bare.csv"
    p2.write_text("wavelength_nm,birefringence\n600,-0.17\n700,-0.16\n", encoding="utf-8")
    m2 = load_material_file(p2)
    n_o2, _ = indices(m2, 650.0)
    assert float(n_o2) == 1.5
    assert m2.kind == "negative uniaxial"


@pytest.mark.parametrize("start, stop", [(0, 513), (0, 1), (100, 700), (512, 1025), (1023, 1024)])
def test_draws_follow_the_documented_scheme_for_any_range(start, stop):
    """DEVELOPERS.md "Reproducible": each (tolerance, layer) stream is Philox keyed by
    SeedSequence(seed, spawn_key=(crc32(name), index)) with one counter block per 512 samples,
    so samples [start, stop) are a slice of the stream whatever the range; regenerated here by
    ``reference.ref_draws`` [Salmon2011], including ranges ending one past a block."""
    from reference import ref_draws

    from tolerance.sampler import standard_draws

    z, u = standard_draws(7, "crossing_deg", 2, start, stop)
    zr, ur = ref_draws(7, "crossing_deg", 2, stop)
    np.testing.assert_array_equal(z, zr[start:])
    np.testing.assert_array_equal(u, ur[start:])


def test_no_distribution_gives_the_centre_exactly():
    """An absent tolerance is exactly the nominal value: with no tolerance acting, the engine's
    per-sample inputs are the nominal plate's, bit for bit (the sampler's old ``scaled(None)``
    contract, now held by :func:`tolerance.montecarlo.sample_inputs`)."""
    from tolerance.montecarlo import Engine, sample_inputs
    from tolerance.spec import loads

    text = (
        '[wavelength]\nstart = "630nm"\nstop = "640nm"\nstep = "5nm"\n'
        '[source]\nshape = "laser"\ncenter = "635nm"\n[environment]\ntemperature_c = 27.5\n'
        "[goal]\nmin = 0.9\n[[candidate]]\nname = 'c'\nconstruction = 'compound'\n"
        "material = 'quartz'\nthick_plate = '1000um'\n"
        "[tolerances]\nthickness_um = { sigma = 1.0 }\nclocking_deg = { uniform = 2.0 }\n"
    )
    study = loads(text, "c.toml")
    eng = Engine(study, samples=1024)
    case = eng.cases[0]
    inputs, extra = sample_inputs(case, study, eng.draws, 0, 1024, active=())
    nominal = np.array([la.thickness_um for la in case.plate.layers])
    assert np.all(inputs.thick == nominal)
    assert np.all(extra["temperature"] == 27.5)
    assert np.all(extra["aoi"] == 0.0)


def test_target_waves_is_order_plus_waves():
    """README: a multi-order plate is built for ``order + waves``, the other constructions for
    ``waves``; an explicit stack has no target and is measured against its own nominal
    retardance."""
    from tolerance.environment import nominal_waves, target_waves

    assert target_waves(design_plate("multi-order", "quartz", 0.25, 633.0, order=7)) == 7.25
    assert target_waves(design_plate("zero-order", "quartz", 0.3, 633.0)) == 0.3
    s = design_plate(
        "stack",
        layers=[{"material": "quartz", "thickness_um": 20.0, "axis_deg": 0.0}],
        design_nm=633.0,
    )
    assert target_waves(s) == nominal_waves(s)
    assert target_waves(s) == pytest.approx(20e3 * 0.0090449 / 633.0, rel=1e-4)


def test_rank_ties_touching_intervals_and_equal_fidelity_steps():
    """README "Decision": candidates whose yield intervals overlap the best one's are tied
    (closed intervals: touching counts); among them spectral fidelities in the same 0.001 step
    rank as equal (0.999 and 0.9994 both lie in [0.999, 0.1000)), so the wider acceptance wins;
    a candidate alone at the top is "highest", tied ones name each other."""
    from tolerance.decision import rank

    names = ["a", "b", "c"]
    # b's upper limit touches a's lower limit exactly: tied; c is below
    r, why = rank(
        names,
        [0.9, 0.8, 0.2],
        [0.85, 0.7, 0.1],
        [0.95, 0.85, 0.3],
        [0.999, 0.9994, 0.99],
        [2.0, 5.0, 9.0],
        [0.1, 0.1, 0.1],
    )
    assert list(r) == [2, 1, 3]  # b: same fidelity step, wider acceptance
    assert "tied" in why[1] and "a" in why[1]
    assert "below" in why[2]
    # the same step with the wider acceptance on the exact step value 0.999 (0.999/0.001 is
    # 998.999... in floating point: the step must still count it as 999)
    r, _ = rank(
        names,
        [0.9, 0.8, 0.2],
        [0.85, 0.7, 0.1],
        [0.95, 0.85, 0.3],
        [0.999, 0.9994, 0.99],
        [5.0, 2.0, 9.0],
        [0.1, 0.1, 0.1],
    )
    assert list(r) == [1, 2, 3]
    # equal yields: the better fidelity (y) is the best; x's interval lies below y's
    r, why = rank(["x", "y"], [0.5, 0.5], [0.1, 0.45], [0.2, 0.55], [0.9, 0.95], [1, 1], [0, 0])
    assert list(r) == [2, 1]
    assert why[1].startswith("pick: highest")


def test_environment_maps_are_changes_from_the_reference_condition():
    """README "What the results mean": the temperature map is δ(T) − δ(T_ref), zero at the
    material's reference temperature and γ·δ·(T − T_ref) elsewhere [Etzel2000]; the tilt map's
    azimuth is measured from the plate's fast axis, so a plate turned by 30° has the same map;
    the acceptance half-angle's default limit is 0.01 waves."""
    from tolerance.environment import (
        acceptance_half_angle,
        nominal_waves,
        temperature_error,
        tilt_error,
    )
    from tolerance.plates import plate_retardance

    p = design_plate("multi-order", "quartz", 0.25, 633.0, order=5)
    g = p.layers[0].material.retardance_temperature_coefficient
    e = temperature_error(p, [20.0, 50.0])
    assert e[0] == pytest.approx(0.0, abs=1e-15)
    assert e[1] == pytest.approx(5.25 * g * 30.0, rel=1e-9)
    turned = design_plate("multi-order", "quartz", 0.25, 633.0, order=5, axis_deg=30.0)
    np.testing.assert_allclose(
        tilt_error(turned, [3.0, 6.0], [0.0, 45.0, 90.0]),
        tilt_error(p, [3.0, 6.0], [0.0, 45.0, 90.0]),
        rtol=1e-12,
    )
    d = plate_retardance(turned, 633.0, aoi_deg=6.0, incidence_azimuth_deg=30.0) / (2 * np.pi)
    assert float(tilt_error(turned, [6.0], [0.0])[0, 0]) == pytest.approx(
        float(d) - nominal_waves(turned), rel=1e-12
    )
    assert acceptance_half_angle(p) == acceptance_half_angle(p, 0.01)


def test_a_compound_plate_may_have_a_thin_second_plate():
    """The second plate only has to be thinner than the first by the target's difference: a
    0.5 µm second plate is a (fragile but) valid design; a zero one is not."""
    diff = design_plate("zero-order", "quartz", 0.25, 633.0).layers[0].thickness_um
    p = design_plate("compound", "quartz", 0.25, 633.0, thick_plate_um=diff + 0.5)
    assert p.layers[1].thickness_um == pytest.approx(0.5, rel=1e-9)
    with pytest.raises(RetolError):
        design_plate("compound", "quartz", 0.25, 633.0, thick_plate_um=diff)


# ----------------------------------------------------------------------------- second mutation run
# (tests/README.md "Mutation testing": survivors of the run over retardance.py, the kernel sample
# and montecarlo.py's statistics)


def test_layer_retardance_refuses_a_wavelength_outside_the_formula_unless_asked():
    """DEVELOPERS.md "Data sources"/README "Commands": a dispersion formula is used only inside
    its validity range; outside it is a RetolError unless extrapolation is asked for, and then
    the same formula is evaluated (with a warning): δ = 2π·d·|n_e − n_o|/λ (the definition of
    retardance at normal incidence, Hecht ch. 8) with the extrapolated indices."""
    from tolerance.dispersion import get_material, indices
    from tolerance.retardance import layer_retardance

    q = get_material("quartz")
    wl = q.valid_max_nm + 50.0
    with pytest.raises(RetolError):
        layer_retardance(q, 20.0, wl)
    with pytest.warns(UserWarning):
        got = float(layer_retardance(q, 20.0, wl, extrapolate=True))
    with pytest.warns(UserWarning):
        n_o, n_e = indices(q, wl, extrapolate=True)
    assert got == pytest.approx(2 * math.pi * 20e3 * abs(float(n_e - n_o)) / wl, rel=1e-13)


@pytest.mark.parametrize("aoi", [10.0, 30.0])
def test_layer_retardance_default_plane_of_incidence_contains_the_optic_axis(aoi):
    """Closed form derived here from the index equations of a uniaxial plate with its axis in
    the face [Veiras, Perez & Garea, Appl. Opt. 49, 2769 (2010)]: with the plane of incidence
    through the optic axis (azimuth φ = 0, the documented default),
    N_e = √(n_e² − (n_e²/n_o²)·sin²θ) = (n_e/n_o)·√(n_o² − sin²θ) and N_o = √(n_o² − sin²θ),
    so δ = 2π·d·|n_e/n_o − 1|·√(n_o² − sin²θ)/λ."""
    from tolerance.dispersion import get_material, indices
    from tolerance.retardance import layer_retardance

    q = get_material("quartz")
    n_o, n_e = (float(x) for x in indices(q, 633.0))
    s2 = math.sin(math.radians(aoi)) ** 2
    expect = 2 * math.pi * 500e3 * abs(n_e / n_o - 1.0) * math.sqrt(n_o**2 - s2) / 633.0
    assert float(layer_retardance(q, 500.0, 633.0, aoi_deg=aoi)) == pytest.approx(expect, rel=1e-13)


def _laser_spec(goal: str, waves: float, axis: float, tol: str) -> str:
    return (
        'title = "t"\n[wavelength]\nstart = "633nm"\nstop = "633nm"\nstep = "1nm"\n'
        '[source]\nshape = "laser"\ncenter = "633nm"\n[input]\nazimuth_deg = 0\n'
        f"[goal]\n{goal}\n[[candidate]]\nname = 'p'\nconstruction = 'zero-order'\n"
        f"material = 'quartz'\nwaves = {waves}\ndesign = '633nm'\naxis_deg = {axis}\n"
        f"[tolerances]\n{tol}\n"
    )


def test_kernel_azimuth_error_for_a_goal_off_the_axes():
    """[Hecht] a half-wave plate with its fast axis at θ turns linear 0° into linear 2θ.  A
    half-wave plate clocked to 15° + e therefore gives linear 30° + 2e, and its azimuth error
    from a linear goal at 30° is 2|e| for each drawn clocking e (a goal off the x and y axes,
    so that both goal components s₁ = cos 60° and s₂ = sin 60° enter the kernel's formula)."""
    from tolerance.montecarlo import Engine
    from tolerance.spec import loads

    goal = 'state = "linear"\nazimuth_deg = 30\nmetric = "azimuth_error_deg"\nmax = 1.0'
    st = loads(_laser_spec(goal, 0.5, 15.0, "clocking_deg = { uniform = 2.0 }"), "t.toml")
    eng = Engine(st, samples=512, seed=5)
    case = eng.case(0)
    worst, _ = eng.pass_values(case)
    z, u = eng.draws("clocking_deg", 0, 0, 512)
    e = case.tolerances["clocking_deg"].draw(z, u, center=0.0)
    np.testing.assert_allclose(worst, 2 * np.abs(e), atol=1e-7)


def test_kernel_ellipticity_error_of_a_clocked_quarter_wave_plate():
    """[derived, Azzam & Bashara sec. 2.6] a quarter-wave plate with its axis at θ turns the
    Poincaré sphere by 90° about the equator point 2θ: linear 0°, i.e. (1, 0, 0), goes to
    cos 2θ·(cos 2θ, sin 2θ, 0) ± sin 2θ·(0, 0, 1), so sin 2χ = ±sin 2θ and χ = ±θ for
    |θ| ≤ 45°.  Clocked to 30° + e it gives |χ| = 30° + e; against an elliptical goal of
    ellipticity ±30° (the nominal hand) the error is |e| for each drawn clocking e."""
    from tolerance.montecarlo import Engine
    from tolerance.spec import loads

    probe = loads(_laser_spec('metric = "fidelity"\nmin = 0.5', 0.25, 30.0, ""), "t.toml")
    e0 = Engine(probe, samples=512, seed=5)
    hand = 1.0 if e0.nominal(e0.case(0)).design_stokes[2] > 0 else -1.0
    goal = (
        f'state = "elliptical"\nellipticity_deg = {30.0 * hand}\n'
        'metric = "ellipticity_error_deg"\nmax = 1.0'
    )
    st = loads(_laser_spec(goal, 0.25, 30.0, "clocking_deg = { uniform = 2.0 }"), "t.toml")
    eng = Engine(st, samples=512, seed=5)
    case = eng.case(0)
    worst, _ = eng.pass_values(case)
    z, u = eng.draws("clocking_deg", 0, 0, 512)
    e = case.tolerances["clocking_deg"].draw(z, u, center=0.0)
    np.testing.assert_allclose(worst, np.abs(e), atol=1e-7)


def test_check_range_refuses_by_default():
    """README "Materials": a wavelength outside a formula's validity range is refused unless
    extrapolation is asked for (then it warns)."""
    from tolerance.dispersion import check_range, get_material
    from tolerance.errors import OutOfRangeError

    q = get_material("quartz")
    with pytest.raises(OutOfRangeError) as info:
        check_range(q, [q.valid_min_nm, q.valid_max_nm + 1.0])
    assert info.value.field == "wavelength"
    with pytest.warns(UserWarning):
        check_range(q, q.valid_max_nm + 1.0, extrapolate=True)
    check_range(q, [q.valid_min_nm, q.valid_max_nm])  # the ends are inside


def test_an_extrapolated_wavelength_at_a_resonance_is_a_one_line_error():
    """Ghosh's form n² = 1 + A + B·λ²/(λ² − C) + D·λ²/(λ² − E) [Ghosh 1999] has a pole at
    λ² = C; just below it (quartz: C ≈ 0.01006 µm², λ = 100 nm gives λ² − C ≈ −6e-5 µm² and
    B·λ²/(λ² − C) ≈ −180) n² < 0: no real index.  Even with extrapolation asked for, that is a
    RetolError naming the wavelength, the resonance and the fix, not a NaN."""
    from tolerance.dispersion import get_material, indices
    from tolerance.errors import OutOfRangeError

    q = get_material("quartz")
    with pytest.warns(UserWarning), pytest.raises(OutOfRangeError) as info:
        indices(q, np.array([[633.0, 100.0]]), extrapolate=True)
    e = info.value
    assert e.field == "wavelength"
    assert "100 nm" in e.problem and "resonance" in e.problem
    assert e.fix and "\n" not in str(e)


@pytest.mark.parametrize(
    "call, field, word",
    [
        (
            lambda: __import__("tolerance.polarization").polarization.elliptical_goal_vector(
                azimuth_deg=float("nan"), ellipticity_deg=10.0
            ),
            "azimuth_deg",
            "azimuth",
        ),
        (
            lambda: __import__("tolerance.polarization").polarization.input_stokes(
                ellipticity_deg=float("inf")
            ),
            "ellipticity_deg",
            "45",
        ),
        (
            lambda: __import__("tolerance.polarization").polarization.input_stokes(
                dop=float("nan")
            ),
            "dop",
            "[0, 1]",
        ),
    ],
    ids=["goal-azimuth", "input-ellipticity", "input-dop"],
)
def test_nonfinite_state_angles_say_what_to_give(call, field, word):
    """[DEVELOPERS] a NaN or infinite angle is a one-line RetolError naming the key and a fix
    that says what to give (the azimuth of the major axis; an angle in [−45, 45])."""
    with pytest.raises(RetolError) as info:
        call()
    e = info.value
    assert e.field == field
    assert word in e.fix


SELLMEIER_TOML = """
name = "mymgf2"
kind = "positive uniaxial"
valid_min_um = 0.2
valid_max_um = 7.0
source = "a test file"
[formula]
type = "sellmeier"
[formula.ordinary]
A = [0.48755108, 0.39875031, 2.3120353]
lambda = [0.04338408, 0.09461442, 23.793604]
[formula.extraordinary]
A = [0.41344023, 0.50497499, 2.4904862]
lambda = [0.03684262, 0.09076162, 23.771995]
"""


@pytest.mark.parametrize(
    "name, body",
    [
        ("short.csv", "wavelength_nm,n_o,n_e\n500,1.5,1.51\n"),
        ("nan.toml", SELLMEIER_TOML.replace("0.48755108", "nan")),
        ("nan.toml", QUARTZ_TOML.replace("A = 0.28604141", "A = nan")),
        pytest.param(
            "type.toml",
            QUARTZ_TOML.replace("A = 0.28604141", 'A = "x"'),
        ),
        pytest.param(
            "len.toml",
            SELLMEIER_TOML.replace("lambda = [0.04338408, ", "lambda = ["),
        ),
    ],
    ids=["csv-one-row", "sellmeier-nan", "ghosh-nan", "ghosh-text", "sellmeier-lengths"],
)
def test_material_file_errors_state_the_problem_and_the_fix(tmp_path, name, body):
    """[DEVELOPERS] RetolError(field, problem, fix): a one-row table, a NaN coefficient, a
    coefficient of the wrong type, lists of unequal length each say what is wrong and what to
    do.  The last three were real gaps found by the mutation run (tests/README.md), fixed."""
    from tolerance.dispersion import load_material_file

    p = tmp_path / name
    p.write_text(body, encoding="utf-8")
    with pytest.raises(RetolError) as info:
        load_material_file(p)
    e = info.value
    assert isinstance(e.problem, str) and e.problem.strip()
    assert isinstance(e.fix, str) and e.fix.strip()


def test_laser_drift_does_not_apply_to_a_band_goal():
    """README "What the results mean": the crossing between plates needs two layers; a laser's
    centre drift moves the line within the band, which a goal judged at every wavelength of the
    band does not see, so it is "not applicable" there and applies to a spectrum goal."""
    from tolerance.decision import tolerance_applies

    assert not tolerance_applies("drift", 1, "band")
    assert tolerance_applies("drift", 1, "spectrum")
    assert not tolerance_applies("crossing_deg", 1, "band")
    assert tolerance_applies("crossing_deg", 2, "band")
    assert tolerance_applies("thickness_um", 1, "band")


def test_kernel_azimuth_range_is_minus_90_exclusive_to_90():
    """The kernel's reported major-axis azimuth lies in (−90°, 90°] (its docstring; common
    practice): a vertical linear state whose s₂ is −0 (atan2(−0, −1) = −π, i.e. −90°) is 90°."""
    from tolerance.kernel import _azimuth

    assert _azimuth(-1.0, -0.0) == 90.0
    assert _azimuth(-1.0, 0.0) == 90.0
    assert _azimuth(1.0, 0.0) == 0.0


def test_kernel_histogram_counts_values_beyond_the_range_in_the_end_bins():
    """DEVELOPERS.md "Bounded memory": histogram ranges are fixed by a pilot, so a later sample
    may fall outside them; it is counted in the first or last bin (its exact value is kept in
    the minimum and maximum, to which quantiles are clamped).  Bin j = ⌊(x − lo)·B/(hi − lo)⌋
    (common practice), here with lo = 0, hi = 1, B = 8: x = −5 → 0, 0.5 → 4, 5 → 7, 1.0 → 7."""
    from tolerance.kernel import _M, _RW, N_VAR, N_WORK, _fold_sample

    B, W = 8, 1
    work = np.zeros((N_WORK, W))
    rows = [_RW + v if v < 3 else _M for v in range(N_VAR)]
    values = [-5.0, 0.5, 5.0, 1.0][:N_VAR]
    for r, x in zip(rows, values, strict=True):
        work[r, 0] = x
    vmin = np.full((N_VAR, W), np.inf)
    vmax = np.full((N_VAR, W), -np.inf)
    jrow = np.zeros((N_VAR, W), dtype=np.uint16)
    bs0, bs1 = np.zeros(W), np.zeros(W)
    lo, inv_width = np.zeros((N_VAR, W)), np.full((N_VAR, W), float(B))
    _fold_sample(work, np.zeros(W), bs0, bs1, vmin, vmax, lo, inv_width, jrow, B)
    assert list(jrow[:, 0]) == [0, 4, 7, 7][:N_VAR]
    assert list(vmin[:, 0]) == values and list(vmax[:, 0]) == values
    assert bs0[0] == values[0] and bs1[0] == values[0] ** 2


def test_kernel_angle_metrics_equal_the_polarization_functions():
    """The kernel's angle metrics follow :func:`tolerance.polarization.sphere_angle_deg`,
    ``azimuth_error_deg`` and ``ellipticity_error_deg`` (absolute values) for the direction of
    the polarized part (kernel docstring); those are held to closed forms and sympy in
    tests/test_states.py.  Random partially polarized states (|s| in [0.2, 1]) against random
    goals, linear goals at random azimuths and the circular goal; and the conventions for
    unpolarized light (no direction: 90° on the sphere, no azimuth to offer: 90°, χ = 0)."""
    from tolerance.kernel import (
        METRIC_AZIMUTH_ERROR,
        METRIC_ELLIPTICITY_ERROR,
        METRIC_SPHERE,
        _angle_metric,
    )
    from tolerance.polarization import azimuth_error_deg, ellipticity_error_deg, sphere_angle_deg

    rng = np.random.default_rng(18)
    s = rng.normal(size=(200, 3))
    s *= rng.uniform(0.2, 1.0, size=(200, 1)) / np.linalg.norm(s, axis=1, keepdims=True)
    g = rng.normal(size=(200, 3))
    g[:60, 2] = 0.0  # linear goals
    g /= np.linalg.norm(g, axis=1, keepdims=True)
    g[60:70] = [0.0, 0.0, 1.0]  # circular
    refs = {
        METRIC_SPHERE: sphere_angle_deg(s, g),
        METRIC_AZIMUTH_ERROR: np.abs(azimuth_error_deg(s, g)),
        METRIC_ELLIPTICITY_ERROR: np.abs(ellipticity_error_deg(s, g)),
    }
    for kind, ref in refs.items():
        got = np.array([_angle_metric(*a, *b, kind) for a, b in zip(s, g, strict=True)])
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-9, err_msg=str(kind))
    gl = np.array([0.5, math.sqrt(3) / 2, 0.0])  # linear at 30°
    assert _angle_metric(0.0, 0.0, 0.0, *gl, METRIC_SPHERE) == 90.0
    assert _angle_metric(0.0, 0.0, 0.0, *gl, METRIC_AZIMUTH_ERROR) == 90.0
    assert _angle_metric(0.0, 0.0, 0.5, *gl, METRIC_AZIMUTH_ERROR) == 90.0
    # circular to rounding (a linear part of 1e-10 of the whole): no azimuth to offer either
    assert _angle_metric(1e-10, 0.0, 1.0, *gl, METRIC_AZIMUTH_ERROR) == 90.0
    assert _angle_metric(0.3, 0.1, 0.2, 0.0, 0.0, 1.0, METRIC_AZIMUTH_ERROR) == 0.0
    assert _angle_metric(0.0, 0.0, 0.0, *gl, METRIC_ELLIPTICITY_ERROR) == 0.0


def test_an_unknown_design_keyword_lists_every_known_one():
    """[DEVELOPERS] the fix of an unknown keyword names the keywords that do apply, the common
    ones (material, waves, design_nm, axis_deg, name) and the construction's own."""
    with pytest.raises(RetolError) as info:
        design_plate("multi-order", "quartz", 0.25, 633.0, order=3, axis=45.0)
    e = info.value
    assert e.field == "axis"
    for k in ("material", "waves", "design_nm", "axis_deg", "name", "order"):
        assert k in e.fix


def test_wilson_of_no_samples_is_undefined():
    """Wilson (1927): the interval of k/n needs n > 0; with no samples there is no estimate,
    reported as NaN (never a number that looks like a result)."""
    from tolerance.montecarlo import wilson

    lo, hi = wilson(0, 0, 0.95)
    assert math.isnan(lo) and math.isnan(hi)


def test_dominant_tolerance_rules():
    """README "What the results mean": the dominant tolerance is the one whose removal raises the
    yield most; when no removal raises it (a gain of exactly 0 does not), the one that alone does
    the most harm (lowest yield alone, below the nominal pass); when none does either, the one
    whose removal raises the 5th-percentile goal metric most, and "none" when no removal raises
    that (0 does not)."""
    from tolerance.montecarlo import dominant_tolerance, margin_dominant

    alone = {"a": 0.5, "b": 0.1}
    # removal of a: no change; removal of b: lower (sampling noise): neither raises the yield
    assert dominant_tolerance(alone, {"a": 0.6, "b": 0.5}, 0.6, 1.0) == "b"
    # both harm alone; the ranking is by the yield alone, not by name
    assert dominant_tolerance({"z": 0.1, "c": 0.5}, {"z": 0.6, "c": 0.6}, 0.6, 1.0) == "z"
    # a removal that raises the yield wins
    assert dominant_tolerance(alone, {"a": 0.7, "b": 0.65}, 0.6, 1.0) == "a"
    # every yield 1: the margin decides
    one = {"a": 1.0, "b": 1.0}
    assert dominant_tolerance(one, one, 1.0, 1.0, {"a": 0.0, "b": 0.2}) == "b"
    assert margin_dominant({"a": 0.0, "b": -0.1}) == "none"
    assert margin_dominant({"a": 0.0}) == "none"
    assert margin_dominant({}) == "none"
    assert margin_dominant({"a": 0.3, "b": 0.2}) == "a"


def test_a_stokes_goal_that_is_not_a_pure_state_says_so():
    """[DEVELOPERS] RetolError(field, problem, fix): a goal (0.5, 0, 0) has length 0.5, not 1
    (a goal is a pure state, Azzam & Bashara sec. 2.6); the problem gives the length."""
    from tolerance.polarization import stokes_goal_vector

    with pytest.raises(RetolError) as info:
        stokes_goal_vector([0.5, 0.0, 0.0])
    e = info.value
    assert e.field == "stokes"
    assert "0.5" in e.problem
    assert e.fix


def test_the_ellipse_does_not_depend_on_the_intensity():
    """The polarization ellipse is a property of the normalised state: S and 1e-9·S (a weak
    beam) have the same azimuth, ellipticity and degree of polarization [Azzam & Bashara,
    sec. 1.3]; no light at all (S = 0) has no polarization, DOP 0 (common practice)."""
    from tolerance.polarization import ellipse

    chi, psi, p = math.radians(10.0), math.radians(30.0), 0.5
    S = np.array(
        [
            1.0,
            p * math.cos(2 * chi) * math.cos(2 * psi),
            p * math.cos(2 * chi) * math.sin(2 * psi),
            p * math.sin(2 * chi),
        ]
    )
    for scale in (1.0, 1e-9):
        e = ellipse(S * scale)
        assert float(e["azimuth_deg"]) == pytest.approx(30.0, abs=1e-9)
        assert float(e["ellipticity_angle_deg"]) == pytest.approx(10.0, abs=1e-9)
        assert float(e["dop"]) == pytest.approx(0.5, rel=1e-12)
    assert float(ellipse(np.zeros(4))["dop"]) == 0.0


def test_an_achromat_says_where_it_is_matched():
    """README "Constructions": an achromatic pair is matched at two wavelengths (or in value and
    slope at one); the plate's details say which, with the wavelengths."""
    p = design_plate("achromatic", "quartz", 0.25, 550.0, partner="mgf2", match_nm=[450.0, 650.0])
    assert "450" in p.details["achromat"] and "650" in p.details["achromat"]


def test_a_material_file_keeps_its_long_name(tmp_path):
    """README "Materials": a file's ``long_name`` is the name shown in reports."""
    from tolerance.dispersion import load_material_file

    p = tmp_path / "myquartz.toml"
    p.write_text('long_name = "Crystal quartz, lot 7"\n' + QUARTZ_TOML, encoding="utf-8")
    assert load_material_file(p).long_name == "Crystal quartz, lot 7"


def test_separation_warning_sample_count_is_the_normal_approximation():
    """Two intervals of half-width z·√(p(1 − p)/n) just touch when n = (2z)²·p(1 − p)/Δ²
    (normal approximation, common practice), rounded up to a power of ten.  Yields 0.52 and 0.48:
    p = 0.5, Δ = 0.04, z = 1.95996 (95 %): n = 15.366·0.25/0.0016 ≈ 2401 → 10,000."""
    from tolerance.decision import separation_warning

    z = 1.959963984540054
    assert (2 * z) ** 2 * 0.25 / 0.04**2 == pytest.approx(2400.9, abs=0.1)
    w = separation_warning(["a", "b"], [0.52, 0.48], [0.49, 0.45], [0.55, 0.51], [1, 2], 500)
    assert "About 10,000 samples" in w


@pytest.mark.parametrize("aoi", [0.0, 12.0])
def test_kernel_grid_path_beyond_the_polynomial_range_equals_the_line_path(aoi):
    """A layer whose half-retardance reaches :data:`tolerance.kernel.SINCOS_LIMIT` (1e6 rad,
    here a 25 m quartz-like layer: an absurd plate, but a possible input) takes the grid path's
    scalar branch with the C library's sine and cosine.  Its output must be the one of the line
    path (``_propagate``, the same Jones product written once more, held sample by sample to the
    independent reference in tests/test_differential.py), for a second, thin layer at another
    angle after it, an elliptical input and a tilted beam; to 1e-9 (rounding of a 2e6 rad
    phase is ~1e-10 rad)."""
    from tolerance.kernel import _RET, _XI, _XR, _YR, N_WORK, SINCOS_LIMIT, _propagate, _spectrum

    k0 = np.array([2 * math.pi / 0.6328, 2 * math.pi / 0.5])  # [1/µm]
    no2 = np.array([[1.5426**2, 1.5462**2], [1.5426**2, 1.5462**2]])  # (L, W)
    ne2 = np.array([[1.5517**2, 1.5554**2], [1.5517**2, 1.5554**2]])
    rat = ne2 / no2
    dn = np.sqrt(ne2) - np.sqrt(no2)
    thick = np.array([2.5e7, 20.0])  # [µm]
    assert 0.5 * k0[0] * thick[0] * dn[0, 0] > SINCOS_LIMIT
    tfac = np.array([1.0, 1.0])
    th = np.radians([10.0, 55.0])
    c2, s2 = np.cos(2 * th), np.sin(2 * th)
    phi = np.radians([30.0, -20.0])  # plane of incidence from each layer's axis
    cphi2, sphi2 = np.cos(phi) ** 2, np.sin(phi) ** 2
    sin2i = math.sin(math.radians(aoi)) ** 2
    proj = np.array([1.0, 0.5])
    ca, sa, cai, sai = 0.8, 0.5, 0.1, -0.3
    norm = math.sqrt(ca * ca + sa * sa + cai * cai + sai * sai)
    ca, sa, cai, sai = ca / norm, sa / norm, cai / norm, sai / norm
    work = np.zeros((N_WORK, 2))
    cut = np.zeros((2, 2))  # both optic axes in the face
    _spectrum(
        k0,
        no2,
        ne2,
        rat,
        dn,
        thick,
        tfac,
        c2,
        s2,
        sin2i,
        cphi2,
        sphi2,
        ca,
        sa,
        proj,
        work,
        cai,
        sai,
        1.0,
        cut,
    )
    for w in range(2):
        st1, st2, st3, ret = _propagate(
            k0[w],
            no2[:, w].copy(),
            ne2[:, w].copy(),
            rat[:, w].copy(),
            dn[:, w].copy(),
            thick,
            tfac,
            c2,
            s2,
            sin2i,
            cphi2,
            sphi2,
            ca,
            sa,
            proj,
            2,
            cai,
            sai,
            1.0,
            cut,
        )
        np.testing.assert_allclose(
            [work[_XR, w], work[_XI, w], work[_YR, w]], [st1, st2, st3], rtol=0, atol=1e-9
        )
        assert work[_RET, w] == pytest.approx(ret, rel=1e-14)


def test_material_methods_are_the_module_functions():
    """``Material.indices`` and ``Material.birefringence`` are the module functions
    (DEVELOPERS.md: ``Material`` with ``indices``, ``birefringence``)."""
    from tolerance.dispersion import birefringence, get_material, indices

    q = get_material("quartz")
    wl = np.array([450.0, 633.0])
    np.testing.assert_array_equal(q.indices(wl), indices(q, wl))
    np.testing.assert_array_equal(q.birefringence(wl), birefringence(q, wl))


def test_unequal_sellmeier_lists_name_lambda(tmp_path):
    """[DEVELOPERS] a Sellmeier block with fewer resonance wavelengths than strengths is an
    error naming the block's ``lambda``."""
    from tolerance.dispersion import load_material_file

    p = tmp_path / "len.toml"
    p.write_text(SELLMEIER_TOML.replace("lambda = [0.04338408, ", "lambda = ["), encoding="utf-8")
    with pytest.raises(RetolError) as info:
        load_material_file(p)
    assert info.value.field.endswith("lambda")


def test_a_design_wavelength_outside_the_material_names_design():
    """README "Materials": a design wavelength outside the formula's range is refused, naming
    the ``design`` key (the spec's name for it)."""
    with pytest.raises(RetolError) as info:
        design_plate("zero-order", "quartz", 0.25, 5000.0)
    assert info.value.field == "design"


def test_sobol_layout_gives_every_stream_and_layer_its_own_dimension():
    """The documented layout (sampler.sobol_layout): layer 0 of every stream first, in the given
    order, then layer 1 of the per-layer streams, and so on; no two (stream, layer) pairs share a
    Sobol' dimension (a shared one would draw two tolerances from the same coordinate)."""
    from tolerance.sampler import sobol_layout

    out = sobol_layout(["b", "a", "c"], {"b", "c"}, layers=3)
    assert out == {
        ("b", 0): 0,
        ("a", 0): 1,
        ("c", 0): 2,
        ("b", 1): 3,
        ("c", 1): 4,
        ("b", 2): 5,
        ("c", 2): 6,
    }
    assert len(set(out.values())) == len(out)


def test_percent_digits_are_the_fewest_that_show_the_bounds():
    """README "What the results mean": a yield is printed with the fewest decimals (at least
    one) at which a bound that differs from the estimate also prints differently (common
    practice for intervals): 0 of 10,000 passing with Wilson upper bound 0.0384 % needs 2
    (0.00 % ≤ 0.04 %); 50 % in [49 %, 51 %] needs 1; 90 % in [89.996 %, 90.004 %] needs 3."""
    from tolerance.decision import pct_digits

    assert pct_digits(0.0, 0.0, 0.000384) == 2
    assert pct_digits(0.5, 0.49, 0.51) == 1
    assert pct_digits(0.9, 0.89996, 0.90004) == 3
    assert pct_digits(1.0, 1.0, 1.0) == 1


def test_wilson_ends_are_exact_and_one_pass_is_not_zero():
    """Wilson (1927): with k = 0 the lower limit is exactly 0 and with k = n the upper limit
    exactly 1 (the closed form gives 0 and 1; rounding must not leave 1e-17 or 1 − 1e-16, which
    would print as a bound the data never showed), for every n; with k = 1 the lower limit is the
    closed form (p + z²/2n − z·√(p(1−p)/n + z²/4n²))/(1 + z²/n) > 0, here for 1 of 100."""
    from tolerance.montecarlo import wilson

    for n in range(1, 200):
        assert wilson(0, n, 0.95)[0] == 0.0
        assert wilson(n, n, 0.95)[1] == 1.0
    z, n, p = 1.959963984540054, 100, 0.01
    lo = (p + z * z / (2 * n) - z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))) / (
        1 + z * z / n
    )
    assert wilson(1, 100, 0.95)[0] == pytest.approx(lo, rel=1e-12)
    assert lo > 0.001  # the closed form: about 0.18 %


def test_dominant_tolerance_tie_break_is_the_harm_alone():
    """README: equal gains from removing either tolerance: the one that alone does more harm
    (lower yield alone) is named, whatever the names' order."""
    from tolerance.montecarlo import dominant_tolerance

    assert dominant_tolerance({"b": 0.5, "a": 0.2}, {"b": 0.7, "a": 0.7}, 0.6, 1.0) == "a"
    assert dominant_tolerance({"b": 0.2, "a": 0.5}, {"b": 0.7, "a": 0.7}, 0.6, 1.0) == "b"


def test_histogram_quantile_one_is_the_exact_maximum_beyond_the_range():
    """DEVELOPERS.md "Bounded memory": quantiles are clamped to the exact minimum and maximum;
    the 1-quantile is the exact maximum even when it lies beyond the histogram's range (a later
    sample outside the pilot's range is counted in the last bin), and the 0-quantile the exact
    minimum."""
    from tolerance.montecarlo import hist_quantiles

    hist = np.array([[[1, 1, 0, 4]]])  # (V, W, B): edges 0, 1, 2, 3, 4
    lo, iw = np.zeros((1, 1)), np.ones((1, 1))
    vmin, vmax = np.full((1, 1), -3.0), np.full((1, 1), 10.0)
    out = hist_quantiles(hist, lo, iw, vmin, vmax, [0.0, 1.0])
    assert out[0, 0, 0] == -3.0 and out[1, 0, 0] == 10.0


@pytest.mark.parametrize("rates", [[0.5, 0.6, 0.7, 0.8], [0.4, 0.6]])
def test_replicated_yield_interval_is_the_student_t_interval(rates):
    """Owen (1997), L'Ecuyer & Lemieux (2002) sec. 6: R independent scramblings give R unbiased
    pass rates ȳᵣ; the interval is mean ± t(0.975; R − 1)·s/√R with s the sample standard
    deviation (ddof 1), clipped to [0, 1] (t quantile from scipy.stats, a reference library).
    Also for R = 2 (one degree of freedom)."""
    from scipy.stats import t

    from tolerance.montecarlo import yield_interval

    per = 10
    passed = np.concatenate([np.arange(per) < round(r * per) for r in rates])
    y = np.array(rates)
    R = len(rates)
    half = t.ppf(0.975, R - 1) * np.std(y, ddof=1) / math.sqrt(R)
    lo, hi = yield_interval(passed, R, 0.95)
    assert lo == pytest.approx(max(0.0, y.mean() - half), abs=1e-12)
    assert hi == pytest.approx(min(1.0, y.mean() + half), abs=1e-12)


@pytest.mark.parametrize(
    "goal",
    [
        'state = "circular"\nmetric = "axial_ratio"\nmin = 0.9\nover = "band"',
        'state = "circular"\nmetric = "fidelity"\nmin = 0.999\nover = "spectrum"',
    ],
)
def test_rank_yield_is_the_yield_unless_axial_ratio_over_the_spectrum(tmp_path, goal):
    """README "Decision": the decision ranks on the yield; only for an axial-ratio goal over the
    spectrum (which sees the polarized part only) does it count the samples whose spectral
    fidelity reaches that of a pure state with b/a = min.  A band goal, or a fidelity goal over
    the spectrum, ranks on the plain yield and its interval."""
    from tolerance.montecarlo import Engine
    from tolerance.spec import loads

    text = (
        'title = "t"\n[wavelength]\nstart = "640nm"\nstop = "660nm"\nstep = "5nm"\n'
        '[source]\nshape = "flat"\n'
        f"[goal]\n{goal}\n[[candidate]]\nname = 'q'\nconstruction = 'zero-order'\n"
        "material = 'quartz'\nwaves = 0.25\ndesign = '650nm'\n"
        "[tolerances]\nthickness_um = { sigma = 0.3 }\nclocking_deg = { uniform = 3.0 }\n"
    )
    eng = Engine(loads(text, "t.toml"), samples=1024, seed=4)
    res = eng.evaluate(eng.case(0))
    assert 0.0 < res.yield_ < 1.0  # the goal splits the samples
    assert res.rank_yield == res.yield_
    assert (res.rank_yield_low, res.rank_yield_high) == (res.yield_low, res.yield_high)


def test_rank_yield_interval_for_axial_ratio_over_the_spectrum_is_wilson():
    """For an axial-ratio goal over the spectrum the rank yield counts the samples whose spectral
    fidelity reaches f_min = ½(1 + 2m/(1 + m²)) (a pure state of b/a = m: the fidelity to the
    circular goal is ½(1 + s₃) with s₃ = sin 2χ = 2m/(1 + m²), Azzam & Bashara sec. 1.3); its
    interval is the Wilson interval of that count (Wilson 1927)."""
    from tolerance.kernel import spectral_metric
    from tolerance.montecarlo import Engine, wilson
    from tolerance.spec import loads

    text = (
        'title = "t"\n[wavelength]\nstart = "640nm"\nstop = "660nm"\nstep = "5nm"\n'
        '[source]\nshape = "flat"\n'
        '[goal]\nstate = "circular"\nmetric = "axial_ratio"\nmin = 0.9\nover = "spectrum"\n'
        "[[candidate]]\nname = 'q'\nconstruction = 'zero-order'\n"
        "material = 'quartz'\nwaves = 0.25\ndesign = '650nm'\n"
        "[tolerances]\nthickness_um = { sigma = 0.3 }\nclocking_deg = { uniform = 3.0 }\n"
    )
    n = 1024
    eng = Engine(loads(text, "t.toml"), samples=n, seed=4)
    case = eng.case(0)
    res = eng.evaluate(case)
    f_min = 0.5 * (1.0 + 2 * 0.9 / (1 + 0.81))
    fid = spectral_metric(res.spec_stokes, case.goal, "fidelity")
    k = int(np.sum(fid >= f_min))
    assert 0 < k < n and res.rank_yield == k / n != res.yield_
    assert (res.rank_yield_low, res.rank_yield_high) == wilson(k, n, 0.95)
