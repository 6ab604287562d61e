"""`howl margin` and `howl simulate` from the command line: JSON contract, bad files, multi-IR folders."""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf
from typer.testing import CliRunner

from howl.cli import app
from howl.loop.mimo import mimo_margin
from howl.loop.simulate import simulate_closed_loop

runner = CliRunner()


def _wav(path, data, fs=48000, subtype="FLOAT"):
    sf.write(str(path), np.asarray(data), fs, subtype=subtype)
    return path


def _delay_ir(n=48, gain=-0.5, length=2000):
    h = np.zeros(length)
    h[n] = gain
    return h


def _json(result):
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def test_margin_json_holds_the_contract_fields_with_the_check_value(tmp_path):
    # Check value: F = −0.5 z^−48 at 48 kHz → MSG 6.021 dB at 500 (2n+1) Hz (van Waterschoot & Moonen 2011
    # MSG definition, derived by hand).
    p = _wav(tmp_path / "loop.wav", _delay_ir())
    rep = _json(runner.invoke(app, ["margin", str(p), "--json"]))
    for key in ("gain_margin_db", "magnitude_margin_db", "howl_freq_hz", "risks", "sample_rate_hz"):
        assert key in rep
    assert rep["gain_margin_db"] == pytest.approx(6.0206, abs=1e-4)
    assert rep["howl_freq_hz"] == pytest.approx(500.0, rel=1e-6)
    assert rep["sample_rate_hz"] == 48000
    assert {"freq_hz", "margin_db"} <= set(rep["risks"][0])
    m = [r["margin_db"] for r in rep["risks"]]
    assert m == sorted(m)
    assert len(rep["howl_freqs_hz"]) == 24
    assert rep["third_octave"][0]["loop_gain_db"] == pytest.approx(-6.0206, abs=1e-3)


def test_added_gain_and_band_change_the_analysis(tmp_path):
    p = _wav(tmp_path / "loop.wav", _delay_ir(gain=0.5))
    rep = _json(runner.invoke(app, ["margin", str(p), "--json", "--gain-db", "3", "--band-hz", "100", "24000"]))
    assert rep["gain_margin_db"] == pytest.approx(3.0206, abs=1e-4)
    assert rep["howl_freq_hz"] > 100.0
    bad = runner.invoke(app, ["margin", str(p), "--band-hz", "100", "30000"])
    assert bad.exit_code == 2 and "--band-hz" in bad.stderr


def test_text_output_names_both_margins(tmp_path):
    p = _wav(tmp_path / "loop.wav", _delay_ir())
    res = runner.invoke(app, ["margin", str(p)])
    assert res.exit_code == 0
    assert "phase-aware" in res.stdout and "phase-blind" in res.stdout and "500.0 Hz" in res.stdout


def test_stereo_needs_a_channel_and_accepts_one(tmp_path):
    h = _delay_ir()
    p = _wav(tmp_path / "st.wav", np.stack([h, 0.5 * h], axis=1))
    res = runner.invoke(app, ["margin", str(p)])
    assert res.exit_code == 2 and "--channel" in res.stderr
    rep = _json(runner.invoke(app, ["margin", str(p), "--channel", "2", "--json"]))
    assert rep["gain_margin_db"] == pytest.approx(12.0412, abs=1e-4)


@pytest.mark.parametrize(
    "data,needle",
    [(np.zeros(0), "no samples"), (np.zeros(1000), "silent"), (np.array([0.0, np.nan, 0.1, 0.0]), "NaN")],
    ids=["empty", "silent", "nan"],
)
def test_unusable_files_give_one_line_errors(tmp_path, data, needle):
    p = _wav(tmp_path / "bad.wav", data)
    res = runner.invoke(app, ["margin", str(p)])
    assert res.exit_code == 2
    assert needle in res.stderr and str(p) in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_clipped_and_zero_delay_irs_are_warned_about(tmp_path):
    h = _delay_ir(gain=0.3)
    h[0] = 0.2
    h[100:103] = [1.0, -1.0, 1.0]
    p = _wav(tmp_path / "doubt.wav", h, subtype="PCM_16")
    res = runner.invoke(app, ["margin", str(p), "--json"])
    assert res.exit_code == 0
    assert "first sample" in res.stderr and "full scale" in res.stderr
    json.loads(res.stdout)  # stdout stays one JSON object


def test_very_long_files_are_refused_unless_trimmed(tmp_path):
    h = np.zeros(8000 * 25)
    h[40] = -0.5
    p = _wav(tmp_path / "long.wav", h, fs=8000)
    res = runner.invoke(app, ["margin", str(p)])
    assert res.exit_code == 2 and "--max-length-s" in res.stderr
    rep = _json(runner.invoke(app, ["margin", str(p), "--trim-s", "1", "--json"]))
    assert rep["gain_margin_db"] == pytest.approx(6.0206, abs=1e-4)


def test_plot_writes_a_png(tmp_path):
    p = _wav(tmp_path / "loop.wav", _delay_ir())
    png = tmp_path / "m.png"
    rep = _json(runner.invoke(app, ["margin", str(p), "--plot", str(png), "--json"]))
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and rep["plot"] == str(png)


def _pair_irs(fs=16000, n=1500):
    rng = np.random.default_rng(9)
    out = {}
    for i, s in enumerate(["column_north", "column_south"]):
        for j, m in enumerate(["lectern", "ambo"]):
            h = np.zeros(n)
            d = 30 + 11 * i + 7 * j
            h[d:] = rng.standard_normal(n - d) * np.exp(-np.arange(n - d) / 200.0) * 2e-3
            h -= np.concatenate([[0], h[:-1]])  # a first difference: blocks DC like a real loop
            out[(s, m)] = h
    return out


def _pair_folder(tmp_path):
    """A folder of the pair IRs above, named <speaker>__<mic>.wav, and the IRs by (speaker, mic)."""
    folder = tmp_path / "irs"
    folder.mkdir()
    irs = _pair_irs()
    for (s, m), h in irs.items():
        _wav(folder / f"{s}__{m}.wav", h, fs=16000)
    return folder, irs


def test_a_folder_of_pair_irs_with_the_rig_mix_gives_the_mimo_margin(tmp_path):
    from howl.model.rig import bundled_rig_path

    folder, irs = _pair_folder(tmp_path)
    rep = _json(runner.invoke(app, ["margin", str(folder), "--rig", str(bundled_rig_path()), "--json"]))
    arr = np.array([[irs[(s, m)] for m in ["ambo", "lectern"]] for s in ["column_north", "column_south"]])
    # the bundled rig sends lectern and ambo at 25 dB to both column speakers (its mains mix)
    mix = np.full((2, 2), 10 ** (25 / 20))
    ref = mimo_margin(arr.astype(np.float32).astype(float), mix, 16000)
    assert rep["mics"] == ["ambo", "lectern"]
    assert rep["gain_margin_db"] == pytest.approx(ref.gain_margin_db, abs=1e-4)
    assert rep["howl_freq_hz"] == pytest.approx(ref.howl_freq_hz, rel=1e-6)
    assert rep["worst_mic"] in ("ambo", "lectern")


def test_what_if_changes_the_rig_sends_of_a_multi_ir_loop(tmp_path):
    from howl.model.rig import bundled_rig_path

    folder, irs = _pair_folder(tmp_path)
    rep = _json(runner.invoke(app, ["margin", str(folder), "--rig", str(bundled_rig_path()),
                                    "--what-if", "mixes.mains.gains_db.lectern=28", "--json"]))
    arr = np.array([[irs[(s, m)] for m in ["ambo", "lectern"]] for s in ["column_north", "column_south"]])
    # the bundled rig's mains send ambo at 25 dB; the what-if raises the lectern's send to 28 dB
    mix = np.array([[10 ** (25 / 20), 10 ** (28 / 20)]] * 2)
    ref = mimo_margin(arr.astype(np.float32).astype(float), mix, 16000)
    assert rep["gain_margin_db"] == pytest.approx(ref.gain_margin_db, abs=1e-4)
    assert "--what-if" in rep["mix_source"]
    res = runner.invoke(app, ["margin", str(folder), "--what-if", "mixes.mains.gains_db.lectern=28"])
    assert res.exit_code == 2 and "--what-if" in res.stderr and "--rig" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_a_badly_named_pair_file_is_refused(tmp_path):
    folder = tmp_path / "irs"
    folder.mkdir()
    _wav(folder / "speaker-mic.wav", _delay_ir())
    res = runner.invoke(app, ["margin", str(folder)])
    assert res.exit_code == 2 and "<speaker>__<mic>.wav" in res.stderr


def test_simulate_writes_the_closed_loop_signal_and_cautions(tmp_path):
    fs = 16000
    h = np.zeros(400)
    h[120] = -0.5
    ir = _wav(tmp_path / "ir.wav", h, fs=fs)
    rng = np.random.default_rng(4)
    x = 0.05 * rng.standard_normal(fs)
    prog = _wav(tmp_path / "prog.wav", x, fs=fs)
    out = tmp_path / "out.wav"
    res = runner.invoke(app, ["simulate", str(ir), str(prog), "-o", str(out), "--gain-db", "3", "--tail-s", "0.5", "--json"])
    rep = _json(res)
    assert "caution" in res.stderr.lower()
    y, fs_out = sf.read(str(out))
    assert fs_out == fs and y.size == int(1.5 * fs)
    x32 = np.concatenate([x.astype(np.float32).astype(float), np.zeros(fs // 2)])
    ref = simulate_closed_loop(h, x32, fs, gain_db=3.0, limiter_dbfs=-1.0)
    assert np.allclose(y, ref, atol=1e-6)
    assert rep["expected"] == "stable" and rep["margin_at_max_gain_db"] == pytest.approx(3.0206, abs=1e-4)


def test_simulate_ramp_past_the_margin_is_expected_to_howl_and_saturates(tmp_path):
    fs = 8000
    h = np.zeros(100)
    h[60] = 0.5
    h[61] = -0.5  # blocks DC
    ir = _wav(tmp_path / "ir.wav", h, fs=fs)
    prog = _wav(tmp_path / "prog.wav", 1e-3 * np.random.default_rng(1).standard_normal(2 * fs), fs=fs)
    out = tmp_path / "out.wav"
    rep = _json(runner.invoke(app, ["simulate", str(ir), str(prog), "-o", str(out), "--ramp-db", "0", "12", "--json"]))
    assert rep["expected"] == "howls"
    assert rep["peak_dbfs"] < -1.0 + 1e-6 and rep["limited_fraction"] > 0.05


def test_simulate_refuses_two_schedules(tmp_path):
    ir = _wav(tmp_path / "ir.wav", _delay_ir(), fs=8000)
    prog = _wav(tmp_path / "prog.wav", np.ones(100) * 0.1, fs=8000)
    res = runner.invoke(app, ["simulate", str(ir), str(prog), "-o", str(tmp_path / "o.wav"), "--gain-db", "1", "--steps", "0:1"])
    assert res.exit_code == 2 and "only one of" in res.stderr
    assert not (tmp_path / "o.wav").exists()


def test_simulate_a_folder_loop_writes_one_channel_per_mic(tmp_path):
    from howl.model.rig import bundled_rig_path
    from howl.loop.simulate import simulate_mimo

    folder, irs = _pair_folder(tmp_path)
    x = 0.05 * np.random.default_rng(3).standard_normal(8000)
    prog = _wav(tmp_path / "prog.wav", x, fs=16000)
    out = tmp_path / "out.wav"
    args = ["simulate", str(folder), str(prog), "-o", str(out), "--rig", str(bundled_rig_path()),
            "--program-mic", "lectern", "--gain-db", "-40", "--tail-s", "0", "--json"]
    rep = _json(runner.invoke(app, args))
    y, fs = sf.read(str(out))
    assert rep["channels"] == ["ambo", "lectern"] and y.shape == (8000, 2)
    arr = np.array([[irs[(s, m)] for m in ["ambo", "lectern"]] for s in ["column_north", "column_south"]])
    xx = np.zeros((2, 8000))
    xx[1] = x.astype(np.float32)
    ref = simulate_mimo(arr.astype(np.float32).astype(float), np.full((2, 2), 10 ** (25 / 20)), xx, 16000, gain_db=-40.0)
    assert np.allclose(y.T, ref, atol=1e-6)
    res = runner.invoke(app, ["simulate", str(folder), str(prog), "-o", str(out), "--rig", str(bundled_rig_path())])
    assert res.exit_code == 2 and "--program-mic" in res.stderr


def _two_delay_crossing_hz(a, b, d1, d2, fs, lo, hi):
    """Derived independently of howl: L(f) = a·e^{−jωd1} + b·e^{−jωd2}, ω = 2πf/fs; the crossings are
    the roots of Im L = −a·sin(ωd1) − b·sin(ωd2) with Re L > 0, found by scipy.optimize.brentq on a
    1 Hz scan; returns the one with the largest Re L in [lo, hi] as (freq_hz, Re L)."""
    from scipy.optimize import brentq

    def im(f):
        w = 2 * np.pi * f / fs
        return -a * np.sin(w * d1) - b * np.sin(w * d2)

    def re(f):
        w = 2 * np.pi * f / fs
        return a * np.cos(w * d1) + b * np.cos(w * d2)

    grid = np.arange(lo, hi + 1.0, 1.0)
    roots = [brentq(im, x0, x1, xtol=1e-12) for x0, x1 in zip(grid[:-1], grid[1:]) if im(x0) * im(x1) < 0]
    best = max((r for r in roots if re(r) > 0), key=re)
    return best, re(best)


def test_a_band_that_leaves_out_a_worse_crossing_warns_with_its_frequency_and_margin(tmp_path):
    # A two-delay loop 0.5·z^−40 + 0.4·z^−41 at 8 kHz: at DC both paths add, L(0) = 0.9, so the gain margin
    # there is −20·log10(0.9) = 0.9151 dB (derived); inside 100–3000 Hz the two never line up again (they
    # would at fs·k with gcd(40, 41) = 1), so the band's worst crossing is lower, Re L = 0.8973 at 197.80 Hz
    # (derived by root-finding, _two_delay_crossing_hz): 0.9411 dB. --band-hz 100 3000 must say so.
    # Tolerances 1e-6: the WAV holds the taps as float32 (0.4 → 0.40000000596, 5e-7 dB).
    fs = 8000
    h = np.zeros(64)
    h[40], h[41] = 0.5, 0.4
    p = _wav(tmp_path / "two_delay.wav", h, fs)
    f_in, re_in = _two_delay_crossing_hz(0.5, 0.4, 40, 41, fs, 100.0, 3000.0)
    res = runner.invoke(app, ["margin", str(p), "--json", "--band-hz", "100", "3000"])
    rep = _json(res)
    assert rep["gain_margin_db"] == pytest.approx(-20 * np.log10(re_in), abs=1e-6)
    assert rep["howl_freq_hz"] == pytest.approx(f_in, abs=1e-6)
    out = rep["outside_band_crossing"]
    assert out["freq_hz"] == 0.0
    assert out["gain_margin_db"] == pytest.approx(-20 * np.log10(0.9), abs=1e-6)
    assert out["gain_margin_db"] < rep["gain_margin_db"]
    warning = [line for line in res.stderr.splitlines() if "--band-hz 100 3000" in line]
    assert len(warning) == 1, res.stderr
    assert "DC (0 Hz)" in warning[0] and "0.92 dB" in warning[0] and f"{rep['gain_margin_db']:.2f} dB" in warning[0]
    # the text output carries the same warning; a band that holds DC, or no band, has nothing to warn about
    res = runner.invoke(app, ["margin", str(p), "--band-hz", "100", "3000"])
    assert res.exit_code == 0 and "leaves out a worse crossing" in res.stderr
    for args in (["--band-hz", "0", "3000"], []):
        res = runner.invoke(app, ["margin", str(p), "--json", *args])
        assert _json(res)["outside_band_crossing"] is None
        assert "leaves out" not in res.stderr


def test_a_crossing_outside_the_band_that_is_not_worse_raises_no_warning(tmp_path):
    # The inverting loop −0.5 z^−48 at 48 kHz: every crossing (500·(2n+1) Hz) has the same 6.0206 dB margin
    # (derived); a band holding some of them leaves out only equal ones, and DC (L = −0.5) is no crossing.
    p = _wav(tmp_path / "loop.wav", _delay_ir())
    res = runner.invoke(app, ["margin", str(p), "--json", "--band-hz", "1000", "2000"])
    rep = _json(res)
    assert rep["gain_margin_db"] == pytest.approx(6.0206, abs=1e-4)
    assert rep["outside_band_crossing"] is None and "leaves out" not in res.stderr


def test_a_folder_loop_with_a_band_that_leaves_out_a_worse_crossing_warns_too(tmp_path):
    # The same two-delay loop as one speaker → mic pair in a folder (generalized Nyquist on a 1×1 loop, every
    # send 0 dB without --rig): DC at −20·log10(0.9) = 0.9151 dB (derived) lies outside 100-3000 Hz.
    h = np.zeros(64)
    h[40], h[41] = 0.5, 0.4
    folder = tmp_path / "irs"
    folder.mkdir()
    _wav(folder / "main__vox.wav", h, 8000)
    res = runner.invoke(app, ["margin", str(folder), "--json", "--band-hz", "100", "3000"])
    rep = _json(res)
    out = rep["outside_band_crossing"]
    assert out["freq_hz"] == 0.0 and out["gain_margin_db"] == pytest.approx(-20 * np.log10(0.9), abs=1e-6)
    assert rep["gain_margin_db"] > out["gain_margin_db"]
    assert "leaves out a worse crossing" in res.stderr and "DC (0 Hz)" in res.stderr
    assert _json(runner.invoke(app, ["margin", str(folder), "--json"]))["outside_band_crossing"] is None
