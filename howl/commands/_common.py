"""Helpers shared by the command modules (kept free of numpy/scipy imports)."""

from __future__ import annotations

import sys
from typing import Any

import typer


def emit_json(obj: Any) -> None:
    """Print exactly one JSON object on stdout."""
    from ..fileio import dumps_json

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
