"""The live page's state (howl.report.web.state): what /state carries and the page draws."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from howl.listen._types import Candidate
from howl.listen.live import Snapshot
from howl.loop.notch import Notch
from howl.report.web.state import MAX_EVENTS, STATE_WORDS, BlockTap, LiveState, spectrum_db, trend_words

FS = 48000.0


def _snap(events=(), candidates=(), notches=(), level=-30.0):
    return Snapshot(elapsed_s=12.5, level_dbfs=level, candidates=tuple(candidates), events=tuple(events),
                    notches=tuple(notches), advice=("try a broad cut",), overflows=2)


def _event(i: int, freq_hz: float = 1000.0, gain_db=-6.0):
    return {"time_s": float(i), "onset_s": i - 0.3, "freq_hz": freq_hz, "kind": "howl" if i % 2 else "ringing",
            "level_db": -20.0, "growth_db_per_s": 12.0, "decay_db_per_s": None, "steady": False, "live": True,
            "window_s": 0.3, "notch": {"freq_hz": freq_hz, "gain_db": gain_db, "q": 20.0, "bandwidth_oct": 0.072},
            "needed_cut_db": 6.0, "margin_assumed_db": -0.5}


def _cand(state: str, trend: float, freq_hz: float = 500.0):
    return Candidate(track_id=1, freq_hz=freq_hz, level_db=-25.0, trend_db_per_s=trend, age_s=0.8, pnpr_db=20.0,
                     phpr_db=20.0, fsd=1e-4, state=state)


def test_a_full_scale_sine_reads_0_db_in_the_band_holding_its_frequency():
    f0 = 1000.0
    t = np.arange(8192) / FS
    freqs, db = spectrum_db(np.sin(2 * np.pi * f0 * t + 0.4), FS)
    k = int(np.argmax(db))
    # the band holding the tone's strongest bin: within half a 1/24-octave band and one bin (Δf = 48000/8192
    # = 5.86 Hz) of the tone (derived: band edges at centre·2^±1/48; the 8192-point FFT has bins k·Δf)
    assert abs(math.log2(freqs[k] / f0)) <= 1 / 48 + math.log2(1 + FS / 8192 / f0)
    # Hann window: 0 dB on a bin, at most 1.42 dB scalloping loss between bins (Harris 1978, Table 1)
    assert -1.43 <= db[k] <= 0.01
    # and far from the tone the window's sidelobes are ~100 dB down (Hann falls 18 dB/octave; Harris 1978)
    assert db[np.argmin(np.abs(freqs - 8000.0))] < -80


def test_the_detector_states_are_named_in_a_techs_words():
    assert STATE_WORDS == {"howl": "howling", "ringing": "ringing", "watch": "watch", "program": "program",
                           "product": "overtone of a howl"}
    assert [trend_words(x) for x in (12.0, 0.5, -8.0)] == ["rising", "steady", "falling"]
    st = LiveState()
    st.update(_snap(candidates=[_cand("howl", 12.0), _cand("watch", 0.0, 800.0), _cand("program", -9.0, 90.0)]))
    c = st.snapshot()["candidates"]
    assert [(x["words"], x["trend"]) for x in c] == [("howling", "rising"), ("watch", "steady"),
                                                     ("program", "falling")]
    assert c[1]["freq_hz"] == 800.0


def test_events_come_newest_first_with_their_cut_in_desk_terms_and_stay_bounded():
    st = LiveState()
    events = [_event(i, 1000.0 + i) for i in range(MAX_EVENTS + 25)]
    events[-1]["notch"]["gain_db"] = None  # a full notch
    st.update(_snap(events=events, notches=[Notch(1000.0, -6.0, 20.0), Notch(2000.0, None, 30.0)]))
    s = st.snapshot()
    assert len(s["events"]) == MAX_EVENTS and s["n_events"] == MAX_EVENTS + 25
    assert s["events"][0]["time_s"] == MAX_EVENTS + 24 and s["events"][0]["cut"]["full_notch"]
    assert s["events"][1]["cut"] == {"centre_hz": 1000.0 + MAX_EVENTS + 23, "depth_db": -6.0, "full_notch": False,
                                     "q": 20.0, "bandwidth_oct": 0.072}
    assert s["events"][1]["words"] == "howling" and s["events"][0]["words"] == "ringing"
    assert s["events"][0]["margin_db"] == -0.5 and s["events"][0]["margin_assumed"]
    assert [c["centre_hz"] for c in s["cuts"]] == [1000.0, 2000.0]
    assert s["cuts"][1]["depth_db"] is None and s["cuts"][1]["full_notch"]
    # bandwidth in octaves of a Q of 20: 2/ln2 · asinh(1/(2Q)) = 0.0721 (RBJ cookbook's Q↔BW relation)
    assert s["cuts"][0]["bandwidth_oct"] == pytest.approx(2 / math.log(2) * math.asinh(1 / 40), abs=1e-4)
    assert s["overflows"] == 2 and s["elapsed_s"] == 12.5 and s["advice"] == ["try a broad cut"]


def test_no_nan_reaches_the_json():
    st = LiveState()
    st.update(_snap(level=float("-inf")), spectrum=(np.array([100.0, 200.0]), np.array([np.nan, -50.0])))
    text = st.payload()[1]
    json.loads(text)  # strict JSON: allow_nan=False in the writer
    assert st.snapshot()["level_dbfs"] is None


def _est(t, gm, **kw):
    d = {"time_s": t, "gain_margin_db": gm, "howl_freq_hz": 1500.0, "magnitude_margin_db": gm - 1.0,
         "uncertainty_db": 0.5, "status": "tracking"}
    d.update(kw)
    return d


def test_the_margin_panel_appears_with_the_first_estimate_and_keeps_the_last_minutes():
    st = LiveState(margin_warn_db=3.0, margin_history_s=300.0)
    assert st.snapshot()["margin"] is None
    for i in range(200):
        st.add_margin(_est(2.0 * i, 8.0 - 0.02 * i))
    m = st.snapshot()["margin"]
    assert m["now"]["time_s"] == 398.0 and m["now"]["gain_margin_db"] == pytest.approx(8.0 - 0.02 * 199, abs=1e-3)
    times = [p[0] for p in m["history"]]
    assert min(times) == 98.0 and len(times) == 151  # 398 - 300 s back, every 2 s
    assert m["warn_db"] == 3.0 and m["below_warning"] is False
    st.add_margin(_est(400.0, 2.5, status="close"))
    m = st.snapshot()["margin"]
    assert m["below_warning"] is True and m["now"]["status"] == "close" and m["now"]["howl_freq_hz"] == 1500.0


def test_a_margin_estimate_without_its_fields_is_refused():
    st = LiveState()
    with pytest.raises(ValueError, match="uncertainty_db"):
        st.add_margin({"time_s": 0.0, "gain_margin_db": 5.0, "howl_freq_hz": 900.0, "magnitude_margin_db": 4.0,
                       "status": "tracking"})


def test_each_update_is_numbered_and_waiters_wake():
    st = LiveState()
    seq0, _ = st.payload()
    st.update(_snap())
    seq1, text = st.wait_newer(seq0, timeout_s=5.0)
    assert seq1 == seq0 + 1 and json.loads(text)["seq"] == seq1
    st.end()
    seq2, text = st.wait_newer(seq1, timeout_s=5.0)
    assert json.loads(text)["ended"] is True


def test_the_tap_passes_blocks_through_and_keeps_the_newest_samples():
    from howl.listen.live import ArraySource

    x = np.arange(10_000, dtype=float)
    tap = BlockTap(ArraySource(x, FS, block_frames=1024), keep=4096)
    got = []
    while (b := tap.read()) is not None:
        got.append(b)
    assert np.array_equal(np.concatenate(got), x) and tap.exhausted and tap.n_read == 10_000
    assert np.array_equal(tap.recent(), x[-4096:])


def test_a_late_reader_gets_every_kept_update_in_order_and_the_skipped_ones_are_counted():
    from howl.report.web.state import BACKLOG

    st = LiveState()
    for i in range(BACKLOG + 10):
        st.update(_snap())
    st.end()
    # derived: seq 0 is the initial state; updates 1..BACKLOG+10, the end BACKLOG+11; the newest
    # BACKLOG are kept, so a reader at 0 misses the 11 oldest updates (1..11)
    got, skipped = st.updates_after(0, timeout_s=0.0)
    assert [u[0] for u in got] == list(range(12, BACKLOG + 12)) and skipped == 11
    assert [u[2] for u in got][-2:] == [False, True] and json.loads(got[-1][1])["ended"] is True
    got, skipped = st.updates_after(BACKLOG + 5, timeout_s=0.0)
    assert [u[0] for u in got] == list(range(BACKLOG + 6, BACKLOG + 12)) and skipped == 0
    assert st.updates_after(BACKLOG + 11, timeout_s=0.0) == ([], 0)


def test_the_terminal_view_speaks_the_pages_words_and_no_detector_jargon():
    """`howl listen`'s terminal view (issue 24): states a tech uses (howling, ringing, watch, program),
    cuts in desk terms (centre, depth, Q, width), no PNPR/PHPR columns."""
    from rich.console import Console

    from howl.cli.listen import _view

    snap = Snapshot(elapsed_s=72.5, level_dbfs=-20.0, candidates=(_cand("howl", 12.0, 2345.6), _cand("watch", 0.0, 800.0)),
                    events=(_event(1, 2345.6),), notches=(Notch(2345.6, -6.0, 20.0),), advice=(), overflows=3)
    con = Console(width=160, record=True)
    con.print(_view(snap, "desk", FS))
    text = con.export_text()
    assert "PNPR" not in text and "PHPR" not in text and "pnpr" not in text.lower()
    for word in ("howling", "watch", "rising", "centre", "depth", "width", "dropped blocks 3", "clock 1:12.5"):
        assert word in text, word
    # 2345.6 Hz in kHz to the page's 3 decimals; the cut's depth and Q as given
    assert "2.346 kHz" in text and "-6.0 dB" in text and "Q 20.0" in text
