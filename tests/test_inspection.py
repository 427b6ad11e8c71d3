"""Tests of incoming inspection (tolerance.inspection, ``retol inspect``).

The synthetic spectra are made here with independent code: the quartz indices from the published
dispersion formula, re-implemented below, and Jones products written out in this file; retol's
dispersion and polarization modules are not used to make them.

Sources
-------
- [ghosh1999] G. Ghosh, "Dispersion-equation coefficients for the refractive index and
  birefringence of calcite and quartz crystals," Opt. Commun. 163, 95-102 (1999): quartz
  n² = 1 + A + B·λ²/(λ² − C) + D·λ²/(λ² − E), λ in µm, the coefficients of its table (as carried
  by materials/quartz.toml).
- [hecht] E. Hecht, *Optics*, 4th ed. (2002), sec. 8.7: a retarder of retardance δ with its axis
  at θ between crossed polarizers transmits T = sin²(2θ)·sin²(δ/2) (also derived in the Jones
  products below).
- [fisher] The Cramér-Rao bound: for Gaussian noise of known σ, the covariance of a least-squares
  estimate approaches (JᵀJ/σ²)⁻¹ with J the model's derivatives (e.g. Press et al., *Numerical
  Recipes*, 3rd ed., sec. 15.5); the derivatives are written out analytically in this file.
- [jcgm106] JCGM 106:2012, the role of measurement uncertainty in conformity assessment: simple
  acceptance and guarded acceptance/rejection with a guard band w = k·u.
"""

from __future__ import annotations

import json
import math
import re
import shlex
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from tolerance.cli.main import cli
from tolerance.errors import RetolError
from tolerance.inspection import decide, fit_plate, make_measurement, tolerance_limits
from tolerance.plates import design_plate

ROOT = Path(__file__).resolve().parent.parent
LOT = ROOT / "tolerance" / "examples" / "inspection"
SPEC = LOT / "lot_qwp_780.toml"

# [ghosh1999] quartz coefficients (ordinary, extraordinary): A, B, C, D, E
GHOSH_QUARTZ_O = (0.28604141, 1.07044083, 1.00585997e-2, 1.10202242, 100.0)
GHOSH_QUARTZ_E = (0.28851804, 1.09509924, 1.02101864e-2, 1.15662475, 100.0)


def ghosh_index(lam_nm, coeffs):
    """[ghosh1999] n(λ), λ given in nm and converted to µm."""
    a, b, c, d, e = coeffs
    l2 = (np.asarray(lam_nm, float) / 1e3) ** 2
    return np.sqrt(1 + a + b * l2 / (l2 - c) + d * l2 / (l2 - e))


def quartz_dn(lam_nm):
    return ghosh_index(lam_nm, GHOSH_QUARTZ_E) - ghosh_index(lam_nm, GHOSH_QUARTZ_O)


def quartz_delta(thickness_um, lam_nm):
    """Retardance 2π·d·Δn/λ of a quartz plate at normal incidence. [rad]"""
    return 2 * np.pi * thickness_um * 1e3 * quartz_dn(lam_nm) / np.asarray(lam_nm, float)


def rot(a):
    c, s = np.cos(a), np.sin(a)
    return np.array([[c, s], [-s, c]])


def jones_retarder(delta, theta_deg):
    """R(−θ)·diag(e^{−iδ/2}, e^{iδ/2})·R(θ), built from explicit rotations. [2×2]"""
    t = np.radians(theta_deg)
    return rot(-t) @ np.diag([np.exp(-0.5j * delta), np.exp(0.5j * delta)]) @ rot(t)


def crossed_transmission(deltas, angles_deg):
    """|(0, 1)·J_n…J_1·(1, 0)ᵀ|² per wavelength; ``deltas`` (layers, N)."""
    out = np.empty(deltas.shape[1])
    for k in range(deltas.shape[1]):
        e = np.array([1.0, 0.0], complex)
        for d, a in zip(deltas[:, k], angles_deg, strict=True):
            e = jones_retarder(d, a) @ e
        out[k] = abs(e[1]) ** 2
    return out


def test_own_jones_matches_hecht_closed_form():
    """[hecht] one plate between crossed polarizers: sin²(2θ)·sin²(δ/2)."""
    d = np.array([[0.3, 1.7, 4.0]])
    for theta in (45.0, 22.5, 10.0):
        expect = np.sin(np.radians(2 * theta)) ** 2 * np.sin(d[0] / 2) ** 2
        assert np.allclose(crossed_transmission(d, [theta]), expect, atol=1e-14)


# ----------------------------------------------------------------------------- multi-order


TRUE_D = 1417.613  # [µm], known to 1 nm: about order 20 at 633 nm
NOISE = 0.005  # 0.5 % of the open-beam transmission
WL = np.arange(500.0, 900.1, 2.0)


def _fisher_sigma(d_um, eps_deg, theta0_deg, wl):
    """[fisher] σ of (thickness, offset) from (JᵀJ/σ²)⁻¹ with analytic derivatives of
    T = sin²(2(θ₀ + ε))·sin²(δ/2), δ = 2π·d·Δn/λ:
    ∂T/∂d = sin²(2θ)·½·sin δ·(2π·Δn/λ), ∂T/∂ε = 2·sin(4θ)·sin²(δ/2) (per radian)."""
    th = np.radians(theta0_deg + eps_deg)
    delta = quartz_delta(d_um, wl)
    k = 2 * np.pi * 1e3 * quartz_dn(wl) / wl
    jd = np.sin(2 * th) ** 2 * 0.5 * np.sin(delta) * k
    je = 2 * np.sin(4 * th) * np.sin(delta / 2) ** 2 * np.pi / 180
    J = np.stack([jd, je], axis=1) / NOISE
    return np.sqrt(np.diag(np.linalg.inv(J.T @ J)))


def _multi_order_fit(theta0, eps, seed):
    rng = np.random.default_rng(seed)
    t = crossed_transmission(quartz_delta(TRUE_D, WL)[None], [theta0 + eps])
    y = t + rng.normal(0, NOISE, WL.size)
    meas = make_measurement(
        WL,
        transmission=y,
        sigma=np.full(WL.size, NOISE),
        polarizers="crossed",
        plate_angle_deg=theta0,
    )
    nominal = design_plate("multi-order", "quartz", 0.25, 633.0, axis_deg=45.0, order=20)
    return fit_plate(meas, nominal, bootstrap=100, seed=3)


@pytest.fixture(scope="module")
def fit45():
    return _multi_order_fit(45.0, 3.0, seed=11)


def test_multi_order_thickness_within_3_sigma(fit45):
    """Order-20 quartz plate, crossed polarizers at 45°, 0.5 % noise: the thickness is found."""
    f = fit45
    assert f.order == 20
    s = float(f.thickness_sigma_um[0])
    assert abs(f.thicknesses_um[0] - TRUE_D) < 3 * s
    assert 0.0 < s < 0.05  # tens of nanometres from a 1.4 mm plate


def test_multi_order_sigma_matches_fisher_and_bootstrap(fit45):
    """[fisher] the covariance σ agrees with the Cramér-Rao σ computed here (10 %); the
    bootstrap agrees with both within its own sampling spread (100 refits: ±20 %)."""
    f = fit45
    fisher = _fisher_sigma(TRUE_D, 3.0, 45.0, WL)
    assert f.thickness_sigma_um[0] == pytest.approx(fisher[0], rel=0.10)
    assert f.axis_offset_sigma_deg == pytest.approx(fisher[1], rel=0.15)
    assert f.bootstrap_sigma[0] == pytest.approx(f.thickness_sigma_um[0], rel=0.25)


def test_axis_offset_recovered_at_45_without_sign(fit45):
    """At 45°, T = cos²(2ε)·sin²(δ/2) is even in ε: |ε| is recovered, the sign is not."""
    f = fit45
    assert not f.axis_sign_known
    assert abs(f.axis_offset_deg - 3.0) < 3 * f.axis_offset_sigma_deg


def test_axis_offset_sign_at_22_5_degrees():
    """At 22.5° the slope ∂T/∂ε = 2·sin(4θ)·sin²(δ/2) is largest: the sign is measured."""
    f = _multi_order_fit(22.5, -1.5, seed=5)
    assert f.axis_sign_known
    assert abs(f.axis_offset_deg + 1.5) < 3 * f.axis_offset_sigma_deg
    assert f.axis_offset_sigma_deg < 0.05
    assert abs(f.thicknesses_um[0] - TRUE_D) < 3 * f.thickness_sigma_um[0]


# ----------------------------------------------------------------------------- wrapped retardance


def test_wrapped_retardance_order_from_dispersion():
    """A polarimeter's retardance modulo one wave: the delivered plate is order 19 although
    order 20 was ordered; only the dispersion of Δn(λ)/λ across the band can tell."""
    lam0 = 633.0
    d19 = 19.25 * lam0 / (1e3 * quartz_dn(lam0)) + 0.2
    wl = np.arange(550.0, 800.1, 5.0)
    rng = np.random.default_rng(8)
    r = quartz_delta(d19, wl) / (2 * np.pi) + rng.normal(0, 0.003, wl.size)
    meas = make_measurement(wl, retardance_waves=np.mod(r, 1.0), sigma=np.full(wl.size, 0.003))
    assert meas.wrap == "wave"
    nominal = design_plate("multi-order", "quartz", 0.25, lam0, axis_deg=45.0, order=20)
    f = fit_plate(meas, nominal, bootstrap=50)
    assert f.order == 19
    assert abs(f.thicknesses_um[0] - d19) < 3 * f.thickness_sigma_um[0]
    competing = {a["order"]: a["delta_chi2"] for a in f.alternatives}
    assert 20 in competing and competing[20] > 100
    assert f.axis_offset_deg is None


def test_wrapped_narrow_band_is_ambiguous():
    """Over 2 nm with 0.02-wave noise the orders cannot be told apart: say so, list them."""
    lam0 = 633.0
    d = 20.25 * lam0 / (1e3 * quartz_dn(lam0))
    wl = np.linspace(632.0, 634.0, 9)
    r = np.mod(quartz_delta(d, wl) / (2 * np.pi) + np.random.default_rng(1).normal(0, 0.02, 9), 1)
    meas = make_measurement(wl, retardance_waves=r, wrap="wave")
    nominal = design_plate("multi-order", "quartz", 0.25, lam0, order=20)
    with pytest.raises(RetolError, match="ambiguous.*order 2"):
        fit_plate(meas, nominal, bootstrap=0)


# ----------------------------------------------------------------------------- compound


def test_compound_difference_determined_sum_not():
    """Two crossed quartz plates: the retardances subtract, so the spectrum fixes d₁ − d₂ and
    says nothing of d₁ + d₂.  The difference is recovered within 3σ; the sum is reported as not
    determined (σ infinite, correlation +1) rather than failing."""
    nominal = design_plate("compound", "quartz", 0.25, 780.0, axis_deg=45.0, thick_plate_um=1000.0)
    d1 = 1003.0
    d2 = d1 - nominal.details["difference_um"] - 0.05
    wl = np.arange(600.0, 1000.1, 2.0)
    deltas = np.stack([quartz_delta(d1, wl), quartz_delta(d2, wl)])
    y = crossed_transmission(deltas, [45.0, 135.0])
    y = y + np.random.default_rng(4).normal(0, NOISE, wl.size)
    meas = make_measurement(wl, transmission=y, sigma=np.full(wl.size, NOISE), polarizers="crossed")
    f = fit_plate(meas, nominal, bootstrap=20)
    out = f.to_dict()
    assert abs(out["layer_difference_um"] - (d1 - d2)) < 3 * out["layer_difference_sigma_um"]
    assert out["layer_difference_sigma_um"] < 0.5
    assert math.isinf(out["layer_sum_sigma_um"])
    assert out["thickness_determined"] == [False, False]
    assert out["correlation"][0][1] == 1.0
    assert "sum" in out["note"]
    assert f.order == 0


# ----------------------------------------------------------------------------- verdict


@pytest.mark.parametrize(
    ("dev", "u", "simple", "guarded"),
    [
        (0.5, 0.1, "accept", "accept"),  # inside [−1 + 0.2, 1 − 0.2]
        (0.9, 0.1, "accept", "undecided"),  # inside the limit, inside the guard band
        (1.1, 0.1, "reject", "undecided"),  # outside, but within w of the limit
        (1.3, 0.1, "reject", "reject"),  # beyond the guarded rejection limit 1.2
        (0.0, math.inf, "undecided", "undecided"),  # not determined by the measurement
    ],
)
def test_jcgm106_simple_and_guarded(dev, u, simple, guarded):
    """[jcgm106] tolerance interval [−1, 1], guard band w = 2u."""
    d = decide(dev, u, -1.0, 1.0, k=2.0)
    assert (d["simple"], d["guarded"]) == (simple, guarded)


def test_tolerance_limits_from_spec_forms():
    """{tolerance, coverage} → ±tolerance; {uniform} → ±h; {sigma} → ±3σ (said so)."""
    assert tolerance_limits({"kind": "normal", "sigma": 0.3, "limit": 0.9, "coverage": 3})[:2] == (
        -0.9,
        0.9,
    )
    assert tolerance_limits({"kind": "uniform", "half_width": 0.5})[:2] == (-0.5, 0.5)
    lo, hi, how = tolerance_limits({"kind": "normal", "sigma": 0.2})
    assert (lo, hi) == pytest.approx((-0.6, 0.6)) and "3 sigma" in how


# ----------------------------------------------------------------------------- command line


def invoke(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=True)


def _csv(tmp_path, rows, header="wavelength_nm,transmission"):
    p = tmp_path / "m.csv"
    p.write_text(header + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    return p


def _good_rows(n=40, start=600.0):
    wl = start + 5.0 * np.arange(n)
    t = np.sin(quartz_delta(897.6, wl) / 2) ** 2
    return [f"{w:g},{v:.5f}" for w, v in zip(wl, t, strict=True)]


PLATE = [
    "--material",
    "quartz",
    "--construction",
    "multi-order",
    "--order",
    "10",
    "--design",
    "780nm",
    "--polarizers",
    "crossed",
    "--bootstrap",
    "5",
]


@pytest.mark.parametrize(
    ("rows", "header", "extra", "message"),
    [
        (_good_rows()[:3], None, PLATE, "3 points for 2 free parameters"),
        (_good_rows(40, 150.0), None, PLATE, "outside the quartz"),
        (_good_rows()[:5] + [_good_rows()[3]] + _good_rows()[6:], None, PLATE, "not monotonic"),
        (_good_rows()[:5] + [_good_rows()[4]] + _good_rows()[5:], None, PLATE, "repeated"),
        (_good_rows()[:5] + ["625,1.4"] + _good_rows()[6:], None, PLATE, "outside [0, 1]"),
        (_good_rows()[:5] + ["625,nan"] + _good_rows()[6:], None, PLATE, "not a finite number"),
        (_good_rows(), "wavelength_nm,transmision", PLATE, "did you mean 'transmission'"),
        (_good_rows(), None, PLATE[:-4] + ["--bootstrap", "5"], "--polarizers"),
        (_good_rows(), None, ["--polarizers", "crossed"], "no plate to identify"),
        (_good_rows(), None, PLATE + ["--spec", SPEC], "does not go with --spec"),
    ],
)
def test_bad_input_one_line_exit_2_nothing_written(tmp_path, rows, header, extra, message):
    """Each mistake: one line on stderr naming the field, exit 2, no output folder."""
    p = _csv(tmp_path, rows, header or "wavelength_nm,transmission")
    out = tmp_path / "out"
    r = invoke("inspect", p, "--out", out, *extra)
    assert r.exit_code == 2, (r.output, r.exception)
    err = r.stderr.strip()
    assert err.startswith("retol: error:") and "\n" not in err and "Traceback" not in err
    assert message in err, err
    assert not out.exists()


def test_ambiguous_order_from_cli_lists_candidates(tmp_path):
    lam0 = 780.0
    d = 10.25 * lam0 / (1e3 * quartz_dn(lam0))
    wl = np.linspace(779.0, 781.0, 8)
    r = np.mod(quartz_delta(d, wl) / (2 * np.pi) + 0.01 * np.cos(np.arange(8) * 2.1), 1.0)
    p = _csv(
        tmp_path,
        [f"{w:g},{v:.5f}" for w, v in zip(wl, r, strict=True)],
        "wavelength_nm,retardance_waves",
    )
    r = invoke("inspect", p, "--out", tmp_path / "o", *PLATE[:8])
    assert r.exit_code == 2
    assert "ambiguous" in r.stderr and "order 10" in r.stderr
    assert not (tmp_path / "o").exists()


@pytest.fixture(scope="module")
def example_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("inspect") / "p5"
    r = invoke(
        "inspect",
        LOT / "plate_05.csv",
        "--spec",
        SPEC,
        "--polarizers",
        "crossed",
        "--bootstrap",
        "20",
        "--samples",
        "500",
        "--out",
        out,
        "--json",
    )
    assert r.exit_code == 0, (r.output, r.exception)
    return json.loads(r.stdout), out


def test_json_contract_and_files(example_run):
    doc, out = example_run
    fit_keys = {
        "thicknesses_um",
        "thickness_sigma_um",
        "axis_offset_deg",
        "axis_offset_sigma_deg",
        "order",
        "chi2_reduced",
        "alternatives",
    }
    assert fit_keys <= set(doc["fit"])
    assert {"fit", "verdict", "yield", "yield_low", "yield_high", "toml"} <= set(doc)
    assert doc["fit"]["order"] == 10
    assert 0.0 <= doc["yield_low"] <= doc["yield"] <= doc["yield_high"] <= 1.0
    # invented truth of plate_05: +1.00 um on a +-1.0 um limit (tests/make_inspection_lot.py)
    item = doc["verdict"]["items"][0]
    assert item["tolerance"] == "thickness_um" and item["guarded"] == "undecided"
    assert {p.name for p in out.iterdir() if not p.name.startswith(".retol-")} == {
        "inspection.json",
        "as_built.toml",
        "fit.png",
        "fit.csv",
    }


def test_as_built_block_is_a_usable_candidate(example_run, tmp_path):
    """The TOML block pasted into the original spec gives a spec the validator accepts, and the
    as-built stack carries the fitted thickness."""
    import tolerance

    doc, _ = example_run
    text = SPEC.read_text(encoding="utf-8") + "\n" + doc["toml"]
    p = tmp_path / "with_as_built.toml"
    p.write_text(text, encoding="utf-8")
    tolerance.load_spec(p)  # raises on any invalid key
    m = re.search(r'thickness = "([0-9.]+)um"', doc["toml"])
    assert float(m.group(1)) == pytest.approx(doc["fit"]["thicknesses_um"][0], abs=1e-4)


def test_never_overwrites_without_force(example_run):
    _, out = example_run
    before = (out / "inspection.json").read_text()
    r = invoke(
        "inspect",
        LOT / "plate_01.csv",
        "--spec",
        SPEC,
        "--polarizers",
        "crossed",
        "--no-yield",
        "--bootstrap",
        "5",
        "--out",
        out,
    )
    assert r.exit_code == 2 and "--force" in r.stderr
    assert (out / "inspection.json").read_text() == before


def test_many_writes_table_and_histogram(tmp_path):
    out = tmp_path / "lot"
    r = invoke(
        "inspect",
        "--many",
        LOT,
        "--spec",
        SPEC,
        "--polarizers",
        "crossed",
        "--bootstrap",
        "5",
        "--out",
        out,
        "--json",
    )
    assert r.exit_code == 0, (r.output, r.exception)
    doc = json.loads(r.stdout)
    by_file = {row["file"]: row for row in doc["plates"]}
    assert len(by_file) == 7 and all(row["status"] == "ok" for row in by_file.values())
    assert by_file["plate_06.csv"]["order"] == 9 and by_file["plate_06.csv"]["simple"] == "reject"
    assert by_file["plate_07_polarimeter.csv"]["axis_offset_deg"] is None
    assert {p.name for p in out.iterdir() if not p.name.startswith(".retol-")} == {
        "lot.csv",
        "lot.png",
        "lot.json",
    }


def _readme_commands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Incoming inspection", 1)[1].split("\n## ", 1)[0]
    block = section.split("```bash", 1)[1].split("```", 1)[0]
    return [shlex.split(c) for c in block.replace("\\\n", " ").splitlines() if c.strip()]


def test_readme_inspection_examples_run(tmp_path, monkeypatch):
    """Every command of README "Incoming inspection" runs from the repository folder."""
    monkeypatch.chdir(ROOT)
    cmds = _readme_commands()
    assert len(cmds) == 3
    for i, argv in enumerate(cmds):
        assert argv[:2] == ["retol", "inspect"]
        argv = [a for a in argv[2:]]
        j = argv.index("--out")
        argv[j + 1] = str(tmp_path / f"o{i}")
        r = invoke("inspect", *argv, "--bootstrap", "5", "--samples", "300")
        assert r.exit_code == 0, (argv, r.output, r.exception)
