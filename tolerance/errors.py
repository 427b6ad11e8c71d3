"""Errors that reach a user: one line that names the field and the fix."""

from __future__ import annotations


class RetolError(ValueError):
    """A user mistake in an input (spec, option, data file).

    The message is a single line naming the offending field and how to fix it; the CLI prints it
    without a traceback and exits non-zero.
    """

    def __init__(self, field: str, problem: str, fix: str | None = None):
        self.field = field
        self.problem = problem
        self.fix = fix
        text = f"{field}: {problem}"
        if fix:
            text += f" ({fix})"
        super().__init__(text)


class OutOfRangeError(RetolError):
    """A wavelength outside a dispersion formula's range of validity."""
