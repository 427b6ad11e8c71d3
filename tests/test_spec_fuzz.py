"""Fuzzing ``tolerance.load_spec`` with mutated TOML text: a study or a RetolError, nothing else.

The property is this project's contract (DEVELOPERS.md: every user mistake is a one-line
``RetolError``).  The mutations start from the shipped example specs and splice in fragments
TOML can express (dates, tables, arrays, nan/inf, huge and negative numbers, booleans, strings
with units) where the spec expects something else.

CI runs the "retol" hypothesis profile (60 examples, about a second); a soak run uses
``pytest tests/test_spec_fuzz.py --hypothesis-profile=soak`` (20,000 examples; see
DEVELOPERS.md).  Inputs found to raise something else are kept below as explicit examples.
"""

from __future__ import annotations

import tempfile
from importlib import resources
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from tolerance.errors import RetolError
from tolerance.spec import load_spec

EXAMPLES = {
    e.name: e.read_text(encoding="utf-8")
    for e in resources.files("tolerance.examples").iterdir()
    if e.name.endswith(".toml")
}

FRAGMENTS = [
    "nan",
    "inf",
    "-inf",
    "1e308",
    "-1e308",
    "1e-300",
    "0",
    "-1",
    "true",
    "false",
    '"false"',
    "1979-05-27",
    "1979-05-27T07:32:00Z",
    "07:32:00",
    "[]",
    "[1, 2]",
    '["a"]',
    "{}",
    "{ a = 1 }",
    '"1e-13"',
    "1e-13",
    '"830nm"',
    '"-5nm"',
    '"0nm"',
    '"abc"',
    "''",
    "10000000000",
    "\n[[candidate]]\n",
    "\n[source]\n",
    "\n[run]\nsamples = ",
    "\n[goal]\n",
    "=",
    ".",
    "[",
    "]",
    "{",
    "}",
    '"',
    ",",
    "\n",
    " = ",
    "#",
    "\\u0000",
    "construction = [1]",
    "shape = {}",
    "material = 1979-05-27",
    'axis_deg = "x"',
    'keep_samples = "false"',
    "temperature_range = [nan, 50]",
    "duration = 1e-13",
    "waves = 1e307",
]


VALUES = [f for f in FRAGMENTS if f.strip() and "\n" not in f and "=" not in f] + [
    "[nan, 50]",
    "[-300, 20]",
    "[20]",
    '{ path = "x.csv" }',
    "[[1]]",
    '"10**12"',
    "1000000000000",
    '"1e-13 s"',
    '"nan nm"',
    '"1 furlong"',
    "-0.0",
    "90",
    "1e-320",
]


@st.composite
def mutated_spec(draw):
    """A shipped example with 1-4 edits: a value replaced (most often), or raw text spliced."""
    text = EXAMPLES[draw(st.sampled_from(sorted(EXAMPLES)))]
    for _ in range(draw(st.integers(1, 4))):
        lines = text.split("\n")
        valued = [
            k for k, ln in enumerate(lines) if " = " in ln and not ln.lstrip().startswith("#")
        ]
        op = draw(st.sampled_from(["value", "value", "value", "insert", "replace", "delete"]))
        if op == "value" and valued:
            k = draw(st.sampled_from(valued))
            lines[k] = lines[k].split(" = ", 1)[0] + " = " + draw(st.sampled_from(VALUES))
            text = "\n".join(lines)
            continue
        i = draw(st.integers(0, len(text)))
        j = min(len(text), i + draw(st.integers(0, 12)))
        piece = "" if op == "delete" else draw(st.sampled_from(FRAGMENTS))
        text = text[:i] + piece + text[(j if op != "insert" else i) :]
    return text


def load_text(text: str):
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "spec.toml"
        p.write_text(text, encoding="utf-8", errors="surrogatepass")
        return load_spec(p)


def _study_or_retol_error(text: str) -> None:
    try:
        load_text(text)
    except RetolError as exc:
        assert "\n" not in str(exc), str(exc)


#: Failures already reported (the KNOWN examples below), tolerated by the property test so that
#: CI is not flaky while spec.py is rewritten; delete this list once KNOWN all pass.
TOLERATED = ()  # every outcome must be a study or a RetolError


@given(mutated_spec())
def test_mutated_specs_load_or_raise_retol_error(text):
    try:
        _study_or_retol_error(text)
    except Exception as exc:
        if not any(isinstance(exc, t) and m in str(exc) for t, m in TOLERATED):
            raise


def _with(name: str, old: str, new: str) -> str:
    text = EXAMPLES[name]
    assert old in text, old
    return text.replace(old, new, 1)


#: Inputs the fuzzing found raising something other than RetolError before the typed-spec
#: rewrite; each must now be a study or a one-line RetolError.
KNOWN = [
    pytest.param("pulse_circular.toml", 'stop = "860nm"', "stop = 1e308", id="stop-1e308-overflow"),
    pytest.param(
        "pulse_circular.toml", 'shape = "sech2"', "shape = 1979-05-27", id="shape-date-json"
    ),
    pytest.param(
        "pulse_circular.toml", 'duration = "40fs"', "duration = 1979-05-27", id="duration-date"
    ),
    pytest.param(
        "pulse_circular.toml",
        'construction = "zero-order"',
        "construction = []",
        id="construction-list-unhashable",
    ),
    pytest.param(
        "rgb_rotator.toml",
        'lines = [{ at = "450nm", power = 1.0 }, { at = "520nm", power = 0.8 }, '
        '{ at = "638nm", power = 1.2 }]',
        "lines = 1979-05-27",
        id="lines-date-json",
    ),
    pytest.param("sld_circular.toml", 'fwhm = "20nm"', "fwhm = 07:32:00", id="fwhm-time-json"),
    pytest.param("laser_faces.toml", 'shape = "laser"', "shape = []", id="shape-list-unhashable"),
    pytest.param(
        "laser_faces.toml",
        "faces = { reflectance = 0.0025 }",
        'faces = { reflectance = "~nosuchuser/coating.csv" }',
        id="coating-file-unknown-home",
    ),
    pytest.param(
        "laser_faces.toml",
        "faces = { reflectance = 0.0025 }",
        'faces = { reflectance = "a\u0000b.csv" }',
        id="coating-file-null-byte",
    ),
    pytest.param(
        "laser_faces.toml",
        "faces = { reflectance = 0.0025 }",
        "faces = { reflectance = [0.1, 0.2], wavelength_nm = [600, 700], file = 3 }",
        id="coating-file-not-a-name",
    ),
]


@pytest.mark.parametrize("name, old, new", KNOWN)
def test_known_fuzz_findings(name, old, new):
    _study_or_retol_error(_with(name, old, new))
