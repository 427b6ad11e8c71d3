"""``retol inspect``: identify a delivered plate from its measured spectrum, accept or reject it."""

from __future__ import annotations

from pathlib import Path

import click

from ..publish import INSPECT_FILES as OUTPUTS
from ..publish import LOT_FILES as LOT_OUTPUTS
from .common import FLOAT, echo_json, table, user_errors
from .plate import build_plate, plate_options

PLATE_OPTS = (
    "material",
    "construction",
    "design",
    "fast_axis",
    "order",
    "thick_plate",
    "partner",
    "match",
    "retardance_nm",
    "waves",
)


def _folder(out, default: Path, names, force: bool) -> Path:
    """The output folder, checked before the work: one holding earlier outputs of these names
    is refused without --force; so is one that cannot be written."""
    from ..publish import check_target, only

    folder = Path(out) if out else default
    check_target(folder, force, only(names))
    return folder


def _write_all(folder: Path, files: dict, force: bool) -> Path:
    """Publish every output all or nothing (:func:`tolerance.publish.write_files`)."""
    from ..publish import write_files

    return write_files(folder, files, force=force)


def _text(s):
    return lambda p: p.write_text(s, encoding="utf-8")


def _figure(fig):
    return lambda p: fig.savefig(p, dpi=130)


def _json_text(obj) -> str:
    import json

    from .common import _clean

    return json.dumps(_clean(obj), indent=2, allow_nan=False, default=float) + "\n"


def _csv_text(rows: list[dict]) -> str:
    import csv
    import io

    buf = io.StringIO()
    if rows:
        w = csv.DictWriter(buf, fieldnames=list(rows[0]), lineterminator="\n")
        w.writeheader()
        for r in rows:
            w.writerow({k: ("" if v is None else v) for k, v in r.items()})
    return buf.getvalue()


def _fmt(x, digits=4):
    import math

    if x is None:
        return "-"
    if isinstance(x, float) and not math.isfinite(x):
        return "not determined"
    return f"{x:.{digits}f}"


def _plate_source(ctx, spec_path, candidate, plate_args):
    """Nominal plate from --spec/--candidate or from the plate options (never both)."""
    from click.core import ParameterSource

    from ..errors import RetolError

    given = [
        "--" + k.replace("_nm", "").replace("_", "-")
        for k in PLATE_OPTS
        if ctx.get_parameter_source(k) == ParameterSource.COMMANDLINE
    ]
    if spec_path is not None:
        if given:
            raise RetolError(
                given[0], "does not go with --spec", "take the plate from --spec or from options"
            )
        return None
    if candidate is not None:
        raise RetolError("--candidate", "needs --spec", "give --spec SPEC.toml --candidate NAME")
    if plate_args["material"] is None:
        raise RetolError(
            "--spec", "no plate to identify", "give --spec and --candidate, or --material etc."
        )
    waves = plate_args.pop("waves")
    return build_plate(waves=0.25 if waves is None else waves, **plate_args)


@click.command()
@click.argument("measured", required=False, type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "--many",
    type=click.Path(file_okay=False, path_type=Path),
    help="Fit every CSV in this folder (a lot) instead of one file.",
)
@click.option(
    "--spec",
    "spec_path",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Spec file with the ordered plate and its tolerances.",
)
@click.option("--candidate", help="Candidate name in --spec (needed when it has several).")
@plate_options
@click.option(
    "--waves", type=FLOAT, default=None, help="Target retardance [waves] (plate options)."
)
@click.option(
    "--polarizers",
    type=click.Choice(["crossed", "parallel"]),
    help="Transmission data: analyzer crossed or parallel to the polarizer.",
)
@click.option(
    "--plate-angle",
    "plate_angle",
    type=FLOAT,
    default=45.0,
    show_default=True,
    help="Nominal angle of the plate's fast axis from the polarizer [deg].",
)
@click.option("--dark", type=FLOAT, help="Transmission: detector level of the blocked beam.")
@click.option("--reference", type=FLOAT, help="Transmission: detector level of the open beam.")
@click.option("--temperature", type=FLOAT, help="Plate temperature during the measurement [C].")
@click.option(
    "--wrap",
    type=click.Choice(["auto", "none", "wave", "half"]),
    default="auto",
    show_default=True,
    help="Retardance data: absolute, modulo one wave, or folded into [0, 1/2].",
)
@click.option(
    "--orders",
    type=int,
    default=3,
    show_default=True,
    help="Candidate orders scanned on either side of the nominal one.",
)
@click.option(
    "--bootstrap",
    type=int,
    default=200,
    show_default=True,
    help="Residual-bootstrap refits that check the uncertainties.",
)
@click.option("--seed", type=int, default=0, show_default=True, help="Bootstrap seed.")
@click.option(
    "--guard-k",
    "guard_k",
    type=FLOAT,
    default=2.0,
    show_default=True,
    help="Guard band as this many standard uncertainties (JCGM 106).",
)
@click.option(
    "--samples",
    type=int,
    default=2000,
    show_default=True,
    help="Monte Carlo samples of the system yield (with --spec).",
)
@click.option("--no-yield", is_flag=True, help="Skip the system yield.")
@click.option("--name", help="Name of the as-built candidate.")
@click.option(
    "--out",
    type=click.Path(path_type=Path),
    help="Output folder [default: reports/inspect-<file or folder stem>/].",
)
@click.option("--force", is_flag=True, help="Replace earlier inspection outputs in --out.")
@click.option("--json", "as_json", is_flag=True, help="Print JSON for scripts.")
@user_errors
def inspect(
    measured,
    many,
    spec_path,
    candidate,
    polarizers,
    plate_angle,
    dark,
    reference,
    temperature,
    wrap,
    orders,
    bootstrap,
    seed,
    guard_k,
    samples,
    no_yield,
    name,
    out,
    force,
    as_json,
    **plate_args,
):
    """Identify the plate in MEASURED.csv, accept or reject it and predict its system yield.

    Example: retol inspect plate.csv --spec my_plate.toml --candidate "quartz multi-order"
    --polarizers crossed
    """
    from ..errors import RetolError

    ctx = click.get_current_context()
    if (measured is None) == (many is None):
        raise RetolError("MEASURED", "give one measured CSV file or --many FOLDER", "not both")
    if samples < 1:
        raise RetolError("--samples", f"must be at least 1, got {samples}", "e.g. --samples 2000")
    if not guard_k >= 0:
        raise RetolError("--guard-k", "must not be negative", "e.g. --guard-k 2")
    plate = _plate_source(ctx, spec_path, candidate, plate_args)
    spec = None
    if spec_path is not None:
        from ..spec import load_spec

        spec = load_spec(spec_path)
    read_opts = dict(
        polarizers=polarizers,
        plate_angle_deg=plate_angle,
        dark=dark,
        reference=reference,
        temperature_c=temperature,
        wrap=wrap,
    )
    fit_opts = dict(orders=orders, bootstrap=bootstrap, seed=seed)
    if many is not None:
        return _many(
            many,
            plate,
            spec,
            spec_path,
            candidate,
            read_opts,
            fit_opts,
            guard_k,
            out,
            force,
            as_json,
        )
    from ..inspection import inspect_plate, read_measurement

    folder = _folder(out, Path("reports") / f"inspect-{measured.stem}", OUTPUTS, force)
    meas = read_measurement(measured, **read_opts)
    result = inspect_plate(
        meas,
        plate,
        spec=spec,
        spec_path=spec_path,
        candidate=candidate,
        name=name,
        samples=None if no_yield else samples,
        fit_seed=seed,
        guard_k=guard_k,
        **{k: v for k, v in fit_opts.items() if k != "seed"},
    )
    doc = result.to_dict()
    files = {
        "inspection.json": _text(_json_text(doc)),
        "as_built.toml": _text(result.toml),
        "fit.png": _figure(_fit_figure(result.fit)),
        "fit.csv": _text(_csv_text(_fit_rows(result.fit))),
    }
    folder = _write_all(folder, files, force)
    if as_json:
        echo_json({**doc, "output": str(folder)})
        return
    _print_one(result, doc)
    click.echo(f"\nwrote {', '.join(str(folder / n) for n in OUTPUTS)}")


def _fit_figure(fit):
    from ..inspection import fit_figure

    return fit_figure(fit)


def _fit_rows(fit) -> list[dict]:
    import numpy as np

    m = fit.measurement
    model = m.value - fit.residuals
    return [
        {
            "wavelength_nm": float(w),
            "measured": float(y),
            "fit": float(f),
            "residual": float(r),
            "sigma": float(s),
        }
        for w, y, f, r, s in zip(
            m.wavelength_nm,
            m.value,
            model,
            fit.residuals,
            m.sigma if m.sigma is not None else np.full(m.size, fit.noise_scale),
            strict=True,
        )
    ]


def _print_one(result, doc):
    fit, f = result.fit, doc["fit"]
    m = fit.measurement
    setup = (
        f"{m.polarizers} polarizers, plate at {m.plate_angle_deg:g} deg"
        if m.kind == "transmission"
        else {
            "none": "retardance",
            "wave": "retardance modulo one wave",
            "half": "retardance folded into [0, 1/2]",
        }[m.wrap]
    )
    click.echo(
        f"{m.name}: {setup}, {m.size} points, {m.wavelength_nm[0]:g}-{m.wavelength_nm[-1]:g} nm"
    )
    click.echo(
        f"identified: order {f['order']} ({f['retardance_waves']:.4f} waves at "
        f"{f['design_nm']:g} nm), reduced chi2 {f['chi2_reduced']:.3f} "
        f"(sigma from the {f['sigma_source']})"
    )
    rows = [
        [i, la.material.name, f"{la.thickness_um:.4f}", f"{d:.4f}", _fmt(s), _fmt(b)]
        for i, (la, d, s, b) in enumerate(
            zip(
                fit.plate.layers,
                f["thicknesses_um"],
                f["thickness_sigma_um"],
                f["thickness_sigma_bootstrap_um"],
                strict=True,
            )
        )
    ]
    click.echo(
        table(
            rows,
            ["layer", "material", "nominal [um]", "fitted [um]", "sigma [um]", "bootstrap [um]"],
        )
    )
    if "layer_difference_um" in f:
        click.echo(
            f"layer difference {f['layer_difference_um']:.4f} +- "
            f"{_fmt(f['layer_difference_sigma_um'])} um, sum sigma {_fmt(f['layer_sum_sigma_um'])}"
        )
    if "note" in f:
        click.echo(f"note: {f['note']}")
    if f["axis_offset_deg"] is not None:
        sign = "" if f["axis_offset_sign_known"] else " (sign not seen at this plate angle)"
        click.echo(
            f"axis offset {f['axis_offset_deg']:.3f} +- {_fmt(f['axis_offset_sigma_deg'], 3)} deg"
            f"{sign}"
        )
    if f["alternatives"]:
        click.echo("competing solutions:")
        click.echo(
            table(
                [
                    [
                        a["order"],
                        f"{a['retardance_waves']:.4f}",
                        f"{a['chi2']:.1f}",
                        f"{a['delta_chi2']:.1f}",
                    ]
                    for a in f["alternatives"][:5]
                ],
                ["order", "waves at design", "chi2", "delta chi2"],
            )
        )
    v = doc["verdict"]
    if v["items"]:
        click.echo(f"verdict ({v['rule']}, k = {v['guard_band_k']:g}):")
        click.echo(
            table(
                [
                    [
                        it["tolerance"] + ("" if it["layer"] is None else f"[{it['layer']}]"),
                        f"{it['deviation']:+.4f}",
                        _fmt(it["uncertainty"]),
                        f"[{it['limit_low']:g}, {it['limit_high']:g}]",
                        it["simple"],
                        it["guarded"],
                        it["limit_from"],
                    ]
                    for it in v["items"]
                ],
                ["tolerance", "deviation", "u", "limits", "simple", "guarded", "limit from"],
            )
        )
        click.echo(f"overall: simple {v['simple']}, guarded {v['guarded']}")
    if doc["yield"] is not None:
        click.echo(
            f"system yield with only {', '.join(doc['yield_tolerances']) or 'no'} tolerances "
            f"left: {100 * doc['yield']:.1f}% [{100 * doc['yield_low']:.1f}, "
            f"{100 * doc['yield_high']:.1f}] ({doc['yield_samples']} samples)"
        )
    click.echo("\nas built:\n" + result.toml)


def _many(
    folder, plate, spec, spec_path, candidate, read_opts, fit_opts, guard_k, out, force, as_json
):
    from ..errors import RetolError
    from ..inspection import inspect_lot, lot_figure, lot_table

    if not folder.is_dir():
        raise RetolError("--many", f"no such folder {str(folder)!r}", "give the lot's folder")
    paths = sorted(p for p in folder.iterdir() if p.suffix.lower() == ".csv" and p.is_file())
    if not paths:
        raise RetolError("--many", f"{str(folder)!r} holds no .csv file", "check the folder")
    target = _folder(out, Path("reports") / f"inspect-{folder.resolve().name}", LOT_OUTPUTS, force)
    rows, nominal, tol = inspect_lot(
        paths,
        plate,
        spec=spec,
        spec_path=spec_path,
        candidate=candidate,
        guard_k=guard_k,
        **read_opts,
        **fit_opts,
    )
    if all(r["error"] is not None for r in rows):
        raise RetolError(
            "--many",
            f"no file could be fitted; first: {rows[0]['error']}",
            "check the files and options",
        )
    flat = lot_table(rows, nominal)
    doc = {
        "plates": flat,
        "fits": [
            {
                "file": r["file"],
                "fit": r["fit"].to_dict() if r["fit"] else None,
                "verdict": r["verdict"],
                "error": r["error"],
            }
            for r in rows
        ],
    }
    target = _write_all(
        target,
        {
            "lot.csv": _text(_csv_text(flat)),
            "lot.png": _figure(lot_figure(rows, nominal, tol)),
            "lot.json": _text(_json_text(doc)),
        },
        force,
    )
    for r in rows:
        if r["error"]:
            click.echo(f"retol: warning: {r['error']}", err=True)
    if as_json:
        echo_json({**doc, "output": str(target)})
        return
    L = len(nominal.layers)
    click.echo(
        table(
            [
                [
                    r["file"],
                    r["order"] if r["order"] is not None else "-",
                    " + ".join(_fmt(r[f"deviation_um_{i}"]) for i in range(L)),
                    " + ".join(_fmt(r[f"thickness_sigma_um_{i}"]) for i in range(L)),
                    _fmt(r["axis_offset_deg"], 3),
                    _fmt(r["chi2_reduced"], 2),
                    r["simple"] or "-",
                    r["guarded"] or "-",
                    r["status"],
                ]
                for r in flat
            ],
            [
                "file",
                "order",
                "deviation [um]",
                "sigma [um]",
                "axis [deg]",
                "chi2 red.",
                "simple",
                "guarded",
                "status",
            ],
        )
    )
    click.echo(f"\nwrote {', '.join(str(target / n) for n in LOT_OUTPUTS)}")
