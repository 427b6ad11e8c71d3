"""``retol run``: the Monte Carlo tolerance analysis of a spec file."""

from __future__ import annotations

import shlex
import shutil
import sys
import tempfile
from pathlib import Path

import click

from .common import echo_json, table, user_errors

#: What a run writes into its output folder; nothing else there is ever touched.
OUTPUTS = ("grid.nc", "summary.csv", "figures", "report.html")


def output_folder(out, spec_path: Path, force: bool) -> Path:
    """The run's output folder; refuse one that holds a result unless --force.

    Other files in the folder are left alone, with or without --force.
    """
    import os

    from ..errors import RetolError

    folder = Path(out) if out else Path("reports") / spec_path.stem
    if folder.exists() and not folder.is_dir():
        raise RetolError("--out", f"{str(folder)!r} is a file", "give a folder")
    if folder.is_dir() and not force:
        held = [name for name in OUTPUTS if (folder / name).exists()]
        if held:
            raise RetolError(
                "--out",
                f"{str(folder)!r} already holds results ({', '.join(held)})",
                "pass --force to replace them, or choose another --out",
            )
    probe = folder.resolve()
    while not probe.exists():
        probe = probe.parent
    if not probe.is_dir():
        raise RetolError("--out", f"{str(probe)!r} is a file, not a folder", "choose another --out")
    if not os.access(probe, os.W_OK | os.X_OK):
        raise RetolError("--out", f"cannot write into {str(probe)!r}", "choose a writable folder")
    return folder


def _umask() -> int:
    import os

    mask = os.umask(0)
    os.umask(mask)
    return mask


def publish(tmp: Path, folder: Path):
    """Move a finished temporary folder's outputs into place.

    A new folder arrives in one rename.  Into an existing folder each output is moved with an
    atomic replace (``report.html`` last), our outputs from an earlier run that this run did not
    make are removed, and every other file is left as it was.
    """
    import os

    mask = _umask()
    os.chmod(tmp, 0o777 & ~mask)
    for p in tmp.rglob("*"):
        os.chmod(p, (0o777 if p.is_dir() else 0o666) & ~mask)
    folder.parent.mkdir(parents=True, exist_ok=True)
    if not folder.exists():
        try:
            tmp.rename(folder)
            return
        except OSError:
            pass
    folder.mkdir(parents=True, exist_ok=True)
    made = {p.name for p in tmp.iterdir()}
    order = [n for n in OUTPUTS if n in made] + sorted(made - set(OUTPUTS))
    for name in order:
        src, dst = tmp / name, folder / name
        if src.is_dir():
            old = None
            if dst.exists():
                old = folder / f".{name}.old-{next(tempfile._get_candidate_names())}"
                dst.rename(old)
            src.rename(dst)
            if old is not None:
                shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(src, dst)
    for name in OUTPUTS:
        stale = folder / name
        if name not in made and stale.exists():
            if stale.is_dir():
                shutil.rmtree(stale, ignore_errors=True)
            else:
                stale.unlink()
    shutil.rmtree(tmp, ignore_errors=True)


def summary_rows(ds):
    """One dict per candidate: the JSON contract of ``retol run --json`` and more."""
    import numpy as np

    rows = []
    for c in ds["candidate"].values:
        th = ds["layer_thickness"].sel(candidate=c).values
        mats = ds["layer_material"].sel(candidate=c).values
        worst = ds["worst_metric"].sel(candidate=c).values
        rows.append(
            {
                "name": str(c),
                "construction": str(ds["construction"].sel(candidate=c).values),
                "layers": [
                    {"material": str(m), "thickness_um": float(t)}
                    for m, t in zip(mats, th, strict=True)
                    if str(m)
                ],
                "yield": float(ds["yield"].sel(candidate=c)),
                "yield_low": float(ds["yield_low"].sel(candidate=c)),
                "yield_high": float(ds["yield_high"].sel(candidate=c)),
                "nominal_worst": float(ds["nominal_worst"].sel(candidate=c)),
                "median_worst": float(np.quantile(worst, 0.5)),
                "p05_worst": float(np.quantile(worst, 0.05)),
                "nominal_pass": float(
                    ds[
                        "nominal_worst"
                        if ds.attrs["goal_over"] == "band"
                        else "nominal_spectral_metric"
                    ].sel(candidate=c)
                ),
                "median_pass": float(np.quantile(ds["pass_metric"].sel(candidate=c), 0.5)),
                "p05_pass": float(np.quantile(ds["pass_metric"].sel(candidate=c), 0.05)),
                "rank_yield": float(ds["rank_yield"].sel(candidate=c)),
                "dominant": str(ds["dominant"].sel(candidate=c).values),
                "nominal_dop": float(ds["nominal_dop"].sel(candidate=c)),
                "nominal_spectral_metric": float(ds["nominal_spectral_metric"].sel(candidate=c)),
                "temperature_coefficient_deg_per_k": float(
                    ds["temperature_coefficient"].sel(candidate=c)
                ),
                "acceptance_half_angle_deg": float(ds["acceptance_half_angle"].sel(candidate=c)),
                "rank": int(ds["rank"].sel(candidate=c)),
                "reason": str(ds["reason"].sel(candidate=c).values),
                **explain_row(ds, c),
            }
        )
    return rows


def explain_row(ds, c) -> dict:
    """The Sobol' indices (``sobol``, ``sobol_pass``: by spec tolerance key, the six numbers
    first/first_low/first_high/total/total_low/total_high, null where undefined), the variance
    dominant tolerance and the reject-rate estimate of candidate ``c``."""
    import math

    from ..tolerances import SHORT
    from ..variance import FIELDS

    def num(v):
        v = float(v)
        return v if math.isfinite(v) else None

    key_of = {v: k for k, v in SHORT.items()}
    out = {"sobol": {}, "sobol_pass": {}}
    if "sobol_first" in ds:
        for t in ds["tolerance_name"].values:
            if not math.isfinite(float(ds["sobol_total"].sel(candidate=c, tolerance_name=t))):
                continue  # not a tolerance of this candidate (or indices were not asked for)
            for var in out:
                out[var][key_of.get(str(t), str(t))] = {
                    f: num(ds[f"{var}_{f}"].sel(candidate=c, tolerance_name=t)) for f in FIELDS
                }
    if "dominant_variance" in ds:
        dv = str(ds["dominant_variance"].sel(candidate=c).values)
        out["dominant_variance"] = key_of.get(dv, dv)
    if "reject_rate" in ds:
        out["reject"] = {
            "rate": num(ds["reject_rate"].sel(candidate=c)),
            "low": num(ds["reject_rate_low"].sel(candidate=c)),
            "high": num(ds["reject_rate_high"].sel(candidate=c)),
            "method": str(ds["reject_method"].sel(candidate=c).values),
            "bound_if_none_seen": num(ds["reject_bound"].sel(candidate=c)),
        }
    return out


def _pct(x: float) -> str:
    """A yield in percent, with more digits near 0 and 100 % so an interval never looks exact."""
    v = 100.0 * x
    return f"{v:.2f}" if (v < 1.0 or v > 99.0) and v not in (0.0, 100.0) else f"{v:.1f}"


def print_summary(ds, rows):
    unit = ds.attrs.get("metric_units", "")
    metric = ds.attrs.get("goal_metric", "")
    click.echo(
        f"{ds.attrs.get('title', '')}: goal {ds.attrs['goal_state']} with {metric} >= "
        f"{ds.attrs['goal_min']:g} {unit if unit != '1' else ''}over the "
        f"{ds.attrs['goal_over']}; source {ds.attrs.get('source_description', '')}; "
        f"{ds.attrs['samples']} samples, seed {ds.attrs['seed']}"
    )
    spectrum = ds.attrs["goal_over"] == "spectrum"
    if spectrum:
        click.echo(
            "(worst columns: over the band; spectrum columns: the source-weighted metric "
            "the pass test uses)"
        )
    body = []
    for r in sorted(rows, key=lambda r: r["rank"]):
        th = " + ".join(f"{la['thickness_um']:.2f}" for la in r["layers"])
        body.append(
            [
                r["rank"],
                r["name"],
                r["construction"],
                th,
                f"{r['nominal_worst']:.4f}",
                f"{r['median_worst']:.4f}",
                f"{r['p05_worst']:.4f}",
                *([f"{r['nominal_pass']:.4f}", f"{r['p05_pass']:.4f}"] if spectrum else []),
                f"{_pct(r['yield'])}% [{_pct(r['yield_low'])}, {_pct(r['yield_high'])}]",
                r["dominant"],
                f"{r['nominal_dop']:.4f}",
                f"{r['temperature_coefficient_deg_per_k']:+.4f}",
                f"{r['acceptance_half_angle_deg']:.2f}",
            ]
        )
    click.echo(
        table(
            body,
            [
                "#",
                "candidate",
                "construction",
                "thicknesses [um]",
                "nominal worst",
                "median worst",
                "p05 worst",
                *(["nominal (spectrum)", "p05 (spectrum)"] if spectrum else []),
                "yield [95% CI]",
                "dominant",
                "nominal DOP",
                "deg/K",
                "accept. [deg]",
            ],
        )
    )
    click.echo("")
    for r in sorted(rows, key=lambda r: r["rank"]):
        click.echo(f"{r['rank']}. {r['name']}: {r['reason']}")


def execute(
    spec,
    spec_path: Path,
    out,
    force,
    samples,
    seed,
    chunk_size,
    as_json,
    formats,
    write_report=True,
    argv=None,
    quiet=False,
):
    """Run a spec end to end: Monte Carlo, grid, report, all written atomically into --out."""
    from ..errors import RetolError
    from ..grid import save_grid
    from ..montecarlo import run as mc_run

    folder = output_folder(out, spec_path, force).resolve()
    # make the temporary folder first, so that an unwritable place fails before the long run
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{folder.name}.part-", dir=folder.parent))
    except OSError as exc:
        raise RetolError(
            "--out",
            f"cannot write into {str(folder.parent)!r} ({exc.strerror or exc})",
            "choose a folder you can write to",
        ) from None
    bar = None
    state = {"last": 0}

    def progress(done, total):
        nonlocal bar
        if quiet or not sys.stderr.isatty():
            return
        if bar is None:
            bar = click.progressbar(
                length=total, label="Monte Carlo", file=sys.stderr, show_eta=True
            )
            bar.__enter__()
        bar.update(done - state["last"])
        state["last"] = done

    try:
        try:
            ds = mc_run(spec, samples=samples, seed=seed, chunk_size=chunk_size, progress=progress)
        finally:
            if bar is not None:
                bar.__exit__(None, None, None)
        ds.attrs["command"] = " ".join(shlex.quote(a) for a in (argv or ["retol"] + sys.argv[1:]))
        save_grid(ds, tmp / "grid.nc")
        if write_report:
            from ..report import write_report as _write

            _write(ds, tmp, formats=formats, force=True, command=ds.attrs["command"])
        publish(tmp, folder)
    except OSError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        raise RetolError(
            "--out",
            f"cannot write the results into {str(folder)!r} ({exc.strerror or exc})",
            "choose a folder you can write to",
        ) from None
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    rows = summary_rows(ds)
    if ds.attrs.get("sampling_note") and not quiet:
        click.echo(ds.attrs["sampling_note"], err=True)
    if as_json:
        echo_json({"candidates": rows, "output": str(folder)})
    else:
        print_summary(ds, rows)
        click.echo(
            f"\nwrote {folder / 'grid.nc'}"
            + (f", {folder / 'report.html'}, summary.csv and figures/" if write_report else "")
        )
    return ds, folder


@click.command()
@click.argument("spec_file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--samples", type=int, help="Monte Carlo samples (overrides [run] samples).")
@click.option("--seed", type=int, help="Random seed (overrides [run] seed).")
@click.option(
    "--chunk-size",
    "chunk_size",
    type=int,
    help="Samples per chunk (memory bound); results do not depend on it.",
)
@click.option(
    "--out",
    type=click.Path(path_type=Path),
    help="Output folder [default: reports/<spec file stem>/].",
)
@click.option("--force", is_flag=True, help="Replace an existing output folder.")
@click.option(
    "--format",
    "formats",
    multiple=True,
    help="Figure format for the report: png, svg or pdf (repeatable) "
    "[default: the spec's [report] formats, else png].",
)
@click.option("--no-report", is_flag=True, help="Write only grid.nc, no figures or HTML.")
@click.option(
    "--keep-samples",
    is_flag=True,
    help="Also keep every sample's values at every wavelength in the grid.",
)
@click.option("--json", "as_json", is_flag=True, help="Print JSON for scripts.")
@user_errors
def run(
    spec_file, samples, seed, chunk_size, out, force, formats, no_report, keep_samples, as_json
):
    """Monte Carlo tolerance analysis of SPEC_FILE: yield, spread and dominant tolerance."""
    from ..spec import load_spec

    _check_formats(formats)
    spec = load_spec(spec_file)
    formats = tuple(formats) or tuple(spec.report.formats) or ("png",)
    if keep_samples:
        import dataclasses

        spec = dataclasses.replace(spec, run=dataclasses.replace(spec.run, keep_samples=True))
    argv = [
        "retol",
        "run",
        str(spec_file),
        "--samples",
        str(samples if samples is not None else spec.run.samples),
        "--seed",
        str(seed if seed is not None else spec.run.seed),
    ]
    if out is not None:
        argv += ["--out", str(out)]
    for f in formats:
        if f != "png":
            argv += ["--format", f]
    if keep_samples:
        argv.append("--keep-samples")
    if no_report:
        argv.append("--no-report")
    execute(
        spec,
        spec_file,
        out,
        force,
        samples,
        seed,
        chunk_size,
        as_json,
        formats,
        write_report=not no_report,
        argv=argv,
    )


def _check_formats(formats):
    from ..errors import RetolError

    for f in formats:
        if f not in ("png", "svg", "pdf"):
            raise RetolError("--format", f"unknown figure format {f!r}", "use png, svg or pdf")
