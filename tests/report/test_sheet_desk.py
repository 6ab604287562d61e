"""The sheet lists cuts in desk terms: ring-outs and listened cuts within the desk's EQ.

References: ISO 266:1997 nominal 1/3-octave centres (from memory); the loops are synthetic
(seeded) and every ASG on the sheet is checked against `howl margin`'s routine elsewhere
(tests/loop/test_desk.py recomputes them independently).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from typer.testing import CliRunner

from howl.cli import app
from howl.fileio import write_wav_atomic
from howl.model.rig import bundled_rig_path

FS_HZ = 8000
ISO = (25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000,
       2500, 3150, 4000, 5000, 6300, 8000, 10000, 12500, 16000, 20000)


def _session(folder: Path) -> None:
    """Two seeded loops of the bundled rig: two taps plus a decaying diffuse tail each."""
    (folder / "ir").mkdir(parents=True)
    rng = np.random.default_rng(20261204)
    n = np.arange(2400)
    for name, d in (("a", 12), ("b", 16)):
        h = 0.03 * rng.standard_normal(n.size) * np.exp(-n / 600.0)
        h[:d] = 0.0
        h[d] += 0.3
        h[d + 24] -= 0.2
        write_wav_atomic(folder / "ir" / f"{name}.wav", h, FS_HZ)
    meta = {"date": "2026-12-04T18:00:00", "sample_rate_hz": FS_HZ,
            "pairs": [{"speaker": "column_north", "mic": "lectern", "ir_file": "ir/a.wav"},
                      {"speaker": "column_south", "mic": "ambo", "ir_file": "ir/b.wav"}]}
    (folder / "session.json").write_text(json.dumps(meta), encoding="utf-8")


def test_sheet_ringout_on_a_graphic_lists_sliders(tmp_path):
    _session(tmp_path / "s")
    r = CliRunner().invoke(app, ["sheet", str(bundled_rig_path()), "--measured", str(tmp_path / "s"), "--ringout",
                                 "--no-plan", "--eq", "graphic", "--max-bands", "4", "-o", str(tmp_path / "sheet.pdf"),
                                 "--json"])
    assert r.exit_code == 0, r.output
    sets = [c for c in json.loads(r.stdout)["cut_sets"] if c["source"] == "ring-out"]
    assert sets and any(c["cuts"] for c in sets)
    for cs in sets:
        assert cs["desk"].startswith("graphic EQ")
        assert len(cs["cuts"]) <= 4
        for c in cs["cuts"]:
            assert c["freq_hz"] in ISO and c["band"] and c["gain_db"] >= -12.0 - 1e-9


def test_sheet_fits_listened_cuts_to_the_desk(tmp_path):
    cuts = tmp_path / "scan.json"
    cuts.write_text(json.dumps({"notches": [{"freq_hz": 157.4, "gain_db": -20.0, "q": 34.6},
                                            {"freq_hz": 1210.0, "gain_db": -4.2, "q": 20.0}]}))
    r = CliRunner().invoke(app, ["sheet", str(bundled_rig_path()), "--cuts", str(cuts), "--max-depth-db", "12",
                                 "--max-q", "8", "--gain-step-db", "1", "-o", str(tmp_path / "sheet.pdf"), "--json"])
    assert r.exit_code == 0, r.output
    (cs,) = [c for c in json.loads(r.stdout)["cut_sets"] if c["source"] == "listen"]
    assert cs["desk"].startswith("parametric EQ")
    gains = sorted(c["gain_db"] for c in cs["cuts"])
    assert gains == [-12.0, -4.0]  # -20 dB capped at the deepest cut; -4.2 dB to the nearest 1 dB step
    assert all(c["q"] <= 8.0 + 1e-12 for c in cs["cuts"])
