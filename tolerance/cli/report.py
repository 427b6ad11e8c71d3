"""``retol report``: write the HTML report, summary table and figures of a saved results grid."""

from __future__ import annotations

import shlex
import sys
from pathlib import Path

import click

from .common import FIGURE_FORMAT, echo_json, json_option, user_errors


def load_grid(path):
    """Open a grid.nc written by ``retol run`` and load it into memory."""
    from ..errors import RetolError

    p = Path(path)
    if not p.is_file():
        raise RetolError("GRID", f"no such file: {p}", "give the grid.nc that retol run wrote")
    import xarray as xr

    try:
        with xr.open_dataset(p, engine="h5netcdf") as ds:
            return ds.load()
    except (OSError, ValueError) as exc:
        raise RetolError(
            "GRID",
            f"cannot read {p} as a results grid ({exc})",
            "give the grid.nc that retol run wrote",
        ) from None


@click.command()
@click.argument("grid_path", metavar="GRID.nc", type=click.Path(dir_okay=False))
@click.option(
    "--out",
    "out_dir",
    type=click.Path(file_okay=False),
    help="Folder for report.html, summary.csv and figures/ [default: the grid's folder].",
)
@click.option(
    "--format",
    "formats",
    multiple=True,
    type=FIGURE_FORMAT,
    help="Figure file format for figures/: png, svg or pdf (repeatable) [default: png]. "
    "The HTML always embeds PNG.",
)
@click.option("--force", is_flag=True, help="Replace a report already in the folder.")
@json_option
@user_errors
def report(grid_path, out_dir, formats, force, as_json):
    """Write the report of a saved results grid GRID.nc.

    Writes report.html (self-contained: open it in any browser, or print it), summary.csv (one
    row per candidate) and figures/.
    """
    from ..plots import check_formats
    from ..report import check_writable, write_report

    formats = check_formats(formats or ("png",))
    out = Path(out_dir) if out_dir else Path(grid_path).absolute().parent
    check_writable(out, force)
    grid = load_grid(grid_path)
    command = (
        "retol " + " ".join(shlex.quote(a) for a in sys.argv[1:])
        if Path(sys.argv[0]).name.startswith("retol")
        else None
    )
    from .run import figure_progress

    # figures take seconds each: show which one is being drawn (stderr, a terminal only)
    path = write_report(
        grid, out, formats=formats, force=force, command=command, progress=figure_progress()
    )
    files = {
        "report": str(path),
        "summary": str(path.parent / "summary.csv"),
        "figures": sorted(str(f) for f in (path.parent / "figures").iterdir()),
    }
    if as_json:
        echo_json(files)
    else:
        click.echo(f"wrote {files['report']}")
        click.echo(f"wrote {files['summary']}")
        click.echo(f"wrote {len(files['figures'])} figure files in {path.parent / 'figures'}")
