"""Tests of tolerance.sources: source spectra on the analysis grid.

Outside references used below:

- Numerical quadrature: scipy.integrate.quad (QUADPACK; R. Piessens et al., *QUADPACK*, Springer,
  1983) as an independent reference for every cell integral.
- Gaussian FWHM = 2·sqrt(2 ln 2)·σ and the Lorentzian (Cauchy) cumulative distribution
  1/2 + arctan(2(x − x0)/FWHM)/π: common practice (any statistics or spectroscopy text).
- sech² pulses: time-bandwidth product Δν·Δt ≈ 0.315 for intensity FWHMs — common practice, and
  tabulated in J.-C. Diels and W. Rudolph, *Ultrashort Laser Pulse Phenomena*, 2nd ed., Academic
  Press (2006), chapter 2 (the table number from memory).  Checked here independently by a
  numerical Fourier transform of the field sech(t) (intensity sech²).
- Change of variables of a spectral density, S_λ = S_ν·|dν/dλ| = S_ν·c/λ²: common practice.
- Drift tolerances: JCGM 100:2008 (GUM), *Evaluation of measurement data — Guide to the
  expression of uncertainty in measurement*, 4.3.7 (rectangular distribution of half-width a has
  standard uncertainty a/√3) and 6.2 (expanded uncertainty U = k·u).

The spectra and the CSV files are invented examples.
"""

from __future__ import annotations

import math
import pathlib
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate

from tolerance.errors import RetolError
from tolerance.sources import (
    C_NM_PER_FS,
    SHAPES,
    Spectrum,
    SpectrumWarning,
    build_spectrum,
    cell_edges,
    lorentzian_cells,
    parse_drift,
    parse_duration_fs,
    piecewise_linear_cells,
    sample_drift_nm,
    sample_points,
)

DATA = pathlib.Path(__file__).parent / "data" / "spectra"
GRID = np.linspace(700.0, 1000.0, 301)  # 1 nm step


def total(s: Spectrum) -> float:
    return float(s.grid_weight.sum() + s.line_weight.sum())


def half_max_crossings(x, y):
    """Left and right wavelengths where y crosses half its maximum (linear interpolation)."""
    y = np.asarray(y) / np.max(y)
    above = np.nonzero(y >= 0.5)[0]
    i, j = above[0], above[-1]
    left = np.interp(0.5, [y[i - 1], y[i]], [x[i - 1], x[i]])
    right = np.interp(0.5, [y[j + 1], y[j]], [x[j + 1], x[j]])
    return left, right


# ---------------------------------------------------------------------------------------------
# Cells


def test_cell_edges_midpoints_and_grid_ends():
    # definition of the cells (our contract): midpoints to neighbours, ends at the grid ends
    assert cell_edges([700.0, 710.0, 730.0]).tolist() == [700.0, 705.0, 720.0, 730.0]


def test_registry_lists_every_shape():
    assert set(SHAPES) == {
        "laser",
        "gaussian",
        "lorentzian",
        "sech2",
        "flat",
        "lines",
        "file",
        "mixture",
    }


# ---------------------------------------------------------------------------------------------
# Gaussian


def test_gaussian_power_conserved_and_cells_match_quad():
    # source: Gaussian, centre 840 nm, FWHM 45 nm, on a non-uniform grid
    grid = np.concatenate([np.linspace(700, 800, 11), np.linspace(801, 1000, 400)])
    s = build_spectrum({"shape": "gaussian", "center": "840nm", "fwhm": "45nm"}, grid)
    assert total(s) == pytest.approx(1.0, abs=1e-12)
    assert np.all(s.grid_weight >= 0)
    assert s.lines_nm.size == 0 and s.line_weight.size == 0
    assert s.lost_fraction < 1e-9
    sigma = 45.0 / (2 * math.sqrt(2 * math.log(2)))  # common practice: FWHM = 2 sqrt(2 ln2) sigma

    def pdf(x):
        return math.exp(-0.5 * ((x - 840) / sigma) ** 2) / (sigma * math.sqrt(2 * math.pi))

    e = cell_edges(grid)
    for i in (0, 5, 10, 11, 50, 139, 200, 409):
        ref, _ = integrate.quad(pdf, e[i], e[i + 1], epsabs=1e-15, epsrel=1e-12)
        assert s.grid_weight[i] * (1 - s.lost_fraction) == pytest.approx(ref, rel=1e-9, abs=1e-16)
    assert s.description == "Gaussian, centre 840 nm, FWHM 45 nm"


def test_gaussian_fwhm_recovered_from_density():
    # source: Gaussian, centre 840 nm, FWHM 45 nm on a 0.1 nm grid
    grid = np.linspace(700, 1000, 3001)
    s = build_spectrum({"shape": "gaussian", "center": 840, "fwhm": 45}, grid)
    assert s.density.max() == pytest.approx(1.0)
    left, right = half_max_crossings(grid, s.density)
    assert right - left == pytest.approx(45.0, abs=0.01)
    assert 0.5 * (left + right) == pytest.approx(840.0, abs=0.01)
    assert s.band_nm[0] < 840 - 2 * 45 and s.band_nm[1] > 840 + 2 * 45


def test_gaussian_far_off_grid_raises():
    # source: Gaussian, centre 1500 nm, FWHM 10 nm, grid 700-1000 nm
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "gaussian", "center": "1500nm", "fwhm": 10}, GRID)
    assert err.value.field == "[source].center"
    assert "no power on the analysis grid" in str(err.value)


def test_gaussian_partly_off_grid_warns_and_renormalises():
    # source: Gaussian centred on the grid's upper end: half its power is lost
    with pytest.warns(SpectrumWarning, match="outside the analysis grid"):
        s = build_spectrum({"shape": "gaussian", "center": 1000, "fwhm": 20}, GRID)
    assert s.lost_fraction == pytest.approx(0.5, abs=1e-9)
    assert total(s) == pytest.approx(1.0, abs=1e-12)


def test_narrow_gaussian_between_grid_points_still_plotted():
    # source: Gaussian, FWHM 0.01 nm, centred between two 1 nm grid points
    s = build_spectrum({"shape": "gaussian", "center": 840.5, "fwhm": 0.01}, GRID)
    assert total(s) == pytest.approx(1.0, abs=1e-12)
    assert s.density.max() == 1.0
    assert np.all(np.isfinite(s.density))


def test_continuous_source_needs_two_grid_points():
    with pytest.raises(RetolError, match="at least 2 wavelengths"):
        build_spectrum({"shape": "gaussian", "center": 840, "fwhm": 10}, [840.0])


@settings(max_examples=60, deadline=None, database=None)
@given(
    center=st.floats(min_value=705.0, max_value=995.0),
    fwhm=st.floats(min_value=0.05, max_value=400.0),
)
def test_property_gaussian_weights_nonnegative_and_sum_to_one(center, fwhm):
    # source: Gaussians with random centres inside the grid and random widths
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SpectrumWarning)
        s = build_spectrum({"shape": "gaussian", "center": center, "fwhm": fwhm}, GRID)
    assert np.all(s.grid_weight >= 0)
    assert total(s) == pytest.approx(1.0, abs=1e-12)
    assert 0.0 <= s.lost_fraction < 1.0
    assert np.all(s.density >= 0) and s.density.max() == pytest.approx(1.0)


# ---------------------------------------------------------------------------------------------
# Lorentzian


def test_lorentzian_cells_lost_fraction_and_warning():
    # source: Lorentzian, centre 840 nm, FWHM 5 nm; its long tails leave the 700-1000 nm grid
    with pytest.warns(SpectrumWarning):
        s = build_spectrum({"shape": "lorentzian", "center": 840, "fwhm": "5nm"}, GRID)
    # common practice: Cauchy CDF 1/2 + arctan(2(x-x0)/FWHM)/pi
    inside = (math.atan(2 * (1000 - 840) / 5) - math.atan(2 * (700 - 840) / 5)) / math.pi
    assert s.lost_fraction == pytest.approx(1 - inside, rel=1e-9)
    assert total(s) == pytest.approx(1.0, abs=1e-12)

    def pdf(x):
        return (2.5 / math.pi) / ((x - 840) ** 2 + 2.5**2)

    e = cell_edges(GRID)
    for i in (0, 100, 139, 140, 141, 300):
        ref, _ = integrate.quad(pdf, e[i], e[i + 1], epsabs=1e-15, epsrel=1e-12)
        assert s.grid_weight[i] * inside == pytest.approx(ref, rel=1e-9)
    left, right = half_max_crossings(GRID, s.density)
    assert right - left == pytest.approx(5.0, abs=0.1)  # 1 nm grid, linear interpolation


def test_lorentzian_far_tail_cells_vs_quad():
    # cells far in the tail and cells wider than the line both use the right arctan form
    edges = np.array([-1e4, 0.0, 800.0, 839.0, 841.0, 5000.0, 5001.0, 1e6])
    cells = lorentzian_cells(edges, 840.0, 0.5)
    for i in range(len(edges) - 1):
        ref, _ = integrate.quad(
            lambda x: (0.25 / math.pi) / ((x - 840) ** 2 + 0.0625),
            edges[i],
            edges[i + 1],
            points=[840.0] if edges[i] < 840 < edges[i + 1] else None,
            epsabs=1e-16,
            epsrel=1e-10,
            limit=200,
        )
        assert cells[i] == pytest.approx(ref, rel=1e-7, abs=1e-15)


# ---------------------------------------------------------------------------------------------
# sech² pulse


def test_sech2_time_bandwidth_product_by_fourier_transform():
    # Diels & Rudolph (2006) ch. 2 / common practice: sech^2 pulse, dnu*dt = 0.315.
    # Independent check: field E(t) = sech(1.7627 t/dt) has intensity FWHM dt; FFT it.
    dt = 1.0
    t = np.linspace(-200, 200, 2**16, endpoint=False)
    field = 1 / np.cosh(2 * math.acosh(math.sqrt(2)) * t / dt)
    spec = np.abs(np.fft.fftshift(np.fft.fft(field))) ** 2
    nu = np.fft.fftshift(np.fft.fftfreq(t.size, t[1] - t[0]))
    left, right = half_max_crossings(nu, spec)
    product = (right - left) * dt
    assert product == pytest.approx(0.315, abs=5e-4)
    # and the module's spectrum, taken back to frequency with the inverse Jacobian
    grid = np.linspace(700, 900, 20001)
    s = build_spectrum({"shape": "sech2", "center": "800nm", "duration": "100fs"}, grid)
    nu = C_NM_PER_FS / grid[::-1]  # [1/fs]
    s_nu = (s.density * grid**2 / C_NM_PER_FS)[::-1]
    left, right = half_max_crossings(nu, s_nu)
    assert (right - left) * 100.0 == pytest.approx(0.315, rel=1e-4)


def test_sech2_cells_match_direct_transformation_from_frequency():
    # source: sech^2 pulse, 800 nm, 10 fs (broad: Jacobian matters).  Reference: the power in a
    # wavelength cell [la, lb] is the power of S(nu) between nu = c/lb and c/la (change of
    # variables, common practice), S(nu) ∝ sech^2(1.7627 (nu - nu0)/dnu), dnu = 0.315/dt.
    grid = np.linspace(600, 1100, 501)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SpectrumWarning)
        s = build_spectrum({"shape": "sech2", "center": 800, "duration": 10}, grid)
    nu0, dnu = C_NM_PER_FS / 800, 0.315 / 10
    a = 2 * math.acosh(math.sqrt(2))

    def s_nu(nu):
        return 1 / math.cosh(a * (nu - nu0) / dnu) ** 2

    norm, _ = integrate.quad(s_nu, 0, nu0 + 60 * dnu, points=[nu0], limit=200)
    e = cell_edges(grid)
    for i in (0, 100, 199, 200, 201, 300, 500):
        ref, _ = integrate.quad(s_nu, C_NM_PER_FS / e[i + 1], C_NM_PER_FS / e[i], epsabs=1e-16)
        assert s.grid_weight[i] * (1 - s.lost_fraction) == pytest.approx(ref / norm, rel=1e-8)
    assert total(s) == pytest.approx(1.0, abs=1e-12)


def test_sech2_density_has_jacobian_not_relabelled():
    # source: sech^2 pulse, 800 nm, 10 fs on a 0.05 nm grid
    grid = np.linspace(600, 1100, 10001)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SpectrumWarning)
        s = build_spectrum({"shape": "sech2", "center": "800nm", "duration": "0.01ps"}, grid)
    nu0, dnu = C_NM_PER_FS / 800, 0.315 / 10
    a = 2 * math.acosh(math.sqrt(2))
    relabelled = 1 / np.cosh(a * (C_NM_PER_FS / grid - nu0) / dnu) ** 2
    transformed = relabelled * C_NM_PER_FS / grid**2  # S_lambda = S_nu c / lambda^2
    transformed /= transformed.max()
    np.testing.assert_allclose(s.density, transformed, rtol=1e-9, atol=1e-12)
    assert np.max(np.abs(s.density - relabelled)) > 0.02  # not merely relabelled
    # the Jacobian pulls the peak below 800 nm; the long-wavelength half is wider
    peak = grid[np.argmax(s.density)]
    assert peak < 800.0
    left, right = half_max_crossings(grid, s.density)
    assert right - peak > 1.05 * (peak - left)


def test_parse_duration_units():
    assert parse_duration_fs("100fs", "d") == 100.0
    assert parse_duration_fs("0.1ps", "d") == 100.0
    assert parse_duration_fs("2ns", "d") == 2e6
    assert parse_duration_fs(35, "d") == 35.0
    assert parse_duration_fs(" 12.5 fs ", "d") == 12.5


@pytest.mark.parametrize("bad", [0, -5, "-5fs", "0ps", "10 s", "fast", True, None, "nan fs"])
def test_bad_duration_names_field(bad):
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "sech2", "center": 800, "duration": bad}, GRID)
    assert err.value.field == "[source].duration"


# ---------------------------------------------------------------------------------------------
# Flat


def test_flat_default_is_whole_grid_weights_follow_cell_widths():
    grid = np.array([700.0, 710.0, 730.0, 760.0])
    s = build_spectrum({"shape": "flat"}, grid)
    np.testing.assert_allclose(s.grid_weight, np.diff(cell_edges(grid)) / 60.0)
    assert s.lost_fraction == 0.0
    np.testing.assert_allclose(s.density, 1.0)


def test_flat_partly_off_grid():
    with pytest.warns(SpectrumWarning):
        s = build_spectrum({"shape": "flat", "start": "900nm", "stop": "1.1um"}, GRID)
    assert s.lost_fraction == pytest.approx(0.5)
    assert s.grid_weight[GRID < 899.5].sum() == 0
    assert s.band_nm == (900.0, 1000.0)


def test_flat_stop_before_start():
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "flat", "start": 900, "stop": 800}, GRID)
    assert err.value.field == "[source].stop"


# ---------------------------------------------------------------------------------------------
# Laser and lines


def test_laser_single_line_no_grid_weight():
    s = build_spectrum({"shape": "laser", "center": "780.2nm"}, GRID)
    assert s.lines_nm.tolist() == [780.2]
    assert s.line_weight.tolist() == [1.0]
    assert s.grid_weight.sum() == 0
    assert s.density[np.argmax(s.density)] == 1.0 and GRID[np.argmax(s.density)] == 780.0
    assert s.drift is None
    assert s.band_nm == (780.2, 780.2)


def test_laser_on_single_point_grid():
    s = build_spectrum({"shape": "laser", "center": 632.8}, [632.8])
    assert s.line_weight.tolist() == [1.0] and s.density.tolist() == [1.0]


@pytest.mark.parametrize(
    "drift, kind, std, span",
    [
        ({"sigma": "0.2nm"}, "sigma", 0.2, (-1.0, 1.0)),
        ({"uniform": 0.5}, "uniform", 0.5 / math.sqrt(3), (-0.5, 0.5)),  # GUM 4.3.7
        ({"low": "779nm", "high": "781.5nm"}, "range", 2.5 / math.sqrt(12), (-1.0, 1.5)),
        ({"tolerance": 0.3, "coverage": 3}, "tolerance", 0.1, (-0.5, 0.5)),  # GUM 6.2: U = k u
    ],
)
def test_laser_drift_kinds(drift, kind, std, span):
    # source: 780 nm laser with a drift tolerance
    s = build_spectrum({"shape": "laser", "center": "780nm", "drift": drift}, GRID)
    assert s.drift["kind"] == kind
    assert s.drift["std_nm"] == pytest.approx(std)
    assert s.drift["span_nm"] == pytest.approx(span)
    assert s.drift["given"] == drift
    assert s.band_nm == pytest.approx((780 + span[0], 780 + span[1]))
    offsets = sample_drift_nm(s.drift, 40000, np.random.default_rng(1))
    assert offsets.std() == pytest.approx(std, rel=0.03)
    assert "drift" in s.description


@pytest.mark.parametrize(
    "drift, field",
    [
        ({"sigma": -0.1}, "[source].drift.sigma"),
        ({"sigam": 0.1}, "[source].drift.sigam"),
        ({"sigma": 0.1, "uniform": 0.2}, "[source].drift"),
        ({}, "[source].drift"),
        ({"low": 781, "high": 782}, "[source].drift"),
        ({"low": 779}, "[source].drift.high"),
        ({"coverage": 3}, "[source].drift.tolerance"),
        ({"tolerance": 0.3, "coverage": 0}, "[source].drift.coverage"),
        ("0.2nm", "[source].drift"),
    ],
)
def test_bad_drift(drift, field):
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "laser", "center": 780, "drift": drift}, GRID)
    assert err.value.field == field


def test_drift_tolerance_default_coverage_is_three():
    # our convention, shared with the [tolerances] table: {tolerance = t} means sigma = t/3
    d = parse_drift({"tolerance": "0.3nm"}, "[source].drift", 780.0)
    assert d["coverage"] == 3.0 and d["sigma_nm"] == pytest.approx(0.1)


def test_drift_suggests_close_key():
    with pytest.raises(RetolError, match="did you mean 'sigma'"):
        parse_drift({"sigam": 0.1}, "[source].drift", 780.0)


def test_lines_with_powers_rgb():
    # source: an RGB laser module, lines at 450.2, 520 and 638 nm with powers 1 : 2 : 1
    grid = np.arange(400.0, 701.0, 1.0)
    src = {
        "shape": "lines",
        "lines": [
            {"at": "450.2nm", "power": 1},
            {"at": "520nm", "power": 2},
            {"at": "0.638um", "power": 1.0},
        ],
    }
    s = build_spectrum(src, grid)
    np.testing.assert_allclose(s.lines_nm, [450.2, 520.0, 638.0])
    np.testing.assert_allclose(s.line_weight, [0.25, 0.5, 0.25])
    assert total(s) == pytest.approx(1.0, abs=1e-15)
    assert s.grid_weight.sum() == 0
    d = dict(zip(grid.tolist(), s.density.tolist(), strict=True))
    assert (d[450.0], d[520.0], d[638.0]) == pytest.approx((0.5, 1.0, 0.5))
    assert np.count_nonzero(s.density) == 3
    wl, w = sample_points(s)
    assert wl.tolist() == pytest.approx([450.2, 520.0, 638.0]) and w.sum() == pytest.approx(1.0)


def test_line_outside_grid_is_lost_with_warning():
    src = {"shape": "lines", "lines": [{"at": 800, "power": 3}, {"at": 1064, "power": 1}]}
    with pytest.warns(SpectrumWarning, match="25%"):
        s = build_spectrum(src, GRID)
    assert s.lines_nm.tolist() == [800.0] and s.line_weight.tolist() == [1.0]
    assert s.lost_fraction == pytest.approx(0.25)


@pytest.mark.parametrize(
    "lines, field",
    [
        ([], "[source].lines"),
        ("450nm", "[source].lines"),
        ([{"at": 450}], "[source].lines[0].power"),
        ([{"at": 450, "power": 1}, {"at": 520, "power": -1}], "[source].lines[1].power"),
        ([{"at": 450, "pwr": 1}], "[source].lines[0].pwr"),
        ([{"at": "blue", "power": 1}], "[source].lines[0].at"),
    ],
)
def test_bad_lines(lines, field):
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "lines", "lines": lines}, GRID)
    assert err.value.field == field


def test_laser_off_grid_raises():
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "laser", "center": "1550nm"}, GRID)
    assert err.value.field == "[source].center"


# ---------------------------------------------------------------------------------------------
# Measured spectrum file


def test_file_unsorted_rows_sorted_and_power_conserved():
    # source: tests/data/spectra/sld_840_measured.csv (invented; rows out of order, header,
    # comments).  Reference: quad of the linear interpolant of the sorted rows.
    raw = np.loadtxt(DATA / "sld_840_measured.csv", delimiter=",", skiprows=4)
    assert np.any(np.diff(raw[:, 0]) < 0)  # really unsorted
    x, p = raw[np.argsort(raw[:, 0])].T
    grid = np.linspace(760.0, 920.0, 161)
    s = build_spectrum({"shape": "file", "path": "sld_840_measured.csv"}, grid, base_dir=DATA)
    assert s.lost_fraction == pytest.approx(0.0, abs=1e-12)
    assert total(s) == pytest.approx(1.0, abs=1e-12)
    norm, _ = integrate.quad(lambda v: np.interp(v, x, p), x[0], x[-1], points=x, limit=500)
    e = cell_edges(grid)
    for i in (0, 10, 11, 40, 82, 83, 120, 150, 160):
        ref, _ = integrate.quad(
            lambda v: np.interp(v, x, p, left=0, right=0),
            e[i],
            e[i + 1],
            points=x[(x > e[i]) & (x < e[i + 1])],
            epsabs=1e-14,
        )
        assert s.grid_weight[i] == pytest.approx(ref / norm, rel=1e-9, abs=1e-15)
    assert "sld_840_measured.csv" in s.description
    assert s.density.max() == 1.0


def test_file_partly_on_grid_loses_power():
    raw = np.loadtxt(DATA / "sld_840_measured.csv", delimiter=",", skiprows=4)
    x, p = raw[np.argsort(raw[:, 0])].T
    grid = np.linspace(850.0, 1000.0, 151)
    path = DATA / "sld_840_measured.csv"  # absolute path: base_dir unused
    with pytest.warns(SpectrumWarning):
        s = build_spectrum({"shape": "file", "path": str(path)}, grid, base_dir=pathlib.Path("/"))
    below, _ = integrate.quad(lambda v: np.interp(v, x, p), x[0], 850.0, points=x, limit=500)
    norm, _ = integrate.quad(lambda v: np.interp(v, x, p), x[0], x[-1], points=x, limit=500)
    assert s.lost_fraction == pytest.approx(below / norm, rel=1e-9)
    assert total(s) == pytest.approx(1.0, abs=1e-12)


def test_piecewise_linear_cells_exact():
    cells = piecewise_linear_cells([0.0, 0.5, 1.5, 3.0, 5.0], [0.0, 1.0, 2.0], [0.0, 2.0, 0.0])
    # triangle of base 2 and height 2 (area 2); pieces by hand: 0.25, 1.5, 0.25, 0
    np.testing.assert_allclose(cells, [0.25, 1.5, 0.25, 0.0])


def write(tmp_path, text, name="s.csv"):
    f = tmp_path / name
    f.write_text(text)
    return f


@pytest.mark.parametrize(
    "text, match",
    [
        ("wavelength_nm,power\n800,1\n810,nan\n820,1\n", "not finite"),
        ("800,1\n810,-0.2\n820,1\n", "negative power"),
        ("800,1\n810,2\n810,3\n820,1\n", "repeats the wavelength 810"),
        ("1200,1\n1300,2\n", "outside the analysis grid"),
        ("# one row only\nwavelength_nm,power\n800,1\n", "1 data row"),
        ("", "0 data row"),
        ("800,1\n810,abc\n", "line 2"),
        ("800,1,3\n810,2,4\n", "expected 2 columns"),
        ("800,0\n810,0\n", "all powers are zero"),
        ("-5,1\n810,1\n", "wavelength must be positive"),
    ],
)
def test_bad_file_names_source_path(tmp_path, text, match):
    f = write(tmp_path, text)
    with pytest.raises(RetolError, match=match) as err:
        build_spectrum({"shape": "file", "path": f.name}, GRID, base_dir=tmp_path)
    assert err.value.field == "[source].path"
    assert str(err.value).startswith("[source].path: ")
    assert err.value.fix


def test_missing_file_names_source_path(tmp_path):
    with pytest.raises(RetolError, match="no such file") as err:
        build_spectrum({"shape": "file", "path": "nowhere.csv"}, GRID, base_dir=tmp_path)
    assert err.value.field == "[source].path"


def test_file_header_optional_semicolons_and_comments(tmp_path):
    f = write(tmp_path, "# exported\n900;1\n800;1\n\n# mid comment\n850;1\n")
    s = build_spectrum({"shape": "file", "path": f.name}, GRID, base_dir=tmp_path)
    assert total(s) == pytest.approx(1.0, abs=1e-12)
    assert s.grid_weight[(GRID < 800) | (GRID > 900)].sum() == 0
    assert s.band_nm[0] >= 800 and s.band_nm[1] <= 900


# ---------------------------------------------------------------------------------------------
# Mixture


def test_mixture_white_led_matches_weighted_parts():
    # source: a phosphor-converted white LED = blue Gaussian (450 nm, FWHM 20 nm, power 1) +
    # broad phosphor band (560 nm, FWHM 110 nm, power 3), on a 380-780 nm grid
    grid = np.arange(380.0, 781.0, 1.0)
    blue = {"shape": "gaussian", "center": "450nm", "fwhm": "20nm"}
    phosphor = {"shape": "gaussian", "center": "560nm", "fwhm": "110nm"}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SpectrumWarning)
        mix = build_spectrum(
            {"shape": "mixture", "parts": [{**blue, "power": 1}, {**phosphor, "power": 3}]}, grid
        )
        b = build_spectrum(blue, grid)
        p = build_spectrum(phosphor, grid)
    on_b, on_p = 0.25 * (1 - b.lost_fraction), 0.75 * (1 - p.lost_fraction)
    expect = (on_b * b.grid_weight + on_p * p.grid_weight) / (on_b + on_p)
    np.testing.assert_allclose(mix.grid_weight, expect, rtol=1e-12, atol=1e-15)
    assert mix.lost_fraction == pytest.approx(0.25 * b.lost_fraction + 0.75 * p.lost_fraction)
    assert total(mix) == pytest.approx(1.0, abs=1e-12)
    assert mix.grid_weight[grid < 480].sum() > 0.2  # the blue pump is about a quarter
    assert mix.shape == "mixture" and mix.description.startswith("Mixture: 25% Gaussian")


def test_mixture_with_a_laser_line():
    src = {
        "shape": "mixture",
        "parts": [
            {"shape": "flat", "power": 1},
            {"shape": "laser", "center": 850, "power": 1},
        ],
    }
    s = build_spectrum(src, GRID)
    assert s.line_weight.tolist() == pytest.approx([0.5])
    assert s.grid_weight.sum() == pytest.approx(0.5)
    assert total(s) == pytest.approx(1.0, abs=1e-15)
    assert s.density.max() == 1.0 and GRID[np.argmax(s.density)] == 850.0
    wl, w = sample_points(s)
    assert w.sum() == pytest.approx(1.0) and wl.size == GRID.size + 1


@pytest.mark.parametrize(
    "parts, field",
    [
        ([], "[source].parts"),
        ([{"shape": "gaussian", "center": 840, "fwhm": 10}], "[source].parts[0].power"),
        ([{"shape": "mixture", "parts": [], "power": 1}], "[source].parts[0].shape"),
        (
            [{"shape": "laser", "center": 840, "drift": {"sigma": 1}, "power": 1}],
            "[source].parts[0].drift",
        ),
        ([{"shape": "gaussian", "center": 840, "fwhm": 0, "power": 1}], "[source].parts[0].fwhm"),
        ([{"shape": "flat", "power": 0}], "[source].parts[0].power"),
        (["gaussian"], "[source].parts[0]"),
    ],
)
def test_bad_mixture(parts, field):
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "mixture", "parts": parts}, GRID)
    assert err.value.field == field


# ---------------------------------------------------------------------------------------------
# User mistakes in the table


@pytest.mark.parametrize("fwhm", [0, -3, "0nm", "-1nm", "wide", "45 furlongs"])
@pytest.mark.parametrize("shape", ["gaussian", "lorentzian"])
def test_bad_fwhm_names_field(shape, fwhm):
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": shape, "center": 840, "fwhm": fwhm}, GRID)
    assert err.value.field == "[source].fwhm"


def test_unknown_shape_suggests_closest():
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "gausian", "center": 840, "fwhm": 10}, GRID)
    assert err.value.field == "[source].shape"
    assert "did you mean 'gaussian'" in str(err.value)
    assert "known shapes: laser, gaussian, lorentzian, sech2, flat, lines, file, mixture" in str(
        err.value
    )


def test_unknown_key_suggests_closest():
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "gaussian", "centre": 840, "fwhm": 10}, GRID)
    assert err.value.field == "[source].centre"
    assert "did you mean 'center'" in str(err.value)


def test_key_of_another_shape_rejected():
    with pytest.raises(RetolError) as err:
        build_spectrum({"shape": "laser", "center": 840, "fwhm": 10}, GRID)
    assert err.value.field == "[source].fwhm"


@pytest.mark.parametrize(
    "src, field",
    [
        ({"shape": "gaussian", "center": 840}, "[source].fwhm"),
        ({"shape": "sech2", "duration": "50fs"}, "[source].center"),
        ({"center": 840}, "[source].shape"),
        ({"shape": "file"}, "[source].path"),
    ],
)
def test_missing_key(src, field):
    with pytest.raises(RetolError) as err:
        build_spectrum(src, GRID)
    assert err.value.field == field
    assert err.value.fix


def test_shape_is_case_insensitive_and_arrays_read_only():
    s = build_spectrum({"shape": " Gaussian ", "center": 840, "fwhm": 10}, GRID)
    assert s.shape == "gaussian"
    with pytest.raises(ValueError):
        s.grid_weight[0] = 1.0


def test_bad_grid():
    with pytest.raises(RetolError, match="strictly increasing"):
        build_spectrum({"shape": "flat"}, [800.0, 700.0])
