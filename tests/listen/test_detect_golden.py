"""The detector's events on a fixed set of signals are exactly those pinned in
tests/listen/data/detect_golden.json (written by make_detect_golden.py from the code before the
speed work of issue 21; the reference is the earlier code's output, so this checks that a change
made for speed alone leaves every event as it was, not that the events are right: test_detect.py
does that). The set: short synthetic signals at 48 and 16 kHz, plus held-out corpus cases
(detect_corpus.py: an organ swell the low lane reports, pure and harmonic notes, a stable loop,
howls through rooms) and the issue-22 probes, added before the array tracking was written."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import pytest

from make_detect_golden import golden_signals

GOLDEN = json.loads((Path(__file__).parent / "data" / "detect_golden.json").read_text())
SIGNALS = {name: (x, fs) for name, x, fs in golden_signals()}


def _same(a, b) -> bool:
    if isinstance(a, float) or isinstance(b, float):
        if a is None or b is None:
            return a is b
        return math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-9)  # float rounding of a reordered sum only
    return a == b


@pytest.mark.parametrize("name", sorted(GOLDEN))
def test_events_are_identical_to_the_pinned_ones(name):
    from howl.listen.detect import detect

    x, fs = SIGNALS[name]
    got = [dataclasses.asdict(e) for e in detect(x, fs).events]
    want = GOLDEN[name]["events"]
    assert len(got) == len(want), (name, got, want)
    for g, w in zip(got, want):
        bad = {k: (g[k], w[k]) for k in w if not _same(g[k], w[k])}
        assert not bad, (name, bad)


@pytest.mark.parametrize("name", ["speech + 1234.5 Hz tone at 30 dB/s, 48 kHz", "music + 151.3 Hz tone at 12 dB/s, 48 kHz"])
def test_pinned_events_are_the_same_fed_in_blocks(name):
    from howl.listen.detect import detect

    x, fs = SIGNALS[name]
    got = [dataclasses.asdict(e) for e in detect(x, fs, block_samples=4801).events]
    want = GOLDEN[name]["events"]
    assert len(got) == len(want)
    for g, w in zip(got, want):
        assert all(_same(g[k], w[k]) for k in w), (g, w)
