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
    Listener,
    Mic,
    Mix,
    Rig,
    Room,
    Speaker,
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


# ---------------------------------------------------------------------------- TOML ----

from howl.model._tomlfile import _read_toml  # noqa: E402  (TOML reading lives there)
from howl.model._tomlkeys import (  # noqa: E402,F401  (the shared table checks; some re-exported)
    MAX_BLOCKS, MAX_NAME_CHARS, _boolean, _known_keys, _list_of_tables, _name, _one_line, _printable, _require,
    _resolve_file, _size, _table, _text, _unique, _unknown_name,
)
from howl.model._roomfile import (  # noqa: E402,F401  (re-exported: the room loader lives there)
    FREE_SHAPE_KEYS, PATCH_KEYS, ROOM_KEYS, SHOEBOX_KEYS, load_room,
)


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
