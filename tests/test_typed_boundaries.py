"""Typed boundaries: one validated study in, one result record out, one registry pattern.

Each defect test here failed on the engine before the refactor (reproduced there first); the
engine-API tests check the promises later work relies on: common random numbers across calls,
tolerances scaled without redrawing, a plate swapped per call.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest

import tolerance
from tolerance.distributions import Distribution, parse
from tolerance.errors import RetolError
from tolerance.grid import COORDS, SCHEMA
from tolerance.montecarlo import Engine
from tolerance.study import Study

SPEC = """
title = "typed boundaries"
[wavelength]
start = "770nm"
stop = "790nm"
step = "10nm"
[source]
shape = "gaussian"
center = "780nm"
fwhm = "10nm"
[goal]
min = 0.97
[[candidate]]
name = "zero"
construction = "zero-order"
material = "quartz"
[[candidate]]
name = "compound"
construction = "compound"
material = "quartz"
thick_plate = "1000um"
tolerances = { thickness_um = { sigma = 0.05 } }
[tolerances]
thickness_um = { sigma = 0.2 }
clocking_deg = { uniform = 1.0 }
temperature_c = { low = 10, high = 30 }
[run]
samples = 1024
seed = 5
"""


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    p = tmp_path_factory.mktemp("typed") / "typed.toml"
    p.write_text(SPEC)
    return tolerance.load_spec(p)


def _spec_with(tmp_path, text):
    p = tmp_path / "s.toml"
    p.write_text(text)
    return p


# ----------------------------------------------------------------------------- defects


def test_design_plate_refuses_an_unknown_keyword():
    """axis=45 (for axis_deg) used to build the plate silently at 0 deg."""
    with pytest.raises(RetolError) as exc:
        tolerance.design_plate("zero-order", "quartz", 0.25, 632.8, axis=45)
    assert exc.value.field == "axis"
    assert "axis_deg" in str(exc.value)


def test_a_boolean_is_not_a_thickness(tmp_path):
    """A stack layer `thickness = true` used to run as 1 um."""
    text = SPEC.replace(
        'name = "zero"\nconstruction = "zero-order"\nmaterial = "quartz"',
        'name = "zero"\nconstruction = "stack"\n'
        'layers = [{ material = "quartz", thickness = true, axis_deg = 0 }]',
    )
    with pytest.raises(RetolError, match=r"layers\[0\]\.thickness"):
        tolerance.load_spec(_spec_with(tmp_path, text))


@pytest.mark.parametrize(
    "old, new, words",
    [
        ('shape = "gaussian"', 'shape = "trapezoid"', "unknown shape"),
        ('thick_plate = "1000um"', "thick_plate = inf", "not finite"),
        ('thick_plate = "1000um"', "thick_plate = nan", "not finite"),
        ('fwhm = "10nm"', 'fwhm = "10nm"\ndrift = { sigma = "0.1nm" }', "shape 'gaussian'"),
    ],
)
def test_bad_source_and_plate_keys_fail_in_load_spec(tmp_path, old, new, words):
    """An unknown source shape and an infinite thickness used to pass load_spec and fail only
    inside run()."""
    with pytest.raises(RetolError, match=words):
        tolerance.load_spec(_spec_with(tmp_path, SPEC.replace(old, new)))


def test_plate_materials_is_hashable():
    """Plate.materials used to raise TypeError: unhashable type: 'dict'."""
    p = tolerance.design_plate("achromatic", "quartz", 0.25, 633.0, partner="mgf2")
    assert [m.name for m in p.materials] == ["quartz", "mgf2"]


def test_a_built_in_material_cannot_be_changed():
    """A built-in Material could be changed for the whole process through its cached dict."""
    q = tolerance.get_material("quartz")
    before = float(q.birefringence(632.8))
    with pytest.raises(TypeError):
        q.coefficients["ordinary"]["A"] = 3.0
    with pytest.raises(TypeError):
        q.coefficients["new"] = {}
    with pytest.raises(dataclasses.FrozenInstanceError):
        q.valid_min_nm = 1.0
    assert float(tolerance.get_material("quartz").birefringence(632.8)) == before


@pytest.mark.parametrize(
    "old, new, key",
    [
        (
            "min = 0.97",
            "min = 0.97\n[environment]\ntemperature_range = [nan, 50]",
            "temperature_range",
        ),
        ("seed = 5", 'seed = 5\nkeep_samples = "false"', "keep_samples"),
        ('construction = "zero-order"', 'construction = ["zero-order"]', "construction"),
        ('shape = "gaussian"', "shape = 1979-05-27", "[source]"),
        ('material = "quartz"\n[[candidate]]', "material = 1979-05-27\n[[candidate]]", "material"),
    ],
)
def test_values_toml_can_express_but_a_spec_cannot_mean(tmp_path, old, new, key):
    """Lists, dates and strings where a name, number or flag belongs: one RetolError."""
    with pytest.raises(RetolError) as exc:
        tolerance.load_spec(_spec_with(tmp_path, SPEC.replace(old, new, 1)))
    assert key in str(exc.value)


# ----------------------------------------------------------------------------- the study


def test_the_study_is_frozen(study):
    with pytest.raises(dataclasses.FrozenInstanceError):
        study.title = "x"
    with pytest.raises(TypeError):
        study.tolerances["tilt_deg"] = Distribution("normal", sigma=1.0)
    assert isinstance(study.tolerances["thickness_um"], Distribution)


def test_a_saved_grid_spec_loads_back_into_the_same_study(study):
    grid = tolerance.run(study, samples=512)
    again = Study.from_dict(json.loads(grid.attrs["spec"]))
    assert again == study
    assert again.to_json() == study.to_json()


def test_candidate_overrides_are_merged_in_one_place(study):
    comp = study.candidate("compound")
    tol = study.tolerances_for(comp)
    assert tol["thickness_um"].sigma == 0.05
    assert tol["clocking_deg"].half_width == 1.0
    assert study.tolerances_for(study.candidate("zero"))["thickness_um"].sigma == 0.2


# ----------------------------------------------------------------------------- distributions


@pytest.mark.parametrize(
    "table, form, width, std",
    [
        ({"sigma": 0.3}, "sigma", 0.3, 0.3),
        ({"uniform": 0.6}, "uniform", 0.6, 0.6 / math.sqrt(3)),  # GUM 4.3.7
        ({"low": 10, "high": 30}, "range", 10.0, 20 / math.sqrt(12)),
        ({"tolerance": 0.9}, "tolerance", 0.9, 0.3),  # k = 3 by default (GUM 6.2)
    ],
)
def test_distribution_forms(table, form, width, std):
    d = parse(table, "t")
    assert d.form == form and d.width == pytest.approx(width) and d.std == pytest.approx(std)
    half = d.scaled(0.5)
    assert half.form == form and half.width == pytest.approx(width / 2)
    assert half.std == pytest.approx(std / 2)
    if form == "range":  # a range scales about its centre
        assert (half.low + half.high) / 2 == pytest.approx(20.0)
    assert d.with_width(2 * width).width == pytest.approx(2 * width)
    assert Distribution.from_dict(d.to_dict()) == d


def test_distribution_draws_are_the_documented_maps():
    z = np.array([-1.0, 0.0, 2.0])
    u = np.array([0.0, 0.25, 0.5])
    np.testing.assert_array_equal(parse({"sigma": 2}, "t").draw(z, u, 1.0), 1.0 + 2.0 * z)
    np.testing.assert_array_equal(parse({"uniform": 2}, "t").draw(z, u), 2.0 * (2 * u - 1))
    np.testing.assert_array_equal(parse({"low": 1, "high": 3}, "t").draw(z, u, 99.0), 1 + 2 * u)
    with pytest.raises(RetolError):
        parse({"sigma": 1}, "t").scaled(float("nan"))


# ----------------------------------------------------------------------------- the engine API


def test_engine_reuses_draws_across_candidates_and_calls(study):
    eng = Engine(study, samples=1024)
    a = eng.draws("clocking_deg", 0, 0, 512)
    b = eng.draws("clocking_deg", 0, 0, 512)
    assert a[0] is b[0]  # made once, reused (common random numbers)


def test_engine_pass_rate_matches_the_run(study):
    """The engine's cheap pass rate on the same draws equals the full run's yield."""
    eng = Engine(study, samples=1024)
    grid = tolerance.run(study, samples=1024)
    for i, c in enumerate(study.candidates):
        assert eng.pass_rate(eng.case(i)) == float(grid["yield"].sel(candidate=c.name))


def test_scaled_tolerances_and_swapped_plates(study):
    eng = Engine(study, samples=1024)
    base = eng.case("zero")
    zero = eng.case("zero", scale={"thickness_um": 0.0, "clocking_deg": 0.0, "temperature_c": 0.0})
    assert eng.pass_rate(zero) == 1.0  # the nominal plate meets the goal (0.97)
    tight = eng.case("zero", scale={"thickness_um": 0.25})
    assert eng.pass_rate(tight) >= eng.pass_rate(base)
    # the same plate given explicitly gives the same answer; another plate another one
    same = eng.case("zero", plate=study.candidate("zero").plate)
    assert eng.pass_rate(same) == eng.pass_rate(base)
    other = eng.case("zero", plate=study.candidate("compound").plate)
    ref = eng.case("compound", tolerances=study.tolerances_for(study.candidate("zero")))
    assert eng.pass_rate(other) == eng.pass_rate(ref)
    with pytest.raises(RetolError, match="tilt_deg"):
        eng.case("zero", scale={"tilt_deg": 2.0})


def test_the_result_record_is_frozen(study):
    eng = Engine(study, samples=512)
    res = eng.evaluate(eng.cases[0])
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.passes = 0
    assert res.yield_ == res.passes / 512
    assert set(res.sens_alone) == {"thickness_um", "clocking_deg", "temperature_c"}


def test_run_refuses_what_is_not_a_study():
    with pytest.raises(RetolError, match="load_spec"):
        tolerance.run({"wavelength": {}})


# ----------------------------------------------------------------------------- the grid schema


def test_every_grid_variable_follows_the_schema(study):
    grid = tolerance.run(study, samples=512, keep_samples=True)
    for name, var in grid.data_vars.items():
        assert name in SCHEMA, name
        assert var.dims == SCHEMA[name].dims, name
        assert var.attrs["long_name"]
        assert "units" in var.attrs or var.dtype.kind == "O", name  # text carries no units
    for name in grid.coords:
        assert grid[name].dims == COORDS[name].dims


# ----------------------------------------------------------------------------- non-finite values


@pytest.mark.parametrize(
    "kwargs, field",
    [
        (
            {"layers": [{"material": "quartz", "thickness_um": 10, "axis_deg": float("nan")}]},
            "layers[0].axis_deg",
        ),
        (
            {"layers": [{"material": "quartz", "thickness_um": float("inf"), "axis_deg": 0}]},
            "layers[0].thickness",
        ),
    ],
)
def test_the_api_refuses_non_finite_layers(kwargs, field):
    with pytest.raises(RetolError) as exc:
        tolerance.design_plate("stack", **kwargs)
    assert exc.value.field == field


def test_a_nan_never_counts_as_a_pass(study):
    """A NaN metric used to be skipped by the band minimum (NaN < x is false), so a sample
    whose every metric was NaN 'passed'; the engine now refuses such results."""
    from tolerance.montecarlo import Accumulator, Nominal, check_finite

    eng = Engine(study, samples=512)
    case = eng.cases[0]
    acc = Accumulator(4, 3, np.zeros((4, 3)), np.ones((4, 3)), 8, 1, False)
    acc.worst[:] = [0.99, np.nan, 0.98, 0.97]
    acc.spec_stokes[:] = 0.0
    acc.design_stokes[:] = 0.0
    nom = Nominal(np.zeros((4, 3)), np.zeros((3, 3)), 0.99, np.zeros(3), np.zeros(3))
    with pytest.raises(RetolError, match="non-finite"):
        check_finite(case, acc, nom, acc.worst)
