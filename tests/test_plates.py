"""Plate constructions: thicknesses, targets, crossings and input checks.

Sources
-------
[practice] Common practice / vendor catalogues, from memory: a true zero-order crystal-quartz
    quarter-wave plate for 632.8 nm is about 17.5 um thick; a multi-order plate gives m + W waves
    at its design wavelength; a compound (two-plate) zero-order retarder uses two plates of one
    crystal with crossed axes whose thickness difference sets the retardance.
[Beckers1971] J. M. Beckers, "Achromatic linear retarders," Appl. Opt. 10, 973-975 (1971): two
    crystals with crossed axes, thicknesses chosen so the retardance is the same at two wavelengths
    (or stationary at one).
[Ghosh1999] G. Ghosh, Opt. Commun. 163, 95-102 (1999): quartz indices, recomputed here.
[crystal optics] A uniaxial crystal's optic axis is the slow axis when n_e > n_o (positive:
    quartz, MgF2) and the fast axis when n_e < n_o (negative: sapphire, calcite); common practice.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from tolerance.dispersion import get_material
from tolerance.errors import OutOfRangeError, RetolError
from tolerance.plates import (
    CONSTRUCTIONS,
    design_plate,
    equivalent_retardance,
    layer_retardances,
    plate_jones,
    plate_retardance,
)
from tolerance.polarization import retarder_jones


def in_waves(plate, wl, **kw):
    return np.asarray(plate_retardance(plate, wl, **kw)) / (2 * np.pi)


def ghosh_quartz_dn(lam_nm):
    """n_e - n_o of quartz from [Ghosh1999]'s coefficients, recomputed."""
    l2 = (lam_nm / 1e3) ** 2

    def n(A, B, C, D, E):
        return math.sqrt(1 + A + B * l2 / (l2 - C) + D * l2 / (l2 - E))

    return n(0.28851804, 1.09509924, 1.02101864e-2, 1.15662475, 100.0) - n(
        0.28604141, 1.07044083, 1.00585997e-2, 1.10202242, 100.0
    )


def test_every_construction_is_covered():
    # Guard: a new construction must get a test here.
    assert set(CONSTRUCTIONS) == {
        "zero-order", "multi-order", "compound", "achromatic", "film", "stack"
    }


def test_zero_order_quartz_quarter_wave_thickness():
    # [practice] ~17.5 um for a zero-order quartz QWP at 632.8 nm (from memory).
    p = design_plate("zero-order", "quartz", 0.25, 632.8)
    d = p.layers[0].thickness_um
    assert d == pytest.approx(17.5, abs=0.1)
    # exactly W lambda / dn with [Ghosh1999] recomputed
    assert d == pytest.approx(0.25 * 632.8e-3 / ghosh_quartz_dn(632.8), rel=1e-10)
    assert float(in_waves(p, 632.8)) == pytest.approx(0.25, abs=1e-12)
    assert p.construction == "zero-order" and p.waves == 0.25 and p.design_nm == 632.8


@pytest.mark.parametrize("order, w", [(0, 0.25), (5, 0.5), (10, 0.25), (27, 0.75)])
def test_multi_order_gives_m_plus_waves(order, w):
    # [practice] m + W waves at the design wavelength.
    p = design_plate("multi-order", "quartz", w, 632.8, order=order)
    assert float(in_waves(p, 632.8)) == pytest.approx(order + w, abs=1e-9)
    zero = design_plate("zero-order", "quartz", w, 632.8)
    assert p.layers[0].thickness_um == pytest.approx(
        zero.layers[0].thickness_um * (order + w) / w, rel=1e-12
    )
    assert p.details["order"] == order


def test_multi_order_bad_order():
    for bad in (None, -1, 2.5):
        with pytest.raises(RetolError) as exc:
            design_plate("multi-order", "quartz", 0.25, 632.8, order=bad)
        assert "order" in str(exc.value)


@pytest.mark.parametrize("name", ["quartz", "mgf2", "sapphire"])
def test_compound_plate(name):
    # [practice] two plates of one crystal, crossed; their difference sets the target.
    p = design_plate("compound", name, 0.25, 632.8, axis_deg=10.0, thick_plate_um=1000.0)
    a, b = p.layers
    assert a.thickness_um == pytest.approx(1000.0)
    assert a.axis_deg == pytest.approx(10.0)
    assert (b.axis_deg - a.axis_deg) % 180.0 == pytest.approx(90.0)  # crossed
    zero = design_plate("zero-order", name, 0.25, 632.8)
    assert a.thickness_um - b.thickness_um == pytest.approx(zero.layers[0].thickness_um, rel=1e-10)
    assert p.details["difference_um"] == pytest.approx(zero.layers[0].thickness_um, rel=1e-10)
    assert float(in_waves(p, 632.8)) == pytest.approx(0.25, abs=1e-9)
    assert p.aligned()
    # The Jones matrix of the crossed pair equals a single quarter-wave retarder at 10 deg.
    np.testing.assert_allclose(plate_jones(p, 632.8), retarder_jones(np.pi / 2, 10.0), atol=1e-9)


def test_compound_bad_input():
    with pytest.raises(RetolError) as exc:
        design_plate("compound", "quartz", 0.25, 632.8)
    assert "thick_plate" in str(exc.value)
    with pytest.raises(RetolError) as exc:
        design_plate("compound", "quartz", 0.25, 632.8, thick_plate_um=10.0)  # < 17.5 um
    assert "thick_plate" in str(exc.value) and "thicker" in str(exc.value)
    with pytest.raises(RetolError):
        design_plate("compound", "quartz", 0.25, 632.8, thick_plate_um=-1000.0)


@pytest.mark.parametrize("match", [(450.0, 650.0), (500.0, 800.0)])
def test_achromatic_two_wavelength_match(match):
    # [Beckers1971] quartz + MgF2, crossed: target exact at both matching wavelengths.
    p = design_plate("achromatic", "quartz", 0.25, 550.0, partner="mgf2", match_nm=list(match))
    np.testing.assert_allclose(in_waves(p, np.array(match)), 0.25, atol=1e-10)
    assert {la.material.name for la in p.layers} == {"quartz", "mgf2"}
    a, b = p.layers
    # two positive crystals: crossed
    assert (b.axis_deg - a.axis_deg) % 180.0 == pytest.approx(90.0)
    assert all(la.thickness_um > 0 for la in p.layers)
    # far flatter than a zero-order quartz plate over the band
    band = np.linspace(match[0], match[1], 41)
    zero = design_plate("zero-order", "quartz", 0.25, 550.0)
    assert np.ptp(in_waves(p, band)) < 0.3 * np.ptp(in_waves(zero, band))


def test_achromatic_value_and_slope():
    # [Beckers1971] stationary retardance: d(delta in waves)/d lambda = 0 at the design.
    p = design_plate("achromatic", "quartz", 0.25, 550.0, partner="mgf2")
    assert float(in_waves(p, 550.0)) == pytest.approx(0.25, abs=1e-10)
    h = 0.05
    slope = float(in_waves(p, 550.0 + h) - in_waves(p, 550.0 - h)) / (2 * h)
    zero = design_plate("zero-order", "quartz", 0.25, 550.0)
    zero_slope = float(in_waves(zero, 550.0 + h) - in_waves(zero, 550.0 - h)) / (2 * h)
    assert abs(zero_slope) > 1e-4  # a zero-order plate's slope, per nm
    assert abs(slope) < 1e-4 * abs(zero_slope)
    # curvature: a maximum or minimum at the design, so both sides move the same way
    lo, hi = float(in_waves(p, 500.0)) - 0.25, float(in_waves(p, 600.0)) - 0.25
    assert lo * hi > 0


def test_achromatic_bad_input():
    with pytest.raises(RetolError) as exc:
        design_plate("achromatic", "quartz", 0.25, 550.0)
    assert "partner" in str(exc.value)
    with pytest.raises(RetolError):
        design_plate("achromatic", "quartz", 0.25, 550.0, partner="quartz")
    with pytest.raises(RetolError):
        design_plate("achromatic", "quartz", 0.25, 550.0, partner="mgf2", match_nm=[500, 500])
    with pytest.raises(OutOfRangeError):
        design_plate("achromatic", "quartz", 0.25, 190.0, partner="mgf2")


@pytest.mark.parametrize("name", ["polycarbonate", "pva"])
def test_film_by_retardance(name):
    # Films are sold by retardance at a reference wavelength (common practice).
    p = design_plate("film", name, None, 550.0, retardance_nm=137.5)
    r_nm = float(plate_retardance(p, 550.0)) / (2 * np.pi) * 550.0
    assert r_nm == pytest.approx(137.5, rel=1e-12)
    assert float(in_waves(p, 550.0)) == pytest.approx(0.25, rel=1e-12)
    q = design_plate("film", name, 0.25, 550.0)
    assert q.layers[0].thickness_um == pytest.approx(p.layers[0].thickness_um, rel=1e-12)
    with pytest.raises(RetolError):
        design_plate("film", name, None, 550.0, retardance_nm=-5.0)


def test_stack():
    layers = [
        {"material": "quartz", "thickness_um": 100.0, "axis_deg": 0.0},
        {"material": "quartz", "thickness": "82.5um", "axis_deg": 90.0},
        {"material": "mgf2", "thickness_um": 30.0, "axis_deg": 0.0},
    ]
    p = design_plate("stack", axis_deg=15.0, layers=layers, waves=None)
    assert [la.axis_deg for la in p.layers] == [15.0, 105.0, 15.0]
    assert [la.thickness_um for la in p.layers] == pytest.approx([100.0, 82.5, 30.0])
    # aligned stack: retardance along the fast axis is the signed sum of the layers'
    d = layer_retardances(p, 632.8)
    assert float(plate_retardance(p, 632.8)) == pytest.approx(float(d[0] - d[1] + d[2]))
    # and the Jones product agrees (mod 2 pi) through the equivalent retardance
    dr = float(plate_retardance(p, 632.8)) % (2 * np.pi)
    dr = min(dr, 2 * np.pi - dr)
    assert float(equivalent_retardance(plate_jones(p, 632.8))) == pytest.approx(dr, abs=1e-9)
    with pytest.raises(RetolError):
        design_plate("stack", layers=[])
    with pytest.raises(RetolError) as exc:
        design_plate("stack", layers=[{"thickness_um": 1.0}])
    assert "layers[0].material" in str(exc.value)
    with pytest.raises(RetolError):
        design_plate("stack", layers=[{"material": "quartz", "thickness_um": -1.0}])


@pytest.mark.parametrize("w", [0.0, -0.25, float("nan")])
@pytest.mark.parametrize("construction", ["zero-order", "multi-order", "compound", "achromatic"])
def test_non_positive_waves_rejected(construction, w):
    keys = {"order": 3, "thick_plate_um": 1000.0, "partner": "mgf2"}
    with pytest.raises(RetolError) as exc:
        design_plate(construction, "quartz", w, 632.8, **keys)
    assert "waves" in str(exc.value)


def test_unknown_construction():
    with pytest.raises(RetolError) as exc:
        design_plate("zero order", "quartz", 0.25, 632.8)
    msg = str(exc.value)
    assert "construction" in msg and "zero-order" in msg
    for name in CONSTRUCTIONS:
        assert name in msg


def test_missing_material_or_design():
    with pytest.raises(RetolError):
        design_plate("zero-order", None, 0.25, 632.8)
    with pytest.raises(RetolError):
        design_plate("zero-order", "quartz", 0.25, None)
    with pytest.raises(OutOfRangeError):
        design_plate("zero-order", "quartz", 0.25, 3000.0)


@pytest.mark.parametrize(
    "name, negative", [("sapphire", True), ("calcite", True), ("quartz", False), ("mgf2", False)]
)
def test_fast_axis_and_optic_axis(name, negative):
    # [crystal optics] optic axis = fast axis for negative crystals, slow (+90) for positive.
    p = design_plate("zero-order", name, 0.25, 632.8, axis_deg=20.0)
    la = p.layers[0]
    assert la.axis_deg == 20.0
    assert la.optic_axis_deg == (20.0 if negative else 110.0)
    # Physical check of the bookkeeping: tilting in the plane that contains the optic axis lowers
    # the retardance, tilting across it raises it (see test_retardance small-angle limits).
    d0 = float(plate_retardance(p, 632.8))
    along = float(plate_retardance(p, 632.8, aoi_deg=5.0, incidence_azimuth_deg=la.optic_axis_deg))
    across = float(
        plate_retardance(p, 632.8, aoi_deg=5.0, incidence_azimuth_deg=la.optic_axis_deg + 90.0)
    )
    assert along < d0 < across


def test_plate_temperature_uses_each_layer():
    # A compound plate's thermal drift is that of its net retardance (gamma applies per layer).
    p = design_plate("compound", "quartz", 0.25, 632.8, thick_plate_um=1000.0)
    q = get_material("quartz")
    d0 = float(plate_retardance(p, 632.8))
    d1 = float(plate_retardance(p, 632.8, temperature_c=q.reference_temperature_c + 5.0))
    assert d1 - d0 == pytest.approx(5.0 * q.retardance_temperature_coefficient * d0, rel=1e-9)


@pytest.mark.parametrize("delta", [0.0, 0.3, np.pi / 2, 2.5, np.pi])
def test_equivalent_retardance_of_a_linear_retarder(delta):
    assert float(equivalent_retardance(retarder_jones(delta, 33.0))) == pytest.approx(
        delta, abs=1e-7
    )
