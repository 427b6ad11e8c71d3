"""``retol design``: choose a candidate's thicknesses, angles, materials or order for a spec."""

from __future__ import annotations

import json
from pathlib import Path

import click

from .common import echo_json, table, user_errors
from .sweep import cluster_options

#: What ``--out`` receives; nothing else in the folder is touched.
OUTPUTS = ("design.json", "candidate.toml")


def parse_free_option(text):
    """``KEY[,KEY...]``, each optionally ``KEY=LOW:HIGH`` -> (keys, bounds)."""
    from ..errors import RetolError

    if text is None:
        return None, {}
    keys, bounds = [], {}
    for part in text.split(","):
        part = part.strip()
        if not part:
            raise RetolError("--free", f"{text!r} has an empty key", "e.g. --free thickness_1")
        if "=" in part:
            key, _, rng = part.partition("=")
            try:
                lo, hi = (float(x) for x in rng.split(":"))
            except ValueError:
                raise RetolError(
                    "--free", f"cannot read the bounds {rng!r} of {key!r}", "write KEY=LOW:HIGH"
                ) from None
            if not (lo == lo and hi == hi) or lo >= hi or abs(lo) == float("inf"):
                raise RetolError("--free", f"bounds of {key!r} must be finite, LOW < HIGH", "")
            bounds[key.strip()] = (lo, hi)
            part = key.strip()
        keys.append(part)
    return keys, bounds


def _folder(out: Path, force: bool) -> Path:
    from ..errors import RetolError

    if out.exists() and not out.is_dir():
        raise RetolError("--out", f"{str(out)!r} is a file", "give a folder")
    held = [n for n in OUTPUTS if (out / n).exists()]
    if held and not force:
        raise RetolError(
            "--out",
            f"{str(out)!r} already holds a design ({', '.join(held)})",
            "pass --force to replace it, or choose another --out",
        )
    return out.resolve()


def _write(d, folder: Path):
    """design.json and candidate.toml, published all or nothing (see tolerance.publish)."""
    from ..publish import RUN, Output, write_error
    from .common import _clean

    with Output(folder, force=True, replaces=RUN) as target:
        try:
            (target.part / "design.json").write_text(
                json.dumps(_clean(d.to_dict()), indent=2, allow_nan=False) + "\n"
            )
            (target.part / "candidate.toml").write_text(d.toml)
        except OSError as exc:
            raise write_error(exc, "--out", f"cannot write the design into {folder}") from None
        target.publish()


def _show(v) -> str:
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)


def _print(d):
    unit = "" if d.objective == "yield" else " [waves]"
    click.echo(f"candidate {d.candidate!r}: objective {d.objective}{unit}")
    keys = list(dict.fromkeys([*d.start_parameters, *d.best_parameters]))
    rows = [
        [k, _show(d.start_parameters.get(k, "-")), _show(d.best_parameters.get(k, "-"))]
        for k in keys
    ]
    rows.append(["objective", _show(d.start_value), _show(d.best_value)])
    click.echo(table(rows, ["parameter", "start", "best"]))
    click.echo(f"yield of the best design: {d.yield_:.4f} [{d.yield_low:.4f}, {d.yield_high:.4f}]")
    click.echo(f"plate: {d.plate.describe()}")
    click.echo(f"search: {d.method}")
    click.echo("\npaste into the spec:\n")
    click.echo(d.toml)


@click.command()
@click.argument("spec_file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--candidate", "candidate", required=True, help="The candidate to design.")
@click.option(
    "--objective",
    type=click.Choice(["yield", "band-error", "spectrum-error"]),
    default="yield",
    show_default=True,
    help="Monte Carlo yield, or the nominal worst (band) or source-weighted (spectrum) "
    "retardance error over the band, temperature range and tilt.",
)
@click.option(
    "--free",
    "free",
    help="Free parameters KEY[,KEY...], each optionally KEY=LOW:HIGH in its unit "
    "[default: the construction's natural ones].",
)
@click.option("--samples", type=int, help="Monte Carlo samples (overrides [run] samples).")
@click.option("--seed", type=int, help="Random seed (overrides [run] seed).")
@click.option(
    "--out", type=click.Path(path_type=Path), help="Write design.json and candidate.toml here."
)
@click.option("--force", is_flag=True, help="Replace a design already in --out.")
@cluster_options
@click.option("--json", "as_json", is_flag=True, help="Print JSON for scripts.")
@user_errors
def design(
    spec_file, candidate, objective, free, samples, seed, out, force, workers, scheduler, as_json
):
    """Design SPEC_FILE's candidate: thicknesses, plate angles, materials or order."""
    import sys

    from ..cluster import check_options, client
    from ..design import design as run_design
    from ..spec import load_spec

    keys, bounds = parse_free_option(free)
    check_options(workers, scheduler)
    spec = load_spec(spec_file)
    folder = _folder(out, force) if out is not None else None

    def progress(line):
        if not as_json and sys.stderr.isatty():
            click.echo(line, err=True)

    from ..errors import RetolError

    try:
        with client(workers, scheduler) as c:
            d = run_design(
                spec,
                candidate,
                objective=objective,
                free=keys,
                samples=samples,
                seed=seed,
                bounds=bounds,
                progress=progress,
                client=c,
            )
    except RetolError as exc:
        if exc.field.startswith("bounds."):  # bounds come in through --free KEY=LOW:HIGH
            key = exc.field.split(".", 1)[1]
            raise RetolError(f"--free {key}", exc.problem, exc.fix) from None
        raise
    if folder is not None:
        _write(d, folder)
    if as_json:
        echo_json(d.to_dict())
    else:
        _print(d)
        if folder is not None:
            click.echo(f"wrote {folder / 'design.json'} and {folder / 'candidate.toml'}")
    if not d.met:
        click.echo(
            "retol: warning: the best design found does not meet the goal "
            f"({spec.goal.metric} {'<=' if spec.goal.sense == 'max' else '>='} {spec.goal.limit:g}"
            + (", yield 0" if d.yield_ == 0 else "")
            + "); it is reported above",
            err=True,
        )
