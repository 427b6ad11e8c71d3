"""Closed forms and published values for each quantity a run REPORTS (not only its inputs).

Every test runs a spec through the public API (``tolerance.load_spec``, ``tolerance.run``) and
checks what the results grid says against a closed form derived in its docstring.

Sources
-------
- [Hecht] E. Hecht, *Optics* (Addison-Wesley), ch. 8: a half-wave plate with its fast axis at θ
  turns linear light at 0° into linear light at 2θ; Malus's law I = I₀·cos²Δ behind an analyzer
  at Δ to the light's plane; right-handed = clockwise seen looking toward the source.
- [README] README.md "Conventions": exp(i(kz − ωt)), J = R(−θ)·diag(e^{−iδ/2}, e^{+iδ/2})·R(θ),
  S₃ = 2·Im(Eₓ·E_y*) > 0 right-handed; "What the results mean": yield, Wilson interval,
  acceptance half-angle, temperature coefficient; "Spec files": a candidate's own tolerances.
- [Wilson1927] E. B. Wilson, J. Am. Stat. Assoc. 22, 209-212 (1927): the score interval.
- [HF1996] R. J. Hyndman, Y. Fan, "Sample quantiles in statistical packages," Am. Stat. 50,
  361-365 (1996): definition 1 (inverse of the empirical distribution) and 7 (linear).
- [Born&Wolf] M. Born, E. Wolf, *Principles of Optics*, sec. 15.3: plane waves in a uniaxial
  crystal from the wave equation k×(k×E) + (ω/c)²·ε·E = 0, whose determinant fixes the normal
  components of the two refracted wave vectors.
- [Etzel2000] H. J. Etzel, R. C. Rose, Y. Wang, Appl. Opt. 39, 5796 (2000): the relative
  temperature coefficient γ = (1/δ)·dδ/dT (the numbers in materials/*.toml).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from reference import (
    ref_dn,
    ref_draws,
    ref_indices,
    ref_plate,
    write_spec,
)
from scipy.optimize import brentq, minimize_scalar
from scipy.stats import norm

import tolerance
from tolerance.montecarlo import hist_quantiles

pytestmark = pytest.mark.filterwarnings("ignore::UserWarning")


def run_spec(
    tmp_path,
    candidates,
    *,
    goal,
    tolerances=None,
    source=None,
    wavelength=None,
    samples=64,
    seed=5,
    input_az=0.0,
    keep=True,
    extra=None,
):
    """Write a spec (numbers: nm, µm, deg) and run it through the public API."""
    tables = {
        "wavelength": dict(
            zip(("start", "stop", "step"), wavelength or (780.0, 780.0, 1.0), strict=True)
        ),
        "source": source or {"shape": "laser", "center": 780.0},
        "input": {"azimuth_deg": input_az},
        "goal": goal,
        "tolerances": tolerances or {},
    }
    tables.update(extra or {})
    path = write_spec(tmp_path / "spec.toml", tables, candidates)
    return tolerance.run(tolerance.load_spec(path), samples=samples, seed=seed, keep_samples=keep)


def hwp(theta, name=None, design=780.0, material="quartz"):
    return {
        "name": name or f"hwp {theta}",
        "construction": "zero-order",
        "material": material,
        "waves": 0.5,
        "design": design,
        "axis_deg": theta,
    }


def fold(a):
    """An axis angle folded into (−90°, 90°] (README "Conventions")."""
    a = (np.asarray(a, dtype=float) + 90.0) % 180.0 - 90.0
    return np.where(a <= -90.0, a + 180.0, a)


# ----------------------------------------------------------------------------- azimuth


@pytest.mark.parametrize("theta", [10.0, 30.0, -25.0, 60.0, 80.0, -70.0])
def test_half_wave_plate_turns_linear_0_into_2_theta(tmp_path, theta):
    """[Hecht]: a half-wave plate with its fast axis at θ mirrors the input plane about the
    axis, so linear input at 0° leaves linear at 2θ (folded into (−90°, 90°]).  Checked on the
    reported nominal azimuth (grid path), the source-averaged azimuth (laser-line path) and,
    with only the clocking tolerance active, every sample: clocking c gives 2(θ + c)."""
    tol = {"clocking_deg": {"sigma": 3.0}}
    g = run_spec(
        tmp_path,
        [hwp(theta)],
        tolerances=tol,
        goal={"state": "linear", "azimuth_deg": 2 * theta, "metric": "fidelity", "min": 0.5},
    )
    expect = float(fold(2 * theta))
    assert float(g["nominal_azimuth"].values[0, 0]) == pytest.approx(expect, abs=1e-9)
    assert float(g["nominal_spectral_azimuth"].values[0]) == pytest.approx(expect, abs=1e-9)
    assert float(g["nominal_axial_ratio"].values[0, 0]) == pytest.approx(0.0, abs=1e-9)
    z, _ = ref_draws(5, "clocking_deg", 0, 64)
    per_sample = fold(2 * (theta + 3.0 * z))
    np.testing.assert_allclose(g["spectral_azimuth"].values[0], per_sample, atol=1e-9)
    # float32 storage of the per-wavelength samples: 90° · 2⁻²³ ≈ 1.1e-5°
    np.testing.assert_allclose(g["sample_azimuth"].values[0, :, 0], per_sample, atol=2e-5)


# ----------------------------------------------------------------------------- extinction


@pytest.mark.parametrize("theta, beta", [(10.0, 0.0), (22.5, 30.0), (-15.0, 20.0), (5.0, 5.0)])
def test_extinction_is_malus_power_ratio_in_10_log10(tmp_path, theta, beta):
    """[Hecht] Malus: linear light at ψ = 2θ (a half-wave plate at θ, input at 0°) passes an
    analyzer at β with power cos²(ψ − β) and the crossed one with sin²(ψ − β), so the reported
    extinction is 10·log10(cot²(ψ − β)) dB, a power ratio (10·log10, not 20·log10); capped at
    150 dB when ψ = β exactly."""
    g = run_spec(
        tmp_path,
        [hwp(theta)],
        goal={"state": "linear", "azimuth_deg": beta, "metric": "extinction_db", "min": 10.0},
    )
    d = math.radians(2 * theta - beta)
    expect = 150.0 if abs(d) < 1e-12 else 10 * math.log10(math.cos(d) ** 2 / math.sin(d) ** 2)
    tol = 1e-6 if abs(d) > 1e-12 else 0.0
    if abs(d) < 1e-12:  # exact match: near the cap, limited by the plate's rounding
        assert float(g["nominal_metric"].values[0, 0]) > 100.0
    else:
        assert float(g["nominal_metric"].values[0, 0]) == pytest.approx(expect, abs=tol)
        assert float(g["nominal_spectral_extinction"].values[0]) == pytest.approx(expect, abs=tol)
        assert float(g["nominal_worst"].values[0]) == pytest.approx(expect, abs=tol)


def test_extinction_of_samples_is_malus_with_the_input_azimuth_error(tmp_path):
    """Only the input azimuth varies (σ = 2°): input at a goes out of a half-wave plate at θ as
    linear at 2θ − a, so each sample's extinction into an analyzer at 2θ is
    10·log10(cot² a) [Hecht, Malus]."""
    g = run_spec(
        tmp_path,
        [hwp(20.0)],
        tolerances={"input_azimuth_deg": {"sigma": 2.0}},
        goal={"state": "linear", "azimuth_deg": 40.0, "metric": "extinction_db", "min": 30.0},
    )
    z, _ = ref_draws(5, "input_azimuth_deg", 0, 64)
    a = np.radians(2.0 * z)
    expect = 10 * np.log10(np.cos(a) ** 2 / np.sin(a) ** 2)
    np.testing.assert_allclose(g["worst_metric"].values[0], expect, rtol=1e-7)
    np.testing.assert_allclose(g["spectral_extinction"].values[0], expect, rtol=1e-7)
    assert float(g["yield"].values[0]) == np.mean(expect >= 30.0)


# ----------------------------------------------------------------------------- handedness


def _rotation_sense(E):
    """+1 when Re[E·e^{−iωt}] turns clockwise as seen looking toward the source (x right, y up,
    angles counter-clockwise: README), from the field itself, not from a Stokes formula."""
    t = np.linspace(0.0, 0.5, 6)  # a quarter period, ωt in rad
    x = np.real(E[0] * np.exp(-1j * t))
    y = np.real(E[1] * np.exp(-1j * t))
    ang = np.unwrap(np.arctan2(y, x))
    return -1 if np.all(np.diff(ang) > 0) else (1 if np.all(np.diff(ang) < 0) else 0)


@pytest.mark.parametrize("axis, sense", [(45.0, 1), (-45.0, -1), (30.0, 1), (120.0, -1)])
def test_handedness_follows_the_readme_convention(tmp_path, axis, sense):
    """[README] A quarter-wave plate J = (I − i·[[cos 2θ, sin 2θ], [sin 2θ, −cos 2θ]])/√2 with
    fast axis at θ = 45° sends (1, 0) to (1, −i)/√2, whose field Re[(1, −i)e^{−iωt}] =
    (cos ωt, −sin ωt) turns clockwise looking toward the source: right-handed, S₃ > 0 [Hecht].
    In general (1, 0) leaves as ((1 − i·cos 2θ), −i·sin 2θ)/√2, so S₃ = sin 2θ and the axial
    ratio is tan(½·arcsin|sin 2θ|): θ = −45° (or 120°) gives the left hand.  The grid's goal
    sense, its Stokes S₃ and the signed axial ratio must agree with the field's own rotation."""
    t = math.radians(axis)
    J = (
        np.eye(2)
        - 1j * np.array([[math.cos(2 * t), math.sin(2 * t)], [math.sin(2 * t), -math.cos(2 * t)]])
    ) / math.sqrt(2)
    assert _rotation_sense(J @ np.array([1.0, 0.0])) == sense
    qwp = {
        "name": "qwp",
        "construction": "zero-order",
        "material": "quartz",
        "waves": 0.25,
        "design": 780.0,
        "axis_deg": axis,
    }
    g = run_spec(tmp_path, [qwp], goal={"state": "circular", "metric": "axial_ratio", "min": 0.99})
    assert int(g["handedness"].values[0]) == sense
    assert np.sign(g["nominal_stokes"].values[0, 0, 2]) == sense
    s3 = math.sin(2 * t)
    ar = math.tan(0.5 * math.asin(abs(s3)))
    assert float(g["nominal_stokes"].values[0, 0, 2]) == pytest.approx(s3, abs=1e-12)
    assert float(g["nominal_metric"].values[0, 0]) == pytest.approx(ar, abs=1e-6)
    # the opposite goal: the plate gives the wrong hand, its signed axial ratio is -1
    g2 = run_spec(
        tmp_path,
        [qwp],
        goal={
            "state": "circular",
            "metric": "axial_ratio",
            "min": 0.5,
            "handedness": "left" if sense > 0 else "right",
        },
    )
    assert float(g2["nominal_metric"].values[0, 0]) == pytest.approx(-ar, abs=1e-6)
    assert float(g2["yield"].values[0]) == 0.0


@pytest.mark.parametrize("over", ["band", "spectrum"])
@pytest.mark.parametrize(
    "source",
    [
        {"shape": "laser", "center": 780.0, "drift": {"sigma": 0.5}},
        {"shape": "gaussian", "center": 780.0, "fwhm": 6.0},
    ],
)
def test_a_left_handed_plate_fails_a_right_handed_goal(tmp_path, over, source):
    """A quarter-wave plate at −45° makes left-circular light (previous test).  Against a
    right-handed goal its axial ratio, signed negative for the wrong hand [README, grid
    ``METRIC_INFO``], is about −1 for every sample, over the band and over the spectrum, so
    the yield is 0; against a left-handed goal it is +1 and the yield 1."""
    qwp = {
        "name": "left",
        "construction": "zero-order",
        "material": "quartz",
        "waves": 0.25,
        "design": 780.0,
        "axis_deg": -45.0,
    }
    tol = {"thickness_um": {"sigma": 0.05}}
    for hand, sign in (("right", -1), ("left", 1)):
        g = run_spec(
            tmp_path,
            [qwp],
            tolerances=tol,
            source=source,
            wavelength=(776.0, 784.0, 1.0),
            goal={
                "state": "circular",
                "metric": "axial_ratio",
                "min": 0.8,
                "over": over,
                "handedness": hand,
            },
        )
        for var in ("spectral_metric", "worst_metric", "pass_metric"):
            v = g[var].values[0]
            assert np.all(np.sign(v) == sign), var
            assert np.all(np.abs(v) > 0.9), var
        assert float(g["nominal_spectral_metric"].values[0]) * sign > 0.9
        assert float(g["yield"].values[0]) == (1.0 if sign > 0 else 0.0)
        assert float(g["rank_yield"].values[0]) == (1.0 if sign > 0 else 0.0)


# ----------------------------------------------------------------------------- spread


def test_a_candidates_own_tolerance_shows_in_its_spread(tmp_path):
    """[README] "tolerances = {...} (overrides for this candidate)".  At normal incidence
    δ/2π = d·|Δn|/λ exactly, so a normal thickness tolerance σ gives a retardance standard
    deviation (ddof = 1, over the run's samples) of s_z·σ·|Δn|·1e3/λ waves, with s_z the sample
    standard deviation of the standard draws the thickness stream gives (common random
    numbers: both candidates read the same z).  The spec-wide σ = 0.2 µm and a candidate's own
    σ = 1.5 µm must both show, exactly."""
    base = {
        "construction": "zero-order",
        "material": "quartz",
        "waves": 0.25,
        "design": 780.0,
        "axis_deg": 45.0,
    }
    cands = [
        dict(base, name="spec-wide"),
        dict(base, name="own", tolerances={"thickness_um": {"sigma": 1.5}}),
    ]
    n = 700
    g = run_spec(
        tmp_path,
        cands,
        tolerances={"thickness_um": {"sigma": 0.2}},
        goal={"state": "circular", "metric": "axial_ratio", "min": 0.995},
        samples=n,
        keep=False,
    )
    z, _ = ref_draws(5, "thickness_um", 0, n)
    per_um = abs(float(ref_dn("quartz", 780.0))) * 1e3 / 780.0
    for name, sigma in (("spec-wide", 0.2), ("own", 1.5)):
        std = float(g["retardance_std"].sel(candidate=name).values[0])
        assert std == pytest.approx(np.std(z, ddof=1) * sigma * per_um, rel=1e-9)
        mean = float(g["retardance_mean"].sel(candidate=name).values[0])
        nominal = float(g["nominal_retardance"].sel(candidate=name).values[0])
        assert mean - nominal == pytest.approx(np.mean(z) * sigma * per_um, rel=1e-7, abs=1e-15)
    # the wider spread costs yield: b/a of a plate off by ε waves is cos(2πε)/(1 + |sin 2πε|)
    # ... monotone in |ε|, so the yield is the share of |z|·σ·per_um within the same bound
    eps_max = brentq(
        lambda e: (1 - abs(math.sin(2 * math.pi * e))) / math.cos(2 * math.pi * e) - 0.995, 0.0, 0.1
    )
    for name, sigma in (("spec-wide", 0.2), ("own", 1.5)):
        y = float(g["yield"].sel(candidate=name))
        assert y == np.mean(np.abs(z) * sigma * per_um <= eps_max)


# ----------------------------------------------------------------------------- quantiles


def test_reported_quantiles_agree_with_sample_quantiles_of_kept_samples(tmp_path):
    """The engine bins each variable into 2048 bins (DEVELOPERS.md) over the pilot's range
    (here all samples, n ≤ 2048) padded by a quarter of its span on each side, so a bin is
    w = 1.5·(max − min)/2048 wide.  The reported quantile is interpolated inside the bin that
    holds the ⌈q·n⌉-th smallest value, which is the [HF1996] definition-1 sample quantile; the
    two therefore differ by at most w, plus the float32 rounding (2⁻²³·|x|) of the kept
    samples.  q = 0 and q = 1 are the exact extremes."""
    tol = {
        "thickness_um": {"sigma": 0.5},
        "clocking_deg": {"uniform": 2.0},
        "tilt_deg": {"sigma": 3.0},
        "temperature_c": {"low": 0.0, "high": 40.0},
    }
    qs = [0.0, 0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99, 1.0]
    qwp = {
        "name": "q",
        "construction": "multi-order",
        "material": "quartz",
        "order": 2,
        "waves": 0.25,
        "design": 780.0,
        "axis_deg": 45.0,
    }
    g = run_spec(
        tmp_path,
        [qwp],
        tolerances=tol,
        samples=1500,
        source={"shape": "flat"},
        wavelength=(770.0, 790.0, 5.0),
        goal={"state": "circular", "metric": "extinction_db", "min": 10.0},
        extra={"run": {"quantiles": qs}},
    )
    for var in ("retardance", "axial_ratio", "metric"):
        kept = g[f"sample_{var}"].values[0].astype(float)  # (S, W)
        nominal = g[f"nominal_{var}"].values[0]
        rep = g[f"{var}_quantile"].values[0]  # (Q, W)
        lo = np.minimum(kept.min(axis=0), nominal)
        hi = np.maximum(kept.max(axis=0), nominal)
        w = 1.5 * (hi - lo) / 2048
        for i, q in enumerate(qs):
            emp = np.quantile(kept, q, axis=0, method="inverted_cdf")
            bound = w + 2.0**-22 * np.abs(emp) + 1e-12
            assert np.all(np.abs(rep[i] - emp) <= bound), (var, q)
    # worst-metric quantiles are plain [HF1996] definition-7 quantiles of the per-sample values
    worst = np.sort(g["worst_metric"].values[0])
    h = (len(worst) - 1) * np.array(qs)
    k = np.floor(h).astype(int)
    k1 = np.minimum(k + 1, len(worst) - 1)
    expect = worst[k] + (h - k) * (worst[k1] - worst[k])
    np.testing.assert_allclose(g["worst_metric_quantile"].values[0], expect, rtol=1e-12)


def test_histogram_quantile_is_the_grouped_data_interpolation():
    """The quantile of grouped data, interpolated linearly inside its class (common practice,
    the textbook median of a frequency table): with class j of lower edge L_j = lo + j·h holding
    f_j values and F_{j−1} values below it, Q(q) = L_j + (q·n − F_{j−1})/f_j·h, for the first
    class with F_j ≥ q·n; the result is clamped to the exact [min, max]."""
    rng = np.random.default_rng(1)
    B = 16
    hist = rng.integers(0, 7, size=(2, 3, B))
    hist[..., 3] += 1  # no all-empty row
    lo = rng.normal(size=(2, 3))
    h = rng.uniform(0.1, 2.0, size=(2, 3))
    vmin = lo - 1.0  # wide clamps: the interpolation alone is tested
    vmax = lo + B * h + 1.0
    qs = [0.1, 0.37, 0.5, 0.9]
    got = hist_quantiles(hist, lo, 1.0 / h, vmin, vmax, qs)
    for a in range(2):
        for b in range(3):
            f = hist[a, b]
            F = np.cumsum(f)
            n = F[-1]
            for i, q in enumerate(qs):
                j = int(np.nonzero(F >= q * n)[0][0])
                below = F[j - 1] if j else 0
                expect = lo[a, b] + (j + (q * n - below) / f[j]) * h[a, b]
                assert got[i, a, b] == pytest.approx(expect, rel=1e-12, abs=1e-12)
    # clamping to the exact extremes
    tight = hist_quantiles(hist, lo, 1.0 / h, lo + 0.5 * h, lo + 0.6 * h, [0.0, 0.5, 1.0])
    np.testing.assert_array_equal(tight[0], lo + 0.5 * h)
    np.testing.assert_array_equal(tight[2], lo + 0.6 * h)
    assert np.all((tight[1] >= lo + 0.5 * h) & (tight[1] <= lo + 0.6 * h))


# ----------------------------------------------------------------------------- yield


def test_yield_interval_is_wilson_and_rank_yield_uses_the_fidelity_threshold(tmp_path):
    """[Wilson1927]: centre (p + z²/2n)/(1 + z²/n), half-width
    z·√(p(1 − p)/n + z²/4n²)/(1 + z²/n), z = Φ⁻¹(1/2 + c/2).  For an axial-ratio goal over the
    spectrum the ranking counts the samples whose spectral fidelity (1 + s·g)/2 reaches that of
    a pure state of b/a = m: sin 2χ = 2 tan χ/(1 + tan² χ) = 2m/(1 + m²), so
    f_min = (1 + 2m/(1 + m²))/2 [Hecht, ellipse]."""
    m = 0.9
    qwp = {
        "name": "q",
        "construction": "multi-order",
        "material": "quartz",
        "order": 10,
        "waves": 0.25,
        "design": 780.0,
        "axis_deg": 45.0,
    }
    n = 400
    g = run_spec(
        tmp_path,
        [qwp],
        tolerances={"thickness_um": {"sigma": 4.0}},
        samples=n,
        source={"shape": "gaussian", "center": 780.0, "fwhm": 1.5},
        wavelength=(774.0, 786.0, 0.5),
        goal={"state": "circular", "metric": "axial_ratio", "min": m, "over": "spectrum"},
        keep=False,
    )
    k = int(round(float(g["yield"].values[0]) * n))
    z = norm.ppf(0.975)
    p = k / n
    den = 1 + z * z / n
    centre = (p + z * z / (2 * n)) / den
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
    assert 0 < k < n
    assert float(g["yield_low"].values[0]) == pytest.approx(centre - half, rel=1e-12)
    assert float(g["yield_high"].values[0]) == pytest.approx(centre + half, rel=1e-12)
    s = g["spectral_stokes"].values[0]
    fid = 0.5 * (1 + s[:, 2] * int(g["handedness"].values[0]))
    f_min = 0.5 * (1 + 2 * m / (1 + m * m))
    share = np.mean(fid >= f_min)
    assert 0.05 < share < 0.95  # the threshold lies inside the spread: it is really tested
    assert float(g["rank_yield"].values[0]) == share


# ----------------------------------------------------------------------------- environment


def _kz_roots(n_o, n_e, optic_deg, aoi_deg, poi_deg):
    """Normal components k_z/k₀ of the two forward waves, from det(k kᵀ − |k|² I + ε) = 0
    [Born&Wolf] with ε = n_o² I + (n_e² − n_o²) c cᵀ, c the optic axis (in the face), and the
    tangential k = sin θ (cos φ, sin φ) fixed by Snell's law.  The determinant is a quartic in
    k_z; its coefficients come from 9 exact evaluations (least squares, residual checked)."""
    c = np.array([math.cos(math.radians(optic_deg)), math.sin(math.radians(optic_deg)), 0.0])
    eps = n_o**2 * np.eye(3) + (n_e**2 - n_o**2) * np.outer(c, c)
    s = math.sin(math.radians(aoi_deg))
    kx, ky = s * math.cos(math.radians(poi_deg)), s * math.sin(math.radians(poi_deg))
    x = np.linspace(-2.5, 2.5, 9)
    dets = []
    for kz in x:
        k = np.array([kx, ky, kz])
        dets.append(np.linalg.det(np.outer(k, k) - k @ k * np.eye(3) + eps))
    coef, res, *_ = np.polyfit(x, dets, 4, full=True)
    assert res.size == 0 or res[0] < 1e-20
    r = np.roots(coef)
    r = np.sort(r[(np.abs(r.imag) < 1e-9) & (r.real > 0)].real)
    assert r.size == 2
    return r


def _plate_retardance_waves(layers, lam, aoi, poi, axis):
    """Σ cos 2(θᵢ − θ)·2π·d·|k_z1 − k_z2|/λ over the layers, in waves."""
    total = 0.0
    for la in layers:
        n_o, n_e = (float(v) for v in ref_indices(la.material, lam))
        k1, k2 = _kz_roots(n_o, n_e, la.optic_axis_deg, aoi, poi)
        proj = math.cos(math.radians(2 * (la.axis_deg - axis)))
        total += proj * la.thickness_um * 1e3 * abs(k2 - k1) / lam
    return total


def _acceptance(c, limit):
    """The largest tilt θ with max over the plane of incidence |δ(θ, φ) − δ(0)| ≤ limit."""
    p = ref_plate(c)
    lam = p.design_nm
    d0 = _plate_retardance_waves(p.layers, lam, 0.0, 0.0, p.axis_deg)

    def worst(theta):
        f = [
            abs(_plate_retardance_waves(p.layers, lam, theta, phi, p.axis_deg) - d0)
            for phi in np.arange(0.0, 180.0, 5.0)
        ]
        i = int(np.argmax(f))
        best = minimize_scalar(
            lambda phi: -abs(_plate_retardance_waves(p.layers, lam, theta, phi, p.axis_deg) - d0),
            bounds=(5.0 * i - 5.0, 5.0 * i + 5.0),
            method="bounded",
            options={"xatol": 1e-6},
        )
        return max(f[i], -best.fun)

    return brentq(lambda t: worst(t) - limit, 1e-3, 59.0, xtol=1e-9)


ACCEPTANCE = [
    (
        {
            "construction": "zero-order",
            "material": "quartz",
            "waves": 0.25,
            "design_nm": 780.0,
            "axis_deg": 45.0,
        },
        0.01,
    ),
    (
        {
            "construction": "multi-order",
            "material": "quartz",
            "order": 6,
            "waves": 0.25,
            "design_nm": 633.0,
            "axis_deg": 10.0,
        },
        0.01,
    ),
    (
        {
            "construction": "compound",
            "material": "mgf2",
            "thick_plate_um": 500.0,
            "waves": 0.25,
            "design_nm": 633.0,
            "axis_deg": 0.0,
        },
        0.005,
    ),
    (
        {
            "construction": "zero-order",
            "material": "sapphire",
            "waves": 0.5,
            "design_nm": 1064.0,
            "axis_deg": 30.0,
        },
        0.02,
    ),
]


@pytest.mark.parametrize("c, limit", ACCEPTANCE, ids=["zero", "multi", "compound", "sapphire"])
def test_acceptance_half_angle_matches_the_wave_equation(tmp_path, c, limit):
    """[README] The acceptance half-angle is the largest angle of incidence at which the
    tilt-induced retardance change at the design wavelength stays within the limit for every
    plane of incidence.  Reference: each layer's two normal wave-vector components from the
    wave-equation determinant [Born&Wolf] (not the closed form the engine uses), the worst
    plane of incidence by a 5° scan refined by a bounded search, the angle by Brent's method;
    agreement to 1e-4 relative."""
    expect = _acceptance(c, limit)
    spec_c = {k: v for k, v in c.items() if k not in ("design_nm", "thick_plate_um")}
    spec_c.update(name="p", design=c["design_nm"])
    if "thick_plate_um" in c:
        spec_c["thick_plate"] = c["thick_plate_um"]
    lam = c["design_nm"]
    g = run_spec(
        tmp_path,
        [spec_c],
        samples=8,
        keep=False,
        source={"shape": "laser", "center": lam},
        wavelength=(lam, lam, 1.0),
        goal={
            "state": "circular",
            "metric": "fidelity",
            "min": 0.5,
            "acceptance_limit_waves": limit,
        },
    )
    got = float(g["acceptance_half_angle"].values[0])
    assert 0.5 < expect < 59.0
    assert got == pytest.approx(expect, rel=1e-4)


def test_temperature_coefficient_is_the_sum_of_layer_coefficients(tmp_path):
    """[Etzel2000] δᵢ(T) = δᵢ(T_ref)·(1 + γᵢ(T − T_ref)), so the plate's dδ/dT is exactly
    Σ cos 2(θᵢ − θ)·δᵢ·γᵢ, reported in degrees per kelvin.  An achromat of quartz and MgF2
    (different γ, crossed) checks the signs and the per-layer materials."""
    c = {
        "name": "a",
        "construction": "achromatic",
        "material": "quartz",
        "partner": "mgf2",
        "match": [500.0, 700.0],
        "waves": 0.25,
        "design": 600.0,
        "axis_deg": 0.0,
    }
    g = run_spec(
        tmp_path,
        [c],
        samples=8,
        keep=False,
        source={"shape": "laser", "center": 600.0},
        wavelength=(600.0, 600.0, 1.0),
        goal={"state": "circular", "metric": "fidelity", "min": 0.5},
    )
    p = ref_plate(dict(c, design_nm=600.0, match_nm=[500.0, 700.0]))
    from reference import gamma

    total = 0.0
    for la in p.layers:
        delta_deg = 360.0 * la.thickness_um * 1e3 * abs(float(ref_dn(la.material, 600.0))) / 600.0
        total += (
            math.cos(math.radians(2 * (la.axis_deg - p.axis_deg))) * delta_deg * gamma(la.material)
        )
    assert float(g["temperature_coefficient"].values[0]) == pytest.approx(total, rel=1e-7)
