"""Tolerance allocation, the retardance tolerance and the drawing table, against closed forms.

Closed forms (derived here; a zero-order quarter-wave plate at its design wavelength, fast axis
at 45°, linear input along x, circular goal judged by the axial ratio b/a = tan χ, χ the
ellipticity angle):

1. Clocking only, uniform on ±u.  A perfect quarter-wave plate turns linear light at angle θ to
   its fast axis into an ellipse with χ = θ measured from the nearer axis: with the axis at
   45° + c the input is at 45° + c, so b/a = tan(45° − |c|) [Hecht, Optics, 5th ed., sec. 8.7.2;
   Born & Wolf, Principles of Optics, sec. 1.4.2].  b/a >= tan(45° − e₀) iff |c| <= e₀, so
   yield = P(|c| <= e₀) = e₀/u for u >= e₀, and the loosest u for yield Y is e₀/Y.
2. Thickness only, normal σ.  With retardance Γ = π/2 + δ and the input at 45° to the axis,
   sin 2χ = sin Γ (Born & Wolf sec. 1.4.2, eq. 33-34 with the input's azimuth 45°), so
   χ = π/4 − |δ|/2 and b/a = tan(π/4 − |δ|/2).  b/a >= A iff |δ| <= π/2 − 2 atan A.  A
   thickness error Δt of a zero-order plate of thickness d (retardance π/2) gives
   δ = (π/2) Δt/d, so the pass condition is |Δt| <= d (1 − 4 atan(A)/π) and
   yield = 2 Φ(d (1 − 4 atan(A)/π)/σ) − 1.
3. The same in retardance: a retardance error e [waves] with σ_R = σ/(4d) (the equivalent of a
   thickness σ) gives the same yield, 2 Φ((1 − 4 atan(A)/π)/(4 σ_R)) − 1.

Monte Carlo checks use a 4-sigma binomial band, sqrt(Y(1 − Y)/n).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.stats import norm

from tolerance import allocation as A
from tolerance.cli.main import cli
from tolerance.montecarlo import Engine
from tolerance.spec import loads

N = 20000

BASE = """
title = "zero-order quarter-wave plate at 632.8 nm"
[wavelength]
start = "632.8nm"
stop = "632.8nm"
step = "1nm"
[source]
shape = "laser"
center = "632.8nm"
[input]
azimuth_deg = 0
[goal]
state = "circular"
metric = "axial_ratio"
min = {amin}
[[candidate]]
name = "zo"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "632.8nm"
axis_deg = 45
[tolerances]
{tol}
[run]
samples = {n}
seed = 3
"""


def study(tol, amin=0.9, extra="", n=N):
    return loads(BASE.format(tol=tol, amin=amin, n=n) + extra, "t.toml")


def band(y, n=N):
    return 4.0 * math.sqrt(max(y * (1 - y), 1e-4) / n)


def test_clocking_alone_closed_form():
    """Closed form 1: yield e0/u, the loosest u for yield Y is e0/Y."""
    e0 = 3.0
    amin = math.tan(math.radians(45.0 - e0))
    s = study("clocking_deg = { uniform = 5.0 }", amin=amin)
    eng = Engine(s)
    y5 = eng.pass_rate(eng.case(0))
    assert abs(y5 - e0 / 5.0) < band(0.6)
    res = A.allocate(s, target_yield=0.9)
    a = res.candidates[0].alone["clocking_deg"]
    expected = e0 / 0.9
    assert a.form == "uniform"
    assert a.yield_ >= 0.9
    # the answer within the bisection resolution plus its Monte Carlo width range
    assert a.width_low * (1 - 2 * A.RTOL) <= expected <= a.width_high * (1 + 2 * A.RTOL)
    assert abs(a.width / expected - 1) < 0.02
    # a single varied tolerance: balanced is the same answer
    b = res.candidates[0].balanced
    assert abs(b.widths["clocking_deg"] / expected - 1) < 0.02


def _thickness_yield(d, amin, sigma):
    return 2 * norm.cdf(d * (1 - 4 * math.atan(amin) / math.pi) / sigma) - 1


def test_thickness_closed_form_and_equivalent_retardance():
    """Closed forms 2 and 3: thickness σ and the equivalent retardance σ give the same yield."""
    amin = 0.95
    s = study("thickness_um = { sigma = 0.3 }", amin=amin)
    d = s.candidates[0].plate.layers[0].thickness_um
    eng = Engine(s)
    y_t = eng.pass_rate(eng.case(0))
    expect = _thickness_yield(d, amin, 0.3)
    assert abs(y_t - expect) < band(expect)
    sig_r = 0.3 / (4 * d)
    s2 = study(f'retardance_waves = {{ sigma = {sig_r!r}, at = "632.8nm" }}', amin=amin)
    eng2 = Engine(s2)
    y_r = eng2.pass_rate(eng2.case(0))
    assert abs(y_r - expect) < band(expect)
    assert abs(y_r - y_t) < 2 * band(expect)
    # allocation: sigma for yield Y solves 2 Phi(m/sigma) - 1 = Y
    res = A.allocate(s, target_yield=0.8)
    a = res.candidates[0].alone["thickness_um"]
    m = d * (1 - 4 * math.atan(amin) / math.pi)
    expected = m / norm.ppf(0.9)
    assert abs(a.width / expected - 1) < 0.03


def test_retardance_at_default_and_roundtrip():
    s = study("retardance_waves = { tolerance = 0.003 }")
    assert s.retardance_at(s.candidates[0]) == pytest.approx(632.8)
    s2 = study('retardance_waves = { tolerance = 0.003, at = "0.6328um" }')
    assert s2.retardance_at_nm == pytest.approx(632.8)
    back = type(s2).from_dict(s2.to_dict())
    assert back.retardance_at_nm == pytest.approx(632.8)


def test_yield_monotone_in_width_under_common_draws():
    """Yield cannot rise when one width grows (same draws), checked on a grid of scales."""
    s = study("clocking_deg = { uniform = 2.0 }\nthickness_um = { sigma = 0.2 }", n=4096)
    eng = Engine(s)
    for key in ("clocking_deg", "thickness_um"):
        ys = [eng.pass_rate(eng.case(0, scale={key: f})) for f in np.linspace(0, 3, 13)]
        assert all(b <= a for a, b in zip(ys, ys[1:], strict=False)), (key, ys)


MONOTONE = [
    # (tolerance, goal axial ratio): each moves the retardance error |δ| of the zero-order plate
    # (axis 45°, one wavelength) monotonically in its width, and b/a = tan(π/4 − |δ|/2) falls
    # monotonically in |δ| (closed form 2 above), so every sample that fails at a width fails at
    # any larger one and the yield cannot rise.
    # * tilt: at small incidence i the retardance changes by a term in sin² i times a factor of
    #   the incidence plane's azimuth only [A. Yariv and P. Yeh, Optical Waves in Crystals,
    #   Wiley (1984), sec. 5.4, from memory]; with the azimuth draw fixed, |i| = f |z| σ grows
    #   with f.
    ("tilt_deg = { sigma = 10.0 }", 0.999),
    # * temperature: δ = δ₀ (1 + κ (T − T_ref)) (linear thermo-optic retardance, common
    #   practice); a range centred on T_ref scaled by f about its centre puts each sample at
    #   T_ref + f (u − ½)(high − low), so |T − T_ref| grows with f.  Quartz: T_ref 20 °C.
    ("temperature_c = { low = 0, high = 40 }", 0.998),
    # * retardance_waves: the drawn error is f w z (w the width, z the fixed standard draw), a
    #   common thickness scale 1 + f w z / R (R = 0.25 wave), so |δ| = (π/2) f |w z| / R.
    ('retardance_waves = { tolerance = 0.01, at = "632.8nm" }', 0.95),
]


@pytest.mark.parametrize("tol, amin", MONOTONE)
def test_yield_monotone_in_tilt_temperature_retardance(tol, amin):
    """Yield cannot rise when the width grows (same draws), and it does fall: not trivially 1."""
    s = study(tol, amin=amin, n=4096)
    key = next(iter(s.tolerances))
    eng = Engine(s)
    ys = [eng.pass_rate(eng.case(0, scale={key: f})) for f in np.linspace(0, 3, 13)]
    assert all(b <= a for a, b in zip(ys, ys[1:], strict=False)), (key, ys)
    assert ys[0] == 1.0 and ys[-1] < 0.9, ys


def test_temperature_range_off_design_is_not_monotone():
    """Where monotonicity fails: a range centred 30 °C off the design temperature.

    At zero width every sample sits at 50 °C, |δ| = (π/2) |κ| 30 °C ≈ 5.8e-3 rad, b/a ≈ 0.9942
    (closed forms 2 and the linear temperature law above) < 0.996: yield 0.  Widening the range
    about 50 °C brings some samples nearer 20 °C, where they pass: the yield rises with the
    width.  The search answers on its monotone envelope: zero width already fails, so no width
    is allocated ("alone" null with the reason), never a far crossing on the rising branch.
    """
    s = study("temperature_c = { low = 40, high = 60 }", amin=0.996, n=4096)
    eng = Engine(s)
    ys = [eng.pass_rate(eng.case(0, scale={"temperature_c": f})) for f in (0.0, 1.0, 2.0, 3.0)]
    assert ys[0] == 0.0 and ys[3] > ys[2] > ys[1] >= ys[0], ys
    yc = A._Yields(eng, s.candidates[0], s.tolerances)
    a = A.allocate_alone(yc, "temperature_c", 0.5)
    assert a.width is None and "zero width" in a.reason and "centre" in a.reason


def test_early_decision_is_exact():
    """A point decided early compares with the target as the full yield does, and finishing it
    gives the full yield (the same per-sample values as Engine.pass_rate, chunking aside).

    The rule: after s of n samples with F failures, the full yield is at most (n − F)/n; once
    that is below Y the comparison is settled whatever the other n − s samples do."""
    s = study("clocking_deg = { uniform = 2.0 }\nthickness_um = { sigma = 0.3 }", n=6000)
    eng = Engine(s)
    case = eng.case(0)
    assert np.mean(eng.pass_flags(case, 0, eng.samples)) == eng.pass_rate(case)
    tol = s.tolerances
    early = 0
    for f in (0.25, 0.8, 1.5, 3.0, 6.0):
        yc = A._Yields(eng, s.candidates[0], tol)
        full = eng.pass_rate(eng.case(0, scale={"clocking_deg": f, "thickness_um": f}))
        for target in (0.9, 0.5, 0.95):  # a point decided against 0.9 is not reused for 0.5
            p = yc.at({"clocking_deg": f, "thickness_um": f}, decide=target)
            assert (p.yield_ >= target) == (full >= target), (f, target, p, full)
            early += not p.exact
        done = yc.at({"clocking_deg": f, "thickness_um": f})
        assert done.exact and done.yield_ == full
    assert early >= 2  # the check is not vacuous: some points were decided early


COST = """
[allocation]
target_yield = 0.9
[allocation.cost]
clocking_deg = { widths = [4.0, 2.0, 1.0, 0.5], cost = [0, 1, 3, 10] }
thickness_um = { widths = [0.6, 0.3, 0.15, 0.05], cost = [0, 2, 4, 8] }
"""


def test_cheapest_matches_exhaustive():
    """Branch and bound gives the least cost found by evaluating every combination."""
    tol = "clocking_deg = { uniform = 2.0 }\nthickness_um = { sigma = 0.3 }"
    s = study(tol, n=4096, extra=COST)
    res = A.allocate(s)
    ch = res.candidates[0].cheapest
    eng = Engine(s)
    best = None
    for wc, cc in zip([4.0, 2.0, 1.0, 0.5], [0, 1, 3, 10], strict=True):
        for wt, ct in zip([0.6, 0.3, 0.15, 0.05], [0, 2, 4, 8], strict=True):
            y = eng.pass_rate(
                eng.case(0, scale={"clocking_deg": wc / 2.0, "thickness_um": wt / 0.3})
            )
            if y >= 0.9 and (best is None or cc + ct < best):
                best = cc + ct
    assert ch.best.cost == best
    assert ch.best.yield_ >= 0.9
    assert ch.evaluations < 16


@pytest.mark.parametrize(
    "extra, args, words",
    [
        ("", ["--target-yield", "1.2"], "--target-yield"),
        ("", ["--target-yield", "0"], "--target-yield"),
        ("", ["--vary", "tilt_deg"], "tilt_deg"),
        ("[allocation.cost]\nclocking_deg = { widths = [1, 0.5], cost = [0] }", [], "cost"),
        (
            "[allocation.cost]\nclocking_deg = { widths = [0.5, 1, 0.2], cost = [0, 1, 2] }",
            [],
            "sorted",
        ),
        ("[allocation.cost]\nclocking_deg = { widths = [1, 0.5], cost = [0, -1] }", [], "negative"),
        ("[allocation]\ntarget_yield = 1.5", [], "target_yield"),
    ],
)
def test_bad_input_one_line_exit_2_nothing_written(tmp_path, extra, args, words):
    p = tmp_path / "s.toml"
    p.write_text(BASE.format(tol="clocking_deg = { uniform = 2.0 }", amin=0.9, n=1024) + extra)
    out = tmp_path / "out"
    r = CliRunner().invoke(cli, ["allocate", str(p), "--out", str(out), *args])
    assert r.exit_code == 2
    lines = r.output.strip().splitlines()
    assert len(lines) == 1 and words in lines[0], r.output
    assert not out.exists()


def test_unreachable_target_names_blocker(tmp_path):
    p = tmp_path / "s.toml"
    tol = "clocking_deg = { uniform = 10.0 }\nthickness_um = { sigma = 0.1 }"
    p.write_text(BASE.format(tol=tol, amin=0.9, n=1024))
    r = CliRunner().invoke(
        cli, ["allocate", str(p), "--vary", "thickness_um", "--out", str(tmp_path / "o")]
    )
    assert r.exit_code == 2
    assert "unreachable" in r.output and "clocking_deg" in r.output
    assert len(r.output.strip().splitlines()) == 1
    assert not (tmp_path / "o").exists()


def test_json_keys_and_outputs(tmp_path):
    p = tmp_path / "s.toml"
    tol = "clocking_deg = { uniform = 2.0 }\nthickness_um = { sigma = 0.3 }"
    p.write_text(BASE.format(tol=tol, amin=0.9, n=2048) + COST)
    out = tmp_path / "out"
    r = CliRunner().invoke(cli, ["allocate", str(p), "--json", "--out", str(out)])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.output)
    assert doc["target_yield"] == 0.9
    c = doc["candidates"][0]
    assert {"name", "alone", "balanced", "cheapest"} <= set(c)
    for a in c["alone"].values():
        assert a is None or {"width", "form", "yield", "yield_low", "yield_high"} <= set(a)
    assert {"scale", "widths", "yield", "yield_low", "yield_high"} <= set(c["balanced"])
    assert {"widths", "cost", "yield", "yield_low", "yield_high"} <= set(c["cheapest"])
    for name in ("allocation.json", "drawing.csv", "yield_vs_width.png", "allocation.html"):
        assert (out / name).exists()
    page = (out / "allocation.html").read_text(encoding="utf-8")
    # one self-contained page: the drawing table, the figure embedded, every varied key
    assert "Drawing and purchase order" in page and "retardance_tol_waves" in page
    assert 'src="data:image/png;base64,' in page and "Yield versus width" in page
    assert "clocking_deg" in page and "thickness_um" in page and "Cheapest" in page
    assert "<script" not in page and "http" not in page
    head = (out / "drawing.csv").read_text().splitlines()[0].split(",")
    assert "layer1_thickness_tol_um" in head and "retardance_tol_waves" in head
    again = CliRunner().invoke(cli, ["allocate", str(p), "--out", str(out)])
    assert again.exit_code == 2 and "--force" in again.output


def test_allocation_shares_a_folder_with_a_run_and_replaces_only_its_own_files(tmp_path):
    """Published all or nothing through tolerance.publish: a manifest lists what was written, a
    run's grid in the same folder stays, --force replaces just the allocation's files, and a
    user's own file of another name is never touched (DEVELOPERS.md: nothing written is lost)."""
    p = tmp_path / "s.toml"
    p.write_text(BASE.format(tol="clocking_deg = { uniform = 2.0 }", amin=0.9, n=1024))
    out = tmp_path / "out"
    r = CliRunner().invoke(cli, ["run", str(p), "--out", str(out), "--no-report"])
    assert r.exit_code == 0, r.output
    grid = (out / "grid.nc").read_bytes()
    (out / "notes.txt").write_text("mine")
    r = CliRunner().invoke(cli, ["allocate", str(p), "--out", str(out)])
    # the run's drawing.csv would be replaced by the allocation's: only with --force
    assert r.exit_code == 2 and "drawing.csv" in r.output and "--force" in r.output
    r = CliRunner().invoke(cli, ["allocate", str(p), "--out", str(out), "--force"])
    assert r.exit_code == 0, r.output
    manifest = json.loads((out / ".retol-manifest.json").read_text())
    assert {"grid.nc", "allocation.json", "allocation.html"} <= set(manifest["files"])
    first = (out / "allocation.json").stat().st_ino
    r = CliRunner().invoke(cli, ["allocate", str(p), "--out", str(out), "--force"])
    assert r.exit_code == 0, r.output
    assert (out / "allocation.json").stat().st_ino != first  # a new file moved into place
    assert (out / "grid.nc").read_bytes() == grid and (out / "notes.txt").read_text() == "mine"
    assert not [q.name for q in tmp_path.iterdir() if ".part-" in q.name]


def test_drawing_row_values():
    """± at 3 σ for a tolerance form; the retardance ± from thickness: 0.25 Δt/d (closed form 2)."""
    s = study("thickness_um = { tolerance = 0.3 }\nclocking_deg = { uniform = 0.5 }")
    c = s.candidates[0]
    row = A.drawing_row(s, c, s.tolerances_for(c), 0.5)
    d = c.plate.layers[0].thickness_um
    assert row["layer1_thickness_tol_um"] == pytest.approx(0.3)
    assert row["retardance_waves"] == pytest.approx(0.25, abs=1e-9)
    assert row["retardance_tol_waves"] == pytest.approx(0.25 * 0.3 / d, rel=1e-6)
    assert row["clocking_tol_deg"] == 0.5


def test_margin_sensitivity_when_yield_is_one():
    """Every yield 1: the dominant tolerance comes from the margin, not "none"."""
    s = study(
        "clocking_deg = { uniform = 0.2 }\nthickness_um = { sigma = 0.001 }", amin=0.5, n=2048
    )
    eng = Engine(s)
    r = eng.evaluate(eng.case(0))
    assert r.yield_ == 1.0
    assert r.margin_dominant == "clocking_deg"
    assert r.dominant == "clocking_deg"
    assert r.margin_gain["clocking_deg"] > r.margin_gain["thickness_um"] > 0
