"""Loaders for rig and room files (the implementation behind :mod:`howl.rig`).

Import the public names from :mod:`howl.rig` (``load_room``, ``load_rig``,
``with_changes``, ``rig_to_dict``, ``bundled_rig_path``), not from here.
Split out of ``rig.py`` to keep modules short; the what-if edits are in ``_rigedit.py`` and the
signal chain's keys (presets, high-pass, EQ, responses, talker spectra) in ``_chainfile.py``.
"""

from __future__ import annotations

from howl.model.rig import (
    MIC_PATTERNS,
    OCTAVE_BANDS_HZ,
    SHOEBOX_SURFACES,
    Listener,
    Material,
    Mic,
    Mix,
    Rig,
    Room,
    Speaker,
    Surface,
    Talker,
)

# =====================================================================================
# Loaders. Everything below turns TOML files into the dataclasses above, or raises
# howl.errors.InputError naming the file, the key path (``speakers[2].position_m``,
# list indices counted from 0), the bad value and what was expected.
# =====================================================================================

import math as _math
import os as _os
import warnings as _warnings
from pathlib import Path as _Path
from typing import Any as _Any

from howl import validate as _v
from howl.model import _chainfile as _c
from howl.errors import HowlWarning as _HowlWarning
from howl.errors import InputError as _InputError

ROOM_KEYS = ("name", "description", "temperature_c", "humidity_pct", "shoebox", "surfaces", "free_shape", "materials")
SHOEBOX_KEYS = ("length_m", "width_m", "height_m")
FREE_SHAPE_KEYS = ("volume_m3", "surface_m2", "mean_absorption", "material", "rt60_s")
PATCH_KEYS = ("material", "area_m2")
RIG_KEYS = (
    "name", "description", "notes", "room_file", "fsm_db", "ead_m", "target_spl_db",
    "speakers", "mics", "talkers", "listeners", "mixes", "desk",
)
SPEAKER_KEYS = (
    "name", "position_m", "azimuth_deg", "elevation_deg", "coverage_h_deg", "coverage_v_deg",
    "sensitivity_db_spl_1v_1m", "directivity_file", "role", "delay_ms", *_c.SPEAKER_CHAIN_KEYS,
)
MIC_KEYS = ("name", "position_m", "azimuth_deg", "elevation_deg", "pattern", "pattern_file", "sensitivity_dbv_pa", "open",
            *_c.MIC_CHAIN_KEYS)
TALKER_KEYS = ("name", "position_m", "mic", "level_db_spl_1m", *_c.TALKER_CHAIN_KEYS)
LISTENER_KEYS = ("name", "position_m")
MIX_KEYS = ("name", "kind", "speakers", "gains_db")
SPEAKER_ROLES = ("main", "fill", "delay", "monitor")
MIX_KINDS = ("mains", "monitor")

#: A mic capsule and a loudspeaker closer than this are "at the same point" (an input error).
MIN_MIC_SPEAKER_DISTANCE_M = 0.05
#: A talker closer than this to its mic's capsule is refused (the direct-field model has 1/r).
MIN_TALKER_MIC_DISTANCE_M = 0.01
#: Position tolerance at the walls of a shoebox (a speaker hung flush on a wall is inside).
_WALL_TOL_M = 1e-9
#: The smallest surface a closed shape of volume V can have is the sphere's, (36π)^(1/3)·V^(2/3).
_SPHERE_SURFACE_FACTOR = (36.0 * _math.pi) ** (1.0 / 3.0)


# ---------------------------------------------------------------------------- TOML ----

from howl.model._tomlfile import _read_toml  # noqa: E402  (TOML reading lives there)


# ----------------------------------------------------------------------- helpers ----

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


# -------------------------------------------------------------------------- room ----

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


def _one_line(exc: _InputError) -> _InputError:
    """The same error with any control character in its parts escaped, so it prints as one line."""
    parts = [exc.message, exc.file, exc.key]
    if all(x is None or _printable(x) == x for x in parts):
        return exc
    return _InputError(_printable(exc.message), file=None if exc.file is None else _printable(exc.file),
                       key=None if exc.key is None else _printable(exc.key))


# --------------------------------------------------------------------------- rig ----

def _position(value: _Any, key: str, room: Room, file: str | None) -> tuple[float, float, float]:
    pos = _v.vector(value, key, 3, unit="m", file=file)
    if room.dimensions_m is not None:
        dims = room.dimensions_m
        if any(c < -_WALL_TOL_M or c > d + _WALL_TOL_M for c, d in zip(pos, dims)):
            raise _InputError(
                f"must lie inside the room (x 0..{dims[0]:g}, y 0..{dims[1]:g}, z 0..{dims[2]:g} m), "
                f"got [{', '.join(f'{c:g}' for c in pos)}] m",
                file=file, key=key,
            )
    return pos


def _angle(table: dict, name: str, key: str, file: str | None, lo: float, hi: float, default: float | None) -> float:
    if name not in table:
        if default is None:
            raise _InputError(f"missing key (expected an angle in degrees, {lo:g}..{hi:g})", file=file,
                              key=f"{key}.{name}")
        return _math.radians(default)
    return _math.radians(_v.in_range(table[name], f"{key}.{name}", lo, hi, unit="°", file=file))


def _speakers_from(data: dict, room: Room, file: str | None, base_dir: _Path) -> list:
    """The rig's ``[[speakers]]`` blocks, checked, as :class:`Speaker` objects (names unique)."""
    from howl.model.materials import band_values

    speakers = []
    for i, s in enumerate(_list_of_tables(_require(data, "speakers", "", file, "[[speakers]] blocks"), "speakers", file)):
        k = f"speakers[{i}]"
        _known_keys(s, k, SPEAKER_KEYS, file=file)
        s, preset = _c.apply_preset(s, "speakers", k, file)
        sname = _name(_require(s, "name", k, file, "a name"), f"{k}.name", file)
        pos = _position(_require(s, "position_m", k, file, "[x, y, z] in metres"), f"{k}.position_m", room, file)
        az = _angle(s, "azimuth_deg", k, file, -360.0, 360.0, None)
        el = _angle(s, "elevation_deg", k, file, -90.0, 90.0, 0.0)
        dfile = _resolve_file(s["directivity_file"], f"{k}.directivity_file", file, base_dir) \
            if "directivity_file" in s else None
        cov = []
        for ck, default in (("coverage_h_deg", 90.0), ("coverage_v_deg", 60.0)):
            if ck in s:
                cov.append(band_values(s[ck], f"{k}.{ck}", lo=0.0, hi=360.0, lo_open=True, unit="°", file=file,
                                       allow_scalar=True))
            elif dfile is not None:
                cov.append((default,) * len(OCTAVE_BANDS_HZ))
            else:
                raise _InputError("missing key (expected the −6 dB coverage angle in degrees, one number or 7 per "
                                  "octave band; or give directivity_file)", file=file, key=f"{k}.{ck}")
        sens = _v.in_range(_require(s, "sensitivity_db_spl_1v_1m", k, file, "on-axis dB SPL at 1 m for 1 V"),
                           f"{k}.sensitivity_db_spl_1v_1m", 50.0, 140.0, unit="dB SPL", file=file)
        role = _v.choice(s.get("role", "main"), f"{k}.role", SPEAKER_ROLES, file=file)
        delay_s = _v.in_range(s.get("delay_ms", 0.0), f"{k}.delay_ms", 0.0, 2000.0, unit="ms", file=file) / 1000.0
        speakers.append(Speaker(sname, pos, az, el, cov[0], cov[1], sens, dfile, role, delay_s, preset,
                                **_c.speaker_chain(s, k, file, base_dir)))
    if not speakers:
        raise _InputError("must list at least one loudspeaker", file=file, key="speakers")
    _unique([s.name for s in speakers], "speakers", file)
    return speakers


def _mics_from(data: dict, room: Room, speakers, file, base_dir) -> list:
    """The [[mics]] blocks, each checked (and against the loudspeakers: not at one's point)."""
    mics = []
    for i, m in enumerate(_list_of_tables(_require(data, "mics", "", file, "[[mics]] blocks"), "mics", file)):
        k = f"mics[{i}]"
        _known_keys(m, k, MIC_KEYS, file=file)
        m, preset = _c.apply_preset(m, "mics", k, file)
        mname = _name(_require(m, "name", k, file, "a name"), f"{k}.name", file)
        pos = _position(_require(m, "position_m", k, file, "[x, y, z] in metres"), f"{k}.position_m", room, file)
        az = _angle(m, "azimuth_deg", k, file, -360.0, 360.0, None)
        el = _angle(m, "elevation_deg", k, file, -90.0, 90.0, 0.0)
        pfile = _resolve_file(m["pattern_file"], f"{k}.pattern_file", file, base_dir) if "pattern_file" in m else None
        pattern = m.get("pattern", "table" if pfile else None)
        if pattern is None:
            raise _InputError(f"missing key (expected one of {', '.join(MIC_PATTERNS)}, or pattern_file)",
                              file=file, key=f"{k}.pattern")
        pattern = _v.choice(pattern, f"{k}.pattern", MIC_PATTERNS + ("table",), file=file)
        if pattern == "table" and pfile is None:
            raise _InputError("pattern = 'table' needs pattern_file (a polar table file)", file=file,
                              key=f"{k}.pattern_file")
        if pattern != "table" and pfile is not None:
            raise _InputError(f"pattern_file is given, so pattern must be 'table' or left out, got {pattern!r}",
                              file=file, key=f"{k}.pattern")
        sens = _v.in_range(_require(m, "sensitivity_dbv_pa", k, file, "output in dBV for 1 Pa"),
                           f"{k}.sensitivity_dbv_pa", -90.0, 0.0, unit="dBV/Pa", file=file)
        is_open = _boolean(m.get("open", True), f"{k}.open", file)
        mics.append(Mic(mname, pos, az, el, pattern, pfile, sens, is_open, preset, **_c.mic_chain(m, k, file, base_dir)))
    if not mics:
        raise _InputError("must list at least one microphone", file=file, key="mics")
    _unique([m.name for m in mics], "mics", file)

    for i, m in enumerate(mics):
        for s in speakers:
            d = _math.dist(m.position_m, s.position_m)
            if d < MIN_MIC_SPEAKER_DISTANCE_M:
                raise _InputError(
                    f"mic {m.name!r} is at the same point as loudspeaker {s.name!r} ({d:.3g} m apart); "
                    f"expected at least {MIN_MIC_SPEAKER_DISTANCE_M:g} m",
                    file=file, key=f"mics[{i}].position_m",
                )
    return mics


def _talkers_from(data: dict, room: Room, mics, file, base_dir) -> list:
    """The [[talkers]] blocks, each at a mic of the rig and not at its capsule."""
    mic_names = [m.name for m in mics]
    talkers = []
    for i, t in enumerate(_list_of_tables(data.get("talkers", []), "talkers", file)):
        k = f"talkers[{i}]"
        _known_keys(t, k, TALKER_KEYS, file=file)
        tname = _name(_require(t, "name", k, file, "a name"), f"{k}.name", file)
        pos = _position(_require(t, "position_m", k, file, "[x, y, z] in metres"), f"{k}.position_m", room, file)
        mic = _text(_require(t, "mic", k, file, "the name of the mic this talker uses"), f"{k}.mic", file,
                    allow_empty=False)
        if mic not in mic_names:
            raise _InputError(_unknown_name("mic", mic, mic_names), file=file, key=f"{k}.mic")
        level = _v.in_range(t.get("level_db_spl_1m", 60.0), f"{k}.level_db_spl_1m", 20.0, 140.0, unit="dB SPL",
                            file=file)
        d = _math.dist(pos, mics[mic_names.index(mic)].position_m)
        if d < MIN_TALKER_MIC_DISTANCE_M:
            raise _InputError(
                f"talker is {d:.3g} m from mic {mic!r}'s capsule; expected at least {MIN_TALKER_MIC_DISTANCE_M:g} m",
                file=file, key=f"{k}.position_m",
            )
        talkers.append(Talker(tname, pos, mic, level, **_c.talker_chain(t, k, file, base_dir)))
    _unique([t.name for t in talkers], "talkers", file)
    return talkers


def _listeners_from(data: dict, room: Room, file) -> list:
    """The [[listeners]] blocks (at least the farthest seat)."""
    listeners = []
    for i, lst in enumerate(_list_of_tables(_require(data, "listeners", "", file, "[[listeners]] blocks (at least "
                                                     "the farthest seat)"), "listeners", file)):
        k = f"listeners[{i}]"
        _known_keys(lst, k, LISTENER_KEYS, file=file)
        lname = _name(_require(lst, "name", k, file, "a name"), f"{k}.name", file)
        pos = _position(_require(lst, "position_m", k, file, "[x, y, z] in metres"), f"{k}.position_m", room, file)
        listeners.append(Listener(lname, pos))
    if not listeners:
        raise _InputError("must list at least one listener (the farthest seat)", file=file, key="listeners")
    _unique([x.name for x in listeners], "listeners", file)
    return listeners


def _mixes_from(data: dict, mic_names, spk_names, file) -> list:
    """The [[mixes]] blocks: known loudspeakers and mics, each loudspeaker fed by one mix."""
    mixes = []
    for i, mx in enumerate(_list_of_tables(_require(data, "mixes", "", file, "[[mixes]] blocks"), "mixes", file)):
        k = f"mixes[{i}]"
        _known_keys(mx, k, MIX_KEYS, file=file)
        xname = _name(_require(mx, "name", k, file, "a name"), f"{k}.name", file)
        kind = _v.choice(mx.get("kind", "mains"), f"{k}.kind", MIX_KINDS, file=file)
        spk = _require(mx, "speakers", k, file, "a list of loudspeaker names")
        if not isinstance(spk, list) or not spk:
            raise _v.fail(f"{k}.speakers", "a non-empty list of loudspeaker names", spk, file=file)
        for j, sn in enumerate(spk):
            sk = f"{k}.speakers[{j}]"
            _text(sn, sk, file, allow_empty=False)
            if sn not in spk_names:
                raise _InputError(_unknown_name("loudspeaker", sn, spk_names), file=file, key=sk)
        if len(set(spk)) != len(spk):
            raise _InputError("names a loudspeaker twice", file=file, key=f"{k}.speakers")
        gains = _table(_require(mx, "gains_db", k, file, "a table mic name = gain in dB"), f"{k}.gains_db", file,
                       "a table mic name = gain in dB")
        pairs = []
        for mn, g in gains.items():
            gk = f"{k}.gains_db.{mn}"
            if mn not in mic_names:
                raise _InputError(_unknown_name("mic", mn, mic_names), file=file, key=gk)
            pairs.append((mn, _v.in_range(g, gk, -100.0, 100.0, unit="dB", file=file)))
        if not pairs:
            raise _InputError("feeds no mic; expected at least one entry mic name = gain in dB", file=file,
                              key=f"{k}.gains_db")
        mixes.append(Mix(xname, tuple(spk), tuple(pairs), kind))
    if not mixes:
        raise _InputError("must list at least one mix", file=file, key="mixes")
    _unique([x.name for x in mixes], "mixes", file)
    owners: dict[str, str] = {}
    for i, x in enumerate(mixes):
        for s in x.speakers:
            if s in owners:
                raise _InputError(
                    f"loudspeaker {s!r} is already fed by mix {owners[s]!r}; each loudspeaker takes one mix",
                    file=file, key=f"mixes[{i}].speakers",
                )
            owners[s] = x.name
    return mixes


def _rig_from_dict(data: dict, *, file: str | None, base_dir: _Path, room: Room, default_name: str = "rig") -> Rig:
    from howl.loop.desk import desk_from_table

    _known_keys(data, "", RIG_KEYS, file=file)
    name = _text(data.get("name", default_name), "name", file, allow_empty=False)
    description = _text(data.get("description", ""), "description", file)
    notes_raw = data.get("notes", [])
    if not isinstance(notes_raw, list):
        raise _v.fail("notes", "a list of strings", notes_raw, file=file)
    notes = tuple(_text(n, f"notes[{i}]", file) for i, n in enumerate(notes_raw))
    fsm_db = _v.in_range(data.get("fsm_db", 6.0), "fsm_db", 0.0, 30.0, unit="dB", file=file)
    ead_m = None
    target_spl_db = None
    if "ead_m" in data and "target_spl_db" in data:
        raise _InputError("give ead_m or target_spl_db, not both (ead_m follows from the target level)",
                          file=file, key="ead_m")
    if "ead_m" in data:
        ead_m = _size(data["ead_m"], "ead_m", 1000.0, "m", file)
    if "target_spl_db" in data:
        target_spl_db = _v.in_range(data["target_spl_db"], "target_spl_db", 20.0, 130.0, unit="dB SPL", file=file)

    speakers = _speakers_from(data, room, file, base_dir)

    mics = _mics_from(data, room, speakers, file, base_dir)
    mic_names = [m.name for m in mics]
    spk_names = [s.name for s in speakers]
    talkers = _talkers_from(data, room, mics, file, base_dir)
    listeners = _listeners_from(data, room, file)
    mixes = _mixes_from(data, mic_names, spk_names, file)
    fed = {s for x in mixes for s in x.speakers}
    idle = [s for s in spk_names if s not in fed]
    if idle:
        _warnings.warn(f"{file}: loudspeaker(s) {', '.join(idle)} are in no mix and play nothing", _HowlWarning,
                       stacklevel=3)

    return Rig(
        name=name, room=room, speakers=tuple(speakers), mics=tuple(mics), talkers=tuple(talkers),
        listeners=tuple(listeners), mixes=tuple(mixes), fsm_db=fsm_db, ead_m=ead_m, target_spl_db=target_spl_db,
        source_file=file, description=description, notes=notes,
        desk=None if "desk" not in data else desk_from_table(data["desk"], file=file),
    )


def load_rig(path: str | _os.PathLike) -> Rig:
    """Load and validate a rig file and the room file it names (relative to the rig file).

    Returns a frozen :class:`Rig`; raises only :class:`howl.errors.InputError`.
    """
    try:
        return _load_rig(_Path(path))
    except _InputError as exc:
        raise _one_line(exc) from None


def _load_rig(p: _Path) -> Rig:
    data = _read_toml(p)
    file = str(p)
    if "room_file" not in data and ("shoebox" in data or "free_shape" in data):
        raise _InputError("this looks like a room file (it has [shoebox] or [free_shape]); expected a rig file "
                          "that names its room with room_file (try `howl room` for a room)", file=file, key="room_file")
    room_ref = _text(_require(data, "room_file", "", file, "the path of the room file, relative to this rig file"),
                     "room_file", file, allow_empty=False)
    room_path = _Path(room_ref)
    if not room_path.is_absolute():
        room_path = p.parent / room_path
    if not room_path.is_file():
        raise _InputError(f"file not found: {str(room_path)!r}", file=file, key="room_file")
    room = load_room(room_path)
    return _rig_from_dict(data, file=file, base_dir=p.parent, room=room, default_name=p.stem)


def bundled_rig_path() -> _Path:
    """The example rig shipped inside the package (a lectern in the stone chapel)."""
    return _Path(__file__).resolve().parents[1] / "data" / "examples" / "chapel_lectern.toml"


def _printable(text: _Any) -> str:
    """The assignment as the user typed it, with control characters escaped (keeps errors on one line)."""
    s = str(text)
    return s if s.isprintable() else s.encode("unicode_escape").decode("ascii")
