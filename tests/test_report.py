"""Figures, summary table and self-contained HTML report of a results grid.

The grids come from small real engine runs of an invented scenario (``tests/gridfactory.py``),
so they follow the schema the engine really makes.

Outside references the checks lean on:

- W3C, "Portable Network Graphics (PNG) Specification (Second Edition)", W3C Recommendation,
  2003 (= ISO/IEC 15948:2004), section 5.2: the 8-byte PNG signature 89 50 4E 47 0D 0A 1A 0A.
- L. Masinter, "The 'data' URL scheme", RFC 2397, IETF, 1998: ``data:[<mediatype>][;base64],``.
- ISO 32000-1:2008, "Document management — Portable document format — Part 1: PDF 1.7",
  section 7.5.2: a PDF file begins with the header ``%PDF-``.
- Y. Shafranovich, "Common Format and MIME Type for Comma-Separated Values (CSV) Files",
  RFC 4180, IETF, 2005: a header line, then one record per line with the same fields.
- IEC 60825-1:2014, "Safety of laser products — Part 1: Equipment classification and
  requirements"; ANSI Z136.1-2022, "American National Standard for Safe Use of Lasers": the two
  standards the laser caution must defer to.
- E. Hecht, "Optics", 5th ed., Pearson, 2017, section 8.13 (Stokes parameters; section number
  from memory): S3 > 0 for right-circular light in the clockwise-looking-toward-the-source
  convention used by the project; linear light at azimuth ψ has (s1, s2) = (cos 2ψ, sin 2ψ).
- M. Born and E. Wolf, "Principles of Optics", 7th ed., Cambridge University Press, 1999,
  section 1.4.2 (section number from memory): the polarization ellipse with tan χ = ∓b/a and
  s3 = sin 2χ on the Poincaré sphere, so an axial ratio b/a = m at the pole's side is the circle
  s3 = 2m/(1 + m²).
- The fidelity of a pure state s to a goal g, (1 + s·g)/2, is the intensity an ideal analyzer
  passing g transmits (Malus's law on the sphere; common practice); an extinction ratio is the
  ratio of that intensity to the crossed analyzer's, f/(1 − f) (common practice).
- R. G. Newcombe, "Two-sided confidence intervals for the single proportion: comparison of
  seven methods", Statistics in Medicine 17 (1998) 857–872: the Wilson score interval the grid
  schema names (the 0/20 example value below is from memory).
"""

from __future__ import annotations

import base64
import csv
import html
import io
import json
import re

import numpy as np
import pytest
from click.testing import CliRunner
from gridfactory import engine_grid as synthetic_grid

from tolerance import plots
from tolerance.errors import RetolError
from tolerance.report import check_writable, write_report

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # W3C PNG spec, 2003, section 5.2
N = 3


@pytest.fixture(scope="module")
def grid():
    return synthetic_grid(n_candidates=N, n_samples=200)


@pytest.fixture(scope="module")
def small():
    """One candidate, one wavelength: the narrow-band (laser) case."""
    return synthetic_grid(n_candidates=1, n_samples=60, broadband=False)


@pytest.fixture(scope="module")
def written(grid, tmp_path_factory):
    out = tmp_path_factory.mktemp("rep") / "out"
    path = write_report(grid, out, command="retol report results/grid.nc")
    return path, path.read_text(encoding="utf-8")


@pytest.fixture
def fast_figures(monkeypatch):
    """Only the cheapest figure, for tests about folders rather than pictures."""
    monkeypatch.setattr(plots, "figure_names", lambda grid: ["yield"])


# ----------------------------------------------------------------------------- the grid factory


def test_synthetic_grid_follows_the_schema(grid):
    for name in ("candidate", "wavelength", "quantile", "sample", "tolerance_name", "stokes",
                 "layer", "temperature", "tilt", "tilt_azimuth"):
        assert name in grid.coords
        # CF: text coordinates and variables carry no units
        assert ("units" in grid[name].attrs) != (grid[name].dtype.kind in "OUS")
        assert "long_name" in grid[name].attrs
    for name, var in grid.data_vars.items():
        assert ("units" in var.attrs) != (var.dtype.kind in "OUS"), name
        assert "long_name" in var.attrs, name
    assert grid["metric_quantile"].dims == ("candidate", "quantile", "wavelength")
    assert grid["design_stokes"].dims == ("candidate", "sample", "stokes")
    norms = np.linalg.norm(grid["design_stokes"].values, axis=-1)
    np.testing.assert_allclose(norms, 1.0, atol=1e-12)  # pure states: |s| = 1 (common practice)
    assert abs(grid["source_weight"].sum() - 1) < 1e-12
    assert sorted(grid["rank"].values) == list(range(1, N + 1))
    json.loads(grid.attrs["spec"])
    json.loads(grid.attrs["material_sources"])


def test_yield_interval_is_wilson():
    # Wilson interval for 0 successes in 20 trials: 0–0.1611 (Newcombe 1998, from memory)
    from tolerance.montecarlo import wilson

    lo, hi = wilson(0, 20, 0.95)
    assert lo == 0.0
    assert hi == pytest.approx(0.1611, abs=5e-4)


# ----------------------------------------------------------------------------- figures

EXPECTED_AXES = {  # per candidate count n: how many axes each figure has
    "metric_bands": lambda n: 2 * n,  # each panel + its twin axis for the source spectrum
    "p05_overlay": lambda n: 1,
    "retardance_bands": lambda n: n,
    "yield_chart": lambda n: 1,
    "sensitivity_chart": lambda n: n,
    "poincare_views": lambda n: 3 * n,  # two projections and a zoom per candidate
    "environment_maps": lambda n: 1 + 2 * n,  # temperature line + a polar map and colour bar each
}


@pytest.mark.parametrize("name", sorted(EXPECTED_AXES))
def test_figure_functions_return_figures_with_their_axes(grid, name):
    from matplotlib.figure import Figure

    fig = getattr(plots, name)(grid)
    assert isinstance(fig, Figure)
    assert len(fig.axes) == EXPECTED_AXES[name](N)


def test_figures_of_a_single_line_without_tolerances_or_maps(small):
    g = small.isel(tolerance_name=[]).drop_vars(
        ["retardance_error_temperature", "retardance_error_tilt"])
    assert len(plots.metric_bands(g).axes) == 2
    assert len(plots.retardance_bands(g).axes) == 1
    sens = plots.sensitivity_chart(g)
    assert len(sens.axes) == 1
    assert "no tolerances" in " ".join(t.get_text() for t in sens.axes[0].texts)
    env = plots.environment_maps(g)
    assert len(env.axes) == 1
    assert "environment" not in plots.figure_names(g)
    assert "environment" in plots.figure_names(small)


def test_poincare_draws_at_most_2000_states_per_candidate():
    g = synthetic_grid(n_candidates=1, n_samples=2600, broadband=False)
    fig = plots.poincare_views(g)
    for ax in fig.axes:
        drawn = sum(len(col.get_offsets()) for col in ax.collections)
        assert 0 < drawn <= plots.MAX_SPHERE_POINTS


def test_goal_state_on_the_sphere_follows_the_handedness_convention(grid):
    # Right-circular is S3 = +1, left-circular S3 = -1 (Hecht, Optics, sec. 8.13; project
    # convention S3 = 2 Im(Ex Ey*) > 0 clockwise looking toward the source).
    np.testing.assert_allclose(plots.goal_stokes(grid), [0, 0, 1])
    g = grid.copy()
    spec = json.loads(g.attrs["spec"])
    spec["goal"]["handedness"] = "left"
    g.attrs["spec"] = json.dumps(spec)
    np.testing.assert_allclose(plots.goal_stokes(g), [0, 0, -1])
    # linear at azimuth 30 deg: (cos 60, sin 60, 0) (Hecht, Optics, sec. 8.13)
    spec["goal"] = {"state": "linear", "azimuth": 30.0}
    g.attrs["spec"], g.attrs["goal_state"] = json.dumps(spec), "linear"
    np.testing.assert_allclose(plots.goal_stokes(g), [0.5, np.sqrt(3) / 2, 0], atol=1e-12)
    g.attrs["goal_state"] = "[0, 1, 0]"
    np.testing.assert_allclose(plots.goal_stokes(g), [0, 1, 0])


def test_save_figures_writes_each_format(small, tmp_path, monkeypatch):
    monkeypatch.setattr(plots, "figure_names", lambda grid: ["yield", "environment"])
    written = plots.save_figures(small, tmp_path / "figs", formats=("png", "svg", "pdf"))
    assert set(written) == set(plots.figure_names(small))
    for paths in written.values():
        png, svg, pdf = (p.read_bytes() for p in paths)
        assert png.startswith(PNG_SIGNATURE)  # W3C PNG spec, 2003, section 5.2
        assert b"<svg" in svg[:2000]
        assert pdf.startswith(b"%PDF-")  # ISO 32000-1:2008, section 7.5.2


def test_unknown_format_is_a_user_error_naming_the_choices(small, tmp_path):
    with pytest.raises(RetolError) as err:
        plots.save_figures(small, tmp_path, formats=("png", "bmp"))
    assert err.value.field == "--format"
    for fmt in ("png", "svg", "pdf"):
        assert fmt in str(err.value)
    with pytest.raises(RetolError, match="--format"):
        write_report(small, tmp_path / "out", formats=("tiff",))
    assert not (tmp_path / "out").exists()


# ----------------------------------------------------------------------------- report files


def test_report_writes_html_summary_and_figures(written, grid):
    path, _ = written
    out = path.parent
    assert path.name == "report.html"
    assert (out / "summary.csv").is_file()
    pngs = sorted(p.name for p in (out / "figures").iterdir())
    assert pngs == sorted(f"{n}.png" for n in plots.figure_names(grid))
    assert not [p for p in out.parent.iterdir() if ".partial-" in p.name]


def test_report_html_is_self_contained(written, grid):
    _, text = written
    # no reference to anything outside the file (RFC 2397 data: URIs only)
    refs = re.findall(r"""\b(?:src|href)\s*=\s*["']?([^"'\s>]*)""", text, flags=re.I)
    assert all(r.startswith("data:") or r.startswith("#") for r in refs), refs
    assert not re.search(r"""(?:src|href)\s*=\s*["']?\s*(?:https?:)?//""", text, flags=re.I)
    assert not re.search(r"<script|<link|<iframe|<object|@import|url\(", text, flags=re.I)
    imgs = re.findall(r"<img\b[^>]*>", text)
    assert len(imgs) == len(plots.figure_names(grid))
    for tag in imgs:
        m = re.search(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', tag)
        assert m, tag[:80]
        assert base64.b64decode(m.group(1), validate=True).startswith(PNG_SIGNATURE)
    assert "@media print" in text


def test_report_html_content(written, grid):
    _, raw = written
    text = html.unescape(re.sub(r"<[^>]+>", " ", raw))
    text = re.sub(r"\s+", " ", text)
    # the laser caution defers to both standards and to the site's officer
    assert "IEC 60825-1" in text and "ANSI Z136.1" in text
    assert "laser safety officer" in text
    assert "back-reflections" in text and "isolator" in text
    # reproducibility: software version, seed, exact command
    assert re.search(r'<td id="seed">\s*3\s*</td>', raw)
    assert grid.attrs["command"] in text
    assert "retol report results/grid.nc" in text
    assert f"retol {grid.attrs['version']}" in text
    # the spec as written, then the normalised JSON folded away below it
    pretty = json.dumps(json.loads(grid.attrs["spec"]), indent=2, ensure_ascii=False)
    assert html.escape(pretty, quote=True) in raw
    toml_at = raw.index('<pre id="spec-toml">' + html.escape(grid.attrs["spec_toml"], quote=True))
    details_at = raw.index('<details id="spec-details">')
    assert toml_at < details_at < raw.index('<pre id="spec">')
    # candidates, ranking reasons, dominant tolerance, materials, assumptions
    for c in range(N):
        assert str(grid["candidate"].values[c]) in text
        assert str(grid["reason"].values[c]) in text
    assert "Dominant tolerance" in text and "thickness" in text
    assert "quartz" in text and "Ghosh" in text  # the material data and their source
    assert "incoherently" in text
    assert "the materials' reference temperature" in text
    assert "Wilson score" in text


def test_summary_csv_has_one_row_per_candidate(written, grid):
    path, _ = written
    with (path.parent / "summary.csv").open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))  # RFC 4180: header line, then one record per line
    assert len(rows) == N
    assert list(rows[0])[:4] == ["rank", "name", "construction", "meets_goal"]
    assert "p05_worst_extinction_db" in rows[0]  # the goal metric named in the column
    by_name = {r["name"]: r for r in rows}
    for c, name in enumerate(grid["candidate"].values):
        row = by_name[name]
        assert float(row["yield"]) == pytest.approx(float(grid["yield"].values[c]), rel=1e-5)
        assert float(row["yield_low"]) <= float(row["yield"]) <= float(row["yield_high"])
        assert int(row["rank"]) == int(grid["rank"].values[c])
        assert row["dominant"] == grid["dominant"].values[c]
        p05 = float(grid["worst_metric_quantile"].sel(quantile=0.05).values[c])
        assert float(row["p05_worst_extinction_db"]) == pytest.approx(p05, rel=1e-5)
    th = grid["layer_thickness"].values[2]  # the achromat: one numeric column per layer
    row = by_name[grid["candidate"].values[2]]
    assert float(row["layer1_thickness_um"]) == pytest.approx(th[0], abs=1e-3)  # 6 digits
    assert float(row["layer2_thickness_um"]) == pytest.approx(th[1], abs=1e-3)


# ----------------------------------------------------------------------------- folders


def test_existing_report_is_refused_without_force(written, grid):
    path, text = written
    with pytest.raises(RetolError) as err:
        write_report(grid, path.parent)
    assert err.value.field == "--out"
    assert "use --force or another folder" in str(err.value)
    assert path.read_text(encoding="utf-8") == text
    with pytest.raises(RetolError, match="--force"):
        check_writable(path.parent)
    assert check_writable(path.parent, force=True) == path.parent


def test_folder_holding_only_the_run_grid_is_accepted(small, tmp_path, fast_figures):
    out = tmp_path / "run"
    out.mkdir()
    (out / "grid.nc").write_bytes(b"grid")
    check_writable(out)
    write_report(small, out)
    # .retol-manifest.json lists the files retol wrote (tolerance.publish)
    assert sorted(p.name for p in out.iterdir()) == [".retol-manifest.json", "figures", "grid.nc",
                                                    "report.html", "summary.csv"]
    assert (out / "grid.nc").read_bytes() == b"grid"


def test_force_replaces_the_previous_report_whole(small, tmp_path, fast_figures):
    out = tmp_path / "out"
    write_report(small, out, formats=("svg",))
    assert [p.name for p in (out / "figures").iterdir()] == ["yield.svg"]
    write_report(small, out, formats=("png",), force=True)
    assert [p.name for p in (out / "figures").iterdir()] == ["yield.png"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_unwritable_parent_is_a_user_error(small, tmp_path):
    blocker = tmp_path / "afile"
    blocker.write_text("not a folder")
    with pytest.raises(RetolError) as err:
        write_report(small, blocker / "sub" / "out")
    assert err.value.field == "--out"
    with pytest.raises(RetolError, match="is a file"):
        write_report(small, blocker)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["afile"]


def test_nothing_half_written_when_building_fails(small, tmp_path, fast_figures, monkeypatch):
    import tolerance.report as report

    def broken(*args, **kwargs):
        raise RuntimeError("boom")

    monkeypatch.setattr(report, "build_html", broken)
    with pytest.raises(RuntimeError):
        write_report(small, tmp_path / "new")
    kept = tmp_path / "kept"
    kept.mkdir()
    (kept / "grid.nc").write_bytes(b"grid")
    with pytest.raises(RuntimeError):
        write_report(small, kept)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["kept"]
    assert [p.name for p in kept.iterdir()] == ["grid.nc"]


def test_a_dataset_that_is_not_a_grid_is_refused(tmp_path):
    import xarray as xr

    with pytest.raises(RetolError) as err:
        write_report(xr.Dataset(), tmp_path / "out")
    assert err.value.field == "grid"


# ----------------------------------------------------------------------------- command line


@pytest.fixture
def saved_grid(small, tmp_path):
    run = tmp_path / "run"
    run.mkdir()
    path = run / "grid.nc"
    small.to_netcdf(path, engine="h5netcdf")
    return path


def test_cli_report_writes_next_to_the_grid_and_refuses_twice(saved_grid, fast_figures):
    from tolerance.cli.main import cli

    runner = CliRunner()
    res = runner.invoke(cli, ["report", str(saved_grid)])
    assert res.exit_code == 0, res.output
    out = saved_grid.parent
    assert (out / "report.html").is_file() and (out / "summary.csv").is_file()
    assert "report.html" in res.output
    again = runner.invoke(cli, ["report", str(saved_grid)])
    assert again.exit_code != 0
    assert "--out" in again.output and "use --force or another folder" in again.output
    assert "Traceback" not in again.output
    forced = runner.invoke(cli, ["report", str(saved_grid), "--force", "--json",
                                 "--format", "svg", "--format", "pdf"])
    assert forced.exit_code == 0, forced.output
    files = json.loads(forced.output)
    assert sorted(p.rsplit("/", 1)[-1] for p in files["figures"]) == ["yield.pdf", "yield.svg"]


def test_cli_report_to_another_folder_round_trips_the_grid(saved_grid, tmp_path, fast_figures):
    from tolerance.cli.main import cli

    out = tmp_path / "elsewhere"
    res = CliRunner().invoke(cli, ["report", str(saved_grid), "--out", str(out)])
    assert res.exit_code == 0, res.output
    text = (out / "report.html").read_text(encoding="utf-8")
    assert "qwp-zero" in text and "IEC 60825-1" in text
    assert not (saved_grid.parent / "report.html").exists()


def test_cli_report_user_errors(saved_grid, tmp_path):
    from tolerance.cli.main import cli

    runner = CliRunner()
    bad = runner.invoke(cli, ["report", str(saved_grid), "--format", "bmp"])
    assert bad.exit_code != 0
    assert "--format" in bad.output and "png, svg, pdf" in bad.output
    missing = runner.invoke(cli, ["report", str(tmp_path / "nope.nc")])
    assert missing.exit_code != 0 and "GRID" in missing.output
    junk = tmp_path / "junk.nc"
    junk.write_text("not a grid")
    res = runner.invoke(cli, ["report", str(junk), "--out", str(tmp_path / "o")])
    assert res.exit_code != 0 and "GRID" in res.output
    assert "Traceback" not in res.output + bad.output + missing.output


# ----------------------------------------------------------------------------- review findings


def _text(raw):
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", raw)))


def _cells(raw, header):
    """The text of the cells under ``header`` in the first table that has that column."""
    for table in re.findall(r"<table>.*?</table>", raw, flags=re.S):
        heads = [_text(h).strip() for h in re.findall(r"<th[^>]*>(.*?)</th>", table)]
        if header in heads:
            k = heads.index(header)
            rows = re.findall(r"<tr[^>]*>(.*?)</tr>", table.split("</thead>", 1)[1], flags=re.S)
            return [_text(re.findall(r"<td[^>]*>(.*?)</td>", r)[k]).strip() for r in rows]
    raise AssertionError(f"no column {header!r}")


def test_one_laser_caution_box_in_the_reports_own_words(written, grid):
    _, raw = written
    assert raw.count('class="caution"') == 1
    assert raw.count("IEC 60825-1") == 1
    assert raw.count("eyewear") == 1  # one box, the caution for this source
    text = _text(raw)
    # IEC 60825-1:2014 and ANSI Z136.1-2022 (module docstring), local rules, the LSO
    for part in ("IEC 60825-1", "ANSI Z136.1", "local rules", "laser safety officer",
                 "predicts polarization states only"):
        assert part in text


def test_dimensionless_units_are_not_printed_as_1(tmp_path, fast_figures):
    from matplotlib.figure import Figure

    g = synthetic_grid(n_candidates=1, n_samples=40, broadband=False)
    g.attrs.update(metric_units="1", goal_min=0.9, goal_metric="fidelity",
                   metric_long_name="fidelity to the goal state")
    for name in ("nominal_metric", "metric_quantile", "worst_metric", "nominal_worst"):
        g[name].attrs["units"] = "1"
    raw = write_report(g, tmp_path / "out").read_text(encoding="utf-8")
    text = _text(raw)
    assert "≥ 0.9 over" in text and "0.9 1" not in text
    assert "[1]" not in text
    fig = plots.metric_bands(g)
    assert isinstance(fig, Figure)
    labels = [t.get_text() for leg in fig.legends for t in leg.get_texts()]
    assert "goal ≥ 0.9" in labels
    assert all("[1]" not in ax.get_ylabel() for ax in fig.axes)
    assert plots.p05_overlay(g).axes[0].get_ylabel() == "5th percentile"


def test_dop_column_has_four_decimals(written):
    _, raw = written
    cells = _cells(raw, "DOP, nominal")
    assert len(cells) == N
    assert all(re.fullmatch(r"\d\.\d{4}", c) for c in cells), cells


def test_broadband_state_columns_only_for_a_broadband_source(written, small, tmp_path,
                                                             fast_figures):
    _, raw = written
    assert _cells(raw, "Axial ratio, spectrum, nominal")
    assert _cells(raw, "Extinction, spectrum, nominal [dB]")
    narrow = write_report(small, tmp_path / "n").read_text(encoding="utf-8")
    assert "Axial ratio, spectrum" not in narrow


def test_goal_over_the_spectrum_shows_the_pass_metric_and_its_p05(tmp_path, fast_figures):
    g = synthetic_grid(n_candidates=2, n_samples=80, over="spectrum")
    path = write_report(g, tmp_path / "out")
    raw = path.read_text(encoding="utf-8")
    nominal = _cells(raw, "Nominal (spectrum) [dB]")
    p05 = _cells(raw, "5th pct (spectrum) [dB]")
    assert len(nominal) == len(p05) == 2
    with (path.parent / "summary.csv").open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))  # RFC 4180
    by_name = {r["name"]: r for r in rows}
    for c, name in enumerate(g["candidate"].values):
        row = by_name[name]
        want = float(g["nominal_spectral_metric"].values[c])
        assert float(row["nominal_pass_extinction_db"]) == pytest.approx(want, rel=1e-5)
        q05 = float(np.quantile(g["pass_metric"].values[c], 0.05))
        assert float(row["p05_pass_extinction_db"]) == pytest.approx(q05, rel=1e-5)
    assert "depolarization-aware" not in raw  # rank_yield equals yield here


def test_summary_pass_columns_follow_the_band_goal(written, grid):
    path, _ = written
    with (path.parent / "summary.csv").open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))  # RFC 4180
    by_name = {r["name"]: r for r in rows}
    for c, name in enumerate(grid["candidate"].values):
        row = by_name[name]
        assert float(row["nominal_pass_extinction_db"]) == pytest.approx(
            float(grid["nominal_worst"].values[c]), rel=1e-5)
        assert row["p05_pass_extinction_db"] == row["p05_worst_extinction_db"]
        assert float(row["rank_yield"]) == pytest.approx(float(grid["yield"].values[c]))


def test_a_depolarization_aware_ranking_is_noted(tmp_path, fast_figures):
    g = synthetic_grid(n_candidates=2, n_samples=60, over="spectrum")
    g["rank_yield"] = g["rank_yield"] * 0.5
    raw = write_report(g, tmp_path / "out").read_text(encoding="utf-8")
    assert "depolarization-aware yield" in _text(raw)
    shown = _cells(raw, "Yield used for ranking")
    order = np.argsort(g["rank"].values)
    assert shown == [f"{100 * float(g['rank_yield'].values[c]):.1f} %" for c in order]


def test_old_grid_without_spec_text_shows_the_json_openly(tmp_path, fast_figures):
    g = synthetic_grid(n_candidates=1, n_samples=40, broadband=False, spec_toml="")
    raw = write_report(g, tmp_path / "out").read_text(encoding="utf-8")
    assert "spec-toml" not in raw and "<details" not in raw
    assert '<pre id="spec">' in raw


def test_p05_title_is_wrapped_to_fit(grid):
    g = grid.copy()
    g.attrs["metric_long_name"] = ("axial ratio b/a of the output, signed negative for the "
                                   "wrong hand, judged at every wavelength of the band")
    fig = plots.p05_overlay(g)
    ax = fig.axes[0]
    title = ax.get_title(loc="left")
    assert "wrong hand" in title
    assert max(len(line) for line in title.split("\n")) <= 90
    # drawn inside the figure, not clipped at its right edge
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    renderer = FigureCanvasAgg(fig).get_renderer()
    drawn = ax.findobj(lambda o: hasattr(o, "get_text") and o.get_text() == title)
    assert drawn
    assert all(t.get_window_extent(renderer).x1 <= fig.bbox.x1 for t in drawn)


def test_temperature_map_marks_the_nominal_temperature(grid):
    fig = plots.environment_maps(grid)
    ax = fig.axes[0]
    verticals = [ln for ln in ax.get_lines()
                 if len(set(np.atleast_1d(ln.get_xdata()))) == 1
                 and float(np.atleast_1d(ln.get_xdata())[0]) == grid.attrs["nominal_temperature_c"]]
    assert verticals
    assert "reference temperature" in plots.FIGURES["environment"].help


def test_polar_colour_bars_have_few_compact_ticks(grid):
    fig = plots.environment_maps(grid)
    bars = [ax for ax in fig.axes if ax.name != "polar" and ax is not fig.axes[0]]
    assert len(bars) == N
    for cax in bars:
        lo, hi = cax.get_xlim()
        ticks = [t for t in cax.get_xticks() if lo <= t <= hi]
        assert 2 <= len(ticks) <= 5
        labels = [t.get_text() for t in cax.get_xticklabels() if t.get_text()]
        assert all(len(s) <= 7 for s in labels), labels


def test_poincare_zoom_projects_on_the_plane_at_the_goal(grid):
    # right-circular goal (0, 0, 1): the tangent plane is the s1-s2 plane (Hecht, sec. 8.13)
    fig = plots.poincare_views(grid)
    zoom = fig.axes[2]  # the first row is the best-ranked candidate
    assert (zoom.get_xlabel(), zoom.get_ylabel()) == ("s1", "s2")
    st = grid["design_stokes"].isel(candidate=plots.rank_order(grid)[0]).values
    near = st[st[:, 2] > 0]
    pts = np.concatenate([col.get_offsets() for col in zoom.collections])
    np.testing.assert_allclose(np.sort(pts[:, 0]), np.sort(near[:, 0]), atol=1e-12)
    (x0, x1), (y0, y1) = zoom.get_xlim(), zoom.get_ylim()
    assert x0 <= pts[:, 0].min() and pts[:, 0].max() <= x1
    assert y0 <= pts[:, 1].min() and pts[:, 1].max() <= y1
    assert x1 - x0 < 0.5  # a zoom, not the whole disc
    # a linear goal at 0 deg is (1, 0, 0); its tangent plane is spanned by s2 and s3
    u, v, labels = plots._tangent_basis(np.array([1.0, 0.0, 0.0]))
    assert labels == ("s2", "s3")
    np.testing.assert_allclose([u, v], [[0, 1, 0], [0, 0, 1]])


def test_goal_limit_circle_on_the_sphere():
    g = synthetic_grid(n_candidates=1, n_samples=20, broadband=False)
    goal = np.array([0.0, 0.0, 1.0])
    # fidelity (1 + s.g)/2 >= 0.98  <=>  s.g >= 0.96 (common practice)
    g.attrs.update(goal_metric="fidelity", goal_min=0.98)
    assert plots._goal_cos_limit(g, goal) == pytest.approx(0.96)
    # extinction f/(1 - f) >= 100 (20 dB)  <=>  f >= 100/101 (common practice)
    g.attrs.update(goal_metric="extinction_db", goal_min=20.0)
    assert plots._goal_cos_limit(g, goal) == pytest.approx(2 * 100 / 101 - 1)
    # axial ratio b/a = tan(chi) >= 0.9 <=> s3 = sin(2 chi) >= 2*0.9/1.81 (Born & Wolf 1.4.2)
    g.attrs.update(goal_metric="axial_ratio", goal_min=0.9)
    chi = np.arctan(0.9)
    assert plots._goal_cos_limit(g, goal) == pytest.approx(np.sin(2 * chi))


def test_cli_report_shows_figure_progress_on_a_terminal(saved_grid, monkeypatch):
    from tolerance.cli import run as run_cli
    from tolerance.cli.main import cli

    monkeypatch.setattr(plots, "figure_names", lambda grid: ["yield", "p05_overlay"])
    monkeypatch.setattr(run_cli, "stderr_is_terminal", lambda: True)
    res = CliRunner().invoke(cli, ["report", str(saved_grid)])
    assert res.exit_code == 0, res.output
    assert "figure 1/2 (yield)" in res.stderr and "figure 2/2 (p05_overlay)" in res.stderr
    assert "figure 1/2" not in res.stdout
    # not a terminal (a pipe, a log): no progress
    monkeypatch.setattr(run_cli, "stderr_is_terminal", lambda: False)
    res = CliRunner().invoke(cli, ["report", str(saved_grid), "--force"])
    assert res.exit_code == 0 and "figure 1/2" not in res.stderr


def test_figures_keep_their_layout_after_the_first_draw(small):
    """The constrained layout is solved once; later saves reuse it (cheaper, same picture)."""
    from matplotlib.layout_engine import ConstrainedLayoutEngine

    fig = plots.FIGURES["yield"].payload(small)
    assert not isinstance(fig.get_layout_engine(), ConstrainedLayoutEngine)
    before = [ax.get_position().bounds for ax in fig.axes]
    plots.render(fig, io.BytesIO(), "png")
    assert [ax.get_position().bounds for ax in fig.axes] == before
