"""The one validation layer.

Each checker returns the cleaned value or raises :class:`howl.errors.InputError`
with a message of the form ``"<name> must be <condition>, got <value> [unit]"``.
``name`` is whatever the caller wants the user to see: a key path in a file or
a CLI option. Callers that know the file pass ``file=``.

Never use ``assert`` for validation: it disappears under ``python -O``.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np

from howl.errors import InputError


def _fmt(value: Any) -> str:
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, float):
        return f"{value:g}"
    return repr(value)


def _u(unit: str | None) -> str:
    return f" {unit}" if unit else ""


def fail(name: str, condition: str, value: Any, unit: str | None = None, *, file: str | None = None) -> InputError:
    """Build (not raise) the standard error."""
    return InputError(f"must be {condition}, got {_fmt(value)}{_u(unit)}", file=file, key=name)


def number(value: Any, name: str, *, unit: str | None = None, file: str | None = None) -> float:
    """A finite real number (bool is refused)."""
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise fail(name, "a number", value, unit, file=file)
    v = float(value)
    if not math.isfinite(v):
        raise fail(name, "a finite number", value, unit, file=file)
    return v


def in_range(
    value: Any,
    name: str,
    lo: float | None = None,
    hi: float | None = None,
    *,
    unit: str | None = None,
    lo_open: bool = False,
    hi_open: bool = False,
    file: str | None = None,
) -> float:
    """A finite number in [lo, hi] (open ends on request)."""
    v = number(value, name, unit=unit, file=file)
    bad = (
        (lo is not None and (v <= lo if lo_open else v < lo))
        or (hi is not None and (v >= hi if hi_open else v > hi))
    )
    if bad:
        left = "(" if lo_open else "["
        right = ")" if hi_open else "]"
        lo_s = "-inf" if lo is None else f"{lo:g}"
        hi_s = "inf" if hi is None else f"{hi:g}"
        if lo is not None and hi is None:
            cond = f"> {lo:g}" if lo_open else f">= {lo:g}"
        elif hi is not None and lo is None:
            cond = f"< {hi:g}" if hi_open else f"<= {hi:g}"
        else:
            cond = f"in {left}{lo_s}, {hi_s}{right}"
        raise fail(name, cond + _u(unit), v, unit, file=file)
    return v


def positive(value: Any, name: str, *, unit: str | None = None, file: str | None = None) -> float:
    """A finite number > 0."""
    return in_range(value, name, 0.0, None, unit=unit, lo_open=True, file=file)


def integer(value: Any, name: str, lo: int | None = None, hi: int | None = None, *, file: str | None = None) -> int:
    """An int (bool refused) in [lo, hi]."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise fail(name, "an integer", value, file=file)
    v = int(value)
    if (lo is not None and v < lo) or (hi is not None and v > hi):
        lo_s = "-inf" if lo is None else str(lo)
        hi_s = "inf" if hi is None else str(hi)
        raise fail(name, f"an integer in [{lo_s}, {hi_s}]", v, file=file)
    return v


def string(value: Any, name: str, *, file: str | None = None) -> str:
    """A non-empty string."""
    if not isinstance(value, str) or not value.strip():
        raise fail(name, "a non-empty string", value, file=file)
    return value


def closest(word: str, options: Iterable[str]) -> str | None:
    """The closest valid word, for 'did you mean' hints."""
    m = difflib.get_close_matches(word, list(options), n=1, cutoff=0.5)
    return m[0] if m else None


def choice(value: Any, name: str, options: Sequence[str], *, file: str | None = None) -> str:
    """One of ``options``; suggests the closest on a miss."""
    if not isinstance(value, str) or value not in options:
        hint = closest(value, options) if isinstance(value, str) else None
        tail = f" (did you mean {hint!r}?)" if hint else ""
        raise InputError(
            f"must be one of {', '.join(options)}, got {_fmt(value)}{tail}", file=file, key=name
        )
    return value


def vector(
    value: Any, name: str, length: int, *, unit: str | None = None, file: str | None = None
) -> tuple[float, ...]:
    """A list of ``length`` finite numbers."""
    if not isinstance(value, (list, tuple)) or len(value) != length:
        raise fail(name, f"a list of {length} numbers", value, unit, file=file)
    return tuple(number(v, f"{name}[{i}]", unit=unit, file=file) for i, v in enumerate(value))


def finite_array(value: Any, name: str, *, ndim: int | None = None, file: str | None = None) -> np.ndarray:
    """A float array with no NaN/inf, optionally of a given number of dimensions."""
    arr = np.asarray(value, dtype=float)
    if ndim is not None and arr.ndim != ndim:
        raise InputError(f"must be a {ndim}-D array, got shape {arr.shape}", file=file, key=name)
    if arr.size == 0:
        raise InputError("must not be empty", file=file, key=name)
    if not np.all(np.isfinite(arr)):
        raise InputError("must hold only finite numbers, found NaN or inf", file=file, key=name)
    return arr


def known_keys(table: dict, name: str, allowed: Iterable[str], *, file: str | None = None) -> None:
    """Refuse unknown keys, suggesting the closest valid one."""
    allowed = list(allowed)
    for key in table:
        if key not in allowed:
            hint = closest(key, allowed)
            tail = f"; did you mean {hint!r}?" if hint else f"; valid keys: {', '.join(allowed)}"
            path = f"{name}.{key}" if name else key
            raise InputError(f"unknown key{tail}", file=file, key=path)
