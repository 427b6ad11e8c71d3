"""``retol allocate``: the tolerance widths that reach a yield target, and at what cost."""

from __future__ import annotations

from pathlib import Path

import click

from .common import _clean, echo_json, table, user_errors
from .sweep import cluster_options


def _check_out(out: Path, force: bool) -> Path:
    """Refuse, before the work, a folder that holds an earlier allocation (without --force)."""
    from ..publish import ALLOCATE_FILES, check_target, only

    return check_target(out, force, only(ALLOCATE_FILES))


def write_outputs(result, study, doc: dict, rows: list[dict], out: Path, force=False) -> Path:
    """Publish allocation.json, drawing.csv, the figure and allocation.html into ``out``, all
    or nothing (:func:`tolerance.publish.write_files`); other files in ``out`` stay."""
    import json

    from ..allocation import write_drawing_csv
    from ..allocation_report import allocation_html
    from ..plots import yield_vs_width_figure
    from ..publish import write_files

    text = json.dumps(_clean(doc), indent=2, allow_nan=False) + "\n"
    fig = yield_vs_width_figure(result)
    png = {}

    def figure(path):
        fig.savefig(path, dpi=120)
        png["bytes"] = path.read_bytes()

    def page(path):
        html = allocation_html(doc, rows, png["bytes"], study.title or "Tolerance allocation")
        path.write_text(html, encoding="utf-8")

    return write_files(
        out,
        {
            "allocation.json": lambda p: p.write_text(text),
            "drawing.csv": lambda p: write_drawing_csv(rows, p),
            "yield_vs_width.png": figure,
            "allocation.html": page,
        },
        force=force,
    )


def _print(doc: dict, rows: list[dict]) -> None:
    click.echo(
        f"target yield {doc['target_yield']:g}; {doc['samples']} samples, seed {doc['seed']}"
    )
    for c in doc["candidates"]:
        click.echo(f"\n{c['name']}")
        body = []
        for k, a in c["alone"].items():
            if a is None:
                body.append([k, "-", "-", "-", c["alone_reasons"][k]["reason"]])
            else:
                body.append(
                    [
                        k,
                        f"{a['width']:.4g} ({a['form']})",
                        f"{a['width_low']:.4g} .. {a['width_high']:.4g}",
                        f"{a['yield']:.4f} [{a['yield_low']:.4f}, {a['yield_high']:.4f}]",
                        "",
                    ]
                )
        click.echo(table(body, ["alone", "loosest width", "width range", "yield [CI]", "note"]))
        b = c["balanced"]
        ws = ", ".join(f"{k} {w:.4g}" for k, w in b["widths"].items())
        click.echo(
            f"balanced: scale {b['scale']:.4g} [{b['scale_low']:.4g}, {b['scale_high']:.4g}]: "
            f"{ws}; yield {b['yield']:.4f} [{b['yield_low']:.4f}, {b['yield_high']:.4f}]"
        )
        ch = c["cheapest"]
        if ch is not None:
            ws = ", ".join(f"{k} {w:g}" for k, w in ch["widths"].items())
            click.echo(
                f"cheapest: cost {ch['cost']:g}: {ws}; yield {ch['yield']:.4f} "
                f"[{ch['yield_low']:.4f}, {ch['yield_high']:.4f}] "
                f"({ch['evaluations']} of {ch['combinations']} combinations evaluated)"
            )
            for alt in ch["alternatives"]:
                ws = ", ".join(f"{k} {w:g}" for k, w in alt["widths"].items())
                click.echo(f"  next: cost {alt['cost']:g}: {ws}; yield {alt['yield']:.4f}")


@click.command()
@click.argument("spec_file", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "--target-yield",
    "target_yield",
    type=float,
    help="Yield to reach, in (0, 1) [default: [allocation] target_yield, else 0.99].",
)
@click.option(
    "--vary",
    help="Tolerance keys to vary, comma-separated [default: all the spec gives].",
)
@click.option("--candidate", "candidates", multiple=True, help="Candidate name (repeatable).")
@click.option("--samples", type=int, help="Monte Carlo samples (overrides [run] samples).")
@click.option("--seed", type=int, help="Random seed (overrides [run] seed).")
@click.option(
    "--out",
    type=click.Path(path_type=Path),
    help="Write allocation.json, drawing.csv, yield_vs_width.png and allocation.html here.",
)
@click.option("--force", is_flag=True, help="Replace those files if the folder holds them.")
@cluster_options
@click.option("--json", "as_json", is_flag=True, help="Print JSON for scripts.")
@user_errors
def allocate(
    spec_file,
    target_yield,
    vary,
    candidates,
    samples,
    seed,
    out,
    force,
    workers,
    scheduler,
    as_json,
):
    """Allocate SPEC_FILE's tolerances to a yield target: alone, balanced and cheapest."""
    from ..allocation import allocate as run_allocation
    from ..allocation import check_target, drawing_rows_for_allocation, to_json
    from ..errors import RetolError
    from ..spec import load_spec

    if target_yield is not None:
        check_target(target_yield)
    names = None
    if vary is not None:
        names = [v.strip() for v in vary.split(",")]
        if not all(names):
            raise RetolError(
                "--vary", f"has an empty name in {vary!r}", "e.g. --vary clocking_deg,tilt_deg"
            )
    if out is not None:
        _check_out(out, force)
    from ..cluster import check_options, client

    check_options(workers, scheduler)
    study = load_spec(spec_file)
    with client(workers, scheduler) as c:
        result = run_allocation(
            study, target_yield, names, list(candidates) or None, samples, seed, client=c
        )
    doc = to_json(result, study)
    rows = drawing_rows_for_allocation(result, study)
    doc["drawing"] = rows
    if out is not None:
        out = write_outputs(result, study, doc, rows, out, force=force)
    if as_json:
        echo_json(doc)
    else:
        _print(doc, rows)
        if out is not None:
            click.echo(
                f"\nwrote {out / 'allocation.json'}, drawing.csv, yield_vs_width.png and "
                "allocation.html"
            )
