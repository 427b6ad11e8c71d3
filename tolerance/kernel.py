"""The fused Monte Carlo kernel: samples × wavelengths × layers in real arithmetic (numba).

One pass over a chunk of samples computes, for every sample and wavelength, each layer's
retardance (exact oblique-incidence form, temperature factor), pushes the input Jones vector
through the layers as four reals, forms the normalised Stokes vector, and folds the results into
streaming statistics: per-wavelength histograms, exact minima and maxima, per-block sums, each
sample's worst goal metric, its spectrally averaged Stokes vector and its state at the design
wavelength.  No samples × wavelengths × 2 × 2 complex array is ever built.

For speed, one sample's whole spectrum is processed layer by layer in loops over wavelength that
the compiler turns into SIMD code: the half-retardance's sine and cosine come from
:func:`_sincos`, a polynomial evaluation in plain IEEE arithmetic (no library call), so that the
same inputs give the same bits whether a value is computed in a vector lane or alone, in any
chunk and on any thread.  The nominal values use the very same functions, which is what makes
the quantiles of a run with every tolerance zero equal the nominal values exactly.

The physics is that of :mod:`tolerance.retardance` and :mod:`tolerance.polarization`; a test
checks the kernel against those numpy functions.  Inputs are plain numpy arrays only.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numba as nb
import numpy as np

from .metrics import CODES

#: Statistics kept per wavelength, in this order.
VARIABLES = ("retardance", "axial_ratio", "azimuth", "metric")
N_VAR = len(VARIABLES)

METRICS = CODES  # metric name -> kernel code, from the metric registry
METRIC_AXIAL_RATIO = CODES["axial_ratio"]
METRIC_FIDELITY = CODES["fidelity"]
METRIC_EXTINCTION = CODES["extinction_db"]
METRIC_SPHERE = CODES["sphere_angle_deg"]
METRIC_AZIMUTH_ERROR = CODES["azimuth_error_deg"]
METRIC_ELLIPTICITY_ERROR = CODES["ellipticity_error_deg"]
#: s1² + s2² at or below which a state (or goal) counts as circular: no major axis
CIRCULAR_RHO2 = 1e-18  # (polarization.CIRCULAR_TOLERANCE)²

EXTINCTION_FLOOR = 1e-15  # 150 dB cap, as polarization.EXTINCTION_CAP_DB


class WavelengthOptics(NamedTuple):
    """Per wavelength: k0 = 2π/λ [1/µm] (W,) and per layer n_o², n_e², (n_e/n_o)², Δn (W, L)."""

    k0: np.ndarray
    no2: np.ndarray
    ne2: np.ndarray
    rat: np.ndarray
    dn: np.ndarray


class LineOptics(NamedTuple):
    """Per discrete source line: k0 (Ssrc, K), indices (Ssrc, K, L), power weights (K,)."""

    k0: np.ndarray
    no2: np.ndarray
    ne2: np.ndarray
    rat: np.ndarray
    dn: np.ndarray
    weight: np.ndarray


class SampleInputs(NamedTuple):
    """Per sample (S) and layer (L): thickness [µm], temperature factor, cos/sin of twice the
    fast-axis angle, sin² of the angle of incidence (S,), cos²/sin² of the plane of incidence
    against the optic axis, and the input: its Jones vector (ca + i·cai, sa + i·sai) of unit
    length (S,) (a linear state at α: cos α, sin α and zero imaginary parts) and the degree of
    polarization ``dop`` (S,) that scales the output Stokes vector (1 for a pure state); ``cut``
    (S, L, 2): sin κ of each layer's optic axis tipped out of the face by κ and the tangential
    wave vector along that axis, sin θᵢ·cos κ·cos φ (all zero for axes in the face; see
    :func:`_cut_retardance`)."""

    thick: np.ndarray
    tfac: np.ndarray
    c2: np.ndarray
    s2: np.ndarray
    sin2i: np.ndarray
    cphi2: np.ndarray
    sphi2: np.ndarray
    ca: np.ndarray
    sa: np.ndarray
    cai: np.ndarray
    sai: np.ndarray
    dop: np.ndarray
    cut: np.ndarray


class Target(NamedTuple):
    """Layer projections on the plate axis (L,), goal Stokes (3,), metric code, design index."""

    proj: np.ndarray
    goal: np.ndarray
    metric_kind: int
    w_design: int


class Statistics(NamedTuple):
    """Streaming statistics state, updated in place (see :func:`chunk_pass`)."""

    do_hist: bool
    lo: np.ndarray
    inv_width: np.ndarray
    hist: np.ndarray
    vmin: np.ndarray
    vmax: np.ndarray
    block_sums: np.ndarray
    block_size: int
    ret_shift: np.ndarray


class SampleOutputs(NamedTuple):
    """Per-sample outputs: worst metric (S,), source-averaged and design Stokes (S, 3), kept
    values (S, N_VAR, W) when ``keep``."""

    worst: np.ndarray
    spec_stokes: np.ndarray
    design_stokes: np.ndarray
    keep: bool
    kept: np.ndarray


_OPTS = dict(nogil=True, cache=True, fastmath=False, error_model="numpy")

# ----------------------------------------------------------------------------- sine and cosine
# Why not math.sin: numba lowers it to a C-library call per element, which keeps LLVM from
# vectorising the wavelength loop (the kernel's whole cost) and may round differently from a
# vectorised variant; these polynomial versions vectorise and give the same bits everywhere.
# tests/test_kernel_trig.py checks them against numpy to 1 ulp-level accuracy.
# Argument reduction by π/2 in three Cody-Waite steps, then minimax polynomials on [-π/4, π/4];
# the constants are those of the freely distributable fdlibm (Sun Microsystems, 1993) as kept in
# musl libc (k_sin.c, k_cos.c, __rem_pio2.c).

#: Largest |x| [rad] for which :func:`_sincos` is used; beyond it (or for NaN) the C library.
SINCOS_LIMIT = 1.0e6
_TOINT = 1.5 / 2.0**-52
_INVPIO2 = 6.36619772367581382433e-01
_PIO2_1 = 1.57079632673412561417e00
_PIO2_2 = 6.07710050630396597660e-11
_PIO2_2T = 2.02226624879595063154e-21
_PIO2_3 = 2.02226624871116645580e-21
_PIO2_3T = 8.47842766036889956997e-32
_S1 = -1.66666666666666324348e-01
_S2 = 8.33333333332248946124e-03
_S3 = -1.98412698298579493134e-04
_S4 = 2.75573137070700676789e-06
_S5 = -2.50507602534068634195e-08
_S6 = 1.58969099521155010221e-10
_C1 = 4.16666666666666019037e-02
_C2 = -1.38888888888741095749e-03
_C3 = 2.48015872894767294178e-05
_C4 = -2.75573143513906633035e-07
_C5 = 2.08757232129817482790e-09
_C6 = -1.13596475577881948265e-11


@nb.njit(inline="always", **_OPTS)
def _sincos(x):
    """sin x and cos x for |x| < :data:`SINCOS_LIMIT`, within 2 ulp of the C library.

    Notes
    -----
    x = n·π/2 + r with n = rint(2x/π) and r carried as y0 + y1 (three-part π/2, good to about
    150 bits for |x| < 2²⁰·π/2); sin r and cos r from the degree-13 and degree-14 minimax
    polynomials of fdlibm; the quadrant n mod 4 swaps and negates them.  Plain IEEE arithmetic
    only, so that the compiler vectorizes it and every lane gives the same bits as scalar code.
    """
    fn = (x * _INVPIO2 + _TOINT) - _TOINT
    n = int(fn)
    t = x - fn * _PIO2_1
    w = fn * _PIO2_2
    r = t - w
    w = fn * _PIO2_2T - ((t - r) - w)
    t = r
    w3 = fn * _PIO2_3
    r = t - w3
    w = fn * _PIO2_3T - ((t - r) - w3)
    y0 = r - w
    y1 = (r - y0) - w
    z = y0 * y0
    zz = z * z
    rs = _S2 + z * (_S3 + z * _S4) + z * zz * (_S5 + z * _S6)
    v = z * y0
    ks = y0 - ((z * (0.5 * y1 - v * rs) - y1) - v * _S1)
    rc = z * (_C1 + z * (_C2 + z * _C3)) + zz * zz * (_C4 + z * (_C5 + z * _C6))
    hz = 0.5 * z
    w1 = 1.0 - hz
    kc = w1 + (((1.0 - w1) - hz) + (z * rc - y0 * y1))
    odd = (n & 1) != 0
    s = kc if odd else ks
    c = ks if odd else kc
    s = -s if (n & 2) != 0 else s
    c = -c if ((n + 1) & 2) != 0 else c
    return s, c


@nb.njit(inline="always", **_OPTS)
def _sincos_any(x):
    """:func:`_sincos` where it applies, else the C library (huge arguments, NaN, inf)."""
    if abs(x) < SINCOS_LIMIT:
        return _sincos(x)
    return math.sin(x), math.cos(x)


# ----------------------------------------------------------------------------- arc tangent
# fdlibm's (Sun Microsystems, 1993) atan constants, as kept in musl libc (s_atan.c).

_ATANHI0 = 4.63647609000806093515e-01
_ATANHI1 = 7.85398163397448278999e-01
_ATANLO0 = 2.26987774529616870924e-17
_ATANLO1 = 3.06161699786838301793e-17
_AT0 = 3.33333333333329318027e-01
_AT1 = -1.99999999998764832476e-01
_AT2 = 1.42857142725034663711e-01
_AT3 = -1.11111104054623557880e-01
_AT4 = 9.09088713343650656196e-02
_AT5 = -7.69187620504482999495e-02
_AT6 = 6.66107313738753120669e-02
_AT7 = -5.83357013379057348645e-02
_AT8 = 4.97687799461593236017e-02
_AT9 = -3.65315727442169155270e-02
_AT10 = 1.62858201153657823623e-02
_PIO2_HI = 1.57079632679489655800e00
_PIO2_LO = 6.12323399573676603587e-17
_PI = 3.1415926535897931160e00
_PI_LO = 1.2246467991473531772e-16


@nb.njit(inline="always", **_OPTS)
def _atan2(y, x):
    """atan2(y, x) [rad] within 2 ulp of the C library, signed zeros and NaN as there.

    Notes
    -----
    atan of t = min(|x|, |y|)/max(|x|, |y|) in [0, 1], reduced about 0, 1/2 or 1 as in fdlibm's
    atan (degree-23 odd polynomial), then placed in its octant by adding 0, π/2 or π (each as
    hi + lo).  Infinite arguments give NaN (not needed here: Stokes components are bounded).
    Plain IEEE arithmetic only, so that it vectorizes and every lane gives the same bits.
    """
    ax = abs(x)
    ay = abs(y)
    steep = ay > ax
    num = ax if steep else ay
    den = ay if steep else ax
    t = 0.0 * num if den == 0.0 else num / den
    mid = t >= 0.4375
    top = t >= 0.6875
    # reduced argument and atan of the reduction point (0, 1/2 or 1)
    rn = (t - 1.0) if top else ((2.0 * t - 1.0) if mid else t)
    rd = (t + 1.0) if top else ((2.0 + t) if mid else 1.0)
    xr = rn / rd
    hi = _ATANHI1 if top else (_ATANHI0 if mid else 0.0)
    lo = _ATANLO1 if top else (_ATANLO0 if mid else 0.0)
    z = xr * xr
    w = z * z
    s1 = z * (_AT0 + w * (_AT2 + w * (_AT4 + w * (_AT6 + w * (_AT8 + w * _AT10)))))
    s2 = w * (_AT1 + w * (_AT3 + w * (_AT5 + w * (_AT7 + w * _AT9))))
    a = hi - ((xr * (s1 + s2) - lo) - xr)
    neg = math.copysign(1.0, x) < 0.0
    bhi = _PIO2_HI if steep else (_PI if neg else 0.0)
    blo = _PIO2_LO if steep else (_PI_LO if neg else 0.0)
    a = -a if steep != neg else a
    return math.copysign(bhi + (blo + a), y)


# ----------------------------------------------------------------------------- element maths


@nb.njit(inline="always", **_OPTS)
def _metric(s1, s2, s3, p, g1, g2, g3, kind):
    """Goal metric of a normalised Stokes vector of polarized length p (1 for monochromatic).

    The angle metrics (sphere angle, azimuth and ellipticity errors [deg]) follow
    :func:`tolerance.polarization.sphere_angle_deg`, :func:`~tolerance.polarization.
    azimuth_error_deg` and :func:`~tolerance.polarization.ellipticity_error_deg` (absolute
    values), for the direction of the polarized part; smaller is better for them.
    """
    if kind >= METRIC_SPHERE:
        return _angle_metric(s1, s2, s3, g1, g2, g3, kind)
    if kind == METRIC_AXIAL_RATIO:
        q = s3 / p if p > 0.0 else 0.0
        if q > 1.0:
            q = 1.0
        elif q < -1.0:
            q = -1.0
        ar = abs(q) / (1.0 + math.sqrt(max(0.0, 1.0 - q * q)))
        return ar if q * g3 >= 0.0 else -ar
    f = 0.5 * (1.0 + s1 * g1 + s2 * g2 + s3 * g3)
    if kind == METRIC_FIDELITY:
        return f
    a = max(f, EXTINCTION_FLOOR)
    b = max(1.0 - f, EXTINCTION_FLOOR)
    return 10.0 * math.log10(a / b)


@nb.njit(inline="always", **_OPTS)
def _is_max(kind):
    """True for a metric whose worst value over the band is its largest (smaller is better)."""
    return kind == METRIC_SPHERE or kind == METRIC_AZIMUTH_ERROR or kind == METRIC_ELLIPTICITY_ERROR


@nb.njit(inline="always", **_OPTS)
def _angle_metric(s1, s2, s3, g1, g2, g3, kind):
    """Sphere angle, |azimuth error| or |ellipticity error| [deg] of a Stokes vector to a goal.

    Notes
    -----
    Sphere angle Θ = atan2(|s × g|, s·g) with s the polarized part's direction (unpolarized: 90°).
    Azimuth error ½·atan2(s₂g₁ − s₁g₂, s₁g₁ + s₂g₂), the halved angle between the two
    projections on the equator, in [0, 90] after |·|; a circular goal asks for no azimuth (0),
    a circular state under a goal with an axis offers none (90).  Ellipticity error
    |χ − χ_g| with χ = ½·atan2(s₃, (s₁² + s₂²)^½).  Azzam and Bashara, *Ellipsometry and
    Polarized Light* (1977), sec. 1.3 and 2.6.
    """
    if kind == METRIC_SPHERE:
        n = math.sqrt(s1 * s1 + s2 * s2 + s3 * s3)
        if n == 0.0:
            return 90.0
        c1 = s2 * g3 - s3 * g2
        c2 = s3 * g1 - s1 * g3
        c3 = s1 * g2 - s2 * g1
        cr = math.sqrt(c1 * c1 + c2 * c2 + c3 * c3) / n
        return math.degrees(_atan2(cr, (s1 * g1 + s2 * g2 + s3 * g3) / n))
    if kind == METRIC_AZIMUTH_ERROR:
        if g1 * g1 + g2 * g2 <= CIRCULAR_RHO2:
            return 0.0
        r2 = s1 * s1 + s2 * s2
        if r2 <= CIRCULAR_RHO2 * (r2 + s3 * s3) or r2 == 0.0:
            return 90.0
        return abs(0.5 * math.degrees(_atan2(s2 * g1 - s1 * g2, s1 * g1 + s2 * g2)))
    chi = 0.5 * math.degrees(_atan2(s3, math.sqrt(s1 * s1 + s2 * s2)))
    chi_g = 0.5 * math.degrees(_atan2(g3, math.sqrt(g1 * g1 + g2 * g2)))
    return abs(chi - chi_g)


@nb.njit(inline="always", **_OPTS)
def _axial_ratio(st3):
    """Axial ratio b/a of a normalised Stokes vector with third component st3."""
    q = st3
    if q > 1.0:
        q = 1.0
    elif q < -1.0:
        q = -1.0
    return abs(q) / (1.0 + math.sqrt(max(0.0, 1.0 - q * q)))


@nb.njit(inline="always", **_OPTS)
def _azimuth(st1, st2):
    """Major-axis azimuth [deg, (-90, 90]] of a Stokes vector."""
    az = 0.5 * math.degrees(_atan2(st2, st1))
    if az <= -90.0:
        az += 180.0
    return az


@nb.njit(**_OPTS)
def _cut_indices(no2, ne2, sin2i, cz, p):
    """Normal components (N_e, N_o) [k₀] of the e- and o-waves' wave vectors, optic axis tipped
    out of the face (see :func:`_cut_retardance`)."""
    dd = ne2 - no2
    A = no2 + dd * cz * cz
    B = dd * cz * p
    C = dd * p * p + no2 * (sin2i - ne2)
    return (math.sqrt(B * B - A * C) - B) / A, math.sqrt(no2 - sin2i)


@nb.njit(**_OPTS)
def _cut_retardance(k0, no2, ne2, th, tf, sin2i, cz, p):
    """Retardance [rad] of one layer whose optic axis is tipped out of the face (cz = sin κ ≠ 0).

    Exact for any optic-axis orientation (Veiras, Perez & Garea, Appl. Opt. 49, 2769 (2010)):
    N_o = sqrt(n_o² − sin²θᵢ) and N_e = (sqrt(B² − A·C) − B)/A with A = n_o² + Δ·cz²,
    B = Δ·cz·p, C = Δ·p² + n_o²·(sin²θᵢ − n_e²), Δ = n_e² − n_o² and p = sin θᵢ·cos κ·cos φ
    (:func:`tolerance.retardance.cut_index_difference`).  Kept out of line (not inlined) so that
    the in-face path's code, and its bits, stay as they were.
    """
    Ne, No = _cut_indices(no2, ne2, sin2i, cz, p)
    return k0 * th * abs(Ne - No) * tf


@nb.njit(**_OPTS)
def _cut_row(k0, no2l, ne2l, th, tf, sin2i, cz, p, pj, ret, hh):
    """:func:`_cut_retardance` over one layer's wavelengths into the retardance and half-
    retardance rows; returns how many half-retardances leave :data:`SINCOS_LIMIT`."""
    bad = 0
    for w in range(k0.shape[0]):
        delta = _cut_retardance(k0[w], no2l[w], ne2l[w], th, tf, sin2i, cz, p)
        ret[w] += pj * delta
        h = 0.5 * delta
        hh[w] = h
        bad += 0 if abs(h) < SINCOS_LIMIT else 1
    return bad


@nb.njit(inline="always", **_OPTS)
def _layer_retardance(k0, no2, ne2, rat, dn, th, tf, sin2i, cphi2, sphi2, cz, p):
    """Retardance [rad] of one layer at one wavelength: normal incidence, exact oblique
    incidence (o- and e-wave normal components), or, with the optic axis tipped out of the face
    (cz = sin κ ≠ 0), :func:`_cut_retardance`.  Shared by the line path and the polarizer
    branch (:mod:`tolerance.kernel_polarizer`)."""
    if cz != 0.0:
        return _cut_retardance(k0, no2, ne2, th, tf, sin2i, cz, p)
    if sin2i == 0.0:
        dN = abs(dn)
    else:
        No = math.sqrt(no2 - sin2i)
        Ne = math.sqrt(ne2 - sin2i * sphi2 - rat * sin2i * cphi2)
        dN = abs(Ne - No)
    return k0 * th * dN * tf


@nb.njit(inline="always", **_OPTS)
def _propagate(
    k0,
    no2,
    ne2,
    rat,
    dn,
    thick,
    tfac,
    c2,
    s2,
    sin2i,
    cphi2,
    sphi2,
    ca,
    sa,
    proj,
    n_layers,
    cai,
    sai,
    dop,
    cut,
):
    """Jones vector of the input (ca + i·cai, sa + i·sai) after the layers, one wavelength;
    returns Stokes (times ``dop``) and retardance with the arithmetic of :func:`_spectrum`
    (used for discrete source lines); ``cut`` (L, 2) as :class:`SampleInputs`."""
    xr = ca
    xi = cai
    yr = sa
    yi = sai
    ret = 0.0
    for l in range(n_layers):
        delta = _layer_retardance(
            k0, no2[l], ne2[l], rat[l], dn[l], thick[l], tfac[l], sin2i, cphi2[l], sphi2[l],
            cut[l, 0], cut[l, 1],
        )  # fmt: skip
        ret += proj[l] * delta
        s, c = _sincos_any(0.5 * delta)
        C = c2[l]
        S = s2[l]
        ur = C * xr + S * yr
        ui = C * xi + S * yi
        vr = S * xr - C * yr
        vi = S * xi - C * yi
        nxr = c * xr + s * ui
        nxi = c * xi - s * ur
        nyr = c * yr + s * vi
        nyi = c * yi - s * vr
        xr = nxr
        xi = nxi
        yr = nyr
        yi = nyi
    st1 = (xr * xr + xi * xi - yr * yr - yi * yi) * dop
    st2 = (2.0 * (xr * yr + xi * yi)) * dop
    st3 = (2.0 * (xi * yr - xr * yi)) * dop
    return st1, st2, st3, ret


# ----------------------------------------------------------------------------- one spectrum

#: Rows of the per-thread work array (each of length W).
_XR, _XI, _YR, _YI, _H, _RET, _M, _RW, _AR, _AZ = range(10)
N_WORK = 10


@nb.njit(inline="always", **_OPTS)
def _spectrum(
    k0,
    no2T,
    ne2T,
    ratT,
    dnT,
    thick,
    tfac,
    c2,
    s2,
    sin2i,
    cphi2,
    sphi2,
    ca,
    sa,
    proj,
    work,
    cai,
    sai,
    dop,
    cut,
):
    """One sample's output over the grid: Stokes (s1, s2, s3) into work rows _XR, _XI, _YR and
    the retardance [rad] along the plate's axis into row _RET.

    The input is the Jones vector (ca + i·cai, sa + i·sai) of the polarized part; the output
    Stokes vector is scaled by the input's degree of polarization ``dop``: an ideal retarder
    (non-depolarizing, no diattenuation) passes unpolarized light unchanged, so the output is
    the retarded polarized part plus the same unpolarized part (Goldstein, *Polarized Light*,
    3rd ed., CRC Press 2011, ch. 5 and 6: a retarder's Mueller matrix has first row and column
    (1, 0, 0, 0)).  A zero imaginary part and ``dop`` = 1 give exactly the linear-input bits.

    ``no2T`` … ``dnT`` are (L, W); ``cut`` (L, 2) as :class:`SampleInputs` (a layer with a
    non-zero cut angle takes :func:`_cut_row`, the others today's arithmetic).  Every loop
    over wavelength vectorizes; a layer whose half-retardance leaves :data:`SINCOS_LIMIT`
    somewhere takes the scalar path, which makes the same per-element choice, so the bits never
    depend on the path.
    """
    W = k0.shape[0]
    L = thick.shape[0]
    xr = work[_XR]
    xi = work[_XI]
    yr = work[_YR]
    yi = work[_YI]
    hh = work[_H]
    ret = work[_RET]
    for w in range(W):
        xr[w] = ca
        xi[w] = cai
        yr[w] = sa
        yi[w] = sai
        ret[w] = 0.0
    for l in range(L):
        th = thick[l]
        tf = tfac[l]
        pj = proj[l]
        bad = 0
        if cut[l, 0] != 0.0:
            bad = _cut_row(k0, no2T[l], ne2T[l], th, tf, sin2i, cut[l, 0], cut[l, 1], pj, ret, hh)
        elif sin2i == 0.0:
            dnl = dnT[l]
            for w in range(W):
                delta = k0[w] * th * abs(dnl[w]) * tf
                ret[w] += pj * delta
                h = 0.5 * delta
                hh[w] = h
                bad += 0 if abs(h) < SINCOS_LIMIT else 1
        else:
            no2l = no2T[l]
            ne2l = ne2T[l]
            ratl = ratT[l]
            sp = sphi2[l]
            cp = cphi2[l]
            for w in range(W):
                No = math.sqrt(no2l[w] - sin2i)
                Ne = math.sqrt(ne2l[w] - sin2i * sp - ratl[w] * sin2i * cp)
                delta = k0[w] * th * abs(Ne - No) * tf
                ret[w] += pj * delta
                h = 0.5 * delta
                hh[w] = h
                bad += 0 if abs(h) < SINCOS_LIMIT else 1
        C = c2[l]
        S = s2[l]
        if bad == 0:
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
        else:
            for w in range(W):
                s, c = _sincos_any(hh[w])
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
    for w in range(W):
        a = xr[w]
        b = xi[w]
        e = yr[w]
        f = yi[w]
        xr[w] = (a * a + b * b - e * e - f * f) * dop
        xi[w] = (2.0 * (a * e + b * f)) * dop
        yr[w] = (2.0 * (b * e - a * f)) * dop


@nb.njit(inline="always", **_OPTS)
def _metric_row(work, g1, g2, g3, kind, dop=1.0):
    """Goal metric of every wavelength into work row _M (``dop``: the polarized length)."""
    st1 = work[_XR]
    st2 = work[_XI]
    st3 = work[_YR]
    m = work[_M]
    W = m.shape[0]
    if kind == METRIC_EXTINCTION:
        for w in range(W):
            m[w] = _metric(st1[w], st2[w], st3[w], 1.0, g1, g2, g3, METRIC_EXTINCTION)
    elif kind == METRIC_FIDELITY:
        for w in range(W):
            m[w] = _metric(st1[w], st2[w], st3[w], 1.0, g1, g2, g3, METRIC_FIDELITY)
    elif kind == METRIC_AXIAL_RATIO:
        for w in range(W):
            m[w] = _metric(st1[w], st2[w], st3[w], dop, g1, g2, g3, METRIC_AXIAL_RATIO)
    else:
        for w in range(W):
            m[w] = _angle_metric(st1[w], st2[w], st3[w], g1, g2, g3, kind)


@nb.njit(inline="always", **_OPTS)
def _observable_rows(work, dop=1.0):
    """Retardance [waves], axial ratio (of the polarized part, length ``dop``) and azimuth
    [deg] into work rows _RW, _AR, _AZ."""
    st1 = work[_XR]
    st2 = work[_XI]
    st3 = work[_YR]
    ret = work[_RET]
    rw = work[_RW]
    ar = work[_AR]
    az = work[_AZ]
    W = rw.shape[0]
    for w in range(W):
        rw[w] = ret[w] / (2.0 * math.pi)
        ar[w] = _axial_ratio(st3[w] / dop)
        az[w] = _azimuth(st1[w], st2[w])


@nb.njit(**_OPTS)
def _one_sample(optics, sample, proj):
    """The work rows of one sample at every wavelength (the one-sample kernels' common part)."""
    k0, no2, ne2, rat, dn = optics
    thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, cai, sai, dop, cut = sample
    work = np.empty((N_WORK, k0.shape[0]))
    _spectrum(
        k0,
        np.ascontiguousarray(no2.T),
        np.ascontiguousarray(ne2.T),
        np.ascontiguousarray(rat.T),
        np.ascontiguousarray(dn.T),
        thick,
        tfac,
        c2,
        s2,
        sin2i,
        cphi2,
        sphi2,
        ca,
        sa,
        proj,
        work,
        cai,
        sai,
        dop,
        cut,
    )
    return work


@nb.njit(**_OPTS)
def per_wavelength_values(optics, sample, proj, goal, metric_kind, out):
    """Retardance, axial ratio, azimuth and metric of one sample at every wavelength into
    ``out`` (N_VAR, W), with exactly the arithmetic of :func:`chunk_pass`.  ``sample`` holds the
    fields of :class:`SampleInputs` for one sample."""
    k0 = optics[0]
    work = _one_sample(optics, sample, proj)
    dop = sample[11]
    _metric_row(work, goal[0], goal[1], goal[2], metric_kind, dop)
    _observable_rows(work, dop)
    for w in range(k0.shape[0]):
        out[0, w] = work[_RW, w]
        out[1, w] = work[_AR, w]
        out[2, w] = work[_AZ, w]
        out[3, w] = work[_M, w]


@nb.njit(**_OPTS)
def stokes_one(optics, sample, proj, out):
    """Normalised Stokes (s1, s2, s3) of one sample at every wavelength into ``out`` (W, 3)."""
    k0 = optics[0]
    work = _one_sample(optics, sample, proj)
    for w in range(k0.shape[0]):
        out[w, 0] = work[_XR, w]
        out[w, 1] = work[_XI, w]
        out[w, 2] = work[_YR, w]


@nb.njit(inline="always", **_OPTS)
def _band_summary(m, st1, st2, st3, grid_weight, worst_is_max):
    """Worst metric over the band (its least, or its largest when ``worst_is_max``) and the
    source-weighted Stokes sums of one sample."""
    wmin = np.inf
    wmax = -np.inf
    a1 = 0.0
    a2 = 0.0
    a3 = 0.0
    for w in range(m.shape[0]):
        mw = m[w]
        if mw < wmin:
            wmin = mw
        if mw > wmax:
            wmax = mw
        gw = grid_weight[w]
        if gw != 0.0:
            a1 += gw * st1[w]
            a2 += gw * st2[w]
            a3 += gw * st3[w]
    return (wmax if worst_is_max else wmin), a1, a2, a3


@nb.njit(inline="always", **_OPTS)
def _fold_sample(work, ret_shift, bs0, bs1, vmin, vmax, lo, inv_width, jrow, B):
    """Fold one sample's rows into the block sums, the exact extremes and its bin indices."""
    W = work.shape[1]
    rw = work[_RW]
    m = work[_M]
    for w in range(W):
        d = rw[w] - ret_shift[w]
        bs0[w] += d
        bs1[w] += d * d
    for v in range(N_VAR):
        row = work[_RW + v] if v < 3 else m
        mn = vmin[v]
        mx = vmax[v]
        lov = lo[v]
        iwv = inv_width[v]
        jv = jrow[v]
        for w in range(W):
            x = row[w]
            mn[w] = x if x < mn[w] else mn[w]
            mx[w] = x if x > mx[w] else mx[w]
            j = int((x - lov[w]) * iwv[w])
            j = 0 if j < 0 else j
            j = B - 1 if j >= B else j
            jv[w] = j


@nb.njit(inline="always", **_OPTS)
def _keep_sample(work, kept_s):
    """Copy one sample's observable rows into the kept values (N_VAR, W)."""
    m = work[_M]
    for v in range(N_VAR):
        row = work[_RW + v] if v < 3 else m
        for w in range(work.shape[1]):
            kept_s[v, w] = row[w]


@nb.njit(inline="always", **_OPTS)
def _lines_average(
    lines, s, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj, L, cai, sai, dop, cut
):
    """Power-weighted Stokes sums of one sample over the discrete source lines."""
    lk0, lno2, lne2, lrat, ldn, line_weight = lines
    ss = s if lk0.shape[0] > 1 else 0
    a1 = 0.0
    a2 = 0.0
    a3 = 0.0
    for k in range(line_weight.shape[0]):
        l1, l2, l3, _ = _propagate(
            lk0[ss, k],
            lno2[ss, k],
            lne2[ss, k],
            lrat[ss, k],
            ldn[ss, k],
            thick,
            tfac,
            c2,
            s2,
            sin2i,
            cphi2,
            sphi2,
            ca,
            sa,
            proj,
            L,
            cai,
            sai,
            dop,
            cut,
        )
        lw = line_weight[k]
        a1 += lw * l1
        a2 += lw * l2
        a3 += lw * l3
    return a1, a2, a3


@nb.njit(inline="always", **_OPTS)
def _scatter_block(hist_t, jbuf, n):
    """Add one block's bin indices into the thread's histograms, row by row."""
    for v in range(hist_t.shape[0]):
        for w in range(hist_t.shape[1]):
            hvw = hist_t[v, w]
            for i in range(n):
                hvw[jbuf[i, v, w]] += 1


@nb.njit(parallel=True, **_OPTS)
def chunk_pass(optics, grid_weight, lines, samples, target, stats, outs):
    """Process one chunk; see the module docstring.

    The inputs travel as tuples in the order of :class:`WavelengthOptics`, :class:`LineOptics`,
    :class:`SampleInputs`, :class:`Target`, :class:`Statistics` and :class:`SampleOutputs`
    (named tuples built by :mod:`tolerance.montecarlo`).  Shapes: hist (T, N_VAR, W, B) int32 or
    int64, vmin/vmax (T, N_VAR, W), block_sums (n_blocks, W, 2), worst (S,), spec_stokes (S, 3),
    design_stokes (S, 3), kept (S, N_VAR, W) float32 when ``keep``.

    Thread t of T takes a contiguous run of whole blocks and owns hist[t], vmin[t], vmax[t];
    every per-sample and per-block result is written by one thread only, so the results do not
    depend on T.
    """
    k0, no2, ne2, rat, dn = optics
    thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, cai, sai, dop, cut = samples
    proj, goal, metric_kind, w_design = target
    do_hist, lo, inv_width, hist, vmin, vmax, block_sums, block_size, ret_shift = stats
    worst, spec_stokes, design_stokes, keep, kept = outs
    S = thick.shape[0]
    W = k0.shape[0]
    B = hist.shape[3]
    T = hist.shape[0]
    L = thick.shape[1]
    g1 = goal[0]
    g2 = goal[1]
    g3 = goal[2]
    worst_is_max = _is_max(metric_kind)
    no2T = np.ascontiguousarray(no2.T)
    ne2T = np.ascontiguousarray(ne2.T)
    ratT = np.ascontiguousarray(rat.T)
    dnT = np.ascontiguousarray(dn.T)
    n_blocks = (S + block_size - 1) // block_size
    per_t = (n_blocks + T - 1) // T
    if do_hist and B > 65536:
        raise ValueError("at most 65536 histogram bins")
    for t in nb.prange(T):
        b0 = t * per_t
        b1 = min(n_blocks, b0 + per_t)
        work = np.empty((N_WORK, W))
        # bin indices of one block, scattered into the histograms row by row after the block,
        # so that each (variable, wavelength) row is touched once per block (cache locality)
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
                _spectrum(
                    k0,
                    no2T,
                    ne2T,
                    ratT,
                    dnT,
                    thick[s],
                    tfac[s],
                    c2[s],
                    s2[s],
                    sin2i[s],
                    cphi2[s],
                    sphi2[s],
                    ca[s],
                    sa[s],
                    proj,
                    work,
                    cai[s],
                    sai[s],
                    dop[s],
                    cut[s],
                )
                _metric_row(work, g1, g2, g3, metric_kind, dop[s])
                wmin, a1, a2, a3 = _band_summary(m, st1, st2, st3, grid_weight, worst_is_max)
                if w_design >= 0 and w_design < W:
                    design_stokes[s, 0] = st1[w_design]
                    design_stokes[s, 1] = st2[w_design]
                    design_stokes[s, 2] = st3[w_design]
                if do_hist:
                    _observable_rows(work, dop[s])
                    _fold_sample(
                        work,
                        ret_shift,
                        bs0,
                        bs1,
                        vmin[t],
                        vmax[t],
                        lo,
                        inv_width,
                        jbuf[s - s_lo],
                        B,
                    )
                    if keep:
                        _keep_sample(work, kept[s])
                # discrete lines (laser, line sources), possibly drifting per sample
                l1, l2, l3 = _lines_average(
                    lines,
                    s,
                    thick[s],
                    tfac[s],
                    c2[s],
                    s2[s],
                    sin2i[s],
                    cphi2[s],
                    sphi2[s],
                    ca[s],
                    sa[s],
                    proj,
                    L,
                    cai[s],
                    sai[s],
                    dop[s],
                    cut[s],
                )
                a1 += l1
                a2 += l2
                a3 += l3
                worst[s] = wmin
                spec_stokes[s, 0] = a1
                spec_stokes[s, 1] = a2
                spec_stokes[s, 2] = a3
            if do_hist:
                _scatter_block(hist[t], jbuf, s_hi - s_lo)


def spectral_metric(spec_stokes: np.ndarray, goal: np.ndarray, metric: str):
    """Goal metric of spectrally averaged normalised Stokes vectors (S, 3); numpy, vectorised.

    Axial ratio is that of the polarized part; fidelity and extinction count the unpolarized
    part (fidelity (1 + s·g)/2 with s the averaged normalised Stokes vector).
    """
    s = np.asarray(spec_stokes, dtype=float)
    p = np.sqrt(np.sum(s * s, axis=-1))
    if metric == "axial_ratio":
        with np.errstate(invalid="ignore", divide="ignore"):
            q = np.where(p > 0, s[..., 2] / np.where(p > 0, p, 1.0), 0.0)
        q = np.clip(q, -1.0, 1.0)
        ar = np.abs(q) / (1.0 + np.sqrt(np.maximum(0.0, 1.0 - q * q)))
        return np.where(q * goal[2] >= 0.0, ar, -ar)
    if metric in ("sphere_angle_deg", "azimuth_error_deg", "ellipticity_error_deg"):
        from . import polarization as pol

        if metric == "sphere_angle_deg":
            return pol.sphere_angle_deg(s, goal)
        fn = pol.azimuth_error_deg if metric == "azimuth_error_deg" else pol.ellipticity_error_deg
        return np.abs(fn(s, goal))
    f = 0.5 * (1.0 + s @ np.asarray(goal, dtype=float))
    if metric == "fidelity":
        return f
    return 10.0 * np.log10(np.maximum(f, EXTINCTION_FLOOR) / np.maximum(1.0 - f, EXTINCTION_FLOOR))
