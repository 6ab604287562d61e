"""The materials table: complete, in range, provenance noted, and close to a published database."""

from __future__ import annotations

import pytest

from howl.errors import InputError
from howl.model.materials import bundled_materials, material_table, parse_materials
from howl.model.rig import OCTAVE_BANDS_HZ


def test_table_has_twenty_or_more_finishes_with_seven_bands_each():
    table = bundled_materials()
    assert len(table) >= 20
    for m in table.values():
        assert len(m.absorption) == len(OCTAVE_BANDS_HZ) == 7
        assert all(0.0 <= a < 1.0 for a in m.absorption), m.name


def test_every_value_names_its_provenance_and_memory_values_say_check_product_data():
    for m in bundled_materials().values():
        assert m.source, m.name
        if "from memory" in m.source:
            assert "check" in m.source, m.name


def test_table_covers_the_finishes_the_issue_names():
    names = " ".join(bundled_materials())
    for word in ("plaster", "concrete", "carpet", "wood", "glass", "upholstered", "audience", "acoustic_tile", "curtain"):
        assert word in names, word


# Cross-check against an independent database: pyroomacoustics 0.10.1 ships a materials table
# whose data are taken from M. Vorländer, *Auralization* (Springer 2008), Appendix A (the
# library's parameters.py says so). Published absorption data for "the same" finish scatter by
# about ±0.1–0.15 between sources, so that is the tolerance (common practice, no source).
PAIRS = [
    ("limestone_ashlar", "limestone_wall"),
    ("stone_flag_floor", "marble_floor"),
    ("linoleum_on_concrete", "linoleum_on_concrete"),
    ("carpet_heavy_on_underlay", "carpet_1.35_kg_m2"),
    ("upholstered_seats_empty", "chairs_upholstered_cloth"),
    ("plasterboard_on_studs", "plasterboard"),
    ("wood_panel_on_battens", "wooden_lining"),
    ("brick_unglazed", "brick_wall_rough"),
    ("mineral_wool_panel_50mm", "rockwool_50mm_80kgm3"),
    ("concrete_painted", "unpainted_concrete"),
]


@pytest.mark.parametrize("ours,theirs", PAIRS, ids=[f"{a}~pyroomacoustics:{b}" for a, b in PAIRS])
def test_memory_values_agree_with_the_pyroomacoustics_database(ours, theirs):
    pra_params = pytest.importorskip("pyroomacoustics.parameters")
    ref = pra_params.materials_absorption_table[theirs]
    freqs = ref["center_freqs"]
    mine = dict(zip(OCTAVE_BANDS_HZ, bundled_materials()[ours].absorption))
    for f, a in zip(freqs, ref["coeffs"]):
        assert abs(mine[float(f)] - a) <= 0.15, (ours, f, mine[float(f)], a)


def test_a_room_may_override_and_add_materials():
    extra = parse_materials(
        {"glass_window": {"absorption": [0.1] * 7, "source": "site measurement"},
         "felt_banner": {"absorption": [0.05, 0.1, 0.2, 0.4, 0.5, 0.5, 0.5]}},
        file="room.toml",
    )
    table = material_table(extra)
    assert table["glass_window"].absorption == (0.1,) * 7
    assert "felt_banner" in table
    assert bundled_materials()["glass_window"].absorption != (0.1,) * 7  # the shipped table is untouched


@pytest.mark.parametrize(
    "entry,needle",
    [
        ({"absorption": [0.1] * 6}, "list of 7 numbers"),
        ({"absorption": [0.1] * 6 + [1.0]}, "materials.x.absorption[6]"),
        ({"absorption": [0.1] * 6 + [-0.1]}, "materials.x.absorption[6]"),
        ({"absorption": [0.1] * 6 + [float("nan")]}, "finite"),
        ({"absorbtion": [0.1] * 7}, "did you mean 'absorption'"),
        ({}, "missing key 'absorption'"),
    ],
)
def test_bad_material_entries_are_refused_with_the_key_path(entry, needle):
    with pytest.raises(InputError) as err:
        parse_materials({"x": entry}, file="room.toml")
    assert needle in str(err.value)
    assert "room.toml" in str(err.value)
