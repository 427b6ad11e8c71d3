"""Distributed runs (dask.distributed, loopback LocalCluster) and parameter sweeps.

The promise checked here: a run, or a sweep, on a cluster gives grids bit-identical to the local
run with the same seed (tasks are whole blocks of draws combined in block order), and a sweep's
points equal separate runs of the same specs.  dask's LocalCluster listens on 127.0.0.1 only.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from click.testing import CliRunner

import tolerance
from tolerance import cluster
from tolerance.cli.main import cli
from tolerance.errors import RetolError
from tolerance.spec import loads
from tolerance.sweep import parse_set, run_sweep

SPEC = """
title = "cluster test"
[wavelength]
start = "770nm"
stop = "790nm"
step = "2nm"
[source]
shape = "gaussian"
center = "780nm"
fwhm = "4nm"
[goal]
min = 0.97
[[candidate]]
name = "zero"
construction = "zero-order"
material = "quartz"
[[candidate]]
name = "compound"
construction = "compound"
material = "quartz"
thick_plate = "1000um"
[tolerances]
thickness_um = { sigma = 0.2 }
clocking_deg = { uniform = 1.0 }
tilt_deg = { sigma = 1.0 }
temperature_c = { low = 10, high = 30 }
[run]
samples = 3000
seed = 4
sensitivity_samples = 2000
"""


def study():
    return loads(SPEC, "cluster.toml")


def assert_bit_identical(a, b):
    assert set(a.data_vars) == set(b.data_vars)
    for k in a.data_vars:
        x, y = a[k].values, b[k].values
        if x.dtype.kind in "fc":
            np.testing.assert_array_equal(x, y, err_msg=k)
        else:
            assert x.tolist() == y.tolist(), k


@pytest.fixture(scope="module")
def dask_client():
    pytest.importorskip("distributed")
    with cluster.client(workers=2) as c:
        yield c


def test_a_run_on_a_cluster_is_bit_identical_to_a_local_run(dask_client, monkeypatch):
    # 2 blocks (1024 samples) a task: the 3000 samples become 3 tasks, the last one partial
    monkeypatch.setattr(cluster, "TASK_BLOCKS", 2)
    s = study()
    local = tolerance.run(s)
    remote = tolerance.run(s, client=dask_client)
    assert_bit_identical(local, remote)


def test_a_sweep_on_a_cluster_equals_the_local_sweep_and_separate_runs(dask_client):
    s = study()
    axes = [parse_set("goal.min=0.95,0.98")]
    local, rows = run_sweep(s, axes, samples=1024)
    remote, _ = run_sweep(s, axes, samples=1024, client=dask_client)
    assert_bit_identical(local, remote)
    assert local["yield"].dims == ("goal.min", "candidate")
    # each point equals a separate run of the changed spec (same seed: the same draws)
    for v in (0.95, 0.98):
        one = tolerance.run(loads(SPEC.replace("min = 0.97", f"min = {v}"), "p.toml"), samples=1024)
        np.testing.assert_array_equal(
            local["yield"].sel({"goal.min": str(v)}).values, one["yield"].values
        )


def test_sweep_json_and_files(tmp_path):
    spec = tmp_path / "s.toml"
    spec.write_text(SPEC)
    out = tmp_path / "out"
    r = CliRunner().invoke(
        cli,
        [
            "sweep",
            str(spec),
            "--set",
            "tolerances.clocking_deg.uniform=0.5,2.0",
            "--samples",
            "1024",
            "--out",
            str(out),
            "--json",
        ],
    )
    assert r.exit_code == 0, r.output
    import json

    doc = json.loads(r.stdout)
    assert [p["set"] for p in doc["points"]] == [
        {"tolerances.clocking_deg.uniform": 0.5},
        {"tolerances.clocking_deg.uniform": 2.0},
    ]
    tight, loose = (p["candidates"][0]["yield"] for p in doc["points"])
    assert tight >= loose  # common random numbers: a wider clocking cannot pass more samples
    assert {"name", "yield", "yield_low", "yield_high", "dominant"} <= set(
        doc["points"][0]["candidates"][0]
    )
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == [
        "sweep.html",
        "sweep.nc",
        "sweep.png",
    ]


@pytest.mark.parametrize(
    "setting, words",
    [
        ("run.samples=10,20", "cannot be swept"),
        ("source.fwhmm=2nm,4nm", "unknown key"),
        ("source.fwhm=2deg,4deg", "unknown unit"),
        ("candidate[nope].thick_plate=900um", "no candidate 'nope'"),
        ("goal.min", "no '='"),
        ("goal.min=0.9,0.9", "twice"),
    ],
)
def test_bad_sweeps_are_one_line_and_write_nothing(tmp_path, setting, words):
    spec = tmp_path / "s.toml"
    spec.write_text(SPEC)
    out = tmp_path / "out"
    r = CliRunner().invoke(cli, ["sweep", str(spec), "--set", setting, "--out", str(out)])
    assert r.exit_code == 2, r.output
    lines = [ln for ln in r.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and words in lines[0], r.output
    assert not out.exists()


def test_a_sweep_too_large_for_memory_is_refused_before_work(tmp_path):
    spec = tmp_path / "s.toml"
    spec.write_text(SPEC)
    r = CliRunner().invoke(
        cli,
        [
            "sweep",
            str(spec),
            "--set",
            "goal.min=0.9,0.95",
            "--samples",
            str(10**12),
            "--out",
            str(tmp_path / "o"),
        ],
    )
    assert r.exit_code == 2 and "samples" in r.output, r.output


def test_an_unreachable_scheduler_is_one_line_within_the_timeout():
    pytest.importorskip("distributed")
    t = time.perf_counter()
    with (
        pytest.raises(RetolError) as exc,
        cluster.client(scheduler="tcp://127.0.0.1:9", timeout_s=2),
    ):
        pass
    assert exc.value.field == "--scheduler" and "cannot reach" in exc.value.problem
    assert time.perf_counter() - t < 30


def test_workers_without_dask_says_how_to_install(monkeypatch, tmp_path):
    monkeypatch.setattr(cluster, "_distributed", lambda: None)
    spec = tmp_path / "s.toml"
    spec.write_text(SPEC)
    r = CliRunner().invoke(cli, ["run", str(spec), "--workers", "2", "--out", str(tmp_path / "o")])
    assert r.exit_code == 2
    assert 'pip install ".[cluster]"' in r.output
    with pytest.raises(RetolError, match="cannot be combined"):
        cluster.check_options(2, "tcp://x:1")


TRAIN_SPEC = """
title = "cluster train"
[wavelength]
start = "630nm"
stop = "636nm"
step = "1nm"
[source]
shape = "laser"
center = "633nm"
drift = { sigma = "0.2nm" }
[input]
stokes_csv = "input.csv"
[goal]
state = "circular"
metric = "sphere_angle_deg"
max = 3
over = "spectrum"
[[candidate]]
name = "pol+qwp"
[[candidate.elements]]
polarizer = 45
extinction_db = 30
tolerances = { clocking_deg = { sigma = 0.5 } }
[[candidate.elements]]
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "633nm"
axis_deg = 0
tolerances = { clocking_deg = { sigma = 0.3 }, thickness_um = { sigma = 0.05 } }
[tolerances]
input_azimuth_deg = { sigma = 0.5 }
tilt_deg = { sigma = 1.0 }
[run]
samples = 2048
seed = 3
sensitivity_samples = 1024
"""


def test_a_train_with_a_polarizer_and_a_tabled_input_on_a_cluster(
    dask_client, monkeypatch, tmp_path
):
    """The polarizer kernel branch, per-element tolerances and a tabled input travel to the
    workers: the grid is bit-identical to the local run."""
    from tolerance.spec import validate

    monkeypatch.setattr(cluster, "TASK_BLOCKS", 1)
    (tmp_path / "input.csv").write_text("wavelength_nm,s1,s2,s3\n620,0.9,0.1,0\n650,0.8,0,0.2\n")
    import tomllib

    s = validate(tomllib.loads(TRAIN_SPEC), "train.toml", base_dir=tmp_path)
    local = tolerance.run(s)
    remote = tolerance.run(s, client=dask_client)
    assert_bit_identical(local, remote)
    assert "clocking[element 1]" in [str(t) for t in local["tolerance_name"].values]
