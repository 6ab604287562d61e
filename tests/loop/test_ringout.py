"""Virtual ring-out: cuts that buy stable gain, confirmed by the Nyquist margin and the closed-loop simulator.

Independent references used here:
* pyroomacoustics shoebox image-source RIRs as loop IRs (reference room simulator);
* howl.loop.nyquist_margin with the cascade as filters_sos (exact DTFT margin), and
  howl.simulate.simulate_closed_loop (sample-accurate time-domain loop) as the check of every ASG;
* scipy.signal.sosfreqz / sosfilt / resample (general-purpose filter and resampling routines);
* ideal-gas speed of sound, c ∝ sqrt(T) (first principles) for the temperature shift.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.signal as sig
from typer.testing import CliRunner

from howl.cli import app
from howl.errors import InputError
from howl.loop.nyquist import nyquist_margin
from howl.loop.notch import MAX_NOTCH_BANDWIDTH_OCT, Notch, cascade_sos, q_from_bandwidth_oct, rbj_peaking_sos
from howl.loop.ringout import ring_out, temperature_shifted_ir, tonal_cost_db

FS = 8000
BAND = None  # all the file holds: the simulator sees every frequency too


def _room_ir(seed: int, rt60_s: float = 0.4, fs: int = FS) -> np.ndarray:
    """A pyroomacoustics shoebox RIR as a loop IR: 3 ms processing delay, 2nd-order 80 Hz high-pass speaker."""
    pra = pytest.importorskip("pyroomacoustics")
    rng = np.random.default_rng(seed)
    dims = [rng.uniform(6, 10), rng.uniform(4, 7), rng.uniform(2.8, 4)]
    e_abs, _ = pra.inverse_sabine(rt60_s, dims)
    room = pra.ShoeBox(dims, fs=fs, materials=pra.Material(e_abs), max_order=14)
    room.add_source([1.0, dims[1] / 2 + 0.7, 2.2])
    room.add_microphone([rng.uniform(2.5, dims[0] - 1), rng.uniform(1, dims[1] - 1), 1.5])
    room.compute_rir()
    h = sig.sosfilt(sig.butter(2, 80, "highpass", fs=fs, output="sos"), np.asarray(room.rir[0][0], float))
    return np.concatenate([np.zeros(int(0.003 * fs)), h])


@pytest.fixture(scope="module")
def room():
    ir = _room_ir(3)
    return ir, ring_out(ir, FS, band_hz=BAND, min_gain_per_notch_db=0.0)


def _naive_greedy_asg(ir, n=6):
    """A -10 dB, 1/6-octave cut at each limiting crossing in turn (the naive ring-out), via nyquist_margin."""
    m0 = nyquist_margin(ir, FS, band_hz=BAND)
    cuts = []
    for _ in range(n):
        r = nyquist_margin(ir, FS, band_hz=BAND, filters_sos=cascade_sos(cuts, FS) if cuts else None)
        cuts.append(Notch(r.howl_freq_hz, -10.0, q_from_bandwidth_oct(1 / 6)))
    r = nyquist_margin(ir, FS, band_hz=BAND, filters_sos=cascade_sos(cuts, FS))
    return r.gain_margin_db - m0.gain_margin_db


# ---------------------------------------------------------------- what the ring-out reports


def test_reported_margins_are_the_nyquist_margins_with_the_cuts_in_the_loop(room):
    ir, res = room
    before = nyquist_margin(ir, FS, band_hz=BAND)
    after = nyquist_margin(ir, FS, band_hz=BAND, filters_sos=cascade_sos(res.notches, FS))
    assert res.gain_margin_db_before == pytest.approx(before.gain_margin_db, abs=1e-9)
    assert res.gain_margin_db_after == pytest.approx(after.gain_margin_db, abs=1e-9)
    assert res.added_stable_gain_db == pytest.approx(after.gain_margin_db - before.gain_margin_db, abs=1e-9)
    # the last step's grid margin agrees with the exact one
    assert res.steps[-1].gain_margin_db == pytest.approx(after.gain_margin_db, abs=0.1)


def test_six_cuts_beat_a_naive_greedy_ring_out_and_stay_notches(room):
    ir, res = room
    assert 1 <= len(res.notches) <= 6
    for n in res.notches:
        assert n.bandwidth_oct <= MAX_NOTCH_BANDWIDTH_OCT + 1e-9
        assert n.gain_db is None or n.gain_db < 0
    assert res.added_stable_gain_db > 1.0
    assert res.added_stable_gain_db >= _naive_greedy_asg(ir) - 0.1


def test_steps_add_up_to_the_total_and_say_why_they_stopped(room):
    _, res = room
    total = 0.0
    for s in res.steps:
        total += s.added_stable_gain_db
        assert s.total_added_stable_gain_db == pytest.approx(total, abs=1e-9)
    assert res.stopped_because
    assert res.tonal_cost_db > 0 and res.tonal_cost_speech_db > 0


def test_closed_loop_simulator_confirms_the_added_stable_gain(room):
    """Cuts in the loop: at margin + 0.3 dB the loop grows, at margin - 0.3 dB it decays (issue check)."""
    from howl.loop.simulate import simulate_closed_loop

    ir, res = room
    sos = cascade_sos(res.notches, FS)
    ir_cut = sig.sosfilt(sos, np.concatenate([ir, np.zeros(int(0.3 * FS))]))  # the cuts' own tail too
    rng = np.random.default_rng(0)
    n = int(5.0 * FS)
    x = np.zeros(n)
    x[: int(0.05 * FS)] = 1e-3 * rng.standard_normal(int(0.05 * FS))
    m = res.gain_margin_db_after

    def energy(y, t0, t1):
        return 10 * np.log10(np.mean(y[int(t0 * FS) : int(t1 * FS)] ** 2) + 1e-300)

    y_up = simulate_closed_loop(ir_cut, x, FS, gain_db=m + 0.3, limiter_dbfs=None)
    y_dn = simulate_closed_loop(ir_cut, x, FS, gain_db=m - 0.3, limiter_dbfs=None)
    assert energy(y_up, 4.0, 5.0) - energy(y_up, 1.0, 2.0) > 3.0
    assert energy(y_dn, 4.0, 5.0) - energy(y_dn, 1.0, 2.0) < -3.0
    # and without the cuts the same gain howls: the ASG is real
    y_raw = simulate_closed_loop(ir, x, FS, gain_db=m - 0.3, limiter_dbfs=None)
    assert energy(y_raw, 4.0, 5.0) - energy(y_raw, 1.0, 2.0) > 3.0


def test_target_margin_stops_the_ring_out_early(room):
    ir, full = room
    target = full.gain_margin_db_before + 1.0
    res = ring_out(ir, FS, band_hz=BAND, target_margin_db=target)
    assert "target" in res.stopped_because
    assert len(res.notches) <= len(full.notches)
    assert res.gain_margin_db_after >= target - 0.1


def test_useless_cuts_are_not_spent():
    # a pure inverting 50 ms delay loop: crossings every 20 Hz, all of the same height (derived: L = −0.5·e^{−jωD}
    # is real and positive where ωD = π(2n+1), i.e. f = (2n+1)·fs/(2D) = 10, 30, 50, ... Hz for D = 400 at 8 kHz,
    # each with L = 0.5, so MSG = −20·log10 0.5 = 6.021 dB); six 1/3-octave cuts cannot cover 5 octaves,
    # so no cut buys anything and none is spent.
    fs = 8000
    ir = np.zeros(800)
    ir[400] = -0.5
    res = ring_out(ir, fs, band_hz=(100, 3500))
    assert res.gain_margin_db_before == pytest.approx(-20 * math.log10(0.5), abs=1e-6)
    assert len(res.notches) == 0
    assert res.added_stable_gain_db == pytest.approx(0.0, abs=1e-9)
    assert "0.5 dB per notch" in res.stopped_because


def test_sparse_equal_crossings_are_all_cut():
    # -0.5 z^-8 at 8 kHz: crossings only at 500, 1500, 2500, 3500 Hz (derived: −e^{−jω8} = 1 where 8ω = π(2n+1),
    # f = (2n+1)·8000/16 = 500·(2n+1) Hz);
    # four cuts can take every one of them down, so the margin rises well above 6.02 dB.
    fs = 8000
    ir = np.zeros(400)
    ir[8] = -0.5
    res = ring_out(ir, fs, band_hz=(100, 3600))
    assert res.added_stable_gain_db > 6.0
    centres = sorted(n.freq_hz for n in res.notches)
    for f in (500, 1500, 2500, 3500):
        assert min(abs(math.log2(c / f)) for c in centres) < 1 / 6


# ---------------------------------------------------------------- temperature drift


def test_warming_the_air_scales_the_crossings_by_the_speed_of_sound_ratio():
    fs = 48000
    ir = np.zeros(2000)
    ir[480] = -0.5  # 10 ms inverting delay: crossings at 50·(2n+1) Hz
    warm = temperature_shifted_ir(ir, fs, 20.0, 3.0)
    r = math.sqrt((293.15 + 3) / 293.15)  # c ∝ sqrt(T), ideal gas (first principles)
    res = nyquist_margin(warm, fs, band_hz=(1000, 1100))
    assert res.howl_freqs_hz, "no crossing found"
    f = min(res.crossings_freq_hz, key=lambda x: abs(x - 1050 * r))
    assert f == pytest.approx(1050 * r, rel=2e-5)
    assert res.gain_margin_db == pytest.approx(6.0206, abs=0.02)


def test_robust_cuts_still_meet_the_reported_margin_in_a_warmer_room():
    ir = _room_ir(5)
    res = ring_out(ir, FS, band_hz=BAND, robust=True, max_notches=4, min_gain_per_notch_db=0.0)
    assert res.robust and len(res.robust_loops) >= 5
    # our own +3 °C copy (FFT resampling, not the module's polyphase one): h'(t) = r·h(r·t)
    r = math.sqrt((293.15 + 3) / 293.15)
    n_new = int(round(ir.size / r))
    warm = sig.resample(np.concatenate([ir, np.zeros(512)]), int(round((ir.size + 512) / r)))[:n_new] * r
    m = nyquist_margin(warm, FS, band_hz=BAND, filters_sos=cascade_sos(res.notches, FS)).gain_margin_db
    assert m >= res.gain_margin_db_after - 0.15


# ---------------------------------------------------------------- the planning grid


def _brute_margin_db(ir, fs, cuts, n_fft):
    """Largest positive real-axis crossing of H·C on the plain rfft grid, with scipy computing both."""
    w, H = sig.freqz(ir, worN=n_fft // 2 + 1, whole=False, fs=fs, include_nyquist=True)
    if cuts:
        H = H * sig.sosfreqz(cascade_sos(cuts, fs), worN=w, fs=fs)[1]
    im, re = H.imag, H.real
    i = np.flatnonzero(np.signbit(im[:-1]) != np.signbit(im[1:]))
    t = im[i] / (im[i] - im[i + 1])
    rc = re[i] + t * (re[i + 1] - re[i])
    return -20 * np.log10(rc[rc > 0].max())


@pytest.mark.parametrize("seed", [3, 5])
def test_planning_grid_margin_equals_the_whole_grid_margin_below_its_cap(seed):
    # The planning grid keeps only the points within PLAN_CAP_DB of the top crossing (a cut never
    # raises |L|); below the cap its margin must equal the margin over every point of the same grid,
    # here computed independently with scipy.signal.freqz / sosfreqz (equal up to the planning grid's
    # single-precision rounding, 1e-4 dB).
    from howl.loop._ringout_grid import PLAN_CAP_DB, _GridLoop, planning_ir

    ir = _room_ir(seed)
    lp = _GridLoop("nominal", ir, FS, (0.0, FS / 2), PLAN_CAP_DB)
    assert lp.f.size < lp.n_full  # the cap does drop points
    n_fft = 1 << int(math.ceil(math.log2(4 * planning_ir(ir, FS).size)))
    n_fft = max(n_fft, 1 << 14)
    rng = np.random.default_rng(seed)
    for k in range(4):
        cuts = [Notch(float(f), float(g), q_from_bandwidth_oct(float(bw)))
                for f, g, bw in zip(rng.uniform(200, 3500, k + 1), rng.uniform(-15, -2, k + 1),
                                    rng.uniform(1 / 24, 1 / 3, k + 1))]
        got = lp.margin(lp.H * lp.cascade(cuts))[0]
        assert not lp.saturated(got)
        assert got == pytest.approx(_brute_margin_db(planning_ir(ir, FS), FS, cuts, n_fft), abs=1e-4)


def test_closed_form_cut_response_equals_the_biquad():
    # the planning grid's closed form of a cookbook cut against scipy.signal.sosfreqz of its biquad
    from howl.loop.notch import notch_sos
    from howl.loop._ringout_grid import _cut_on_grid

    f = np.linspace(1.0, FS / 2 - 1.0, 5001)
    w = 2 * np.pi * f / FS
    for n in (Notch(1000.0, -9.0, 4.3), Notch(3100.0, -2.5, 30.0), Notch(440.0, None, 12.0)):
        want = sig.sosfreqz(notch_sos(n, FS), worN=f, fs=FS)[1]
        np.testing.assert_allclose(_cut_on_grid(n, np.cos(w), 1 / np.sin(w), FS), want, rtol=0, atol=1e-9)


def test_planning_ir_drops_only_the_tail_below_minus_50_db():
    # Schroeder backward integration (ISO 3382-1 uses it for decay curves): what is cut holds less
    # than 1e-5 of the energy, and the loop margin of the cut IR is within 0.01 dB of the whole IR's.
    from howl.loop.ringout import planning_ir

    rng = np.random.default_rng(0)
    fs = 16000
    n = 2 * fs
    ir = np.zeros(n)
    t = np.arange(n - 80) / fs
    ir[80:] = rng.standard_normal(n - 80) * np.exp(-6.9 * t / 0.5)  # RT60 0.5 s, exponential decay
    ir *= 3.0 / np.sqrt(np.sum(ir**2))
    hp = planning_ir(ir, fs)
    assert hp.size < 0.6 * ir.size
    assert np.sum(ir[hp.size:] ** 2) <= 1e-5 * np.sum(ir**2)
    assert nyquist_margin(hp, fs).gain_margin_db == pytest.approx(nyquist_margin(ir, fs).gain_margin_db, abs=0.01)


def test_search_tonal_estimate_matches_the_reported_tonal_cost():
    from howl.loop._ringout_search import _Score

    rng = np.random.default_rng(1)
    band = (100.0, 3500.0)
    sc = _Score([], FS, band, 0.0)
    for k in range(1, 6):
        cuts = [Notch(float(f), float(g), q_from_bandwidth_oct(float(bw)))
                for f, g, bw in zip(rng.uniform(150, 3000, k), rng.uniform(-18, -1, k), rng.uniform(1 / 24, 1 / 3, k))]
        assert sc.tonal_db(cuts) == pytest.approx(tonal_cost_db(cuts, band, FS), abs=0.02)


def test_cuts_spend_at_most_their_share_of_tone(room):
    # our own rule (documented in ringout.py): pink tonal cost <= tonal_share x the gain bought
    ir, res = room
    assert res.tonal_cost_db <= 0.5 * res.added_stable_gain_db + 0.1
    loose = ring_out(ir, FS, band_hz=BAND, min_gain_per_notch_db=0.0, tonal_share=1.0)
    assert loose.tonal_cost_db <= 1.0 * loose.added_stable_gain_db + 0.1
    assert loose.added_stable_gain_db >= res.added_stable_gain_db - 0.1
    with pytest.raises(InputError, match="tonal_share"):
        ring_out(ir, FS, tonal_share=-1.0)
    speech = ring_out(ir, FS, band_hz=BAND, min_gain_per_notch_db=0.0, tonal_weighting="speech")
    assert speech.tonal_weighting == "speech"
    assert speech.tonal_cost_speech_db <= 0.5 * speech.added_stable_gain_db + 0.1
    with pytest.raises(InputError, match="tonal_weighting"):
        ring_out(ir, FS, tonal_weighting="loud")


# ---------------------------------------------------------------- tonal cost


def test_tonal_cost_is_the_pink_noise_power_removed():
    cut = Notch(1000.0, -12.0, q_from_bandwidth_oct(1 / 3))
    band = (100.0, 3500.0)
    # independent: scipy sosfreqz on a log grid, trapezoid in log-frequency (pink = equal power per octave)
    f = np.geomspace(*band, 20001)
    p = np.abs(sig.sosfreqz(rbj_peaking_sos(1000.0, -12.0, cut.q, FS), worN=f, fs=FS)[1]) ** 2
    lf = np.log(f)
    want = -10 * np.log10(np.sum(0.5 * (p[1:] + p[:-1]) * np.diff(lf)) / (lf[-1] - lf[0]))
    assert tonal_cost_db([cut], band, FS) == pytest.approx(want, abs=0.01)
    assert tonal_cost_db([], band, FS) == 0.0


def test_bad_arguments_are_refused_by_name():
    ir = np.zeros(100)
    ir[5] = 0.5
    with pytest.raises(InputError, match="max_notches"):
        ring_out(ir, FS, max_notches=-1)
    with pytest.raises(InputError, match="swing_c"):
        ring_out(ir, FS, swing_c=-2.0)


# ---------------------------------------------------------------- command line


def test_ringout_command_prints_the_contract_json(tmp_path):
    import soundfile as sf

    ir = _room_ir(3)
    path = tmp_path / "loop.wav"
    sf.write(str(path), ir.astype(np.float32), FS, subtype="FLOAT")
    res = CliRunner().invoke(
        app, ["ringout", str(path), "--band-hz", "100", "3500", "--max-notches", "3", "--sample-rate-hz", "48000", "--json"]
    )
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    for key in ("added_stable_gain_db", "gain_margin_db_before", "gain_margin_db_after", "notches", "stopped_because"):
        assert key in out
    assert len(out["notches"]) <= 3
    for n in out["notches"]:
        assert set(n) >= {"freq_hz", "gain_db", "q", "bandwidth_oct"}
        # the coefficients are the cookbook filter rebuilt from (freq_hz, gain_db, q) at 48 kHz
        sos = rbj_peaking_sos(n["freq_hz"], n["gain_db"], n["q"], 48000)[0]
        np.testing.assert_allclose(n["biquad"]["b"] + n["biquad"]["a"], sos, atol=1e-12)
    text = CliRunner().invoke(app, ["ringout", str(path), "--band-hz", "100", "3500", "--max-notches", "2"])
    assert text.exit_code == 0 and "added stable gain" in text.output


def test_ringout_command_names_a_bad_option(tmp_path):
    import soundfile as sf

    path = tmp_path / "loop.wav"
    ir = np.zeros(800)
    ir[20] = 0.3
    sf.write(str(path), ir.astype(np.float32), FS, subtype="FLOAT")
    res = CliRunner().invoke(app, ["ringout", str(path), "--max-notches", "-2"])
    assert res.exit_code == 2
    assert "--max-notches" in res.output
    res = CliRunner().invoke(app, ["ringout", str(path), "--tonal-share", "-0.5"])
    assert res.exit_code == 2
    assert "--tonal-share" in res.output and "-0.5" in res.output
