"""Rig and room files: the shipped examples load; every kind of bad input gives one InputError
that names the file, the key path, the value and what was expected."""

from __future__ import annotations

import copy
import json
import math
import re
import warnings
from pathlib import Path

import pytest

from howl.errors import HowlWarning, InputError
from howl.model.rig import (
    MIC_PATTERNS,
    OCTAVE_BANDS_HZ,
    Rig,
    bundled_rig_path,
    load_rig,
    load_room,
    rig_to_dict,
    with_changes,
)

REPO = Path(__file__).resolve().parents[2]
BARE = re.compile(r"^[A-Za-z0-9_-]+$")


# ------------------------------------------------------------ a tiny TOML writer ----
def _key(k: str) -> str:
    return k if BARE.match(k) else json.dumps(k)


def _val(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_val(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_val(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def dumps_toml(data: dict) -> str:
    """Every top-level key as `key = <inline value>` (valid TOML, enough for tests)."""
    return "".join(f"{_key(k)} = {_val(v)}\n" for k, v in data.items())


# ----------------------------------------------------------------- base scenario ----
ROOM = {
    "name": "test room",
    "temperature_c": 20.0,
    "humidity_pct": 50.0,
    "shoebox": {"length_m": 10.0, "width_m": 8.0, "height_m": 4.0},
    "surfaces": {
        "floor": "carpet_thin_on_concrete", "ceiling": "acoustic_tile_suspended",
        "wall_x0": "plaster_on_masonry", "wall_x1": "plaster_on_masonry",
        "wall_y0": [{"material": "glass_window", "area_m2": 8.0}, {"material": "plaster_on_masonry"}],
        "wall_y1": "plaster_on_masonry",
    },
}
RIG = {
    "name": "test rig",
    "room_file": "room.toml",
    "fsm_db": 6.0,
    "target_spl_db": 70.0,
    "speakers": [
        {"name": "left", "position_m": [2.0, 1.0, 2.5], "azimuth_deg": 20.0, "elevation_deg": -5.0,
         "coverage_h_deg": 90.0, "coverage_v_deg": [120, 90, 60, 50, 40, 40, 40],
         "sensitivity_db_spl_1v_1m": 100.0},
        {"name": "right", "position_m": [2.0, 7.0, 2.5], "azimuth_deg": -20.0,
         "coverage_h_deg": 90.0, "coverage_v_deg": 60.0, "sensitivity_db_spl_1v_1m": 100.0},
    ],
    "mics": [
        {"name": "lectern", "position_m": [1.0, 4.0, 1.3], "azimuth_deg": 180.0, "elevation_deg": 30.0,
         "pattern": "cardioid", "sensitivity_dbv_pa": -40.0},
        {"name": "choir", "position_m": [1.5, 6.0, 2.0], "azimuth_deg": 180.0, "pattern": "omni",
         "sensitivity_dbv_pa": -44.0, "open": False},
    ],
    "talkers": [{"name": "speaker1", "position_m": [0.7, 4.0, 1.5], "mic": "lectern", "level_db_spl_1m": 60.0}],
    "listeners": [{"name": "back", "position_m": [9.5, 4.0, 1.2]}],
    "mixes": [{"name": "mains", "kind": "mains", "speakers": ["left", "right"],
               "gains_db": {"lectern": 25.0, "choir": 20.0}}],
}


def write_case(tmp_path: Path, rig: dict | None = None, room: dict | None = None) -> Path:
    (tmp_path / "room.toml").write_text(dumps_toml(ROOM if room is None else room), encoding="utf-8")
    p = tmp_path / "rig.toml"
    p.write_text(dumps_toml(RIG if rig is None else rig), encoding="utf-8")
    return p


def edited(base: dict, path: str, value=None, *, delete: bool = False) -> dict:
    """Copy of ``base`` with one value at ``a.b[2].c`` replaced (or deleted)."""
    data = copy.deepcopy(base)
    parts = re.findall(r"[^.\[\]]+|\[\d+\]", path)
    node = data
    for p in parts[:-1]:
        node = node[int(p[1:-1])] if p.startswith("[") else node[p]
    last = parts[-1]
    key = int(last[1:-1]) if last.startswith("[") else last
    if delete:
        del node[key]
    else:
        node[key] = value
    return data


# ------------------------------------------------------------------ good files ----
EXAMPLES = sorted((REPO / "examples").glob("*.toml"))
ROOMS = sorted((REPO / "rooms").glob("*.toml"))


def test_there_are_four_rooms_and_a_rig_for_each():
    assert {p.stem for p in ROOMS} >= {"stone_chapel", "council_chamber", "school_gym", "black_box_theatre"}
    rooms_used = set()
    for p in EXAMPLES:
        rooms_used.add(Path(load_rig(p).room.source_file).resolve())
    assert {p.resolve() for p in ROOMS} <= rooms_used


@pytest.mark.parametrize("path", ROOMS, ids=lambda p: p.name)
def test_every_shipped_room_loads_without_warnings(path):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        room = load_room(path)
    assert room.is_shoebox
    length, width, height = room.dimensions_m
    assert room.volume_m3 == pytest.approx(length * width * height)
    assert room.surface_m2 == pytest.approx(sum(s.area_m2 for s in room.surfaces))


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_every_shipped_rig_loads_without_warnings(path):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        rig = load_rig(path)
    assert isinstance(rig, Rig)
    assert rig.speakers and rig.mics and rig.listeners and rig.mixes


def test_the_council_rig_has_eight_delegate_mics_open_together():
    rig = load_rig(REPO / "examples" / "council_delegates.toml")
    assert sum(m.open for m in rig.mics) >= 8
    assert all(m.pattern == "cardioid" for m in rig.mics)


def test_the_black_box_rig_is_a_monitor_case_with_cross_feeds():
    rig = load_rig(REPO / "examples" / "blackbox_vocals_wedges.toml")
    monitors = [m for m in rig.mixes if m.kind == "monitor"]
    assert len(monitors) == 2
    for mix in monitors:
        assert len(mix.gains_db) == 2  # own vocal plus the other one
    assert len([m for m in rig.mics if m.open]) == 2


def test_the_bundled_rig_matches_the_chapel_example():
    p = bundled_rig_path()
    assert p.is_file()
    rig = load_rig(p)
    assert (p.parent / "stone_chapel.toml").read_text() == (REPO / "rooms" / "stone_chapel.toml").read_text()
    example = load_rig(REPO / "examples" / "chapel_lectern.toml")
    assert rig_to_dict(rig) == rig_to_dict(example)


def test_angles_are_degrees_in_files_and_radians_inside(tmp_path):
    rig = load_rig(write_case(tmp_path))
    assert rig.speakers[0].azimuth_rad == pytest.approx(math.radians(20.0))
    assert rig.mics[0].elevation_rad == pytest.approx(math.radians(30.0))
    assert rig.speakers[1].elevation_rad == 0.0  # default


def test_scalar_coverage_means_the_same_in_every_band(tmp_path):
    rig = load_rig(write_case(tmp_path))
    assert rig.speakers[0].coverage_h_deg == (90.0,) * len(OCTAVE_BANDS_HZ)
    assert rig.speakers[0].coverage_v_deg == (120.0, 90.0, 60.0, 50.0, 40.0, 40.0, 40.0)


def test_a_surface_made_of_patches_takes_the_area_weighted_absorption(tmp_path):
    room = load_room(write_case(tmp_path).parent / "room.toml")
    wall = room.surfaces[4]
    assert wall.name == "wall_y0" and wall.area_m2 == pytest.approx(40.0)
    from howl.model.materials import bundled_materials

    g = bundled_materials()["glass_window"].absorption
    p = bundled_materials()["plaster_on_masonry"].absorption
    for b in range(7):  # 8 m² glass + 32 m² plaster
        assert wall.absorption[b] == pytest.approx((8 * g[b] + 32 * p[b]) / 40)


def test_free_shape_rooms_by_absorption_material_or_measured_rt60(tmp_path):
    base = {"name": "hall", "free_shape": {"volume_m3": 3000.0, "surface_m2": 1500.0}}
    for extra in ({"mean_absorption": [0.2] * 7}, {"material": "plaster_on_masonry"}, {"rt60_s": [1.5] * 7}):
        data = copy.deepcopy(base)
        data["free_shape"].update(extra)
        p = tmp_path / "free.toml"
        p.write_text(dumps_toml(data))
        room = load_room(p)
        assert not room.is_shoebox and room.volume_m3 == 3000.0
        if "rt60_s" in extra:
            assert room.rt60_measured_s == (1.5,) * 7 and room.surfaces == ()
        else:
            assert room.surfaces[0].name == "average"


def test_a_room_file_can_add_its_own_material(tmp_path):
    room = copy.deepcopy(ROOM)
    room["materials"] = {"velvet": {"absorption": [0.1, 0.3, 0.5, 0.6, 0.6, 0.6, 0.6], "source": "site data"}}
    room["surfaces"]["ceiling"] = "velvet"
    r = load_room(write_case(tmp_path, room=room).parent / "room.toml")
    assert r.surfaces[1].material == "velvet" and r.surfaces[1].absorption[2] == 0.5


def test_air_defaults_are_20_c_and_50_pct(tmp_path):
    room = copy.deepcopy(ROOM)
    del room["temperature_c"], room["humidity_pct"]
    r = load_room(write_case(tmp_path, room=room).parent / "room.toml")
    assert (r.temperature_c, r.humidity_pct) == (20.0, 50.0)


def test_room_file_is_relative_to_the_rig_file(tmp_path, monkeypatch):
    p = write_case(tmp_path)
    monkeypatch.chdir(REPO)  # not the rig's folder
    rig = load_rig(p)
    assert Path(rig.room.source_file).resolve() == (tmp_path / "room.toml").resolve()


# ------------------------------------------------------------------- bad files ----
def rig_err(tmp_path, rig=None, room=None) -> str:
    with pytest.raises(InputError) as err:
        load_rig(write_case(tmp_path, rig=rig, room=room))
    msg = str(err.value)
    assert "\n" not in msg  # one line
    return msg


BAD_RIGS = [
    # (id, edit path, value, substrings the message must contain)
    ("type-position-not-list", "speakers[1].position_m", "here", ["speakers[1].position_m", "list of 3 numbers", "'here'"]),
    ("type-position-short", "mics[0].position_m", [1.0, 2.0], ["mics[0].position_m", "list of 3"]),
    ("type-bool-as-number", "fsm_db", True, ["fsm_db", "a number"]),
    ("type-open-not-bool", "mics[1].open", "no", ["mics[1].open", "true or false"]),
    ("type-name-not-string", "speakers[0].name", 5, ["speakers[0].name", "string"]),
    ("type-speakers-not-array", "speakers", {"a": 1}, ["speakers", "array of tables"]),
    ("nan-position", "speakers[0].position_m", [2.0, float("nan"), 2.5], ["speakers[0].position_m[1]", "finite", "nan"]),
    ("inf-gain", "mixes[0].gains_db", {"lectern": float("inf")}, ["mixes[0].gains_db.lectern", "finite", "inf"]),
    ("nan-sensitivity", "mics[0].sensitivity_dbv_pa", float("nan"), ["mics[0].sensitivity_dbv_pa", "finite"]),
    ("outside-room-x", "speakers[1].position_m", [12.0, 7.0, 2.5], ["speakers[1].position_m", "inside the room", "12"]),
    ("outside-room-z", "listeners[0].position_m", [5.0, 4.0, -0.5], ["listeners[0].position_m", "inside the room"]),
    ("outside-room-talker", "talkers[0].position_m", [0.7, 8.5, 1.5], ["talkers[0].position_m", "inside the room"]),
    ("mic-on-speaker", "mics[0].position_m", [2.0, 1.0, 2.5], ["mics[0].position_m", "same point", "'left'"]),
    ("mix-missing-mic", "mixes[0].gains_db", {"lecturn": 20.0}, ["mixes[0].gains_db.lecturn", "no mic named", "did you mean 'lectern'"]),
    ("mix-missing-speaker", "mixes[0].speakers", ["left", "rihgt"], ["mixes[0].speakers[1]", "no loudspeaker named", "'right'"]),
    ("talker-missing-mic", "talkers[0].mic", "podium", ["talkers[0].mic", "no mic named 'podium'"]),
    ("unknown-key-speaker", "speakers[0].azimuth", 0.0, ["speakers[0].azimuth", "unknown key", "did you mean 'azimuth_deg'"]),
    ("unknown-key-top", "fsm", 6.0, ["fsm", "unknown key", "did you mean 'fsm_db'"]),
    ("bad-pattern", "mics[0].pattern", "cardiod", ["mics[0].pattern", "did you mean 'cardioid'"]),
    ("bad-kind", "mixes[0].kind", "monitors", ["mixes[0].kind", "did you mean 'monitor'"]),
    ("zero-coverage", "speakers[0].coverage_h_deg", 0.0, ["speakers[0].coverage_h_deg", "(0, 360]"]),
    ("coverage-six-bands", "speakers[0].coverage_v_deg", [90] * 6, ["speakers[0].coverage_v_deg", "7 numbers"]),
    ("elevation-range", "mics[0].elevation_deg", 95.0, ["mics[0].elevation_deg", "[-90, 90]"]),
    ("negative-ead", "ead_m", -2.0, ["ead_m"]),
    ("fsm-range", "fsm_db", 45.0, ["fsm_db", "[0, 30]"]),
    ("missing-room-file", "room_file", "nowhere/room.toml", ["room_file", "file not found", "nowhere/room.toml"]),
    ("missing-pattern-file", "mics[0].pattern_file", "polar.csv", ["mics[0].pattern_file", "file not found"]),
    ("missing-directivity-file", "speakers[0].directivity_file", "box.sofa", ["speakers[0].directivity_file", "file not found"]),
]


@pytest.mark.parametrize("case", BAD_RIGS, ids=[c[0] for c in BAD_RIGS])
def test_bad_rig_values_give_one_line_naming_file_key_value_and_expectation(tmp_path, case):
    _, path, value, needles = case
    rig = edited(RIG, path, value)
    if path.startswith("mics[0].pattern_file"):
        del rig["mics"][0]["pattern"]
    msg = rig_err(tmp_path, rig=rig)
    assert "rig.toml" in msg
    for n in needles:
        assert n in msg, (n, msg)


def test_duplicate_names_are_refused(tmp_path):
    rig = copy.deepcopy(RIG)
    rig["mics"][1]["name"] = "lectern"
    msg = rig_err(tmp_path, rig=rig)
    assert "mics[1].name" in msg and "duplicate name 'lectern'" in msg


def test_duplicate_speaker_names_are_refused(tmp_path):
    rig = copy.deepcopy(RIG)
    rig["speakers"][1]["name"] = "left"
    assert "speakers[1].name" in rig_err(tmp_path, rig=rig)


def test_missing_required_key_is_named(tmp_path):
    msg = rig_err(tmp_path, rig=edited(RIG, "speakers[0].sensitivity_db_spl_1v_1m", delete=True))
    assert "speakers[0].sensitivity_db_spl_1v_1m" in msg and "missing key" in msg


def test_ead_and_target_together_are_refused(tmp_path):
    msg = rig_err(tmp_path, rig=edited(RIG, "ead_m", 2.0))
    assert "ead_m" in msg and "not both" in msg


def test_a_speaker_in_two_mixes_is_refused(tmp_path):
    rig = copy.deepcopy(RIG)
    rig["mixes"].append({"name": "mon", "kind": "monitor", "speakers": ["left"], "gains_db": {"lectern": 10.0}})
    assert "mixes[1].speakers" in rig_err(tmp_path, rig=rig)


BAD_ROOMS = [
    ("zero-length", "shoebox.length_m", 0.0, ["shoebox.length_m", "> 0", "0 m"]),
    ("negative-height", "shoebox.height_m", -3.0, ["shoebox.height_m", "-3"]),
    ("string-width", "shoebox.width_m", "8 m", ["shoebox.width_m", "a number", "'8 m'"]),
    ("nan-width", "shoebox.width_m", float("nan"), ["shoebox.width_m", "finite"]),
    ("cold", "temperature_c", -25.0, ["temperature_c", "[-20, 50]", "-25"]),
    ("hot", "temperature_c", 55.0, ["temperature_c", "[-20, 50]"]),
    ("inf-temperature", "temperature_c", float("inf"), ["temperature_c", "finite"]),
    ("humidity", "humidity_pct", 120.0, ["humidity_pct", "[0, 100]"]),
    ("unknown-material", "surfaces.floor", "carpett_thin_on_concrete", ["surfaces.floor", "did you mean 'carpet_thin_on_concrete'"]),
    ("unknown-surface", "surfaces.wall_z0", "plaster_on_masonry", ["surfaces.wall_z0", "unknown key"]),
    ("unknown-room-key", "temperature", 20.0, ["temperature", "did you mean 'temperature_c'"]),
    ("patch-too-big", "surfaces.wall_y0", [{"material": "glass_window", "area_m2": 50.0}, {"material": "plaster_on_masonry"}],
     ["surfaces.wall_y0", "more than the surface"]),
]


@pytest.mark.parametrize("case", BAD_ROOMS, ids=[c[0] for c in BAD_ROOMS])
def test_bad_room_values_give_one_line_naming_the_room_file(tmp_path, case):
    _, path, value, needles = case
    msg = rig_err(tmp_path, room=edited(ROOM, path, value))
    assert "room.toml" in msg
    for n in needles:
        assert n in msg, (n, msg)


def free_room(tmp_path, **free) -> str:
    data = {"name": "free", "free_shape": {"volume_m3": 1000.0, "surface_m2": 700.0, **free}}
    p = tmp_path / "free.toml"
    p.write_text(dumps_toml(data))
    with pytest.raises(InputError) as err:
        load_room(p)
    return str(err.value)


@pytest.mark.parametrize(
    "free,needles",
    [
        ({"mean_absorption": [0.2] * 6 + [1.0]}, ["free_shape.mean_absorption[6]", "[0, 1)", "1"]),
        ({"mean_absorption": [-0.1] + [0.2] * 6}, ["free_shape.mean_absorption[0]", "[0, 1)"]),
        ({"rt60_s": [0.05] + [1.0] * 6}, ["free_shape.rt60_s[0]", "[0.1, 20]", "0.05"]),
        ({"rt60_s": [1.0] * 6 + [25.0]}, ["free_shape.rt60_s[6]", "[0.1, 20]"]),
        ({"rt60_s": [1.0] * 6 + [float("nan")]}, ["free_shape.rt60_s[6]", "finite"]),
        ({"rt60_s": [1.0] * 7, "mean_absorption": [0.2] * 7}, ["free_shape", "exactly one"]),
        ({}, ["free_shape", "exactly one"]),
        ({"volume_m3": -5.0, "rt60_s": [1.0] * 7}, ["free_shape.volume_m3", "> 0"]),
        ({"surface_m2": 100.0, "rt60_s": [1.0] * 7}, ["free_shape.surface_m2", "sphere"]),
    ],
)
def test_bad_free_shapes_are_refused(tmp_path, free, needles):
    msg = free_room(tmp_path, **free)
    for n in needles:
        assert n in msg, (n, msg)


def test_all_zero_absorption_is_refused(tmp_path):
    msg = free_room(tmp_path, mean_absorption=[0.0] * 7)
    assert "absorbs nothing" in msg


def test_toml_syntax_errors_give_line_and_column(tmp_path):
    p = tmp_path / "rig.toml"
    p.write_text('name = "x"\nfsm_db = = 6\n')
    with pytest.raises(InputError) as err:
        load_rig(p)
    assert "line 2, column" in str(err.value) and "rig.toml" in str(err.value)


def test_toml_syntax_errors_in_the_room_name_the_room_file(tmp_path):
    p = write_case(tmp_path)
    (tmp_path / "room.toml").write_text('[shoebox]\nlength_m = 10\n[shoebox]\n')
    with pytest.raises(InputError) as err:
        load_rig(p)
    assert "room.toml" in str(err.value) and "line 3" in str(err.value)


def test_a_missing_rig_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError) as err:
        load_rig(tmp_path / "nope.toml")
    assert "nope.toml" in str(err.value) and "not found" in str(err.value)


def test_non_utf8_file_is_an_input_error(tmp_path):
    p = tmp_path / "rig.toml"
    p.write_bytes(b'name = "\xff\xfe"\n')
    with pytest.raises(InputError):
        load_rig(p)


def test_an_idle_loudspeaker_warns(tmp_path):
    rig = edited(RIG, "mixes[0].speakers", ["left"])
    with pytest.warns(HowlWarning, match="right"):
        load_rig(write_case(tmp_path, rig=rig))


# -------------------------------------------------------------------- what-if ----
def test_with_changes_edits_named_items_and_revalidates(tmp_path):
    rig = load_rig(write_case(tmp_path))
    new = with_changes(rig, [
        "mics.lectern.pattern=supercardioid",
        "mics.lectern.position_m=[1.2, 4.0, 1.4]",
        "mics.choir.open=true",
        "fsm_db=3",
        "mixes.mains.gains_db.lectern=28.5",
        "speakers.left.azimuth_deg=10",
    ])
    assert new.mic("lectern").pattern == "supercardioid"
    assert new.mic("lectern").position_m == (1.2, 4.0, 1.4)
    assert new.mic("choir").open is True
    assert new.fsm_db == 3.0
    assert new.mixes[0].gain_db("lectern") == 28.5
    assert new.speaker("left").azimuth_rad == pytest.approx(math.radians(10))
    assert rig.mic("lectern").pattern == "cardioid"  # the original is untouched (frozen)
    assert new.room is rig.room


def test_with_changes_without_edits_reproduces_the_rig(tmp_path):
    rig = load_rig(write_case(tmp_path))
    assert rig_to_dict(with_changes(rig, [])) == rig_to_dict(rig)


@pytest.mark.parametrize(
    "assignment,needles",
    [
        ("mics.lectern.pattern=supercardiod", ["--what-if", "did you mean 'supercardioid'"]),
        ("mics.lecturn.pattern=omni", ["--what-if", "no mic named 'lecturn'", "'lectern'"]),
        ("mics.lectern.patern=omni", ["--what-if", "did you mean 'pattern'"]),
        ("mics.lectern.position_m=[20, 4, 1]", ["--what-if", "inside the room"]),
        ("mics.lectern.position_m=[2.0, 1.0, 2.5]", ["--what-if", "same point"]),
        ("fsm_db=nan", ["--what-if", "finite"]),
        ("fsmdb=3", ["--what-if", "did you mean 'fsm_db'"]),
        ("mics.lectern.open=maybe", ["--what-if", "true or false"]),
        ("mics.lectern.pattern", ["--what-if", "key=value"]),
        ("mixes.mains.gains_db.ghost=3", ["--what-if", "no mic named 'ghost'"]),
        ("mics.lectern.position_m=[1, 2", ["--what-if", "not a TOML value"]),
    ],
)
def test_with_changes_errors_name_the_option(tmp_path, assignment, needles):
    rig = load_rig(write_case(tmp_path))
    with pytest.raises(InputError) as err:
        with_changes(rig, [assignment])
    for n in needles:
        assert n in str(err.value), (n, str(err.value))


def test_every_pattern_name_is_accepted_by_what_if(tmp_path):
    rig = load_rig(write_case(tmp_path))
    for pattern in MIC_PATTERNS:
        assert with_changes(rig, [f"mics.lectern.pattern={pattern}"]).mic("lectern").pattern == pattern


# ------------------------------------------------------------- the CLI: howl check ----
from typer.testing import CliRunner  # noqa: E402

from howl.cli import app  # noqa: E402

runner = CliRunner()


def _one_line_error(result, *needles):
    assert result.exit_code == 2, (result.exit_code, result.output)
    err = result.stderr.strip()
    assert len(err.splitlines()) == 1, err
    assert err.startswith("howl: error: ")
    assert "Traceback" not in result.output
    for n in needles:
        assert n in err, (n, err)
    return err


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_check_accepts_every_example_and_summarises_it(path):
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 0, result.output
    rig = load_rig(path)
    assert rig.name in result.stdout and rig.room.name in result.stdout
    assert "ok: the rig and its room are valid" in result.stdout


def test_check_without_a_file_checks_the_bundled_rig():
    result = runner.invoke(app, ["check"])
    assert result.exit_code == 0 and "Stone chapel" in result.stdout


def test_check_json_is_one_object_with_the_counts(tmp_path):
    result = runner.invoke(app, ["check", str(write_case(tmp_path)), "--json"])
    assert result.exit_code == 0
    data = json.loads(result.stdout)
    assert data["valid"] is True and data["n_open_mics"] == 1
    assert [s["name"] for s in data["speakers"]] == ["left", "right"]
    assert data["room"]["volume_m3"] == pytest.approx(320.0)


@pytest.mark.parametrize("case", BAD_RIGS, ids=[c[0] for c in BAD_RIGS])
def test_check_gives_one_line_and_exit_2_for_each_bad_rig(tmp_path, case):
    _, path, value, needles = case
    rig = edited(RIG, path, value)
    if path.startswith("mics[0].pattern_file"):
        del rig["mics"][0]["pattern"]
    result = runner.invoke(app, ["check", str(write_case(tmp_path, rig=rig))])
    _one_line_error(result, "rig.toml", *needles)


@pytest.mark.parametrize("case", BAD_ROOMS, ids=[c[0] for c in BAD_ROOMS])
def test_check_gives_one_line_and_exit_2_for_each_bad_room(tmp_path, case):
    _, path, value, needles = case
    result = runner.invoke(app, ["check", str(write_case(tmp_path, room=edited(ROOM, path, value)))])
    _one_line_error(result, "room.toml", *needles)


def test_check_reports_toml_syntax_errors_with_line_and_column(tmp_path):
    p = tmp_path / "rig.toml"
    p.write_text('name = "x"\nspeakers = [\n  {name = "a" position_m = [1, 2, 3]},\n]\n')
    _one_line_error(runner.invoke(app, ["check", str(p)]), "rig.toml", "line 3, column")


def test_check_reports_duplicate_names_and_missing_files(tmp_path):
    rig = copy.deepcopy(RIG)
    rig["mics"][1]["name"] = "lectern"
    _one_line_error(runner.invoke(app, ["check", str(write_case(tmp_path, rig=rig))]), "duplicate name")
    _one_line_error(runner.invoke(app, ["check", str(tmp_path / "missing.toml")]), "missing.toml", "not found")


def test_check_what_if_errors_name_the_option(tmp_path):
    result = runner.invoke(app, ["check", str(write_case(tmp_path)), "--what-if", "mics.lectern.pattern=cardiod"])
    _one_line_error(result, "--what-if", "did you mean 'cardioid'")


def test_check_what_if_applies_the_change(tmp_path):
    result = runner.invoke(app, ["check", str(write_case(tmp_path)), "--what-if", "mics.choir.open=true", "--json"])
    assert result.exit_code == 0 and json.loads(result.stdout)["n_open_mics"] == 2


def test_check_given_a_room_file_says_so():
    result = runner.invoke(app, ["check", str(REPO / "rooms" / "school_gym.toml")])
    _one_line_error(result, "school_gym.toml", "room file", "howl room")
