"""Hostile or mistaken inputs are refused in one line before they hang, exhaust or crash a run.

Expected behaviour is this project's contract (RetolError rules, DEVELOPERS.md).  Physical
bounds: absolute zero is -273.15 C (ITS-90 / the SI definition of the kelvin, 0 K = -273.15 C);
an angle of incidence of 90 deg or more never enters the plate (geometry).  TOML nesting follows
TOML 1.0.0 (toml.io): dotted keys and headers make nested tables.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time

import pytest

from tolerance import limits
from tolerance.errors import RetolError
from tolerance.spec import load_spec

# ----------------------------------------------------------------------------- 9: spec limits


def test_nesting_depth_counts_tables_arrays_and_dotted_keys():
    """Depths worked out by hand from TOML 1.0.0 nesting rules."""
    assert limits.nesting_depth("a = 1\nb = 'x.y.z'  # c.d.e") == 0
    assert limits.nesting_depth("a.b.c = 1") == 2
    assert limits.nesting_depth("[[candidate.layers]]\nx = [1.5, 2.5]") == 2
    assert limits.nesting_depth("v = [[[1]]]") == 3
    assert limits.nesting_depth('v = "[[[[" ') == 0


def test_deep_dotted_key_is_refused_before_parsing(tmp_path):
    p = tmp_path / "deep.toml"
    p.write_text("a" + ".a" * 100_000 + " = 1\n", encoding="utf-8")
    t0 = time.monotonic()
    with pytest.raises(RetolError, match="levels deep"):
        load_spec(p)
    assert time.monotonic() - t0 < 10  # not a timing test: tomllib would need tens of GB


def test_deeply_nested_arrays_are_a_retol_error_not_a_recursion_error(tmp_path):
    p = tmp_path / "arrays.toml"
    p.write_text("x = " + "[" * 1000 + "]" * 1000 + "\n", encoding="utf-8")
    with pytest.raises(RetolError, match="levels deep"):
        load_spec(p)


def test_oversized_spec_is_refused(tmp_path):
    p = tmp_path / "big.toml"
    p.write_text("# " + "x" * limits.MAX_SPEC_BYTES + "\n", encoding="utf-8")
    with pytest.raises(RetolError, match="larger than"):
        load_spec(p)


def test_check_spec_text_accepts_every_shipped_example():
    from importlib import resources

    for entry in resources.files("tolerance.examples").iterdir():
        if entry.name.endswith(".toml"):
            limits.check_spec_text(entry.read_text(encoding="utf-8"), entry.name)


# ----------------------------------------------------------------------------- 11: data files


def test_a_fifo_as_spectrum_file_is_refused_not_waited_on(tmp_path):
    fifo = tmp_path / "spectrum.csv"
    os.mkfifo(fifo)
    code = (
        "from pathlib import Path; from tolerance.sources import read_spectrum_csv\n"
        "from tolerance.errors import RetolError\n"
        f"try:\n    read_spectrum_csv(Path({str(fifo)!r}), 'source.path')\n"
        "except RetolError as e:\n    print(e)"
    )
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert "not a regular file" in r.stdout, r


def test_a_device_or_an_oversized_file_is_refused(tmp_path):
    with pytest.raises(RetolError, match="not a regular file"):
        limits.read_data_file("/dev/zero", "source.path")
    big = tmp_path / "big.csv"
    with open(big, "wb") as f:
        f.truncate(limits.MAX_DATA_BYTES + 1)  # sparse: no disk used
    from tolerance.sources import read_spectrum_csv

    with pytest.raises(RetolError, match="MB"):
        read_spectrum_csv(big, "source.path")


def test_material_table_with_a_non_positive_wavelength_is_refused(tmp_path):
    from tolerance.dispersion import load_material_file

    p = tmp_path / "film.csv"
    p.write_text("wavelength_nm,n_o,n_e\n0,1.5,1.6\n600,1.5,1.6\n700,1.5,1.6\n")
    with pytest.raises(RetolError, match="wavelength"):
        load_material_file(p)


def test_non_utf8_material_file_is_one_line(tmp_path):
    from tolerance.dispersion import load_material_file

    for name in ("film.toml", "film.csv"):
        p = tmp_path / name
        p.write_bytes(b"\xff\xfe name = 1\n")
        with pytest.raises(RetolError, match="UTF-8"):
            load_material_file(p)


def test_material_fifo_is_refused(tmp_path):
    from tolerance.dispersion import load_material_file

    fifo = tmp_path / "film.toml"
    os.mkfifo(fifo)
    with pytest.raises(RetolError, match="not a regular file"):
        load_material_file(fifo)


# ----------------------------------------------------------------------------- 11: CLI bounds


@pytest.mark.parametrize(
    "args",
    [
        ["state", "--material", "quartz", "--waves", "0.25", "--design", "633nm", "--tilt", "90"],
        ["state", "--material", "quartz", "--waves", "0.25", "--design", "633nm", "--tilt", "-95"],
        [
            "state",
            "--material",
            "quartz",
            "--waves",
            "0.25",
            "--design",
            "633nm",
            "--temperature",
            "-274",
        ],
        [
            "plate",
            "--material",
            "quartz",
            "--waves",
            "0.25",
            "--design",
            "633nm",
            "--temperature",
            "-300",
        ],
        ["materials", "show", "quartz", "--at", "633nm", "--temperature", "-273.15"],
        ["state", "--waves", "0.25", "--target", "nan"],
        ["state", "--waves", "0.25", "--target", "inf"],
    ],
)
def test_unphysical_cli_values_are_refused(invoke, args):
    r = invoke(*args)
    assert r.exit_code == 2, r.output
    assert "Traceback" not in r.output and r.stderr.count("\n") == 1


def test_cli_values_at_the_edge_are_accepted(invoke):
    r = invoke(
        "state",
        "--material",
        "quartz",
        "--waves",
        "0.25",
        "--design",
        "633nm",
        "--tilt",
        "30",
        "--temperature",
        "-270",
    )
    assert r.exit_code == 0, r.output


# ----------------------------------------------------------------------------- 11: memory


SPEC = """
[wavelength]
start = "820nm"
stop = "840nm"
step = "5nm"

[source]
shape = "gaussian"
center = "830nm"
fwhm = "4nm"

[goal]
state = "circular"
metric = "axial_ratio"
min = 0.9
over = "band"

[[candidate]]
name = "q"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "830nm"
axis_deg = 45
"""


def test_huge_sample_count_is_refused_with_the_estimate_before_work(invoke, tmp_path):
    spec = tmp_path / "s.toml"
    spec.write_text(SPEC, encoding="utf-8")
    out = tmp_path / "out"
    r = invoke("run", spec, "--samples", 10**12, "--out", out)
    assert r.exit_code == 2, r.output
    assert "GB of memory" in r.stderr and "available" in r.stderr
    assert not out.exists() and sorted(p.name for p in tmp_path.iterdir()) == ["s.toml"]


def test_memory_estimate_grows_with_kept_samples_and_is_checked(monkeypatch):
    """samples x wavelengths x 4 variables x float32, three copies (engine, grid, file image)."""
    small = limits.run_memory_bytes(1, 100, 10_000, False, 16384)
    kept = limits.run_memory_bytes(1, 100, 10_000, True, 16384)
    assert kept - small == 10_000 * 3 * 4 * 4 * 100
    monkeypatch.setattr(limits, "available_memory", lambda: 1_000_000_000)
    limits.check_memory(999_000_000, "--samples", "fewer")
    with pytest.raises(RetolError, match="1 GB is available"):
        limits.check_memory(2_000_000_000, "--samples", "fewer")


def test_available_memory_is_read_from_the_machine():
    have = limits.available_memory()
    assert have is None or have > 0


def test_a_sech2_duration_in_seconds_is_named_as_such():
    """duration = 1e-13 (seconds by mistake; a bare number is fs) used to divide by zero."""
    from tolerance.errors import RetolError
    from tolerance.sources import parse_duration_fs

    with pytest.raises(RetolError, match="looks like seconds"):
        parse_duration_fs(1e-13, "[source].duration")
    assert parse_duration_fs(35, "[source].duration") == 35.0
