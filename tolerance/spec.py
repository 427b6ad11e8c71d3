"""Spec files (TOML): read, validate and normalise a tolerance study.

A spec names the analysis grid, the source, the input state, the goal, the candidate plates and
the tolerances that manufacturing and mounting can hold.  Every mistake raises
:class:`~tolerance.errors.RetolError` naming the file, the key and the fix.  The validated spec is
a plain dict (JSON-serialisable) so that it can be stored in the results grid.
"""

from __future__ import annotations

import copy
import difflib
import json
import math
import tomllib
from pathlib import Path

from .errors import RetolError
from .limits import check_spec_text
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
)
WAVELENGTH_KEYS = ("start", "stop", "step")
INPUT_KEYS = ("azimuth_deg",)
GOAL_KEYS = (
    "state",
    "metric",
    "min",
    "over",
    "azimuth_deg",
    "handedness",
    "acceptance_limit_waves",
)
GOAL_STATES = ("circular", "linear")
GOAL_METRICS = ("axial_ratio", "extinction_db", "fidelity")
GOAL_OVER = ("band", "spectrum")
CANDIDATE_KEYS = (
    "name",
    "construction",
    "material",
    "waves",
    "design",
    "axis_deg",
    "order",
    "thick_plate",
    "partner",
    "match",
    "retardance",
    "layers",
    "tolerances",
)
CONSTRUCTION_KEYS = ("order", "thick_plate", "partner", "match", "retardance", "layers")
RUN_KEYS = (
    "samples",
    "seed",
    "chunk_size",
    "quantiles",
    "confidence",
    "sensitivity_samples",
    "keep_samples",
)
ENV_KEYS = ("temperature_c", "temperature_range", "tilt_max_deg")
REPORT_KEYS = ("formats",)

#: Tolerance key -> (short name used in the grid, unit, what it perturbs)
TOLERANCES = {
    "thickness_um": ("thickness", "um", "each plate's thickness, independently"),
    "clocking_deg": ("clocking", "deg", "the whole plate's fast-axis angle in its mount"),
    "crossing_deg": ("crossing", "deg", "each later plate's axis relative to the first"),
    "tilt_deg": ("tilt", "deg", "angle of incidence; plane-of-incidence azimuth uniform"),
    "temperature_c": ("temperature", "degC", "plate temperature"),
    "input_azimuth_deg": ("input_azimuth", "deg", "azimuth of the linear input"),
}
DIST_KEYS = ("sigma", "uniform", "low", "high", "tolerance", "coverage")

DEFAULT_QUANTILES = [0.01, 0.05, 0.5, 0.95, 0.99]


class _Ctx:
    def __init__(self, path: str):
        self.path = path

    def err(self, key: str, problem: str, fix: str | None = None):
        return RetolError(f"{self.path}: {key}", problem, fix)

    def check_keys(self, table: dict, allowed, where: str):
        for k in table:
            if k not in allowed:
                close = difflib.get_close_matches(k, list(allowed), n=1)
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
        return v

    def wl(self, d, key, where, required=True, default=None):
        if key not in d:
            if required:
                raise self.err(f"{where}{key}", "missing", f'add {key} = "780nm"')
            return default
        try:
            return wavelength_nm(d[key], f"{self.path}: {where}{key}")
        except RetolError:
            raise
        except Exception:  # pragma: no cover - defensive
            raise self.err(f"{where}{key}", f"cannot read {d[key]!r}", 'e.g. "780nm"') from None


def _distribution(ctx: _Ctx, key: str, value, where: str | None = None) -> dict:
    """Normalise a tolerance distribution to {'kind', ...} with numbers in the key's unit."""
    where = where or f"[tolerances].{key}"
    if isinstance(value, int | float) and not isinstance(value, bool):
        raise ctx.err(
            where,
            f"a bare number ({value!r}) does not say which distribution",
            f"write {{ sigma = {value} }} (normal) or {{ uniform = {value} }} (± half width)",
        )
    if not isinstance(value, dict):
        raise ctx.err(
            where,
            "must be a table such as { sigma = 0.3 }",
            "use sigma, uniform, low/high or tolerance/coverage",
        )
    ctx.check_keys(value, DIST_KEYS, f"{where}.")
    nums = {}
    for k, v in value.items():
        if isinstance(v, bool) or not isinstance(v, int | float):
            if isinstance(v, str) and key.endswith(("_deg", "_c")) is False:
                try:
                    v = length_um(v, f"{ctx.path}: {where}.{k}")
                except RetolError:
                    raise
            else:
                raise ctx.err(f"{where}.{k}", f"must be a number, got {v!r}", f"e.g. {k} = 0.3")
        if not math.isfinite(v):
            raise ctx.err(f"{where}.{k}", "must be finite", "give a finite number")
        nums[k] = float(v)
    kinds = [k for k in ("sigma", "uniform", "tolerance") if k in nums]
    has_range = "low" in nums or "high" in nums
    if len(kinds) + has_range != 1:
        raise ctx.err(
            where, "give exactly one of sigma, uniform, low/high, tolerance", "e.g. { sigma = 0.3 }"
        )
    if "coverage" in nums and "tolerance" not in nums:
        raise ctx.err(
            f"{where}.coverage",
            "only goes with tolerance",
            "e.g. { tolerance = 0.9, coverage = 3 }",
        )
    if has_range:
        if "low" not in nums or "high" not in nums:
            raise ctx.err(where, "a range needs both low and high", "e.g. { low = 15, high = 35 }")
        if nums["low"] > nums["high"]:
            raise ctx.err(
                f"{where}.low", f"low {nums['low']:g} is above high {nums['high']:g}", "swap them"
            )
        return _bounded(
            ctx, key, where, {"kind": "range", "low": nums["low"], "high": nums["high"]}
        )
    k = kinds[0]
    if nums[k] < 0:
        raise ctx.err(f"{where}.{k}", f"must not be negative, got {nums[k]:g}", "give a width >= 0")
    if k == "sigma":
        return _bounded(ctx, key, where, {"kind": "normal", "sigma": nums["sigma"]})
    if k == "uniform":
        return _bounded(ctx, key, where, {"kind": "uniform", "half_width": nums["uniform"]})
    cov = nums.get("coverage", 3.0)
    if cov <= 0:
        raise ctx.err(f"{where}.coverage", "must be positive", "e.g. coverage = 3")
    return _bounded(
        ctx,
        key,
        where,
        {
            "kind": "normal",
            "sigma": nums["tolerance"] / cov,
            "limit": nums["tolerance"],
            "coverage": cov,
        },
    )


def _reach(dist: dict) -> float:
    """The largest |deviation| a distribution can practically give (6 sigma for a normal)."""
    if dist["kind"] == "normal":
        return 6.0 * dist["sigma"]
    if dist["kind"] == "uniform":
        return dist["half_width"]
    return max(abs(dist["low"]), abs(dist["high"]))


def _bounded(ctx: _Ctx, key: str, where: str, dist: dict) -> dict:
    """Refuse distributions that reach physically impossible values."""
    if key == "tilt_deg" and _reach(dist) >= 89.0:
        raise ctx.err(
            where,
            "reaches an angle of incidence of 89 deg or more",
            "tilts are a few degrees; give a smaller width",
        )
    if key in ("clocking_deg", "crossing_deg", "input_azimuth_deg") and _reach(dist) > 45.0:
        raise ctx.err(where, "reaches more than 45 deg", "angle errors are small; check the unit")
    if key == "temperature_c" and dist["kind"] == "range" and dist["low"] < -273.15:
        raise ctx.err(f"{where}.low", "is below absolute zero", "give a temperature in deg C")
    return dist


def _tolerances(ctx: _Ctx, table: dict, where="[tolerances]") -> dict:
    ctx.check_keys(table, list(TOLERANCES), f"{where}.")
    out = {}
    for key, value in table.items():
        out[key] = _distribution(ctx, key, value)
    return out


def _candidate(ctx: _Ctx, c, i: int, default_design) -> dict:
    where = f"[[candidate]] #{i + 1}."
    if not isinstance(c, dict):
        raise ctx.err(f"candidate #{i + 1}", "must be a table", "write [[candidate]] blocks")
    ctx.check_keys(c, CANDIDATE_KEYS, where)
    from .plates import CONSTRUCTIONS

    name = c.get("name", f"candidate {i + 1}")
    if not isinstance(name, str) or not name.strip():
        raise ctx.err(f"{where}name", "must be a non-empty string")
    where = f"[[candidate]] {name!r}."
    if "construction" not in c:
        raise ctx.err(f"{where}construction", "missing", f"one of {', '.join(CONSTRUCTIONS)}")
    cons = c["construction"]
    if cons not in CONSTRUCTIONS:
        close = difflib.get_close_matches(str(cons), list(CONSTRUCTIONS), n=1)
        fix = f"did you mean {close[0]!r}?" if close else f"use one of {', '.join(CONSTRUCTIONS)}"
        raise ctx.err(f"{where}construction", f"unknown construction {cons!r}", fix)
    extra = {
        "zero-order": (),
        "multi-order": ("order",),
        "compound": ("thick_plate",),
        "achromatic": ("partner", "match"),
        "film": ("retardance",),
        "stack": ("layers",),
    }
    for k in c:
        if k in CONSTRUCTION_KEYS and k not in extra[cons]:
            raise ctx.err(
                f"{where}{k}",
                f"does not apply to a {cons} plate",
                "remove it, or change construction",
            )
    out = {"name": name, "construction": cons}
    if cons != "stack":
        if "material" not in c or not isinstance(c["material"], str):
            raise ctx.err(f"{where}material", "missing", 'add material = "quartz"')
        out["material"] = c["material"]
    elif "material" in c:
        out["material"] = c["material"]
    out["waves"] = float(ctx.number(c, "waves", where, default=0.25, minimum=0, strict_min=True))
    if "design" in c:
        out["design_nm"] = ctx.wl(c, "design", where)
    elif cons != "stack":
        if default_design is None:
            raise ctx.err(f"{where}design", "missing", 'add design = "780nm"')
        out["design_nm"] = default_design
    else:
        out["design_nm"] = default_design
    out["axis_deg"] = float(ctx.number(c, "axis_deg", where, default=45.0))
    if cons == "multi-order":
        out["order"] = ctx.number(c, "order", where, required=True, minimum=0, integer=True)
    if cons == "compound":
        if "thick_plate" not in c:
            raise ctx.err(
                f"{where}thick_plate", "a compound plate needs it", 'add thick_plate = "1000um"'
            )
        out["thick_plate_um"] = length_um(c["thick_plate"], f"{ctx.path}: {where}thick_plate")
        if not out["thick_plate_um"] > 0:
            raise ctx.err(f"{where}thick_plate", "must be positive", 'e.g. "1000um"')
    if cons == "achromatic":
        if "partner" not in c or not isinstance(c["partner"], str):
            raise ctx.err(f"{where}partner", "an achromatic plate needs it", 'add partner = "mgf2"')
        out["partner"] = c["partner"]
        if "match" in c:
            m = c["match"]
            if not isinstance(m, list) or len(m) != 2:
                raise ctx.err(
                    f"{where}match", "must list two wavelengths", 'e.g. match = ["450nm", "650nm"]'
                )
            out["match_nm"] = [wavelength_nm(x, f"{ctx.path}: {where}match") for x in m]
    if cons == "film" and "retardance" in c:
        out["retardance_nm"] = interval_nm(c["retardance"], f"{ctx.path}: {where}retardance")
        if not out["retardance_nm"] > 0:
            raise ctx.err(f"{where}retardance", "must be positive", 'e.g. "137.5nm"')
    if cons == "stack":
        layers = c.get("layers")
        if not isinstance(layers, list) or not layers:
            raise ctx.err(
                f"{where}layers",
                "a stack needs a list of layers",
                'add layers = [{ material = "quartz", thickness = "17.5um", axis_deg = 0 }]',
            )
        out["layers"] = []
        for j, la in enumerate(layers):
            if not isinstance(la, dict):
                raise ctx.err(f"{where}layers[{j}]", "must be a table")
            ctx.check_keys(la, ("material", "thickness", "axis_deg"), f"{where}layers[{j}].")
            if "material" not in la or "thickness" not in la:
                raise ctx.err(f"{where}layers[{j}]", "needs material and thickness")
            th = length_um(la["thickness"], f"{ctx.path}: {where}layers[{j}].thickness")
            if not th > 0:
                raise ctx.err(f"{where}layers[{j}].thickness", "must be positive", 'e.g. "17.5um"')
            out["layers"].append(
                {
                    "material": la["material"],
                    "thickness_um": th,
                    "axis_deg": float(la.get("axis_deg", 0.0)),
                }
            )
    if "tolerances" in c:
        t = c["tolerances"]
        if not isinstance(t, dict):
            raise ctx.err(f"{where}tolerances", "must be a table")
        out["tolerances"] = _tolerances(ctx, t, f"{where}tolerances")
    return out


def validate(raw: dict, path: str = "<spec>") -> dict:
    """Validate a parsed spec and return its normalised form (a JSON-serialisable dict)."""
    ctx = _Ctx(Path(path).name if path != "<spec>" else path)
    if not isinstance(raw, dict):
        raise ctx.err("spec", "must be a TOML document")
    ctx.check_keys(raw, TOP_KEYS, "")
    spec: dict = {"title": str(raw.get("title", Path(path).stem))}

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
    n = int(math.floor((stop - start) / step + 1e-9)) + 1
    if n > 20001:
        raise ctx.err("[wavelength].step", f"gives {n} wavelengths", "use at most 20001")
    spec["wavelength"] = {"start_nm": start, "stop_nm": stop, "step_nm": step, "count": n}

    src = ctx.table(raw, "source")
    if not src:
        src = {"shape": "flat"}
    spec["source"] = copy.deepcopy(src)

    inp = ctx.table(raw, "input")
    ctx.check_keys(inp, INPUT_KEYS, "[input].")
    spec["input"] = {"azimuth_deg": float(ctx.number(inp, "azimuth_deg", "[input].", default=0.0))}

    g = ctx.table(raw, "goal", required=True)
    ctx.check_keys(g, GOAL_KEYS, "[goal].")
    state = g.get("state", "circular")
    if state not in GOAL_STATES:
        raise ctx.err("[goal].state", f"unknown state {state!r}", "use circular or linear")
    metric = g.get("metric", "axial_ratio" if state == "circular" else "extinction_db")
    if metric not in GOAL_METRICS:
        close = difflib.get_close_matches(str(metric), GOAL_METRICS, n=1)
        fix = f"did you mean {close[0]!r}?" if close else f"use one of {', '.join(GOAL_METRICS)}"
        raise ctx.err("[goal].metric", f"unknown metric {metric!r}", fix)
    if metric == "axial_ratio" and state == "linear":
        raise ctx.err(
            "[goal].metric",
            "axial_ratio needs a circular goal",
            "use extinction_db or fidelity for a linear goal",
        )
    over = g.get("over", "band")
    if over not in GOAL_OVER:
        raise ctx.err("[goal].over", f"unknown {over!r}", "use band or spectrum")
    gmin = ctx.number(g, "min", "[goal].", required=True)
    if metric in ("axial_ratio", "fidelity") and not 0.0 <= gmin <= 1.0:
        raise ctx.err(
            "[goal].min",
            f"{metric} lies between 0 and 1, so min = {gmin:g} cannot be the goal",
            "e.g. min = 0.95",
        )
    hand = g.get("handedness")
    if hand is not None and hand not in ("right", "left"):
        raise ctx.err(
            "[goal].handedness",
            f"unknown {hand!r}",
            "use right (clockwise looking toward the source) or left",
        )
    spec["goal"] = {
        "state": state,
        "metric": metric,
        "min": float(gmin),
        "over": over,
        "azimuth_deg": float(ctx.number(g, "azimuth_deg", "[goal].", default=0.0)),
        "handedness": hand,
        "acceptance_limit_waves": float(
            ctx.number(
                g, "acceptance_limit_waves", "[goal].", default=0.01, minimum=0, strict_min=True
            )
        ),
    }

    env = ctx.table(raw, "environment")
    ctx.check_keys(env, ENV_KEYS, "[environment].")
    t_nom = float(ctx.number(env, "temperature_c", "[environment].", default=20.0))
    tr = env.get("temperature_range", [t_nom - 30.0, t_nom + 30.0])
    if (
        not isinstance(tr, list)
        or len(tr) != 2
        or not all(isinstance(x, int | float) and not isinstance(x, bool) for x in tr)
        or tr[0] >= tr[1]
    ):
        raise ctx.err(
            "[environment].temperature_range",
            "must be [low, high] with low < high",
            "e.g. [-10, 50]",
        )
    spec["environment"] = {
        "temperature_c": t_nom,
        "temperature_range": [float(tr[0]), float(tr[1])],
        "tilt_max_deg": float(
            ctx.number(
                env, "tilt_max_deg", "[environment].", default=20.0, minimum=0, strict_min=True
            )
        ),
    }

    cands = raw.get("candidate")
    if not isinstance(cands, list) or not cands:
        raise ctx.err("[[candidate]]", "no candidate plates", "add at least one [[candidate]]")
    default_design = None
    if isinstance(src, dict) and "center" in src:
        try:
            default_design = wavelength_nm(src["center"], f"{ctx.path}: [source].center")
        except RetolError:
            raise
    spec["candidates"] = [_candidate(ctx, c, i, default_design) for i, c in enumerate(cands)]
    names = [c["name"] for c in spec["candidates"]]
    dup = {x for x in names if names.count(x) > 1}
    if dup:
        raise ctx.err(
            "[[candidate]].name",
            f"duplicated name {sorted(dup)[0]!r}",
            "give each candidate its own name",
        )

    spec["tolerances"] = _tolerances(ctx, ctx.table(raw, "tolerances"))

    r = ctx.table(raw, "run")
    ctx.check_keys(r, RUN_KEYS, "[run].")
    samples = ctx.number(r, "samples", "[run].", default=20000, integer=True, minimum=1)
    q = r.get("quantiles", DEFAULT_QUANTILES)
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
    spec["run"] = {
        "samples": int(samples),
        "seed": int(ctx.number(r, "seed", "[run].", default=0, integer=True, minimum=0)),
        "chunk_size": ctx.number(r, "chunk_size", "[run].", default=None, integer=True, minimum=1),
        "quantiles": sorted(float(x) for x in q),
        "confidence": float(conf),
        "sensitivity_samples": ctx.number(
            r, "sensitivity_samples", "[run].", default=None, integer=True, minimum=1
        ),
        "keep_samples": bool(r.get("keep_samples", False)),
    }
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
    spec["report"] = {"formats": list(formats)}
    spec["spec_path"] = str(path)
    json.dumps(spec)  # must be serialisable
    return spec


def load_spec(path) -> dict:
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
        check_spec_text(text, p.name)  # size and nesting limits before tomllib parses it
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RetolError(p.name, f"is not valid TOML ({exc})", "fix the syntax") from None
    except UnicodeDecodeError:
        raise RetolError(p.name, "is not UTF-8 text", "save it as UTF-8") from None
    spec = validate(raw, str(p))
    spec["base_dir"] = str(p.parent.resolve())
    spec["source_text"] = text
    return spec
