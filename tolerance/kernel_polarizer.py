"""The Monte Carlo kernel's branch for trains that hold a linear polarizer (finite extinction).

A polarizer is not lossless and turns unpolarized light into polarized light, so the state is
carried as two incoherent pure parts: the input's polarized Jones vector e_p with weight
(1 + P)/2 and its orthogonal e_⊥ = (−ē_y, ē_x) with weight (1 − P)/2 (unpolarized light is an
equal incoherent mix of any orthogonal pair; P is the input's degree of polarization).  A
retarder layer acts on both exactly as in :mod:`tolerance.kernel`; a polarizer layer (marked by
``pol[l] >= 0``, its minor amplitude transmittance r = 10^(−ER/20)) as the real matrix

    R(−θ)·diag(1, r)·R(θ) = [[a + b cos 2θ, b sin 2θ], [b sin 2θ, a − b cos 2θ]],
    a = (1 + r)/2, b = (1 − r)/2,

with θ its azimuth (clocking included).  The output Stokes vector is
S = w₁ S(J e_p) + w₂ S(J e_⊥); the state the goal judges is s = (S₁, S₂, S₃)/S₀ (the light that
leaves the train, normalised), its polarized length |s|.  Source averages weight by transmitted
power: Σ w S / Σ w S₀.  The statistics are folded with the ideal kernel's own helpers, and the
ideal kernel itself is untouched (its bits and compile time do not change).

References
----------
.. [1] D. H. Goldstein, *Polarized Light*, 3rd ed. (CRC Press, 2011), ch. 5 (the polarizer's
   Jones and Mueller matrices) and ch. 4 (unpolarized light as an incoherent sum).
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from .kernel import (
    _AR,
    _AZ,
    _M,
    _OPTS,
    _RET,
    _RW,
    _XI,
    _XR,
    _YR,
    N_VAR,
    N_WORK,
    _axial_ratio,
    _azimuth,
    _fold_sample,
    _is_max,
    _keep_sample,
    _layer_retardance,
    _metric,
    _scatter_block,
    _sincos_any,
)


def polarizer_amplitudes(plate) -> np.ndarray:
    """Per layer: the minor amplitude transmittance r of a polarizer layer, −1 for a retarder."""
    return np.array(
        [
            -1.0 if la.extinction_db is None else 10.0 ** (-la.extinction_db / 20.0)
            for la in plate.layers
        ]
    )


@nb.njit(**_OPTS)
def _state(k0, no2, ne2, rat, dn, thick, tfac, c2, s2, sin2i, cphi2, sphi2, inp, proj, pol, cut):
    """(S0, S1, S2, S3, retardance) after the layers at one wavelength; ``inp`` holds
    (ca, sa, cai, sai, dop) of the input; ``cut`` (L, 2) each layer's optic axis tipped out of
    the face (:func:`tolerance.kernel._cut_retardance`; zero: in the face)."""
    ca, sa, cai, sai, dop = inp[0], inp[1], inp[2], inp[3], inp[4]
    # the polarized part and its orthogonal partner (−conj(y), conj(x))
    p = np.array([ca, cai, sa, sai, -sa, sai, ca, -cai])
    ret = 0.0
    for l in range(thick.shape[0]):
        C = c2[l]
        S = s2[l]
        if pol[l] >= 0.0:
            a = 0.5 * (1.0 + pol[l])
            b = 0.5 * (1.0 - pol[l])
            m00 = a + b * C
            m01 = b * S
            m11 = a - b * C
            for k in range(2):
                o = 4 * k
                xr, xi, yr, yi = p[o], p[o + 1], p[o + 2], p[o + 3]
                p[o] = m00 * xr + m01 * yr
                p[o + 1] = m00 * xi + m01 * yi
                p[o + 2] = m01 * xr + m11 * yr
                p[o + 3] = m01 * xi + m11 * yi
            continue
        delta = _layer_retardance(
            k0, no2[l], ne2[l], rat[l], dn[l], thick[l], tfac[l], sin2i, cphi2[l], sphi2[l],
            cut[l, 0], cut[l, 1],
        )  # fmt: skip
        ret += proj[l] * delta
        s, c = _sincos_any(0.5 * delta)
        for k in range(2):
            o = 4 * k
            xr, xi, yr, yi = p[o], p[o + 1], p[o + 2], p[o + 3]
            ur = C * xr + S * yr
            ui = C * xi + S * yi
            vr = S * xr - C * yr
            vi = S * xi - C * yi
            p[o] = c * xr + s * ui
            p[o + 1] = c * xi - s * ur
            p[o + 2] = c * yr + s * vi
            p[o + 3] = c * yi - s * vr
    out = np.zeros(4)
    for k in range(2):
        o = 4 * k
        w = 0.5 * (1.0 + dop) if k == 0 else 0.5 * (1.0 - dop)
        xr, xi, yr, yi = p[o], p[o + 1], p[o + 2], p[o + 3]
        out[0] += w * (xr * xr + xi * xi + yr * yr + yi * yi)
        out[1] += w * (xr * xr + xi * xi - yr * yr - yi * yi)
        out[2] += w * (2.0 * (xr * yr + xi * yi))
        out[3] += w * (2.0 * (xi * yr - xr * yi))
    return out[0], out[1], out[2], out[3], ret


@nb.njit(**_OPTS)
def _input_at(inp, rows, i, here):
    """The input at wavelength row ``i`` into ``here``: the sample's own (ca, sa, cai, sai,
    dop) when ``rows`` has no rows, else the tabled state turned by the sample's input
    azimuth (ca = cos α, sa = sin α): R(α)·e, its degree of polarization the table's."""
    if rows.shape[0] == 0:
        for k in range(5):
            here[k] = inp[k]
        return
    c = inp[0]
    s = inp[1]
    xr, yr, xi, yi = rows[i, 0], rows[i, 1], rows[i, 2], rows[i, 3]
    here[0] = c * xr - s * yr
    here[1] = s * xr + c * yr
    here[2] = c * xi - s * yi
    here[3] = s * xi + c * yi
    here[4] = rows[i, 4]


@nb.njit(**_OPTS)
def _sample_rows(
    optics, thick, tfac, c2, s2, sin2i, cphi2, sphi2, inp, rows, proj, pol, work, g, kind, cut
):
    """One sample over the grid: normalised Stokes into work rows _XR, _XI, _YR, the
    observables and the metric into _RW, _AR, _AZ, _M; returns the absolute Stokes rows
    (4, W) for the power-weighted source average.  ``rows`` (W, 5): a tabled input per
    wavelength (:func:`_input_at`), or no rows."""
    k0, no2, ne2, rat, dn = optics
    W = k0.shape[0]
    absolute = np.empty((4, W))
    here = np.empty(5)
    for w in range(W):
        _input_at(inp, rows, w, here)
        S0, S1, S2, S3, ret = _state(
            k0[w], no2[w], ne2[w], rat[w], dn[w], thick, tfac, c2, s2, sin2i, cphi2, sphi2,
            here, proj, pol, cut,
        )  # fmt: skip
        absolute[0, w] = S0
        absolute[1, w] = S1
        absolute[2, w] = S2
        absolute[3, w] = S3
        st1 = S1 / S0
        st2 = S2 / S0
        st3 = S3 / S0
        pl = math.sqrt(st1 * st1 + st2 * st2 + st3 * st3)
        work[_XR, w] = st1
        work[_XI, w] = st2
        work[_YR, w] = st3
        work[_RET, w] = ret
        work[_M, w] = _metric(st1, st2, st3, pl, g[0], g[1], g[2], kind)
        work[_RW, w] = ret / (2.0 * math.pi)
        work[_AR, w] = _axial_ratio(st3 / pl) if pl > 0.0 else 0.0
        work[_AZ, w] = _azimuth(st1, st2)
    return absolute


@nb.njit(**_OPTS)
def values_one_polarizer(optics, sample, proj, pol, rows, goal, metric_kind, out, stokes):
    """Nominal rows of one sample: values (N_VAR, W) and normalised Stokes (W, 3)."""
    thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, cai, sai, dop, cut = sample
    W = optics[0].shape[0]
    work = np.empty((N_WORK, W))
    inp = np.array([ca, sa, cai, sai, dop])
    _sample_rows(
        optics, thick, tfac, c2, s2, sin2i, cphi2, sphi2, inp, rows, proj, pol, work, goal,
        metric_kind, cut,
    )  # fmt: skip
    for w in range(W):
        out[0, w] = work[_RW, w]
        out[1, w] = work[_AR, w]
        out[2, w] = work[_AZ, w]
        out[3, w] = work[_M, w]
        stokes[w, 0] = work[_XR, w]
        stokes[w, 1] = work[_XI, w]
        stokes[w, 2] = work[_YR, w]


@nb.njit(parallel=True, **_OPTS)
def chunk_pass_polarizer(
    optics, grid_weight, lines, samples, target, pol, rows, line_rows, stats, outs
):
    """:func:`tolerance.kernel.chunk_pass` for a train with polarizer layers (``pol``, see
    :func:`polarizer_amplitudes`) or an input tabled over the spectrum (``rows`` (W, 5) on the
    grid, ``line_rows`` (Ssrc, K, 5) at the lines; no rows otherwise); the same inputs,
    statistics and outputs."""
    thick, tfac, c2, s2, sin2i, cphi2, sphi2, ca, sa, cai, sai, dop, cut = samples
    proj, goal, metric_kind, w_design = target
    do_hist, lo, inv_width, hist, vmin, vmax, block_sums, block_size, ret_shift = stats
    worst, spec_stokes, design_stokes, keep, kept = outs
    lk0, lno2, lne2, lrat, ldn, line_weight = lines
    S = thick.shape[0]
    W = optics[0].shape[0]
    B = hist.shape[3]
    T = hist.shape[0]
    worst_is_max = _is_max(metric_kind)
    n_blocks = (S + block_size - 1) // block_size
    per_t = (n_blocks + T - 1) // T
    for t in nb.prange(T):
        b0 = t * per_t
        b1 = min(n_blocks, b0 + per_t)
        work = np.empty((N_WORK, W))
        jbuf = np.empty((block_size if do_hist else 1, N_VAR, W), dtype=np.uint16)
        inp = np.empty(5)
        here = np.empty(5)
        for b in range(b0, b1):
            s_lo = b * block_size
            s_hi = min(S, s_lo + block_size)
            bs0 = block_sums[b, :, 0]
            bs1 = block_sums[b, :, 1]
            for s in range(s_lo, s_hi):
                inp[0] = ca[s]
                inp[1] = sa[s]
                inp[2] = cai[s]
                inp[3] = sai[s]
                inp[4] = dop[s]
                absolute = _sample_rows(
                    optics, thick[s], tfac[s], c2[s], s2[s], sin2i[s], cphi2[s], sphi2[s],
                    inp, rows, proj, pol, work, goal, metric_kind, cut[s],
                )  # fmt: skip
                wmin = np.inf
                wmax = -np.inf
                a = np.zeros(4)
                for w in range(W):
                    mw = work[_M, w]
                    wmin = mw if mw < wmin else wmin
                    wmax = mw if mw > wmax else wmax
                    gw = grid_weight[w]
                    if gw != 0.0:
                        for k in range(4):
                            a[k] += gw * absolute[k, w]
                ss = s if lk0.shape[0] > 1 else 0
                sl = s if line_rows.shape[0] > 1 else 0
                for k in range(line_weight.shape[0]):
                    _input_at(inp, line_rows[sl], k, here)
                    l0, l1, l2, l3, _ = _state(
                        lk0[ss, k], lno2[ss, k], lne2[ss, k], lrat[ss, k], ldn[ss, k],
                        thick[s], tfac[s], c2[s], s2[s], sin2i[s], cphi2[s], sphi2[s],
                        here, proj, pol, cut[s],
                    )  # fmt: skip
                    lw = line_weight[k]
                    a[0] += lw * l0
                    a[1] += lw * l1
                    a[2] += lw * l2
                    a[3] += lw * l3
                if w_design >= 0 and w_design < W:
                    design_stokes[s, 0] = work[_XR, w_design]
                    design_stokes[s, 1] = work[_XI, w_design]
                    design_stokes[s, 2] = work[_YR, w_design]
                if do_hist:
                    _fold_sample(
                        work, ret_shift, bs0, bs1, vmin[t], vmax[t], lo, inv_width,
                        jbuf[s - s_lo], B,
                    )  # fmt: skip
                    if keep:
                        _keep_sample(work, kept[s])
                worst[s] = wmax if worst_is_max else wmin
                n0 = a[0] if a[0] > 0.0 else 1.0
                spec_stokes[s, 0] = a[1] / n0
                spec_stokes[s, 1] = a[2] / n0
                spec_stokes[s, 2] = a[3] / n0
            if do_hist:
                _scatter_block(hist[t], jbuf, s_hi - s_lo)
