"""An input state that varies over the spectrum: a CSV of normalised Stokes vectors.

Rows of ``wavelength_nm, s1, s2, s3`` (normalised by S0, so the degree of polarization is
P = (s1² + s2² + s3²)^½ <= 1) are interpolated linearly onto the analysis grid and the source's
lines.  Linear interpolation of normalised Stokes vectors is the incoherent mix of the two
neighbouring states, so P stays <= 1 between rows.  The kernel takes each wavelength's state as
the Jones vector of its polarized part and its degree of polarization (the convention of
:meth:`tolerance.study.InputState.jones`: R(ψ)·(cos χ, −i sin χ), S3 = sin 2χ > 0
right-handed).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from .errors import RetolError

#: |s| may exceed 1 by this much (rounding in a measured, normalised file).
DOP_SLACK = 1e-6


def read_stokes_csv(path: Path, field: str) -> tuple[np.ndarray, np.ndarray]:
    """Read rows of wavelength [nm] and normalised Stokes s1, s2, s3 [1].

    An optional header row and ``#`` comments are allowed; commas, semicolons, tabs or spaces
    separate the columns.  Rows are sorted by wavelength.

    Returns
    -------
    wavelength_nm : ndarray (N,)
    stokes : ndarray (N, 3)

    Raises
    ------
    RetolError
        Naming ``field``: a missing or unreadable file, a row that is not four finite numbers, a
        wavelength that is not positive or repeats, a degree of polarization above 1, fewer than
        2 rows.
    """
    from .limits import read_csv_rows

    name = path.name
    rows = []
    fix = "give rows of wavelength_nm,s1,s2,s3"
    for lineno, values in read_csv_rows(path, field, "Stokes CSV file", 4, fix):
        if not all(math.isfinite(v) for v in values):
            raise RetolError(
                field, f"{name} line {lineno}: value is not finite", "remove or fix NaN/inf rows"
            )
        if values[0] <= 0:
            raise RetolError(
                field, f"{name} line {lineno}: wavelength must be positive", "wavelengths in nm"
            )
        p = math.sqrt(sum(v * v for v in values[1:]))
        if p > 1.0 + DOP_SLACK:
            raise RetolError(
                field,
                f"{name} line {lineno}: degree of polarization {p:.6g} > 1",
                "give Stokes vectors normalised by S0 (s1² + s2² + s3² <= 1)",
            )
        rows.append(values)
    if len(rows) < 2:
        raise RetolError(field, f"{name} has {len(rows)} data row(s)", "give at least 2 rows")
    return check_table(np.array(rows), field, name)


def check_table(rows: np.ndarray, field: str, name: str = "the table"):
    """Sort (N, 4) rows by wavelength; refuse repeats. Returns (wavelength_nm, stokes)."""
    order = np.argsort(rows[:, 0], kind="stable")
    rows = rows[order]
    x = rows[:, 0]
    dup = np.nonzero(np.diff(x) == 0)[0]
    if dup.size:
        raise RetolError(
            field, f"{name} repeats the wavelength {x[dup[0]]:g} nm", "keep one row per wavelength"
        )
    s = rows[:, 1:]
    p = np.sqrt(np.sum(s * s, axis=1))
    return x, s / np.maximum(p, 1.0)[:, None]  # clip the rounding slack to P = 1


def stokes_at(
    table, wavelength_nm, field: str = "[input].stokes_csv", clip: bool = False
) -> np.ndarray:
    """The table's normalised Stokes vectors at ``wavelength_nm`` (linear interpolation). [(..., 3)]

    Raises RetolError (naming ``field``) for a wavelength outside the table's range, unless
    ``clip`` (the end rows' states then hold beyond them: a drift draw past its checked span).
    """
    x, s = np.asarray(table[0], dtype=float), np.asarray(table[1], dtype=float)
    wl = np.asarray(wavelength_nm, dtype=float)
    if not clip and wl.size and (np.min(wl) < x[0] or np.max(wl) > x[-1]):
        raise RetolError(
            field,
            f"covers {x[0]:g}–{x[-1]:g} nm but the study needs {np.min(wl):g}–{np.max(wl):g} nm",
            "give rows that span the analysis grid and the source's lines (with their drift)",
        )
    return np.stack([np.interp(wl, x, s[:, k]) for k in range(3)], axis=-1)


def jones_rows(stokes) -> np.ndarray:
    """(..., 5) kernel input rows (Re Ex, Re Ey, Im Ex, Im Ey, P) of normalised Stokes vectors.

    ψ = ½·atan2(s2, s1), χ = ½·asin(s3/P), P = |s|; the polarized part R(ψ)·(cos χ, −i sin χ)
    (:meth:`tolerance.study.InputState.jones`).  P = 0 gives (1, 0, 0, 0, 0).
    """
    s = np.asarray(stokes, dtype=float)
    p = np.sqrt(np.sum(s * s, axis=-1))
    safe = np.where(p > 0, p, 1.0)
    psi = 0.5 * np.arctan2(s[..., 1], s[..., 0])
    chi = 0.5 * np.arcsin(np.clip(s[..., 2] / safe, -1.0, 1.0))
    ca, sa, cc, sc = np.cos(psi), np.sin(psi), np.cos(chi), np.sin(chi)
    return np.ascontiguousarray(np.stack([ca * cc, sa * cc, sa * sc, -ca * sc, p], axis=-1))
