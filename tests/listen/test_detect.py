"""The ringing/howl detector: feature definitions on synthetic signals, then synthetic truth
from the project's closed-loop simulator with loop IRs from pyroomacoustics.

Feature definitions follow van Waterschoot & Moonen, JAES 58(11) 2010 (from memory of the
paper; the exact notation was not seen). Independent references used here: numpy tones of
known frequency and growth (exact by construction), scipy.signal.freqz for the loop's
crossings and margin, scipy.signal.stft for when a howl dominates, pyroomacoustics 0.10.1
for the room IRs. False-alarm counts on every no-howl case are printed (``-s``) and must be 0.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest

from howl.listen import detect as D
from howl.errors import InputError

# ----------------------------------------------------------------------------- synthetic programs


def speech_like(fs: float, dur_s: float, seed: int, rms: float = 0.03) -> np.ndarray:
    """Voiced syllables (our own model): harmonic complex with f0 gliding in 95–230 Hz,
    three formant bumps, sin² syllable envelopes 0.12–0.35 s, pauses 0.03–0.25 s."""
    rng = np.random.default_rng(seed)
    n = int(dur_s * fs)
    t = np.arange(n) / fs
    x = np.zeros(n)
    pos = 0.05
    while pos < dur_s - 0.2:
        length = rng.uniform(0.12, 0.35)
        i0, i1 = int(pos * fs), min(n, int((pos + length) * fs))
        tt = t[i0:i1] - pos
        f_a, f_b = rng.uniform(95, 230, 2)
        f0 = f_a + (f_b - f_a) * tt / length
        ph = 2 * np.pi * np.cumsum(f0) / fs + rng.uniform(0, 2 * np.pi)
        formants = rng.uniform([300, 900, 2200], [800, 1800, 3000])
        seg = np.zeros(tt.size)
        for h in range(1, int(0.45 * fs / 230)):
            fh = h * f0
            amp = sum(np.exp(-0.5 * ((fh - F) / (0.1 * F + 60)) ** 2) for F in formants) / h ** 0.5 + 0.02
            seg += amp * np.sin(h * ph) * (fh < 0.45 * fs)
        x[i0:i1] += np.sin(np.pi * tt / length) ** 2 * seg
        pos += length + rng.uniform(0.03, 0.25)
    return rms * x / np.sqrt(np.mean(x ** 2))


def music_like(fs: float, dur_s: float, seed: int, vibrato: bool = True, rms: float = 0.03) -> np.ndarray:
    """Three voices of sustained harmonic notes (our own model): 0.5–2 s notes on a
    semitone grid from 110 Hz, 8 partials at 0.7^(h−1), vibrato 5–6.5 Hz of ±0.5–1.5 %
    fading in over 0.3 s, 40 ms attack, exponential decay, 80 ms release."""
    rng = np.random.default_rng(seed)
    n = int(dur_s * fs)
    t = np.arange(n) / fs
    x = np.zeros(n)
    for _voice in range(3):
        pos = rng.uniform(0, 0.3)
        while pos < dur_s - 0.3:
            length = rng.uniform(0.5, 2.0)
            i0, i1 = int(pos * fs), min(n, int((pos + length) * fs))
            tt = t[i0:i1] - pos
            f = 110 * 2 ** (rng.integers(0, 30) / 12)
            depth = rng.uniform(0.005, 0.015) if vibrato else 0.0
            rate = rng.uniform(5, 6.5)
            fi = f * (1 + depth * np.sin(2 * np.pi * rate * tt) * np.minimum(1, tt / 0.3))
            ph = 2 * np.pi * np.cumsum(fi) / fs
            seg = sum(0.7 ** (h - 1) * np.sin(h * ph + rng.uniform(0, 2 * np.pi)) for h in range(1, 9) if h * f < 0.45 * fs)
            env = np.minimum(1, tt / 0.04) * np.exp(-tt * rng.uniform(0.3, 2.0)) * np.minimum(1, (length - tt) / 0.08)
            x[i0:i1] += env * seg
            pos += length + rng.uniform(0.0, 0.2)
    return rms * x / np.sqrt(np.mean(x ** 2))


def tone(fs: float, freq_hz: float, dur_s: float, start_db: float, growth_db_per_s: float, phase: float = 0.3) -> np.ndarray:
    t = np.arange(int(dur_s * fs)) / fs
    return 10 ** ((start_db + growth_db_per_s * t) / 20) * np.sin(2 * np.pi * freq_hz * t + phase)


def held_note_crescendo(fs: float, freq_hz: float, growth_db_per_s: float, dur_s: float = 5.0) -> np.ndarray:
    """A held harmonic note without vibrato (organ- or synth-like, our own model): 6 partials at
    0.6^(h−1), the whole note swelling on a straight line in dB from −45 dBFS."""
    t = np.arange(int(dur_s * fs)) / fs
    ph = 2 * np.pi * freq_hz * t
    partials = sum(0.6 ** (h - 1) * np.sin(h * ph + h) for h in range(1, 7) if h * freq_hz < 0.45 * fs)
    return 10 ** ((-45 + growth_db_per_s * t) / 20) * partials


def sung_vowel_swell(fs: float, freq_hz: float, growth_db_per_s: float, vibrato: float, dur_s: float = 5.0) -> np.ndarray:
    """A tone-like sung vowel (our own model): strong fundamental, 2nd partial 12 dB and 3rd 22 dB
    down, vibrato of ±``vibrato`` at 5.5 Hz fading in over 0.5 s, swelling for 3.5 s."""
    t = np.arange(int(dur_s * fs)) / fs
    fi = freq_hz * (1 + vibrato * np.sin(2 * np.pi * 5.5 * t) * np.minimum(1, t / 0.5))
    ph = 2 * np.pi * np.cumsum(fi) / fs
    return 10 ** ((-45 + growth_db_per_s * np.minimum(t, 3.5)) / 20) * (
        np.sin(ph) + 0.25 * np.sin(2 * ph + 1) + 0.08 * np.sin(3 * ph + 2))


def flute_swell(fs: float, freq_hz: float, growth_db_per_s: float, tremolo_phase: float, seed: int = 50,
                dur_s: float = 5.0) -> np.ndarray:
    """A flute-like near-sinusoid (our own model): ±0.5 % vibrato and ±1.5 dB tremolo at 5 Hz,
    2nd/3rd partials 26/34 dB down, a 2 s swell from −50 dBFS, breath noise at −70 dBFS."""
    t = np.arange(int(dur_s * fs)) / fs
    ph = 2 * np.pi * np.cumsum(freq_hz * (1 + 0.005 * np.sin(2 * np.pi * 5 * t))) / fs
    lv = -50 + growth_db_per_s * np.minimum(t, 2.0) + 1.5 * np.sin(2 * np.pi * 5 * t + tremolo_phase)
    x = 10 ** (lv / 20) * (np.sin(ph) + 0.05 * np.sin(2 * ph) + 0.02 * np.sin(3 * ph))
    return x + 10 ** (-70 / 20) * np.random.default_rng(seed).standard_normal(t.size)


def plucked_note(fs: float, freq_hz: float, decay_db_per_s: float, inharmonicity: float = 0.0,
                 dur_s: float = 5.0, seed: int = 0) -> np.ndarray:
    """A plucked or struck note (our own model): 12 partials at 0.7^(h−1), the h-th at
    h·f·sqrt(1 + B·h²) (string inharmonicity B), each decaying at decay·sqrt(h) dB/s from a
    5 ms attack (higher partials die faster), noise at −100 dBFS."""
    t = np.arange(int(dur_s * fs)) / fs
    x = np.zeros(t.size)
    for h in range(1, 13):
        fh = h * freq_hz * np.sqrt(1 + inharmonicity * h * h)
        if fh > 0.45 * fs:
            break
        x += 0.7 ** (h - 1) * 10 ** (-decay_db_per_s * np.sqrt(h) * t / 20) * np.sin(2 * np.pi * fh * t + h)
    x *= 0.3 * np.minimum(1, t / 0.005)
    return x + 1e-5 * np.random.default_rng(seed).standard_normal(t.size)


def _scaled_to_unity(h: np.ndarray, fs: float):
    """Scale a loop IR so its largest positive real-axis crossing is exactly 1 (0 dB margin).
    Returns (ir, crossings_freq_hz, crossings_margin_db): the crossings from a dense
    scipy.signal.freqz grid (2^20 points, linear interpolation of Im = 0)."""
    from scipy.signal import freqz

    w, H = freqz(h, worN=2 ** 20, fs=fs)
    im = H.imag
    idx = np.nonzero((im[:-1] * im[1:] < 0))[0]
    a = im[idx] / (im[idx] - im[idx + 1])
    re = H.real[idx] + a * (H.real[idx + 1] - H.real[idx])
    f = w[idx] + a * (w[idx + 1] - w[idx])
    pos = re > 0
    f, re = f[pos], re[pos]
    return h / re.max(), f, -20 * np.log10(re / re.max())


@functools.lru_cache(maxsize=None)
def room_loop(seed: int, fs: int = 16000, n_keep_s: float = 0.15, hp_hz: float = 120.0):
    """A loop IR from pyroomacoustics (image sources, Sabine-inverted absorption) through a
    ``hp_hz`` 2nd-order high-pass and a 6 kHz 4th-order low-pass (speaker/mic passband),
    scaled so that its largest positive real-axis crossing is exactly 1 (0 dB margin).

    Returns (ir, crossings_freq_hz, crossings_margin_db): the crossings from a dense
    scipy.signal.freqz grid (2^20 points, linear interpolation of Im = 0).
    """
    import pyroomacoustics as pra
    from scipy.signal import butter, sosfilt

    rng = np.random.default_rng(seed)
    dims = [rng.uniform(5, 9), rng.uniform(4, 7), rng.uniform(2.7, 4)]
    src = [rng.uniform(1, dims[0] - 1), rng.uniform(1, dims[1] - 1), 1.8]
    mic = [rng.uniform(1, dims[0] - 1), rng.uniform(1, dims[1] - 1), 1.5]
    e_abs, order = pra.inverse_sabine(rng.uniform(0.4, 0.8), dims)
    room = pra.ShoeBox(dims, fs=fs, materials=pra.Material(e_abs), max_order=min(order, 12))
    room.add_source(src)
    room.add_microphone(mic)
    room.compute_rir()
    h = np.asarray(room.rir[0][0], float)
    h = sosfilt(butter(2, hp_hz, "highpass", fs=fs, output="sos"), h)
    h = sosfilt(butter(4, 6000, "lowpass", fs=fs, output="sos"), h)
    h = h[: int(n_keep_s * fs)]
    h = h * np.hanning(2 * h.size)[h.size:] ** 0.1  # short fade to avoid a truncation step
    return _scaled_to_unity(h, fs)


@functools.lru_cache(maxsize=None)
def low_room_loop(seed: int, fs: int = 16000):
    """A loop whose worst crossings are low (80–170 Hz): a pyroomacoustics room with a longer
    reverberation (RT60 0.9–1.6 s, image sources to order 20), a 60 Hz high-pass, +10 dB of lift
    below ~250 Hz (a vocal mic used close: proximity effect) and the 6 kHz low-pass, scaled so its
    largest positive real-axis crossing is 1. Returns (ir, crossings_freq_hz, crossings_margin_db)
    as :func:`room_loop` does."""
    import pyroomacoustics as pra
    from scipy.signal import butter, sosfilt
    rng = np.random.default_rng(seed)
    dims = [rng.uniform(6, 12), rng.uniform(5, 9), rng.uniform(3, 6)]
    src = [rng.uniform(1, dims[0] - 1), rng.uniform(1, dims[1] - 1), 1.8]
    mic = [rng.uniform(1, dims[0] - 1), rng.uniform(1, dims[1] - 1), 1.5]
    e_abs, order = pra.inverse_sabine(rng.uniform(0.9, 1.6), dims)
    room = pra.ShoeBox(dims, fs=fs, materials=pra.Material(e_abs), max_order=min(order, 20))
    room.add_source(src)
    room.add_microphone(mic)
    room.compute_rir()
    h = np.asarray(room.rir[0][0], float)
    h = sosfilt(butter(2, 60, "highpass", fs=fs, output="sos"), h)
    h = h + (10 ** (10 / 20) - 1) * sosfilt(butter(2, 250, "lowpass", fs=fs, output="sos"), h)
    h = sosfilt(butter(4, 6000, "lowpass", fs=fs, output="sos"), h)
    n = min(h.size, int(1.2 * fs))
    h = h[:n] * np.hanning(2 * n)[n:] ** 0.1
    return _scaled_to_unity(h, fs)


def closed_loop_modes(h: np.ndarray, gain_db: float, freqs_hz: np.ndarray, fs: float):
    """The closed loop's natural modes near the given crossing frequencies: poles p of
    1 / (1 − g·H(z)), found by Newton's method on g·H(p) = 1 from p = exp(j·2π·f/fs) (derived:
    a pole is a mode pⁿ of the loop's recursion, so its angle is the howl's frequency and
    20·log10|p|·fs its growth in dB/s; a crossing's frequency is where the phase condition holds
    on the unit circle only, and a loop well past unity howls off it, by up to 0.5 % at 160 Hz).
    Returns (freq_hz, growth_db_per_s) arrays."""
    n = np.arange(h.size, dtype=float)
    g = 10 ** (gain_db / 20)
    out = []
    for f in np.atleast_1d(freqs_hz):
        z = np.exp(2j * np.pi * f / fs)
        for _ in range(50):
            zn = z ** -n
            step = (g * np.dot(h, zn) - 1) / (g * np.dot(-n * h, zn) / z)
            z -= step
            if abs(step) < 1e-12:
                break
        out.append((np.angle(z) * fs / (2 * np.pi), 20 * np.log10(abs(z)) * fs))
    a = np.array(out, float).reshape(-1, 2)
    return a[:, 0], a[:, 1]


def t_dominates(y: np.ndarray, fs: float, freq_hz: float, program_rms: float, t_from: float) -> float:
    """First time after ``t_from`` when the power within ±3 % of ``freq_hz`` (scipy STFT,
    64 ms Hann frames) exceeds the program's mean power: the howl is as loud as the program."""
    from scipy.signal import stft

    nper = 1024
    fr, tt, Z = stft(y, fs, window="hann", nperseg=nper, noverlap=nper - 160, scaling="psd")
    P = np.abs(Z) ** 2 * (fs / 2)  # per-bin power (sum over bins ≈ signal power); constant cancels anyway
    Pr = P.sum(axis=0)
    band = np.abs(fr - freq_hz) <= max(0.03 * freq_hz, 3 * fs / nper)
    pb = P[band].sum(axis=0)
    # calibrate: total STFT power of a frame vs the waveform's power
    scale = np.mean(y[: int(fs)] ** 2) / max(np.mean(Pr[tt < 1.0]), 1e-300)
    idx = np.nonzero((tt >= t_from) & (pb * scale > program_rms ** 2))[0]
    return float(tt[idx[0]]) if idx.size else float("inf")


FALSE_ALARMS: dict[str, int] = {}


def _record(name: str, events) -> int:
    FALSE_ALARMS[name] = len(events)
    print(f"false alarms [{name}]: {len(events)}")
    return len(events)


# ----------------------------------------------------------------------------- feature definitions


@pytest.mark.parametrize("fs", [16000, 44100, 48000])
def test_gaussian_log_parabola_frequency_is_far_below_a_bin(fs):
    # Exact by construction: a sine of known frequency. Target < 0.1 %; the Gaussian
    # window makes the log-parabola nearly exact (Gasior & Gonzalez 2004).
    rng = np.random.default_rng(7)
    det = D.Detector(fs)
    for f in rng.uniform(150, 0.4 * fs, 8):
        x = np.sin(2 * np.pi * f * np.arange(det.n_win) / fs + 0.7)
        X = np.fft.rfft(x * det.win)
        k = int(np.argmax(np.abs(X)))
        kf, ln_peak = D.estimate_peak(np.log(np.abs(X)), np.array([k]))
        err = abs(kf[0] * det.bin_hz - f) / f
        assert err < 1e-4, (f, err)
        # amplitude: |X| = A·Σw/2 (within 0.1 dB)
        assert abs(20 * np.log10(np.exp(ln_peak[0]) * det._amp_norm)) < 0.1


def test_imsd_is_zero_for_a_straight_line_in_db_and_not_for_a_bend():
    # Definition (van Waterschoot & Moonen 2010, from memory): s_j = (L(t)-L(t-j))/j, IMSD = mean|s_j - mean s|.
    line = 3.0 + 0.5 * np.arange(6)  # 0.5 dB per step
    assert D.imsd_db_per_s(line, 0.01) == pytest.approx(0.0, abs=1e-9)
    bent = np.array([0.0, 0.0, 0.0, 0.0, 0.0, 3.0])  # an onset: s_j = 3/(j·dt)
    s = 3.0 / (np.arange(1, 6) * 0.01)
    assert D.imsd_db_per_s(bent, 0.01) == pytest.approx(np.mean(np.abs(s - s.mean())))


def test_pnpr_and_phpr_tell_a_pure_tone_from_a_harmonic_note():
    fs = 48000
    det = D.Detector(fs)
    n = det.n_win
    t = np.arange(n) / fs
    pure = np.sin(2 * np.pi * 1000.3 * t)
    harm = sum(0.7 ** (h - 1) * np.sin(2 * np.pi * 250.1 * h * t) for h in range(1, 9))
    for x, is_pure in ((pure, True), (harm, False)):
        P = np.abs(np.fft.rfft(x * det.win)) ** 2
        k = int(np.argmin(np.abs(np.arange(P.size) * det.bin_hz - 1000.3)))
        k = k - 1 + int(np.argmax(P[k - 1:k + 2]))
        pn = D.pnpr_db(P, k)
        ph = D.phpr_db(P, float(k))
        if is_pure:
            assert pn > 30 and ph > 50  # nearest neighbour bin can be 3.5 bins off: ≈ -33 dB for σ = 1.27 bins
        else:
            # 1000 Hz is the 4th partial: the 3rd (3/4) and the fundamental (1/4 via 1/2 of the 2nd) carry power
            assert pn > 30 and ph < 6
    # PAPR: the largest of ~2000 exponential(1) noise bins is ~ ln(2000) = 7.6 times the mean
    # (8.8 dB; extreme-value statistics, from memory); a sine 30 dB above the noise stands out
    rng = np.random.default_rng(3)
    noise = 0.01 * rng.standard_normal(n)
    for x, lo, hi in ((pure + noise, 25.0, np.inf), (noise, 0.0, 12.0)):
        P = np.abs(np.fft.rfft(x * det.win)) ** 2
        assert lo < D.papr_db(P, int(np.argmax(P))) < hi


def test_ipmp_counts_the_fraction_of_frames_present():
    assert D.ipmp([1, 1, 0, 1, 1]) == pytest.approx(0.8)
    assert D.ipmp([]) == 0.0


def test_margin_is_decay_rate_times_loop_delay():
    # first principles: gain k per round trip tau -> -20 log10 k / tau dB/s
    k, tau = 10 ** (-1.5 / 20), 0.012
    assert D.margin_from_decay_db(-20 * np.log10(k) / tau, tau) == pytest.approx(1.5)


def test_loop_delay_of_a_pure_delay_is_the_delay():
    h = np.zeros(200)
    h[96] = 0.8
    assert D.loop_delay_s(h, 48000, 1234.0) == pytest.approx(96 / 48000)
    assert D.loop_delay_s(h, 48000, 1234.0, effective=False) == pytest.approx(96 / 48000)


def test_bad_sample_rate_and_nan_samples_are_refused():
    with pytest.raises(InputError, match="sample_rate_hz"):
        D.Detector(100.0)
    with pytest.raises(InputError, match="signal"):
        D.detect(np.array([0.0, np.nan] * 1000), 48000)
    with pytest.raises(InputError, match="n_candidates"):
        D.Detector(16000, D.DetectorConfig(n_candidates=0))
    with pytest.raises(InputError, match="rise_min_pnpr_one_side_db"):
        D.Detector(16000, D.DetectorConfig(rise_min_pnpr_one_side_db=-3.0))  # a purity below 0 dB


# ----------------------------------------------------------------------------- synthetic tones


@pytest.mark.parametrize("fs, f, growth", [(48000, 1234.5, 20.0), (16000, 317.7, 8.0), (44100, 6543.2, 60.0)])
def test_a_tone_growing_on_a_straight_line_in_db_is_a_howl(fs, f, growth):
    rng = np.random.default_rng(11)
    x = tone(fs, f, 3.0, -75, growth) + 10 ** (-65 / 20) * rng.standard_normal(3 * fs)
    r = D.detect(x, fs)
    howls = [e for e in r.events if e.kind == "howl"]
    assert len(howls) == 1, r.events
    e = howls[0]
    assert abs(e.freq_hz - f) / f < 1e-3  # target < 0.1 %
    assert e.growth_db_per_s == pytest.approx(growth, rel=0.15)
    assert e.imsd_db_per_s < D.DetectorConfig().max_imsd_db_per_s + 0.6 * growth


def test_a_tone_decaying_on_a_straight_line_is_ringing_with_its_decay_rate():
    fs = 48000
    rng = np.random.default_rng(12)
    x = np.concatenate([np.zeros(fs // 2), tone(fs, 873.2, 2.0, -12, -40.0)])
    x = x + 10 ** (-90 / 20) * rng.standard_normal(x.size)
    r = D.detect(x, fs, loop_delay_s=0.025)
    ring = [e for e in r.events if e.kind == "ringing"]
    assert len(ring) == 1, r.events
    assert abs(ring[0].freq_hz - 873.2) / 873.2 < 1e-3
    assert ring[0].decay_db_per_s == pytest.approx(40.0, rel=0.05)
    assert ring[0].margin_db == pytest.approx(40.0 * 0.025, rel=0.05)


def test_streaming_in_small_blocks_gives_the_same_events_as_one_call():
    fs = 16000
    rng = np.random.default_rng(5)
    x = tone(fs, 1500.0, 2.5, -70, 25.0) + 1e-3 * rng.standard_normal(int(2.5 * fs))
    a = D.detect(x, fs).events
    b = D.detect(x, fs, block_samples=333).events
    assert [(e.kind, round(e.freq_hz, 6), e.time_s) for e in a] == [(e.kind, round(e.freq_hz, 6), e.time_s) for e in b]


def _beside_a_louder_partial(fs: float) -> np.ndarray:
    """A howl (578.3 Hz, 60 dB/s from -80 dBFS) beginning 2 s into a held harmonic note whose
    2nd partial (622 Hz) is 4 bins above it at 16 kHz and 25-45 dB louder while the howl rises."""
    t = np.arange(int(3.0 * fs)) / fs
    note = 0.03 * sum(0.7 ** (h - 1) * np.sin(2 * np.pi * h * 311.0 * t + h) for h in range(1, 6))
    howl = np.where(t >= 2.0, tone(fs, 578.3, t.size / fs, -200.0, 60.0), 0.0)  # -80 dBFS at t = 2 s
    return note + howl


def test_a_howl_beside_a_louder_partial_is_found_while_still_under_it_at_the_right_frequency():
    # Truth by construction (the tone's frequency and start). The partial 4 bins away leaks into the
    # howl's upper neighbour bin; the frequency from the quieter side must stay within 0.1 %.
    fs = 16000
    x = _beside_a_louder_partial(fs)
    howls = [e for e in D.detect(x, fs).events if e.kind == "howl"]
    assert howls, "not found"
    e = howls[0]
    assert abs(e.freq_hz - 578.3) / 578.3 < 1e-3, e
    partial_db = 20 * np.log10(0.03 * 0.7)  # the 622 Hz partial, dBFS of a sine amplitude
    assert e.level_db < partial_db, e  # found while the howl is still under the partial beside it
    assert e.growth_db_per_s == pytest.approx(60.0, rel=0.15)


def test_a_slow_low_howl_beside_a_louder_note_is_found_while_still_under_it():
    # Truth by construction: a 158.3 Hz tone growing 12 dB/s from -75 dBFS (a low howl in a
    # reverberant room) starts 1 s into a held harmonic note at 146.8 Hz (D3), 11.5 Hz = 4 lane
    # bins below it and 20-45 dB louder while it rises. The low lane judges it by contrast of
    # growth on its quieter side (contrast_min_pnpr_one_side_db); without that, and by the main
    # lane alone, it was not found at all in 6 s (measured 2026-12-02).
    fs = 16000
    t = np.arange(int(6.0 * fs)) / fs
    note = 0.03 * sum(0.7 ** (h - 1) * np.sin(2 * np.pi * h * 146.8 * t + h) for h in range(1, 6))
    howl = np.where(t >= 1.0, tone(fs, 158.3, t.size / fs, -87.0, 12.0), 0.0)  # -75 dBFS at t = 1 s
    howls = [e for e in D.detect(note + howl, fs).events if e.kind == "howl"]
    assert howls, "not found"
    e = howls[0]
    assert abs(e.freq_hz - 158.3) / 158.3 < 1e-3, e
    assert e.level_db < 20 * np.log10(0.03), e  # still under the note beside it
    assert e.growth_db_per_s == pytest.approx(12.0, rel=0.15)


def test_two_howls_growing_at_once_near_a_harmonic_ratio_are_both_found():
    # 1395.2 and 1875.6 Hz (0.744: 0.8 % off 3/4) both grow at 60 dB/s: they co-modulate, but they are
    # not partials of one sound, so neither explains the other away.
    fs = 16000
    x = tone(fs, 1395.2, 2.0, -90, 60.0) + tone(fs, 1875.6, 2.0, -92, 60.0, phase=1.1)
    x = x + 1e-4 * np.random.default_rng(3).standard_normal(x.size)
    found = sorted(round(e.freq_hz) for e in D.detect(x, fs).events if e.kind == "howl")
    assert found == [1395, 1876], found


def test_streaming_gives_the_same_events_when_held_rising_candidates_cross_blocks():
    fs = 16000
    x = _beside_a_louder_partial(fs)
    a = [(e.kind, round(e.freq_hz, 6), e.time_s) for e in D.detect(x, fs).events]
    assert a
    for b in (160, 333, 1024):
        assert [(e.kind, round(e.freq_hz, 6), e.time_s) for e in D.detect(x, fs, block_samples=b).events] == a


def test_a_low_pure_tone_is_not_explained_away_by_its_own_main_lobe():
    # At low bins the partner windows of the multiples near 1 (3/4 … 5/6) reach the peak's own main
    # lobe; the peak must not count as its own partner. Truth by construction: a pure 131 Hz tone.
    fs = 16000
    x = tone(fs, 131.0, 3.0, -70, 20.0) + 1e-4 * np.random.default_rng(8).standard_normal(3 * fs)
    howls = [e for e in D.detect(x, fs).events if e.kind == "howl"]
    assert howls and abs(howls[0].freq_hz - 131.0) / 131.0 < 1e-3, howls
    assert howls[0].phpr_db > 30.0, howls[0]


#: low cases that the low lane (2.9 Hz bins below 300 Hz) reports first: measured 2026-12-02,
#: the main lane alone missed both (low_lane_hz=None); the lane finds them 0.5 / 2.2 s early
LOW_LANE_CASES = [(31, "music", 2.0), (30, "music", 0.5)]


@pytest.mark.parametrize("seed, program, over_db",
                         [(37, "speech", 2.0), (31, "speech", 3.0), (37, "music", 2.0)] + LOW_LANE_CASES)
def test_low_howl_in_a_reverberant_room_loop_is_found_before_it_dominates(seed, program, over_db):
    # Low crossings (101 / 120 / 129 Hz) in pyroomacoustics rooms with 1–1.6 s of reverberation:
    # the howl grows slowly (2–15 dB/s) among the voice's own harmonics.
    from howl.loop.simulate import simulate_closed_loop

    fs = 16000
    h, cross_f, cross_m = low_room_loop(seed)
    x = speech_like(fs, 8, seed) if program == "speech" else music_like(fs, 8, seed + 10)
    g = np.full(x.size, -6.0)
    g[2 * fs:] = over_db
    y = simulate_closed_loop(h, x, fs, gain_db=g)
    unstable, growth = closed_loop_modes(h, over_db, cross_f[cross_m - over_db < 0], fs)
    howls = [e for e in D.detect(y, fs).events if e.kind == "howl"]
    assert howls, "not found"
    first = howls[0]
    i = int(np.argmin(np.abs(unstable / first.freq_hz - 1)))
    assert abs(unstable[i] / first.freq_hz - 1) < 1e-3, (first, unstable)
    # its growth is the mode's (the detector fits 0.1–0.6 s of howl under program; the tolerance,
    # 1 dB/s or 10 %, is our own choice; measured 2026-12-02: within 0.2 dB/s)
    assert abs(first.growth_db_per_s - growth[i]) < max(1.0, 0.1 * growth[i]), (first, growth[i])
    t_dom = min(t_dominates(y, fs, f, float(np.sqrt(np.mean(x ** 2))), 2.0) for f in unstable)
    print(f"low loop {seed} {program} +{over_db} dB: {first.freq_hz:.2f} Hz (mode {unstable[i]:.2f} Hz) at "
          f"{first.time_s:.2f} s, dominates {t_dom:.2f} s; growth {first.growth_db_per_s:.1f} dB/s (mode {growth[i]:.1f})")
    assert 2.0 < first.time_s < t_dom
    if (seed, program, over_db) in LOW_LANE_CASES:  # reported by the low lane, its onset put back
        assert first.track_id >= D.LANE_TRACK_ID_OFFSET, first  # by the decimator's delay
        assert first.onset_s <= first.time_s, first


# ----------------------------------------------------------------------------- no-howl programs


@pytest.mark.parametrize("case", ["vibrato-notes", "held-harmonic-notes", "speech", "noise", "held-vibrato-note"])
def test_no_detection_on_program_alone(case):
    fs = 16000
    rng = np.random.default_rng(21)
    if case == "vibrato-notes":
        x = music_like(fs, 8, 31, vibrato=True)
    elif case == "held-harmonic-notes":
        x = music_like(fs, 8, 32, vibrato=False)
    elif case == "speech":
        x = speech_like(fs, 8, 33)
    elif case == "noise":
        x = 0.03 * rng.standard_normal(8 * fs)
    else:  # one sung note held 4 s with a slow crescendo (+6 dB/s) and vibrato: the classic false alarm
        t = np.arange(4 * fs) / fs
        f0 = 440 * (1 + 0.008 * np.sin(2 * np.pi * 5.5 * t))
        ph = 2 * np.pi * np.cumsum(f0) / fs
        x = 10 ** ((-40 + 6 * t) / 20) * sum(0.6 ** (h - 1) * np.sin(h * ph) for h in range(1, 7))
    events = D.detect(x, fs).events
    assert _record(case, events) == 0, events


HARD_NO_HOWL = {
    # sustained notes in slow crescendo (straight lines in dB, pure partials, no vibrato)
    "held note 220 Hz +6 dB/s": lambda fs: held_note_crescendo(fs, 220.0, 6.0),
    "held note 523 Hz +10 dB/s": lambda fs: held_note_crescendo(fs, 523.25, 10.0),
    "held note 880 Hz +15 dB/s": lambda fs: held_note_crescendo(fs, 880.0, 15.0),
    "held note 1319 Hz +8 dB/s": lambda fs: held_note_crescendo(fs, 1318.5, 8.0),
    # tone-like sung vowels swelling, vibrato fading in
    "sung vowel 392 Hz +10 dB/s, 1 % vibrato": lambda fs: sung_vowel_swell(fs, 392.0, 10.0, 0.01),
    "sung vowel 659 Hz +12 dB/s, 0.6 % vibrato": lambda fs: sung_vowel_swell(fs, 659.3, 12.0, 0.006),
    "sung vowel 988 Hz +8 dB/s, 0.8 % vibrato": lambda fs: sung_vowel_swell(fs, 987.8, 8.0, 0.008),
    # flute-like near-sinusoids with 0.5 % vibrato, tremolo and a swell
    "flute 587 Hz +12 dB/s": lambda fs: flute_swell(fs, 587.3, 12.0, 0.0),
    "flute 880 Hz +20 dB/s": lambda fs: flute_swell(fs, 880.0, 20.0, 1.5),
    "flute 1175 Hz +15 dB/s": lambda fs: flute_swell(fs, 1174.7, 15.0, 3.0),
    "flute 1568 Hz +25 dB/s": lambda fs: flute_swell(fs, 1568.0, 25.0, 4.5),
    # low notes, the low lane's concern (its long frames see less of a vibrato cycle): before the
    # lane's stricter spread/drift limits these raised 5 false alarms there (measured 2026-12-02)
    "held note 82 Hz +6 dB/s": lambda fs: held_note_crescendo(fs, 82.4, 6.0),
    "held note 147 Hz +12 dB/s": lambda fs: held_note_crescendo(fs, 147.0, 12.0),
    "sung vowel 110 Hz +15 dB/s, 0.4 % vibrato": lambda fs: sung_vowel_swell(fs, 110.0, 15.0, 0.004),
    "sung vowel 131 Hz +10 dB/s, 0.6 % vibrato": lambda fs: sung_vowel_swell(fs, 131.0, 10.0, 0.006),
    "sung vowel 220 Hz +8 dB/s, 0.5 % vibrato": lambda fs: sung_vowel_swell(fs, 220.0, 8.0, 0.005),
    "flute 196 Hz +15 dB/s": lambda fs: flute_swell(fs, 196.0, 15.0, 1.0, seed=196),
    "flute 262 Hz +20 dB/s": lambda fs: flute_swell(fs, 262.0, 20.0, 1.0, seed=262),
}


@pytest.mark.parametrize("case", sorted(HARD_NO_HOWL))
def test_no_detection_on_hard_no_howl_programs(case):
    # The classic false alarms, made harder: straight-line swells of pure or nearly pure tones.
    events = D.detect(HARD_NO_HOWL[case](16000), 16000).events
    assert _record(case, events) == 0, events


@pytest.mark.parametrize("seed", [400, 401, 402])
def test_no_detection_on_more_programs(seed):
    fs = 16000
    for name, x in (("speech", speech_like(fs, 10, seed)), ("music", music_like(fs, 10, seed)),
                    ("held notes", music_like(fs, 10, seed, vibrato=False))):
        events = D.detect(x, fs).events
        assert _record(f"{name} seed {seed}", events) == 0, events


# ----------------------------------------------------------------------------- closed-loop truth


#: Known misses of "detected before it dominates" (tests/benchmarks/bench_detect.py, docs/scan.md):
#: low howls (578, 848 Hz, 1.9 kHz) in dense program dominate 0.1–0.3 s after the gain step,
#: about when the detector's shortest window (0.1 s of growth, 85 ms frames) can decide.
#: A stable crossing this close to unity (dB) counts as a right place for a howl report (see below).
NEAR_UNITY_DB = 0.5
#: (4, "speech", 3.0) was late until issue 22's straightness tests: its first howl is now
#: reported at 4430 Hz, on an unstable mode, before any mode dominates in the 3.3 s simulated
KNOWN_LATE: set = set()
CLOSED_LOOP_CASES = ([(s, p, 3.0) for s in range(5) for p in ("speech", "music")]
                     + [(0, "speech", 1.0), (3, "speech", 1.0),
                        # a 578 Hz howl beside a louder music partial: found by contrast of growth
                        (4, "music", 1.0)])


@pytest.mark.parametrize("seed, program, over_db", [
    pytest.param(*c, marks=pytest.mark.xfail(strict=True, reason="known late (see KNOWN_LATE)"))
    if c in KNOWN_LATE else c for c in CLOSED_LOOP_CASES])
def test_howl_in_a_simulated_room_loop_is_found_before_it_dominates(seed, program, over_db):
    # The benchmark's cases (same programs, loops and gain step at 2 s), simulated to 2 s + 1.3 s
    # only (the simulation is causal, so the first 3.3 s are the benchmark's).
    from howl.loop.simulate import simulate_closed_loop

    fs = 16000
    h, cross_f, cross_m = room_loop(seed)
    x = speech_like(fs, 7, seed) if program == "speech" else music_like(fs, 7, seed + 10)
    x = x[: int(3.3 * fs)]
    g = np.full(x.size, -6.0)
    g[2 * fs:] = over_db  # the fader goes past the worst crossing at t = 2 s
    y = simulate_closed_loop(h, x, fs, gain_db=g)
    # truth: the closed loop's modes at this gain (its poles, from the unstable crossings)
    unstable, _ = closed_loop_modes(h, over_db, cross_f[cross_m - over_db < 0], fs)
    r = D.detect(y, fs)
    howls = [e for e in r.events if e.kind == "howl"]
    assert howls, r.events
    first = howls[0]
    assert first.time_s > 2.0
    # every howl reported before the limiter is reached sits (within 0.1 %) on an unstable mode
    # or on one less than NEAR_UNITY_DB from unity: such a loop rings for seconds (decay = margin/τ)
    # and program pumped through it grows like a howl, so reporting it is right
    knee = 0.5 * 10 ** (-1 / 20)
    over = np.nonzero(np.abs(y) > knee)[0]
    t_lim = over[0] / fs if over.size else np.inf
    on_edge, _ = closed_loop_modes(h, over_db, cross_f[cross_m - over_db < NEAR_UNITY_DB], fs)
    for e in howls:
        if e.time_s < t_lim:
            err = np.min(np.abs(on_edge / e.freq_hz - 1))
            assert err < 1e-3, (e, on_edge)
    # program RMS of the whole 7 s program, as in the benchmark
    rms = float(np.sqrt(np.mean((speech_like(fs, 7, seed) if program == "speech" else music_like(fs, 7, seed + 10)) ** 2)))
    i = int(np.argmin(np.abs(unstable / first.freq_hz - 1)))
    t_dom = t_dominates(y, fs, unstable[i], rms, 2.0)
    print(f"seed {seed} {program} +{over_db} dB: howl {first.freq_hz:.2f} Hz detected at {first.time_s:.2f} s, "
          f"dominates at {t_dom:.2f} s, latency {first.time_s - 2.0:.2f} s")
    assert first.time_s < t_dom


@pytest.mark.parametrize("seed", [0, 2])
def test_stable_loop_with_program_raises_no_alarm(seed):
    from howl.loop.simulate import simulate_closed_loop

    fs = 16000
    h, _, _ = room_loop(seed)
    x = speech_like(fs, 5, seed + 40)
    y = simulate_closed_loop(h, x, fs, gain_db=-6.0)  # the usual 6 dB stability margin
    events = D.detect(y, fs).events
    assert _record(f"speech through loop {seed} at 6 dB margin", events) == 0, events


@pytest.mark.parametrize("seed, margin_db", [(0, 1.0), (1, 2.0), (2, 3.0)])
def test_ring_down_after_a_click_estimates_the_margin_within_15_percent(seed, margin_db):
    from howl.loop.simulate import simulate_closed_loop

    fs = 16000
    h, cross_f, cross_m = room_loop(seed)
    x = np.zeros(3 * fs)
    x[fs // 2] = 0.4
    x += 1e-5 * np.random.default_rng(seed).standard_normal(x.size)
    y = simulate_closed_loop(h, x, fs, gain_db=-margin_db)
    ring = [e for e in D.detect(y, fs).events if e.kind == "ringing"]
    assert ring, "no ring-down found"
    for e in ring:
        i = int(np.argmin(np.abs(cross_f - e.freq_hz)))
        assert abs(cross_f[i] / e.freq_hz - 1) < 1e-3
        true_margin = cross_m[i] + margin_db  # freqz crossing, then the fader
        tau = D.loop_delay_s(h, fs, cross_f[i])
        est = D.margin_from_decay_db(e.decay_db_per_s, tau)
        print(f"seed {seed}: ringing {e.freq_hz:.1f} Hz, decay {e.decay_db_per_s:.1f} dB/s, "
              f"margin est {est:.2f} dB, true {true_margin:.2f} dB")
        # Tolerance 0.05 dB + 15 % of the true margin: the estimate is first order in the margin,
        # m = decay·τ_eff with τ_eff = (τ_g² + a²)/τ_g from the IR (the closed-loop pole's shift to first order,
        # howl.listen loop_delay_s); the second-order shift, which grows with m, and a decay fitted on a ring-down
        # that neighbouring modes share make it read low; on the loops of test_detect it read 0-0.29 dB
        # low at 1-3 dB (up to 12 %) while this tolerance was set. (was ±1 dB)
        assert abs(est - true_margin) <= 0.05 + 0.15 * true_margin
    # the worst crossing (0 dB + margin) is among them
    assert any(abs(e.freq_hz / cross_f[np.argmin(cross_m)] - 1) < 1e-3 for e in ring)


@pytest.mark.parametrize("seed, margin_db", [(35, 1.5), (31, 1.0), (30, 1.5), (37, 1.0)])
def test_low_ring_down_in_a_reverberant_room_estimates_the_margin_within_15_percent(seed, margin_db):
    # Low loop modes (100-210 Hz) of the reverberant low_room_loop rooms ring together at
    # near-harmonic ratios; the low lane resolves them. Their loop delay is the loop's group
    # delay there (80-250 ms), not the direct path: loop_delay_s from the IR at the event.
    from howl.loop.simulate import simulate_closed_loop

    fs = 16000
    h, cross_f, cross_m = low_room_loop(seed)
    x = np.zeros(8 * fs)
    x[fs // 2] = 0.5
    x += 1e-5 * np.random.default_rng(1).standard_normal(x.size)
    y = simulate_closed_loop(h, x, fs, gain_db=-margin_db)
    ring = [e for e in D.detect(y, fs).events if e.kind == "ringing"]
    assert ring, "no ring-down found"
    for e in ring:
        i = int(np.argmin(np.abs(cross_f - e.freq_hz)))
        assert abs(cross_f[i] / e.freq_hz - 1) < 1e-3, (e, cross_f[i])
        true_margin = cross_m[i] + margin_db  # scipy.signal.freqz crossing, then the fader
        est = D.margin_from_decay_db(e.decay_db_per_s, D.loop_delay_s(h, fs, e.freq_hz))
        print(f"low loop {seed}: ringing {e.freq_hz:.2f} Hz, decay {e.decay_db_per_s:.1f} dB/s, "
              f"margin est {est:.2f} dB, true {true_margin:.2f} dB")
        assert abs(est - true_margin) <= 0.05 + 0.15 * true_margin  # as in the test above (was ±1 dB)
    # the worst crossing is among them
    assert any(abs(e.freq_hz / cross_f[np.argmin(cross_m)] - 1) < 1e-3 for e in ring)


def test_with_the_loop_ir_a_note_pumped_through_a_mode_is_told_from_a_howl():
    # A sung vowel swelling through a low loop 1.5 dB from unity is reported as a howl 1.2 % off
    # the loop's crossing (a known false report, docs/scan.md); a real howl sits on its mode,
    # within 0.85 % of the crossing even 3 dB past unity. With the loop IR the report says which.
    from howl.loop.simulate import simulate_closed_loop

    fs = 16000
    h, cross_f, cross_m = low_room_loop(30)
    y = simulate_closed_loop(h, sung_vowel_swell(fs, 131.0, 10.0, 0.006), fs, gain_db=-1.5)
    rep = D.report(D.detect(y, fs).events, fs, y.size / fs, loop_delay_s=D.LoopDelayFromIR(h * 10 ** (-1.5 / 20), fs))
    for e in rep["events"]:
        assert not e["loop_ir_crossing"]["on_crossing"], e
        assert abs(e["loop_ir_crossing"]["margin_db"] - 1.5) < 0.01  # the IR's own margin there
    x = music_like(fs, 8, 31 + 10)
    h, _, _ = low_room_loop(31)
    g = np.full(x.size, -6.0)
    g[2 * fs:] = 2.0
    y = simulate_closed_loop(h, x, fs, gain_db=g)
    rep = D.report(D.detect(y, fs).events, fs, y.size / fs, loop_delay_s=D.LoopDelayFromIR(h * 10 ** (2.0 / 20), fs))
    howls = [e for e in rep["events"] if e["kind"] == "howl"]
    assert howls and howls[0]["loop_ir_crossing"]["on_crossing"], howls
    # past unity by the fader step: -growth x the IR's loop delay there (truth: +2 dB past the freqz crossing)
    assert abs(howls[0]["margin_db"] + 2.0) < 1.0, howls[0]


def test_low_ring_downs_are_the_same_in_small_blocks_as_in_one_call():
    # The low lane's ring-downs are merged with the main lane's as blocks arrive; the split of the
    # input must not change what is reported (speech after the click keeps both lanes busy).
    from howl.loop.simulate import simulate_closed_loop

    fs = 16000
    h, _, _ = low_room_loop(37)
    x = np.zeros(8 * fs)
    x[fs // 2] = 0.5
    x += 1e-5 * np.random.default_rng(1).standard_normal(x.size)
    x[4 * fs:] += speech_like(fs, 4, 3)
    y = simulate_closed_loop(h, x, fs, gain_db=-1.0)
    a = [(e.kind, round(e.freq_hz, 6), e.time_s) for e in D.detect(y, fs).events]
    assert sum(k == "ringing" for k, _, _ in a) >= 2, a
    for b in (160, 4096):
        assert [(e.kind, round(e.freq_hz, 6), e.time_s) for e in D.detect(y, fs, block_samples=b).events] == a


@pytest.mark.parametrize("f0, decay, inharmonicity", [
    (41.2, 8, 0.0), (82.4, 25, 0.0), (110, 15, 4e-4), (147, 40, 0.0), (262, 25, 4e-4), (440, 40, 0.0),
    (880, 25, 4e-4), (1760, 60, 0.0)])
def test_no_ringing_on_plucked_notes(f0, decay, inharmonicity):
    # A plucked note's fundamental decays on a straight line like a loop mode; its partials at
    # the exact multiples decay along with it (faster), which a ring-down of a loop mode lacks.
    # Before that test 9 of 32 such notes at 41-262 Hz were reported as ringing (2026-12-02).
    x = plucked_note(16000, f0, decay, inharmonicity)
    events = D.detect(x, 16000).events
    assert _record(f"plucked {f0:g} Hz, {decay} dB/s, B {inharmonicity:g}", events) == 0, events


def test_ringing_is_reported_while_it_still_fades_once_per_ring_down():
    # A tone decaying on a straight line at 20 dB/s from -12 dBFS for 3 s (exact by construction):
    # the event comes once >= 10 dB over >= 0.15 s of decay is seen, long before the tone is gone.
    fs = 16000
    rng = np.random.default_rng(13)
    x = np.concatenate([np.zeros(fs // 2), tone(fs, 2500.0, 3.0, -12, -20.0), np.zeros(fs)])
    x = x + 10 ** (-95 / 20) * rng.standard_normal(x.size)
    det = D.Detector(fs, loop_delay_s=0.075)
    new = []
    for i in range(0, x.size, 512):
        new += [(i + 512, e) for e in det.process(x[i: i + 512])]
    new += [(x.size, e) for e in det.finish()]
    ring = [(n, e) for n, e in new if e.kind == "ringing"]
    assert len(ring) == 1, new  # one event per ring-down
    n_at, e = ring[0]
    assert e.live and e.time_s < 0.5 + 1.5  # 2.5 kHz fading: reported within ~1 s of the start, not at its end
    assert n_at / fs < 0.5 + 1.5
    assert abs(e.freq_hz / 2500.0 - 1) < 1e-3
    assert e.decay_db_per_s == pytest.approx(20.0, rel=0.05)
    # first principles: margin = decay * tau = 20 dB/s * 75 ms = 1.5 dB ("~1.5 dB from howling")
    assert e.margin_db == pytest.approx(1.5, abs=0.1)


@pytest.mark.parametrize("fs", [16000, 44100, 48000])
def test_low_lane_decimator_matches_numpy_convolve_for_any_block_split(fs):
    # Reference: numpy.convolve of the same FIR, every D-th sample (exact up to rounding).
    from howl.listen._lane import Decimator, lane_factor

    x = np.random.default_rng(1).standard_normal(2 * fs)
    d = Decimator(fs, lane_factor(fs))
    ref = np.convolve(x, d.h)[: x.size][:: d.factor]
    rng = np.random.default_rng(2)
    outs, i = [], 0
    while i < x.size:
        b = int(rng.integers(1, 3000))
        outs.append(d.process(x[i: i + b]))
        i += b
    y = np.concatenate(outs)
    assert y.size > 0.9 * ref.size
    assert np.max(np.abs(y - ref[: y.size])) < 1e-12
    assert np.array_equal(y, Decimator(fs, lane_factor(fs)).process(x)[: y.size])


def test_with_the_loop_crossings_known_a_tone_growing_off_every_crossing_is_not_a_howl():
    # An 880 Hz sine rising at a constant 20 dB/s carries a howl's exact signature: on one channel
    # it is one. A loop can only howl where its phase comes round (a positive real-axis crossing,
    # Nyquist), so with the loop's crossings known a tone 2 % from the nearest is not (derived).
    fs = 16000
    t = np.arange(5 * fs) / fs
    x = 10 ** (np.minimum(-60 + 20 * t, -10) / 20) * np.sin(2 * np.pi * 880.0 * t)
    x += 1e-4 * np.random.default_rng(3).standard_normal(t.size)
    assert any(e.kind == "howl" for e in D.detect(x, fs).events)
    for crossings, howl in (([862.0, 1500.0], False), ([], False), ([500.0, 880.4], True)):
        det = D.Detector(fs, crossings_hz=crossings)
        det.process(x)
        det.finish()
        assert any(e.kind == "howl" for e in det.events) == howl, (crossings, det.events)


def test_with_the_loop_ir_the_sung_note_pumped_beside_a_mode_is_not_a_howl():
    # The note of test_with_the_loop_ir_a_note_pumped_through_a_mode_is_told_from_a_howl, 1.2 % off
    # the crossing: with the IR's crossings given to the detector it is no howl at all, while the
    # real howl of low room 31 (+2 dB) still is.
    from howl.loop.simulate import simulate_closed_loop

    fs = 16000
    h, cross_f, _ = low_room_loop(30)
    y = simulate_closed_loop(h, sung_vowel_swell(fs, 131.0, 10.0, 0.006), fs, gain_db=-1.5)
    det = D.Detector(fs, crossings_hz=D.LoopDelayFromIR(h, fs).crossings_hz)
    det.process(y)
    det.finish()
    assert not [e for e in det.events if e.kind == "howl"], det.events
    x = music_like(fs, 8, 31 + 10)
    h, _, _ = low_room_loop(31)
    g = np.full(x.size, -6.0)
    g[2 * fs:] = 2.0
    y = simulate_closed_loop(h, x, fs, gain_db=g)
    det = D.Detector(fs, crossings_hz=D.LoopDelayFromIR(h, fs).crossings_hz)
    det.process(y)
    det.finish()
    assert [e for e in det.events if e.kind == "howl"]


def test_far_from_every_crossing_is_wider_than_the_loop_irs_resolution():
    # "Far" = more than 1 % from every crossing AND more than half the IR's resolution 1/T
    # (derived: an IR T seconds long cannot tell features closer than 1/T apart, so it places a
    # crossing to ±1/(2T)). The 880 Hz tone at 20 dB/s with its nearest crossing at 862 Hz (18 Hz,
    # 2 % off): far for a 0.25 s IR (±2 Hz), on the crossing for a 1/64 s IR (±32 Hz).
    from howl.listen._report import on_crossing

    fs = 16000
    t = np.arange(5 * fs) / fs
    x = 10 ** (np.minimum(-60 + 20 * t, -10) / 20) * np.sin(2 * np.pi * 880.0 * t)
    x += 1e-4 * np.random.default_rng(3).standard_normal(t.size)
    ir_quarter_s = np.zeros(fs // 4)
    ir_quarter_s[40] = 0.5
    res = D.LoopDelayFromIR(ir_quarter_s, fs).crossing_resolution_hz
    assert res == 4.0  # 16000 / 4000 (derived)
    for res_hz, howl in ((res, False), (64.0, True)):
        ev = D.detect(x, fs, crossings_hz=[862.0, 1500.0], crossing_resolution_hz=res_hz).events
        assert any(e.kind == "howl" for e in ev) == howl, (res_hz, ev)
    # the report's on_crossing flag follows the same rule (derived: 3 Hz is 3 % of 100 Hz)
    assert not on_crossing(100.0, 103.0, 4.0) and on_crossing(100.0, 103.0, 6.0)
    assert on_crossing(1000.0, 1009.0, 0.0)  # 0.9 % (within 1 %)
