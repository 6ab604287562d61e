"""Random and mutated rig and room files: every one either loads or raises InputError.

Property test (hypothesis): the loader never lets another exception through (no KeyError,
TypeError, ZeroDivisionError, RecursionError...), whatever the file holds. Seeds are explicit
(``@seed`` on each test, no example database), so every run draws the same files.
"""

from __future__ import annotations

import copy
import warnings

import hypothesis.strategies as st
from hypothesis import HealthCheck, given, seed, settings

from howl.errors import InputError
from howl.model.rig import load_rig, load_room

from test_rig import RIG, ROOM, dumps_toml

# filter_too_much: the nested-value strategy drops None leaves; on some seeds Hypothesis counts
# that as too much filtering and fails the health check (seen with --hypothesis-seed=20)
_QUIET = [HealthCheck.function_scoped_fixture, HealthCheck.too_slow, HealthCheck.filter_too_much]
SETTINGS = settings(max_examples=200, deadline=None, suppress_health_check=_QUIET, database=None)

scalars = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-10**6, max_value=10**6),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -1.0, 1.0, 0.999999, 1.0000001, 1e300, -1e-300, 0.1, 20.0, 50.0, -20.0]),
    st.text(max_size=12),
    st.sampled_from(["cardioid", "omni", "left", "right", "lectern", "choir", "mains", "monitor", "room.toml",
                     "plaster_on_masonry", "table", ""]),
)
values = st.recursive(
    scalars.filter(lambda v: v is not None),
    lambda inner: st.one_of(st.lists(inner, max_size=8), st.dictionaries(st.text(max_size=8), inner, max_size=4)),
    max_leaves=12,
)


def _paths(node, prefix=()):
    """Every path into a nested dict/list."""
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, prefix + (i,))


def _mutate(base: dict, data) -> dict:
    doc = copy.deepcopy(base)
    for _ in range(data.draw(st.integers(min_value=1, max_value=4))):
        paths = [p for p in _paths(doc) if p]
        if not paths:
            break
        path = data.draw(st.sampled_from(paths))
        parent = doc
        for k in path[:-1]:
            parent = parent[k]
        action = data.draw(st.sampled_from(["replace", "delete", "add", "duplicate"]))
        key = path[-1]
        if action == "replace":
            parent[key] = data.draw(values)
        elif action == "delete":
            del parent[key]
        elif action == "add" and isinstance(parent, dict):
            parent[data.draw(st.text(min_size=1, max_size=10))] = data.draw(values)
        elif action == "duplicate" and isinstance(parent, list):
            parent.append(copy.deepcopy(parent[key]))
    return doc


def _folder(factory, name):
    """One folder per test, reused by its examples (files are overwritten)."""
    folder = factory.getbasetemp() / name
    folder.mkdir(exist_ok=True)
    return folder


def _check(load, path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            load(path)
        except InputError as exc:
            assert str(exc) and "\n" not in str(exc)


@seed(19001)
@SETTINGS
@given(data=st.data())
def test_mutated_rig_files_load_or_raise_input_error(tmp_path_factory, data):
    folder = _folder(tmp_path_factory, "fuzz_rig")
    room = _mutate(ROOM, data) if data.draw(st.booleans()) else ROOM
    (folder / "room.toml").write_text(dumps_toml(room), encoding="utf-8")
    rig = _mutate(RIG, data)
    p = folder / "rig.toml"
    p.write_text(dumps_toml(rig), encoding="utf-8")
    _check(load_rig, p)


@seed(19002)
@SETTINGS
@given(data=st.data())
def test_garbled_rig_text_loads_or_raises_input_error(tmp_path_factory, data):
    folder = _folder(tmp_path_factory, "fuzz_text")
    (folder / "room.toml").write_text(dumps_toml(ROOM), encoding="utf-8")
    text = bytearray(dumps_toml(RIG).encode())
    for _ in range(data.draw(st.integers(min_value=1, max_value=5))):
        i = data.draw(st.integers(min_value=0, max_value=len(text) - 1))
        op = data.draw(st.sampled_from(["flip", "delete", "insert"]))
        if op == "flip":
            text[i] = data.draw(st.integers(min_value=0, max_value=255))
        elif op == "delete":
            del text[i]
        else:
            text[i:i] = data.draw(st.sampled_from([b"=", b"[", b"]", b"\n", b'"', b",", b"nan", b"inf", b"-", b"{"]))
    p = folder / "rig.toml"
    p.write_bytes(bytes(text))
    _check(load_rig, p)


@seed(19003)
@settings(max_examples=100, deadline=None, suppress_health_check=_QUIET, database=None)
@given(doc=st.dictionaries(st.sampled_from(["name", "shoebox", "surfaces", "free_shape", "materials",
                                            "temperature_c", "humidity_pct", "x"]), values, max_size=6))
def test_random_room_files_load_or_raise_input_error(tmp_path_factory, doc):
    folder = _folder(tmp_path_factory, "fuzz_room")
    p = folder / "room.toml"
    p.write_text(dumps_toml(doc), encoding="utf-8")
    _check(load_room, p)


_PATHS = st.sampled_from([
    "mics.lectern.pattern", "mics.lectern.position_m", "mics.choir.open", "mics.lectern.sensitivity_dbv_pa",
    "speakers.left.azimuth_deg", "speakers.right.coverage_h_deg", "speakers.left.role", "speakers.left.name",
    "mixes.mains.gains_db.lectern", "mixes.mains.speakers", "mixes.mains.kind", "talkers.speaker1.mic",
    "listeners.back.position_m", "fsm_db", "ead_m", "target_spl_db", "mics.ghost.open", "nonsense", "mics..x",
    "mixes.mains.gains_db", "speakers.left.position_m.0",
])
_VALUE_TEXT = st.one_of(
    st.sampled_from(["supercardioid", "true", "false", "nan", "inf", "-inf", "3", "-3", "1e400", "[1, 2, 3]",
                     "[0.5, 4, 1.3]", "[2.0, 1.0, 2.5]", '"x"', "[]", "{}", "{a = 1}", "[1, 2", "= =", "",
                     "lectern", "monitor", "[90, 90, 90, 90, 90, 90, 90]"]),
    st.text(max_size=10),
)


@seed(19004)
@settings(max_examples=100, deadline=None, suppress_health_check=_QUIET, database=None)
@given(edits=st.lists(st.tuples(_PATHS, _VALUE_TEXT), min_size=1, max_size=3))
def test_random_what_if_edits_give_a_rig_or_an_input_error(tmp_path_factory, edits):
    folder = _folder(tmp_path_factory, "fuzz_whatif")
    (folder / "room.toml").write_text(dumps_toml(ROOM), encoding="utf-8")
    (folder / "rig.toml").write_text(dumps_toml(RIG), encoding="utf-8")
    rig = load_rig(folder / "rig.toml")
    from howl.model.rig import with_changes

    try:
        with_changes(rig, [f"{p}={v}" for p, v in edits])
    except InputError as exc:
        assert "--what-if" in str(exc) and "\n" not in str(exc)


_POSITIONED = [("speakers", 0), ("speakers", 1), ("mics", 0), ("mics", 1), ("talkers", 0), ("listeners", 0)]


def _collide(doc: dict, data) -> dict:
    """Now and then put one thing where another stands, or close every mic: the faults that show only
    when the parts of a rig meet (a listener on a loudspeaker, a talker on a capsule, no open mic)."""
    action = data.draw(st.sampled_from(["none", "none", "collide", "collide", "mute"]))
    if action == "collide":
        a, b = data.draw(st.sampled_from(_POSITIONED)), data.draw(st.sampled_from(_POSITIONED))
        try:
            doc[a[0]][a[1]]["position_m"] = copy.deepcopy(doc[b[0]][b[1]]["position_m"])
        except (KeyError, IndexError, TypeError):
            pass
    elif action == "mute":
        for m in doc.get("mics", []) if isinstance(doc.get("mics"), list) else []:
            if isinstance(m, dict):
                m["open"] = False
    return doc


def _cli(*args):
    from typer.testing import CliRunner

    from howl.cli import app

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return CliRunner().invoke(app, list(args))


@seed(18005)
@settings(max_examples=60, deadline=None, suppress_health_check=_QUIET)
@given(data=st.data())
def test_check_and_plan_agree_on_mutated_rigs(tmp_path_factory, data):
    # issue 18: a rig that `check` passes must not fail `plan` on validation (exit 2); both
    # exit 0 or 2 (never a traceback, exit 1)
    folder = _folder(tmp_path_factory, "fuzz_agree")
    room = _mutate(ROOM, data) if data.draw(st.booleans()) else ROOM
    (folder / "room.toml").write_text(dumps_toml(room), encoding="utf-8")
    p = folder / "rig.toml"
    p.write_text(dumps_toml(_collide(_mutate(RIG, data), data)), encoding="utf-8")
    c = _cli("check", str(p))
    assert c.exit_code in (0, 2), c.output
    pl = _cli("plan", str(p), "--json")
    assert pl.exit_code in (0, 2), pl.output
    if c.exit_code == 0:
        assert pl.exit_code == 0, f"check passed, plan refused: {pl.output}"
    else:
        err = c.output.strip().splitlines()
        assert len(err) == 1 and "rig.toml" in err[0] or "room.toml" in err[0], c.output


# the signal chain's keys (issue 17), mutated the same way
CHAIN_RIG = copy.deepcopy(RIG)
CHAIN_RIG["speakers"][0] |= {"preset": "two-way-12in-point-source",
                             "usable_range": {"low_hz": 60.0, "high_hz": 16000.0, "low_slope_db_per_oct": 24.0}}
CHAIN_RIG["mics"][0] |= {"preset": "gooseneck-small-diaphragm-cardioid", "high_pass": {"freq_hz": 120.0, "order": 2},
                         "eq": [{"kind": "peaking", "freq_hz": 2500.0, "gain_db": -3.0, "q": 2.0},
                                {"kind": "low_pass", "freq_hz": 16000.0}]}
CHAIN_RIG["talkers"][0] |= {"spectrum": "raised"}


@seed(19006)
@SETTINGS
@given(data=st.data())
def test_mutated_chain_keys_load_or_raise_input_error(tmp_path_factory, data):
    folder = _folder(tmp_path_factory, "fuzz_chain")
    (folder / "room.toml").write_text(dumps_toml(ROOM), encoding="utf-8")
    (folder / "resp.csv").write_text("100,-3\n1000,0\n10000,-6\n", encoding="utf-8")
    rig = copy.deepcopy(CHAIN_RIG)
    if data.draw(st.booleans()):
        rig["mics"][1]["response_file"] = data.draw(st.sampled_from(["resp.csv", "room.toml", "missing.csv", ""]))
    rig = _mutate(rig, data)
    p = folder / "rig.toml"
    p.write_text(dumps_toml(rig), encoding="utf-8")
    _check(load_rig, p)


def test_the_unmutated_chain_rig_loads(tmp_path):
    from test_rig import write_case

    rig = load_rig(write_case(tmp_path, CHAIN_RIG))
    assert rig.mics[0].high_pass.order == 2 and rig.speakers[0].usable_range.low_hz == 60.0
