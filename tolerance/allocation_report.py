"""The HTML page of ``retol allocate --out``: the answers, the drawing table and the figure.

One self-contained file (``allocation.html``: inline CSS, the yield-versus-width figure as a
base64 PNG, no scripts or links), in the same style as the run report
(:mod:`tolerance.report`), whose drawing section it reuses.
"""

from __future__ import annotations

import html

from .report import _CSS, drawing_section

#: File name of the page inside ``--out``.
PAGE = "allocation.html"

_CAPTION = (
    "Yield versus width of each varied tolerance alone, the others as specified, on the same "
    "draws (the points the search evaluated; a point it decided early, once its failures "
    "already put the yield below the target, shows the yield of the samples it ran). Dashed: "
    "the target; dotted: the loosest width found; the axis ends at three times that width."
)


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _g(v, digits=4) -> str:
    return "—" if v is None else f"{v:.{digits}g}"


def _y(y, lo, hi) -> str:
    return "—" if y is None else f"{y:.4f} [{lo:.4f}, {hi:.4f}]"


def _table(head, rows) -> str:
    h = "".join(f"<th>{_e(c)}</th>" for c in head)
    b = "".join("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><thead><tr>{h}</tr></thead><tbody>{b}</tbody></table>"


def _candidate(c: dict) -> str:
    """One candidate's alone, balanced and cheapest answers (from the JSON document)."""
    out = [f"<h3>{_e(c['name'])}</h3>"]
    rows = []
    for k, a in c["alone"].items():
        if a is None:
            why = c.get("alone_reasons", {}).get(k, {}).get("reason", "")
            rows.append([k, "—", "—", "—", why])
        else:
            rows.append(
                [
                    k,
                    f"{a['width']:.4g} ({a['form']})",
                    f"{_g(a.get('width_low'))} – {_g(a.get('width_high'))}",
                    _y(a["yield"], a["yield_low"], a["yield_high"]),
                    "",
                ]
            )
    out.append(_table(["alone", "loosest width", "width range", "yield [interval]", "note"], rows))
    b = c["balanced"]
    out.append(
        "<p><b>Balanced:</b> one scale "
        f"{b['scale']:.4g} [{b['scale_low']:.4g}, {b['scale_high']:.4g}] on every varied width"
        f"{' (at the physical bound)' if b.get('at_bound') else ''}; yield "
        f"{_y(b['yield'], b['yield_low'], b['yield_high'])}.</p>"
    )
    out.append(
        _table(["tolerance", "balanced width"], [[k, f"{w:.4g}"] for k, w in b["widths"].items()])
    )
    ch = c["cheapest"]
    if ch is not None:
        combos = [("cheapest", ch)] + [("next", a) for a in ch.get("alternatives", [])]
        keys = list(ch["widths"])
        out.append(
            f"<p><b>Cheapest</b> ({ch.get('evaluations', '?')} of "
            f"{ch.get('combinations', '?')} combinations evaluated):</p>"
        )
        out.append(
            _table(
                ["", "cost", *keys, "yield [interval]"],
                [
                    [
                        label,
                        f"{x['cost']:g}",
                        *(f"{x['widths'][k]:g}" for k in keys),
                        _y(x["yield"], x["yield_low"], x["yield_high"]),
                    ]
                    for label, x in combos
                ],
            )
        )
    return "\n".join(out)


def allocation_html(doc: dict, rows: list[dict], figure_png: bytes | None, title: str) -> str:
    """The allocation page as one string.

    Parameters
    ----------
    doc : dict
        The ``retol allocate --json`` document (:func:`tolerance.allocation.to_json`).
    rows : list of dict
        The drawing table (:func:`tolerance.allocation.drawing_rows_for_allocation`).
    figure_png : bytes or None
        The yield-versus-width figure.
    title : str
        The study's title.
    """
    p = [
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)} — retol allocation</title><style>{_CSS}</style></head><body>",
        '<header><div class="kicker">Tolerance allocation</div>',
        f'<h1>{_e(title)}</h1><ul class="facts">',
        f"<li><b>Target yield:</b> {doc['target_yield']:g}</li>",
        f"<li><b>Samples:</b> {doc['samples']}</li>",
        f"<li><b>Seed:</b> {doc['seed']}</li>",
        f"<li><b>Varied:</b> {_e(', '.join(doc['vary']))}</li>",
        "</ul></header>",
        "<h2>Allocated widths</h2>",
        "<p>Widths in the form the spec uses (σ, half width, ± tolerance or range). Each yield "
        "carries its Wilson interval; a width range is where the yield near the answer reaches "
        "the ends of that interval (the Monte Carlo uncertainty of the width). The drawing "
        "table below shows the cheapest combination, else the balanced widths.</p>",
    ]
    p += [_candidate(c) for c in doc["candidates"]]
    # the drawing table is wide (a column per toleranced quantity): let it scroll on its own
    p.append(f'<div style="overflow-x:auto">{drawing_section(None, rows, None)}</div>')
    if figure_png is not None:
        import base64

        data = base64.b64encode(figure_png).decode("ascii")
        p.append(
            '<h3>Yield versus width</h3><figure id="fig-yield_vs_width">'
            f'<img src="data:image/png;base64,{data}" alt="{_e(_CAPTION)}">'
            f"<figcaption>{_e(_CAPTION)}</figcaption></figure>"
        )
    p.append("</body></html>\n")
    return "\n".join(p)
