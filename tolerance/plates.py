"""Retarder constructions: each produces a stack of layers (material, thickness, fast axis).

The registry :data:`CONSTRUCTIONS` maps a construction name to a builder; the CLI's choices and
the spec's ``construction`` key are read from it.  Thicknesses in µm, wavelengths in nm, angles in
degrees.  Plates are designed at each material's reference temperature and normal incidence.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .dispersion import Material, birefringence, get_material
from .errors import RetolError
from .polarization import retarder_jones
from .registry import Key, Registry
from .retardance import layer_retardance


@dataclass(frozen=True)
class Layer:
    """One birefringent plate: material, thickness [µm] and fast-axis angle [deg].

    With ``extinction_db`` [dB] the layer is a linear polarizer of that extinction ratio with
    its transmission axis at ``axis_deg`` (an element of a train; its thickness is 0 and its
    material, borrowed from the train's first plate, gives it no retardance).
    """

    material: Material
    thickness_um: float
    axis_deg: float
    extinction_db: float | None = None

    @property
    def optic_axis_deg(self) -> float:
        """Direction of the optic (c) axis in the face: slow for positive crystals and films."""
        return self.axis_deg if self.material.negative else self.axis_deg + 90.0


@dataclass(frozen=True)
class Plate:
    """A retarder: its layers, the construction that made it and its design target."""

    name: str
    construction: str
    layers: tuple[Layer, ...]
    waves: float
    design_nm: float
    axis_deg: float
    details: dict = field(default_factory=dict, hash=False)

    @property
    def materials(self) -> tuple[Material, ...]:
        return tuple(dict.fromkeys(layer.material for layer in self.layers))

    @property
    def total_thickness_um(self) -> float:
        return float(sum(layer.thickness_um for layer in self.layers))

    def signs(self) -> np.ndarray:
        """Projection cos 2(θᵢ − θ) of each layer's fast axis on the plate's fast axis."""
        return np.array(
            [np.cos(np.radians(2 * (la.axis_deg - self.axis_deg))) for la in self.layers]
        )

    def aligned(self) -> bool:
        """True when every layer's axis is parallel or crossed to the plate's axis."""
        return bool(np.all(np.abs(np.abs(self.signs()) - 1.0) < 1e-12))

    def describe(self) -> str:
        parts = [
            f"{la.material.name} {la.thickness_um:.3f} um @ {la.axis_deg:g} deg"
            for la in self.layers
        ]
        return "; ".join(parts)


def _positive(value, field_name):
    if value is None:
        raise RetolError(field_name, "is required for this construction", f"give {field_name}")
    v = float(value)
    if not np.isfinite(v) or v <= 0:
        raise RetolError(field_name, f"must be positive, got {value!r}", "give a positive value")
    return v


def solve2(A, b):
    """Solution of the 2×2 linear system A·x = b by Cramer's rule (numpy arrays).

    Written out rather than calling LAPACK, whose kernels are chosen per CPU: the same inputs then
    give the same bits, and so the same designed thicknesses, on every machine.
    Raises ``np.linalg.LinAlgError`` for a singular (or non-finite) system.
    """
    (a, b_), (c, d) = np.asarray(A, dtype=float)
    u, v = np.asarray(b, dtype=float)
    det = a * d - b_ * c
    if det == 0.0 or not np.isfinite(det):
        raise np.linalg.LinAlgError("singular 2x2 system")
    return np.array([(u * d - b_ * v) / det, (a * v - c * u) / det])


def _dn(material, wl, field_name="design"):
    return float(abs(birefringence(material, wl)))


def _thickness_for(material, waves, design_nm):
    """Thickness [µm] that gives ``waves`` of retardance at ``design_nm``."""
    return waves * design_nm / _dn(material, design_nm) / 1e3


def zero_order(material, waves, design_nm, axis_deg=0.0, **_):
    """A single true zero-order plate: δ = ``waves`` at ``design_nm``."""
    m = get_material(material)
    w = _positive(waves, "waves")
    d = _thickness_for(m, w, design_nm)
    return (Layer(m, d, axis_deg),), {}


def multi_order(material, waves, design_nm, axis_deg=0.0, order=None, **_):
    """A single multi-order plate: δ = ``order`` + ``waves`` at ``design_nm``."""
    m = get_material(material)
    w = _positive(waves, "waves")
    if order is None:
        raise RetolError("order", "is required for a multi-order plate", "give e.g. --order 10")
    if int(order) != order or order < 0:
        raise RetolError("order", f"must be a whole number >= 0, got {order!r}", "e.g. 10")
    d = _thickness_for(m, int(order) + w, design_nm)
    return (Layer(m, d, axis_deg),), {"order": int(order)}


def compound(material, waves, design_nm, axis_deg=0.0, thick_plate_um=None, **_):
    """Two plates of one material, axes crossed; their thickness difference sets the target.

    The thicker plate (``thick_plate_um``) carries the fast axis at ``axis_deg``, the thinner one
    is crossed to it.
    """
    m = get_material(material)
    w = _positive(waves, "waves")
    if thick_plate_um is None:
        raise RetolError(
            "thick_plate", "is required for a compound plate", "give e.g. --thick-plate 1000um"
        )
    d1 = _positive(thick_plate_um, "thick_plate")
    diff = _thickness_for(m, w, design_nm)
    d2 = d1 - diff
    if d2 <= 0:
        raise RetolError(
            "thick_plate",
            f"{d1:g} um is thinner than the {diff:.3f} um difference the target needs",
            "give a thicker plate",
        )
    return (Layer(m, d1, axis_deg), Layer(m, d2, axis_deg + 90.0)), {"difference_um": diff}


def achromatic(material, waves, design_nm, axis_deg=0.0, partner=None, match_nm=None, **_):
    """Two different crystals with crossed axes, achromatic at two wavelengths or in slope.

    Thicknesses solve x₁·|Δn₁(λ)| + x₂·|Δn₂(λ)| = W·λ at the two wavelengths ``match_nm`` (or in
    value and slope d(δ/λ)/dλ = 0 at ``design_nm``); a negative xᵢ means that layer is crossed.

    References
    ----------
    .. [1] J. M. Beckers, "Achromatic linear retarders," Appl. Opt. 10, 973-975 (1971).
    """
    m1 = get_material(material)
    if partner is None:
        raise RetolError(
            "partner", "is required for an achromatic plate", "give e.g. --partner mgf2"
        )
    m2 = get_material(partner)
    if m2.name == m1.name:
        raise RetolError("partner", "must be a different material", "e.g. quartz with mgf2")
    w = _positive(waves, "waves")
    if match_nm:
        la, lb = (float(x) for x in match_nm)
        if la == lb:
            raise RetolError("match", "needs two different wavelengths", "e.g. 450nm and 650nm")
        A = np.array([[_dn(m1, la), _dn(m2, la)], [_dn(m1, lb), _dn(m2, lb)]]) * 1e3
        b = np.array([w * la, w * lb])
        mode = f"matched at {la:g} and {lb:g} nm"
    else:
        h = 0.5
        lam = design_nm

        def slope(m):
            return (_dn(m, lam + h) - _dn(m, lam - h)) / (2 * h)

        A = np.array([[_dn(m1, lam), _dn(m2, lam)], [slope(m1), slope(m2)]]) * 1e3
        b = np.array([w * lam, w])
        mode = f"value and slope matched at {lam:g} nm"
    try:
        x = solve2(A, b)
    except np.linalg.LinAlgError:
        raise RetolError(
            "partner", "dispersions too alike to make an achromat", "pick another"
        ) from None
    layers = tuple(
        Layer(m, abs(float(xi)), axis_deg if xi > 0 else axis_deg + 90.0)
        for m, xi in zip((m1, m2), x, strict=True)
    )
    return layers, {"achromat": mode}


def film(material, waves, design_nm, axis_deg=0.0, retardance_nm=None, **_):
    """A polymer retarder film sold by its retardance at a reference wavelength.

    ``retardance_nm`` at ``design_nm`` (the reference), or ``waves``·``design_nm`` when absent.
    """
    m = get_material(material)
    if m.kind != "film":
        raise RetolError(
            "material",
            f"{m.name} is a crystal, not a retarder film",
            "use a film material (polycarbonate, pva) or a crystal construction such as zero-order",
        )
    if retardance_nm is not None:
        r = _positive(retardance_nm, "retardance")
    else:
        r = _positive(waves, "waves") * design_nm
    d = r / _dn(m, design_nm) / 1e3
    return (Layer(m, d, axis_deg),), {"retardance_nm": r}


def stack(material=None, waves=None, design_nm=None, axis_deg=0.0, layers=None, **_):
    """An explicit stack: ``layers`` is a list of dicts with material, thickness_um, axis_deg.

    Each layer's ``axis_deg`` is its fast axis; the plate's ``axis_deg`` is added to all.
    """
    if not layers:
        raise RetolError("layers", "a stack needs at least one layer", "add [[candidate.layers]]")
    out = []
    for i, la in enumerate(layers):
        if not isinstance(la, dict):
            raise RetolError(
                f"layers[{i}]", "must be a table", "give material, thickness, axis_deg"
            )
        if "material" not in la:
            raise RetolError(f"layers[{i}].material", "missing", "name the layer's material")
        th = la.get("thickness_um", la.get("thickness"))
        from .units import length_um

        d = _positive(
            length_um(th, f"layers[{i}].thickness") if th is not None else None,
            f"layers[{i}].thickness",
        )
        out.append(Layer(get_material(la["material"]), d, _angle(la.get("axis_deg", 0.0), i)))
    return tuple(Layer(x.material, x.thickness_um, x.axis_deg + axis_deg) for x in out), {}


def _angle(value, i: int) -> float:
    """A layer's axis angle [deg]: a finite number."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not np.isfinite(value):
        raise RetolError(
            f"layers[{i}].axis_deg", f"must be a finite angle, got {value!r}", "e.g. 45"
        )
    return float(value)


#: Construction name -> builder(material, waves, design_nm, axis_deg, **keys) -> (layers, details)
#: Construction registry: each entry names the spec keys it takes (as the spec writes them), the
#: builder's keyword for each, units and help; the spec validator and the CLI read it.
CONSTRUCTIONS = Registry("construction")
CONSTRUCTIONS.add("zero-order", "one true zero-order plate", (), zero_order, params={})
CONSTRUCTIONS.add(
    "multi-order",
    "one plate of order m + waves",
    (Key("order", "", "whole waves m beyond the target", required=True),),
    multi_order,
    params={"order": "order"},
)
CONSTRUCTIONS.add(
    "compound",
    "two plates of one material, axes crossed (compound zero-order)",
    (Key("thick_plate", "um", "thickness of the thicker plate", required=True),),
    compound,
    params={"thick_plate": "thick_plate_um"},
)
CONSTRUCTIONS.add(
    "achromatic",
    "two crystals, axes crossed, achromatic at two wavelengths or in slope",
    (
        Key("partner", "", "the second crystal", required=True),
        Key("match", "nm", "the two wavelengths where the target holds exactly"),
    ),
    achromatic,
    params={"partner": "partner", "match": "match_nm"},
)
CONSTRUCTIONS.add(
    "film",
    "a polymer retarder film sold by its retardance",
    (Key("retardance", "nm", "retardance at the design wavelength"),),
    film,
    params={"retardance": "retardance_nm"},
)
CONSTRUCTIONS.add(
    "stack",
    "an explicit stack of layers (material, thickness, axis)",
    (Key("layers", "", "list of { material, thickness, axis_deg }", required=True),),
    stack,
    params={"layers": "layers"},
)
#: Every construction-specific spec key, in registry order.
CONSTRUCTION_KEYS = tuple(dict.fromkeys(k for e in CONSTRUCTIONS.values() for k in e.key_names))


def design_plate(
    construction: str,
    material=None,
    waves: float | None = 0.25,
    design_nm: float | None = None,
    axis_deg: float = 0.0,
    name: str | None = None,
    **keys,
) -> Plate:
    """Design a plate of a named construction; see :data:`CONSTRUCTIONS`.

    Examples
    --------
    >>> p = design_plate("zero-order", "quartz", 0.25, 632.8)
    >>> round(p.layers[0].thickness_um, 2)
    17.49
    """
    entry = CONSTRUCTIONS.lookup(construction, "construction")
    for field_name, v in (("axis_deg", axis_deg), ("waves", waves), ("design_nm", design_nm)):
        if v is not None and (isinstance(v, bool) or not np.isfinite(float(v))):
            raise RetolError(
                field_name, f"must be a finite number, got {v!r}", "give a finite value"
            )
    keys = {k: v for k, v in keys.items() if v is not None}  # None means "not given"
    known = tuple(entry.extra["params"].values())
    for k in keys:
        if k not in known:
            other = [e.name for e in CONSTRUCTIONS.values() if k in e.extra["params"].values()]
            problem = (
                f"does not apply to a {construction} plate (it belongs to {', '.join(other)})"
                if other
                else f"is not a keyword of design_plate for a {construction} plate"
            )
            allowed = ", ".join(("material", "waves", "design_nm", "axis_deg", "name") + known)
            raise RetolError(k, problem, f"known keywords: {allowed}")
    if construction != "stack":
        if material is None:
            raise RetolError("material", "is required", "give e.g. --material quartz")
        if design_nm is None:
            raise RetolError("design", "design wavelength is required", "give e.g. 632.8nm")
        for m in [material] + ([keys["partner"]] if keys.get("partner") else []):
            from .dispersion import check_range

            check_range(get_material(m), design_nm, field="design")
    layers, details = entry.payload(
        material=material, waves=waves, design_nm=design_nm, axis_deg=axis_deg, **keys
    )
    if design_nm is None:
        design_nm = float(np.mean([la.material.valid_min_nm for la in layers]))
    w = float(waves) if waves is not None else float("nan")
    if construction == "film":
        w = details["retardance_nm"] / float(design_nm)  # a film is specified by its retardance
    return Plate(
        name=name or f"{construction} {material or 'stack'}",
        construction=construction,
        layers=layers,
        waves=w,
        design_nm=float(design_nm),
        axis_deg=float(axis_deg),
        details=details,
    )


def layer_retardances(
    plate: Plate,
    wavelength_nm,
    temperature_c=None,
    aoi_deg=0.0,
    incidence_azimuth_deg=0.0,
    extrapolate=False,
):
    """Retardance of each layer, shape (n_layers, ...). [rad]

    ``incidence_azimuth_deg`` is the plane of incidence's azimuth in the lab frame.
    """
    return np.stack(
        [
            layer_retardance(
                la.material,
                la.thickness_um,
                wavelength_nm,
                temperature_c,
                aoi_deg,
                np.asarray(incidence_azimuth_deg) - la.optic_axis_deg,
                extrapolate,
            )
            for la in plate.layers
        ]
    )


def plate_retardance(
    plate: Plate,
    wavelength_nm,
    temperature_c=None,
    aoi_deg=0.0,
    incidence_azimuth_deg=0.0,
    extrapolate=False,
):
    """Retardance of the plate along its fast axis: Σ cos 2(θᵢ − θ)·δᵢ. [rad]

    For plates whose layers are parallel or crossed (every construction but a general stack)
    this is exactly the retardance of the equivalent linear retarder, order kept.
    """
    d = layer_retardances(
        plate, wavelength_nm, temperature_c, aoi_deg, incidence_azimuth_deg, extrapolate
    )
    s = plate.signs().reshape((-1,) + (1,) * (d.ndim - 1))
    return np.sum(s * d, axis=0)


def plate_jones(
    plate: Plate,
    wavelength_nm,
    temperature_c=None,
    aoi_deg=0.0,
    incidence_azimuth_deg=0.0,
    clocking_deg=0.0,
    extrapolate=False,
):
    """Jones matrix of the whole plate, light meeting layer 0 first. [(..., 2, 2) complex]"""
    d = layer_retardances(
        plate, wavelength_nm, temperature_c, aoi_deg, incidence_azimuth_deg, extrapolate
    )
    J = None
    for la, di in zip(plate.layers, d, strict=True):
        if la.extinction_db is not None:  # a polarizer element of a train
            from .polarization import polarizer_jones

            Ji = np.broadcast_to(
                polarizer_jones(la.axis_deg + clocking_deg, la.extinction_db), np.shape(di) + (2, 2)
            )
        else:
            Ji = retarder_jones(di, la.axis_deg + clocking_deg)
        J = Ji if J is None else Ji @ J
    return J


def equivalent_retardance(J):
    """Retardance of the equivalent (elliptical) retarder of a unitary Jones matrix. [rad, 0..π]"""
    J = np.asarray(J)
    det = np.linalg.det(J)
    tr = np.trace(J, axis1=-2, axis2=-1) / np.sqrt(det)
    c = np.clip(np.abs(tr.real) / 2.0, 0.0, 1.0)
    return 2.0 * np.arccos(c)
