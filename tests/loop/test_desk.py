"""Cuts a desk can take: the ring-out within a console's EQ, checked from outside.

Independent references used here:
* pyroomacoustics shoebox image-source RIRs as loop IRs (reference room simulator);
* the RBJ Audio EQ Cookbook (R. Bristow-Johnson, W3C Working Group Note, 2021,
  https://www.w3.org/TR/audio-eq-cookbook/): the peakingEQ coefficients are typed in here from
  its formulas, not taken from howl;
* our own Nyquist search in this file: L(f) = H(f)·C(f) on a 16x zero-padded FFT grid
  (C from scipy.signal.sosfreqz of the cookbook biquads), positive real-axis crossings by
  sign changes of Im L with Re L > 0, the largest ones refined by bisection on Im L evaluated
  as a direct DTFT sum; gain margin = −20·log10 of the largest crossing (H. Nyquist,
  "Regeneration theory", Bell Syst. Tech. J. 11, 1932);
* ISO 266:1997 nominal 1/3-octave centres (from memory).
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
from howl.loop.desk import Desk, desk_from_options, desk_from_table, merge_on_desk, suggest_on_desk
from howl.loop.ringout import ring_out

FS = 8000
BAND = (100.0, 3500.0)  # the ring-out places no cut above 0.49·fs; the naive one here would
# ISO 266 nominal 1/3-octave centres, 25 Hz - 20 kHz (from memory)
ISO = (25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000,
       2500, 3150, 4000, 5000, 6300, 8000, 10000, 12500, 16000, 20000)
# Q of a 1/3-octave band, cookbook analog relation Q = sqrt(2^N)/(2^N - 1), N = 1/3 (derived)
Q_THIRD = math.sqrt(2 ** (1 / 3)) / (2 ** (1 / 3) - 1)


# ---------------------------------------------------------------- independent references


def cookbook_peaking(f0, gain_db, q, fs):
    """RBJ cookbook peakingEQ (b, a), typed in from the cookbook's formulas."""
    A = 10 ** (gain_db / 40)
    w0 = 2 * math.pi * f0 / fs
    alpha = math.sin(w0) / (2 * q)
    b = [1 + alpha * A, -2 * math.cos(w0), 1 - alpha * A]
    a = [1 + alpha / A, -2 * math.cos(w0), 1 - alpha / A]
    return np.array(b) / a[0], np.array(a) / a[0]


def own_margin_db(ir, fs, cuts, band):
    """Our own phase-aware gain margin of the loop ir·cuts in the band (see the module docstring)."""
    ir = np.asarray(ir, float)
    n_fft = 1 << int(math.ceil(math.log2(16 * ir.size)))
    f = np.fft.rfftfreq(n_fft, 1 / fs)
    keep = (f >= band[0]) & (f <= band[1])
    f = f[keep]
    L = np.fft.rfft(ir, n_fft)[keep]
    coeffs = [cookbook_peaking(c["freq_hz"], c["gain_db"], c["q"], fs) for c in cuts]
    for b, a in coeffs:
        L = L * sig.freqz(b, a, worN=f, fs=fs)[1]
    k = np.arange(ir.size)

    def exact(x):
        v = np.sum(ir * np.exp(-2j * np.pi * x * k / fs))
        for b, a in coeffs:
            v = v * sig.freqz(b, a, worN=[x], fs=fs)[1][0]
        return v

    im, re = L.imag, L.real
    i = np.flatnonzero((np.sign(im[:-1]) != np.sign(im[1:])) & ((re[:-1] > 0) | (re[1:] > 0)))
    t = im[i] / (im[i] - im[i + 1])
    rc = re[i] + t * (re[i + 1] - re[i])
    best = 0.0
    for j in np.argsort(-rc)[:8]:
        lo, hi = f[i[j]], f[i[j] + 1]
        s_lo = np.sign(exact(lo).imag)
        for _ in range(40):
            mid = 0.5 * (lo + hi)
            if np.sign(exact(mid).imag) == s_lo:
                lo = mid
            else:
                hi = mid
        best = max(best, exact(0.5 * (lo + hi)).real)
    return -20 * math.log10(best)


def naive_asg(ir, fs, band, depth_db, q, n):
    """The naive ring-out of a parametric desk: the deepest allowed cut at its highest Q at each
    limiting crossing in turn (limits found by our own search on the grid)."""
    m0 = own_margin_db(ir, fs, [], band)
    cuts = []
    for _ in range(n):
        cuts.append({"freq_hz": _limit_hz(ir, fs, cuts, band), "gain_db": -depth_db, "q": q})
    return own_margin_db(ir, fs, cuts, band) - m0


def _limit_hz(ir, fs, cuts, band):
    n_fft = 1 << int(math.ceil(math.log2(16 * ir.size)))
    f = np.fft.rfftfreq(n_fft, 1 / fs)
    keep = (f >= band[0]) & (f <= band[1])
    f, L = f[keep], np.fft.rfft(ir, n_fft)[keep]
    for c in cuts:
        L = L * sig.freqz(*cookbook_peaking(c["freq_hz"], c["gain_db"], c["q"], fs), worN=f, fs=fs)[1]
    im, re = L.imag, L.real
    i = np.flatnonzero((np.sign(im[:-1]) != np.sign(im[1:])) & (re[:-1] > 0))
    return float(f[i[np.argmax(re[i])]])


def room_ir(seed: int, rt60_s: float = 0.4, fs: int = FS) -> np.ndarray:
    """A pyroomacoustics shoebox RIR as a loop IR: 3 ms processing delay, 2nd-order 80 Hz high-pass."""
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


def _cut_dicts(notches):
    return [{"freq_hz": n.freq_hz, "gain_db": n.gain_db, "q": n.q} for n in notches]


PARAMETRIC = dict(max_bands=6, max_depth_db=12, max_q=10)


@pytest.fixture(scope="module", params=[1, 3, 5])
def room(request):
    ir = room_ir(request.param)
    desk = desk_from_options(**PARAMETRIC)
    return ir, ring_out(ir, FS, band_hz=BAND, desk=desk, min_gain_per_notch_db=0.0, tonal_share=math.inf)


# ---------------------------------------------------------------- the ring-out within a desk


def test_every_cut_respects_the_desk_limits(room):
    _, res = room
    assert 0 < len(res.notches) <= 6
    for n in res.notches:
        assert n.gain_db is not None and -12.0 - 1e-9 <= n.gain_db < 0.0
        assert n.q <= 10.0 + 1e-9


def test_asg_recomputed_independently_within_a_tenth_of_a_db(room):
    ir, res = room
    m0 = own_margin_db(ir, FS, [], BAND)
    m1 = own_margin_db(ir, FS, _cut_dicts(res.notches), BAND)
    assert res.added_stable_gain_db == pytest.approx(m1 - m0, abs=0.1)
    for s in res.steps:  # every step's total too, with the cuts so far
        cuts = _cut_dicts([t.notch for t in res.steps[: s.index]])
        assert s.total_added_stable_gain_db == pytest.approx(own_margin_db(ir, FS, cuts, BAND) - m0, abs=0.1)


def test_the_steps_add_up_to_the_total(room):
    _, res = room
    assert sum(s.added_stable_gain_db for s in res.steps) == pytest.approx(res.added_stable_gain_db, abs=1e-9)
    assert res.steps[-1].total_added_stable_gain_db == pytest.approx(res.added_stable_gain_db, abs=1e-12)


def test_never_worse_than_the_naive_ring_out_within_the_same_limits(room):
    ir, res = room
    assert res.added_stable_gain_db >= naive_asg(ir, FS, BAND, 12.0, 10.0, 6) - 0.05


def test_gain_steps_are_what_the_desk_sets():
    ir = room_ir(2)
    desk = desk_from_options(max_bands=4, max_depth_db=9, gain_step_db=1.5)
    res = ring_out(ir, FS, band_hz=BAND, desk=desk)
    assert res.notches
    for n in res.notches:
        assert n.gain_db / 1.5 == pytest.approx(round(n.gain_db / 1.5), abs=1e-9)
        assert n.gain_db >= -9.0 - 1e-9
    m0 = own_margin_db(ir, FS, [], BAND)
    assert res.added_stable_gain_db == pytest.approx(own_margin_db(ir, FS, _cut_dicts(res.notches), BAND) - m0, abs=0.1)


def test_graphic_mode_pulls_sliders_on_iso_266_centres():
    ir = room_ir(4)
    desk = desk_from_options(eq="graphic", max_bands=6)
    res = ring_out(ir, FS, band_hz=BAND, desk=desk, min_gain_per_notch_db=0.0, tonal_share=math.inf)
    assert 0 < len(res.notches) <= 6
    for n in res.notches:
        assert any(abs(n.freq_hz - c) < 1e-9 for c in ISO)
        assert n.q == pytest.approx(Q_THIRD, rel=1e-12)
        assert n.gain_db / 0.5 == pytest.approx(round(n.gain_db / 0.5), abs=1e-9)  # default 0.5 dB steps
        assert -12.0 - 1e-9 <= n.gain_db < 0
    m0 = own_margin_db(ir, FS, [], BAND)
    assert res.added_stable_gain_db == pytest.approx(own_margin_db(ir, FS, _cut_dicts(res.notches), BAND) - m0, abs=0.1)
    # never worse than pulling the slider nearest the limiting crossing to the bottom, in turn
    gs: dict = {}
    for _ in range(6):
        f = _limit_hz(ir, FS, [{"freq_hz": c, "gain_db": g, "q": Q_THIRD} for c, g in gs.items()], BAND)
        gs[min(ISO, key=lambda c: abs(math.log2(f / c)))] = -12.0
    naive = own_margin_db(ir, FS, [{"freq_hz": c, "gain_db": g, "q": Q_THIRD} for c, g in gs.items()], BAND) - m0
    assert res.added_stable_gain_db >= naive - 0.05


# ---------------------------------------------------------------- parsing the desk


def test_desk_table_and_options():
    d = desk_from_table({"eq": "parametric", "bands": 4, "max_depth_db": 15, "min_bandwidth_oct": 0.1,
                         "gain_step_db": 0.5}, file="rig.toml")
    assert d.max_bands == 4 and d.max_depth_db == 15 and d.gain_step_db == 0.5
    # 1/Q = 2 sinh(ln2/2 · BW) (cookbook, analog), BW = 0.1 oct -> Q = 14.42 (derived)
    assert d.max_q == pytest.approx(1 / (2 * math.sinh(math.log(2) / 2 * 0.1)), rel=1e-12)
    o = desk_from_options(max_bands=2, base=d)
    assert o.max_bands == 2 and o.max_depth_db == 15
    g = desk_from_options(eq="graphic")
    assert g.graphic and g.max_depth_db == 12 and g.gain_step_db == 0.5
    assert desk_from_options() is None


@pytest.mark.parametrize("kw, key", [
    (dict(max_bands=0), "--max-bands"),
    (dict(max_depth_db=-3.0), "--max-depth-db"),
    (dict(max_depth_db=0.0), "--max-depth-db"),
    (dict(max_q=0.0), "--max-q"),
    (dict(max_q=-2.0), "--max-q"),
    (dict(eq="graphic", max_q=4.0), "--max-q"),
    (dict(eq="shelving"), "--eq"),
    (dict(max_q=4.0, min_bandwidth_oct=0.2), "--min-width-oct"),
])
def test_impossible_limits_are_refused_by_name(kw, key):
    with pytest.raises(InputError) as e:
        desk_from_options(**kw)
    assert e.value.key == key


def test_desk_table_errors_name_the_file_and_key():
    with pytest.raises(InputError) as e:
        desk_from_table({"bands": 3, "max_dept_db": 12}, file="rig.toml")
    assert "rig.toml" in str(e.value) and "desk.max_dept_db" in str(e.value)
    with pytest.raises(InputError) as e:
        desk_from_table({"bands": 0}, file="rig.toml")
    assert "desk.bands" in str(e.value)


# ---------------------------------------------------------------- suggestions of scan and listen


def test_suggestion_within_a_parametric_desk():
    d = desk_from_options(max_depth_db=12, max_q=8, gain_step_db=0.5)
    # at the centre a cookbook peaking cut is exactly its gain (cookbook), so with no drift the
    # shallowest 0.5 dB step reaching 6.2 dB is -6.5 dB (derived)
    n, ok = suggest_on_desk(d, 1000.0, 6.2)
    assert ok and n.gain_db == pytest.approx(-6.5) and n.q <= 8.0 + 1e-12 and n.freq_hz == 1000.0
    n, ok = suggest_on_desk(d, 1000.0, 20.0)
    assert not ok and n.gain_db == pytest.approx(-12.0)


def test_graphic_suggestions_merge_on_one_slider():
    g = desk_from_options(eq="graphic")
    a, _ = suggest_on_desk(g, 152.0, 3.0, sample_rate_hz=48000)
    b, _ = suggest_on_desk(g, 168.0, 6.0, sample_rate_hz=48000)
    assert a.freq_hz == 160.0 and b.freq_hz == 160.0
    merged = merge_on_desk(g, [a, b], 48000)
    assert len(merged) == 1 and merged[0].gain_db == min(a.gain_db, b.gain_db)


# ---------------------------------------------------------------- the command line


def _write_ir(tmp_path, ir, fs=FS):
    from howl.fileio import write_wav_atomic

    p = tmp_path / "loop.wav"
    write_wav_atomic(p, ir, fs)
    return p


def test_ringout_cuts_out_csv_and_json(tmp_path):
    ir = room_ir(3)
    p = _write_ir(tmp_path, ir)
    r = CliRunner().invoke(app, ["ringout", str(p), "--band-hz", "100", "3500", "--max-bands", "6", "--max-depth-db",
                                 "12", "--max-q", "10", "--cuts-out", str(tmp_path / "cuts.csv"), "--json"])
    assert r.exit_code == 0, r.output
    rep = json.loads(r.stdout)
    assert rep["desk"]["max_q"] == 10 and rep["desk"]["max_bands"] == 6
    lines = (tmp_path / "cuts.csv").read_text().splitlines()
    assert lines[0] == "band,type,freq_hz,gain_db,q,bandwidth_oct"
    assert len(lines) == 1 + len(rep["notches"])
    from howl.loop.cutfile import read_cut_file

    back = read_cut_file(tmp_path / "cuts.csv")
    for n, d in zip(back, sorted(rep["notches"], key=lambda d: d["freq_hz"])):
        # the figures are those of the cuts as typed into the desk: the file's values are the
        # reported ones (centre to 0.1 Hz, Q to 0.001, gain to 0.01 dB), not a rounding of them
        assert (n.freq_hz, n.gain_db, n.q) == (d["freq_hz"], d["gain_db"], d["q"])
    r = CliRunner().invoke(app, ["ringout", str(p), "--eq", "graphic", "--cuts-out", str(tmp_path / "g.json")])
    assert r.exit_code == 0, r.output
    g = json.loads((tmp_path / "g.json").read_text())
    assert [c["freq_hz"] for c in g["cuts"]] == [float(c) for c in ISO]  # every slider, 0 dB where untouched


@pytest.mark.parametrize("args", [
    ["--max-bands", "0"], ["--max-depth-db", "-6"], ["--max-q", "0"], ["--max-q", "-1"],
    ["--eq", "graphic", "--max-q", "3"], ["--cuts-out", "cuts.txt"],
])
def test_impossible_limits_give_one_line_exit_2(tmp_path, args):
    p = _write_ir(tmp_path, room_ir(1))
    r = CliRunner().invoke(app, ["ringout", str(p), *args])
    assert r.exit_code == 2
    assert len(r.output.strip().splitlines()) == 1 and "Traceback" not in r.output


@pytest.mark.parametrize("name, text", [
    ("bad.json", "{not json"),
    ("noq.json", json.dumps({"notches": [{"freq_hz": 500.0, "gain_db": -6.0}]})),
    ("boost.json", json.dumps({"cuts": [{"freq_hz": 500.0, "gain_db": 3.0, "q": 4.0}]})),
    ("zeroq.csv", "band,type,freq_hz,gain_db,q,bandwidth_oct\n1,peaking,500,-6,0,0.3\n"),
    ("cols.csv", "centre,depth\n500,-6\n"),
    ("high.json", json.dumps({"cuts": [{"freq_hz": 5000.0, "gain_db": -6.0, "q": 4.0}]})),
])
def test_bad_cut_files_give_one_line_exit_2(tmp_path, name, text):
    ir = np.zeros(800)
    ir[40] = 0.5
    p = _write_ir(tmp_path, ir)
    from howl.fileio import write_wav_atomic

    prog = tmp_path / "prog.wav"
    write_wav_atomic(prog, np.zeros(800), FS)
    cuts = tmp_path / name
    cuts.write_text(text)
    r = CliRunner().invoke(app, ["simulate", str(p), str(prog), "-o", str(tmp_path / "o.wav"), "--cuts", str(cuts)])
    assert r.exit_code == 2, r.output
    errs = [ln for ln in r.output.strip().splitlines() if ln.startswith("howl: error")]
    assert len(errs) == 1 and name in errs[0] and "Traceback" not in r.output


def test_simulate_with_the_cuts_decays_where_it_howled_without(tmp_path):
    """Closed loop: a fader that howls without the cuts decays with them (same program, same gain)."""
    from howl.fileio import read_wav, write_wav_atomic

    ir = room_ir(3)
    p = _write_ir(tmp_path, ir)
    run = CliRunner()
    ro = run.invoke(app, ["ringout", str(p), "--band-hz", "100", "3500", "--max-bands", "6", "--max-depth-db", "12",
                          "--max-q", "10", "--json"])
    rep = json.loads(ro.stdout)
    (tmp_path / "ro.json").write_text(ro.stdout)
    before, asg = rep["gain_margin_db_before"], rep["added_stable_gain_db"]
    assert asg > 1.0
    gain = before + 0.5 * asg  # past the margin without the cuts, inside it with them
    rng = np.random.default_rng(7)
    burst = np.concatenate([0.05 * rng.standard_normal(int(0.3 * FS)), np.zeros(int(2.0 * FS))])
    write_wav_atomic(tmp_path / "prog.wav", burst, FS)
    tails = {}
    for tag, extra in (("without", []), ("with", ["--cuts", str(tmp_path / "ro.json")])):
        out = tmp_path / f"{tag}.wav"
        r = run.invoke(app, ["simulate", str(p), str(tmp_path / "prog.wav"), "-o", str(out), "--gain-db", f"{gain:.3f}",
                             "--tail-s", "0", "--json", *extra])
        assert r.exit_code == 0, r.output
        y, _ = read_wav(out)
        early = np.sqrt(np.mean(y[int(0.3 * FS): int(0.8 * FS)] ** 2))
        late = np.sqrt(np.mean(y[-int(0.5 * FS):] ** 2))
        tails[tag] = 20 * math.log10(late / early)
    assert tails["without"] > 0.0  # it grows
    assert tails["with"] < -20.0  # it rings down


def test_rig_file_desk_table(tmp_path):
    """A [desk] table in a rig file is read into rig.desk; a bad key names the file and the key."""
    from pathlib import Path

    from howl.model.rig import load_rig

    src = Path(__file__).resolve().parents[2] / "examples" / "chapel_lectern.toml"
    text = src.read_text().replace('room_file = "../rooms/', f'room_file = "{src.parent.parent}/rooms/')
    good = tmp_path / "rig.toml"
    good.write_text(text + '\n[desk]\neq = "parametric"\nbands = 4\nmax_depth_db = 12\nmax_q = 8\ngain_step_db = 0.5\n')
    rig = load_rig(good)
    assert rig.desk == Desk("parametric", 4, 12.0, 8.0, 0.5)
    bad = tmp_path / "bad.toml"
    bad.write_text(text + "\n[desk]\nbands = 0\n")
    with pytest.raises(InputError) as e:
        load_rig(bad)
    assert "bad.toml" in str(e.value) and "desk.bands" in str(e.value)
    r = CliRunner().invoke(app, ["ringout", "--desk-from", str(good), str(_write_ir(tmp_path, room_ir(1))), "--json"])
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["desk"]["max_bands"] == 4
