"""A synthetic results grid that follows the schema of ``retol run`` (notes/GRID.md).

The numbers are invented but plausible: quarter-wave plates of a made-up birefringent crystal
(zero-order, multi-order and a two-crystal achromat) turning light linear at −45° into
right-circular light, graded by the extinction ratio toward the goal state.  The report tests
use it so that they need neither the Monte Carlo engine nor the material data.

The plate model is deliberately crude (retardance scaled by thickness and temperature errors,
a quadratic tilt term); only its shape matters for plotting.  The output Stokes vector uses the
project's conventions: J = R(−θ)·diag(e^{−iδ/2}, e^{+iδ/2})·R(θ), S3 = 2·Im(Ex·Ey*).
"""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

#: (name, construction, layers [(material, thickness um, axis deg)], thermal coefficient [1/K])
_PLATES = [
    ("qwp-zero", "zero-order", [("crystal-a", 15.43, 0.0)], -1.1e-4),
    ("qwp-multi", "multi-order", [("crystal-a", 77.2, 0.0)], -1.1e-4),
    ("qwp-achro", "achromatic", [("crystal-a", 352.0, 0.0), ("crystal-b", 281.5, 90.0)], -4.0e-5),
]
_TOLERANCES = ["thickness", "clocking", "tilt", "temperature"]
_DESIGN_NM = 550.0
_GOAL_MIN_DB = 25.0
_CAP_DB = 150.0


def _retardance(construction: str, wl: np.ndarray, design: float) -> np.ndarray:
    """Nominal retardance [waves] of an invented quarter-wave plate vs wavelength [nm]."""
    x = design / wl
    if construction == "zero-order":
        return 0.25 * x * (1 + 0.012 * (x - 1))
    if construction == "multi-order":
        return 1.25 * x * (1 + 0.012 * (x - 1))
    return 0.25 * (1 + 0.6 * (wl / design - 1) ** 2)


def _stokes(delta_waves, axis_deg, input_deg):
    """Normalised output Stokes (..., 3) of a linear retarder lit by linear light."""
    d = 2 * np.pi * np.asarray(delta_waves)
    t = np.radians(axis_deg)
    a = np.radians(input_deg)
    ex0, ey0 = np.cos(a), np.sin(a)
    c, s = np.cos(t), np.sin(t)
    # R(theta) E, then the diagonal phases, then R(-theta)
    u = c * ex0 + s * ey0
    v = -s * ex0 + c * ey0
    u = u * np.exp(-0.5j * d)
    v = v * np.exp(0.5j * d)
    ex = c * u - s * v
    ey = s * u + c * v
    s0 = np.abs(ex) ** 2 + np.abs(ey) ** 2
    s1 = (np.abs(ex) ** 2 - np.abs(ey) ** 2) / s0
    s2 = 2 * np.real(ex * np.conj(ey)) / s0
    s3 = 2 * np.imag(ex * np.conj(ey)) / s0
    return np.stack(np.broadcast_arrays(s1, s2, s3), axis=-1)


def _extinction_db(s, goal):
    f = 0.5 * (1 + np.sum(s * goal, axis=-1))
    lo = 10.0 ** (-_CAP_DB / 10)
    return 10 * np.log10(np.maximum(f, lo) / np.maximum(1 - f, lo))


def _wilson(k, n, z=1.959964):
    p = k / n
    den = 1 + z * z / n
    mid = (p + z * z / (2 * n)) / den
    half = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
    return max(0.0, mid - half), min(1.0, mid + half)


def _spectral_state(s_avg):
    """(axial ratio b/a, azimuth [deg]) of the polarized part of averaged Stokes vectors."""
    p = np.linalg.norm(s_avg, axis=-1)
    s3 = np.clip(s_avg[..., 2] / np.where(p > 0, p, 1.0), -1, 1)
    ar = np.abs(np.tan(0.5 * np.arcsin(s3)))
    az = np.degrees(0.5 * np.arctan2(s_avg[..., 1], s_avg[..., 0]))
    return ar, az


SPEC_TOML = """# Invented test scenario: a green LED made right-circular.
title = "Green LED quarter-wave plate trade study (synthetic)"

[goal]
state = "circular"
handedness = "right"
metric = "extinction_db"
min = 25.0   # dB
"""


def synthetic_grid(n_candidates: int = 3, n_samples: int = 200, broadband: bool = True,
                   seed: int = 7, over: str = "band", spec_toml: str = SPEC_TOML) -> xr.Dataset:
    """A results grid with invented values that follows the schema of notes/GRID.md.

    Parameters
    ----------
    n_candidates : int
        Number of candidate plates (the three invented designs repeat with a suffix).
    n_samples : int
        Monte Carlo samples per candidate.
    broadband : bool
        True: a 500–600 nm source on 41 wavelengths; False: a single 550 nm laser line.
    seed : int
        Seed of the invented tolerance draws.
    over : {"band", "spectrum"}
        Goal judged at the worst wavelength of the band, or on the source-averaged output.
    spec_toml : str
        Text of the spec "as the user wrote it" (attr ``spec_toml``; "" as in old grids).
    """
    rng = np.random.default_rng(seed)
    goal_over = over
    if broadband:
        wl = np.linspace(520.0, 580.0, 41)
        spectrum = np.exp(-0.5 * ((wl - 548.0) / 12.0) ** 2)
    else:
        wl = np.array([_DESIGN_NM])
        spectrum = np.ones(1)
    weight = spectrum / spectrum.sum()
    quantiles = np.array([0.01, 0.05, 0.5, 0.95, 0.99])
    goal = np.array([0.0, 0.0, 1.0])
    input_deg = -45.0
    t_ref = 20.0
    temps = np.arange(-10.0, 50.1, 5.0)
    tilts = np.arange(0.0, 10.1, 1.0)
    tilt_az = np.arange(0.0, 360.0, 15.0)

    plates = [_PLATES[i % len(_PLATES)] for i in range(n_candidates)]
    names = [p[0] if i < len(_PLATES) else f"{p[0]}-{i // len(_PLATES) + 1}"
             for i, p in enumerate(plates)]
    max_layers = max(len(p[2]) for p in plates)
    n_c, n_w, n_s, n_t = n_candidates, wl.size, n_samples, len(_TOLERANCES)
    i_design = int(np.argmin(np.abs(wl - _DESIGN_NM)))

    draws = {
        "thickness": rng.normal(0.0, 0.03, (n_c, n_s)),      # relative
        "clocking": rng.normal(0.0, 1.5, (n_c, n_s)),         # deg
        "tilt": np.abs(rng.normal(0.0, 3.0, (n_c, n_s))),     # deg
        "temperature": rng.uniform(-8.0, 8.0, (n_c, n_s)),    # K from reference
    }

    def sample_metric(c, active):
        _, construction, _, kappa = plates[c]
        nom = _retardance(construction, wl, _DESIGN_NM)
        scale = 1.0
        if "thickness" in active:
            scale = scale + draws["thickness"][c][:, None]
        if "temperature" in active:
            scale = scale + kappa * draws["temperature"][c][:, None]
        delta = nom[None, :] * scale
        if "tilt" in active:
            delta = delta * (1 + 0.2 * np.radians(draws["tilt"][c][:, None]) ** 2)
        axis = draws["clocking"][c][:, None] if "clocking" in active else 0.0
        s = _stokes(delta, axis, input_deg)
        return delta, s, _extinction_db(s, goal)

    shape_cw = (n_c, n_w)
    v = {k: np.zeros(shape_cw) for k in ("ret", "ar", "az", "met")}
    nominal_stokes = np.zeros((n_c, n_w, 3))
    q = {k: np.zeros((n_c, quantiles.size, n_w)) for k in ("ret", "ar", "az", "met")}
    ret_mean, ret_std = np.zeros(shape_cw), np.zeros(shape_cw)
    worst, spectral, dop = (np.zeros((n_c, n_s)) for _ in range(3))
    spectral_stokes = np.zeros((n_c, n_s, 3))
    nominal_spectral_stokes = np.zeros((n_c, 3))
    design_stokes = np.zeros((n_c, n_s, 3))
    nominal_worst, nominal_spec, nominal_dop = (np.zeros(n_c) for _ in range(3))
    yld, ylo, yhi = (np.zeros(n_c) for _ in range(3))
    alone, without = np.zeros((n_c, n_t)), np.zeros((n_c, n_t))
    dominant = []
    err_temp = np.zeros((n_c, temps.size))
    err_tilt = np.zeros((n_c, tilts.size, tilt_az.size))
    accept, tcoef = np.zeros(n_c), np.zeros(n_c)
    acceptance_limit = 0.01

    for c, (_, construction, _, kappa) in enumerate(plates):
        nom = _retardance(construction, wl, _DESIGN_NM)
        s_nom = _stokes(nom, 0.0, input_deg)
        m_nom = _extinction_db(s_nom, goal)
        v["ret"][c], v["met"][c] = nom, m_nom
        chi = 0.5 * np.arcsin(np.clip(s_nom[:, 2], -1, 1))
        v["ar"][c] = np.abs(np.tan(chi))
        v["az"][c] = np.degrees(0.5 * np.arctan2(s_nom[:, 1], s_nom[:, 0]))
        nominal_stokes[c] = s_nom
        nominal_worst[c] = m_nom.min()
        s_avg = np.sum(weight[:, None] * s_nom, axis=0)
        nominal_dop[c] = np.linalg.norm(s_avg)
        nominal_spec[c] = _extinction_db(s_avg, goal)
        nominal_spectral_stokes[c] = s_avg

        delta, s, met = sample_metric(c, set(_TOLERANCES))
        chi_s = 0.5 * np.arcsin(np.clip(s[..., 2], -1, 1))
        az_s = np.degrees(0.5 * np.arctan2(s[..., 1], s[..., 0]))
        for key, arr in (("ret", delta), ("ar", np.abs(np.tan(chi_s))), ("az", az_s),
                         ("met", met)):
            q[key][c] = np.quantile(arr, quantiles, axis=0)
        ret_mean[c], ret_std[c] = delta.mean(axis=0), delta.std(axis=0)
        worst[c] = met.min(axis=1)
        s_avg = np.einsum("w,swk->sk", weight, s)
        dop[c] = np.linalg.norm(s_avg, axis=1)
        spectral[c] = _extinction_db(s_avg, goal)
        spectral_stokes[c] = s_avg
        design_stokes[c] = s[:, i_design, :]
        passing = spectral[c] if goal_over == "spectrum" else worst[c]
        k = int(np.sum(passing >= _GOAL_MIN_DB))
        yld[c] = k / n_s
        ylo[c], yhi[c] = _wilson(k, n_s)
        for j, name in enumerate(_TOLERANCES):
            alone[c, j] = np.mean(sample_metric(c, {name})[2].min(axis=1) >= _GOAL_MIN_DB)
            rest = set(_TOLERANCES) - {name}
            without[c, j] = np.mean(sample_metric(c, rest)[2].min(axis=1) >= _GOAL_MIN_DB)
        effect = without[c] - yld[c]
        dominant.append(_TOLERANCES[int(np.argmax(effect))] if effect.max() > 0 else "none")

        r0 = nom[i_design]
        err_temp[c] = r0 * kappa * (temps - t_ref)
        th = np.radians(tilts)[:, None]
        phi = np.radians(tilt_az)[None, :]
        err_tilt[c] = r0 * th**2 * (0.30 * np.cos(2 * phi) - 0.08)
        worst_tilt = np.abs(err_tilt[c]).max(axis=1)
        over = np.nonzero(worst_tilt > acceptance_limit)[0]
        if over.size:
            j = over[0]
            accept[c] = np.interp(acceptance_limit, worst_tilt[j - 1:j + 1], tilts[j - 1:j + 1])
        else:
            accept[c] = tilts[-1]
        tcoef[c] = 360.0 * r0 * kappa

    pass_metric = spectral if goal_over == "spectrum" else worst
    spec_ar, spec_az = _spectral_state(spectral_stokes)
    nom_ar, nom_az = _spectral_state(nominal_spectral_stokes)
    order = np.argsort(-yld, kind="stable")
    rank = np.empty(n_c, dtype=int)
    rank[order] = np.arange(1, n_c + 1)
    reason = [
        f"yield {yld[c]:.1%} (95 % CI {ylo[c]:.1%}–{yhi[c]:.1%}); "
        + ("highest yield" if rank[c] == 1 else f"ranked {rank[c]} by yield")
        for c in range(n_c)
    ]

    layer_material = np.full((n_c, max_layers), "", dtype=object)
    layer_thickness = np.full((n_c, max_layers), np.nan)
    layer_axis = np.full((n_c, max_layers), np.nan)
    for c, (_, _, layers, _) in enumerate(plates):
        for j, (mat, t, ax) in enumerate(layers):
            layer_material[c, j], layer_thickness[c, j], layer_axis[c, j] = mat, t, ax

    spec = {
        "title": "Green LED quarter-wave plate trade study (synthetic)",
        "source": {"kind": "gaussian", "center": "548nm", "fwhm": "28nm"} if broadband
        else {"kind": "line", "wavelength": "550nm"},
        "band": {"start": f"{wl[0]:g}nm", "stop": f"{wl[-1]:g}nm", "points": int(n_w)},
        "input": {"state": "linear", "azimuth": input_deg},
        "goal": {"state": "circular", "handedness": "right", "metric": "extinction",
                 "min": _GOAL_MIN_DB, "over": goal_over},
        "reference_temperature": t_ref,
        "candidates": [
            {"name": n, "construction": p[1], "waves": 0.25, "design": f"{_DESIGN_NM:g}nm"}
            for n, p in zip(names, plates, strict=True)
        ],
        "tolerances": {
            "thickness": {"distribution": "normal", "sigma": "3 %"},
            "clocking": {"distribution": "normal", "sigma": "1.5 deg"},
            "tilt": {"distribution": "half-normal", "sigma": "3 deg"},
            "temperature": {"distribution": "uniform", "low": "12 degC", "high": "28 degC"},
        },
        "samples": n_samples,
        "seed": seed,
    }
    materials = [
        {"name": "crystal-a", "source": "invented test data (no publication)",
         "thermal_source": "invented test data"},
        {"name": "crystal-b", "source": "invented test data (no publication)",
         "thermal_source": "invented test data"},
    ]

    def da(dims, data, units, long_name, **extra):
        return xr.DataArray(data, dims=dims, attrs={"units": units, "long_name": long_name,
                                                   **extra})

    C, W, Q, S, T, K, L = ("candidate", "wavelength", "quantile", "sample", "tolerance_name",
                           "stokes", "layer")
    metric_units = "dB"
    ds = xr.Dataset(
        {
            "source_spectrum": da((W,), spectrum, "1", "relative spectral power density"),
            "source_weight": da((W,), weight, "1", "fraction of source power per grid cell"),
            "construction": da((C,), np.array([p[1] for p in plates], dtype=object), "",
                               "plate construction"),
            "design_wavelength": da((C,), np.full(n_c, _DESIGN_NM), "nm", "design wavelength"),
            "target_waves": da((C,), np.full(n_c, 0.25), "waves", "target retardance"),
            "layer_material": da((C, L), layer_material, "", "layer material"),
            "layer_thickness": da((C, L), layer_thickness, "um", "layer thickness"),
            "layer_axis": da((C, L), layer_axis, "deg", "layer fast-axis angle"),
            "nominal_retardance": da((C, W), v["ret"], "waves", "nominal retardance"),
            "nominal_axial_ratio": da((C, W), v["ar"], "1", "nominal axial ratio"),
            "nominal_azimuth": da((C, W), v["az"], "deg", "nominal azimuth"),
            "nominal_metric": da((C, W), v["met"], metric_units, "nominal extinction ratio"),
            "nominal_stokes": da((C, W, K), nominal_stokes, "1", "nominal output Stokes"),
            "retardance_quantile": da((C, Q, W), q["ret"], "waves", "retardance quantile"),
            "axial_ratio_quantile": da((C, Q, W), q["ar"], "1", "axial ratio quantile"),
            "azimuth_quantile": da((C, Q, W), q["az"], "deg", "azimuth quantile"),
            "metric_quantile": da((C, Q, W), q["met"], metric_units, "extinction quantile"),
            "retardance_mean": da((C, W), ret_mean, "waves", "mean retardance"),
            "retardance_std": da((C, W), ret_std, "waves", "retardance standard deviation"),
            "worst_metric": da((C, S), worst, metric_units, "worst extinction in band"),
            "spectral_metric": da((C, S), spectral, metric_units, "source-weighted extinction"),
            "spectral_dop": da((C, S), dop, "1", "degree of polarization of averaged output"),
            "pass_metric": da((C, S), pass_metric, metric_units, "metric of the pass test"),
            "spectral_stokes": da((C, S, K), spectral_stokes, "1",
                                  "source-averaged normalised Stokes vector of each sample"),
            "spectral_axial_ratio": da((C, S), spec_ar, "1",
                                       "axial ratio of the polarized part of the averaged output"),
            "spectral_azimuth": da((C, S), spec_az, "deg",
                                   "azimuth of the polarized part of the averaged output"),
            "spectral_extinction": da((C, S), spectral, "dB",
                                      "extinction ratio of the averaged output"),
            "nominal_spectral_axial_ratio": da((C,), nom_ar, "1",
                                               "nominal axial ratio of the averaged output"),
            "nominal_spectral_azimuth": da((C,), nom_az, "deg",
                                           "nominal azimuth of the averaged output"),
            "nominal_spectral_extinction": da((C,), nominal_spec, "dB",
                                              "nominal extinction ratio of the averaged output"),
            "handedness": da((C,), np.ones(n_c, dtype=int), "1",
                             "goal sense: +1 right, -1 left"),
            "design_stokes": da((C, S, K), design_stokes, "1",
                                "output Stokes at the design wavelength"),
            "nominal_worst": da((C,), nominal_worst, metric_units, "nominal worst metric"),
            "nominal_spectral_metric": da((C,), nominal_spec, metric_units,
                                          "nominal source-weighted metric"),
            "nominal_dop": da((C,), nominal_dop, "1", "nominal degree of polarization"),
            "worst_metric_quantile": da((C, Q), np.quantile(worst, quantiles, axis=1).T,
                                        metric_units, "worst metric quantile"),
            "pass_metric_quantile": da((C, Q), np.quantile(pass_metric, quantiles, axis=1).T,
                                       metric_units, "pass metric quantile"),
            "dop_quantile": da((C, Q), np.quantile(dop, quantiles, axis=1).T, "1",
                               "degree of polarization quantile"),
            "yield": da((C,), yld, "1", "yield", confidence=0.95, method="Wilson score"),
            "yield_low": da((C,), ylo, "1", "yield lower confidence bound"),
            "yield_high": da((C,), yhi, "1", "yield upper confidence bound"),
            "rank_yield": da((C,), yld.copy(), "1", "yield the ranking uses"),
            "sensitivity_alone": da((C, T), alone, "1", "yield with only this tolerance"),
            "sensitivity_without": da((C, T), without, "1", "yield with all but this tolerance"),
            "dominant": da((C,), np.array(dominant, dtype=object), "", "dominant tolerance"),
            "retardance_error_temperature": da((C, "temperature"), err_temp, "waves",
                                               "retardance error vs temperature"),
            "retardance_error_tilt": da((C, "tilt", "tilt_azimuth"), err_tilt, "waves",
                                        "retardance error vs tilt"),
            "acceptance_half_angle": da((C,), accept, "deg", "acceptance half-angle"),
            "temperature_coefficient": da((C,), tcoef, "deg/K", "retardance temperature "
                                          "coefficient"),
            "rank": da((C,), rank, "1", "rank (1 = best)"),
            "reason": da((C,), np.array(reason, dtype=object), "", "reason for the rank"),
        },
        coords={
            C: da((C,), np.array(names, dtype=object), "", "candidate plate"),
            W: da((W,), wl, "nm", "vacuum wavelength"),
            Q: da((Q,), quantiles, "1", "quantile"),
            S: da((S,), np.arange(n_s), "1", "Monte Carlo sample"),
            T: da((T,), np.array(_TOLERANCES, dtype=object), "", "tolerance"),
            K: da((K,), np.array(["s1", "s2", "s3"], dtype=object), "1", "Stokes component"),
            L: da((L,), np.arange(max_layers), "1", "layer index"),
            "temperature": da(("temperature",), temps, "degC", "plate temperature"),
            "tilt": da(("tilt",), tilts, "deg", "angle of incidence"),
            "tilt_azimuth": da(("tilt_azimuth",), tilt_az, "deg",
                               "plane-of-incidence azimuth from the fast axis"),
        },
        attrs={
            "title": spec["title"],
            "spec": json.dumps(spec),
            "spec_path": "examples/green_led_qwp.toml",
            "spec_toml": spec_toml,
            "seed": seed,
            "samples": n_samples,
            "version": "0.1.0",
            "material_sources": json.dumps(materials),
            "goal_state": "circular",
            "goal_metric": "extinction",
            "goal_min": _GOAL_MIN_DB,
            "goal_over": goal_over,
            "metric_units": metric_units,
            "metric_long_name": "extinction ratio toward the goal state",
            "source_description": "Gaussian LED, 548 nm centre, 28 nm FWHM" if broadband
            else "single line at 550 nm",
            "confidence": 0.95,
            "command": f"retol run examples/green_led_qwp.toml --samples {n_samples} "
                       f"--seed {seed} --out results",
            "acceptance_limit_waves": acceptance_limit,
            "nominal_temperature_c": 25.0,
            "laser_caution": "Predicted polarization only; follow local laser safety rules.",
        },
    )
    return ds
