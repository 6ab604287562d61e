"""The loop tracker (howl.listen.track) on closed loops around pyroomacoustics rooms.

The truth is the Nyquist margin of the true G·F (howl.loop.nyquist_margin, the reference the
issue names; the rooms come from pyroomacoustics 0.10.1 ShoeBox with fixed seeds, the console's
notch from scipy.signal.iirnotch): see tests/listen/track_cases.py. The assertions use the
HELD-OUT cases only (the settings were tuned on the TUNING cases).
"""

from __future__ import annotations

import functools

import numpy as np
import pytest

import track_cases as C
from howl.listen.track import NOT_ENOUGH, LoopTracker

KEYS = {"time_s", "gain_margin_db", "howl_freq_hz", "magnitude_margin_db", "uncertainty_db", "status"}


def test_estimates_come_once_a_second_in_the_live_page_format():
    fs = 8000
    rng = np.random.default_rng(0)
    u = 0.01 * rng.standard_normal(5 * fs)
    m = np.r_[np.zeros(40), 0.3 * u[:-40]] + 0.01 * rng.standard_normal(u.size)
    tr = LoopTracker(fs)
    est = []
    for i in range(0, u.size, 700):  # blocks that do not divide a second
        est += tr.process(u[i:i + 700], m[i:i + 700])
    est += tr.finish()
    assert [round(e["time_s"], 3) for e in est] == [1.0, 2.0, 3.0, 4.0, 5.0]  # one per second of audio
    assert all(KEYS <= set(e) for e in est)
    from howl.report.web.state import LiveState

    st = LiveState(command="track", label="x", sample_rate_hz=fs)
    for e in est:
        st.add_margin(e)  # the page takes them as they are


def test_silence_says_not_enough_program_and_widens():
    fs = 8000
    tr = LoopTracker(fs)
    est = []
    z = np.zeros(fs // 2)
    for _ in range(8):
        est += tr.process(z, z)
    assert all(e["status"] == NOT_ENOUGH for e in est)
    assert all(e["gain_margin_db"] is None for e in est)


def _tone_run(tones: bool, held_tone_k: float):
    """A closed loop (the project's simulator) around a short decaying loop with a 5 ms delay, fed with
    white noise, or with white noise plus six held tones (a held chord the predictors cannot whiten)."""
    from howl.listen.track import TrackSettings
    from howl.loop.simulate import simulate_closed_loop

    fs = 8000
    rng = np.random.default_rng(5)
    n = 12 * fs
    t = np.arange(n) / fs
    x = 0.01 * rng.standard_normal(n)
    if tones:
        x = x + sum(0.02 * np.sin(2 * np.pi * f * t + p)
                    for f, p in [(311.1, 0.3), (392.0, 1.0), (466.2, 2.0), (622.3, 0.1), (784.0, 0.5), (1244.5, 1.1)])
    loop = np.zeros(800)
    loop[40:] = 0.03 * rng.standard_normal(760) * np.exp(-np.arange(760) / 120.0)
    m = simulate_closed_loop(loop, x, fs, limiter_dbfs=None)
    u = np.r_[np.zeros(40), m[:-40]]  # G: the 5 ms delay at unity gain; F = loop without it
    est, _tr = C.run_tracker(u, m, fs, settings=TrackSettings(held_tone_k=held_tone_k))
    return est[-1]


def test_held_tones_widen_the_range_and_white_program_does_not():
    white0, white6 = _tone_run(False, 0.0), _tone_run(False, 6.0)
    tone0, tone6 = _tone_run(True, 0.0), _tone_run(True, 6.0)
    print(white6, tone6)
    assert white6["held_tone_share"] < 0.002 and white6["uncertainty_db"] == white0["uncertainty_db"]
    assert tone6["held_tone_share"] > 0.005
    assert tone6["gain_margin_db"] == tone0["gain_margin_db"]  # the figure is the same, only its ± grows
    assert tone6["uncertainty_db"] > tone0["uncertainty_db"] + 0.1


def _at(est, t):
    return min(est, key=lambda e: abs(e["time_s"] - t))


@functools.lru_cache(maxsize=None)
def _run(i: int, **render_kw):
    case = C.HELDOUT[i]
    u, m, before, after, _f, _g = C.render(case, render_kw.pop("dur_s", 11.0), **render_kw)
    est, _tr = C.run_tracker(u, m, C.FS)
    return est, before, after, u, m


def test_the_closed_loop_method_beats_the_plain_cross_spectral_estimate():
    # held-out case 0: a 5.0 dB margin (truth: nyquist_margin of the true G·F)
    est, before, _a, u, m = _run(0)
    truth = before.gain_margin_db
    plain = C.plain_margins(u, m, C.FS)[9]
    ours = _at(est, 10.0)["gain_margin_db"]
    print("truth", truth, "plain", plain, "ours", ours)
    # the open-loop formula in closed loop is pulled to L = 1 (a margin near 0 dB; Ljung 1999, sec. 13.4)
    assert plain < truth - 3.0
    assert abs(ours - truth) < abs(plain - truth) - 2.0


MISSED = ("the issue's 1 dB after 10 s is not reached on this held-out case (see docs/track.md, "
          "'What is not reached': F's error after 10 s of program); the truth stays inside the reported ±")


@pytest.mark.parametrize("i", [0, 1, 2, pytest.param(3, marks=pytest.mark.xfail(strict=True, reason=MISSED)),
                               pytest.param(4, marks=pytest.mark.xfail(strict=True, reason=MISSED))])
def test_margin_after_ten_seconds_of_program_is_within_a_db_of_the_truth(i):
    est, before, *_ = _run(i)
    e = _at(est, 10.0)
    truth = before.gain_margin_db  # howl.loop.nyquist_margin of the true G·F (the reference)
    print(C.HELDOUT[i], truth, e)
    assert abs(e["gain_margin_db"] - truth) <= e["uncertainty_db"]
    assert abs(e["gain_margin_db"] - truth) <= 1.0


@pytest.mark.parametrize("step_db", [3.0, -3.0])
def test_a_fader_step_shows_within_three_seconds(step_db):
    est, before, after, *_ = _run(0, dur_s=13.0, step_at_s=10.0, step_db=step_db)
    e10, e13 = _at(est, 10.0), _at(est, 13.0)
    # the truth moves by the step exactly (a fader scales the whole loop): derived from L = g·G·F
    assert after.gain_margin_db - before.gain_margin_db == pytest.approx(-step_db, abs=1e-9)
    assert (e13["gain_margin_db"] - e10["gain_margin_db"]) == pytest.approx(-step_db, abs=1.0)
    assert abs(e13["gain_margin_db"] - after.gain_margin_db) <= 1.0


@pytest.mark.parametrize("i", [4, pytest.param(3, marks=pytest.mark.xfail(strict=True, reason=(
    "the estimate's worst crossing is not the true one here, so a notch at the true crossing barely moves it "
    "(docs/track.md, 'What is not reached')")))])
def test_a_notch_at_the_worst_crossing_raises_the_margin_by_the_right_amount(i):
    est0, before, *_ = _run(i)
    est1, with_notch, *_ = _run(i, notch=(before.howl_freq_hz, 8.0))  # scipy.signal.iirnotch, Q 8
    rise_true = with_notch.gain_margin_db - before.gain_margin_db
    rise_est = _at(est1, 10.0)["gain_margin_db"] - _at(est0, 10.0)["gain_margin_db"]
    print("rise true", rise_true, "estimated", rise_est)
    assert rise_est == pytest.approx(rise_true, abs=1.0)


def test_the_truth_lies_inside_the_reported_range_in_nine_estimates_out_of_ten():
    inside = []
    for i in range(5):  # the held-out cases the other tests run (the benchmark covers all eight)
        est, before, *_ = _run(i)
        inside += [abs(e["gain_margin_db"] - before.gain_margin_db) <= e["uncertainty_db"]
                   for e in est if e["gain_margin_db"] is not None and e["time_s"] >= 3.0]
    print(f"coverage {np.mean(inside):.3f} over {len(inside)} estimates")
    assert np.mean(inside) >= 0.9


def test_in_every_case_an_ok_estimate_holds_the_truth_nine_times_out_of_ten():
    # a pooled coverage can hide one program (held chords) read confidently wrong: per case here,
    # over every held-out case (without the held-tone term, held_tone_k=0, room106-band's "ok"
    # estimates here hold the truth 5 times in 7: this test failed before it)
    for i in range(len(C.HELDOUT)):
        est, before, *_ = _run(i)
        ok = [abs(e["gain_margin_db"] - before.gain_margin_db) <= e["uncertainty_db"]
              for e in est if e["gain_margin_db"] is not None and e["time_s"] >= 3.0 and e["status"] == "ok"]
        print(C.HELDOUT[i], f"{sum(ok)}/{len(ok)}")
        assert not ok or np.mean(ok) >= 0.9


def test_ctrl_c_keeps_what_was_estimated_and_marks_the_run_interrupted(tmp_path):
    from howl.listen._track_live import run_track
    from howl.listen.live import JsonlLog

    fs = 8000
    rng = np.random.default_rng(3)

    class Source:  # two seconds of a loop, then Ctrl-C
        sample_rate_hz, overflows, n = fs, 2, 0

        def read(self, timeout_s=0.1):
            if self.n >= 2 * fs:
                raise KeyboardInterrupt
            self.n += 800
            u = 0.01 * rng.standard_normal(800)
            return np.stack([u, 0.2 * u + 0.01 * rng.standard_normal(800)], axis=1)

        def close(self):
            pass

    log = JsonlLog(tmp_path / "t.jsonl")
    run = run_track(Source(), log=log)
    log.close()
    assert run.interrupted and run.n_samples == 2 * fs
    assert [e["time_s"] for e in run.estimates] == [1.0, 2.0]
    assert any(e["kind"] == "overflow" for e in run.events)  # overflows are counted and reported
    assert len((tmp_path / "t.jsonl").read_text().splitlines()) == len(run.estimates) + len(run.events)
