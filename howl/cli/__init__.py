"""The command line: parse → load → call the core → render.

Each command lives in its own module under ``howl/cli/`` and exposes
``ORDER`` (its place in ``howl --help``) and ``register(app)``. This module
finds them, so adding a command never touches another command's file.

This is the one place where a :class:`howl.errors.HowlError` becomes a
one-line message on stderr and exit status 2. Start-up stays light: command
modules import only typer and the standard library at module level; numpy,
scipy, matplotlib and sounddevice are imported inside the command bodies.
"""

from __future__ import annotations

import importlib
import pkgutil
import sys

import typer
from typer.core import TyperGroup

from howl import __version__
from howl.errors import HowlError


class _HowlGroup(TyperGroup):
    """Turns HowlError into one line and exit 2; Ctrl-C into exit 130."""

    def list_commands(self, ctx):  # keep registration order, not alphabetical
        return list(self.commands)

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except HowlError as exc:
            typer.echo(f"howl: error: {exc}", err=True)
            raise typer.Exit(code=2) from None
        except KeyboardInterrupt:
            typer.echo("howl: interrupted", err=True)
            raise typer.Exit(code=130) from None


app = typer.Typer(
    cls=_HowlGroup,
    name="howl",
    help=(
        "Gain before feedback for sound technicians: plan a rig, measure the loop, "
        "ring it out virtually, listen for ringing, print the desk sheet."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"howl {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True, help="Print the version and exit."),
) -> None:
    """Gain before feedback for sound technicians."""


def _load_commands() -> None:
    from howl import cli as commands

    found = []
    for info in pkgutil.iter_modules(commands.__path__):
        if info.name.startswith("_"):
            continue
        mod = importlib.import_module(f"{commands.__name__}.{info.name}")
        if hasattr(mod, "register"):
            found.append((getattr(mod, "ORDER", 100), info.name, mod))
    for _, _, mod in sorted(found, key=lambda t: (t[0], t[1])):
        mod.register(app)


_load_commands()


def main() -> None:
    """Console-script entry point."""
    try:
        app()
    except HowlError as exc:  # raised outside a command (should not happen, but never a traceback)
        print(f"howl: error: {exc}", file=sys.stderr)
        sys.exit(2)


if __name__ == "__main__":
    main()
