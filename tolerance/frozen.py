"""A read-only mapping for frozen records: immutable, comparable and picklable.

``types.MappingProxyType`` cannot be pickled, and studies, plates and materials travel to other
processes (dask workers), so records hold :class:`ReadOnlyMapping` instead.
"""

from __future__ import annotations

from collections.abc import Mapping


class ReadOnlyMapping(Mapping):
    """A mapping that cannot be changed after it is made.

    Examples
    --------
    >>> m = ReadOnlyMapping({"a": 1})
    >>> m["a"], dict(m) == {"a": 1}
    (1, True)
    >>> m["b"] = 2
    Traceback (most recent call last):
    ...
    TypeError: 'ReadOnlyMapping' object does not support item assignment
    """

    __slots__ = ("_data",)

    def __init__(self, data=()):
        object.__setattr__(self, "_data", dict(data))

    def __getitem__(self, key):
        return self._data[key]

    def __iter__(self):
        return iter(self._data)

    def __len__(self) -> int:
        return len(self._data)

    def __repr__(self) -> str:
        return f"ReadOnlyMapping({self._data!r})"

    def __setattr__(self, name, value):
        raise AttributeError("ReadOnlyMapping is read-only")

    def __reduce__(self):
        return (ReadOnlyMapping, (self._data,))

    __hash__ = None  # mutable-looking contents; like dict, not hashable


def frozen(value):
    """A read-only copy: tables become :class:`ReadOnlyMapping`, lists tuples."""
    if isinstance(value, Mapping):
        return ReadOnlyMapping({k: frozen(v) for k, v in value.items()})
    if isinstance(value, list | tuple):
        return tuple(frozen(v) for v in value)
    return value
