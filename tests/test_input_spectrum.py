"""An input state that varies over the spectrum: ``[input] stokes_csv``.

Sources
-------
[sympy] sympy.physics.optics.polarization (SymPy): ``phase_retarder(theta, delta)``,
    ``jones_vector(psi, chi)`` and ``jones_2_stokes`` (S3 of the opposite sign to this
    package's, so negated).
[Goldstein] D. H. Goldstein, Polarized Light, 3rd ed. (CRC Press, 2011), ch. 5-6: a linear
    retarder's Mueller matrix has first row and column (1, 0, 0, 0), so it keeps the degree of
    polarization of the light it retards.
[derived] Derived in the test's docstring.
"""

from __future__ import annotations

import json
import tomllib

import numpy as np
import pytest
import sympy as sp
from sympy.physics.optics import polarization as spol

import tolerance
from tolerance.errors import RetolError
from tolerance.montecarlo import Engine
from tolerance.plates import plate_retardance
from tolerance.spec import validate
from tolerance.study import Study

_th, _d, _psi, _chi = sp.symbols("theta delta psi chi", real=True)
_a, _b, _c, _e = sp.symbols("a b c e", real=True)
SYM_RET = sp.lambdify((_th, _d), spol.phase_retarder(_th, _d), "numpy")
SYM_JONES = sp.lambdify((_psi, _chi), spol.jones_vector(_psi, _chi), "numpy")
SYM_STOKES = sp.lambdify(
    (_a, _b, _c, _e), spol.jones_2_stokes(sp.Matrix([_a + sp.I * _b, _c + sp.I * _e])), "numpy"
)

SPEC = """title = "tabled input"
[wavelength]
start = "600nm"
stop = "700nm"
step = "10nm"
[source]
shape = "flat"
start = "600nm"
stop = "700nm"
[input]
{inp}
[goal]
state = "circular"
metric = "sphere_angle_deg"
max = 5
over = "spectrum"
[[candidate]]
name = "qwp"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "650nm"
axis_deg = 0
[tolerances]
{tol}
"""


def write(tmp_path, rows, name="in.csv", header="wavelength_nm,s1,s2,s3"):
    p = tmp_path / name
    p.write_text(
        header + "\n" + "\n".join(",".join(repr(float(v)) for v in r) for r in rows) + "\n"
    )
    return p


def study(tmp_path, rows=None, inp=None, tol=""):
    if inp is None:
        p = write(tmp_path, rows)
        inp = f'stokes_csv = "{p.name}"'
    return validate(tomllib.loads(SPEC.format(inp=inp, tol=tol)), "s.toml", base_dir=tmp_path)


@pytest.mark.parametrize(
    "tol",
    [
        "input_azimuth_deg = { sigma = 1 }",
        # the crystal-cut error and tilt act in this kernel branch as in the plate kernel
        "input_azimuth_deg = { sigma = 1 }\ncut_deg = { sigma = 3 }\ntilt_deg = { sigma = 4 }",
    ],
)
def test_constant_table_is_the_fixed_input(tmp_path, tol):
    """A table holding linear 45 deg at every wavelength gives the results of ``azimuth_deg =
    45`` (another arithmetic path, so to 1e-12), the input-azimuth tolerance turning it alike."""
    a = study(tmp_path, inp="azimuth_deg = 45", tol=tol)
    b = study(tmp_path, rows=[(590, 0, 1, 0), (710, 0, 1, 0)], tol=tol)
    ga = tolerance.run(a, samples=512, seed=2)
    gb = tolerance.run(b, samples=512, seed=2)
    np.testing.assert_allclose(gb["pass_metric"], ga["pass_metric"], atol=1e-12)
    np.testing.assert_allclose(gb["nominal_stokes"], ga["nominal_stokes"], atol=1e-12)
    assert float(gb["yield"][0]) == float(ga["yield"][0])
    assert Study.from_dict(json.loads(b.to_json())) == b


def test_varying_input_against_sympy(tmp_path):
    """[sympy] Rows at 600 and 700 nm: linear 30 deg, and elliptical (azimuth 60, ellipticity
    10 deg) with P = 0.8.  At each grid wavelength the table is interpolated linearly in
    s1, s2, s3; the output is P times the Stokes vector of phase_retarder(0, delta(lambda))
    acting on jones_vector(psi, chi) of the interpolated state's direction [Goldstein], with
    delta the real quartz plate's retardance (tolerance.plates.plate_retardance)."""

    def s_of(psi, chi, p):
        return p * np.array(
            [
                np.cos(2 * chi) * np.cos(2 * psi),
                np.cos(2 * chi) * np.sin(2 * psi),
                np.sin(2 * chi),
            ]
        )

    s600 = s_of(np.radians(30), 0.0, 1.0)
    s700 = s_of(np.radians(60), np.radians(10), 0.8)
    st = study(tmp_path, rows=[(600, *s600), (700, *s700)])
    eng = Engine(st, samples=512, seed=1)
    case = eng.case(0)
    nom = eng.nominal(case)
    wl = eng.grid
    for i, lam in enumerate(wl):
        f = (lam - 600) / 100
        s = (1 - f) * s600 + f * s700
        p = np.linalg.norm(s)
        psi = 0.5 * np.arctan2(s[1], s[0])
        chi = 0.5 * np.arcsin(s[2] / p)
        # sympy's jones_vector(psi, chi) has S3 of the opposite sign: hand it -chi
        E = np.asarray(SYM_JONES(psi, -chi), dtype=complex).ravel()
        delta = float(plate_retardance(case.plate, lam, extrapolate=True))
        out = np.asarray(SYM_RET(0.0, delta), dtype=complex) @ E
        ref = np.asarray(SYM_STOKES(out[0].real, out[0].imag, out[1].real, out[1].imag), float)
        ref = ref.ravel()
        ref = ref[1:] / ref[0] * p
        ref[2] = -ref[2]
        np.testing.assert_allclose(nom.stokes[i], ref, atol=1e-9, err_msg=f"{lam} nm")


def test_partial_polarization_kept_at_every_wavelength(tmp_path):
    """[Goldstein] An ideal retarder keeps P: rows with P = 0.5 and 0.9 give outputs of those
    lengths at the ends, and the interpolated length between."""
    a = 0.5 * np.array([0.6, 0.8, 0.0])
    b = 0.9 * np.array([0.0, 0.6, 0.8])
    st = study(tmp_path, rows=[(600, *a), (700, *b)])
    eng = Engine(st, samples=512, seed=1)
    nom = eng.nominal(eng.case(0))
    f = (eng.grid - 600) / 100
    expect = np.linalg.norm((1 - f)[:, None] * a + f[:, None] * b, axis=1)
    np.testing.assert_allclose(np.linalg.norm(nom.stokes, axis=1), expect, atol=1e-12)


@pytest.mark.parametrize(
    "rows,header,problem",
    [
        ([(600, 0, 1)], "wavelength_nm,s1,s2", "expected 4 columns"),
        ([(600, 0, 1, 0.5), (700, 0, 1, 0)], None, "degree of polarization"),
        ([(600, 0, 1, 0), (600, 1, 0, 0)], None, "repeats the wavelength"),
        ([(610, 0, 1, 0), (700, 0, 1, 0)], None, "covers 610–700 nm"),
        ([(600, float("nan"), 1, 0), (700, 0, 1, 0)], None, "not finite"),
        ([(600, 0, 1, 0)], None, "1 data row"),
    ],
)
def test_bad_files_one_line(tmp_path, rows, header, problem):
    p = write(tmp_path, rows, header=header or "wavelength_nm,s1,s2,s3")
    with pytest.raises(RetolError) as ei:
        study(tmp_path, inp=f'stokes_csv = "{p.name}"')
    msg = str(ei.value)
    assert "\n" not in msg and problem in msg and "[input]" in msg


def test_table_excludes_other_input_keys(tmp_path):
    p = write(tmp_path, [(600, 0, 1, 0), (700, 0, 1, 0)])
    with pytest.raises(RetolError) as ei:
        study(tmp_path, inp=f'stokes_csv = "{p.name}"\nazimuth_deg = 10')
    assert "\n" not in str(ei.value) and "[input].azimuth_deg" in str(ei.value)
    with pytest.raises(RetolError) as ei:
        study(tmp_path, inp='stokes_csv = "missing.csv"')
    assert "\n" not in str(ei.value) and "stokes_csv" in str(ei.value)


def test_constant_table_with_a_drifting_laser(tmp_path):
    """The lines' path: a drifting laser line reads the table at each sample's own wavelength;
    a constant table still gives the fixed input's results (to 1e-12), a goal over the
    spectrum judging the line."""
    laser = '[source]\nshape = "laser"\ncenter = "650nm"\ndrift = { sigma = "2nm" }\n'
    flat = '[source]\nshape = "flat"\nstart = "600nm"\nstop = "700nm"\n'
    p = write(tmp_path, [(590, 0.6, 0.8, 0), (710, 0.6, 0.8, 0)])
    psi = float(0.5 * np.degrees(np.arctan2(0.8, 0.6)))
    out = []
    for inp in (f"azimuth_deg = {psi!r}", f'stokes_csv = "{p.name}"'):
        text = SPEC.format(inp=inp, tol="input_azimuth_deg = { sigma = 1 }").replace(flat, laser)
        st = validate(tomllib.loads(text), "s.toml", base_dir=tmp_path)
        eng = Engine(st, samples=1024, seed=4)
        out.append(eng.pass_values(eng.case(0))[1])
    np.testing.assert_allclose(out[1], out[0], atol=1e-12)
