"""Incoming inspection: identify a delivered plate from a measured spectrum, accept or reject it.

The engineer measures a delivered plate, either as a retardance spectrum (a polarimeter, often
reporting the retardance wrapped modulo one wave or folded into [0, 1/2] wave) or as the
transmission of the plate between crossed or parallel polarizers (a spectrometer).  This module
fits the nominal plate's layer thicknesses and its axis offset to the spectrum, resolves the order
ambiguity of wrapped, folded and transmission data from the material's dispersion, reports the
uncertainties (covariance, checked by a residual bootstrap), writes the plate as built as a spec
candidate, decides accept / reject / undecided against the drawing's tolerances with a guard band
(JCGM 106:2012) and predicts the system yield of this very plate with only the mount and
environment tolerances left.

Units at the API: wavelengths nm, thicknesses µm, angles degrees, retardance in waves,
transmission as a fraction of the open-beam level.

Notebook use::

    from tolerance.inspection import read_measurement, fit_plate, inspect_plate
    m = read_measurement("plate_03.csv", polarizers="crossed")
    result = inspect_plate(m, spec_path="lot_qwp.toml", candidate="quartz multi-order")
    result.to_dict()["fit"]["thicknesses_um"]
"""

from __future__ import annotations

import csv
import difflib
import json
import math
import re
import tomllib
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from .errors import RetolError
from .plates import Layer, Plate

TWO_PI = 2.0 * np.pi
#: Measured-quantity columns a CSV may carry (exactly one of them).
VALUE_COLUMNS = ("retardance_waves", "retardance_deg", "transmission")
#: Every column a measured CSV may carry.
COLUMNS = ("wavelength_nm",) + VALUE_COLUMNS + ("sigma",)
#: How a retardance spectrum was reported: absolute, modulo one wave, or folded into [0, 1/2].
WRAPS = ("auto", "none", "wave", "half")
POLARIZERS = ("crossed", "parallel")
#: Transmission may stray this far outside [0, 1] when no sigma column says how noisy it is
#: (common practice for a spectrometer ratio).
TRANSMISSION_SLACK = 0.05
#: A competing solution within this chi-square of the best leaves the order undecided
#: (a likelihood-ratio test at about 3 sigma for one parameter; common practice).
AMBIGUITY_DCHI2 = 9.0
#: Coverage factor of the expanded uncertainty that sets the guard band (JCGM 106:2012).
GUARD_K = 2.0
#: Relative singular value below which a parameter combination counts as undetermined.
_NULL_RTOL = 1e-7


# ----------------------------------------------------------------------------- measurement


@dataclass(frozen=True, eq=False)
class Measurement:
    """A measured spectrum of one plate and the set-up it was measured in.

    Attributes
    ----------
    wavelength_nm : ndarray
        Strictly increasing vacuum wavelengths. [nm]
    value : ndarray
        Retardance [waves] (``kind == "retardance"``) or transmission normalised to the open beam
        [1] (``kind == "transmission"``).
    sigma : ndarray or None
        Standard uncertainty of each value, same unit; None: estimated from the fit residuals.
    kind : str
        ``"retardance"`` or ``"transmission"``.
    wrap : str
        Retardance only: ``"none"`` (absolute), ``"wave"`` (modulo one wave, in [0, 1)) or
        ``"half"`` (folded into [0, 1/2]); ``"none"`` for transmission.
    polarizers : str or None
        Transmission only: ``"crossed"`` or ``"parallel"`` (polarizer along x in both cases).
    plate_angle_deg : float
        Nominal angle of the plate's fast axis from the polarizer. [deg]
    temperature_c : float or None
        Plate temperature during the measurement; None: the material's reference. [°C]
    name : str
        Where the data came from (the file name), for messages.
    """

    wavelength_nm: np.ndarray
    value: np.ndarray
    sigma: np.ndarray | None
    kind: str
    wrap: str = "none"
    polarizers: str | None = None
    plate_angle_deg: float = 45.0
    temperature_c: float | None = None
    name: str = "<data>"

    @property
    def size(self) -> int:
        return int(self.wavelength_nm.size)


def _finite_option(value, label):
    if value is None:
        return None
    v = float(value)
    if not math.isfinite(v):
        raise RetolError(label, f"must be a finite number, got {value!r}", "give a number")
    return v


def make_measurement(
    wavelength_nm,
    *,
    retardance_waves=None,
    transmission=None,
    sigma=None,
    wrap="auto",
    polarizers=None,
    plate_angle_deg=45.0,
    dark=None,
    reference=None,
    temperature_c=None,
    name="<data>",
    columns=None,
    strict_options=True,
):
    """Validate arrays into a :class:`Measurement` (the CSV reader ends here too).

    Parameters
    ----------
    wavelength_nm : array_like
        Strictly monotonic vacuum wavelengths (decreasing ones are reversed). [nm]
    retardance_waves, transmission : array_like
        Exactly one of them: retardance [waves] or raw transmission [1 or detector counts].
    sigma : array_like, optional
        Standard uncertainty of each value, in the unit of the value. [waves or 1]
    wrap : {"auto", "none", "wave", "half"}
        How the retardance was reported.  ``auto``: values in [0, 1/2] are folded, values in
        [0, 1) wrapped modulo one wave, anything else absolute.
    polarizers : {"crossed", "parallel"}
        Transmission only, required.
    plate_angle_deg : float
        Nominal fast-axis angle of the plate from the polarizer. [deg]
    dark, reference : float, optional
        Transmission only: detector levels of the blocked and the open beam; the value becomes
        (raw − dark)/(reference − dark).  Defaults 0 and 1 (already normalised). [same as data]
    temperature_c : float, optional
        Plate temperature during the measurement. [°C]
    columns : dict, optional
        Column name for each role and the file line of each row, for messages (the CSV reader).
    strict_options : bool
        Refuse transmission-only options (polarizers, dark, reference) for retardance data;
        False ignores them (a lot that mixes both kinds of file).

    Raises
    ------
    RetolError
        NaN or infinite values, non-monotonic or duplicated wavelengths, transmission outside
        [0, 1] beyond the noise, a non-positive sigma, options that do not fit the data kind.
    """
    cols = columns or {}
    lines = cols.get("lines")

    def where(role):
        return f"{name}: {cols.get(role, role)}"

    def at(i):
        return f"line {lines[i]}" if lines is not None else f"row {i + 1}"

    if (retardance_waves is None) == (transmission is None):
        raise RetolError(
            name,
            "needs exactly one measured column",
            f"give one of {', '.join(VALUE_COLUMNS)}",
        )
    kind = "transmission" if transmission is not None else "retardance"
    role = cols.get("value", "transmission" if kind == "transmission" else "retardance_waves")
    wl = np.asarray(wavelength_nm, dtype=float).ravel()
    y = np.asarray(transmission if kind == "transmission" else retardance_waves, float).ravel()
    s = None if sigma is None else np.asarray(sigma, dtype=float).ravel()
    if y.shape != wl.shape or (s is not None and s.shape != wl.shape):
        raise RetolError(name, "columns have different lengths", "give one value per wavelength")
    for label, arr in (("wavelength_nm", wl), (role, y), ("sigma", s)):
        if arr is None:
            continue
        bad = np.flatnonzero(~np.isfinite(arr))
        if bad.size:
            raise RetolError(
                f"{name}: {label}",
                f"is not a finite number at {at(int(bad[0]))}",
                "remove the row or fill in the value",
            )
    if wl.size < 2:
        raise RetolError(name, f"has {wl.size} data rows", "measure a spectrum of many points")
    if np.any(wl <= 0):
        raise RetolError(where("wavelength_nm"), "must be positive", "give wavelengths in nm")
    dw = np.diff(wl)
    if np.any(dw == 0):
        i = int(np.flatnonzero(dw == 0)[0]) + 1
        raise RetolError(
            where("wavelength_nm"),
            f"{wl[i]:g} nm is repeated at {at(i)}",
            "average or remove the duplicated rows",
        )
    if not (np.all(dw > 0) or np.all(dw < 0)):
        sign = np.sign(dw[0])
        i = int(np.flatnonzero(np.sign(dw) != sign)[0]) + 1
        raise RetolError(
            where("wavelength_nm"),
            f"is not monotonic ({wl[i]:g} nm after {wl[i - 1]:g} nm at {at(i)})",
            "sort the rows by wavelength",
        )
    if dw[0] < 0:
        wl, y = wl[::-1].copy(), y[::-1].copy()
        s = None if s is None else s[::-1].copy()
        if lines is not None:
            lines = list(lines)[::-1]
    if s is not None and np.any(s <= 0):
        i = int(np.flatnonzero(s <= 0)[0])
        raise RetolError(where("sigma"), f"must be positive, at {at(i)}", "give each uncertainty")
    plate_angle_deg = _finite_option(plate_angle_deg, "--plate-angle")
    temperature_c = _finite_option(temperature_c, "--temperature")
    if temperature_c is not None and temperature_c < -273.15:
        raise RetolError(
            "--temperature", "is below absolute zero", "give the plate's temperature in C"
        )
    dark = _finite_option(dark, "--dark")
    reference = _finite_option(reference, "--reference")
    if wrap not in WRAPS:
        raise RetolError("--wrap", f"unknown {wrap!r}", f"use one of {', '.join(WRAPS)}")
    if kind == "retardance":
        if not strict_options:
            polarizers = dark = reference = None
        for label, v in (
            ("--polarizers", polarizers),
            ("--dark", dark),
            ("--reference", reference),
        ):
            if v is not None:
                raise RetolError(
                    label,
                    "applies to a transmission spectrum only",
                    "remove it for retardance data",
                )
        if wrap == "auto":
            lo, hi = float(np.min(y)), float(np.max(y))
            wrap = "half" if lo >= 0 and hi <= 0.5 else "wave" if lo >= 0 and hi < 1 else "none"
        if wrap == "half" and (np.min(y) < 0 or np.max(y) > 0.5):
            raise RetolError(where(role), "has values outside [0, 1/2] wave", "check --wrap")
        if wrap == "wave" and (np.min(y) < 0 or np.max(y) >= 1):
            raise RetolError(where(role), "has values outside [0, 1) wave", "check --wrap")
        return Measurement(wl, y, s, kind, wrap, None, plate_angle_deg, temperature_c, name)
    if wrap not in ("auto", "none"):
        raise RetolError("--wrap", "applies to retardance spectra only", "remove it")
    if polarizers is None:
        raise RetolError(
            "--polarizers",
            "is required for a transmission spectrum",
            "give --polarizers crossed or --polarizers parallel",
        )
    if polarizers not in POLARIZERS:
        raise RetolError("--polarizers", f"unknown {polarizers!r}", "use crossed or parallel")
    d0 = 0.0 if dark is None else dark
    r0 = 1.0 if reference is None else reference
    if not r0 > d0:
        raise RetolError("--reference", f"{r0:g} is not above the dark level {d0:g}", "swap them")
    y = (y - d0) / (r0 - d0)
    s = None if s is None else s / (r0 - d0)
    slack = TRANSMISSION_SLACK if s is None else np.maximum(3.0 * s, 0.01)
    out = np.flatnonzero((y < -slack) | (y > 1.0 + slack))
    if out.size:
        i = int(out[0])
        raise RetolError(
            where(role),
            f"{y[i]:.4g} at {wl[i]:g} nm ({at(i)}) is outside [0, 1] beyond the noise",
            "normalise to the open beam, or give --dark and --reference levels",
        )
    return Measurement(wl, y, s, kind, "none", polarizers, plate_angle_deg, temperature_c, name)


def read_measurement(path, **options) -> Measurement:
    """Read a measured spectrum from a CSV file; see :func:`make_measurement` for ``options``.

    The header names the columns: ``wavelength_nm`` and one of ``retardance_waves``,
    ``retardance_deg`` or ``transmission``, and optionally ``sigma`` (same unit as the measured
    column).  Lines starting with ``#`` are comments.
    """
    p = Path(path)
    if not p.is_file():
        raise RetolError(str(p), "no such measured file", "check the path")
    try:
        with p.open(newline="", encoding="utf-8") as f:
            rows = [
                (n, r)
                for n, r in enumerate(csv.reader(f), start=1)
                if r and "".join(r).strip() and not r[0].lstrip().startswith("#")
            ]
    except (OSError, UnicodeDecodeError) as exc:
        raise RetolError(p.name, f"cannot be read ({exc})", "give a UTF-8 CSV file") from None
    if not rows:
        raise RetolError(p.name, "is empty", "give a header and measured rows")
    header = [h.strip().lower() for h in rows[0][1]]
    for h in header:
        if h not in COLUMNS:
            close = difflib.get_close_matches(h, COLUMNS, n=1)
            fix = f"did you mean {close[0]!r}?" if close else f"known columns: {', '.join(COLUMNS)}"
            raise RetolError(f"{p.name}: {h or '(empty)'}", "unknown column", fix)
    if len(set(header)) != len(header):
        raise RetolError(p.name, "has a repeated column name", "name each column once")
    if "wavelength_nm" not in header:
        raise RetolError(f"{p.name}: wavelength_nm", "column missing", "add the wavelengths in nm")
    given = [c for c in VALUE_COLUMNS if c in header]
    if len(given) != 1:
        raise RetolError(
            p.name,
            "needs exactly one measured column" + (f" (found {', '.join(given)})" if given else ""),
            f"give one of {', '.join(VALUE_COLUMNS)}",
        )
    data = np.empty((len(rows) - 1, len(header)))
    for k, (n, r) in enumerate(rows[1:]):
        if len(r) != len(header):
            raise RetolError(
                p.name, f"line {n} has {len(r)} values, the header {len(header)}", "fix the row"
            )
        for j, x in enumerate(r):
            try:
                data[k, j] = float(x)
            except ValueError:
                raise RetolError(
                    f"{p.name}: {header[j]}",
                    f"{x.strip()!r} on line {n} is not a number",
                    "fix the value",
                ) from None
    col = {h: data[:, j] for j, h in enumerate(header)}
    value = given[0]
    scale = 1.0 / 360.0 if value == "retardance_deg" else 1.0
    measured = col[value] * scale
    sigma = col["sigma"] * scale if "sigma" in col else None
    kw = {"transmission": measured} if value == "transmission" else {"retardance_waves": measured}
    names = {"value": value, "lines": [n for n, _ in rows[1:]]}
    return make_measurement(
        col["wavelength_nm"], sigma=sigma, name=p.name, columns=names, **kw, **options
    )


# ----------------------------------------------------------------------------- model


@dataclass(frozen=True, eq=False)
class _Model:
    """Everything the fit needs, precomputed: retardance per µm of each layer at each point."""

    plate: Plate
    meas: Measurement
    k: np.ndarray  # (L, N) retardance per thickness [rad/µm]
    k_design: np.ndarray  # (L,) at the design wavelength [rad/µm]
    rel_axis_deg: np.ndarray  # (L,) layer fast axis relative to the plate's [deg]
    signs: np.ndarray  # (L,) cos 2(θᵢ − θ)
    fit_axis: bool

    @property
    def n_layers(self) -> int:
        return int(self.k.shape[0])

    @property
    def n_params(self) -> int:
        return self.n_layers + int(self.fit_axis)


def _per_um(material, wavelength_nm, temperature_c, extrapolate, field_name):
    from .dispersion import check_range
    from .retardance import layer_retardance

    try:
        check_range(material, wavelength_nm, extrapolate, field=field_name)
    except RetolError as exc:
        raise RetolError(exc.field, exc.problem, exc.fix) from None
    return layer_retardance(material, 1.0, wavelength_nm, temperature_c, extrapolate=extrapolate)


def _model(plate: Plate, meas: Measurement, extrapolate=False) -> _Model:
    k = np.stack(
        [
            _per_um(
                la.material,
                meas.wavelength_nm,
                meas.temperature_c,
                extrapolate,
                f"{meas.name}: wavelength_nm ({la.material.name} layer)",
            )
            for la in plate.layers
        ]
    )
    kd = np.array(
        [
            float(_per_um(la.material, plate.design_nm, meas.temperature_c, True, "design"))
            for la in plate.layers
        ]
    )
    rel = np.array([la.axis_deg - plate.axis_deg for la in plate.layers])
    return _Model(plate, meas, k, kd, rel, np.cos(np.radians(2 * rel)), meas.kind == "transmission")


def fold_waves(x):
    """Retardance folded into [0, 1/2] wave: the distance to the nearest whole wave. [waves]"""
    return np.abs(np.asarray(x) - np.round(x))


def transmission(deltas_rad, angles_deg, polarizers="crossed"):
    """Transmission of a stack of linear retarders between two polarizers. [1]

    Parameters
    ----------
    deltas_rad : array_like, shape (L, ...)
        Retardance of each layer, light meeting layer 0 first. [rad]
    angles_deg : array_like, shape (L, ...)
        Fast-axis angle of each layer from the polarizer (x). [deg]
    polarizers : {"crossed", "parallel"}
        Analyzer along y (crossed) or x (parallel).

    Notes
    -----
    With the retarder J(δ, θ) = cos(δ/2)·I − i·sin(δ/2)·[[cos 2θ, sin 2θ], [sin 2θ, −cos 2θ]]
    (README conventions), input (1, 0) and analyzer a, T = |a·J·(1, 0)ᵀ|².  For one plate:

    * crossed (a = (0, 1)):   T = sin²(2θ)·sin²(δ/2)
    * parallel (a = (1, 0)):  T = 1 − sin²(2θ)·sin²(δ/2)

    For a plate meant to sit at θ₀ with an axis offset ε, θ = θ₀ + ε, so crossed
    T = sin²(2θ₀ + 2ε)·sin²(δ/2) and ∂T/∂ε = 2·sin(4θ₀ + 4ε)·sin²(δ/2).  At θ₀ = 45° this is
    T = cos²(2ε)·sin²(δ/2): even in ε, so the offset's size is measured only to second order and
    its sign not at all; at θ₀ = 22.5° the first-order slope is largest and the sign is seen.
    A stack of layers is the matrix product, evaluated numerically.

    References
    ----------
    .. [1] E. Hecht, *Optics*, 4th ed., Addison-Wesley (2002), sec. 8.7 (retarders between
       polarizers); the crossed-polarizer form sin²(2θ)·sin²(δ/2) is common practice.

    Examples
    --------
    >>> round(float(transmission([[np.pi]], [[45.0]])[0]), 12)
    1.0
    """
    from .polarization import retarder_jones

    d = np.asarray(deltas_rad, dtype=float)
    a = np.asarray(angles_deg, dtype=float)
    d, a = np.broadcast_arrays(d, a)
    e = np.array([1.0, 0.0], dtype=complex)
    field_ = np.broadcast_to(e, d.shape[1:] + (2,))
    for di, ai in zip(d, a, strict=True):
        field_ = np.einsum("...ij,...j->...i", retarder_jones(di, ai), field_)
    i = 1 if polarizers == "crossed" else 0
    return np.abs(field_[..., i]) ** 2


def _net_waves(model: _Model, thick, at_design=False):
    """Net retardance along the plate axis, Σ sᵢ·dᵢ·kᵢ / 2π, (..., N) or at design (...). [waves]"""
    thick = np.asarray(thick, dtype=float)
    if at_design:
        return thick @ (model.signs * model.k_design) / TWO_PI
    return np.einsum("...l,ln->...n", thick, model.signs[:, None] * model.k) / TWO_PI


def _predict(model: _Model, x):
    """Model values for parameter rows x (..., P): retardance [waves] or transmission [1]."""
    x = np.asarray(x, dtype=float)
    L = model.n_layers
    thick = x[..., :L]
    if model.meas.kind == "retardance":
        return _net_waves(model, thick)
    deltas = thick[..., :, None] * model.k  # (..., L, N)
    offset = x[..., L] if model.fit_axis else 0.0
    angles = model.meas.plate_angle_deg + np.asarray(offset)[..., None] + model.rel_axis_deg
    deltas = np.moveaxis(deltas, -2, 0)
    angles = np.moveaxis(np.asarray(angles)[..., None], -2, 0)
    return transmission(deltas, angles, model.meas.polarizers)


def _residual(model: _Model, x, y=None):
    """Data minus model, in the data's unit, wrapped or folded as the data were. (..., N)"""
    y = model.meas.value if y is None else y
    f = _predict(model, x)
    w = model.meas.wrap
    if w == "wave":
        r = y - f
        return r - np.round(r)
    if w == "half":
        return y - fold_waves(f)
    return y - f


def _weights(meas: Measurement):
    return 1.0 / meas.sigma if meas.sigma is not None else np.ones(meas.size)


# ----------------------------------------------------------------------------- fit


@dataclass(frozen=True, eq=False)
class PlateFit:
    """The fitted plate: values, uncertainties, the competing orders and the residuals.

    ``covariance`` holds ``inf`` on the diagonal of a parameter the data do not determine
    (the thickness sum of a compound plate); ``identified`` says which ones are determined.
    """

    model: _Model
    params: np.ndarray
    covariance: np.ndarray
    identified: np.ndarray
    bootstrap_sigma: np.ndarray
    chi2: float
    dof: int
    noise_scale: float
    sigma_source: str
    order: int
    retardance_waves: float
    retardance_sigma_waves: float
    axis_sign_known: bool
    alternatives: tuple
    residuals: np.ndarray
    bootstrap_samples: int
    seed: int
    combos: dict = field(default_factory=dict)

    @property
    def plate(self) -> Plate:
        return self.model.plate

    @property
    def measurement(self) -> Measurement:
        return self.model.meas

    @property
    def thicknesses_um(self) -> np.ndarray:
        return self.params[: self.model.n_layers]

    @property
    def thickness_sigma_um(self) -> np.ndarray:
        return np.sqrt(np.diag(self.covariance))[: self.model.n_layers]

    @property
    def axis_offset_deg(self) -> float | None:
        return float(self.params[-1]) if self.model.fit_axis else None

    @property
    def axis_offset_sigma_deg(self) -> float | None:
        return float(np.sqrt(self.covariance[-1, -1])) if self.model.fit_axis else None

    @property
    def chi2_reduced(self) -> float:
        return self.chi2 / self.dof

    def correlation(self) -> np.ndarray:
        """Correlation matrix; in the limit, ±1 between two undetermined parameters (along the
        direction the data cannot see) and 0 between an undetermined and a determined one."""
        c = self.covariance
        sd = np.sqrt(np.diag(c))
        with np.errstate(invalid="ignore", divide="ignore"):
            r = c / np.outer(sd, sd)
        null = self.combos.get("null_vectors") or []
        u = np.asarray(null[0]) if null else np.zeros(c.shape[0])
        for i in range(r.shape[0]):
            for j in range(r.shape[0]):
                if self.identified[i] and self.identified[j]:
                    continue
                if self.identified[i] or self.identified[j]:
                    r[i, j] = 0.0
                else:
                    r[i, j] = float(np.sign(u[i] * u[j]))
        np.fill_diagonal(r, 1.0)
        return r

    def as_built(self, name: str | None = None) -> Plate:
        """The plate as built: a stack of the fitted layers, axes as designed."""
        layers = tuple(
            Layer(la.material, float(d), la.axis_deg)
            for la, d in zip(self.plate.layers, self.thicknesses_um, strict=True)
        )
        return replace(
            self.plate,
            name=name or f"{self.plate.name} as built",
            construction="stack",
            layers=layers,
            details={"fitted_from": self.measurement.name},
        )

    def to_dict(self) -> dict:
        """The ``fit`` part of ``retol inspect --json`` (NaN and inf become null there)."""
        L = self.model.n_layers
        out = {
            "thicknesses_um": [float(x) for x in self.thicknesses_um],
            "thickness_sigma_um": [float(x) for x in self.thickness_sigma_um],
            "thickness_sigma_bootstrap_um": [float(x) for x in self.bootstrap_sigma[:L]],
            "nominal_thicknesses_um": [float(la.thickness_um) for la in self.plate.layers],
            "thickness_determined": [bool(x) for x in self.identified[:L]],
            "axis_offset_deg": self.axis_offset_deg,
            "axis_offset_sigma_deg": self.axis_offset_sigma_deg,
            "axis_offset_sigma_bootstrap_deg": (
                float(self.bootstrap_sigma[-1]) if self.model.fit_axis else None
            ),
            "axis_offset_sign_known": self.axis_sign_known if self.model.fit_axis else None,
            "order": self.order,
            "retardance_waves": self.retardance_waves,
            "retardance_sigma_waves": self.retardance_sigma_waves,
            "design_nm": float(self.plate.design_nm),
            "chi2": self.chi2,
            "chi2_reduced": self.chi2_reduced,
            "dof": self.dof,
            "points": self.measurement.size,
            "sigma_source": self.sigma_source,
            "residual_rms": float(np.sqrt(np.mean(self.residuals**2))),
            "correlation": [[float(v) for v in row] for row in self.correlation()],
            "parameters": _param_names(self.model),
            "bootstrap_samples": self.bootstrap_samples,
            "seed": self.seed,
            "temperature_c": self.measurement.temperature_c,
            "alternatives": list(self.alternatives),
        }
        out.update({k: v for k, v in self.combos.items() if k != "null_vectors"})
        return out


def _param_names(model: _Model) -> list[str]:
    names = [f"thickness_um[{i}]" for i in range(model.n_layers)]
    return names + (["axis_offset_deg"] if model.fit_axis else [])


def _scan_starts(model: _Model, x_nom: np.ndarray, orders: int) -> list[np.ndarray]:
    """Starting points for every candidate order: local minima of the misfit along layer 0.

    The thickness of the layer with the largest projection on the plate axis is stepped so that
    the net retardance at the design wavelength runs over ± (``orders`` + 1/2) waves around the
    nominal one, finely enough that no fringe is skipped anywhere in the band.
    """
    j = int(np.argmax(np.abs(model.signs) * model.k_design))
    per_um = abs(model.signs[j]) * model.k_design[j] / TWO_PI  # waves per µm at design
    ratio = float(np.max(model.k[j]) / model.k_design[j])
    step = 0.04 / max(ratio, 1.0) / per_um
    span = (orders + 0.5) / per_um
    shifts = np.arange(-span, span + step / 2, step)
    shifts = shifts[x_nom[j] + shifts > 0]
    X = np.repeat(x_nom[None, :], shifts.size, axis=0)
    X[:, j] += shifts
    w = _weights(model.meas)
    chi2 = np.sum((_residual(model, X) * w) ** 2, axis=-1)
    chi2[_net_waves(model, X[:, : model.n_layers], at_design=True) < 0] = np.inf
    interior = np.r_[True, chi2[1:] <= chi2[:-1]] & np.r_[chi2[:-1] <= chi2[1:], True]
    idx = np.flatnonzero(interior)
    idx = idx[np.argsort(chi2[idx])][: 2 * orders + 4]
    return [X[i] for i in idx]


def _solve(model: _Model, x0, y=None, bounds=None, tol=1e-12):
    from scipy.optimize import least_squares

    w = _weights(model.meas)
    return least_squares(
        lambda x: _residual(model, x, y) * w,
        x0,
        bounds=bounds,
        x_scale="jac",
        jac="3-point",
        method="trf",
        xtol=tol,
        ftol=tol,
        gtol=tol,
        max_nfev=400,
    )


def _covariance(jac: np.ndarray, scale2: float):
    """Covariance scale²·(JᵀJ)⁻¹ with undetermined directions at infinite variance.

    Returns the covariance, the per-parameter "determined" flags, the pseudo-inverse (finite
    along determined combinations) and the null vectors (in parameter units).
    """
    norms = np.linalg.norm(jac, axis=0)
    safe = np.where(norms > 0, norms, 1.0)
    Jn = jac / safe
    _, s, vt = np.linalg.svd(Jn, full_matrices=False)
    keep = s > _NULL_RTOL * s.max()
    null_n = [vt[i] for i in np.flatnonzero(~keep)]
    for i in np.flatnonzero(norms == 0):
        e = np.zeros(jac.shape[1])
        e[i] = 1.0
        null_n.append(e)
    inv_n = (vt[keep].T / s[keep] ** 2) @ vt[keep]
    pinv = inv_n / np.outer(safe, safe) * scale2
    null = [u / safe for u in null_n]
    null = [u / np.linalg.norm(u) for u in null]
    ident = np.ones(jac.shape[1], dtype=bool)
    for u in null:
        ident &= np.abs(u) < 1e-6
    cov = pinv.copy()
    for i in np.flatnonzero(~ident):
        cov[i, :] = np.nan
        cov[:, i] = np.nan
        cov[i, i] = np.inf
    return cov, ident, pinv, null


def _combination_sigma(g, pinv, null) -> float:
    """Standard uncertainty of gᵀx: infinite when g leans on an undetermined direction."""
    g = np.asarray(g, dtype=float)
    if any(abs(g @ u) > 1e-6 * np.linalg.norm(g) for u in null):
        return math.inf
    return float(np.sqrt(max(g @ pinv @ g, 0.0)))


def fit_plate(
    meas: Measurement,
    plate: Plate,
    *,
    orders: int = 3,
    bootstrap: int = 200,
    seed: int = 0,
    ambiguity_dchi2: float = AMBIGUITY_DCHI2,
    extrapolate: bool = False,
) -> PlateFit:
    """Fit a nominal plate's layer thicknesses (and axis offset) to a measured spectrum.

    Parameters
    ----------
    meas : Measurement
        From :func:`read_measurement` or :func:`make_measurement`.
    plate : Plate
        The nominal plate (e.g. :func:`tolerance.plates.design_plate`); its layers' materials and
        relative axes are kept, their thicknesses fitted.
    orders : int
        Candidate orders scanned on either side of the nominal one. [waves]
    bootstrap : int
        Residual-bootstrap refits that check the covariance uncertainties (0: none).
    seed : int
        Seed of the bootstrap resampling.
    ambiguity_dchi2 : float
        A competing solution within this χ² of the best one makes the fit ambiguous.
    extrapolate : bool
        Allow wavelengths outside a dispersion formula's valid range (warns).

    Returns
    -------
    PlateFit

    Raises
    ------
    RetolError
        Too few points for the free parameters, wavelengths outside a material's range, a fit
        that does not converge, or an order that the data do not decide (the message lists the
        competing solutions and their χ²).

    Notes
    -----
    Free parameters: each layer's thickness dᵢ [µm] and, for transmission data, the plate's axis
    offset ε from the nominal plate angle [deg].  Retardance data: the model is the net
    retardance Σ cos 2(θᵢ − θ)·dᵢ·2π|Δnᵢ(λ)|/λ (times the material's temperature factor), compared
    modulo one wave (wrapped data) or folded into [0, 1/2] (folded data).  Transmission data: see
    :func:`transmission`.

    Wrapped, folded and transmission data repeat every wave, so several thicknesses fit the
    design wavelength equally well; only the dispersion of Δn(λ)/λ across the band tells them
    apart.  Each candidate order is fitted from its own start (:func:`_scan_starts`) with
    ``scipy.optimize.least_squares``; the alternatives are listed with their χ².  A net
    retardance −δ is the same plate turned by 90°, which a retardance magnitude or a transmission
    between polarizers cannot tell from +δ: the design's positive sense is kept.

    Uncertainties: covariance s²·(JᵀJ)⁻¹ at the solution with s² = 1 when a sigma column is given
    and s² = χ²/ν otherwise; then a residual bootstrap (resampled standardised residuals added to
    the fitted model, refitted, seeded) as a check.  A combination the data cannot see (the sum of
    a compound plate's crossed thicknesses, whose retardances cancel in the sum) gets an infinite
    variance; the combinations it does see (the difference) keep finite ones.

    Temperature is not a free parameter: in the linear thermal model every layer's retardance
    scales by the same factor at every wavelength, exactly as a thickness change does, so the two
    cannot be told apart from one spectrum; give the measured ``temperature_c`` instead.

    References
    ----------
    .. [1] W. H. Press et al., *Numerical Recipes*, 3rd ed., Cambridge (2007), sec. 15.5-15.6
       (nonlinear least squares, covariance, bootstrap).
    .. [2] B. Efron, R. J. Tibshirani, *An Introduction to the Bootstrap*, Chapman & Hall
       (1993), ch. 9 (bootstrapping residuals of a regression).
    """
    if int(orders) != orders or orders < 0:
        raise RetolError("--orders", f"must be a whole number >= 0, got {orders!r}", "e.g. 3")
    if int(bootstrap) != bootstrap or bootstrap < 0:
        raise RetolError(
            "--bootstrap", f"must be a whole number >= 0, got {bootstrap!r}", "e.g. 200"
        )
    if not math.isfinite(ambiguity_dchi2) or ambiguity_dchi2 < 0:
        raise RetolError("ambiguity_dchi2", "must be a finite number >= 0", "e.g. 9")
    model = _model(plate, meas, extrapolate)
    P, N = model.n_params, meas.size
    if N < P + 3:
        raise RetolError(
            meas.name,
            f"has {N} points for {P} free parameters",
            f"measure at least {P + 3} wavelengths (the noise is estimated from the rest)",
        )
    x_nom = np.array([la.thickness_um for la in plate.layers] + ([0.0] if model.fit_axis else []))
    even = model.fit_axis and _even_in_offset(model, x_nom)
    if even:
        x_nom[-1] = 2.0  # the slope in ε vanishes at ε = 0 when the model is even in ε
    lo = np.r_[np.full(model.n_layers, 1e-6), [-45.0] if model.fit_axis else []]
    hi = np.r_[np.full(model.n_layers, np.inf), [45.0] if model.fit_axis else []]
    sols = []
    for x0 in _scan_starts(model, x_nom, int(orders)):
        res = _solve(model, x0, bounds=(lo, hi))
        if res.status <= 0 or not np.all(np.isfinite(res.x)):
            continue
        x = res.x.copy()
        if even:
            x[-1] = abs(x[-1])
        r = _net_waves(model, x[: model.n_layers], at_design=True)
        # δ → −δ is the same plate turned by 90°, which these data cannot tell: keep the design's
        if r < 0 or any(abs(r - s["r"]) < 0.01 for s in sols):
            continue
        sols.append({"x": x, "chi2": float(2 * res.cost), "r": float(r), "jac": res.jac})
    if not sols:
        raise RetolError(
            meas.name,
            "the fit did not converge from any candidate order",
            "check the plate (construction, thickness) and the set-up options",
        )
    sols.sort(key=lambda s: s["chi2"])
    best = sols[0]
    dof = N - P
    if meas.sigma is None:
        scale2, source = best["chi2"] / dof, "residuals"
    else:
        scale2, source = 1.0, "column"
    if scale2 <= 0:
        scale2 = np.finfo(float).tiny
    alts = []
    for s in sols:
        c2 = s["chi2"] / scale2
        alts.append(
            {
                "order": int(math.floor(s["r"] + 1e-9)),
                "retardance_waves": s["r"],
                "thicknesses_um": [float(v) for v in s["x"][: model.n_layers]],
                "chi2": c2,
                "chi2_reduced": c2 / dof,
                "delta_chi2": c2 - best["chi2"] / scale2,
            }
        )
    if len(alts) > 1 and alts[1]["delta_chi2"] < ambiguity_dchi2:
        listing = "; ".join(
            f"order {a['order']} ({a['retardance_waves']:.3f} waves, chi2 {a['chi2']:.1f})"
            for a in alts[:4]
        )
        raise RetolError(
            meas.name,
            f"the order is ambiguous, competing solutions: {listing}",
            "measure over a wider band (dispersion decides the order) or with less noise",
        )
    cov, ident, pinv, null = _covariance(best["jac"], scale2)
    x = best["x"]
    g = model.signs * model.k_design / TWO_PI
    g = np.r_[g, [0.0] if model.fit_axis else []]
    r_sigma = _combination_sigma(g, pinv, null)
    combos = {"null_vectors": null}
    if model.n_layers == 2:
        d = np.r_[1.0, -1.0, [0.0] * (P - 2)]
        sm = np.r_[1.0, 1.0, [0.0] * (P - 2)]
        combos.update(
            {
                "layer_difference_um": float(x[0] - x[1]),
                "layer_difference_sigma_um": _combination_sigma(d, pinv, null),
                "layer_sum_um": float(x[0] + x[1]),
                "layer_sum_sigma_um": _combination_sigma(sm, pinv, null),
            }
        )
        if not np.all(ident[:2]):
            combos["note"] = (
                "the two layers' retardances add with opposite signs, so the spectrum fixes "
                "their thickness difference but not their sum (correlation +1): the thicknesses "
                "shown keep the nominal sum; measure each layer apart to accept them singly"
            )
    resid = _residual(model, x)
    boot = _bootstrap(model, x, resid, int(bootstrap), int(seed), (lo, hi), even)
    boot[~ident] = np.inf
    if meas.sigma is not None and best["chi2"] / dof > 4.0:
        warnings.warn(
            f"{meas.name}: reduced chi-square {best['chi2'] / dof:.1f} is far above 1: the model "
            "does not describe the data within the given sigma (check the plate and set-up)",
            stacklevel=2,
        )
    return PlateFit(
        model=model,
        params=x,
        covariance=cov,
        identified=ident,
        bootstrap_sigma=boot,
        chi2=best["chi2"] / scale2,
        dof=dof,
        noise_scale=float(np.sqrt(scale2)),
        sigma_source=source,
        order=alts[0]["order"],
        retardance_waves=best["r"],
        retardance_sigma_waves=r_sigma,
        axis_sign_known=not even,
        alternatives=tuple(alts[1:]),
        residuals=resid,
        bootstrap_samples=int(bootstrap),
        seed=int(seed),
        combos=combos,
    )


def _even_in_offset(model: _Model, x) -> bool:
    """True when the model does not change with the sign of the axis offset (plate at 45°)."""
    a, b = x.copy(), x.copy()
    a[-1], b[-1] = 3.0, -3.0
    return bool(np.allclose(_predict(model, a), _predict(model, b), rtol=0, atol=1e-12))


def _bootstrap(model, x, resid, n, seed, bounds, even) -> np.ndarray:
    """Standard deviation of the parameters over residual-bootstrap refits (NaN when n < 2)."""
    if n < 2:
        return np.full(x.size, np.nan)
    rng = np.random.default_rng(seed)
    sig = model.meas.sigma if model.meas.sigma is not None else np.ones(model.meas.size)
    e = resid / sig
    e = e - e.mean()
    f = _predict(model, x)
    out = []
    for _ in range(n):
        y = f + sig * rng.choice(e, size=e.size, replace=True)
        if model.meas.wrap == "wave":
            y = np.mod(y, 1.0)
        elif model.meas.wrap == "half":
            y = fold_waves(y)
        res = _solve(model, x, y=y, bounds=bounds, tol=1e-8)
        xb = res.x.copy()
        if even:
            xb[-1] = abs(xb[-1])
        out.append(xb)
    return np.std(np.array(out), axis=0, ddof=1)


# ----------------------------------------------------------------------------- verdict


def tolerance_limits(dist) -> tuple[float, float, str]:
    """Lower and upper deviation limits a spec tolerance sets, and how they were read.

    ``{tolerance = x, coverage = k}`` → ±x; ``{uniform = h}`` → ±h; ``{low, high}`` → [low, high];
    ``{sigma = s}`` → ±3s (a normal tolerance has no limit of its own: 3 sigma is common
    practice).  ``dist`` is a :class:`~tolerance.distributions.Distribution` (or its dict form).
    """
    from .distributions import Distribution

    d = Distribution.from_dict(dist)
    if d.form == "tolerance":
        return -d.limit, d.limit, f"tolerance = {d.limit:g} (coverage {d.coverage:g})"
    if d.form == "sigma":
        return -3 * d.sigma, 3 * d.sigma, f"sigma = {d.sigma:g}, read as ±3 sigma"
    if d.form == "uniform":
        return -d.half_width, d.half_width, f"uniform = {d.half_width:g}"
    return d.low, d.high, f"low = {d.low:g}, high = {d.high:g}"


def decide(deviation, u, low, high, k=GUARD_K) -> dict:
    """Simple and guarded acceptance of one measured deviation against [low, high].

    Parameters
    ----------
    deviation : float
        Measured value minus nominal.
    u : float
        Its standard uncertainty (inf: not determined by the measurement).
    low, high : float
        Tolerance limits on the deviation.
    k : float
        Coverage factor: the guard band is w = k·u, the expanded uncertainty.

    Returns
    -------
    dict
        ``simple``: accept inside [low, high], else reject; ``guarded``: accept inside
        [low + w, high − w] (guarded acceptance), reject outside [low − w, high + w] (guarded
        rejection), else undecided.  ``capability`` is C_m = (high − low)/(4u).

    References
    ----------
    .. [1] JCGM 106:2012, *Evaluation of measurement data - The role of measurement uncertainty
       in conformity assessment*, BIPM; simple acceptance and guarded acceptance/rejection with
       guard band w = r·U (clause 8, numbers from memory) and the measurement capability index.

    Examples
    --------
    >>> decide(0.9, 0.1, -1.0, 1.0)["guarded"]
    'undecided'
    """
    w = k * u
    out = {
        "deviation": float(deviation),
        "uncertainty": float(u),
        "guard_band": float(w),
        "limit_low": float(low),
        "limit_high": float(high),
        "capability": float((high - low) / (4 * u)) if u > 0 else math.inf,
    }
    if not math.isfinite(u):
        out.update(simple="undecided", guarded="undecided")
        return out
    out["simple"] = "accept" if low <= deviation <= high else "reject"
    if low + w <= deviation <= high - w:
        out["guarded"] = "accept"
    elif deviation < low - w or deviation > high + w:
        out["guarded"] = "reject"
    else:
        out["guarded"] = "undecided"
    return out


def verdict(fit: PlateFit, tolerances: dict, k: float = GUARD_K) -> dict:
    """Accept / reject / undecided per tolerance, simple and guarded (JCGM 106:2012).

    ``tolerances`` maps spec tolerance keys to normalised distributions (the candidate's, as the
    spec reader gives them).  Thickness is checked per layer; the axis offset (transmission data)
    against ``clocking_deg``, remembering that the bench mount's own error is in it.
    """
    items = []
    if "thickness_um" in tolerances:
        lo, hi, how = tolerance_limits(tolerances["thickness_um"])
        for i, la in enumerate(fit.plate.layers):
            d = decide(
                float(fit.thicknesses_um[i] - la.thickness_um),
                float(fit.thickness_sigma_um[i]),
                lo,
                hi,
                k,
            )
            items.append({"tolerance": "thickness_um", "layer": i, "limit_from": how, **d})
    if "clocking_deg" in tolerances and fit.model.fit_axis:
        lo, hi, how = tolerance_limits(tolerances["clocking_deg"])
        eps, u = fit.axis_offset_deg, fit.axis_offset_sigma_deg
        if fit.axis_sign_known:
            d = decide(eps, u, lo, hi, k)
        else:  # only |ε| is known: the worse of the two signs decides
            a, b = decide(eps, u, lo, hi, k), decide(-eps, u, lo, hi, k)
            rank = {"accept": 0, "undecided": 1, "reject": 2}
            d = max(a, b, key=lambda v: (rank[v["guarded"]], rank[v["simple"]]))
        items.append(
            {
                "tolerance": "clocking_deg",
                "layer": None,
                "limit_from": how + " (bench offset: includes the bench mount's error)",
                **d,
            }
        )

    def overall(key):
        vals = [it[key] for it in items]
        if not vals:
            return None
        if "reject" in vals:
            return "reject"
        return "accept" if all(v == "accept" for v in vals) else "undecided"

    return {
        "rule": "JCGM 106:2012 simple acceptance and guarded acceptance (guard band w = k*u)",
        "guard_band_k": float(k),
        "items": items,
        "simple": overall("simple"),
        "guarded": overall("guarded"),
    }


# ----------------------------------------------------------------------------- as-built TOML


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ("nan" if v != v else ("inf" if v > 0 else "-inf"))
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_toml_key(k)} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise RetolError("spec", f"cannot write a value of type {type(v).__name__}", "simplify it")


def _toml_key(k: str) -> str:
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k)


def toml_text(doc: dict) -> str:
    """A small TOML writer for spec documents: scalars, tables, arrays of tables, inline tables."""
    head, tables, arrays = [], [], []
    for k, v in doc.items():
        if isinstance(v, dict):
            tables.append(f"\n[{_toml_key(k)}]")
            tables += [f"{_toml_key(kk)} = {_toml_value(vv)}" for kk, vv in v.items()]
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            for item in v:
                arrays.append(f"\n[[{_toml_key(k)}]]")
                arrays += [f"{_toml_key(kk)} = {_toml_value(vv)}" for kk, vv in item.items()]
        else:
            head.append(f"{_toml_key(k)} = {_toml_value(v)}")
    return "\n".join(head + tables + arrays).strip() + "\n"


def _material_ref(material) -> str:
    from .dispersion import list_materials

    return material.name if material in list_materials() else str(Path(material.path).resolve())


def as_built_toml(fit: PlateFit, name: str, candidate_tolerances: dict | None = None) -> str:
    """The plate as built as a ``[[candidate]]`` block, usable in a spec as it is.

    A ``stack`` of the fitted layers with the design's axes; its own thickness tolerance is set to
    zero (the thicknesses are now known), other candidate tolerances are kept as written.
    """
    p = fit.plate
    sd = fit.thickness_sigma_um
    lines = [
        f"# As built: {fit.measurement.name}, fitted by retol inspect: order {fit.order}, "
        f"{fit.retardance_waves:.4f} waves at {p.design_nm:g} nm, "
        f"reduced chi2 {fit.chi2_reduced:.3g}.",
        "# Thickness 1-sigma [um]: "
        + ", ".join(f"{s:.4f}" if math.isfinite(s) else "not determined" for s in sd)
        + ".",
    ]
    if fit.model.fit_axis:
        sign = "" if fit.axis_sign_known else " (sign not determined)"
        lines.append(
            f"# Axis offset on the bench: {fit.axis_offset_deg:.3f} +- "
            f"{fit.axis_offset_sigma_deg:.3f} deg{sign}; not applied (the mount tolerance stays)."
        )
    if "note" in fit.combos:
        lines.append("# Note: layer sum not determined by the spectrum; nominal sum kept.")
    from .distributions import Distribution

    tol = {
        k: Distribution.from_dict(v).to_spec()
        for k, v in (candidate_tolerances or {}).items()
        if k != "thickness_um"
    }
    tol["thickness_um"] = {"sigma": 0.0}
    cand = {
        "name": name,
        "construction": "stack",
        "waves": float(p.waves) if math.isfinite(p.waves) else 0.25,
        "design": f"{p.design_nm:g}nm",
        "axis_deg": float(p.axis_deg),
    }
    lines.append("[[candidate]]")
    lines += [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in cand.items()]
    lines.append("layers = [")
    for la, d in zip(p.layers, fit.thicknesses_um, strict=True):
        layer = {
            "material": _material_ref(la.material),
            "thickness": f"{d:.4f}um",
            "axis_deg": float(la.axis_deg - p.axis_deg),
        }
        lines.append(f"  {_toml_value(layer)},")
    lines.append("]")
    lines.append(f"tolerances = {_toml_value(tol)}")
    return "\n".join(lines) + "\n"


# ----------------------------------------------------------------------------- spec adapter


def _candidate_plate(spec, name: str | None) -> tuple[Plate, dict]:
    """The nominal plate and tolerances (spec keys to Distributions) of a study's candidate."""
    names = [c.name for c in spec.candidates]
    if name is None:
        if len(names) == 1:
            name = names[0]
        else:
            raise RetolError(
                "--candidate", "the spec has several candidates", f"name one of: {', '.join(names)}"
            )
    if name not in names:
        close = difflib.get_close_matches(name, names, n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise RetolError(
            "--candidate", f"no candidate {name!r} in the spec", f"{hint}known: {', '.join(names)}"
        )
    cand = spec.candidate(name)
    tol = dict(spec.tolerances_for(cand))
    tol.pop("drift", None)
    return cand.plate, tol


def _raw_spec(spec_path) -> dict:
    p = Path(spec_path)
    try:
        return tomllib.loads(p.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise RetolError(str(p), f"cannot be read ({exc})", "check the spec file") from None


def _raw_candidate(raw: dict, name: str) -> dict:
    for i, c in enumerate(raw.get("candidate", [])):
        if isinstance(c, dict) and c.get("name", f"candidate {i + 1}") == name:
            return c
    return {}


def _absolute_paths(table, base: Path):
    """Source file paths made absolute, so the derived spec reads them from anywhere."""
    if isinstance(table, dict):
        return {
            k: (
                str((base / v).resolve())
                if k == "path" and isinstance(v, str) and not Path(v).is_absolute()
                else _absolute_paths(v, base)
            )
            for k, v in table.items()
        }
    if isinstance(table, list):
        return [_absolute_paths(v, base) for v in table]
    return table


def system_spec_text(spec_path, nominal: Plate, block: str, title: str) -> str:
    """The spec with the as-built candidate alone and no thickness tolerance left.

    A circular goal without a stated handedness gets the nominal plate's, so that an as-built
    plate of the wrong sense fails rather than passes with the other hand.
    """
    from .plates import plate_jones
    from .polarization import jones_to_stokes, linear_jones

    raw = _raw_spec(spec_path)
    raw.pop("candidate", None)
    raw["title"] = title
    tol = {k: v for k, v in dict(raw.get("tolerances", {})).items() if k != "thickness_um"}
    raw.pop("tolerances", None)
    if tol:
        raw["tolerances"] = tol
    base = Path(spec_path).resolve().parent
    if isinstance(raw.get("source"), dict):
        raw["source"] = _absolute_paths(raw["source"], base)
    goal = dict(raw.get("goal", {}))
    if goal.get("state", "circular") == "circular" and "handedness" not in goal:
        az = float(dict(raw.get("input", {})).get("azimuth_deg", 0.0))
        J = plate_jones(nominal, nominal.design_nm, extrapolate=True)
        s3 = jones_to_stokes(J @ linear_jones(az))[3]
        goal["handedness"] = "right" if s3 >= 0 else "left"
        raw["goal"] = goal
    return toml_text(raw) + "\n" + block


def predict_yield(spec_text: str, name: str, samples: int = 2000, seed=None) -> dict:
    """System yield of a spec text's candidate through the public API (load_spec, run)."""
    import tempfile

    import tolerance

    if int(samples) != samples or samples < 1:
        raise RetolError("--samples", f"must be a whole number >= 1, got {samples!r}", "e.g. 2000")
    with tempfile.TemporaryDirectory(prefix="retol-inspect-") as d:
        path = Path(d) / "as_built.toml"
        path.write_text(spec_text, encoding="utf-8")
        study = tolerance.load_spec(path)
        grid = tolerance.run(study, samples=int(samples), seed=seed)
    sel = dict(candidate=name)
    return {
        "yield": float(grid["yield"].sel(sel)),
        "yield_low": float(grid["yield_low"].sel(sel)),
        "yield_high": float(grid["yield_high"].sel(sel)),
        "samples": int(samples),
        "tolerances_left": sorted(str(t) for t in grid.coords["tolerance_name"].values)
        if "tolerance_name" in grid.coords
        else [],
    }


# ----------------------------------------------------------------------------- end to end


@dataclass(frozen=True, eq=False)
class Inspection:
    """Everything ``retol inspect`` reports about one plate."""

    fit: PlateFit
    name: str
    toml: str
    verdict: dict
    yield_: dict | None

    def to_dict(self) -> dict:
        y = self.yield_ or {}
        return {
            "file": self.fit.measurement.name,
            "candidate": self.name,
            "fit": self.fit.to_dict(),
            "verdict": self.verdict,
            "yield": y.get("yield"),
            "yield_low": y.get("yield_low"),
            "yield_high": y.get("yield_high"),
            "yield_samples": y.get("samples"),
            "yield_tolerances": y.get("tolerances_left"),
            "toml": self.toml,
        }


def inspect_plate(
    meas: Measurement,
    plate: Plate | None = None,
    *,
    spec=None,
    spec_path=None,
    candidate: str | None = None,
    name: str | None = None,
    samples: int | None = 2000,
    seed: int | None = None,
    orders: int = 3,
    bootstrap: int = 200,
    fit_seed: int = 0,
    guard_k: float = GUARD_K,
    extrapolate: bool = False,
) -> Inspection:
    """Identify, accept or reject, and predict the yield of one measured plate.

    Give either ``plate`` (a nominal :class:`~tolerance.plates.Plate`; no tolerances, so no
    verdict and no yield) or ``spec_path`` and ``candidate`` (``spec`` may pass the already loaded
    spec).  ``samples=None`` skips the yield.
    """
    tolerances, raw_cand = {}, {}
    if spec_path is not None:
        if spec is None:
            from .spec import load_spec

            spec = load_spec(spec_path)
        plate, tolerances = _candidate_plate(spec, candidate)
        raw_cand = _raw_candidate(_raw_spec(spec_path), plate.name)
    elif plate is None:
        raise RetolError("plate", "no plate to identify", "give --spec and --candidate, or a plate")
    fit = fit_plate(
        meas, plate, orders=orders, bootstrap=bootstrap, seed=fit_seed, extrapolate=extrapolate
    )
    stem = Path(meas.name).stem
    name = name or f"{plate.name} as built ({stem})"
    block = as_built_toml(fit, name, raw_cand.get("tolerances"))
    ver = (
        verdict(fit, tolerances, guard_k)
        if tolerances
        else {
            "rule": "no tolerances given (use --spec and --candidate)",
            "items": [],
            "simple": None,
            "guarded": None,
        }
    )
    y = None
    if spec_path is not None and samples is not None:
        text = system_spec_text(spec_path, plate, block, f"{name}: system yield")
        y = predict_yield(text, name, samples, seed)
    return Inspection(fit=fit, name=name, toml=block, verdict=ver, yield_=y)


def inspect_lot(paths, plate=None, *, spec=None, spec_path=None, candidate=None, **options):
    """Fit every measured file of a lot; one row per file (errors recorded, not raised).

    ``options`` go to :func:`read_measurement` (``polarizers``, ``plate_angle_deg``, ``dark``,
    ``reference``, ``temperature_c``, ``wrap``) and :func:`fit_plate` (``orders``,
    ``bootstrap``, ``seed``).  Returns (rows, nominal plate, tolerances).
    """
    fit_keys = ("orders", "bootstrap", "seed", "extrapolate")
    fit_opts = {k: options.pop(k) for k in fit_keys if k in options}
    guard_k = options.pop("guard_k", GUARD_K)
    tolerances = {}
    if spec_path is not None:
        if spec is None:
            from .spec import load_spec

            spec = load_spec(spec_path)
        plate, tolerances = _candidate_plate(spec, candidate)
    rows = []
    for p in paths:
        try:
            meas = read_measurement(p, strict_options=False, **options)
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                fit = fit_plate(meas, plate, **fit_opts)
            ver = verdict(fit, tolerances, guard_k) if tolerances else None
            rows.append(
                {
                    "file": Path(p).name,
                    "fit": fit,
                    "verdict": ver,
                    "error": None,
                    "warnings": [str(w.message) for w in caught],
                }
            )
        except RetolError as exc:
            rows.append(
                {
                    "file": Path(p).name,
                    "fit": None,
                    "verdict": None,
                    "error": str(exc),
                    "warnings": [],
                }
            )
    return rows, plate, tolerances


def lot_table(rows, plate: Plate) -> list[dict]:
    """One flat dict per file for the lot CSV."""
    out = []
    L = len(plate.layers)
    for r in rows:
        row = {"file": r["file"], "status": "ok" if r["error"] is None else "error"}
        f = r["fit"]
        for i in range(L):
            nom = plate.layers[i].thickness_um
            row[f"thickness_um_{i}"] = float(f.thicknesses_um[i]) if f else None
            row[f"deviation_um_{i}"] = float(f.thicknesses_um[i] - nom) if f else None
            row[f"thickness_sigma_um_{i}"] = float(f.thickness_sigma_um[i]) if f else None
        row["axis_offset_deg"] = f.axis_offset_deg if f else None
        row["axis_offset_sigma_deg"] = f.axis_offset_sigma_deg if f else None
        row["order"] = f.order if f else None
        row["retardance_waves"] = f.retardance_waves if f else None
        row["chi2_reduced"] = f.chi2_reduced if f else None
        v = r["verdict"]
        row["simple"] = v["simple"] if v else None
        row["guarded"] = v["guarded"] if v else None
        row["message"] = r["error"] or "; ".join(r["warnings"])
        out.append(row)
    return out


# ----------------------------------------------------------------------------- figures


def fit_figure(fit: PlateFit):
    """Data, fitted model and residuals against wavelength. [matplotlib Figure]"""
    from .plots import INK, _figure, _finish, _style

    m = fit.measurement
    wl = m.wavelength_nm
    dense = np.linspace(wl[0], wl[-1], max(2000, 8 * wl.size))
    dm = replace(
        fit.model,
        k=np.stack(
            [
                _per_um(la.material, dense, m.temperature_c, True, "figure")
                for la in fit.plate.layers
            ]
        ),
    )
    f = _predict(dm, fit.params)
    if m.wrap == "wave":
        f = np.mod(f, 1.0)
        f[1:][np.abs(np.diff(f)) > 0.5] = np.nan
    elif m.wrap == "half":
        f = fold_waves(f)
    unit = "retardance [waves]" if m.kind == "retardance" else "transmission [1]"
    with _style():
        fig = _figure(7.0, 4.6)
        ax, axr = fig.subplots(2, 1, sharex=True, height_ratios=[3, 1.3])
        ax.plot(wl, m.value, ".", ms=3, color="#6b665d", label="measured")
        ax.plot(dense, f, "-", lw=1.0, color="#1d6a80", label="fit")
        ax.set_ylabel(unit)
        eps = ""
        if fit.model.fit_axis:
            eps = f", axis offset {fit.axis_offset_deg:.2f} deg"
        th = " + ".join(f"{d:.3f}" for d in fit.thicknesses_um)
        ax.set_title(
            f"{m.name}: order {fit.order}, {th} um{eps}, reduced chi2 {fit.chi2_reduced:.2f}"
        )
        ax.legend(loc="upper right", frameon=True, framealpha=0.9)
        axr.axhline(0.0, color=INK, lw=0.8)
        axr.plot(wl, fit.residuals, ".", ms=3, color="#c2562f")
        if m.sigma is not None:
            axr.fill_between(
                wl, -m.sigma, m.sigma, color="#d7cdb8", alpha=0.6, lw=0, label="±1 sigma"
            )
        axr.set_ylabel("residual")
        axr.set_xlabel("wavelength [nm]")
        return _finish(fig)


def lot_figure(rows, plate: Plate, tolerances: dict):
    """Histograms of the lot's fitted thickness deviations and axis offsets, with the limits."""
    from .plots import GOAL_INK, _figure, _finish, _style

    fits = [r["fit"] for r in rows if r["fit"] is not None]
    L = len(plate.layers)
    has_axis = any(f.model.fit_axis for f in fits)
    panels = L + int(has_axis)
    with _style():
        fig = _figure(3.4 * panels, 3.0)
        axes = np.atleast_1d(fig.subplots(1, panels))
        for i in range(L):
            vals = [float(f.thicknesses_um[i] - plate.layers[i].thickness_um) for f in fits]
            _hist(axes[i], vals, tolerances.get("thickness_um"), GOAL_INK)
            axes[i].set_xlabel(f"layer {i} thickness - nominal [um]")
            axes[i].set_title(f"{plate.layers[i].material.name} layer {i}")
        if has_axis:
            vals = [f.axis_offset_deg for f in fits if f.model.fit_axis]
            _hist(axes[-1], vals, tolerances.get("clocking_deg"), GOAL_INK)
            axes[-1].set_xlabel("axis offset [deg]")
            axes[-1].set_title("axis offset on the bench")
        axes[0].set_ylabel("plates")
        return _finish(fig)


def _hist(ax, vals, dist, ink):
    """Histogram zoomed on the drawing limits; plates far outside are counted in a note."""
    vals = np.asarray(vals, float)
    note = ""
    if dist is not None:
        lo, hi, how = tolerance_limits(dist)
        span = hi - lo if hi > lo else 1.0
        a, b = lo - span, hi + span
        far = (vals < a) | (vals > b)
        if np.any(far):
            note = f"; {int(far.sum())} far outside (not shown)"
        vals = vals[~far]
        for x in (lo, hi):
            ax.axvline(x, color=ink, ls="--", lw=1.0)
        ax.set_xlim(a, b)
        ax.text(0.02, 0.98, f"limits: {how}{note}", transform=ax.transAxes, va="top", fontsize=7)
    if vals.size:
        ax.hist(vals, bins=max(5, int(np.sqrt(vals.size)) + 3), color="#1d6a80", alpha=0.8)
