"""The detector on a fixed subset of the HELD-OUT split of detect_corpus.py (never tuned on):
small enough for CI. The full evaluation of both splits is tests/benchmarks/bench_detect.py
(results in tests/benchmarks/results/bench_detect_corpus_*.json, quoted by docs/scan.md).

Truth comes from outside the detector: the programs are built by construction (a held pure tone,
a swell linear in amplitude, attacks that slow down in dB), and a howl's frequency is the closed
loop's mode at that gain (test_detect.closed_loop_modes, derived there)."""

from __future__ import annotations

import pytest

import detect_corpus as C

#: held-out no-howl cases: organ-like swells and pure held tones (the issue's families), sine pads
#: and through a stable loop 2-6 dB below unity
#: organ 0 (an 87 Hz note swelling in, reported by the low lane at 29 dB/s) is a held-out false howl
#: the tuning did not remove: kept here, marked as a known failure, so the day it passes is seen
KNOWN_FALSE = pytest.mark.xfail(strict=True, reason="held-out false howl not yet removed (docs/scan.md)")
NO_HOWL = ([pytest.param(C.Case("heldout", "dry", "organ", 0), marks=KNOWN_FALSE)]
           + [C.Case("heldout", "dry", "organ", i) for i in (3, 6, 9)]
           + [C.Case("heldout", "dry", "pure", i) for i in (1, 2, 5, 18)]
           + [C.Case("heldout", "dry", "pad", i) for i in (2, 10, 18)]
           + [c for c in C.cases("heldout") if c.kind == "stable" and c.family in ("pure", "pad") and c.room in (0, 1)])


@pytest.mark.parametrize("case", NO_HOWL, ids=lambda c: c.name if isinstance(c, C.Case) else None)
def test_no_howl_on_held_out_organ_pure_tones_and_pads(case):
    r = C.evaluate(case)
    assert r["n_howl_events"] == 0, r["howls"]


def test_the_issue_probes_a_pure_pedal_swell_is_no_howl_and_a_constant_db_rise_is_one():
    # 65 Hz pure pedal note swelling in linearly over 3 s: its level in dB rises ever more slowly,
    # so it is no howl. An 880 Hz sine rising at a constant 20 dB/s carries a howl's exact
    # signature: on one channel, without the loop, it is reported (issue 22 allows it).
    from howl.listen.detect import detect

    p = C.probes()
    assert not [e for e in detect(p["pedal 65 Hz linear swell 3 s"], C.FS).events if e.kind == "howl"]
    ev = [e for e in detect(p["880 Hz sine at 20 dB/s"], C.FS).events if e.kind == "howl"]
    assert ev and abs(ev[0].freq_hz / 880.0 - 1) < 1e-4


#: held-out howl cases found before they dominate (chosen by listing the held-out run, not tuned:
#: changes were made on the tuning split only)
HOWL = [c for c in C.cases("heldout") if c.kind == "howl" and (c.family, c.room) in (("speech", 2), ("piano", 3))]


@pytest.mark.parametrize("case", HOWL, ids=lambda c: c.name)
def test_held_out_howl_is_found_at_its_mode_before_it_dominates(case):
    r = C.evaluate(case)
    assert r["found"], r
    assert r["freq_err"] <= C.FREQ_TOL  # issue 22: within 0.2 % of the closed loop's mode
    assert r["before_dominance"], r


#: issue 22 item 4, with the loop IR known (crossings from howl.loop.nyquist; "far" = more than
#: 1 % and more than half the IR's resolution from every crossing). Chosen by listing the held-out
#: run of bench_detect.py --loop-known (nothing was tuned on it): the two stable-loop cases whose
#: false howl sat off every crossing, and howl cases whose howl sits on a crossing
LOOP_STABLE = [C.Case("heldout", "stable", "organ", 107, room=7, margin_db=2.5),
               C.Case("heldout", "stable", "choir", 100, room=0, margin_db=4.2)]
LOOP_HOWL = HOWL + [C.Case("heldout", "howl", "organ", 202, room=2, over_db=2.0)]


@pytest.mark.parametrize("case", LOOP_STABLE, ids=lambda c: c.name)
def test_with_the_loop_known_program_growing_off_every_crossing_is_no_howl(case):
    assert case in C.cases("heldout")  # a case of the split as generated, not a new one
    assert C.evaluate(case)["n_howl_events"] >= 1  # without the loop: a false howl
    assert C.evaluate(case, with_loop=True)["n_howl_events"] == 0


@pytest.mark.parametrize("case", LOOP_HOWL, ids=lambda c: c.name)
def test_with_the_loop_known_no_howl_on_a_crossing_is_lost(case):
    a, b = C.evaluate(case), C.evaluate(case, with_loop=True)
    assert a["found"] and b["found"], (a, b)
    assert b["freq_err"] <= C.FREQ_TOL and b["time_s"] <= a["time_s"]
    assert b["n_howl_events"] <= a["n_howl_events"]
