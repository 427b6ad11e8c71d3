"""Spec files (TOML): read and validate a tolerance study into a frozen :class:`~.study.Study`.

A spec names the analysis grid, the source, the input state, the goal, the candidate plates and
the tolerances that manufacturing and mounting can hold.  Every mistake raises
:class:`~tolerance.errors.RetolError` naming the file, the key and the fix.  All validation ends
here: the source is built on the grid, the laser drift parsed, every candidate's plate designed
and its materials checked against the grid, so nothing downstream re-parses or patches the study.
"""

from __future__ import annotations

import dataclasses
import difflib
import json
import math
import tomllib
from pathlib import Path

from . import distributions
from .errors import RetolError
from .limits import check_spec_text
from .plates import CONSTRUCTION_KEYS, CONSTRUCTIONS
from .study import (
    Candidate,
    Environment,
    Goal,
    InputState,
    LayerSpec,
    ReportSettings,
    RunSettings,
    Source,
    Study,
    WavelengthGrid,
    _proxy,
)
from .tolerances import PER_ELEMENT, TOLERANCES, check_bounds, split_key
from .units import interval_nm, length_um, wavelength_nm

TOP_KEYS = (
    "title",
    "wavelength",
    "source",
    "input",
    "goal",
    "candidate",
    "tolerances",
    "run",
    "environment",
    "report",
    "allocation",
)
ALLOCATION_KEYS = ("target_yield", "cost")
WAVELENGTH_KEYS = ("start", "stop", "step")
INPUT_KEYS = (
    "azimuth_deg",
    "ellipticity_deg",
    "dop",
    "extinction_db",
    "stokes_csv",
    "stokes_table",
)
GOAL_KEYS = (
    "state",
    "metric",
    "min",
    "over",
    "azimuth_deg",
    "handedness",
    "acceptance_limit_waves",
    "yield",
    "max",
    "axial_ratio",
    "ellipticity_deg",
    "stokes",
)
GOAL_STATES = ("circular", "linear", "elliptical", "stokes")
GOAL_OVER = ("band", "spectrum")
CANDIDATE_KEYS = (
    "name",
    "construction",
    "material",
    "waves",
    "design",
    "axis_deg",
    *CONSTRUCTION_KEYS,
    "tolerances",
    "elements",
    "faces",
    "air_gap",
)
RUN_KEYS = (
    "samples",
    "seed",
    "chunk_size",
    "quantiles",
    "confidence",
    "sensitivity_samples",
    "keep_samples",
    "sampling",
    "replicates",
    "rare",
    "variance_samples",
)
SAMPLINGS = ("random", "sobol")
RARE_MODES = ("auto", "off")
ENV_KEYS = ("temperature_c", "temperature_range", "tilt_max_deg")
REPORT_KEYS = ("formats",)
DIST_KEYS = distributions.DIST_KEYS
DEFAULT_QUANTILES = (0.01, 0.05, 0.5, 0.95, 0.99)
#: Largest number of wavelengths in the analysis grid.
MAX_WAVELENGTHS = 20001


def goal_metrics():
    """The goal-metric registry (see :mod:`tolerance.metrics`)."""
    from .metrics import METRICS

    return METRICS


class _Ctx:
    def __init__(self, path: str):
        self.path = path

    def err(self, key: str, problem: str, fix: str | None = None):
        return RetolError(f"{self.path}: {key}", problem, fix)

    def check_keys(self, table: dict, allowed, where: str):
        for k in table:
            if k not in allowed:
                close = difflib.get_close_matches(str(k), list(allowed), n=1)
                fix = (
                    f"did you mean {close[0]!r}?" if close else f"known keys: {', '.join(allowed)}"
                )
                raise self.err(f"{where}{k}" if where else k, "unknown key", fix)

    def table(self, d: dict, key: str, required=False) -> dict:
        v = d.get(key)
        if v is None:
            if required:
                raise self.err(f"[{key}]", "missing", f"add a [{key}] table")
            return {}
        if not isinstance(v, dict):
            raise self.err(key, "must be a table", f"write it as [{key}]")
        return v

    def name(self, d, key, where, choices, default=None):
        """A string choice (refuses lists, tables, dates and numbers)."""
        v = d.get(key, default)
        if not isinstance(v, str):
            raise self.err(
                f"{where}{key}", f"must be a name, got {v!r}", f"use one of {', '.join(choices)}"
            )
        if v not in choices:
            close = difflib.get_close_matches(v, list(choices), n=1)
            fix = f"did you mean {close[0]!r}?" if close else f"use one of {', '.join(choices)}"
            raise self.err(f"{where}{key}", f"unknown {key} {v!r}", fix)
        return v

    def text(self, d, key, where, example):
        v = d.get(key)
        if not isinstance(v, str) or not v.strip():
            got = "missing" if key not in d else f"must be a name, got {v!r}"
            raise self.err(f"{where}{key}", got, f"add {key} = {example}")
        return v

    def number(
        self,
        d,
        key,
        where,
        default=None,
        required=False,
        minimum=None,
        integer=False,
        strict_min=False,
        maximum=None,
    ):
        if key not in d:
            if required:
                raise self.err(f"{where}{key}", "missing", f"add {key} = ...")
            return default
        v = d[key]
        ok = isinstance(v, int) if integer else isinstance(v, int | float)
        if isinstance(v, bool) or not ok:
            kind = "a whole number" if integer else "a number"
            raise self.err(f"{where}{key}", f"must be {kind}, got {v!r}", f"e.g. {key} = 1")
        if not math.isfinite(v):
            raise self.err(f"{where}{key}", "must be finite", "give a finite number")
        if minimum is not None and (v < minimum or (strict_min and v <= minimum)):
            rel = "above" if strict_min else "at least"
            raise self.err(
                f"{where}{key}",
                f"must be {rel} {minimum:g}, got {v!r}",
                f"give a value {'>' if strict_min else '>='} {minimum:g}",
            )
        if maximum is not None and v > maximum:
            raise self.err(f"{where}{key}", f"must be at most {maximum:g}, got {v!r}")
        return v

    def flag(self, d, key, where, default=False) -> bool:
        v = d.get(key, default)
        if not isinstance(v, bool):
            raise self.err(f"{where}{key}", f"must be true or false, got {v!r}", f"{key} = true")
        return v

    def wl(self, d, key, where, required=True, default=None):
        if key not in d:
            if required:
                raise self.err(f"{where}{key}", "missing", f'add {key} = "780nm"')
            return default
        return wavelength_nm(d[key], f"{self.path}: {where}{key}")


def _tolerances(ctx: _Ctx, table: dict, where="[tolerances]") -> tuple[dict, float | None]:
    """The distributions of a tolerance table and the test wavelength of ``retardance_waves``
    (its extra key ``at``, None when not given). [nm]"""
    ctx.check_keys(table, list(TOLERANCES), f"{where}.")
    out = {}
    at_nm = None
    for key, value in table.items():
        field = f"{ctx.path}: {where}.{key}"
        convert = length_um if TOLERANCES[key].extra["unit_kind"] == "length" else None
        if key == "retardance_waves" and isinstance(value, dict) and "at" in value:
            value = dict(value)
            at_nm = wavelength_nm(value.pop("at"), f"{field}.at")
        dist = distributions.parse(value, field, convert)
        out[key] = check_bounds(key, dist, field)
    return out, at_nm


def _allocation(ctx: _Ctx, raw: dict, tolerances: dict, candidates=()):
    """``[allocation]``: target_yield in (0, 1) and ``cost`` tables of widths and costs.

    A cost key names a tolerance the spec gives (in ``[tolerances]``, a candidate's or a train
    element's table), or one element's tolerance of a train (``"clocking_deg[element 1]"``,
    which then prices that element alone; the plain name prices every element alike).
    """
    import math

    from .study import AllocationSettings

    if "allocation" not in raw:
        return None
    a = ctx.table(raw, "allocation")
    ctx.check_keys(a, ALLOCATION_KEYS, "[allocation].")
    target = None
    if "target_yield" in a:
        target = float(ctx.number(a, "target_yield", "[allocation]."))
        if not 0.0 < target < 1.0:
            raise ctx.err(
                "[allocation].target_yield", f"must be in (0, 1), got {target:g}", "e.g. 0.99"
            )
    cost = {}
    table = a.get("cost", {})
    if not isinstance(table, dict):
        raise ctx.err("[allocation].cost", "must be a table", "e.g. [allocation.cost]")
    given = set(tolerances)
    elements = 0
    for c in candidates:
        given |= set(c.tolerances)
        for el in c.elements or ():
            given |= set(el.tolerances)
        elements = max(elements, len(c.elements or ()))
    named = [k for k in table if split_key(k)[1] is not None]
    ctx.check_keys(
        {k: v for k, v in table.items() if k not in named}, list(TOLERANCES), "[allocation.cost]."
    )
    for key in named:
        base, e = split_key(key)
        if base not in PER_ELEMENT or e >= elements:
            raise ctx.err(
                f"[allocation.cost].{key}",
                "names no element tolerance of a train in this spec",
                f"use one of {', '.join(PER_ELEMENT)} with an element 0..{max(elements - 1, 0)}"
                if elements
                else "element names apply to trains only",
            )
    for key, entry in table.items():
        where = f"[allocation.cost].{key}"
        if not isinstance(entry, dict) or set(entry) != {"widths", "cost"}:
            raise ctx.err(
                where, "needs widths and cost", f"{key} = {{ widths = [1, 0.5], cost = [0, 1] }}"
            )
        w, c = entry["widths"], entry["cost"]
        ok = all(
            isinstance(x, list)
            and x
            and all(isinstance(v, int | float) and not isinstance(v, bool) for v in x)
            and all(math.isfinite(v) for v in x)
            for x in (w, c)
        )
        if not ok:
            raise ctx.err(
                where, "widths and cost must be lists of finite numbers", "e.g. widths = [1, 0.5]"
            )
        if len(w) != len(c):
            raise ctx.err(where, f"{len(w)} widths but {len(c)} costs", "give one cost per width")
        if any(v < 0 for v in w) or any(v < 0 for v in c):
            raise ctx.err(where, "widths and costs must not be negative", "give values >= 0")
        d = [b - a_ for a_, b in zip(w, w[1:], strict=False)]
        if not (all(x < 0 for x in d) or all(x > 0 for x in d)):
            raise ctx.err(
                where, "widths are not sorted", "list them loosest first, e.g. [1, 0.5, 0.2]"
            )
        if split_key(key)[0] not in given:
            raise ctx.err(where, "is not a tolerance this spec gives", f"add {key} to [tolerances]")
        cost[key] = (tuple(float(v) for v in w), tuple(float(v) for v in c))
    return AllocationSettings(target, _proxy(cost))


def _check_retardance_at(ctx: _Ctx, study) -> None:
    """The plate must have a retardance at ``at`` for ``retardance_waves`` to scale."""
    import numpy as np

    from .plates import plate_retardance

    for c in study.candidates:
        if "retardance_waves" not in study.tolerances_for(c):
            continue
        at = study.retardance_at(c)
        try:
            r = float(plate_retardance(c.plate, at)) / (2 * np.pi)
        except RetolError as exc:
            raise ctx.err(
                "[tolerances].retardance_waves.at", exc.problem, "give an `at` the materials cover"
            ) from None
        if not abs(r) > 1e-6:
            raise ctx.err(
                "[tolerances].retardance_waves",
                f"candidate {c.name!r} has no retardance at {at:g} nm to scale",
                "use thickness_um for this plate",
            )


def _layers(ctx: _Ctx, layers, where: str) -> tuple[LayerSpec, ...]:
    if not isinstance(layers, list) or not layers:
        raise ctx.err(
            f"{where}layers",
            "a stack needs a list of layers",
            'add layers = [{ material = "quartz", thickness = "17.5um", axis_deg = 0 }]',
        )
    out = []
    for j, la in enumerate(layers):
        w = f"{where}layers[{j}]."
        if not isinstance(la, dict):
            raise ctx.err(f"{where}layers[{j}]", "must be a table")
        ctx.check_keys(la, ("material", "thickness", "axis_deg"), w)
        if "material" not in la or "thickness" not in la:
            raise ctx.err(f"{where}layers[{j}]", "needs material and thickness")
        mat = ctx.text(la, "material", w, '"quartz"')
        th = length_um(la["thickness"], f"{ctx.path}: {w}thickness")
        if not th > 0:
            raise ctx.err(f"{w}thickness", "must be positive", 'e.g. "17.5um"')
        if th > 1e6:
            raise ctx.err(
                f"{w}thickness", f"{th:g} um is over a metre", "give the thickness in um or mm"
            )
        axis = float(ctx.number(la, "axis_deg", w, default=0.0))
        out.append(LayerSpec(mat, th, axis))
    return tuple(out)


def _construction_params(ctx: _Ctx, c: dict, cons: str, where: str) -> dict:
    """The construction's own keys, read and checked."""
    out: dict = {}
    if cons == "multi-order":
        out["order"] = ctx.number(
            c, "order", where, required=True, minimum=0, integer=True, maximum=100000
        )
    if cons == "compound":
        if "thick_plate" not in c:
            raise ctx.err(
                f"{where}thick_plate", "a compound plate needs it", 'add thick_plate = "1000um"'
            )
        t = length_um(c["thick_plate"], f"{ctx.path}: {where}thick_plate")
        if not 0 < t <= 1e6:
            raise ctx.err(
                f"{where}thick_plate", "must be positive and below a metre", 'e.g. "1000um"'
            )
        out["thick_plate_um"] = t
    if cons == "achromatic":
        out["partner"] = ctx.text(c, "partner", where, '"mgf2"')
        if "match" in c:
            m = c["match"]
            if not isinstance(m, list) or len(m) != 2:
                raise ctx.err(
                    f"{where}match", "must list two wavelengths", 'e.g. match = ["450nm", "650nm"]'
                )
            out["match_nm"] = tuple(wavelength_nm(x, f"{ctx.path}: {where}match") for x in m)
    if cons == "film" and "retardance" in c:
        r = interval_nm(c["retardance"], f"{ctx.path}: {where}retardance")
        if not r > 0:
            raise ctx.err(f"{where}retardance", "must be positive", 'e.g. "137.5nm"')
        out["retardance_nm"] = r
    if cons == "stack":
        out["layers"] = _layers(ctx, c.get("layers"), where)
    return out


def _candidate(ctx: _Ctx, c, i: int, default_design) -> Candidate:
    where = f"[[candidate]] #{i + 1}."
    if not isinstance(c, dict):
        raise ctx.err(f"candidate #{i + 1}", "must be a table", "write [[candidate]] blocks")
    ctx.check_keys(c, CANDIDATE_KEYS, where)
    name = c.get("name", f"candidate {i + 1}")
    if not isinstance(name, str) or not name.strip():
        raise ctx.err(f"{where}name", "must be a non-empty string")
    where = f"[[candidate]] {name!r}."
    if "elements" in c:
        return _train(ctx, c, name, where, default_design)
    if "construction" not in c:
        raise ctx.err(f"{where}construction", "missing", f"one of {', '.join(CONSTRUCTIONS)}")
    cons = ctx.name(c, "construction", where, list(CONSTRUCTIONS))
    own = CONSTRUCTIONS[cons].key_names
    for k in c:
        if k in CONSTRUCTION_KEYS and k not in own:
            raise ctx.err(
                f"{where}{k}",
                f"does not apply to a {cons} plate",
                "remove it, or change construction",
            )
    material = None
    if cons != "stack":
        material = ctx.text(c, "material", where, '"quartz"')
    elif "material" in c:
        material = ctx.text(c, "material", where, '"quartz"')
    waves = float(
        ctx.number(c, "waves", where, default=0.25, minimum=0, strict_min=True, maximum=1e5)
    )
    if "design" in c:
        design = ctx.wl(c, "design", where)
    elif cons != "stack" and default_design is None:
        raise ctx.err(f"{where}design", "missing", 'add design = "780nm"')
    else:
        design = default_design
    axis = float(ctx.number(c, "axis_deg", where, default=45.0))
    params = _construction_params(ctx, c, cons, where)
    tol = {}
    if "tolerances" in c:
        t = c["tolerances"]
        if not isinstance(t, dict):
            raise ctx.err(f"{where}tolerances", "must be a table")
        tol, at_nm = _tolerances(ctx, t, f"{where}tolerances")
    else:
        at_nm = None
    faces = None
    if "faces" in c:
        from .etalon import parse_faces

        try:
            faces = parse_faces(c["faces"], f"{where}faces", getattr(ctx, "base_dir", None))
        except RetolError as exc:
            raise ctx.err(exc.field, exc.problem, exc.fix) from None
        faces = None if faces.ideal else faces
    air_gap = c.get("air_gap", False)
    if not isinstance(air_gap, bool):
        raise ctx.err(
            f"{where}air_gap", f"must be true or false, got {air_gap!r}", "air_gap = true"
        )
    cand = Candidate(
        faces=faces,
        air_gap=air_gap,
        name=name,
        construction=cons,
        material=material,
        waves=waves,
        design_nm=design,
        axis_deg=axis,
        tolerances=_proxy(tol),
        retardance_at_nm=at_nm,
        **params,
    )
    try:
        plate = cand.build_plate()
    except RetolError as exc:
        raise RetolError(f"{ctx.path}: {where}{exc.field}", exc.problem, exc.fix) from None
    return dataclasses.replace(cand, plate=plate)


def _wavelength(ctx: _Ctx, raw: dict) -> WavelengthGrid:
    w = ctx.table(raw, "wavelength", required=True)
    ctx.check_keys(w, WAVELENGTH_KEYS, "[wavelength].")
    start = ctx.wl(w, "start", "[wavelength].")
    stop = ctx.wl(w, "stop", "[wavelength].")
    if "step" not in w:
        raise ctx.err("[wavelength].step", "missing", 'add step = "1nm"')
    step = interval_nm(w["step"], f"{ctx.path}: [wavelength].step")
    if not step > 0:
        raise ctx.err("[wavelength].step", f"must be positive, got {w['step']!r}", 'e.g. "0.5nm"')
    if stop < start:
        raise ctx.err("[wavelength].stop", f"{stop:g} nm is below start {start:g} nm", "swap them")
    count = (stop - start) / step + 1.0
    if not count <= MAX_WAVELENGTHS:
        raise ctx.err(
            "[wavelength].step", f"gives {count:.3g} wavelengths", f"use at most {MAX_WAVELENGTHS}"
        )
    n = int(math.floor((stop - start) / step + 1e-9)) + 1
    if n > MAX_WAVELENGTHS:
        raise ctx.err(
            "[wavelength].step", f"gives {n} wavelengths", f"use at most {MAX_WAVELENGTHS}"
        )
    return WavelengthGrid(start, stop, step, n)


def _source(ctx: _Ctx, raw: dict, grid: WavelengthGrid, base_dir) -> Source:
    from .sources import build_spectrum

    src = ctx.table(raw, "source") or {"shape": "flat"}
    try:
        json.dumps(src)
    except TypeError:
        raise ctx.err(
            "[source]",
            "holds a value that is not a number, string or table (a date?)",
            'write wavelengths as strings such as "780nm"',
        ) from None
    spectrum = build_spectrum(
        src, grid.values(), Path(base_dir) if base_dir else None, field=f"{ctx.path}: [source]"
    )
    drift = distributions.from_drift(spectrum.drift) if spectrum.drift else None
    return Source(table=_freeze(src), spectrum=spectrum, drift=drift)


def _goal(ctx: _Ctx, raw: dict) -> Goal:
    metrics = goal_metrics()
    g = ctx.table(raw, "goal", required=True)
    ctx.check_keys(g, GOAL_KEYS, "[goal].")
    state = ctx.name(g, "state", "[goal].", GOAL_STATES, default="circular")
    default_metric = {"circular": "axial_ratio", "linear": "extinction_db"}.get(
        state, "sphere_angle_deg"
    )
    metric = ctx.name(g, "metric", "[goal].", list(metrics), default=default_metric)
    entry = metrics[metric]
    if state not in entry.extra["states"]:
        raise ctx.err(
            "[goal].metric",
            f"{metric} needs a {' or '.join(entry.extra['states'])} goal",
            f"use {', '.join(k for k, e in metrics.items() if state in e.extra['states'])} "
            f"for a {state} goal",
        )
    over = ctx.name(g, "over", "[goal].", GOAL_OVER, default="band")
    sense = entry.extra["sense"]
    if "min" in g and "max" in g:
        raise ctx.err("[goal]", "gives both min and max", f"{metric} takes only {sense}")
    other = "max" if sense == "min" else "min"
    if other in g:
        better = "larger" if sense == "min" else "smaller"
        raise ctx.err(
            f"[goal].{other}",
            f"{metric} is better when {better}, so its goal is a {sense}, not a {other}",
            f"write {sense} = ... instead",
        )
    limit = ctx.number(g, sense, "[goal].", required=True)
    lo, hi = entry.extra["range"]
    if not lo <= limit <= hi:
        raise ctx.err(
            f"[goal].{sense}",
            f"{metric} lies between {lo:g} and {hi:g}, so {sense} = {limit:g} cannot be the goal",
            "e.g. min = 0.95" if sense == "min" else "e.g. max = 5",
        )
    hand = g.get("handedness")
    if hand is not None and hand not in ("right", "left"):
        raise ctx.err(
            "[goal].handedness",
            f"unknown {hand!r}",
            "use right (clockwise looking toward the source) or left",
        )
    required = ctx.number(g, "yield", "[goal].")
    if required is not None and not 0.0 < required <= 1.0:
        raise ctx.err(
            "[goal].yield",
            f"the required fraction of passing builds must lie in (0, 1], got {required!r}",
            "give a fraction, e.g. yield = 0.95 for 95 %",
        )
    shape = _goal_shape(ctx, g, state)
    goal = Goal(
        state=state,
        metric=metric,
        min=float(limit) if sense == "min" else math.nan,
        over=over,
        azimuth_deg=float(ctx.number(g, "azimuth_deg", "[goal].", default=0.0)),
        handedness=hand,
        acceptance_limit_waves=float(
            ctx.number(
                g, "acceptance_limit_waves", "[goal].", default=0.01, minimum=0, strict_min=True
            )
        ),
        required_yield=None if required is None else float(required),
        max=float(limit) if sense == "max" else None,
        **shape,
    )
    try:
        goal.vector()  # the physics checks the ellipse (axial ratio, handedness, Stokes length)
    except RetolError as e:
        raise ctx.err(f"[goal].{e.field}", e.problem, e.fix) from None
    return goal


def _goal_shape(ctx: _Ctx, g: dict, state: str) -> dict:
    """The keys that shape an elliptical or Stokes goal, each allowed only with its state."""
    out: dict = {}
    for key in ("axial_ratio", "ellipticity_deg"):
        if key in g:
            if state != "elliptical":
                raise ctx.err(
                    f"[goal].{key}",
                    f"applies to an elliptical goal, not {state}",
                    'set state = "elliptical" or drop it',
                )
            out[key] = float(ctx.number(g, key, "[goal]."))
    if state == "elliptical" and not out:
        raise ctx.err(
            "[goal].axial_ratio",
            "missing for an elliptical goal",
            "add axial_ratio = b/a in [0, 1] or ellipticity_deg in [-45, 45]",
        )
    if "stokes" in g or state == "stokes":
        v = g.get("stokes")
        if state != "stokes":
            raise ctx.err(
                "[goal].stokes",
                f"applies to a stokes goal, not {state}",
                'set state = "stokes" or drop it',
            )
        if (
            not isinstance(v, list)
            or len(v) != 3
            or any(isinstance(x, bool) or not isinstance(x, int | float) for x in v)
            or not all(math.isfinite(x) for x in v)
        ):
            raise ctx.err(
                "[goal].stokes",
                f"must be three finite numbers, got {v!r}",
                "e.g. stokes = [0.6, 0.0, 0.8]",
            )
        out["stokes"] = tuple(float(x) for x in v)
    return out


def _stokes_input(ctx: _Ctx, inp: dict, base_dir) -> InputState:
    """``[input] stokes_csv = "file.csv"`` (or its normalised form ``stokes_table``)."""
    import numpy as np

    from .input_spectrum import check_table, read_stokes_csv

    if "stokes_csv" in inp and "stokes_table" in inp:
        raise ctx.err("[input].stokes_csv", "given with stokes_table", "give one of the two")
    others = [k for k in inp if k not in ("stokes_csv", "stokes_table")]
    if others:
        raise ctx.err(
            f"[input].{others[0]}",
            "cannot be given with a Stokes table (the table is the whole input)",
            "remove it; the input_azimuth_deg tolerance turns a tabled input",
        )
    if "stokes_csv" in inp:
        field = f"{ctx.path}: [input].stokes_csv"
        value = inp["stokes_csv"]
        if not isinstance(value, str) or not value.strip():
            raise RetolError(field, f"expected a file name, got {value!r}", 'e.g. "input.csv"')
        path = Path(value).expanduser()
        if not path.is_absolute() and base_dir is not None:
            path = Path(base_dir) / path
        x, s = read_stokes_csv(path, field)
    else:
        field = f"{ctx.path}: [input].stokes_table"
        t = inp["stokes_table"]
        keys = ("wavelength_nm", "s1", "s2", "s3")
        ok = isinstance(t, dict) and set(t) == set(keys)
        cols = [t.get(k) for k in keys] if ok else []
        ok = ok and all(isinstance(c, list) and len(c) == len(cols[0]) >= 2 for c in cols)
        ok = ok and all(
            isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)
            for c in cols
            for v in c
        )
        if not ok:
            raise RetolError(
                field,
                "must be a table of equal lists wavelength_nm, s1, s2, s3 (2 rows or more)",
                'or give stokes_csv = "input.csv"',
            )
        rows = np.array(cols, dtype=float).T
        if np.any(rows[:, 0] <= 0) or np.any(np.sqrt(np.sum(rows[:, 1:] ** 2, axis=1)) > 1 + 1e-6):
            raise RetolError(field, "needs wavelengths > 0 and s1² + s2² + s3² <= 1", None)
        x, s = check_table(rows, field)
    table = (tuple(float(v) for v in x), tuple(tuple(float(v) for v in r) for r in s))
    return InputState(stokes_table=table)


def _input(ctx: _Ctx, inp: dict, base_dir=None) -> InputState:
    """``[input]``: azimuth, ellipticity and degree of polarization, or a polarizer's extinction,
    or a table of Stokes vectors over the spectrum."""
    if "stokes_csv" in inp or "stokes_table" in inp:
        return _stokes_input(ctx, inp, base_dir)
    az = float(ctx.number(inp, "azimuth_deg", "[input].", default=0.0))
    chi = float(ctx.number(inp, "ellipticity_deg", "[input].", default=0.0))
    if abs(chi) > 45.0:
        raise ctx.err(
            "[input].ellipticity_deg",
            f"must lie in [-45, 45], got {chi:g}",
            "give the ellipticity angle, tan|chi| = b/a, positive right-handed",
        )
    dop = float(ctx.number(inp, "dop", "[input].", default=1.0, minimum=0.0, maximum=1.0))
    er = ctx.number(inp, "extinction_db", "[input].", minimum=0.0, strict_min=True)
    if er is not None and ("dop" in inp or "ellipticity_deg" in inp):
        raise ctx.err(
            "[input].extinction_db",
            "describes the light behind a linear polarizer, so dop and ellipticity_deg "
            "cannot be given with it",
            "give either extinction_db or dop/ellipticity_deg",
        )
    return InputState(az, chi, dop, None if er is None else float(er))


def _environment(ctx: _Ctx, raw: dict) -> Environment:
    env = ctx.table(raw, "environment")
    ctx.check_keys(env, ENV_KEYS, "[environment].")
    t_nom = float(ctx.number(env, "temperature_c", "[environment].", default=20.0, minimum=-273.15))
    tr = env.get("temperature_range", [t_nom - 30.0, t_nom + 30.0])
    if (
        not isinstance(tr, list)
        or len(tr) != 2
        or not all(
            isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x) for x in tr
        )
        or tr[0] >= tr[1]
    ):
        raise ctx.err(
            "[environment].temperature_range",
            "must be [low, high] finite with low < high",
            "e.g. [-10, 50]",
        )
    if tr[0] < -273.15:
        raise ctx.err("[environment].temperature_range", "is below absolute zero", "give deg C")
    tilt = float(
        ctx.number(env, "tilt_max_deg", "[environment].", default=20.0, minimum=0, strict_min=True)
    )
    if tilt >= 90:
        raise ctx.err(
            "[environment].tilt_max_deg", "must be below 90 deg", "e.g. tilt_max_deg = 15"
        )
    return Environment(t_nom, (float(tr[0]), float(tr[1])), tilt)


def _run(ctx: _Ctx, raw: dict) -> RunSettings:
    r = ctx.table(raw, "run")
    ctx.check_keys(r, RUN_KEYS, "[run].")
    samples = ctx.number(r, "samples", "[run].", default=20000, integer=True, minimum=1)
    q = r.get("quantiles", list(DEFAULT_QUANTILES))
    if (
        not isinstance(q, list)
        or not q
        or not all(
            isinstance(x, int | float) and not isinstance(x, bool) and 0 <= x <= 1 for x in q
        )
    ):
        raise ctx.err(
            "[run].quantiles", "must be a list of numbers in [0, 1]", "e.g. [0.05, 0.5, 0.95]"
        )
    conf = ctx.number(r, "confidence", "[run].", default=0.95)
    if not 0 < conf < 1:
        raise ctx.err("[run].confidence", "must lie between 0 and 1", "e.g. 0.95")
    return RunSettings(
        samples=int(samples),
        seed=int(ctx.number(r, "seed", "[run].", default=0, integer=True, minimum=0)),
        chunk_size=ctx.number(r, "chunk_size", "[run].", default=None, integer=True, minimum=1),
        quantiles=tuple(sorted(float(x) for x in q)),
        confidence=float(conf),
        sensitivity_samples=ctx.number(
            r, "sensitivity_samples", "[run].", default=None, integer=True, minimum=1
        ),
        keep_samples=ctx.flag(r, "keep_samples", "[run]."),
        sampling=ctx.name(r, "sampling", "[run].", SAMPLINGS, default="random"),
        replicates=int(
            ctx.number(r, "replicates", "[run].", default=8, integer=True, minimum=2, maximum=1024)
        ),
        rare=ctx.name(r, "rare", "[run].", RARE_MODES, default="auto"),
        variance_samples=int(
            ctx.number(r, "variance_samples", "[run].", default=1024, integer=True, minimum=0)
        ),
    )


def _report(ctx: _Ctx, raw: dict) -> ReportSettings:
    rep = ctx.table(raw, "report")
    ctx.check_keys(rep, REPORT_KEYS, "[report].")
    formats = rep.get("formats", ["png"])
    if (
        not isinstance(formats, list)
        or not formats
        or any(f not in ("png", "svg", "pdf") for f in formats)
    ):
        raise ctx.err(
            "[report].formats",
            f"must list png, svg or pdf, got {formats!r}",
            'e.g. formats = ["png", "svg"]',
        )
    return ReportSettings(tuple(formats))


def validate(raw: dict, path: str = "<spec>", base_dir=None, source_text=None) -> Study:
    """Validate a parsed spec and return the frozen :class:`~tolerance.study.Study`.

    Parameters
    ----------
    raw : dict
        The parsed TOML document.
    path : str
        Where it came from, for messages and the grid's record.
    base_dir : str or Path, optional
        Folder against which relative file paths in the spec resolve (default: the working folder).
    source_text : str, optional
        The spec as written, kept for the report.
    """
    ctx = _Ctx(Path(path).name if path != "<spec>" else path)
    ctx.base_dir = base_dir  # data files (a coating's CSV) are read relative to the spec
    if not isinstance(raw, dict):
        raise ctx.err("spec", "must be a TOML document")
    ctx.check_keys(raw, TOP_KEYS, "")
    title = raw.get("title", Path(path).stem)
    if not isinstance(title, str):
        raise ctx.err("title", f"must be a string, got {title!r}", 'title = "my plate"')
    grid = _wavelength(ctx, raw)
    source = _source(ctx, raw, grid, base_dir)
    inp = ctx.table(raw, "input")
    ctx.check_keys(inp, INPUT_KEYS, "[input].")
    input_state = _input(ctx, inp, base_dir)
    goal = _goal(ctx, raw)
    environment = _environment(ctx, raw)

    cands = raw.get("candidate")
    if not isinstance(cands, list) or not cands:
        raise ctx.err("[[candidate]]", "no candidate plates", "add at least one [[candidate]]")
    src = source.table
    default_design = None
    if "center" in src:
        default_design = wavelength_nm(src["center"], f"{ctx.path}: [source].center")
    candidates = tuple(_candidate(ctx, c, i, default_design) for i, c in enumerate(cands))
    names = [c.name for c in candidates]
    dup = {x for x in names if names.count(x) > 1}
    if dup:
        raise ctx.err(
            "[[candidate]].name",
            f"duplicated name {sorted(dup)[0]!r}",
            "give each candidate its own name",
        )
    tolerances, at_nm = _tolerances(ctx, ctx.table(raw, "tolerances"))
    study = Study(
        title=title,
        wavelength=grid,
        source=source,
        input=input_state,
        goal=goal,
        environment=environment,
        candidates=candidates,
        tolerances=_proxy(tolerances),
        run=_run(ctx, raw),
        report=_report(ctx, raw),
        spec_path=str(path),
        base_dir=None if base_dir is None else str(base_dir),
        source_text=source_text,
        retardance_at_nm=at_nm,
        allocation=_allocation(ctx, raw, tolerances, candidates),
    )
    _check_ranges(study)
    _check_retardance_at(ctx, study)
    _check_fringes(study)
    _check_face_tables(study)
    return study


def _check_face_tables(study: Study) -> None:
    """A tabulated coating must cover the grid (the source's lines lie on it; a drifting line
    reads the table's end values beyond it)."""
    from .etalon import check_faces_cover

    grid = study.wavelength.values()
    for c in study.candidates:
        if c.faces is None or not c.faces.tabulated:
            continue
        field = f"{study.file_name}: [[candidate]] {c.name!r}.faces.reflectance"
        check_faces_cover(c.faces, float(grid[0]), float(grid[-1]), field, "[wavelength]")


def _check_fringes(study: Study) -> None:
    """Warn when the grid undersamples the fringes of a candidate with reflecting faces."""
    from .etalon import check_fringe_sampling

    step = study.wavelength.step_nm
    for c in study.candidates:
        if c.faces is not None:
            where = f"{study.file_name}: [[candidate]] {c.name!r}.faces"
            check_fringe_sampling(c.plate, c.faces, c.air_gap, step, c.plate.design_nm, where)


def _check_ranges(study: Study) -> None:
    """Every candidate's materials must cover the grid and the source's lines (with drift)."""
    import numpy as np

    from .dispersion import check_range

    grid = study.wavelength.values()
    spectrum = study.source.spectrum
    fname = study.file_name
    if study.input.spectral:  # a tabled input must span the grid and the lines (with drift)
        from .input_spectrum import stokes_at

        need = [grid]
        if spectrum.lines_nm.size:
            lines = np.asarray(spectrum.lines_nm, dtype=float)
            span = (spectrum.drift or {}).get("span_nm")
            need.append(lines)
            if span is not None:
                need += [lines + float(span[0]), lines + float(span[1])]
        stokes_at(study.input.stokes_table, np.concatenate(need), f"{fname}: [input]")
    for c in study.candidates:
        for la in c.plate.layers:
            try:
                check_range(
                    la.material, grid, field=f"{fname}: [wavelength] for candidate {c.name!r}"
                )
                if spectrum.lines_nm.size:
                    lines = np.asarray(spectrum.lines_nm, dtype=float)
                    span = (spectrum.drift or {}).get("span_nm")
                    if span is not None:
                        lines = np.concatenate([lines + float(span[0]), lines + float(span[1])])
                    check_range(la.material, lines, field=f"{fname}: [source] (with its drift)")
            except RetolError as exc:
                raise RetolError(
                    exc.field, exc.problem, "choose a [wavelength] grid and source inside it"
                ) from None


def load_spec(path) -> Study:
    """Read and validate a spec file; see :func:`validate`.

    Raises
    ------
    RetolError
        On a missing file, bad TOML or any invalid key, naming the file, the key and the fix.
    """
    p = Path(path)
    if not p.is_file():
        raise RetolError(str(p), "no such spec file", "check the path")
    try:
        text = p.read_bytes().decode("utf-8")
    except UnicodeDecodeError:
        raise RetolError(p.name, "is not UTF-8 text", "save it as UTF-8") from None
    return loads(text, str(p), base_dir=p.parent.resolve())


def loads(text: str, path: str = "<spec>", base_dir=None) -> Study:
    """Validate a spec given as TOML text (e.g. a built-in example)."""
    name = Path(path).name
    check_spec_text(text, name)  # size and nesting limits before tomllib parses it
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RetolError(name, f"is not valid TOML ({exc})", "fix the syntax") from None
    except RecursionError:
        raise RetolError(name, "is nested too deeply", "flatten the spec") from None
    return validate(raw, path, base_dir=base_dir, source_text=text)


# ----------------------------------------------------------------------------- normalised form


def _raw_distribution(d: dict) -> dict:
    d = dict(d)
    at = d.pop("at_nm", None)
    out = distributions.Distribution.from_dict(d).to_spec()
    if at is not None:
        out["at"] = at
    return out


def _train(ctx: _Ctx, c: dict, name: str, where: str, default_design) -> Candidate:
    """A train: ``elements = [{plate}, {plate}, ...]``, each a plate in its own mount."""
    from .study import train_plate

    for k in c:
        if k not in ("name", "elements", "tolerances", "construction"):
            raise ctx.err(
                f"{where}{k}",
                "belongs inside an element of a train",
                "move it into its element's table in elements = [...]",
            )
    if c.get("construction", "train") != "train":
        raise ctx.err(f"{where}construction", "must be train (or left out) with elements")
    els = c["elements"]
    if not isinstance(els, list) or not els or not all(isinstance(e, dict) for e in els):
        raise ctx.err(
            f"{where}elements",
            f"must be a list of plate tables, got {els!r}",
            'e.g. elements = [{construction = "zero-order", material = "quartz", waves = 0.5}]',
        )
    elements: list = [None] * len(els)
    polarizers = []
    for k, e in enumerate(els):
        if "polarizer" in e:
            polarizers.append(k)  # built once a plate gives the train its design
            continue
        if "elements" in e or "name" in e:
            bad = next(x for x in ("elements", "name") if x in e)
            raise ctx.err(
                f"{where}elements[{k}].{bad}",
                "is not allowed in an element",
                "elements are plates in their own mounts; name the candidate instead",
            )
        _check_element_tolerances(ctx, e.get("tolerances"), f"{where}elements[{k}].tolerances")
        elements[k] = _candidate(ctx, {**e, "name": f"{name} #{k}"}, k, default_design)
    plates = [el for el in elements if el is not None]
    if not plates:
        raise ctx.err(
            f"{where}elements",
            "holds no plate",
            "a train needs at least one retarder element besides its polarizers",
        )
    for k in polarizers:
        elements[k] = _polarizer_element(
            ctx, els[k], f"{name} #{k}", f"{where}elements[{k}].", plates[0]
        )
    if polarizers and any(not el.face_model.ideal for el in plates):
        raise ctx.err(
            f"{where}elements",
            "a train with a polarizer is modelled with ideal faces only",
            'remove faces from its plates (faces = "ideal")',
        )
    tol, at_nm = {}, None
    if "tolerances" in c:
        if not isinstance(c["tolerances"], dict):
            raise ctx.err(f"{where}tolerances", "must be a table")
        tol, at_nm = _tolerances(ctx, c["tolerances"], f"{where}tolerances")
    first = elements[0]
    cand = Candidate(
        name=name,
        construction="train",
        material=None,
        waves=elements[-1].waves,
        design_nm=first.design_nm,
        axis_deg=elements[-1].axis_deg,
        tolerances=_proxy(tol),
        retardance_at_nm=at_nm,
        elements=tuple(elements),
    )
    return dataclasses.replace(cand, plate=train_plate(name, cand.elements))


def _check_element_tolerances(ctx: _Ctx, table, where: str) -> None:
    """An element's own tolerances are those of its plate and mount (:data:`PER_ELEMENT`)."""
    if table is None:
        return
    if not isinstance(table, dict):
        raise ctx.err(
            where, "must be a table", "e.g. tolerances = { clocking_deg = { sigma = 0.2 } }"
        )
    ctx.check_keys(table, list(TOLERANCES), f"{where}.")
    for key in table:
        if key not in PER_ELEMENT:
            raise ctx.err(
                f"{where}.{key}",
                "acts on the whole train, not on one element",
                "give it in the candidate's tolerances or in [tolerances]",
            )


def _polarizer_element(ctx: _Ctx, e: dict, name: str, where: str, first_plate) -> Candidate:
    """A linear polarizer in a train: ``{ polarizer = azimuth_deg, extinction_db = ER }``.

    Its plate is one polarizer layer (:class:`tolerance.plates.Layer` with ``extinction_db``)
    of zero thickness in the first plate's material (no retardance); its own tolerances may
    give only ``clocking_deg`` (its azimuth in its mount).
    """
    from .plates import Layer, Plate

    ctx.check_keys(e, ("polarizer", "extinction_db", "tolerances"), where)
    azimuth = float(ctx.number(e, "polarizer", where, required=True))
    er = float(
        ctx.number(
            e, "extinction_db", where, required=True, minimum=0, strict_min=True, maximum=150
        )
    )
    tol = {}
    t = e.get("tolerances")
    if t is not None:
        _check_element_tolerances(ctx, t, f"{where}tolerances")
        for k in t:
            if k != "clocking_deg":
                raise ctx.err(
                    f"{where}tolerances.{k}",
                    "a polarizer element has no plate to err",
                    "give only clocking_deg (its azimuth in its mount)",
                )
        tol, _ = _tolerances(ctx, t, f"{where}tolerances")
    design = float(first_plate.plate.design_nm)
    layer = Layer(first_plate.plate.layers[0].material, 0.0, azimuth, extinction_db=er)
    plate = Plate(name, "polarizer", (layer,), 0.0, design, azimuth)
    return Candidate(
        name=name,
        construction="polarizer",
        material=None,
        waves=0.0,
        design_nm=design,
        axis_deg=azimuth,
        tolerances=_proxy(tol),
        extinction_db=er,
        plate=plate,
    )


def _raw_candidate(c: dict) -> dict:
    if "polarizer" in c:
        out = {"polarizer": c["polarizer"], "extinction_db": c["extinction_db"]}
        if "tolerances" in c:
            out["tolerances"] = {k: _raw_distribution(v) for k, v in c["tolerances"].items()}
        return out
    if "elements" in c:
        out = {"name": c["name"], "elements": [_raw_candidate(e) for e in c["elements"]]}
        if "tolerances" in c:
            out["tolerances"] = {k: _raw_distribution(v) for k, v in c["tolerances"].items()}
        return out
    out = {k: c[k] for k in ("name", "construction", "material", "waves", "axis_deg") if k in c}
    if c.get("design_nm") is not None:
        out["design"] = c["design_nm"]
    for norm, key in (
        ("order", "order"),
        ("thick_plate_um", "thick_plate"),
        ("partner", "partner"),
        ("match_nm", "match"),
        ("retardance_nm", "retardance"),
    ):
        if norm in c:
            out[key] = c[norm]
    if "layers" in c:
        out["layers"] = [
            {
                "material": la["material"],
                "thickness": la["thickness_um"],
                "axis_deg": la["axis_deg"],
            }
            for la in c["layers"]
        ]
    if "tolerances" in c:
        out["tolerances"] = {k: _raw_distribution(v) for k, v in c["tolerances"].items()}
    for k in ("faces", "air_gap"):
        if k in c:
            out[k] = c[k]
    return out


def from_normalised(d, base_dir=None, source_text=None) -> Study:
    """The study of a normalised dict (:meth:`Study.to_dict`, a grid's ``spec`` attribute)."""
    d = json.loads(d) if isinstance(d, str) else d
    w = d["wavelength"]
    raw = {
        "title": d["title"],
        "wavelength": {"start": w["start_nm"], "stop": w["stop_nm"], "step": w["step_nm"]},
        "source": d["source"],
        "input": d["input"],
        "goal": {k: v for k, v in d["goal"].items() if v is not None},
        "environment": d["environment"],
        "candidate": [_raw_candidate(c) for c in d["candidates"]],
        "tolerances": {k: _raw_distribution(v) for k, v in d["tolerances"].items()},
        "run": {k: v for k, v in d["run"].items() if v is not None},
        "report": d["report"],
    }
    if d.get("allocation"):
        raw["allocation"] = d["allocation"]
    return validate(raw, d.get("spec_path", "<spec>"), base_dir=base_dir, source_text=source_text)


def _freeze(value):
    from .frozen import frozen

    return frozen(value)
