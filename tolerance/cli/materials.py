"""``retol materials``: list materials, or show their indices at wavelengths."""

from __future__ import annotations

import click

from .common import (
    TEMPERATURE,
    WAVELENGTH,
    echo_json,
    extrapolate_option,
    json_option,
    table,
    user_errors,
)


@click.group(invoke_without_command=True)
@json_option
@click.pass_context
@user_errors
def materials(ctx, as_json):
    """List the built-in materials: kind, valid range and published source."""
    if ctx.invoked_subcommand is not None:
        return
    from ..dispersion import list_materials

    mats = list_materials()
    if as_json:
        echo_json(
            [
                {
                    "name": m.name,
                    "kind": m.kind,
                    "min_nm": m.valid_min_nm,
                    "max_nm": m.valid_max_nm,
                    "source": m.source,
                }
                for m in mats
            ]
        )
        return
    rows = [
        [m.name, m.kind, f"{m.valid_min_nm:g}-{m.valid_max_nm:g} nm", m.source[:70]] for m in mats
    ]
    click.echo(table(rows, ["name", "kind", "valid range", "source"]))


@materials.command("show")
@click.argument("name")
@click.option(
    "--at",
    "at",
    type=WAVELENGTH,
    multiple=True,
    required=True,
    help="Wavelength (repeatable), e.g. 589.3nm.",
)
@click.option(
    "--temperature",
    type=TEMPERATURE,
    default=None,
    help="Temperature [C]; default the material's reference temperature.",
)
@extrapolate_option
@json_option
@user_errors
def show(name, at, temperature, extrapolate, as_json):
    """Indices n_o, n_e and birefringence of material NAME (or a material file path).

    With --temperature the birefringence is the effective value that reproduces a plate's
    retardance at that temperature (the measured retardance coefficient, expansion included);
    n_o is kept at its reference value.
    """
    import numpy as np

    from ..dispersion import get_material, indices, thermal_factor

    m = get_material(name)
    wl = np.array(at, dtype=float)
    from ..dispersion import check_range

    check_range(m, wl, extrapolate=extrapolate, field="--at")
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        n_o, n_e = indices(m, wl, extrapolate=extrapolate)
    t = m.reference_temperature_c if temperature is None else float(temperature)
    dn = (n_e - n_o) * thermal_factor(m, t)
    n_e = n_o + dn
    rows = [
        {
            "material": m.name,
            "wavelength_nm": float(w),
            "temperature_c": t,
            "n_o": float(o),
            "n_e": float(e),
            "birefringence": float(d),
        }
        for w, o, e, d in zip(wl, n_o, n_e, dn, strict=True)
    ]
    if as_json:
        echo_json(rows)
        return
    click.echo(
        table(
            [
                [
                    r["material"],
                    f"{r['wavelength_nm']:g}",
                    f"{t:g}",
                    f"{r['n_o']:.6f}",
                    f"{r['n_e']:.6f}",
                    f"{r['birefringence']:+.6f}",
                ]
                for r in rows
            ],
            ["material", "wavelength [nm]", "T [C]", "n_o", "n_e", "n_e - n_o"]
            if t == m.reference_temperature_c
            else [
                "material",
                "wavelength [nm]",
                "T [C]",
                "n_o (ref.)",
                "n_e (eff.)",
                "n_e - n_o (eff.)",
            ],
        )
    )
    if t != m.reference_temperature_c:
        click.echo(
            f"(eff.: the birefringence that gives a plate's retardance at {t:g} C through the "
            f"retardance coefficient {m.retardance_temperature_coefficient:g}/K, expansion "
            f"included; n_o held at its {m.reference_temperature_c:g} C value)"
        )
    click.echo(f"source: {m.source}")
