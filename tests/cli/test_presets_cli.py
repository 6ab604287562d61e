"""`howl presets` and the chain in `howl check` (issue 17): the listing holds the generic classes the
issue names, and `howl check --json` reports each channel's high-pass and each loudspeaker's range."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

from typer.testing import CliRunner

from howl.cli import app

REPO = Path(__file__).resolve().parents[2]


def _run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def test_presets_json_lists_the_issues_device_classes_and_the_materials():
    r = _run("presets", "--json")
    assert r.exit_code == 0, r.stderr
    d = json.loads(r.stdout)
    shipped = tomllib.loads((REPO / "howl" / "data" / "presets.toml").read_text(encoding="utf-8"))
    assert set(d["mics"]) == set(shipped["mics"]) and set(d["speakers"]) == set(shipped["speakers"])
    descriptions = " | ".join(e["description"] for e in list(d["mics"].values()) + list(d["speakers"].values()))
    # the classes issue 17 names, as generic descriptions
    for phrase in ("handheld cardioid vocal mic", "gooseneck small-diaphragm cardioid", "lapel omni",
                   "boundary half-cardioid", "12-inch two-way floor wedge", "column loudspeaker",
                   "two-way 12-inch point source", "8-inch ceiling loudspeaker"):
        assert phrase in descriptions, phrase
    # every value is marked typical and from memory
    assert all("typical" in e["source"] and "from memory" in e["source"]
               for e in list(d["mics"].values()) + list(d["speakers"].values()))
    assert "plaster_on_masonry" in d["materials"] and len(d["materials"]["plaster_on_masonry"]["absorption"]) == 7


def test_presets_text_and_kind_filter():
    r = _run("presets", "--kind", "speakers")
    assert r.exit_code == 0 and "wedge-12in-two-way" in r.stdout and "lapel-omni" not in r.stdout
    assert "from memory" in r.stdout


def test_check_describes_the_chain_of_the_example():
    r = _run("check", REPO / "examples" / "blackbox_vocals_wedges.toml", "--json")
    assert r.exit_code == 0, r.stderr
    d = json.loads(r.stdout)
    vox = {m["name"]: m for m in d["mics"]}["vox_a"]
    assert vox["high_pass"] == {"freq_hz": 100.0, "order": 2} and vox["preset"] == "handheld-cardioid-vocal-mic"
    wedge = {s["name"]: s for s in d["speakers"]}["wedge_a"]
    assert wedge["usable_range"]["low_hz"] == 65.0 and wedge["preset"] == "wedge-12in-two-way"
    assert {t["spectrum"] for t in d["talkers"]} == {"loud"}
    text = _run("check", REPO / "examples" / "blackbox_vocals_wedges.toml").stdout
    assert "high-pass 100 Hz 2nd order" in text and "−10 dB at 65 Hz and 18000 Hz" in text


def test_every_example_sets_a_vocal_high_pass_and_speaker_ranges():
    # issue 17: "a high-pass on every vocal channel (typical 80–150 Hz, 2nd order), speakers with ranges"
    for f in sorted((REPO / "examples").glob("*.toml")):
        d = json.loads(_run("check", f, "--json").stdout)
        for m in d["mics"]:
            assert m["high_pass"] and 80 <= m["high_pass"]["freq_hz"] <= 150 and m["high_pass"]["order"] == 2, (f, m)
        for s in d["speakers"]:
            assert s["usable_range"] or s["response_file"], (f, s["name"])
