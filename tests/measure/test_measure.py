"""The measurement session on a fake interface: levels, gates, files, the CLI.

The fake backend convolves the sweep with a known IR (plus seeded noise), so each
fault the session must catch is produced on purpose. Check values are the known IRs
and latencies put into the fake, and hand arithmetic for the gain chain.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import soundfile as sf
from typer.testing import CliRunner

from howl.measure import audio
from howl.measure.audio import AudioServerGone, FakeBackend
from howl.cli import app
from howl.errors import MeasurementQualityError
from howl.measure.session import (
    GainChain,
    InterfaceCalibration,
    LevelPolicy,
    Pair,
    Session,
    SweepSettings,
    combine_acoustic_to_loop,
    load_calibration,
    summary,
)

FS = 8000
SWEEP = SweepSettings(duration_s=0.5, f_lo_hz=40.0, tail_s=0.3)


def room_ir(seed=0, gain=0.3):
    rng = np.random.default_rng(seed)
    t = np.arange(int(0.15 * FS)) / FS
    h = 0.05 * gain * rng.standard_normal(t.size) * np.exp(-t / 0.02)
    h[24] += gain  # direct sound 3 ms after time zero
    return h


def fake(h=None, **kw):
    kw.setdefault("noise_rms", 1e-5)
    kw.setdefault("latency_samples", 123)
    return FakeBackend({(1, 1): room_ir() if h is None else h, (2, 2): np.array([1.0])}, sample_rate_hz=FS, **kw)


def session(fb, tmp_path, **kw):
    kw.setdefault("reference_channel", 2)
    kw.setdefault("repeats", 2)
    return Session(fb, tmp_path / "s", fb.device, fb.device, FS, kw.pop("sweep", SWEEP),
                   kw.pop("level", LevelPolicy(target_snr_db=40.0)), **kw)


def test_clean_pair_recovers_the_known_ir_with_latency_removed(tmp_path):
    fb = fake()
    s = session(fb, tmp_path)
    e = s.measure_pair(Pair("main", "lectern"))
    assert e["latency_samples"] == 123 and e["latency_source"] == "reference"
    ir, fs = sf.read(tmp_path / "s" / e["ir_file"])
    assert fs == FS and ir.dtype == np.float64  # float32 on disk
    assert sf.info(str(tmp_path / "s" / e["ir_file"])).subtype == "FLOAT"
    assert int(np.argmax(np.abs(ir))) == 24  # the direct sound of the known IR
    h = room_ir()
    # in band the measured IR equals the known one (band-limited: compare 200 Hz – 3 kHz)
    f = np.fft.rfftfreq(4096, 1 / FS)
    band = (f > 200) & (f < 3000)
    a = np.fft.rfft(ir, 4096)[band]
    b = np.fft.rfft(h, 4096)[band]
    assert np.max(np.abs(a - b)) / np.max(np.abs(b)) < 0.05
    assert e["snr_db"] > 40 and not e["clipped"]
    assert e["repeat_difference_db"] < -20


def test_raw_recordings_and_session_json_are_written(tmp_path):
    fb = fake()
    s = session(fb, tmp_path, gain_settings={"lectern preamp": 32.0})
    s.measure_pair(Pair("main", "lectern"))
    rec = json.loads((tmp_path / "s" / "session.json").read_text())
    assert rec["reference_gain_settings_db"] == {"lectern preamp": 32.0}
    pair = rec["pairs"][0]
    assert len(pair["raw_files"]) == len(fb.calls)  # one raw WAV per play-record
    for r in pair["raw_files"]:
        data, fs = sf.read(tmp_path / "s" / r["file"])
        assert data.shape[1] == 2  # mic and reference
    for key in ("sample_rate_hz", "output_device", "created_utc", "levels", "sweep"):
        assert key in rec
    for key in ("snr_db", "latency_s", "distortion", "level_dbfs", "octave_bands_hz", "band_noise_floor_db"):
        assert key in pair
    out = summary(s.close())
    assert set(out["pairs"][0]) >= {"speaker", "mic", "ir_file", "snr_db", "latency_s", "clipped"}


def test_level_steps_up_while_short_of_target_and_never_past_the_cap(tmp_path):
    fb = fake(noise_rms=3e-3)
    lv = LevelPolicy(start_level_dbfs=-30, max_level_dbfs=-12, step_db=6, target_snr_db=80)
    s = session(fb, tmp_path, level=lv)
    e = s.measure_pair(Pair("main", "lectern"))
    tried = [t["level_dbfs"] for t in e["levels_tried"]]
    assert tried == [-30, -24, -18, -12]
    peaks_dbfs = [20 * math.log10(c["peak"]) for c in fb.calls]
    assert max(peaks_dbfs) <= -12 + 1e-6
    assert any("below the target" in w for w in e["warnings"])


def test_clipping_at_the_lowest_level_is_refused_with_advice(tmp_path):
    fb = fake(h=np.array([40.0]))  # +32 dB of gain: −30 dBFS out clips the input
    with pytest.raises(MeasurementQualityError, match="clips already at -30.0 dBFS; turn down"):
        session(fb, tmp_path).measure_pair(Pair("main", "lectern"))


def test_clipping_after_a_step_goes_back_to_the_last_clean_level(tmp_path):
    fb = fake(h=np.array([20.0]), noise_rms=1e-3)  # −30 dBFS → −4 dBFS peak is clean, −24 clips
    lv = LevelPolicy(target_snr_db=120, headroom_db=-10)  # allow a step that clips (to test the back-off)
    e = session(fb, tmp_path, level=lv).measure_pair(Pair("main", "lectern"))
    assert e["level_dbfs"] == -30 and not e["clipped"]
    assert e["levels_tried"][-1]["clipped"]


def test_silent_input_is_refused_as_no_signal(tmp_path):
    fb = fake(silent_inputs=(1,))
    with pytest.raises(MeasurementQualityError, match="no signal"):
        session(fb, tmp_path).measure_pair(Pair("main", "lectern"))


def test_loud_recording_without_the_sweep_is_refused_as_wrong_channel(tmp_path):
    fb = FakeBackend({(2, 1): np.array([1.0])}, sample_rate_hz=FS, noise_rms=0.05)  # mic on another path
    with pytest.raises(MeasurementQualityError, match="does not contain the sweep"):
        session(fb, tmp_path, reference_channel=None).measure_pair(Pair("main", "lectern"))


def test_a_dropout_is_repeated_and_persistent_dropouts_are_refused(tmp_path):
    fb = fake(dropout_calls=(1,))
    e = session(fb, tmp_path).measure_pair(Pair("main", "lectern"))
    assert e["status"] == "ok"
    assert e["raw_files"][0]["status"] == "dropout"
    fb = fake(dropout_calls=(1, 2, 3, 4))
    with pytest.raises(MeasurementQualityError, match="dropouts"):
        session(fb, tmp_path / "b").measure_pair(Pair("main", "lectern"))


def test_repeats_that_disagree_are_refused(tmp_path):
    extra = np.zeros(400)
    extra[300] = 0.2  # a new reflection from the second repeat on: someone walked in
    period = int(round(SWEEP.duration_s * FS)) + int(round(SWEEP.tail_s * FS))
    fb = fake(vary_segment=(period, extra))
    with pytest.raises(MeasurementQualityError, match="disagree"):
        session(fb, tmp_path).measure_pair(Pair("main", "lectern"))


def test_ctrl_c_keeps_the_partial_recording_and_marks_the_session(tmp_path):
    fb = fake(interrupt_call=2, interrupt_frame=2000)
    s = session(fb, tmp_path)
    with pytest.raises(KeyboardInterrupt):
        s.measure_pair(Pair("main", "lectern"))
    rec = json.loads((tmp_path / "s" / "session.json").read_text())
    assert rec["status"] == "interrupted" and rec["pairs"][0]["status"] == "interrupted"
    kept = [r for r in rec["pairs"][0]["raw_files"] if r["status"] == "interrupted"]
    data, _ = sf.read(tmp_path / "s" / kept[0]["file"])
    assert data.shape[0] == 2000


def test_server_going_away_is_an_audio_error(tmp_path):
    fb = fake(gone_call=1)
    with pytest.raises(AudioServerGone, match="went away"):
        session(fb, tmp_path).measure_pair(Pair("main", "lectern"))


def test_without_reference_or_calibration_the_latency_is_unknown_and_stays_in(tmp_path):
    fb = fake()
    e = session(fb, tmp_path, reference_channel=None).measure_pair(Pair("main", "lectern"))
    assert e["latency_s"] is None
    assert any("latency unknown" in w for w in e["warnings"])
    ir, _ = sf.read(tmp_path / "s" / e["ir_file"])
    assert int(np.argmax(np.abs(ir))) == 123 + 24


def test_calibration_is_measured_stored_and_used(tmp_path):
    fb = FakeBackend({(1, 1): np.array([1.0])}, sample_rate_hz=FS, latency_samples=77, noise_rms=1e-5)
    s = session(fb, tmp_path, reference_channel=None)
    lat = s.calibrate(1, 1, -30.0)
    assert lat == 77
    from howl.measure.session import save_calibration

    save_calibration(tmp_path / "cal.json", fb.device, fb.device, FS, lat)
    assert load_calibration(tmp_path / "cal.json", fb.device, fb.device, FS) == 77
    fb2 = fake(latency_samples=77)
    e = session(fb2, tmp_path / "b", reference_channel=None, calibrated_latency_samples=77).measure_pair(
        Pair("main", "lectern"))
    assert e["latency_samples"] == 77 and e["latency_source"] == "calibration"


def test_gain_chain_arithmetic_by_hand():
    # speaker 100 dB SPL/1V/1m → 100 − 93.98 = +6.02 dB Pa/V; mic −54 dBV/Pa; preamp 40; console 0; amp 0
    # loop = acoustic −20 dB + 6.02 − 54 + 40 = −27.98 dB (hand arithmetic)
    a = np.zeros(100)
    a[10] = 0.1  # −20 dB acoustic path
    res = combine_acoustic_to_loop(a, GainChain(-54.0, 40.0, 0.0, 0.0, 100.0))
    assert 20 * np.log10(np.max(np.abs(res.loop_ir))) == pytest.approx(-20 + (100 - 93.9794) - 54 + 40, abs=1e-3)
    assert any("93.98" in line for line in res.lines)
    # a digital measurement: H_dig −10 dB, in FS +4 dBV, meas mic −40 dBV/Pa, out FS +10 dBV, drive 0:
    # A = −10 + 4 + 40 − 10 − 0 − 6.02 = +17.98 dB
    d = np.zeros(100)
    d[10] = 10 ** (-10 / 20)
    res2 = combine_acoustic_to_loop(d, GainChain(-54.0, 40.0, 0.0, 0.0, 100.0),
                                    InterfaceCalibration(10.0, 4.0, -40.0, 0.0))
    assert res2.acoustic_scale_db == pytest.approx(4 + 40 - 10 - (100 - 93.9794), abs=1e-3)


# ------------------------------------------------------------------------ CLI

runner = CliRunner()


@pytest.fixture
def cli_fake(monkeypatch):
    made = []

    def factory():
        fb = fake()
        made.append(fb)
        return fb

    monkeypatch.setattr(audio, "open_backend", factory)
    return made


def _args(tmp_path, *extra):
    return ["measure", "--device", "fake", "--reference-channel", "2", "--out", str(tmp_path / "cli"),
            "--sweep-s", "0.5", "--tail-s", "0.3", "--target-snr-db", "40", "--json", *extra]


def test_cli_json_summary_has_the_contract_fields(tmp_path, cli_fake):
    r = runner.invoke(app, _args(tmp_path, "--yes"))
    assert r.exit_code == 0, r.output
    out = json.loads(r.stdout)
    assert out["session_dir"] == str(tmp_path / "cli")
    p = out["pairs"][0]
    assert p["latency_s"] == pytest.approx(123 / FS)
    assert (tmp_path / "cli" / p["ir_file"]).exists()  # relative to session_dir
    assert isinstance(p["snr_db"], float) and p["clipped"] is False
    assert "hearing protection" in r.stderr


def test_cli_asks_for_confirmation_unless_yes(tmp_path, cli_fake):
    r = runner.invoke(app, _args(tmp_path), input="n\n")
    assert r.exit_code == 1
    assert not cli_fake[0].calls  # nothing played


def test_cli_rig_walkthrough_names_each_speaker_and_mic(tmp_path, cli_fake):
    from howl.model.rig import bundled_rig_path

    r = runner.invoke(app, _args(tmp_path, "--yes", "--rig", str(bundled_rig_path()),
                                 "--speaker", "column_north", "--mic", "lectern", "--mic", "ambo",
                                 "--mic-channel", "ambo=1"))
    assert r.exit_code == 0, r.output
    out = json.loads(r.stdout)
    assert [(p["speaker"], p["mic"]) for p in out["pairs"]] == [("column_north", "lectern"), ("column_north", "ambo")]
    assert "route output 1 to speaker 'column_north' only" in r.stderr


def test_cli_refuses_an_existing_session_folder(tmp_path, cli_fake):
    assert runner.invoke(app, _args(tmp_path, "--yes")).exit_code == 0
    r = runner.invoke(app, _args(tmp_path, "--yes"))
    assert r.exit_code == 2 and "already holds a session" in r.stderr


def test_cli_combine_shows_the_arithmetic(tmp_path):
    a = np.zeros(200, dtype=np.float32)
    a[5] = 0.1
    sf.write(tmp_path / "path.wav", a, FS, subtype="FLOAT")
    r = runner.invoke(app, ["measure", "--combine", str(tmp_path / "path.wav"), "--mic-sensitivity-dbv-pa", "-54",
                            "--preamp-gain-db", "40", "--speaker-sensitivity-db-spl", "100",
                            "--combined-out", str(tmp_path / "loop.wav"), "--json"])
    assert r.exit_code == 0, r.output
    out = json.loads(r.stdout)
    assert out["loop_scale_db"] == pytest.approx((100 - 93.9794) - 54 + 40, abs=1e-3)
    loop, _ = sf.read(tmp_path / "loop.wav")
    assert 20 * np.log10(np.max(np.abs(loop))) == pytest.approx(-20 + out["loop_scale_db"], abs=1e-3)


def test_a_chain_that_compresses_at_higher_levels_is_flagged_as_not_linear(tmp_path):
    # y = x − 1.5x³ before the room: the fundamental's gain is 1 − (3/4)·1.5·A² (trig identity),
    # 0.93 at A = 0.25 (−12 dBFS) and 0.72 at A = 0.5 (−6 dBFS): about −12 dB of difference.
    fb = fake(noise_rms=1e-4, nonlinear_coeffs=(0.0, -1.5))
    lv = LevelPolicy(start_level_dbfs=-12, max_level_dbfs=-6, step_db=6, target_snr_db=200)
    e = session(fb, tmp_path, level=lv).measure_pair(Pair("main", "lectern"))
    assert e["level_dbfs"] == -6
    assert e["linearity_difference_db"] > -16
    assert any("not linear" in w for w in e["warnings"])
    assert e["distortion"]["thd_pct"] > 1.0  # the cubic term's third harmonic: (1.5/4)·A²/gain ≈ 13 %


def test_a_linear_chain_is_not_flagged(tmp_path):
    fb = fake(noise_rms=1e-4)
    lv = LevelPolicy(start_level_dbfs=-12, max_level_dbfs=-6, step_db=6, target_snr_db=200)
    e = session(fb, tmp_path, level=lv).measure_pair(Pair("main", "lectern"))
    assert e["linearity_difference_db"] < -30
    assert not any("not linear" in w for w in e["warnings"])


def test_an_ir_longer_than_the_window_asks_for_a_longer_tail(tmp_path):
    t = np.arange(int(1.0 * FS)) / FS
    h = 0.02 * np.random.default_rng(2).standard_normal(t.size) * np.exp(-6.9 * t / 2.0)  # RT60 2 s
    h[24] += 0.3  # direct sound
    e = session(fake(h=h), tmp_path, sweep=SweepSettings(0.5, 40.0, None, 0.3)).measure_pair(Pair("main", "lectern"))
    assert any("lengthen --tail-s" in w for w in e["warnings"])


def test_a_block_measured_again_keeps_both_raw_recordings(tmp_path):
    # issue 18 item 2: the second block of repeats once reused the first block's file name
    extra = np.zeros(400)
    extra[300] = 0.2
    period = int(round(SWEEP.duration_s * FS)) + int(round(SWEEP.tail_s * FS))
    fb = fake(vary_segment=(period, extra))  # every block disagrees: measured again, then refused
    with pytest.raises(MeasurementQualityError, match="disagree"):
        session(fb, tmp_path).measure_pair(Pair("main", "lectern"))
    rec = json.loads((tmp_path / "s" / "session.json").read_text())
    files = [r["file"] for r in rec["pairs"][0]["raw_files"]]
    blocks = [f for f in files if "_block_" in f]
    assert len(blocks) == 2 and len(set(files)) == len(files)
    for f in files:
        assert (tmp_path / "s" / f).is_file()
    assert len(list((tmp_path / "s" / "raw").glob("*.wav"))) == len(files)


def test_an_unknown_output_channel_is_refused_before_the_session_folder_is_made(tmp_path, monkeypatch):
    fb = fake()
    monkeypatch.setattr(audio, "open_backend", lambda: fb)
    r = CliRunner().invoke(app, ["measure", "--device", "fake", "--out-channel", "9", "--out", str(tmp_path / "s"),
                                 "--yes"])
    assert r.exit_code == 2 and "--out-channel" in r.output
    assert not (tmp_path / "s").exists()


def test_device_errors_name_the_option_typed(tmp_path, monkeypatch):
    # issue 19 item 10: `--device X` once complained about --output-device
    fb = fake()
    monkeypatch.setattr(audio, "open_backend", lambda: fb)
    r = CliRunner().invoke(app, ["measure", "--device", "nosuchcard", "--out", str(tmp_path / "s"), "--yes"])
    assert r.exit_code == 2
    assert "--device" in r.output and "--output-device" not in r.output and "--input-device" not in r.output
