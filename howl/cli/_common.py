"""Helpers shared by the command modules (kept free of numpy/scipy imports)."""

from __future__ import annotations

import sys
from typing import Any

import typer


def emit_json(obj: Any) -> None:
    """Print exactly one JSON object on stdout."""
    from howl.fileio import dumps_json

    typer.echo(dumps_json(obj))


def warn(message: str) -> None:
    """One warning line on stderr."""
    print(f"howl: warning: {message}", file=sys.stderr)


def capture_warnings():
    """Context manager: route HowlWarning (and other warnings) to stderr lines."""
    import contextlib
    import warnings

    @contextlib.contextmanager
    def _cm():
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                yield
            finally:
                seen = set()
                for w in caught:
                    msg = str(w.message)
                    if msg not in seen:
                        seen.add(msg)
                        warn(msg)

    return _cm()


def make_console(*, stderr: bool = False):
    """A rich Console for tables: the terminal's width, or 120 columns when piped to a file.

    rich falls back to 80 columns off a terminal, which truncates the wide per-mic tables
    in a saved log; a log is read later in an editor, so give it room.
    """
    from rich.console import Console

    con = Console(highlight=False, stderr=stderr)
    if not con.is_terminal:
        con = Console(highlight=False, stderr=stderr, width=max(120, con.width))
    return con


def loop_delay_option(loop_delay_ms, loop_ir):
    """The loop delay from ``--loop-delay-ms`` (a number, s) or ``--loop-ir`` (a
    :class:`howl.detect.LoopDelayFromIR`), or None; both given is refused."""
    from howl import validate as v
    from howl.errors import InputError

    if loop_delay_ms is not None and loop_ir is not None:
        raise InputError("give --loop-delay-ms or --loop-ir, not both (the IR gives the delay at each frequency)",
                         key="--loop-ir")
    if loop_delay_ms is not None:
        return v.in_range(loop_delay_ms, "--loop-delay-ms", 0.0, 2000.0, unit="ms", lo_open=True) / 1000.0
    if loop_ir is None:
        return None
    import warnings

    from howl.listen.detect import LoopDelayFromIR
    from howl.errors import HowlWarning
    from howl.cli.margin import load_loop_ir

    try:
        import soundfile as sf

        n_ch = sf.info(str(loop_ir)).channels
    except Exception:  # load_loop_ir gives the clear message for missing or unreadable files
        n_ch = 1
    if n_ch != 1:
        raise InputError(f"has {n_ch} channels; expected a mono loop IR (one speaker-to-mic loop)",
                         file=str(loop_ir), key="--loop-ir")
    with capture_warnings():
        h, fs, warns = load_loop_ir(loop_ir, channel=None, max_length_s=20.0, trim_s=None)
        for w in warns:
            warnings.warn(w, HowlWarning)
        return LoopDelayFromIR(h, fs, label=str(loop_ir))


#: the loudest and quietest added loop gain (a fader move) any command accepts: beyond these a real
#: desk has no travel (faders and trims span roughly −∞..+10 dB and 0..+60 dB), and the arithmetic
#: overflows long before (10^(1e308/20))
GAIN_DB_MIN = -100.0
GAIN_DB_MAX = 60.0


def added_gain_db(value, option: str) -> float:
    """An added loop gain in dB, bounded to what a desk can do."""
    from howl import validate as v

    return v.in_range(value, option, GAIN_DB_MIN, GAIN_DB_MAX, unit="dB")


def options_named(mapping: dict):
    """Context manager: an InputError about an internal key (``band_hz[1]``) names the flag the user typed.

    ``mapping`` maps an internal key to the option (``{"band_hz": "--band-hz"}``). Errors that carry a
    file are about that file and pass unchanged.
    """
    import contextlib

    from howl.errors import InputError

    @contextlib.contextmanager
    def _cm():
        try:
            yield
        except InputError as exc:
            key = exc.key or ""
            if exc.file is None:
                for inner, flag in mapping.items():
                    if key == inner or key.startswith((inner + "[", inner + " ", inner + ".")):
                        rest = key[len(inner):].strip()
                        if rest.startswith("[") and rest[1:-1].isdigit():
                            rest = f"value {int(rest[1:-1]) + 1}"
                        where = f"{flag} ({rest})" if rest else flag
                        raise InputError(exc.message, key=where) from None
            raise

    return _cm()


def progress_iter(items, label: str, *, min_items: int = 2):
    """Iterate ``items`` with a rich progress bar on stderr (only on a terminal, and only for
    ``min_items`` or more): long work shows that it moves and how far it has come."""
    items = list(items)
    if len(items) < min_items or not sys.stderr.isatty():
        yield from items
        return
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    con = make_console(stderr=True)
    with Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(),
                  console=con, transient=True) as bar:
        task = bar.add_task(label, total=len(items))
        for it in items:
            yield it
            bar.advance(task)
