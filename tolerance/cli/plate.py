"""``retol plate``: design a plate of a construction and tabulate its retardance over a band."""

from __future__ import annotations

import click

from .common import (
    FLOAT,
    INTERVAL,
    LENGTH,
    PATH_DIFFERENCE,
    TEMPERATURE,
    WAVELENGTH,
    echo_json,
    extrapolate_option,
    json_option,
    table,
    user_errors,
)

#: The command-line option for a construction key, where it is not simply ``--key``.
OPTION_FOR_KEY = {"layers": "--layer"}


class LayerType(click.ParamType):
    """One layer of a stack, ``MATERIAL:THICKNESS:AXIS``: a material name or file, a thickness
    with a unit (a bare number is µm) and the layer's fast axis [deg].  Gives a layer table."""

    name = "MATERIAL:THICKNESS:AXIS"

    def convert(self, value, param, ctx):
        import math

        from ..dispersion import get_material
        from ..errors import RetolError
        from ..units import length_um

        if isinstance(value, dict):
            return value
        fix = "write --layer MATERIAL:THICKNESS:AXIS, e.g. --layer quartz:1000um:0"
        parts = str(value).rsplit(":", 2)
        if len(parts) != 3 or not all(p.strip() for p in parts):
            self.fail(f"cannot read {value!r} ({fix})", param, ctx)
        material, thickness, axis = (p.strip() for p in parts)
        try:
            get_material(material)
            um = length_um(thickness, "--layer")
        except RetolError as exc:
            self.fail(f"{value!r}: {exc.problem}; {exc.fix}", param, ctx)
        if not um > 0:
            self.fail(f"{value!r}: thickness must be positive ({fix})", param, ctx)
        try:
            axis_deg = float(axis)
        except ValueError:
            self.fail(f"{value!r}: axis {axis!r} is not a number of degrees", param, ctx)
        if not math.isfinite(axis_deg):
            self.fail(f"{value!r}: axis must be a finite angle in degrees", param, ctx)
        return {"material": material, "thickness_um": um, "axis_deg": axis_deg}


LAYER = LayerType()


def plate_options(func):
    """Options that describe a plate; shared by ``plate`` and ``state``."""
    from ..plates import CONSTRUCTIONS

    opts = [
        click.option("--material", help="Material name or material file path, e.g. quartz."),
        click.option(
            "--construction",
            type=click.Choice(list(CONSTRUCTIONS)),
            default="zero-order",
            show_default=True,
            help="Plate construction.",
        ),
        click.option("--design", type=WAVELENGTH, help="Design wavelength, e.g. 632.8nm."),
        click.option(
            "--fast-axis",
            "fast_axis",
            type=FLOAT,
            default=0.0,
            show_default=True,
            help="Fast-axis angle of the plate [deg].",
        ),
        click.option("--order", type=int, help="Order m of a multi-order plate (m + waves)."),
        click.option(
            "--thick-plate",
            "thick_plate",
            type=LENGTH,
            help="Thicker plate of a compound plate, e.g. 1000um.",
        ),
        click.option("--partner", help="Second crystal of an achromatic plate, e.g. mgf2."),
        click.option(
            "--match",
            "match",
            type=WAVELENGTH,
            multiple=True,
            help="Achromat: the two wavelengths where the target holds exactly "
            "(default: value and slope at --design).",
        ),
        click.option(
            "--retardance",
            "retardance_nm",
            type=PATH_DIFFERENCE,
            help="Film: retardance at the design wavelength as a path difference, a length "
            "(a bare number is nm), e.g. 137.5nm.",
        ),
        click.option(
            "--layer",
            "layers",
            type=LAYER,
            multiple=True,
            help="Stack: one layer, MATERIAL:THICKNESS:AXIS (thickness with a unit, bare = um; "
            "fast axis in deg), light meeting the first given first; repeat per layer, "
            "e.g. --layer quartz:1000um:0 --layer quartz:982.5um:90.",
        ),
    ]
    for o in reversed(opts):
        func = o(func)
    return func


def build_plate(
    material,
    construction,
    waves,
    design,
    fast_axis,
    order,
    thick_plate,
    partner,
    match,
    retardance_nm,
    layers=(),
):
    from ..errors import RetolError
    from ..plates import CONSTRUCTIONS, design_plate

    given = {
        "--order": order,
        "--thick-plate": thick_plate,
        "--partner": partner,
        "--match": match or None,
        "--retardance": retardance_nm,
        "--layer": list(layers) or None,
    }
    # the options of a construction are its registry keys, written as options
    applies = {
        n: tuple(OPTION_FOR_KEY.get(k, "--" + k.replace("_", "-")) for k in e.key_names)
        for n, e in CONSTRUCTIONS.items()
    }
    for opt, value in given.items():
        if value is not None and opt not in applies.get(construction, ()):
            raise RetolError(
                opt,
                f"does not apply to a {construction} plate",
                "remove it, or choose the construction it belongs to",
            )
    if match and len(match) != 2:
        raise RetolError("--match", "needs exactly two wavelengths", "give --match twice")
    if waves is not None and waves <= 0:
        raise RetolError("--waves", f"must be positive, got {waves:g}", "e.g. --waves 0.25")
    if construction == "stack":
        if not layers:
            raise RetolError(
                "--layer",
                "a stack needs at least one layer",
                "give --layer MATERIAL:THICKNESS:AXIS once per layer, e.g. --layer quartz:1000um:0",
            )
        if design is None:
            raise RetolError(
                "--design",
                "a stack has no design wavelength of its own",
                "give --design (retol state: or --at), e.g. --design 632.8nm",
            )
        if material is not None:
            raise RetolError(
                "--material",
                "does not apply to a stack plate",
                "name each layer's material in --layer",
            )
        return design_plate(
            "stack",
            waves=None,
            design_nm=design,
            axis_deg=fast_axis,
            layers=[dict(la) for la in layers],
            name=f"stack of {len(layers)} layer{'s' if len(layers) != 1 else ''}",
        )
    return design_plate(
        construction,
        material=material,
        waves=waves,
        design_nm=design,
        axis_deg=fast_axis,
        order=order,
        thick_plate_um=thick_plate,
        partner=partner,
        match_nm=list(match) if match else None,
        retardance_nm=retardance_nm,
    )


@click.command()
@plate_options
@click.option(
    "--waves",
    type=FLOAT,
    default=0.25,
    show_default=True,
    help="Target retardance [waves] (beyond the order for multi-order).",
)
@click.option("--from", "start", type=WAVELENGTH, help="Band start for the table.")
@click.option("--to", "stop", type=WAVELENGTH, help="Band end for the table.")
@click.option(
    "--step",
    type=INTERVAL,
    default=10.0,
    help="Band step, a wavelength interval (a bare number is nm) [default: 10nm].",
)
@click.option("--temperature", type=TEMPERATURE, default=None, help="Plate temperature [C].")
@click.option(
    "--crossing",
    type=FLOAT,
    default=0.0,
    show_default=True,
    help="Axis error of the second and later plates of a multi-plate construction [deg].",
)
@click.option(
    "--faces",
    default="ideal",
    show_default=True,
    help="Plate faces: ideal, uncoated, a power reflectance per face (e.g. 0.0025), or a CSV "
    "file of wavelength_nm,reflectance.",
)
@click.option("--air-gap", "air_gap", is_flag=True, help="Air gaps between the plates' layers.")
@click.option("--mueller", is_flag=True, help="Also give the Mueller matrix at each wavelength.")
@extrapolate_option
@json_option
@user_errors
def plate(
    material,
    construction,
    waves,
    design,
    fast_axis,
    order,
    thick_plate,
    partner,
    match,
    retardance_nm,
    layers,
    start,
    stop,
    step,
    temperature,
    crossing,
    faces,
    air_gap,
    mueller,
    extrapolate,
    as_json,
):
    """Design a plate and tabulate its retardance (waves and degrees) over a band.

    Example: retol plate --material quartz --construction zero-order --waves 0.25 --design 632.8nm
    """
    import numpy as np

    from ..equivalent import plate_equivalent
    from ..errors import RetolError
    from ..etalon import parse_faces
    from ..plates import plate_retardance
    from ..polarization import jones_to_mueller

    face_model = parse_faces(faces, "--faces")

    p = build_plate(
        material,
        construction,
        waves,
        design,
        fast_axis,
        order,
        thick_plate,
        partner,
        match,
        retardance_nm,
        layers,
    )
    if start is None and stop is None:
        wl = np.array([p.design_nm])
    else:
        if start is None or stop is None:
            raise RetolError(
                "--from/--to", "give both ends of the band", "e.g. --from 400nm --to 700nm"
            )
        if stop < start:
            raise RetolError("--to", "must not be below --from", "swap them")
        if step <= 0:
            raise RetolError("--step", "must be positive", "e.g. --step 10nm")
        n = int(np.floor((stop - start) / step + 1e-9)) + 1
        wl = start + step * np.arange(n)
    if any(abs(((la.axis_deg - p.axis_deg) + 45.0) % 90.0 - 45.0) > 1e-9 for la in p.layers):
        import warnings

        warnings.warn(
            "the layers are neither parallel nor crossed: the table gives the retardance "
            "projected on the plate's fast axis (sum of cos 2(layer axis - fast axis) times "
            "each layer's retardance); see retol state for the output state",
            stacklevel=1,
        )
    from ..etalon import check_faces_cover

    check_faces_cover(face_model, float(np.min(wl)), float(np.max(wl)), "--faces", "the band")
    delta = plate_retardance(p, wl, temperature_c=temperature, extrapolate=extrapolate)
    eq, J = plate_equivalent(
        p, wl, face_model, air_gap, crossing, temperature_c=temperature, extrapolate=extrapolate
    )
    simple = p.aligned() and crossing == 0.0 and face_model.ideal
    # the layer projection is exact for aligned ideal plates; otherwise the equivalent retarder
    w = (delta if simple else eq.retardance_rad) / (2 * np.pi)
    M = jones_to_mueller(J) if mueller else None
    layers = [
        {
            "material": la.material.name,
            "thickness_um": float(la.thickness_um),
            "axis_deg": float(la.axis_deg),
            "kind": la.material.kind,
            "fast_axis_is": (
                "optic axis"
                if la.material.negative
                else "across the stretch direction"
                if la.material.kind == "film"
                else "perpendicular to optic axis"
            ),
        }
        for la in p.layers
    ]
    rows = [
        {
            "wavelength_nm": float(x),
            "retardance_waves": float(y),
            "retardance_deg": float(y * 360.0),
            "equivalent_retardance_waves": float(eq.retardance_rad[i] / (2 * np.pi)),
            "equivalent_fast_axis_deg": float(eq.fast_axis_deg[i]),
            "rotation_deg": float(eq.rotation_deg[i]),
        }
        for i, (x, y) in enumerate(zip(wl, w, strict=True))
    ]
    if M is not None:
        for r, m in zip(rows, M, strict=True):
            r["mueller"] = m.tolist()
    if as_json:
        echo_json(
            {
                "construction": p.construction,
                "design_nm": p.design_nm,
                "waves": p.waves,
                "fast_axis_deg": p.axis_deg,
                "details": p.details,
                "faces": face_model.to_spec(),
                "air_gap": bool(air_gap),
                "crossing_deg": float(crossing),
                "layers": layers,
                "table": rows,
            }
        )
        return
    where = (
        " and ".join(f"{x:g}" for x in match) + " nm (matched)" if match else f"{p.design_nm:g} nm"
    )
    if p.construction == "stack":
        click.echo(f"{p.name}, design {p.design_nm:g} nm, fast axis {p.axis_deg:g} deg")
    else:
        click.echo(
            f"{p.construction} plate, target {p.waves:g} waves at {where}, "
            f"fast axis {p.axis_deg:g} deg"
        )
    click.echo(
        table(
            [
                [
                    la["material"],
                    f"{la['thickness_um']:.3f}",
                    f"{la['axis_deg']:g}",
                    la["fast_axis_is"],
                ]
                for la in layers
            ],
            ["layer material", "thickness [um]", "fast axis [deg]", "fast axis lies"],
        )
    )
    click.echo("")
    head = ["wavelength [nm]", "retardance [waves]", "retardance [deg]"]
    if not simple:
        head += ["equivalent fast axis [deg]", "rotation [deg]"]
    click.echo(
        table(
            [
                [
                    f"{r['wavelength_nm']:g}",
                    f"{r['retardance_waves']:.5f}",
                    f"{r['retardance_deg']:.3f}",
                ]
                + (
                    []
                    if simple
                    else [f"{r['equivalent_fast_axis_deg']:.3f}", f"{r['rotation_deg']:.3f}"]
                )
                for r in rows
            ],
            head,
        )
    )
    if M is not None:
        for r in rows:
            click.echo(f"\nMueller matrix at {r['wavelength_nm']:g} nm:")
            for line in r["mueller"]:
                click.echo("  " + "  ".join(f"{v:+.5f}" for v in line))
