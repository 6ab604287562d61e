"""Write tests/listen/data/detect_golden.json: the detector's events on a fixed set of signals
(run by hand: python tests/listen/make_detect_golden.py). The file pins the events of the code
as it was when it was written, so a change made for speed alone can be checked to leave every
event as it was (tests/listen/test_detect_golden.py). Rerun it only when a change is MEANT to
alter events, and say so in the commit."""

from __future__ import annotations

import dataclasses
import json
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from test_detect import held_note_crescendo, music_like, plucked_note, room_loop, speech_like, tone  # noqa: E402


def golden_signals():
    """(name, signal, sample rate): fixed seeds, each a few seconds."""
    from howl.loop.simulate import simulate_closed_loop

    out = []
    fs = 48000
    x = speech_like(fs, 6.0, 3)
    x[2 * fs:] += tone(fs, 1234.5, 4.0, -70, 30)
    out.append(("speech + 1234.5 Hz tone at 30 dB/s, 48 kHz", x, fs))
    out.append(("music-like, 48 kHz", music_like(fs, 6.0, 4), fs))
    x = 1e-4 * np.random.default_rng(5).standard_normal(5 * fs)
    x[fs:] += tone(fs, 2500.0, 4.0, -10, -25)
    out.append(("2500 Hz ring-down at 25 dB/s in noise, 48 kHz", x, fs))
    x = music_like(fs, 8.0, 6)
    x[2 * fs:] += tone(fs, 151.3, 6.0, -75, 12)
    out.append(("music + 151.3 Hz tone at 12 dB/s, 48 kHz", x, fs))
    x = plucked_note(fs, 330.0, 25.0)
    out.append(("plucked 330 Hz, 48 kHz", x, fs))
    fs = 16000
    h, cf, cm = room_loop(1)
    for prog, over in (("speech", 2.0), ("music", 1.0)):
        p = speech_like(fs, 6.0, 1) if prog == "speech" else music_like(fs, 6.0, 11)
        g = np.full(p.size, -6.0)
        g[2 * fs:] = over
        out.append((f"room_loop(1) {prog} +{over} dB, 16 kHz", simulate_closed_loop(h, p, fs, gain_db=g), fs))
    out.append(("held note 220 Hz crescendo 10 dB/s, 16 kHz", held_note_crescendo(fs, 220.0, 10.0), fs))
    # added before the array tracking of issue 21: held-out corpus cases that reach the low lane,
    # the slowing-swell and steady-tone tests, a stable loop and howls through a room (detect_corpus.py)
    import detect_corpus as C

    for case in (C.Case("heldout", "dry", "organ", 0), C.Case("heldout", "dry", "pure", 1),
                 C.Case("heldout", "dry", "choir", 3), C.Case("heldout", "dry", "strings", 4),
                 C.Case("heldout", "stable", "band", 103, room=3, margin_db=2.5),
                 C.Case("heldout", "howl", "speech", 202, room=2, over_db=1.0),
                 C.Case("heldout", "howl", "piano", 205, room=5, over_db=3.0)):
        out.append((f"corpus {case.name}, 16 kHz", case.signal(C.FS)[0], C.FS))
    for name, x in C.probes().items():
        out.append((f"probe {name}, 16 kHz", x, C.FS))
    return out


def events_of(x, fs):
    from howl.listen.detect import detect

    return [dataclasses.asdict(e) for e in detect(x, fs).events]


if __name__ == "__main__":
    data = {name: {"sample_rate_hz": fs, "events": events_of(x, fs)} for name, x, fs in golden_signals()}
    path = HERE / "data" / "detect_golden.json"
    path.write_text(json.dumps(data, indent=1) + "\n")
    for k, v in data.items():
        print(k, [(e["kind"], round(e["freq_hz"], 1), round(e["time_s"], 2)) for e in v["events"]])
