"""The faces branch of the Monte Carlo kernel against the numpy physics of tolerance.etalon.

Sources
-------
[etalon] tolerance.etalon.plate_jones_faces, itself checked in tests/test_etalon.py against the
    characteristic matrix of Born & Wolf (Principles of Optics, 7th ed., sec. 1.6) and a derived
    closed form of the retardance ripple; here the fused kernel must reproduce it.
"""

from __future__ import annotations

import numpy as np
import pytest

import tolerance
from tolerance.equivalent import coherency_matrix
from tolerance.errors import RetolError
from tolerance.etalon import FringeWarning, plate_jones_faces
from tolerance.montecarlo import Engine
from tolerance.polarization import jones_to_stokes, linear_jones
from tolerance.spec import loads
from tolerance.study import Study

SPEC = """
title = "faces"
[wavelength]
start = "620nm"
stop = "645nm"
step = "0.25nm"
[source]
shape = "gaussian"
center = "632.8nm"
fwhm = "5nm"
[goal]
state = "circular"
metric = "axial_ratio"
min = 0.9
[[candidate]]
name = "uncoated"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "632.8nm"
axis_deg = 45
faces = "uncoated"
[[candidate]]
name = "coated compound"
construction = "compound"
material = "quartz"
thick_plate = "300um"
waves = 0.25
design = "632.8nm"
axis_deg = 45
faces = { reflectance = 0.01 }
[[candidate]]
name = "air-gapped compound"
construction = "compound"
material = "quartz"
thick_plate = "300um"
waves = 0.25
design = "632.8nm"
axis_deg = 45
faces = "uncoated"
air_gap = true
[[candidate]]
name = "ideal"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "632.8nm"
axis_deg = 45
faces = "ideal"
[tolerances]
thickness_um = { sigma = 0.05 }
[run]
samples = 2000
seed = 5
"""


@pytest.fixture(scope="module")
def study():
    return loads(SPEC)


@pytest.mark.parametrize("index", [0, 1, 2, 3])
def test_nominal_stokes_match_numpy(study, index):
    eng = Engine(study, samples=64, seed=1)
    case = eng.case(index)
    nom = eng.nominal(case)
    cand = study.candidates[index]
    J = plate_jones_faces(
        cand.plate, eng.grid, cand.face_model, cand.air_gap,
        temperature_c=study.environment.temperature_c,
    )  # fmt: skip
    S = jones_to_stokes(J @ linear_jones(study.input.azimuth_deg))
    ref = S[..., 1:] / S[..., :1]
    np.testing.assert_allclose(nom.stokes, ref, rtol=0, atol=1e-10)


def test_faces_change_the_result_and_ideal_does_not(study):
    eng = Engine(study, samples=64, seed=1)
    a = eng.nominal(eng.case(0)).values[0]
    b = eng.nominal(eng.case(3)).values[0]
    ripple = (a - b) * 360.0  # [deg]
    assert 4.5 < np.max(abs(ripple)) < 5.3  # 2 arcsin R of quartz, see test_etalon
    # ideal faces written out are the default: same candidate record as no faces key
    assert study.candidates[3].faces is None


def test_spec_round_trip(study):
    d = study.to_dict()
    assert d["candidates"][0]["faces"] == "uncoated"
    assert d["candidates"][1]["faces"] == {"reflectance": 0.01}
    assert d["candidates"][2]["air_gap"] is True
    assert "faces" not in d["candidates"][3]
    again = Study.from_dict(d)
    assert again.candidates[:3] == study.candidates[:3]


def test_run_with_faces(study):
    ds = tolerance.run(study, samples=2000, seed=3)
    assert np.all(np.isfinite(ds["yield"].values))
    m = ds["nominal_mueller"]
    assert m.dims == ("candidate", "wavelength", "mueller_row", "mueller_column")
    assert m.shape[-2:] == (4, 4)
    # Cloude (Optik 75, 26 (1986)): the source average is realizable; Gil & Bernabeu: DI <= 1
    ev = np.linalg.eigvalsh(coherency_matrix(ds["nominal_broadband_mueller"].values))
    assert np.all(ev > -1e-12)
    di = ds["nominal_depolarization_index"].values
    assert np.all((di > 0) & (di <= 1 + 1e-12))


@pytest.mark.parametrize(
    "line, field",
    [
        ('faces = "shiny"', "faces"),
        ("faces = { reflectance = 2 }", "faces.reflectance"),
        ('air_gap = "yes"', "air_gap"),
    ],
)
def test_bad_faces_in_spec(line, field):
    text = SPEC.replace('faces = "ideal"', line)
    with pytest.raises(RetolError) as e:
        loads(text)
    assert field in e.value.field


def test_coarse_grid_warns_about_fringes():
    # fringe period of the 300 um compound pair 0.22 nm at 633 nm: a 0.25 nm step is coarse
    with pytest.warns(FringeWarning, match="undersamples"):
        loads(SPEC)


def test_faces_with_an_elliptical_input_are_refused_in_one_line():
    """The faces kernel takes a linear, fully polarized input only; other inputs are refused
    before any work rather than silently treated as linear."""
    from tolerance.errors import RetolError
    from tolerance.montecarlo import Engine
    from tolerance.spec import loads

    text = (
        '[wavelength]\nstart = "630nm"\nstop = "640nm"\nstep = "1nm"\n'
        '[source]\nshape = "laser"\ncenter = "635nm"\n[input]\nellipticity_deg = 10\n'
        '[goal]\nmin = 0.9\n[[candidate]]\nname = "bare"\nconstruction = "zero-order"\n'
        'material = "quartz"\nfaces = "uncoated"\n'
    )
    with pytest.raises(RetolError, match="linear, fully polarized"):
        Engine(loads(text, "f.toml"), samples=512)
