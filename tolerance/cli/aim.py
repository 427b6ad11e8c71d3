"""``retol aim``: the mount angles that turn an input state into a target state."""

from __future__ import annotations

import click

from .common import (
    FLOAT,
    INTERVAL,
    LENGTH,
    WAVELENGTH,
    echo_json,
    extrapolate_option,
    json_option,
    table,
    user_errors,
)


def _plate_set_choice():
    from ..aiming import PLATE_SETS

    return click.Choice(list(PLATE_SETS))


def _construction_choice():
    from ..plates import CONSTRUCTIONS

    return click.Choice([c for c in CONSTRUCTIONS if c != "stack"])


def _renamed(func, names: dict, *args, **kwargs):
    """Call a library function; name the CLI option in its RetolError instead of the key."""
    from ..errors import RetolError

    try:
        return func(*args, **kwargs)
    except RetolError as exc:
        if exc.field in names:
            raise RetolError(names[exc.field], exc.problem, exc.fix) from None
        raise


def target_vector(azimuth, axial_ratio, ellipticity, handedness, stokes_text):
    """The target's unit Stokes 3-vector from the command's options."""
    from ..errors import RetolError
    from ..polarization import elliptical_goal_vector, stokes_goal_vector

    if stokes_text is not None:
        if any(v is not None for v in (azimuth, axial_ratio, ellipticity, handedness)):
            raise RetolError(
                "--target-stokes",
                "cannot be combined with the target's azimuth, axial ratio, ellipticity or "
                "handedness",
                "give either --target-stokes or the ellipse",
            )
        try:
            values = [float(x) for x in stokes_text.split(",")]
        except ValueError:
            raise RetolError(
                "--target-stokes", f"cannot read {stokes_text!r}", "give s1,s2,s3, e.g. 0,0,1"
            ) from None
        return _renamed(stokes_goal_vector, {"stokes": "--target-stokes"}, values)
    if axial_ratio is None and ellipticity is None:
        raise RetolError(
            "--target-axial-ratio",
            "the target needs its axial ratio or ellipticity",
            "give --target-axial-ratio (0 linear, 1 circular), --target-ellipticity or "
            "--target-stokes",
        )
    if axial_ratio is not None and ellipticity is not None:
        raise RetolError(
            "--target-ellipticity",
            "give either --target-axial-ratio or --target-ellipticity, not both",
            "drop one",
        )
    circular = (axial_ratio is not None and axial_ratio == 1.0) or (
        ellipticity is not None and abs(ellipticity) == 45.0
    )
    if azimuth is None and not circular:
        raise RetolError(
            "--target-azimuth",
            "is required for a target that is not circular",
            "give the major axis, e.g. --target-azimuth 30",
        )
    names = {
        "azimuth_deg": "--target-azimuth",
        "axial_ratio": "--target-axial-ratio",
        "ellipticity_deg": "--target-ellipticity",
        "handedness": "--handedness",
    }
    return _renamed(
        elliptical_goal_vector,
        names,
        0.0 if azimuth is None else azimuth,
        axial_ratio=axial_ratio,
        handedness=handedness,
        ellipticity_deg=ellipticity,
    )


def _band(start, stop, step):
    import numpy as np

    from ..errors import RetolError

    if start is None and stop is None:
        return None
    if start is None or stop is None:
        raise RetolError(
            "--from/--to", "give both ends of the band", "e.g. --from 600nm --to 660nm"
        )
    if stop < start:
        raise RetolError("--to", "must not be below --from", "swap them")
    if step <= 0:
        raise RetolError("--step", "must be positive", "e.g. --step 10nm")
    n = int(np.floor((stop - start) / step + 1e-9)) + 1
    return start + step * np.arange(n)


def _state(S, target=None) -> dict:
    """The ellipse of a Stokes vector as JSON-ready numbers."""
    from ..polarization import ellipse, handedness_name, sphere_angle_deg

    e = ellipse(S)
    out = {
        "azimuth_deg": float(e["azimuth_deg"]) + 0.0,
        "axial_ratio": float(e["axial_ratio"]) + 0.0,
        "handedness": handedness_name(e["rotation"]),
        "ellipticity_deg": float(e["ellipticity_angle_deg"]) + 0.0,
        "dop": float(e["dop"]),
        "stokes": [float(x) + 0.0 for x in S],
    }
    if target is not None:
        out["sphere_angle_deg"] = float(sphere_angle_deg(S, target))
    return out


@click.command()
@click.option(
    "--input",
    "input_deg",
    type=FLOAT,
    default=0.0,
    show_default=True,
    help="Azimuth of the input's major axis (of a linear input: its azimuth) [deg].",
)
@click.option(
    "--input-ellipticity",
    type=FLOAT,
    default=0.0,
    show_default=True,
    help="Ellipticity angle of the input, positive right-handed [deg].",
)
@click.option(
    "--input-dop",
    type=FLOAT,
    default=1.0,
    show_default=True,
    help="Degree of polarization of the input [0..1].",
)
@click.option("--target-azimuth", type=FLOAT, help="Major-axis azimuth of the target [deg].")
@click.option(
    "--target-axial-ratio", type=FLOAT, help="Axial ratio b/a of the target: 0 linear, 1 circular."
)
@click.option(
    "--target-ellipticity",
    type=FLOAT,
    help="Ellipticity angle of the target instead, positive right-handed [deg].",
)
@click.option(
    "--handedness",
    help="right (clockwise looking toward the source) or left.",
)
@click.option("--target-stokes", help="The target as normalised Stokes s1,s2,s3 instead.")
@click.option(
    "--plates",
    type=_plate_set_choice(),
    default="qwp",
    show_default=True,
    help="Plates to aim, light meeting the first first.",
)
@click.option("--material", help="Real plates of this material, e.g. quartz (default: ideal).")
@click.option(
    "--construction",
    type=_construction_choice(),
    default="zero-order",
    show_default=True,
    help="Construction of the real plates.",
)
@click.option("--design", type=WAVELENGTH, help="Design wavelength of the real plates, e.g. 633nm.")
@click.option("--order", type=int, help="Order m of multi-order plates (m + waves).")
@click.option("--thick-plate", "thick_plate", type=LENGTH, help="Thicker plate of compound plates.")
@click.option("--partner", help="Second crystal of achromatic plates, e.g. mgf2.")
@click.option(
    "--match",
    type=WAVELENGTH,
    multiple=True,
    help="Achromat: the two wavelengths where the target retardance holds.",
)
@click.option("--at", type=WAVELENGTH, help="Wavelength to aim real plates at (default: design).")
@click.option("--from", "start", type=WAVELENGTH, help="Band start for the output table.")
@click.option("--to", "stop", type=WAVELENGTH, help="Band end for the output table.")
@click.option(
    "--step",
    type=INTERVAL,
    default=10.0,
    help="Band step, a wavelength interval (a bare number is nm) [default: 10nm].",
)
@extrapolate_option
@json_option
@user_errors
def aim(
    input_deg,
    input_ellipticity,
    input_dop,
    target_azimuth,
    target_axial_ratio,
    target_ellipticity,
    handedness,
    target_stokes,
    plates,
    material,
    construction,
    design,
    order,
    thick_plate,
    partner,
    match,
    at,
    start,
    stop,
    step,
    extrapolate,
    as_json,
):
    """The mount angles of a quarter-wave plate, or of a half-wave then a quarter-wave plate,
    that turn the input state into a target state.

    Example: retol aim --input 10 --target-azimuth 30 --target-axial-ratio 0.5 --handedness right
    --plates hwp+qwp.  Angles are fast-axis angles modulo 180 deg.
    """
    import numpy as np

    from ..aiming import PLATE_SETS, band_states, plate_mounts
    from ..aiming import aim as aim_states
    from ..errors import RetolError
    from ..polarization import input_stokes

    S_in = _renamed(
        input_stokes,
        {"azimuth_deg": "--input", "ellipticity_deg": "--input-ellipticity", "dop": "--input-dop"},
        input_deg,
        input_ellipticity,
        input_dop,
    )
    t = target_vector(
        target_azimuth, target_axial_ratio, target_ellipticity, handedness, target_stokes
    )
    band = _band(start, stop, step)
    design_fn, wl = None, None
    if material is None:
        for opt, value in {
            "--design": design,
            "--at": at,
            "--from/--to": band,
            "--order": order,
            "--thick-plate": thick_plate,
            "--partner": partner,
            "--match": match or None,
        }.items():
            if value is not None:
                raise RetolError(opt, "applies to real plates only", "add --material, e.g. quartz")
    else:
        from .plate import build_plate

        design = at if design is None else design
        where = {"design": "--design", "material": "--material", "partner": "--partner"}

        def design_fn(waves):
            return _renamed(
                build_plate,
                where,
                *(material, construction, waves, design, 0.0),
                *(order, thick_plate, partner, match, None),
            )

        design_fn(0.25)  # checks the options once, before any work

        wl = design if at is None else at
    mounts = plate_mounts(plates, design_fn, extrapolate) if design_fn else None

    names = {"input": "--input-dop", "wavelength": "--at", "design": "--at"}
    result = _renamed(aim_states, names, S_in, t, plates, mounts, wl)
    used = mounts or plate_mounts(plates)
    solutions = []
    for s in result.solutions:
        row = {
            "angles_deg": list(s.angles_deg),
            "output": _state(s.stokes),
            "sphere_angle_deg": s.sphere_angle_deg,
        }
        if band is not None:
            b = _renamed(
                band_states, {"wavelength": "--from/--to"}, S_in, used, s.angles_deg, band, t
            )
            row["band"] = [
                {"wavelength_nm": float(w), **_state(S, t)}
                for w, S in zip(b["wavelength_nm"], b["stokes"], strict=True)
            ]
            row["band_worst_sphere_angle_deg"] = float(np.max(b["sphere_angle_deg"]))
        solutions.append(row)

    out = {
        "solutions": solutions,
        "reachable": bool(result.reachable),
        "reason": result.reason,
        "family": result.family,
        "plates": plates,
        "elements": [m.label for m in used],
        "wavelength_nm": wl,
        "input": _state(S_in),
        "target": _state(np.concatenate([[1.0], t])),
    }
    if as_json:
        echo_json(out)
        return
    _print_human(out, PLATE_SETS[plates].names)


def _print_human(out, names):
    def z(x):
        return 0.0 if abs(x) < 5e-10 else x

    def describe(st):
        if st["handedness"] == "linear":
            return f"linear at {z(st['azimuth_deg']):.4g} deg"
        if st["axial_ratio"] > 1 - 1e-9:
            return f"{st['handedness']}-circular"
        return (
            f"ellipse at {z(st['azimuth_deg']):.4g} deg, axial ratio {st['axial_ratio']:.4g}, "
            f"{st['handedness']}-handed"
        )

    inp = out["input"]
    dop = f" (degree of polarization {inp['dop']:.4g})" if inp["dop"] < 1 - 1e-12 else ""
    at = f" at {out['wavelength_nm']:g} nm" if out["wavelength_nm"] is not None else ""
    click.echo(f"input  {describe(inp)}{dop}")
    click.echo(f"target {describe(out['target'])}")
    click.echo(f"plates {', then '.join(out['elements'])}{at}; fast-axis angles mod 180 deg")
    n = len(out["solutions"])
    if out["reachable"]:
        click.echo(f"reachable: {n} solution{'s' if n != 1 else ''}")
    else:
        click.echo(f"not reachable: {out['reason']}")
        click.echo("closest reachable:")
    if out["family"]:
        click.echo(f"note: {out['family']}")
    rows = [
        [str(k + 1)]
        + [f"{z(a):.4f}" for a in s["angles_deg"]]
        + [
            f"{z(s['output']['azimuth_deg']):.4f}",
            f"{s['output']['axial_ratio']:.5f}",
            s["output"]["handedness"],
            f"{s['sphere_angle_deg']:.2e}" if out["reachable"] else f"{s['sphere_angle_deg']:.4f}",
        ]
        for k, s in enumerate(out["solutions"])
    ]
    header = ["#"] + [f"{nm} [deg]" for nm in names]
    header += ["azimuth [deg]", "axial ratio", "handedness", "sphere angle [deg]"]
    click.echo(table(rows, header))
    worst = [s.get("band_worst_sphere_angle_deg") for s in out["solutions"]]
    if len(worst) > 1 and None not in worst:
        k = min(range(len(worst)), key=worst.__getitem__)
        click.echo(
            f"solution {k + 1} holds the target best over the band: at most {worst[k]:.3g} deg "
            "from it on the Poincare sphere"
        )
    shown = []
    for k, s in enumerate(out["solutions"]):
        if "band" not in s:
            continue
        key = [round(r["sphere_angle_deg"], 9) for r in s["band"]]
        key += [round(r["axial_ratio"], 9) for r in s["band"]]
        if key in shown:  # the same output as an earlier solution (e.g. the hwp turned by 90)
            continue
        shown.append(key)
        click.echo("")
        click.echo(f"over the band, solution {k + 1}:")
        click.echo(
            table(
                [
                    [
                        f"{r['wavelength_nm']:g}",
                        f"{z(r['azimuth_deg']):.3f}",
                        f"{r['axial_ratio']:.4f}",
                        r["handedness"],
                        f"{r['sphere_angle_deg']:.3f}",
                    ]
                    for r in s["band"]
                ],
                [
                    "wavelength [nm]",
                    "azimuth [deg]",
                    "axial ratio",
                    "handedness",
                    "sphere angle [deg]",
                ],
            )
        )
