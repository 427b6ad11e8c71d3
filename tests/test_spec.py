"""Tests of spec files (tolerance.spec): validation, normalisation and the error messages.

Every user mistake must raise :class:`tolerance.errors.RetolError` with one line that names the
spec file and the offending key, and, where one exists, the fix.  The expected values here are
the spec format's own rules (tolerance/spec.py docstrings, notes/GRID.md), plus:

Sources
-------
- SI units: BIPM, The International System of Units (SI Brochure, 9th ed., 2019): 1 um = 1e3 nm,
  1 mm = 1e6 nm; a parsec is no unit of length for optics (common practice).
- TOML v1.0.0 specification (toml.io): float syntax used by the round-trip property test.
"""

from __future__ import annotations

import copy
import json
import math
import tomllib
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

import tolerance
from tolerance.errors import RetolError
from tolerance.spec import validate

SPECS = Path(__file__).parent / "data" / "specs"
GOOD = SPECS / "qwp_780.toml"
NAME = "study.toml"  # the file name every message must carry


def raw_spec() -> dict:
    with GOOD.open("rb") as f:
        return tomllib.load(f)


def error_of(raw, path=f"/somewhere/specs/{NAME}") -> str:
    with pytest.raises(RetolError) as info:
        validate(raw, path)
    msg = str(info.value)
    assert "\n" not in msg, "a user error is one line"
    return msg


# ----------------------------------------------------------------------------- the good spec


def test_the_example_spec_validates_and_normalises():
    spec = tolerance.load_spec(GOOD)
    assert spec.title == "780 nm diode, circular (test)"
    # 770..790 nm every 5 nm: 5 wavelengths
    assert spec.wavelength.to_dict() == {"start_nm": 770.0, "stop_nm": 790.0, "step_nm": 5.0,
                                         "count": 5}
    assert [c.name for c in spec.candidates] == ["quartz zero-order", "quartz compound"]
    comp = spec.candidates[1]
    assert comp.thick_plate_um == 1000.0 and comp.design_nm == 780.0
    tol = {k: v.to_dict() for k, v in spec.tolerances.items()}
    assert tol["thickness_um"] == {"kind": "normal", "sigma": 0.3}
    assert tol["clocking_deg"] == {"kind": "uniform", "half_width": 0.5}
    assert tol["temperature_c"] == {"kind": "range", "low": 15.0, "high": 35.0}
    assert spec.run.samples == 2000 and spec.run.seed == 7
    assert spec.goal.over == "band"
    assert spec.base_dir == str(SPECS.resolve())
    json.dumps(spec.to_dict())  # stored in the grid as JSON


def test_units_are_converted():
    """BIPM SI Brochure: 1 um = 1000 nm, 1 mm = 1000 um."""
    raw = raw_spec()
    raw["wavelength"] = {"start": "0.77um", "stop": "0.00079mm", "step": "5000pm"}
    raw["candidate"][1]["thick_plate"] = "1mm"
    spec = validate(raw, NAME)
    assert spec.wavelength.start_nm == pytest.approx(770.0)
    assert spec.wavelength.stop_nm == pytest.approx(790.0)
    assert spec.wavelength.step_nm == pytest.approx(5.0)
    assert spec.candidates[1].thick_plate_um == pytest.approx(1000.0)


def test_tolerance_with_coverage_becomes_a_sigma():
    """A +-t limit at k-sigma coverage is a normal of sigma t/k (common practice; k = 3 by
    default)."""
    raw = raw_spec()
    raw["tolerances"] = {"thickness_um": {"tolerance": 0.9}, "tilt_deg": {"tolerance": 1.0,
                                                                        "coverage": 2}}
    tol = validate(raw, NAME).tolerances
    assert tol["thickness_um"].sigma == pytest.approx(0.3)
    assert tol["tilt_deg"].sigma == pytest.approx(0.5)


# ----------------------------------------------------------------------------- mistakes


def _set(path, value):
    """A mutation that sets raw[path...] = value (or deletes it for value is DELETE)."""
    def mutate(raw):
        d = raw
        for k in path[:-1]:
            d = d[k]
        if value is DELETE:
            del d[path[-1]]
        else:
            d[path[-1]] = value
    return mutate


DELETE = object()
C0 = ("candidate", 0)
C1 = ("candidate", 1)

MISTAKES = [
    # (id, mutation, words the message must contain)
    ("unknown tolerance key", _set(("tolerances", "thicknes_um"), {"sigma": 0.3}),
     ["[tolerances].thicknes_um", "did you mean 'thickness_um'?"]),
    ("unknown top key", _set(("tolerance",), {}), ["tolerance", "did you mean 'tolerances'?"]),
    ("unknown candidate key", _set(C1 + ("thick_plat",), "1000um"),
     ["thick_plat", "did you mean 'thick_plate'?"]),
    ("unknown distribution key", _set(("tolerances", "tilt_deg"), {"sigm": 0.3}),
     ["[tolerances].tilt_deg.sigm", "did you mean 'sigma'?"]),
    ("missing goal min", _set(("goal", "min"), DELETE), ["[goal].min", "missing"]),
    ("missing goal", _set(("goal",), DELETE), ["[goal]", "missing"]),
    ("missing wavelength step", _set(("wavelength", "step"), DELETE),
     ["[wavelength].step", "missing"]),
    ("missing wavelength", _set(("wavelength",), DELETE), ["[wavelength]", "missing"]),
    ("missing construction", _set(C0 + ("construction",), DELETE),
     ["construction", "missing", "zero-order"]),
    ("missing material", _set(C0 + ("material",), DELETE), ["material", "missing"]),
    ("unknown construction", _set(C0 + ("construction",), "zero_order"),
     ["construction", "did you mean 'zero-order'?"]),
    ("no candidates", _set(("candidate",), []), ["[[candidate]]", "candidate"]),
    ("goal min a string", _set(("goal", "min"), "high"), ["[goal].min", "number"]),
    ("samples not whole", _set(("run", "samples"), 1.5), ["[run].samples", "whole number"]),
    ("axis a boolean", _set(C0 + ("axis_deg",), True), ["axis_deg", "number"]),
    ("waves a word", _set(C0 + ("waves",), "quarter"), ["waves", "number"]),
    ("sigma a word", _set(("tolerances", "clocking_deg"), {"sigma": "lots"}),
     ["[tolerances].clocking_deg.sigma", "number"]),
    ("unit parsecs", _set(("wavelength", "start"), "12 parsecs"),
     ["[wavelength].start", "parsecs"]),
    ("thick plate parsecs", _set(C1 + ("thick_plate",), "12 parsecs"),
     ["thick_plate", "parsecs"]),
    ("step not a quantity", _set(("wavelength", "step"), "five"), ["[wavelength].step", "five"]),
    ("step zero", _set(("wavelength", "step"), "0nm"), ["[wavelength].step", "positive"]),
    ("stop below start", _set(("wavelength", "stop"), "700nm"), ["[wavelength].stop", "below"]),
    ("negative sigma", _set(("tolerances", "thickness_um"), {"sigma": -0.1}),
     ["[tolerances].thickness_um.sigma", "negative"]),
    ("negative uniform", _set(("tolerances", "clocking_deg"), {"uniform": -1}),
     ["[tolerances].clocking_deg.uniform", "negative"]),
    ("low above high", _set(("tolerances", "temperature_c"), {"low": 35, "high": 15}),
     ["[tolerances].temperature_c.low", "above high"]),
    ("range without high", _set(("tolerances", "temperature_c"), {"low": 35}),
     ["[tolerances].temperature_c", "low and high"]),
    ("two distributions", _set(("tolerances", "tilt_deg"), {"sigma": 1, "uniform": 2}),
     ["[tolerances].tilt_deg", "exactly one"]),
    ("zero samples", _set(("run", "samples"), 0), ["[run].samples", "at least 1"]),
    ("negative seed", _set(("run", "seed"), -1), ["[run].seed"]),
    ("confidence above 1", _set(("run", "confidence"), 1.5), ["[run].confidence"]),
    ("quantile above 1", _set(("run", "quantiles"), [0.5, 2]), ["[run].quantiles"]),
    ("compound without thick plate", _set(C1 + ("thick_plate",), DELETE),
     ["thick_plate", "compound"]),
    ("multi-order without order", _set(C0 + ("construction",), "multi-order"), ["order"]),
    ("negative order", lambda raw: raw["candidate"][0].update(construction="multi-order",
                                                               order=-2), ["order", "at least 0"]),
    ("unknown goal metric", _set(("goal", "metric"), "axial_ration"),
     ["[goal].metric", "did you mean 'axial_ratio'?"]),
    ("axial ratio for a linear goal", _set(("goal", "state"), "linear"), ["[goal].metric"]),
    ("unknown over", _set(("goal", "over"), "everywhere"), ["[goal].over"]),
    ("unknown handedness", _set(("goal", "handedness"), "sinister"), ["[goal].handedness"]),
    ("duplicate names", _set(C1 + ("name",), "quartz zero-order"), ["name", "duplicated"]),
    ("bad temperature range", _set(("environment",), {"temperature_range": [40, 10]}),
     ["[environment].temperature_range"]),
]


@pytest.mark.parametrize("mutate, words", [m[1:] for m in MISTAKES], ids=[m[0] for m in MISTAKES])
def test_mistakes_name_the_file_and_the_key(mutate, words):
    raw = raw_spec()
    mutate(raw)
    msg = error_of(raw)
    assert NAME in msg, msg
    assert "/somewhere" not in msg  # the file's name, not the whole path
    for w in words:
        assert w in msg, (w, msg)


def test_the_typo_file_on_disk():
    with pytest.raises(RetolError) as info:
        tolerance.load_spec(SPECS / "typo_key.toml")
    msg = str(info.value)
    assert "typo_key.toml" in msg and "did you mean 'thickness_um'?" in msg


def test_the_bad_unit_file_on_disk():
    with pytest.raises(RetolError) as info:
        tolerance.load_spec(SPECS / "bad_unit.toml")
    msg = str(info.value)
    assert "bad_unit.toml" in msg and "[wavelength].start" in msg and "parsecs" in msg


def test_missing_file_and_bad_toml(tmp_path):
    with pytest.raises(RetolError, match="no such spec file"):
        tolerance.load_spec(tmp_path / "absent.toml")
    bad = tmp_path / "broken.toml"
    bad.write_text("title = \n[goal\n")
    with pytest.raises(RetolError) as info:
        tolerance.load_spec(bad)
    assert "broken.toml" in str(info.value) and "TOML" in str(info.value)
    assert "\n" not in str(info.value)


def test_retol_error_is_a_value_error():
    with pytest.raises(ValueError):
        validate({"title": "x"}, NAME)


# Unknown materials and wavelengths outside a formula's range are only found when the plates are
# built (tolerance.montecarlo.prepare); the message must still list the materials / name the key.


def _run_error(raw) -> str:
    with pytest.raises(RetolError) as info:
        spec = validate(raw, f"/somewhere/specs/{NAME}")
        tolerance.run(spec, samples=10)
    msg = str(info.value)
    assert "\n" not in msg
    return msg


def test_unknown_material_lists_the_known_ones():
    raw = raw_spec()
    raw["candidate"][0]["material"] = "unobtainium"
    msg = _run_error(raw)
    assert "unobtainium" in msg and "material" in msg
    for known in ("quartz", "mgf2", "calcite", "sapphire"):
        assert known in msg


def test_wavelength_outside_a_formula_names_the_grid():
    raw = raw_spec()
    raw["wavelength"] = {"start": "100nm", "stop": "800nm", "step": "100nm"}
    raw["source"] = {"shape": "flat"}
    msg = _run_error(raw)
    assert "[wavelength]" in msg and "quartz" in msg and "100 nm" in msg


@pytest.mark.parametrize("case", [
    "material", "range", "design",
    "source",
])
def test_build_time_errors_name_the_file(case):
    raw = raw_spec()
    if case == "material":
        raw["candidate"][0]["material"] = "unobtainium"
    elif case == "range":
        raw["wavelength"] = {"start": "100nm", "stop": "800nm", "step": "100nm"}
        raw["source"] = {"shape": "flat"}
    elif case == "design":
        raw["candidate"][0]["design"] = "3000nm"
    else:
        raw["source"] = {"shape": "laser", "center": "1500nm"}
        raw["candidate"][0]["design"] = "780nm"
        raw["candidate"][1]["design"] = "780nm"
    msg = _run_error(raw)
    assert NAME in msg
    if case in ("material", "design"):
        assert "quartz zero-order" in msg  # which candidate


# ----------------------------------------------------------------------------- properties


_widths = st.floats(min_value=0.0, max_value=1e6, allow_nan=False, allow_infinity=False)
# angle tolerances are physically bounded (tilt below grazing incidence, axis errors small):
# the validator refuses widths that reach 89 deg of tilt (6 sigma) or 45 deg of axis error
_angle_widths = st.floats(min_value=0.0, max_value=7.0, allow_nan=False, allow_infinity=False)


@given(sigma=_widths, half=_widths, angle_sigma=_angle_widths, angle_half=_angle_widths,
       key=st.sampled_from(["thickness_um", "clocking_deg", "crossing_deg", "tilt_deg",
                            "temperature_c", "input_azimuth_deg"]))
def test_any_valid_width_round_trips(sigma, half, angle_sigma, angle_half, key):
    """A sigma >= 0 (or uniform half-width) written into a TOML file comes back unchanged
    (TOML v1.0.0: repr of a Python float is a valid TOML float that parses to the same
    double)."""
    if key.endswith("_deg"):
        sigma, half = angle_sigma, angle_half
    base = copy.deepcopy(_BASE)
    base["tolerances"] = {}
    text = _to_toml_tolerances(key, sigma, "sigma")
    raw = tomllib.loads(text)
    base["tolerances"] = raw["tolerances"]
    spec = validate(base, NAME)
    assert spec.tolerances[key].to_dict() == {"kind": "normal", "sigma": sigma}
    base["tolerances"] = tomllib.loads(_to_toml_tolerances(key, half, "uniform"))["tolerances"]
    assert validate(base, NAME).tolerances[key].to_dict() == {"kind": "uniform",
                                                              "half_width": half}
    assert math.isfinite(sigma)


@given(low=st.floats(-100, 100), width=st.floats(0, 100))
def test_any_ordered_range_round_trips(low, width):
    base = copy.deepcopy(_BASE)
    high = low + width
    base["tolerances"] = {"temperature_c": {"low": low, "high": high}}
    assert validate(base, NAME).tolerances["temperature_c"].to_dict() == {
        "kind": "range", "low": low, "high": high}


def _to_toml_tolerances(key, value, kind):
    return f"[tolerances]\n{key} = {{ {kind} = {value!r} }}\n"


_BASE = raw_spec()


@pytest.mark.parametrize("key, dist, words", [
    ("tilt_deg", {"uniform": 90}, "89 deg"),
    ("tilt_deg", {"sigma": 20}, "89 deg"),
    ("clocking_deg", {"uniform": 60}, "45 deg"),
    ("temperature_c", {"low": -300, "high": 20}, "absolute zero"),
])
def test_physically_impossible_tolerances_are_refused(key, dist, words):
    # common practice: tilts stay far below grazing incidence, temperatures above 0 K
    base = copy.deepcopy(_BASE)
    base["tolerances"] = {key: dist}
    with pytest.raises(RetolError, match=words):
        validate(base, NAME)


def test_bare_number_tolerance_is_refused_with_both_readings():
    base = copy.deepcopy(_BASE)
    base["tolerances"] = {"clocking_deg": 0.5}
    with pytest.raises(RetolError, match="uniform = 0.5"):
        validate(base, NAME)


@pytest.mark.parametrize("metric, gmin", [("axial_ratio", 1.5), ("fidelity", -0.1)])
def test_unreachable_goal_is_refused(metric, gmin):
    base = copy.deepcopy(_BASE)
    base["goal"] = {"state": "circular", "metric": metric, "min": gmin}
    with pytest.raises(RetolError, match=r"\[goal\]\.min"):
        validate(base, NAME)


def test_key_of_another_construction_is_refused():
    base = copy.deepcopy(_BASE)
    base["candidate"] = [dict(base["candidate"][0], construction="zero-order", order=3)]
    with pytest.raises(RetolError, match="does not apply"):
        validate(base, NAME)
