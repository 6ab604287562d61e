"""Image-source IRs (howl.images) checked against pyroomacoustics and the room model.

Reference library: pyroomacoustics 0.10.1 (its shoebox image-source engine, Allen &
Berkley 1979). Its direct path is 1/d (it leaves out the 1/(4π) of the free-field
Green's function that howl keeps), and it delays its IRs by frac_delay_length // 2 = 40
samples; both are undone before comparing. Its default 10 Hz high-pass is switched
off for the comparison (and restored afterwards).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from howl.errors import InputError
from howl.model.images import band_weights, image_source_ir, shoebox_images
from howl.model.rig import OCTAVE_BANDS_HZ, Room, Surface

pra = pytest.importorskip("pyroomacoustics")

FS = 16000
PRA_OFFSET = 40  # pyroomacoustics: frac_delay_length (81) // 2


@pytest.fixture
def pra_no_hpf():
    old = pra.constants.get("rir_hpf_enable")
    pra.constants.set("rir_hpf_enable", False)
    try:
        yield pra.constants.get("c")
    finally:
        pra.constants.set("rir_hpf_enable", old)


def shoebox(dims, alpha):
    """A shoebox Room with the same octave absorption on every surface (or a dict per surface)."""
    lx, ly, lz = dims
    areas = {
        "floor": lx * ly, "ceiling": lx * ly, "wall_x0": ly * lz,
        "wall_x1": ly * lz, "wall_y0": lx * lz, "wall_y1": lx * lz,
    }
    surfs = []
    for name, area in areas.items():
        a = alpha[name] if isinstance(alpha, dict) else alpha
        a = tuple(float(v) for v in np.broadcast_to(np.asarray(a, float), (7,)))
        surfs.append(Surface(name, area, "test", a))
    return Room(
        "test", lx * ly * lz, 2 * (lx * ly + ly * lz + lx * lz), tuple(surfs), dimensions_m=tuple(map(float, dims))
    )


def pra_ir(dims, alpha, src, mic, order, *, mic_dir=None, src_dir=None):
    if np.ndim(alpha) == 0:
        mat = pra.Material(float(alpha))
    else:
        mat = pra.Material({"coeffs": list(alpha), "center_freqs": list(OCTAVE_BANDS_HZ)})
    room = pra.ShoeBox(list(dims), fs=FS, max_order=order, materials=mat)
    room.add_source(list(src), directivity=src_dir)
    room.add_microphone(np.asarray(mic, float)[:, None], directivity=mic_dir)
    room.compute_rir()
    return np.asarray(room.rir[0][0], float)[PRA_OFFSET:] / (4.0 * math.pi)


def dtft(h, freq_hz, fs=FS):
    n = np.arange(h.size)
    return (h[None, :] * np.exp(-2j * np.pi * np.asarray(freq_hz)[:, None] * n[None, :] / fs)).sum(axis=1)


def arrival_peaks(h, min_height):
    peaks, _ = signal.find_peaks(np.abs(h), height=min_height, distance=3)
    return peaks


# ------------------------------------------------------------------ omni, against pyroomacoustics


def test_direct_path_delay_and_level_equal_pyroomacoustics(pra_no_hpf):
    c = pra_no_hpf
    dims, src, mic = (6.0, 5.0, 3.0), (2.0, 3.0, 1.5), (4.5, 1.5, 1.2)
    d = math.dist(src, mic)
    ours = image_source_ir(shoebox(dims, 0.2), src, mic, FS, max_order=0, tail=False,
                           air_absorption=False, speed_of_sound_m_s=c)
    ref = pra_ir(dims, 0.2, src, mic, 0)
    f = np.array([250.0, 500.0, 1000.0, 2000.0])
    tau = d / c * FS  # samples
    for h in (ours, ref):
        H = dtft(h, f)
        # level: free-field Green's function 1/(4πd) (Allen & Berkley 1979, eq. 1)
        np.testing.assert_allclose(np.abs(H), 1.0 / (4 * math.pi * d), rtol=2e-3)
        # delay: residual phase after removing d/c is zero
        resid = np.angle(H * np.exp(2j * np.pi * f * tau / FS))
        np.testing.assert_allclose(resid / (2 * np.pi * f / FS), 0.0, atol=1e-3)  # samples
    # and ours to 0.001 dB (the windowed sinc's pass-band ripple)
    H = dtft(ours, f)
    np.testing.assert_allclose(np.abs(H), 1.0 / (4 * math.pi * d), rtol=1e-4)


@pytest.mark.parametrize("order", [1, 2])
def test_early_reflections_arrive_on_the_same_samples_as_pyroomacoustics(pra_no_hpf, order):
    c = pra_no_hpf
    dims, src, mic = (7.3, 5.1, 3.2), (1.9, 3.4, 1.3), (5.2, 1.6, 1.7)
    ours = image_source_ir(shoebox(dims, 0.3), src, mic, FS, max_order=order, tail=False,
                           air_absorption=False, speed_of_sound_m_s=c)
    ref = pra_ir(dims, 0.3, src, mic, order)
    # amplitudes of the weakest arrival: (1−α)^(order/2)/(4π d_max)
    imgs = shoebox_images(dims, src, order)
    d = np.linalg.norm(imgs.positions_m - np.asarray(mic), axis=1)
    floor = 0.4 * (0.7 ** (order / 2)) / (4 * math.pi * d.max())
    p_ours, p_ref = arrival_peaks(ours, floor), arrival_peaks(ref, floor)
    assert p_ours.size >= 5
    np.testing.assert_array_equal(p_ours, p_ref)
    # every image's arrival sample (rounded) is a peak where images are isolated
    expected = np.round(d / c * FS).astype(int)
    lone = [e for e in expected if np.sum(np.abs(expected - e) <= 4) == 1]
    assert set(lone) <= set(p_ours.tolist())


def _octave_edc_t20(h, fs, centre):
    """T20 from the Schroeder backward integral of one octave band (Schroeder 1965; ISO 3382-1).

    ``h`` may be a list of IRs: their band energies are averaged first (the expected decay).
    """
    lo, hi = centre / math.sqrt(2), min(centre * math.sqrt(2), 0.95 * fs / 2)
    sos = signal.butter(4, [lo, hi], btype="bandpass", fs=fs, output="sos")
    hs = h if isinstance(h, list) else [h]
    e = np.mean([signal.sosfiltfilt(sos, x) ** 2 for x in hs], axis=0)
    h = hs[0]
    edc = np.cumsum(e[::-1])[::-1]
    edc_db = 10 * np.log10(edc / edc[0])
    t = np.arange(h.size) / fs
    sel = (edc_db <= -5) & (edc_db >= -25)  # T20 range (ISO 3382-1 §A.2)
    slope = np.polyfit(t[sel], edc_db[sel], 1)[0]
    return -60.0 / slope


def test_band_decay_times_match_pyroomacoustics_within_10_percent(pra_no_hpf):
    c = pra_no_hpf
    dims, src, mic = (6.0, 4.5, 3.0), (1.7, 2.9, 1.4), (4.6, 1.3, 1.6)
    alpha = (0.05, 0.08, 0.12, 0.2, 0.3, 0.4, 0.45)
    order = 40
    ours = image_source_ir(shoebox(dims, alpha), src, mic, FS, max_order=order, tail=False,
                           air_absorption=False, speed_of_sound_m_s=c)
    ref = pra_ir(dims, alpha, src, mic, order)
    n = min(ours.size, ref.size)
    for centre in (125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0):  # 8 kHz is at Nyquist here
        t_ours = _octave_edc_t20(ours[:n], FS, centre)
        t_ref = _octave_edc_t20(ref[:n], FS, centre)
        assert t_ours == pytest.approx(t_ref, rel=0.10), centre


# ------------------------------------------------------------------ directional images


def _cardioid(aim):
    aim = np.asarray(aim, float) / np.linalg.norm(aim)

    def gain(directions, freq_hz):  # ideal cardioid 0.5 + 0.5·cos θ, flat in frequency
        g = 0.5 + 0.5 * (np.asarray(directions) @ aim)
        return np.repeat(g[..., None], np.size(freq_hz), axis=-1)

    return gain


def test_cardioid_mic_and_source_images_match_pyroomacoustics(pra_no_hpf):
    """Departure directions (mirrored per wall) and arrival directions, both ends cardioid."""
    c = pra_no_hpf
    dims, src, mic = (7.3, 5.1, 3.2), (1.9, 3.4, 1.3), (5.2, 1.6, 1.7)
    src_aim, mic_aim = np.array([0.3, 1.0, 0.2]), np.array([1.0, -0.4, 0.1])
    ours = image_source_ir(shoebox(dims, 0.3), src, mic, FS, max_order=2, tail=False, air_absorption=False,
                           speed_of_sound_m_s=c, source_gain=_cardioid(src_aim), mic_gain=_cardioid(mic_aim))
    from pyroomacoustics.directivities import Cardioid

    ref = pra_ir(dims, 0.3, src, mic, 2, src_dir=Cardioid(src_aim), mic_dir=Cardioid(mic_aim))
    n = min(ours.size, ref.size)
    # compare below 6 kHz, where both libraries' fractional-delay filters are flat
    # (they differ in window and length near Nyquist)
    sos = signal.butter(8, 6000.0, fs=FS, output="sos")
    a, b = signal.sosfiltfilt(sos, ours[:n]), signal.sosfiltfilt(sos, ref[:n])
    assert np.max(np.abs(a - b)) < 0.01 * np.max(np.abs(b))
    assert np.sum(a**2) == pytest.approx(np.sum(b**2), rel=0.005)


def test_cardioid_mic_turned_away_loses_the_direct_path_and_keeps_the_reflections():
    dims = (8.0, 6.0, 4.0)
    room = shoebox(dims, 0.9)  # a dry room
    src, mic = (2.0, 3.0, 2.0), (5.0, 3.0, 2.0)  # the speaker is behind the mic (mic aimed +x)
    kw = dict(max_order=1, tail=False, air_absorption=False)
    omni = image_source_ir(room, src, mic, FS, **kw)
    card = image_source_ir(room, src, mic, FS, mic_gain=_cardioid([1, 0, 0]), **kw)
    c = image_source_ir(room, src, mic, FS, max_order=0, tail=False, air_absorption=False, return_info=True)[1]
    d_direct = math.dist(src, mic)
    n0 = int(round(d_direct / c.speed_of_sound_m_s * FS))
    win = slice(n0 - 8, n0 + 9)
    # direct path: the cardioid's rear null (0.5 + 0.5·cos 180° = 0; common practice, no source)
    assert np.sum(card[win] ** 2) < 1e-6 * np.sum(omni[win] ** 2)
    # the reflection off the wall in front of the mic (x = 8) arrives on axis: kept in full
    d_front = math.dist((2 * dims[0] - src[0], src[1], src[2]), mic)
    n1 = int(round(d_front / c.speed_of_sound_m_s * FS))
    w1 = slice(n1 - 3, n1 + 4)
    assert np.max(np.abs(card[w1])) == pytest.approx(np.max(np.abs(omni[w1])), rel=1e-6)
    # floor and ceiling bounces arrive from the side-rear: kept at the pattern's gain toward them
    img = np.array([src[0], src[1], -src[2]])
    u = (img - np.array(mic)) / np.linalg.norm(img - np.array(mic))
    n2 = int(round(np.linalg.norm(img - np.array(mic)) / c.speed_of_sound_m_s * FS))
    w2 = slice(n2 - 2, n2 + 3)
    ratio = np.max(np.abs(card[w2])) / np.max(np.abs(omni[w2]))
    assert ratio == pytest.approx(0.5 + 0.5 * u[0], rel=0.05)
    assert ratio > 0.1


# ------------------------------------------------------------------ band synthesis, tail


def test_band_weights_are_a_partition_of_unity():
    f = np.linspace(0, 24000, 2001)
    w = band_weights(f, OCTAVE_BANDS_HZ)
    np.testing.assert_allclose(w.sum(axis=0), 1.0, atol=1e-12)
    # at each centre only that band
    wc = band_weights(np.asarray(OCTAVE_BANDS_HZ), OCTAVE_BANDS_HZ)
    np.testing.assert_allclose(wc, np.eye(7), atol=1e-12)


def test_band_gains_follow_the_wall_absorption_per_octave():
    """One first-order reflection off a wall: |H| at each octave centre is sqrt(1−α) of that band."""
    alpha = {"floor": 0.99, "ceiling": 0.99, "wall_x0": 0.99, "wall_y0": 0.99, "wall_y1": 0.99,
             "wall_x1": (0.1, 0.2, 0.3, 0.5, 0.6, 0.7, 0.8)}
    dims = (20.0, 18.0, 16.0)
    room = shoebox(dims, alpha)
    src, mic = (15.0, 9.0, 8.0), (17.0, 9.0, 8.0)
    h = image_source_ir(room, src, mic, FS, max_order=1, tail=False, air_absorption=False, duration_s=0.2)
    n_cut = int(0.016 * FS)  # the direct path (2 m) arrives at ≈ 5.8 ms, the x1 wall bounce (8 m) at ≈ 23 ms
    refl = h.copy()
    refl[:n_cut] = 0.0
    refl[int(0.045 * FS):] = 0.0  # before the next-earliest other reflection (≈ 47 ms)
    f = np.asarray(OCTAVE_BANDS_HZ[:-1])
    H = np.abs(dtft(refl, f))
    d = 8.0
    expect = np.sqrt(1 - np.asarray(alpha["wall_x1"][:-1])) / (4 * math.pi * d)
    np.testing.assert_allclose(H, expect, rtol=0.02)


def test_air_absorption_weakens_a_long_path_as_iso_9613_1_says():
    from howl.model.room import air_attenuation_db_per_m

    dims = (60.0, 8.0, 6.0)
    room = shoebox(dims, 0.99)
    src, mic = (2.0, 4.0, 3.0), (52.0, 4.0, 3.0)
    kw = dict(max_order=0, tail=False, duration_s=0.3)
    dry = image_source_ir(room, src, mic, FS, air_absorption=False, **kw)
    wet = image_source_ir(room, src, mic, FS, air_absorption=True, **kw)
    f = np.array([2000.0, 4000.0])
    loss_db = 20 * np.log10(np.abs(dtft(dry, f)) / np.abs(dtft(wet, f)))
    expect = air_attenuation_db_per_m(f, room.temperature_c, room.humidity_pct) * 50.0
    np.testing.assert_allclose(loss_db, expect, rtol=0.03)


def test_tail_decays_at_the_room_models_rt60_in_every_band():
    from howl.model.room import room_acoustics

    dims = (12.0, 9.0, 5.0)
    alpha = (0.08, 0.1, 0.12, 0.15, 0.18, 0.22, 0.3)
    room = shoebox(dims, alpha)
    rt = room_acoustics(room, np.asarray(OCTAVE_BANDS_HZ)).rt60_eyring_s
    # the expected decay: band energies averaged over four seeds before the Schroeder integral
    # (one 125 Hz octave of noise alone scatters T20 by about ±10 %, ISO 3382-2 §A)
    irs = [image_source_ir(room, (3.0, 4.0, 1.6), (8.5, 5.5, 1.5), FS, max_order=3, seed=s) for s in range(4)]
    for i, centre in enumerate(OCTAVE_BANDS_HZ[:-1]):
        assert _octave_edc_t20(irs, FS, centre) == pytest.approx(rt[i], rel=0.10), centre


def test_reverberant_energy_matches_hopkins_stryker_4_over_r():
    """Far from the source, Σ h² without the direct path ≈ (1/4π)·4/R = 1/(πR) per band, less Barron's distance term.

    Hopkins & Stryker (1948): reverberant mean-square pressure ∝ 4/R beside the
    direct Q/(4πr²); on howl's Green's-function scale 1/(4πr) the direct energy is
    1/(16π²r²), so the classical reverberant energy is 1/(πR). Barron & Lee's revised
    theory (JASA 84(2), 1988; from memory) refines it: the reflected sound reaching a
    listener at r left the source at least r/c earlier, by when a diffuse field of
    decay time T has lost 13.82·r/(c·T) nepers, so the reflected energy is
    (4/A)/(4π)·e^(−13.82·r/(c·T)) with A = 24·ln10·V/(c·T) (derived here from the
    Sabine form of their classical term; their 0.04 r/T is 13.82/c at c ≈ 345 m/s).
    """
    from howl.model.room import room_acoustics

    dims = (12.0, 9.0, 5.0)
    alpha = (0.1, 0.12, 0.15, 0.18, 0.2, 0.25, 0.3)
    room = shoebox(dims, alpha)
    src, mic = (3.0, 4.0, 1.6), (9.5, 6.5, 1.5)
    d = math.dist(src, mic)
    f = np.fft.rfftfreq(1 << 16, 1 / FS)
    direct = 1 / (4 * math.pi * d)
    ra = room_acoustics(room, np.asarray(OCTAVE_BANDS_HZ))
    c = ra.speed_of_sound_m_s
    # eight tails (seeds 3-10), their band energies averaged: the tail's seed-to-seed scatter of one octave
    # (0.06 dB at 4 kHz to 0.7 dB at 250 Hz, one standard deviation over these seeds) falls by √8
    rev = np.zeros(5)
    for seed in range(3, 11):
        H = np.fft.rfft(image_source_ir(room, src, mic, FS, max_order=4, seed=seed, air_absorption=False), 1 << 16)
        for k, centre in enumerate(OCTAVE_BANDS_HZ[1:-1]):
            sel = (f > centre / 2**0.5) & (f < centre * 2**0.5)
            rev[k] += (np.mean(np.abs(H[sel]) ** 2) - direct**2) / 8  # direct and reverberant add in power
    t = ra.rt60_eyring_s[1:-1]
    barron = (4 * c * t / (24 * math.log(10) * room.volume_m3)) / (4 * math.pi) * np.exp(-13.82 * d / (c * t))
    classical = 1 / (math.pi * ra.room_constant_m2[1:-1])
    err_db = 10 * np.log10(rev / barron)
    # Barron's fit to measured halls scatters by about ±1 dB (from memory), and the image model's early
    # reflections are a shoebox's, not a diffuse field's: each band within 1 dB of it (here −0.8 to +0.1 dB),
    # the five bands' mean within 0.5 dB (here −0.4 dB). The old check, ±2.5 dB against 4/R, allowed a
    # factor of 1.8 in energy.
    assert np.all(np.abs(err_db) <= 1.0), err_db
    assert abs(np.mean(err_db)) <= 0.5, err_db
    # and below the classical 4/R level in every band, as the distance term says (0.8-1.9 dB here)
    assert np.all(rev < classical), 10 * np.log10(rev / classical)


def test_tail_is_reproducible_with_its_seed():
    room = shoebox((6.0, 5.0, 3.0), 0.2)
    a = image_source_ir(room, (2, 2, 1.5), (4, 3, 1.2), 8000, max_order=2, seed=7)
    b = image_source_ir(room, (2, 2, 1.5), (4, 3, 1.2), 8000, max_order=2, seed=7)
    c = image_source_ir(room, (2, 2, 1.5), (4, 3, 1.2), 8000, max_order=2, seed=8)
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)


# ------------------------------------------------------------------ bad input


def test_positions_outside_the_room_are_refused_with_the_position_named():
    room = shoebox((6.0, 5.0, 3.0), 0.2)
    with pytest.raises(InputError, match="mic_position_m.*inside the room"):
        image_source_ir(room, (2, 2, 1.5), (7, 3, 1.2), FS, tail=False)


def test_free_shape_room_is_refused_for_image_sources():
    room = Room("hall", 1000.0, 700.0, (Surface("average", 700.0, "mix", (0.2,) * 7),))
    with pytest.raises(InputError, match="shoebox"):
        image_source_ir(room, (2, 2, 1.5), (4, 3, 1.2), FS)


# ------------------------------------------------------------------ rigs: loops from geometry

from howl.model.rig import Listener, Mic, Mix, Rig, Speaker, Talker  # noqa: E402


def one_pair_rig(room, spk_pos, mic_pos, *, pattern="omni", mic_aim=(0.0, 0.0), cov=(360.0,) * 7,
                 gain_db=20.0, spk_aim=(0.0, 0.0), delay_s=0.0):
    spk = Speaker("main", tuple(spk_pos), spk_aim[0], spk_aim[1], cov, cov, 100.0, delay_s=delay_s)
    mic = Mic("m1", tuple(mic_pos), mic_aim[0], mic_aim[1], pattern=pattern, sensitivity_dbv_pa=-50.0)
    tpos = tuple(np.asarray(mic_pos) + 0.3 * np.array([math.cos(mic_aim[0]), math.sin(mic_aim[0]), 0.0]))
    return Rig(
        "test", room, (spk,), (mic,), (Talker("t", tpos, "m1"),), (Listener("far", (room.dimensions_m[0] - 1, 2.0, 1.2)),),
        (Mix("mains", ("main",), (("m1", gain_db),)),), target_spl_db=65.0,
    )


def test_loop_ir_direct_path_carries_speaker_and_mic_sensitivity_and_the_mix():
    """Direct path at 1 kHz: p₁/r · M (free-field inverse distance law, common practice, no source)."""
    from howl.model.images import rig_loop_irs

    room = shoebox((30.0, 20.0, 12.0), 0.95)
    rig = one_pair_rig(room, (5.0, 10.0, 6.0), (9.0, 10.0, 6.0))
    irs, mix = rig_loop_irs(rig, FS, max_order=0, tail=False)
    assert irs.shape[:2] == (1, 1) and mix.shape == (1, 1)
    assert mix[0, 0] == pytest.approx(10.0)  # 20 dB
    h = irs[0, 0]
    f = np.array([1000.0])
    p1 = 20e-6 * 10 ** (100 / 20)  # 100 dB SPL at 1 m for 1 V
    m = 10 ** (-50 / 20)  # −50 dBV/Pa
    from howl.model.room import air_power_attenuation_m_inv

    air = math.exp(-0.5 * 4.0 * air_power_attenuation_m_inv(f, 20.0, 50.0)[0])
    assert np.abs(dtft(h, f))[0] == pytest.approx(p1 * m / 4.0 * air, rel=1e-3)


def test_speaker_delay_line_shifts_the_loop_ir():
    from howl.model.images import rig_loop_irs

    room = shoebox((30.0, 20.0, 12.0), 0.95)
    a, _ = rig_loop_irs(one_pair_rig(room, (5, 10, 6), (9, 10, 6)), FS, max_order=1, tail=False)
    b, _ = rig_loop_irs(one_pair_rig(room, (5, 10, 6), (9, 10, 6), delay_s=0.010), FS, max_order=1, tail=False)
    shift = int(round(0.010 * FS))
    np.testing.assert_allclose(b[0, 0, shift: shift + a.shape[2]], a[0, 0], atol=1e-9 * np.abs(a).max())


def test_real_cardioid_turned_away_loses_the_direct_path_by_its_rear_rejection():
    """The mic's own pattern (howl.directivity, frequency model) toward 180°, at 1 kHz."""
    from howl.model.directivity import mic_gain
    from howl.model.images import rig_loop_irs

    room = shoebox((30.0, 20.0, 12.0), 0.95)
    # speaker at −x of the mic, mic aimed +x: the direct sound arrives from behind
    card = one_pair_rig(room, (10.0, 10.0, 6.0), (14.0, 10.0, 6.0), pattern="cardioid")
    omni = one_pair_rig(room, (10.0, 10.0, 6.0), (14.0, 10.0, 6.0), pattern="omni")
    hc = rig_loop_irs(card, FS, max_order=1, tail=False)[0][0, 0]
    ho = rig_loop_irs(omni, FS, max_order=1, tail=False)[0][0, 0]
    n0 = int(round(4.0 / 343.2 * FS))
    win = slice(0, n0 + 40)  # the direct path only: the first reflection (the floor, ~13.4 m) is 27 ms later
    f = np.array([1000.0])
    loss = np.abs(dtft(hc[win], f)) / np.abs(dtft(ho[win], f))
    rear = abs(mic_gain(card.mics[0], np.array([[-1.0, 0.0, 0.0]]), f)[0, 0])
    # within 1.5 dB of a −40 dB rejection: the IR is cut to zero ahead of the direct sound (causality),
    # which removes the crossovers' small precursor (≈ −56 dB re the omni direct sound here)
    assert 20 * np.log10(loss[0]) == pytest.approx(20 * np.log10(rear), abs=1.5)
    assert 20 * np.log10(loss[0]) < -15.0
    # the reflection off the wall in front of the mic (x = 30) arrives on axis: kept
    n1 = int(round((2 * 30.0 - 10.0 - 14.0) / 343.2 * FS))
    w1 = slice(n1 - 30, n1 + 30)
    keep = np.abs(dtft(hc[w1], f)) / np.abs(dtft(ho[w1], f))
    assert keep[0] == pytest.approx(1.0, rel=0.05)


def test_statistical_planner_and_image_loop_agree_within_2_db_in_the_diffuse_field():
    """Far beyond the critical distance, above the Schroeder frequency, per octave band.

    The statistical side is PLANNER's Hopkins–Stryker band transfer (howl.plan); the
    image side is this module's loop IR, power-averaged per band (howl.loop).
    """
    from howl.model.images import rig_loop_irs
    from howl.loop.nyquist import band_loop_gain_db, loop_response
    from howl.model.plan import plan_rig
    from howl.model.room import critical_distance_m, room_acoustics, schroeder_frequency_hz

    alpha = (0.12, 0.12, 0.14, 0.16, 0.18, 0.2, 0.25)
    room = shoebox((20.0, 14.0, 8.0), alpha)
    # omni at both ends: a directive beam aimed at a near wall sends a strong early reflection
    # that the statistical model does not see (that is the point of the image model, not a diffuse field)
    rig = one_pair_rig(room, (3.0, 4.0, 3.0), (16.0, 10.0, 1.5), gain_db=0.0)
    ra = room_acoustics(room, np.array([500.0, 1000.0, 2000.0, 4000.0]))
    dc = critical_distance_m(1.0, ra.room_constant_m2)
    assert math.dist(rig.speakers[0].position_m, rig.mics[0].position_m) > 2.5 * np.max(dc)
    assert schroeder_frequency_hz(float(ra.rt60_eyring_s[0]), room.volume_m3) < 100.0
    plan = plan_rig(rig, fraction=1, f_lo_hz=500.0, f_hi_hz=4000.0, peak_statistics=False)
    stat_db = plan.mics[0].loop_gain_db
    irs, mix = rig_loop_irs(rig, FS, max_order=5, seed=11)
    f, H = loop_response(irs[0, 0] * mix[0, 0], FS)
    img_db = band_loop_gain_db(f, H, plan.bands_hz, 1)
    # A consistency check between two of howl's models (each checked against outside references elsewhere:
    # the statistical transfer against the Handbook's equations, the image IRs against pyroomacoustics).
    # Over the four octaves they agree within 0.5 dB on average (here +0.06 dB). A single band may differ by
    # up to 2 dB: the octave average of one response scatters by only ~0.2 dB here (B·T ≈ 600 samples), but
    # the coherent early reflections are outside the statistical model (the floor bounce is 0.61 m longer
    # than the direct path, a comb of 563 Hz period that an octave does not average out): at 1 kHz the image
    # loop lies 1.6-1.8 dB above the statistical one for seeds 11-14 (seen while writing this comment).
    np.testing.assert_allclose(img_db, stat_db, atol=2.0)
    assert abs(np.mean(img_db - stat_db)) <= 0.5, img_db - stat_db


def test_plan_with_images_gives_phase_aware_margins_beside_the_statistical_spread():
    from howl.model.images import plan_with_images

    room = shoebox((12.0, 9.0, 5.0), (0.15, 0.15, 0.18, 0.2, 0.22, 0.25, 0.3))
    rig = one_pair_rig(room, (2.0, 2.0, 2.5), (6.0, 5.0, 1.4), pattern="cardioid", mic_aim=(math.pi, 0.0),
                       gain_db=30.0, cov=(300, 240, 180, 120, 90, 90, 90))
    out = plan_with_images(rig, sample_rate_hz=8000)
    m = out["mics"][0]
    assert m["name"] == "m1"
    # phase-aware margin is never below the phase-blind one (|Re L| ≤ |L|)
    assert m["gain_margin_db"] >= m["magnitude_margin_db"] - 1e-6
    assert out["band_hz"][0] <= m["howl_freq_hz"] <= out["band_hz"][1]
    # The figures against scipy: the same loop (rig_loop_irs at the defaults plan_with_images uses: seed 0,
    # its default order) through scipy.signal.freqz on a 2^20-point grid; the phase-aware margin is
    # −20·log10 of the largest Re L where Im L changes sign with Re L > 0 (linear interpolation between grid
    # points), the phase-blind one −20·log10 max|L|, both in the band. The grid step (0.004 Hz) puts the
    # interpolation error far below the JSON's 0.01 dB rounding: tolerance 0.011 dB, 0.1 Hz.
    from howl.model.images import rig_loop_irs

    irs, mix = rig_loop_irs(rig, 8000, seed=0)
    f_lo, f_hi = out["band_hz"]
    w, H = signal.freqz(irs[0, 0] * mix[0, 0], worN=1 << 20, fs=8000)
    sel = (w >= f_lo) & (w <= f_hi)
    w, H = w[sel], H[sel]
    i = np.flatnonzero((np.sign(H.imag[:-1]) != np.sign(H.imag[1:])) & ((H.real[:-1] > 0) | (H.real[1:] > 0)))
    t = H.imag[i] / (H.imag[i] - H.imag[i + 1])
    re_x = H.real[i] + t * (H.real[i + 1] - H.real[i])
    j = int(np.argmax(re_x))
    assert m["gain_margin_db"] == pytest.approx(-20 * np.log10(re_x[j]), abs=0.011)
    assert m["howl_freq_hz"] == pytest.approx(w[i[j]] + t[j] * (w[i[j] + 1] - w[i[j]]), abs=0.1)
    assert m["magnitude_margin_db"] == pytest.approx(-20 * np.log10(np.max(np.abs(H))), abs=0.011)
    lo, hi = m["statistical_spread_db"]
    assert lo <= m["statistical_margin_db"] <= hi
    assert m["max_channel_gain_db"] == pytest.approx(m["gain_margin_db"] - rig.fsm_db, abs=0.011)
    assert "depend on details the model lacks" in out["caution"]
    assert any("Caution" in line for line in out["lines"])
    assert out["system"]["worst_mic"] == "m1"


def test_image_count_is_the_octahedral_number_and_omni_irs_are_reciprocal():
    """|kx|+|ky|+|kz| ≤ N holds (2N+1)(2N²+2N+3)/3 points (the centred octahedral numbers,
    OEIS A001845); with omni ends and equal walls, swapping source and mic leaves the IR
    unchanged (acoustic reciprocity; Allen & Berkley 1979 build on it)."""
    for n in (0, 1, 2, 7):
        assert shoebox_images((5.0, 4.0, 3.0), (1.0, 1.0, 1.0), n).order.size == (2 * n + 1) * (2 * n * n + 2 * n + 3) // 3
    room = shoebox((7.0, 5.0, 3.0), (0.1, 0.2, 0.3, 0.3, 0.4, 0.5, 0.6))
    a = image_source_ir(room, (1.2, 3.1, 1.1), (5.3, 1.4, 2.2), FS, max_order=6, tail=False)
    b = image_source_ir(room, (5.3, 1.4, 2.2), (1.2, 3.1, 1.1), FS, max_order=6, tail=False)
    np.testing.assert_allclose(a, b, atol=1e-12 * np.abs(a).max())


def test_too_many_images_are_refused_with_the_order_named():
    room = shoebox((7.0, 5.0, 3.0), 0.2)
    with pytest.raises(InputError, match="max_order"):
        image_source_ir(room, (1, 1, 1), (2, 2, 2), FS, max_order=140, tail=False)


def test_ir_is_silent_before_the_direct_sound_arrives():
    """Causality: nothing before d/c minus the fractional-delay filter's half length (common practice, no source)."""
    room = shoebox((12.0, 9.0, 5.0), (0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6))
    src, mic = (2.0, 2.0, 2.0), (9.0, 7.0, 1.5)
    h = image_source_ir(room, src, mic, FS, max_order=3, seed=2)
    n0 = int(math.dist(src, mic) / 343.2 * FS) - 16
    assert h[0] == 0.0 and np.all(h[:n0] == 0.0)
    assert np.any(h[n0: n0 + 40] != 0.0)


def test_tail_carries_the_energy_of_the_missing_images_after_the_transition():
    """In the first 100 ms after the transition, order 3 + tail has the band energy of order 30 without tail.

    Reference: the image method itself carried far enough (Allen & Berkley 1979); band
    energies of the tail averaged over four seeds. Within 2 dB (the image decay of a
    shoebox is not exactly Eyring's, from memory: Kuttruff, Room Acoustics, §4.2).
    """
    room = shoebox((12.0, 9.0, 5.0), (0.1, 0.12, 0.15, 0.18, 0.2, 0.25, 0.3))
    src, mic = (3.0, 4.0, 1.6), (9.5, 6.5, 1.5)
    ref = image_source_ir(room, src, mic, FS, max_order=30, tail=False, air_absorption=False)
    runs = [image_source_ir(room, src, mic, FS, max_order=3, seed=s, air_absorption=False, return_info=True)
            for s in range(4)]
    t_x = runs[0][1].transition_time_s
    i, j = int(t_x * FS), int((t_x + 0.1) * FS)
    for centre in (250.0, 500.0, 1000.0, 2000.0, 4000.0):
        sos = signal.butter(4, [centre / 2**0.5, centre * 2**0.5], btype="bandpass", fs=FS, output="sos")
        e_ref = np.sum(signal.sosfiltfilt(sos, ref)[i:j] ** 2)
        e_tail = np.mean([np.sum(signal.sosfiltfilt(sos, h)[i:j] ** 2) for h, _ in runs])
        assert 10 * np.log10(e_tail / e_ref) == pytest.approx(0.0, abs=2.0), centre


def test_one_band_synthesis_from_the_kernel_table_equals_the_exact_kernels():
    # derived: linear interpolation between kernel rows 1/1024 sample apart; the kernel's second
    # derivative in the delay is O(π²), so the error is below (1/1024)²·π²/8 ≈ 1e-6 of the taps
    from howl.model.images import _fractional_delay_kernel, _place_images

    rng = np.random.default_rng(5)
    delay = np.concatenate([rng.uniform(3.0, 4000.0, 3000), [0.0, 1.0 - 1e-12, 12.0, 3999.999999]])
    gain = rng.uniform(-1.0, 1.0, delay.size)
    n = 4000
    got = _place_images(delay, gain, 16, n)
    start, taps = _fractional_delay_kernel(delay, 16, scale=gain)
    idx = start[:, None] + np.arange(32)
    ok = (idx >= 0) & (idx < n)
    ref = np.zeros(n)
    np.add.at(ref, idx[ok], taps[ok])
    assert np.max(np.abs(got - ref)) < 2e-6 * np.max(np.abs(gain))


def test_flat_absorption_ir_at_a_high_order_matches_pyroomacoustics(pra_no_hpf):
    # reference: pyroomacoustics' shoebox engine (flat absorption, order 12), scaled by 1/(4π), shifted by
    # its 40-sample filter delay; the two fractional-delay filters differ (81-tap Hann vs 32-tap Blackman),
    # so compare below 0.4·fs where both are flat
    c = pra_no_hpf
    dims, src, mic = (7.3, 5.1, 3.2), (1.9, 3.4, 1.3), (5.2, 1.6, 1.7)
    ours = image_source_ir(shoebox(dims, 0.25), src, mic, FS, max_order=12, tail=False,
                           air_absorption=False, speed_of_sound_m_s=c)
    ref = pra_ir(dims, 0.25, src, mic, 12)  # already shifted and scaled
    n = min(ours.size, ref.size)
    sos = signal.butter(8, 0.4 * FS, fs=FS, output="sos")
    a, b = signal.sosfiltfilt(sos, ours[:n]), signal.sosfiltfilt(sos, ref[:n])
    assert np.sum((a - b) ** 2) / np.sum(b**2) < 1e-5  # about 1e-6 here: both filters are flat below 0.4·fs
