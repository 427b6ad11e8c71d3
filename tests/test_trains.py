"""Trains of separately mounted plates: each element's own tolerances, per-element sensitivity,
allocation and drawing rows.

Sources
-------
[derived] Derived in the test's docstring.
[AB] R. M. A. Azzam and N. M. Bashara, Ellipsometry and Polarized Light (North-Holland, 1977),
    sec. 2.6: a retarder of retardance delta turns the Poincare sphere by delta about its axis;
    a half-wave plate at theta turns a linear state at alpha to 2 theta - alpha.
[sympy] sympy.physics.optics.polarization (SymPy): ``half_wave_retarder(theta)``,
    ``quarter_wave_retarder(theta)``, ``jones_vector(psi, chi)``, ``jones_2_stokes`` (S3 of
    the opposite sign to this package's, so negated).
[GUM] JCGM 100:2008, 5.1.2: independent contributions add in quadrature.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import sympy as sp
from click.testing import CliRunner
from sympy.physics.optics import polarization as spol

from tolerance import allocation as A
from tolerance.cli.main import cli
from tolerance.errors import RetolError
from tolerance.montecarlo import Engine, run, sample_inputs
from tolerance.spec import loads
from tolerance.study import Study

_th, _psi, _chi = sp.symbols("theta psi chi", real=True)
_a, _b, _c, _d = sp.symbols("a b c d", real=True)
SYM_QWP = sp.lambdify(_th, spol.quarter_wave_retarder(_th), "numpy")
SYM_HWP = sp.lambdify(_th, spol.half_wave_retarder(_th), "numpy")
SYM_JONES = sp.lambdify((_psi, _chi), spol.jones_vector(_psi, _chi), "numpy")
SYM_STOKES = sp.lambdify(
    (_a, _b, _c, _d), spol.jones_2_stokes(sp.Matrix([_a + sp.I * _b, _c + sp.I * _d])), "numpy"
)

# A half-wave plate at 45 deg lit along its axis (linear 45 deg) passes the state unchanged;
# the quarter-wave plate at 0 deg then makes it circular.
TRAIN = """title = "train"
[wavelength]
start = "633nm"
stop = "633nm"
step = "1nm"
[source]
shape = "laser"
center = "633nm"
[input]
azimuth_deg = 45
[goal]
state = "circular"
handedness = "{hand}"
metric = "sphere_angle_deg"
max = {limit}
[[candidate]]
name = "hwp+qwp"
{cand_tol}
[[candidate.elements]]
construction = "zero-order"
material = "quartz"
waves = 0.5
design = "633nm"
axis_deg = 45
{tol0}
[[candidate.elements]]
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "633nm"
axis_deg = 0
{tol1}
[tolerances]
{tol}
"""


def spec(tol0="", tol1="", tol="", cand_tol="", limit=1.0, hand=None):
    return TRAIN.format(
        tol0=tol0, tol1=tol1, tol=tol, cand_tol=cand_tol, limit=limit, hand=hand or HAND
    )


def _hand():
    st = loads(spec(hand="right"), "t.toml")
    eng = Engine(st, samples=512, seed=1)
    s3 = eng.nominal(eng.case(0)).design_stokes[2]
    return "right" if s3 > 0 else "left"


HAND = _hand()


def study(**kw):
    return loads(spec(**kw), "t.toml")


def test_element_tolerances_named_per_element_and_overridden():
    """An element's own table overrides the candidate's, which overrides [tolerances]; a
    tolerance written without an element acts on every element; train-wide ones keep their
    names."""
    st = study(
        tol1="tolerances = { clocking_deg = { sigma = 0.05 } }",
        cand_tol="tolerances = { thickness_um = { sigma = 0.02 } }",
        tol="clocking_deg = { sigma = 0.3 }\nthickness_um = { sigma = 0.1 }\n"
        "tilt_deg = { sigma = 1 }",
    )
    tol = st.tolerances_for(st.candidates[0])
    assert tol["clocking_deg[element 0]"].sigma == 0.3
    assert tol["clocking_deg[element 1]"].sigma == 0.05
    assert tol["thickness_um[element 0]"].sigma == 0.02
    assert tol["thickness_um[element 1]"].sigma == 0.02
    assert tol["tilt_deg"].sigma == 1.0
    assert "clocking_deg" not in tol and "crossing_deg[element 0]" not in tol
    # the study's JSON (stored in every grid) loads back into an equal study
    assert Study.from_dict(json.loads(st.to_json())) == st


def test_draws_independent_and_on_the_right_element():
    """Thickness on element 1 only moves layer 1 (element 0's layer stays nominal); clocking on
    both elements draws from separate streams: uncorrelated, each with its own sigma."""
    n = 8192
    st = study(
        tol0="tolerances = { clocking_deg = { sigma = 1.0 } }",
        tol1="tolerances = { clocking_deg = { sigma = 0.5 }, thickness_um = { sigma = 0.2 } }",
    )
    eng = Engine(st, samples=n, seed=4)
    case = eng.case(0)
    inp, _ = sample_inputs(case, st, eng.draws, 0, n)
    t0 = case.plate.layers[0].thickness_um
    assert np.all(inp.thick[:, 0] == t0)
    assert np.std(inp.thick[:, 1]) == pytest.approx(0.2, rel=0.05)
    ang = 0.5 * np.degrees(np.arctan2(inp.s2, inp.c2))
    e0, e1 = ang[:, 0] - 45.0, ang[:, 1]
    assert abs(np.corrcoef(e0, e1)[0, 1]) < 0.05
    assert np.std(e0) == pytest.approx(1.0, rel=0.05)
    assert np.std(e1) == pytest.approx(0.5, rel=0.05)


@pytest.mark.parametrize("element,factor", [(0, 4.0), (1, 2.0)])
def test_clocking_on_one_element_closed_form(element, factor):
    """[derived] Clocking e ~ U(-w, w) on one element only.

    Element 1 (the QWP at 0, lit at 45 deg): as for a single plate the output's latitude is
    2(45 - |e|), so the sphere angle from the circular goal is 2|e| [AB].  Element 0 (the HWP
    at 45 + e, lit at 45): its output is linear at 2(45 + e) - 45 = 45 + 2e [AB], which the
    QWP at 0 takes to latitude 2(45 - 2|e|): sphere angle 4|e|.  So the yield of max = L is
    min(1, L / (k w)) with k = 4 (element 0) or 2 (element 1); checked per sample (the drawn
    angle of that element's stream) to 1e-6 deg and the yield within 4 binomial sigmas.
    """
    w, L, n = 1.0, 1.0, 8192
    own = "tolerances = { clocking_deg = { uniform = 1.0 } }"
    st = study(limit=L, **{f"tol{element}": own})
    eng = Engine(st, samples=n, seed=3)
    case = eng.case(0)
    assert case.active == (f"clocking_deg[element {element}]",)
    worst, _ = eng.pass_values(case)
    z, u = eng.draws("clocking_deg", element, 0, n)
    e = case.tolerances[f"clocking_deg[element {element}]"].draw(z, u, center=0.0)
    np.testing.assert_allclose(worst, factor * np.abs(e), atol=1e-6)
    p = min(1.0, L / (factor * w))
    assert abs(eng.pass_rate(case) - p) < 4 * np.sqrt(p * (1 - p) / n)


def test_both_clockings_against_sympy():
    """[sympy] Both mounts clock at once: each sample's sphere angle is that of the forward
    Jones product QWP(e1) . HWP(45 + e0) on linear 45 deg, with the drawn e0 and e1."""
    n = 512
    st = study(
        tol0="tolerances = { clocking_deg = { sigma = 1.0 } }",
        tol1="tolerances = { clocking_deg = { sigma = 2.0 } }",
        limit=3.0,
    )
    eng = Engine(st, samples=n, seed=8)
    case = eng.case(0)
    worst, _ = eng.pass_values(case)
    e = []
    for k in (0, 1):
        z, u = eng.draws("clocking_deg", k, 0, n)
        e.append(case.tolerances[f"clocking_deg[element {k}]"].draw(z, u, center=0.0))
    E = np.asarray(SYM_JONES(np.pi / 4, 0.0), dtype=complex).ravel()
    ref = np.empty(n)
    for i in range(n):
        J = np.asarray(SYM_QWP(np.radians(e[1][i])), dtype=complex) @ np.asarray(
            SYM_HWP(np.radians(45.0 + e[0][i])), dtype=complex
        )
        out = J @ E
        s = np.asarray(SYM_STOKES(out[0].real, out[0].imag, out[1].real, out[1].imag), float)
        s = s.ravel() / s.ravel()[0]
        s[3] = -s[3]
        ref[i] = np.degrees(np.arccos(np.clip(s[1:] @ case.goal, -1, 1)))
    np.testing.assert_allclose(worst, ref, atol=1e-5)


def test_sensitivity_names_the_element():
    """[derived] The grid's sensitivity rows are per element; with element 0 at U(±0.5) and
    element 1 at U(±0.5) and max = 1 deg, element 0 alone gives min(1, 1/(4·0.5)) = 0.5 and
    element 1 alone gives 1 (2·0.5 = 1 never exceeds max), so element 0 dominates."""
    st = study(
        tol0="tolerances = { clocking_deg = { uniform = 0.5 } }",
        tol1="tolerances = { clocking_deg = { uniform = 0.5 } }",
    )
    g = run(st, samples=4096, seed=2)
    names = [str(t) for t in g["tolerance_name"].values]
    assert names == ["clocking[element 0]", "clocking[element 1]"]
    alone = g["sensitivity_alone"].sel(candidate="hwp+qwp")
    assert float(alone.sel(tolerance_name="clocking[element 0]")) == pytest.approx(
        0.5, abs=4 * np.sqrt(0.25 / 4096)
    )
    assert float(alone.sel(tolerance_name="clocking[element 1]")) == 1.0
    assert str(g["dominant"].sel(candidate="hwp+qwp").values) == "clocking[element 0]"
    # Sobol' indices per element too: element 0 carries (nearly) all the variance of the metric
    tot = g["sobol_total"].sel(candidate="hwp+qwp")
    t0 = float(tot.sel(tolerance_name="clocking[element 0]"))
    t1 = float(tot.sel(tolerance_name="clocking[element 1]"))
    assert np.isfinite(t0) and np.isfinite(t1) and t0 > t1


def test_drawing_rows_one_per_element():
    """[GUM] One drawing row per element with its own ± (3 sigma of a normal form) and the
    train-wide ones repeated; the retardance ± of element 1 from its thickness alone is
    0.25 · Δt / d (retardance proportional to thickness, derived)."""
    st = study(
        tol1="tolerances = { thickness_um = { sigma = 0.1 }, clocking_deg = { sigma = 0.2 } }",
        tol="clocking_deg = { sigma = 0.5 }\ntilt_deg = { sigma = 1 }",
    )
    c = st.candidates[0]
    rows = A.drawing_rows(st, c, st.tolerances_for(c), 0.9)
    assert [r["element"] for r in rows] == [0, 1]
    assert [r["fast_axis_deg"] for r in rows] == [45.0, 0.0]
    assert [r["construction"] for r in rows] == ["zero-order", "zero-order"]
    assert rows[0]["material"] == "quartz"
    assert rows[0]["clocking_tol_deg"] == pytest.approx(1.5)
    assert rows[1]["clocking_tol_deg"] == pytest.approx(0.6)
    assert rows[0]["layer1_thickness_tol_um"] == 0.0
    assert rows[1]["layer1_thickness_tol_um"] == pytest.approx(0.3)
    d = c.elements[1].plate.layers[0].thickness_um
    assert rows[1]["retardance_tol_waves"] == pytest.approx(0.25 * 0.3 / d, rel=1e-6)
    assert rows[0]["retardance_waves"] == pytest.approx(0.5, abs=1e-9)
    assert all(r["tilt_tol_deg"] == pytest.approx(3.0) for r in rows)


def test_allocation_per_element_closed_form():
    """[derived] Only element 1 (the QWP) clocks, U(±w): yield min(1, L/(2w)), so the loosest
    half width for yield Y is L / (2 Y).  ``retol allocate`` varies it under its element name
    and the answer's Monte Carlo width interval holds the closed form."""
    st = study(tol1="tolerances = { clocking_deg = { uniform = 0.3 } }", limit=1.0)
    res = A.allocate(st, 0.8, samples=4096, seed=5)
    ca = res.candidates[0]
    a = ca.alone["clocking_deg[element 1]"]
    exact = 1.0 / (2 * 0.8)
    assert a.width_low <= exact <= a.width_high
    assert a.width == pytest.approx(exact, rel=0.05)
    rows = A.drawing_rows_for_allocation(res, st)
    assert [r["element"] for r in rows] == [0, 1]
    assert rows[1]["clocking_tol_deg"] == pytest.approx(
        ca.balanced.widths["clocking_deg[element 1]"]
    )
    # --vary takes an element's name too
    assert A.check_vary(st, ["clocking_deg[element 1]"]) == ("clocking_deg[element 1]",)


@pytest.mark.parametrize(
    "tol0,field",
    [
        ("tolerances = { tilt_deg = { sigma = 1 } }", "elements[0].tolerances.tilt_deg"),
        ("tolerances = { clocking = { sigma = 1 } }", "elements[0].tolerances.clocking"),
        ("tolerances = 3", "elements[0].tolerances"),
        ("tolerances = { clocking_deg = { sigma = -1 } }", "clocking_deg"),
        ("tolerances = { clocking_deg = { sigma = 60 } }", "clocking_deg"),
    ],
)
def test_bad_element_tolerances_one_line(tol0, field):
    with pytest.raises(RetolError) as ei:
        study(tol0=tol0)
    msg = str(ei.value)
    assert "\n" not in msg and field in msg


def test_cli_run_json_and_drawing_per_element(tmp_path):
    """``retol run``: summary.csv and the JSON name the element of each sensitivity; drawing.csv
    has a row per element."""
    p = tmp_path / "t.toml"
    p.write_text(
        spec(
            tol0="tolerances = { clocking_deg = { uniform = 0.5 } }",
            tol1="tolerances = { clocking_deg = { uniform = 0.2 } }",
        )
    )
    out = tmp_path / "out"
    r = CliRunner().invoke(cli, ["run", str(p), "--out", str(out), "--samples", "1024", "--json"])
    assert r.exit_code == 0, r.output
    head = (out / "summary.csv").read_text().splitlines()[0]
    assert "yield_alone_clocking[element 1]" in head
    lines = (out / "drawing.csv").read_text().splitlines()
    cols = lines[0].split(",")
    assert cols[:2] == ["candidate", "element"] and len(lines) == 3
    assert '"clocking[element 0]"' in r.output and '"clocking[element 1]"' in r.output


def test_sobol_sampling_draws_every_mount():
    """Sobol' sampling gives each element's mount its own dimension: the two clockings are
    uncorrelated (a train used to have no dimension for element 1's clocking)."""
    text = spec(tol="clocking_deg = { sigma = 1.0 }") + '[run]\nsampling = "sobol"\n'
    st = loads(text, "t.toml")
    eng = Engine(st, samples=2048, seed=4)
    case = eng.case(0)
    inp, _ = sample_inputs(case, st, eng.draws, 0, eng.samples)
    ang = 0.5 * np.degrees(np.arctan2(inp.s2, inp.c2))
    e0, e1 = ang[:, 0] - 45.0, ang[:, 1]
    assert abs(np.corrcoef(e0, e1)[0, 1]) < 0.05
    assert np.std(e1) == pytest.approx(1.0, rel=0.05)


def test_readme_train_snippet_loads():
    """README's train example (its ```toml block) is a valid candidate with element tables."""
    import re
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    sec = readme.split("## Trains of plates", 1)[1].split("\n## ", 1)[0]
    block = re.search(r"```toml\n(.*?)```", sec, re.S).group(1)
    head = spec().split("[[candidate]]")[0]
    st = loads(head + block, "readme.toml")
    tol = st.tolerances_for(st.candidates[0])
    assert tol["clocking_deg[element 0]"].sigma == 0.1
    assert tol["clocking_deg[element 1]"].half_width == 0.5
    assert tol["thickness_um[element 1]"].sigma == 0.05


def test_cost_table_prices_one_element():
    """[derived] Only element 1 clocks, U(±w): yield min(1, L/(2w)) with L = 1 deg, so of the
    offered half widths 1.0, 0.7, 0.5, 0.3 (yields 0.5, 0.71, 1, 1) the cheapest reaching 0.8
    is 0.5.  The cost key names that element (a quoted TOML key)."""
    text = spec(tol1="tolerances = { clocking_deg = { uniform = 0.3 } }") + (
        '[allocation.cost]\n"clocking_deg[element 1]" = '
        "{ widths = [1.0, 0.7, 0.5, 0.3], cost = [0, 1, 2, 3] }\n"
    )
    st = loads(text, "t.toml")
    res = A.allocate(st, 0.8, samples=2048, seed=5)
    best = res.candidates[0].cheapest.best
    assert best.widths == {"clocking_deg[element 1]": 0.5} and best.cost == 2
    with pytest.raises(RetolError) as ei:
        loads(text.replace("element 1]", "element 5]"), "t.toml")
    assert "\n" not in str(ei.value) and "element 5" in str(ei.value)


def test_element_retardance_tolerance_scales_that_element_only():
    """[derived] retardance_waves on element 1 only, read at its own ``at``: retardance is
    proportional to thickness at a fixed wavelength, so element 1's layer is scaled by
    1 + e / R1 (R1 its nominal retardance at ``at``) and element 0's stays nominal."""
    from tolerance.montecarlo import nominal_retardance_waves

    n = 2048
    st = study(tol1='tolerances = { retardance_waves = { sigma = 0.002, at = "640nm" } }')
    assert Study.from_dict(json.loads(st.to_json())) == st
    eng = Engine(st, samples=n, seed=6)
    case = eng.case(0)
    inp, _ = sample_inputs(case, st, eng.draws, 0, n)
    el0, el1 = (el.plate for el in st.candidates[0].elements)
    assert np.all(inp.thick[:, 0] == el0.layers[0].thickness_um)
    z, u = eng.draws("retardance_waves", 1, 0, n)
    e = case.tolerances["retardance_waves[element 1]"].draw(z, u, center=0.0)
    r1 = nominal_retardance_waves(el1, 640.0)
    np.testing.assert_allclose(
        inp.thick[:, 1], el1.layers[0].thickness_um * (1 + e / r1), rtol=1e-12
    )


def test_cli_spec_error_is_one_line(tmp_path):
    """A train-wide tolerance in an element's table: exit 2, one line naming the field."""
    p = tmp_path / "bad.toml"
    p.write_text(spec(tol0="tolerances = { temperature_c = { sigma = 1 } }"))
    r = CliRunner().invoke(cli, ["run", str(p), "--out", str(tmp_path / "o")])
    assert r.exit_code == 2
    lines = [x for x in r.output.splitlines() if x.strip()]
    assert len(lines) == 1 and "elements[0].tolerances.temperature_c" in lines[0]
    assert not (tmp_path / "o").exists()


def test_rare_reject_rate_of_two_independent_mounts():
    """[derived] Both mounts clock, e0 ~ N(0, 0.05²) and e1 ~ N(0, 0.12²), independently.  The
    HWP at 45 + e0 turns linear 45 deg to 45 + 2 e0 [AB]; the QWP at e1 sees it at
    45 + 2 e0 − e1 from its axis, so the sphere angle from the circular goal is 2|2 e0 − e1|.
    2 e0 − e1 is normal with sigma s = (4·0.05² + 0.12²)^½ only if the mounts are independent,
    so the reject rate of max = L is 2 Φ(−L / (2 s)) = 1.37e-3 for L = 1 deg; the rare-reject
    estimator (importance sampling, the yield being >= 0.999) must hold it in its interval."""
    from scipy.stats import norm

    st = study(
        tol0="tolerances = { clocking_deg = { sigma = 0.05 } }",
        tol1="tolerances = { clocking_deg = { sigma = 0.12 } }",
    )
    g = run(st, samples=4096, seed=3)
    s = np.hypot(2 * 0.05, 0.12)
    exact = 2 * norm.cdf(-1.0 / (2 * s))
    assert str(g["reject_method"].values[0]) == "importance sampling"
    assert float(g["reject_rate_low"][0]) <= exact <= float(g["reject_rate_high"][0])
    assert float(g["reject_rate"][0]) == pytest.approx(exact, rel=0.05)


# ----------------------------------------------------------------------------- polarizer elements

POL_TRAIN = """title = "polarizer train"
[wavelength]
start = "633nm"
stop = "633nm"
step = "1nm"
[source]
shape = "laser"
center = "633nm"
[input]
{inp}
[goal]
state = "circular"
metric = "sphere_angle_deg"
max = 1
[[candidate]]
name = "pol+plate"
[[candidate.elements]]
polarizer = {theta}
extinction_db = {er}
{ptol}
[[candidate.elements]]
construction = "zero-order"
material = "quartz"
waves = {waves}
design = "633nm"
axis_deg = 0
"""


def pol_study(theta=30.0, er=40.0, inp="azimuth_deg = 0", ptol="", waves=0.5):
    text = POL_TRAIN.format(theta=theta, er=er, inp=inp, ptol=ptol, waves=waves)
    return loads(text, "p.toml")


_t = sp.symbols("t", positive=True)
# a linear polarizer of minor amplitude transmittance t at theta: R(-theta) diag(1, t) R(theta)
_R = sp.Matrix([[sp.cos(_th), sp.sin(_th)], [-sp.sin(_th), sp.cos(_th)]])
SYM_POL = sp.lambdify((_th, _t), _R.T * sp.diag(1, _t) * _R, "numpy")


def test_sympy_polarizer_matches_sympy_ideal():
    """[sympy] Our finite-extinction form at t = 0 is sympy's ``linear_polarizer``."""
    for th in np.radians([0.0, 17.0, 45.0, 100.0]):
        ideal = np.asarray(sp.lambdify(_th, spol.linear_polarizer(_th), "numpy")(th), dtype=complex)
        np.testing.assert_allclose(np.asarray(SYM_POL(th, 0.0), dtype=complex), ideal, atol=1e-15)


def _sym_stokes(out):
    s = np.asarray(SYM_STOKES(out[0].real, out[0].imag, out[1].real, out[1].imag), float).ravel()
    s = s / s[0]
    s[3] = -s[3]
    return s[1:]


@pytest.mark.parametrize("theta", [0.0, 20.0, 45.0, 70.0, 89.0])
def test_polarizer_element_malus_and_sympy(theta):
    """Malus's law with a finite extinction ratio (E. Hecht, Optics, 5th ed., sec. 8.2;
    the leak of an imperfect polarizer, common practice): linear light at 0 deg through a
    polarizer at theta of 40 dB passes cos² theta + 10^-4 sin² theta of its power; the state
    after it and a half-wave plate at 0 is the [sympy] Jones product HWP(0)·P(theta, t)·E."""
    from tolerance.montecarlo import transmission

    st = pol_study(theta=theta)
    c = st.candidates[0]
    th = np.radians(theta)
    t2 = 10 ** (-40 / 10)
    assert transmission(st.input, c.plate) == pytest.approx(
        np.cos(th) ** 2 + t2 * np.sin(th) ** 2, rel=1e-12
    )
    eng = Engine(st, samples=512, seed=1)
    nom = eng.nominal(eng.case(0))
    E = np.asarray(SYM_JONES(0.0, 0.0), dtype=complex).ravel()
    out = np.asarray(SYM_HWP(0.0), dtype=complex) @ (
        np.asarray(SYM_POL(th, np.sqrt(t2)), dtype=complex) @ E
    )
    np.testing.assert_allclose(nom.design_stokes, _sym_stokes(out), atol=1e-9)


def test_polarizer_clocking_closed_form_and_sympy():
    """[derived] Linear light at 45 deg, a 40 dB polarizer clocked to 45 + e, a QWP at 0: the
    light after the polarizer is cos e along its axis and −t sin e across it, i.e. linear at
    45 + e − atan(t tan e), which the QWP takes to a sphere angle 2|e − atan(t tan e)| from
    circular [AB].  Checked per sample against that closed form and the [sympy] product."""
    n = 1024
    st = pol_study(
        theta=45.0,
        inp="azimuth_deg = 45",
        ptol="tolerances = { clocking_deg = { uniform = 2.0 } }",
        waves=0.25,
    )
    st = _with_hand(st, _hand_of(st))
    eng = Engine(st, samples=n, seed=9)
    case = eng.case(0)
    assert case.active == ("clocking_deg[element 0]",)
    worst, _ = eng.pass_values(case)
    z, u = eng.draws("clocking_deg", 0, 0, n)
    e = np.radians(case.tolerances["clocking_deg[element 0]"].draw(z, u, center=0.0))
    t = 10 ** (-40 / 20)
    np.testing.assert_allclose(
        worst, 2 * np.degrees(np.abs(e - np.arctan(t * np.tan(e)))), atol=1e-6
    )
    E = np.asarray(SYM_JONES(np.pi / 4, 0.0), dtype=complex).ravel()
    for i in range(0, n, 64):
        out = np.asarray(SYM_QWP(0.0), dtype=complex) @ (
            np.asarray(SYM_POL(np.pi / 4 + e[i], t), dtype=complex) @ E
        )
        ref = np.degrees(np.arccos(np.clip(_sym_stokes(out) @ case.goal, -1, 1)))
        assert worst[i] == pytest.approx(ref, abs=1e-6)


def _hand_of(st):
    eng = Engine(st, samples=512, seed=1)
    s3 = eng.nominal(eng.case(0)).design_stokes[2]
    return "right" if s3 > 0 else "left"


def _with_hand(st, hand):
    import dataclasses

    return dataclasses.replace(st, goal=dataclasses.replace(st.goal, handedness=hand))


def test_unpolarized_light_through_a_polarizer():
    """Goldstein, Polarized Light (2011), ch. 5: a diattenuator of intensity transmittances
    1 and t² passes (1 + t²)/2 of unpolarized light with degree of polarization
    (1 − t²)/(1 + t²).  Unpolarized input (dop = 0), 20 dB polarizer at 30 deg, half-wave
    plate at 0: the output's length is that degree, its direction linear at −30 deg."""
    from tolerance.montecarlo import transmission

    st = pol_study(theta=30.0, er=20.0, inp="azimuth_deg = 0\ndop = 0")
    t2 = 0.01
    assert transmission(st.input, st.candidates[0].plate) == pytest.approx((1 + t2) / 2)
    eng = Engine(st, samples=512, seed=1)
    nom = eng.nominal(eng.case(0))
    p = (1 - t2) / (1 + t2)
    expect = p * np.array([np.cos(np.radians(-60)), np.sin(np.radians(-60)), 0.0])
    np.testing.assert_allclose(nom.spec_stokes, expect, atol=1e-12)


def test_polarizer_drawing_row_json_and_errors():
    """The polarizer's drawing row; the study's JSON loads back equal; one-line errors."""
    st = pol_study(ptol="tolerances = { clocking_deg = { sigma = 0.5 } }")
    assert Study.from_dict(json.loads(st.to_json())) == st
    c = st.candidates[0]
    rows = A.drawing_rows(st, c, st.tolerances_for(c), 0.9)
    assert rows[0]["construction"] == "polarizer" and rows[0]["extinction_db"] == 40.0
    assert rows[0]["transmission_axis_deg"] == 30.0
    assert rows[0]["clocking_tol_deg"] == pytest.approx(1.5)
    assert "thickness_um[element 0]" not in st.tolerances_for(c)
    bad = [
        (dict(ptol="tolerances = { thickness_um = { sigma = 0.1 } }"), "tolerances.thickness_um"),
        (dict(er=0), "extinction_db"),
        (dict(er=200), "extinction_db"),
    ]
    for kw, field in bad:
        with pytest.raises(RetolError) as ei:
            pol_study(**kw)
        assert "\n" not in str(ei.value) and field in str(ei.value)
    only = POL_TRAIN.split("[[candidate.elements]]\nconstruction")[0].format(
        theta=0, er=30, inp="azimuth_deg = 0", ptol="", waves=0.5
    )
    with pytest.raises(RetolError) as ei:
        loads(only, "p.toml")
    assert "holds no plate" in str(ei.value)


def test_readme_polarizer_snippet_loads():
    """README's polarizer element (its second ```toml block in the trains section) loads."""
    import re
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    sec = readme.split("## Trains of plates", 1)[1].split("\n## ", 1)[0]
    blocks = re.findall(r"```toml\n(.*?)```", sec, re.S)
    text = spec().replace("{cand_tol}", "")
    head, tail = text.split("[[candidate.elements]]", 1)
    st = loads(head + blocks[1] + "[[candidate.elements]]" + tail, "readme.toml")
    c = st.candidates[0]
    assert c.elements[0].is_polarizer and c.elements[0].extinction_db == 40
    assert st.tolerances_for(c)["clocking_deg[element 0]"].sigma == 0.2
