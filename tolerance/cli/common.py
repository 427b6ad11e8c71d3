"""Options and error handling shared by every subcommand."""

from __future__ import annotations

import functools
import json
import sys
import warnings

import click

from ..errors import RetolError


def _label(param) -> str:
    """The option's flag as the user typed it (e.g. --retardance), for error messages."""
    if param is None:
        return "value"
    opts = getattr(param, "opts", None)
    return opts[0] if opts else param.name


class WavelengthType(click.ParamType):
    """A wavelength with a unit (632.8nm, 0.6328um); a bare number is nm.  Gives nm."""

    name = "wavelength"

    def convert(self, value, param, ctx):
        from ..units import wavelength_nm

        if isinstance(value, float):
            return value
        try:
            return wavelength_nm(value, _label(param))
        except RetolError as exc:
            self.fail(str(exc), param, ctx)


class IntervalType(WavelengthType):
    """A wavelength step (10nm, 0.01um); a bare number is nm.  Gives nm."""

    name = "interval"


class PathDifferenceType(WavelengthType):
    """A retardance as an optical path difference, a length (137.5nm); a bare number is nm."""

    name = "length"


class LengthType(click.ParamType):
    """A length with a unit (1000um, 1mm); a bare number is µm.  Gives µm."""

    name = "length"

    def convert(self, value, param, ctx):
        from ..units import length_um

        if isinstance(value, float):
            return value
        try:
            return length_um(value, _label(param))
        except RetolError as exc:
            self.fail(str(exc), param, ctx)


class FiniteFloat(click.ParamType):
    """A finite real number (no nan or inf)."""

    name = "number"

    def convert(self, value, param, ctx):
        import math

        try:
            v = float(value)
        except (TypeError, ValueError):
            self.fail(f"{_label(param)}: {value!r} is not a number", param, ctx)
        if not math.isfinite(v):
            self.fail(f"{_label(param)}: must be a finite number, got {value!r}", param, ctx)
        return v


class BoundedFloat(FiniteFloat):
    """A finite number inside physical bounds (strict where ``strict``), with the fix to show."""

    def __init__(self, name, low=None, high=None, strict=(False, False), fix=""):
        self.name, self.low, self.high, self.strict, self.fix = name, low, high, strict, fix

    def convert(self, value, param, ctx):
        v = super().convert(value, param, ctx)
        below = self.low is not None and (v <= self.low if self.strict[0] else v < self.low)
        above = self.high is not None and (v >= self.high if self.strict[1] else v > self.high)
        if below or above:
            self.fail(f"{_label(param)}: {v:g} is out of range ({self.fix})", param, ctx)
        return v


FLOAT = FiniteFloat()
#: A temperature [C]: above absolute zero (-273.15 C).
TEMPERATURE = BoundedFloat(
    "temperature",
    low=-273.15,
    strict=(True, False),
    fix="a temperature in C above absolute zero, -273.15 C",
)
#: An angle of incidence [deg]: light must enter the plate, so |tilt| < 90 deg.
TILT = BoundedFloat(
    "angle",
    low=-90.0,
    high=90.0,
    strict=(True, True),
    fix="an angle of incidence in degrees, between -90 and 90 exclusive",
)
WAVELENGTH = WavelengthType()
INTERVAL = IntervalType()
PATH_DIFFERENCE = PathDifferenceType()
LENGTH = LengthType()


class FormatChoice(click.Choice):
    """A figure file format; the help lists the choices, an unknown one says which exist."""

    def convert(self, value, param, ctx):
        try:
            return super().convert(value, param, ctx)
        except click.BadParameter:
            self.fail(
                f"unknown figure format {value!r}; use one of {', '.join(self.choices)}",
                param,
                ctx,
            )


#: Figure file formats of the report (``tolerance.plots.FORMATS``); the help lists them.
FIGURE_FORMAT = FormatChoice(["png", "svg", "pdf"], case_sensitive=False)

json_option = click.option("--json", "as_json", is_flag=True, help="Print JSON for scripts.")
extrapolate_option = click.option(
    "--extrapolate", is_flag=True, help="Allow wavelengths outside a formula's valid range (warns)."
)


def fail(message: str, code: int = 2):
    """Print one line on stderr and exit non-zero, with no traceback."""
    click.echo(f"retol: error: {message}", err=True)
    sys.exit(code)


def json_error(field: str, problem: str, fix: str | None, code: int = 2):
    """Under --json: the error as JSON on stdout, ``{"error": {field, problem, fix}}``; exit."""
    click.echo(json.dumps({"error": {"field": field, "problem": problem, "fix": fix}}))
    sys.exit(code)


def _wants_json() -> bool:
    ctx = click.get_current_context(silent=True)
    return bool(ctx is not None and ctx.params.get("as_json"))


def user_errors(func):
    """Turn package errors into a one-line message and a non-zero exit; warnings go to stderr."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        def show(message, category, filename, lineno, file=None, line=None):
            click.echo(f"retol: warning: {message}", err=True)

        old = warnings.showwarning
        warnings.showwarning = show
        try:
            return func(*args, **kwargs)
        except RetolError as exc:
            if _wants_json():
                json_error(exc.field, exc.problem, exc.fix)
            fail(str(exc))
        except KeyboardInterrupt as exc:  # Ctrl-C, or SIGTERM / SIGHUP (tolerance.publish)
            from ..publish import interrupt_message

            text, code = interrupt_message(exc)
            if _wants_json():
                json_error("run", text, None, code=code)
            fail(text, code=code)
        finally:
            warnings.showwarning = old

    return wrapper


def _clean(obj):
    """JSON has no NaN or infinity: write them as null."""
    if isinstance(obj, float) and not (obj == obj and abs(obj) != float("inf")):
        return None
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    return obj


def echo_json(obj):
    """Print an object as JSON for scripts (NaN and infinity as null)."""
    click.echo(json.dumps(_clean(obj), indent=2, allow_nan=False, default=float))


def table(rows: list[list], header: list[str]) -> str:
    """A plain aligned text table; a column of numbers is right-aligned."""
    cells = [[str(h) for h in header]] + [[str(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(header))]
    numeric = [bool(rows) and all(_num(r[i]) for r in cells[1:]) for i in range(len(header))]
    lines = []
    for k, r in enumerate(cells):
        lines.append(
            "  ".join(
                c.rjust(w) if k and numeric[i] else c.ljust(w)
                for i, (c, w) in enumerate(zip(r, widths, strict=True))
            ).rstrip()
        )
        if k == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


def _num(s: str) -> bool:
    try:
        float(s.split()[0])
        return True
    except (ValueError, IndexError):
        return False
