"""The validated study: frozen, typed records that everything downstream of the spec reads.

:func:`tolerance.spec.load_spec` returns a :class:`Study`; nothing after it re-parses or patches
it.  A study serialises to the normalised JSON stored in the results grid (:meth:`Study.to_dict`)
and a grid's JSON loads back into an equal study (:meth:`Study.from_dict`).  A changed copy for
an engine call is made with :func:`dataclasses.replace` (e.g. another plate or other tolerances).
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from .distributions import Distribution
from .frozen import ReadOnlyMapping
from .tolerances import DRIFT, SHORT, expand_train


def _proxy(d) -> Mapping:
    return ReadOnlyMapping(dict(d))


@dataclass(frozen=True)
class WavelengthGrid:
    """The analysis grid: start, stop and step [nm] and the number of wavelengths."""

    start_nm: float
    stop_nm: float
    step_nm: float
    count: int

    def values(self) -> np.ndarray:
        """(count,) analysis wavelengths. [nm]"""
        return np.round(self.start_nm + self.step_nm * np.arange(self.count), 9)

    def to_dict(self) -> dict:
        return {
            "start_nm": self.start_nm,
            "stop_nm": self.stop_nm,
            "step_nm": self.step_nm,
            "count": self.count,
        }


@dataclass(frozen=True)
class Source:
    """The source as written (``table``) and as built on the analysis grid (``spectrum``).

    ``drift`` is the laser's centre drift as a distribution of offsets [nm], or None.
    """

    table: Mapping
    spectrum: object = field(compare=False, repr=False)
    drift: Distribution | None = None

    def to_dict(self) -> dict:
        return json.loads(json.dumps(_thaw(self.table)))


@dataclass(frozen=True)
class InputState:
    """The light entering the plate.

    A state of major-axis azimuth ``azimuth_deg`` [deg], ellipticity angle ``ellipticity_deg``
    [deg] (0: linear; positive right-handed) and degree of polarization ``dop`` [1]; or, with
    ``extinction_db`` [dB], the light behind a linear polarizer of that extinction ratio at
    ``azimuth_deg`` lit by unpolarized light (linear, with the polarizer's degree of
    polarization; the ``input_azimuth_deg`` tolerance turns the polarizer).
    """

    azimuth_deg: float = 0.0
    ellipticity_deg: float = 0.0
    dop: float = 1.0
    extinction_db: float | None = None
    #: An input that varies over the spectrum: (wavelengths [nm], normalised Stokes rows), each
    #: a tuple, from ``[input] stokes_csv`` (:mod:`tolerance.input_spectrum`); None otherwise.
    #: The ``input_azimuth_deg`` tolerance then turns the whole input.
    stokes_table: tuple | None = None

    @property
    def spectral(self) -> bool:
        """True when the input state varies over the spectrum (a Stokes table)."""
        return self.stokes_table is not None

    @property
    def degree_of_polarization(self) -> float:
        """The input's degree of polarization: ``dop``, or (ER − 1)/(ER + 1) behind a polarizer."""
        if self.extinction_db is None:
            return float(self.dop)
        from .polarization import polarizer_output_stokes

        return float(polarizer_output_stokes(0.0, self.extinction_db)[1])

    def jones(self, azimuth_rad) -> tuple:
        """(Re Ex, Re Ey, Im Ex, Im Ey) of the polarized part for azimuths [rad] (S,).

        Notes
        -----
        R(ψ)·(cos χ, −i sin χ): S3 = 2 Im(Ex Ey*) = sin 2χ, positive right-handed as in
        :func:`tolerance.polarization.stokes_from_ellipse`.  A linear input (χ = 0) is exactly
        (cos ψ, sin ψ) with zero imaginary parts.
        """
        a = np.asarray(azimuth_rad, dtype=float)
        ca, sa = np.cos(a), np.sin(a)
        if self.ellipticity_deg == 0.0:
            return ca, sa, np.zeros_like(a), np.zeros_like(a)
        chi = np.radians(self.ellipticity_deg)
        cc, sc = np.cos(chi), np.sin(chi)
        return ca * cc, sa * cc, sa * sc, -ca * sc

    def to_dict(self) -> dict:
        if self.stokes_table is not None:  # the table is the whole input
            wl, s = self.stokes_table
            cols = {f"s{k + 1}": [r[k] for r in s] for k in range(3)}
            return {"stokes_table": {"wavelength_nm": list(wl), **cols}}
        d: dict = {"azimuth_deg": self.azimuth_deg}
        # the other keys only when set, so that linear studies keep their JSON
        if self.ellipticity_deg != 0.0:
            d["ellipticity_deg"] = self.ellipticity_deg
        if self.dop != 1.0:
            d["dop"] = self.dop
        if self.extinction_db is not None:
            d["extinction_db"] = self.extinction_db
        return d


@dataclass(frozen=True)
class Goal:
    """What the output must be: the state, the metric and its minimum, over band or spectrum."""

    state: str
    metric: str
    min: float
    over: str = "band"
    azimuth_deg: float = 0.0
    handedness: str | None = None
    acceptance_limit_waves: float = 0.01
    #: Required yield (``[goal] yield``, a fraction), or None: then any yield above zero. [1]
    required_yield: float | None = None
    #: The largest allowed value of a metric where smaller is better (then ``min`` is NaN).
    max: float | None = None
    #: An elliptical goal's b/a [1] or ellipticity angle [deg] (one of the two), or None.
    axial_ratio: float | None = None
    ellipticity_deg: float | None = None
    #: A "stokes" goal's (s1, s2, s3), or None.
    stokes: tuple[float, float, float] | None = None

    @property
    def sense(self) -> str:
        """ "min" when the goal gives a least value (larger is better), "max" for a largest."""
        return "max" if self.max is not None else "min"

    @property
    def limit(self) -> float:
        """The goal's ``min`` or ``max``, whichever it gives."""
        return float(self.max) if self.max is not None else float(self.min)

    def passes(self, values) -> np.ndarray:
        """Whether each metric value meets the goal: >= min, or <= max. [bool array]"""
        v = np.asarray(values)
        return v <= self.max if self.max is not None else v >= self.min

    def margin(self, values) -> np.ndarray:
        """How far each value is inside the goal (negative: outside), in the metric's unit."""
        v = np.asarray(values)
        return self.max - v if self.max is not None else v - self.min

    def to_dict(self) -> dict:
        d = {
            "state": self.state,
            "metric": self.metric,
            "min": self.min,
            "over": self.over,
            "azimuth_deg": self.azimuth_deg,
            "handedness": self.handedness,
            "acceptance_limit_waves": self.acceptance_limit_waves,
        }
        if self.max is not None:  # a goal gives min or max, never both
            del d["min"]
            d["max"] = self.max
        if self.required_yield is not None:  # only when set, so older studies' JSON is unchanged
            d["yield"] = self.required_yield
        for k in ("axial_ratio", "ellipticity_deg"):
            if getattr(self, k) is not None:
                d[k] = getattr(self, k)
        if self.stokes is not None:
            d["stokes"] = list(self.stokes)
        return d

    def vector(self, nominal_handedness: int = 1) -> np.ndarray:
        """The goal's normalised Stokes 3-vector (s1, s2, s3).

        ``nominal_handedness`` (+1/−1) stands in for a circular goal that names no handedness.
        """
        from .polarization import goal_vector

        if self.state == "circular":
            hand = nominal_handedness
            if self.handedness is not None:
                hand = 1 if self.handedness == "right" else -1
            return goal_vector("circular", handedness=hand)
        if self.state == "linear":
            return goal_vector("linear", self.azimuth_deg)
        if self.state == "stokes":
            return goal_vector("stokes", stokes=self.stokes)
        return goal_vector(
            "elliptical",
            self.azimuth_deg,
            self.handedness,
            axial_ratio=self.axial_ratio,
            ellipticity_deg=self.ellipticity_deg,
        )


@dataclass(frozen=True)
class Environment:
    """Nominal plate temperature [°C], the range the maps cover [°C] and the largest tilt [deg]."""

    temperature_c: float = 20.0
    temperature_range: tuple[float, float] = (-10.0, 50.0)
    tilt_max_deg: float = 20.0

    def to_dict(self) -> dict:
        return {
            "temperature_c": self.temperature_c,
            "temperature_range": list(self.temperature_range),
            "tilt_max_deg": self.tilt_max_deg,
        }


@dataclass(frozen=True)
class LayerSpec:
    """One layer of a ``stack`` candidate as written: material name or path, µm, deg."""

    material: str
    thickness_um: float
    axis_deg: float = 0.0

    def to_dict(self) -> dict:
        return {
            "material": self.material,
            "thickness_um": self.thickness_um,
            "axis_deg": self.axis_deg,
        }


@dataclass(frozen=True)
class Candidate:
    """One candidate plate: its construction and parameters, and its own tolerance overrides.

    ``plate`` is the designed :class:`tolerance.plates.Plate` (built and checked at validation).
    """

    name: str
    construction: str
    material: str | None
    waves: float
    design_nm: float | None
    axis_deg: float
    order: int | None = None
    thick_plate_um: float | None = None
    partner: str | None = None
    match_nm: tuple[float, float] | None = None
    retardance_nm: float | None = None
    layers: tuple[LayerSpec, ...] | None = None
    tolerances: Mapping[str, Distribution] = field(default_factory=lambda: _proxy({}))
    plate: object = field(default=None, compare=False, repr=False)
    #: The test wavelength of this candidate's own ``retardance_waves`` override. [nm]
    retardance_at_nm: float | None = None
    #: A train's elements (each a plate in its own mount; light meets element 0 first), or
    #: None for a single plate.  ``plate`` is then their layers in order (:func:`train_plate`).
    elements: tuple[Candidate, ...] | None = None
    #: The plate's faces (:class:`tolerance.etalon.Faces`); None means ideal (no reflections).
    faces: object = None
    #: Layers separated by air gaps (each its own etalon) instead of cemented.
    air_gap: bool = False
    #: A train's polarizer element: its extinction ratio [dB] (``axis_deg`` its azimuth).
    extinction_db: float | None = None

    @property
    def is_polarizer(self) -> bool:
        """True for a linear-polarizer element of a train."""
        return self.construction == "polarizer"

    @property
    def plate_layers(self) -> int:
        """Layers whose thickness and crossing can err (none for a polarizer element)."""
        return 0 if self.is_polarizer else len(self.plate.layers)

    @property
    def face_model(self):
        """The faces as a :class:`tolerance.etalon.Faces` (ideal when not given)."""
        from .etalon import IDEAL

        return self.faces if self.faces is not None else IDEAL

    def design_keys(self) -> dict:
        """The construction's own keywords for :func:`tolerance.plates.design_plate`."""
        out = {}
        for k in ("order", "thick_plate_um", "partner", "match_nm", "retardance_nm"):
            v = getattr(self, k)
            if v is not None:
                out[k] = list(v) if k == "match_nm" else v
        if self.layers is not None:
            out["layers"] = [la.to_dict() for la in self.layers]
        return out

    def build_plate(self):
        """Design this candidate's plate (raises RetolError naming the bad key)."""
        from .plates import design_plate

        if self.elements is not None:
            return train_plate(self.name, self.elements)
        return design_plate(
            self.construction,
            material=self.material,
            waves=self.waves,
            design_nm=self.design_nm,
            axis_deg=self.axis_deg,
            name=self.name,
            **self.design_keys(),
        )

    def to_dict(self) -> dict:
        if self.is_polarizer:
            d = {"name": self.name, "polarizer": self.axis_deg, "extinction_db": self.extinction_db}
            if self.tolerances:
                d["tolerances"] = _tolerance_dicts(self.tolerances, None)
            return d
        if self.elements is not None:
            d = {"name": self.name, "construction": self.construction}
            d["elements"] = [
                {k: v for k, v in e.to_dict().items() if k != "name"} for e in self.elements
            ]
            if self.tolerances:
                d["tolerances"] = _tolerance_dicts(self.tolerances, self.retardance_at_nm)
            return d
        d: dict = {"name": self.name, "construction": self.construction}
        if self.material is not None:
            d["material"] = self.material
        d["waves"] = self.waves
        d["design_nm"] = self.design_nm
        d["axis_deg"] = self.axis_deg
        for k, v in self.design_keys().items():
            d[k] = v
        if self.tolerances:
            d["tolerances"] = _tolerance_dicts(self.tolerances, self.retardance_at_nm)
        if self.faces is not None:  # ideal faces are left out: older stored specs stay equal
            d["faces"] = self.faces.to_spec()
        if self.air_gap:
            d["air_gap"] = True
        return d


def train_plate(name: str, elements) -> object:
    """One :class:`~tolerance.plates.Plate` of a train's elements: their layers in light order.

    ``details["element_of_layer"]`` gives each layer's element index, ``details["elements"]``
    the elements' own plates; the design wavelength is element 0's, the axis the last one's.
    """
    from .plates import Plate

    layers, owner = [], []
    for e, el in enumerate(elements):
        layers.extend(el.plate.layers)
        owner.extend([e] * len(el.plate.layers))
    last = elements[-1].plate
    return Plate(
        name=name,
        construction="train",
        layers=tuple(layers),
        waves=float(last.waves),
        design_nm=float(elements[0].plate.design_nm),
        axis_deg=float(last.axis_deg),
        details={"element_of_layer": tuple(owner), "elements": tuple(e.plate for e in elements)},
    )


@dataclass(frozen=True)
class RunSettings:
    """Monte Carlo settings: sample count, seed, chunking, quantiles, confidence level."""

    samples: int = 20000
    seed: int = 0
    chunk_size: int | None = None
    quantiles: tuple[float, ...] = (0.01, 0.05, 0.5, 0.95, 0.99)
    confidence: float = 0.95
    sensitivity_samples: int | None = None
    keep_samples: bool = False
    #: "random" (independent draws) or "sobol" (scrambled Sobol' points, in replicates)
    sampling: str = "random"
    replicates: int = 8
    #: "auto": a rare-reject estimator when the yield is >= 0.999; "off": never
    rare: str = "auto"
    #: base samples of the variance-based (Sobol') sensitivity indices; 0: none
    variance_samples: int = 1024

    def to_dict(self) -> dict:
        out = {
            "samples": self.samples,
            "seed": self.seed,
            "chunk_size": self.chunk_size,
            "quantiles": list(self.quantiles),
            "confidence": self.confidence,
            "sensitivity_samples": self.sensitivity_samples,
            "keep_samples": self.keep_samples,
        }
        # the statistics settings of issue 16 appear only when changed, so that the JSON of
        # earlier studies (stored in their grids) stays the same
        for f in ("sampling", "replicates", "rare", "variance_samples"):
            if getattr(self, f) != getattr(RunSettings, f):
                out[f] = getattr(self, f)
        return out


@dataclass(frozen=True)
class ReportSettings:
    """Figure formats of the report."""

    formats: tuple[str, ...] = ("png",)

    def to_dict(self) -> dict:
        return {"formats": list(self.formats)}


@dataclass(frozen=True)
class AllocationSettings:
    """``[allocation]``: the yield target and the cost table of available widths.

    ``cost`` maps a tolerance key to ``(widths, costs)``, both tuples in the order written
    (widths strictly monotone, costs >= 0), widths in the form the tolerance is written in.
    """

    target_yield: float | None = None
    cost: Mapping[str, tuple[tuple[float, ...], tuple[float, ...]]] = field(
        default_factory=lambda: _proxy({})
    )

    def to_dict(self) -> dict:
        d: dict = {}
        if self.target_yield is not None:
            d["target_yield"] = self.target_yield
        if self.cost:
            d["cost"] = {k: {"widths": list(w), "cost": list(c)} for k, (w, c) in self.cost.items()}
        return d


@dataclass(frozen=True)
class Study:
    """A validated tolerance study: everything one ``retol run`` needs.

    ``spec_path`` is the file it came from (for messages), ``base_dir`` the folder relative paths
    in it resolve against and ``source_text`` the file as written (for the report).
    """

    title: str
    wavelength: WavelengthGrid
    source: Source
    input: InputState
    goal: Goal
    environment: Environment
    candidates: tuple[Candidate, ...]
    tolerances: Mapping[str, Distribution]
    run: RunSettings
    report: ReportSettings
    spec_path: str = "<spec>"
    base_dir: str | None = field(default=None, compare=False)
    source_text: str | None = field(default=None, compare=False, repr=False)
    #: The test wavelength of ``[tolerances].retardance_waves`` (None: the design wavelength). [nm]
    retardance_at_nm: float | None = None
    allocation: AllocationSettings | None = None

    def retardance_at(self, candidate: Candidate) -> float:
        """The wavelength at which the candidate's ``retardance_waves`` tolerance is read. [nm]

        The candidate's own ``at`` if it overrides the tolerance, else the study's, else the
        plate's design wavelength.
        """
        if "retardance_waves" in candidate.tolerances:
            at = candidate.retardance_at_nm
        else:
            at = self.retardance_at_nm
        return float(at) if at is not None else float(candidate.plate.design_nm)

    @property
    def file_name(self) -> str:
        from pathlib import Path

        return Path(self.spec_path).name if self.spec_path != "<spec>" else self.spec_path

    def tolerances_for(self, candidate: Candidate) -> Mapping[str, Distribution]:
        """The candidate's tolerances: the study's, overridden by its own, plus the laser drift.

        For a train the plate and mount tolerances (:data:`~tolerance.tolerances.PER_ELEMENT`)
        are named per element (``clocking_deg[element 1]``), each element's own table first.
        """
        tol = dict(self.tolerances)
        tol.update(candidate.tolerances)
        if self.source.drift is not None:
            tol[DRIFT] = self.source.drift
        if candidate.elements is not None:
            # a train: each element's plate and mount tolerances by name, its own table first
            tol = expand_train(
                tol,
                [el.tolerances for el in candidate.elements],
                [el.plate_layers for el in candidate.elements],
            )
        return _proxy(tol)

    def candidate(self, name: str) -> Candidate:
        from .errors import RetolError

        for c in self.candidates:
            if c.name == name:
                return c
        raise RetolError(
            "candidate",
            f"no candidate {name!r}",
            f"known: {', '.join(c.name for c in self.candidates)}",
        )

    @property
    def tolerance_order(self) -> tuple[str, ...]:
        """Every tolerance key in the grid's order (the registry's, then drift)."""
        return tuple(SHORT)

    def to_dict(self) -> dict:
        """The normalised JSON form stored in the grid's ``spec`` attribute."""
        return {
            "title": self.title,
            "wavelength": self.wavelength.to_dict(),
            "source": self.source.to_dict(),
            "input": self.input.to_dict(),
            "goal": self.goal.to_dict(),
            "environment": self.environment.to_dict(),
            "candidates": [c.to_dict() for c in self.candidates],
            "tolerances": _tolerance_dicts(self.tolerances, self.retardance_at_nm),
            "run": self.run.to_dict(),
            "report": self.report.to_dict(),
            "spec_path": self.spec_path,
            # written only when given, so that studies without them keep their JSON
            **({"allocation": self.allocation.to_dict()} if self.allocation else {}),
        }

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), sort_keys=True)

    @classmethod
    def from_dict(cls, d: Mapping, base_dir=None, source_text=None) -> Study:
        """The study of a normalised dict (a grid's ``spec`` attribute), validated again."""
        from .spec import from_normalised

        return from_normalised(d, base_dir=base_dir, source_text=source_text)


def _tolerance_dicts(tolerances, retardance_at_nm) -> dict:
    """Tolerances as JSON; ``retardance_waves`` carries its test wavelength as ``at_nm``."""
    out = {k: v.to_dict() for k, v in tolerances.items()}
    if retardance_at_nm is not None and "retardance_waves" in out:
        out["retardance_waves"]["at_nm"] = retardance_at_nm
    return out


def _thaw(value):
    if isinstance(value, Mapping):
        return {k: _thaw(v) for k, v in value.items()}
    if isinstance(value, tuple | list):
        return [_thaw(v) for v in value]
    return value
