"""Reading the tables of a rig or room file: the small checks every loader shares (private).

Split out of ``_rigfile.py`` to keep modules short. Each raises :class:`howl.errors.InputError`
naming the file, the key path and what was expected.
"""

from __future__ import annotations

from pathlib import Path as _Path
from typing import Any as _Any

from howl import validate as _v
from howl.errors import InputError as _InputError


def _table(value: _Any, key: str, file: str | None, what: str = "a table") -> dict:
    if not isinstance(value, dict):
        raise _v.fail(key, what, value, file=file)
    return value


def _require(table: dict, name: str, key: str, file: str | None, hint: str) -> _Any:
    if name not in table:
        path = f"{key}.{name}" if key else name
        raise _InputError(f"missing key (expected {hint})", file=file, key=path)
    return table[name]


def _text(value: _Any, key: str, file: str | None, *, allow_empty: bool = True) -> str:
    if not isinstance(value, str) or (not allow_empty and not value.strip()):
        raise _v.fail(key, "a string" if allow_empty else "a non-empty string", value, file=file)
    return value


#: longest name accepted (it has to fit a column of the desk sheet and a file name)
MAX_NAME_CHARS = 100
#: most blocks of one kind ([[speakers]], [[mics]]...) in a rig: far beyond any real show
MAX_BLOCKS = 512


def _name(value: _Any, key: str, file: str | None) -> str:
    if isinstance(value, str) and len(value) > MAX_NAME_CHARS:
        raise _InputError(f"must be a name of at most {MAX_NAME_CHARS} characters, got {len(value)} "
                          f"({value[:20]!r}...)", file=file, key=key)
    s = _v.string(value, key, file=file)
    if s != s.strip() or any(ch in s for ch in "=.[]\"'\n\t"):
        raise _v.fail(key, "a name without spaces at the ends and without = . [ ] or quotes", value, file=file)
    return s


def _size(value: _Any, key: str, hi: float, unit: str, file: str | None) -> float:
    """A size > 0 (zero and negative sizes are refused first, then absurdly large ones)."""
    x = _v.positive(value, key, unit=unit, file=file)
    return _v.in_range(x, key, 0.0, hi, unit=unit, lo_open=True, file=file)


def _known_keys(table: dict, name: str, allowed, *, file: str | None) -> None:
    """Refuse unknown keys (did-you-mean hint); a key with control characters is shown escaped."""
    try:
        _v.known_keys(table, name, allowed, file=file)
    except _InputError as exc:
        raise _InputError(exc.message, file=file, key=_printable(exc.key) if exc.key else exc.key) from None


def _boolean(value: _Any, key: str, file: str | None) -> bool:
    if not isinstance(value, bool):
        raise _v.fail(key, "true or false", value, file=file)
    return value


def _list_of_tables(value: _Any, key: str, file: str | None) -> list:
    if not isinstance(value, list):
        raise _v.fail(key, f"an array of tables ([[{key}]] blocks)", value, file=file)
    if len(value) > MAX_BLOCKS:
        raise _InputError(f"holds {len(value)} [[{key}]] blocks; expected at most {MAX_BLOCKS}", file=file, key=key)
    for i, item in enumerate(value):
        if not isinstance(item, dict):
            raise _v.fail(f"{key}[{i}]", "a table", item, file=file)
    return value


def _unique(names: list[str], key: str, file: str | None) -> None:
    seen: dict[str, int] = {}
    for i, n in enumerate(names):
        if n in seen:
            raise _InputError(
                f"duplicate name {n!r} (also used by {key}[{seen[n]}]); names must be unique",
                file=file, key=f"{key}[{i}].name",
            )
        seen[n] = i


def _resolve_file(value: _Any, key: str, file: str | None, base_dir: _Path) -> str:
    s = _text(value, key, file, allow_empty=False)
    p = _Path(s)
    if not p.is_absolute():
        p = base_dir / p
    if not p.is_file():
        raise _InputError(f"file not found: {str(p)!r}", file=file, key=key)
    return str(p.resolve())


def _unknown_name(kind: str, name: str, options: list[str]) -> str:
    hint = _v.closest(name, options)
    tail = f" (did you mean {hint!r}?)" if hint else (f"; known: {', '.join(options)}" if options else "; none defined")
    return f"no {kind} named {name!r}{tail}"



def _one_line(exc: _InputError) -> _InputError:
    """The same error with any control character in its parts escaped, so it prints as one line."""
    parts = [exc.message, exc.file, exc.key]
    if all(x is None or _printable(x) == x for x in parts):
        return exc
    return _InputError(_printable(exc.message), file=None if exc.file is None else _printable(exc.file),
                       key=None if exc.key is None else _printable(exc.key))


def _printable(text: _Any) -> str:
    """The assignment as the user typed it, with control characters escaped (keeps errors on one line)."""
    s = str(text)
    return s if s.isprintable() else s.encode("unicode_escape").decode("ascii")
