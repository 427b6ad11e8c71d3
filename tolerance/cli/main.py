"""Entry point of the ``retol`` command; subcommands load lazily so that --help is fast."""

from __future__ import annotations

import importlib
import sys

import click

from ..version import __version__

#: subcommand name -> (module, attribute, one-line help)
SUBCOMMANDS = {
    "materials": ("tolerance.cli.materials", "materials", "List materials or show their indices."),
    "plate": ("tolerance.cli.plate", "plate", "Design a plate and tabulate its retardance."),
    "state": ("tolerance.cli.state", "state", "Push one polarization state through a plate."),
    "aim": ("tolerance.cli.aim", "aim", "Find the mount angles that reach a target state."),
    "run": ("tolerance.cli.run", "run", "Run a spec's Monte Carlo tolerance analysis."),
    "sweep": ("tolerance.cli.sweep", "sweep", "Run a spec at every combination of swept values."),
    "allocate": (
        "tolerance.cli.allocate",
        "allocate",
        "Allocate tolerances to a yield target: alone, balanced, cheapest.",
    ),
    "demo": ("tolerance.cli.demo", "demo", "Run a built-in example and write its report."),
    "design": (
        "tolerance.cli.design",
        "design",
        "Design a candidate's thicknesses, angles, materials or order for a spec.",
    ),
    "report": ("tolerance.cli.report", "report", "Write the report of a saved results grid."),
    "inspect": (
        "tolerance.cli.inspect",
        "inspect",
        "Identify a delivered plate from its measured spectrum; accept or reject it.",
    ),
}


class LazyGroup(click.Group):
    def list_commands(self, ctx):
        return list(SUBCOMMANDS)

    def get_command(self, ctx, name):
        if name not in SUBCOMMANDS:
            return None
        mod, attr, _ = SUBCOMMANDS[name]
        return getattr(importlib.import_module(mod), attr)

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        """Like click's, but a usage mistake is one line on stderr (no usage screen), exit 2."""
        if not standalone_mode:
            return super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        try:
            rv = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        except click.UsageError as exc:
            where = exc.ctx.command_path if exc.ctx is not None else "retol"
            msg = " ".join(exc.format_message().split())
            if "--json" in (args if args is not None else sys.argv[1:]):
                import json

                param = getattr(exc, "param", None)
                field = (param.opts[0] if getattr(param, "opts", None) else where) or where
                click.echo(
                    json.dumps(
                        {"error": {"field": field, "problem": msg, "fix": f"see '{where} --help'"}}
                    )
                )
                sys.exit(2)
            click.echo(f"retol: error: {msg} (see '{where} --help')", err=True)
            sys.exit(2)
        except click.Abort:
            click.echo("retol: error: interrupted; nothing was written", err=True)
            sys.exit(130)
        except click.ClickException as exc:
            click.echo(f"retol: error: {' '.join(exc.format_message().split())}", err=True)
            sys.exit(exc.exit_code)
        sys.exit(rv if isinstance(rv, int) else 0)

    def format_commands(self, ctx, formatter):
        rows = [(name, help_) for name, (_, _, help_) in SUBCOMMANDS.items()]
        with formatter.section("Commands"):
            formatter.write_dl(rows)


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="retol")
def cli():
    """retol: choose and tolerance optical retarders (waveplates).

    Wavelengths take units (632.8nm, 0.6328um); a bare number is nm.  Lengths take units
    (1000um, 1mm); a bare number is um.  Angles are degrees from x, counter-clockwise looking
    toward the source.  Every command has --json for scripts.
    """
