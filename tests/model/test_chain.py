"""The signal chain (howl.model.chain): channel filters against scipy of the cookbook's own
coefficients, the high-pass against scipy's Butterworth, loudspeaker ranges, talker spectra and band
importance against ANSI S3.5-1997 Table 3, and chain_power's defaults."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from howl.bands import band_centres_hz, band_edges_hz
from howl.model.chain import (
    chain_power,
    channel_response,
    mic_response_db,
    speaker_response_db,
    speech_band_importance,
    talker_band_levels_db,
)
from howl.model.rig import EqBand, HighPass, Mic, Speaker, UsableRange, load_rig, with_changes

REPO = Path(__file__).resolve().parents[2]
FS = 48000.0
F = np.geomspace(20.0, 20000.0, 400)


def _mic(**kw) -> Mic:
    return Mic("m", (1.0, 1.0, 1.0), 0.0, 0.0, **kw)


def _speaker(**kw) -> Speaker:
    return Speaker("s", (2.0, 2.0, 2.0), 0.0, 0.0, (90.0,) * 7, (60.0,) * 7, **kw)


# ------------------------------------------------------------ RBJ cookbook, typed in from the text ----
def cookbook_ba(kind: str, f0: float, gain_db: float, q: float, fs: float = FS):
    """b, a of one biquad, straight from R. Bristow-Johnson, "Cookbook formulae for audio EQ biquad
    filter coefficients" (LPF, HPF, peakingEQ, lowShelf, highShelf; alpha = sin(w0)/(2Q))."""
    a_ = 10 ** (gain_db / 40)
    w0 = 2 * math.pi * f0 / fs
    cs, sn = math.cos(w0), math.sin(w0)
    al = sn / (2 * q)
    if kind == "low_pass":
        b = [(1 - cs) / 2, 1 - cs, (1 - cs) / 2]
        a = [1 + al, -2 * cs, 1 - al]
    elif kind == "high_pass":
        b = [(1 + cs) / 2, -(1 + cs), (1 + cs) / 2]
        a = [1 + al, -2 * cs, 1 - al]
    elif kind == "peaking":
        b = [1 + al * a_, -2 * cs, 1 - al * a_]
        a = [1 + al / a_, -2 * cs, 1 - al / a_]
    elif kind == "low_shelf":
        r = 2 * math.sqrt(a_) * al
        b = [a_ * ((a_ + 1) - (a_ - 1) * cs + r), 2 * a_ * ((a_ - 1) - (a_ + 1) * cs), a_ * ((a_ + 1) - (a_ - 1) * cs - r)]
        a = [(a_ + 1) + (a_ - 1) * cs + r, -2 * ((a_ - 1) + (a_ + 1) * cs), (a_ + 1) + (a_ - 1) * cs - r]
    else:  # high_shelf
        r = 2 * math.sqrt(a_) * al
        b = [a_ * ((a_ + 1) + (a_ - 1) * cs + r), -2 * a_ * ((a_ - 1) + (a_ + 1) * cs), a_ * ((a_ + 1) + (a_ - 1) * cs - r)]
        a = [(a_ + 1) - (a_ - 1) * cs + r, 2 * ((a_ - 1) - (a_ + 1) * cs), (a_ + 1) - (a_ - 1) * cs - r]
    return np.array(b), np.array(a)


@pytest.mark.parametrize("kind,f0,gain,q", [
    ("peaking", 2500.0, -4.0, 1.4), ("peaking", 300.0, 6.0, 0.7), ("low_shelf", 200.0, -6.0, 0.7071),
    ("high_shelf", 8000.0, 3.0, 0.9), ("low_pass", 12000.0, 0.0, 0.7071), ("high_pass", 90.0, 0.0, 0.5),
])
def test_eq_band_matches_freqz_of_the_cookbook(kind, f0, gain, q):
    b, a = cookbook_ba(kind, f0, gain, q)
    _, want = signal.freqz(b, a, worN=F, fs=FS)
    got = channel_response(_mic(eq=(EqBand(kind, f0, gain, q),)), F)
    np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-12)


def test_eq_cascade_is_the_product_in_order():
    bands = (EqBand("low_shelf", 150.0, -3.0, 0.7071), EqBand("peaking", 3150.0, -5.0, 4.0),
             EqBand("low_pass", 15000.0, 0.0, 0.7071))
    want = np.ones(F.size, complex)
    for bd in bands:
        want *= signal.freqz(*cookbook_ba(bd.kind, bd.freq_hz, bd.gain_db, bd.q), worN=F, fs=FS)[1]
    np.testing.assert_allclose(channel_response(_mic(eq=bands), F), want, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("order", [1, 2, 3, 4])
@pytest.mark.parametrize("f0", [80.0, 120.0, 150.0])
def test_high_pass_is_scipy_butterworth(order, f0):
    # scipy.signal.butter designs the bilinear Butterworth prewarped at f0, as the cookbook's biquads are
    sos = signal.butter(order, f0, "highpass", fs=FS, output="sos")
    _, want = signal.sosfreqz(sos, worN=F, fs=FS)
    got = channel_response(_mic(high_pass=HighPass(f0, order)), F)
    np.testing.assert_allclose(np.abs(got), np.abs(want), rtol=1e-7, atol=1e-12)
    # −3 dB (half power) at f0: the definition of a Butterworth's cutoff
    at_f0 = np.abs(channel_response(_mic(high_pass=HighPass(f0, order)), np.array([f0])))[0]
    assert 20 * math.log10(at_f0) == pytest.approx(-10 * math.log10(2), abs=1e-6)
    # slope far below f0: 6·order dB per octave (Butterworth asymptote)
    lo = np.abs(channel_response(_mic(high_pass=HighPass(f0, order)), np.array([f0 / 32, f0 / 16])))
    assert 20 * math.log10(lo[1] / lo[0]) == pytest.approx(6.02 * order, abs=0.05)


def test_no_chain_is_flat():
    assert np.allclose(channel_response(_mic(), F), 1.0)
    assert np.allclose(speaker_response_db(_speaker(), F), 0.0)
    assert np.allclose(mic_response_db(_mic(), F), 0.0)


# ------------------------------------------------------------ loudspeaker range and tables ----
@pytest.mark.parametrize("lo,hi,sl,sh", [(60.0, 18000.0, 24.0, 12.0), (100.0, 12000.0, 12.0, 24.0)])
def test_usable_range_is_minus_10_db_at_its_points_with_its_slopes(lo, hi, sl, sh):
    spk = _speaker(usable_range=UsableRange(lo, hi, sl, sh))
    db = speaker_response_db(spk, np.array([lo, hi, math.sqrt(lo * hi)]))
    # the definition of the key: −10 dB at each point (the other side adds < 0.01 dB this far away)
    assert db[0] == pytest.approx(-10.0, abs=0.02) and db[1] == pytest.approx(-10.0, abs=0.02)
    assert db[2] == pytest.approx(0.0, abs=0.05)
    far = speaker_response_db(spk, np.array([lo / 16, lo / 8, hi * 4, hi * 8]))
    assert far[1] - far[0] == pytest.approx(sl, abs=0.1)  # asymptotic roll-off in dB per octave
    assert far[2] - far[3] == pytest.approx(sh, abs=0.1)


def test_response_table_interpolates_in_log_frequency_and_holds_its_ends():
    rows = ((100.0, -6.0), (1000.0, 2.0), (10000.0, -8.0))
    spk = _speaker(response_table=rows, response_file="x.csv")
    db = speaker_response_db(spk, np.array([50.0, 100.0, math.sqrt(10.0) * 100.0, 1000.0, 20000.0]))
    # derived: 0 dB at 1 kHz (the stated sensitivity), halfway in log f is halfway in dB, ends held
    np.testing.assert_allclose(db, [-8.0, -8.0, -4.0, 0.0, -10.0], atol=1e-9)


# ------------------------------------------------------------ ANSI S3.5-1997 Table 3 ----
# ANSI S3.5-1997 (R2007), Table 3 (one-third octave band procedure), from memory:
# band centre, importance, standard speech spectrum level (dB/Hz) normal, raised, loud, shout.
ANSI_TABLE3 = [
    (160, 0.0083, 32.41, 33.81, 35.29, 30.77), (200, 0.0095, 34.48, 33.92, 37.76, 36.65),
    (250, 0.0150, 34.75, 38.98, 41.55, 42.50), (315, 0.0289, 33.98, 38.57, 43.78, 46.51),
    (400, 0.0440, 34.59, 39.11, 43.30, 47.40), (500, 0.0578, 34.27, 40.15, 44.85, 49.24),
    (630, 0.0653, 32.06, 38.78, 45.55, 51.21), (800, 0.0711, 28.30, 36.37, 44.05, 51.44),
    (1000, 0.0818, 25.01, 33.86, 42.16, 51.31), (1250, 0.0844, 23.00, 31.89, 40.53, 49.63),
    (1600, 0.0882, 20.15, 28.58, 37.70, 47.65), (2000, 0.0898, 17.32, 25.32, 34.39, 44.32),
    (2500, 0.0868, 13.18, 22.35, 30.98, 40.80), (3150, 0.0844, 11.55, 20.15, 28.21, 38.13),
    (4000, 0.0771, 9.33, 16.78, 25.41, 34.41), (5000, 0.0527, 5.31, 11.47, 18.35, 28.24),
    (6300, 0.0364, 2.59, 7.67, 13.87, 23.45), (8000, 0.0185, 1.13, 5.07, 11.39, 20.72),
]
THIRDS = band_centres_hz(3, 160, 8000)  # exact base-10 centres of the table's bands (IEC 61260-1)


@pytest.mark.parametrize("col,effort", [(2, "normal"), (3, "raised"), (4, "loud"), (5, "shouted")])
def test_speech_spectrum_follows_ansi_s3_5_table_3(col, effort):
    got = talker_band_levels_db(effort, THIRDS, 3)
    lo, hi = band_edges_hz(THIRDS, 3)
    # band level = spectrum level + 10·log10(band width) (ANSI S3.5-1997 §3 and Table 3)
    want = np.array([row[col] for row in ANSI_TABLE3]) + 10 * np.log10(hi - lo)
    np.testing.assert_allclose(got - got[8], want - want[8], atol=1e-9)  # relative to the 1 kHz band
    # sums to 0 dB over the audio range (the third-octave bands 20 Hz–20 kHz)
    audio = band_centres_hz(3, 20, 20000)
    assert 10 * np.log10(np.sum(10 ** (talker_band_levels_db(effort, audio, 3) / 10))) == pytest.approx(0, abs=1e-9)
    # the table's own bands hold nearly all of the power (the extension outside is small)
    assert np.sum(10 ** (got / 10)) > 0.9


def test_flat_spectrum_is_equal_per_band_and_sums_to_zero():
    audio = band_centres_hz(3, 20, 20000)
    got = talker_band_levels_db("flat", audio, 3)
    np.testing.assert_allclose(got, -10 * math.log10(31), atol=1e-9)  # derived: 31 equal bands
    octs = talker_band_levels_db("flat", band_centres_hz(1, 31.5, 16000), 1)
    np.testing.assert_allclose(octs, -10 * math.log10(31 / 3), atol=1e-9)  # derived: an octave is 3 thirds


def test_band_importance_is_ansi_table_3():
    got = speech_band_importance(THIRDS, 3)
    np.testing.assert_allclose(got, [row[1] for row in ANSI_TABLE3], atol=1e-12)
    octs = speech_band_importance(band_centres_hz(1, 250, 4000), 1)
    imp = [row[1] for row in ANSI_TABLE3]
    want = np.array([sum(imp[i:i + 3]) for i in (1, 4, 7, 10, 13)])  # octave = its three thirds
    np.testing.assert_allclose(octs, want / want.sum(), atol=1e-12)
    assert speech_band_importance(band_centres_hz(3, 50, 16000), 3).sum() == pytest.approx(1.0)
    assert np.all(speech_band_importance(np.array([50.0, 63.0, 16000.0]), 3) == pytest.approx(1 / 3))


# ------------------------------------------------------------ chain_power ----
def test_chain_power_of_a_rig_without_chain_is_flat_and_normal_speech():
    rig = _strip_chain(load_rig(REPO / "howl" / "data" / "examples" / "chapel_lectern.toml"))
    f = band_centres_hz(3, 100, 10000)
    cp = chain_power(rig, f, 3)
    assert cp.mic_power.shape == (len(rig.mics), f.size) and cp.speaker_power.shape == (len(rig.speakers), f.size)
    assert np.allclose(cp.mic_power, 1.0) and np.allclose(cp.speaker_power, 1.0)
    for row in cp.talker_level_db:
        np.testing.assert_allclose(row, talker_band_levels_db("normal", f, 3), atol=1e-12)
    assert cp.importance.sum() == pytest.approx(1.0)


def _strip_chain(rig):
    import dataclasses

    mics = tuple(dataclasses.replace(m, high_pass=None, eq=(), response_file=None, response_table=None) for m in rig.mics)
    spk = tuple(dataclasses.replace(s, usable_range=None, response_file=None, response_table=None) for s in rig.speakers)
    tlk = tuple(dataclasses.replace(t, spectrum="normal", spectrum_file=None, spectrum_table=None) for t in rig.talkers)
    return dataclasses.replace(rig, mics=mics, speakers=spk, talkers=tlk)


def test_chain_power_band_average_is_the_mean_over_the_band_not_the_centre():
    rig = _strip_chain(load_rig(REPO / "howl" / "data" / "examples" / "chapel_lectern.toml"))
    name = rig.mics[0].name
    rig = with_changes(rig, [f"mics.{name}.high_pass={{freq_hz=150, order=4}}"])
    f = np.array([125.0, 1000.0])
    cp = chain_power(rig, f, 1)
    # derived: |H|² of a 4th-order Butterworth high-pass is r⁸/(1+r⁸), r = f/fc (analog; the bilinear
    # warp is < 0.1 % this far below Nyquist); the band mean by the midpoint rule on 4000 log points
    lo, hi = band_edges_hz(f[:1], 1)
    x = np.exp(np.linspace(np.log(lo[0]), np.log(hi[0]), 4001))
    x = np.sqrt(x[1:] * x[:-1])
    r8 = (x / 150.0) ** 8
    assert cp.mic_power[0, 0] == pytest.approx(np.mean(r8 / (1 + r8)), rel=5e-3)
    r8c = (f[0] / 150.0) ** 8
    assert cp.mic_power[0, 0] > 1.2 * r8c / (1 + r8c)  # well above the centre value
    assert cp.mic_power[0, 1] == pytest.approx(1.0, abs=0.01)
    assert np.allclose(cp.mic_power[1:], 1.0)


# ------------------------------------------------------------ presets and the rig keys ----
import tomllib  # noqa: E402

from howl.errors import InputError  # noqa: E402

PRESETS = tomllib.loads((REPO / "howl" / "data" / "presets.toml").read_text(encoding="utf-8"))


def _chapel(tmp_path, edit=lambda s: s) -> Path:
    text = (REPO / "examples" / "chapel_lectern.toml").read_text(encoding="utf-8")
    text = text.replace('room_file = "../rooms/', f'room_file = "{(REPO / "rooms").as_posix()}/')
    p = tmp_path / "rig.toml"
    p.write_text(edit(text), encoding="utf-8")
    return p


@pytest.mark.parametrize("name", sorted(PRESETS["mics"]))
def test_every_mic_preset_loads_with_its_values(name):
    rig = with_changes(load_rig(REPO / "examples" / "chapel_lectern.toml"), [f"mics.lectern.preset={name}"])
    m = rig.mic("lectern")
    assert m.preset == name and m.pattern == PRESETS["mics"][name]["pattern"]
    assert m.sensitivity_dbv_pa == PRESETS["mics"][name]["sensitivity_dbv_pa"]
    assert m.high_pass == HighPass(120.0, 2)  # the channel's own setting stays


@pytest.mark.parametrize("name", sorted(PRESETS["speakers"]))
def test_every_speaker_preset_loads_with_its_values(name):
    rig = with_changes(load_rig(REPO / "examples" / "chapel_lectern.toml"), [f"speakers.column_north.preset={name}"])
    s, p = rig.speaker("column_north"), PRESETS["speakers"][name]
    assert s.preset == name and s.sensitivity_db_spl_1v_1m == p["sensitivity_db_spl_1v_1m"]
    cov = p["coverage_h_deg"]
    assert s.coverage_h_deg == (tuple(float(x) for x in cov) if isinstance(cov, list) else (float(cov),) * 7)
    r = p["usable_range"]
    assert (s.usable_range.low_hz, s.usable_range.high_hz) == (r["low_hz"], r["high_hz"])
    # a preset set by --what-if brings all of its values (the wedges' role too); else the rig's "main" stays
    assert s.role == p.get("role", "main")


def test_the_rig_overrides_a_preset_key_by_key():
    rig = load_rig(REPO / "examples" / "blackbox_vocals_wedges.toml")
    vox = rig.mic("vox_a")
    assert vox.preset == "handheld-cardioid-vocal-mic" and vox.pattern == "cardioid"
    assert vox.sensitivity_dbv_pa == -54.5  # the rig's value, not the preset's −54
    chapel = load_rig(REPO / "examples" / "chapel_lectern.toml")
    r = chapel.speaker("column_north").usable_range  # rig gives low_hz/high_hz, the preset the slopes
    col = PRESETS["speakers"]["column-loudspeaker"]["usable_range"]
    assert (r.low_hz, r.high_hz) == (110.0, 15000.0)
    assert (r.low_slope_db_per_oct, r.high_slope_db_per_oct) == (col["low_slope_db_per_oct"], col["high_slope_db_per_oct"])
    wedge = with_changes(rig, ["mics.vox_a.pattern=supercardioid"]).mic("vox_a")
    assert wedge.pattern == "supercardioid" and wedge.preset == "handheld-cardioid-vocal-mic"


def test_unknown_preset_is_one_input_error_listing_the_known(tmp_path):
    p = _chapel(tmp_path, lambda s: s.replace('preset = "lapel-omni"', 'preset = "lapel-cardioid"', 1))
    with pytest.raises(InputError) as e:
        load_rig(p)
    assert e.value.key == "mics[2].preset" and "lapel-omni" in str(e.value) and "\n" not in str(e.value)


def test_what_if_keeps_every_chain_key(tmp_path):
    (tmp_path / "capsule.csv").write_text("frequency_hz,level_db\n50,-12\n1000,0\n5000,4\n15000,-6\n", encoding="utf-8")
    (tmp_path / "voice.csv").write_text("100,-20\n10000,0\n", encoding="utf-8")
    p = _chapel(tmp_path, lambda s: s.replace(
        'spectrum = "normal"', 'spectrum_file = "voice.csv"', 1).replace(
        "high_pass = { freq_hz = 120.0, order = 2 }", 'high_pass = { freq_hz = 120.0, order = 2 }\n'
        'response_file = "capsule.csv"\neq = [{ kind = "peaking", freq_hz = 3150.0, gain_db = -4.0, q = 2.0 }]', 1))
    rig = load_rig(p)
    again = with_changes(rig, ["fsm_db=5"])
    for a, b in zip(rig.mics + rig.speakers + rig.talkers, again.mics + again.speakers + again.talkers):
        assert a == b
    assert rig.mic("lectern").response_table[0] == (50.0, -12.0)
    reader = [t for t in rig.talkers if t.name == "reader"][0]
    assert reader.spectrum == "table" and reader.spectrum_table == ((100.0, -20.0), (10000.0, 0.0))
    # derived: a table rising 20 dB over 20 third octaves rises 1 dB per third between its ends
    lv = talker_band_levels_db(reader, band_centres_hz(3, 200, 5000), 3)
    np.testing.assert_allclose(np.diff(lv), 1.0, atol=1e-9)
    # the capsule table, 0 dB at 1 kHz (its stated sensitivity), +4 dB at 5 kHz
    assert mic_response_db(rig.mic("lectern"), np.array([1000.0, 5000.0])) == pytest.approx([0.0, 4.0])
    # a what-if back to a named spectrum drops the file
    t2 = with_changes(rig, ["talkers.reader.spectrum=shouted"]).talkers[1]
    assert t2.spectrum == "shouted" and t2.spectrum_file is None


def test_a_speaker_response_file_replaces_the_preset_range(tmp_path):
    (tmp_path / "column.csv").write_text("80,-10\n200,-1\n1000,0\n16000,-10\n", encoding="utf-8")
    p = _chapel(tmp_path, lambda s: s.replace(
        "usable_range = { low_hz = 110.0, high_hz = 15000.0 }   # this pair", 'response_file = "column.csv"  # this', 1))
    s = load_rig(p).speakers[0]
    assert s.usable_range is None and s.response_table[0] == (80.0, -10.0)
    assert speaker_response_db(s, np.array([80.0])) == pytest.approx([-10.0])


def test_spectrum_table_without_a_file_is_refused(tmp_path):
    p = _chapel(tmp_path, lambda s: s.replace('spectrum = "raised"', 'spectrum = "table"', 1))
    with pytest.raises(InputError) as e:
        load_rig(p)
    assert e.value.key == "talkers[0].spectrum_file"
