"""The materials table: absorption coefficients of common finishes.

The table ships as ``howl/data/materials.toml``. Each entry gives the energy
absorption coefficient per octave band at :data:`howl.rig.OCTAVE_BANDS_HZ`
(125 Hz–8 kHz), each in [0, 1), with a provenance note. The shipped values are
from memory of typical handbook tables and say so; check them against product
data. A room file may override entries or add new ones (``[materials.<name>]``),
validated here with the same rules.
"""

from __future__ import annotations

import functools
import tomllib
from collections.abc import Mapping
from pathlib import Path
from types import MappingProxyType
from typing import Any

from howl import validate as v
from howl.errors import InputError
from howl.model.rig import OCTAVE_BANDS_HZ, Material

#: Keys of one material entry.
MATERIAL_KEYS: tuple[str, ...] = ("absorption", "source", "description")

TABLE_PATH = Path(__file__).resolve().parents[1] / "data" / "materials.toml"


def band_values(
    value: Any,
    name: str,
    *,
    lo: float,
    hi: float,
    unit: str | None = None,
    hi_open: bool = False,
    lo_open: bool = False,
    file: str | None = None,
    allow_scalar: bool = False,
) -> tuple[float, ...]:
    """One value per octave band 125..8000 Hz (7 numbers), each in the given range.

    With ``allow_scalar`` a single number stands for all seven bands.
    """
    n = len(OCTAVE_BANDS_HZ)
    if allow_scalar and not isinstance(value, (list, tuple)):
        x = v.in_range(value, name, lo, hi, unit=unit, lo_open=lo_open, hi_open=hi_open, file=file)
        return (x,) * n
    if not isinstance(value, (list, tuple)) or len(value) != n:
        what = "a number or a list of 7 numbers" if allow_scalar else "a list of 7 numbers"
        raise v.fail(name, f"{what} (one per octave band 125..8000 Hz)", value, unit, file=file)
    return tuple(
        v.in_range(x, f"{name}[{i}]", lo, hi, unit=unit, lo_open=lo_open, hi_open=hi_open, file=file)
        for i, x in enumerate(value)
    )


def parse_material(name: str, entry: Any, *, key: str, file: str | None = None) -> Material:
    """Validate one table entry ``{absorption = [...], source = "...", description = "..."}``."""
    if not isinstance(entry, dict):
        raise v.fail(key, "a table with absorption = [7 numbers]", entry, file=file)
    v.known_keys(entry, key, MATERIAL_KEYS, file=file)
    if "absorption" not in entry:
        raise InputError("missing key 'absorption' (7 numbers, 125..8000 Hz)", file=file, key=key)
    absorption = band_values(entry["absorption"], f"{key}.absorption", lo=0.0, hi=1.0, hi_open=True, file=file)
    source = entry.get("source", "")
    if not isinstance(source, str):
        raise v.fail(f"{key}.source", "a string", source, file=file)
    description = entry.get("description", "")
    if not isinstance(description, str):
        raise v.fail(f"{key}.description", "a string", description, file=file)
    return Material(name=name, absorption=absorption, source=source, description=description)


def parse_materials(table: Any, *, key: str = "materials", file: str | None = None) -> dict[str, Material]:
    """Validate a whole table of materials (the shipped file or a room's additions)."""
    if not isinstance(table, dict):
        raise v.fail(key, "a table of materials", table, file=file)
    out = {}
    for name, entry in table.items():
        out[name] = parse_material(name, entry, key=f"{key}.{name}" if key else name, file=file)
    return out


@functools.lru_cache(maxsize=1)
def _bundled() -> Mapping[str, Material]:
    with open(TABLE_PATH, "rb") as fh:
        data = tomllib.load(fh)
    return MappingProxyType(parse_materials(data, key="", file=str(TABLE_PATH)) if data else {})


def bundled_materials() -> Mapping[str, Material]:
    """The shipped table (read-only mapping name → :class:`howl.rig.Material`)."""
    return _bundled()


def material_table(additions: Mapping[str, Material] | None = None) -> dict[str, Material]:
    """The shipped table with a room's overrides and additions applied."""
    out = dict(bundled_materials())
    if additions:
        out.update(additions)
    return out
