"""Statistics beyond plain Monte Carlo: Sobol' sampling, rare rejects, Sobol' indices.

Closed forms used here, derived where they are used:

* A quarter-wave plate (QWP) clocked by δ between linear light at 0° and a fast axis at 45°.
  In the plate's axes the input is E = (cos θ, sin θ) with θ = 45° + δ; the QWP delays one
  component by a quarter wave, E' = (cos θ, i·sin θ), an ellipse with its axes along the plate's
  and semi-axes |cos θ|, |sin θ|.  So the axial ratio is b/a = tan(45° − |δ|) (Hecht, *Optics*,
  5th ed., §8.7.1, the quarter-wave plate on linear light; Born & Wolf §1.4.2).  A goal
  b/a ≥ m passes iff |δ| ≤ e₀ = 45° − atan(m).  With δ uniform on [−u, u] the yield is e₀/u; with
  δ normal of σ the reject rate is 2·Φ(−e₀/σ).
* Sobol' indices of f = x₁ + 2x₂ + 0·x₃ with independent standard normals: V = 1 + 4 = 5,
  S₁ = Sₜ₁ = 1/5, S₂ = Sₜ₂ = 4/5, S₃ = Sₜ₃ = 0 (additive: no interactions; Sobol' 2001, eq. 2).
* Sobol' indices of f = x₁ + x₁x₂ (standard normals): Var(x₁) = 1, Var(x₁x₂) = E[x₁²]E[x₂²] = 1,
  Cov(x₁, x₁x₂) = E[x₁²]E[x₂] = 0, so V = 2.  E[f|x₁] = x₁ gives S₁ = 1/2; E[f|x₂] = 0 gives
  S₂ = 0.  Var(f|x₂) = (1 + x₂)², so Sₜ₁ = E[(1 + x₂)²]/V = 2/2 = 1; Var(f|x₁) = x₁², so
  Sₜ₂ = E[x₁²]/V = 1/2 (the x₁x₂ interaction is half the variance).

References: I. M. Sobol', Math. Comput. Simul. 55, 271-280 (2001); A. Saltelli et al., Comput.
Phys. Commun. 181, 259-270 (2010); A. B. Owen, SIAM J. Numer. Anal. 34, 1884-1910 (1997).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.stats import norm

from tolerance import sampler
from tolerance.cli.main import cli
from tolerance.errors import RetolError
from tolerance.montecarlo import Engine, wilson, yield_interval
from tolerance.rare import zero_reject_bound
from tolerance.spec import loads
from tolerance.variance import saltelli_jansen


def qwp_spec(tolerances: str, goal_min: float, samples=4096, run_extra="") -> str:
    """A zero-order quartz QWP at 780 nm, one wavelength, linear input at 0°, axis at 45°."""
    return f"""
title = "clocked quarter-wave plate"
[wavelength]
start = "780nm"
stop = "780nm"
step = "1nm"
[source]
shape = "laser"
center = "780nm"
[input]
azimuth_deg = 0
[goal]
state = "circular"
metric = "axial_ratio"
min = {goal_min!r}
[[candidate]]
name = "qwp"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "780nm"
axis_deg = 45
[tolerances]
{tolerances}
[run]
samples = {samples}
{run_extra}
"""


def goal_for(e0_deg: float) -> float:
    """The axial-ratio minimum whose clocking limit is ±e0: m = tan(45° − e0)."""
    return math.tan(math.radians(45.0 - e0_deg))


# ----------------------------------------------------------------------------- Sobol' sampling


def test_sobol_draws_bit_identical_for_any_chunk_size():
    text = qwp_spec(
        "clocking_deg = { uniform = 2.0 }\nthickness_um = { sigma = 0.05 }\n"
        "tilt_deg = { sigma = 1.0 }\ntemperature_c = { low = 15, high = 35 }",
        goal_for(1.4),
        samples=3000,
        run_extra='sampling = "sobol"\nreplicates = 4\nvariance_samples = 0',
    )
    study = loads(text, "t.toml")
    results = []
    for chunk in (512, 1536, 8192):
        eng = Engine(study, chunk_size=chunk)
        assert eng.samples == 4 * 1024  # 3000 -> 4 scramblings x 1024 (a power of two)
        assert "rounded up to 4096" in eng.notes[0]
        results.append(eng.evaluate(eng.cases[0]))
    for r in results[1:]:
        np.testing.assert_array_equal(r.worst, results[0].worst)
        np.testing.assert_array_equal(r.spec_stokes, results[0].spec_stokes)
        assert (r.yield_, r.yield_low, r.yield_high) == (
            results[0].yield_,
            results[0].yield_low,
            results[0].yield_high,
        )
    # the draws themselves, asked for in odd pieces, across a replicate boundary
    eng = Engine(study)
    whole = eng.draws("clocking_deg", 0, 0, 2048)
    parts = [eng.draws("clocking_deg", 0, a, b) for a, b in ((0, 512), (512, 1536), (1536, 2048))]
    for i in range(2):
        np.testing.assert_array_equal(np.concatenate([p[i] for p in parts]), whole[i])
    # z is the normal quantile of u (inverse-CDF mapping)
    np.testing.assert_allclose(whole[0], norm.ppf(whole[1]), rtol=0, atol=1e-9)


def test_sobol_points_balanced_per_replicate():
    """A scrambled Sobol' net of 2^k points has one point in each interval [j/2^k, (j+1)/2^k)
    of every coordinate (Owen 1998, scrambling keeps the (t, m, s)-net property)."""
    u = sampler.sobol_points(5, 0, 6, 0, 256)
    for d in range(6):
        assert np.array_equal(np.sort(np.floor(u[:, d] * 256)), np.arange(256))


def test_random_sampling_settings_leave_spec_json_unchanged():
    study = loads(qwp_spec("clocking_deg = { uniform = 1 }", 0.9), "t.toml")
    assert set(study.run.to_dict()) == {
        "samples",
        "seed",
        "chunk_size",
        "quantiles",
        "confidence",
        "sensitivity_samples",
        "keep_samples",
    }
    s2 = loads(qwp_spec("clocking_deg = { uniform = 1 }", 0.9, run_extra='sampling = "sobol"'), "t")
    assert s2.run.to_dict()["sampling"] == "sobol"


@pytest.mark.parametrize(
    "extra, field",
    [
        ('sampling = "halton"', "[run].sampling"),
        ("replicates = 1", "[run].replicates"),
        ('rare = "always"', "[run].rare"),
        ("variance_samples = -3", "[run].variance_samples"),
        ("replicates = 2.5", "[run].replicates"),
    ],
)
def test_bad_statistics_keys_are_one_line_errors(extra, field):
    with pytest.raises(RetolError) as e:
        loads(qwp_spec("clocking_deg = { uniform = 1 }", 0.9, run_extra=extra), "t.toml")
    assert field in str(e.value) and "\n" not in str(e.value)


def test_replicate_intervals_cover_closed_form_yield_at_nominal_rate():
    """Clocking δ and input azimuth α both uniform on ±u = 2°: the plate sees the input at
    45° + δ − α, so it passes iff |δ − α| ≤ e0 = 1.3° (module docstring).  δ − α has the
    triangular density on [−2u, 2u], so the yield is 1 − (2u − e0)²/(4u²) = 0.544375.  Over 200
    seeds the 95 % replicate interval (8 scramblings x 64 points) must cover it in about 95 % of
    them; 200 seeds give a binomial standard deviation of 1.5 points, so the accepted band is
    90-99 %.  (With one tolerance alone the 1-D net makes each replicate's count take only two
    values, and the t interval is then conservative: it covered 100 % in a trial.)"""
    u, e0 = 2.0, 1.3
    truth = 1.0 - (2 * u - e0) ** 2 / (4 * u * u)
    study = loads(
        qwp_spec(
            f"clocking_deg = {{ uniform = {u} }}\ninput_azimuth_deg = {{ uniform = {u} }}",
            goal_for(e0),
            samples=512,
            run_extra='sampling = "sobol"\nreplicates = 8',
        ),
        "t.toml",
    )
    covered = 0
    widths = []
    seeds = range(200)
    for s in seeds:
        eng = Engine(study, seed=s)
        case = eng.cases[0]
        worst, sst = eng.pass_values(case)
        passed = eng.pass_metric(worst, sst, case.goal) >= study.goal.min
        lo, hi = yield_interval(passed, 8, 0.95)
        covered += lo <= truth <= hi
        widths.append(hi - lo)
    rate = covered / len(seeds)
    assert 0.90 <= rate <= 0.99, rate
    # and the intervals are much narrower than a binomial one on as many independent samples
    w_lo, w_hi = wilson(int(truth * 512), 512, 0.95)
    assert np.median(widths) < 0.5 * (w_hi - w_lo)


# ----------------------------------------------------------------------------- rare rejects


def test_rare_reject_rate_from_closed_form_within_20_percent():
    """Clocking normal with σ = 1°, goal limit e0 = z·σ with z = Φ⁻¹(1 − 0.5e-4): the reject
    rate is 2Φ(−z) = 1.0e-4 exactly (module docstring).  The FORM + importance sampling estimate
    spends at most 20,000 model evaluations and must land within ±20 %."""
    z = norm.isf(0.5e-4)
    truth = 2 * norm.sf(z)
    study = loads(
        qwp_spec("clocking_deg = { sigma = 1.0 }", goal_for(z * 1.0), samples=2048), "t.toml"
    )
    eng = Engine(study)
    res = eng.evaluate(eng.cases[0])
    rej = res.reject
    assert rej.method == "importance sampling"
    assert rej.evaluations <= 20000
    assert abs(rej.rate / truth - 1) < 0.20, rej
    assert rej.low <= truth <= rej.high
    assert rej.beta == pytest.approx(z, rel=0.01)  # the design point: |δ| = e0 in units of σ
    assert rej.design_points == 2  # both signs of clocking fail


def test_thickness_only_rare_rejects():
    """Thickness alone.  A plate of retardance Γ = π/2 + ε with linear input at 45° to its axes
    gives S₃ = sin Γ = cos ε, so the output's ellipticity angle χ has sin 2χ = cos ε and
    b/a = tan χ (Born & Wolf §1.4.2).  b/a ≥ m iff |ε| ≤ ε₀ = π/2 − 2·atan(m).  A thickness error
    τ changes Γ by ε = k₀·Δn·τ·f (k₀ = 2π/λ, Δn the birefringence, f the thermal factor the
    engine applies), so the reject rate is 2Φ(−τ₀/σ) with τ₀ = ε₀/(k₀·Δn·f).  σ is set so that
    it is 1.0e-4."""
    from tolerance.dispersion import indices

    probe = loads(qwp_spec("thickness_um = { sigma = 0.01 }", 0.9), "t.toml")
    mat = probe.candidates[0].plate.layers[0].material
    n_o, n_e = indices(mat, 780.0)
    f = 1.0 + mat.retardance_temperature_coefficient * (
        probe.environment.temperature_c - mat.reference_temperature_c
    )
    m = 0.9
    tau0 = (math.pi / 2 - 2 * math.atan(m)) / (2 * math.pi * 1e3 / 780.0 * float(n_e - n_o) * f)
    z = norm.isf(0.5e-4)
    sigma = float(tau0 / z)
    study = loads(
        qwp_spec(
            f"thickness_um = {{ sigma = {sigma!r} }}",
            m,
            samples=2048,
            run_extra="variance_samples = 0",
        ),
        "t.toml",
    )
    eng = Engine(study)
    rej = eng.evaluate(eng.cases[0]).reject
    assert rej.method == "importance sampling"
    assert rej.evaluations <= 20000
    assert abs(rej.rate / 1.0e-4 - 1) < 0.20, rej


def test_no_reject_seen_gives_rule_of_three_bound():
    study = loads(
        qwp_spec(
            "clocking_deg = { uniform = 0.5 }",
            goal_for(1.0),
            samples=3000,
            run_extra='rare = "off"\nvariance_samples = 0',
        ),
        "t.toml",
    )
    eng = Engine(study)
    rej = eng.evaluate(eng.cases[0]).reject
    assert rej.method == "none seen"
    assert rej.bound == pytest.approx(-math.log(0.05) / 3000)  # ≈ 3/n (Jovanovic & Levy 1997)
    assert zero_reject_bound(3000, 0.95) == pytest.approx(2.9957 / 3000, rel=1e-4)


# ----------------------------------------------------------------------------- Sobol' indices


def _pick_freeze(f, d, n, seed):
    rng = np.random.default_rng(seed)
    A = rng.standard_normal((n, d))
    B = rng.standard_normal((n, d))
    fAB = []
    for i in range(d):
        ab = A.copy()
        ab[:, i] = B[:, i]
        fAB.append(f(ab))
    return f(A), f(B), np.array(fAB)


@pytest.mark.parametrize(
    "model, first, total",
    [
        (lambda x: x[:, 0] + 2 * x[:, 1] + 0 * x[:, 2], [0.2, 0.8, 0.0], [0.2, 0.8, 0.0]),
        (lambda x: x[:, 0] + x[:, 0] * x[:, 1], [0.5, 0.0], [1.0, 0.5]),
    ],
    ids=["additive", "interacting"],
)
def test_sobol_indices_of_closed_forms_within_their_intervals(model, first, total):
    """Analytic indices derived in the module docstring.  One seed's 95 % bootstrap interval
    misses the truth now and then by design, so check over 40 seeds: each index's interval
    holds its analytic value in at least 80 % of them (nominal 95 %; 40 seeds give a binomial
    standard deviation of 3.4 points), and every estimate is within 0.15 of it (the product
    model has heavy-tailed outputs)."""
    d = len(first)
    hit_first = np.zeros(d)
    hit_total = np.zeros(d)
    seeds = range(40)
    for seed in seeds:
        fA, fB, fAB = _pick_freeze(model, d, 4096, seed)
        r = saltelli_jansen(fA, fB, fAB, 0.95, 300, np.random.default_rng(seed))
        hit_first += (r["first_low"] - 1e-12 <= first) & (first <= r["first_high"] + 1e-12)
        hit_total += (r["total_low"] - 1e-12 <= total) & (total <= r["total_high"] + 1e-12)
        np.testing.assert_allclose(r["first"], first, atol=0.15)
        np.testing.assert_allclose(r["total"], total, atol=0.15)
    assert np.all(hit_first / len(seeds) >= 0.8), hit_first
    assert np.all(hit_total / len(seeds) >= 0.8), hit_total


def test_engine_indices_clocking_only_and_interaction():
    """One tolerance explains everything (S = Sₜ = 1); and for clocking plus input azimuth the
    axial ratio tan(45° − |δ − α|) depends only on δ − α, so both act with equal total shares."""
    study = loads(
        qwp_spec(
            "clocking_deg = { sigma = 1.0 }\ninput_azimuth_deg = { sigma = 1.0 }",
            goal_for(1.5),
            samples=1024,
            run_extra="variance_samples = 2048",
        ),
        "t.toml",
    )
    eng = Engine(study)
    res = eng.evaluate(eng.cases[0])
    a, b = res.sobol_pass["clocking_deg"], res.sobol_pass["input_azimuth_deg"]
    assert a["total_low"] <= b["total"] <= a["total_high"] or b["total_low"] <= a["total"]
    assert a["total"] > a["first"] + 0.1  # pass/fail of |δ − α| is mostly interaction
    assert res.dominant_variance in ("clocking_deg", "input_azimuth_deg")


def test_run_json_carries_sobol_contract(tmp_path):
    spec = tmp_path / "s.toml"
    spec.write_text(
        qwp_spec(
            "clocking_deg = { uniform = 2.0 }\nthickness_um = { sigma = 0.05 }",
            goal_for(1.4),
            samples=1024,
            run_extra='sampling = "sobol"\nvariance_samples = 256',
        )
    )
    r = CliRunner().invoke(
        cli, ["run", str(spec), "--json", "--no-report", "--out", str(tmp_path / "o")]
    )
    assert r.exit_code == 0, r.output
    cand = json.loads(r.stdout)["candidates"][0]
    for key in ("sobol", "sobol_pass"):
        assert set(cand[key]) == {"clocking_deg", "thickness_um"}
        for v in cand[key].values():
            assert set(v) == {
                "first",
                "first_low",
                "first_high",
                "total",
                "total_low",
                "total_high",
            }
    assert cand["dominant_variance"] in ("clocking_deg", "thickness_um")
    assert cand["yield_low"] <= cand["yield"] <= cand["yield_high"]
