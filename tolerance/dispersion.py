"""Refractive indices and birefringence of retarder materials from published dispersion formulas.

Wavelengths are vacuum wavelengths in nm at this API; the formulas themselves take micrometres,
as their sources print them.  Each material comes from a TOML file in ``materials/`` that carries
its formula, coefficients, validity range, reference temperature, thermal coefficient of
retardance and citation.  A user may also pass a path to a TOML file of the same form, or to a CSV
table of measured values (``wavelength_nm`` and either ``n_o``, ``n_e`` or ``birefringence``).
"""

from __future__ import annotations

import csv
import difflib
import math
import tomllib
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cache
from importlib import resources
from pathlib import Path

import numpy as np

from .errors import OutOfRangeError, RetolError
from .frozen import frozen

FORMULA_TYPES = ("ghosh", "sellmeier", "oscillator-birefringence", "table")
KINDS = ("positive uniaxial", "negative uniaxial", "film")


@dataclass(frozen=True)
class Material:
    """A birefringent material: its dispersion formula, validity range and thermal data."""

    name: str
    kind: str
    formula: str
    coefficients: Mapping = field(hash=False)
    valid_min_nm: float
    valid_max_nm: float
    reference_temperature_c: float
    retardance_temperature_coefficient: float  # gamma = (1/delta) d delta / dT [1/K]
    temperature_coefficient_uncertainty: float
    source: str
    thermal_source: str = ""
    long_name: str = ""
    path: str = ""
    table: tuple = field(default=(), repr=False)

    @property
    def negative(self) -> bool:
        """True when n_e < n_o, so that the optic axis is the fast axis."""
        return self.kind == "negative uniaxial"

    def indices(self, wavelength_nm, extrapolate: bool = False):
        """Ordinary and extraordinary indices at the reference temperature; see :func:`indices`."""
        return indices(self, wavelength_nm, extrapolate=extrapolate)

    def birefringence(self, wavelength_nm, extrapolate: bool = False):
        """n_e - n_o at the reference temperature; see :func:`birefringence`."""
        n_o, n_e = indices(self, wavelength_nm, extrapolate=extrapolate)
        return n_e - n_o


def _ghosh(lam_um, c):
    l2 = lam_um**2
    return np.sqrt(1.0 + c["A"] + c["B"] * l2 / (l2 - c["C"]) + c["D"] * l2 / (l2 - c["E"]))


def _sellmeier(lam_um, c):
    l2 = lam_um**2
    n2 = np.ones_like(l2)
    for a, li in zip(c["A"], c["lambda"], strict=True):
        n2 = n2 + a * l2 / (l2 - li**2)
    return np.sqrt(n2)


def check_range(material: Material, wavelength_nm, extrapolate: bool = False, field="wavelength"):
    """Raise :class:`OutOfRangeError` (or warn, with ``extrapolate``) outside the validity range."""
    wl = np.asarray(wavelength_nm, dtype=float)
    if wl.size == 0:
        return
    if not np.all(np.isfinite(wl)):
        raise RetolError(field, "wavelength is not finite", "give finite wavelengths in nm")
    lo, hi = float(np.min(wl)), float(np.max(wl))
    if lo < material.valid_min_nm - 1e-9 or hi > material.valid_max_nm + 1e-9:
        bad = lo if lo < material.valid_min_nm - 1e-9 else hi
        msg = (
            f"{bad:g} nm is outside the {material.name} dispersion formula's valid range "
            f"{material.valid_min_nm:g}-{material.valid_max_nm:g} nm"
        )
        if not extrapolate:
            raise OutOfRangeError(field, msg, "choose wavelengths inside it or pass --extrapolate")
        warnings.warn(msg + " (extrapolating)", stacklevel=3)


def indices(material: Material, wavelength_nm, extrapolate: bool = False):
    """Ordinary and extraordinary refractive indices at the material's reference temperature.

    Parameters
    ----------
    material : Material
    wavelength_nm : array_like
        Vacuum wavelength. [nm]
    extrapolate : bool
        Evaluate outside the formula's validity range (with a warning) instead of raising.

    Returns
    -------
    n_o, n_e : ndarray
        Ordinary and extraordinary indices. [1]

    Notes
    -----
    ``ghosh``: n² = 1 + A + B·λ²/(λ² − C) + D·λ²/(λ² − E); ``sellmeier``: n² = 1 + Σ Aᵢ·λ²/(λ² −
    λᵢ²); ``oscillator-birefringence`` (films): Δn = Δn∞·λ²/(λ² − λ₀²) with n_o the film's mean
    index and n_e = n_o + Δn; ``table``: linear interpolation of a measured table.  λ in µm.

    References
    ----------
    .. [1] G. Ghosh, Opt. Commun. 163, 95-102 (1999).
    .. [2] M. J. Dodge, Appl. Opt. 23, 1980-1985 (1984).

    Examples
    --------
    >>> n_o, n_e = indices(get_material("quartz"), 589.3)
    >>> round(float(n_o), 4), round(float(n_e), 4)
    (1.5442, 1.5533)
    """
    check_range(material, wavelength_nm, extrapolate)
    wl = np.asarray(wavelength_nm, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        n_o, n_e = _evaluate(material, wl)
    bad = ~(np.isfinite(n_o) & np.isfinite(n_e) & (n_o > 0) & (n_e > 0))
    if np.any(bad):
        at = float(np.broadcast_to(wl, bad.shape)[bad].flat[0])
        raise OutOfRangeError(
            "wavelength",
            f"the {material.name} formula gives no real index at {at:g} nm (a resonance)",
            f"choose wavelengths nearer its valid range {material.valid_min_nm:g}-"
            f"{material.valid_max_nm:g} nm",
        )
    return n_o, n_e


def _evaluate(material: Material, wl):
    lam = wl / 1e3
    c = material.coefficients
    if material.formula == "ghosh":
        return _ghosh(lam, c["ordinary"]), _ghosh(lam, c["extraordinary"])
    if material.formula == "sellmeier":
        return _sellmeier(lam, c["ordinary"]), _sellmeier(lam, c["extraordinary"])
    if material.formula == "oscillator-birefringence":
        l2 = lam**2
        dn = c["birefringence_inf"] * l2 / (l2 - c["lambda0"] ** 2)
        n_o = np.full_like(l2, c["mean_index"])
        return n_o, n_o + dn
    if material.formula == "table":
        from scipy.interpolate import interp1d

        t_wl, t_no, t_ne = (np.asarray(a) for a in material.table)
        fo = interp1d(t_wl, t_no, kind="linear", fill_value="extrapolate", assume_sorted=True)
        fe = interp1d(t_wl, t_ne, kind="linear", fill_value="extrapolate", assume_sorted=True)
        return fo(wl), fe(wl)
    raise RetolError("formula.type", f"unknown formula {material.formula!r}")  # pragma: no cover


def birefringence(material: Material, wavelength_nm, temperature_c=None, extrapolate=False):
    """Birefringence n_e − n_o, optionally at a temperature through the retardance coefficient.

    Parameters
    ----------
    wavelength_nm : array_like
        Vacuum wavelength. [nm]
    temperature_c : float or array_like, optional
        Plate temperature. [°C] When given, the result is the *effective* birefringence
        Δn·(1 + γ·(T − T_ref)) that reproduces the retardance of a plate of fixed nominal
        thickness: γ is the measured relative retardance coefficient, plate expansion included.

    References
    ----------
    .. [1] G. Ghosh, Opt. Commun. 163, 95-102 (1999).
    .. [2] S. M. Etzel, A. Rose, E. Wang, Appl. Opt. 39, 5796-5800 (2000).

    Examples
    --------
    >>> round(float(birefringence(get_material("quartz"), 632.8)), 5)
    0.00904
    """
    n_o, n_e = indices(material, wavelength_nm, extrapolate)
    dn = n_e - n_o
    if temperature_c is not None:
        dn = dn * thermal_factor(material, temperature_c)
    return dn


def thermal_factor(material: Material, temperature_c):
    """Relative change of retardance, 1 + γ·(T − T_ref). [1]"""
    t = np.asarray(temperature_c, dtype=float)
    return 1.0 + material.retardance_temperature_coefficient * (
        t - material.reference_temperature_c
    )


# ----------------------------------------------------------------------------- loading


def _require(d: dict, key: str, where: str, types):
    if key not in d:
        raise RetolError(f"{where}: {key}", "missing", f"add the key {key!r}")
    v = d[key]
    if not isinstance(v, types) or isinstance(v, bool):
        raise RetolError(
            f"{where}: {key}",
            f"has the wrong type ({type(v).__name__})",
            "give a list of numbers" if types is list else "give a number",
        )
    return v


def _coeff_block(block, formula, where):
    if not isinstance(block, dict):
        raise RetolError(
            where, "must be a table of coefficients", "write it as [formula.NAME] with its keys"
        )
    if formula == "ghosh":
        out = {}
        for k in "ABCDE":
            v = _require(block, k, where, (int, float))
            if not math.isfinite(v):
                raise RetolError(f"{where}: {k}", "is not finite", "give a finite number")
            out[k] = float(v)
        return out
    a = _require(block, "A", where, list)
    li = _require(block, "lambda", where, list)
    if len(a) != len(li) or not a:
        raise RetolError(
            f"{where}: lambda",
            "must have as many entries as A (and at least one)",
            "give one resonance wavelength per strength",
        )
    try:
        out = {"A": [float(x) for x in a], "lambda": [float(x) for x in li]}
    except (TypeError, ValueError):
        raise RetolError(f"{where}: A", "entries must be numbers", "give numbers only") from None
    for k, vals in out.items():
        if not all(math.isfinite(x) for x in vals):
            raise RetolError(f"{where}: {k}", "has a value that is not finite", "fix the number")
    return out


def material_from_dict(d: dict, path: str = "<dict>") -> Material:
    """Build a :class:`Material` from the parsed contents of a material TOML file."""
    where = Path(path).name
    name = _require(d, "name", where, str)
    kind = _require(d, "kind", where, str)
    if kind not in KINDS:
        raise RetolError(
            f"{where}: kind", f"unknown kind {kind!r}", f"use one of {', '.join(KINDS)}"
        )
    unit = d.get("wavelength_unit", "um")
    if unit != "um":
        raise RetolError(f"{where}: wavelength_unit", f"{unit!r} not supported", "use 'um'")
    lo = float(_require(d, "valid_min_um", where, (int, float))) * 1e3
    hi = float(_require(d, "valid_max_um", where, (int, float))) * 1e3
    if not 0 < lo < hi:
        raise RetolError(
            f"{where}: valid_min_um",
            "range must satisfy 0 < min < max",
            "give the formula's published range, e.g. valid_min_um = 0.2, valid_max_um = 2.0",
        )
    formula_d = _require(d, "formula", where, dict)
    ftype = _require(formula_d, "type", f"{where}: formula", str)
    if ftype not in FORMULA_TYPES[:3]:
        raise RetolError(
            f"{where}: formula.type",
            f"unknown formula {ftype!r}",
            "use ghosh, sellmeier or oscillator-birefringence",
        )
    if ftype == "oscillator-birefringence":
        coeffs = {
            k: float(_require(formula_d, k, f"{where}: formula", (int, float)))
            for k in ("birefringence_inf", "lambda0", "mean_index")
        }
        for k, v in coeffs.items():
            if not math.isfinite(v):
                raise RetolError(f"{where}: formula.{k}", "is not finite", "fix the number")
    else:
        coeffs = {
            "ordinary": _coeff_block(
                formula_d.get("ordinary"), ftype, f"{where}: formula.ordinary"
            ),
            "extraordinary": _coeff_block(
                formula_d.get("extraordinary"), ftype, f"{where}: formula.extraordinary"
            ),
        }
    thermal = d.get("thermal", {})
    if not isinstance(thermal, dict):
        raise RetolError(f"{where}: thermal", "must be a table")

    def opt_number(table, key, default, label):
        v = table.get(key, default)
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            raise RetolError(
                f"{where}: {label}", f"must be a finite number, got {v!r}", "fix the value"
            )
        return float(v)

    t_ref = opt_number(d, "reference_temperature_c", 20.0, "reference_temperature_c")
    gamma = opt_number(
        thermal, "retardance_coefficient_per_k", 0.0, "thermal.retardance_coefficient_per_k"
    )
    gamma_u = opt_number(thermal, "uncertainty_per_k", 0.0, "thermal.uncertainty_per_k")
    return Material(
        name=name.lower(),
        kind=kind,
        formula=ftype,
        coefficients=frozen(coeffs),
        valid_min_nm=lo,
        valid_max_nm=hi,
        reference_temperature_c=t_ref,
        retardance_temperature_coefficient=gamma,
        temperature_coefficient_uncertainty=gamma_u,
        source=str(_require(d, "source", where, str)),
        thermal_source=str(thermal.get("source", "")),
        long_name=str(d.get("long_name", name)),
        path=str(path),
    )


def load_material_file(path) -> Material:
    """Read a material from a TOML file of the shipped form, or from a measured CSV table."""
    from .limits import check_spec_text, read_data_file

    p = Path(path)
    if not p.exists():
        raise RetolError("material", f"no such material file {str(p)!r}", "check the path")
    # a regular file of bounded size (a pipe or /dev/zero would hang or read without end)
    data = read_data_file(p, "material", what="material .toml or .csv file")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise RetolError(
            p.name, f"is not UTF-8 text (byte {exc.start})", "save the file as UTF-8"
        ) from None
    if p.suffix.lower() == ".csv":
        return _load_table(p, text)
    check_spec_text(text, p.name)
    try:
        d = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RetolError(p.name, f"is not valid TOML ({exc})", "fix the file's syntax") from None
    return material_from_dict(d, str(p))


def _load_table(p: Path, text: str) -> Material:
    """A measured table: columns wavelength_nm and n_o, n_e, or birefringence."""
    import io

    rows = [
        r
        for r in csv.reader(io.StringIO(text, newline=""))
        if r and not r[0].lstrip().startswith("#")
    ]
    if len(rows) < 3:
        raise RetolError(p.name, "needs a header and at least two rows", "add measured rows")
    header = [h.strip().lower() for h in rows[0]]
    if "wavelength_nm" not in header:
        raise RetolError(f"{p.name}: wavelength_nm", "column missing", "name the first column")
    try:
        data = np.array([[float(x) for x in r] for r in rows[1:]], dtype=float)
    except ValueError:
        raise RetolError(p.name, "has a value that is not a number", "fix the table") from None
    if data.shape[1] != len(header):
        raise RetolError(p.name, "rows and header have different lengths", "fix the table")
    if not np.all(np.isfinite(data)):
        raise RetolError(p.name, "has NaN or infinite values", "remove them")
    col = {h: data[:, i] for i, h in enumerate(header)}
    wl = col["wavelength_nm"]
    if np.any(wl <= 0):
        raise RetolError(
            f"{p.name}: wavelength_nm",
            f"has a wavelength <= 0 ({wl[wl <= 0][0]:g})",
            "give vacuum wavelengths in nm, all positive",
        )
    order = np.argsort(wl)
    wl = wl[order]
    if np.any(np.diff(wl) <= 0):
        raise RetolError(f"{p.name}: wavelength_nm", "has duplicated wavelengths", "remove them")
    if "n_o" in col and "n_e" in col:
        n_o, n_e = col["n_o"][order], col["n_e"][order]
    elif "birefringence" in col:
        dn = col["birefringence"][order]
        n_o = np.full_like(dn, float(col["n_mean"][0]) if "n_mean" in col else 1.5)
        n_e = n_o + dn
    else:
        raise RetolError(p.name, "needs columns n_o and n_e, or birefringence", "add them")
    dn_mean = float(np.mean(n_e - n_o))
    kind = "positive uniaxial" if dn_mean > 0 else "negative uniaxial"
    return Material(
        name=p.stem.lower(),
        kind=kind,
        formula="table",
        coefficients=frozen({}),
        valid_min_nm=float(wl[0]),
        valid_max_nm=float(wl[-1]),
        reference_temperature_c=20.0,
        retardance_temperature_coefficient=0.0,
        temperature_coefficient_uncertainty=0.0,
        source=f"measured table {p.name}",
        long_name=p.stem,
        path=str(p),
        table=(tuple(wl), tuple(n_o), tuple(n_e)),
    )


def _materials_folder():
    """The shipped materials: the installed ``tolerance.materials`` package, or, when running
    from a source checkout that is not installed, the top-level ``materials/`` folder."""
    try:
        return resources.files("tolerance.materials")
    except ModuleNotFoundError:
        return Path(__file__).resolve().parent.parent / "materials"


@cache
def _builtin() -> dict[str, Material]:
    out = {}
    for entry in sorted(_materials_folder().iterdir(), key=lambda e: e.name):
        if entry.name.endswith(".toml"):
            with entry.open("rb") as f:
                d = tomllib.load(f)
            m = material_from_dict(d, entry.name)
            out[m.name] = m
    return out


ALIASES = {
    "sio2": "quartz",
    "crystal quartz": "quartz",
    "al2o3": "sapphire",
    "pc": "polycarbonate",
    "magnesium fluoride": "mgf2",
    "caco3": "calcite",
}


def list_materials() -> list[Material]:
    """The built-in materials, sorted by name."""
    return list(_builtin().values())


def get_material(name_or_path) -> Material:
    """A built-in material by name (case-insensitive), or a material file by path.

    Raises
    ------
    RetolError
        For an unknown name, listing the known ones.
    """
    if isinstance(name_or_path, Material):
        return name_or_path
    key = str(name_or_path).strip()
    builtin = _builtin()
    low = ALIASES.get(key.lower(), key.lower())
    if low in builtin:
        return builtin[low]
    if key.endswith((".toml", ".csv")) or Path(key).is_file():
        return load_material_file(key)
    close = difflib.get_close_matches(low, list(builtin), n=1)
    hint = f"did you mean {close[0]!r}? " if close else ""
    raise RetolError(
        "material",
        f"unknown material {key!r}",
        f"{hint}known: {', '.join(builtin)}; or give a path to a .toml or .csv material file",
    )
