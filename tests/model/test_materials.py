"""The materials table: complete, in range, provenance stated, copies exact, the rest near a published table."""

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


# ---- provenance and cross-checks ------------------------------------------------------------
# The only machine-readable absorption table at hand is the one pyroomacoustics ships
# (pyroomacoustics/data/materials.json; its parameters.py cites M. Vorländer, *Auralization*,
# Springer 2008, Appendix A). Seven of our entries are copies of it; they are checked to be exact
# copies. For the rest we have NO second, independent table: our "from memory" values recall the
# classic textbook tables, and Vorländer's appendix reprints some of those same figures, so a
# comparison with it is not independent either. What we can check: each "from memory" finish lies
# within a factor that separates materials (below) of the nearest entry of that table.

# ours -> the pyroomacoustics (0.10.1) entry it was taken from (equal at 125 Hz-4 kHz; 8 kHz as the source says)
COPIES = {
    "limestone_ashlar": "limestone_wall",
    "stone_flag_floor": "marble_floor",
    "concrete_painted": "smooth_brickwork_flush_pointing",
    "brick_unglazed": "brick_wall_rough",
    "linoleum_on_concrete": "linoleum_on_concrete",
    "carpet_heavy_on_underlay": "carpet_1.35_kg_m2",
    "upholstered_seats_empty": "chairs_upholstered_cloth",
}


def _pra_table():
    pra_params = pytest.importorskip("pyroomacoustics.parameters")
    return {k: v for k, v in pra_params.materials_absorption_table.items() if "center_freqs" in v}


def _shared(ours, ref):
    """(ours, theirs) per octave band both give."""
    mine = dict(zip(OCTAVE_BANDS_HZ, bundled_materials()[ours].absorption))
    return [(mine[float(f)], a) for f, a in zip(ref["center_freqs"], ref["coeffs"]) if float(f) in mine]


@pytest.mark.parametrize("ours,theirs", COPIES.items(), ids=[f"{a}=pyroomacoustics:{b}" for a, b in COPIES.items()])
def test_copied_entries_equal_the_pyroomacoustics_table_and_say_so(ours, theirs):
    pairs = _shared(ours, _pra_table()[theirs])
    assert len(pairs) >= 6
    for mine, ref in pairs[:6]:  # 125 Hz-4 kHz: exact copies (the table prints two decimals)
        assert mine == pytest.approx(ref, abs=1e-12), (ours, pairs)
    src = bundled_materials()[ours].source
    assert "pyroomacoustics" in src and "Vorländer" in src and f"'{theirs}'" in src, src


def test_no_entry_is_an_unacknowledged_copy_of_the_pyroomacoustics_table():
    # Every entry that equals some entry of that table in all of 125 Hz-4 kHz must say where it came from.
    table = _pra_table()
    for name, m in bundled_materials().items():
        for key, ref in table.items():
            pairs = _shared(name, ref)[:6]
            if len(pairs) == 6 and all(abs(a - b) < 1e-12 for a, b in pairs):
                assert "pyroomacoustics" in m.source, (name, key)
    for name, m in bundled_materials().items():
        if name not in COPIES:
            assert "from memory" in m.source and "check" in m.source, name


def _within_a_material_class(mine: float, ref: float) -> bool:
    """Same finish or not: (max + 0.02)/(min + 0.02) ≤ 2.

    Published coefficients of one kind of finish differ between sources, samples and mountings by
    up to about a factor of two in a band (compare, in the table itself, 'rockwool_50mm_40kgm3' with
    'mineral_wool_50mm_40kgm3', or 'carpet_tufted_9m' with 'carpet_6mm_open_cell_foam'); the 0.02
    keeps the two-decimal rounding of hard surfaces (0.01 vs 0.02) from counting as a factor of two.
    Hard versus porous finishes differ by factors of 5 to 50. (Judgement, no source; the test below
    checks that this rule rejects wrong materials.)
    """
    return (max(mine, ref) + 0.02) / (min(mine, ref) + 0.02) <= 2.0


# "from memory" finish -> the pyroomacoustics entry of the same kind of finish (chosen by description)
NEAREST = [
    ("rubble_stone_wall", "limestone_wall"),
    ("plaster_on_masonry", "hard_surface"),
    ("wood_floor_on_joists", "wood_16mm"),
    ("sprung_sports_floor", "wood_16mm"),
    ("carpet_thin_on_concrete", "carpet_thin"),
    ("plasterboard_on_studs", "plasterboard"),
    ("wood_panel_on_battens", "wooden_lining"),
    ("mineral_wool_panel_50mm", "rockwool_50mm_80kgm3"),
    ("curtain_heavy_velour_pleated", "curtains_fabric_folded"),
    ("acoustic_tile_suspended", "ceiling_fissured_tile"),
    ("metal_deck_perforated_insulated", "ceiling_fibre_absorber"),
    ("wooden_pews_empty", "chairs_wooden"),
    ("audience_on_upholstered_seats", "audience_upholstered_chairs_1"),
]
# Left out, where the two describe different constructions and disagree by more than the rule
# allows (so no check is possible without a third source): glass_window vs 'glass_window' (ours
# 0.35 at 125 Hz for large panes, theirs 0.10 for a light pane), plasterboard_ceiling_suspended vs
# 'ceiling_plasterboard' (0.09 vs 0.02 at 4 kHz), curtain_light_flat vs 'curtains_velvet',
# audience_on_wooden_pews vs 'audience_wooden_chairs_2_m2' (0.50 vs 0.24 at 125 Hz).


@pytest.mark.parametrize("ours,theirs", NEAREST, ids=[f"{a}~pyroomacoustics:{b}" for a, b in NEAREST])
def test_memory_values_lie_within_a_material_class_of_the_nearest_published_entry(ours, theirs):
    pairs = _shared(ours, _pra_table()[theirs])
    assert len(pairs) >= 6
    for mine, ref in pairs:
        assert _within_a_material_class(mine, ref), (ours, theirs, pairs)


def test_the_material_class_rule_rejects_a_wrong_material():
    # the ±0.15 rule this replaces accepted stone with 8× its absorption (0.02 → 0.16); this one does not
    assert not _within_a_material_class(0.02, 0.16)
    assert not _within_a_material_class(0.05, 0.20)
    table = _pra_table()
    # and it tells stone from carpet, carpet from marble, glass from an absorber, in most bands
    for ours, wrong in [("limestone_ashlar", "carpet_1.35_kg_m2"), ("carpet_heavy_on_underlay", "marble_floor"),
                        ("glass_heavy_plate", "rockwool_50mm_80kgm3"), ("mineral_wool_panel_50mm", "ceramic_tiles")]:
        pairs = _shared(ours, table[wrong])
        rejected = sum(not _within_a_material_class(a, b) for a, b in pairs)
        assert rejected >= len(pairs) - 2, (ours, wrong, pairs)


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
