"""``retol sweep``: one spec run at every combination of a few changed values."""

from __future__ import annotations

import shlex
import sys
from pathlib import Path

import click

from .common import echo_json, table, user_errors


def cluster_options(func):
    """``--workers`` / ``--scheduler``: run on a dask cluster (shared by run and sweep)."""
    func = click.option(
        "--scheduler",
        metavar="ADDRESS",
        help="Run on an existing dask cluster, e.g. tcp://10.0.0.5:8786 (needs the [cluster] "
        "extra).",
    )(func)
    return click.option(
        "--workers",
        type=int,
        help="Start a local dask cluster of N worker processes (needs the [cluster] extra).",
    )(func)


def _figure(ds, axes, path: Path) -> None:
    """Yield against each swept key, one line per candidate (other keys at their first value)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from ..plots import STYLE

    with plt.rc_context(STYLE):
        fig, axs = plt.subplots(1, len(axes), figsize=(4.2 * len(axes), 3.4), squeeze=False)
        markers = "osD^v<>p"
        for ax, a in zip(axs[0], axes, strict=True):
            sel = {b.key: ds[b.key].values[0] for b in axes if b.key != a.key}
            sub = ds.sel(sel) if sel else ds
            x = np.arange(sub.sizes[a.key])
            for i, c in enumerate(sub["candidate"].values):
                y = 100 * sub["yield"].sel(candidate=c).values
                lo = 100 * sub["yield_low"].sel(candidate=c).values
                hi = 100 * sub["yield_high"].sel(candidate=c).values
                ax.errorbar(
                    x,
                    y,
                    yerr=[y - lo, hi - y],
                    marker=markers[i % len(markers)],
                    capsize=3,
                    label=str(c),
                )
            ax.set_xticks(x, [str(v) for v in sub[a.key].values], rotation=30)
            ax.set_xlabel(a.key)
            ax.set_ylabel("yield [%]")
            if sel:
                ax.set_title(", ".join(f"{k} = {v}" for k, v in sel.items()), fontsize=8)
        axs[0][0].legend(fontsize=7)
        fig.tight_layout()
        fig.savefig(path, dpi=120)
        plt.close(fig)


def _html(ds, rows, axes, command: str) -> str:
    from html import escape

    head = ["point", *[c for c in ds["candidate"].values]]
    body = []
    for r in rows:
        label = ", ".join(f"{k} = {v}" for k, v in r["set"].items())
        cells = "".join(
            f"<td>{100 * c['yield']:.2f} % ({100 * c['yield_low']:.2f}–{100 * c['yield_high']:.2f})"
            f"</td>"
            for c in r["candidates"]
        )
        body.append(f"<tr><td>{escape(label)}</td>{cells}</tr>")
    th = "".join(f"<th>{escape(str(h))}</th>" for h in head)
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8"><title>'
        f"{escape(ds.attrs['title'])} — sweep</title></head><body>"
        f"<h1>{escape(ds.attrs['title'])}: sweep of {escape(ds.attrs['swept'])}</h1>"
        f"<p>Yield with its {100 * 0.95:.0f} % interval at every point; every point uses the same "
        f"seed ({ds.attrs['seed']}) and {ds.attrs['samples']:,} samples, so differences between "
        "points are not sampling noise.</p>"
        f'<img src="sweep.png" alt="yield against each swept value" style="max-width:100%">'
        f"<table><tr>{th}</tr>{''.join(body)}</table>"
        f"<p><b>Safety.</b> {escape(ds.attrs['laser_caution'])}</p>"
        f"<p>Reproduce: <code>{escape(command)}</code></p></body></html>\n"
    )


@click.command()
@click.argument("spec_file", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "--set",
    "sets",
    multiple=True,
    required=True,
    metavar="KEY=V1,V2,...",
    help="A spec value to sweep, by its path: source.fwhm, tolerances.clocking_deg.uniform, "
    "goal.min, environment.temperature_range, candidate[NAME].thick_plate (repeatable; values "
    "take units; lists in brackets).",
)
@click.option("--samples", type=int, help="Monte Carlo samples per point.")
@click.option("--seed", type=int, help="Random seed (the same for every point).")
@click.option("--chunk-size", "chunk_size", type=int, help="Samples per chunk (memory bound).")
@click.option(
    "--out",
    type=click.Path(path_type=Path),
    help="Output folder [default: reports/<spec file stem>-sweep/].",
)
@click.option("--force", is_flag=True, help="Replace an existing output folder.")
@cluster_options
@click.option("--json", "as_json", is_flag=True, help="Print JSON for scripts.")
@user_errors
def sweep(spec_file, sets, samples, seed, chunk_size, out, force, workers, scheduler, as_json):
    """Run SPEC_FILE at every combination of the --set values; yield against each."""
    from ..cluster import check_options, client
    from ..grid import save_grid
    from ..publish import RUN, Output
    from ..spec import load_spec
    from ..sweep import parse_set, point_studies, run_sweep
    from .run import summary_rows

    axes = [parse_set(s) for s in sets]
    study = load_spec(spec_file)
    point_studies(study, axes)  # every point validates before any work
    check_options(workers, scheduler)
    folder = Path(out) if out else Path("reports") / f"{spec_file.stem}-sweep"
    command = " ".join(shlex.quote(a) for a in ["retol"] + sys.argv[1:])
    n_points = int(np.prod([len(a.values) for a in axes]))
    with Output(folder, force=force, replaces=RUN, command=command) as target:
        with client(workers, scheduler) as c:
            done = [0]

            def progress():
                done[0] += 1
                if not as_json and sys.stderr.isatty():
                    click.echo(f"\rpoint {done[0]}/{n_points}", err=True, nl=False)

            ds, rows = run_sweep(
                study,
                axes,
                samples,
                seed,
                chunk_size,
                client=c,
                progress=progress,
                rows=summary_rows,
            )
        if not as_json and sys.stderr.isatty():
            click.echo("", err=True)
        ds.attrs["command"] = command
        save_grid(ds, target.part / "sweep.nc")
        _figure(ds, axes, target.part / "sweep.png")
        (target.part / "sweep.html").write_text(_html(ds, rows, axes, command), encoding="utf-8")
        folder = target.publish()
    if as_json:
        echo_json({"points": rows, "output": str(folder)})
        return
    head = ["point", *[str(c) for c in ds["candidate"].values]]
    body = [
        [", ".join(f"{k}={v}" for k, v in r["set"].items())]
        + [f"{100 * c['yield']:.1f} %" for c in r["candidates"]]
        for r in rows
    ]
    click.echo(table(body, head))
    click.echo(f"\nwrote {folder / 'sweep.nc'}, sweep.png and sweep.html")


import numpy as np  # noqa: E402  (after the command, so that --help does not wait for it)
