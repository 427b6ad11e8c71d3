"""Output folders: no result lost, mixed or faked (tolerance.publish, ``retol run``).

Each test drives ``retol`` in a subprocess (``tests/faultdriver.py``) and injects the fault a user
met: two runs into one folder, user files beside results, an interrupt while results are moved
into place, SIGTERM and SIGKILL, a full disk or a file-size limit while grid.nc is written, an
output folder on another file system, a candidate name matplotlib would read as mathtext.

What is expected is this project's contract (CLI rules in DEVELOPERS.md and README "When things
go wrong"): one line on stderr, exit 2 for a user or disk problem, 128 + signal number for a
signal (POSIX shell convention, common practice), 3 when the grid was written but the report was
not, and nothing half-written, lost or mixed.
"""

from __future__ import annotations

import os
import resource
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

DRIVER = Path(__file__).parent / "faultdriver.py"

#: A tiny study (one candidate, five wavelengths) so that a subprocess run takes about a second.
TINY = """
title = "publish test"

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
name = "NAME"
construction = "zero-order"
material = "quartz"
waves = 0.25
design = "830nm"
axis_deg = 45

[run]
samples = 512
"""


@pytest.fixture
def spec(tmp_path):
    p = tmp_path / "tiny.toml"
    p.write_text(TINY.replace("NAME", "quartz zero-order"), encoding="utf-8")
    return p


def start(mode, *args, env=None, preexec_fn=None):
    e = dict(os.environ, **(env or {}))
    return subprocess.Popen(
        [sys.executable, str(DRIVER), mode, *map(str, args)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=e,
        preexec_fn=preexec_fn,
    )


def finish(proc, timeout=120):
    out, err = proc.communicate(timeout=timeout)
    return proc.returncode, out, err


def retol(*args, **kw):
    return finish(start("none", *args, **kw))


def one_line_error(err: str) -> None:
    lines = [ln for ln in err.splitlines() if not ln.startswith("retol: warning:")]
    assert "Traceback" not in err, err
    assert len(lines) == 1 and lines[0].startswith("retol: error:"), err


def leftovers(parent: Path) -> list[str]:
    return sorted(p.name for p in parent.iterdir() if ".part-" in p.name or ".lock" in p.name)


def wait_for(path: Path, proc, timeout=90):
    t0 = time.monotonic()
    while not path.exists():
        if proc.poll() is not None:
            raise AssertionError(f"run ended early: {proc.communicate()}")
        if time.monotonic() - t0 > timeout:
            raise AssertionError("run never reached the Monte Carlo")
        time.sleep(0.05)


def pause_env(tmp_path):
    return {"RETOL_FAULT_FLAG": str(tmp_path / "flag"), "RETOL_FAULT_GO": str(tmp_path / "go")}


# ----------------------------------------------------------------------------- 1: two runs


def test_second_run_into_a_busy_folder_is_refused_naming_the_first(spec, tmp_path):
    out = tmp_path / "out"
    env = pause_env(tmp_path)
    first = start("pause", "run", spec, "--out", out, "--no-report", env=env)
    try:
        wait_for(tmp_path / "flag", first)
        code, _, err = retol("run", spec, "--out", out, "--no-report", "--seed", 9)
        assert code == 2, err
        one_line_error(err)
        assert "in use by another retol run" in err and f"pid {first.pid}" in err
    finally:
        (tmp_path / "go").touch()
        code1, out1, err1 = finish(first)
    assert code1 == 0, err1
    assert "wrote" in out1 and (out / "grid.nc").is_file()
    assert leftovers(tmp_path) == []


# ----------------------------------------------------------------------------- 2: user files


def test_force_keeps_the_users_own_files(spec, tmp_path):
    out = tmp_path / "out"
    assert retol("run", spec, "--out", out)[0] == 0
    (out / "figures" / "my-sketch.png").write_bytes(b"mine")
    (out / "notes.txt").write_text("mine")
    code, _, err = retol("run", spec, "--out", out, "--force", "--no-report")
    assert code == 0, err
    assert (out / "figures" / "my-sketch.png").read_bytes() == b"mine"
    assert (out / "notes.txt").read_text() == "mine"
    # the previous report is gone (it belonged to the replaced grid); only user files remain
    assert sorted(p.name for p in (out / "figures").iterdir()) == ["my-sketch.png"]
    assert not (out / "report.html").exists() and (out / "grid.nc").is_file()


def test_a_folder_of_only_user_files_does_not_hold_results(spec, tmp_path):
    out = tmp_path / "out"
    (out / "figures").mkdir(parents=True)
    (out / "figures" / "photo.png").write_bytes(b"mine")
    code, _, err = retol("run", spec, "--out", out, "--no-report")
    assert code == 0, err
    assert (out / "figures" / "photo.png").read_bytes() == b"mine"


# ----------------------------------------------------------------------------- 3: all or nothing


def test_interrupt_while_moving_results_in_leaves_old_or_new_and_says_which(spec, tmp_path):
    out = tmp_path / "out"
    assert retol("run", spec, "--out", out, "--seed", 1)[0] == 0
    # a file moved into place is a new inode; a file left from the first run keeps its own
    before = {p: (p.stat().st_ino, p.read_bytes()) for p in out.rglob("*") if p.is_file()}
    proc = start(
        "sigint-in-move",
        "run",
        spec,
        "--out",
        out,
        "--force",
        "--seed",
        2,
        env={"RETOL_FAULT_TARGET": str(out)},
    )
    code, _, err = finish(proc)
    assert code == 130, err
    one_line_error(err)
    after = {p: (p.stat().st_ino, p.read_bytes()) for p in out.rglob("*") if p.is_file()}
    old = [p.name for p in after if after[p][0] == before.get(p, (None,))[0]]
    if "nothing was written" in err:
        assert after == before
    else:
        assert "after writing" in err
        assert old == [], f"files of the first run left beside new ones: {old}"
    assert leftovers(tmp_path) == []


# ----------------------------------------------------------------------------- 4: signals


def test_sigterm_stops_like_ctrl_c_with_exit_143_and_no_leftovers(spec, tmp_path):
    out = tmp_path / "out"
    proc = start("pause", "run", spec, "--out", out, env=pause_env(tmp_path))
    wait_for(tmp_path / "flag", proc)
    assert leftovers(tmp_path), "the run should be building a part folder"
    proc.send_signal(signal.SIGTERM)
    code, _, err = finish(proc)
    assert code == 143, err
    one_line_error(err)
    assert "SIGTERM" in err and "nothing was written" in err
    assert leftovers(tmp_path) == [] and not out.exists()


def test_part_folder_of_a_killed_run_is_removed_by_the_next_run(spec, tmp_path):
    out = tmp_path / "out"
    proc = start("pause", "run", spec, "--out", out, env=pause_env(tmp_path))
    wait_for(tmp_path / "flag", proc)
    proc.kill()
    proc.communicate()
    stale = leftovers(tmp_path)
    assert any(".out.part-" in s for s in stale)
    code, _, err = retol("run", spec, "--out", out, "--no-report")
    assert code == 0, err
    assert "removed .out.part-" in err and "stopped before it finished" in err
    assert leftovers(tmp_path) == []


# ----------------------------------------------------------------------------- 6: full disk


def _limit_file_size(kib):
    def limit():
        resource.setrlimit(resource.RLIMIT_FSIZE, (kib * 1024, kib * 1024))

    return limit


def test_file_size_limit_while_writing_the_grid_is_one_line_and_leaves_nothing(spec, tmp_path):
    out = tmp_path / "out"
    # --keep-samples makes grid.nc about 180 kB: more than the 64 kB limit
    code, _, err = finish(
        start(
            "none",
            "run",
            spec,
            "--out",
            out,
            "--keep-samples",
            "--no-report",
            preexec_fn=_limit_file_size(64),
        )
    )
    assert code == 2, err
    one_line_error(err)
    assert "grid.nc" in err and "File too large" in err
    assert not out.exists() and leftovers(tmp_path) == []


@pytest.fixture
def mount_tmpfs(tmp_path):
    """Mount a small tmpfs (needs root and a kernel that allows it); unmount afterwards."""
    mounted = []

    def mount(path: Path, size: str, *opts):
        path.mkdir(parents=True, exist_ok=True)
        options = ",".join((f"size={size}", *opts))
        r = subprocess.run(
            ["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(path)],
            capture_output=True,
            text=True,
        )
        if r.returncode:
            pytest.skip(f"cannot mount a small file system here ({r.stderr.strip() or 'no mount'})")
        mounted.append(path)
        return path

    yield mount
    for path in reversed(mounted):
        subprocess.run(["umount", str(path)], capture_output=True)


def test_full_disk_while_writing_the_grid_is_one_line_and_leaves_nothing(
    spec, tmp_path, mount_tmpfs
):
    small = mount_tmpfs(tmp_path / "small", "64k")
    code, _, err = retol("run", spec, "--out", small / "out", "--keep-samples", "--no-report")
    assert code == 2, err
    one_line_error(err)
    assert "No space left on device" in err
    assert sorted(p.name for p in small.iterdir()) == []


# ----------------------------------------------------------------------------- 7: other file system


def test_out_on_a_mounted_volume_is_published_there(spec, tmp_path, mount_tmpfs):
    vol = mount_tmpfs(tmp_path / "vol", "20m")
    (vol / "mine.txt").write_text("mine")
    code, _, err = retol("run", spec, "--out", vol, "--no-report")
    assert code == 0, err
    assert (vol / "grid.nc").is_file() and (vol / "mine.txt").read_text() == "mine"
    assert sorted(p.name for p in vol.iterdir()) == [
        ".retol-manifest.json",
        "drawing.csv",
        "grid.nc",
        "mine.txt",
    ]
    assert leftovers(tmp_path) == []


def test_read_only_volume_is_refused_before_the_monte_carlo(spec, tmp_path, mount_tmpfs):
    vol = mount_tmpfs(tmp_path / "vol", "1m", "ro")
    if os.access(vol, os.W_OK) and os.geteuid() != 0:
        pytest.skip("the read-only mount is writable here")
    proc = start("pause", "run", spec, "--out", vol, "--no-report", env=pause_env(tmp_path))
    (tmp_path / "go").touch()
    code, _, err = finish(proc)
    assert code == 2, err
    one_line_error(err)
    assert not (tmp_path / "flag").exists(), "the Monte Carlo ran before the check"


# ----------------------------------------------------------------------------- 8: names, report


def test_candidate_name_with_dollars_is_drawn_as_plain_text(tmp_path):
    spec = tmp_path / "dollar.toml"
    spec.write_text(TINY.replace("NAME", "a $x^$ plate, $5 off"), encoding="utf-8")
    out = tmp_path / "out"
    code, _, err = retol("run", spec, "--out", out)
    assert code == 0, err
    assert (out / "report.html").is_file() and any((out / "figures").iterdir())


def test_a_failing_report_keeps_the_finished_grid(spec, tmp_path, monkeypatch):
    from click.testing import CliRunner

    import tolerance.report as report
    from tolerance.cli.main import cli

    def broken(*args, **kwargs):
        raise RuntimeError("figure engine broke")

    monkeypatch.setattr(report, "build_html", broken)
    out = tmp_path / "out"
    r = CliRunner().invoke(cli, ["run", str(spec), "--out", str(out)])
    assert r.exit_code == 4, r.output
    assert "figure engine broke" in r.stderr and "results grid was kept" in r.stderr
    assert (out / "grid.nc").is_file() and not (out / "report.html").exists()
    assert not (out / "figures").exists()
    assert leftovers(tmp_path) == []
