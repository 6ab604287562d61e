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

import contextlib
import importlib
import pkgutil
import signal
import sys

import typer
from typer.core import TyperGroup

from howl import __version__
from howl.errors import HowlError, Terminated


def _raise_terminated(signum, _frame):
    raise Terminated(signum)


@contextlib.contextmanager
def _stop_signals_as_interrupt():
    """SIGTERM and SIGHUP stop a command the way Ctrl-C does.

    Every clean-up written for Ctrl-C (a partial raw recording saved, the session
    marked ``interrupted``, temporaries beside a target removed) then runs for a
    ``kill`` or a closed terminal too. Outside the main thread nothing changes.
    """
    saved = {}
    for name in ("SIGTERM", "SIGHUP"):
        sig = getattr(signal, name, None)
        if sig is None:
            continue
        try:
            saved[sig] = signal.signal(sig, _raise_terminated)
        except (ValueError, OSError):  # not the main thread, or an embedded interpreter
            pass
    try:
        yield
    finally:
        for sig, old in saved.items():
            with contextlib.suppress(ValueError, OSError, TypeError):
                signal.signal(sig, old)


def _usage_line(exc) -> str:
    """A click usage error as one line: what is wrong, and where the help is."""
    ctx = getattr(exc, "ctx", None)
    where = f" (see '{ctx.command_path} --help')" if ctx is not None else ""
    text = " ".join(exc.format_message().split())
    return f"howl: error: {text}{where}"


class _HowlGroup(TyperGroup):
    """Turns HowlError into one line and exit 2; Ctrl-C into exit 130, SIGTERM/SIGHUP into 128 + signal;
    click's usage errors into one line and exit 2."""

    def list_commands(self, ctx):  # keep registration order, not alphabetical
        return list(self.commands)

    def main(self, *args, standalone_mode: bool = True, **kwargs):
        if not standalone_mode:
            return super().main(*args, standalone_mode=False, **kwargs)
        from typer import _click
        from typer.exceptions import Abort

        try:
            rv = super().main(*args, standalone_mode=False, **kwargs)
        except _click.exceptions.NoArgsIsHelpError as exc:  # bare `howl`: the help, as always
            exc.show()
            sys.exit(exc.exit_code)
        except _click.exceptions.ClickException as exc:
            print(_usage_line(exc), file=sys.stderr)
            sys.exit(exc.exit_code)
        except Abort:
            print("howl: aborted", file=sys.stderr)
            sys.exit(1)
        sys.exit(rv if isinstance(rv, int) else 0)

    def invoke(self, ctx):
        try:
            with _stop_signals_as_interrupt():
                return super().invoke(ctx)
        except HowlError as exc:
            typer.echo(f"howl: error: {exc}", err=True)
            raise typer.Exit(code=2) from None
        except KeyboardInterrupt as exc:
            signum = _signal_of(exc)
            with contextlib.suppress(OSError):  # after SIGHUP the terminal may be gone
                typer.echo("howl: interrupted" if signum is None else f"howl: stopped by {signal.Signals(signum).name}",
                           err=True)
            raise typer.Exit(code=130 if signum is None else 128 + signum) from None


def _signal_of(exc: BaseException) -> int | None:
    """The stop signal behind an interrupt (also when wrapped, e.g. by the audio backend), or None for Ctrl-C."""
    seen = 0
    while exc is not None and seen < 8:
        if isinstance(exc, Terminated):
            return exc.signum
        exc = exc.__cause__ or exc.__context__
        seen += 1
    return None


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
COMMANDS = ("check", "room", "plan", "map", "margin", "simulate", "ringout", "devices", "measure", "scan", "listen", "track", "sheet")


def _load_commands() -> None:
    from howl.cli import check, devices, listen, map, margin, measure, plan, ringout, room, scan, sheet, simulate, track

    mods = {m.__name__.rpartition(".")[2]: m for m in (check, devices, listen, map, margin, measure, plan, ringout, room, scan, sheet, simulate, track)}
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
