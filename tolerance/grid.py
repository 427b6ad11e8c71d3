"""The results grid: an xarray Dataset with units and long names, saved as NetCDF.

Dimensions are physical axes: ``candidate``, ``wavelength`` [nm], ``quantile``, ``sample``,
``tolerance``, ``stokes``, ``layer``, ``temperature`` [°C], ``tilt`` and ``tilt_azimuth`` [deg].
Global attributes hold the spec (JSON), the seed, the package version and the material sources.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import numpy as np
import xarray as xr

from . import __version__
from .decision import rank
from .environment import (
    acceptance_half_angle,
    temperature_coefficient,
    temperature_error,
    tilt_error,
)

LASER_CAUTION = (
    "retol predicts polarization only. A change of polarization changes what reflects or "
    "transmits where downstream (polarizing beam splitters, isolators, Brewster windows), so a "
    "new plate can send laser light along paths that were dark before. Follow IEC 60825-1 or "
    "ANSI Z136.1 as applies locally, your site's laser-safety rules, and your laser safety "
    "officer; wear the eyewear they specify when aligning."
)

METRIC_INFO = {
    "axial_ratio": ("1", "axial ratio b/a of the output, signed negative for the wrong hand"),
    "fidelity": ("1", "fidelity (1 + s·g)/2 of the output to the goal state"),
    "extinction_db": ("dB", "extinction ratio through an analyzer that passes the goal state"),
}


def _da(data, dims, units, long_name, **attrs):
    return xr.DataArray(data, dims=dims, attrs={"units": units, "long_name": long_name, **attrs})


def build_grid(spec, wl, spectrum, cases, results, qs, tol_names, seed, n, chunk) -> xr.Dataset:
    """Assemble the Dataset from the engine's per-candidate results."""
    from .kernel import VARIABLES

    names = [c.plate.name for c in cases]
    C = len(cases)
    L = max(len(c.plate.layers) for c in cases)
    mu, mlong = METRIC_INFO[spec["goal"]["metric"]]
    env = spec["environment"]
    temps = np.linspace(env["temperature_range"][0], env["temperature_range"][1], 61)
    tilts = np.linspace(0.0, env["tilt_max_deg"], 41)
    azs = np.arange(0.0, 360.0, 7.5)
    limit = spec["goal"]["acceptance_limit_waves"]

    def stack(key):
        return np.stack([r[key] for r in results])

    lay_mat = np.full((C, L), "", dtype=object)
    lay_th = np.full((C, L), np.nan)
    lay_ax = np.full((C, L), np.nan)
    for i, c in enumerate(cases):
        for j, la in enumerate(c.plate.layers):
            lay_mat[i, j] = la.material.name
            lay_th[i, j] = la.thickness_um
            lay_ax[i, j] = la.axis_deg
    quant = stack("quantiles")  # (C, Q, V, W)
    nomv = stack("nominal")  # (C, V, W)
    env_t = np.stack([temperature_error(c.plate, temps) for c in cases])
    env_tilt = np.stack([tilt_error(c.plate, tilts, azs) for c in cases])
    accept = np.array([acceptance_half_angle(c.plate, limit) for c in cases])
    tcoef = np.array([temperature_coefficient(c.plate, env["temperature_c"]) for c in cases])
    fid_nom = []
    from .kernel import spectral_metric

    for r, c in zip(results, cases, strict=True):
        fid_nom.append(
            float(spectral_metric(r["nominal_spec_stokes"][None, :], c.goal, "fidelity")[0])
        )
    ranks, reasons = rank(
        names,
        [r["rank_yield"] for r in results],
        [r["rank_yield_low"] for r in results],
        [r["rank_yield_high"] for r in results],
        fid_nom,
        accept,
        tcoef,
    )
    # the source-averaged output of every sample, and of the error-free plate
    sst = stack("spec_stokes")
    sst_nom = np.stack([r["nominal_spec_stokes"] for r in results])
    from .polarization import ellipse

    def spectral_state(st):
        full = np.concatenate([np.ones(st.shape[:-1] + (1,)), st], axis=-1)
        return ellipse(full)

    e_s = spectral_state(sst)
    e_n = spectral_state(sst_nom)
    ext_s = np.stack(
        [
            spectral_metric(r["spec_stokes"], c.goal, "extinction_db")
            for r, c in zip(results, cases, strict=True)
        ]
    )
    ext_n = np.array(
        [
            float(spectral_metric(r["nominal_spec_stokes"][None, :], c.goal, "extinction_db")[0])
            for r, c in zip(results, cases, strict=True)
        ]
    )
    qarr = np.asarray(qs, dtype=float)

    def wq(a, axis=0):
        return np.quantile(a, qarr, axis=axis, method="linear")

    data = {
        "source_spectrum": _da(
            np.asarray(spectrum.density, float),
            ("wavelength",),
            "1",
            "relative spectral power density of the source (peak 1)",
        ),
        "source_weight": _da(
            np.asarray(spectrum.grid_weight, float),
            ("wavelength",),
            "1",
            "fraction of the source power in each grid cell",
        ),
        "construction": _da(
            np.array([c.plate.construction for c in cases], dtype=object),
            ("candidate",),
            "",
            "plate construction",
        ),
        "design_wavelength": _da(
            np.array([c.plate.design_nm for c in cases]), ("candidate",), "nm", "design wavelength"
        ),
        "target_waves": _da(
            np.array([c.plate.waves for c in cases]),
            ("candidate",),
            "waves",
            "target retardance beyond whole waves",
        ),
        "handedness": _da(
            np.array([c.handedness for c in cases]),
            ("candidate",),
            "1",
            "goal sense: +1 right (clockwise looking toward the source), -1 left",
        ),
        "layer_material": _da(lay_mat, ("candidate", "layer"), "", "layer material"),
        "layer_thickness": _da(lay_th, ("candidate", "layer"), "um", "layer thickness"),
        "layer_axis": _da(lay_ax, ("candidate", "layer"), "deg", "layer fast-axis angle"),
        "nominal_retardance": _da(
            nomv[:, 0],
            ("candidate", "wavelength"),
            "waves",
            "error-free retardance along the plate's fast axis",
        ),
        "nominal_axial_ratio": _da(
            nomv[:, 1], ("candidate", "wavelength"), "1", "error-free axial ratio b/a"
        ),
        "nominal_azimuth": _da(
            nomv[:, 2], ("candidate", "wavelength"), "deg", "error-free major-axis azimuth"
        ),
        "nominal_metric": _da(nomv[:, 3], ("candidate", "wavelength"), mu, f"error-free {mlong}"),
        "nominal_stokes": _da(
            np.stack([r["nominal_stokes"] for r in results]),
            ("candidate", "wavelength", "stokes"),
            "1",
            "error-free normalised Stokes vector",
        ),
        "retardance_mean": _da(
            stack("mean"), ("candidate", "wavelength"), "waves", "mean retardance over samples"
        ),
        "retardance_std": _da(
            stack("std"),
            ("candidate", "wavelength"),
            "waves",
            "standard deviation of retardance over samples",
        ),
        "worst_metric": _da(
            stack("worst"),
            ("candidate", "sample"),
            mu,
            f"each sample's worst {mlong} over the band",
        ),
        "spectral_metric": _da(
            stack("spectral_metric"),
            ("candidate", "sample"),
            mu,
            f"each sample's source-weighted {mlong}",
        ),
        "spectral_stokes": _da(
            sst,
            ("candidate", "sample", "stokes"),
            "1",
            "source-averaged normalised Stokes vector of each sample (|s| = degree of "
            "polarization)",
        ),
        "spectral_axial_ratio": _da(
            e_s["axial_ratio"],
            ("candidate", "sample"),
            "1",
            "axial ratio b/a of the polarized part of the source-averaged output",
        ),
        "spectral_azimuth": _da(
            e_s["azimuth_deg"],
            ("candidate", "sample"),
            "deg",
            "major-axis azimuth of the polarized part of the source-averaged output",
        ),
        "spectral_extinction": _da(
            ext_s,
            ("candidate", "sample"),
            "dB",
            "extinction ratio of the source-averaged output through an analyzer that passes the "
            "goal state (unpolarized part counted)",
        ),
        "nominal_spectral_axial_ratio": _da(
            e_n["axial_ratio"],
            ("candidate",),
            "1",
            "error-free axial ratio of the polarized part of the source-averaged output",
        ),
        "nominal_spectral_azimuth": _da(
            e_n["azimuth_deg"],
            ("candidate",),
            "deg",
            "error-free major-axis azimuth of the polarized part of the source-averaged output",
        ),
        "nominal_spectral_extinction": _da(
            ext_n,
            ("candidate",),
            "dB",
            "error-free extinction ratio of the source-averaged output through the goal analyzer",
        ),
        "rank_yield": _da(
            np.array([r["rank_yield"] for r in results]),
            ("candidate",),
            "1",
            "yield the ranking uses: the goal's, except that an axial-ratio goal over the "
            "spectrum is judged by spectral fidelity so that unpolarized light counts",
        ),
        "spectral_dop": _da(
            stack("dop"),
            ("candidate", "sample"),
            "1",
            "degree of polarization of the source-averaged output",
        ),
        "pass_metric": _da(
            stack("pass_metric"),
            ("candidate", "sample"),
            mu,
            f"the {mlong} that the pass test uses",
        ),
        "design_stokes": _da(
            stack("design_stokes"),
            ("candidate", "sample", "stokes"),
            "1",
            "normalised output Stokes vector at the design wavelength",
        ),
        "nominal_worst": _da(
            np.array([r["nominal_worst"] for r in results]),
            ("candidate",),
            mu,
            f"error-free worst {mlong} in band",
        ),
        "nominal_spectral_metric": _da(
            np.array([r["nominal_spectral_metric"] for r in results]),
            ("candidate",),
            mu,
            f"error-free source-weighted {mlong}",
        ),
        "nominal_dop": _da(
            np.array([r["nominal_dop"] for r in results]),
            ("candidate",),
            "1",
            "degree of polarization of the error-free output over the source",
        ),
        "nominal_spectral_fidelity": _da(
            np.array(fid_nom),
            ("candidate",),
            "1",
            "error-free source-averaged fidelity to the goal (unpolarized part counted)",
        ),
        "worst_metric_quantile": _da(
            wq(stack("worst"), axis=1).T,
            ("candidate", "quantile"),
            mu,
            f"quantiles of the worst {mlong} in band",
        ),
        "pass_metric_quantile": _da(
            wq(stack("pass_metric"), axis=1).T,
            ("candidate", "quantile"),
            mu,
            f"quantiles of the pass-test {mlong}",
        ),
        "dop_quantile": _da(
            wq(stack("dop"), axis=1).T,
            ("candidate", "quantile"),
            "1",
            "quantiles of the source-averaged degree of polarization",
        ),
        "yield": _da(
            np.array([r["yield"] for r in results]),
            ("candidate",),
            "1",
            "fraction of assemblies that meet the goal",
            confidence=spec["run"]["confidence"],
            method="Wilson score",
        ),
        "yield_low": _da(
            np.array([r["yield_low"] for r in results]),
            ("candidate",),
            "1",
            "lower confidence limit of the yield",
        ),
        "yield_high": _da(
            np.array([r["yield_high"] for r in results]),
            ("candidate",),
            "1",
            "upper confidence limit of the yield",
        ),
        "sensitivity_alone": _da(
            np.array(
                [[r["sens_alone"].get(t, np.nan) for t in tol_names] for r in results]
            ).reshape(C, len(tol_names)),
            ("candidate", "tolerance_name"),
            "1",
            "yield with only this tolerance acting",
            samples=int(results[0]["sensitivity_samples"]),
        ),
        "sensitivity_without": _da(
            np.array(
                [[r["sens_without"].get(t, np.nan) for t in tol_names] for r in results]
            ).reshape(C, len(tol_names)),
            ("candidate", "tolerance_name"),
            "1",
            "yield with every tolerance but this one (what holding it exactly would buy)",
            samples=int(results[0]["sensitivity_samples"]),
        ),
        "dominant": _da(
            np.array([r["dominant"] for r in results], dtype=object),
            ("candidate",),
            "",
            "tolerance whose removal raises the yield most",
        ),
        "retardance_error_temperature": _da(
            env_t,
            ("candidate", "temperature"),
            "waves",
            "retardance change with temperature at the design wavelength",
        ),
        "retardance_error_tilt": _da(
            env_tilt,
            ("candidate", "tilt", "tilt_azimuth"),
            "waves",
            "retardance change with angle of incidence at the design wavelength",
        ),
        "acceptance_half_angle": _da(
            accept,
            ("candidate",),
            "deg",
            "largest angle of incidence keeping the retardance error "
            "within the limit at every azimuth",
            limit_waves=limit,
        ),
        "temperature_coefficient": _da(
            tcoef, ("candidate",), "deg/K", "retardance change per kelvin at the design wavelength"
        ),
        "rank": _da(ranks, ("candidate",), "1", "rank of the candidate (1 = pick)"),
        "reason": _da(reasons, ("candidate",), "", "one-line reason for the rank"),
    }
    for v, key in enumerate(VARIABLES):
        units = {"retardance": "waves", "axial_ratio": "1", "azimuth": "deg", "metric": mu}[key]
        long = {
            "retardance": "retardance",
            "axial_ratio": "axial ratio b/a",
            "azimuth": "major-axis azimuth",
            "metric": mlong,
        }[key]
        data[f"{key}_quantile"] = _da(
            quant[:, :, v],
            ("candidate", "quantile", "wavelength"),
            units,
            f"quantiles over samples of the {long}",
        )
        if results[0]["kept"] is not None:
            data[f"sample_{key}"] = _da(
                np.stack([r["kept"][:, v, :] for r in results]),
                ("candidate", "sample", "wavelength"),
                units,
                f"per-sample {long}",
            )
    coords = {
        "candidate": _da(np.array(names, dtype=object), ("candidate",), "", "candidate plate"),
        "wavelength": _da(wl, ("wavelength",), "nm", "vacuum wavelength"),
        "quantile": _da(qarr, ("quantile",), "1", "quantile over samples"),
        "sample": _da(np.arange(n), ("sample",), "1", "Monte Carlo sample"),
        "tolerance_name": _da(
            np.array(tol_names, dtype=object), ("tolerance_name",), "", "tolerance name"
        ),
        "stokes": _da(
            np.array(["s1", "s2", "s3"], dtype=object),
            ("stokes",),
            "1",
            "normalised Stokes component",
        ),
        "layer": _da(np.arange(L), ("layer",), "1", "layer index (light meets 0 first)"),
        "temperature": _da(temps, ("temperature",), "degC", "plate temperature"),
        "tilt": _da(tilts, ("tilt",), "deg", "angle of incidence"),
        "tilt_azimuth": _da(
            azs, ("tilt_azimuth",), "deg", "plane-of-incidence azimuth from the plate's fast axis"
        ),
    }
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
    clean_spec = {k: v for k, v in spec.items() if k not in ("base_dir", "source_text")}
    attrs = {
        "title": spec["title"],
        "spec": json.dumps(clean_spec, sort_keys=True),
        "spec_path": str(spec.get("spec_path", "")),
        "spec_toml": str(spec.get("source_text", "")),
        "seed": int(seed),
        "samples": int(n),
        "chunk_size": int(chunk),
        "version": __version__,
        "material_sources": json.dumps(list(mats.values())),
        "goal_state": spec["goal"]["state"],
        "goal_metric": spec["goal"]["metric"],
        "goal_min": float(spec["goal"]["min"]),
        "goal_over": spec["goal"]["over"],
        "metric_units": mu,
        "metric_long_name": mlong,
        "source_description": spectrum.description,
        "confidence": float(spec["run"]["confidence"]),
        "acceptance_limit_waves": float(limit),
        "nominal_temperature_c": float(env["temperature_c"]),
        "command": "",
        "laser_caution": LASER_CAUTION,
        "conventions": (
            "time dependence exp(i(kz - wt)); S3 > 0 = clockwise looking toward the "
            "source = right-handed; angles counter-clockwise from x looking toward "
            "the source"
        ),
    }
    return xr.Dataset(data, coords=coords, attrs=attrs)


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
    image = ds.to_netcdf(engine="h5netcdf", invalid_netcdf=False)
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
