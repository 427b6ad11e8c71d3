"""``retol demo``: run a built-in example spec and write its report."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import click

from .common import FIGURE_FORMAT, echo_json, table, user_errors

DEFAULT = "sld-circular"


def examples() -> dict[str, tuple[str, str]]:
    """Built-in examples: name -> (file name, title)."""
    import tomllib

    out = {}
    for entry in sorted(resources.files("tolerance.examples").iterdir(), key=lambda e: e.name):
        if entry.name.endswith(".toml"):
            with entry.open("rb") as f:
                title = tomllib.load(f).get("title", "")
            out[entry.name[:-5].replace("_", "-")] = (entry.name, title)
    return out


@click.command()
@click.argument("name", required=False, default=None)
@click.option("--list", "list_", is_flag=True, help="List the built-in examples.")
@click.option(
    "--spec-only",
    is_flag=True,
    help="Write the example's spec file (a starting point) instead of running it.",
)
@click.option(
    "--out",
    type=click.Path(path_type=Path),
    help="Output folder [default: ./reports/demo/ for a plain 'retol demo', ./reports/NAME/ "
    "when NAME is given] (with --spec-only: the file).",
)
@click.option("--force", is_flag=True, help="Replace an existing output.")
@click.option("--samples", type=int, help="Monte Carlo samples (default: the example's).")
@click.option(
    "--format",
    "formats",
    multiple=True,
    type=FIGURE_FORMAT,
    default=("png",),
    show_default=True,
    help="Figure format for the report: png, svg or pdf (repeatable).",
)
@click.option("--json", "as_json", is_flag=True, help="Print JSON for scripts.")
@user_errors
def demo(name, list_, spec_only, out, force, samples, formats, as_json):
    """Run built-in example NAME (default sld-circular) and write its report."""
    from ..errors import RetolError

    named = name is not None
    name = name if named else DEFAULT
    ex = examples()
    if list_:
        if as_json:
            echo_json([{"name": k, "title": t} for k, (_, t) in ex.items()])
        else:
            click.echo(table([[k, t] for k, (_, t) in ex.items()], ["example", "scenario"]))
        return
    if name not in ex:
        import difflib

        close = difflib.get_close_matches(name, list(ex), n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise RetolError("NAME", f"no built-in example {name!r}", f"{hint}see retol demo --list")
    fname = ex[name][0]
    text = resources.files("tolerance.examples").joinpath(fname).read_text(encoding="utf-8")
    if spec_only:
        target = Path(out) if out else Path(f"{name}.toml")
        if target.is_dir():
            target = target / f"{name}.toml"
        if target.exists() and not force:
            raise RetolError("--out", f"{str(target)!r} exists", "pass --force or choose another")
        tmp = target.with_name(f".{target.name}.part")
        try:
            target.parent.mkdir(parents=True, exist_ok=True)
            tmp.write_text(text, encoding="utf-8")
            tmp.replace(target)
        except OSError as exc:
            tmp.unlink(missing_ok=True)
            raise RetolError(
                "--out", f"cannot write {str(target)!r} ({exc.strerror})", "choose a writable place"
            ) from None
        if as_json:
            echo_json({"example": name, "spec": str(target), "run": f"retol run {target}"})
        else:
            click.echo(f"wrote {target}; run it with: retol run {target}")
        return
    from ..spec import loads
    from .run import check_formats, execute

    check_formats(formats)
    spec = loads(text, f"{name}.toml", base_dir=Path(str(resources.files("tolerance.examples"))))
    # a plain `retol demo` writes reports/demo/; `retol demo NAME` writes reports/NAME/, so no
    # two of them share a folder (`retol demo sld-circular` after `retol demo` does not refuse)
    folder = Path(out) if out else Path("reports") / (name if named else "demo")
    argv = (
        ["retol", "demo"]
        + ([name] if named else [])
        + (["--samples", str(samples)] if samples else [])
    )
    _, folder = execute(
        spec, Path(f"{name}.toml"), folder, force, samples, None, None, as_json, formats, argv=argv
    )
    if not as_json:
        click.echo(f"open {folder / 'report.html'} in a browser")
