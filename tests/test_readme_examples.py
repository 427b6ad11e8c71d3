"""README's command examples run as written (sections not already run by their own tests).

Each ```bash block of the listed sections is split into commands (backslash continuations
joined) and every `retol` line is run through click's CliRunner in a fresh folder.  The aiming
and inspection sections are run by tests/test_aiming.py and tests/test_inspection.py.
"""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import pytest
from click.testing import CliRunner

from tolerance.cli.main import cli

README = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")


def section(title: str) -> str:
    m = re.search(rf"^## {re.escape(title)}\n(.*?)(?=^## )", README, re.S | re.M)
    assert m, f"README has no section {title!r}"
    return m.group(1)


def commands(text: str) -> list[list[str]]:
    out = []
    for block in re.findall(r"```bash\n(.*?)```", text, re.S):
        for line in block.replace("\\\n", " ").splitlines():
            line = line.split("#")[0].strip()
            if line.startswith("retol "):
                out.append(shlex.split(line)[1:])
    return out


@pytest.mark.parametrize(
    "title",
    [
        "Sweeps and clusters",
        "Trains of plates: each element its own tolerances",
        "Plates with faces: reflections, coatings, equivalent retarder",
    ],
)
def test_section_examples_run(title, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    text = section(title)
    # a data file the section shows (e.g. "# coating.csv: ...") is written where it is read
    for name, body in re.findall(r"```\n# (\S+\.csv):[^\n]*\n(.*?)```", text, re.S):
        (tmp_path / name).write_text(body)
    cmds = commands(text)
    assert cmds
    for args in cmds:
        r = CliRunner().invoke(cli, args)
        assert r.exit_code == 0, f"retol {' '.join(args)}\n{r.output}"
