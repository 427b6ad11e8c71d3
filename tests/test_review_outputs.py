"""Outputs a design review can trust: no false recommendation, true assumptions, readable figures.

Each test here failed on the code before this change (issue "Outputs a design review can trust").

Sources
-------
[Wilson1927] E. B. Wilson, "Probable inference, the law of succession, and statistical
    inference," J. Am. Stat. Assoc. 22, 209-212 (1927): for 0 successes in n trials the upper
    score bound is z²/(n + z²), 3.84e-4 for n = 10 000 at 95 % (z = 1.95996).
[Machado2009] G. M. Machado, M. M. Oliveira, L. A. F. Fernandes, "A physiologically-based model
    for simulation of color vision deficiency," IEEE TVCG 15(6), 1291-1298 (2009): the
    simulation matrices for severity 1.0 (their table), applied to linear RGB.
[IEC61966] IEC 61966-2-1:1999, sRGB: the transfer function and the RGB-to-XYZ matrix (D65).
[CIE15] CIE 15:2004, Colorimetry: CIELAB and the CIE 1976 colour difference ΔE*ab.
[Okabe2008] M. Okabe, K. Ito, "Color Universal Design (CUD)", J*FLY (2008): the palette.
[CF] CF Metadata Conventions 1.10, section 2.6.1: the ``Conventions`` global attribute.
[pint] pint's default unit registry parses each ``units`` attribute.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import tolerance
from tolerance.cli.main import cli
from tolerance.decision import pct_interval, rank, separation_warning, yield_text
from tolerance.errors import RetolError
from tolerance.montecarlo import wilson
from tolerance.plots import PALETTE
from tolerance.spec import loads

#: Half-wave plates for a 1064 nm laser that cannot reach 60 dB extinction (an invented case).
ALL_FAIL = """title = "Invented 1064 nm half-wave study where nothing passes"
[wavelength]
start = "1064nm"
stop = "1064nm"
step = "1nm"
[source]
shape = "laser"
center = "1064nm"
[goal]
state = "linear"
metric = "extinction_db"
min = 60
azimuth_deg = 90
{goal_extra}
[[candidate]]
name = "hwp-film"
construction = "film"
material = "polycarbonate"
waves = 0.5
design = "1064nm"
axis_deg = 45
[[candidate]]
name = "hwp-multi"
construction = "multi-order"
material = "quartz"
order = 3
waves = 0.5
design = "1064nm"
axis_deg = 45
[candidate.tolerances]
thickness_um = {{ sigma = 0.3333333333333333 }}
[tolerances]
thickness_um = {{ sigma = 0.5 }}
clocking_deg = {{ uniform = 1.0 }}
crossing_deg = {{ uniform = 0.5 }}
temperature_c = {{ low = 30, high = 40 }}
[run]
samples = 1000
seed = 1
"""


def all_fail_text(goal_extra="yield = 0.99"):
    return ALL_FAIL.format(goal_extra=goal_extra)


@pytest.fixture(scope="module")
def fail_grid():
    return tolerance.run(loads(all_fail_text(), "fail.toml"))


# ----------------------------------------------------------------------------- the goal


def test_goal_yield_is_validated_with_a_one_line_error():
    with pytest.raises(RetolError, match=r"\[goal\]\.yield.*fraction"):
        loads(all_fail_text("yield = 95"), "fail.toml")
    with pytest.raises(RetolError, match=r"\[goal\]\.yield"):
        loads(all_fail_text('yield = "high"'), "fail.toml")


def test_goal_yield_round_trips_and_is_absent_when_unset():
    s = loads(all_fail_text(), "fail.toml")
    assert s.goal.required_yield == 0.99
    assert s.to_dict()["goal"]["yield"] == 0.99
    assert type(s).from_dict(s.to_dict()) == s
    unset = loads(all_fail_text(""), "fail.toml")
    assert "yield" not in unset.to_dict()["goal"]  # older studies' JSON is unchanged


def test_no_candidate_meets_the_goal_in_the_grid(fail_grid):
    assert fail_grid.attrs["recommended"] == ""
    assert fail_grid["meets_goal"].values.tolist() == [0, 0]
    assert "99 %" in fail_grid.attrs["goal_rule"]


def test_report_says_no_candidate_meets_the_goal_first(fail_grid, tmp_path):
    from tolerance.report import write_report

    raw = write_report(fail_grid, tmp_path / "r").read_text(encoding="utf-8")
    body = raw[raw.index("</header>") :]
    assert "Recommended" not in raw
    assert body.index('id="no-candidate"') < body.index('class="caution"')
    assert "No candidate meets the goal" in raw and "The closest is" in raw


def test_run_fail_if_none_exits_3_and_json_has_recommended_null(tmp_path):
    spec = tmp_path / "fail.toml"
    spec.write_text(all_fail_text(), encoding="utf-8")
    runner = CliRunner()
    res = runner.invoke(
        cli, ["run", str(spec), "--out", str(tmp_path / "a"), "--no-report", "--fail-if-none"]
    )
    assert res.exit_code == 3, res.output
    assert "NO CANDIDATE MEETS THE GOAL" in res.output and "Closest: " in res.output
    res = runner.invoke(
        cli, ["run", str(spec), "--out", str(tmp_path / "b"), "--no-report", "--json"]
    )
    assert res.exit_code == 0
    doc = json.loads(res.output)
    assert doc["recommended"] is None
    assert [c["meets_goal"] for c in doc["candidates"]] == [False, False]
    assert doc["metric"] == {
        "name": "extinction_db",
        "unit": "dB",
        "long_name": doc["metric"]["long_name"],
    }
    sens = doc["candidates"][0]["sensitivity"]
    assert sens["crossing"]["applies"] is False and sens["crossing"]["yield_without"] is None
    assert sens["thickness"]["applies"] is True


def test_errors_are_json_under_json(tmp_path):
    spec = tmp_path / "bad.toml"
    spec.write_text(all_fail_text("yield = 2"), encoding="utf-8")
    res = CliRunner().invoke(cli, ["run", str(spec), "--json"])
    assert res.exit_code == 2
    err = json.loads(res.output)["error"]
    assert set(err) == {"field", "problem", "fix"} and "[goal].yield" in err["field"]


# ----------------------------------------------------------------------------- wording


def test_assumptions_state_the_absolute_range_overrides_and_round(fail_grid):
    from tolerance.report import assumptions

    text = " ".join(assumptions(fail_grid))
    assert "centre on" not in text
    assert "from 30 to 40 °C" in text and "absolute" in text
    assert "hwp-multi overrides" in text
    assert "0.3333333333" not in text and "0.3333" in text


def test_yield_interval_digits_show_the_bound_wilson():
    # 0 of 10 000: upper Wilson bound z²/(n + z²) = 3.84e-4 [Wilson1927]
    lo, hi = wilson(0, 10_000, 0.95)
    assert hi == pytest.approx(1.95996**2 / (10_000 + 1.95996**2), rel=1e-4)
    assert yield_text(0.0, lo, hi) == "0.00 % (0.00–0.04)"
    lo, hi = wilson(10_000, 10_000, 0.95)
    ys, ls, hs = pct_interval(1.0, lo, hi)
    assert ls != ys and ls == "99.96"


def test_terminal_header_follows_the_confidence(tmp_path):
    spec = tmp_path / "c.toml"
    spec.write_text(all_fail_text().replace("seed = 1", "seed = 1\nconfidence = 0.9"), "utf-8")
    res = CliRunner().invoke(cli, ["run", str(spec), "--out", str(tmp_path / "o"), "--no-report"])
    assert res.exit_code == 0, res.output
    assert "[90% CI]" in res.output and "95% CI" not in res.output


def test_ranking_reason_names_the_deciding_criterion_and_ties():
    # two candidates tied on yield and, within 0.001, on fidelity: acceptance decides
    ranks, reasons = rank(
        ["a", "b"],
        [0.97, 0.96],
        [0.95, 0.94],
        [0.98, 0.975],
        [0.99991, 0.99999],
        [3.0, 1.0],
        [0.01, 0.01],
    )
    assert ranks.tolist() == [1, 2]
    assert "ahead on acceptance half-angle (±3.00° vs ±1.00°)" in reasons[0]
    assert "spectral fidelity 0.999 tied" in reasons[0]
    assert "behind on acceptance half-angle" in reasons[1]
    assert "1.0000" not in reasons[1]


def test_warns_when_samples_cannot_separate_the_top_two():
    w = separation_warning(["a", "b"], [0.97, 0.96], [0.95, 0.94], [0.98, 0.975], [1, 2], 500)
    assert w and "500 samples cannot separate a and b" in w
    assert (
        separation_warning(["a", "b"], [1.0, 0.5], [0.99, 0.45], [1.0, 0.55], [1, 2], 500) is None
    )


def test_compact_table_fits_80_columns_and_wide_shows_all(tmp_path):
    spec = tmp_path / "w.toml"
    spec.write_text(all_fail_text(), encoding="utf-8")
    runner = CliRunner()
    res = runner.invoke(cli, ["run", str(spec), "--out", str(tmp_path / "a"), "--no-report"])
    table = [ln for ln in res.output.splitlines() if ln.startswith(("#", "-", "1 ", "2 "))]
    assert max(len(ln) for ln in table) <= 80
    res = runner.invoke(
        cli, ["run", str(spec), "--out", str(tmp_path / "b"), "--no-report", "--wide"]
    )
    assert "nominal DOP" in res.output and "dBover" not in res.output
    assert "60 dB over the band" in res.output


def test_not_applicable_tolerances_in_the_sensitivity_figure(fail_grid):
    from tolerance.plots import sensitivity_chart

    fig = sensitivity_chart(fail_grid)
    texts = [t.get_text() for ax in fig.axes for t in ax.texts]
    assert "not applicable" in texts  # crossing on single plates
    g = fail_grid.copy(deep=True)  # every yield within 98-100 %: the axis spans them, not 0-100
    g["sensitivity_alone"][:] = 0.995
    g["sensitivity_without"][:] = 0.99
    g["yield"][:] = 0.98
    lo, hi = sensitivity_chart(g).axes[0].get_xlim()
    assert 97 < lo and hi < 100.5


def test_summary_csv_is_numeric_with_a_column_per_layer(fail_grid, tmp_path):
    import csv

    from tolerance.report import write_summary_csv

    path = write_summary_csv(fail_grid, tmp_path / "s.csv")
    rows = list(csv.DictReader(path.open(encoding="utf-8")))
    assert "layer1_thickness_um" in rows[0] and "thicknesses_um" not in rows[0]
    assert "p05_worst_extinction_db" in rows[0] and "yield_without_clocking" in rows[0]
    float(rows[0]["layer1_thickness_um"])
    assert rows[0]["yield_without_crossing"] == ""  # not applicable
    assert [r["rank"] for r in rows] == ["1", "2"]


def test_safety_caution_follows_the_source(fail_grid):
    from tolerance.report import safety_text
    from tolerance.safety import caution

    text = safety_text(fail_grid)
    assert "IEC 60825-1" in text and "eyewear" in text and "safety officer" in text
    assert "hwp-film" in text and "damage threshold" in text  # polymer film, laser source
    led = caution("mixture", [("z", "zero-order", ["quartz"])])
    assert "IEC 62471" in led and "eyewear" in led and "damage" not in led


# ----------------------------------------------------------------------------- the grid


def test_grid_has_cf_conventions_and_pint_units(fail_grid):
    pint = pytest.importorskip("pint")
    ureg = pint.UnitRegistry()
    assert fail_grid.attrs["Conventions"].startswith("CF-")  # [CF] 2.6.1
    assert "S3" in fail_grid.attrs["polarization_conventions"]
    for name, var in {**fail_grid.data_vars, **fail_grid.coords}.items():
        if var.dtype.kind in "OUS":
            assert "units" not in var.attrs, name
        elif "units" in var.attrs:
            ureg.parse_units(var.attrs["units"])  # raises on "waves"
    assert fail_grid["nominal_retardance"].attrs["display_units"] == "waves"


# ----------------------------------------------------------------------------- colour vision

#: [Machado2009] severity 1.0, linear RGB in, linear RGB out.
MACHADO = {
    "protanopia": [
        [0.152286, 1.052583, -0.204868],
        [0.114503, 0.786281, 0.099216],
        [-0.003882, -0.048116, 1.051998],
    ],
    "deuteranopia": [
        [0.367322, 0.860646, -0.227968],
        [0.280085, 0.672501, 0.047413],
        [-0.011820, 0.042940, 0.968881],
    ],
}
#: [IEC61966] linear sRGB to XYZ, D65 white.
SRGB_TO_XYZ = np.array(
    [[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]]
)
D65 = SRGB_TO_XYZ @ np.ones(3)


def _linear(hex_colour):
    v = np.array([int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)])
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)  # [IEC61966]


def _lab(rgb_linear):
    t = (SRGB_TO_XYZ @ np.clip(rgb_linear, 0, 1)) / D65
    d = 6 / 29
    f = np.where(t > d**3, np.cbrt(t), t / (3 * d * d) + 4 / 29)  # [CIE15]
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


@pytest.mark.parametrize("kind", sorted(MACHADO))
def test_palette_colours_stay_apart_for_dichromats(kind):
    m = np.array(MACHADO[kind])
    labs = [_lab(m @ _linear(c)) for c in PALETTE]
    worst = min(
        float(np.linalg.norm(labs[i] - labs[j]))
        for i in range(len(labs))
        for j in range(i + 1, len(labs))
    )
    # ΔE*ab ≥ 10: clearly distinct side by side (common practice; 2.3 is a just-noticeable
    # difference, from memory)
    assert worst >= 10.0, (kind, worst)


def test_the_old_palette_failed_the_same_check():
    old = ["#1d6a80", "#c2562f", "#6b4f96", "#7c8d24", "#c79a12", "#3b4d5c"]
    m = np.array(MACHADO["deuteranopia"])
    labs = [_lab(m @ _linear(c)) for c in old]
    worst = min(float(np.linalg.norm(labs[i] - labs[j])) for i in range(6) for j in range(i + 1, 6))
    assert worst < 10.0


def test_figures_follow_the_rank_order(fail_grid):
    from tolerance.plots import metric_bands

    fig = metric_bands(fail_grid)
    titles = [t for ax in fig.axes for t in (ax.get_title(loc=w) for w in ("left", "center")) if t]
    first = str(fail_grid["candidate"].values[int(np.argmin(fail_grid["rank"].values))])
    assert titles[0].startswith(first)


def test_report_path_is_importable():
    assert Path(tolerance.__file__).exists()


def test_readme_tells_the_truth_about_outputs(fail_grid):
    """README's statements on summary.csv, grid.nc units and the caution match the code."""
    import re

    from tolerance.report import csv_table
    from tolerance.safety import caution

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    text = " ".join(readme.split())
    metric = fail_grid.attrs["goal_metric"]
    header, _ = csv_table(fail_grid)
    for col in header:
        generic = re.sub(r"^layer\d+_", "layerK_", col)
        generic = re.sub(rf"^(nominal|p05)_(worst|pass)_{metric}$", r"\1_\2_METRIC", generic)
        generic = re.sub(r"^yield_(without|alone)_.*", r"yield_\1_TOL", generic)
        assert f"`{generic}`" in text, col
    # [pint] waves are stored as a count, shown as waves
    assert fail_grid["nominal_retardance"].attrs["units"] == "1"
    assert '`units = "1"`' in text and '`display_units = "waves"`' in text
    assert "Every variable carries `units`" not in text  # text variables carry none [CF]
    # the caution: the standard follows the source, the eyewear sentence stays
    assert "IEC 62471" in caution("flat") and "IEC 62471" in text
    assert "eyewear" in caution("flat") and "eyewear" in text
    assert "ISO 21254" in caution("sech2", [("f", "film", ("polycarbonate",))])
    assert "ISO 21254" in text
    assert "writes to `reports/demo/`, `retol demo NAME` to `reports/NAME/`" in text
