"""The kernel's own sine, cosine and atan2 against numpy's (the platform C library).

The kernel evaluates sin/cos by fdlibm's argument reduction and polynomials (Sun Microsystems,
1993, as kept in musl libc) so that its wavelength loop vectorises; these checks hold them to
the accuracy of the C library they stand in for (a few units in the last place).
"""

from __future__ import annotations

import numba as nb
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tolerance import kernel


@nb.njit
def _sc(x):
    out = np.empty((x.size, 2))
    for i in range(x.size):
        s, c = kernel._sincos_any(x[i])
        out[i, 0] = s
        out[i, 1] = c
    return out


@nb.njit
def _at2(y, x):
    out = np.empty(x.size)
    for i in range(x.size):
        out[i] = kernel._atan2(y[i], x[i])
    return out


def _args():
    rng = np.random.default_rng(1)
    k = np.arange(-2000, 2001)
    near = np.concatenate([k * np.pi / 2 + d for d in (0.0, 1e-12, -1e-12, 1e-6)])
    return np.concatenate([rng.uniform(-10, 10, 20000), rng.uniform(-2e3, 2e3, 20000),
                           rng.uniform(-1e5, 1e5, 5000), near, [0.0, -0.0, 1e-300, 5e-324]])


def test_sincos_matches_the_c_library_to_a_few_ulp():
    x = _args()
    out = _sc(x)
    # common practice: a correctly reduced libm sin/cos is within 1 ulp of the true value
    tol = 4 * np.spacing(1.0)
    np.testing.assert_allclose(out[:, 0], np.sin(x), rtol=0, atol=tol)
    np.testing.assert_allclose(out[:, 1], np.cos(x), rtol=0, atol=tol)


def test_sincos_beyond_its_range_and_nan_fall_back():
    x = np.array([1e7, -3e9, 1e300, np.inf, np.nan])
    out = _sc(x)
    np.testing.assert_allclose(out[:3, 0], np.sin(x[:3]), rtol=0, atol=4 * np.spacing(1.0))
    assert np.all(np.isnan(out[3:]))


def test_atan2_matches_the_c_library():
    rng = np.random.default_rng(2)
    y = np.concatenate([rng.normal(size=20000), [0.0, 0.0, -0.0, 1.0, -1.0, 1e-300, 0.0]])
    x = np.concatenate([rng.normal(size=20000), [1.0, -1.0, -1.0, 0.0, 0.0, 1e-300, 0.0]])
    np.testing.assert_allclose(_at2(y, x), np.arctan2(y, x), rtol=0, atol=4 * np.spacing(np.pi))


@settings(max_examples=300, deadline=None)
@given(st.floats(min_value=-1e5, max_value=1e5, allow_nan=False))
def test_sincos_property(x):
    s, c = _sc(np.array([x]))[0]
    assert s == pytest.approx(np.sin(x), abs=4e-16)
    assert c == pytest.approx(np.cos(x), abs=4e-16)
    assert s * s + c * c == pytest.approx(1.0, abs=1e-15)
