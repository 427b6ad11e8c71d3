"""The Monte Carlo tolerance engine: draws, chunks, the fused kernel and the statistics.

:func:`run` takes a validated :class:`~tolerance.study.Study` and returns the results grid, an
xarray Dataset (assembled by :func:`tolerance.grid.to_dataset`).  Studies that call the engine
many times (allocation, design, sweeps) use :class:`Engine` directly: it draws once per study
and reuses the draws (common random numbers), takes tolerances scaled or replaced per call
without redrawing, a plate swapped per call, and returns a frozen :class:`CandidateResult`.

Memory is bounded by the chunk size: per wavelength the engine keeps streaming histograms, exact
minima and maxima and per-block sums, and per sample only a few scalars (worst metric, spectrally
averaged Stokes vector, state at the design wavelength), unless per-sample spectra are asked for
(``keep_samples``).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from . import sampler
from .dispersion import indices
from .distributions import Distribution
from .errors import RetolError
from .frozen import ReadOnlyMapping
from .kernel import (
    METRICS,
    N_VAR,
    LineOptics,
    SampleInputs,
    SampleOutputs,
    Statistics,
    Target,
    WavelengthOptics,
    chunk_pass,
    per_wavelength_values,
    spectral_metric,
    stokes_one,
)
from .plates import Plate
from .polarization import goal_vector
from .study import Candidate, Study
from .tolerances import SHORT, element_key, expand_train, order_key, split_key

#: Histogram bins per variable and wavelength (fewer for very long grids).
BINS = 2048
PILOT = 2048
DEFAULT_CHUNK = 16384
DEFAULT_SENSITIVITY_SAMPLES = 20000
#: Draws kept in memory for reuse across candidates and calls (bytes).
DRAW_CACHE_BYTES = 512 * 2**20
#: Kept per-sample values larger than this are refused (float32 values).
KEEP_LIMIT = 400_000_000


# ----------------------------------------------------------------------------- records


@dataclass(frozen=True)
class Case:
    """One candidate ready for the kernel: its plate, tolerances and goal vector."""

    candidate: Candidate
    plate: Plate
    tolerances: Mapping[str, Distribution]
    goal: np.ndarray
    handedness: int
    w_design: int

    @property
    def active(self) -> tuple[str, ...]:
        """Tolerances that vary (zero widths left out), in the grid's order (a train's by
        element after each tolerance)."""
        act = [k for k, v in self.tolerances.items() if not v.is_zero]
        return tuple(sorted(act, key=order_key))

    @property
    def fixed(self) -> tuple[str, ...]:
        """Fixed values (a range with low == high): conditions, not tolerances."""
        return tuple(k for k, v in self.tolerances.items() if v.is_fixed_value)


@dataclass(frozen=True)
class Nominal:
    """The error-free plate through the same kernel arithmetic."""

    values: np.ndarray  # (N_VAR, W)
    stokes: np.ndarray  # (W, 3)
    worst: float
    spec_stokes: np.ndarray  # (3,)
    design_stokes: np.ndarray  # (3,)


@dataclass(frozen=True)
class CandidateResult:
    """Everything the engine learns about one candidate; the grid is assembled from these."""

    name: str
    quantiles: np.ndarray  # (Q, N_VAR, W)
    mean: np.ndarray  # (W,) retardance [waves]
    std: np.ndarray  # (W,)
    worst: np.ndarray  # (S,)
    spectral_metric: np.ndarray  # (S,)
    pass_metric: np.ndarray  # (S,)
    dop: np.ndarray  # (S,)
    design_stokes: np.ndarray  # (S, 3)
    spec_stokes: np.ndarray  # (S, 3)
    kept: np.ndarray | None  # (S, N_VAR, W) float32
    passes: int
    yield_: float
    yield_low: float
    yield_high: float
    rank_yield: float
    rank_yield_low: float
    rank_yield_high: float
    nominal: Nominal
    nominal_spectral_metric: float
    nominal_dop: float
    sens_alone: Mapping[str, float]  # by spec key
    sens_without: Mapping[str, float]
    dominant: str  # spec key or "none"
    sensitivity_samples: int
    margin_p05: float = float("nan")  # 5th percentile of the pass metric (sensitivity samples)
    margin_gain: Mapping[str, float] = dataclasses.field(
        default_factory=lambda: ReadOnlyMapping({})
    )
    margin_dominant: str = "none"  # the key that uses up most margin
    #: how yield_low/high were found: "Wilson score" or "Student t over R scramblings"
    yield_method: str = "Wilson score"
    #: the reject rate 1 − yield as the rare-reject estimator (or plain sampling) gives it
    reject: object = None  # tolerance.rare.RejectEstimate | None
    #: first/total Sobol' indices by spec key: of the worst metric, and of pass/fail
    sobol: Mapping | None = None
    sobol_pass: Mapping | None = None
    #: the tolerance with the largest total Sobol' index of pass/fail (or "none")
    dominant_variance: str = "none"


# ----------------------------------------------------------------------------- plate optics


def layer_optics(plate: Plate, wl: np.ndarray) -> WavelengthOptics:
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
    return WavelengthOptics(
        np.ascontiguousarray(k0),
        np.ascontiguousarray(no2),
        np.ascontiguousarray(ne2),
        np.ascontiguousarray(ne2 / no2),
        np.ascontiguousarray(np.stack(dn, axis=-1)),
    )


def face_optics(plate: Plate, faces, air_gap: bool, wl: np.ndarray):
    """The faces kernel's :class:`~tolerance.kernel_faces.FaceOptics` at wavelengths ``wl``."""
    from .etalon import face_reflectance
    from .kernel_faces import face_arrays

    n = [indices(la.material, wl, extrapolate=True) for la in plate.layers]
    n_o = np.stack([a for a, _ in n], axis=-1)
    n_e = np.stack([b for _, b in n], axis=-1)
    return face_arrays(
        n_o,
        n_e,
        face_reflectance(faces, np.minimum(n_o, n_e), wl),
        face_reflectance(faces, np.maximum(n_o, n_e), wl),
        plate.signs(),
        air_gap,
    )


def line_optics(plate: Plate, spectrum, drift) -> LineOptics:
    """Line optics of shape (Ssrc, K[, L]); per sample when the laser drifts."""
    lines_nm = spectrum.lines_nm
    if lines_nm.size == 0:
        wl = np.full((1, 1), 1000.0)
    elif drift is None:
        wl = lines_nm[None, :]
    else:
        wl = lines_nm[None, :] + drift[:, None]
    w = np.array(spectrum.line_weight, dtype=float)  # a writable copy: one numba signature
    return LineOptics(*layer_optics(plate, wl), w if w.size else np.zeros(0))


# ----------------------------------------------------------------------------- draws


class Draws:
    """Standard draws of one seed, made once and reused (common random numbers).

    Every candidate and every call reads the same standardised draws of a tolerance stream, so
    differences between candidates or tolerance widths are not sampling noise.  Draws are kept
    up to :data:`DRAW_CACHE_BYTES`; past that they are made again (identically) on demand.
    """

    def __init__(self, seed: int):
        self.seed = int(seed)
        self._cache: dict = {}
        self._bytes = 0

    def __call__(self, name: str, index: int, start: int, stop: int):
        key = (name, index, start, stop)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        z, u = sampler.standard_draws(self.seed, name, index, start, stop)
        size = z.nbytes + u.nbytes
        if self._bytes + size <= DRAW_CACHE_BYTES:
            z.flags.writeable = False
            u.flags.writeable = False
            self._cache[key] = (z, u)
            self._bytes += size
        return z, u


def sample_inputs(case: Case, study: Study, draws: Draws, start: int, stop: int, active=None):
    """Per-sample kernel inputs for samples [start, stop) (``start`` a multiple of BLOCK).

    ``active`` limits the tolerances that act (None: all of the case's).  Returns the
    :class:`~tolerance.kernel.SampleInputs` and a dict of the drawn drift [nm] (or None),
    temperature [°C] and angle of incidence [deg].
    """
    plate = case.plate
    L = len(plate.layers)
    n = stop - start
    tol = {k: v for k, v in case.tolerances.items() if active is None or k in active}

    def value(key, index=0, center=0.0, name=None):
        # ``name``: the tolerance's name when it differs from its stream's (a train element's)
        z, u = draws(key, index, start, stop)
        return tol[name or key].draw(z, u, center=center)

    thick = np.empty((n, L))
    axis = np.empty((n, L))
    optic = np.empty((n, L))
    tfac = np.empty((n, L))
    t_nom = study.environment.temperature_c
    temp = value("temperature_c", center=t_nom) if "temperature_c" in tol else np.full(n, t_nom)
    clock = value("clocking_deg") if "clocking_deg" in tol else np.zeros(n)
    scale = (
        retardance_scale(case, study, value("retardance_waves"))
        if "retardance_waves" in tol and plate.construction != "train"
        else 1.0
    )
    owner = plate.details.get("element_of_layer") if plate.construction == "train" else None
    if owner is not None:
        clocks, scales = _train_draws(case, study, tol, value, n)
    for j, la in enumerate(plate.layers):
        t_name = x_name = None
        if owner is not None:
            # a train: each element's mount has its own clocking (stream index = element) and
            # its own retardance scale; crossing acts between the layers of one element only;
            # thickness and crossing read the element's own tolerance (stream index = layer)
            clock, scale = clocks[owner[j]], scales[owner[j]]
            first = j == 0 or owner[j - 1] != owner[j]
            t_name = element_key("thickness_um", owner[j])
            x_name = element_key("crossing_deg", owner[j])
        else:
            first = j == 0
        if (t_name or "thickness_um") in tol:
            thick[:, j] = la.thickness_um * scale + value("thickness_um", j, name=t_name)
        else:
            thick[:, j] = la.thickness_um * scale
        cross = (
            value("crossing_deg", j, name=x_name)
            if not first and (x_name or "crossing_deg") in tol
            else 0.0
        )
        axis[:, j] = la.axis_deg + clock + cross
        optic[:, j] = la.optic_axis_deg + clock + cross
        m = la.material
        tfac[:, j] = 1.0 + m.retardance_temperature_coefficient * (temp - m.reference_temperature_c)
    np.maximum(thick, 0.0, out=thick)
    if "tilt_deg" in tol:
        aoi = np.abs(value("tilt_deg"))
        _, u2 = draws("tilt_azimuth", 0, start, stop)
        poi = 360.0 * u2
    else:
        aoi = np.zeros(n)
        poi = np.zeros(n)
    sin2i = np.sin(np.radians(aoi)) ** 2
    phi = np.radians(poi[:, None] - optic)
    cut = _cut_inputs(tol, value, aoi, phi, n, L)
    alpha = study.input.azimuth_deg
    if "input_azimuth_deg" in tol:
        alpha = alpha + value("input_azimuth_deg")
    alpha = np.radians(np.broadcast_to(alpha, (n,)))
    ca, sa, cai, sai = study.input.jones(alpha)
    dop = np.full(n, study.input.degree_of_polarization)
    drift = value("drift") if "drift" in tol else None
    face_dr = _face_offsets(case, tol, value, n)
    th = np.radians(2.0 * axis)
    c = np.ascontiguousarray
    inputs = SampleInputs(
        c(thick),
        c(tfac),
        c(np.cos(th)),
        c(np.sin(th)),
        c(sin2i),
        c(np.cos(phi) ** 2),
        c(np.sin(phi) ** 2),
        c(ca),
        c(sa),
        c(cai),
        c(sai),
        c(dop),
        cut,
    )
    return inputs, {"drift": drift, "temperature": temp, "aoi": aoi, "face_dr": face_dr}


def _face_offsets(case: Case, tol, value, n: int):
    """The ``reflectance`` tolerance's offsets (n, F) of each face's power reflectance, one
    stream per face (index = face, :func:`tolerance.kernel_faces.face_count`), or None when
    it does not act (not given, or a candidate with ideal faces)."""
    cand = case.candidate
    if "reflectance" not in tol or cand.face_model.ideal:
        return None
    from .kernel_faces import face_count

    F = face_count(len(case.plate.layers), cand.air_gap)
    out = np.empty((n, F))
    for f in range(F):
        out[:, f] = value("reflectance", f)
    return out


def _cut_inputs(tol, value, aoi, phi, n: int, L: int) -> np.ndarray:
    """Per sample and layer (S, L, 2): sin κ of the drawn cut angle κ and p = sin θᵢ·cos κ·
    cos φ, the tangential wave vector along the optic axis [k₀] (φ: plane of incidence from the
    layer's optic axis; :func:`tolerance.retardance.cut_index_difference`).  All zero without
    ``cut_deg``, and wherever κ = 0, which keeps the kernel on its in-face arithmetic."""
    out = np.zeros((n, L, 2))
    if "cut_deg" not in tol:
        return out
    for j in range(L):
        k = np.radians(value("cut_deg", j))
        sk = np.sin(k)
        out[:, j, 0] = sk
        p = np.sin(np.radians(aoi)) * np.cos(k) * np.cos(phi[:, j])
        out[:, j, 1] = np.where(sk != 0.0, p, 0.0)
    return out


def _train_draws(case: Case, study: Study, tol, value, n: int):
    """Per element of a train: the mount's clocking [deg] and the retardance scale factor.

    Element e reads stream index e of ``clocking_deg`` and ``retardance_waves`` (independent
    mounts and plates) through its own tolerances (``clocking_deg[element e]``); its retardance
    error is read at its own ``at`` if its table gives one, else at its design wavelength.
    """
    clocks, scales = [], []
    specs = case.candidate.elements or ()
    for e, el in enumerate(case.plate.details["elements"]):
        c_name, r_name = element_key("clocking_deg", e), element_key("retardance_waves", e)
        clocks.append(value("clocking_deg", e, name=c_name) if c_name in tol else np.zeros(n))
        if r_name in tol:
            own = specs[e].retardance_at_nm if e < len(specs) else None
            at = float(own) if own is not None else float(el.design_nm)
            r = nominal_retardance_waves(el, at)
            scales.append(1.0 + np.asarray(value("retardance_waves", e, name=r_name)) / r)
        else:
            scales.append(1.0)
    return clocks, scales


def nominal_retardance_waves(plate: Plate, at_nm: float) -> float:
    """The error-free plate's retardance along its fast axis at ``at_nm``. [waves]

    Σ cos 2(θᵢ − θ)·δᵢ / 2π at the materials' reference temperature
    (:func:`tolerance.plates.plate_retardance`), the order kept (a multi-order plate's 6.25
    waves, not 0.25), since a common scale on the thicknesses scales the whole of it.
    """
    from .plates import plate_retardance

    return float(plate_retardance(plate, at_nm, extrapolate=True)) / (2.0 * np.pi)


def retardance_scale(case: Case, study: Study, error_waves):
    """The common thickness scale factor that errs the retardance at ``at`` by ``error_waves``.

    Notes
    -----
    At a fixed wavelength each layer's retardance δᵢ = 2π Δnᵢ(λ) tᵢ / λ is proportional to its
    thickness, so scaling every tᵢ by s scales the plate's retardance R = Σ cos 2(θᵢ − θ) δᵢ/2π
    by s as well: R(s) = s R.  R(s) = R + e gives s = 1 + e / R.  A compound or achromatic
    plate keeps its thickness ratios (its design), as a vendor's "λ/300 at 632.8 nm" implies.
    """
    at = study.retardance_at(case.candidate)
    key = (id(case.plate), at)
    hit = _NOMINAL_RETARDANCE.get(key)
    if hit is None or hit[0] is not case.plate:
        if len(_NOMINAL_RETARDANCE) >= 256:
            _NOMINAL_RETARDANCE.clear()
        hit = (case.plate, nominal_retardance_waves(case.plate, at))
        _NOMINAL_RETARDANCE[key] = hit
    return 1.0 + np.asarray(error_waves) / hit[1]


#: nominal retardance per (plate, test wavelength), so chunked loops compute it once
_NOMINAL_RETARDANCE: dict = {}


def first_sample(inputs: SampleInputs) -> tuple:
    """The first sample's kernel inputs (for the one-sample kernels)."""
    return tuple(a[0] for a in inputs)


# ----------------------------------------------------------------------------- statistics


class Accumulator:
    """Streaming statistics of one candidate over all chunks."""

    def __init__(self, n_samples: int, W: int, lo, inv_width, bins: int, threads: int, keep: bool):
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


def _ranges(kept, nominal_values, bins):
    """Histogram lower edges and inverse bin widths (V, W) from a pilot's values."""
    mn = np.minimum(np.min(kept, axis=0).astype(float), nominal_values)
    mx = np.maximum(np.max(kept, axis=0).astype(float), nominal_values)
    span = mx - mn
    pad = np.maximum(0.25 * span, 1e-9 * np.maximum(1.0, np.abs(mx)))
    lo = mn - pad
    hi = mx + pad
    return lo, bins / (hi - lo)


def histogram_bins(W: int) -> int:
    """Bins per (variable, wavelength): about 75 MB of int32 counts per thread at most; never
    dependent on the thread count, so that results are not either."""
    per_row = max(1, 150_000_000 // (2 * N_VAR * W * 4))
    return int(min(BINS, max(64, 2 ** int(math.log2(per_row)))))


# ----------------------------------------------------------------------------- the engine


class Engine:
    """A study prepared for repeated evaluation.

    Parameters
    ----------
    study : Study
        From :func:`tolerance.load_spec`.
    samples, seed, chunk_size : int, optional
        Override the study's ``[run]`` values.  The chunk size is rounded up to a whole number of
        draw blocks (:data:`tolerance.sampler.BLOCK`); results do not depend on it.

    Examples
    --------
    Allocation-style loops: the same draws for every call (common random numbers)::

        eng = Engine(study, samples=20000)
        case = eng.case(0, scale={"clocking_deg": 0.5})
        y = eng.pass_rate(case)
    """

    def __init__(self, study: Study, samples=None, seed=None, chunk_size=None, client=None):
        r = study.run
        n = samples if samples is not None else r.samples
        if isinstance(n, bool) or not isinstance(n, int | np.integer) or n < 1:
            raise RetolError(
                "--samples", f"must be a whole number >= 1, got {n!r}", "e.g. --samples 20000"
            )
        seed = seed if seed is not None else r.seed
        if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
            raise RetolError(
                "--seed", f"must be a whole number >= 0, got {seed!r}", "e.g. --seed 7"
            )
        chunk = chunk_size if chunk_size is not None else (r.chunk_size or DEFAULT_CHUNK)
        if isinstance(chunk, bool) or not isinstance(chunk, int | np.integer) or chunk < 1:
            raise RetolError(
                "--chunk-size", "must be a whole number >= 1", "e.g. --chunk-size 16384"
            )
        self.study = study
        self.samples = int(n)
        self.seed = int(seed)
        self.chunk = max(sampler.BLOCK, -(-int(chunk) // sampler.BLOCK) * sampler.BLOCK)
        self.grid = study.wavelength.values()
        self.spectrum = study.source.spectrum
        #: what the engine changed and the user should hear about (e.g. a rounded sample count)
        self.notes: tuple[str, ...] = ()
        self.replicates = 1
        if r.sampling == "sobol":
            self.draws = self._sobol_draws(study)
        else:
            self.draws = Draws(self.seed)
        self.metric_code = METRICS[study.goal.metric]
        self._optics: dict = {}
        _check_faces_input(study)
        self.cases = tuple(self.case(i) for i in range(len(study.candidates)))
        #: a dask.distributed client (see :mod:`tolerance.cluster`), or None to run here
        self.client = client

    def __getstate__(self):
        # what travels to a worker: no client, no cached draws or optics (made again there)
        state = dict(self.__dict__)
        state.update(client=None, draws=Draws(self.seed), _optics={})
        return state

    def _sobol_draws(self, study: Study) -> sampler.SobolDraws:
        """Scrambled Sobol' draws; the sample count becomes replicates × a power of two."""
        from .tolerances import TOLERANCES

        R = study.run.replicates
        per = -(-self.samples // R)
        m = 1 << (per - 1).bit_length()
        if R * m != self.samples:
            self.notes += (
                f"sampling: {self.samples} samples rounded up to {R * m} = {R} scramblings x "
                f"{m} Sobol' points (a power of two each)",
            )
        self.samples = R * m
        self.replicates = R
        per_layer = {k for k, e in TOLERANCES.items() if e.extra["per_layer"]}
        layers = max([sampler.SOBOL_LAYERS] + [len(c.plate.layers) for c in study.candidates])
        # the per-face reflectance streams come after every other dimension, so that adding
        # them left the dimensions of the older streams unchanged
        first = tuple(k for k in SHORT if k not in sampler.LATE_STREAMS) + sampler.EXTRA_STREAMS
        layout = sampler.sobol_layout(first, per_layer - set(sampler.LATE_STREAMS), layers)
        # a train's later mounts and plates (clocking and retardance of element e >= 1) get
        # dimensions after all others, so that studies without trains keep their points
        elements = max([len(c.elements or ()) for c in study.candidates] + [0])
        for e in range(1, elements):
            for name in ("clocking_deg", "retardance_waves"):
                layout.setdefault((name, e), max(layout.values()) + 1)
        top = max(layout.values()) + 1
        for name in sampler.LATE_STREAMS:
            for j in range(2 * layers):
                layout[(name, j)] = top
                top += 1
        return sampler.SobolDraws(self.seed, m, R, layout, DRAW_CACHE_BYTES)

    # ------------------------------------------------------------------ cases
    def case(self, candidate, tolerances=None, scale=None, plate=None) -> Case:
        """A candidate ready for the kernel, optionally changed for this call.

        Parameters
        ----------
        candidate : int, str or Candidate
            Which candidate (index, name or record).
        tolerances : mapping of str to Distribution, optional
            Replace the candidate's tolerances (after spec, overrides and drift are merged).
        scale : mapping of str to float, optional
            Scale these tolerances' widths by a factor (a range about its centre).
        plate : Plate, optional
            Evaluate this plate instead of the candidate's own.
        """
        if isinstance(candidate, int):
            cand = self.study.candidates[candidate]
        elif isinstance(candidate, str):
            cand = self.study.candidate(candidate)
        else:
            cand = candidate
        plate = plate if plate is not None else cand.plate
        tol = dict(self.study.tolerances_for(cand) if tolerances is None else tolerances)
        if cand.elements is not None and tolerances is not None:
            tol = expand_train(
                tol,
                [el.tolerances for el in cand.elements],
                [el.plate_layers for el in cand.elements],
            )
        for k, f in (scale or {}).items():
            # a train's tolerance named without an element scales it on every element
            hits = [k] if k in tol else [t for t in tol if split_key(t)[0] == k]
            if not hits:
                raise RetolError(
                    k, "is not a tolerance of this candidate", f"known: {', '.join(tol)}"
                )
            for t in hits:
                tol[t] = tol[t].scaled(f)
        w_design = int(np.argmin(np.abs(self.grid - plate.design_nm)))
        goal = self.study.goal
        if goal.state == "circular":
            if goal.handedness is not None:
                hand = 1 if goal.handedness == "right" else -1
            else:
                hand = self._nominal_handedness(plate)
            gvec = goal_vector("circular", handedness=hand)
        else:
            gvec = goal.vector()
            # the goal's sense of rotation (+1 for a linear goal, which has none)
            hand = -1 if gvec[2] < 0 else 1
        return Case(cand, plate, ReadOnlyMapping(tol), gvec, hand, w_design)

    def _nominal_handedness(self, plate: Plate) -> int:
        """Sense of the error-free output at the design wavelength (+1 clockwise)."""
        from .plates import plate_jones
        from .polarization import jones_to_stokes, linear_jones

        J = plate_jones(plate, plate.design_nm, extrapolate=True)
        inp = self.study.input
        if inp.spectral:
            E = input_jones(inp, plate.design_nm)[0]
        elif inp.ellipticity_deg == 0.0:
            E = linear_jones(inp.azimuth_deg)
        else:
            xr, yr, xi, yi = inp.jones(np.radians(inp.azimuth_deg))
            E = np.array([xr + 1j * xi, yr + 1j * yi])
        S = jones_to_stokes(J @ E)
        return 1 if S[3] >= 0 else -1

    def optics(self, plate: Plate) -> WavelengthOptics:
        key = id(plate)
        hit = self._optics.get(key)
        if hit is None or hit[0] is not plate:
            hit = (plate, layer_optics(plate, self.grid))
            self._optics[key] = hit
        return hit[1]

    def _line_optics(self, plate: Plate, drift) -> LineOptics:
        """The source lines' optics, kept per plate when the lines do not drift."""
        if drift is not None:
            return line_optics(plate, self.spectrum, drift)
        key = ("lines", id(plate))
        hit = self._optics.get(key)
        if hit is None or hit[0] is not plate:
            hit = (plate, line_optics(plate, self.spectrum, None))
            self._optics[key] = hit
        return hit[1]

    # ------------------------------------------------------------------ kernel calls
    def _call(self, case: Case, inputs, extra, stats: Statistics | None, n: int, keep_out=None):
        optics = self.optics(case.plate)
        W = optics.k0.shape[0]
        worst = np.empty(n)
        spec_st = np.empty((n, 3))
        des_st = np.empty((n, 3))
        if stats is None:
            import numba

            T = numba.get_num_threads()
            stats = Statistics(
                False,
                np.zeros((N_VAR, W)),
                np.zeros((N_VAR, W)),
                np.zeros((T, N_VAR, 1, 1), dtype=np.int32),
                np.zeros((T, N_VAR, W)),
                np.zeros((T, N_VAR, W)),
                np.zeros((1, W, 2)),
                sampler.BLOCK,
                np.zeros(W),
            )
        keep = keep_out is not None
        kept = keep_out if keep else np.zeros((1, N_VAR, 1), dtype=np.float32)
        if has_polarizer(case.plate) or self.study.input.spectral:
            from .kernel_polarizer import chunk_pass_polarizer, polarizer_amplitudes

            chunk_pass_polarizer(
                optics,
                np.array(self.spectrum.grid_weight, dtype=float),
                self._line_optics(case.plate, extra["drift"]),
                inputs,
                Target(case.plate.signs(), case.goal, self.metric_code, case.w_design),
                polarizer_amplitudes(case.plate),
                *self._input_rows(extra["drift"]),
                stats,
                SampleOutputs(worst, spec_st, des_st, keep, kept),
            )
            return worst, spec_st, des_st
        if not case.candidate.face_model.ideal:
            from .kernel_faces import chunk_pass_faces

            lines_nm = self.spectrum.lines_nm if self.spectrum.lines_nm.size else np.full(1, 1000.0)
            from .kernel_faces import FaceDraws, no_face_draws

            face_dr = extra.get("face_dr")
            chunk_pass_faces(
                optics,
                self._faces(case, self.grid),
                np.array(self.spectrum.grid_weight, dtype=float),
                line_optics(case.plate, self.spectrum, extra["drift"]),
                self._faces(case, np.asarray(lines_nm, dtype=float)),
                inputs,
                no_face_draws()
                if face_dr is None
                else FaceDraws(np.ascontiguousarray(face_dr, dtype=float), True),
                Target(case.plate.signs(), case.goal, self.metric_code, case.w_design),
                stats,
                SampleOutputs(worst, spec_st, des_st, keep, kept),
            )
            return worst, spec_st, des_st
        chunk_pass(
            optics,
            np.array(self.spectrum.grid_weight, dtype=float),
            self._line_optics(case.plate, extra["drift"]),
            inputs,
            Target(case.plate.signs(), case.goal, self.metric_code, case.w_design),
            stats,
            SampleOutputs(worst, spec_st, des_st, keep, kept),
        )
        return worst, spec_st, des_st

    def _input_rows(self, drift):
        """A tabled input's kernel rows (:func:`tolerance.input_spectrum.jones_rows`) on the
        grid (W, 5) and at the source's lines (Ssrc, K, 5); no rows for a fixed input."""
        inp = self.study.input
        if not inp.spectral:
            return np.zeros((0, 5)), np.zeros((1, 0, 5))
        from .input_spectrum import jones_rows, stokes_at

        key = ("input rows",)
        hit = self._optics.get(key)
        if hit is None:
            hit = self._optics[key] = jones_rows(stokes_at(inp.stokes_table, self.grid))
        lines_nm = self.spectrum.lines_nm
        if lines_nm.size == 0:
            return hit, np.zeros((1, 0, 5))
        wl = lines_nm[None, :] if drift is None else lines_nm[None, :] + drift[:, None]
        return hit, jones_rows(stokes_at(inp.stokes_table, wl, clip=True))

    def _faces(self, case: Case, wl):
        """Face optics of a case's plate at ``wl`` (cached like :meth:`optics`)."""
        cand = case.candidate
        key = ("faces", id(case.plate), cand.face_model, cand.air_gap, wl.size, float(wl[0]))
        hit = self._optics.get(key)
        if hit is None or hit[0] is not case.plate:
            hit = (case.plate, face_optics(case.plate, cand.face_model, cand.air_gap, wl))
            self._optics[key] = hit
        return hit[1]

    def _stats(self, acc, n, do_hist, ret_shift, lo=None, iw=None) -> Statistics:
        n_blocks = (n + sampler.BLOCK - 1) // sampler.BLOCK
        W = self.grid.size
        if acc is not None:
            return Statistics(
                do_hist,
                acc.lo,
                acc.inv_width,
                acc.hist,
                acc.vmin,
                acc.vmax,
                np.zeros((n_blocks, W, 2)),
                sampler.BLOCK,
                ret_shift,
            )
        import numba

        T = numba.get_num_threads()
        return Statistics(
            do_hist,
            np.zeros((N_VAR, W)) if lo is None else lo,
            np.zeros((N_VAR, W)) if iw is None else iw,
            np.zeros((T, N_VAR, W if do_hist else 1, 1), dtype=np.int32),
            np.zeros((T, N_VAR, W)),
            np.zeros((T, N_VAR, W)),
            np.zeros((n_blocks, W, 2)),
            sampler.BLOCK,
            ret_shift,
        )

    def nominal(self, case: Case) -> Nominal:
        """Error-free results through the same kernel arithmetic."""
        inputs, extra = sample_inputs(case, self.study, self.draws, 0, 1, active=())
        W = self.grid.size
        worst, spec_st, des_st = self._call(
            case, inputs, extra, self._stats(None, 1, False, np.zeros(W)), 1
        )
        optics = self.optics(case.plate)
        one = first_sample(inputs)
        values = np.empty((N_VAR, W))
        stokes = np.empty((W, 3))
        if has_polarizer(case.plate) or self.study.input.spectral:
            from .kernel_polarizer import polarizer_amplitudes, values_one_polarizer

            pol = polarizer_amplitudes(case.plate)
            sig = case.plate.signs()
            rows = self._input_rows(None)[0]
            values_one_polarizer(
                optics, one, sig, pol, rows, case.goal, self.metric_code, values, stokes
            )
            return Nominal(values, stokes, float(worst[0]), spec_st[0], des_st[0])
        if not case.candidate.face_model.ideal:
            from .kernel_faces import values_one_faces

            values_one_faces(
                optics,
                self._faces(case, self.grid),
                one,
                case.plate.signs(),
                case.goal,
                self.metric_code,
                values,
                stokes,
            )
            return Nominal(values, stokes, float(worst[0]), spec_st[0], des_st[0])
        per_wavelength_values(optics, one, case.plate.signs(), case.goal, self.metric_code, values)
        stokes_one(optics, one, case.plate.signs(), stokes)
        return Nominal(values, stokes, float(worst[0]), spec_st[0], des_st[0])

    def pass_metric(self, worst, spec_stokes, goal) -> np.ndarray:
        """The per-sample metric the goal judges: worst over the band, or source-weighted."""
        if self.study.goal.over == "band":
            return worst
        return spectral_metric(spec_stokes, goal, self.study.goal.metric)

    def pass_values(self, case: Case, n: int | None = None, active=None):
        """Per-sample (worst, source-averaged Stokes) of the first ``n`` samples, no statistics."""
        n = self.samples if n is None else int(n)
        worst = np.empty(n)
        sst = np.empty((n, 3))
        if self.client is not None:
            from .cluster import map_ordered, task_ranges

            ranges = task_ranges(n, sampler.BLOCK)
            parts = map_ordered(self.client, _values_task, ranges, self, case, active)
            for (start, stop), (w, st) in zip(ranges, parts, strict=True):
                worst[start:stop] = w
                sst[start:stop] = st
            return worst, sst
        return _range_values(self, case, 0, n, active)

    def pass_flags(self, case: Case, start: int, stop: int, active=None) -> np.ndarray:
        """Whether each of samples [start, stop) meets the goal (``start`` a multiple of
        :data:`tolerance.sampler.BLOCK`); the same values as :meth:`pass_rate` sees, so a
        caller may evaluate a prefix and stop once it has decided what it needs."""
        flags = np.empty(stop - start, dtype=bool)
        ret_shift = np.zeros(self.grid.size)
        for a, b in _chunks(stop - start, self.chunk):
            lo, hi = start + a, start + b
            inputs, extra = sample_inputs(case, self.study, self.draws, lo, hi, active=active)
            w, s, _ = self._call(
                case, inputs, extra, self._stats(None, hi - lo, False, ret_shift), hi - lo
            )
            flags[a:b] = self.study.goal.passes(self.pass_metric(w, s, case.goal))
        return flags

    def pass_rate(self, case: Case, n: int | None = None, active=None) -> float:
        """The share of the first ``n`` samples that meet the goal (same draws every call)."""
        if self.client is not None:
            from .cluster import map_ordered, task_ranges

            n = self.samples if n is None else int(n)
            ranges = task_ranges(n, sampler.BLOCK)
            passes = sum(map_ordered(self.client, _pass_task, ranges, self, case, active))
            return passes / n
        worst, sst = self.pass_values(case, n, active)
        pm = self.pass_metric(worst, sst, case.goal)
        return float(np.mean(self.study.goal.passes(pm)))

    # ------------------------------------------------------------------ one candidate
    def evaluate(self, case: Case, keep_samples: bool = False, progress=None) -> CandidateResult:
        """The full statistics of one candidate: main pass, quantiles, yield and sensitivity."""
        nom = self.nominal(case)
        acc = self._main_pass(case, nom, keep_samples, progress)
        sens = self._sensitivity(case, nom, acc, progress)
        res = _finish(self, case, acc, nom, *sens)
        return self._explain(case, res)

    def _explain(self, case: Case, res: CandidateResult) -> CandidateResult:
        """Add the rare-reject estimate and the variance-based sensitivity indices."""
        from . import rare, variance

        changes = {"reject": rare.reject_estimate(self, case, res)}
        if self.study.run.variance_samples > 0 and case.active:
            vi = variance.sobol_indices(self, case, self.study.run.variance_samples)
            changes.update(sobol=vi.metric, sobol_pass=vi.passing, dominant_variance=vi.dominant)
        return dataclasses.replace(res, **changes)

    def _main_pass(self, case: Case, nom: Nominal, keep: bool, progress) -> Accumulator:
        import numba

        n, W = self.samples, self.grid.size
        ret_shift = nom.values[0].copy()
        # pilot: fix the histogram ranges from the first samples (independent of the chunking)
        p_stop = min(n, PILOT)
        pil_inputs, pil_extra = sample_inputs(case, self.study, self.draws, 0, p_stop)
        pil_kept = np.zeros((p_stop, N_VAR, W), dtype=np.float32)
        self._call(
            case,
            pil_inputs,
            pil_extra,
            self._stats(None, p_stop, True, ret_shift),
            p_stop,
            pil_kept,
        )
        bins = histogram_bins(W)
        lo, iw = _ranges(pil_kept, nom.values, bins)
        if self.client is not None:
            return self._main_pass_cluster(case, lo, iw, bins, ret_shift, keep, progress)
        acc = Accumulator(n, W, lo, iw, bins, numba.get_num_threads(), keep)
        for start, stop in _chunks(n, self.chunk):
            inputs, extra = sample_inputs(case, self.study, self.draws, start, stop)
            stats = self._stats(acc, stop - start, True, ret_shift)
            kept_view = acc.kept[start:stop] if keep else None
            worst, sst, dst = self._call(case, inputs, extra, stats, stop - start, kept_view)
            acc.worst[start:stop] = worst
            acc.spec_stokes[start:stop] = sst
            acc.design_stokes[start:stop] = dst
            for b in range(stats.block_sums.shape[0]):
                acc.sums += stats.block_sums[b]
            if progress:
                progress(stop - start)
        return acc

    def _main_pass_cluster(self, case, lo, iw, bins, ret_shift, keep, progress) -> Accumulator:
        """The main pass as dask tasks of whole blocks, combined in block order."""
        from .cluster import map_ordered, task_ranges

        n, W = self.samples, self.grid.size
        acc = Accumulator(n, W, lo, iw, bins, 1, keep)
        acc.hist = np.zeros((1,) + acc.hist.shape[1:], dtype=np.int64)
        ranges = task_ranges(n, sampler.BLOCK)
        parts = map_ordered(
            self.client, _main_task, ranges, self, case, (lo, iw, bins, ret_shift, keep)
        )
        for (start, stop), part in zip(ranges, parts, strict=True):
            acc.hist[0] += part["hist"]
            np.minimum(acc.vmin[0], part["vmin"], out=acc.vmin[0])
            np.maximum(acc.vmax[0], part["vmax"], out=acc.vmax[0])
            for b in range(part["block_sums"].shape[0]):
                acc.sums += part["block_sums"][b]
            acc.worst[start:stop] = part["worst"]
            acc.spec_stokes[start:stop] = part["spec_stokes"]
            acc.design_stokes[start:stop] = part["design_stokes"]
            if keep:
                acc.kept[start:stop] = part["kept"]
            if progress:
                progress(stop - start)
        return acc

    def sensitivity_samples(self) -> int:
        return min(
            self.samples, int(self.study.run.sensitivity_samples or DEFAULT_SENSITIVITY_SAMPLES)
        )

    def _sensitivity(self, case: Case, nom: Nominal, acc: Accumulator, progress):
        """Yield with each tolerance alone, and with all but it, on the same draws."""
        goal = self.study.goal
        n_sens = self.sensitivity_samples()
        active = case.active
        names = tolerance_names(self.cases)
        pm_full = self.pass_metric(acc.worst[:n_sens], acc.spec_stokes[:n_sens], case.goal)
        full = float(np.mean(goal.passes(pm_full)))
        pm_nom = self.pass_metric(np.array([nom.worst]), nom.spec_stokes[None, :], case.goal)
        nominal_pass = float(goal.passes(pm_nom[0]))
        alone, without = {}, {}
        # margin: the 5th percentile of the pass metric, and how much removing each tolerance
        # raises it (says something even when every yield is 0 or 1); for a goal with a max
        # (smaller is better) the 95th percentile, and how much removing a tolerance lowers it
        q_tail, sgn = (0.95, -1.0) if goal.sense == "max" else (0.05, 1.0)
        p05_full = float(np.quantile(pm_full, q_tail))
        margin: dict = {}
        for name in names:
            for mode in ("alone", "without"):
                # a fixed value (a range with low == high) is a condition, not a tolerance
                subset = ([name] if mode == "alone" else [k for k in active if k != name]) + list(
                    case.fixed
                )
                if name not in active:
                    y = nominal_pass if mode == "alone" else full
                    if mode == "without":
                        margin[name] = 0.0
                elif mode == "alone" and len(active) == 1:
                    y = full
                elif not [k for k in subset if k in active]:
                    y = nominal_pass
                    if mode == "without":
                        margin[name] = sgn * (float(pm_nom[0]) - p05_full)
                else:
                    pm = self.pass_metric(*self.pass_values(case, n_sens, subset), case.goal)
                    y = float(np.mean(goal.passes(pm)))
                    if mode == "without":
                        margin[name] = sgn * (float(np.quantile(pm, q_tail)) - p05_full)
                (alone if mode == "alone" else without)[name] = y
                if progress:
                    progress(n_sens)
        return alone, without, full, nominal_pass, n_sens, p05_full, margin


def has_polarizer(plate: Plate) -> bool:
    """True for a train with a linear-polarizer element (the lossy kernel branch)."""
    return any(la.extinction_db is not None for la in plate.layers)


def transmission(inp, plate: Plate) -> float:
    """Fraction of the input power the error-free plate or train passes at its design. [1]

    1 for retarders (lossless); with a polarizer element w₁|J e_p|² + w₂|J e_⊥|², the input's
    polarized part e_p and its orthogonal e_⊥ weighted (1 ± P)/2 (P its degree of
    polarization), J the train's Jones matrix (:func:`tolerance.plates.plate_jones`).
    """
    if not has_polarizer(plate):
        return 1.0
    from .plates import plate_jones

    J = plate_jones(plate, plate.design_nm, extrapolate=True)
    e_p, p = input_jones(inp, plate.design_nm)
    e_o = np.array([-np.conj(e_p[1]), np.conj(e_p[0])])
    return float(
        0.5 * (1 + p) * np.sum(np.abs(J @ e_p) ** 2) + 0.5 * (1 - p) * np.sum(np.abs(J @ e_o) ** 2)
    )


def input_jones(inp, wavelength_nm: float):
    """The input's polarized-part Jones vector (2,) complex and its degree of polarization at
    ``wavelength_nm`` (a tabled input read there; a fixed one anywhere)."""
    if inp.spectral:
        from .input_spectrum import jones_rows, stokes_at

        r = jones_rows(stokes_at(inp.stokes_table, float(wavelength_nm), clip=True))
        return np.array([r[0] + 1j * r[2], r[1] + 1j * r[3]]), float(r[4])
    xr, yr, xi, yi = inp.jones(np.radians(inp.azimuth_deg))
    return np.array([xr + 1j * xi, yr + 1j * yi]), inp.degree_of_polarization


def _check_faces_input(study: Study) -> None:
    """Plates with faces are modelled for a linear, fully polarized input only (so far)."""
    inp = study.input
    plain = (
        inp.ellipticity_deg == 0 and inp.dop == 1 and inp.extinction_db is None and not inp.spectral
    )
    faced = [c.name for c in study.candidates if not c.face_model.ideal]
    if faced and not plain:
        raise RetolError(
            f"[[candidate]] {faced[0]!r}.faces",
            "a plate with faces is modelled for a linear, fully polarized [input] only",
            "use faces = \"ideal\" here, or a plain linear [input]",
        )


def _main_task(sample_range, eng: Engine, case: Case, setup) -> dict:
    """One dask task of the main pass: samples [start, stop) of whole blocks, chunk by chunk
    exactly as :meth:`Engine._main_pass` does them, with this range's own statistics."""
    import numba

    from .cluster import cap_threads

    cap_threads()
    start, stop = sample_range
    lo, iw, bins, ret_shift, keep = setup
    W = eng.grid.size
    acc = Accumulator(stop - start, W, lo, iw, bins, numba.get_num_threads(), keep)
    sums = []
    for a, b in _chunks(stop - start, eng.chunk):
        inputs, extra = sample_inputs(case, eng.study, eng.draws, start + a, start + b)
        stats = eng._stats(acc, b - a, True, ret_shift)
        kept_view = acc.kept[a:b] if keep else None
        worst, sst, dst = eng._call(case, inputs, extra, stats, b - a, kept_view)
        acc.worst[a:b] = worst
        acc.spec_stokes[a:b] = sst
        acc.design_stokes[a:b] = dst
        sums.append(stats.block_sums)
    return {
        "hist": acc.hist.sum(axis=0),
        "vmin": acc.vmin.min(axis=0),
        "vmax": acc.vmax.max(axis=0),
        "block_sums": np.concatenate(sums),
        "worst": acc.worst,
        "spec_stokes": acc.spec_stokes,
        "design_stokes": acc.design_stokes,
        "kept": acc.kept,
    }


def _range_values(eng: Engine, case: Case, start: int, stop: int, active):
    """Per-sample (worst, source-averaged Stokes) of samples [start, stop), chunk by chunk."""
    worst = np.empty(stop - start)
    sst = np.empty((stop - start, 3))
    ret_shift = np.zeros(eng.grid.size)
    for a, b in _chunks(stop - start, eng.chunk):
        inputs, extra = sample_inputs(case, eng.study, eng.draws, start + a, start + b, active)
        w, st, _ = eng._call(case, inputs, extra, eng._stats(None, b - a, False, ret_shift), b - a)
        worst[a:b] = w
        sst[a:b] = st
    return worst, sst


def _values_task(sample_range, eng: Engine, case: Case, active):
    """One dask task of :meth:`Engine.pass_values`: (worst, spectral Stokes) of [start, stop)."""
    from .cluster import cap_threads

    cap_threads()
    return _range_values(eng, case, *sample_range, active)


def _pass_task(sample_range, eng: Engine, case: Case, active) -> int:
    """One dask task of a pass-rate count: how many of samples [start, stop) pass."""
    from .cluster import cap_threads

    cap_threads()
    worst, sst = _range_values(eng, case, *sample_range, active)
    pm = eng.pass_metric(worst, sst, case.goal)
    return int(np.sum(eng.study.goal.passes(pm)))


def tolerance_names(cases) -> tuple[str, ...]:
    """Every tolerance active in any case, in the grid's order."""
    act = {k for c in cases for k in c.active}
    return tuple(sorted(act, key=order_key))


def check_finite(case: Case, acc: Accumulator, nom: Nominal, pass_metric) -> None:
    """No NaN or infinity may reach a yield, a rank or a reported figure: refuse the candidate
    (its plate or tolerances reach a place the physics cannot describe) rather than count it."""
    bad = {
        "nominal values": nom.values,
        "pass metric": pass_metric,
        "source-averaged Stokes vectors": acc.spec_stokes,
        "states at the design wavelength": acc.design_stokes,
        "worst metric over the band": acc.worst,
    }
    for what, arr in bad.items():
        arr = np.asarray(arr)
        if arr.size and not np.all(np.isfinite(arr)):
            n_bad = int(np.sum(~np.isfinite(arr)))
            raise RetolError(
                f"[[candidate]] {case.candidate.name!r}",
                f"its {what} hold {n_bad} non-finite value(s) (NaN or infinity)",
                "check the plate's thicknesses, angles and tolerances for absurd values",
            )


def _finish(
    eng: Engine,
    case: Case,
    acc: Accumulator,
    nom: Nominal,
    alone,
    without,
    yield_sens,
    nominal_pass,
    n_sens,
    p05_full=float("nan"),
    margin=None,
) -> CandidateResult:
    goal = eng.study.goal
    conf = eng.study.run.confidence
    hist = acc.hist.sum(axis=0)
    vmin = acc.vmin.min(axis=0)
    vmax = acc.vmax.max(axis=0)
    quant = hist_quantiles(hist, acc.lo, acc.inv_width, vmin, vmax, eng.study.run.quantiles)
    n = acc.n
    mean_d = acc.sums[:, 0] / n
    var = np.maximum(acc.sums[:, 1] / n - mean_d**2, 0.0) * (n / max(n - 1, 1))
    spec_metric = spectral_metric(acc.spec_stokes, case.goal, goal.metric)
    pass_metric = acc.worst if goal.over == "band" else spec_metric
    check_finite(case, acc, nom, pass_metric)
    k = int(np.sum(goal.passes(pass_metric)))
    ylo, yhi = yield_interval(goal.passes(pass_metric), eng.replicates, conf)
    # the yield the decision ranks on counts unpolarized light: for an axial-ratio goal over the
    # spectrum (which looks at the polarized part only) it is the share of samples whose
    # spectral fidelity reaches that of a pure state with b/a = min
    rank_k = k
    if goal.over == "spectrum" and goal.metric == "axial_ratio":
        m = goal.min
        f_min = 0.5 * (1.0 + 2.0 * m / (1.0 + m * m))
        fid = spectral_metric(acc.spec_stokes, case.goal, "fidelity")
        rank_k = int(np.sum(fid >= f_min))
        rank_lo, rank_hi = yield_interval(fid >= f_min, eng.replicates, conf)
    else:
        rank_lo, rank_hi = ylo, yhi
    dop = np.sqrt(np.sum(acc.spec_stokes**2, axis=1))
    nom_dop = float(np.sqrt(np.sum(nom.spec_stokes**2)))
    return CandidateResult(
        name=case.candidate.name,
        quantiles=quant,
        mean=mean_d + nom.values[0],
        std=np.sqrt(var),
        worst=acc.worst,
        spectral_metric=spec_metric,
        pass_metric=pass_metric,
        dop=np.clip(dop, 0, 1),
        design_stokes=acc.design_stokes,
        spec_stokes=acc.spec_stokes,
        kept=acc.kept,
        passes=k,
        yield_=k / n,
        yield_low=ylo,
        yield_high=yhi,
        rank_yield=rank_k / n,
        rank_yield_low=rank_lo,
        rank_yield_high=rank_hi,
        nominal=nom,
        nominal_spectral_metric=float(
            spectral_metric(nom.spec_stokes[None, :], case.goal, goal.metric)[0]
        ),
        nominal_dop=min(1.0, nom_dop),
        sens_alone=ReadOnlyMapping(alone),
        sens_without=ReadOnlyMapping(without),
        dominant=dominant_tolerance(alone, without, yield_sens, nominal_pass, margin),
        sensitivity_samples=n_sens,
        margin_p05=p05_full,
        margin_gain=ReadOnlyMapping(dict(margin or {})),
        margin_dominant=margin_dominant(margin or {}),
        yield_method=(
            "Wilson score"
            if eng.replicates == 1
            else f"Student t over {eng.replicates} Sobol' scramblings"
        ),
    )


def yield_interval(passed, replicates: int, confidence: float) -> tuple[float, float]:
    """Confidence interval of a pass rate: Wilson for independent draws, replicates otherwise.

    With ``replicates`` R > 1 the samples are R independent scramblings of one Sobol' net,
    one after another; their R pass rates are independent and unbiased, and the interval is
    mean ± t(R−1)·s/√R (Owen's replicated randomised QMC).  When all R agree exactly there is
    no spread to learn from and the (here conservative) Wilson interval is used.

    Parameters
    ----------
    passed : array_like of bool
        (N,) pass flags, N a multiple of R.
    replicates : int
        1 for independent draws.
    confidence : float
        Two-sided level, e.g. 0.95.

    References
    ----------
    .. [1] A. B. Owen, "Monte Carlo variance of scrambled net quadrature," SIAM J. Numer. Anal.
       34, 1884-1910 (1997).
    .. [2] P. L'Ecuyer and C. Lemieux, "Recent advances in randomized quasi-Monte Carlo
       methods," in Modeling Uncertainty, Springer (2002), section 6.
    """
    passed = np.asarray(passed, dtype=bool)
    n = passed.size
    k = int(passed.sum())
    if replicates <= 1 or n % replicates:
        return wilson(k, n, confidence)
    y = passed.reshape(replicates, -1).mean(axis=1)
    s = float(np.std(y, ddof=1))
    if s == 0.0:
        return wilson(k, n, confidence)
    from scipy.stats import t

    half = float(t.ppf(0.5 + confidence / 2.0, replicates - 1)) * s / math.sqrt(replicates)
    m = float(np.mean(y))
    return max(0.0, m - half), min(1.0, m + half)


def margin_dominant(margin: Mapping[str, float]) -> str:
    """The tolerance whose removal raises the 5th-percentile goal metric most ("none" if none)."""
    if not margin:
        return "none"
    best = max(margin, key=lambda t: margin[t])
    return best if margin[best] > 0 else "none"


def dominant_tolerance(alone, without, yield_sens, nominal_pass, margin=None) -> str:
    """The tolerance whose removal helps most; if none helps, the one that alone harms most;
    if neither (every yield 0 or 1), the one that uses up most margin (:func:`margin_dominant`)."""
    gains = {t: without[t] - yield_sens for t in alone}
    if not gains:
        return "none"
    best = max(gains, key=lambda t: (gains[t], -alone[t]))
    if gains[best] > 0:
        return best
    # no single removal helps (e.g. the nominal plate already fails): name the tolerance that
    # alone does the most harm, if any does
    worst_alone = min(alone, key=lambda t: alone[t])
    if alone[worst_alone] < nominal_pass:
        return worst_alone
    return margin_dominant(margin or {})


def run(
    study: Study,
    samples=None,
    seed=None,
    chunk_size=None,
    progress=None,
    keep_samples=None,
    client=None,
):
    """Run the Monte Carlo of a validated study and return the results grid.

    Parameters
    ----------
    study : Study
        From :func:`tolerance.load_spec` (or :func:`tolerance.spec.validate`).
    samples, seed, chunk_size : int, optional
        Override the study's ``[run]`` values.  The chunk size is rounded up to a whole number of
        draw blocks (:data:`tolerance.sampler.BLOCK`); results do not depend on it.
    progress : callable(done, total), optional
        Called after every chunk with sample counts summed over candidates and passes.
    keep_samples : bool, optional
        Keep per-sample values at every wavelength (memory grows with samples × wavelengths).
    client : distributed.Client, optional
        Run the samples as tasks on a dask cluster (see :mod:`tolerance.cluster`); the grid is
        bit-identical to a local run with the same seed.

    Returns
    -------
    xarray.Dataset
        The results grid; see :mod:`tolerance.grid`.
    """
    if not isinstance(study, Study):
        raise RetolError(
            "study",
            f"must be a Study from load_spec, got {type(study).__name__}",
            "call tolerance.load_spec(path) first",
        )
    eng = Engine(study, samples, seed, chunk_size, client=client)
    keep = study.run.keep_samples if keep_samples is None else bool(keep_samples)
    n, W = eng.samples, eng.grid.size
    if keep and n * W * N_VAR * len(eng.cases) > KEEP_LIMIT:
        raise RetolError(
            "keep_samples",
            "would keep more than 1.6 GB of per-sample values",
            "use fewer samples or wavelengths, or drop keep_samples",
        )
    names = tolerance_names(eng.cases)
    total = len(eng.cases) * (n + 2 * len(names) * eng.sensitivity_samples())
    done = [0]

    def tick(k):
        done[0] += k
        if progress:
            progress(done[0], total)

    results = [eng.evaluate(case, keep, tick) for case in eng.cases]
    if progress:
        progress(total, total)
    from .grid import to_dataset

    return to_dataset(eng, results, names)


def replace_tolerances(study: Study, **tolerances) -> Study:
    """A copy of the study with some ``[tolerances]`` replaced (Distribution values)."""
    tol = dict(study.tolerances)
    tol.update(tolerances)
    return dataclasses.replace(study, tolerances=ReadOnlyMapping(tol))
