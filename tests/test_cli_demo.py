"""`retol demo`: built-in examples (scenarios of our own, invented data), listing, spec export.

Numbers are checked in the library tests; here: exit codes, messages and files.
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path

import pytest
from click.testing import CliRunner

from tolerance.cli.main import cli
from tolerance.spec import validate


def _run(args, cwd=None):
    return CliRunner().invoke(cli, args, catch_exceptions=False)


def test_list_shows_every_builtin_example():
    r = _run(["demo", "--list"])
    assert r.exit_code == 0
    for name in ("sld-circular", "rgb-rotator", "pulse-circular", "white-led"):
        assert name in r.output


def test_list_json():
    import json

    r = _run(["demo", "--list", "--json"])
    names = [e["name"] for e in json.loads(r.output)]
    assert "sld-circular" in names


@pytest.mark.parametrize("name", ["sld-circular", "rgb-rotator", "pulse-circular", "white-led"])
def test_spec_only_writes_a_valid_starting_spec(tmp_path, monkeypatch, name):
    monkeypatch.chdir(tmp_path)
    r = _run(["demo", name, "--spec-only"])
    assert r.exit_code == 0, r.output
    path = tmp_path / f"{name}.toml"
    spec = validate(tomllib.loads(path.read_text()), str(path))
    assert spec.candidates
    # never overwritten without --force
    path.write_text("# mine\n")
    r = _run(["demo", name, "--spec-only"])
    assert r.exit_code != 0
    assert "--force" in r.output
    assert path.read_text() == "# mine\n"
    assert _run(["demo", name, "--spec-only", "--force"]).exit_code == 0
    assert path.read_text() != "# mine\n"


def test_demo_spec_has_six_constructions():
    r = _run(["demo", "--list"])
    assert r.exit_code == 0
    from importlib import resources

    text = resources.files("tolerance.examples").joinpath("sld_circular.toml").read_text()
    spec = validate(tomllib.loads(text), "sld_circular.toml")
    kinds = {c.construction for c in spec.candidates}
    assert kinds == {"zero-order", "multi-order", "compound", "achromatic", "film"}
    assert any(c.material == "mgf2" for c in spec.candidates)
    assert len(spec.candidates) == 6


def test_demo_runs_and_writes_its_report(tmp_path):
    out = tmp_path / "demo"
    r = _run(["demo", "--samples", "1024", "--out", str(out)])
    assert r.exit_code == 0, r.output
    for f in ("grid.nc", "report.html", "summary.csv"):
        assert (out / f).is_file()
    assert "report.html" in r.output
    # an existing folder is refused without --force, and left as it was
    before = (out / "grid.nc").stat().st_mtime_ns
    r = _run(["demo", "--samples", "1024", "--out", str(out)])
    assert r.exit_code != 0
    assert "Traceback" not in r.output
    assert (out / "grid.nc").stat().st_mtime_ns == before
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_unknown_example_suggests_the_closest():
    r = _run(["demo", "sld-circuler"])
    assert r.exit_code != 0
    assert "sld-circular" in r.output
    assert "Traceback" not in r.output


def test_unknown_format_is_refused_before_running(tmp_path):
    r = _run(["demo", "--format", "gif", "--out", str(tmp_path / "x")])
    assert r.exit_code != 0
    assert "--format" in r.output
    assert not (tmp_path / "x").exists()


@pytest.mark.skipif(os.geteuid() == 0, reason="root can write anywhere")
def test_unwritable_output_is_refused(tmp_path):
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        r = _run(["demo", "--samples", "512", "--out", str(locked / "demo")])
        assert r.exit_code != 0
        assert "--out" in r.output
    finally:
        locked.chmod(0o700)


def test_output_below_a_file_is_refused(tmp_path):
    blocker = tmp_path / "afile"
    blocker.write_text("not a folder")
    r = _run(["demo", "--samples", "512", "--out", str(blocker / "demo")])
    assert r.exit_code != 0
    assert "--out" in r.output
    assert "Traceback" not in r.output
    assert blocker.read_text() == "not a folder"


def test_each_example_has_its_own_folder(tmp_path, monkeypatch):
    """A plain `retol demo` writes reports/demo/; `retol demo NAME` writes reports/NAME/, so
    running one after the other never refuses (a stub stands in for the run itself)."""
    from tolerance.cli import run as run_cli

    seen = []

    def fake_execute(spec, spec_path, folder, *args, **kwargs):
        folder = Path(folder)
        assert not folder.exists(), f"{folder} would collide"
        folder.mkdir(parents=True)
        seen.append(folder.as_posix())
        return None, folder

    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(run_cli, "execute", fake_execute)
    for args in (["demo"], ["demo", "sld-circular"], ["demo", "rgb-rotator"]):
        r = _run(args)
        assert r.exit_code == 0, r.output
    assert seen == ["reports/demo", "reports/sld-circular", "reports/rgb-rotator"]


def test_spec_only_json_prints_json(tmp_path, monkeypatch):
    import json

    monkeypatch.chdir(tmp_path)
    r = _run(["demo", "white-led", "--spec-only", "--json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.output)
    assert doc["example"] == "white-led" and doc["spec"] == "white-led.toml"
    assert (tmp_path / "white-led.toml").is_file()
    # its errors are JSON too, with the same exit status
    r = _run(["demo", "white-led", "--spec-only", "--json"])
    assert r.exit_code == 2
    assert json.loads(r.output)["error"]["field"] == "--out"


def test_format_help_lists_the_choices():
    r = _run(["demo", "--help"])
    assert "--format [png|svg|pdf]" in r.output
