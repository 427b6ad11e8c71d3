"""One registry pattern for every family of variants.

Constructions, source shapes, tolerances, goal metrics, distribution forms and figures are each a
:class:`Registry`: a read-only mapping from a name to an :class:`Entry` that carries the variant's
own keys (with units and help text), its help text and its payload (a builder function, a kernel
code, ...).  The spec validator, the CLI's choices, the README tables and the error messages all
read the registry, so adding a variant is one entry.
"""

from __future__ import annotations

import difflib
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

from .errors import RetolError


@dataclass(frozen=True)
class Key:
    """One key a variant accepts: its name, unit ('' for none), help text and whether required."""

    name: str
    unit: str = ""
    help: str = ""
    required: bool = False


@dataclass(frozen=True)
class Entry:
    """One variant: its name, help text, keys and payload."""

    name: str
    help: str
    keys: tuple[Key, ...] = ()
    payload: Any = None
    extra: Mapping[str, Any] = field(default_factory=dict)

    @property
    def key_names(self) -> tuple[str, ...]:
        return tuple(k.name for k in self.keys)

    @property
    def required(self) -> tuple[str, ...]:
        return tuple(k.name for k in self.keys if k.required)


class Registry(Mapping):
    """A named family of variants; ``registry[name]`` is an :class:`Entry`.

    Examples
    --------
    >>> shapes = Registry("shape")
    >>> @shapes.register("box", "a flat band", keys=(Key("width", "nm", "full width"),))
    ... def box(width):
    ...     return width
    >>> shapes["box"].payload(3)
    3
    >>> shapes.lookup("bx", "[source].shape")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    tolerance.errors.RetolError: [source].shape: unknown shape 'bx' (did you mean 'box'? ...)
    """

    def __init__(self, what: str):
        self.what = what
        self._entries: dict[str, Entry] = {}

    def add(self, name: str, help: str, keys=(), payload=None, **extra) -> Entry:
        if name in self._entries:
            raise ValueError(f"{self.what} {name!r} is registered twice")
        entry = Entry(name, help, tuple(keys), payload, dict(extra))
        self._entries[name] = entry
        return entry

    def register(self, name: str, help: str, keys=(), **extra) -> Callable:
        """Decorator: register a function as the payload of a new entry."""

        def deco(func):
            self.add(name, help, keys, func, **extra)
            return func

        return deco

    def __getitem__(self, name: str) -> Entry:
        return self._entries[name]

    def __contains__(self, name) -> bool:
        # a spec value such as [] or {} is not a name: not held, rather than unhashable
        return isinstance(name, str) and name in self._entries

    def __iter__(self) -> Iterator[str]:
        return iter(self._entries)

    def __len__(self) -> int:
        return len(self._entries)

    def lookup(self, name, field: str) -> Entry:
        """The entry called ``name``, or a :class:`RetolError` on ``field`` naming the others."""
        if isinstance(name, str) and name in self._entries:
            return self._entries[name]
        if not isinstance(name, str):
            raise RetolError(
                field, f"must be a name, got {name!r}", f"use one of {', '.join(self)}"
            )
        close = difflib.get_close_matches(name, list(self), n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise RetolError(
            field, f"unknown {self.what} {name!r}", f"{hint}use one of {', '.join(self)}"
        )

    def table(self) -> list[tuple[str, str, str]]:
        """(name, keys with units, help) rows, for README tables and ``--help`` texts."""
        rows = []
        for e in self._entries.values():
            keys = ", ".join(f"{k.name} [{k.unit}]" if k.unit else k.name for k in e.keys)
            if not keys and e.extra.get("unit"):
                keys = f"[{e.extra['unit']}]"
            rows.append((e.name, keys, e.help))
        return rows


def markdown_table(registry: Registry) -> str:
    """The registry as a Markdown table (name, keys with units, meaning), as README shows it."""
    head = f"| {registry.what} | keys [unit] | meaning |\n| --- | --- | --- |\n"
    rows = "".join(f"| `{n}` | {k or '—'} | {h} |\n" for n, k, h in registry.table())
    return head + rows


def registries() -> dict[str, Registry]:
    """Every registry of the package, by the name README's tables use."""
    from .distributions import FORMS
    from .metrics import METRICS
    from .plates import CONSTRUCTIONS
    from .plots import FIGURES
    from .sources import SHAPES
    from .tolerances import TOLERANCES

    return {
        "construction": CONSTRUCTIONS,
        "shape": SHAPES,
        "tolerance": TOLERANCES,
        "distribution": FORMS,
        "metric": METRICS,
        "figure": FIGURES,
    }


if __name__ == "__main__":  # python -m tolerance.registry: README's reference tables
    for _name, _reg in registries().items():
        print(f"<!-- registry:{_name} -->\n{markdown_table(_reg)}<!-- /registry -->\n")
