"""Distributions of a tolerance: normal, uniform, an absolute range, or a tolerance with coverage.

A :class:`Distribution` is frozen and validated once (:func:`parse`); the engine only asks it to
turn standard draws into values (:meth:`Distribution.draw`), for its width in the form the spec
used (:attr:`Distribution.width`) and for a copy scaled by a factor (:meth:`Distribution.scaled`).
Nothing else branches on the kind.

References
----------
.. [1] JCGM 100:2008 (GUM), Evaluation of measurement data — Guide to the expression of
   uncertainty in measurement: 4.3.7 (rectangular distribution), 6.2 (expanded uncertainty).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import RetolError
from .registry import Key, Registry

#: The forms a tolerance may be written in; each names its keys.
FORMS = Registry("distribution form")
FORMS.add("sigma", "normal, standard deviation sigma", (Key("sigma", required=True),))
FORMS.add("uniform", "uniform on nominal ± half width", (Key("uniform", required=True),))
FORMS.add(
    "range",
    "uniform on the absolute range [low, high] (a value, not an offset)",
    (Key("low", required=True), Key("high", required=True)),
)
FORMS.add(
    "tolerance",
    "normal with sigma = tolerance / coverage (an expanded uncertainty, k = 3 by default)",
    (Key("tolerance", required=True), Key("coverage")),
)
DIST_KEYS = tuple(k for e in FORMS.values() for k in e.key_names)
DEFAULT_COVERAGE = 3.0


@dataclass(frozen=True)
class Distribution:
    """One tolerance's distribution, in the unit of its key.

    ``kind`` is the sampling law ("normal", "uniform" or "range"); ``form`` is how the spec wrote
    it ("sigma", "uniform", "range" or "tolerance"), which decides what :attr:`width` means.
    """

    kind: str
    sigma: float | None = None
    half_width: float | None = None
    low: float | None = None
    high: float | None = None
    limit: float | None = None
    coverage: float | None = None

    # ------------------------------------------------------------------ what the engine asks
    def draw(self, z, u, center: float = 0.0):
        """Values from standard normal draws ``z`` and uniform [0, 1) draws ``u``.

        normal: center + σ·z; uniform: center + h·(2u − 1); range: low + (high − low)·u
        (absolute, ``center`` ignored).
        """
        if self.kind == "normal":
            return center + self.sigma * z
        if self.kind == "uniform":
            return center + self.half_width * (2.0 * u - 1.0)
        return self.low + (self.high - self.low) * u

    @property
    def form(self) -> str:
        if self.kind == "normal":
            return "tolerance" if self.limit is not None else "sigma"
        return self.kind

    @property
    def width(self) -> float:
        """The width in the spec's own form: σ, the half width, ± tolerance, or half the range."""
        if self.kind == "normal":
            return self.limit if self.limit is not None else self.sigma
        if self.kind == "uniform":
            return self.half_width
        return 0.5 * (self.high - self.low)

    @property
    def std(self) -> float:
        """Standard deviation of the values (GUM 4.3.7 for the uniform laws)."""
        if self.kind == "normal":
            return self.sigma
        if self.kind == "uniform":
            return self.half_width / math.sqrt(3.0)
        return (self.high - self.low) / math.sqrt(12.0)

    @property
    def reach(self) -> float:
        """The largest |value| it can practically give (6σ for a normal)."""
        if self.kind == "normal":
            return 6.0 * self.sigma
        if self.kind == "uniform":
            return self.half_width
        return max(abs(self.low), abs(self.high))

    @property
    def is_zero(self) -> bool:
        """True when it cannot vary (a fixed range still sets a value other than the nominal)."""
        if self.kind == "normal":
            return self.sigma == 0
        if self.kind == "uniform":
            return self.half_width == 0
        return self.low == self.high

    @property
    def is_fixed_value(self) -> bool:
        """A range with low == high: a condition (a fixed value), not a tolerance."""
        return self.kind == "range" and self.low == self.high

    def scaled(self, factor: float) -> Distribution:
        """The same form with its width times ``factor``; a range scales about its centre."""
        if not (math.isfinite(factor) and factor >= 0):
            raise RetolError("scale", f"must be a finite number >= 0, got {factor!r}")
        if self.kind == "normal":
            lim = None if self.limit is None else self.limit * factor
            return Distribution(
                "normal", sigma=self.sigma * factor, limit=lim, coverage=self.coverage
            )
        if self.kind == "uniform":
            return Distribution("uniform", half_width=self.half_width * factor)
        c = 0.5 * (self.low + self.high)
        h = 0.5 * (self.high - self.low) * factor
        return Distribution("range", low=c - h, high=c + h)

    def with_width(self, width: float) -> Distribution:
        """The same form with the given :attr:`width`."""
        w = self.width
        if w == 0:
            raise RetolError("width", "a zero-width tolerance cannot be rescaled")
        return self.scaled(width / w)

    # ------------------------------------------------------------------ serialisation
    def to_dict(self) -> dict:
        """The normalised JSON form stored in the results grid."""
        if self.kind == "normal":
            d = {"kind": "normal", "sigma": self.sigma}
            if self.limit is not None:
                d.update(limit=self.limit, coverage=self.coverage)
            return d
        if self.kind == "uniform":
            return {"kind": "uniform", "half_width": self.half_width}
        return {"kind": "range", "low": self.low, "high": self.high}

    def to_spec(self) -> dict:
        """The table as a spec writes it, e.g. ``{"sigma": 0.3}`` (loads back equal)."""
        if self.form == "tolerance":
            return {"tolerance": self.limit, "coverage": self.coverage}
        if self.form == "sigma":
            return {"sigma": self.sigma}
        if self.form == "uniform":
            return {"uniform": self.half_width}
        return {"low": self.low, "high": self.high}

    @classmethod
    def from_dict(cls, d) -> Distribution:
        if isinstance(d, Distribution):
            return d
        return cls(**{k: (float(v) if k != "kind" else v) for k, v in d.items()})

    def describe(self, unit: str = "") -> str:
        """In words, e.g. 'normal, σ = 0.3 µm' (``unit`` as printed after a number)."""
        if self.kind == "normal":
            extra = (
                f" (±{_g(self.limit)}{unit} read as {_g(self.coverage)} σ)"
                if self.limit is not None
                else ""
            )
            return f"normal, σ = {_g(self.sigma)}{unit}{extra}"
        if self.kind == "uniform":
            return f"uniform, ±{_g(self.half_width)}{unit}"
        return f"uniform from {_g(self.low)} to {_g(self.high)}{unit}"


def _g(x: float) -> str:
    return f"{x:.6g}"


def _number(value, field: str, convert=None) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        if isinstance(value, str) and convert is not None:
            return convert(value, field)
        raise RetolError(field, f"must be a number, got {value!r}", "e.g. 0.3")
    v = float(value)
    if not math.isfinite(v):
        raise RetolError(field, "must be finite", "give a finite number")
    return v


def parse(value, field: str, convert=None) -> Distribution:
    """Validate a distribution table such as ``{ sigma = 0.3 }``.

    Parameters
    ----------
    value : dict
        One of ``{sigma}``, ``{uniform}``, ``{low, high}``, ``{tolerance[, coverage]}``.
    field : str
        Where it was written, for messages (e.g. ``"spec.toml: [tolerances].clocking_deg"``).
    convert : callable(str, field) -> float, optional
        Reads a number written with a unit (e.g. ``"0.2um"``); without it strings are refused.
    """
    if isinstance(value, int | float) and not isinstance(value, bool):
        raise RetolError(
            field,
            f"a bare number ({value!r}) does not say which distribution",
            f"write {{ sigma = {value} }} (normal) or {{ uniform = {value} }} (± half width)",
        )
    if not isinstance(value, dict):
        raise RetolError(
            field,
            "must be a table such as { sigma = 0.3 }",
            "use sigma, uniform, low/high or tolerance/coverage",
        )
    for k in value:
        if k not in DIST_KEYS:
            import difflib

            close = difflib.get_close_matches(str(k), DIST_KEYS, n=1)
            fix = f"did you mean {close[0]!r}?" if close else f"known keys: {', '.join(DIST_KEYS)}"
            raise RetolError(f"{field}.{k}", "unknown key", fix)
    nums = {k: _number(v, f"{field}.{k}", convert) for k, v in value.items()}
    for k, v in nums.items():
        if not math.isfinite(v):
            raise RetolError(f"{field}.{k}", "must be finite", "give a finite number")
    kinds = [k for k in ("sigma", "uniform", "tolerance") if k in nums]
    has_range = "low" in nums or "high" in nums
    if len(kinds) + has_range != 1:
        raise RetolError(
            field, "give exactly one of sigma, uniform, low/high, tolerance", "e.g. { sigma = 0.3 }"
        )
    if "coverage" in nums and "tolerance" not in nums:
        raise RetolError(
            f"{field}.coverage",
            "only goes with tolerance",
            "e.g. { tolerance = 0.9, coverage = 3 }",
        )
    if has_range:
        if "low" not in nums or "high" not in nums:
            raise RetolError(
                field, "a range needs both low and high", "e.g. { low = 15, high = 35 }"
            )
        if nums["low"] > nums["high"]:
            raise RetolError(
                f"{field}.low", f"low {nums['low']:g} is above high {nums['high']:g}", "swap them"
            )
        return Distribution("range", low=nums["low"], high=nums["high"])
    k = kinds[0]
    if nums[k] < 0:
        raise RetolError(
            f"{field}.{k}", f"must not be negative, got {nums[k]:g}", "give a width >= 0"
        )
    if k == "sigma":
        return Distribution("normal", sigma=nums["sigma"])
    if k == "uniform":
        return Distribution("uniform", half_width=nums["uniform"])
    cov = nums.get("coverage", DEFAULT_COVERAGE)
    if cov <= 0:
        raise RetolError(f"{field}.coverage", "must be positive", "e.g. coverage = 3")
    return Distribution(
        "normal", sigma=nums["tolerance"] / cov, limit=nums["tolerance"], coverage=cov
    )


def from_drift(drift: dict) -> Distribution:
    """The laser's centre drift (as parsed by :func:`tolerance.sources.parse_drift`) as offsets
    from the line's centre. [nm]"""
    kind = drift["kind"]
    if kind == "sigma":
        return Distribution("normal", sigma=drift["sigma_nm"])
    if kind == "tolerance":
        return Distribution(
            "normal",
            sigma=drift["sigma_nm"],
            limit=drift["tolerance_nm"],
            coverage=drift["coverage"],
        )
    if kind == "uniform":
        return Distribution("uniform", half_width=drift["half_width_nm"])
    lo, hi = drift["span_nm"]
    return Distribution("range", low=float(lo), high=float(hi))
