"""Design a plate for a spec: thicknesses, plate angles, material pairs or the order.

:func:`design` varies a candidate's free parameters so that its plate keeps the output within
the spec over the band, the temperature range and the tilt the spec gives, and returns a frozen
:class:`Design`: the objective at the starting and the best design, the best parameters, the
Monte Carlo yield of the best design and a ``[[candidate]]`` TOML block to paste into the spec.

Free parameters by construction (:func:`free_keys`):

* ``achromatic`` (two crystals): ``thickness_1``, ``thickness_2`` [µm], and optionally
  ``thickness_3`` [µm, signed: negative means crossed], a third plate whose material is chosen
  from the other crystals available.
* ``stack`` (e.g. a same-material multi-plate achromat after Pancharatnam and Koester):
  ``retardance_i`` [waves at the design wavelength] and ``angle_i`` [deg] of each layer i
  (``retardance`` and ``angle`` name them all).
* ``compound``: ``thick_plate`` [µm]; ``athermal`` (choose a pair of crystals whose
  retardances satisfy Σ γᵢ·δᵢ = 0 and Σ δᵢ = target); ``wide_field`` (choose a pair whose
  first-order tilt terms cancel).
* ``multi-order``: ``order`` [whole waves].

Objectives: ``band-error`` is the worst |δ − target| over the band and the environment
conditions [waves]; ``spectrum-error`` the source-weighted RMS of δ − target over the band,
averaged over the conditions [waves]; ``yield`` the share of Monte Carlo samples (the spec's
tolerances, common random numbers) that meet the spec's goal.

Yield is piecewise constant in the parameters, so it is not optimised directly: the global
search (:func:`scipy.optimize.differential_evolution`, fixed seed) minimises the nominal error
that matches the goal (``band-error`` for a goal over the band, ``spectrum-error`` for one over
the spectrum); then a local polish (Nelder–Mead, from the global result and from the start)
maximises a smooth surrogate: the mean, over the same samples, of a logistic function of each
sample's pass margin, its scale half the interquartile range of the margins where the polish
starts.  The yield reported is the real one, and the best design is the one with the highest
real yield among the start, the global result and the polished ones.

References
----------
.. [1] J. M. Beckers, "Achromatic linear retarders," Appl. Opt. 10, 973-975 (1971).
.. [2] J. M. Beckers, "Achromatic linear retarders with wide field of view," Appl. Opt. 11,
   681-682 (1972).
.. [3] S. Pancharatnam, "Achromatic combinations of birefringent plates," Proc. Indian Acad.
   Sci. A 41, 130-136 (1955).
.. [4] C. J. Koester, "Achromatic combinations of half-wave plates," J. Opt. Soc. Am. 49,
   405-409 (1959).
.. [5] S. M. Etzel, A. Rose, E. Wang, Appl. Opt. 39, 5796-5800 (2000) (temperature
   coefficients of retardance).
"""

from __future__ import annotations

import dataclasses
import itertools
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from .dispersion import Material, birefringence, list_materials
from .environment import target_waves
from .errors import RetolError
from .plates import (
    Layer,
    Plate,
    design_plate,
    equivalent_retardance,
    plate_jones,
    plate_retardance,
    solve2,
)
from .study import Candidate, Study

OBJECTIVES = ("yield", "band-error", "spectrum-error")
#: Global-search settings (differential evolution); the seed makes a design repeatable.
DE_SEED = 1
DE_POPSIZE = 10
DE_MAXITER = 60
#: Plane-of-incidence azimuths [deg from the plate's fast axis] at which tilt is evaluated.
TILT_AZIMUTHS = (0.0, 45.0, 90.0, 135.0)


# ----------------------------------------------------------------------------- records


@dataclass(frozen=True)
class Variant:
    """One discrete choice (materials, order) and its continuous parameters.

    ``make(x)`` builds the plate of the parameter vector ``x`` (in the parameters' units);
    ``label`` holds the discrete choices as they are reported.
    """

    label: Mapping
    keys: tuple[str, ...]
    low: np.ndarray
    high: np.ndarray
    start: np.ndarray
    make: Callable[[np.ndarray], Plate] = field(compare=False, repr=False)
    construction: str = "stack"

    def parameters(self, x) -> dict:
        out = dict(self.label)
        out.update({k: float(v) for k, v in zip(self.keys, np.atleast_1d(x), strict=True)})
        return out


@dataclass(frozen=True)
class Design:
    """The result of :func:`design`.

    ``start_value`` and ``best_value`` are the objective (a yield fraction, or an error in
    waves); ``yield_``, ``yield_low`` and ``yield_high`` the best design's Monte Carlo yield
    and its confidence interval; ``met`` whether the best design's error-free plate meets the
    spec's goal; ``method`` says how the optimum was searched.
    """

    candidate: str
    objective: str
    free: tuple[str, ...]
    start_value: float
    start_parameters: Mapping
    best_value: float
    best_parameters: Mapping
    yield_: float
    yield_low: float
    yield_high: float
    met: bool
    plate: Plate = field(compare=False, repr=False)
    toml: str = ""
    method: str = ""
    unit: str = "waves"

    def to_dict(self) -> dict:
        """The JSON form: candidate, objective, start, best, toml."""
        return {
            "candidate": self.candidate,
            "objective": self.objective,
            "start": {"value": self.start_value, "parameters": dict(self.start_parameters)},
            "best": {
                "value": self.best_value,
                "parameters": dict(self.best_parameters),
                "yield": self.yield_,
                "yield_low": self.yield_low,
                "yield_high": self.yield_high,
            },
            "toml": self.toml,
        }


# ----------------------------------------------------------------------------- free keys


def free_keys(candidate: Candidate) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """(every free key of the candidate's construction, the default ones).

    Raises RetolError for a construction that has nothing to design.
    """
    c = candidate.construction
    if c == "achromatic":
        return ("thickness_1", "thickness_2", "thickness_3"), ("thickness_1", "thickness_2")
    if c == "stack":
        n = len(candidate.plate.layers)
        keys = tuple(f"retardance_{i + 1}" for i in range(n)) + tuple(
            f"angle_{i + 1}" for i in range(n)
        )
        return keys + ("retardance", "angle"), keys
    if c == "compound":
        return ("thick_plate", "athermal", "wide_field"), ("thick_plate",)
    if c == "multi-order":
        return ("order",), ("order",)
    raise RetolError(
        "--candidate",
        f"a {c} plate has nothing to design",
        "design an achromatic, stack, compound or multi-order candidate",
    )


def parse_free(candidate: Candidate, free) -> tuple[str, ...]:
    """The free keys asked for (None: the construction's defaults), checked and expanded."""
    known, default = free_keys(candidate)
    if free is None or (not isinstance(free, str) and len(free) == 0):
        return default
    keys = [k.strip() for k in (free.split(",") if isinstance(free, str) else free)]
    out: list[str] = []
    for k in keys:
        if k not in known:
            raise RetolError(
                "--free",
                f"a {candidate.construction} plate has no free key {k!r}",
                f"choose from {', '.join(known)}",
            )
        if k in ("retardance", "angle"):
            out += [x for x in known if x.startswith(k + "_")]
        else:
            out.append(k)
    out = list(dict.fromkeys(out))
    exclusive = [k for k in out if k in ("athermal", "wide_field")]
    if exclusive and len(out) > 1:
        raise RetolError(
            "--free",
            f"{exclusive[0]} fixes both thicknesses of the pair and cannot be combined with "
            f"{', '.join(k for k in out if k != exclusive[0])}",
            f"give --free {exclusive[0]} alone",
        )
    return tuple(out)


# ----------------------------------------------------------------------------- variants


def _crystals(names=None) -> list[Material]:
    """The crystals available (every material file that is not a film), or those named."""
    if names is not None:
        from .dispersion import get_material

        return [get_material(n) for n in names]
    return [m for m in list_materials() if m.kind != "film"]


def _dn(m: Material, wl: float) -> float:
    return float(abs(birefringence(m, wl)))


def _signed_layer(m: Material, waves_signed: float, design_nm: float, axis: float) -> Layer:
    """A layer of ``|waves|`` at ``design_nm``, parallel (> 0) or crossed (< 0) to ``axis``."""
    d = abs(waves_signed) * design_nm / _dn(m, design_nm) / 1e3
    return Layer(m, d, axis if waves_signed >= 0 else axis + 90.0)


def _plate(start: Plate, layers, construction="stack", details=None) -> Plate:
    return dataclasses.replace(
        start, construction=construction, layers=tuple(layers), details=details or {}
    )


def _bound(bounds, key, low, high, what=""):
    lo, hi = bounds.get(key, (low, high))
    lo, hi = float(lo), float(hi)
    if not (np.isfinite(lo) and np.isfinite(hi)) or lo >= hi:
        raise RetolError(f"bounds.{key}", f"[{lo:g}, {hi:g}] is empty", "give low < high")
    return lo, hi


def _achromat_variants(cand, free, bounds, materials=None) -> list[Variant]:
    p = cand.plate
    (l1, l2) = p.layers
    base = {"thickness_1": l1.thickness_um, "thickness_2": l2.thickness_um}
    keys = [k for k in ("thickness_1", "thickness_2") if k in free]
    for k in keys:
        lo, hi = _bound(bounds, k, 0.5 * base[k], 1.5 * base[k])
        if hi <= 0:
            raise RetolError(f"bounds.{k}", "allows no positive thickness", "give a high > 0")
        bounds = {**bounds, k: (max(lo, 1e-3), hi)}
    thirds: list = [None]
    if "thickness_3" in free:
        thirds = [
            m for m in _crystals(materials) if m.name not in (l1.material.name, l2.material.name)
        ]
        if not thirds:
            raise RetolError(
                "--free", "thickness_3 needs a third crystal and none is available", "add one"
            )
    out = []
    for m3 in thirds:
        ks = list(keys)
        lo = [bounds[k][0] for k in ks]
        hi = [bounds[k][1] for k in ks]
        st = [base[k] for k in ks]
        if m3 is not None:
            h = 2.0 * p.design_nm / _dn(m3, p.design_nm) / 1e3  # two waves of the third crystal
            a, b = _bound(bounds, "thickness_3", -h, h)
            ks.append("thickness_3")
            lo.append(a)
            hi.append(b)
            st.append(float(np.clip(0.0, a, b)))

        def make(x, ks=tuple(ks), m3=m3):
            v = dict(base)
            v.update(zip(ks, x, strict=True))
            layers = [
                Layer(l1.material, v["thickness_1"], l1.axis_deg),
                Layer(l2.material, v["thickness_2"], l2.axis_deg),
            ]
            if m3 is not None and v["thickness_3"] != 0.0:
                t3 = v["thickness_3"]
                layers.append(Layer(m3, abs(t3), p.axis_deg if t3 > 0 else p.axis_deg + 90.0))
            return _plate(p, layers)

        label = {"third_material": m3.name} if m3 is not None else {}
        out.append(Variant(label, tuple(ks), np.array(lo), np.array(hi), np.array(st), make))
    return out


def _stack_variants(cand, free, bounds) -> list[Variant]:
    p = cand.plate
    ks, lo, hi, st = [], [], [], []
    for i, la in enumerate(p.layers):
        r0 = la.thickness_um * 1e3 * _dn(la.material, p.design_nm) / p.design_nm
        a0 = la.axis_deg - p.axis_deg
        for key, s0, (a, b) in (
            (f"retardance_{i + 1}", r0, (0.5 * r0, 1.5 * r0)),
            (f"angle_{i + 1}", a0, (a0 - 90.0, a0 + 90.0)),
        ):
            if key in free:
                a, b = _bound(bounds, key, a, b)
                if key.startswith("retardance") and b <= 0:
                    raise RetolError(
                        f"bounds.{key}", "allows no positive retardance", "give high > 0"
                    )
                ks.append(key)
                lo.append(max(a, 1e-6) if key.startswith("retardance") else a)
                hi.append(b)
                st.append(float(np.clip(s0, lo[-1], b)))

    def make(x):
        v = dict(zip(ks, x, strict=True))
        layers = []
        for i, la in enumerate(p.layers):
            th = la.thickness_um
            if f"retardance_{i + 1}" in v:
                th = v[f"retardance_{i + 1}"] * p.design_nm / _dn(la.material, p.design_nm) / 1e3
            ax = la.axis_deg
            if f"angle_{i + 1}" in v:
                ax = p.axis_deg + v[f"angle_{i + 1}"]
            layers.append(Layer(la.material, th, ax))
        return _plate(p, layers)

    return [Variant({}, tuple(ks), np.array(lo), np.array(hi), np.array(st), make)]


def athermal_pair(
    m1: Material,
    m2: Material,
    waves: float,
    design_nm: float,
    axis_deg: float = 0.0,
    name="",
    temperature_c: float = 20.0,
) -> Plate:
    """Two crystals whose retardance does not change with temperature.

    Notes
    -----
    With signed retardances xᵢ [waves at the design wavelength and each material's reference
    temperature Tᵢ] (negative: axis crossed) and each material's relative temperature
    coefficient γᵢ, δ(T) = Σ xᵢ·(1 + γᵢ·(T − Tᵢ)).  γ₁·x₁ + γ₂·x₂ = 0 makes dδ/dT = 0, and
    Σ xᵢ·(1 + γᵢ·(T₀ − Tᵢ)) = W puts the target at the working temperature T₀ (and so at every
    temperature).

    References
    ----------
    .. [1] Etzel, Rose & Wang, Appl. Opt. 39, 5796 (2000) for the coefficients.
    """
    g1 = m1.retardance_temperature_coefficient
    g2 = m2.retardance_temperature_coefficient
    if abs(g2 - g1) < 1e-9 * max(abs(g1), abs(g2), 1e-12):
        raise RetolError(
            "athermal",
            f"{m1.name} and {m2.name} have the same temperature coefficient",
            "choose materials whose coefficients differ",
        )
    a = [1.0 + g * (temperature_c - m.reference_temperature_c) for g, m in ((g1, m1), (g2, m2))]
    x1, x2 = solve2(np.array([a, [g1, g2]]), [waves, 0.0])
    layers = (
        _signed_layer(m1, x1, design_nm, axis_deg),
        _signed_layer(m2, x2, design_nm, axis_deg),
    )
    return Plate(name or "athermal pair", "stack", layers, waves, design_nm, axis_deg, {})


def _tilt_slope(m: Material, crossed: bool, design_nm: float, tilt_deg: float) -> float:
    """cos 2φ part of the relative retardance change at ``tilt_deg``, signed on the plate axis."""
    one = Layer(m, 1.0, 90.0 if crossed else 0.0)
    p = Plate("", "stack", (one,), 0.0, design_nm, 0.0, {})
    d0 = plate_retardance(p, design_nm)
    d = plate_retardance(
        p, design_nm, aoi_deg=tilt_deg, incidence_azimuth_deg=np.array([0.0, 90.0])
    )
    rel = (d - d0) / d0  # relative change, sign of the projection removed by the division
    return float(rel[0] - rel[1]) / 2.0


def wide_field_pair(
    m1: Material,
    m2: Material,
    waves: float,
    design_nm: float,
    axis_deg: float = 0.0,
    tilt_deg: float = 5.0,
    name="",
) -> Plate:
    """Two crystals whose first-order (cos 2φ) tilt terms cancel while Σ δᵢ = target.

    Notes
    -----
    A plate's retardance at angle of incidence i and plane-of-incidence azimuth φ is
    δ(1 + A(i) + B(i)·cos 2φ) with B of first order in sin²i (Beckers 1972). With signed
    retardances xᵢ, x₁ + x₂ = W and B₁·x₁ + B₂·x₂ = 0 leave only the small A terms.  B is
    measured from the exact oblique-incidence retardance at ``tilt_deg`` for each orientation;
    the solution whose signs agree with the orientations assumed is kept.

    References
    ----------
    .. [1] J. M. Beckers, Appl. Opt. 11, 681 (1972).
    """
    best = None
    for c1, c2 in itertools.product((False, True), repeat=2):
        b1 = _tilt_slope(m1, c1, design_nm, tilt_deg)
        b2 = _tilt_slope(m2, c2, design_nm, tilt_deg)
        A = np.array([[1.0, 1.0], [b1, b2]])
        if abs(np.linalg.det(A)) < 1e-15:
            continue
        x = solve2(A, [waves, 0.0])
        if (x[0] < 0) != c1 or (x[1] < 0) != c2:
            continue
        size = float(np.sum(np.abs(x)))
        if best is None or size < best[0]:
            best = (size, x)
    if best is None:
        raise RetolError(
            "wide_field",
            f"{m1.name} and {m2.name} cannot cancel each other's tilt term",
            "choose a positive and a negative crystal",
        )
    x = best[1]
    layers = (
        _signed_layer(m1, x[0], design_nm, axis_deg),
        _signed_layer(m2, x[1], design_nm, axis_deg),
    )
    return Plate(name or "wide-field pair", "stack", layers, waves, design_nm, axis_deg, {})


def _pair_variants(cand, study, kind, materials=None) -> list[Variant]:
    p = cand.plate
    w = target_waves(p)
    out = []
    for m1, m2 in itertools.combinations(_crystals(materials), 2):
        try:
            if kind == "athermal":
                t0 = study.environment.temperature_c
                q = athermal_pair(m1, m2, w, p.design_nm, p.axis_deg, p.name, t0)
            else:
                tilt = min(study.environment.tilt_max_deg, 10.0)
                q = wide_field_pair(m1, m2, w, p.design_nm, p.axis_deg, tilt, p.name)
        except RetolError:
            continue
        if not _covers(q, study):
            continue
        out.append(
            Variant(
                {kind: f"{m1.name}/{m2.name}"},
                (),
                np.zeros(0),
                np.zeros(0),
                np.zeros(0),
                lambda x, q=q: q,
            )
        )
    if not out:
        raise RetolError(
            "--free",
            f"no pair of the available crystals makes a {kind.replace('_', '-')} plate "
            "that covers the band",
            "add a material file, or choose another free key",
        )
    return out


def _covers(plate: Plate, study: Study) -> bool:
    wl = study.wavelength.values()
    return all(
        la.material.valid_min_nm <= wl.min() and wl.max() <= la.material.valid_max_nm
        for la in plate.layers
    )


def _compound_variants(cand, study, free, bounds, materials=None) -> list[Variant]:
    if "athermal" in free:
        return _pair_variants(cand, study, "athermal", materials)
    if "wide_field" in free:
        return _pair_variants(cand, study, "wide_field", materials)
    p = cand.plate
    diff = p.details["difference_um"]
    t0 = cand.thick_plate_um
    lo, hi = _bound(bounds, "thick_plate", max(0.5 * t0, 1.05 * diff), 2.0 * t0)
    if hi <= diff:
        raise RetolError(
            "bounds.thick_plate",
            f"[{lo:g}, {hi:g}] um lies below the {diff:.3f} um difference the target needs",
            f"allow thicknesses above {diff:.3f} um",
        )
    lo = max(lo, diff * 1.0001)

    def make(x):
        return design_plate(
            "compound",
            cand.material,
            cand.waves,
            p.design_nm,
            p.axis_deg,
            name=p.name,
            thick_plate_um=float(x[0]),
        )

    v = Variant(
        {}, ("thick_plate",), np.array([lo]), np.array([hi]), np.array([np.clip(t0, lo, hi)]), make
    )
    return [dataclasses.replace(v, construction="compound")]


def _order_variants(cand, bounds) -> list[Variant]:
    m0 = int(cand.order)
    lo, hi = _bound(bounds, "order", 0, max(2 * m0, m0 + 20))
    lo, hi = int(np.ceil(max(lo, 0))), int(np.floor(hi))
    if hi < lo:
        raise RetolError("bounds.order", "holds no whole order >= 0", "widen the bounds")
    out = []
    for m in range(lo, hi + 1):
        q = design_plate(
            "multi-order",
            cand.material,
            cand.waves,
            cand.plate.design_nm,
            cand.plate.axis_deg,
            name=cand.plate.name,
            order=m,
        )
        out.append(
            Variant(
                {"order": m},
                (),
                np.zeros(0),
                np.zeros(0),
                np.zeros(0),
                lambda x, q=q: q,
                construction="multi-order",
            )
        )
    return out


def variants(study: Study, cand: Candidate, free, bounds=None, materials=None) -> list[Variant]:
    """Every discrete choice with its continuous parameters, for the free keys given.

    ``materials`` limits the crystals a pair or a third plate may be made of (default: every
    crystal material file available).
    """
    bounds = dict(bounds or {})
    for k in bounds:
        if k not in free:
            raise RetolError(f"bounds.{k}", "is not a free key of this design", "free it first")
    c = cand.construction
    if c == "achromatic":
        return _achromat_variants(cand, free, bounds, materials)
    if c == "stack":
        return _stack_variants(cand, free, bounds)
    if c == "compound":
        return _compound_variants(cand, study, free, bounds, materials)
    return _order_variants(cand, bounds)


# ----------------------------------------------------------------------------- objectives


@dataclass(frozen=True)
class Conditions:
    """Where the nominal error is evaluated: wavelengths × (temperature, tilt, azimuth)."""

    wavelength_nm: np.ndarray  # (W,)
    weight: np.ndarray  # (W,) source weights, sum 1
    temperature_c: np.ndarray  # (C, 1)
    aoi_deg: np.ndarray  # (C, 1)
    azimuth_deg: np.ndarray  # (C, 1) from the plate's fast axis
    target_waves: float


def conditions(study: Study, target: float) -> Conditions:
    """The band (grid plus source lines), the temperature range and the tilt of the spec."""
    sp = study.source.spectrum
    wl = np.concatenate([study.wavelength.values(), np.asarray(sp.lines_nm, dtype=float)])
    w = np.concatenate([np.asarray(sp.grid_weight, float), np.asarray(sp.line_weight, float)])
    w = w / w.sum() if w.sum() > 0 else np.full(wl.size, 1.0 / wl.size)
    env = study.environment
    temps = sorted({env.temperature_c, *env.temperature_range})
    tilts = [(0.0, 0.0)] + [(env.tilt_max_deg, a) for a in TILT_AZIMUTHS]
    rows = [(t, i, a) for t in temps for (i, a) in tilts]
    arr = np.array(rows, dtype=float)
    return Conditions(wl, w, arr[:, :1], arr[:, 1:2], arr[:, 2:3], float(target))


def residuals(plate: Plate, cond: Conditions) -> np.ndarray:
    """δ − target over (conditions, wavelengths), wrapped to ±½ wave. [waves]

    Parallel or crossed layers: the retardance along the plate's axis, order kept, compared
    with the target modulo one wave.  A general stack: the retardance of the equivalent
    (elliptical) retarder of the Jones product, in [0, ½] wave, compared with the target
    folded into that range.
    """
    wl = cond.wavelength_nm[None, :]
    az = plate.axis_deg + cond.azimuth_deg
    kw = dict(temperature_c=cond.temperature_c, aoi_deg=cond.aoi_deg, extrapolate=True)
    if plate.aligned():
        d = plate_retardance(plate, wl, incidence_azimuth_deg=az, **kw) / (2 * np.pi)
        r = d - cond.target_waves
        return r - np.round(r)
    J = plate_jones(plate, wl, incidence_azimuth_deg=az, **kw)
    d = equivalent_retardance(J) / (2 * np.pi)
    t = cond.target_waves % 1.0
    t = min(t, 1.0 - t)
    return d - t


def nominal_error(plate: Plate, cond: Conditions, kind: str) -> float:
    """``band-error`` (worst |residual|) or ``spectrum-error`` (weighted RMS). [waves]"""
    r = residuals(plate, cond)
    if kind == "band-error":
        return float(np.max(np.abs(r)))
    return float(np.sqrt(np.mean(np.sum(cond.weight[None, :] * r**2, axis=1))))


# ----------------------------------------------------------------------------- optimisers


def _unit(v: Variant):
    span = v.high - v.low

    def to_x(u):
        return v.low + span * np.asarray(u)

    def to_u(x):
        return (np.asarray(x) - v.low) / span

    return to_x, to_u


def _global(v: Variant, f, seed: int, maxiter: int = DE_MAXITER):
    """Differential evolution over the unit box; returns the best x (parameter units)."""
    to_x, to_u = _unit(v)
    res = optimize.differential_evolution(
        lambda u: f(v.make(to_x(u))),
        [(0.0, 1.0)] * len(v.keys),
        seed=seed,
        popsize=DE_POPSIZE,
        maxiter=maxiter,
        tol=1e-10,
        atol=0.0,
        polish=False,
        init="sobol",
        x0=np.clip(to_u(v.start), 0.0, 1.0),
    )
    return to_x(res.x)


def _polish_minimax(v: Variant, cond: Conditions, x0):
    """Minimise the worst residual: SLSQP on the epigraph form min t, −t ≤ rᵢ(x) ≤ t."""
    to_x, to_u = _unit(v)
    u0 = np.clip(to_u(x0), 0.0, 1.0)
    t0 = float(np.max(np.abs(residuals(v.make(x0), cond))))

    def r(z):
        return residuals(v.make(to_x(z[:-1])), cond).ravel()

    cons = [
        {"type": "ineq", "fun": lambda z: z[-1] - r(z)},
        {"type": "ineq", "fun": lambda z: z[-1] + r(z)},
    ]
    res = optimize.minimize(
        lambda z: z[-1],
        np.append(u0, t0),
        jac=lambda z: np.append(np.zeros(z.size - 1), 1.0),
        method="SLSQP",
        bounds=[(0.0, 1.0)] * u0.size + [(0.0, None)],
        constraints=cons,
        options={"maxiter": 200, "ftol": 1e-14},
    )
    return to_x(np.clip(res.x[:-1], 0.0, 1.0))


def _polish_lsq(v: Variant, cond: Conditions, x0):
    """Minimise the weighted RMS residual with :func:`scipy.optimize.least_squares`."""
    to_x, to_u = _unit(v)
    sw = np.sqrt(cond.weight)[None, :] / np.sqrt(cond.temperature_c.shape[0])
    res = optimize.least_squares(
        lambda u: (sw * residuals(v.make(to_x(u)), cond)).ravel(),
        np.clip(to_u(x0), 0.0, 1.0),
        bounds=(0.0, 1.0),
        x_scale="jac",
        xtol=1e-12,
        ftol=1e-14,
    )
    return to_x(res.x)


def _polish(v, cond, kind, x0):
    """Local polish of the global result; the best of the tries by the objective itself.

    For ``band-error`` the minimax (SLSQP) polish is followed by a least-squares one from its
    result: where the residuals can all vanish (as many conditions as parameters) the latter
    converges to machine precision.
    """
    tries = [x0]
    if kind == "band-error":
        tries.append(_polish_minimax(v, cond, x0))
    tries.append(_polish_lsq(v, cond, tries[-1]))
    errs = [nominal_error(v.make(x), cond, kind) for x in tries]
    return tries[int(np.argmin(errs))]


class _Yield:
    """The engine's yield of a plate, its smooth surrogate and its Wilson interval."""

    def __init__(self, study: Study, cand: Candidate, samples, seed, client=None):
        from .montecarlo import Engine

        self.eng = Engine(study, samples=samples, seed=seed, client=client)
        self.cand = cand
        self.goal = study.goal
        self.goal_min = study.goal.limit
        self.conf = study.run.confidence
        self.scale = None
        self.has_tolerances = bool(self.eng.case(cand).active)

    def margins(self, plate: Plate) -> np.ndarray:
        case = self.eng.case(self.cand, plate=plate)
        worst, sst = self.eng.pass_values(case)
        return self.goal.margin(self.eng.pass_metric(worst, sst, case.goal))

    def rate(self, plate: Plate) -> tuple[float, float, float]:
        m = self.margins(plate)
        if not self.has_tolerances:
            y = float(m[0] >= 0)
            return y, y, y
        from .montecarlo import wilson

        k = int(np.sum(m >= 0))
        lo, hi = wilson(k, m.size, self.conf)
        return k / m.size, lo, hi

    def set_scale(self, plate: Plate):
        m = self.margins(plate)
        q1, q3 = np.percentile(m, [25, 75])
        floor = 1e-4 * max(abs(self.goal_min), 1e-2)
        self.scale = max(0.5 * (q3 - q1), floor)

    def surrogate(self, plate: Plate) -> float:
        """Mean of the logistic function of margin/scale (smooth in the plate's parameters)."""
        from scipy.special import expit

        return float(np.mean(expit(self.margins(plate) / self.scale)))

    def nominal_pass(self, plate: Plate) -> bool:
        case = self.eng.case(self.cand, plate=plate)
        nom = self.eng.nominal(case)
        pm = self.eng.pass_metric(np.array([nom.worst]), nom.spec_stokes[None, :], case.goal)
        return bool(self.goal.passes(pm[0]))


def _polish_yield(v: Variant, ev: _Yield, x0, maxfev: int):
    to_x, to_u = _unit(v)
    ev.set_scale(v.make(x0))
    res = optimize.minimize(
        lambda u: -ev.surrogate(v.make(to_x(u))),
        np.clip(to_u(x0), 0.0, 1.0),
        method="Nelder-Mead",
        bounds=[(0.0, 1.0)] * len(v.keys),
        options={"maxfev": maxfev, "xatol": 1e-4, "fatol": 1e-6},
    )
    return to_x(res.x)


# ----------------------------------------------------------------------------- design


def design(
    study: Study,
    candidate: str,
    objective: str = "yield",
    free=None,
    samples: int | None = None,
    seed: int | None = None,
    bounds: Mapping | None = None,
    materials=None,
    progress: Callable[[str], None] | None = None,
    client=None,
) -> Design:
    """Design a candidate's free parameters for the spec; see the module docstring.

    Parameters
    ----------
    study : Study
        From :func:`tolerance.spec.load_spec`.
    candidate : str
        The candidate to design (its plate is the starting design).
    objective : {"yield", "band-error", "spectrum-error"}
    free : str or sequence of str, optional
        Free keys (:func:`free_keys`); None: the construction's natural ones.
    samples, seed : int, optional
        Monte Carlo samples and seed for the yield (defaults: the spec's ``[run]``).
    bounds : mapping of str to (float, float), optional
        Bounds of free parameters in their units [µm, waves, deg, whole orders].
    materials : sequence of str, optional
        Crystals a pair or a third plate may be made of (default: every crystal available).
    progress : callable, optional
        Called with a line of text at each stage.
    client : distributed.Client, optional
        Evaluate yields as dask tasks (:mod:`tolerance.cluster`); same answers.

    Returns
    -------
    Design
    """
    if objective not in OBJECTIVES:
        raise RetolError("--objective", f"unknown objective {objective!r}", ", ".join(OBJECTIVES))
    cand = study.candidate(candidate)
    keys = parse_free(cand, free)
    say = progress or (lambda s: None)
    target = target_waves(cand.plate) if cand.construction != "stack" else float(cand.waves)
    if cand.construction == "multi-order":
        target = float(cand.waves)  # the order is free; the target is modulo one wave
    cond = conditions(study, target)
    ev = _Yield(study, cand, samples, seed, client)
    if objective == "yield" and not ev.has_tolerances:
        raise RetolError(
            "--objective",
            f"yield needs tolerances and candidate {cand.name!r} has none",
            "add a [tolerances] table, or use --objective band-error",
        )
    vs = variants(study, cand, keys, bounds, materials)
    kind = (
        objective
        if objective != "yield"
        else ("band-error" if study.goal.over == "band" else "spectrum-error")
    )
    seed_de = DE_SEED if seed is None else int(seed)
    found = _search(vs, cond, kind, seed_de, say)
    start_plate = cand.plate
    start_params = _start_parameters(cand, keys, vs)
    if objective == "yield":
        start_value = ev.rate(start_plate)[0]
        best = _best_yield(found, ev, start_plate, say)
        best_plate, best_params, best_value = best or (start_plate, start_params, start_value)
    else:
        e, v, x = found[0]
        best_plate, best_params, best_value = v.make(x), v.parameters(x), e
        start_value = nominal_error(start_plate, cond, kind)
        if start_value < best_value:  # never report a design worse than the start
            best_plate, best_params, best_value = start_plate, start_params, start_value
    method = _method(objective, kind, seed_de, vs)
    y, ylo, yhi = ev.rate(best_plate)
    met = ev.nominal_pass(best_plate) and (objective != "yield" or y > 0)
    block = candidate_toml(study, cand, best_plate)
    return Design(
        candidate=cand.name,
        objective=objective,
        free=keys,
        start_value=float(start_value),
        start_parameters=start_params,
        best_value=float(best_value),
        best_parameters=best_params,
        yield_=float(y),
        yield_low=float(ylo),
        yield_high=float(yhi),
        met=bool(met),
        plate=best_plate,
        toml=block,
        method=method,
        unit="1" if objective == "yield" else "waves",
    )


def _search(vs, cond: Conditions, kind: str, seed_de: int, say) -> list:
    """Each variant's best design by the nominal error: [(error, variant, x)], best first."""
    found = []
    for v in vs:
        if not v.keys:
            found.append((nominal_error(v.make(v.start), cond, kind), v, v.start))
            continue
        say(f"global search {dict(v.label) or ''} over {', '.join(v.keys)}")
        xg = _global(v, lambda p: nominal_error(p, cond, kind), seed_de)
        xp = _polish(v, cond, kind, xg)
        found.append((nominal_error(v.make(xp), cond, kind), v, xp))
    found.sort(key=lambda t: t[0])
    return found


def _method(objective: str, kind: str, seed_de: int, vs) -> str:
    """How the optimum was searched, in one line."""
    if not any(v.keys for v in vs):
        return "every discrete choice evaluated" + (
            " for its real yield" if objective == "yield" else ""
        )
    if objective == "yield":
        return (
            f"differential evolution (seed {seed_de}) on the nominal {kind}, then Nelder-Mead on "
            "the mean logistic pass margin (common random numbers), from the global result "
            "and from the start; best real yield kept"
        )
    polish = "SLSQP minimax and least-squares" if kind == "band-error" else "least-squares"
    many = ", over every discrete choice" if len(vs) > 1 else ""
    return f"differential evolution (seed {seed_de}) then {polish} polish{many}"


def _start_parameters(cand: Candidate, keys, vs) -> dict:
    p = cand.plate
    out: dict = {}
    for k in keys:
        if k == "order":
            out[k] = int(cand.order)
        elif k == "thick_plate":
            out[k] = float(cand.thick_plate_um)
        elif k in ("athermal", "wide_field"):
            out[k] = f"{p.layers[0].material.name}/{p.layers[1].material.name} compound"
        elif k == "thickness_3":
            out[k] = 0.0
        elif k.startswith("thickness_"):
            out[k] = float(p.layers[int(k[-1]) - 1].thickness_um)
        elif k.startswith("retardance_"):
            la = p.layers[int(k.split("_")[1]) - 1]
            out[k] = float(la.thickness_um * 1e3 * _dn(la.material, p.design_nm) / p.design_nm)
        elif k.startswith("angle_"):
            out[k] = float(p.layers[int(k.split("_")[1]) - 1].axis_deg - p.axis_deg)
    return out


def _best_yield(found, ev: _Yield, start_plate: Plate, say):
    """Real yields of the start, the global results and their surrogate polish; the best."""
    y0 = ev.rate(start_plate)[0]
    best = (y0, start_plate, None)
    params = {}
    for _e, v, x in found[:3]:  # the three best discrete choices by nominal error
        tries = [x]
        if v.keys:
            say(f"yield polish {dict(v.label) or ''}")
            # from the global result and from the start: the surrogate has local optima
            for x0 in (x, v.start):
                tries.append(_polish_yield(v, ev, x0, maxfev=40 * len(v.keys)))
        for xx in tries:
            plate = v.make(xx)
            y = ev.rate(plate)[0]
            if y > best[0]:
                best = (y, plate, v)
                params = v.parameters(xx)
    if best[2] is None:
        return None
    return best[1], params, best[0]


# ----------------------------------------------------------------------------- TOML


def _fmt(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(round(v, 9))
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, Mapping):
        return "{ " + ", ".join(f"{k} = {_fmt(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def candidate_toml(study, cand: Candidate, plate: Plate) -> str:
    """The designed candidate as a ``[[candidate]]`` block; checked to load with the spec.

    A multi-order or compound plate keeps its construction; any other design is written as an
    explicit ``stack`` of layers (the constructions cannot express free thicknesses).
    """
    name = f"{cand.name} (designed)"
    lines = ["[[candidate]]", f"name = {_fmt(name)}"]
    if plate.construction == "multi-order":
        lines += [
            'construction = "multi-order"',
            f"material = {_fmt(cand.material)}",
            f"order = {int(plate.details['order'])}",
        ]
    elif plate.construction == "compound":
        lines += [
            'construction = "compound"',
            f"material = {_fmt(cand.material)}",
            f'thick_plate = "{plate.layers[0].thickness_um:.4f}um"',
        ]
    else:
        lines.append('construction = "stack"')
    lines += [
        f"waves = {_fmt(float(cand.waves))}",
        f'design = "{plate.design_nm:g}nm"',
        f"axis_deg = {_fmt(float(plate.axis_deg))}",
    ]
    if lines[2] == 'construction = "stack"':
        lines.append("layers = [")
        for la in plate.layers:
            lines.append(
                f'  {{ material = {_fmt(la.material.name)}, thickness = "{la.thickness_um:.4f}um",'
                f" axis_deg = {_fmt(round(float(la.axis_deg - plate.axis_deg), 4))} }},"
            )
        lines.append("]")
    if cand.tolerances:
        tol = {k: d.to_spec() for k, d in cand.tolerances.items()}
        lines.append(f"tolerances = {_fmt(tol)}")
    block = "\n".join(lines) + "\n"
    _check_loads(study, block)
    return block


def _check_loads(study: Study, block: str) -> None:
    """The block must load with the spec it was made for (tolerance.spec.loads)."""
    from .spec import loads

    if study.source_text is None:
        return
    loads(study.source_text.rstrip("\n") + "\n\n" + block, study.spec_path, study.base_dir)
