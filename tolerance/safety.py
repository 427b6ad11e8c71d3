"""The safety caution printed with every report: which standard applies to the source given.

retol predicts polarization only; it assesses no hazard.  The caution names the standard that
applies to the kind of source the spec describes, keeps the sentence on eyewear and defers to
local rules and the safety officer, and adds a line on laser-induced damage when a polymer film
or a cemented plate is a candidate for a pulsed (or possibly high-power) laser.

References
----------
.. [1] IEC 60825-1:2014, "Safety of laser products - Part 1: Equipment classification and
   requirements"; ANSI Z136.1-2022, "Safe Use of Lasers".
.. [2] IEC 62471:2006 (CIE S 009:2002), "Photobiological safety of lamps and lamp systems"
   (LEDs are assessed as lamps under it).
.. [3] ISO 21254-1:2011, "Lasers and laser-related equipment - Test methods for laser-induced
   damage threshold - Part 1: Definitions and general principles".
"""

from __future__ import annotations

#: Source shapes that describe a laser (``sech2`` is a pulse train).
LASER_SHAPES = ("laser", "sech2")
PULSED_SHAPES = ("sech2",)
#: Shapes of broadband emitters: lamps, LEDs, measured broadband spectra.
LAMP_SHAPES = ("flat", "mixture", "file")
#: Constructions that are, or are usually, cemented or polymer (common practice).
FILM_CONSTRUCTIONS = ("film",)
CEMENTED_CONSTRUCTIONS = ("compound", "achromatic", "stack")
POLYMER_MATERIALS = ("polycarbonate", "pva")

_DOWNSTREAM = (
    "retol predicts polarization states only; it does not assess optical hazards. A retarder "
    "changes what reflects where downstream: back-reflections may pass polarizing optics or an "
    "optical isolator that would otherwise stop them, and a polarizing beam splitter may send "
    "power out of its other port."
)
_LASER = (
    "For this laser source, before a new, re-clocked or re-tilted plate goes into the beam, have "
    "the set-up reviewed under IEC 60825-1 or ANSI Z136.1, as applies where you work."
)
_LAMP = (
    "For this broadband source (a lamp or LED), photobiological safety is assessed under "
    "IEC 62471 (lamps and lamp systems), not the laser standards; have a changed set-up "
    "reviewed under it, as applies where you work."
)
_EITHER = (
    "Which standard applies depends on the emitter of this spectrum: IEC 60825-1 or ANSI Z136.1 "
    "for a laser or superluminescent diode, IEC 62471 for an LED or lamp; have a changed "
    "set-up reviewed under the one that applies where you work."
)
_EYEWEAR = (
    "Follow your local rules, consult the site's laser safety officer (or optical radiation "
    "safety officer), and wear the eyewear they specify when aligning."
)


def source_kind(shape: str) -> str:
    """``"laser"``, ``"lamp"`` or ``"either"`` for a ``[source] shape``."""
    if shape in LASER_SHAPES:
        return "laser"
    if shape in LAMP_SHAPES:
        return "lamp"
    return "either"


def damage_line(shape: str, candidates) -> str | None:
    """The laser-damage sentence, or None when no film or cemented plate meets a laser.

    ``candidates`` is a sequence of (name, construction, materials).
    """
    if shape not in LASER_SHAPES:
        return None
    weak = [
        name
        for name, cons, mats in candidates
        if cons in FILM_CONSTRUCTIONS + CEMENTED_CONSTRUCTIONS
        or any(m.lower() in POLYMER_MATERIALS for m in mats)
    ]
    if not weak:
        return None
    how = "this pulsed source" if shape in PULSED_SHAPES else "a pulsed or high-power laser"
    return (
        f"Laser-induced damage: {', '.join(weak)} "
        f"{'is a' if len(weak) == 1 else 'are'} polymer film or possibly cemented "
        f"plate{'' if len(weak) == 1 else 's'}; films and cements have far lower damage "
        f"thresholds than bare crystal. For {how}, check the supplier's damage threshold "
        "(tested per ISO 21254) against the peak fluence and average power density at the plate."
    )


def caution(shape: str, candidates=()) -> str:
    """The whole caution for a source shape and its candidates, as one paragraph."""
    kind = source_kind(shape)
    body = {"laser": _LASER, "lamp": _LAMP, "either": _EITHER}[kind]
    parts = [_DOWNSTREAM, body, _EYEWEAR]
    extra = damage_line(shape, candidates)
    if extra:
        parts.append(extra)
    return " ".join(parts)
