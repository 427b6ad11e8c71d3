"""``retol state``: push one linear polarization state through a plate."""

from __future__ import annotations

import click

from .common import (
    FLOAT,
    TEMPERATURE,
    TILT,
    WAVELENGTH,
    echo_json,
    extrapolate_option,
    json_option,
    user_errors,
)
from .plate import build_plate, plate_options


@click.command()
@click.option(
    "--waves",
    type=FLOAT,
    default=None,
    help="Retardance of an ideal plate [waves]; or describe a real plate with --material.",
)
@click.option(
    "--input",
    "input_deg",
    type=FLOAT,
    default=0.0,
    show_default=True,
    help="Azimuth of the linear input [deg].",
)
@plate_options
@click.option("--at", "at", type=WAVELENGTH, help="Wavelength for a real plate (default: design).")
@click.option("--tilt", type=TILT, default=0.0, show_default=True, help="Angle of incidence [deg].")
@click.option(
    "--tilt-azimuth",
    "tilt_azimuth",
    type=FLOAT,
    default=0.0,
    show_default=True,
    help="Azimuth of the plane of incidence from x [deg].",
)
@click.option("--temperature", type=TEMPERATURE, default=None, help="Plate temperature [C].")
@click.option(
    "--target",
    default=None,
    help="Also give the fidelity to a target state: right, left, or a linear azimuth in degrees.",
)
@click.option(
    "--analyzer",
    type=FLOAT,
    default=None,
    help="Also give the extinction ratio through a linear analyzer at this angle [deg].",
)
@extrapolate_option
@json_option
@user_errors
def state(
    waves,
    input_deg,
    material,
    construction,
    design,
    fast_axis,
    order,
    thick_plate,
    partner,
    match,
    retardance_nm,
    layers,
    at,
    tilt,
    tilt_azimuth,
    temperature,
    target,
    analyzer,
    extrapolate,
    as_json,
):
    """The output polarization ellipse of linear input through a plate.

    Ideal plate: retol state --waves 0.25 --fast-axis 30 --input 10.
    Real plate: retol state --material quartz --construction zero-order --design 633nm --at 650nm.
    """
    import numpy as np

    from ..errors import RetolError
    from ..plates import plate_jones
    from ..polarization import (
        analyzer_extinction_db,
        ellipse,
        handedness_name,
        jones_to_stokes,
        linear_jones,
        retarder_jones,
        rotation_name,
    )

    E_in = linear_jones(input_deg)
    if material is None and construction != "stack":
        if waves is None:
            raise RetolError(
                "--waves", "give --waves for an ideal plate, or --material", "e.g. --waves 0.25"
            )
        if waves <= 0:
            raise RetolError("--waves", f"must be positive, got {waves:g}", "e.g. --waves 0.25")
        if tilt or temperature is not None:
            raise RetolError("--tilt/--temperature", "need a real plate", "add --material")
        J = retarder_jones(2 * np.pi * waves, fast_axis)
        label = f"ideal {waves:g}-wave plate"
    else:
        if design is None and at is not None:
            design = at
        p = build_plate(
            material,
            construction,
            0.25 if waves is None else waves,
            design,
            fast_axis,
            order,
            thick_plate,
            partner,
            match,
            retardance_nm,
            layers,
        )
        wl = p.design_nm if at is None else at
        J = plate_jones(
            p,
            wl,
            temperature_c=temperature,
            aoi_deg=tilt,
            incidence_azimuth_deg=tilt_azimuth,
            extrapolate=extrapolate,
        )
        label = (
            f"{p.name} at {wl:g} nm"
            if p.construction == "stack"
            else f"{p.construction} {material} plate at {wl:g} nm"
        )
    S = jones_to_stokes(J @ E_in)
    S = S / S[0]
    e = ellipse(S)
    out = {
        "azimuth_deg": float(e["azimuth_deg"]) + 0.0,  # + 0.0 turns -0.0 into 0.0
        "ellipticity_angle_deg": float(e["ellipticity_angle_deg"]) + 0.0,
        "axial_ratio": float(e["axial_ratio"]) + 0.0,
        "rotation": rotation_name(e["rotation"]),
        "handedness": handedness_name(e["rotation"]),
        "stokes": [float(x) + 0.0 for x in S],
    }
    if analyzer is not None:
        from ..polarization import EXTINCTION_CAP_DB

        out["extinction_db"] = float(analyzer_extinction_db(S, analyzer))
        # the value is the cap: the true ratio is at least this large (in magnitude)
        out["extinction_at_cap"] = abs(out["extinction_db"]) >= EXTINCTION_CAP_DB - 1e-9
    if target is not None:
        import math

        from ..polarization import fidelity, goal_vector

        t = target.strip().lower()
        if t in ("right", "left"):
            g = goal_vector("circular", handedness=1 if t == "right" else -1)
        else:
            try:
                azimuth = float(t)
                if not math.isfinite(azimuth):
                    raise ValueError(t)
                g = goal_vector("linear", azimuth)
            except ValueError:
                raise RetolError(
                    "--target", f"cannot read {target!r}", "use right, left or an angle in degrees"
                ) from None
        out["fidelity"] = float(fidelity(S, g))
    if as_json:
        echo_json(out)
        return
    click.echo(f"{label}, fast axis {fast_axis:g} deg, linear input at {input_deg:g} deg")

    def z(x):
        return 0.0 if abs(x) < 5e-13 else x  # no "-0.0000" for round-off

    circular = out["axial_ratio"] > 1 - 1e-9
    az = "undefined (circular)" if circular else f"{z(out['azimuth_deg']):9.4f} deg"
    click.echo(f"  major-axis azimuth   {az}")
    click.echo(f"  ellipticity angle    {z(out['ellipticity_angle_deg']):9.4f} deg")
    click.echo(f"  axial ratio b/a      {z(out['axial_ratio']):9.5f}")
    if out["rotation"] == "linear":
        click.echo("  rotation             none (linear polarization)")
    else:
        click.echo(
            f"  rotation             {out['rotation']} looking toward the source "
            f"({out['handedness']}-handed)"
        )
    click.echo("  Stokes [S0 S1 S2 S3] " + " ".join(f"{z(x):+.5f}" for x in out["stokes"]))
    if target is not None:
        click.echo(f"  fidelity to {target:<10s}   {out['fidelity']:9.6f}")
    if analyzer is not None:
        click.echo(
            f"  extinction through a linear analyzer at {analyzer:g} deg: "
            + _extinction_words(out["extinction_db"])
        )


def _extinction_words(db: float) -> str:
    """An extinction ratio for the terminal; at the cap it is a bound, not a value.

    ``polarization.extinction_db`` caps an exact match at ``EXTINCTION_CAP_DB`` (a pure state
    through an ideal analyzer is infinite), so a capped value reads "above 150 dB".
    """
    from ..polarization import EXTINCTION_CAP_DB

    if db >= EXTINCTION_CAP_DB - 1e-9:
        return f"above {EXTINCTION_CAP_DB:g} dB"
    if db <= -EXTINCTION_CAP_DB + 1e-9:
        return f"below -{EXTINCTION_CAP_DB:g} dB (the analyzer blocks the state)"
    return f"{db:.2f} dB"
