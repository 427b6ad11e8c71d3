"""Figures of a results grid (the xarray Dataset of ``retol run``).

Every public function takes the grid and returns a :class:`matplotlib.figure.Figure`.  The
figures are built on ``matplotlib.figure.Figure`` directly (no pyplot, no global figure
registry), so they render with the Agg canvas whatever backend a notebook uses and are freed
when dropped.  matplotlib is imported inside the functions so that ``import tolerance`` stays
fast.

The look (palette, marks, layout) is our own; it lives in ``STYLE`` and ``PALETTE``.
"""

from __future__ import annotations

import contextlib
import json
import math
from pathlib import Path

import numpy as np

from .decision import candidate_has_faces, tolerance_applies, yield_text
from .errors import RetolError
from .registry import Registry

#: Figure file formats that ``save_figures`` writes.
FORMATS = ("png", "svg", "pdf")

#: Candidate colours, in spec order (repeats after six): six of the Okabe-Ito colour-blind-safe
#: colours (M. Okabe, K. Ito, "Color Universal Design (CUD): how to make figures and
#: presentations that are friendly to colorblind people", J*FLY, 2008).  Every pair stays apart
#: after simulated deuteranopia and protanopia (tests/test_palette.py).  Colour is never the
#: only cue: each candidate also has its own line style and marker, and lines carry direct labels.
PALETTE = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#000000"]
#: Line style and marker of each candidate, in step with PALETTE.
LINESTYLES = ["-", (0, (5, 2)), (0, (1, 1.5)), (0, (6, 2, 1, 2)), (0, (3, 1, 1, 1, 1, 1)), "-"]
MARKERS = ["o", "s", "^", "D", "v", "P"]

#: Neutral inks.
INK = "#2b2824"
GOAL_INK = "#8c1c13"
SOURCE_INK = "#d7cdb8"

#: matplotlib rc settings of every figure.
STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 8.5,
    "axes.titlesize": 9.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 8.5,
    "axes.labelcolor": INK,
    "axes.edgecolor": "#6b665d",
    "axes.linewidth": 0.8,
    "axes.facecolor": "#fcfbf8",
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#dcd7cc",
    "grid.linestyle": (0, (1, 2)),
    "grid.linewidth": 0.8,
    "xtick.color": "#4a463f",
    "ytick.color": "#4a463f",
    "xtick.direction": "out",
    "ytick.direction": "out",
    "legend.frameon": False,
    "legend.fontsize": 8,
    "lines.linewidth": 1.6,
    "figure.facecolor": "white",
    "savefig.facecolor": "white",
    "svg.fonttype": "path",
    "pdf.fonttype": 42,
    # every text is plain: a candidate named "a $x^$ plate" is drawn as typed, not as mathtext
    "text.parse_math": False,
}

#: Quantile levels the band figures use.
_BANDS = ((0.01, 0.99), (0.05, 0.95))


# ----------------------------------------------------------------------------- helpers


def _style():
    import matplotlib

    return matplotlib.rc_context(STYLE)


def _figure(width_in, height_in):
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), layout="constrained")


def _finish(fig):
    """Create ticks and text while the style is active, so later draws keep the look.

    The constrained layout found by this draw is then kept (layout engine "none"): every later
    save (PNG, SVG, PDF) reuses it instead of solving it again, which was about a third of the
    time spent on a figure (tests/benchmarks/bench_demo.py).  Positions are figure fractions,
    so the layout holds at any dpi.
    """
    fig.draw_without_rendering()
    fig.set_layout_engine("none")
    return fig


def _colour(i):
    return PALETTE[i % len(PALETTE)]


def _look(i) -> dict:
    """Colour, line style and marker of candidate ``i`` (so colour is never the only cue)."""
    return {
        "color": PALETTE[i % len(PALETTE)],
        "linestyle": LINESTYLES[i % len(LINESTYLES)],
        "marker": MARKERS[i % len(MARKERS)],
    }


def rank_order(grid) -> list[int]:
    """Candidate indices best rank first (spec order without a ranking): every figure's order."""
    n = grid.sizes.get("candidate", len(grid["candidate"]))
    if "rank" not in grid.variables:
        return list(range(n))
    return [int(i) for i in np.argsort(np.asarray(grid["rank"].values), kind="stable")]


def _direct_labels(ax, x, curves, names, looks):
    """Label each curve at its right end; labels of coinciding curves are spread apart."""
    if not curves:
        return
    ends = [float(c[np.isfinite(c)][-1]) if np.isfinite(c).any() else np.nan for c in curves]
    lo, hi = ax.get_ylim()
    gap = 0.07 * (hi - lo)
    placed = []
    for k in np.argsort(ends):
        y = ends[k]
        if not np.isfinite(y):
            continue
        if placed and y - placed[-1] < gap:
            y = placed[-1] + gap
        placed.append(y)
        ax.annotate(
            " " + names[k],
            (x[-1], y),
            ha="left",
            va="center",
            fontsize=7.5,
            color=looks[k]["color"],
            annotation_clip=False,
        )


def _names(grid) -> list[str]:
    return [str(c) for c in grid["candidate"].values]


def _has(grid, *names) -> bool:
    return all(n in grid.variables for n in names)


def _attr_float(grid, name):
    try:
        value = float(grid.attrs[name])
    except (KeyError, TypeError, ValueError):
        return None
    return value if np.isfinite(value) else None


def _goal_limit(grid):
    """The goal's limit: its ``goal_min``, or ``goal_max`` for a metric where smaller is better."""
    m = _attr_float(grid, "goal_min")
    return m if m is not None else _attr_float(grid, "goal_max")


def _quantile(grid, var, c, q):
    """One quantile curve of ``var`` for candidate index ``c``, or None if ``q`` is absent."""
    if var not in grid.variables or "quantile" not in grid.coords:
        return None
    qs = np.asarray(grid["quantile"].values, dtype=float)
    k = np.nonzero(np.isclose(qs, q, atol=1e-9))[0]
    if not k.size:
        return None
    return np.asarray(grid[var].isel(candidate=c, quantile=int(k[0])).values, dtype=float)


def _shown_units(units) -> str:
    """Units as printed: "" for a dimensionless quantity (units "1", common practice)."""
    units = "" if units is None else str(units).strip()
    return "" if units in ("", "1") else units


def _metric_units(grid) -> str:
    return _shown_units(grid.attrs.get("metric_units"))


def _metric_label(grid) -> str:
    name = grid.attrs.get("metric_long_name") or grid.attrs.get("goal_metric") or "goal metric"
    units = _metric_units(grid)
    name = str(name)
    name = name[:1].upper() + name[1:]
    return f"{name} [{units}]" if units else name


def _wrap(text, width=90) -> str:
    import textwrap

    return "\n".join(textwrap.wrap(str(text), width)) or str(text)


def _units(grid, var, default=""):
    """The unit to print for ``var``: its ``display_units`` (e.g. waves), else its ``units``."""
    if var not in grid.variables:
        return default
    a = grid[var].attrs
    return str(a.get("display_units") or a.get("units", default))


def _fmt_goal(grid, goal):
    return f"goal ≥ {goal:g} {_metric_units(grid)}".rstrip()


def _band(ax, x, lo, hi, **kw):
    """A shaded band; a short thick bar when there is one wavelength only."""
    if x.size > 1:
        return ax.fill_between(x, lo, hi, linewidth=0, **kw)
    kw.pop("step", None)
    return ax.bar(x, hi - lo, bottom=lo, width=_bar_width(x), linewidth=0, **kw)


def _bar_width(x):
    return max(0.6, 0.02 * float(abs(x[0]) or 1.0))


def _curve(ax, x, y, **kw):
    if x.size == 1:
        kw.setdefault("marker", "o")
        kw.setdefault("markersize", 5)
    return ax.plot(x, y, **kw)


def _metric_ylim(ax, quantile_curves, nominal, goal):
    """Y range that shows the bands and the goal; a nominal curve that peaks far above (an
    extinction ratio at its cap, say) runs off the top instead of flattening the bands."""
    parts = [np.asarray(q, dtype=float).ravel() for q in quantile_curves if q is not None]
    if goal is not None:
        parts.append(np.array([goal]))
    core = np.concatenate(parts) if parts else np.asarray(nominal, dtype=float).ravel()
    core = core[np.isfinite(core)]
    nom = np.asarray(nominal, dtype=float)
    nom = nom[np.isfinite(nom)]
    if not core.size:
        return
    lo, hi = float(core.min()), float(core.max())
    if nom.size:
        lo = min(lo, float(nom.min()))
    span = max(hi - lo, 1e-9 * max(1.0, abs(hi)), 1e-12)
    if nom.size:  # leave the nominal curve up to half the span of headroom
        hi = max(hi, min(float(nom.max()), hi + 0.5 * span))
        span = max(hi - lo, span)
    ax.set_ylim(lo - 0.08 * span, hi + 0.12 * span)


def _wavelength_axis(ax, grid):
    ax.set_xlabel(f"Wavelength [{_units(grid, 'wavelength', 'nm')}]")
    wl = np.asarray(grid["wavelength"].values, dtype=float)
    if wl.size == 1:
        ax.set_xlim(wl[0] - 10 * _bar_width(wl), wl[0] + 10 * _bar_width(wl))
        ax.set_xticks([wl[0]])


def _source_behind(ax, grid):
    """The source spectrum shaded behind ``ax`` on a twin y axis; returns the twin (or None)."""
    if "source_spectrum" not in grid.variables:
        return None
    wl = np.asarray(grid["wavelength"].values, dtype=float)
    sp = np.asarray(grid["source_spectrum"].values, dtype=float)
    tw = ax.twinx()
    tw.grid(False)
    tw.spines["right"].set_visible(True)
    tw.spines["right"].set_color("#b5aa92")
    tw.tick_params(axis="y", colors="#8f846b", labelsize=7)
    if wl.size > 1:
        tw.fill_between(wl, 0, sp, color=SOURCE_INK, alpha=0.55, linewidth=0)
    else:
        tw.bar(wl, sp, width=_bar_width(wl) * 3, color=SOURCE_INK, alpha=0.55, linewidth=0)
    top = np.nanmax(sp) if np.isfinite(sp).any() else 1.0
    tw.set_ylim(0, 1.1 * top if top > 0 else 1.0)
    tw.set_ylabel("Source [rel.]", color="#8f846b", fontsize=7.5)
    ax.set_zorder(tw.get_zorder() + 1)
    ax.patch.set_visible(False)
    return tw


def _empty(ax, text):
    ax.set_axis_off()
    ax.text(
        0.5,
        0.5,
        text,
        ha="center",
        va="center",
        transform=ax.transAxes,
        color="#6b665d",
        fontsize=9,
        style="italic",
    )


def _candidate_title(ax, grid, c):
    name = _names(grid)[c]
    extra = []
    if "construction" in grid.variables:
        extra.append(str(grid["construction"].values[c]))
    if "rank" in grid.variables:
        extra.append(f"rank {int(grid['rank'].values[c])}")
    ax.set_title(name + (f"  ({', '.join(extra)})" if extra else ""), color=_colour(c))


# ----------------------------------------------------------------------------- figures


def metric_bands(grid):
    """Goal metric vs wavelength per candidate: nominal, median, 5–95 % and 1–99 % bands.

    One panel per candidate on a shared wavelength axis, the goal threshold (attr
    ``goal_min``) as a line and the source spectrum shaded behind on a second y axis.

    Parameters
    ----------
    grid : xarray.Dataset
        Results grid; uses ``metric_quantile``, ``nominal_metric`` and ``source_spectrum``.

    Returns
    -------
    matplotlib.figure.Figure
        ``n_candidates`` panels, each with a twin axis for the source when it is present.
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    names = _names(grid)
    wl = np.asarray(grid["wavelength"].values, dtype=float)
    goal = _goal_limit(grid)
    with _style():
        fig = _figure(7.6, 0.6 + 2.3 * len(names))
        axes = fig.subplots(len(names), 1, sharex=True, squeeze=False)[:, 0]
        for c, ax in zip(rank_order(grid), axes, strict=True):
            col = _colour(c)
            _source_behind(ax, grid)
            curves = []
            for (qa, qb), alpha in zip(_BANDS, (0.16, 0.36), strict=True):
                lo, hi = (
                    _quantile(grid, "metric_quantile", c, qa),
                    _quantile(grid, "metric_quantile", c, qb),
                )
                if lo is not None and hi is not None:
                    _band(ax, wl, lo, hi, color=col, alpha=alpha)
                    curves += [lo, hi]
            med = _quantile(grid, "metric_quantile", c, 0.5)
            if med is not None:
                _curve(ax, wl, med, color=col, linestyle=(0, (4, 2)), linewidth=1.3)
            nominal = np.asarray(grid["nominal_metric"].isel(candidate=c).values, dtype=float)
            _curve(ax, wl, nominal, color=INK, linewidth=1.4)
            if goal is not None:
                ax.axhline(goal, color=GOAL_INK, linewidth=1.1, linestyle=(0, (6, 2, 1, 2)))
            _metric_ylim(ax, curves, nominal, goal)
            if len(names) == 1:
                ax.set_ylabel(_wrap(_metric_label(grid), 45))
            elif _metric_units(grid):
                ax.set_ylabel(f"[{_metric_units(grid)}]")
            _candidate_title(ax, grid, c)
        _wavelength_axis(axes[-1], grid)
        handles = [
            Line2D([], [], color=INK, linewidth=1.4, label="nominal plate"),
            Line2D(
                [],
                [],
                color="#555",
                linestyle=(0, (4, 2)),
                linewidth=1.3,
                label="median of samples",
            ),
            Patch(color="#555", alpha=0.45, label="5–95 % of samples"),
            Patch(color="#555", alpha=0.18, label="1–99 % of samples"),
        ]
        if goal is not None:
            handles.append(
                Line2D(
                    [], [], color=GOAL_INK, linestyle=(0, (6, 2, 1, 2)), label=_fmt_goal(grid, goal)
                )
            )
        if "source_spectrum" in grid.variables:
            handles.append(Patch(color=SOURCE_INK, alpha=0.8, label="source spectrum"))
        fig.legend(handles=handles, loc="outside upper center", ncols=3)
        if len(names) > 1:
            fig.supylabel(_wrap(_metric_label(grid), 70), fontsize=8.5, color=INK)
        return _finish(fig)


def p05_overlay(grid):
    """The 5th-percentile goal metric of every candidate on one axes, with the threshold.

    A plate whose curve stays above the threshold over the band passes in at least 95 % of
    builds at every wavelength separately (the band-wide yield can still be lower).

    Returns
    -------
    matplotlib.figure.Figure
        One axes.
    """
    names = _names(grid)
    wl = np.asarray(grid["wavelength"].values, dtype=float)
    goal = _goal_limit(grid)
    # the worse tail: the 5th percentile, or the 95th where smaller is better (a goal max)
    high = str(grid.attrs.get("goal_sense", "min")) == "max"
    tail, tail_name = (0.95, "95th") if high else (0.05, "5th")
    with _style():
        fig = _figure(7.6, 3.4)
        ax = fig.subplots()
        curves, labelled, looks = [], [], []
        mark_every = max(1, wl.size // 8)
        for c in rank_order(grid):
            p05 = _quantile(grid, "metric_quantile", c, tail)
            if p05 is None:
                continue
            curves.append(p05)
            labelled.append(names[c])
            looks.append(_look(c))
            _curve(
                ax,
                wl,
                p05,
                linewidth=1.8,
                label=names[c],
                markevery=mark_every,
                markersize=4,
                **_look(c),
            )
        if goal is not None:
            ax.axhline(
                goal,
                color=GOAL_INK,
                linewidth=1.1,
                linestyle=(0, (6, 2, 1, 2)),
                label=_fmt_goal(grid, goal),
            )
        if curves:
            _metric_ylim(ax, curves, np.array([]), goal)
        else:
            ax.text(
                0.5,
                0.5,
                "no 5 % quantile in this grid",
                transform=ax.transAxes,
                ha="center",
                color="#6b665d",
            )
        if goal is not None:
            bottom, top = ax.get_ylim()
            ax.axhspan(
                goal if high else bottom,
                top if high else goal,
                color=GOAL_INK,
                alpha=0.035,
                linewidth=0,
            )
            ax.set_ylim(bottom=bottom, top=top if high else None)
        units = _metric_units(grid)
        ax.set_ylabel(f"{tail_name} percentile" + (f" [{units}]" if units else ""))
        ax.set_title(_wrap(f"{tail_name} percentile of the samples: {_metric_label(grid)}", 88))
        _wavelength_axis(ax, grid)
        _direct_labels(ax, wl, curves, labelled, looks)
        ax.legend(loc="upper left", bbox_to_anchor=(1.12, 1.0), fontsize=7.5)
        return _finish(fig)


def _target_offset(nominal, target):
    """Whole waves between a plate's order-kept retardance and its (reduced) target."""
    finite = nominal[np.isfinite(nominal)]
    if not finite.size or not np.isfinite(target):
        return 0.0
    return float(np.round(np.median(finite) - target))


def retardance_bands(grid):
    """Retardance vs wavelength per candidate: nominal, 5–95 % band and the target.

    A target given in reduced waves (e.g. 0.25) is drawn at the same order as the plate
    (e.g. 2.25 for a multi-order plate) and labelled so.

    Returns
    -------
    matplotlib.figure.Figure
        ``n_candidates`` panels on a shared wavelength axis.
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    names = _names(grid)
    wl = np.asarray(grid["wavelength"].values, dtype=float)
    units = _units(grid, "nominal_retardance", "waves")
    with _style():
        fig = _figure(7.6, 0.5 + 2.0 * len(names))
        axes = fig.subplots(len(names), 1, sharex=True, squeeze=False)[:, 0]
        for c, ax in zip(rank_order(grid), axes, strict=True):
            col = _colour(c)
            nominal = np.asarray(grid["nominal_retardance"].isel(candidate=c).values, float)
            lo = _quantile(grid, "retardance_quantile", c, 0.05)
            hi = _quantile(grid, "retardance_quantile", c, 0.95)
            if lo is not None and hi is not None:
                _band(ax, wl, lo, hi, color=col, alpha=0.32)
            _curve(ax, wl, nominal, color=col, linewidth=1.7)
            if "target_waves" in grid.variables:
                target = float(grid["target_waves"].values[c])
                k = _target_offset(nominal, target)
                label = f"target {target + k:g} {units}"
                if k:
                    label += f" ({target:g} + {k:g})"
                ax.axhline(target + k, color=GOAL_INK, linewidth=1.0, linestyle=(0, (6, 2, 1, 2)))
                ax.annotate(
                    label,
                    (1.0, target + k),
                    xycoords=("axes fraction", "data"),
                    xytext=(-4, 3),
                    textcoords="offset points",
                    ha="right",
                    va="bottom",
                    fontsize=7.5,
                    color=GOAL_INK,
                )
            if "design_wavelength" in grid.variables:
                ax.axvline(
                    float(grid["design_wavelength"].values[c]),
                    color="#9a948a",
                    linewidth=0.8,
                    linestyle=":",
                )
            ax.set_ylabel(f"[{units}]")
            _candidate_title(ax, grid, c)
        _wavelength_axis(axes[-1], grid)
        fig.supylabel(f"Retardance [{units}]", fontsize=8.5, color=INK)
        handles = [
            Line2D([], [], color="#555", linewidth=1.7, label="nominal plate"),
            Patch(color="#555", alpha=0.4, label="5–95 % of samples"),
            Line2D([], [], color=GOAL_INK, linestyle=(0, (6, 2, 1, 2)), label="target"),
            Line2D([], [], color="#9a948a", linestyle=":", label="design wavelength"),
        ]
        fig.legend(handles=handles, loc="outside upper center", ncols=4)
        return _finish(fig)


def yield_chart(grid):
    """Yield of every candidate with its confidence interval (``yield_low``/``yield_high``).

    Candidates are listed best rank first; the bar is the interval, the dot the estimate.

    Returns
    -------
    matplotlib.figure.Figure
        One axes.
    """
    names = _names(grid)
    y = np.asarray(grid["yield"].values, dtype=float) * 100
    lo = np.asarray(grid["yield_low"].values, dtype=float) * 100 if _has(grid, "yield_low") else y
    hi = np.asarray(grid["yield_high"].values, dtype=float) * 100 if _has(grid, "yield_high") else y
    order = rank_order(grid)
    conf = grid["yield"].attrs.get("confidence", grid.attrs.get("confidence"))
    method = grid["yield"].attrs.get("method")
    with _style():
        fig = _figure(7.6, 1.0 + 0.48 * len(names))
        ax = fig.subplots()
        for row, c in enumerate(order):
            pos = len(order) - 1 - row
            col = _colour(c)
            ax.plot(
                [lo[c], hi[c]],
                [pos, pos],
                color=col,
                linewidth=7,
                alpha=0.35,
                solid_capstyle="round",
            )
            ax.plot(
                [y[c]],
                [pos],
                marker=_look(c)["marker"],
                markersize=7,
                color=col,
                markeredgecolor="white",
                markeredgewidth=1.2,
                linestyle="none",
            )
            ax.annotate(
                yield_text(y[c] / 100, lo[c] / 100, hi[c] / 100),
                (min(hi[c], 100.0), pos),
                xytext=(8, 0),
                textcoords="offset points",
                va="center",
                fontsize=8,
                color=INK,
            )
        ax.set_yticks(range(len(order)), [names[c] for c in order][::-1])
        for lab, c in zip(ax.get_yticklabels(), order[::-1], strict=True):
            lab.set_color(_colour(c))
        ax.set_xlim(0, 125)
        ax.set_xticks(np.arange(0, 101, 20))
        ax.set_ylim(-0.7, len(order) - 0.3)
        ax.grid(axis="y", visible=False)
        text = "Yield [%]"
        if conf is not None:
            text += f" — dot: estimate; bar: {float(conf):.0%} interval"
            if method:
                text += f" ({method})"
        ax.set_xlabel(text)
        return _finish(fig)


def sensitivity_chart(grid):
    """Per candidate: the yield with each tolerance alone and with all but it.

    Tolerances are sorted by effect = ``sensitivity_without`` − ``yield`` (the yield gained by
    removing the tolerance), largest on top.  The vertical line is the yield with everything on.

    Returns
    -------
    matplotlib.figure.Figure
        ``n_candidates`` panels.
    """
    from matplotlib.lines import Line2D

    names = _names(grid)
    tols = (
        [str(t) for t in grid["tolerance_name"].values] if "tolerance_name" in grid.coords else []
    )
    have = bool(tols) and _has(grid, "sensitivity_alone", "sensitivity_without")
    n_rows = max(len(tols), 1)
    with _style():
        fig = _figure(7.6, 0.7 + len(names) * (0.55 + 0.27 * n_rows))
        axes = fig.subplots(len(names), 1, sharex=True, squeeze=False)[:, 0]
        for c, ax in zip(rank_order(grid), axes, strict=True):
            _candidate_title(ax, grid, c)
            if not have:
                _empty(ax, "no tolerances in this run")
                continue
            col = _colour(c)
            n_layers = (
                len([m for m in np.atleast_1d(grid["layer_material"].values[c]) if str(m)])
                if "layer_material" in grid.variables
                else 1
            )
            over = str(grid.attrs.get("goal_over", "band"))
            faced = candidate_has_faces(grid.attrs, c)
            full = float(grid["yield"].values[c]) * 100
            alone = np.asarray(grid["sensitivity_alone"].isel(candidate=c).values, float) * 100
            without = np.asarray(grid["sensitivity_without"].isel(candidate=c).values, float) * 100
            effect = without - full
            order = np.argsort(-np.nan_to_num(effect, nan=-np.inf), kind="stable")
            for row, j in enumerate(order):
                pos = len(order) - 1 - row
                if not tolerance_applies(tols[j], n_layers, over, faced):
                    ax.annotate(
                        "not applicable",
                        (1.0, pos),
                        xycoords=("axes fraction", "data"),
                        xytext=(4, 0),
                        textcoords="offset points",
                        va="center",
                        fontsize=7.5,
                        color="#8a857c",
                        annotation_clip=False,
                    )
                    continue
                ax.plot([alone[j], without[j]], [pos, pos], color="#b9b2a5", linewidth=1.2)
                ax.plot(
                    [alone[j]],
                    [pos],
                    marker="D",
                    markersize=5.5,
                    color="white",
                    markeredgecolor=col,
                    markeredgewidth=1.4,
                    linestyle="none",
                )
                ax.plot(
                    [without[j]], [pos], marker="o", markersize=6.5, color=col, linestyle="none"
                )
                ax.annotate(
                    f"{effect[j]:+.1f}",
                    (1.0, pos),
                    xycoords=("axes fraction", "data"),
                    xytext=(4, 0),
                    textcoords="offset points",
                    va="center",
                    fontsize=7.5,
                    color=INK if effect[j] > 0 else "#8a857c",
                    annotation_clip=False,
                )
            ax.axvline(full, color=INK, linewidth=1.0, linestyle=(0, (3, 2)))
            ax.set_yticks(range(len(order)), [tols[j] for j in order][::-1])
            ax.set_ylim(-0.6, len(order) - 0.4)
            ax.grid(axis="y", visible=False)
        # one x range for all panels, scaled to the data (98-100 % gets the whole width)
        vals = []
        if have:
            vals = (
                np.concatenate(
                    [
                        np.asarray(grid["sensitivity_alone"].values, float).ravel(),
                        np.asarray(grid["sensitivity_without"].values, float).ravel(),
                        np.asarray(grid["yield"].values, float).ravel(),
                    ]
                )
                * 100
            )
            vals = vals[np.isfinite(vals)]
        if len(vals):
            lo, hi = float(vals.min()), float(vals.max())
            pad = max(0.06 * (hi - lo), 0.05)
            axes[-1].set_xlim(max(lo - pad, -2.0), min(hi + pad, 102.0))
        axes[-1].set_xlabel(
            "Yield [%]   (right margin: effect = yield without it − yield, in points)"
        )
        handles = [
            Line2D(
                [],
                [],
                marker="o",
                color="#555",
                linestyle="none",
                label="all tolerances but this one",
            ),
            Line2D(
                [],
                [],
                marker="D",
                color="white",
                markeredgecolor="#555",
                linestyle="none",
                label="this tolerance alone",
            ),
            Line2D([], [], color=INK, linestyle=(0, (3, 2)), label="all tolerances"),
        ]
        fig.legend(handles=handles, loc="outside upper center", ncols=3)
        return _finish(fig)


_NAMED_STATES = {
    "right-circular": (0.0, 0.0, 1.0),
    "rcp": (0.0, 0.0, 1.0),
    "left-circular": (0.0, 0.0, -1.0),
    "lcp": (0.0, 0.0, -1.0),
    "horizontal": (1.0, 0.0, 0.0),
    "vertical": (-1.0, 0.0, 0.0),
    "diagonal": (0.0, 1.0, 0.0),
    "anti-diagonal": (0.0, -1.0, 0.0),
}


def sobol_chart(grid):
    """Per candidate: first- and total-order Sobol' indices of pass/fail for each tolerance.

    The filled bar is the first-order index (the share of the pass/fail variance the tolerance
    explains alone), the open bar the total index (its share with every interaction); the
    whiskers are bootstrap confidence limits.  Where too few builds fail (or pass) to split the
    variance, the indices of the worst goal metric are drawn instead and the panel says so.

    Returns
    -------
    matplotlib.figure.Figure
        ``n_candidates`` panels.
    """
    names = _names(grid)
    tols = (
        [str(t) for t in grid["tolerance_name"].values] if "tolerance_name" in grid.coords else []
    )
    n_rows = max(len(tols), 1)
    with _style():
        fig = _figure(7.6, 0.7 + len(names) * (0.55 + 0.3 * n_rows))
        axes = fig.subplots(len(names), 1, sharex=True, squeeze=False)[:, 0]
        for c, ax in enumerate(axes):
            _candidate_title(ax, grid, c)
            var = "sobol_pass"
            if not np.any(np.isfinite(grid["sobol_pass_total"].values[c])):
                var = "sobol"
            vals = {
                f: np.asarray(grid[f"{var}_{f}"].values[c], float)
                for f in ("first", "first_low", "first_high", "total", "total_low", "total_high")
            }
            rows = [j for j in range(len(tols)) if np.isfinite(vals["total"][j])]
            if not rows:
                _empty(ax, "no variance to split (no tolerance changes the outcome)")
                continue
            rows.sort(key=lambda j: vals["total"][j])
            col = _colour(c)
            for pos, j in enumerate(rows):
                for fld, y, face in (("total", pos + 0.17, "white"), ("first", pos - 0.17, col)):
                    v = max(vals[fld][j], 0.0)
                    lo, hi = vals[f"{fld}_low"][j], vals[f"{fld}_high"][j]
                    ax.barh(y, v, height=0.32, color=face, edgecolor=col, linewidth=1.1)
                    if np.isfinite(lo) and np.isfinite(hi):
                        ax.plot([max(lo, 0), hi], [y, y], color=INK, linewidth=0.9)
            ax.set_yticks(range(len(rows)), [tols[j] for j in rows])
            ax.set_xlim(0, 1.05)
            ax.grid(axis="y", visible=False)
            if var == "sobol":
                ax.text(
                    0.99,
                    0.05,
                    "too few rejects: indices of the worst goal metric",
                    ha="right",
                    transform=ax.transAxes,
                    fontsize=7.5,
                    color="#8a857c",
                )
        axes[-1].set_xlabel(
            "Share of the variance   (filled: alone, first order; open: total, "
            "with interactions; whiskers: bootstrap limits)"
        )
        _finish(fig)
    return fig


def goal_stokes(grid, c=None):
    """The goal state as a normalised Stokes 3-vector, or None if the grid does not say.

    Looked up in order: attr ``goal_stokes`` (JSON list), attr ``goal_state`` as a JSON list or
    a state name, then the spec's ``goal`` table ("circular" with ``handedness``, or "linear"
    with ``azimuth_deg`` / ``azimuth`` [deg]).  Right-handed (clockwise looking toward the
    source) is S3 > 0.  For a circular goal whose spec leaves the hand open, the hand chosen
    for candidate index ``c`` (variable ``handedness``, +1 right / -1 left) is used when given.
    """
    for key in ("goal_stokes", "goal_state"):
        raw = grid.attrs.get(key)
        vec = _as_vector(raw)
        if vec is not None:
            return vec
    state = str(grid.attrs.get("goal_state", "")).strip().lower()
    if state in _NAMED_STATES:
        return np.array(_NAMED_STATES[state])
    goal = {}
    with contextlib.suppress(TypeError, ValueError, AttributeError):
        goal = json.loads(grid.attrs.get("spec", "{}")).get("goal", {}) or {}
    state = str(goal.get("state", state)).lower()
    if state == "circular":
        hand = goal.get("handedness")
        if hand is None and c is not None and "handedness" in grid.variables:
            with contextlib.suppress(TypeError, ValueError, IndexError):
                hand = -1 if float(grid["handedness"].values[c]) < 0 else 1
        sign = -1.0 if str(hand).lower() in ("left", "-1", "ccw", "counterclockwise") else 1.0
        return np.array([0.0, 0.0, sign])
    if state == "linear":
        try:
            az = float(goal.get("azimuth_deg", goal.get("azimuth", 0.0)))
        except (TypeError, ValueError):
            return None
        return np.array([np.cos(np.radians(2 * az)), np.sin(np.radians(2 * az)), 0.0])
    return None


def _as_vector(raw):
    if raw is None:
        return None
    if isinstance(raw, str):
        try:
            raw = json.loads(raw)
        except ValueError:
            return None
    try:
        vec = np.asarray(raw, dtype=float).ravel()
    except (TypeError, ValueError):
        return None
    if vec.size == 4:
        vec = vec[1:] / vec[0] if vec[0] else vec[1:]
    if vec.size != 3 or not np.isfinite(vec).all():
        return None
    return vec


#: Most sampled states drawn per candidate on the sphere.
MAX_SPHERE_POINTS = 2000


def _sphere_disc(ax, h_label, v_label, depth_label):
    from matplotlib.patches import Circle, Ellipse

    ax.set_aspect("equal")
    ax.set_xlim(-1.2, 1.2)
    ax.set_ylim(-1.2, 1.2)
    ax.set_axis_off()
    ax.add_patch(
        Circle((0, 0), 1.0, facecolor="#f4f1ea", edgecolor="#6b665d", linewidth=0.9, zorder=0)
    )
    for z in (-0.5, 0.5):  # circles of latitude around the viewing axis, seen face on
        ax.add_patch(
            Circle(
                (0, 0),
                np.sqrt(1 - z * z),
                fill=False,
                edgecolor="#d3ccbd",
                linewidth=0.6,
                linestyle=":",
                zorder=0,
            )
        )
    for w in (0.5,):  # great circles through the viewing axis, seen edge on as ellipses
        ax.add_patch(
            Ellipse(
                (0, 0),
                2 * w,
                2,
                fill=False,
                edgecolor="#d3ccbd",
                linewidth=0.6,
                linestyle=":",
                zorder=0,
            )
        )
        ax.add_patch(
            Ellipse(
                (0, 0),
                2,
                2 * w,
                fill=False,
                edgecolor="#d3ccbd",
                linewidth=0.6,
                linestyle=":",
                zorder=0,
            )
        )
    ax.plot([-1, 1], [0, 0], color="#c9c1b0", linewidth=0.6, zorder=0)
    ax.plot([0, 0], [-1, 1], color="#c9c1b0", linewidth=0.6, zorder=0)
    ax.text(
        1.11, 0, f"+{h_label}", ha="left", va="center", fontsize=7.5, color="#4a463f", clip_on=False
    )
    ax.text(
        0.06,
        1.11,
        f"+{v_label}",
        ha="left",
        va="bottom",
        fontsize=7.5,
        color="#4a463f",
        clip_on=False,
    )
    ax.text(
        -1.18,
        -1.18,
        f"seen from +{depth_label}",
        ha="left",
        va="bottom",
        fontsize=7,
        color="#8a857c",
        style="italic",
    )


def _goal_cos_limit(grid, goal):
    """cos of the angular radius on the sphere inside which a pure state meets the goal at
    one wavelength, or None when the metric is not one of the known three.

    Notes
    -----
    With fidelity f = (1 + s·g)/2 (common practice): fidelity ≥ m  ⇔  s·g ≥ 2m − 1;
    extinction R = f/(1 − f) ≥ 10^(m/10)  ⇔  f ≥ R/(1 + R); for a circular goal the axial
    ratio b/a = |tan χ| with s3 = sin 2χ = 2 tan χ/(1 + tan² χ), so b/a ≥ m  ⇔
    s·g ≥ 2m/(1 + m²).
    """
    m = _goal_limit(grid)
    metric = str(grid.attrs.get("goal_metric", "")).lower()
    if m is None:
        return None
    if metric == "sphere_angle_deg":  # the states within Θ of the goal: s·g >= cos Θ
        cos = float(np.cos(np.radians(m)))
    elif metric == "fidelity":
        cos = 2 * m - 1
    elif metric in ("extinction_db", "extinction"):
        r = 10.0 ** (m / 10)
        cos = 2 * r / (1 + r) - 1
    elif metric == "axial_ratio" and goal is not None and abs(goal[2]) > 0.999:
        cos = 2 * m / (1 + m * m)
    else:
        return None
    return float(cos) if -1 < cos < 1 else None


def _tangent_basis(centre):
    """(u, v, labels) spanning the plane tangent to the sphere at unit vector ``centre``."""
    g = np.asarray(centre, dtype=float)
    g = g / (np.linalg.norm(g) or 1.0)
    if abs(g[2]) > 0.999:  # a pole: the s1-s2 plane itself
        return np.array([1.0, 0, 0]), np.array([0, 1.0, 0]), ("s1", "s2")
    u = np.array([-g[1], g[0], 0.0])
    u /= np.linalg.norm(u)
    v = np.cross(g, u)
    if abs(g[2]) < 1e-9 and abs(abs(u[1]) - 1) < 1e-9:
        return u * np.sign(u[1]), v, ("s2", "s3")
    if abs(g[2]) < 1e-9 and abs(abs(u[0]) - 1) < 1e-9:
        return u * np.sign(u[0]), v, ("s1", "s3")
    return u, v, ("along the equator", "toward +s3")


def _compact_ticks(axis, n=4):
    """At most ``n`` + 1 ticks on a matplotlib axis, labelled compactly (e.g. 0.002, -1e-05)."""
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    axis.set_major_locator(MaxNLocator(n))
    axis.set_major_formatter(FuncFormatter(_compact_number))


def _compact_number(value, _pos=None) -> str:
    if abs(value) < 1e-12:
        return "0"
    return f"{value:.2g}".replace("e-0", "e-").replace("e+0", "e")


def _zoom_panel(ax, grid, c, st, nominal, goal, colour):
    """The sampled states projected on the plane tangent at the goal, autoscaled to them."""
    centre = goal
    if centre is None:
        mean = st.mean(axis=0) if st.size else np.array([0.0, 0.0, 1.0])
        centre = mean / (np.linalg.norm(mean) or 1.0)
    u, v, (lu, lv) = _tangent_basis(centre)
    near = st @ centre > 0
    x, y = st[near] @ u, st[near] @ v
    ax.set_aspect("equal", adjustable="box")
    ax.tick_params(labelsize=6.5)
    ax.set_xlabel(lu, fontsize=7.5, labelpad=1)
    ax.set_ylabel(lv, fontsize=7.5, labelpad=1)
    if not x.size:
        _empty(ax, "no sample within 90°\nof the goal")
        return
    ax.scatter(x, y, s=6, color=colour, alpha=0.5, linewidths=0, zorder=3)
    px, py = [0.0, *x], [0.0, *y]
    nom = None
    if nominal is not None and np.isfinite(nominal).all() and nominal @ centre > 0:
        nom = (float(nominal @ u), float(nominal @ v))
        px.append(nom[0])
        py.append(nom[1])
    cos = _goal_cos_limit(grid, goal) if goal is not None else None
    if cos is not None:  # keep the goal's limit circle in view
        rad = float(np.sqrt(max(1 - cos * cos, 0.0)))
        px += [-rad, rad]
        py += [-rad, rad]
    cx, cy = 0.5 * (min(px) + max(px)), 0.5 * (min(py) + max(py))
    half = 0.56 * max(max(px) - min(px), max(py) - min(py), 1e-7)
    ax.set_xlim(cx - half, cx + half)
    ax.set_ylim(cy - half, cy + half)
    if cos is not None:
        from matplotlib.patches import Circle

        ax.add_patch(
            Circle(
                (0, 0),
                np.sqrt(1 - cos * cos),
                fill=False,
                edgecolor=GOAL_INK,
                linewidth=0.8,
                linestyle=(0, (4, 2)),
                zorder=4,
            )
        )
    if nom is not None:
        ax.plot(
            *nom,
            marker="x",
            markersize=7,
            markeredgewidth=1.0,
            color=INK,
            linestyle="none",
            zorder=5,
        )
    if goal is not None:
        ax.plot(
            0,
            0,
            marker="*",
            markersize=11,
            markerfacecolor="none",
            markeredgecolor=GOAL_INK,
            markeredgewidth=0.8,
            linestyle="none",
            zorder=6,
        )
    _compact_ticks(ax.xaxis, 3)
    _compact_ticks(ax.yaxis, 3)
    ax.set_title(
        "zoom around the goal" if goal is not None else "zoom around the samples",
        fontsize=7.5,
        fontweight="normal",
        color="#4a463f",
        loc="center",
    )


def poincare_views(grid):
    """Sampled output states at the design wavelength on the Poincaré sphere, with a zoom.

    Left: the s1–s2 disc seen from +s3 (the right-circular pole in the middle); middle: the
    s2–s3 disc seen from +s1.  States on the near hemisphere are filled dots, on the far one
    open rings.  Right: the states on the goal's hemisphere projected on the plane tangent to
    the sphere at the goal (the s1–s2 plane for a circular goal), autoscaled to the samples,
    with the goal limit for a pure state at one wavelength as a dashed circle.  At most
    ``MAX_SPHERE_POINTS`` samples per candidate (evenly strided) are drawn; the goal state is
    a hollow star, the nominal plate's state a thin cross.

    Returns
    -------
    matplotlib.figure.Figure
        ``3 × n_candidates`` axes.
    """
    from matplotlib.lines import Line2D

    names = _names(grid)
    comps = (
        [str(s) for s in grid["stokes"].values] if "stokes" in grid.coords else ["s1", "s2", "s3"]
    )
    idx = {name: comps.index(name) for name in ("s1", "s2", "s3")}
    order = [idx["s1"], idx["s2"], idx["s3"]]
    views = (("s1", "s2", "s3"), ("s2", "s3", "s1"))
    # a goal over the spectrum is judged on the source-averaged (partly depolarized) state
    spectral = str(grid.attrs.get("goal_over", "band")) == "spectrum" and _has(
        grid, "spectral_stokes"
    )
    state_var = "spectral_stokes" if spectral else "design_stokes"
    any_goal = False
    any_limit = False
    with _style():
        fig = _figure(8.4, 0.5 + 2.75 * len(names))
        axes = fig.subplots(
            len(names), 3, squeeze=False, gridspec_kw={"width_ratios": [1, 1, 1.05]}
        )
        for r, c in enumerate(rank_order(grid)):
            col = _colour(c)
            goal = goal_stokes(grid, c)
            any_goal = any_goal or goal is not None
            st = np.asarray(grid[state_var].isel(candidate=c).values, dtype=float)
            st = st[np.isfinite(st).all(axis=1)]
            if st.shape[0] > MAX_SPHERE_POINTS:
                st = st[np.linspace(0, st.shape[0] - 1, MAX_SPHERE_POINTS).astype(int)]
            if not spectral:  # a pure state at one wavelength: on the sphere
                norm = np.linalg.norm(st, axis=1, keepdims=True)
                st = st / np.where(norm > 0, norm, 1.0)
            nominal = None
            if spectral and _has(grid, "nominal_stokes", "source_weight"):
                w = np.asarray(grid["source_weight"].values, dtype=float)
                ns = np.asarray(grid["nominal_stokes"].isel(candidate=c).values, dtype=float)
                nominal = (w[:, None] * ns).sum(axis=0) / (w.sum() or 1.0)
            elif _has(grid, "nominal_stokes", "design_wavelength"):
                wl = np.asarray(grid["wavelength"].values, dtype=float)
                k = int(np.argmin(np.abs(wl - float(grid["design_wavelength"].values[c]))))
                nominal = np.asarray(
                    grid["nominal_stokes"].isel(candidate=c, wavelength=k).values, dtype=float
                )
            for v, (h, vv, d) in enumerate(views):
                ax = axes[r, v]
                _sphere_disc(ax, h, vv, d)
                x, y, z = st[:, idx[h]], st[:, idx[vv]], st[:, idx[d]]
                near = z >= 0
                ax.scatter(
                    x[~near],
                    y[~near],
                    s=9,
                    facecolors="none",
                    edgecolors=col,
                    linewidths=0.5,
                    alpha=0.45,
                    zorder=2,
                )
                ax.scatter(x[near], y[near], s=7, color=col, alpha=0.55, linewidths=0, zorder=3)
                if nominal is not None:
                    ax.plot(
                        nominal[idx[h]],
                        nominal[idx[vv]],
                        marker="x",
                        markersize=7,
                        markeredgewidth=1.0,
                        color=INK,
                        linestyle="none",
                        zorder=5,
                    )
                if goal is not None:
                    g = {"s1": goal[0], "s2": goal[1], "s3": goal[2]}
                    ax.plot(
                        g[h],
                        g[vv],
                        marker="*",
                        markersize=12,
                        markerfacecolor="none",
                        markeredgecolor=GOAL_INK,
                        markeredgewidth=0.8,
                        linestyle="none",
                        alpha=1.0 if g[d] >= 0 else 0.5,
                        zorder=6,
                    )
                if v == 0:
                    _candidate_title(ax, grid, c)
            nominal_xyz = nominal[order] if nominal is not None else None
            _zoom_panel(axes[r, 2], grid, c, st[:, order], nominal_xyz, goal, col)
            any_limit = any_limit or (goal is not None and _goal_cos_limit(grid, goal) is not None)
        handles = [
            Line2D(
                [],
                [],
                marker="o",
                color="#555",
                linestyle="none",
                markersize=4,
                label="sample, near side",
            ),
            Line2D(
                [],
                [],
                marker="o",
                color="#555",
                markerfacecolor="none",
                linestyle="none",
                markersize=4,
                label="far side",
            ),
            Line2D([], [], marker="x", color=INK, linestyle="none", label="nominal plate"),
        ]
        if any_goal:
            handles.append(
                Line2D(
                    [],
                    [],
                    marker="*",
                    markerfacecolor="none",
                    markeredgecolor=GOAL_INK,
                    linestyle="none",
                    markersize=10,
                    label="goal state",
                )
            )
        if any_limit:
            handles.append(
                Line2D(
                    [],
                    [],
                    color=GOAL_INK,
                    linewidth=0.8,
                    linestyle=(0, (4, 2)),
                    label="goal limit, one wavelength",
                )
            )
        fig.legend(handles=handles, loc="outside upper center", ncols=len(handles))
        return _finish(fig)


def has_environment(grid) -> bool:
    """True if the grid holds a temperature or a tilt retardance-error map."""
    return (
        "retardance_error_temperature" in grid.variables
        or "retardance_error_tilt" in grid.variables
    )


def environment_maps(grid):
    """Retardance error vs temperature and vs tilt / plane-of-incidence azimuth.

    Top: one line per candidate of ``retardance_error_temperature``.  Below: per candidate a
    polar map of ``retardance_error_tilt`` (radius = angle of incidence, angle = azimuth from
    the fast axis) with its own colour bar and the ± ``acceptance_limit_waves`` contour.  Parts
    whose variables are absent are left out; with neither, one axes says so.

    Returns
    -------
    matplotlib.figure.Figure
        (1 if temperature) + (2 × n_candidates if tilt) axes, or 1 axes with a note.
    """
    from matplotlib.colors import TwoSlopeNorm

    names = _names(grid)
    has_t = "retardance_error_temperature" in grid.variables
    has_tilt = "retardance_error_tilt" in grid.variables
    limit = _attr_float(grid, "acceptance_limit_waves")
    with _style():
        if not (has_t or has_tilt):
            fig = _figure(7.6, 1.2)
            _empty(fig.subplots(), "no temperature or tilt maps in this grid")
            return _finish(fig)
        n = len(names)
        ncols = 3 if n >= 3 else 2
        nrows_polar = int(np.ceil(n / ncols)) if has_tilt else 0
        heights = ([2.4] if has_t else []) + [2.9] * nrows_polar
        fig = _figure(7.6, 0.4 + sum(heights))
        gs = fig.add_gridspec(len(heights), ncols, height_ratios=heights)
        row = 0
        if has_t:
            ax = fig.add_subplot(gs[0, :])
            temps = np.asarray(grid["temperature"].values, dtype=float)
            units = _units(grid, "retardance_error_temperature", "waves")
            t_curves, t_looks, t_names = [], [], []
            for c in rank_order(grid):
                err = np.asarray(
                    grid["retardance_error_temperature"].isel(candidate=c).values, dtype=float
                )
                t_curves.append(err)
                t_looks.append(_look(c))
                t_names.append(names[c])
                _curve(
                    ax,
                    temps,
                    err,
                    linewidth=1.7,
                    label=names[c],
                    markevery=max(1, temps.size // 8),
                    markersize=4,
                    **_look(c),
                )
            if limit is not None:
                for s in (-1, 1):
                    ax.axhline(
                        s * limit,
                        color=GOAL_INK,
                        linewidth=0.9,
                        linestyle=(0, (6, 2, 1, 2)),
                        label=f"± {limit:g} {units}" if s > 0 else None,
                    )
            ax.axhline(0, color="#8a857c", linewidth=0.7)
            t_nom = _attr_float(grid, "nominal_temperature_c")
            if t_nom is not None:
                ax.axvline(
                    t_nom,
                    color=INK,
                    linewidth=0.9,
                    linestyle=(0, (2, 2)),
                    label=f"nominal {t_nom:g} °C (spec)",
                )
            ax.set_xlabel(
                f"Plate temperature [{_units(grid, 'temperature', 'degC')}]".replace(
                    "[degC]", "[°C]"
                )
            )
            ax.set_ylabel(f"Retardance error [{units}]")
            ax.set_title("Retardance change with temperature at the design wavelength")
            _direct_labels(ax, temps, t_curves, t_names, t_looks)
            # outside the axes: on the plot it sat on the limit line and hid coinciding curves
            ax.legend(loc="upper left", bbox_to_anchor=(1.13, 1.0), fontsize=7)
            row = 1
        if has_tilt:
            tilt = np.asarray(grid["tilt"].values, dtype=float)
            az = np.asarray(grid["tilt_azimuth"].values, dtype=float)
            units = _units(grid, "retardance_error_tilt", "waves")
            every = np.asarray(grid["retardance_error_tilt"].values, dtype=float)
            # one colour scale shared by every candidate's map, so colours compare across maps
            span = float(np.nanmax(np.abs(every))) if np.isfinite(every).any() else 0.0
            span = span if span > 0 else 1e-6
            norm = TwoSlopeNorm(0.0, -span, span)
            for k, c in enumerate(rank_order(grid)):
                name = names[c]
                sub = gs[row + k // ncols, k % ncols].subgridspec(
                    2, 1, height_ratios=[1, 0.06], hspace=0.05
                )
                ax = fig.add_subplot(sub[0], projection="polar")
                cax = fig.add_subplot(sub[1])
                err = np.asarray(
                    grid["retardance_error_tilt"]
                    .isel(candidate=c)
                    .transpose("tilt", "tilt_azimuth")
                    .values,
                    dtype=float,
                )
                th = np.radians(np.append(az, az[0] + 360.0)) if az.size > 1 else np.radians(az)
                e = np.concatenate([err, err[:, :1]], axis=1) if az.size > 1 else err
                if tilt.size > 1 and th.size > 1:
                    mesh = ax.pcolormesh(
                        th, tilt, e, cmap="PuOr_r", norm=norm, shading="gouraud", rasterized=True
                    )
                    if limit is not None and span > limit:
                        ax.contour(
                            th,
                            tilt,
                            e,
                            levels=[-limit, limit],
                            colors=[INK],
                            linewidths=0.9,
                            linestyles=["--", "-"],
                        )
                else:
                    mesh = ax.scatter(
                        th.repeat(tilt.size) if th.size else th,
                        np.tile(tilt, max(th.size, 1)),
                        c=e.T.ravel(),
                        cmap="PuOr_r",
                        norm=norm,
                    )
                ax.set_ylim(0, float(tilt.max()) if tilt.size else 1.0)
                ax.set_title(name, color=_colour(c), loc="center", fontsize=8.5, pad=10)
                ax.tick_params(labelsize=6.5)
                if tilt.size and tilt.max() > 0:
                    ax.set_rticks(np.round([tilt.max() / 2, tilt.max()], 1))
                ax.set_rlabel_position(112.5)
                ax.grid(color="#ffffff", alpha=0.6, linestyle="-", linewidth=0.5)
                cb = fig.colorbar(mesh, cax=cax, orientation="horizontal")
                _compact_ticks(cb.ax.xaxis, 4)
                cb.ax.tick_params(labelsize=6.5)
                cb.ax.xaxis.get_offset_text().set_fontsize(6.5)
                cb.set_label(f"retardance error [{units}]", fontsize=7)
            tu = _units(grid, "tilt", "deg").replace("deg", "°")
            fig.supxlabel(
                _wrap(
                    f"Polar maps (one shared colour scale): radius = angle of incidence [{tu}], "
                    "angle = azimuth of the plane of incidence from the fast axis; contours: "
                    + (
                        f"solid +{limit:g}, dashed −{limit:g} {units} (the acceptance limit)"
                        if limit is not None
                        else "none"
                    ),
                    110,
                ),
                fontsize=7.5,
                color="#4a463f",
            )
            for k in range(n, nrows_polar * ncols):  # empty cells of the last row
                fig.add_subplot(gs[row + k // ncols, k % ncols]).set_axis_off()
        return _finish(fig)


# ----------------------------------------------------------------------------- saving

#: Figure registry: each entry draws one figure (payload), its caption is the help text and
#: ``requires`` names the variables it cannot do without; the report shows them in this order.
FIGURES = Registry("figure")

FIGURES.add(
    "metric_bands",
    "Goal metric across the band: nominal plate, median, "
    "5–95 % and 1–99 % of the Monte Carlo samples, goal threshold, and the "
    "source spectrum behind.",
    payload=metric_bands,
    requires=("nominal_metric",),
)

FIGURES.add(
    "p05_overlay",
    "5th-percentile goal metric of every candidate; the shaded area is below the goal.",
    payload=p05_overlay,
    requires=("metric_quantile",),
)

FIGURES.add(
    "retardance_bands",
    "Retardance across the band: nominal plate and 5–95 % of samples, with the target retardance.",
    payload=retardance_bands,
    requires=("nominal_retardance",),
)

FIGURES.add(
    "yield",
    "Yield (fraction of sampled builds meeting the goal) with its confidence interval.",
    payload=yield_chart,
    requires=("yield",),
)

FIGURES.add(
    "sensitivity",
    "Yield with each tolerance alone and with all but it; "
    "the top row is the tolerance whose removal helps most.",
    payload=sensitivity_chart,
    requires=("yield",),
)

FIGURES.add(
    "variance_sensitivity",
    "First- and total-order Sobol' indices of pass/fail for each tolerance (filled: the share "
    "of the variance it explains alone; open: its share with interactions), with bootstrap "
    "limits.",
    payload=sobol_chart,
    requires=("sobol_pass_total", "sobol_total"),
)

FIGURES.add(
    "poincare",
    "Sampled output states (at the design wavelength; for a goal over the spectrum, the "
    "source-averaged state, inside the sphere where depolarized) on two "
    "orthographic views of the Poincaré sphere, and (right) a zoom on the plane tangent "
    "to the sphere at the goal state, scaled to the spread of the samples; the dashed "
    "circle there is where a pure state at one wavelength just meets the goal.",
    payload=poincare_views,
    requires=("design_stokes",),
)

FIGURES.add(
    "environment",
    "Retardance change of the error-free plate at the design wavelength vs plate "
    "temperature (from its value at the materials' reference temperature, where the plates "
    "are cut) and vs angle of incidence and its azimuth from the fast axis (from normal "
    "incidence); the dotted vertical line marks the spec's nominal temperature.",
    payload=environment_maps,
    requires=(),
)


def check_formats(formats) -> tuple[str, ...]:
    """Normalise figure formats (case-insensitive); unknown -> RetolError naming --format."""
    if isinstance(formats, str):
        formats = (formats,)
    out = []
    for f in formats or ("png",):
        f = str(f).strip().lower().lstrip(".")
        if f not in FORMATS:
            raise RetolError(
                "--format", f"unknown figure format {f!r}", f"use one of {', '.join(FORMATS)}"
            )
        if f not in out:
            out.append(f)
    return tuple(out)


#: Variables each figure cannot do without (read from the registry).
REQUIRES = {n: e.extra["requires"] for n, e in FIGURES.items()}


def figure_names(grid) -> list[str]:
    """The figures that apply to ``grid``: those whose variables it holds (the environment
    figure only with a temperature or tilt map)."""
    return [
        n
        for n in FIGURES
        if _has(grid, *REQUIRES[n]) and (n != "environment" or has_environment(grid))
    ]


def render(fig, target, fmt: str, dpi: int = 130):
    """Save ``fig`` to a path or binary file object in format ``fmt``, in our style."""
    with _style():
        fig.savefig(target, format=fmt, dpi=dpi)


def save_figures(grid, folder, formats=("png",)) -> dict[str, list[Path]]:
    """Write every figure that applies to ``grid`` into ``folder``.

    Parameters
    ----------
    grid : xarray.Dataset
        Results grid.
    folder : str or Path
        Destination folder, created if missing.
    formats : sequence of str
        Any of "png", "svg", "pdf".

    Returns
    -------
    dict
        Figure name -> list of written paths (one per format).

    Raises
    ------
    RetolError
        For an unknown format (field "--format").
    """
    formats = check_formats(formats)
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written: dict[str, list[Path]] = {}
    for name in figure_names(grid):
        fig = FIGURES[name].payload(grid)
        written[name] = []
        for fmt in formats:
            path = folder / f"{name}.{fmt}"
            render(fig, path, fmt)
            written[name].append(path)
        del fig
    return written


def yield_vs_width_figure(allocation):
    """Yield versus width of each varied tolerance alone, the others as given (the points the
    allocation evaluated, on common random numbers), with the target and the answer marked.

    Not a registered figure: it is drawn from a :class:`tolerance.allocation.Allocation`, not a
    results grid.
    """
    keys = list(allocation.vary)
    n = max(1, len(keys))
    with _style():
        fig = _figure(3.2 * min(n, 3), 2.6 * math.ceil(n / 3))
        axes = fig.subplots(math.ceil(n / 3), min(n, 3), squeeze=False).ravel()
        for ax, key in zip(axes, keys, strict=False):
            right = 0.0
            for i, ca in enumerate(allocation.candidates):
                a = ca.alone.get(key)
                if a is None or not a.curve:
                    continue
                w, y = np.array(a.curve).T
                ax.plot(w, y, "-o", ms=3, lw=1.0, color=_colour(i), label=ca.name)
                if a.width is not None:
                    ax.axvline(a.width, color=_colour(i), lw=0.8, ls=":")
                    # the search probes out to the physical bound: show the answer's
                    # neighbourhood, not the bound (the points beyond stay in the data)
                    right = max(right, 3.0 * a.width)
                else:
                    right = max(right, float(np.max(w)))
            ax.axhline(allocation.target_yield, color="0.4", lw=0.8, ls="--")
            if right > 0:
                ax.set_xlim(0.0, right)
            ax.set_xlabel(key)
            ax.set_ylabel("yield")
            ax.set_ylim(-0.02, 1.02)
        for ax in axes[len(keys) :]:
            ax.set_visible(False)
        if allocation.candidates:
            axes[0].legend(fontsize="small")
        return _finish(fig)
