"""The Monte Carlo tolerance engine: draws, chunks, the fused kernel and the statistics.

:func:`run` takes a validated spec (see :mod:`tolerance.spec`) and returns the results grid, an
xarray Dataset (built by :mod:`tolerance.grid`).  Memory is bounded by the chunk size: per
wavelength the engine keeps streaming histograms, exact minima and maxima and per-block sums, and
per sample only a few scalars (worst metric, spectrally averaged Stokes vector, state at the
design wavelength), unless per-sample spectra are asked for (``keep_samples``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import sampler
from .dispersion import check_range, indices
from .errors import RetolError
from .plates import Plate, design_plate
from .polarization import goal_vector

#: Histogram bins per variable and wavelength (fewer for very long grids).
BINS = 2048
PILOT = 2048
DEFAULT_CHUNK = 16384
DEFAULT_SENSITIVITY_SAMPLES = 20000

# ----------------------------------------------------------------------------- preparation


@dataclass
class Case:
    """One candidate ready for the kernel."""

    plate: Plate
    spec: dict
    tolerances: dict
    goal: np.ndarray
    handedness: int
    w_design: int


def wavelength_grid(spec: dict) -> np.ndarray:
    w = spec["wavelength"]
    return np.round(w["start_nm"] + w["step_nm"] * np.arange(w["count"]), 9)


def build_plate(c: dict) -> Plate:
    keys = {
        k: c[k]
        for k in ("order", "thick_plate_um", "partner", "match_nm", "retardance_nm", "layers")
        if k in c
    }
    return design_plate(
        c["construction"],
        material=c.get("material"),
        waves=c["waves"],
        design_nm=c.get("design_nm"),
        axis_deg=c["axis_deg"],
        name=c["name"],
        **keys,
    )


def drift_distribution(spec: dict) -> dict | None:
    """The laser's centre drift as a normalised distribution in nm, or None."""
    src = spec["source"]
    if "drift" not in src:
        return None
    from .spec import _Ctx, _distribution

    raw = src["drift"]
    if isinstance(raw, dict):
        raw = {
            k: (_nm(v, f"[source].drift.{k}") if isinstance(v, str) else v) for k, v in raw.items()
        }
    d = _distribution(
        _Ctx(Path(spec.get("spec_path", "<spec>")).name), "drift", raw, where="[source].drift"
    )
    if d["kind"] == "range":
        # an absolute wavelength range: the draws are offsets from the line's centre
        from .units import wavelength_nm

        c = wavelength_nm(src.get("center", 0.0), "[source].center")
        d = {"kind": "range", "low": d["low"] - c, "high": d["high"] - c}
    return d


def _nm(v, field):
    from .units import interval_nm

    return interval_nm(v, field)


def spectrum_of(spec: dict, grid: np.ndarray):
    from .sources import build_spectrum

    base = spec.get("base_dir")
    fname = Path(spec.get("spec_path", "<spec>")).name
    return build_spectrum(
        spec["source"], grid, Path(base) if base else None, field=f"{fname}: [source]"
    )


def tolerances_for(spec: dict, cand: dict) -> dict:
    """The candidate's tolerances: the spec's, overridden by the candidate's own, plus drift."""
    tol = dict(spec["tolerances"])
    tol.update(cand.get("tolerances", {}))
    d = drift_distribution(spec)
    if d is not None:
        tol["drift"] = d
    return tol


GRID_NAMES = {
    "thickness_um": "thickness",
    "clocking_deg": "clocking",
    "crossing_deg": "crossing",
    "tilt_deg": "tilt",
    "temperature_c": "temperature",
    "input_azimuth_deg": "input_azimuth",
    "drift": "drift",
}


def _is_zero(dist: dict) -> bool:
    """True when a distribution cannot vary (zero width); a fixed range still shifts the value,
    so it stays active when low == high only if it differs from the nominal."""
    k = dist["kind"]
    if k == "normal":
        return dist["sigma"] == 0
    if k == "uniform":
        return dist["half_width"] == 0
    return dist["low"] == dist["high"]


# ----------------------------------------------------------------------------- per-chunk inputs


def _layer_optics(plate: Plate, wl: np.ndarray):
    """k0 (…,) and per-layer n_o², n_e², (n_e/n_o)², Δn arrays of shape (…, L)."""
    no2, ne2, dn = [], [], []
    for la in plate.layers:
        n_o, n_e = indices(la.material, wl, extrapolate=True)
        no2.append(n_o**2)
        ne2.append(n_e**2)
        dn.append(n_e - n_o)
    no2 = np.stack(no2, axis=-1)
    ne2 = np.stack(ne2, axis=-1)
    k0 = 2.0 * np.pi * 1e3 / wl
    return (
        np.ascontiguousarray(k0),
        np.ascontiguousarray(no2),
        np.ascontiguousarray(ne2),
        np.ascontiguousarray(ne2 / no2),
        np.ascontiguousarray(np.stack(dn, axis=-1)),
    )


def sample_inputs(case: Case, spec: dict, seed: int, start: int, stop: int, active=None):
    """Per-sample kernel inputs for samples [start, stop) (a multiple of BLOCK at ``start``).

    ``active`` limits the tolerances that act (None: all of the case's).
    """
    plate = case.plate
    L = len(plate.layers)
    n = stop - start
    tol = {k: v for k, v in case.tolerances.items() if active is None or k in active}

    def draw(name, index=0):
        return sampler.standard_draws(seed, name, index, start, stop)

    thick = np.empty((n, L))
    axis = np.empty((n, L))
    optic = np.empty((n, L))
    tfac = np.empty((n, L))
    t_nom = spec["environment"]["temperature_c"]
    if "temperature_c" in tol:
        z, u = draw("temperature_c")
        temp = sampler.scaled(tol["temperature_c"], z, u, center=t_nom)
    else:
        temp = np.full(n, t_nom)
    if "clocking_deg" in tol:
        z, u = draw("clocking_deg")
        clock = sampler.scaled(tol["clocking_deg"], z, u)
    else:
        clock = np.zeros(n)
    for j, la in enumerate(plate.layers):
        if "thickness_um" in tol:
            z, u = draw("thickness_um", j)
            thick[:, j] = la.thickness_um + sampler.scaled(tol["thickness_um"], z, u)
        else:
            thick[:, j] = la.thickness_um
        cross = 0.0
        if j > 0 and "crossing_deg" in tol:
            z, u = draw("crossing_deg", j)
            cross = sampler.scaled(tol["crossing_deg"], z, u)
        axis[:, j] = la.axis_deg + clock + cross
        optic[:, j] = la.optic_axis_deg + clock + cross
        m = la.material
        tfac[:, j] = 1.0 + m.retardance_temperature_coefficient * (temp - m.reference_temperature_c)
    np.maximum(thick, 0.0, out=thick)
    if "tilt_deg" in tol:
        z, u = draw("tilt_deg")
        aoi = np.abs(sampler.scaled(tol["tilt_deg"], z, u))
        _, u2 = draw("tilt_azimuth")
        poi = 360.0 * u2
    else:
        aoi = np.zeros(n)
        poi = np.zeros(n)
    sin2i = np.sin(np.radians(aoi)) ** 2
    phi = np.radians(poi[:, None] - optic)
    alpha = spec["input"]["azimuth_deg"]
    if "input_azimuth_deg" in tol:
        z, u = draw("input_azimuth_deg")
        alpha = alpha + sampler.scaled(tol["input_azimuth_deg"], z, u)
    alpha = np.radians(np.broadcast_to(alpha, (n,)))
    drift = None
    if "drift" in tol:
        z, u = draw("drift")
        drift = sampler.scaled(tol["drift"], z, u)
    th = np.radians(2.0 * axis)
    return {
        "thick": np.ascontiguousarray(thick),
        "tfac": np.ascontiguousarray(tfac),
        "c2": np.ascontiguousarray(np.cos(th)),
        "s2": np.ascontiguousarray(np.sin(th)),
        "sin2i": np.ascontiguousarray(sin2i),
        "cphi2": np.ascontiguousarray(np.cos(phi) ** 2),
        "sphi2": np.ascontiguousarray(np.sin(phi) ** 2),
        "ca": np.ascontiguousarray(np.cos(alpha)),
        "sa": np.ascontiguousarray(np.sin(alpha)),
        "drift": drift,
        "temperature": temp,
        "aoi": aoi,
    }


def _line_optics(plate: Plate, lines_nm: np.ndarray, drift):
    """Line optics arrays of shape (Ssrc, K[, L]); per sample when the laser drifts."""
    if lines_nm.size == 0:
        wl = np.full((1, 1), 1000.0)
    elif drift is None:
        wl = lines_nm[None, :]
    else:
        wl = lines_nm[None, :] + drift[:, None]
    return _layer_optics(plate, wl)


# ----------------------------------------------------------------------------- the engine


class Accumulator:
    """Streaming statistics of one candidate over all chunks."""

    def __init__(self, n_samples: int, W: int, lo, inv_width, bins: int, threads: int, keep: bool):
        from .kernel import N_VAR

        # int32 counts halve the histograms' memory traffic; int64 only past 2**31 samples
        self.hist = np.zeros(
            (threads, N_VAR, W, bins), dtype=np.int32 if n_samples < 2**31 else np.int64
        )
        self.vmin = np.full((threads, N_VAR, W), np.inf)
        self.vmax = np.full((threads, N_VAR, W), -np.inf)
        self.lo = lo
        self.inv_width = inv_width
        self.sums = np.zeros((W, 2))
        self.worst = np.empty(n_samples)
        self.spec_stokes = np.empty((n_samples, 3))
        self.design_stokes = np.empty((n_samples, 3))
        self.kept = np.empty((n_samples, N_VAR, W), dtype=np.float32) if keep else None
        self.n = n_samples


def _kernel_call(
    case,
    spec,
    wl_optics,
    spectrum,
    inputs,
    acc: Accumulator | None,
    start,
    stop,
    do_hist,
    ret_shift,
    keep_out=None,
):
    from .kernel import METRICS, N_VAR, chunk_pass

    k0, no2, ne2, rat, dn = wl_optics
    n = stop - start
    lk0, lno2, lne2, lrat, ldn = _line_optics(case.plate, spectrum.lines_nm, inputs["drift"])
    line_w = np.array(spectrum.line_weight, dtype=float)  # a writable copy: one numba signature
    if line_w.size == 0:
        line_w = np.zeros(0)
    worst = np.empty(n)
    spec_st = np.empty((n, 3))
    des_st = np.empty((n, 3))
    n_blocks = (n + sampler.BLOCK - 1) // sampler.BLOCK
    block_sums = np.zeros((n_blocks, k0.shape[0], 2))
    if acc is not None and do_hist:
        hist, vmin, vmax, lo, iw = acc.hist, acc.vmin, acc.vmax, acc.lo, acc.inv_width
    else:
        import numba

        T = numba.get_num_threads()
        hist = np.zeros((T, N_VAR, k0.shape[0] if do_hist else 1, 1), dtype=np.int32)
        vmin = np.zeros((T, N_VAR, k0.shape[0]))
        vmax = np.zeros((T, N_VAR, k0.shape[0]))
        lo = np.zeros((N_VAR, k0.shape[0]))
        iw = np.zeros((N_VAR, k0.shape[0]))
    keep = keep_out is not None
    kept = keep_out if keep else np.zeros((1, N_VAR, 1), dtype=np.float32)
    chunk_pass(
        k0,
        no2,
        ne2,
        rat,
        dn,
        np.array(spectrum.grid_weight, dtype=float),
        lk0,
        lno2,
        lne2,
        lrat,
        ldn,
        line_w,
        inputs["thick"],
        inputs["tfac"],
        inputs["c2"],
        inputs["s2"],
        inputs["sin2i"],
        inputs["cphi2"],
        inputs["sphi2"],
        inputs["ca"],
        inputs["sa"],
        case.plate.signs(),
        case.goal,
        METRICS[spec["goal"]["metric"]],
        case.w_design,
        do_hist,
        lo,
        iw,
        hist,
        vmin,
        vmax,
        block_sums,
        sampler.BLOCK,
        ret_shift,
        worst,
        spec_st,
        des_st,
        keep,
        kept,
    )
    return worst, spec_st, des_st, block_sums


def prepare(spec: dict):
    """Plates, spectrum and per-candidate cases of a validated spec."""
    grid = wavelength_grid(spec)
    spectrum = spectrum_of(spec, grid)
    cases = []
    goal = spec["goal"]
    fname = Path(spec.get("spec_path", "<spec>")).name
    for c in spec["candidates"]:
        try:
            plate = build_plate(c)
        except RetolError as exc:
            raise RetolError(
                f"{fname}: [[candidate]] {c['name']!r}.{exc.field}", exc.problem, exc.fix
            ) from None
        for la in plate.layers:
            try:
                check_range(
                    la.material, grid, field=f"{fname}: [wavelength] for candidate {c['name']!r}"
                )
                if spectrum.lines_nm.size:
                    lines = np.asarray(spectrum.lines_nm, dtype=float)
                    span = (spectrum.drift or {}).get("span_nm")
                    if span is not None:
                        lines = np.concatenate([lines + float(span[0]), lines + float(span[1])])
                    check_range(la.material, lines, field=f"{fname}: [source] (with its drift)")
            except RetolError as exc:
                raise RetolError(
                    exc.field, exc.problem, "choose a [wavelength] grid and source inside it"
                ) from None
        w_design = int(np.argmin(np.abs(grid - plate.design_nm)))
        case = Case(
            plate=plate,
            spec=c,
            tolerances=tolerances_for(spec, c),
            goal=np.zeros(3),
            handedness=1,
            w_design=w_design,
        )
        if goal["state"] == "circular":
            if goal["handedness"] is not None:
                hand = 1 if goal["handedness"] == "right" else -1
            else:
                hand = _nominal_handedness(case, spec, grid, spectrum)
            case.handedness = hand
            case.goal = goal_vector("circular", handedness=hand)
        else:
            case.goal = goal_vector("linear", goal["azimuth_deg"])
        cases.append(case)
    return grid, spectrum, cases


def _nominal_handedness(case, spec, grid, spectrum) -> int:
    """Sense of the error-free output at the design wavelength (+1 clockwise)."""
    from .plates import plate_jones
    from .polarization import jones_to_stokes, linear_jones

    J = plate_jones(case.plate, case.plate.design_nm, extrapolate=True)
    S = jones_to_stokes(J @ linear_jones(spec["input"]["azimuth_deg"]))
    return 1 if S[3] >= 0 else -1


def nominal(case: Case, spec: dict, wl_optics, spectrum):
    """Error-free results through the same kernel: per-wavelength values (N_VAR, W) and more."""
    inputs = sample_inputs(case, spec, 0, 0, 1, active=())
    W = wl_optics[0].shape[0]
    worst, spec_st, des_st, _ = _kernel_call(
        case, spec, wl_optics, spectrum, inputs, None, 0, 1, False, np.zeros(W), keep_out=None
    )
    vals = _values(case, spec, wl_optics, spectrum, inputs)
    stokes = np.empty((W, 3))
    from .kernel import stokes_one

    stokes_one(*wl_optics, *_first_sample(inputs), case.plate.signs(), stokes)
    return {
        "values": vals,
        "stokes": stokes,
        "worst": float(worst[0]),
        "spec_stokes": spec_st[0],
        "design_stokes": des_st[0],
    }


#: The per-sample kernel inputs, in the kernels' argument order.
PER_SAMPLE = ("thick", "tfac", "c2", "s2", "sin2i", "cphi2", "sphi2", "ca", "sa")


def _first_sample(inputs) -> list:
    """The first sample's kernel inputs (for the one-sample kernels)."""
    return [inputs[k][0] for k in PER_SAMPLE]


def _values(case, spec, wl_optics, spectrum, inputs):
    """(N_VAR, W) float64 values of one sample, through the kernel's own arithmetic."""
    from .kernel import N_VAR, per_wavelength_values

    k0, no2, ne2, rat, dn = wl_optics
    out = np.empty((N_VAR, k0.shape[0]))
    from .kernel import METRICS

    per_wavelength_values(
        k0,
        no2,
        ne2,
        rat,
        dn,
        *_first_sample(inputs),
        case.plate.signs(),
        case.goal,
        METRICS[spec["goal"]["metric"]],
        out,
    )
    return out


def _chunks(n: int, chunk: int):
    start = 0
    while start < n:
        stop = min(n, start + chunk)
        yield start, stop
        start = stop


def _wilson_parts(k: int, n: int, confidence: float):
    from statistics import NormalDist

    z = NormalDist().inv_cdf(0.5 + confidence / 2.0)
    p = k / n
    den = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / den
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
    return centre, half


def wilson(k: int, n: int, confidence: float):
    """Wilson score interval of a binomial proportion k/n at ``confidence``.

    Exactly 0 (or 1) at the end where k = 0 (or k = n).

    References
    ----------
    .. [1] E. B. Wilson, "Probable inference, the law of succession, and statistical inference,"
       J. Am. Stat. Assoc. 22, 209-212 (1927).
    """
    if n == 0:
        return float("nan"), float("nan")
    centre, half = _wilson_parts(k, n, confidence)
    lo = 0.0 if k == 0 else max(0.0, centre - half)
    hi = 1.0 if k == n else min(1.0, centre + half)
    return lo, hi


def hist_quantiles(hist, lo, inv_width, vmin, vmax, qs):
    """Quantiles from histograms (V, W, B), interpolated in the bin, clamped to [min, max]."""
    V, W, B = hist.shape
    cum = np.cumsum(hist, axis=-1)
    n = cum[..., -1]
    out = np.empty((len(qs), V, W))
    for i, q in enumerate(qs):
        target = q * n
        j = np.argmax(cum >= target[..., None], axis=-1)
        prev = np.where(
            j > 0, np.take_along_axis(cum, np.maximum(j - 1, 0)[..., None], -1)[..., 0], 0
        )
        cnt = np.take_along_axis(hist, j[..., None], -1)[..., 0]
        frac = np.where(cnt > 0, (target - prev) / np.maximum(cnt, 1), 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            val = lo + (j + frac) / inv_width
        val = np.where(q <= 0, vmin, np.where(q >= 1, vmax, val))
        out[i] = np.clip(val, vmin, vmax)
    return out


def _pass_metric(spec, worst, spec_stokes, goal):
    from .kernel import spectral_metric

    sm = spectral_metric(spec_stokes, goal, spec["goal"]["metric"])
    pm = worst if spec["goal"]["over"] == "band" else sm
    return sm, pm


def run(spec: dict, samples=None, seed=None, chunk_size=None, progress=None, keep_samples=None):
    """Run the Monte Carlo of a validated spec and return the results grid.

    Parameters
    ----------
    spec : dict
        From :func:`tolerance.load_spec` (or :func:`tolerance.spec.validate`).
    samples, seed, chunk_size : int, optional
        Override the spec's ``[run]`` values.  The chunk size is rounded up to a whole number of
        draw blocks (:data:`tolerance.sampler.BLOCK`); results do not depend on it.
    progress : callable(done, total), optional
        Called after every chunk with sample counts summed over candidates and passes.
    keep_samples : bool, optional
        Keep per-sample values at every wavelength (memory grows with samples × wavelengths).

    Returns
    -------
    xarray.Dataset
        The results grid; see :mod:`tolerance.grid`.
    """
    import numba

    from .kernel import N_VAR

    r = spec["run"]
    n = int(samples if samples is not None else r["samples"])
    if n < 1:
        raise RetolError("--samples", f"must be at least 1, got {n}", "e.g. --samples 20000")
    seed = int(seed if seed is not None else r["seed"])
    if seed < 0:
        raise RetolError("--seed", "must not be negative", "e.g. --seed 7")
    chunk = int(chunk_size if chunk_size is not None else (r["chunk_size"] or DEFAULT_CHUNK))
    if chunk < 1:
        raise RetolError("--chunk-size", "must be at least 1", "e.g. --chunk-size 16384")
    chunk = max(sampler.BLOCK, -(-chunk // sampler.BLOCK) * sampler.BLOCK)
    keep = r["keep_samples"] if keep_samples is None else bool(keep_samples)
    qs = list(r["quantiles"])
    conf = r["confidence"]
    n_sens = min(n, int(r["sensitivity_samples"] or DEFAULT_SENSITIVITY_SAMPLES))

    grid, spectrum, cases = prepare(spec)
    W = grid.size
    if keep and n * W * N_VAR * len(cases) > 400_000_000:
        raise RetolError(
            "keep_samples",
            "would keep more than 1.6 GB of per-sample values",
            "use fewer samples or wavelengths, or drop keep_samples",
        )
    T = numba.get_num_threads()
    # bins per (variable, wavelength): about 75 MB of int32 counts per thread at most; never
    # dependent on the thread count, so that results are not either
    per_row = max(1, 150_000_000 // (2 * N_VAR * W * 4))
    bins = int(min(BINS, max(64, 2 ** int(math.log2(per_row)))))
    active_all = [sorted(k for k, v in c.tolerances.items() if not _is_zero(v)) for c in cases]
    tol_names = sorted({k for a in active_all for k in a}, key=list(GRID_NAMES).index)
    total = len(cases) * (n + 2 * len(tol_names) * n_sens)
    done = 0
    results = []
    for case, active in zip(cases, active_all, strict=True):
        optics = _layer_optics(case.plate, grid)
        nom = nominal(case, spec, optics, spectrum)
        ret_shift = nom["values"][0].copy()
        # pilot: fix the histogram ranges from the first samples (independent of the chunking)
        p_stop = min(n, PILOT)
        pil_inputs = sample_inputs(case, spec, seed, 0, p_stop)
        pil_kept = np.zeros((p_stop, N_VAR, W), dtype=np.float32)
        _kernel_call(
            case,
            spec,
            optics,
            spectrum,
            pil_inputs,
            None,
            0,
            p_stop,
            True,
            ret_shift,
            keep_out=pil_kept,
        )
        lo, iw = _ranges(pil_kept, nom["values"], bins)
        acc = Accumulator(n, W, lo, iw, bins, T, keep)
        for start, stop in _chunks(n, chunk):
            inputs = sample_inputs(case, spec, seed, start, stop)
            kept_view = acc.kept[start:stop] if keep else None
            worst, sst, dst, bsum = _kernel_call(
                case,
                spec,
                optics,
                spectrum,
                inputs,
                acc,
                start,
                stop,
                True,
                ret_shift,
                keep_out=kept_view,
            )
            acc.worst[start:stop] = worst
            acc.spec_stokes[start:stop] = sst
            acc.design_stokes[start:stop] = dst
            for b in range(bsum.shape[0]):
                acc.sums += bsum[b]
            done += stop - start
            if progress:
                progress(done, total)
        # sensitivity: the same draws with one tolerance alone, and with all but it
        sens_alone, sens_without = {}, {}
        _, pm_full = _pass_metric(spec, acc.worst[:n_sens], acc.spec_stokes[:n_sens], case.goal)
        full_yield_sens = float(np.mean(pm_full >= spec["goal"]["min"]))
        _, pm_nom = _pass_metric(
            spec, np.array([nom["worst"]]), nom["spec_stokes"][None, :], case.goal
        )
        nominal_pass = float(pm_nom[0] >= spec["goal"]["min"])
        nom["spectral_pass"] = nominal_pass
        for name in tol_names:
            for mode in ("alone", "without"):
                subset = [name] if mode == "alone" else [k for k in active if k != name]
                # a fixed value (a range with low == high) is a condition, not a tolerance
                subset += [
                    k for k, v in case.tolerances.items() if v["kind"] == "range" and _is_zero(v)
                ]
                if name not in active:
                    y = nominal_pass if mode == "alone" else full_yield_sens
                    done += n_sens
                elif mode == "alone" and len(active) == 1:
                    y = full_yield_sens
                    done += n_sens
                elif not [k for k in subset if k in active]:
                    y = nominal_pass
                    done += n_sens
                else:
                    passes = 0
                    for start, stop in _chunks(n_sens, chunk):
                        inputs = sample_inputs(case, spec, seed, start, stop, active=subset)
                        worst, sst, _, _ = _kernel_call(
                            case,
                            spec,
                            optics,
                            spectrum,
                            inputs,
                            None,
                            start,
                            stop,
                            False,
                            ret_shift,
                        )
                        _, pm = _pass_metric(spec, worst, sst, case.goal)
                        passes += int(np.sum(pm >= spec["goal"]["min"]))
                        done += stop - start
                        if progress:
                            progress(done, total)
                    y = passes / n_sens
                (sens_alone if mode == "alone" else sens_without)[name] = y
        if progress:
            progress(done, total)
        results.append(
            _finish(
                case,
                spec,
                acc,
                nom,
                qs,
                conf,
                tol_names,
                sens_alone,
                sens_without,
                full_yield_sens,
                n_sens,
            )
        )
    from .grid import build_grid

    for r in results:
        r["sens_alone"] = {GRID_NAMES[k]: v for k, v in r["sens_alone"].items()}
        r["sens_without"] = {GRID_NAMES[k]: v for k, v in r["sens_without"].items()}
        r["dominant"] = GRID_NAMES.get(r["dominant"], r["dominant"])
    short = [GRID_NAMES[k] for k in tol_names]
    return build_grid(spec, grid, spectrum, cases, results, qs, short, seed, n, chunk)


def _ranges(kept, nominal_values, bins):
    """Histogram lower edges and inverse bin widths (V, W) from a pilot's values."""
    mn = np.minimum(np.min(kept, axis=0).astype(float), nominal_values)
    mx = np.maximum(np.max(kept, axis=0).astype(float), nominal_values)
    span = mx - mn
    pad = np.maximum(0.25 * span, 1e-9 * np.maximum(1.0, np.abs(mx)))
    lo = mn - pad
    hi = mx + pad
    return lo, bins / (hi - lo)


def _finish(
    case, spec, acc: Accumulator, nom, qs, conf, tol_names, alone, without, yield_sens, n_sens
):
    from .kernel import spectral_metric

    hist = acc.hist.sum(axis=0)
    vmin = acc.vmin.min(axis=0)
    vmax = acc.vmax.max(axis=0)
    quant = hist_quantiles(hist, acc.lo, acc.inv_width, vmin, vmax, qs)
    n = acc.n
    mean_d = acc.sums[:, 0] / n
    var = np.maximum(acc.sums[:, 1] / n - mean_d**2, 0.0) * (n / max(n - 1, 1))
    spec_metric = spectral_metric(acc.spec_stokes, case.goal, spec["goal"]["metric"])
    pass_metric = acc.worst if spec["goal"]["over"] == "band" else spec_metric
    k = int(np.sum(pass_metric >= spec["goal"]["min"]))
    y = k / n
    ylo, yhi = wilson(k, n, conf)
    # the yield the decision ranks on counts unpolarized light: for an axial-ratio goal over the
    # spectrum (which looks at the polarized part only) it is the share of samples whose
    # spectral fidelity reaches that of a pure state with b/a = min
    rank_k = k
    if spec["goal"]["over"] == "spectrum" and spec["goal"]["metric"] == "axial_ratio":
        m = spec["goal"]["min"]
        f_min = 0.5 * (1.0 + 2.0 * m / (1.0 + m * m))
        fid = spectral_metric(acc.spec_stokes, case.goal, "fidelity")
        rank_k = int(np.sum(fid >= f_min))
    rank_lo, rank_hi = wilson(rank_k, n, conf)
    dop = np.sqrt(np.sum(acc.spec_stokes**2, axis=1))
    nom_spec = nom["spec_stokes"]
    nom_dop = float(np.sqrt(np.sum(nom_spec**2)))
    gains = {t: without[t] - yield_sens for t in tol_names}
    dominant = "none"
    if gains:
        best = max(gains, key=lambda t: (gains[t], -alone[t]))
        if gains[best] > 0:
            dominant = best
        else:
            # no single removal helps (e.g. the nominal plate already fails): name the tolerance
            # that alone does the most harm, if any does
            nominal_pass = (
                float(nom["worst"] >= spec["goal"]["min"])
                if spec["goal"]["over"] == "band"
                else float(nom["spectral_pass"])
            )
            worst_alone = min(alone, key=lambda t: alone[t])
            if alone[worst_alone] < nominal_pass:
                dominant = worst_alone
    return {
        "quantiles": quant,
        "mean": mean_d + nom["values"][0],
        "std": np.sqrt(var),
        "worst": acc.worst,
        "spectral_metric": spec_metric,
        "pass_metric": pass_metric,
        "dop": np.clip(dop, 0, 1),
        "design_stokes": acc.design_stokes,
        "kept": acc.kept,
        "rank_yield": rank_k / n,
        "rank_yield_low": rank_lo,
        "rank_yield_high": rank_hi,
        "spec_stokes": acc.spec_stokes,
        "yield": y,
        "yield_low": ylo,
        "yield_high": yhi,
        "passes": k,
        "nominal": nom["values"],
        "nominal_stokes": nom["stokes"],
        "nominal_worst": nom["worst"],
        "nominal_spectral_metric": float(
            spectral_metric(nom_spec[None, :], case.goal, spec["goal"]["metric"])[0]
        ),
        "nominal_dop": min(1.0, nom_dop),
        "nominal_spec_stokes": nom_spec,
        "sens_alone": alone,
        "sens_without": without,
        "dominant": dominant,
        "sensitivity_samples": n_sens,
    }
