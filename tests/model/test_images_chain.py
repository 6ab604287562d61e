"""The rig's chain (channel high-pass and EQ, loudspeaker and capsule responses) inside the
image-source loop (howl.model._images_chain, used by ``plan --method images``).

References: the RBJ cookbook (R. Bristow-Johnson, "Cookbook formulae for audio EQ biquad
filter coefficients", the HPF section), computed here, and scipy.signal.sosfreqz; the
Butterworth magnitude |H|² = 1/(1 + (fc/f)^(2n)) of a high-pass (S. Butterworth, "On the
theory of filter amplifiers", Wireless Engineer 7, 1930).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from howl.loop.nyquist import mimo_margin, nyquist_margin
from howl.model._images_chain import chained_loop_irs
from howl.model._rigedit import with_changes
from howl.model.images import plan_with_images, rig_loop_irs

from howl.model.rig import Listener, Mic, Mix, Rig, Room, Speaker, Surface, Talker

FS = 16000

# Little absorption at 63/125 Hz, much from 250 Hz up: the low end of the loop rings most.
ALPHA = (0.02, 0.02, 0.4, 0.6, 0.7, 0.7, 0.7)
HP = "mics.m1.high_pass={freq_hz=150.0, order=2}"


def shoebox(dims, alpha):
    """A shoebox Room with the same octave absorption on every surface."""
    lx, ly, lz = dims
    areas = {"floor": lx * ly, "ceiling": lx * ly, "wall_x0": ly * lz, "wall_x1": ly * lz,
             "wall_y0": lx * lz, "wall_y1": lx * lz}
    surfs = tuple(Surface(name, area, "test", tuple(float(v) for v in alpha)) for name, area in areas.items())
    return Room("test", lx * ly * lz, 2 * (lx * ly + ly * lz + lx * lz), surfs, dimensions_m=tuple(map(float, dims)))


def one_pair_rig(room, spk_pos, mic_pos, gain_db=20.0):
    """One omni loudspeaker (100 dB SPL/V at 1 m) feeding one omni mic (−50 dBV/Pa) at ``gain_db``."""
    cov = (360.0,) * 7
    spk = Speaker("main", tuple(spk_pos), 0.0, 0.0, cov, cov, 100.0)
    mic = Mic("m1", tuple(mic_pos), 0.0, 0.0, pattern="omni", sensitivity_dbv_pa=-50.0)
    tpos = tuple(np.asarray(mic_pos) + np.array([0.3, 0.0, 0.0]))
    return Rig("test", room, (spk,), (mic,), (Talker("t", tpos, "m1"),),
               (Listener("far", (room.dimensions_m[0] - 1, 2.0, 1.2)),), (Mix("mains", ("main",), (("m1", gain_db),)),),
               target_spl_db=65.0)


def bare_rig():
    room = shoebox((8.0, 5.0, 3.0), ALPHA)
    return one_pair_rig(room, (1.0, 1.0, 1.0), (6.5, 3.8, 1.2))


def cookbook_hpf(f0, q, fs):
    """RBJ cookbook HPF: b = [(1+cos w0)/2, −(1+cos w0), (1+cos w0)/2], a = [1+α, −2 cos w0, 1−α], α = sin w0/(2Q)."""
    w0 = 2 * math.pi * f0 / fs
    c, alpha = math.cos(w0), math.sin(w0) / (2 * q)
    b = np.array([(1 + c) / 2, -(1 + c), (1 + c) / 2])
    a = np.array([1 + alpha, -2 * c, 1 - alpha])
    return np.concatenate([b / a[0], a / a[0]])[None, :]


def test_a_vocal_high_pass_moves_the_image_source_howl_off_the_bottom_band():
    """A 150 Hz 2nd-order high-pass takes 4.9 dB off at 125 Hz and 0.3 dB at 250 Hz
    (derived: Butterworth 10·log10(1 + (150/f)^4)), so the limiting octave band moves up."""
    rig = bare_rig()
    with_hp = with_changes(rig, [HP])
    a = plan_with_images(rig, max_order=4, fraction=1)
    b = plan_with_images(with_hp, max_order=4, fraction=1)
    top_of_bottom_band = a["bands_hz"][0] * 2 ** 0.5  # octave band edges: centre·2^(±1/2)
    ma, mb = a["mics"][0], b["mics"][0]
    # without the high-pass: the loop rings first in the bottom band (the room's low end is lively)
    assert ma["howl_freq_hz"] < top_of_bottom_band and int(np.argmax(ma["loop_gain_db"])) == 0
    assert a["system"]["howl_freq_hz"] < top_of_bottom_band
    # with it: off the bottom band, for the single-mic and the all-mics margins alike
    assert mb["howl_freq_hz"] > top_of_bottom_band and int(np.argmax(mb["loop_gain_db"])) > 0
    assert b["system"]["howl_freq_hz"] > top_of_bottom_band
    # the bottom band's loop gain drops by about the filter's band-average cut (between 2 and 8 dB)
    assert 2.0 < ma["loop_gain_db"][0] - mb["loop_gain_db"][0] < 8.0
    # the statistical column beside it carries the same chain: its worst band moves too
    assert int(np.argmax(ma["statistical_loop_gain_db"])) == 0 < int(np.argmax(mb["statistical_loop_gain_db"]))
    assert b["chain_applied"] is True and a["chain_applied"] is True


def cookbook_peaking(f0, gain_db, q, fs):
    """RBJ cookbook peakingEQ: A = 10^(g/40), b = [1+αA, −2 cos w0, 1−αA], a = [1+α/A, −2 cos w0, 1−α/A]."""
    w0 = 2 * math.pi * f0 / fs
    c, alpha, big_a = math.cos(w0), math.sin(w0) / (2 * q), 10 ** (gain_db / 40)
    b = np.array([1 + alpha * big_a, -2 * c, 1 - alpha * big_a])
    a = np.array([1 + alpha / big_a, -2 * c, 1 - alpha / big_a])
    return np.concatenate([b / a[0], a / a[0]])[None, :]


def test_chained_loop_has_the_cookbook_high_pass_and_peaking_eq_times_the_bare_loop():
    """High-pass then EQ on the sending mic's channel, both at the desk's 48 kHz."""
    rig = with_changes(bare_rig(), [HP])
    eq = with_changes(rig, ['mics.m1.eq=[{kind="peaking", freq_hz=500.0, gain_db=-6.0, q=4.0}]'])
    irs, _ = rig_loop_irs(eq, FS, max_order=1, tail=False)
    chained = chained_loop_irs(eq, irs, FS)
    n = chained.shape[-1]
    f = np.fft.rfftfreq(n, 1 / FS)[:-1]
    bare = np.fft.rfft(irs[0, 0], n)[:-1]
    sos = np.vstack([cookbook_hpf(150.0, 1 / math.sqrt(2), 48000.0), cookbook_peaking(500.0, -6.0, 4.0, 48000.0)])
    _, c = signal.sosfreqz(sos, worN=f, fs=48000.0)
    got = np.fft.rfft(chained[0, 0], n)[:-1]
    assert np.max(np.abs(got - bare * c)) <= 1e-9 * np.max(np.abs(bare))


def test_chained_loop_is_the_cookbook_high_pass_times_the_bare_loop():
    rig = with_changes(bare_rig(), [HP])
    irs, _ = rig_loop_irs(rig, FS, max_order=1, tail=False)
    chained = chained_loop_irs(rig, irs, FS)
    n = chained.shape[-1]
    assert n >= irs.shape[-1]
    f = np.fft.rfftfreq(n, 1 / FS)[:-1]  # every bin below fs/2
    bare = np.fft.rfft(irs[0, 0], n)[:-1]
    # order 2 Butterworth: one section, Q = 1/(2 sin(π/4)) = 1/√2; the desk runs it at 48 kHz
    _, c = signal.sosfreqz(cookbook_hpf(150.0, 1 / math.sqrt(2), 48000.0), worN=f, fs=48000.0)
    got = np.fft.rfft(chained[0, 0], n)[:-1]
    assert np.max(np.abs(got - bare * c)) <= 1e-9 * np.max(np.abs(bare))
    # between the bins too (where the Nyquist search refines crossings) the DTFT of the chained IR is
    # the product, up to what a real IR cannot hold: the imaginary part of the 48 kHz channel's
    # response at fs/2 is dropped, a small ringing over the buffer (derived; measured 3e-5 here)
    fo = np.array([97.3, 151.1, 1234.5])
    k = np.arange(irs.shape[-1])
    dt = lambda h, ff: np.exp(-2j * np.pi * np.outer(ff, np.arange(h.size)) / FS) @ h  # noqa: E731
    _, co = signal.sosfreqz(cookbook_hpf(150.0, 1 / math.sqrt(2), 48000.0), worN=fo, fs=48000.0)
    np.testing.assert_allclose(dt(chained[0, 0], fo), dt(irs[0, 0, k], fo) * co, rtol=1e-4)


def test_loudspeaker_usable_range_enters_with_its_magnitude_and_a_causal_phase():
    rig = with_changes(bare_rig(), ["speakers.main.usable_range={low_hz=110.0, high_hz=15000.0}"])
    irs, _ = rig_loop_irs(rig, FS, max_order=1, tail=False)
    chained = chained_loop_irs(rig, irs, FS)
    n = chained.shape[-1]
    f = np.fft.rfftfreq(n, 1 / FS)
    ratio_db = 20 * np.log10(np.abs(np.fft.rfft(chained[0, 0], n)) / np.abs(np.fft.rfft(irs[0, 0], n)))
    # the rig's definition of usable_range: −10 dB at low_hz (docs/rig format); flat well inside the range
    # (interpolated in log f between the two bins around 110 Hz, a few Hz apart for this short IR)
    assert np.interp(np.log(110.0), np.log(f[1:]), ratio_db[1:]) == pytest.approx(-10.0, abs=0.1)
    k1k = int(np.argmin(np.abs(f - 1000.0)))
    assert abs(ratio_db[k1k]) < 0.1
    # minimum phase is causal: nothing arrives before the bare direct sound, nothing wraps to the end
    first = int(np.argmax(np.abs(irs[0, 0]) > 1e-3 * np.max(np.abs(irs[0, 0]))))
    e = np.sum(chained[0, 0] ** 2)
    assert np.sum(chained[0, 0, : max(first - 20, 0)] ** 2) < 1e-10 * e
    assert np.sum(chained[0, 0, -n // 10:] ** 2) < 1e-10 * e


def test_a_rig_without_a_chain_gives_exactly_the_bare_figures():
    rig = bare_rig()
    irs, mix = rig_loop_irs(rig, FS, max_order=2)
    assert chained_loop_irs(rig, irs, FS) is irs
    out = plan_with_images(rig, max_order=2)
    band = tuple(out["band_hz"])
    loop = irs[:, 0, :].T @ mix[:, 0]
    res = nyquist_margin(loop, FS, band_hz=band, n_risks=5)
    mm = mimo_margin(irs, mix, FS, band_hz=band)
    m = out["mics"][0]
    assert m["gain_margin_db"] == round(res.gain_margin_db, 2)
    assert m["howl_freq_hz"] == round(res.howl_freq_hz, 1)
    assert m["magnitude_margin_db"] == round(res.magnitude_margin_db, 2)
    assert out["system"]["gain_margin_db"] == round(mm.gain_margin_db, 2)
    assert out["system"]["howl_freq_hz"] == round(mm.howl_freq_hz, 1)


def test_plan_cli_json_says_the_chain_is_applied(tmp_path):
    """``plan --method images --json`` adds ``chain_applied`` beside the existing fields (contract: add only)."""
    import json
    from pathlib import Path

    from typer.testing import CliRunner

    from howl.cli import app

    rig_file = Path(__file__).resolve().parents[2] / "examples" / "gym_assembly.toml"
    res = CliRunner().invoke(app, ["plan", str(rig_file), "--method", "images", "--json"])
    assert res.exit_code == 0, res.output
    images = json.loads(res.stdout)["images"]
    assert images["chain_applied"] is True
    for key in ("method", "mics", "system", "band_hz", "bands_hz", "caution", "lines"):
        assert key in images


def test_the_loop_ir_of_one_mic_carries_the_chain_of_each_loudspeaker_path():
    # consistency (derived): the one mic's loop IR with the chain in must be the sum over loudspeakers of
    # its chained pair IRs weighted by the mix, each loudspeaker's response on its own path before the
    # sum; the chained pair IRs themselves are checked against cookbook biquads in the tests above
    import numpy as np
    from howl.model.images import mic_loop_ir, rig_loop_irs
    from howl.model._images_chain import chained_loop_irs, rig_has_chain
    from howl.model.rig import load_rig
    from pathlib import Path

    rig = load_rig(Path(__file__).resolve().parents[2] / "examples" / "chapel_lectern.toml")
    assert rig_has_chain(rig)
    fs = 8000.0
    chained = mic_loop_ir(rig, "lectern", fs, max_order=3, seed=2)
    bare = mic_loop_ir(rig, "lectern", fs, max_order=3, seed=2, chain=False)
    irs, mix = rig_loop_irs(rig, fs, max_order=3, seed=2)
    k = [m.name for m in rig.mics].index("lectern")
    ref = (chained_loop_irs(rig, irs, fs)[:, k, :] * mix[:, k, None]).sum(axis=0)
    n = min(ref.size, chained.size)
    assert np.max(np.abs(chained[:n] - ref[:n])) <= 1e-9 * np.max(np.abs(ref))
    assert bare.size < chained.size  # the chain's filters ring on: the chained IR is padded
