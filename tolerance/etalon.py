"""A plate's faces: coherent multiple reflections (Airy sum) per eigenwave, and the Jones matrix.

A birefringent plate with reflecting faces is a Fabry-Perot etalon for each eigenwave: the
ordinary and the extraordinary wave each see their own index, their own face reflectance and
their own round-trip phase, so each has its own complex transmission

    t = √((1 − R₁)(1 − R₂))·e^{iφ} / (1 − √(R₁R₂)·e^{2iφ}),

with φ = k₀·N·d the single-pass phase and R₁, R₂ the power reflectances of the two faces seen
from inside.  The plate becomes a retarder whose retardance ripples with wavelength and a weak
diattenuator.  Lengths in µm, wavelengths in nm, angles in degrees at the API, radians inside.

Faces are described by :class:`Faces`: ``ideal`` (no reflection: today's ideal plate),
``uncoated`` (Fresnel reflectance ((n − 1)/(n + 1))² of each eigenwave's own index, at normal
incidence) or ``coated`` (a given power reflectance per face, the same for both eigenwaves).

Assumptions (stated in README.md): the reflection phase of a coated face is taken as 0 (that of
an uncoated face seen from inside); the face reflectance is that at normal incidence even for a
tilted plate; the thermal change of a plate's absolute phase (not its retardance) is neglected.
Cemented or optically contacted layers of a stack have no internal reflections: the stack's two
outer faces make one cavity whose round trip is the full 2×2 Jones product; with ``air_gap`` each
layer is its own cavity and reflections between layers (across the gaps) are neglected.

References
----------
.. [1] M. Born and E. Wolf, *Principles of Optics*, 7th ed. (Cambridge, 1999), sec. 7.6.1
   (Airy formulae of a plane-parallel plate) and sec. 1.6 (characteristic matrix).
.. [2] D. A. Holmes, "Exact theory of retardation plates," J. Opt. Soc. Am. 54, 1115-1120 (1964):
   interference between the multiply reflected o- and e-waves of a birefringent plate.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import RetolError

FACE_KINDS = ("ideal", "uncoated", "coated")


@dataclass(frozen=True)
class Faces:
    """A plate's faces: ``kind`` ideal|uncoated|coated and, when coated, ``reflectance`` [1]
    (power reflectance per face at normal incidence), or a table of it against wavelength:
    ``wavelength_nm`` [nm] (strictly increasing) and ``curve`` [1], read from ``file`` (a CSV
    file's name, kept for the record) or given inline."""

    kind: str = "ideal"
    reflectance: float = 0.0
    wavelength_nm: tuple = ()
    curve: tuple = ()
    file: str | None = None

    def __post_init__(self):
        if self.kind not in FACE_KINDS:
            raise RetolError(
                "faces", f"unknown kind {self.kind!r}", 'use "ideal", "uncoated" or { reflectance }'
            )
        r = float(self.reflectance)
        if not np.isfinite(r) or not 0.0 <= r < 1.0:
            raise RetolError(
                "faces.reflectance",
                f"must be a power reflectance in [0, 1), got {self.reflectance!r}",
                "give e.g. reflectance = 0.0025 (0.25 %)",
            )

    @property
    def ideal(self) -> bool:
        return self.kind == "ideal"

    @property
    def tabulated(self) -> bool:
        """The reflectance is a table against wavelength."""
        return bool(self.curve)

    def at(self, wavelength_nm):
        """The coating's power reflectance at ``wavelength_nm`` [nm] (linear interpolation in
        the table; its end values held beyond it). [1]"""
        wl = np.asarray(wavelength_nm, dtype=float)
        if not self.tabulated:
            return np.full(wl.shape, self.reflectance)
        return np.interp(wl, np.asarray(self.wavelength_nm), np.asarray(self.curve))

    def to_spec(self):
        """The spec form: a string for ideal/uncoated, a table for a coating (a tabulated
        coating inline, with the file it came from, so that a stored spec needs no file)."""
        if self.kind != "coated":
            return self.kind
        if not self.tabulated:
            return {"reflectance": self.reflectance}
        out = {"reflectance": list(self.curve), "wavelength_nm": list(self.wavelength_nm)}
        if self.file is not None:
            out["file"] = self.file
        return out


IDEAL = Faces("ideal")

_FACES_FIX = 'use "ideal", "uncoated", { reflectance = 0.0025 } or { reflectance = "coating.csv" }'


def coating_table(wavelength_nm, curve, field: str, name: str = "the table", file=None) -> Faces:
    """A tabulated coating after checking its rows (one-line :class:`RetolError` naming
    ``field``, ``name`` and the row otherwise): at least two rows, finite values, positive and
    strictly increasing wavelengths [nm], reflectances in [0, 1)."""
    wl = [float(x) for x in wavelength_nm]
    R = [float(x) for x in curve]
    if len(wl) != len(R):
        raise RetolError(
            field, f"{name}: {len(wl)} wavelengths but {len(R)} reflectances", "one of each per row"
        )
    if len(wl) < 2:
        raise RetolError(
            field,
            f"{name} has {len(wl)} row(s)",
            "give at least 2 rows of wavelength_nm,reflectance",
        )
    for i, (x, r) in enumerate(zip(wl, R, strict=True), start=1):
        if not (np.isfinite(x) and x > 0):
            raise RetolError(
                field,
                f"{name} row {i}, column wavelength_nm: {x!r} is not a positive finite wavelength",
                "wavelengths in nm, e.g. 632.8",
            )
        if not (np.isfinite(r) and 0.0 <= r < 1.0):
            raise RetolError(
                field,
                f"{name} row {i}, column reflectance: {r!r} is not a power reflectance in [0, 1)",
                "give fractions, e.g. 0.0025 for 0.25 % (not percent)",
            )
        if i > 1 and x <= wl[i - 2]:
            what = "repeats" if x == wl[i - 2] else "is below"
            raise RetolError(
                field,
                f"{name} row {i}, column wavelength_nm: {x:g} nm {what} the row before",
                "sort the rows by wavelength and keep one row per wavelength",
            )
    return Faces("coated", 0.0, tuple(wl), tuple(R), file)


def read_reflectance_csv(path, field: str) -> Faces:
    """A coating's power reflectance per face against wavelength from a CSV file.

    Rows of ``wavelength_nm,reflectance`` (nm; power, 0 to 1), an optional header row and ``#``
    comment lines; commas, semicolons, tabs or spaces separate the columns.  The file must be a
    regular file of at most :data:`tolerance.limits.MAX_DATA_BYTES`; the rows are checked by
    :func:`coating_table` (sorted, no repeats, values in range, no NaN or inf).
    """
    from pathlib import Path

    from .limits import read_csv_rows

    path = Path(path)
    name = path.name
    rows = read_csv_rows(
        path,
        field,
        "reflectance CSV file",
        2,
        "give rows of wavelength_nm,reflectance",
        "wavelength_nm, reflectance",
    )
    wl = [v[0] for _, v in rows]
    R = [v[1] for _, v in rows]
    return coating_table(wl, R, field, f"{name} data", file=name)


def parse_faces(value, field: str = "faces", base_dir=None) -> Faces:
    """A :class:`Faces` from the spec/CLI form ``"ideal"``, ``"uncoated"``,
    ``{reflectance = R}`` (a number R is accepted too), ``{reflectance = "coating.csv"}`` (a
    CSV file, relative to ``base_dir``) or the inline table ``{reflectance = [...],
    wavelength_nm = [...]}`` (what a stored spec holds, with ``file`` for the record)."""
    if isinstance(value, Faces):
        return value
    if isinstance(value, str):
        v = value.strip().lower()
        if v in ("ideal", "uncoated"):
            return Faces(v)
        try:
            number = float(v)
        except ValueError:
            number = None
        if number is not None:
            return parse_faces(number, field)
        if v.endswith(".csv"):  # the CLI's --faces coating.csv
            return parse_faces({"reflectance": value.strip()}, field, base_dir)
        raise RetolError(field, f"unknown faces {value!r}", _FACES_FIX)
    if isinstance(value, dict):
        keys = set(value)
        if "reflectance" not in keys or keys - {"reflectance", "wavelength_nm", "file"}:
            raise RetolError(
                field,
                f"a coating table takes reflectance (and wavelength_nm), got {sorted(value)}",
                'write faces = { reflectance = 0.0025 } or { reflectance = "coating.csv" }',
            )
        r = value["reflectance"]
        if isinstance(r, str):
            if keys != {"reflectance"}:
                raise RetolError(field, "a coating file takes no other keys", _FACES_FIX)
            from pathlib import Path

            if not r.strip() or "\x00" in r:
                raise RetolError(f"{field}.reflectance", f"bad file name {r!r}", _FACES_FIX)
            try:
                path = Path(r).expanduser()
            except RuntimeError:  # "~user" with no such user or home
                raise RetolError(
                    f"{field}.reflectance", f"cannot expand {r!r}", "give the full path"
                ) from None
            if not path.is_absolute() and base_dir is not None:
                path = Path(base_dir) / path
            return read_reflectance_csv(path, f"{field}.reflectance")
        if isinstance(r, list | tuple):
            wl = value.get("wavelength_nm")
            if not isinstance(wl, list | tuple):
                raise RetolError(
                    f"{field}.wavelength_nm",
                    "a list of reflectances needs the list of their wavelengths",
                    "add wavelength_nm = [600, 650, 700]",
                )
            if not all(isinstance(x, int | float) and not isinstance(x, bool) for x in (*wl, *r)):
                raise RetolError(
                    field, "the lists must hold numbers", "e.g. reflectance = [0.004, 0.002]"
                )
            file = value.get("file")
            if file is not None and not isinstance(file, str):
                raise RetolError(f"{field}.file", f"must be a file name, got {file!r}", _FACES_FIX)
            return coating_table(
                wl, r, field, "the inline table", None if file is None else str(file)
            )
        if keys != {"reflectance"}:
            raise RetolError(field, "wavelength_nm goes with a list of reflectances", _FACES_FIX)
        value = r
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise RetolError(field, f"cannot read {value!r}", _FACES_FIX)
    try:
        return Faces("coated", float(value))
    except RetolError as e:
        raise RetolError(f"{field}.reflectance", e.problem, e.fix) from None


def check_faces_cover(faces: Faces, lo_nm: float, hi_nm: float, field: str, what: str) -> None:
    """Refuse wavelengths [lo_nm, hi_nm] outside a tabulated coating's range."""
    if not faces.tabulated:
        return
    a, b = faces.wavelength_nm[0], faces.wavelength_nm[-1]
    if lo_nm < a or hi_nm > b:
        src = faces.file or "the reflectance table"
        raise RetolError(
            field,
            f"{src} covers {a:g}–{b:g} nm, but {what} spans {lo_nm:g}–{hi_nm:g} nm",
            "extend the table to cover it, or narrow [wavelength]",
        )


def fresnel_reflectance(n):
    """Power reflectance ((n − 1)/(n + 1))² of an uncoated face at normal incidence. [1]

    Examples
    --------
    >>> round(float(fresnel_reflectance(1.5)), 4)
    0.04
    """
    n = np.asarray(n, dtype=float)
    return ((n - 1.0) / (n + 1.0)) ** 2


def face_reflectance(faces: Faces, n, wavelength_nm=None):
    """Power reflectance of a face for a wave of index ``n`` (broadcast to n's shape). [1]

    A tabulated coating needs ``wavelength_nm`` [nm], of n's shape or of its leading axes
    (e.g. (W,) for n of shape (W, L))."""
    n = np.asarray(n, dtype=float)
    if faces.kind == "uncoated":
        return fresnel_reflectance(n)
    if faces.tabulated:
        if wavelength_nm is None:
            raise ValueError("a tabulated coating needs the wavelength")
        r = faces.at(wavelength_nm)
        r = r.reshape(r.shape + (1,) * (n.ndim - r.ndim))
        return np.broadcast_to(r, n.shape).copy()
    r = 0.0 if faces.kind == "ideal" else faces.reflectance
    return np.full(n.shape, r)


def airy_transmission(phase_rad, r_in, r_out=None):
    """Complex amplitude transmission of a lossless plate with reflecting faces. [complex]

    Parameters
    ----------
    phase_rad : array_like
        Single-pass phase φ = k₀·N·d of the wave. [rad]
    r_in, r_out : array_like
        Power reflectance of the entrance and exit faces (``r_out`` defaults to ``r_in``). [1]

    Notes
    -----
    t = √((1 − R₁)(1 − R₂))·e^{iφ}/(1 − √(R₁R₂)·e^{2iφ}) (the Airy sum of the multiply reflected
    beams, amplitudes normalised to power), which for R₁ = R₂ = R is (1 − R)e^{iφ}/(1 − R e^{2iφ}).
    Its phase beyond φ is ε = atan2(ρ sin 2φ, 1 − ρ cos 2φ) with ρ = √(R₁R₂), |ε| ≤ arcsin ρ.

    Examples
    --------
    >>> round(abs(complex(airy_transmission(np.pi / 2, 0.04))) ** 2, 6)  # anti-resonant
    0.857988
    """
    phi = np.asarray(phase_rad, dtype=float)
    R1 = np.asarray(r_in, dtype=float)
    R2 = R1 if r_out is None else np.asarray(r_out, dtype=float)
    rho = np.sqrt(R1 * R2)
    e1 = np.exp(1j * phi)
    return np.sqrt((1.0 - R1) * (1.0 - R2)) * e1 / (1.0 - rho * e1 * e1)


def airy_reflection(phase_rad, reflectance):
    """Complex amplitude reflection of a lossless symmetric plate (face reflectance R). [complex]

    Notes
    -----
    r = √R·(1 − e^{2iφ})/(1 − R·e^{2iφ}) (outer reflection √R, inner −√R by Stokes' relations,
    Born & Wolf sec. 7.6.1), so that |t|² + |r|² = 1 for the lossless plate.
    """
    phi = np.asarray(phase_rad, dtype=float)
    R = np.asarray(reflectance, dtype=float)
    e2 = np.exp(2j * phi)
    return np.sqrt(R) * (1.0 - e2) / (1.0 - R * e2)


def ripple_exact(phase_fast, phase_slow, r_fast, r_slow):
    """Exact change of retardance by the faces, ε_slow − ε_fast. [rad]

    ε = atan2(R sin 2φ, 1 − R cos 2φ) per eigenwave (the phase of 1/(1 − R e^{2iφ})).  To first
    order in R this is R_s sin 2φ_s − R_f sin 2φ_f; its size is at most arcsin R_s + arcsin R_f.
    """
    fs = np.asarray(phase_slow, dtype=float)
    ff = np.asarray(phase_fast, dtype=float)
    eps_s = np.arctan2(r_slow * np.sin(2 * fs), 1.0 - r_slow * np.cos(2 * fs))
    eps_f = np.arctan2(r_fast * np.sin(2 * ff), 1.0 - r_fast * np.cos(2 * ff))
    return eps_s - eps_f


def fringe_period_nm(wavelength_nm, index, thickness_um):
    """Spectral period λ²/(2·n·d) of a plate's transmission fringes. [nm]

    Examples
    --------
    >>> round(float(fringe_period_nm(632.8, 1.543, 17.49)), 2)
    7.42
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    return lam**2 / (2.0 * np.asarray(index) * np.asarray(thickness_um) * 1e3)


class FringeWarning(UserWarning):
    """The wavelength grid is too coarse for the fringes of a plate with reflecting faces."""


#: Grid points per fringe period needed to resolve the fringes (common practice: a sampled
#: sinusoid's extremes are caught to within 1 − cos(π/8) ≈ 8 % of its swing at 8 points).
POINTS_PER_FRINGE = 8


def finest_fringe_nm(plate, faces: Faces, air_gap: bool, wavelength_nm: float) -> float:
    """Shortest fringe period λ²/(2·n·d) of a plate's cavities at a wavelength. [nm]

    One cavity of the whole (cemented) stack, or one per layer with an air gap; n is the
    larger index of each layer.  ``inf`` for ideal faces.
    """
    from .dispersion import indices

    if faces.ideal:
        return float("inf")
    optical = [
        float(np.max(indices(la.material, wavelength_nm, extrapolate=True))) * la.thickness_um
        for la in plate.layers
    ]
    nd = max(optical) if air_gap else sum(optical)
    return float(wavelength_nm) ** 2 / (2.0 * nd * 1e3)


def check_fringe_sampling(plate, faces, air_gap, step_nm, wavelength_nm, where="faces"):
    """Warn (:class:`FringeWarning`) when the grid step exceeds 1/:data:`POINTS_PER_FRINGE`
    of the plate's fringe period; returns that period. [nm]"""
    import warnings

    period = finest_fringe_nm(plate, faces, air_gap, wavelength_nm)
    if step_nm > period / POINTS_PER_FRINGE:
        warnings.warn(
            f"{where}: the wavelength step {step_nm:g} nm undersamples the faces' fringes "
            f"(period {period:.3g} nm at {wavelength_nm:g} nm); for a narrow source use a step "
            f"of at most {period / POINTS_PER_FRINGE:.3g} nm",
            FringeWarning,
            stacklevel=3,
        )
    return period


# ----------------------------------------------------------------------------- Jones matrices


def _rot(theta_rad):
    c, s = np.cos(theta_rad), np.sin(theta_rad)
    R = np.empty(np.shape(theta_rad) + (2, 2))
    R[..., 0, 0], R[..., 0, 1], R[..., 1, 0], R[..., 1, 1] = c, s, -s, c
    return R


def _in_frame(diag_a, diag_b, theta_rad):
    """R(−θ)·diag(a, b)·R(θ): a diagonal matrix in a frame at θ, put in the lab frame."""
    a, b = np.broadcast_arrays(np.asarray(diag_a), np.asarray(diag_b))
    D = np.zeros(a.shape + (2, 2), dtype=complex)
    D[..., 0, 0] = a
    D[..., 1, 1] = b
    R = _rot(np.broadcast_to(theta_rad, a.shape))
    return np.swapaxes(R, -1, -2) @ D @ R


def cavity_jones(P, r_entry, r_exit, t_entry, t_exit):
    """Jones matrix of a cavity: one-pass Jones product ``P`` between two reflecting faces.

    Parameters
    ----------
    P : ndarray (..., 2, 2)
        Single-pass Jones matrix of the layers (lab frame, full propagation phases).
    r_entry, r_exit : ndarray (..., 2, 2)
        Inner amplitude reflection matrices of the entrance and exit faces (lab frame).
    t_entry, t_exit : ndarray (..., 2, 2)
        Amplitude transmission matrices of the faces, normalised to power.

    Notes
    -----
    E_out = T₂·P·Σₖ (ρ₁·Pᵀ·ρ₂·P)ᵏ·T₁·E_in = T₂·P·(I − ρ₁·Pᵀ·ρ₂·P)⁻¹·T₁·E_in: the light crosses
    the layers, part of it is reflected at the exit face, crosses back (a reciprocal stack of
    linear retarders has the transposed Jones matrix backward, in fixed lab axes), is reflected
    at the entrance face, and so on.  For one layer this is the Airy formula of each eigenwave.
    """
    eye = np.eye(2)
    round_trip = r_entry @ np.swapaxes(P, -1, -2) @ r_exit @ P
    return t_exit @ P @ np.linalg.solve(eye - round_trip, t_entry)


@dataclass(frozen=True)
class LayerPhases:
    """Per layer (L, ...): fast- and slow-wave single-pass phases [rad] and indices [1]."""

    phase_fast: np.ndarray
    phase_slow: np.ndarray
    n_fast: np.ndarray
    n_slow: np.ndarray


def layer_phases(
    plate,
    wavelength_nm,
    temperature_c=None,
    aoi_deg=0.0,
    incidence_azimuth_deg=0.0,
    extrapolate=False,
) -> LayerPhases:
    """Single-pass phases of each layer's fast and slow waves. [rad]

    The mean phase k₀·d·(N_o + N_e)/2 (exact oblique normal components, Veiras et al. 2010) plus
    or minus half the layer's retardance (with its temperature factor, as
    :func:`tolerance.plates.layer_retardances`), so that φ_slow − φ_fast is that retardance.
    """
    from .dispersion import indices
    from .plates import layer_retardances

    wl = np.asarray(wavelength_nm, dtype=float)
    k0 = 2.0 * np.pi / (wl * 1e-3)
    d = layer_retardances(plate, wl, temperature_c, aoi_deg, incidence_azimuth_deg, extrapolate)
    s2 = np.sin(np.radians(aoi_deg)) ** 2
    pf, ps, nf, ns = [], [], [], []
    for la, dl in zip(plate.layers, d, strict=True):
        n_o, n_e = indices(la.material, wl, extrapolate=extrapolate)
        phi = np.radians(np.asarray(incidence_azimuth_deg) - la.optic_axis_deg)
        N_o = np.sqrt(n_o**2 - s2)
        N_e = np.sqrt(n_e**2 - s2 * np.sin(phi) ** 2 - (n_e**2 / n_o**2) * s2 * np.cos(phi) ** 2)
        mean = k0 * la.thickness_um * 0.5 * (N_o + N_e)
        pf.append(mean - 0.5 * dl)
        ps.append(mean + 0.5 * dl)
        nf.append(np.minimum(n_o, n_e))
        ns.append(np.maximum(n_o, n_e))
    return LayerPhases(*(np.stack(np.broadcast_arrays(*x)) for x in (pf, ps, nf, ns)))


def plate_jones_faces(
    plate,
    wavelength_nm,
    faces: Faces = IDEAL,
    air_gap: bool = False,
    temperature_c=None,
    aoi_deg=0.0,
    incidence_azimuth_deg=0.0,
    clocking_deg=0.0,
    crossing_deg=0.0,
    extrapolate=False,
):
    """Jones matrix of a plate with reflecting faces, light meeting layer 0 first.

    Parameters
    ----------
    plate : tolerance.plates.Plate
    wavelength_nm : array_like
        Vacuum wavelength. [nm]
    faces : Faces
        The faces of the plate (of each layer when ``air_gap``).
    air_gap : bool
        Layers separated by air gaps (each its own cavity) instead of cemented (one cavity).
    crossing_deg : float
        Error added to the axis of the second and later layers. [deg]
    clocking_deg : float
        Rotation of the whole plate about the beam. [deg]

    Returns
    -------
    ndarray (..., 2, 2) complex
        The Jones matrix with the mean propagation phase e^{iΣ(φ_f+φ_s)/2} removed, so that an
        ideal-faced plate gives the product of :func:`tolerance.polarization.retarder_jones`.
    """
    if any(la.extinction_db is not None for la in plate.layers):
        # a train with a polarizer element (ideal faces only): the plain product of its layers
        import dataclasses

        from .plates import plate_jones

        layers = tuple(
            dataclasses.replace(la, axis_deg=la.axis_deg + (crossing_deg if i else 0.0))
            for i, la in enumerate(plate.layers)
        )
        return plate_jones(
            dataclasses.replace(plate, layers=layers),
            wavelength_nm,
            temperature_c,
            aoi_deg,
            incidence_azimuth_deg,
            clocking_deg,
            extrapolate,
        )
    ph = layer_phases(
        plate, wavelength_nm, temperature_c, aoi_deg, incidence_azimuth_deg, extrapolate
    )
    axes = [
        np.radians(la.axis_deg + clocking_deg + (crossing_deg if i > 0 else 0.0))
        for i, la in enumerate(plate.layers)
    ]
    common = 0.5 * (ph.phase_fast + ph.phase_slow)
    shape = common.shape[1:]

    def one_pass(i):
        return _in_frame(
            np.exp(1j * (ph.phase_fast[i] - common[i])),
            np.exp(1j * (ph.phase_slow[i] - common[i])),
            axes[i],
        )

    def face(i):
        Rf = face_reflectance(faces, ph.n_fast[i], wavelength_nm)
        Rs = face_reflectance(faces, ph.n_slow[i], wavelength_nm)
        r = _in_frame(np.sqrt(Rf), np.sqrt(Rs), axes[i])
        t = _in_frame(np.sqrt(1.0 - Rf), np.sqrt(1.0 - Rs), axes[i])
        return r, t

    def cavity(first, last):
        # the round trip needs the full phases: carry the common phase as a scalar factor
        P = np.broadcast_to(np.eye(2, dtype=complex), shape + (2, 2))
        for i in range(first, last + 1):
            P = one_pass(i) @ P
        if faces.ideal:
            return P
        g = np.exp(1j * np.sum(common[first : last + 1], axis=0))[..., None, None]
        r1, t1 = face(first)
        r2, t2 = face(last)
        return cavity_jones(P * g, r1, r2, t1, t2) / g

    n = len(plate.layers)
    groups = [(i, i) for i in range(n)] if air_gap else [(0, n - 1)]
    J = None
    for a, b in groups:
        Jg = cavity(a, b)
        J = Jg if J is None else Jg @ J
    return J
