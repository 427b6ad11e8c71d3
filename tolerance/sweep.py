"""Parameter sweeps: one study run at every combination of a few spec values.

A sweep changes spec values by their path (``source.fwhm``, ``tolerances.clocking_deg.uniform``,
``goal.min``, ``environment.temperature_range``, ``candidate[NAME].thick_plate``), validates each
point as a spec of its own and runs it with the same seed and sample count, so every point sees
the same draws (common random numbers) and differences between points are not sampling noise.
The result is one Dataset with a dimension per swept key.  Points run one after another here, or
as one dask task each on a cluster (:mod:`tolerance.cluster`), with identical results.
"""

from __future__ import annotations

import itertools
import re
import tomllib
from dataclasses import dataclass

import numpy as np

from .errors import RetolError

#: Top-level spec tables whose values a sweep may change.
SWEEPABLE = ("wavelength", "source", "input", "goal", "environment", "tolerances", "candidate")
#: Grid variables a sweep keeps for every point (per candidate, and per quantile and wavelength).
KEPT = (
    "yield",
    "yield_low",
    "yield_high",
    "dominant",
    "rank",
    "nominal_worst",
    "nominal_spectral_metric",
    "nominal_dop",
    "metric_quantile",
)
_CANDIDATE = re.compile(r"^candidate\[(.+)\]$")


@dataclass(frozen=True)
class Axis:
    """One swept key and its values (as written)."""

    key: str
    values: tuple


def _split_top(text: str) -> list[str]:
    """Split on commas that are not inside brackets."""
    out, depth, cur = [], 0, ""
    for ch in text:
        if ch == "[":
            depth += 1
        elif ch == "]":
            depth -= 1
        if ch == "," and depth == 0:
            out.append(cur)
            cur = ""
        else:
            cur += ch
    out.append(cur)
    return [p.strip() for p in out]


def _value(text: str, field: str):
    """A TOML value for one swept value: a number, a list, or text (e.g. "20nm")."""
    if not text:
        raise RetolError(field, "has an empty value", "e.g. --set source.fwhm=10nm,20nm")
    try:
        v = tomllib.loads(f"v = {text}")["v"]
    except tomllib.TOMLDecodeError:
        return text  # a quantity with a unit, or a name
    if isinstance(v, float) and not np.isfinite(v):
        raise RetolError(field, f"{text!r} is not finite", "give finite values")
    return v


def parse_set(text: str) -> Axis:
    """Read one ``--set KEY=V1,V2,...``.

    Examples
    --------
    >>> parse_set("source.fwhm=10nm,20nm")
    Axis(key='source.fwhm', values=('10nm', '20nm'))
    >>> parse_set("environment.temperature_range=[0,40],[-10,50]").values
    ([0, 40], [-10, 50])
    """
    if "=" not in text:
        raise RetolError("--set", f"{text!r} has no '='", "write KEY=V1,V2, e.g. goal.min=0.9,0.95")
    key, _, vals = text.partition("=")
    key = key.strip()
    top = key.split(".")[0]
    m = _CANDIDATE.match(top)
    if not key or (top not in SWEEPABLE and not m):
        raise RetolError(
            "--set",
            f"{key!r} cannot be swept",
            f"sweep a value under {', '.join(SWEEPABLE[:-1])} or candidate[NAME]",
        )
    if len(key.split(".")) < 2:
        raise RetolError("--set", f"{key!r} names a table, not a value", "e.g. source.fwhm")
    values = tuple(_value(v, f"--set {key}") for v in _split_top(vals))
    if len(set(map(repr, values))) != len(values):
        raise RetolError("--set", f"{key} lists a value twice", "give each value once")
    return Axis(key, values)


def _assign(raw: dict, key: str, value) -> None:
    """Set ``key`` (a dotted spec path) in the parsed spec ``raw``."""
    parts = key.split(".")
    m = _CANDIDATE.match(parts[0])
    if m:
        name = m.group(1)
        cands = raw.get("candidate") or []
        found = [c for i, c in enumerate(cands) if c.get("name", f"candidate {i + 1}") == name]
        if not found:
            names = [c.get("name", f"candidate {i + 1}") for i, c in enumerate(cands)]
            raise RetolError("--set", f"no candidate {name!r}", f"known: {', '.join(names)}")
        node = found[0]
    else:
        node = raw.setdefault(parts[0], {})
    for p in parts[1:-1]:
        nxt = node.setdefault(p, {})
        if not isinstance(nxt, dict):
            raise RetolError("--set", f"{key}: {p!r} is a value, not a table", "check the key")
        node = nxt
    if not isinstance(node, dict):
        raise RetolError("--set", f"{key} does not name a value of a table", "check the key")
    node[parts[-1]] = value


def point_studies(study, axes):
    """The validated study of every point, in row-major order of ``axes``.

    Raises
    ------
    RetolError
        A value that does not validate, naming the key, the value and the spec's own complaint.
    """
    from .spec import validate

    if study.source_text is None:
        raise RetolError("spec", "the study has no spec text to change", "load it with load_spec")
    out = []
    for combo in itertools.product(*(a.values for a in axes)):
        raw = tomllib.loads(study.source_text)
        for axis, v in zip(axes, combo, strict=True):
            _assign(raw, axis.key, v)
        try:
            out.append(
                validate(
                    raw, study.spec_path, base_dir=study.base_dir, source_text=study.source_text
                )
            )
        except RetolError as exc:
            where = ", ".join(f"{a.key}={v}" for a, v in zip(axes, combo, strict=True))
            raise RetolError(f"--set {where}", f"{exc.field}: {exc.problem}", exc.fix) from None
    return out


def memory_bytes(study, n_points: int, samples: int) -> int:
    """Estimated peak memory of a sweep: one run at a time plus the kept results. [bytes]"""
    from .limits import run_memory_bytes

    C = len(study.candidates)
    W = study.wavelength.count
    Q = len(study.run.quantiles)
    one = run_memory_bytes(C, W, samples, False, 16384)
    return one + n_points * C * (Q * W + 16) * 8


def _reduce(ds, rows):
    """The grid variables a sweep keeps, and the point's rows (``rows(grid)``, or None)."""
    small = ds[[k for k in KEPT if k in ds.data_vars]]
    keep = ("candidate", "quantile", "wavelength")
    small = small.drop_vars([c for c in small.coords if c not in keep])
    return small, (rows(ds) if rows is not None else None)


def _point_task(study, samples, seed, chunk, rows):
    from .cluster import cap_threads
    from .montecarlo import run

    cap_threads()
    return _reduce(run(study, samples=samples, seed=seed, chunk_size=chunk), rows)


def run_sweep(
    study, axes, samples=None, seed=None, chunk_size=None, client=None, progress=None, rows=None
):
    """Run every point of a sweep; return the combined Dataset and the per-point JSON rows.

    Parameters
    ----------
    study : Study
        The base study (from :func:`tolerance.load_spec`).
    axes : sequence of Axis
        The swept keys and their values (:func:`parse_set`).
    samples, seed, chunk_size : int, optional
        As for :func:`tolerance.montecarlo.run`; the same for every point.
    client : distributed.Client, optional
        Run each point as a dask task.
    rows : callable(grid) -> list, optional
        What to report per point (e.g. the rows ``retol run --json`` prints); a module-level
        function, so that it can travel to a worker.

    Returns
    -------
    (xarray.Dataset, list)
        Dims ``candidate`` (and ``quantile``, ``wavelength`` for the quantiles) and one per swept
        key (named by the key); and ``[{"set": {KEY: value}, "candidates": [...]}, ...]``.
    """
    import xarray as xr

    from .limits import check_memory

    if not axes:
        raise RetolError("--set", "nothing to sweep", "give at least one --set KEY=V1,V2")
    keys = [a.key for a in axes]
    if len(set(keys)) != len(keys):
        raise RetolError("--set", "a key is given twice", "give each key once")
    points = point_studies(study, axes)
    n = int(samples if samples is not None else study.run.samples)
    check_memory(
        memory_bytes(study, len(points), n),
        "--set",
        f"{len(points)} points x {n:,} samples; sweep fewer points or samples",
    )
    names = [[c.name for c in p.candidates] for p in points]
    if any(nm != names[0] for nm in names):
        raise RetolError("--set", "changes the candidates' names", "sweep other keys")
    if client is None:
        results = []
        for p in points:
            results.append(_point_task(p, samples, seed, chunk_size, rows))
            if progress:
                progress()
    else:
        futures = [
            client.submit(_point_task, p, samples, seed, chunk_size, rows, pure=False)
            for p in points
        ]
        results = []
        for f in futures:  # in point order, not completion order
            results.append(f.result())
            if progress:
                progress()
    combos = list(itertools.product(*(a.values for a in axes)))
    labels = [tuple(_label(v) for v in combo) for combo in combos]
    parts = [r[0].expand_dims({"point": [i]}) for i, r in enumerate(results)]
    ds = xr.concat(parts, dim="point")
    import pandas as pd

    index = pd.MultiIndex.from_tuples(labels, names=keys)
    ds = ds.assign_coords(xr.Coordinates.from_pandas_multiindex(index, "point")).unstack("point")
    ds = ds.transpose(*keys, ...)
    for a in axes:
        ds[a.key].attrs.update(units="", long_name=f"swept spec value {a.key} (as written)")
    ds.attrs = {}  # the first point's attributes do not describe the sweep
    ds.attrs.update(
        title=study.title,
        spec=study.to_json(),
        swept=", ".join(keys),
        seed=int(seed if seed is not None else study.run.seed),
        samples=n,
    )
    from .grid import CF_CONVENTIONS, CONVENTIONS
    from .safety import caution

    cands = [
        (c.name, c.construction, [la.material.name for la in c.plate.layers])
        for c in study.candidates
    ]
    ds.attrs.update(
        Conventions=CF_CONVENTIONS,
        polarization_conventions=CONVENTIONS,
        laser_caution=caution(str(study.source.table.get("shape", "")), cands),
    )
    rows = [
        {"set": {a.key: v for a, v in zip(axes, combo, strict=True)}, "candidates": r[1]}
        for combo, r in zip(combos, results, strict=True)
    ]
    return ds, rows


def _label(v) -> str:
    """A coordinate label for a swept value (text as written; lists as [a, b])."""
    if isinstance(v, list):
        return "[" + ", ".join(_label(x) for x in v) + "]"
    return str(v)
