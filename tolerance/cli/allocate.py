"""``retol allocate``: the tolerance widths that reach a yield target, and at what cost."""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import click

from .common import _clean, echo_json, table, user_errors
from .sweep import cluster_options

#: What an allocation writes into its output folder; nothing else there is touched.
OUTPUTS = ("allocation.json", "drawing.csv", "yield_vs_width.png", "allocation.html")


def _check_out(out: Path, force: bool) -> Path:
    from ..errors import RetolError

    if out.exists() and not out.is_dir():
        raise RetolError("--out", f"{str(out)!r} is a file", "give a folder")
    held = [n for n in OUTPUTS if (out / n).exists()]
    if held and not force:
        raise RetolError(
            "--out",
            f"{str(out)!r} already holds {', '.join(held)}",
            "pass --force to replace them, or choose another --out",
        )
    return out


def write_outputs(result, study, doc: dict, rows: list[dict], out: Path) -> None:
    """Write allocation.json, drawing.csv, the figure and allocation.html into a temporary
    folder, then move them into ``out`` (each an atomic replace)."""
    import json
    import os

    from ..allocation import write_drawing_csv
    from ..allocation_report import allocation_html
    from ..plots import yield_vs_width_figure

    parent = out.resolve().parent
    parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.allocate-", dir=parent))
    try:
        text = json.dumps(_clean(doc), indent=2, allow_nan=False)
        (tmp / "allocation.json").write_text(text + "\n")
        write_drawing_csv(rows, tmp / "drawing.csv")
        fig = yield_vs_width_figure(result)
        fig.savefig(tmp / "yield_vs_width.png", dpi=120)
        png = (tmp / "yield_vs_width.png").read_bytes()
        page = allocation_html(doc, rows, png, study.title or "Tolerance allocation")
        (tmp / "allocation.html").write_text(page, encoding="utf-8")
        out.mkdir(parents=True, exist_ok=True)
        for name in OUTPUTS:
            os.replace(tmp / name, out / name)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


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
        try:
            write_outputs(result, study, doc, rows, out)
        except OSError as exc:
            raise RetolError(
                "--out",
                f"cannot write into {str(out)!r} ({exc.strerror or exc})",
                "choose another folder",
            ) from None
    if as_json:
        echo_json(doc)
    else:
        _print(doc, rows)
        if out is not None:
            click.echo(
                f"\nwrote {out / 'allocation.json'}, drawing.csv, yield_vs_width.png and "
                "allocation.html"
            )
