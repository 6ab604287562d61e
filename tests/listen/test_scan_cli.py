"""`howl scan`: a recording with a known howl and a known ring-down, through the CLI.

The signals are exact by construction (numpy tones of known frequency and dB/s slope);
the suggested cut is checked on its digital filter with scipy.signal.sosfreqz.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from howl.cli import app
from howl.fileio import write_wav_atomic

runner = CliRunner()
FS = 16000


def _speech(seed: int, dur_s: float) -> np.ndarray:
    from test_detect import speech_like

    return speech_like(FS, dur_s, seed)


def _recording(tmp_path, name="rec.wav", stereo=False):
    t = np.arange(int(6 * FS)) / FS
    x = _speech(4, 6.0)
    # a howl at 2345.6 Hz from t = 1 s, +25 dB/s from -60 dBFS, held at -12 dBFS from 3 s on (limiter)
    lvl = np.where(t < 1, -200, np.minimum(-60 + 25 * (t - 1), -12))
    howl = 10 ** (lvl / 20) * np.sin(2 * np.pi * 2345.6 * t)
    howl[t > 4.0] = 0.0  # the fader comes down
    # a ring-down at 987.6 Hz after 4.5 s: -20 dBFS falling 30 dB/s
    ring = np.where(t > 4.5, 10 ** ((-20 - 30 * (t - 4.5)) / 20), 0.0) * np.sin(2 * np.pi * 987.6 * t)
    y = x * (t < 4.4) + howl + ring
    data = np.stack([y, 0.5 * y], axis=1) if stereo else y
    path = tmp_path / name
    write_wav_atomic(path, data, FS)
    return path


def test_scan_json_finds_the_howl_and_the_ringing_with_cuts(tmp_path):
    path = _recording(tmp_path)
    res = runner.invoke(app, ["scan", str(path), "--json", "--loop-delay-ms", "20"])
    assert res.exit_code == 0, res.output
    rep = json.loads(res.stdout)
    kinds = {e["kind"]: e for e in rep["events"]}
    assert set(kinds) == {"howl", "ringing"}, rep["events"]
    for key in ("time_s", "freq_hz", "kind", "level_db", "growth_db_per_s", "notch", "margin_db"):
        assert all(key in e for e in rep["events"])
    h, r = kinds["howl"], kinds["ringing"]
    assert abs(h["freq_hz"] / 2345.6 - 1) < 1e-3
    assert h["growth_db_per_s"] == pytest.approx(25, rel=0.15)
    assert h["margin_db"] == pytest.approx(-25 * 0.020, abs=0.15)  # −growth·τ
    assert abs(r["freq_hz"] / 987.6 - 1) < 1e-3
    assert r["decay_db_per_s"] == pytest.approx(30, rel=0.05)
    assert r["margin_db"] == pytest.approx(30 * 0.020, rel=0.05)  # decay·τ
    # each suggested cut takes at least the needed depth off at its centre (digital filter, scipy)
    from scipy.signal import sosfreqz

    from howl.loop.notch import Notch, notch_sos

    for e in rep["events"]:
        n = e["notch"]
        assert n["freq_hz"] == pytest.approx(e["freq_hz"])
        sos = notch_sos(Notch(n["freq_hz"], n["gain_db"], n["q"]), FS)
        _, H = sosfreqz(sos, worN=[e["freq_hz"]], fs=FS)
        assert -20 * np.log10(abs(H[0])) >= e["needed_cut_db"] - 0.05
    assert len(rep["notches"]) == 2
    assert sorted(round(n["freq_hz"]) for n in rep["notches"]) == [988, 2346]


def test_scan_text_names_the_frequencies_and_the_caution(tmp_path):
    path = _recording(tmp_path)
    res = runner.invoke(app, ["scan", str(path)])
    assert res.exit_code == 0, res.output
    assert "2345" in res.stdout or "2346" in res.stdout
    assert "operator decides" in res.stdout
    assert "assume" in res.stdout  # no loop delay given: the assumption is stated


def test_scan_of_program_alone_reports_nothing(tmp_path):
    path = tmp_path / "speech.wav"
    write_wav_atomic(path, _speech(9, 5.0), FS)
    res = runner.invoke(app, ["scan", str(path), "--json"])
    assert res.exit_code == 0, res.output
    rep = json.loads(res.stdout)
    assert rep["events"] == [] and rep["notches"] == []
    assert "margin_db" not in json.dumps(rep["events"])


def test_scan_multichannel_needs_a_channel_and_bad_options_are_one_line(tmp_path):
    path = _recording(tmp_path, "st.wav", stereo=True)
    res = runner.invoke(app, ["scan", str(path), "--json"])
    assert res.exit_code == 2 and "--channel" in res.output
    res = runner.invoke(app, ["scan", str(path), "--json", "--channel", "2"])
    assert res.exit_code == 0, res.output
    assert any(e["kind"] == "howl" for e in json.loads(res.stdout)["events"])
    res = runner.invoke(app, ["scan", str(path), "--channel", "1", "--loop-delay-ms", "-3"])
    assert res.exit_code == 2 and "--loop-delay-ms" in res.output
    res = runner.invoke(app, ["scan", str(tmp_path / "missing.wav")])
    assert res.exit_code == 2 and "not found" in res.output


def test_scan_with_a_measured_loop_ir_gives_each_ringing_its_margin(tmp_path):
    # A reverberant room's low loop (tests/test_detect.low_room_loop, pyroomacoustics) 1.5 dB under
    # its worst crossing (100.7 Hz), rung by a click. The loop's delay at that mode is its group
    # delay (about 0.24 s), so the margin from the IR is right where a fixed 20 ms is 10x too small.
    from test_detect import low_room_loop

    from howl.loop.simulate import simulate_closed_loop

    h, cross_f, cross_m = low_room_loop(35)
    x = np.zeros(8 * FS)
    x[FS // 2] = 0.5
    x += 1e-5 * np.random.default_rng(1).standard_normal(x.size)
    y = simulate_closed_loop(h, x, FS, gain_db=-1.5)
    rec, ir = tmp_path / "click.wav", tmp_path / "loop.wav"
    write_wav_atomic(rec, y, FS)
    write_wav_atomic(ir, h * 10 ** (-1.5 / 20), FS)  # the loop at the fader's setting, as measured
    res = runner.invoke(app, ["scan", str(rec), "--json", "--loop-ir", str(ir)])
    assert res.exit_code == 0, res.output
    rep = json.loads(res.stdout)
    assert rep["loop_delay_from"] == str(ir) and rep["loop_delay_ms"] is None
    ring = [e for e in rep["events"] if e["kind"] == "ringing"]
    assert ring, rep["events"]
    e = min(ring, key=lambda e: abs(e["freq_hz"] - cross_f[np.argmin(cross_m)]))
    assert abs(e["freq_hz"] / cross_f[np.argmin(cross_m)] - 1) < 1e-3
    # truth: the scipy.signal.freqz crossing (0 dB at 100.7 Hz, test_detect.low_room_loop), then the fader 1.5 dB.
    # Tolerance 0.05 dB + 15 % of the true margin: the estimate is first order in the margin,
    # m = decay·τ_eff with τ_eff = (τ_g² + a²)/τ_g from the IR (the closed-loop pole's shift to first order,
    # howl.listen loop_delay_s); the second-order shift, which grows with m, and a decay fitted on a ring-down
    # that neighbouring modes share make it read low; on the loops of test_detect it read 0-0.29 dB
    # low at 1-3 dB (up to 12 %) while this tolerance was set. The old ±1 dB let 0.5-2.5 dB pass for 1.5.
    assert abs(e["margin_db"] - 1.5) <= 0.05 + 0.15 * 1.5, e["margin_db"]
    assert e["loop_delay_ms"] > 100.0
    # without the IR the margin assumed from 20 ms is far smaller (and its cut deeper)
    res = runner.invoke(app, ["scan", str(rec), "--json"])
    e0 = [d for d in json.loads(res.stdout)["events"] if abs(d["freq_hz"] - e["freq_hz"]) < 1][0]
    assert e0["margin_assumed_db"] < 0.5 and e0["needed_cut_db"] > e["needed_cut_db"]
    res = runner.invoke(app, ["scan", str(rec), "--loop-ir", str(ir), "--loop-delay-ms", "20"])
    assert res.exit_code == 2 and "--loop-ir" in res.output
    stereo = tmp_path / "stereo_ir.wav"
    write_wav_atomic(stereo, np.stack([h, h], axis=1), FS)
    res = runner.invoke(app, ["scan", str(rec), "--loop-ir", str(stereo)])
    assert res.exit_code == 2 and "stereo_ir.wav" in res.output and "mono" in res.output
    assert len(res.output.strip().splitlines()) == 1
