"""An independent, slow reference model of a retol run, for the differential tests.

Nothing here imports :mod:`tolerance`: the material formulas are re-evaluated from the
coefficients in ``materials/*.toml`` (read with :mod:`tomllib`), plates are designed from their
defining equations, the draws are regenerated from the documented scheme, and each sample is a
plain product of 2×2 complex Jones matrices at each wavelength, one wavelength at a time.

Sources
-------
- [Ghosh1999] G. Ghosh, "Dispersion-equation coefficients for the refractive index and
  birefringence of calcite and quartz crystals," Opt. Commun. 163, 95-102 (1999):
  n² = 1 + A + B·λ²/(λ² − C) + D·λ²/(λ² − E), λ in µm.
- [Sellmeier] the Sellmeier form n² = 1 + Σ Aᵢ·λ²/(λ² − λᵢ²) used by M. J. Dodge, Appl. Opt. 23,
  1980 (1984) (MgF2) and I. H. Malitson, M. J. Dodge (1972) (sapphire).
- [Oscillator] a single-oscillator birefringence dispersion Δn(λ) = Δn∞·λ²/(λ² − λ₀²) (the form
  the film files state; their numbers are marked "from memory" there).
- [Hecht] E. Hecht, *Optics*, ch. 8: Jones matrices of retarders and rotators, the polarization
  ellipse (sin 2χ = S₃/S₀, b/a = |tan χ|, tan 2ψ = S₂/S₁).
- [Veiras2010] F. E. Veiras, L. I. Perez, M. T. Garea, Appl. Opt. 49, 2769-2777 (2010): the
  normal components of the two wave vectors in a tilted plate with its optic axis in the face.
- [Salmon2011] J. K. Salmon et al., "Parallel random numbers: as easy as 1, 2, 3," SC11 (2011):
  the Philox counter-based generator; the per-(tolerance, layer) keys and per-512-sample block
  counters are the scheme documented in DEVELOPERS.md and ``tolerance/sampler.py``.
- [Beckers1971] J. M. Beckers, "Achromatic linear retarders," Appl. Opt. 10, 973 (1971): two
  crystals with crossed axes whose thicknesses solve the retardance at two wavelengths.
"""

from __future__ import annotations

import math
import tomllib
import zlib
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path

import numpy as np

MATERIALS_DIR = Path(__file__).resolve().parent.parent / "materials"
BLOCK = 512  # samples per block of draws (DEVELOPERS.md, "Reproducible")
EXTINCTION_FLOOR = 1e-15  # the documented 150 dB cap: 10·log10(1/1e-15)


# ----------------------------------------------------------------------------- materials


@cache
def material_data(name: str) -> dict:
    """The parsed TOML of a shipped material file."""
    with (MATERIALS_DIR / f"{name}.toml").open("rb") as f:
        return tomllib.load(f)


def ref_indices(name: str, wavelength_nm):
    """(n_o, n_e) re-evaluated from the published formula named in the material file."""
    d = material_data(name)
    f = d["formula"]
    lam = np.asarray(wavelength_nm, dtype=float) / 1000.0  # the formulas take µm
    l2 = lam * lam
    if f["type"] == "ghosh":  # [Ghosh1999]

        def n(c):
            return np.sqrt(1.0 + c["A"] + c["B"] * l2 / (l2 - c["C"]) + c["D"] * l2 / (l2 - c["E"]))

        return n(f["ordinary"]), n(f["extraordinary"])
    if f["type"] == "sellmeier":  # [Sellmeier]

        def n(c):
            s = 1.0
            for a, li in zip(c["A"], c["lambda"], strict=True):
                s = s + a * l2 / (l2 - li * li)
            return np.sqrt(s)

        return n(f["ordinary"]), n(f["extraordinary"])
    if f["type"] == "oscillator-birefringence":  # [Oscillator]
        dn = f["birefringence_inf"] * l2 / (l2 - f["lambda0"] ** 2)
        n_o = np.full_like(l2, f["mean_index"])
        return n_o, n_o + dn
    raise AssertionError(f"no reference for formula {f['type']!r}")


def ref_dn(name: str, wavelength_nm) -> np.ndarray:
    n_o, n_e = ref_indices(name, wavelength_nm)
    return n_e - n_o


def is_negative(name: str) -> bool:
    return material_data(name)["kind"] == "negative uniaxial"


def gamma(name: str) -> float:
    return float(material_data(name).get("thermal", {}).get("retardance_coefficient_per_k", 0.0))


def t_ref(name: str) -> float:
    return float(material_data(name).get("reference_temperature_c", 20.0))


# ----------------------------------------------------------------------------- plates


@dataclass
class RefLayer:
    material: str
    thickness_um: float
    axis_deg: float  # fast axis

    @property
    def optic_axis_deg(self) -> float:
        # README "Conventions": the optic axis is the fast axis of a negative crystal and the
        # slow axis (fast + 90°) of a positive crystal or a film
        return self.axis_deg if is_negative(self.material) else self.axis_deg + 90.0


@dataclass
class RefPlate:
    layers: list
    axis_deg: float
    design_nm: float
    extra: dict = field(default_factory=dict)


def _thick(material, waves, design_nm):
    """d = W·λ/|Δn| [µm]: the thickness giving W waves at λ."""
    return waves * design_nm / abs(float(ref_dn(material, design_nm))) / 1000.0


def ref_plate(c: dict) -> RefPlate:
    """Design a candidate (as written in the spec, wavelengths in nm, lengths in µm)."""
    kind = c["construction"]
    ax = float(c.get("axis_deg", 45.0))
    w = float(c.get("waves", 0.25))
    lam = c.get("design_nm")
    m = c.get("material")
    if kind == "zero-order":
        return RefPlate([RefLayer(m, _thick(m, w, lam), ax)], ax, lam)
    if kind == "multi-order":
        return RefPlate([RefLayer(m, _thick(m, c["order"] + w, lam), ax)], ax, lam)
    if kind == "compound":
        d1 = c["thick_plate_um"]
        return RefPlate(
            [RefLayer(m, d1, ax), RefLayer(m, d1 - _thick(m, w, lam), ax + 90.0)], ax, lam
        )
    if kind == "achromatic":  # [Beckers1971]: x1|Δn1(λ)| + x2|Δn2(λ)| = W·λ at two λ
        p = c["partner"]
        la, lb = c["match_nm"]
        A = np.array(
            [
                [abs(float(ref_dn(m, la))), abs(float(ref_dn(p, la)))],
                [abs(float(ref_dn(m, lb))), abs(float(ref_dn(p, lb)))],
            ]
        )
        x = np.linalg.solve(A, np.array([w * la, w * lb]) / 1000.0)
        return RefPlate(
            [
                RefLayer(mat, abs(xi), ax if xi > 0 else ax + 90.0)
                for mat, xi in zip((m, p), x, strict=True)
            ],
            ax,
            lam,
        )
    if kind == "film":
        r = c.get("retardance_nm", w * lam)
        return RefPlate([RefLayer(m, r / abs(float(ref_dn(m, lam))) / 1000.0, ax)], ax, lam)
    if kind == "stack":
        return RefPlate(
            [
                RefLayer(la["material"], la["thickness_um"], la["axis_deg"] + ax)
                for la in c["layers"]
            ],
            ax,
            lam,
        )
    raise AssertionError(kind)


# ----------------------------------------------------------------------------- draws


def ref_draws(seed: int, name: str, index: int, n: int):
    """Standard normal and uniform draws of samples [0, n) of one (tolerance, layer) stream.

    Key: ``SeedSequence(seed, spawn_key=(crc32(name), index))``, two 64-bit words; block b of 512
    samples: Philox with that key and counter (0, 0, 0, b), first 512 normals then 512 uniforms
    [Salmon2011].
    """
    ss = np.random.SeedSequence(seed, spawn_key=(zlib.crc32(name.encode()), index))
    key = ss.generate_state(2, np.uint64)
    z, u = [], []
    for b in range(-(-n // BLOCK)):
        g = np.random.Generator(np.random.Philox(key=key, counter=[0, 0, 0, b]))
        z.append(g.standard_normal(BLOCK))
        u.append(g.random(BLOCK))
    return np.concatenate(z)[:n], np.concatenate(u)[:n]


def ref_scaled(dist: dict | None, z, u, center=0.0):
    """A tolerance table of the spec ({sigma}, {uniform}, {low, high}, {tolerance, coverage})."""
    if dist is None:
        return np.full(len(z), float(center))
    if "sigma" in dist:
        return center + dist["sigma"] * z
    if "uniform" in dist:
        return center + dist["uniform"] * (2.0 * u - 1.0)
    if "tolerance" in dist:
        return center + dist["tolerance"] / dist.get("coverage", 3.0) * z
    return dist["low"] + (dist["high"] - dist["low"]) * u  # an absolute range


@dataclass
class Draws:
    """Each sample's perturbed assembly."""

    thickness: np.ndarray  # (S, L) µm
    axis: np.ndarray  # (S, L) fast axes, deg
    optic: np.ndarray  # (S, L) optic axes, deg
    temperature: np.ndarray  # (S,) °C
    aoi: np.ndarray  # (S,) deg
    poi: np.ndarray  # (S,) plane-of-incidence azimuth in the lab, deg
    alpha: np.ndarray  # (S,) input azimuth, deg
    drift: np.ndarray  # (S,) nm


def ref_assemblies(plate: RefPlate, tol: dict, n: int, seed: int, t_nom=20.0, alpha0=0.0):
    """The perturbed assemblies of samples [0, n), as README "Spec files" describes them."""
    L = len(plate.layers)

    def get(key, index=0, center=0.0, stream=None):
        z, u = ref_draws(seed, stream or key, index, n)
        return ref_scaled(tol.get(key), z, u, center)

    temp = get("temperature_c", center=t_nom)
    clock = get("clocking_deg")
    th = np.empty((n, L))
    axis = np.empty((n, L))
    optic = np.empty((n, L))
    for j, la in enumerate(plate.layers):
        th[:, j] = np.maximum(la.thickness_um + get("thickness_um", j), 0.0)
        cross = get("crossing_deg", j) if j > 0 else 0.0
        axis[:, j] = la.axis_deg + clock + cross
        optic[:, j] = la.optic_axis_deg + clock + cross
    aoi = np.abs(get("tilt_deg"))
    if tol.get("tilt_deg") is not None:
        _, u = ref_draws(seed, "tilt_azimuth", 0, n)
        poi = 360.0 * u  # uniform plane of incidence
    else:
        poi = np.zeros(n)
    alpha = get("input_azimuth_deg", center=alpha0)
    drift = get("drift")
    return Draws(th, axis, optic, temp, aoi, poi, alpha, drift)


# ----------------------------------------------------------------------------- optics


def ref_layer_retardance(material, d_um, lam_nm, temp_c, aoi_deg, phi_deg):
    """δ = 2π·d·|N_e − N_o|/λ·(1 + γ(T − T_ref)) [rad] with [Veiras2010]'s normal components."""
    n_o, n_e = ref_indices(material, lam_nm)
    s2 = math.sin(math.radians(aoi_deg)) ** 2
    phi = math.radians(phi_deg)
    N_o = np.sqrt(n_o**2 - s2)
    N_e = np.sqrt(n_e**2 - s2 * math.sin(phi) ** 2 - (n_e / n_o) ** 2 * s2 * math.cos(phi) ** 2)
    # None: the material's reference temperature, where the plate is designed
    tf = 1.0 if temp_c is None else 1.0 + gamma(material) * (temp_c - t_ref(material))
    return 2.0 * math.pi * d_um * 1000.0 * np.abs(N_e - N_o) / lam_nm * tf


def rot(theta_deg):
    """R(θ) [Hecht]: the frame rotated by θ."""
    t = math.radians(theta_deg)
    return np.array([[math.cos(t), math.sin(t)], [-math.sin(t), math.cos(t)]])


def ref_retarder(delta, fast_deg):
    """R(−θ)·diag(e^{−iδ/2}, e^{+iδ/2})·R(θ): the slow wave lags by δ (README "Conventions").

    ``delta`` may be an array (one matrix per wavelength): shape (..., 2, 2).
    """
    delta = np.asarray(delta, dtype=float)
    D = np.zeros(delta.shape + (2, 2), dtype=complex)
    D[..., 0, 0] = np.exp(-0.5j * delta)
    D[..., 1, 1] = np.exp(0.5j * delta)
    return rot(-fast_deg) @ D @ rot(fast_deg)


def ref_output(plate: RefPlate, dr: Draws, s: int, lam_nm, reference_temperature=False):
    """Output Jones vectors (W, 2) and per-layer retardances (L, W) [rad] of sample s at the
    wavelengths ``lam_nm`` (W,); light meets layer 0 first."""
    lam = np.atleast_1d(np.asarray(lam_nm, dtype=float))
    a = math.radians(dr.alpha[s])
    E = np.tile(np.array([math.cos(a), math.sin(a)], dtype=complex), (lam.size, 1))
    deltas = []
    for j, la in enumerate(plate.layers):
        d = ref_layer_retardance(
            la.material,
            dr.thickness[s, j],
            lam,
            None if reference_temperature else dr.temperature[s],
            dr.aoi[s],
            dr.poi[s] - dr.optic[s, j],
        )
        deltas.append(d)
        E = (ref_retarder(d, dr.axis[s, j]) @ E[..., None])[..., 0]
    return E, np.array(deltas)


def stokes(E):
    """Normalised (s1, s2, s3) (..., 3) with S₃ = 2·Im(Eₓ·E_y*) > 0 right-handed (README)."""
    E = np.asarray(E)
    ex, ey = E[..., 0], E[..., 1]
    s0 = abs(ex) ** 2 + abs(ey) ** 2
    c = ex * np.conj(ey)
    return np.stack([abs(ex) ** 2 - abs(ey) ** 2, 2 * c.real, 2 * c.imag], axis=-1) / s0[..., None]


def axial_ratio(s):
    """b/a = |tan χ| with sin 2χ = s₃/|s| [Hecht]."""
    p = math.sqrt(float(np.dot(s, s)))
    q = min(1.0, max(-1.0, s[2] / p)) if p > 0 else 0.0
    return abs(math.tan(0.5 * math.asin(q)))


def azimuth(s):
    """Major-axis azimuth ψ, tan 2ψ = s₂/s₁, folded into (−90°, 90°] [Hecht]."""
    a = 0.5 * math.degrees(math.atan2(s[1], s[0]))
    return a + 180.0 if a <= -90.0 else a


def metric(s, goal, kind):
    """The goal metric of a (possibly partially polarized) normalised Stokes vector."""
    if kind == "axial_ratio":
        ar = axial_ratio(s)
        return ar if s[2] * goal[2] >= 0 else -ar  # signed negative for the wrong hand
    f = 0.5 * (1.0 + float(np.dot(s, goal)))  # fidelity (1 + s·g)/2
    if kind == "fidelity":
        return f
    # extinction through an analyzer passing the goal: power ratio, so 10·log10 (Malus)
    return 10.0 * math.log10(max(f, EXTINCTION_FLOOR) / max(1.0 - f, EXTINCTION_FLOOR))


def goal_vector(goal: dict, hand: int):
    if goal["state"] == "circular":
        return np.array([0.0, 0.0, float(hand)])
    a = math.radians(2.0 * goal.get("azimuth_deg", 0.0))
    return np.array([math.cos(a), math.sin(a), 0.0])


def nominal_handedness(plate: RefPlate, alpha0=0.0) -> int:
    """+1 when the error-free plate turns the input clockwise (right) at its design wavelength."""
    zero = Draws(
        np.array([[la.thickness_um for la in plate.layers]]),
        np.array([[la.axis_deg for la in plate.layers]]),
        np.array([[la.optic_axis_deg for la in plate.layers]]),
        np.array([20.0]),
        np.zeros(1),
        np.zeros(1),
        np.array([alpha0]),
        np.zeros(1),
    )
    # the design is made at each material's reference temperature
    E, _ = ref_output(plate, zero, 0, plate.design_nm, reference_temperature=True)
    return 1 if stokes(E)[0, 2] >= 0 else -1


# ----------------------------------------------------------------------------- spectra


def grid_of(start, stop, step):
    n = int(math.floor((stop - start) / step + 1e-9)) + 1
    return np.round(start + step * np.arange(n), 9)


def cell_weights(grid, cdf):
    """Power in each grid cell [midpoint to midpoint; the ends at the grid ends], renormalised to
    the power on the grid (README "Sources": power off the grid is left out)."""
    edges = np.concatenate([grid[:1], 0.5 * (grid[1:] + grid[:-1]), grid[-1:]])
    w = np.diff(cdf(edges))
    return w / w.sum()


# ----------------------------------------------------------------------------- a whole run


def toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return '"' + v + '"'
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, list | tuple):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def write_spec(path: Path, tables: dict, candidates: list) -> Path:
    """Write a spec file: ``tables`` maps a table name to its keys, plus [[candidate]] blocks."""
    out = []
    for name, keys in tables.items():
        out.append(f"[{name}]")
        out += [f"{k} = {toml_value(v)}" for k, v in keys.items()]
    for c in candidates:
        out.append("[[candidate]]")
        out += [f"{k} = {toml_value(v)}" for k, v in c.items()]
    path.write_text("\n".join(out) + "\n", encoding="utf-8")
    return path


@dataclass
class RefCase:
    """The reference results of one candidate."""

    plate: RefPlate
    goal: np.ndarray
    stokes: np.ndarray  # (S, W, 3) per sample and grid wavelength
    values: np.ndarray  # (S, 4, W): retardance [waves], axial ratio, azimuth [deg], metric
    worst: np.ndarray  # (S,) worst metric over the grid
    spectral_stokes: np.ndarray  # (S, 3) source-weighted
    spectral_metric: np.ndarray  # (S,)
    design_stokes: np.ndarray  # (S, 3) at the grid point nearest the design wavelength
    nominal_stokes: np.ndarray  # (W, 3) every tolerance zero
    nominal_values: np.ndarray  # (4, W)
    phase_sum: float  # Σ|δ| [rad] over layers at the grid's shortest wavelength (error scale)
    min_abs_dn: float  # smallest |Δn| of the layers (error scale)


def spectral_metric(s, goal, kind):
    """Metric of a source-averaged Stokes vector: the axial ratio of its polarized part; the
    fidelity and extinction with the unpolarized part counted (README "Sources")."""
    return metric(s, goal, kind)


def ref_case(
    c, tol, *, grid, grid_weight, lines, line_weight, goal, n, seed, t_nom=20.0, alpha0=0.0
):
    """Reference results of one candidate ``c`` (numbers in nm, µm, deg) under ``tol``."""
    plate = ref_plate(c)
    if goal["state"] == "circular":
        hand = {"right": 1, "left": -1}.get(goal.get("handedness"))
        g = goal_vector(goal, hand or nominal_handedness(plate, alpha0))
    else:
        g = goal_vector(goal, 1)
    kind = goal["metric"]
    dr = ref_assemblies(plate, tol, n, seed, t_nom, alpha0)
    nominal = ref_assemblies(plate, {}, 1, seed, t_nom, alpha0)
    proj = np.array(
        [math.cos(math.radians(2 * (la.axis_deg - plate.axis_deg))) for la in plate.layers]
    )
    W = grid.size
    w_design = int(np.argmin(np.abs(grid - plate.design_nm))) if plate.design_nm else 0

    def one(d, s):
        E, deltas = ref_output(plate, d, s, grid)
        st = stokes(E)
        vals = np.empty((4, W))
        vals[0] = proj @ deltas / (2 * math.pi)
        vals[1] = [axial_ratio(x) for x in st]
        vals[2] = [azimuth(x) for x in st]
        vals[3] = [metric(x, g, kind) for x in st]
        spec = grid_weight @ st
        if len(lines):
            El, _ = ref_output(plate, d, s, np.asarray(lines) + d.drift[s])
            spec = spec + np.asarray(line_weight) @ stokes(El)
        return st, vals, spec

    st_all = np.empty((n, W, 3))
    vals_all = np.empty((n, 4, W))
    spec_all = np.empty((n, 3))
    for s in range(n):
        st_all[s], vals_all[s], spec_all[s] = one(dr, s)
    nst, nvals, _ = one(nominal, 0)
    deltas0 = ref_output(plate, nominal, 0, grid.min())[1][:, 0]
    return RefCase(
        plate=plate,
        goal=g,
        stokes=st_all,
        values=vals_all,
        worst=vals_all[:, 3].min(axis=1),
        spectral_stokes=spec_all,
        spectral_metric=np.array([spectral_metric(x, g, kind) for x in spec_all]),
        design_stokes=st_all[:, w_design],
        nominal_stokes=nst,
        nominal_values=nvals,
        phase_sum=float(np.sum(np.abs(deltas0))),
        min_abs_dn=min(abs(float(ref_dn(la.material, grid.min()))) for la in plate.layers),
    )
