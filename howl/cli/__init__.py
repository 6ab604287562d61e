"""The command line: parse → load → call the core → render.

Each command lives in its own module under ``howl/cli/`` and exposes
``ORDER`` (its place in ``howl --help``) and ``register(app)``. This module
imports them by name (``COMMANDS``), so ``python -X importtime -m howl ...``
shows each one; a module that is not listed yet is still found and registered
(and ``tests/cli/test_cli.py`` asks for it to be listed).

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


#: The command modules, imported by name below (plain imports, so ``-X importtime`` sees them).
COMMANDS = ("check", "room", "plan", "map", "margin", "simulate", "ringout", "devices", "measure", "scan", "listen", "sheet")


def _load_commands() -> None:
    from howl.cli import check, devices, listen, map, margin, measure, plan, ringout, room, scan, sheet, simulate

    mods = {m.__name__.rpartition(".")[2]: m for m in (check, devices, listen, map, margin, measure, plan, ringout, room, scan, sheet, simulate)}
    for info in pkgutil.iter_modules(__path__):  # a command module not in COMMANDS yet
        if not info.name.startswith("_") and info.name not in mods:
            mods[info.name] = importlib.import_module(f"{__name__}.{info.name}")
    found = [(getattr(mod, "ORDER", 100), name, mod) for name, mod in mods.items() if hasattr(mod, "register")]
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
