"""Tests of ``retol run`` (tolerance.cli.run): its JSON contract, output folder and safety rules.

The expected behaviour is the command's contract (notes/GRID.md; RetolError rules of the
project): a run writes OUT/grid.nc atomically, never overwrites results without --force, and a
user mistake gives one line on stderr, no traceback, a non-zero exit and no files.  The numbers
in the JSON are checked against the saved grid, not against the engine.

Sources
-------
- notes/GRID.md (this project's results-grid schema).
- S. M. Etzel, A. Rose, E. Wang, Appl. Opt. 39, 5796-5800 (2000): quartz retardance
  temperature coefficient about -1.23e-4 /K (recalled from memory, as carried by
  materials/quartz.toml).
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from tolerance.cli.main import cli
from tolerance.grid import load_grid

SPECS = Path(__file__).parent / "data" / "specs"
GOOD = SPECS / "qwp_780.toml"

ROW_KEYS = {"name", "yield", "yield_low", "yield_high", "nominal_worst", "p05_worst", "dominant",
            "nominal_dop", "temperature_coefficient_deg_per_k", "acceptance_half_angle_deg"}


def invoke(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=True)


def run_ok(*args):
    r = invoke("run", *args)
    assert r.exit_code == 0, (r.output, r.exception)
    return r


@pytest.fixture(scope="module")
def first_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("cli") / "x"
    r = run_ok(GOOD, "--samples", 2000, "--json", "--no-report", "--out", out)
    return r, out


def test_json_contract(first_run):
    r, out = first_run
    doc = json.loads(r.stdout)
    rows = doc["candidates"]
    assert [row["name"] for row in rows] == ["quartz zero-order", "quartz compound"]
    for row in rows:
        assert ROW_KEYS <= set(row), ROW_KEYS - set(row)
        assert 0.0 <= row["yield_low"] <= row["yield"] <= row["yield_high"] <= 1.0
        assert row["dominant"] in ("thickness", "clocking", "crossing", "tilt", "temperature",
                                   "input_azimuth", "none")
        assert row["p05_worst"] <= row["nominal_worst"] + 1e-12
        assert 0.99 < row["nominal_dop"] <= 1.0  # a single laser line stays polarized
        # Etzel, Rose & Wang (2000): about 90 deg x -1.23e-4 /K for a quartz quarter-wave
        assert row["temperature_coefficient_deg_per_k"] == pytest.approx(-0.01107, rel=0.05)
        assert row["acceptance_half_angle_deg"] > 0
    zo, co = rows
    # common practice: the compound plate's field of view is far narrower
    assert co["acceptance_half_angle_deg"] < zo["acceptance_half_angle_deg"] / 5


def test_json_agrees_with_the_saved_grid(first_run):
    r, out = first_run
    rows = json.loads(r.stdout)["candidates"]
    grid = out / "grid.nc"
    assert grid.is_file()
    ds = load_grid(grid)
    assert ds.sizes["sample"] == 2000 and ds.attrs["samples"] == 2000
    assert ds.attrs["seed"] == 7  # from the spec's [run]
    for row in rows:
        c = row["name"]
        assert row["yield"] == pytest.approx(float(ds["yield"].sel(candidate=c)))
        assert row["yield_low"] == pytest.approx(float(ds["yield_low"].sel(candidate=c)))
        assert row["nominal_worst"] == pytest.approx(float(ds["nominal_worst"].sel(candidate=c)))
        assert row["dominant"] == str(ds["dominant"].sel(candidate=c).values)
    assert not list(out.parent.glob(".x.part-*")), "temporary folder left behind"


def test_recorded_command_reproduces_the_run(first_run):
    """GRID.md: attrs['command'] is the exact command line that reproduces the run."""
    _, out = first_run
    cmd = load_grid(out / "grid.nc").attrs["command"]
    assert cmd.startswith("retol run ") and "qwp_780.toml" in cmd and "--samples" in cmd


def test_existing_results_need_force(first_run):
    _, out = first_run
    grid = out / "grid.nc"
    before = grid.read_bytes()
    mtime = grid.stat().st_mtime_ns
    r = invoke("run", GOOD, "--samples", 600, "--no-report", "--out", out)
    assert r.exit_code != 0
    assert isinstance(r.exception, SystemExit)
    assert "--force" in r.stderr and "Traceback" not in r.output
    assert grid.read_bytes() == before and grid.stat().st_mtime_ns == mtime
    # --force replaces it
    run_ok(GOOD, "--samples", 600, "--seed", 8, "--no-report", "--out", out, "--force")
    ds = load_grid(grid)
    assert ds.attrs["seed"] == 8 and ds.sizes["sample"] == 600
    assert grid.read_bytes() != before


def test_default_output_folder_is_reports_stem(tmp_path, monkeypatch):
    shutil.copy(GOOD, tmp_path / "my_study.toml")
    monkeypatch.chdir(tmp_path)
    r = run_ok("my_study.toml", "--samples", 512, "--no-report")
    grid = tmp_path / "reports" / "my_study" / "grid.nc"
    assert grid.is_file()
    assert "grid.nc" in r.stdout
    assert load_grid(grid).sizes["sample"] == 512


@pytest.mark.parametrize("spec", ["typo_key.toml", "bad_unit.toml"])
def test_malformed_spec_fails_in_one_line_and_writes_nothing(spec, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    out = tmp_path / "never"
    r = invoke("run", SPECS / spec, "--samples", 500, "--no-report", "--out", out)
    assert r.exit_code != 0
    assert isinstance(r.exception, SystemExit), r.exception  # handled, not a crash
    assert "Traceback" not in r.output
    lines = r.output.strip().splitlines()
    assert len(lines) == 1, lines
    assert spec in lines[0]
    assert not out.exists()
    assert list(tmp_path.iterdir()) == []


def test_default_folder_untouched_by_a_malformed_spec(tmp_path, monkeypatch):
    shutil.copy(SPECS / "typo_key.toml", tmp_path / "typo_key.toml")
    monkeypatch.chdir(tmp_path)
    r = invoke("run", "typo_key.toml", "--no-report")
    assert r.exit_code != 0
    assert not (tmp_path / "reports").exists()


def test_bad_options_fail_cleanly(tmp_path):
    r = invoke("run", GOOD, "--samples", 0, "--no-report", "--out", tmp_path / "z")
    assert r.exit_code != 0 and isinstance(r.exception, SystemExit)
    assert "--samples" in r.output and "Traceback" not in r.output
    assert not (tmp_path / "z").exists()
    r = invoke("run", tmp_path / "absent.toml", "--no-report", "--out", tmp_path / "z")
    assert r.exit_code != 0 and "absent.toml" in r.output
    assert not (tmp_path / "z").exists()


def test_the_installed_command_prints_no_traceback(tmp_path):
    """The real console script, in a fresh process: stderr carries one line, no traceback."""
    exe = Path(sys.executable).with_name("retol")
    if not exe.exists():
        pytest.skip("console script not installed next to this interpreter")
    p = subprocess.run([str(exe), "run", str(SPECS / "typo_key.toml"), "--out",
                        str(tmp_path / "o"), "--no-report"], capture_output=True, text=True,
                       timeout=120)
    assert p.returncode != 0
    assert "Traceback" not in p.stderr and p.stdout == ""
    assert len(p.stderr.strip().splitlines()) == 1
    assert "thicknes_um" in p.stderr
    assert not (tmp_path / "o").exists()


def test_run_with_report(tmp_path):
    """When the report module is present, a run also writes report.html next to grid.nc."""
    pytest.importorskip("tolerance.report")
    out = tmp_path / "rep"
    run_ok(GOOD, "--samples", 512, "--out", out)
    assert (out / "grid.nc").is_file()
    assert (out / "report.html").is_file()
