"""The command line of the physics core: ``retol materials``, ``retol plate``, ``retol state``.

Sources
-------
[Ghosh1999] G. Ghosh, Opt. Commun. 163, 95-102 (1999): quartz dispersion coefficients, recomputed
    here to check the printed indices.
[Hecht] E. Hecht, Optics (Addison-Wesley), table of uniaxial crystal indices at 589.3 nm
    (quartz 1.5443 / 1.5534; from memory).
[Etzel2000] S. M. Etzel, A. Rose, E. Wang, Appl. Opt. 39, 5796-5800 (2000): quartz
    gamma = -1.23e-4 /K.
[derived] Hand-derived results, as in test_retardance.py and test_polarization.py: a quarter-wave
    plate with fast axis theta and linear input alpha (0 < theta - alpha < 45) gives an ellipse on
    the fast axis with b/a = tan(theta - alpha), turning clockwise looking toward the source; with
    input at 45 deg to a plate's axes (fast axis 45, input 0) the output Stokes vector is
    (1, cos delta, 0, sin delta); small-angle tilt limits delta0 (1 - sin^2 i / (2 n_o^2)) in the
    plane containing the optic axis and delta0 (1 + sin^2 i / (2 n_o n_e)) across it.
[practice] A zero-order quartz quarter-wave plate at 632.8 nm is about 17.5 um thick (common
    practice, from memory).
"""

from __future__ import annotations

import json
import math

import pytest

GAMMA_QUARTZ = -1.23e-4  # [Etzel2000]


def ghosh(lam_nm, A, B, C, D, E):
    l2 = (lam_nm / 1e3) ** 2
    return math.sqrt(1 + A + B * l2 / (l2 - C) + D * l2 / (l2 - E))


def quartz_indices(lam_nm):
    """[Ghosh1999] n_o, n_e of quartz, recomputed."""
    return (
        ghosh(lam_nm, 0.28604141, 1.07044083, 1.00585997e-2, 1.10202242, 100.0),
        ghosh(lam_nm, 0.28851804, 1.09509924, 1.02101864e-2, 1.15662475, 100.0),
    )


def ok_json(result):
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def assert_user_error(result, *words):
    """Non-zero exit, one line naming the problem, no traceback."""
    assert result.exit_code != 0
    assert isinstance(result.exception, SystemExit), repr(result.exception)
    text = result.output
    assert "Traceback" not in text
    lines = [ln for ln in text.splitlines() if ln.startswith(("retol: error:", "Error:"))]
    assert len(lines) == 1, text
    for w in words:
        assert w in lines[0], lines[0]
    return lines[0]


# ----------------------------------------------------------------------------- help and materials


def test_help(invoke):
    r = invoke("--help")
    assert r.exit_code == 0
    for name in ("materials", "plate", "state"):
        assert name in r.output
    for sub in ("materials", "plate", "state"):
        assert invoke(sub, "--help").exit_code == 0


def test_materials_list(invoke):
    rows = ok_json(invoke("materials", "--json"))
    names = {r["name"] for r in rows}
    assert {"quartz", "calcite", "mgf2", "sapphire", "polycarbonate", "pva"} <= names
    for r in rows:
        assert {"name", "kind", "min_nm", "max_nm", "source"} <= set(r)
        assert 0 < r["min_nm"] < r["max_nm"]
        assert r["source"]
    q = next(r for r in rows if r["name"] == "quartz")
    assert q["kind"] == "positive uniaxial" and "Ghosh" in q["source"]
    text = invoke("materials")
    assert text.exit_code == 0 and "quartz" in text.output


def test_materials_show(invoke):
    rows = ok_json(invoke("materials", "show", "quartz", "--at", "589.3nm", "--at", "0.6328um",
                          "--json"))
    assert len(rows) == 2
    for r in rows:
        keys = {"material", "wavelength_nm", "temperature_c", "n_o", "n_e", "birefringence"}
        assert keys <= set(r)
        n_o, n_e = quartz_indices(r["wavelength_nm"])  # [Ghosh1999]
        assert r["n_o"] == pytest.approx(n_o, abs=1e-12)
        assert r["n_e"] == pytest.approx(n_e, abs=1e-12)
        assert r["birefringence"] == pytest.approx(n_e - n_o, abs=1e-12)
        assert r["temperature_c"] == 20.0
    assert [r["wavelength_nm"] for r in rows] == pytest.approx([589.3, 632.8])
    # [Hecht] handbook values at 589.3 nm, within one unit of the last printed digit
    assert rows[0]["n_o"] == pytest.approx(1.5443, abs=1e-4)
    assert rows[0]["n_e"] == pytest.approx(1.5534, abs=1e-4)
    text = invoke("materials", "show", "quartz", "--at", "589.3")
    assert text.exit_code == 0 and "Ghosh" in text.output


def test_materials_show_temperature(invoke):
    rows = ok_json(invoke("materials", "show", "quartz", "--at", "632.8nm", "--temperature", "30",
                          "--json"))
    n_o, n_e = quartz_indices(632.8)
    # effective birefringence dn (1 + gamma (T - 20)) [Etzel2000]
    assert rows[0]["birefringence"] == pytest.approx((n_e - n_o) * (1 + 10 * GAMMA_QUARTZ),
                                                     rel=1e-10)
    assert rows[0]["temperature_c"] == 30.0


def test_materials_show_user_file(invoke, tmp_path):
    p = tmp_path / "lab.csv"
    p.write_text("wavelength_nm,n_o,n_e\n500,1.5,1.51\n700,1.49,1.498\n")
    rows = ok_json(invoke("materials", "show", str(p), "--at", "600nm", "--json"))
    assert rows[0]["birefringence"] == pytest.approx(0.009)


# ----------------------------------------------------------------------------- plate


def test_plate_zero_order(invoke):
    out = ok_json(invoke("plate", "--material", "quartz", "--construction", "zero-order",
                         "--waves", "0.25", "--design", "632.8nm", "--from", "400nm", "--to",
                         "700nm", "--step", "10nm", "--json"))
    (layer,) = out["layers"]
    assert {"material", "thickness_um", "axis_deg"} <= set(layer)
    assert layer["material"] == "quartz" and layer["axis_deg"] == 0.0
    assert layer["thickness_um"] == pytest.approx(17.5, abs=0.1)  # [practice]
    table = out["table"]
    assert len(table) == 31
    assert table[0]["wavelength_nm"] == pytest.approx(400.0)
    assert table[-1]["wavelength_nm"] == pytest.approx(700.0)
    for row in table:
        assert {"wavelength_nm", "retardance_waves"} <= set(row)
        n_o, n_e = quartz_indices(row["wavelength_nm"])  # [Ghosh1999]
        expect = layer["thickness_um"] * 1e3 * (n_e - n_o) / row["wavelength_nm"]
        assert row["retardance_waves"] == pytest.approx(expect, rel=1e-10)
    at_design = invoke("plate", "--material", "quartz", "--waves", "0.25", "--design", "632.8nm",
                       "--json")
    assert ok_json(at_design)["table"][0]["retardance_waves"] == pytest.approx(0.25, abs=1e-12)
    text = invoke("plate", "--material", "quartz", "--design", "632.8nm")
    assert text.exit_code == 0 and "quartz" in text.output


def test_plate_order_thick_plate_partner_retardance(invoke):
    multi = ok_json(invoke("plate", "--material", "quartz", "--construction", "multi-order",
                           "--order", "10", "--waves", "0.25", "--design", "632.8nm", "--json"))
    assert multi["table"][0]["retardance_waves"] == pytest.approx(10.25, abs=1e-9)

    comp = ok_json(invoke("plate", "--material", "quartz", "--construction", "compound",
                          "--thick-plate", "1mm", "--design", "632.8nm", "--fast-axis", "5",
                          "--json"))
    a, b = comp["layers"]
    assert a["thickness_um"] == pytest.approx(1000.0)
    assert a["axis_deg"] == 5.0 and b["axis_deg"] == 95.0
    assert a["thickness_um"] - b["thickness_um"] == pytest.approx(17.5, abs=0.1)  # [practice]
    assert comp["table"][0]["retardance_waves"] == pytest.approx(0.25, abs=1e-9)

    achro = ok_json(invoke("plate", "--material", "quartz", "--construction", "achromatic",
                           "--partner", "mgf2", "--match", "450nm", "--match", "650nm",
                           "--design", "550nm", "--from", "450nm", "--to", "650nm", "--step",
                           "200nm", "--json"))
    assert [la["material"] for la in achro["layers"]] == ["quartz", "mgf2"]
    assert [r["retardance_waves"] for r in achro["table"]] == pytest.approx([0.25, 0.25], abs=1e-9)

    film = ok_json(invoke("plate", "--material", "polycarbonate", "--construction", "film",
                          "--retardance", "137.5nm", "--design", "550nm", "--json"))
    assert film["table"][0]["retardance_waves"] == pytest.approx(0.25, rel=1e-12)


def test_plate_out_of_range_and_extrapolate(invoke):
    args = ("plate", "--material", "quartz", "--design", "632.8nm", "--from", "1800nm", "--to",
            "2200nm", "--step", "100nm")
    assert_user_error(invoke(*args), "2200", "--extrapolate")
    r = invoke(*args, "--extrapolate", "--json")
    assert r.exit_code == 0
    assert "warning" in r.stderr and "2200" in r.stderr
    assert len(json.loads(r.stdout)["table"]) == 5


@pytest.mark.parametrize(
    "args, words",
    [
        (("plate", "--material", "unobtainium", "--design", "632.8nm"), ("unobtainium", "quartz")),
        (("plate", "--material", "quartz", "--design", "3000nm"), ("3000",)),
        (("plate", "--material", "quartz", "--design", "632.8nm", "--waves", "-0.25"), ("waves",)),
        (("plate", "--material", "quartz", "--design", "632.8nm", "--waves", "0"), ("waves",)),
        (("plate", "--material", "quartz", "--design", "abc nm"), ("abc nm",)),
        (("plate", "--material", "quartz", "--design", "632.8parsec"), ("unit",)),
        (("plate", "--material", "quartz", "--construction", "compound", "--design", "632.8nm"),
         ("thick",)),
        (("plate", "--material", "quartz", "--construction", "compound", "--thick-plate", "10um",
          "--design", "632.8nm"), ("thick",)),
        (("plate", "--material", "quartz", "--construction", "no-such", "--design", "632.8nm"),
         ("no-such",)),
        (("plate", "--material", "quartz", "--design", "632.8nm", "--from", "400nm"), ("--to",)),
        (("plate", "--material", "quartz", "--construction", "achromatic", "--partner", "mgf2",
          "--match", "450nm", "--design", "550nm"), ("--match",)),
        (("materials", "show", "unobtainium", "--at", "500nm"), ("unobtainium", "quartz")),
        (("materials", "show", "quartz", "--at", "3000nm"), ("3000", "--extrapolate")),
        (("materials", "show", "quartz", "--at", "abc nm"), ("abc nm",)),
        (("state", "--waves", "-1"), ("waves",)),
        (("state",), ("--waves",)),
        (("state", "--waves", "0.25", "--tilt", "5"), ("material",)),
        (("state", "--material", "quartz", "--design", "632.8nm", "--at", "abc nm"), ("abc nm",)),
    ],
)
def test_user_errors(invoke, args, words):
    assert_user_error(invoke(*args), *words)


def test_materials_show_extrapolate_warns(invoke):
    r = invoke("materials", "show", "quartz", "--at", "3000nm", "--extrapolate", "--json")
    assert r.exit_code == 0
    assert "warning" in r.stderr and "3000" in r.stderr
    assert "Traceback" not in r.output
    assert json.loads(r.stdout)[0]["wavelength_nm"] == 3000.0


# ----------------------------------------------------------------------------- state


def test_state_ideal_plate(invoke):
    out = ok_json(invoke("state", "--waves", "0.25", "--fast-axis", "30", "--input", "10",
                         "--json"))
    assert {"azimuth_deg", "ellipticity_angle_deg", "axial_ratio", "rotation", "stokes"} <= set(out)
    # [derived] theta - alpha = 20 deg: major axis on the fast axis, b/a = tan 20, clockwise
    assert out["azimuth_deg"] == pytest.approx(30.0, abs=1e-9)
    assert out["axial_ratio"] == pytest.approx(math.tan(math.radians(20.0)), abs=1e-12)
    assert out["ellipticity_angle_deg"] == pytest.approx(20.0, abs=1e-9)
    assert out["rotation"] == "clockwise"
    s0, s1, s2, s3 = out["stokes"]
    assert s0 == pytest.approx(1.0)
    assert s1 == pytest.approx(math.cos(math.radians(40)) * math.cos(math.radians(60)))
    assert s2 == pytest.approx(math.cos(math.radians(40)) * math.sin(math.radians(60)))
    assert s3 == pytest.approx(math.sin(math.radians(40)))
    other = ok_json(invoke("state", "--waves", "0.25", "--fast-axis", "30", "--input", "50",
                           "--json"))
    assert other["rotation"] == "counterclockwise"
    lin = ok_json(invoke("state", "--waves", "0.5", "--fast-axis", "30", "--input", "10",
                         "--json"))
    assert lin["rotation"] == "linear" and lin["azimuth_deg"] == pytest.approx(50.0)
    text = invoke("state", "--waves", "0.25", "--fast-axis", "30", "--input", "10")
    assert text.exit_code == 0 and "clockwise" in text.output


def real_state(invoke, *extra):
    return ok_json(invoke("state", "--material", "quartz", "--construction", "zero-order",
                          "--waves", "0.25", "--design", "632.8nm", "--fast-axis", "45",
                          "--input", "0", *extra, "--json"))


def retardance_from_stokes(out):
    """[derived] fast axis 45, input 0: S = (1, cos delta, 0, sin delta)."""
    _, s1, s2, s3 = out["stokes"]
    assert s2 == pytest.approx(0.0, abs=1e-12)
    return math.atan2(s3, s1)


def test_state_real_plate_at_design_and_off_design(invoke):
    out = real_state(invoke)
    assert out["rotation"] == "clockwise"
    assert out["axial_ratio"] == pytest.approx(1.0, abs=1e-9)
    assert retardance_from_stokes(out) == pytest.approx(math.pi / 2, abs=1e-9)
    # At 700 nm: delta scales as dn(700)/700 against dn(632.8)/632.8 [Ghosh1999]
    out = real_state(invoke, "--at", "700nm")
    no1, ne1 = quartz_indices(632.8)
    no2, ne2 = quartz_indices(700.0)
    expect = math.pi / 2 * ((ne2 - no2) / 700.0) / ((ne1 - no1) / 632.8)
    assert retardance_from_stokes(out) == pytest.approx(expect, rel=1e-9)


def test_state_real_plate_temperature(invoke):
    out = real_state(invoke, "--temperature", "30")
    # [Etzel2000] delta(T) = delta0 (1 + gamma (T - 20))
    assert retardance_from_stokes(out) == pytest.approx(math.pi / 2 * (1 + 10 * GAMMA_QUARTZ),
                                                        rel=1e-9)


@pytest.mark.parametrize("tilt", [2.0, 4.0])
def test_state_real_plate_tilt(invoke, tilt):
    # Quartz is positive: the optic axis is the slow axis, at 45 + 90 = 135 deg.
    n_o, n_e = quartz_indices(632.8)
    s2 = math.sin(math.radians(tilt)) ** 2
    along = retardance_from_stokes(real_state(invoke, "--tilt", tilt, "--tilt-azimuth", "135"))
    across = retardance_from_stokes(real_state(invoke, "--tilt", tilt, "--tilt-azimuth", "45"))
    d0 = math.pi / 2
    # [derived] small-angle limits; the next terms are O(sin^2 i) relative to the change
    assert along / d0 - 1 == pytest.approx(-s2 / (2 * n_o**2), rel=3 * s2 + 1e-3)
    assert across / d0 - 1 == pytest.approx(s2 / (2 * n_o * n_e), rel=3 * s2 + 1e-3)


def test_state_analyzer(invoke):
    # Half-wave plate turns 0 deg light to 90 deg; an analyzer at 90 passes it (capped ratio).
    out = ok_json(invoke("state", "--waves", "0.5", "--fast-axis", "45", "--input", "0",
                         "--analyzer", "90", "--json"))
    assert out["extinction_db"] > 100


# ----------------------------------------------------------------------------- stacks, help texts

STACK = ("--construction", "stack", "--layer", "quartz:1mm:0", "--layer", "quartz:982.5um:90")


def test_plate_stack_from_layers_matches_the_crossed_pair(invoke):
    # [derived] two quartz plates with crossed axes retard by (n_e - n_o)(d1 - d2)/lambda waves
    # along the first plate's axis; (n_e - n_o) recomputed from [Ghosh1999].
    out = ok_json(invoke("plate", *STACK, "--design", "632.8nm", "--from", "600nm",
                         "--to", "700nm", "--step", "50nm", "--json"))
    assert out["construction"] == "stack"
    assert [la["thickness_um"] for la in out["layers"]] == [1000.0, 982.5]
    assert [la["axis_deg"] for la in out["layers"]] == [0.0, 90.0]
    for row in out["table"]:
        n_o, n_e = quartz_indices(row["wavelength_nm"])
        expect = (n_e - n_o) * 17.5e3 / row["wavelength_nm"]
        assert row["retardance_waves"] == pytest.approx(expect, rel=1e-10)


def test_state_stack_from_layers(invoke):
    out = ok_json(invoke("state", *STACK, "--fast-axis", "45", "--input", "0", "--at", "632.8nm",
                         "--json"))
    n_o, n_e = quartz_indices(632.8)
    delta = 2 * math.pi * (n_e - n_o) * 17.5e3 / 632.8  # [derived], as above
    _, s1, s2, s3 = out["stokes"]
    # [derived] fast axis 45, input 0: S = (1, cos delta, 0, sin delta)
    assert (s1, s2, s3) == pytest.approx((math.cos(delta), 0.0, math.sin(delta)), abs=1e-9)


@pytest.mark.parametrize(
    "layer, words",
    [
        ("quartz:1000", ("--layer", "MATERIAL:THICKNESS:AXIS")),
        ("quartz:1000um:x", ("--layer", "axis")),
        ("quartz:1000um:nan", ("--layer", "finite")),
        ("quartzz:1000um:0", ("--layer", "quartzz", "quartz")),
        ("quartz:-3um:0", ("--layer", "positive")),
        ("quartz:3parsec:0", ("--layer", "unit")),
    ],
)
def test_stack_layer_errors_are_one_line(invoke, layer, words):
    r = invoke("plate", "--construction", "stack", "--layer", layer, "--design", "632.8nm")
    assert r.exit_code == 2
    assert_user_error(r, *words)


def test_stack_needs_layers_and_layers_need_a_stack(invoke):
    r = invoke("plate", "--construction", "stack", "--design", "632.8nm")
    assert r.exit_code == 2
    assert_user_error(r, "--layer", "at least one layer")
    r = invoke("plate", "--material", "quartz", "--design", "632.8nm", "--layer", "quartz:1um:0")
    assert r.exit_code == 2
    assert_user_error(r, "--layer", "zero-order")
    r = invoke("state", "--material", "quartz", *STACK, "--at", "632.8nm")
    assert r.exit_code == 2
    assert_user_error(r, "--material", "stack")
    r = invoke("plate", *STACK)
    assert r.exit_code == 2
    assert_user_error(r, "--design", "stack")


def test_help_texts_name_units_and_choices(invoke):
    plate_help = " ".join(invoke("plate", "--help").output.split())
    assert "--retardance LENGTH" in plate_help and "path difference" in plate_help
    assert "--step INTERVAL" in plate_help and "[default: 10nm]" in plate_help
    assert "--layer MATERIAL:THICKNESS:AXIS" in plate_help
    assert "--step INTERVAL" in " ".join(invoke("aim", "--help").output.split())
    for cmd in ("run", "demo", "report"):
        assert "--format [png|svg|pdf]" in invoke(cmd, "--help").output, cmd


def test_state_analyzer_at_the_cap_is_a_bound(invoke):
    # [derived] a half-wave plate at 45 deg turns 0 deg light to 90 deg: a pure state through
    # an ideal analyzer has an infinite ratio, capped at polarization.EXTINCTION_CAP_DB
    from tolerance.polarization import EXTINCTION_CAP_DB

    args = ("state", "--waves", "0.5", "--fast-axis", "45", "--input", "0", "--analyzer")
    text = invoke(*args, "90").output
    assert f"above {EXTINCTION_CAP_DB:g} dB" in text and "150.00" not in text
    text = invoke(*args, "0").output
    assert f"below -{EXTINCTION_CAP_DB:g} dB" in text
    out = ok_json(invoke(*args, "90", "--json"))
    assert out["extinction_db"] == EXTINCTION_CAP_DB and out["extinction_at_cap"] is True
    # [derived] off the cap: linear light at 2*40 = 80 deg against an analyzer at 90 deg,
    # Malus: ratio cos^2(10 deg) / sin^2(10 deg)
    out = ok_json(invoke("state", "--waves", "0.5", "--fast-axis", "40", "--input", "0",
                         "--analyzer", "90", "--json"))
    expect = 10 * math.log10(math.cos(math.radians(10)) ** 2 / math.sin(math.radians(10)) ** 2)
    assert out["extinction_db"] == pytest.approx(expect, rel=1e-12)
    assert out["extinction_at_cap"] is False
    assert f"{expect:.2f} dB" in invoke("state", "--waves", "0.5", "--fast-axis", "40", "--input",
                                        "0", "--analyzer", "90").output
