"""A non-editable install ships the material data files as package data.

Runs in CI (CI=true) and on request (it builds a wheel and a virtual environment, several
seconds):

    RETOL_INSTALL_TEST=1 pytest tests/test_install.py

Source: packaging practice (common practice): a wheel contains only what the build declares, so
a file missing from ``[tool.setuptools.package-data]`` shows up only in a non-editable install
run from outside the source tree.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sysconfig
import venv
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(
        os.environ.get("RETOL_INSTALL_TEST") != "1" and os.environ.get("CI") != "true",
        reason="slow: runs under CI=true, or set RETOL_INSTALL_TEST=1",
    ),
]


def _run(cmd, cwd, **kw):
    res = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=600, **kw)
    assert res.returncode == 0, f"{cmd}\nstdout:\n{res.stdout}\nstderr:\n{res.stderr}"
    return res.stdout


def test_non_editable_install_ships_materials(tmp_path):
    # Build from a copy of the source tree so that the build leaves nothing (build/, *.egg-info)
    # in the shared working tree.
    src = tmp_path / "src"
    shutil.copytree(
        ROOT, src,
        ignore=shutil.ignore_patterns(
            ".git", "build", "dist", "*.egg-info", "__pycache__", ".hypothesis", ".ruff_cache",
            ".pytest_cache", "reports", "tests", ".venv",
        ),
    )
    env_dir = tmp_path / "venv"
    venv.EnvBuilder(system_site_packages=True, with_pip=True).create(env_dir)
    py = env_dir / "bin" / "python"
    site = Path(
        _run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"], tmp_path)
        .strip()
    )
    # The runtime dependencies (numpy, click, ...) come from this test's environment: its
    # site-packages are added as plain path entries, so their .pth files (among them the
    # editable install of this very project) are not processed.
    here = {sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]}
    (site / "_retol_test_deps.pth").write_text("\n".join(sorted(here)) + "\n")

    _run([str(py), "-m", "pip", "install", "--no-deps", "--quiet", str(src)], tmp_path)

    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME")}
    out = _run(
        [str(py), "-c",
         "import tolerance; print(tolerance.__file__); "
         "from tolerance.dispersion import get_material; "
         "print(get_material('quartz').valid_min_nm)"],
        elsewhere, env=env,
    )
    where, value = out.strip().splitlines()[-2:]
    assert Path(where).resolve().is_relative_to(env_dir.resolve()), where  # not the source tree
    assert float(value) == pytest.approx(198.0)

    # Every shipped material loads, and the console script runs.
    _run([str(py), "-c",
          "from tolerance.dispersion import list_materials; "
          "assert len(list_materials()) >= 6, list_materials()"], elsewhere, env=env)
    help_text = _run([str(env_dir / "bin" / "retol"), "--help"], elsewhere, env=env)
    assert "materials" in help_text
