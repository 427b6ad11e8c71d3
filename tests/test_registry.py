"""One registry pattern: every family of variants is a Registry, and README's tables are read
from them (so adding a variant is one edit, and the README cannot drift)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from tolerance.errors import RetolError
from tolerance.registry import Entry, Registry, markdown_table, registries

README = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")


@pytest.mark.parametrize("name", list(registries()))
def test_readme_table_is_the_registry(name):
    block = re.search(rf"<!-- registry:{name} -->\n(.*?)<!-- /registry -->", README, re.S)
    assert block, f"README has no table for the {name} registry"
    assert block.group(1) == markdown_table(registries()[name])


@pytest.mark.parametrize("name", list(registries()))
def test_every_entry_has_help(name):
    for entry in registries()[name].values():
        assert isinstance(entry, Entry) and entry.help.strip(), entry.name


def test_lookup_names_the_field_and_the_known_entries():
    with pytest.raises(RetolError) as exc:
        registries()["construction"].lookup("zero order", "[[candidate]].construction")
    msg = str(exc.value)
    assert msg.startswith("[[candidate]].construction: unknown construction 'zero order'")
    assert "did you mean 'zero-order'?" in msg
    with pytest.raises(RetolError, match="must be a name"):
        registries()["shape"].lookup(["laser"], "[source].shape")


def test_an_entry_is_registered_once():
    r = Registry("thing")
    r.add("a", "first")
    with pytest.raises(ValueError):
        r.add("a", "again")


def test_spec_refuses_what_no_registry_holds(tmp_path):
    """The spec validator reads the same registries: an unknown metric or shape is refused in
    load_spec, before any work."""
    import tolerance

    base = (
        '[wavelength]\nstart = "770nm"\nstop = "790nm"\nstep = "10nm"\n'
        "[goal]\nmin = 0.9\n"
        '[[candidate]]\nconstruction = "zero-order"\nmaterial = "quartz"\ndesign = "780nm"\n'
    )
    p = tmp_path / "s.toml"
    p.write_text(base + '[source]\nshape = "sqaure"\n')
    with pytest.raises(RetolError, match="unknown shape"):
        tolerance.load_spec(p)
    p.write_text(base.replace("min = 0.9", 'min = 0.9\nmetric = "ellipticity"'))
    with pytest.raises(RetolError, match="unknown metric"):
        tolerance.load_spec(p)
