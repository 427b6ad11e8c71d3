"""Make the built-in example lot of measured spectra (invented data) for ``retol inspect``.

Run from the repository root: ``python tests/make_inspection_lot.py``.  It writes the CSV files
beside ``tolerance/examples/inspection/lot_qwp_780.toml``: six multi-order quartz quarter-wave
plates (order 10 at 780 nm) measured between crossed polarizers, plate at 45 deg, 600-950 nm,
with 0.5 % noise, and one plate measured with a polarimeter (retardance in degrees, modulo one
wave).  The plates' true thicknesses and axis offsets are invented and printed in each file's
comment so that a reader can compare them with what ``retol inspect`` finds.

The spectra use this package's own dispersion (Ghosh 1999 quartz) and Jones matrices: they are
demonstration data, not a check of the fit (tests/test_inspection.py checks it with independent
code).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from tolerance.dispersion import get_material
from tolerance.inspection import transmission
from tolerance.plates import design_plate
from tolerance.retardance import layer_retardance

HERE = Path(__file__).resolve().parent.parent / "tolerance" / "examples" / "inspection"
#: file -> (thickness deviation [um], axis offset [deg], sigma column?, note)
PLATES = {
    "plate_01.csv": (+0.21, 0.4, True, "good plate"),
    "plate_02.csv": (-0.34, -1.2, True, "good plate"),
    "plate_03.csv": (+0.62, 0.8, True, "good plate"),
    "plate_04.csv": (-0.08, 2.5, False, "good thickness, axis 2.5 deg off its mark"),
    "plate_05.csv": (+1.00, 0.3, True, "on the thickness limit"),
    "plate_06.csv": (None, 0.6, True, "order 9 delivered instead of order 10"),
}


def main():
    rng = np.random.default_rng(20240601)
    quartz = get_material("quartz")
    nominal = design_plate("multi-order", "quartz", 0.25, 780.0, axis_deg=45, order=10)
    d_nom = nominal.layers[0].thickness_um
    wl = np.arange(600.0, 950.1, 2.0)
    noise = 0.005
    for name, (dev, offset, with_sigma, note) in PLATES.items():
        if dev is None:
            d = design_plate("multi-order", "quartz", 0.25, 780.0, order=9).layers[0].thickness_um
            d += 0.15
        else:
            d = d_nom + dev
        delta = layer_retardance(quartz, d, wl)
        t = transmission(delta[None], np.full((1, 1), 45.0 + offset), "crossed")
        y = t + rng.normal(0.0, noise, wl.size)
        head = [
            f"# Invented example ({note}): quartz plate {d:.4f} um, axis {offset:+.1f} deg from",
            "# the nominal 45 deg, crossed polarizers, 0.5 % noise (tests/make_inspection_lot.py).",
        ]
        cols = "wavelength_nm,transmission" + (",sigma" if with_sigma else "")
        body = [
            f"{w:.1f},{v:.5f}" + (f",{noise:.4f}" if with_sigma else "")
            for w, v in zip(wl, y, strict=True)
        ]
        (HERE / name).write_text("\n".join(head + [cols] + body) + "\n", encoding="utf-8")
    # a polarimeter reading of a seventh plate: retardance in degrees, modulo 360
    d = d_nom + 0.41
    wl = np.arange(620.0, 940.1, 4.0)
    deg = np.degrees(layer_retardance(quartz, d, wl)) + rng.normal(0.0, 0.5, wl.size)
    head = [
        f"# Invented example: polarimeter reading of a quartz plate {d:.4f} um, retardance",
        "# modulo one wave in degrees, 0.5 deg noise (tests/make_inspection_lot.py).",
    ]
    body = [f"{w:.1f},{v % 360.0:.3f},0.5" for w, v in zip(wl, deg, strict=True)]
    (HERE / "plate_07_polarimeter.csv").write_text(
        "\n".join(head + ["wavelength_nm,retardance_deg,sigma"] + body) + "\n", encoding="utf-8"
    )


if __name__ == "__main__":
    main()
