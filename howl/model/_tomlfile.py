"""Reading a TOML file of the user's (rig, room, polar table): one line for every problem (private).

Size is bounded before parsing, a UTF-8 byte-order mark is accepted, and a syntax error,
bad UTF-8 or pathological nesting becomes one :class:`~howl.errors.InputError` naming the
file and, where the parser knows it, the line and column.
"""

from __future__ import annotations

import re as _re
import tomllib as _tomllib
from pathlib import Path as _Path
from typing import Any as _Any

from howl.errors import InputError as _InputError


def _read_toml(path: _Any, *, key: str | None = None, ref_file: str | None = None) -> dict:
    """Parse a TOML file; any problem becomes an InputError naming the file (and line/column)."""
    p = _Path(path)
    if not p.exists():
        if ref_file:
            raise _InputError(f"file not found: {str(p)!r}", file=ref_file, key=key)
        raise _InputError("file not found", file=str(p))
    if not p.is_file():
        raise _InputError("is not a file", file=str(p))
    try:
        size = p.stat().st_size
    except OSError as exc:
        raise _InputError(f"cannot be read ({exc.strerror or exc})", file=str(p)) from None
    if size > MAX_TOML_BYTES:  # refused before parsing: a hand-written rig or room is a few kB
        raise _InputError(f"is {size / 1e6:.1f} MB; a rig or room file is expected to be under "
                          f"{MAX_TOML_BYTES // 1_000_000} MB (is it the right file?)", file=str(p))
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise _InputError(f"cannot be read ({exc.strerror or exc})", file=str(p)) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise _InputError(f"TOML syntax error at line {line}: not valid UTF-8 text", file=str(p)) from None
    if text.startswith("\ufeff"):  # a byte-order mark some editors write: not TOML, but harmless
        text = text[1:]
    return _loads_toml(text, file=str(p))


#: the largest rig, room or polar-table file read (bytes)
MAX_TOML_BYTES = 4_000_000


_TOML_POS = _re.compile(r"^(.*?)\s*\(at line (\d+), column (\d+)\)\s*$", _re.S)
_TOML_EOD = _re.compile(r"^(.*?)\s*\(at end of document\)\s*$", _re.S)


def _loads_toml(text: str, *, file: str | None) -> dict:
    try:
        return _tomllib.loads(text)
    except _tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = _TOML_POS.match(msg)
        if m:
            raise _InputError(
                f"TOML syntax error at line {m.group(2)}, column {m.group(3)}: {m.group(1)}", file=file
            ) from None
        m = _TOML_EOD.match(msg)
        if m:
            n_lines = text.count("\n") + 1
            raise _InputError(f"TOML syntax error at line {n_lines} (end of file): {m.group(1)}", file=file) from None
        raise _InputError(f"TOML syntax error: {msg}", file=file) from None
    except (ValueError, RecursionError) as exc:  # pathological input (deep nesting) — still one line
        raise _InputError(f"TOML syntax error: {exc}", file=file) from None


