"""The Monte Carlo kernel for plates with reflecting faces (a separate branch of the kernel).

The ideal-plate kernel (:mod:`tolerance.kernel`) is left untouched, so that ``faces = "ideal"``
keeps its results bit for bit; a candidate with faces runs through :func:`chunk_pass_faces`,
which reuses that kernel's inline helpers (statistics, metrics, sine and cosine) and adds the
faces' Airy factors.

Each eigenwave gets the factor A = τ/(1 − ρ·e^{2iφ}) (the Airy sum without its single-pass
phase, which the ideal layer operation already carries up to a common phase): φ is the wave's
single-pass phase, ρ = √(R₁R₂) and τ = √((1 − R₁)(1 − R₂)) from the two faces' power
reflectances (:mod:`tolerance.etalon`).  With an air gap every layer is its own cavity and its
factors act in its own axes right after it (exact).  Cemented layers form one cavity whose
factors act after the last layer in layer 0's axes: exact for parallel or crossed layers, and
an approximation, of second order in (axis error × reflectance), for layers whose axes are
drawn off parallel by crossing or clocking tolerances, or for a general stack.

The retardance statistic includes the faces' phase change ε = atan2(ρ sin 2φ, 1 − ρ cos 2φ)
of each eigenwave; the Stokes vectors are normalised at each wavelength (the output state), and
the source average weights the states by the source's power, not by the plate's slightly
rippled transmittance.  Inputs are plain numpy arrays only.

Arithmetic: the two waves' round-trip sines and cosines come from those of 2φ and of the
relative retardance by angle addition; both Airy factors are scaled by |N_a|²|N_b|² (no
division; the normalised Stokes vector does not see a common factor); the arc tangent of ε is
taken only when histograms are filled.  A single cemented layer runs one fused loop per
wavelength (:func:`_single_layer_faces`); other plates the per-row general path.

The ``reflectance`` tolerance reaches the kernel as :class:`FaceDraws`: per sample, an offset
of each face's power reflectance (independent streams per face, drawn in
:func:`tolerance.montecarlo.sample_inputs`), added to the wavelength-dependent reflectances in
``FaceOptics`` and clipped to [0, :data:`R_MAX`].  A sample whose offsets are all zero reads
the precomputed ρ and τ, so a zero-width tolerance changes no bit.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numba as nb
import numpy as np

from .kernel import (
    _AR,
    _AZ,
    _H,
    _M,
    _OPTS,
    _RET,
    _RW,
    _XI,
    _XR,
    _YI,
    _YR,
    N_VAR,
    N_WORK,
    SINCOS_LIMIT,
    _atan2,
    _band_summary,
    _cut_indices,
    _fold_sample,
    _is_max,
    _keep_sample,
    _metric_row,
    _observable_rows,
    _scatter_block,
    _sincos,
    _sincos_any,
)


class FaceOptics(NamedTuple):
    """Faces on the wavelength grid.

    ``nbar`` (W, L): mean index (n_o + n_e)/2 of each layer at normal incidence; ``rho_f``,
    ``tau_f``, ``rho_s``, ``tau_s`` (W, L): the fast and slow waves' √(R₁R₂) and
    √((1 − R₁)(1 − R₂)) of each layer's cavity (air gap), or, in column 0, those of the waves
    along and across layer 0's fast axis for the one cavity of cemented layers; ``sgn`` (L,):
    +1 where a layer's fast axis is along layer 0's, −1 where crossed; ``air_gap``.
    """

    nbar: np.ndarray
    rho_f: np.ndarray
    tau_f: np.ndarray
    rho_s: np.ndarray
    tau_s: np.ndarray
    sgn: np.ndarray
    air_gap: bool
    #: (W, L) power reflectances [1] of each cavity's entrance and exit faces as the two waves
    #: see them (the faces ``rho_f`` … are made of), for per-sample reflectance offsets
    rin_f: np.ndarray
    rout_f: np.ndarray
    rin_s: np.ndarray
    rout_s: np.ndarray


class FaceDraws(NamedTuple):
    """Per-sample offsets of the faces' power reflectances (the ``reflectance`` tolerance).

    ``dr`` (S, F): the absolute offset [1] of each face, F = 2 per cavity (entrance 2c, exit
    2c + 1; one cavity for cemented layers, one per layer with an air gap).  A sample whose
    offsets are all zero uses the wavelength-only ``FaceOptics`` unchanged; otherwise each
    face's reflectance is R + ΔR clipped to [0, :data:`R_MAX`].  ``dr`` of shape (1, 1) with
    ``on`` False: no offsets.
    """

    dr: np.ndarray
    on: bool


#: Largest face reflectance a drawn offset may reach (the clip keeps 1 − R > 0).
R_MAX = 1.0 - 1e-6


def no_face_draws() -> FaceDraws:
    """:class:`FaceDraws` for runs without a reflectance tolerance."""
    return FaceDraws(np.zeros((1, 1)), False)


@nb.njit(inline="always", **_OPTS)
def _airy(phi2, rho, tau):
    """Airy factor τ/(1 − ρe^{iφ₂}) (real, imaginary) and its phase ε, for φ₂ = 2φ."""
    s, c = _sincos_any(phi2)
    den = 1.0 - 2.0 * rho * c + rho * rho
    g = tau / den
    re = g * (1.0 - rho * c)
    im = g * rho * s
    return re, im, _atan2(rho * s, 1.0 - rho * c)


@nb.njit(inline="always", **_OPTS)
def _apply_diag(xr, xi, yr, yi, C, S, ar, ai, br, bi):
    """(x, y) ← R(−θ)·diag(a, b)·R(θ)·(x, y) with C = cos 2θ, S = sin 2θ (p·I + q·M form)."""
    pr = 0.5 * (ar + br)
    pi_ = 0.5 * (ai + bi)
    qr = 0.5 * (ar - br)
    qi = 0.5 * (ai - bi)
    ur = C * xr + S * yr
    ui = C * xi + S * yi
    vr = S * xr - C * yr
    vi = S * xi - C * yi
    nxr = pr * xr - pi_ * xi + qr * ur - qi * ui
    nxi = pr * xi + pi_ * xr + qr * ui + qi * ur
    nyr = pr * yr - pi_ * yi + qr * vr - qi * vi
    nyi = pr * yi + pi_ * yr + qr * vi + qi * vr
    return nxr, nxi, nyr, nyi


@nb.njit(inline="always", **_OPTS)
def _face_layer(k0, th, tf, sin2i, no2, ne2, rat, dn, sp, cp, nbar):
    """Retardance [rad] (as the ideal kernel) and mean single-pass phase of one layer."""
    if sin2i == 0.0:
        delta = k0 * th * abs(dn) * tf
        mean = k0 * th * nbar
    else:
        No = math.sqrt(no2 - sin2i)
        Ne = math.sqrt(ne2 - sin2i * sp - rat * sin2i * cp)
        delta = k0 * th * abs(Ne - No) * tf
        mean = k0 * th * 0.5 * (No + Ne)
    return delta, mean


@nb.njit(**_OPTS)
def _face_cut(k0, th, tf, sin2i, no2, ne2, cz, p):
    """:func:`_face_layer` for an optic axis tipped out of the face (cz = sin κ ≠ 0; the exact
    normal components of :func:`tolerance.kernel._cut_retardance`)."""
    Ne, No = _cut_indices(no2, ne2, sin2i, cz, p)
    return k0 * th * abs(Ne - No) * tf, k0 * th * 0.5 * (No + Ne)


@nb.njit(**_OPTS)
def _face_cut_row(k0, th, tf, sin2i, no2l, ne2l, cz, p, pj, air_gap, work, big):
    """One layer with a cut angle over the wavelengths, as :func:`_spectrum_faces` does the
    others: retardance, half-retardance and mean phase rows; returns the largest phase seen so
    far."""
    ret = work[_RET]
    hh = work[_H]
    phi = work[_RW]
    for w in range(k0.shape[0]):
        delta, mean = _face_cut(k0[w], th, tf, sin2i, no2l[w], ne2l[w], cz, p)
        ret[w] += pj * delta
        hh[w] = 0.5 * delta
        phi[w] = mean if air_gap else phi[w] + mean
        big = max(big, abs(mean) + abs(delta), 2.0 * abs(phi[w]))
    return big


@nb.njit(inline="always", **_OPTS)
def _layer_op(xr, xi, yr, yi, C, S, h):
    """The ideal retarder of half-retardance h, fast axis (C, S) (as :mod:`tolerance.kernel`)."""
    s, c = _sincos_any(h)
    ur = C * xr + S * yr
    ui = C * xi + S * yi
    vr = S * xr - C * yr
    vi = S * xi - C * yi
    return c * xr + s * ui, c * xi - s * ur, c * yr + s * vi, c * yi - s * vr


@nb.njit(**_OPTS)
def _offset_one(rin_a, rout_a, rin_b, rout_b, d_in, d_out):
    """ρ and τ of both waves of one cavity at one wavelength, faces offset (as
    :func:`_offset_faces`)."""
    a1 = min(max(rin_a + d_in, 0.0), R_MAX)
    a2 = min(max(rout_a + d_out, 0.0), R_MAX)
    b1 = min(max(rin_b + d_in, 0.0), R_MAX)
    b2 = min(max(rout_b + d_out, 0.0), R_MAX)
    return (
        math.sqrt(a1 * a2),
        math.sqrt((1.0 - a1) * (1.0 - a2)),
        math.sqrt(b1 * b2),
        math.sqrt((1.0 - b1) * (1.0 - b2)),
    )


@nb.njit(**_OPTS)
def _one_wavelength(
    k0, no2, ne2, rat, dn, nbar, rf, tf_, rs, ts, rinf, routf, rins, routs, dr, vary, sgn,
    air_gap, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj, L, cut,
):  # fmt: skip
    """Normalised Stokes and retardance [rad] of one sample at one wavelength, with faces.

    ``rinf`` … ``routs`` (L,) the faces' reflectances and ``dr`` (F,) the sample's offsets,
    used when ``vary``.  The input is a linear, fully polarized state (ca, sa):
    :class:`tolerance.montecarlo.Engine` refuses other inputs for plates with faces."""
    xr = ca
    xi = 0.0
    yr = sa
    yi = 0.0
    ret = 0.0
    phi = 0.0
    drel = 0.0
    for l in range(L):
        if cut[l, 0] != 0.0:
            delta, mean = _face_cut(
                k0, thick[l], tfac[l], sin2i, no2[l], ne2[l], cut[l, 0], cut[l, 1]
            )
        else:
            delta, mean = _face_layer(
                k0, thick[l], tfac[l], sin2i, no2[l], ne2[l], rat[l], dn[l], sphi2[l], cphi2[l],
                nbar[l],
            )  # fmt: skip
        ret += proj[l] * delta
        C = c2[l]
        S = s2[l]
        xr, xi, yr, yi = _layer_op(xr, xi, yr, yi, C, S, 0.5 * delta)
        if air_gap:
            if vary:
                ra, ta, rb, tb = _offset_one(
                    rinf[l], routf[l], rins[l], routs[l], dr[2 * l], dr[2 * l + 1]
                )
            else:
                ra, ta, rb, tb = rf[l], tf_[l], rs[l], ts[l]
            ar, ai, ef = _airy(2.0 * (mean - 0.5 * delta), ra, ta)
            br, bi, es = _airy(2.0 * (mean + 0.5 * delta), rb, tb)
            xr, xi, yr, yi = _apply_diag(xr, xi, yr, yi, C, S, ar, ai, br, bi)
            ret += proj[l] * (es - ef)
        else:
            phi += mean
            drel += sgn[l] * delta
    if not air_gap:
        if vary:
            ra, ta, rb, tb = _offset_one(rinf[0], routf[0], rins[0], routs[0], dr[0], dr[1])
        else:
            ra, ta, rb, tb = rf[0], tf_[0], rs[0], ts[0]
        ar, ai, ea = _airy(2.0 * (phi - 0.5 * drel), ra, ta)
        br, bi, eb = _airy(2.0 * (phi + 0.5 * drel), rb, tb)
        xr, xi, yr, yi = _apply_diag(xr, xi, yr, yi, c2[0], s2[0], ar, ai, br, bi)
        ret += proj[0] * (eb - ea)
    inten = xr * xr + xi * xi + yr * yr + yi * yi
    inv = 1.0 / inten
    st1 = (xr * xr + xi * xi - yr * yr - yi * yi) * inv
    st2 = 2.0 * (xr * yr + xi * yi) * inv
    st3 = 2.0 * (xi * yr - xr * yi) * inv
    return st1, st2, st3, ret


@nb.njit(**_OPTS)
def _spectrum_scalar(
    optics, faces, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj, work, fwork, dr, vary,
    cut,
):  # fmt: skip
    """:func:`_spectrum_faces` one wavelength at a time (huge phases: the C library's sine)."""
    k0, no2, ne2, rat, dn = optics
    nbar, rho_f, tau_f, rho_s, tau_s, sgn, air_gap, rinf, routf, rins, routs = faces
    L = thick.shape[0]
    for w in range(k0.shape[0]):
        st1, st2, st3, ret = _one_wavelength(
            k0[w], no2[w], ne2[w], rat[w], dn[w], nbar[w], rho_f[w], tau_f[w], rho_s[w],
            tau_s[w], rinf[w], routf[w], rins[w], routs[w], dr, vary, sgn, air_gap, thick,
            tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj, L, cut,
        )  # fmt: skip
        work[_XR, w] = st1
        work[_XI, w] = st2
        work[_YR, w] = st3
        work[_RET, w] = ret


#: Rows of the faces' own per-thread work array (W columns each): cos and sin of the cemented
#: layers' accumulated relative retardance D, and one cavity's ρ and τ of both waves when a
#: sample's reflectances are offset.
_CD, _SD, _RA, _TA, _RB, _TB = 0, 1, 2, 3, 4, 5
N_FWORK = 6


@nb.njit(inline="always", **_OPTS)
def _airy_scaled(c2p, s2p, cd, sd, ra, ta, rb, tb):
    """Airy factors of the waves at round-trip phases 2φ ∓ D, both times |N_a|²|N_b|².

    From cos 2φ, sin 2φ and cos D, sin D by angle addition (no sine of its own), with
    N = 1 − ρ·e^{−iψ}: A_a·|N_a|²|N_b|² = τ_a·|N_b|²·N_a, likewise b.  The common real factor
    leaves the normalised Stokes vector unchanged and spares the two divisions.  Also returns
    N_a and N_b, whose arguments' difference is the faces' retardance change ε_b − ε_a.
    """
    ca_ = c2p * cd + s2p * sd
    sa_ = s2p * cd - c2p * sd
    cb_ = c2p * cd - s2p * sd
    sb_ = s2p * cd + c2p * sd
    nra = 1.0 - ra * ca_
    nia = ra * sa_
    nrb = 1.0 - rb * cb_
    nib = rb * sb_
    ga = ta * (nrb * nrb + nib * nib)
    gb = tb * (nra * nra + nia * nia)
    return ga * nra, ga * nia, gb * nrb, gb * nib, nra, nia, nrb, nib


@nb.njit(**_OPTS)
def _offset_faces(rin_a, rout_a, rin_b, rout_b, d_in, d_out, fwork):
    """One cavity's ρ = √(R₁R₂) and τ = √((1 − R₁)(1 − R₂)) of both waves into ``fwork`` rows
    _RA.._TB, each face's reflectance R + ΔR clipped to [0, :data:`R_MAX`]."""
    ra = fwork[_RA]
    ta = fwork[_TA]
    rb = fwork[_RB]
    tb = fwork[_TB]
    for w in range(ra.shape[0]):
        a1 = min(max(rin_a[w] + d_in, 0.0), R_MAX)
        a2 = min(max(rout_a[w] + d_out, 0.0), R_MAX)
        b1 = min(max(rin_b[w] + d_in, 0.0), R_MAX)
        b2 = min(max(rout_b[w] + d_out, 0.0), R_MAX)
        ra[w] = math.sqrt(a1 * a2)
        ta[w] = math.sqrt((1.0 - a1) * (1.0 - a2))
        rb[w] = math.sqrt(b1 * b2)
        tb[w] = math.sqrt((1.0 - b1) * (1.0 - b2))


@nb.njit(**_OPTS)
def _cavity_faces(
    xr, xi, yr, yi, ret, phi, fwork, C, S, pj, ra, ta, rb, tb, want_ret
):  # fmt: skip
    """Apply one cavity's Airy factors (in the axes C = cos 2θ, S = sin 2θ) at every
    wavelength; ``phi`` its single-pass mean phase, ``fwork`` rows _CD, _SD the cos and sin of
    its relative retardance; the retardance change (times ``pj``) added to ``ret`` when
    ``want_ret`` (two copies of the loop, so that neither carries a branch)."""
    cdr = fwork[_CD]
    sdr = fwork[_SD]
    if want_ret:
        for w in range(xr.shape[0]):
            s2p, c2p = _sincos(2.0 * phi[w])
            ar, ai, br, bi, nra, nia, nrb, nib = _airy_scaled(
                c2p, s2p, cdr[w], sdr[w], ra[w], ta[w], rb[w], tb[w]
            )
            xr[w], xi[w], yr[w], yi[w] = _apply_diag(
                xr[w], xi[w], yr[w], yi[w], C, S, ar, ai, br, bi
            )
            ret[w] += pj * _atan2(nib * nra - nrb * nia, nrb * nra + nib * nia)
    else:
        for w in range(xr.shape[0]):
            s2p, c2p = _sincos(2.0 * phi[w])
            ar, ai, br, bi, _, _, _, _ = _airy_scaled(
                c2p, s2p, cdr[w], sdr[w], ra[w], ta[w], rb[w], tb[w]
            )
            xr[w], xi[w], yr[w], yi[w] = _apply_diag(
                xr[w], xi[w], yr[w], yi[w], C, S, ar, ai, br, bi
            )


@nb.njit(inline="always", **_OPTS)
def _fused_step(delta, mean, C, S, ca, sa, ra, ta, rb, tb):
    """One wavelength of a single-layer cemented plate, in registers: normalised Stokes of the
    linear input (ca, sa) and N_a, N_b (see :func:`_airy_scaled`).

    The layer and its cavity are diagonal in the same axes, so they act as one: the fast wave
    gets e^{−iδ/2}·A_a and the slow one e^{iδ/2}·A_b, applied as p·I + q·M (M the reflection
    in the fast axis, C = cos 2θ, S = sin 2θ) with p, q the half sum and half difference;
    cos δ and sin δ come from the half angle's by the double-angle formulas.
    """
    s, c = _sincos(0.5 * delta)
    s2p, c2p = _sincos(2.0 * mean)
    ar, ai, br, bi, nra, nia, nrb, nib = _airy_scaled(
        c2p, s2p, c * c - s * s, 2.0 * s * c, ra, ta, rb, tb
    )
    er = c * ar + s * ai
    ei = c * ai - s * ar
    fr = c * br - s * bi
    fi = c * bi + s * br
    pr = 0.5 * (er + fr)
    pi_ = 0.5 * (ei + fi)
    qr = 0.5 * (er - fr)
    qi = 0.5 * (ei - fi)
    ur = C * ca + S * sa
    vr = S * ca - C * sa
    xr = pr * ca + qr * ur
    xi = pi_ * ca + qi * ur
    yr = pr * sa + qr * vr
    yi = pi_ * sa + qi * vr
    inv = 1.0 / (xr * xr + xi * xi + yr * yr + yi * yi)
    st1 = (xr * xr + xi * xi - yr * yr - yi * yi) * inv
    st2 = 2.0 * (xr * yr + xi * yi) * inv
    st3 = 2.0 * (xi * yr - xr * yi) * inv
    return st1, st2, st3, nra, nia, nrb, nib


@nb.njit(**_OPTS)
def _single_layer_faces(
    k0, no2l, ne2l, ratl, dnl, nbl, th, tf, pj, sin2i, sp, cp, C, S, ca, sa, ra, ta, rb, tb,
    work, want_ret,
):  # fmt: skip
    """:func:`_spectrum_faces` for one cemented layer (the common plate): the layer's
    retardance and mean phase into rows _H and _RW, then one fused loop with no other
    intermediate rows, layer and cavity applied as one diagonal (:func:`_fused_step`; the
    same physics as the general path, to rounding).  Returns False, having written no
    Stokes, when a phase is too large for :func:`_sincos`."""
    W = k0.shape[0]
    dl = work[_H]
    mn = work[_RW]
    big = 0.0
    if sin2i == 0.0:
        for w in range(W):
            kt = k0[w] * th
            delta = kt * abs(dnl[w]) * tf
            mean = kt * nbl[w]
            dl[w] = delta
            mn[w] = mean
            big = max(big, abs(mean) + abs(delta), 2.0 * abs(mean))
    else:
        for w in range(W):
            delta, mean = _face_layer(
                k0[w], th, tf, sin2i, no2l[w], ne2l[w], ratl[w], dnl[w], sp, cp, nbl[w]
            )
            dl[w] = delta
            mn[w] = mean
            big = max(big, abs(mean) + abs(delta), 2.0 * abs(mean))
    if big >= 0.25 * SINCOS_LIMIT:
        return False
    x1 = work[_XR]
    x2 = work[_XI]
    x3 = work[_YR]
    ret = work[_RET]
    if want_ret:
        for w in range(W):
            delta = dl[w]
            x1[w], x2[w], x3[w], nra, nia, nrb, nib = _fused_step(
                delta, mn[w], C, S, ca, sa, ra[w], ta[w], rb[w], tb[w]
            )
            ret[w] = pj * delta + pj * _atan2(nib * nra - nrb * nia, nrb * nra + nib * nia)
    else:
        for w in range(W):
            x1[w], x2[w], x3[w], _, _, _, _ = _fused_step(
                dl[w], mn[w], C, S, ca, sa, ra[w], ta[w], rb[w], tb[w]
            )
    return True


@nb.njit(**_OPTS)
def _spectrum_faces(
    optics, faces, tr, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj, work, fwork,
    dr, want_ret, cut,
):  # fmt: skip
    """One sample's normalised Stokes into work rows _XR, _XI, _YR and retardance into _RET.

    ``tr`` holds the (L, W) transposes of the optics and faces arrays (no2, ne2, rat, dn, nbar,
    rho_f, tau_f, rho_s, tau_s, rin_f, rout_f, rin_s, rout_s), so that every loop over
    wavelength runs on contiguous rows and vectorizes; rows _RW (filled only later) hold the
    accumulated mean phase, row _H the half-retardance; ``fwork`` (:data:`N_FWORK`, W) the
    relative retardance's cos and sin and offset faces.  ``dr`` (F,): this sample's face
    reflectance offsets (:class:`FaceDraws`).  The retardance change of the faces (an arc
    tangent per wavelength) is added only when ``want_ret`` (the histograms, the nominal
    values); the Stokes vectors never need it.  ``cut`` (L, 2): each layer's optic axis tipped
    out of the face (:func:`tolerance.kernel._cut_retardance`); a layer with a cut takes the
    general path.
    """
    k0 = optics[0]
    sgn = faces[5]
    air_gap = faces[6]
    no2T, ne2T, ratT, dnT, nbT, rfT, tfT, rsT, tsT, rinfT, routfT, rinsT, routsT = tr
    W = k0.shape[0]
    L = thick.shape[0]
    vary = False
    for f in range(dr.shape[0]):
        vary = vary or dr[f] != 0.0
    if L == 1 and not air_gap and cut[0, 0] == 0.0:
        if vary:
            _offset_faces(rinfT[0], routfT[0], rinsT[0], routsT[0], dr[0], dr[1], fwork)
            ra, ta, rb, tb = fwork[_RA], fwork[_TA], fwork[_RB], fwork[_TB]
        else:
            ra, ta, rb, tb = rfT[0], tfT[0], rsT[0], tsT[0]
        if _single_layer_faces(
            k0, no2T[0], ne2T[0], ratT[0], dnT[0], nbT[0], thick[0], tfac[0], proj[0], sin2i,
            sphi2[0], cphi2[0], c2[0], s2[0], ca, sa, ra, ta, rb, tb, work, want_ret,
        ):  # fmt: skip
            return
    xr = work[_XR]
    xi = work[_XI]
    yr = work[_YR]
    yi = work[_YI]
    hh = work[_H]
    ret = work[_RET]
    phi = work[_RW]
    cdr = fwork[_CD]
    sdr = fwork[_SD]
    big = 0.0
    for w in range(W):
        xr[w] = ca
        xi[w] = 0.0
        yr[w] = sa
        yi[w] = 0.0
        ret[w] = 0.0
        phi[w] = 0.0
        cdr[w] = 1.0
        sdr[w] = 0.0
    for l in range(L):
        th = thick[l]
        tf = tfac[l]
        pj = proj[l]
        sg = sgn[l]
        C = c2[l]
        S = s2[l]
        no2l = no2T[l]
        ne2l = ne2T[l]
        ratl = ratT[l]
        dnl = dnT[l]
        nbl = nbT[l]
        sp = sphi2[l]
        cp = cphi2[l]
        if cut[l, 0] != 0.0:
            big = _face_cut_row(
                k0, th, tf, sin2i, no2l, ne2l, cut[l, 0], cut[l, 1], pj, air_gap, work, big
            )
        elif sin2i == 0.0:
            # mean = k0·d·n̄ and delta as the ideal kernel (hoisted branches: loops vectorize)
            for w in range(W):
                kt = k0[w] * th
                delta = kt * abs(dnl[w]) * tf
                mean = kt * nbl[w]
                ret[w] += pj * delta
                hh[w] = 0.5 * delta
                phi[w] = mean if air_gap else phi[w] + mean
                big = max(big, abs(mean) + abs(delta), 2.0 * abs(phi[w]))
        else:
            for w in range(W):
                delta, mean = _face_layer(
                    k0[w], th, tf, sin2i, no2l[w], ne2l[w], ratl[w], dnl[w], sp, cp, nbl[w]
                )
                ret[w] += pj * delta
                hh[w] = 0.5 * delta
                phi[w] = mean if air_gap else phi[w] + mean
                big = max(big, abs(mean) + abs(delta), 2.0 * abs(phi[w]))
        if big >= 0.25 * SINCOS_LIMIT:
            _spectrum_scalar(
                optics, faces, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj, work,
                fwork, dr, vary, cut,
            )  # fmt: skip
            return
        for w in range(W):
            s, c = _sincos(hh[w])
            a = xr[w]
            b = xi[w]
            e = yr[w]
            f = yi[w]
            ur = C * a + S * e
            ui = C * b + S * f
            vr = S * a - C * e
            vi = S * b - C * f
            xr[w] = c * a + s * ui
            xi[w] = c * b - s * ur
            yr[w] = c * e + s * vi
            yi[w] = c * f - s * vr
            # cos and sin of this layer's retardance δ = 2h by the double angle, then of the
            # accumulated D + sgn·δ by angle addition (air gap: of δ alone)
            cl = c * c - s * s
            sl = 2.0 * s * c
            if air_gap:
                cdr[w] = cl
                sdr[w] = sl
            else:
                cd = cdr[w]
                sd = sdr[w]
                cdr[w] = cd * cl - sg * (sd * sl)
                sdr[w] = sd * cl + sg * (cd * sl)
        if air_gap:
            if vary:
                _offset_faces(
                    rinfT[l], routfT[l], rinsT[l], routsT[l], dr[2 * l], dr[2 * l + 1], fwork
                )
                _cavity_faces(
                    xr, xi, yr, yi, ret, phi, fwork, C, S, pj, fwork[_RA], fwork[_TA],
                    fwork[_RB], fwork[_TB], want_ret,
                )  # fmt: skip
            else:
                _cavity_faces(
                    xr, xi, yr, yi, ret, phi, fwork, C, S, pj, rfT[l], tfT[l], rsT[l], tsT[l],
                    want_ret,
                )  # fmt: skip
    if not air_gap:
        if vary:
            _offset_faces(rinfT[0], routfT[0], rinsT[0], routsT[0], dr[0], dr[1], fwork)
            _cavity_faces(
                xr, xi, yr, yi, ret, phi, fwork, c2[0], s2[0], proj[0], fwork[_RA],
                fwork[_TA], fwork[_RB], fwork[_TB], want_ret,
            )  # fmt: skip
        else:
            _cavity_faces(
                xr, xi, yr, yi, ret, phi, fwork, c2[0], s2[0], proj[0], rfT[0], tfT[0],
                rsT[0], tsT[0], want_ret,
            )  # fmt: skip
    for w in range(W):
        a = xr[w]
        b = xi[w]
        e = yr[w]
        f = yi[w]
        inv = 1.0 / (a * a + b * b + e * e + f * f)
        xr[w] = (a * a + b * b - e * e - f * f) * inv
        xi[w] = 2.0 * (a * e + b * f) * inv
        yr[w] = 2.0 * (b * e - a * f) * inv


@nb.njit(inline="always", **_OPTS)
def _transposes(optics, faces):
    """The (L, W) contiguous transposes :func:`_spectrum_faces` reads."""
    c = np.ascontiguousarray
    return (
        c(optics[1].T), c(optics[2].T), c(optics[3].T), c(optics[4].T), c(faces[0].T),
        c(faces[1].T), c(faces[2].T), c(faces[3].T), c(faces[4].T), c(faces[7].T),
        c(faces[8].T), c(faces[9].T), c(faces[10].T),
    )  # fmt: skip


@nb.njit(**_OPTS)
def _lines_faces(
    lines, line_faces, s, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj, dr, vary, cut
):  # fmt: skip
    """Power-weighted Stokes sums of one sample over the discrete source lines, with faces."""
    lk0, lno2, lne2, lrat, ldn, line_weight = lines
    nbar, rho_f, tau_f, rho_s, tau_s, sgn, air_gap, rinf, routf, rins, routs = line_faces
    ss = s if lk0.shape[0] > 1 else 0
    L = thick.shape[0]
    a1 = 0.0
    a2 = 0.0
    a3 = 0.0
    for k in range(line_weight.shape[0]):
        l1, l2, l3, _ = _one_wavelength(
            lk0[ss, k], lno2[ss, k], lne2[ss, k], lrat[ss, k], ldn[ss, k], nbar[k], rho_f[k],
            tau_f[k], rho_s[k], tau_s[k], rinf[k], routf[k], rins[k], routs[k], dr, vary, sgn,
            air_gap, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj, L, cut,
        )  # fmt: skip
        lw = line_weight[k]
        a1 += lw * l1
        a2 += lw * l2
        a3 += lw * l3
    return a1, a2, a3


@nb.njit(**_OPTS)
def values_one_faces(optics, faces, sample, proj, goal, metric_kind, out, stokes):
    """Retardance, axial ratio, azimuth and metric (N_VAR, W) and normalised Stokes (W, 3) of
    one sample (faces not offset), with the arithmetic of :func:`chunk_pass_faces`."""
    thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, _cai, _sai, _dop, cut = sample
    W = optics[0].shape[0]
    work = np.empty((N_WORK, W))
    fwork = np.empty((N_FWORK, W))
    tr = _transposes(optics, faces)
    # True, but not a literal: the chunk pass's specialization serves (one compile, not two)
    want_ret = W >= 0
    _spectrum_faces(
        optics, faces, tr, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj, work, fwork,
        np.zeros(1), want_ret, cut,
    )  # fmt: skip
    _metric_row(work, goal[0], goal[1], goal[2], metric_kind)
    for w in range(W):
        stokes[w, 0] = work[_XR, w]
        stokes[w, 1] = work[_XI, w]
        stokes[w, 2] = work[_YR, w]
    _observable_rows(work)
    for w in range(W):
        out[0, w] = work[_RW, w]
        out[1, w] = work[_AR, w]
        out[2, w] = work[_AZ, w]
        out[3, w] = work[_M, w]


@nb.njit(parallel=True, **_OPTS)
def chunk_pass_faces(
    optics, faces, grid_weight, lines, line_faces, samples, face_draws, target, stats, outs
):  # fmt: skip
    """:func:`tolerance.kernel.chunk_pass` for a plate with faces (``faces``, ``line_faces``:
    :class:`FaceOptics` on the grid and at the source lines; ``face_draws``:
    :class:`FaceDraws`); the same outputs and threading.  The faces' retardance change is
    computed only when histograms are filled (kept samples come with them)."""
    thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, _cai, _sai, _dop, cut = samples
    dr_all, dr_on = face_draws
    proj, goal, metric_kind, w_design = target
    do_hist, lo, inv_width, hist, vmin, vmax, block_sums, block_size, ret_shift = stats
    worst, spec_stokes, design_stokes, keep, kept = outs
    worst_is_max = _is_max(metric_kind)
    S = thick.shape[0]
    W = optics[0].shape[0]
    B = hist.shape[3]
    T = hist.shape[0]
    g1 = goal[0]
    g2 = goal[1]
    g3 = goal[2]
    n_blocks = (S + block_size - 1) // block_size
    per_t = (n_blocks + T - 1) // T
    if do_hist and B > 65536:
        raise ValueError("at most 65536 histogram bins")
    want_ret = do_hist
    tr = _transposes(optics, faces)
    for t in nb.prange(T):
        b0 = t * per_t
        b1 = min(n_blocks, b0 + per_t)
        work = np.empty((N_WORK, W))
        fwork = np.empty((N_FWORK, W))
        jbuf = np.empty((block_size if do_hist else 1, N_VAR, W), dtype=np.uint16)
        m = work[_M]
        st1 = work[_XR]
        st2 = work[_XI]
        st3 = work[_YR]
        for b in range(b0, b1):
            s_lo = b * block_size
            s_hi = min(S, s_lo + block_size)
            bs0 = block_sums[b, :, 0]
            bs1 = block_sums[b, :, 1]
            for s in range(s_lo, s_hi):
                dr = dr_all[s if dr_on else 0]
                vary = False
                for f in range(dr.shape[0]):
                    vary = vary or dr[f] != 0.0
                _spectrum_faces(
                    optics, faces, tr, thick[s], tfac[s], c2[s], s2[s], sin2i[s], cphi2[s],
                    sphi2[s], ca[s], sa[s], proj, work, fwork, dr, want_ret, cut[s],
                )  # fmt: skip
                _metric_row(work, g1, g2, g3, metric_kind)
                wmin, a1, a2, a3 = _band_summary(m, st1, st2, st3, grid_weight, worst_is_max)
                if w_design >= 0 and w_design < W:
                    design_stokes[s, 0] = st1[w_design]
                    design_stokes[s, 1] = st2[w_design]
                    design_stokes[s, 2] = st3[w_design]
                if do_hist:
                    _observable_rows(work)
                    _fold_sample(
                        work, ret_shift, bs0, bs1, vmin[t], vmax[t], lo, inv_width,
                        jbuf[s - s_lo], B,
                    )  # fmt: skip
                    if keep:
                        _keep_sample(work, kept[s])
                l1, l2, l3 = _lines_faces(
                    lines, line_faces, s, thick[s], tfac[s], c2[s], s2[s], sin2i[s], cphi2[s],
                    sphi2[s], ca[s], sa[s], proj, dr, vary, cut[s],
                )  # fmt: skip
                worst[s] = wmin
                spec_stokes[s, 0] = a1 + l1
                spec_stokes[s, 1] = a2 + l2
                spec_stokes[s, 2] = a3 + l3
            if do_hist:
                _scatter_block(hist[t], jbuf, s_hi - s_lo)


# ----------------------------------------------------------------------------- inputs (numpy)


def face_arrays(n_o, n_e, R_fast, R_slow, signs, air_gap: bool) -> FaceOptics:
    """:class:`FaceOptics` from indices and face reflectances of shape (..., L) (numpy).

    ``signs`` (L,): cos 2(θₗ − θ) of each layer on the plate axis (its sign says parallel or
    crossed to layer 0).  For cemented layers, the wave along layer 0's fast axis enters through
    layer 0's fast index and leaves through the last layer's fast index when that layer is
    parallel to layer 0, its slow index when crossed; the wave across it the other two.
    """
    n_o = np.asarray(n_o, dtype=float)
    n_e = np.asarray(n_e, dtype=float)
    Rf = np.asarray(R_fast, dtype=float)
    Rs = np.asarray(R_slow, dtype=float)
    sg = np.where(np.asarray(signs) * np.asarray(signs)[0] >= 0.0, 1.0, -1.0)
    nbar = 0.5 * (n_o + n_e)
    c = np.ascontiguousarray
    if air_gap:
        return FaceOptics(
            c(nbar), c(np.sqrt(Rf * Rf)), c(1.0 - Rf), c(np.sqrt(Rs * Rs)), c(1.0 - Rs),
            c(sg), True, c(Rf), c(Rf), c(Rs), c(Rs),
        )  # fmt: skip
    last_a = Rf[..., -1] if sg[-1] > 0 else Rs[..., -1]
    last_b = Rs[..., -1] if sg[-1] > 0 else Rf[..., -1]
    rho_a = np.zeros_like(Rf)
    tau_a = np.zeros_like(Rf)
    rho_b = np.zeros_like(Rf)
    tau_b = np.zeros_like(Rf)
    rho_a[..., 0] = np.sqrt(Rf[..., 0] * last_a)
    tau_a[..., 0] = np.sqrt((1.0 - Rf[..., 0]) * (1.0 - last_a))
    rho_b[..., 0] = np.sqrt(Rs[..., 0] * last_b)
    tau_b[..., 0] = np.sqrt((1.0 - Rs[..., 0]) * (1.0 - last_b))
    rin_a = np.zeros_like(Rf)
    rout_a = np.zeros_like(Rf)
    rin_b = np.zeros_like(Rf)
    rout_b = np.zeros_like(Rf)
    rin_a[..., 0] = Rf[..., 0]
    rout_a[..., 0] = last_a
    rin_b[..., 0] = Rs[..., 0]
    rout_b[..., 0] = last_b
    return FaceOptics(
        c(nbar), c(rho_a), c(tau_a), c(rho_b), c(tau_b), c(sg), False, c(rin_a), c(rout_a),
        c(rin_b), c(rout_b),
    )  # fmt: skip


def face_count(n_layers: int, air_gap: bool) -> int:
    """Faces that reflect: two per cavity (one cavity for cemented layers, one per layer with
    an air gap).  Face 2c is cavity c's entrance, 2c + 1 its exit."""
    return 2 * n_layers if air_gap else 2
