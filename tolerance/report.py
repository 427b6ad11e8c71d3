"""A self-contained HTML report, a summary table and figure files from a results grid.

``write_report`` writes into one folder:

- ``report.html``: everything in one file (PNG figures as base64 ``data:`` URIs, inline CSS,
  no scripts, fonts, links or other files), readable on a laptop screen and printable;
- ``summary.csv``: one row per candidate;
- ``figures/``: every figure in each requested format (png, svg, pdf).

Writing is all-or-nothing, one writer at a time, and only retol's own files are ever replaced:
see :mod:`tolerance.publish`.
"""

from __future__ import annotations

import base64
import csv
import html
import io
import json
import re
from pathlib import Path

import numpy as np

from .decision import pct_interval, separation_warning
from .errors import RetolError
from .safety import caution

#: Files (and the folder) that make up a report; any of them marks a folder as holding one.
REPORT_FILE = "report.html"
SUMMARY_FILE = "summary.csv"
FIGURE_DIR = "figures"

#: Columns of summary.csv, in order.
SUMMARY_COLUMNS = [
    "name",
    "construction",
    "materials",
    "thicknesses_um",
    "design_wavelength_nm",
    "nominal_worst",
    "p05_worst",
    "nominal_pass",
    "p05_pass",
    "yield",
    "yield_low",
    "yield_high",
    "rank_yield",
    "dominant",
    "nominal_dop",
    "nominal_spectral_axial_ratio",
    "nominal_spectral_extinction_db",
    "temperature_coefficient_deg_per_k",
    "acceptance_half_angle_deg",
    "rank",
]

#: Variables a grid must hold to be reported on.
REQUIRED = ("nominal_metric", "yield")

LASER_CAUTION = (
    "retol predicts polarization states only; it does not assess laser hazards. A retarder "
    "changes what reflects where downstream: back-reflections may pass polarizing optics or an "
    "optical isolator that would otherwise stop them, and a polarizing beam splitter may send "
    "power out of its other port. Before a new, re-clocked or re-tilted plate goes into a laser "
    "beam, have the set-up reviewed under IEC 60825-1 or ANSI Z136.1, as applies where you "
    "work, follow your local rules and consult the site's laser safety officer."
)


# ----------------------------------------------------------------------------- folder checks


def check_writable(out_dir, force: bool = False) -> Path:
    """Check that a report may be written into ``out_dir``; return it as an absolute path.

    Call this before a long run so that a bad ``--out`` fails at once.  A folder that does not
    exist yet, or holds no report retol wrote (e.g. only a grid.nc, or only files of the
    user's), is fine; one that holds a previous report (``report.html``, ``summary.csv`` or
    figures retol drew) is refused unless ``force``.  See :mod:`tolerance.publish`.

    Raises
    ------
    RetolError
        Field "--out": the path is a file, holds a report (fix: use --force or another folder),
        or its nearest existing ancestor is not a writable folder.
    """
    from .publish import REPORT, check_target

    return check_target(out_dir, force, REPORT)


def check_grid(grid) -> None:
    """Refuse a Dataset that is not a results grid (missing core variables)."""
    missing = [n for n in REQUIRED if n not in grid.variables]
    if "candidate" not in grid.coords or "wavelength" not in grid.coords:
        missing = ["candidate/wavelength coordinates"] + missing
    if missing:
        raise RetolError(
            "grid",
            f"not a results grid: missing {', '.join(missing)}",
            "give a grid.nc written by retol run",
        )


# ----------------------------------------------------------------------------- values


def _s(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray) and value.shape == ():
        return _s(value.item())
    return str(value)


def _num(value):
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if np.isfinite(v) else None


def _var(grid, name, c):
    """Value of a per-candidate variable for candidate index ``c`` (None if absent)."""
    if name not in grid.variables:
        return None
    return grid[name].values[c]


def _json_attr(grid, name, default):
    raw = grid.attrs.get(name)
    if raw is None:
        return default
    if not isinstance(raw, str):
        return raw
    try:
        return json.loads(raw)
    except ValueError:
        return default


def _layers(grid, c):
    """[(material, thickness um, axis deg)] of candidate ``c``, padding left out."""
    if "layer_thickness" not in grid.variables:
        return []
    th = np.asarray(grid["layer_thickness"].values[c], dtype=float)
    mats = (
        grid["layer_material"].values[c] if "layer_material" in grid.variables else [""] * th.size
    )
    axes = (
        np.asarray(grid["layer_axis"].values[c], dtype=float)
        if "layer_axis" in grid.variables
        else np.full(th.size, np.nan)
    )
    return [
        (_s(m), float(t), float(a))
        for m, t, a in zip(mats, th, axes, strict=True)
        if np.isfinite(t)
    ]


def _p05(grid, c, quantile_var, sample_var):
    """5th percentile over the samples of candidate ``c``: from the stored quantiles if they
    hold 0.05, else computed from the per-sample variable; None if neither is there."""
    if quantile_var in grid.variables and "quantile" in grid.coords:
        qs = np.asarray(grid["quantile"].values, dtype=float)
        k = np.nonzero(np.isclose(qs, 0.05))[0]
        if k.size:
            return _num(grid[quantile_var].values[c, k[0]])
    if sample_var in grid.variables:
        w = np.asarray(grid[sample_var].values[c], dtype=float)
        w = w[np.isfinite(w)]
        return float(np.quantile(w, 0.05)) if w.size else None
    return None


def _p05_worst(grid, c):
    return _p05(grid, c, "worst_metric_quantile", "worst_metric")


def _over_spectrum(grid) -> bool:
    return _s(grid.attrs.get("goal_over", "band")).strip().lower() == "spectrum"


def _nominal_pass(grid, c):
    """The nominal plate's value of the metric the pass test uses."""
    if _over_spectrum(grid):
        return _num(_var(grid, "nominal_spectral_metric", c))
    return _num(_var(grid, "nominal_worst", c))


def _p05_pass(grid, c):
    value = _p05(grid, c, "pass_metric_quantile", "pass_metric")
    if value is None and not _over_spectrum(grid):
        value = _p05_worst(grid, c)
    return value


def summary_rows(grid) -> list[dict]:
    """One dict per candidate (spec order) with the ``SUMMARY_COLUMNS`` keys; None = absent."""
    rows = []
    for c, name in enumerate(grid["candidate"].values):
        layers = _layers(grid, c)
        rank = _var(grid, "rank", c)
        rows.append(
            {
                "name": _s(name),
                "construction": _s(_var(grid, "construction", c) or ""),
                "materials": " + ".join(m for m, _, _ in layers),
                "thicknesses_um": " + ".join(f"{t:.3f}" for _, t, _ in layers),
                "design_wavelength_nm": _num(_var(grid, "design_wavelength", c)),
                "nominal_worst": _num(_var(grid, "nominal_worst", c)),
                "p05_worst": _p05_worst(grid, c),
                "nominal_pass": _nominal_pass(grid, c),
                "p05_pass": _p05_pass(grid, c),
                "yield": _num(_var(grid, "yield", c)),
                "yield_low": _num(_var(grid, "yield_low", c)),
                "yield_high": _num(_var(grid, "yield_high", c)),
                "rank_yield": _num(_var(grid, "rank_yield", c)),
                "dominant": _s(_var(grid, "dominant", c) or ""),
                "nominal_dop": _num(_var(grid, "nominal_dop", c)),
                "nominal_spectral_axial_ratio": _num(_var(grid, "nominal_spectral_axial_ratio", c)),
                "nominal_spectral_extinction_db": _num(
                    _var(grid, "nominal_spectral_extinction", c)
                ),
                "temperature_coefficient_deg_per_k": _num(_var(grid, "temperature_coefficient", c)),
                "acceptance_half_angle_deg": _num(_var(grid, "acceptance_half_angle", c)),
                "rank": int(rank) if _num(rank) is not None else None,
                "meets_goal": _meets(grid, c),
            }
        )
    return rows


def _meets(grid, c):
    """Whether candidate ``c`` meets the goal (grids before ``meets_goal``: yield above 0)."""
    if "meets_goal" in grid.variables:
        return bool(int(grid["meets_goal"].values[c]))
    y = _num(_var(grid, "yield", c))
    return None if y is None else y > 0


def recommended_name(grid):
    """The recommended candidate's name, or None when no candidate meets the goal."""
    if "recommended" in grid.attrs:
        return _s(grid.attrs["recommended"]) or None
    rows = [r for r in summary_rows(grid) if r["meets_goal"] and r["rank"] is not None]
    return min(rows, key=lambda r: r["rank"])["name"] if rows else None


def csv_table(grid) -> tuple[list[str], list[dict]]:
    """The columns and rows (best rank first) of summary.csv.

    Every column but the names is numeric: one material, thickness and axis column per layer,
    units in the column names (``_um``, ``_nm``, ``_deg``, ``_deg_per_k``; yields are fractions),
    the goal metric named in its columns (e.g. ``nominal_worst_extinction_db``), and per
    tolerance the yield without it and with it alone (blank where it does not apply).
    """
    from .decision import candidate_has_faces, pct_digits, tolerance_applies

    metric = _s(grid.attrs.get("goal_metric", "metric"))
    over = _s(grid.attrs.get("goal_over", "band"))
    rows = summary_rows(grid)
    n_layers = max((len(_layers(grid, c)) for c in range(len(rows))), default=0)
    tols = [_s(t) for t in grid["tolerance_name"].values] if "tolerance_name" in grid.coords else []
    header = ["rank", "name", "construction", "meets_goal"]
    for k in range(1, n_layers + 1):
        header += [f"layer{k}_material", f"layer{k}_thickness_um", f"layer{k}_axis_deg"]
    header += ["design_wavelength_nm"]
    header += [f"{b}_{metric}" for b in ("nominal_worst", "p05_worst", "nominal_pass", "p05_pass")]
    header += ["yield", "yield_low", "yield_high", "rank_yield", "dominant", "nominal_dop"]
    header += [
        "nominal_spectral_axial_ratio",
        "nominal_spectral_extinction_db",
        "temperature_coefficient_deg_per_k",
        "acceptance_half_angle_deg",
    ]
    header += [f"yield_without_{t}" for t in tols] + [f"yield_alone_{t}" for t in tols]
    out = []
    for c, r in _by_rank(rows):
        layers = _layers(grid, c)
        d = {"rank": r["rank"], "name": r["name"], "construction": r["construction"]}
        d["meets_goal"] = None if r["meets_goal"] is None else int(r["meets_goal"])
        for k in range(n_layers):
            m, t, a = layers[k] if k < len(layers) else ("", None, None)
            d[f"layer{k + 1}_material"] = m
            d[f"layer{k + 1}_thickness_um"] = t
            d[f"layer{k + 1}_axis_deg"] = a if a is None or np.isfinite(a) else None
        d["design_wavelength_nm"] = r["design_wavelength_nm"]
        for b in ("nominal_worst", "p05_worst", "nominal_pass", "p05_pass"):
            d[f"{b}_{metric}"] = r[b]
        ys = (r["yield"], r["yield_low"], r["yield_high"])
        # the same digits as the terminal and the report (percent decimals + 2 as a fraction)
        digits = pct_digits(*ys) + 2 if None not in ys else 6
        for key, v in zip(("yield", "yield_low", "yield_high"), ys, strict=True):
            d[key] = None if v is None else f"{v:.{digits}f}"
        for key in (
            "rank_yield",
            "dominant",
            "nominal_dop",
            "nominal_spectral_axial_ratio",
            "nominal_spectral_extinction_db",
            "temperature_coefficient_deg_per_k",
            "acceptance_half_angle_deg",
        ):
            d[key] = r[key]
        for j, t in enumerate(tols):
            ok = tolerance_applies(t, len(layers), over, candidate_has_faces(grid.attrs, c))
            for kind in ("without", "alone"):
                var = f"sensitivity_{kind}"
                v = _num(grid[var].values[c, j]) if var in grid.variables and ok else None
                d[f"yield_{kind}_{t}"] = v
        out.append(d)
    return header, out


def write_summary_csv(grid, path) -> Path:
    """Write ``summary_rows`` as CSV (numbers to 6 significant digits, blank = absent)."""
    path = Path(path)
    header, rows = csv_table(grid)
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=header, lineterminator="\n")
        w.writeheader()
        for row in rows:
            w.writerow(
                {
                    k: "" if v is None else (f"{v:.6g}" if isinstance(v, float) else v)
                    for k, v in row.items()
                }
            )
    return path


# ----------------------------------------------------------------------------- HTML

_CSS = """
:root { --ink:#2b2824; --muted:#6b665d; --rule:#dcd7cc; --paper:#fbfaf6; --accent:#1d6a80;
        --warn:#8c1c13; --pick:#eef5f2; }
* { box-sizing: border-box; }
html { background: #efece4; }
body { margin: 0 auto; max-width: 1080px; padding: 28px 36px 48px; background: var(--paper);
       color: var(--ink); font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto,
       "Helvetica Neue", Arial, sans-serif; }
header { border-bottom: 3px solid var(--accent); padding-bottom: 12px; margin-bottom: 18px; }
header .kicker { text-transform: uppercase; letter-spacing: .12em; font-size: 12px;
                 color: var(--accent); font-weight: 600; }
h1 { font-size: 26px; margin: 4px 0 6px; line-height: 1.2; }
h2 { font-size: 19px; margin: 34px 0 10px; padding-bottom: 4px; border-bottom: 1px solid
     var(--rule); }
h3 { font-size: 15px; margin: 18px 0 6px; }
.facts { display: flex; flex-wrap: wrap; gap: 6px 22px; margin: 8px 0 0; padding: 0;
         list-style: none; color: var(--muted); font-size: 14px; }
.facts b { color: var(--ink); font-weight: 600; }
.pick { background: var(--pick); border-left: 5px solid var(--accent); padding: 12px 16px;
        margin: 16px 0; }
.pick .name { font-size: 18px; font-weight: 700; }
.nopick { background: #fbf1ee; border-left: 5px solid var(--warn); padding: 12px 16px;
          margin: 16px 0; }
.nopick .name { font-size: 18px; font-weight: 700; color: var(--warn); }
.caution { border: 2px solid var(--warn); background: #fbf1ee; padding: 12px 16px;
           margin: 16px 0; }
.caution strong { color: var(--warn); }
table { border-collapse: collapse; width: 100%; font-size: 13.5px; margin: 6px 0 10px; }
th, td { padding: 5px 8px; border-bottom: 1px solid var(--rule); text-align: left;
         vertical-align: top; }
th { background: #f1eee6; font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
td.num { white-space: nowrap; }
td b { white-space: nowrap; }
tr.best td { background: var(--pick); }
.nw { white-space: nowrap; }
.scroll { overflow-x: auto; }
figure { margin: 22px 0; }
figure img { display: block; max-width: 100%; height: auto; margin: 0 auto;
             border: 1px solid var(--rule); background: #fff; }
figcaption { color: var(--muted); font-size: 13.5px; margin-top: 6px; }
figcaption b { color: var(--ink); }
pre { background: #f3f0e8; border: 1px solid var(--rule); padding: 10px 12px; overflow-x: auto;
      font: 12.5px/1.45 ui-monospace, "SFMono-Regular", Menlo, Consolas, monospace;
      white-space: pre-wrap; word-break: break-word; }
code { font-family: ui-monospace, "SFMono-Regular", Menlo, Consolas, monospace;
       font-size: 13px; }
ul.assume li { margin: 3px 0; }
.muted { color: var(--muted); }
p.note { border-left: 3px solid var(--rule); padding: 2px 10px; margin: 4px 0 12px;
         font-size: 13.5px; }
details { margin: 8px 0; }
details summary { cursor: pointer; color: var(--accent); }
footer { margin-top: 40px; color: var(--muted); font-size: 12.5px; border-top: 1px solid
         var(--rule); padding-top: 8px; }
@media (max-width: 700px) { body { padding: 16px; } h1 { font-size: 21px; } }
@media print {
  @page { margin: 14mm 12mm; }
  html, body { background: #fff; }
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  h2, h3 { break-after: avoid; page-break-after: avoid; }
  /* a heading stays with what follows it; figures keep a readable size (full text width) */
  h2 + *, h3 + * { break-before: avoid; page-break-before: avoid; }
  figure, table, .pick, .nopick, .caution, pre, p.note { break-inside: avoid;
    page-break-inside: avoid; }
  figure img { border: none; width: 100%; max-height: 235mm; object-fit: contain; }
  .scroll { overflow: visible; }
  pre { white-space: pre-wrap; }
}
"""


def _e(text) -> str:
    return html.escape(_s(text), quote=True)


def _fmt(v, digits=3, unit="") -> str:
    if v is None:
        return "—"
    return f"{v:.{digits}g}{(' ' + unit) if unit else ''}"


def _fixed(v, decimals=4) -> str:
    """A number to a fixed count of decimals (so a column of them lines up)."""
    return "—" if v is None else f"{v:.{decimals}f}"


def _pct(v) -> str:
    return "—" if v is None else f"{100 * v:.1f} %"


def _metric_unit(grid) -> str:
    """The goal metric's units as printed: "" when dimensionless ("1", common practice)."""
    units = _s(grid.attrs.get("metric_units", "")).strip()
    return "" if units in ("", "1") else units


def _goal_text(grid) -> str:
    metric = _s(grid.attrs.get("metric_long_name") or grid.attrs.get("goal_metric") or "metric")
    state = _s(grid.attrs.get("goal_state", "")).strip()
    gmin = _num(grid.attrs.get("goal_min"))
    gmax = _num(grid.attrs.get("goal_max"))
    over = _s(grid.attrs.get("goal_over", "band"))
    text = metric
    if gmin is not None:
        text = f"{text} ≥ {gmin:g} {_metric_unit(grid)}".rstrip()
    elif gmax is not None:
        text = f"{text} ≤ {gmax:g} {_metric_unit(grid)}".rstrip()
    text += " over the " + (
        "source spectrum (source-weighted)"
        if over == "spectrum"
        else "whole band (worst wavelength)"
    )
    if state:
        text = f"{state} output; " + text
    return text


def _table(head, body_rows, best_flags) -> str:
    """An HTML table; ``head`` is [(label, numeric)], cells are pre-escaped HTML."""
    out = ['<div class="scroll"><table><thead><tr>']
    out += [f'<th class="num">{_e(h)}</th>' if num else f"<th>{_e(h)}</th>" for h, num in head]
    out.append("</tr></thead><tbody>")
    for cells, best in zip(body_rows, best_flags, strict=True):
        out.append('<tr class="best">' if best else "<tr>")
        for (_, num), cell in zip(head, cells, strict=True):
            out.append(f'<td class="num">{cell}</td>' if num else f"<td>{cell}</td>")
        out.append("</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


def _by_rank(rows):
    return sorted(enumerate(rows), key=lambda cr: (cr[1]["rank"] or 10**9, cr[0]))


def _candidate_tables(grid, rows) -> str:
    """Two tables, best rank first: the plates as built, and how they fare."""
    unit = _metric_unit(grid)
    unit_txt = f" [{unit}]" if unit else ""
    conf = _num(grid["yield"].attrs.get("confidence", grid.attrs.get("confidence"))) or 0.95
    ordered = _by_rank(rows)
    best = [r["rank"] == 1 for _, r in ordered]

    def rank(r):
        return _e(r["rank"] if r["rank"] is not None else "—")

    design_head = [
        ("Rank", True),
        ("Candidate", False),
        ("Construction", False),
        ("Layers (light meets the first one first)", False),
        ("Design λ [nm]", True),
    ]
    design_rows = []
    for c, r in ordered:
        layers = (
            "<br>".join(
                f'<span class="nw">{_e(m)} {t:.3f} µm'
                + (f" at {a:g}°" if np.isfinite(a) else "")
                + "</span>"
                for m, t, a in _layers(grid, c)
            )
            or "—"
        )
        design_rows.append(
            [
                rank(r),
                f"<b>{_e(r['name'])}</b>",
                _e(r["construction"] or "—"),
                layers,
                _e(_fmt(r["design_wavelength_nm"], 6)),
            ]
        )
    spectrum = _over_spectrum(grid)
    broadband = grid.sizes.get("wavelength", 1) > 1
    ranked_apart = _rank_yield_differs(rows)
    perf_head = [("Rank", True), ("Candidate", False)]
    if spectrum:
        perf_head += [
            (f"Nominal (spectrum){unit_txt}", True),
            (f"5th pct (spectrum){unit_txt}", True),
        ]
    perf_head += [
        (f"Worst in band, nominal{unit_txt}", True),
        (f"Worst in band, 5th pct{unit_txt}", True),
        (f"Yield ({conf:.0%} interval)", True),
    ]
    if ranked_apart:
        perf_head.append(("Yield used for ranking", True))
    perf_head.append(("Dominant tolerance", False))
    perf_rows = []
    for _, r in ordered:
        y = _pct(r["yield"])
        if None not in (r["yield"], r["yield_low"], r["yield_high"]):
            ys, ls, hs = pct_interval(r["yield"], r["yield_low"], r["yield_high"])
            y = f'{ys} % <span class="muted">({ls}–{hs})</span>'
        if r.get("meets_goal") is not None:
            y += " ✓" if r["meets_goal"] else ' <span class="muted">(misses)</span>'
        cells = [rank(r), f"<b>{_e(r['name'])}</b>"]
        if spectrum:
            cells += [_e(_fmt(r["nominal_pass"], 4)), _e(_fmt(r["p05_pass"], 4))]
        cells += [_e(_fmt(r["nominal_worst"], 4)), _e(_fmt(r["p05_worst"], 4)), y]
        if ranked_apart:
            cells.append(_e(_pct(r["rank_yield"])))
        cells.append(_e(r["dominant"] or "—"))
        perf_rows.append(cells)

    state_head = [("Rank", True), ("Candidate", False), ("DOP, nominal", True)]
    show_ar = broadband and any(r["nominal_spectral_axial_ratio"] is not None for r in rows)
    show_ext = broadband and any(r["nominal_spectral_extinction_db"] is not None for r in rows)
    if show_ar:
        state_head.append(("Axial ratio, spectrum, nominal", True))
    if show_ext:
        state_head.append(("Extinction, spectrum, nominal [dB]", True))
    state_head += [("dδ/dT [°/K]", True), ("Tilt ½-angle [°]", True)]
    state_rows = []
    for _, r in ordered:
        cells = [rank(r), f"<b>{_e(r['name'])}</b>", _e(_fixed(r["nominal_dop"], 4))]
        if show_ar:
            cells.append(_e(_fixed(r["nominal_spectral_axial_ratio"], 4)))
        if show_ext:
            cells.append(_e(_fixed(r["nominal_spectral_extinction_db"], 1)))
        cells += [
            _e(_fmt(r["temperature_coefficient_deg_per_k"], 3)),
            _e(_fmt(r["acceptance_half_angle_deg"], 3)),
        ]
        state_rows.append(cells)

    notes = []
    if spectrum:
        notes.append(
            "The goal is judged on the source-averaged output, so the pass test uses the "
            "spectrum columns; the worst single wavelength in the band may fall below the goal "
            "even for a plate whose every build passes."
        )
    if ranked_apart:
        notes.append(
            "The ranking used the depolarization-aware yield (column “Yield used for "
            "ranking”): for an axial-ratio goal over the spectrum, unpolarized light left by "
            "the spectral average counts against a plate through its fidelity to the goal."
        )
    note_html = "".join(f'<p class="note">{_e(n)}</p>' for n in notes)
    return (
        "<h3>The plates</h3>"
        + _table(design_head, design_rows, best)
        + "<h3>How they fare against the goal</h3>"
        + _table(perf_head, perf_rows, best)
        + note_html
        + (
            "<h3>Output state"
            + (" over the spectrum" if broadband else "")
            + " and environment</h3>"
        )
        + _table(state_head, state_rows, best)
    )


def _rank_yield_differs(rows) -> bool:
    for r in rows:
        a, b = r["yield"], r["rank_yield"]
        if a is not None and b is not None and abs(a - b) > 1e-12:
            return True
    return False


def _ranking(grid, rows) -> str:
    if "rank" not in grid.variables:
        return '<p class="muted">This grid holds no ranking.</p>'
    items = []
    for c, r in _by_rank(rows):
        reason = _s(_var(grid, "reason", c) or "")
        items.append(
            f"<li><b>{_e(r['name'])}</b>" + (f" — {_e(reason)}" if reason else "") + "</li>"
        )
    return "<ol>" + "".join(items) + "</ol>"


def _describe(value) -> str:
    if isinstance(value, dict):
        return ", ".join(f"{k} = {_describe(v)}" for k, v in value.items())
    if isinstance(value, list | tuple):
        return "; ".join(_describe(v) for v in value)
    return _s(value)


_TOL_WORDS = {
    "thickness_um": "plate thickness (each plate)",
    "clocking_deg": "fast-axis clocking in the mount",
    "crossing_deg": "crossing between plates",
    "tilt_deg": "angle of incidence (its magnitude; plane-of-incidence azimuth uniform)",
    "temperature_c": "plate temperature",
    "input_azimuth_deg": "input azimuth",
    "cut_deg": "optic axis out of the face, crystal cut (each plate)",
}


def _distribution_words(d, key: str) -> str:
    """A tolerance distribution in words, e.g. 'normal, σ = 0.3 µm'."""
    from .distributions import Distribution

    try:
        dist = Distribution.from_dict(d)
    except (TypeError, ValueError, AttributeError):
        return _describe(d)
    unit = {"um": " µm", "deg": "°", "_c": " °C"}
    text = dist.describe(next((v for k, v in unit.items() if key.endswith(k)), ""))
    # widths such as 1/3 print to 4 significant digits, not 0.3333333333333333
    return re.sub(r"\d+\.\d{5,}", lambda m: f"{float(m.group()):.4g}", text)


def _temperature_words(spec, t_nom) -> str:
    """What the sampled plate temperature really was: about the nominal, or an absolute range."""
    tol = (spec.get("tolerances") or {}).get("temperature_c") if isinstance(spec, dict) else None
    if t_nom is None:
        return ""
    text = f"; the spec's nominal operating temperature is {t_nom:g} °C"
    if not isinstance(tol, dict):
        return text + " (the plate temperature was not sampled)"
    from .distributions import Distribution

    try:
        dist = Distribution.from_dict(tol)
    except (TypeError, ValueError, AttributeError):
        return text
    if dist.kind == "range":
        return (
            text + f"; sampled plate temperatures are drawn uniformly from {dist.low:.4g} to "
            f"{dist.high:.4g} °C as written (an absolute range, not centred on the nominal)"
        )
    return text + " (sampled temperatures centre on it)"


def _override_words(spec) -> list[str]:
    """One line per candidate that overrides the study's tolerances."""
    out = []
    for cand in spec.get("candidates", []) if isinstance(spec, dict) else []:
        tols = cand.get("tolerances") if isinstance(cand, dict) else None
        if isinstance(tols, dict) and tols:
            parts = [
                f"{_TOL_WORDS.get(k, k)}: {_distribution_words(v, k)}" for k, v in tols.items()
            ]
            out.append(
                f"Candidate {_s(cand.get('name', '?'))} overrides the tolerances above — "
                + "; ".join(parts)
                + "."
            )
        for e, el in enumerate(cand.get("elements") or [] if isinstance(cand, dict) else []):
            tols = el.get("tolerances") if isinstance(el, dict) else None
            if isinstance(tols, dict) and tols:
                parts = [
                    f"{_TOL_WORDS.get(k, k)}: {_distribution_words(v, k)}" for k, v in tols.items()
                ]
                out.append(
                    f"Element {e} of {_s(cand.get('name', '?'))} has its own tolerances — "
                    + "; ".join(parts)
                    + "."
                )
        if isinstance(cand, dict) and cand.get("elements"):
            out.append(
                f"{_s(cand.get('name', '?'))} is a train: each element's plate and mount "
                "tolerances (thickness, retardance, clocking, crossing) are drawn independently "
                "for each element and reported per element (e.g. clocking[element 1]; element 0 "
                "is the first the light meets)."
            )
    return out


def _polarizer_words(grid, spec) -> list[str]:
    """One line per train that holds a polarizer: its extinction, and the power it passes."""
    out = []
    for cand in spec.get("candidates", []) if isinstance(spec, dict) else []:
        els = cand.get("elements") if isinstance(cand, dict) else None
        pols = [(k, e) for k, e in enumerate(els or []) if isinstance(e, dict) and "polarizer" in e]
        if not pols:
            continue
        name = _s(cand.get("name", "?"))
        words = "; ".join(
            f"element {k}: {_s(e.get('extinction_db'))} dB extinction, axis at "
            f"{_s(e.get('polarizer'))} deg"
            for k, e in pols
        )
        t = ""
        if "nominal_transmission" in grid and name in [str(c) for c in grid["candidate"].values]:
            frac = float(grid["nominal_transmission"].sel(candidate=name))
            t = f" The error-free train passes {100 * frac:.4g} % of the input power at its design."
        out.append(
            f"{name} holds a linear polarizer ({words}); the goal judges the state of the light "
            "it passes, normalised to that light's power." + t
        )
    return out


def _faces_words(spec: dict) -> str:
    """The faces assumption: ideal by default; each candidate with faces named."""
    cands = spec.get("candidates") if isinstance(spec.get("candidates"), list) else []
    named = []
    for c in cands:
        f = c.get("faces") if isinstance(c, dict) else None
        if f is None:
            continue
        if f == "uncoated":
            kind = "uncoated (Fresnel reflectance of each eigenwave's own index)"
        elif isinstance(f.get("reflectance"), list):
            r = [float(x) for x in f["reflectance"]]
            wl = f.get("wavelength_nm") or [float("nan")]
            src = f" from {f['file']}" if f.get("file") else ""
            kind = (
                f"coated, {100 * min(r):g}–{100 * max(r):g} % power reflectance per face over "
                f"{float(wl[0]):g}–{float(wl[-1]):g} nm{src} (interpolated linearly)"
            )
        else:
            kind = f"coated, {100 * float(f['reflectance']):g} % power reflectance per face"
        gap = ", layers separated by air gaps" if c.get("air_gap") else ""
        named.append(f"{c.get('name')}: {kind}{gap}")
    base = (
        "Each layer is a linear retarder (Jones calculus). Faces are ideal (no reflections) "
        "unless a candidate says otherwise"
    )
    if not named:
        return base + "; absorption and scatter are not modelled."
    return (
        base
        + ": "
        + "; ".join(named)
        + ". Faces act by coherent multiple reflections (Airy sum per eigenwave, at normal-"
        "incidence reflectance, reflections between air-gapped layers neglected); absorption "
        "and scatter are not modelled." + _reflectance_words(spec)
    )


def _reflectance_words(spec: dict) -> str:
    """The reflectance tolerance's model, when the spec gives it anywhere."""
    cands = spec.get("candidates") if isinstance(spec.get("candidates"), list) else []
    given = "reflectance" in (spec.get("tolerances") or {}) or any(
        isinstance(c, dict) and "reflectance" in (c.get("tolerances") or {}) for c in cands
    )
    if not given:
        return ""
    return (
        " The reflectance tolerance adds its own draw to each face's power reflectance (both "
        "eigenwaves, every wavelength), independently per face, clipped to [0, 0.999999]; it "
        "does not apply to ideal faces."
    )


def assumptions(grid) -> list[str]:
    """Plain-text assumptions of the run, read from the grid's attrs and spec where it can."""
    spec = _json_attr(grid, "spec", {}) or {}
    if not isinstance(spec, dict):
        spec = {}
    out = []
    tols = spec.get("tolerances")
    names = (
        [_s(t) for t in grid["tolerance_name"].values] if "tolerance_name" in grid.coords else []
    )
    if isinstance(tols, dict) and tols:
        parts = [f"{_TOL_WORDS.get(k, k)}: {_distribution_words(v, k)}" for k, v in tols.items()]
        out.append(
            "Tolerances drawn independently for each sampled build — " + "; ".join(parts) + "."
        )
    elif isinstance(tols, list) and tols:
        out.append(
            "Tolerances drawn independently for each sampled build — "
            + "; ".join(_describe(t) for t in tols)
            + "."
        )
    elif names:
        out.append(
            "Tolerances drawn independently for each sampled build: "
            + ", ".join(names)
            + " (distributions as in the spec below)."
        )
    else:
        out.append("No tolerance was active: every sample is the nominal plate.")
    samples, seed = grid.attrs.get("samples"), grid.attrs.get("seed")
    conf = grid["yield"].attrs.get("confidence", grid.attrs.get("confidence"))
    method = grid["yield"].attrs.get("method")
    text = "Monte Carlo"
    if samples is not None:
        text += f" with {_s(samples)} samples per candidate"
    if seed is not None:
        text += f" (seed {_s(seed)})"
    text += "; yield = fraction of samples that pass"
    if conf is not None:
        text += f", with a {float(conf):.0%} confidence interval"
        if method:
            text += f" ({_s(method)})"
    out.append(text + ".")
    out += _override_words(spec)
    out += _polarizer_words(grid, spec)
    table = (spec.get("input") or {}).get("stokes_table") if isinstance(spec, dict) else None
    if isinstance(table, dict) and table.get("wavelength_nm"):
        wl = table["wavelength_nm"]
        out.append(
            f"The input varies over the spectrum: {len(wl)} normalised Stokes vectors from "
            f"{_s(wl[0])} to {_s(wl[-1])} nm, interpolated linearly in s1, s2, s3 (an incoherent "
            "mix between rows); the input-azimuth tolerance turns the whole input."
        )
    out.append("A sample passes when " + _goal_text(grid) + ".")
    rule = _s(grid.attrs.get("goal_rule") or "")
    out.append(
        (rule[0].upper() + rule[1:] + ".")
        if rule
        else "A candidate meets the goal when its yield is above zero."
    )
    if grid.sizes.get("wavelength", 1) > 1:
        out.append(
            "Light of different wavelengths adds incoherently: output Stokes vectors are "
            "averaged with the source weights of the grid cells; the spectral degree of "
            "polarization shows the depolarization this causes."
        )
    ref = None
    for key in ("reference_temperature", "temperature", "design_temperature"):
        if _num(spec.get(key)) is not None:
            ref = _num(spec.get(key))
            break
    t_nom = _num(grid.attrs.get("nominal_temperature_c"))
    out.append(
        "Plates are designed (thicknesses chosen) at "
        + (
            f"the reference temperature of {ref:g} °C"
            if ref is not None
            else "the materials' reference temperature"
        )
        + "; temperature changes the retardance through each material's thermal data"
        + _temperature_words(spec, t_nom)
        + "."
    )
    out.append(_faces_words(spec))
    limit = _num(grid.attrs.get("acceptance_limit_waves"))
    if limit is not None and "acceptance_half_angle" in grid.variables:
        out.append(
            f"Acceptance half-angle: the angle of incidence at which the retardance change "
            f"from normal incidence first reaches ±{limit:g} waves at some plane-of-incidence "
            f"azimuth (the plate's own offset from target is shown in the retardance figure)."
        )
    if "design_stokes" in grid.variables:
        out.append(
            "Sphere plots use the grid wavelength nearest each candidate's design wavelength."
        )
    extra = grid.attrs.get("assumptions") or spec.get("assumptions")
    if extra:
        extra = _json_attr(grid, "assumptions", extra) if isinstance(extra, str) else extra
        out += [_s(a) for a in (extra if isinstance(extra, list) else [extra])]
    return out


def _materials(grid) -> str:
    mats = _json_attr(grid, "material_sources", [])
    if not isinstance(mats, list) or not mats:
        return '<p class="muted">The grid names no material sources.</p>'
    rows = [
        "<table><thead><tr><th>Material</th><th>Dispersion data</th>"
        "<th>Thermal data</th></tr></thead><tbody>"
    ]
    for m in mats:
        m = m if isinstance(m, dict) else {"name": m}
        rows.append(
            f"<tr><td>{_e(m.get('name', ''))}</td><td>{_e(m.get('source', '—'))}</td>"
            f"<td>{_e(m.get('thermal_source', '—'))}</td></tr>"
        )
    rows.append("</tbody></table>")
    return "".join(rows)


def _figure_html(name, caption, png: bytes) -> str:
    data = base64.b64encode(png).decode("ascii")
    return (
        f'<figure id="fig-{_e(name)}"><img src="data:image/png;base64,{data}" '
        f'alt="{_e(caption)}"><figcaption>{_e(caption)}</figcaption></figure>'
    )


def _cell(v) -> str:
    if isinstance(v, str):
        return v
    return "—" if v is None or not np.isfinite(v) else f"{v:.5g}"


def drawing_section(grid, rows=None, figure_png: bytes | None = None) -> str:
    """The drawing and purchase-order table, the margin-based sensitivity and (from
    ``retol allocate``) the yield-versus-width figure, as one HTML section.  ``grid`` may be
    None when ``rows`` are given (an allocation has no results grid, so no margin table)."""
    from .allocation import drawing_rows_for_grid

    try:
        rows = rows if rows is not None else drawing_rows_for_grid(grid)
    except Exception:  # an old grid without what the table needs: leave the section out
        return ""
    cols: list[str] = []
    for r in sorted(rows, key=lambda r: r.get("construction") == "polarizer"):
        cols += [k for k in r if k not in cols]  # a plate's columns first
    head = "".join(f"<th>{_e(c)}</th>" for c in cols)
    body = "".join(
        "<tr>" + "".join(f"<td>{_e(_cell(r.get(c)))}</td>" for c in cols) + "</tr>" for r in rows
    )
    out = [
        "<h2>Drawing and purchase order</h2>",
        "<p>Each ± at the spec's coverage (3 σ for normal forms unless given), the half width of "
        "a uniform tolerance; the retardance ± in waves at the test wavelength.  "
        "<code>retol allocate</code> finds the widths that reach a yield target.</p>",
        f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>",
    ]
    if grid is not None and "margin_gain" in grid:
        mh = "".join(f"<th>{_e(t)}</th>" for t in grid["tolerance_name"].values)
        mb = "".join(
            f"<tr><td>{_e(c)}</td><td>{_e(_fmt(float(grid['margin_p05'].sel(candidate=c)), 4))}"
            "</td>"
            + "".join(
                f"<td>{_e(_fmt(float(v), 3))}</td>" for v in grid["margin_gain"].sel(candidate=c)
            )
            + f"<td>{_e(str(grid['margin_dominant'].sel(candidate=c).values))}</td></tr>"
            for c in grid["candidate"].values
        )
        out += [
            "<h3>Margin-based sensitivity</h3>",
            "<p>The rise of the 5th-percentile goal metric when each tolerance is removed; the "
            "last column names the tolerance that uses up most margin.</p>",
            f"<table><thead><tr><th>candidate</th><th>p05</th>{mh}<th>uses most margin</th>"
            f"</tr></thead><tbody>{mb}</tbody></table>",
        ]
    if figure_png is not None:
        out.append(_figure_html("yield_vs_width", "Yield versus width", figure_png))
    return "\n".join(out)


def _no_candidate_box(grid, rows, best, rule) -> str:
    closest = best[0] if best else max(rows, key=lambda r: r["yield"] or 0)
    y = closest["yield"]
    ytxt = (
        " ".join(pct_interval(y, closest["yield_low"], closest["yield_high"])[:1]) + " %"
        if None not in (y, closest["yield_low"], closest["yield_high"])
        else "—"
    )
    return (
        '<div class="nopick" id="no-candidate"><div class="name">No candidate meets the goal'
        "</div><div>Nothing is recommended. The closest is "
        f"<b>{_e(closest['name'])}</b> ({_e(closest['construction'])}), yield {_e(ytxt)}."
        + (f" Rule: {_e(rule)}." if rule else "")
        + " Loosen a tolerance, relax the goal or add a candidate.</div></div>"
    )


def _separation(grid, rows):
    if any(r[k] is None for r in rows for k in ("yield", "yield_low", "yield_high", "rank")):
        return None
    return separation_warning(
        [r["name"] for r in rows],
        [r["yield"] for r in rows],
        [r["yield_low"] for r in rows],
        [r["yield_high"] for r in rows],
        [r["rank"] for r in rows],
        int(grid.attrs.get("samples", 0) or 0),
        float(grid.attrs.get("confidence", 0.95)),
    )


def safety_text(grid) -> str:
    """The optical-safety caution for the grid's source and candidates (IEC 60825-1 / 62471)."""
    spec = _json_attr(grid, "spec", {}) or {}
    shape = ""
    if isinstance(spec, dict) and isinstance(spec.get("source"), dict):
        shape = _s(spec["source"].get("shape", ""))
    cands = [
        (r["name"], r["construction"], [m for m, _, _ in _layers(grid, c)])
        for c, r in enumerate(summary_rows(grid))
    ]
    return caution(shape, cands) if shape else LASER_CAUTION


def build_html(grid, figures, command=None) -> str:
    """The report page as one string.

    Parameters
    ----------
    grid : xarray.Dataset
        Results grid.
    figures : list of (name, caption, png bytes)
        Embedded as data URIs, in this order.
    command : str, optional
        The command that wrote this report (shown beside the run's own command).
    """
    from .version import __version__

    rows = summary_rows(grid)
    title = _s(grid.attrs.get("title") or "Retarder tolerance study")
    spec = _json_attr(grid, "spec", None)
    spec_text = (
        json.dumps(spec, indent=2, ensure_ascii=False)
        if spec is not None
        else _s(grid.attrs.get("spec", "(not recorded)"))
    )
    version = _s(grid.attrs.get("version", "unknown"))
    run_cmd = _s(grid.attrs.get("command") or "(not recorded)")
    seed = _s(grid.attrs.get("seed", "(not recorded)"))
    samples = grid.attrs.get("samples", grid.sizes.get("sample"))
    wl = np.asarray(grid["wavelength"].values, dtype=float)
    band = (
        f"{wl.min():g}–{wl.max():g} nm ({wl.size} wavelengths)" if wl.size > 1 else f"{wl[0]:g} nm"
    )

    best = [r for r in rows if r["rank"] == 1]
    facts = [
        ("Goal", _goal_text(grid)),
        ("Band", band),
        ("Source", _s(grid.attrs.get("source_description", "—"))),
        ("Candidates", str(len(rows))),
        ("Samples", _s(samples)),
        ("Seed", seed),
    ]
    p = []
    p.append('<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">')
    p.append('<meta name="viewport" content="width=device-width, initial-scale=1">')
    p.append(f"<title>{_e(title)} — retol report</title><style>{_CSS}</style></head><body>")
    p.append('<header><div class="kicker">Retarder tolerance report</div>')
    p.append(f'<h1>{_e(title)}</h1><ul class="facts">')
    p += [f"<li><b>{_e(k)}:</b> {_e(v)}</li>" for k, v in facts]
    p.append("</ul></header>")
    rule = _s(grid.attrs.get("goal_rule") or "")
    pick = recommended_name(grid)
    names = [r["name"] for r in rows]
    if pick is not None:
        b = rows[names.index(pick)]
        reason = _s(_var(grid, "reason", names.index(pick)) or "")
        p.append(
            f'<div class="pick" id="recommended"><div class="muted">Recommended</div>'
            f'<div class="name">{_e(b["name"])} <span class="muted">'
            f"({_e(b['construction'])})</span></div><div>{_e(reason)}</div>"
            + (f'<div class="muted">Rule: {_e(rule)}.</div>' if rule else "")
            + "</div>"
        )
    elif rows:
        p.append(_no_candidate_box(grid, rows, best, rule))
    warning = _separation(grid, rows)
    if warning:
        p.append(f'<p class="note" id="samples-warning"><b>Note:</b> {_e(warning)}</p>')
    p.append(
        f'<div class="caution" id="laser-safety"><strong>Optical safety.</strong> '
        f"{_e(safety_text(grid))}</div>"
    )

    p.append("<h2>Candidates</h2>")
    p.append(_candidate_tables(grid, rows))
    p.append(
        '<p class="muted">'
        + (
            "Spectrum: the goal metric of the source-averaged output, for the nominal plate "
            "and as the 5th percentile over the sampled builds. "
            if _over_spectrum(grid)
            else ""
        )
        + "Worst in band: the lowest goal metric over the band's wavelengths, nominal and 5th "
        "percentile. Yield: share of builds that pass. Dominant tolerance: the one whose "
        "removal raises the yield most. DOP: degree of polarization of the source-averaged "
        "output of the nominal plate"
        + (
            "; axial ratio and extinction over the spectrum are those of that averaged "
            "output (its polarized part for the axial ratio; the extinction counts the "
            "unpolarized part)"
            if grid.sizes.get("wavelength", 1) > 1
            else ""
        )
        + ". dδ/dT: retardance change per kelvin at the design wavelength. Tilt ½-angle: "
        "angle of incidence at which the tilt-induced retardance change (from normal incidence) "
        "reaches the acceptance limit.</p>"
    )
    p.append("<h2>Ranking</h2>")
    p.append(_ranking(grid, rows))

    p.append(drawing_section(grid))
    p.append("<h2>Figures</h2>")
    for k, (name, caption, png) in enumerate(figures, start=1):
        p.append(_figure_html(name, f"Figure {k}. {caption}", png))

    p.append('<h2>Assumptions</h2><ul class="assume">')
    p += [f"<li>{_e(a)}</li>" for a in assumptions(grid)]
    p.append("</ul>")
    p.append("<h2>Materials and data sources</h2>")
    p.append(_materials(grid))

    p.append("<h2>The job</h2>")
    spec_path = _s(grid.attrs.get("spec_path") or "")
    spec_toml = _s(grid.attrs.get("spec_toml") or "")
    where = f"Spec file: <code>{_e(spec_path)}</code>. " if spec_path else ""
    if spec_toml.strip():
        p.append(f"<p>{where}The spec as written:</p>")
        p.append(f'<pre id="spec-toml">{_e(spec_toml)}</pre>')
        p.append(
            '<details id="spec-details"><summary>The validated spec as run (normalised, with '
            "defaults filled in)</summary>"
            f'<pre id="spec">{_e(spec_text)}</pre></details>'
        )
    else:
        p.append(f"<p>{where}The validated spec as run:</p>")
        p.append(f'<pre id="spec">{_e(spec_text)}</pre>')

    p.append("<h2>Reproduce this run</h2><table><tbody>")
    p.append(
        f"<tr><th>Software</th><td>retol {_e(version)} (run)"
        + (f"; report written by retol {_e(__version__)}" if __version__ != version else "")
        + "</td></tr>"
    )
    p.append(f'<tr><th>Seed</th><td id="seed">{_e(seed)}</td></tr>')
    p.append(f"<tr><th>Samples</th><td>{_e(samples)}</td></tr>")
    p.append("</tbody></table>")
    p.append("<p>The exact command that reproduces the run:</p>")
    p.append(f'<pre id="command">{_e(run_cmd)}</pre>')
    if command:
        p.append(f"<p>This report was written by:</p><pre>{_e(command)}</pre>")
    p.append(
        f"<footer>Written by retol {_e(__version__)}. Predictions of a model under the "
        "assumptions above; verify critical parts by measurement.</footer>"
    )
    p.append("</body></html>\n")
    return "\n".join(p)


# ----------------------------------------------------------------------------- writing


def _render_all(grid, folder: Path, formats, progress=None):
    """Draw each figure once; write the requested formats into ``folder``; return PNGs.

    ``progress(done, total, name)`` is called before each figure (for a progress display).
    """
    from .plots import FIGURES, figure_names, render

    embedded = []
    folder.mkdir()
    names = figure_names(grid)
    for k, name in enumerate(names):
        if progress is not None:
            progress(k, len(names), name)
        func, caption = FIGURES[name].payload, FIGURES[name].help
        fig = func(grid)
        buf = io.BytesIO()
        render(fig, buf, "png")
        png = buf.getvalue()
        embedded.append((name, caption, png))
        for fmt in formats:
            target = folder / f"{name}.{fmt}"
            if fmt == "png":
                target.write_bytes(png)
            else:
                render(fig, target, fmt)
        del fig
    return embedded


def render_report(grid, folder, formats=("png",), command=None, progress=None) -> Path:
    """Write report.html, summary.csv and figures/ into the existing folder ``folder``.

    No checks of the folder and no publishing: :func:`write_report` (and ``retol run``) call
    this on a part folder that :class:`tolerance.publish.Output` then moves into place.
    """
    from .plots import check_formats

    formats = check_formats(formats)
    check_grid(grid)
    folder = Path(folder)
    figures = _render_all(grid, folder / FIGURE_DIR, formats, progress)
    write_summary_csv(grid, folder / SUMMARY_FILE)
    (folder / REPORT_FILE).write_text(build_html(grid, figures, command), encoding="utf-8")
    return folder / REPORT_FILE


def write_report(
    grid, out_dir, formats=("png",), force: bool = False, command=None, progress=None
) -> Path:
    """Write report.html, summary.csv and figures/ for ``grid`` into ``out_dir``.

    Parameters
    ----------
    grid : xarray.Dataset
        Results grid of ``retol run``.
    out_dir : str or Path
        Destination folder.  It may not exist yet, or exist holding other files (``retol run``
        writes grid.nc there first); a previous report in it is replaced only with ``force``.
    formats : sequence of str
        Figure file formats for figures/: any of "png", "svg", "pdf".  The HTML always embeds
        PNG.
    force : bool
        Replace a previous report in ``out_dir`` (only the files retol wrote).
    command : str, optional
        The command line that wrote this report, shown in it.
    progress : callable, optional
        ``progress(done, total, figure_name)`` before each figure is drawn.

    Returns
    -------
    pathlib.Path
        Path of report.html.

    Notes
    -----
    Everything is built in a part folder on the destination's file system and published all
    or nothing by :class:`tolerance.publish.Output`; if anything fails the part folder is
    removed and ``out_dir`` is untouched.  Callers that run a long job first should call
    :func:`check_writable` before the job.

    Raises
    ------
    RetolError
        Unknown format ("--format"); a bad, unwritable, busy or already-reported-in ``out_dir``
        ("--out"); a Dataset that is not a results grid ("grid").
    """
    from .plots import check_formats
    from .publish import REPORT, Output, write_error

    formats = check_formats(formats)
    check_grid(grid)
    with Output(out_dir, force=force, replaces=REPORT, command=command) as out:
        try:
            render_report(grid, out.part, formats, command, progress)
        except OSError as exc:
            raise write_error(exc, "--out", f"cannot write the report for {out.target}") from None
        target = out.publish()
    return target / REPORT_FILE
