"""Loading and validating a room file (private; import :func:`howl.model.rig.load_room`).

Split out of ``_rigfile.py`` to keep modules short.
"""

from __future__ import annotations

import math as _math
import os as _os
import warnings as _warnings
from pathlib import Path as _Path
from typing import Any as _Any

from howl import validate as _v
from howl.errors import HowlWarning as _HowlWarning
from howl.errors import InputError as _InputError
from howl.model._tomlfile import _read_toml
from howl.model._tomlkeys import (
    _known_keys, _one_line, _require, _size, _table, _text, _unknown_name,
)
from howl.model.rig import OCTAVE_BANDS_HZ, SHOEBOX_SURFACES, Material, Room, Surface

ROOM_KEYS = ("name", "description", "temperature_c", "humidity_pct", "shoebox", "surfaces", "free_shape", "materials")
SHOEBOX_KEYS = ("length_m", "width_m", "height_m")
FREE_SHAPE_KEYS = ("volume_m3", "surface_m2", "mean_absorption", "material", "rt60_s")
PATCH_KEYS = ("material", "area_m2")
#: The smallest surface a closed shape of volume V can have is the sphere's, (36π)^(1/3)·V^(2/3).
_SPHERE_SURFACE_FACTOR = (36.0 * _math.pi) ** (1.0 / 3.0)


def _parse_surface(
    value: _Any, key: str, area_m2: float, table: dict[str, Material], file: str | None, surface_name: str
) -> Surface:
    """A surface is a material name, or a list of patches {material, area_m2}; one patch may omit the area."""
    if isinstance(value, str):
        mat = _material(value, key, table, file)
        return Surface(surface_name, area_m2, mat.name, mat.absorption)
    if not isinstance(value, list) or not value:
        raise _v.fail(key, "a material name or a list of {material, area_m2} patches", value, file=file)
    patches = []
    rest_index = None
    for i, item in enumerate(value):
        pk = f"{key}[{i}]"
        item = _table(item, pk, file, "a table {material = ..., area_m2 = ...}")
        _known_keys(item, pk, PATCH_KEYS, file=file)
        mat = _material(_require(item, "material", pk, file, "a material name"), f"{pk}.material", table, file)
        if "area_m2" in item:
            a = _v.positive(item["area_m2"], f"{pk}.area_m2", unit="m²", file=file)
        else:
            if rest_index is not None:
                raise _InputError(
                    f"only one patch may leave out area_m2 (so it takes the rest); {key}[{rest_index}] already does",
                    file=file, key=f"{pk}.area_m2",
                )
            rest_index = i
            a = None
        patches.append((mat, a))
    given = sum(a for _, a in patches if a is not None)
    if rest_index is None:
        if abs(given - area_m2) > 0.01 * area_m2:
            raise _InputError(
                f"patch areas add up to {given:g} m² but the surface is {area_m2:g} m²; "
                "leave area_m2 out of one patch to give it the rest",
                file=file, key=key,
            )
        scale = area_m2 / given
        patches = [(m, a * scale) for m, a in patches]
    else:
        rest = area_m2 - given
        if rest <= 0.0:
            raise _InputError(
                f"patch areas add up to {given:g} m², more than the surface's {area_m2:g} m²",
                file=file, key=key,
            )
        patches = [(m, rest if a is None else a) for m, a in patches]
    absorption = tuple(
        sum(m.absorption[b] * a for m, a in patches) / area_m2 for b in range(len(OCTAVE_BANDS_HZ))
    )
    label = " + ".join(f"{m.name} {a:.3g} m²" for m, a in patches) if len(patches) > 1 else patches[0][0].name
    return Surface(surface_name, area_m2, label, absorption)


def _material(value: _Any, key: str, table: dict[str, Material], file: str | None) -> Material:
    name = _text(value, key, file, allow_empty=False)
    if name not in table:
        raise _InputError(
            _unknown_name("material", name, sorted(table)) + " (add it under [materials] in the room file)",
            file=file, key=key,
        )
    return table[name]


def _room_from_dict(data: dict, *, file: str | None, default_name: str = "room") -> Room:
    from howl.model.materials import band_values, material_table, parse_materials

    if "room_file" in data and "room_file" not in ROOM_KEYS:
        raise _InputError(
            f"this looks like a rig file (it names room_file = {data['room_file']!r}); expected a room file",
            file=file, key="room_file",
        )
    _known_keys(data, "", ROOM_KEYS, file=file)
    name = _text(data.get("name", default_name), "name", file, allow_empty=False)
    description = _text(data.get("description", ""), "description", file)
    temperature_c = _v.in_range(data.get("temperature_c", 20.0), "temperature_c", -20.0, 50.0, unit="°C", file=file)
    humidity_pct = _v.in_range(data.get("humidity_pct", 50.0), "humidity_pct", 0.0, 100.0, unit="%", file=file)
    if humidity_pct < 10.0:
        _warnings.warn(
            f"{file}: humidity_pct = {humidity_pct:g} % is very dry; air absorption (ISO 9613-1) is less accurate there",
            _HowlWarning, stacklevel=3,
        )
    additions = parse_materials(data["materials"], key="materials", file=file) if "materials" in data else {}
    table = material_table(additions)

    has_box, has_free = "shoebox" in data, "free_shape" in data
    if has_box == has_free:
        raise _InputError(
            "a room needs exactly one of [shoebox] (length_m, width_m, height_m + [surfaces]) "
            "or [free_shape] (volume_m3, surface_m2, and mean_absorption, material or rt60_s)"
            + (", found both" if has_box else ", found neither"),
            file=file, key="shoebox" if has_box else None,
        )
    if has_box:
        box = _table(data["shoebox"], "shoebox", file)
        _known_keys(box, "shoebox", SHOEBOX_KEYS, file=file)
        dims = []
        for k in SHOEBOX_KEYS:
            val = _require(box, k, "shoebox", file, "a size in metres > 0")
            dims.append(_size(val, f"shoebox.{k}", 1000.0, "m", file))
        length, width, height = dims
        if "surfaces" not in data:
            raise _InputError(
                f"missing table [surfaces] with a material for each of {', '.join(SHOEBOX_SURFACES)}", file=file,
                key="surfaces",
            )
        surf = _table(data["surfaces"], "surfaces", file)
        _known_keys(surf, "surfaces", SHOEBOX_SURFACES, file=file)
        missing = [s for s in SHOEBOX_SURFACES if s not in surf]
        if missing:
            raise _InputError(
                f"missing material for {', '.join(missing)} (every shoebox surface needs one)", file=file, key="surfaces"
            )
        areas = {
            "floor": length * width, "ceiling": length * width,
            "wall_x0": width * height, "wall_x1": width * height,
            "wall_y0": length * height, "wall_y1": length * height,
        }
        surfaces = tuple(
            _parse_surface(surf[s], f"surfaces.{s}", areas[s], table, file, s) for s in SHOEBOX_SURFACES
        )
        return Room(
            name=name, volume_m3=length * width * height, surface_m2=sum(areas.values()), surfaces=surfaces,
            dimensions_m=(length, width, height), temperature_c=temperature_c, humidity_pct=humidity_pct,
            source_file=file, description=description,
        )

    if "surfaces" in data:
        raise _InputError("[surfaces] applies to a [shoebox] room only; a free shape uses free_shape.mean_absorption, "
                          "free_shape.material or free_shape.rt60_s", file=file, key="surfaces")
    free = _table(data["free_shape"], "free_shape", file)
    _known_keys(free, "free_shape", FREE_SHAPE_KEYS, file=file)
    volume = _size(_require(free, "volume_m3", "free_shape", file, "a volume in m³ > 0"),
                   "free_shape.volume_m3", 1e9, "m³", file)
    surface = _size(_require(free, "surface_m2", "free_shape", file, "a surface in m² > 0"),
                    "free_shape.surface_m2", 1e8, "m²", file)
    s_min = _SPHERE_SURFACE_FACTOR * volume ** (2.0 / 3.0)
    if surface < s_min * (1.0 - 1e-9):
        raise _InputError(
            f"must be at least {s_min:.4g} m² (a sphere's surface for volume_m3 = {volume:g}), got {surface:g} m²",
            file=file, key="free_shape.surface_m2",
        )
    given = [k for k in ("mean_absorption", "material", "rt60_s") if k in free]
    if len(given) != 1:
        raise _InputError(
            "give exactly one of mean_absorption (7 numbers), material (a name) or rt60_s (7 numbers)"
            + (f", found {', '.join(given)}" if given else ", found none"),
            file=file, key="free_shape",
        )
    rt60 = None
    if given[0] == "rt60_s":
        rt60 = band_values(free["rt60_s"], "free_shape.rt60_s", lo=0.1, hi=20.0, unit="s", file=file)
        surfaces: tuple[Surface, ...] = ()
    elif given[0] == "material":
        mat = _material(free["material"], "free_shape.material", table, file)
        surfaces = (Surface("average", surface, mat.name, mat.absorption),)
    else:
        absorption = band_values(free["mean_absorption"], "free_shape.mean_absorption", lo=0.0, hi=1.0,
                                 hi_open=True, file=file)
        surfaces = (Surface("average", surface, "mean_absorption", absorption),)
    room = Room(
        name=name, volume_m3=volume, surface_m2=surface, surfaces=surfaces, dimensions_m=None,
        rt60_measured_s=rt60, temperature_c=temperature_c, humidity_pct=humidity_pct, source_file=file,
        description=description,
    )
    return room


def _check_room_absorbs(room: Room, file: str | None) -> Room:
    """A room with no absorption at all in some band has an infinite RT60: refuse it."""
    if room.rt60_measured_s is not None:
        return room
    for b, f in enumerate(OCTAVE_BANDS_HZ):
        if sum(s.area_m2 * s.absorption[b] for s in room.surfaces) <= 0.0:
            raise _InputError(
                f"the room absorbs nothing in the {f:g} Hz band (every absorption coefficient is 0), "
                "so its reverberation time is infinite; expected some absorption > 0",
                file=file, key="surfaces" if room.is_shoebox else "free_shape.mean_absorption",
            )
    return room


def load_room(path: str | _os.PathLike) -> Room:
    """Load and validate a room file (see ``docs/file-formats.md``).

    Returns a frozen :class:`Room`; raises only :class:`howl.errors.InputError`.
    """
    p = _Path(path)
    try:
        data = _read_toml(p)
        room = _room_from_dict(data, file=str(p), default_name=p.stem)
        return _check_room_absorbs(room, str(p))
    except _InputError as exc:
        raise _one_line(exc) from None
