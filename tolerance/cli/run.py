"""``retol run``: the Monte Carlo tolerance analysis of a spec file."""

from __future__ import annotations

import shlex
import shutil
import sys
from pathlib import Path

import click

from .common import FIGURE_FORMAT, echo_json, fail, table, user_errors
from .sweep import cluster_options

#: Exit status when the results grid was written but the report was not.
REPORT_FAILED = 4  # (3 is --fail-if-none: no candidate meets the goal)


def run_size(spec, samples, keep_samples) -> tuple[int, int, int, bool]:
    """Candidates, wavelengths, samples and keep_samples of the run about to start."""
    n = int(samples if samples is not None else spec.run.samples)
    keep = bool(spec.run.keep_samples if keep_samples is None else keep_samples)
    return len(spec.candidates), int(spec.wavelength.count), n, keep


def check_run_memory(spec, samples, chunk_size, keep_samples=None) -> None:
    """Refuse, before any work, a run whose memory estimate exceeds the available memory."""
    from ..limits import check_memory, run_memory_bytes

    candidates, wavelengths, n, keep = run_size(spec, samples, keep_samples)
    if n < 1:
        return  # the engine names the bad --samples
    need = run_memory_bytes(candidates, wavelengths, n, keep, int(chunk_size or 16384))
    what = f"{n:,} samples x {candidates} candidates" + (
        f" x {wavelengths} wavelengths kept" if keep else ""
    )
    check_memory(
        need,
        "--samples",
        f"{what}; use fewer samples" + (" or drop keep_samples" if keep else ""),
    )


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
                # the worse tail: 5th percentile, or the 95th for a goal max (smaller is better)
                "p05_worst": float(np.quantile(worst, _tail(ds))),
                "nominal_pass": float(
                    ds[
                        "nominal_worst"
                        if ds.attrs["goal_over"] == "band"
                        else "nominal_spectral_metric"
                    ].sel(candidate=c)
                ),
                "median_pass": float(np.quantile(ds["pass_metric"].sel(candidate=c), 0.5)),
                "p05_pass": float(np.quantile(ds["pass_metric"].sel(candidate=c), _tail(ds))),
                "rank_yield": float(ds["rank_yield"].sel(candidate=c)),
                "dominant": str(ds["dominant"].sel(candidate=c).values),
                "margin_p05": float(ds["margin_p05"].sel(candidate=c)),
                "margin_gain": {
                    str(t): float(ds["margin_gain"].sel(candidate=c, tolerance_name=t))
                    for t in ds["tolerance_name"].values
                },
                "margin_dominant": str(ds["margin_dominant"].sel(candidate=c).values),
                "nominal_dop": float(ds["nominal_dop"].sel(candidate=c)),
                "nominal_transmission": float(ds["nominal_transmission"].sel(candidate=c))
                if "nominal_transmission" in ds
                else 1.0,
                "nominal_spectral_metric": float(ds["nominal_spectral_metric"].sel(candidate=c)),
                "temperature_coefficient_deg_per_k": float(
                    ds["temperature_coefficient"].sel(candidate=c)
                ),
                "acceptance_half_angle_deg": float(ds["acceptance_half_angle"].sel(candidate=c)),
                "rank": int(ds["rank"].sel(candidate=c)),
                "reason": str(ds["reason"].sel(candidate=c).values),
                "meets_goal": bool(int(ds["meets_goal"].sel(candidate=c)))
                if "meets_goal" in ds.variables
                else float(ds["yield"].sel(candidate=c)) > 0,
                "sensitivity": _sensitivity(ds, c),
                **explain_row(ds, c),
            }
        )
    return rows


def _sensitivity(ds, c) -> dict:
    """Per tolerance: the yield without it and with it alone (null where it does not apply)."""
    from ..decision import candidate_has_faces, tolerance_applies

    if "tolerance_name" not in ds.coords or "sensitivity_alone" not in ds.variables:
        return {}
    n_layers = len([m for m in ds["layer_material"].sel(candidate=c).values if str(m)])
    over = str(ds.attrs.get("goal_over", "band"))
    index = [str(x) for x in ds["candidate"].values].index(str(c))
    faced = candidate_has_faces(ds.attrs, index)
    out = {}
    for t in ds["tolerance_name"].values:
        t = str(t)
        ok = tolerance_applies(t, n_layers, over, faced)
        out[t] = {
            "applies": ok,
            "yield_without": float(ds["sensitivity_without"].sel(candidate=c, tolerance_name=t))
            if ok
            else None,
            "yield_alone": float(ds["sensitivity_alone"].sel(candidate=c, tolerance_name=t))
            if ok
            else None,
        }
    return out


def explain_row(ds, c) -> dict:
    """The Sobol' indices (``sobol``, ``sobol_pass``: by spec tolerance key, the six numbers
    first/first_low/first_high/total/total_low/total_high, null where undefined), the variance
    dominant tolerance and the reject-rate estimate of candidate ``c``."""
    import math

    from ..tolerances import key_of_short
    from ..variance import FIELDS

    def num(v):
        v = float(v)
        return v if math.isfinite(v) else None

    out = {"sobol": {}, "sobol_pass": {}}
    if "sobol_first" in ds:
        for t in ds["tolerance_name"].values:
            if not math.isfinite(float(ds["sobol_total"].sel(candidate=c, tolerance_name=t))):
                continue  # not a tolerance of this candidate (or indices were not asked for)
            for var in out:
                out[var][key_of_short(str(t))] = {
                    f: num(ds[f"{var}_{f}"].sel(candidate=c, tolerance_name=t)) for f in FIELDS
                }
    if "dominant_variance" in ds:
        dv = str(ds["dominant_variance"].sel(candidate=c).values)
        out["dominant_variance"] = key_of_short(dv)
    if "reject_rate" in ds:
        out["reject"] = {
            "rate": num(ds["reject_rate"].sel(candidate=c)),
            "low": num(ds["reject_rate_low"].sel(candidate=c)),
            "high": num(ds["reject_rate_high"].sel(candidate=c)),
            "method": str(ds["reject_method"].sel(candidate=c).values),
            "bound_if_none_seen": num(ds["reject_bound"].sel(candidate=c)),
        }
    return out


def json_summary(ds, rows, folder) -> dict:
    """The ``--json`` document: goal, metric (name, unit), recommendation, candidates."""
    pick = next((r["name"] for r in sorted(rows, key=lambda r: r["rank"]) if r["meets_goal"]), None)
    return {
        "metric": {
            "name": str(ds.attrs.get("goal_metric", "")),
            "unit": str(ds.attrs.get("metric_units", "")),
            "long_name": str(ds.attrs.get("metric_long_name", "")),
        },
        "goal": {
            "state": str(ds.attrs.get("goal_state", "")),
            **(
                {"max": float(ds.attrs["goal_max"])}
                if "goal_max" in ds.attrs
                else {"min": float(ds.attrs["goal_min"])}
            ),
            "over": str(ds.attrs.get("goal_over", "")),
            "yield": float(ds.attrs["goal_yield"]) if "goal_yield" in ds.attrs else None,
            "rule": str(ds.attrs.get("goal_rule", "")),
        },
        "recommended": pick,
        "candidates": rows,
        "output": str(folder),
    }


def _tail(ds) -> float:
    """The worse-tail quantile: 0.05, or 0.95 for a goal max (smaller is better)."""
    return 0.95 if "goal_max" in ds.attrs else 0.05


def _tail_name(ds) -> str:
    return "p95" if "goal_max" in ds.attrs else "p05"


def _yield_cell(r) -> str:
    from ..decision import pct_interval

    ys, ls, hs = pct_interval(r["yield"], r["yield_low"], r["yield_high"])
    return f"{ys}% [{ls}, {hs}]"


def _terminal_width() -> int:
    return shutil.get_terminal_size((100, 24)).columns


def print_summary(ds, rows, wide: bool = False):
    """The run's table on stdout: compact by default (fits the terminal), all columns with wide.

    Best rank first; then the verdict (the recommendation, or that no candidate meets the goal
    and which comes closest), any warning that the samples cannot separate the top two, and the
    ranking reasons.
    """
    from ..decision import separation_warning

    unit = ds.attrs.get("metric_units", "")
    metric = ds.attrs.get("goal_metric", "")
    shown = f" {unit}" if unit not in ("", "1") else ""
    conf = float(ds.attrs.get("confidence", ds["yield"].attrs.get("confidence", 0.95)))
    rel, lim = (
        (">=", ds.attrs.get("goal_min")) if "goal_min" in ds.attrs else ("<=", ds.attrs["goal_max"])
    )
    click.echo(
        f"{ds.attrs.get('title', '')}: goal {ds.attrs['goal_state']} with {metric} {rel} "
        f"{lim:g}{shown} over the "
        f"{ds.attrs['goal_over']}; source {ds.attrs.get('source_description', '')}; "
        f"{ds.attrs['samples']} samples, seed {ds.attrs['seed']}"
    )
    spectrum = ds.attrs["goal_over"] == "spectrum"
    ci = f"yield [{conf:.0%} CI]"
    body, head = [], []
    ordered = sorted(rows, key=lambda r: r["rank"])
    if wide:
        if spectrum:
            click.echo(
                "(worst columns: over the band; spectrum columns: the source-weighted metric "
                "the pass test uses)"
            )
        head = [
            "#",
            "candidate",
            "construction",
            "thicknesses [um]",
            "nominal worst",
            "median worst",
            f"{_tail_name(ds)} worst",
            *(["nominal (spectrum)", f"{_tail_name(ds)} (spectrum)"] if spectrum else []),
            ci,
            "meets",
            "dominant",
            "nominal DOP",
            "deg/K",
            "accept. [deg]",
        ]
        for r in ordered:
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
                    _yield_cell(r),
                    "yes" if r["meets_goal"] else "no",
                    r["dominant"],
                    f"{r['nominal_dop']:.4f}",
                    f"{r['temperature_coefficient_deg_per_k']:+.4f}",
                    f"{r['acceptance_half_angle_deg']:.2f}",
                ]
            )
    else:
        which = f"{_tail_name(ds)} (spectrum)" if spectrum else f"{_tail_name(ds)} worst"
        head = ["#", "candidate", "construction", which, ci, "meets", "dominant"]
        for r in ordered:
            body.append(
                [
                    r["rank"],
                    r["name"],
                    r["construction"],
                    f"{r['p05_pass' if spectrum else 'p05_worst']:.4f}",
                    _yield_cell(r),
                    "yes" if r["meets_goal"] else "no",
                    r["dominant"],
                ]
            )
    click.echo(table(body, head))
    if not wide:
        click.echo("(--wide for every column: thicknesses, nominal values, DOP, deg/K, acceptance)")
    click.echo("")
    pick = next((r for r in ordered if r["meets_goal"]), None)
    rule = ds.attrs.get("goal_rule", "")
    if pick is None and ordered:
        c = ordered[0]
        click.echo(
            f"NO CANDIDATE MEETS THE GOAL ({rule}). Closest: {c['name']}, yield "
            f"{_yield_cell(c)}. Nothing is recommended."
        )
    elif pick is not None:
        click.echo(f"Recommended: {pick['name']} ({rule}).")
    warning = separation_warning(
        [r["name"] for r in rows],
        [r["yield"] for r in rows],
        [r["yield_low"] for r in rows],
        [r["yield_high"] for r in rows],
        [r["rank"] for r in rows],
        int(ds.attrs["samples"]),
        conf,
    )
    if warning:
        click.echo(f"warning: {warning}")
    for r in ordered:
        click.echo(f"{r['rank']}. {r['name']}: {r['reason']}")


def kernel_is_cached() -> bool:
    """Whether numba holds a compiled Monte Carlo kernel in its on-disk cache."""
    import os

    from .. import kernel

    here = Path(kernel.__file__).parent
    roots = [here / "__pycache__"]
    if os.environ.get("NUMBA_CACHE_DIR"):
        roots.append(Path(os.environ["NUMBA_CACHE_DIR"]))
    return any(any(r.rglob("kernel.chunk_pass*.nbi")) for r in roots if r.is_dir())


def compile_notice(stream=None) -> bool:
    """Say on stderr (a terminal only) that the kernel compiles when its cache is cold.

    Returns True when the notice was printed.  The kernel's compiled code is cached on disk by
    numba; a cold cache means the first run spends tens of seconds compiling.
    """
    stream = stream or sys.stderr
    if not stream.isatty() or kernel_is_cached():
        return False
    click.echo(
        "compiling the Monte Carlo kernel, first run only (about half a minute)...", err=True
    )
    return True


def stderr_is_terminal() -> bool:
    """Whether stderr is a terminal (progress is shown only there)."""
    return sys.stderr.isatty()


def figure_progress():
    """A progress callback for the report's figures, on stderr when it is a terminal."""
    if not stderr_is_terminal():
        return None

    def show(done, total, name):
        click.echo(
            f"\rwriting the report: figure {done + 1}/{total} ({name})...\x1b[K",
            err=True,
            nl=done + 1 == total,
        )

    return show


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
    workers=None,
    scheduler=None,
    wide=False,
):
    """Run a spec end to end: Monte Carlo, grid, report, published all or nothing into --out.

    The output folder is checked, locked and its part folder made before the Monte Carlo (see
    :mod:`tolerance.publish`).  If the report fails after the run, the grid is still published
    and the command ends with one line naming what failed and exit status 4.
    """
    from ..grid import save_grid
    from ..montecarlo import run as mc_run
    from ..publish import RUN, Output, write_error

    folder = Path(out) if out else Path("reports") / spec_path.stem
    command = " ".join(shlex.quote(a) for a in (argv or ["retol"] + sys.argv[1:]))
    check_run_memory(spec, samples, chunk_size)
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

    if not quiet:
        compile_notice()
    report_error = None
    with Output(folder, force=force, replaces=RUN, command=command) as target:
        try:
            from ..cluster import client

            with client(workers, scheduler) as c:
                ds = mc_run(
                    spec,
                    samples=samples,
                    seed=seed,
                    chunk_size=chunk_size,
                    progress=progress,
                    client=c,
                )
        finally:
            if bar is not None:
                bar.__exit__(None, None, None)
        ds.attrs["command"] = command
        try:
            save_grid(ds, target.part / "grid.nc")
        except OSError as exc:
            raise write_error(exc, "--out", f"cannot write grid.nc for {target.target}") from None
        from ..allocation import drawing_rows_for_grid, write_drawing_csv

        write_drawing_csv(drawing_rows_for_grid(ds), target.part / "drawing.csv")
        if write_report:
            report_error = _report_into(
                ds, target.part, formats, command, None if quiet else figure_progress()
            )
        folder = target.publish()
    rows = summary_rows(ds)
    if ds.attrs.get("sampling_note") and not quiet:
        click.echo(ds.attrs["sampling_note"], err=True)
    if as_json:
        doc = json_summary(ds, rows, folder)
        doc["drawing"] = drawing_rows_for_grid(ds)
        echo_json(doc)
    else:
        print_summary(ds, rows, wide=wide)
        click.echo(
            f"\nwrote {folder / 'grid.nc'}"
            + (f", {folder / 'report.html'}, summary.csv and figures/" if write_report else "")
        )
    if report_error is not None:
        grid = shlex.quote(str(folder / "grid.nc"))
        fail(
            f"report: not written ({report_error}); the results grid was kept in "
            f"{folder / 'grid.nc'} (write the report later with: retol report {grid})",
            code=REPORT_FAILED,
        )
    return ds, folder


def _report_into(ds, part: Path, formats, command, progress=None) -> str | None:
    """Write the report into the part folder; on failure remove its pieces and say why."""
    from ..report import FIGURE_DIR, REPORT_FILE, SUMMARY_FILE, render_report

    try:
        render_report(ds, part, formats=formats, command=command, progress=progress)
        return None
    except Exception as exc:  # a finished grid is never lost to a failing report
        shutil.rmtree(part / FIGURE_DIR, ignore_errors=True)
        for name in (REPORT_FILE, SUMMARY_FILE):
            (part / name).unlink(missing_ok=True)
        detail = " ".join(str(exc).split())[:200]
        return f"{type(exc).__name__}: {detail}" if detail else type(exc).__name__


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
    type=FIGURE_FORMAT,
    help="Figure format for the report: png, svg or pdf (repeatable) "
    "[default: the spec's [report] formats, else png].",
)
@click.option("--no-report", is_flag=True, help="Write only grid.nc, no figures or HTML.")
@click.option(
    "--keep-samples",
    is_flag=True,
    help="Also keep every sample's values at every wavelength in the grid.",
)
@cluster_options
@click.option("--json", "as_json", is_flag=True, help="Print JSON for scripts.")
@click.option(
    "--wide", is_flag=True, help="Print every column of the table (default: fit the terminal)."
)
@click.option(
    "--fail-if-none",
    "fail_if_none",
    is_flag=True,
    help="Exit with status 3 when no candidate meets the goal.",
)
@user_errors
def run(
    spec_file,
    samples,
    seed,
    chunk_size,
    out,
    force,
    formats,
    no_report,
    keep_samples,
    workers,
    scheduler,
    as_json,
    wide,
    fail_if_none,
):
    """Monte Carlo tolerance analysis of SPEC_FILE: yield, spread and dominant tolerance."""
    from ..cluster import check_options
    from ..spec import load_spec

    check_formats(formats)
    check_options(workers, scheduler)
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
    ds, _ = execute(
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
        workers=workers,
        scheduler=scheduler,
        wide=wide,
    )
    if fail_if_none and not any(r["meets_goal"] for r in summary_rows(ds)):
        if not as_json:
            click.echo("retol: no candidate meets the goal (--fail-if-none): exit 3", err=True)
        sys.exit(3)


def check_formats(formats):
    from ..errors import RetolError

    for f in formats:
        if f not in ("png", "svg", "pdf"):
            raise RetolError("--format", f"unknown figure format {f!r}", "use png, svg or pdf")
