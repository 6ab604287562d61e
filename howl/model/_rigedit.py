"""What-if edits of a loaded rig (the implementation behind :func:`howl.model.rig.with_changes`).

Split out of ``_rigfile.py`` to keep that module short. Import the public names from
:mod:`howl.model.rig` (``with_changes``, ``rig_to_dict``), not from here.
"""

from __future__ import annotations

import math as _math
import re as _re
import tomllib as _tomllib
import warnings as _warnings
from pathlib import Path as _Path
from typing import Any as _Any

from howl import validate as _v
from howl.errors import HowlWarning as _HowlWarning
from howl.errors import InputError as _InputError
from howl.model._chainfile import bundled_presets as _bundled_presets
from howl.model._chainfile import chain_to_dict as _chain_to_dict
from howl.model._rigfile import (
    LISTENER_KEYS, MIC_KEYS, MIX_KEYS, SPEAKER_KEYS, TALKER_KEYS, _printable, _rig_from_dict, _unknown_name,
)
from howl.model.rig import Rig


# ------------------------------------------------------------------- what-if edits ----

def rig_to_dict(rig: Rig) -> dict:
    """The rig as the dict a rig file would hold (without room_file), for edits and re-validation."""
    def pos(p):
        return [float(c) for c in p]

    def deg(rad):  # rounded so that a round trip never leaves the valid range (e.g. 90.00000000000001)
        return round(_math.degrees(rad), 9)

    out: dict = {"name": rig.name, "description": rig.description, "notes": list(rig.notes), "fsm_db": rig.fsm_db}
    if rig.ead_m is not None:
        out["ead_m"] = rig.ead_m
    if rig.target_spl_db is not None:
        out["target_spl_db"] = rig.target_spl_db
    out["speakers"] = []
    for s in rig.speakers:
        d = {
            "name": s.name, "position_m": pos(s.position_m), "azimuth_deg": deg(s.azimuth_rad),
            "elevation_deg": deg(s.elevation_rad), "coverage_h_deg": list(s.coverage_h_deg),
            "coverage_v_deg": list(s.coverage_v_deg), "sensitivity_db_spl_1v_1m": s.sensitivity_db_spl_1v_1m,
            "role": s.role, "delay_ms": round(s.delay_s * 1000.0, 9),
        }
        if s.directivity_file:
            d["directivity_file"] = s.directivity_file
        out["speakers"].append(d | _chain_to_dict(s))
    out["mics"] = []
    for m in rig.mics:
        d = {
            "name": m.name, "position_m": pos(m.position_m), "azimuth_deg": deg(m.azimuth_rad),
            "elevation_deg": deg(m.elevation_rad), "pattern": m.pattern,
            "sensitivity_dbv_pa": m.sensitivity_dbv_pa, "open": m.open,
        }
        if m.pattern_file:
            d["pattern_file"] = m.pattern_file
        out["mics"].append(d | _chain_to_dict(m))
    out["talkers"] = [
        {"name": t.name, "position_m": pos(t.position_m), "mic": t.mic, "level_db_spl_1m": t.level_db_spl_1m}
        | _chain_to_dict(t)
        for t in rig.talkers
    ]
    out["listeners"] = [{"name": x.name, "position_m": pos(x.position_m)} for x in rig.listeners]
    out["mixes"] = [
        {"name": x.name, "kind": x.kind, "speakers": list(x.speakers), "gains_db": dict(x.gains_db)}
        for x in rig.mixes
    ]
    return out


_BARE_WORD = _re.compile(r"^[A-Za-z_][A-Za-z0-9_\-]*$")
_SECTIONS = {"speakers": "loudspeaker", "mics": "mic", "talkers": "talker", "listeners": "listener", "mixes": "mix"}
_SECTION_KEYS = {"speakers": SPEAKER_KEYS, "mics": MIC_KEYS, "talkers": TALKER_KEYS, "listeners": LISTENER_KEYS,
                 "mixes": MIX_KEYS}
_TOP_EDITABLE = ("fsm_db", "ead_m", "target_spl_db", "name", "description")


def _parse_value(text: str, option: str, assignment: str) -> _Any:
    try:
        return _tomllib.loads(f"value = {text}")["value"]
    except (_tomllib.TOMLDecodeError, ValueError, RecursionError):
        pass
    if _BARE_WORD.match(text) and text not in ("true", "false", "nan", "inf"):
        return text  # a bare word: a name or a choice (pattern=supercardioid)
    raise _InputError(f"value {text!r} is not a TOML value (a number, true/false, \"text\" or [list])",
                      key=f"{option} {_printable(assignment)}")


def _set_item_key(item: dict, section: str, key: str, value) -> None:
    """Set ``item[key] = value`` and drop the keys the new value replaces (a pattern file, a preset's values)."""
    item[key] = value
    if section == "mics" and key == "pattern" and value != "table":
        item.pop("pattern_file", None)
    if section == "mics" and key == "pattern_file":
        item["pattern"] = "table"
    if section == "talkers" and key == "spectrum" and value != "table":
        item.pop("spectrum_file", None)
    if section == "talkers" and key == "spectrum_file":
        item["spectrum"] = "table"
    if section in ("mics", "speakers") and key == "preset" and isinstance(value, str):
        # a new preset brings all of its values (the old preset's were written out)
        for pk in _bundled_presets()[section].get(value, {}):
            item.pop(pk, None)
        if section == "speakers" and "usable_range" in _bundled_presets()[section].get(value, {}):
            item.pop("response_file", None)
    if key == "response_file" and section == "speakers":
        item.pop("usable_range", None)
    if key == "usable_range" and section == "speakers":
        item.pop("response_file", None)


def with_changes(rig: Rig, assignments: list[str] | tuple[str, ...], *, option: str = "--what-if") -> Rig:
    """Apply what-if edits such as ``mics.lectern.pattern=supercardioid`` and re-validate.

    Each assignment is ``section.name.key=value`` (sections: speakers, mics, talkers, listeners,
    mixes; ``mixes.<mix>.gains_db.<mic>=30`` sets one gain) or ``key=value`` for a top-level
    key (``fsm_db=3``, ``ead_m=2``, ``target_spl_db=70``). Values are TOML values; a bare word
    is taken as a string. The result is validated exactly like a rig file; any error is an
    :class:`InputError` that names ``option`` and the assignment.
    """
    import copy

    base_dir = _Path(rig.source_file).parent if rig.source_file else _Path.cwd()
    data = rig_to_dict(rig)
    current = rig
    for assignment in assignments:
        where = f"{option} {_printable(assignment)}"
        if not isinstance(assignment, str) or "=" not in assignment:
            raise _InputError("expected key=value, e.g. mics.lectern.pattern=supercardioid",
                              key=f"{option} {_printable(assignment)}")
        path_s, value_s = (part.strip() for part in assignment.split("=", 1))
        value = _parse_value(value_s, option, assignment)
        parts = path_s.split(".")
        trial = copy.deepcopy(data)
        if len(parts) == 1:
            if parts[0] not in _TOP_EDITABLE:
                hint = _v.closest(parts[0], list(_TOP_EDITABLE) + list(_SECTIONS))
                tail = f" (did you mean {hint!r}?)" if hint else f"; editable: {', '.join(_TOP_EDITABLE)}"
                raise _InputError(f"unknown key {parts[0]!r}{tail}", key=where)
            trial[parts[0]] = value
            if parts[0] == "ead_m":
                trial.pop("target_spl_db", None)
            elif parts[0] == "target_spl_db":
                trial.pop("ead_m", None)
        else:
            section = parts[0]
            if section not in _SECTIONS:
                hint = _v.closest(section, list(_SECTIONS) + list(_TOP_EDITABLE))
                tail = f" (did you mean {hint!r}?)" if hint else f"; sections: {', '.join(_SECTIONS)}"
                raise _InputError(f"unknown section {section!r}{tail}", key=where)
            if len(parts) < 3:
                raise _InputError(f"expected {section}.<name>.<key>=value", key=where)
            names = [item["name"] for item in trial[section]]
            item_name = parts[1]
            if item_name not in names:
                raise _InputError(_unknown_name(_SECTIONS[section], item_name, names), key=where)
            item = trial[section][names.index(item_name)]
            key = parts[2]
            if key not in _SECTION_KEYS[section]:
                hint = _v.closest(key, _SECTION_KEYS[section])
                tail = f" (did you mean {hint!r}?)" if hint else f"; valid keys: {', '.join(_SECTION_KEYS[section])}"
                raise _InputError(f"unknown key {key!r}{tail}", key=where)
            if section == "mixes" and key == "gains_db" and len(parts) == 4:
                item["gains_db"][parts[3]] = value
            elif len(parts) != 3:
                raise _InputError(f"expected {section}.<name>.<key>=value", key=where)
            else:
                _set_item_key(item, section, key, value)
        try:
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore", _HowlWarning)  # the rig's own warnings were given at load time
                current = _rig_from_dict(trial, file=rig.source_file, base_dir=base_dir, room=rig.room,
                                         default_name=rig.name)
        except _InputError as exc:
            raise _InputError(exc.message, key=where) from None
        data = trial
    return current
