"""The fused Monte Carlo kernel: samples × wavelengths × layers in real arithmetic (numba).

One pass over a chunk of samples computes, for every sample and wavelength, each layer's
retardance (exact oblique-incidence form, temperature factor), pushes the input Jones vector
through the layers as four reals, forms the normalised Stokes vector, and folds the results into
streaming statistics: per-wavelength histograms, exact minima and maxima, per-block sums, each
sample's worst goal metric, its spectrally averaged Stokes vector and its state at the design
wavelength.  No samples × wavelengths × 2 × 2 complex array is ever built.

The physics is that of :mod:`tolerance.retardance` and :mod:`tolerance.polarization`; a test
checks the kernel against those numpy functions.  Inputs are plain numpy arrays only.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

#: Statistics kept per wavelength, in this order.
VARIABLES = ("retardance", "axial_ratio", "azimuth", "metric")
N_VAR = len(VARIABLES)

METRIC_AXIAL_RATIO = 0
METRIC_FIDELITY = 1
METRIC_EXTINCTION = 2
METRICS = {"axial_ratio": METRIC_AXIAL_RATIO, "fidelity": METRIC_FIDELITY,
           "extinction_db": METRIC_EXTINCTION}

EXTINCTION_FLOOR = 1e-15  # 150 dB cap, as polarization.EXTINCTION_CAP_DB

_OPTS = dict(nogil=True, cache=True, fastmath=False, error_model="numpy")


@nb.njit(inline="always", **_OPTS)
def _metric(s1, s2, s3, p, g1, g2, g3, kind):
    """Goal metric of a normalised Stokes vector of polarized length p (1 for monochromatic)."""
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
def _propagate(k0, no2, ne2, rat, dn, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj,
               n_layers):
    """Jones vector of linear input (ca, sa) after the layers; returns Stokes and retardance."""
    xr = ca
    xi = 0.0
    yr = sa
    yi = 0.0
    ret = 0.0
    for l in range(n_layers):
        if sin2i == 0.0:
            dN = abs(dn[l])
        else:
            No = math.sqrt(no2[l] - sin2i)
            Ne = math.sqrt(ne2[l] - sin2i * sphi2[l] - rat[l] * sin2i * cphi2[l])
            dN = abs(Ne - No)
        delta = k0 * thick[l] * dN * tfac[l]
        ret += proj[l] * delta
        h = 0.5 * delta
        c = math.cos(h)
        s = math.sin(h)
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
    st1 = xr * xr + xi * xi - yr * yr - yi * yi
    st2 = 2.0 * (xr * yr + xi * yi)
    st3 = 2.0 * (xi * yr - xr * yi)
    return st1, st2, st3, ret


@nb.njit(inline="always", **_OPTS)
def _observables(st1, st2, st3, ret):
    """Retardance [waves], axial ratio b/a and major-axis azimuth [deg, (-90, 90]]."""
    q = st3
    if q > 1.0:
        q = 1.0
    elif q < -1.0:
        q = -1.0
    ar = abs(q) / (1.0 + math.sqrt(max(0.0, 1.0 - q * q)))
    az = 0.5 * math.degrees(math.atan2(st2, st1))
    if az <= -90.0:
        az += 180.0
    return ret / (2.0 * math.pi), ar, az


@nb.njit(**_OPTS)
def per_wavelength_values(k0, no2, ne2, rat, dn, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca,
                          sa, proj, goal, metric_kind, out):
    """Retardance, axial ratio, azimuth and metric of one sample at every wavelength into
    ``out`` (N_VAR, W), with exactly the arithmetic of :func:`chunk_pass`."""
    L = thick.shape[0]
    for w in range(k0.shape[0]):
        st1, st2, st3, ret = _propagate(k0[w], no2[w], ne2[w], rat[w], dn[w], thick, tfac, c2, s2,
                                        sin2i, cphi2, sphi2, ca, sa, proj, L)
        out[0, w], out[1, w], out[2, w] = _observables(st1, st2, st3, ret)
        out[3, w] = _metric(st1, st2, st3, 1.0, goal[0], goal[1], goal[2], metric_kind)


@nb.njit(**_OPTS)
def stokes_one(k0, no2, ne2, rat, dn, thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, proj,
               out):
    """Normalised Stokes (s1, s2, s3) of one sample at every wavelength into ``out`` (W, 3)."""
    L = thick.shape[0]
    for w in range(k0.shape[0]):
        st1, st2, st3, _ = _propagate(k0[w], no2[w], ne2[w], rat[w], dn[w], thick, tfac, c2, s2,
                                      sin2i, cphi2, sphi2, ca, sa, proj, L)
        out[w, 0] = st1
        out[w, 1] = st2
        out[w, 2] = st3


@nb.njit(parallel=True, **_OPTS)
def chunk_pass(
    # per wavelength of the analysis grid: k0 (W,), indices (W, L)
    k0, no2, ne2, rat, dn, grid_weight,
    # per discrete source line: k0 (Ssrc, K) and indices (Ssrc, K, L); Ssrc is 1 or S
    lk0, lno2, lne2, lrat, ldn, line_weight,
    # per sample (S) and layer
    thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa,
    # constants
    proj, goal, metric_kind, w_design,
    # statistics state (updated in place)
    do_hist, lo, inv_width, hist, vmin, vmax, block_sums, block_size, ret_shift,
    # per-sample outputs
    worst, spec_stokes, design_stokes,
    keep, kept,
):
    """Process one chunk; see the module docstring.  Shapes: hist (T, N_VAR, W, B) int64,
    vmin/vmax (T, N_VAR, W), block_sums (n_blocks, W, 2), worst (S,), spec_stokes (S, 3),
    design_stokes (S, 3), kept (S, N_VAR, W) float32 when ``keep``."""
    S = thick.shape[0]
    L = thick.shape[1]
    W = k0.shape[0]
    K = line_weight.shape[0]
    B = hist.shape[3]
    T = hist.shape[0]
    g1 = goal[0]
    g2 = goal[1]
    g3 = goal[2]
    n_blocks = (S + block_size - 1) // block_size
    per_t = (n_blocks + T - 1) // T
    for t in nb.prange(T):
        b0 = t * per_t
        b1 = min(n_blocks, b0 + per_t)
        vals = np.empty(N_VAR)
        for b in range(b0, b1):
            s_lo = b * block_size
            s_hi = min(S, s_lo + block_size)
            for s in range(s_lo, s_hi):
                wmin = np.inf
                a1 = 0.0
                a2 = 0.0
                a3 = 0.0
                for w in range(W):
                    st1, st2, st3, ret = _propagate(
                        k0[w], no2[w], ne2[w], rat[w], dn[w], thick[s], tfac[s],
                        c2[s], s2[s], sin2i[s], cphi2[s], sphi2[s], ca[s], sa[s], proj, L)
                    m = _metric(st1, st2, st3, 1.0, g1, g2, g3, metric_kind)
                    if m < wmin:
                        wmin = m
                    gw = grid_weight[w]
                    if gw != 0.0:
                        a1 += gw * st1
                        a2 += gw * st2
                        a3 += gw * st3
                    if w == w_design:
                        design_stokes[s, 0] = st1
                        design_stokes[s, 1] = st2
                        design_stokes[s, 2] = st3
                    if do_hist:
                        vals[0], vals[1], vals[2] = _observables(st1, st2, st3, ret)
                        vals[3] = m
                        d = vals[0] - ret_shift[w]
                        block_sums[b, w, 0] += d
                        block_sums[b, w, 1] += d * d
                        for v in range(N_VAR):
                            x = vals[v]
                            if x < vmin[t, v, w]:
                                vmin[t, v, w] = x
                            if x > vmax[t, v, w]:
                                vmax[t, v, w] = x
                            j = int((x - lo[v, w]) * inv_width[v, w])
                            if j < 0:
                                j = 0
                            elif j >= B:
                                j = B - 1
                            hist[t, v, w, j] += 1
                            if keep:
                                kept[s, v, w] = x
                # discrete lines (laser, line sources), possibly drifting per sample
                for k in range(K):
                    ss = s if lk0.shape[0] > 1 else 0
                    st1, st2, st3, ret = _propagate(
                        lk0[ss, k], lno2[ss, k], lne2[ss, k], lrat[ss, k], ldn[ss, k],
                        thick[s], tfac[s], c2[s], s2[s], sin2i[s], cphi2[s], sphi2[s], ca[s],
                        sa[s], proj, L)
                    lw = line_weight[k]
                    a1 += lw * st1
                    a2 += lw * st2
                    a3 += lw * st3
                worst[s] = wmin
                spec_stokes[s, 0] = a1
                spec_stokes[s, 1] = a2
                spec_stokes[s, 2] = a3


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
    f = 0.5 * (1.0 + s @ np.asarray(goal, dtype=float))
    if metric == "fidelity":
        return f
    return 10.0 * np.log10(np.maximum(f, EXTINCTION_FLOOR) / np.maximum(1.0 - f, EXTINCTION_FLOOR))
