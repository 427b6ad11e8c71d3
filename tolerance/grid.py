"""The results grid: an xarray Dataset with units and long names, saved as NetCDF.

Dimensions are physical axes: ``candidate``, ``wavelength`` [nm], ``quantile``, ``sample``,
``tolerance``, ``stokes``, ``layer``, ``temperature`` [°C], ``tilt`` and ``tilt_azimuth`` [deg].
Global attributes hold the spec (JSON), the seed, the package version and the material sources.
"""

from __future__ import annotations

import dataclasses
import json
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from .decision import goal_rule, meets_goal, rank, recommended
from .environment import (
    acceptance_half_angle,
    temperature_coefficient,
    temperature_error,
    tilt_error,
)
from .metrics import METRICS
from .montecarlo import transmission
from .safety import caution
from .tolerances import short_name
from .version import __version__


@dataclass(frozen=True)
class Var:
    """One entry of the grid's schema: dimensions, units and long name.

    ``{mu}`` and ``{mlong}`` in the units and long name stand for the goal metric's unit and long
    name.
    """

    dims: tuple[str, ...]
    units: str
    long_name: str
    #: How the report and figures name the unit when ``units`` alone would not say it (e.g. a
    #: retardance in waves is stored as the dimensionless "1", the path difference over the
    #: wavelength, because "waves" is not a unit that pint or UDUNITS parses).
    display_units: str = ""


_C, _W, _S, _Q = (
    ("candidate",),
    ("candidate", "wavelength"),
    ("candidate", "sample"),
    ("candidate", "quantile"),
)
_CT = ("candidate", "tolerance_name")
#: Every variable the grid may hold.  ``sample_*`` variables exist only with ``keep_samples``.
SCHEMA: dict[str, Var] = {
    "source_spectrum": Var(
        ("wavelength",), "1", "relative spectral power density of the source (peak 1)"
    ),
    "source_weight": Var(("wavelength",), "1", "fraction of the source power in each grid cell"),
    "construction": Var(_C, "", "plate construction"),
    "design_wavelength": Var(_C, "nm", "design wavelength"),
    "target_waves": Var(_C, "1", "target retardance beyond whole waves", display_units="waves"),
    "handedness": Var(
        _C, "1", "goal sense: +1 right (clockwise looking toward the source), -1 left"
    ),
    "layer_material": Var(("candidate", "layer"), "", "layer material"),
    "layer_thickness": Var(("candidate", "layer"), "um", "layer thickness"),
    "layer_axis": Var(("candidate", "layer"), "deg", "layer fast-axis angle"),
    "nominal_retardance": Var(
        _W, "1", "error-free retardance along the plate's fast axis", display_units="waves"
    ),
    "nominal_axial_ratio": Var(_W, "1", "error-free axial ratio b/a"),
    "nominal_azimuth": Var(_W, "deg", "error-free major-axis azimuth"),
    "nominal_metric": Var(_W, "{mu}", "error-free {mlong}"),
    "nominal_stokes": Var(_W + ("stokes",), "1", "error-free normalised Stokes vector"),
    "retardance_mean": Var(_W, "1", "mean retardance over samples", display_units="waves"),
    "retardance_std": Var(
        _W, "1", "standard deviation of retardance over samples", display_units="waves"
    ),
    "worst_metric": Var(_S, "{mu}", "each sample's worst {mlong} over the band"),
    "spectral_metric": Var(_S, "{mu}", "each sample's source-weighted {mlong}"),
    "spectral_stokes": Var(
        _S + ("stokes",),
        "1",
        "source-averaged normalised Stokes vector of each sample (|s| = degree of polarization)",
    ),
    "spectral_axial_ratio": Var(
        _S, "1", "axial ratio b/a of the polarized part of the source-averaged output"
    ),
    "spectral_azimuth": Var(
        _S, "deg", "major-axis azimuth of the polarized part of the source-averaged output"
    ),
    "spectral_extinction": Var(
        _S,
        "dB",
        "extinction ratio of the source-averaged output through an analyzer that passes the goal "
        "state (unpolarized part counted)",
    ),
    "nominal_spectral_axial_ratio": Var(
        _C, "1", "error-free axial ratio of the polarized part of the source-averaged output"
    ),
    "nominal_spectral_azimuth": Var(
        _C,
        "deg",
        "error-free major-axis azimuth of the polarized part of the source-averaged output",
    ),
    "nominal_spectral_extinction": Var(
        _C,
        "dB",
        "error-free extinction ratio of the source-averaged output through the goal analyzer",
    ),
    "rank_yield": Var(
        _C,
        "1",
        "yield the ranking uses: the goal's, except that an axial-ratio goal over the spectrum is "
        "judged by spectral fidelity so that unpolarized light counts",
    ),
    "spectral_dop": Var(_S, "1", "degree of polarization of the source-averaged output"),
    "pass_metric": Var(_S, "{mu}", "the {mlong} that the pass test uses"),
    "design_stokes": Var(
        _S + ("stokes",), "1", "normalised output Stokes vector at the design wavelength"
    ),
    "nominal_worst": Var(_C, "{mu}", "error-free worst {mlong} in band"),
    "nominal_spectral_metric": Var(_C, "{mu}", "error-free source-weighted {mlong}"),
    "nominal_dop": Var(_C, "1", "degree of polarization of the error-free output over the source"),
    "nominal_transmission": Var(
        _C, "1", "fraction of the input power the error-free candidate passes at its design"
    ),
    "nominal_mueller": Var(
        ("candidate", "wavelength", "mueller_row", "mueller_column"),
        "1",
        "error-free Mueller matrix of the plate (faces included)",
    ),
    "nominal_broadband_mueller": Var(
        ("candidate", "mueller_row", "mueller_column"),
        "1",
        "error-free source-weighted Mueller matrix of the plate (faces included)",
    ),
    "nominal_depolarization_index": Var(
        _C, "1", "Gil-Bernabeu depolarization index of the source-weighted Mueller matrix"
    ),
    "nominal_spectral_fidelity": Var(
        _C, "1", "error-free source-averaged fidelity to the goal (unpolarized part counted)"
    ),
    "worst_metric_quantile": Var(_Q, "{mu}", "quantiles of the worst {mlong} in band"),
    "pass_metric_quantile": Var(_Q, "{mu}", "quantiles of the pass-test {mlong}"),
    "dop_quantile": Var(_Q, "1", "quantiles of the source-averaged degree of polarization"),
    "yield": Var(_C, "1", "fraction of assemblies that meet the goal"),
    "yield_low": Var(_C, "1", "lower confidence limit of the yield"),
    "yield_high": Var(_C, "1", "upper confidence limit of the yield"),
    "sensitivity_alone": Var(_CT, "1", "yield with only this tolerance acting"),
    "sensitivity_without": Var(
        _CT, "1", "yield with every tolerance but this one (what holding it exactly would buy)"
    ),
    "dominant": Var(
        _C, "", "tolerance whose removal raises the yield most (else uses up most margin)"
    ),
    "margin_p05": Var(_C, "{mu}", "5th percentile of the pass-test {mlong}"),
    "margin_gain": Var(
        _CT, "{mu}", "rise of the 5th-percentile {mlong} when this tolerance is removed"
    ),
    "margin_dominant": Var(_C, "", "tolerance that uses up most margin"),
    "retardance_error_temperature": Var(
        ("candidate", "temperature"),
        "1",
        "retardance change with temperature at the design wavelength",
        display_units="waves",
    ),
    "retardance_error_tilt": Var(
        ("candidate", "tilt", "tilt_azimuth"),
        "1",
        "retardance change with angle of incidence at the design wavelength",
        display_units="waves",
    ),
    "acceptance_half_angle": Var(
        _C,
        "deg",
        "largest angle of incidence keeping the retardance error within the limit at every azimuth",
    ),
    "temperature_coefficient": Var(
        _C, "deg/K", "retardance change per kelvin at the design wavelength"
    ),
    "rank": Var(_C, "1", "rank of the candidate (1 = pick)"),
    "meets_goal": Var(
        _C, "1", "1 when the candidate meets the goal (see the goal_rule attribute), else 0"
    ),
    "reason": Var(_C, "", "one-line reason for the rank"),
}
#: Per-wavelength variables the kernel keeps statistics of, with units and words.
KERNEL_VARS = {
    "retardance": ("1", "retardance"),
    "axial_ratio": ("1", "axial ratio b/a"),
    "azimuth": ("deg", "major-axis azimuth"),
    "metric": ("{mu}", "{mlong}"),
}
for _key, (_u, _long) in KERNEL_VARS.items():
    _shown = "waves" if _key == "retardance" else ""
    SCHEMA[f"{_key}_quantile"] = Var(
        _Q + ("wavelength",), _u, f"quantiles over samples of the {_long}", _shown
    )
    SCHEMA[f"sample_{_key}"] = Var(_S + ("wavelength",), _u, f"per-sample {_long}", _shown)
#: Variance-based (Sobol') sensitivity indices, of the worst metric and of pass/fail.
SOBOL_VARS = {"sobol": "the worst {mlong} over the band", "sobol_pass": "pass/fail"}
for _key, _of in SOBOL_VARS.items():
    for _fld, _words in (
        ("first", "first-order Sobol' index (share of variance explained alone)"),
        ("total", "total-order Sobol' index (share with interactions)"),
    ):
        SCHEMA[f"{_key}_{_fld}"] = Var(_CT, "1", f"{_words} of {_of}")
        SCHEMA[f"{_key}_{_fld}_low"] = Var(_CT, "1", f"lower bootstrap limit: {_words} of {_of}")
        SCHEMA[f"{_key}_{_fld}_high"] = Var(_CT, "1", f"upper bootstrap limit: {_words} of {_of}")
SCHEMA["dominant_variance"] = Var(
    _C, "", "tolerance with the largest total Sobol' index of pass/fail"
)
SCHEMA["reject_rate"] = Var(_C, "1", "reject rate 1 - yield (rare-reject estimator if used)")
SCHEMA["reject_rate_low"] = Var(_C, "1", "lower confidence limit of the reject rate")
SCHEMA["reject_rate_high"] = Var(_C, "1", "upper confidence limit of the reject rate")
SCHEMA["reject_method"] = Var(_C, "", "how the reject rate was estimated")
SCHEMA["reject_bound"] = Var(
    _C, "1", "upper confidence bound on the reject rate when no sample failed (rule of three)"
)

COORDS: dict[str, Var] = {
    "candidate": Var(("candidate",), "", "candidate plate"),
    "wavelength": Var(("wavelength",), "nm", "vacuum wavelength"),
    "quantile": Var(("quantile",), "1", "quantile over samples"),
    "sample": Var(("sample",), "1", "Monte Carlo sample"),
    "tolerance_name": Var(("tolerance_name",), "", "tolerance name"),
    "stokes": Var(("stokes",), "", "normalised Stokes component"),
    "layer": Var(("layer",), "1", "layer index (light meets 0 first)"),
    "mueller_row": Var(("mueller_row",), "1", "Mueller matrix row (output Stokes S0..S3)"),
    "mueller_column": Var(("mueller_column",), "1", "Mueller matrix column (input Stokes S0..S3)"),
    "temperature": Var(("temperature",), "degC", "plate temperature"),
    "tilt": Var(("tilt",), "deg", "angle of incidence"),
    "tilt_azimuth": Var(
        ("tilt_azimuth",), "deg", "plane-of-incidence azimuth from the plate's fast axis"
    ),
}
#: The metadata convention the grid follows (CF attribute ``Conventions``).
CF_CONVENTIONS = "CF-1.10"
#: The optics conventions of the grid (sign of S3, handedness, angles).
CONVENTIONS = (
    "time dependence exp(i(kz - wt)); S3 > 0 = clockwise looking toward the "
    "source = right-handed; angles counter-clockwise from x looking toward "
    "the source"
)


def assemble(values: dict, coords: dict, attrs: dict, metric: str, var_attrs=None) -> xr.Dataset:
    """A Dataset from arrays named in :data:`SCHEMA` / :data:`COORDS`, labelled from the schema."""
    info = METRICS[metric].extra
    fmt = {"mu": info["unit"], "mlong": info["long_name"]}

    def da(var: Var, data, extra=None):
        attrs = {"long_name": var.long_name.format(**fmt)}
        units = var.units.format(**fmt)
        if units:  # text variables carry no units (CF); every other units string parses in pint
            attrs["units"] = units
        if var.display_units:
            attrs["display_units"] = var.display_units
        return xr.DataArray(data, dims=var.dims, attrs={**attrs, **(extra or {})})

    data = {k: da(SCHEMA[k], v, (var_attrs or {}).get(k)) for k, v in values.items()}
    cds = {k: da(COORDS[k], v) for k, v in coords.items()}
    return xr.Dataset(data, coords=cds, attrs=attrs)


# ----------------------------------------------------------------------------- named steps


def _design_values(cases) -> dict:
    C = len(cases)
    L = max(len(c.plate.layers) for c in cases)
    lay_mat = np.full((C, L), "", dtype=object)
    lay_th = np.full((C, L), np.nan)
    lay_ax = np.full((C, L), np.nan)
    for i, c in enumerate(cases):
        for j, la in enumerate(c.plate.layers):
            lay_mat[i, j] = la.material.name if la.extinction_db is None else "polarizer"
            lay_th[i, j] = la.thickness_um
            lay_ax[i, j] = la.axis_deg
    return {
        "construction": np.array([c.plate.construction for c in cases], dtype=object),
        "design_wavelength": np.array([c.plate.design_nm for c in cases]),
        "target_waves": np.array([c.plate.waves for c in cases]),
        "handedness": np.array([c.handedness for c in cases]),
        "layer_material": lay_mat,
        "layer_thickness": lay_th,
        "layer_axis": lay_ax,
    }


def _nominal_values(cases, results) -> dict:
    nomv = np.stack([r.nominal.values for r in results])  # (C, V, W)
    sst_nom = np.stack([r.nominal.spec_stokes for r in results])
    e_n = _spectral_state(sst_nom)
    return {
        "nominal_retardance": nomv[:, 0],
        "nominal_axial_ratio": nomv[:, 1],
        "nominal_azimuth": nomv[:, 2],
        "nominal_metric": nomv[:, 3],
        "nominal_stokes": np.stack([r.nominal.stokes for r in results]),
        "nominal_spectral_axial_ratio": e_n["axial_ratio"],
        "nominal_spectral_azimuth": e_n["azimuth_deg"],
        "nominal_spectral_extinction": np.array(
            [
                _one_metric(r.nominal.spec_stokes, c.goal, "extinction_db")
                for r, c in zip(results, cases, strict=True)
            ]
        ),
        "nominal_worst": np.array([r.nominal.worst for r in results]),
        "nominal_spectral_metric": np.array([r.nominal_spectral_metric for r in results]),
        "nominal_dop": np.array([r.nominal_dop for r in results]),
        "nominal_spectral_fidelity": np.array(
            [
                _one_metric(r.nominal.spec_stokes, c.goal, "fidelity")
                for r, c in zip(results, cases, strict=True)
            ]
        ),
    }


def _mueller_values(eng, cases) -> dict:
    """Each candidate's error-free Mueller matrix on the grid, its source-weighted mean (grid
    cells and lines) and that mean's depolarization index (:mod:`tolerance.equivalent`)."""
    from .equivalent import broadband_mueller, depolarization_index, plate_mueller
    from .sources import sample_points

    wl_s, w_s = sample_points(eng.spectrum)
    t = eng.study.environment.temperature_c
    grid, bb = [], []
    for c in cases:
        cand = c.candidate
        args = (cand.face_model, cand.air_gap)
        grid.append(plate_mueller(c.plate, eng.grid, *args, temperature_c=t, extrapolate=True))
        m = plate_mueller(c.plate, wl_s, *args, temperature_c=t, extrapolate=True)
        bb.append(broadband_mueller(m, w_s))
    bb = np.stack(bb)
    return {
        "nominal_mueller": np.stack(grid),
        "nominal_broadband_mueller": bb,
        "nominal_depolarization_index": depolarization_index(bb),
    }


def _one_metric(spec_stokes, goal, metric) -> float:
    from .kernel import spectral_metric

    return float(spectral_metric(spec_stokes[None, :], goal, metric)[0])


def _spectral_state(st):
    from .polarization import ellipse

    full = np.concatenate([np.ones(st.shape[:-1] + (1,)), st], axis=-1)
    return ellipse(full)


def _sample_values(cases, results, qs) -> dict:
    from .kernel import spectral_metric

    def stack(attr):
        return np.stack([getattr(r, attr) for r in results])

    sst = stack("spec_stokes")
    e_s = _spectral_state(sst)
    qarr = np.asarray(qs, dtype=float)

    def wq(a):
        return np.quantile(a, qarr, axis=1, method="linear").T

    out = {
        "retardance_mean": stack("mean"),
        "retardance_std": stack("std"),
        "worst_metric": stack("worst"),
        "spectral_metric": stack("spectral_metric"),
        "spectral_stokes": sst,
        "spectral_axial_ratio": e_s["axial_ratio"],
        "spectral_azimuth": e_s["azimuth_deg"],
        "spectral_extinction": np.stack(
            [
                spectral_metric(r.spec_stokes, c.goal, "extinction_db")
                for r, c in zip(results, cases, strict=True)
            ]
        ),
        "spectral_dop": stack("dop"),
        "pass_metric": stack("pass_metric"),
        "design_stokes": stack("design_stokes"),
        "worst_metric_quantile": wq(stack("worst")),
        "pass_metric_quantile": wq(stack("pass_metric")),
        "dop_quantile": wq(stack("dop")),
    }
    quant = stack("quantiles")  # (C, Q, V, W)
    for v, key in enumerate(KERNEL_VARS):
        out[f"{key}_quantile"] = quant[:, :, v]
        if results[0].kept is not None:
            out[f"sample_{key}"] = np.stack([r.kept[:, v, :] for r in results])
    return out


def _yield_values(results, tol_names) -> dict:
    C = len(results)

    def sens(attr):
        return np.array(
            [[getattr(r, attr).get(t, np.nan) for t in tol_names] for r in results]
        ).reshape(C, len(tol_names))

    return {
        "rank_yield": np.array([r.rank_yield for r in results]),
        "yield": np.array([r.yield_ for r in results]),
        "yield_low": np.array([r.yield_low for r in results]),
        "yield_high": np.array([r.yield_high for r in results]),
        "sensitivity_alone": sens("sens_alone"),
        "sensitivity_without": sens("sens_without"),
        "dominant": np.array([short_name(r.dominant) for r in results], dtype=object),
        **_margin_values(results, tol_names),
    }


def _margin_values(results, tol_names) -> dict:
    """Margin-based sensitivity: the 5th-percentile metric and its rise per removed tolerance."""
    C = len(results)
    return {
        "margin_p05": np.array([r.margin_p05 for r in results]),
        "margin_gain": np.array(
            [[r.margin_gain.get(t, np.nan) for t in tol_names] for r in results]
        ).reshape(C, len(tol_names)),
        "margin_dominant": np.array([short_name(r.margin_dominant) for r in results], dtype=object),
    }


def _explain_values(results, tol_keys) -> dict:
    """Sobol' indices by (candidate, tolerance) and the reject-rate estimate per candidate."""
    from .variance import FIELDS

    C, T = len(results), len(tol_keys)
    out = {}
    for key in SOBOL_VARS:
        for fld in FIELDS:
            arr = np.full((C, T), np.nan)
            for i, r in enumerate(results):
                idx = getattr(r, key) or {}
                for j, t in enumerate(tol_keys):
                    if t in idx:
                        arr[i, j] = idx[t][fld]
            out[f"{key}_{fld}"] = arr
    rej = [r.reject for r in results]
    nan = float("nan")
    out["dominant_variance"] = np.array(
        [short_name(r.dominant_variance) for r in results], dtype=object
    )
    out["reject_rate"] = np.array([x.rate if x else nan for x in rej])
    out["reject_rate_low"] = np.array([x.low if x else nan for x in rej])
    out["reject_rate_high"] = np.array([x.high if x else nan for x in rej])
    out["reject_method"] = np.array([x.method if x else "" for x in rej], dtype=object)
    out["reject_bound"] = np.array([x.bound if x else nan for x in rej])
    return out


def _environment_values(study, cases, temps, tilts, azs) -> dict:
    env = study.environment
    limit = study.goal.acceptance_limit_waves
    return {
        "retardance_error_temperature": np.stack(
            [temperature_error(c.plate, temps) for c in cases]
        ),
        "retardance_error_tilt": np.stack([tilt_error(c.plate, tilts, azs) for c in cases]),
        "acceptance_half_angle": np.array([acceptance_half_angle(c.plate, limit) for c in cases]),
        "temperature_coefficient": np.array(
            [temperature_coefficient(c.plate, env.temperature_c) for c in cases]
        ),
    }


def _decision_values(names, results, values) -> dict:
    ranks, reasons = rank(
        names,
        [r.rank_yield for r in results],
        [r.rank_yield_low for r in results],
        [r.rank_yield_high for r in results],
        list(values["nominal_spectral_fidelity"]),
        values["acceptance_half_angle"],
        values["temperature_coefficient"],
    )
    return {"rank": ranks, "reason": reasons}


def _goal_values(study, values) -> dict:
    """Whether each candidate meets the goal (``[goal] yield``, else a yield above zero)."""
    meets = meets_goal(values["yield"], study.goal.required_yield)
    return {"meets_goal": meets.astype(np.int8)}


def _attrs(eng, cases, mu, mlong) -> dict:
    study = eng.study
    mats = {}
    for c in cases:
        for la in c.plate.layers:
            m = la.material
            mats[m.name] = {
                "name": m.name,
                "source": m.source,
                "thermal_source": m.thermal_source,
                "valid_nm": [m.valid_min_nm, m.valid_max_nm],
            }
    return {
        "title": study.title,
        "spec": study.to_json(),
        "spec_path": str(study.spec_path),
        "spec_toml": str(study.source_text or ""),
        "seed": int(eng.seed),
        "samples": int(eng.samples),
        "chunk_size": int(eng.chunk),
        "version": __version__,
        "material_sources": json.dumps(list(mats.values())),
        "goal_state": study.goal.state,
        "goal_metric": study.goal.metric,
        # a goal gives min (larger is better) or max (smaller is better); goal_sense says which
        **(
            {"goal_max": float(study.goal.max), "goal_sense": "max"}
            if study.goal.sense == "max"
            else {"goal_min": float(study.goal.min)}
        ),
        "goal_over": study.goal.over,
        "metric_units": mu,
        "metric_long_name": mlong,
        "source_description": eng.spectrum.description,
        "confidence": float(study.run.confidence),
        "sampling": study.run.sampling,
        "replicates": int(getattr(eng, "replicates", 1)),
        "sampling_note": "; ".join(getattr(eng, "notes", ())),
        "acceptance_limit_waves": float(study.goal.acceptance_limit_waves),
        "nominal_temperature_c": float(study.environment.temperature_c),
        "command": "",
        "laser_caution": caution(
            str(study.source.table.get("shape", "")),
            [
                (c.plate.name, c.plate.construction, [la.material.name for la in c.plate.layers])
                for c in cases
            ],
        ),
        "Conventions": CF_CONVENTIONS,
        "polarization_conventions": CONVENTIONS,
        "goal_rule": goal_rule(study.goal.required_yield),
        **(
            {"goal_yield": float(study.goal.required_yield)}
            if study.goal.required_yield is not None
            else {}
        ),
    }


def to_dataset(eng, results, tol_keys) -> xr.Dataset:
    """Assemble the results Dataset from an :class:`~tolerance.montecarlo.Engine`'s per-candidate
    :class:`~tolerance.montecarlo.CandidateResult` records, labelled from :data:`SCHEMA`."""
    study = eng.study
    cases = eng.cases
    names = [c.plate.name for c in cases]
    tol_names = [short_name(k) for k in tol_keys]
    info = METRICS[study.goal.metric].extra
    mu, mlong = info["unit"], info["long_name"]
    env = study.environment
    temps = np.linspace(env.temperature_range[0], env.temperature_range[1], 61)
    tilts = np.linspace(0.0, env.tilt_max_deg, 41)
    azs = np.arange(0.0, 360.0, 7.5)
    short_results = [
        dataclasses.replace(
            r,
            sens_alone={short_name(k): v for k, v in r.sens_alone.items()},
            sens_without={short_name(k): v for k, v in r.sens_without.items()},
            margin_gain={short_name(k): v for k, v in r.margin_gain.items()},
        )
        for r in results
    ]
    values = {
        "source_spectrum": np.asarray(eng.spectrum.density, float),
        "source_weight": np.asarray(eng.spectrum.grid_weight, float),
        **_design_values(cases),
        "nominal_transmission": np.array([transmission(study.input, c.plate) for c in cases]),
        **_nominal_values(cases, results),
        **_sample_values(cases, results, study.run.quantiles),
        **_yield_values(short_results, tol_names),
        **_environment_values(study, cases, temps, tilts, azs),
        **_explain_values(results, tol_keys),
        **_mueller_values(eng, cases),
    }
    values.update(_decision_values(names, results, values))
    values.update(_goal_values(study, values))
    n_sens = int(results[0].sensitivity_samples)
    var_attrs = {
        "yield": {"confidence": study.run.confidence, "method": results[0].yield_method},
        "sobol_pass_total": {"base_samples": int(study.run.variance_samples)},
        "reject_rate": {"confidence": study.run.confidence},
        "sensitivity_alone": {"samples": n_sens},
        "sensitivity_without": {"samples": n_sens},
        "acceptance_half_angle": {"limit_waves": study.goal.acceptance_limit_waves},
    }
    L = max(len(c.plate.layers) for c in cases)
    coords = {
        "candidate": np.array(names, dtype=object),
        "wavelength": eng.grid,
        "quantile": np.asarray(study.run.quantiles, dtype=float),
        "sample": np.arange(eng.samples),
        "tolerance_name": np.array(tol_names, dtype=object),
        "stokes": np.array(["s1", "s2", "s3"], dtype=object),
        "layer": np.arange(L),
        "mueller_row": np.arange(4),
        "mueller_column": np.arange(4),
        "temperature": temps,
        "tilt": tilts,
        "tilt_azimuth": azs,
    }
    attrs = _attrs(eng, cases, mu, mlong)
    pick = recommended(names, values["rank"], values["meets_goal"])
    attrs["recommended"] = pick or ""  # netCDF attributes cannot be null: "" = none meets it
    return assemble(values, coords, attrs, study.goal.metric, var_attrs)


def _netcdf_image(ds: xr.Dataset):
    """The NetCDF file as bytes.  With dask installed xarray picks a write lock from the current
    dask scheduler (a distributed client's lock cannot guard an in-memory file), so the write
    runs under dask's synchronous scheduler; the grid's arrays are in memory anyway."""
    try:
        import dask
    except ImportError:
        return ds.to_netcdf(engine="h5netcdf", invalid_netcdf=False)
    with dask.config.set(scheduler="synchronous"):
        return ds.to_netcdf(engine="h5netcdf", invalid_netcdf=False)


def save_grid(ds: xr.Dataset, path) -> Path:
    """Write the grid as NetCDF (h5netcdf), atomically: a temporary file then a rename.

    The NetCDF image is built in memory and written with plain writes, because HDF5 that meets
    a full disk or a file-size limit mid-file prints errors and may crash the process; here a
    full disk is an ``OSError`` (ENOSPC, EFBIG) and the temporary file is removed.

    Raises
    ------
    OSError
        The file cannot be written (no space, file-size limit, permissions).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    image = _netcdf_image(ds)
    fd, tmp = tempfile.mkstemp(prefix=".grid-", suffix=".nc.part", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(image)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def load_grid(path) -> xr.Dataset:
    """Read a saved grid fully into memory."""
    from .errors import RetolError

    p = Path(path)
    if not p.is_file():
        raise RetolError(str(p), "no such grid file", "give the grid.nc a run wrote")
    try:
        with xr.open_dataset(p, engine="h5netcdf") as ds:
            return ds.load()
    except (OSError, ValueError) as exc:
        raise RetolError(
            str(p), f"cannot be read as a results grid ({exc})", "give the grid.nc a run wrote"
        ) from None
