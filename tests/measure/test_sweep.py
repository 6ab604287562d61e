"""Exponential sweep, inverse filter, deconvolution and quality figures (howl.sweep).

Oracles: pyfar 0.8 (sweep generation, deconvolution), pyrato 1.1 (peak-to-noise ratio,
Lundeby intersection time), Farina (AES 108th Conv., 2000) formulas and the check values
derived from them, and trigonometric identities for the harmonic levels.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from howl.measure.sweep import (
    analyse,
    clipping,
    decay_end_index,
    deconvolve,
    exponential_sweep,
    harmonic_distortion,
    octave_noise_floor,
    peak_to_noise_db,
    repeat_difference_db,
)

FS = 48000


@pytest.fixture(scope="module")
def sweep_2s():
    # Farina check-value setup: fs 48 kHz, T = 2 s, 50 Hz–20 kHz, no fades
    return exponential_sweep(2.0, 50.0, 20000.0, FS, n_fade_in=0, n_fade_out=0)


def _pyfar():
    pf = pytest.importorskip("pyfar")
    return pf


def test_sweep_matches_pyfar_exponential_sweep_sample_by_sample():
    pf = _pyfar()
    # pyfar.signals.exponential_sweep_time: same Farina formula, squared-cosine fade-out of 90 samples
    ours = exponential_sweep(1.0, 40.0, 16000.0, FS, n_fade_in=0, n_fade_out=90)
    ref = pf.signals.exponential_sweep_time(FS, (40.0, 16000.0), n_fade_out=90, sampling_rate=FS).time[0]
    np.testing.assert_allclose(ours.signal, ref, atol=1e-9)


def test_sweep_rate_constant_and_inverse_envelope_match_farina_check_values(sweep_2s):
    # Farina 2000 (AES preprint 5093): L = T/ln(f2/f1). Derived for fs 48 kHz, T 2 s, 50 Hz–20 kHz:
    # L = 2/ln 400 = 2/5.991465 = 0.333808 s; octaves per second log2(400)/2 = 8.643856/2 = 4.3219;
    # the k-th harmonic arrives L·ln k early: 0.333808·ln 2 = 0.231378 s, ·ln 3 = 0.366726 s
    assert sweep_2s.rate_s == pytest.approx(0.333808, abs=1e-6)
    assert sweep_2s.octaves_per_s == pytest.approx(4.3219, abs=1e-4)
    # the inverse filter's envelope falls by 20·log10(f2/f1) = 52.04 dB from start to end
    env = np.exp(-np.arange(sweep_2s.n_samples) / FS / sweep_2s.rate_s)
    assert 20 * np.log10(env[-1] / env[0]) == pytest.approx(-52.04, abs=0.01)
    # harmonic advances L·ln k: 0.231378 s (H2), 0.366726 s (H3)
    assert sweep_2s.harmonic_advance_s(2) == pytest.approx(0.231378, abs=1e-6)
    assert sweep_2s.harmonic_advance_s(3) == pytest.approx(0.366726, abs=1e-6)


def test_sweep_through_itself_gives_unit_gain_in_band():
    sw = exponential_sweep(1.0, 40.0, 16000.0, 32000)
    from scipy.signal import fftconvolve

    full = fftconvolve(sw.signal, sw.inverse)
    spec = np.abs(np.fft.rfft(full))
    f = np.fft.rfftfreq(full.size, 1 / 32000)
    band = (f > 200) & (f < 8000)
    assert 20 * np.log10(np.median(spec[band])) == pytest.approx(0.0, abs=0.05)
    assert np.argmax(np.abs(full)) == sw.n_samples - 1  # linear IR at N − 1 of the full convolution


def _poly(x):
    return x + 0.3 * x**2 + 0.2 * x**3


def test_harmonic_peaks_land_where_farina_and_pyfar_put_them(sweep_2s):
    pf = _pyfar()
    x = sweep_2s.signal
    y = _poly(x)
    # Derived (Farina 2000): in the full linear convolution of an N-sample sweep with its inverse filter the
    # linear IR sits at N − 1 = 95 999 (N = 2 s · 48 kHz), and the 2nd harmonic L·ln 2·fs = 11 106.2 samples
    # earlier, at 95 999 − 11 106.2 = 84 892.8 → sample 84 893
    from scipy.signal import fftconvolve

    full = fftconvolve(y, sweep_2s.inverse)
    assert int(np.argmax(np.abs(full))) == 95999
    assert 80000 + int(np.argmax(np.abs(full[80000:90000]))) == 84893
    # ours, through deconvolve + harmonic_distortion (Hilbert-envelope peaks)
    rec = np.concatenate([y, np.zeros(FS // 2)])
    dec = deconvolve(rec, sweep_2s)
    dist = harmonic_distortion(dec.segments[0, 0], dec.zero_index, sweep_2s)
    assert dist.orders[:2] == (2, 3)
    # pyfar's regularised spectral deconvolution of the same signals: harmonics wrap to the end
    n = x.size
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        h = pf.dsp.deconvolve(pf.Signal(y, FS), pf.Signal(x, FS), fft_length=2 * n,
                              frequency_range=(50, 20000)).time[0]
    pyfar_h2 = 2 * n - (2 * n - 16000 + int(np.argmax(np.abs(h[2 * n - 16000 : 2 * n - 5000]))))
    pyfar_h3 = 2 * n - (2 * n - 20000 + int(np.argmax(np.abs(h[2 * n - 20000 : 2 * n - 16000]))))
    assert (pyfar_h2, pyfar_h3) == (11106, 17603)  # = round(L·ln k·fs): 11106.2, 17602.8
    assert dist.peak_offsets[0] == -pyfar_h2
    assert dist.peak_offsets[1] == -pyfar_h3


def test_harmonic_levels_match_the_trigonometric_identities(sweep_2s):
    # x + 0.3x² + 0.2x³ with x = sin φ: fundamental 1 + 0.2·3/4 = 1.15, 2nd 0.3/2 = 0.15, 3rd 0.2/4 = 0.05
    rec = np.concatenate([_poly(sweep_2s.signal), np.zeros(FS // 2)])
    a = analyse(rec, sweep_2s, level_lin=1.0)
    h2, h3 = a.distortion.harmonic_db[:2]
    assert h2 == pytest.approx(20 * math.log10(0.15 / 1.15), abs=0.3)
    assert h3 == pytest.approx(20 * math.log10(0.05 / 1.15), abs=0.3)
    assert a.distortion.thd_pct == pytest.approx(100 * math.hypot(0.15, 0.05) / 1.15, rel=0.03)


def test_linear_system_shows_little_distortion():
    sw = exponential_sweep(0.5, 40.0, 7000.0, 16000)
    rec = np.concatenate([sw.signal, np.zeros(8000)])
    a = analyse(rec, sw, level_lin=1.0)
    assert a.distortion.thd_db < -45.0  # the method's floor (band-edge ringing), no source


def test_deconvolution_agrees_with_pyfar_in_band_on_a_known_ir():
    pf = _pyfar()
    fs = 16000
    sw = exponential_sweep(1.0, 40.0, 7000.0, fs)
    rng = np.random.default_rng(3)
    h = np.zeros(800)
    h[37] = 0.6
    h[120] = -0.3
    h += 0.02 * rng.standard_normal(800) * np.exp(-np.arange(800) / 150)
    y = np.convolve(sw.signal, h)
    rec = np.concatenate([y, np.zeros(fs // 2 - h.size + 1)])
    ours = deconvolve(rec, sw).linear_all[0, 0][:2048]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = pf.dsp.deconvolve(pf.Signal(rec, fs), pf.Signal(sw.signal, fs), fft_length=rec.size,
                                frequency_range=(40, 7000)).time[0][:2048]
    f = np.fft.rfftfreq(4096, 1 / fs)
    band = (f > 100) & (f < 5000)
    a = np.fft.rfft(ours, 4096)[band]
    b = np.fft.rfft(ref, 4096)[band]
    assert np.max(np.abs(a - b)) / np.max(np.abs(b)) < 0.03  # ours vs pyfar
    # vs the true IR, away from the low band edge (both methods band-limit zero-phase there,
    # and an IR cut at time zero loses the acausal half of that ringing)
    band = (f > 200) & (f < 5000)
    a = np.fft.rfft(ours, 4096)[band]
    t = np.fft.rfft(h, 4096)[band]
    assert np.max(np.abs(a - t)) / np.max(np.abs(t)) < 0.03


def _decaying_noise(seed=0, fs=FS, rt_s=0.5, n_s=1.5, noise=1e-3):
    rng = np.random.default_rng(seed)
    t = np.arange(int(n_s * fs)) / fs
    return rng.standard_normal(t.size) * np.exp(-3 * np.log(10) * t / rt_s) + noise * rng.standard_normal(t.size)


def test_peak_to_noise_ratio_matches_pyrato():
    pf = _pyfar()
    ra = pytest.importorskip("pyrato")
    h = _decaying_noise()
    ref = 10 * np.log10(float(ra.dsp.peak_signal_to_noise_ratio(pf.Signal(h, FS))[0]))
    assert peak_to_noise_db(h) == pytest.approx(ref, abs=1e-6)


def test_decay_end_is_near_pyratos_lundeby_intersection_time():
    pf = _pyfar()
    ra = pytest.importorskip("pyrato")
    h = _decaying_noise(seed=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t_ref = float(np.ravel(ra.edc.intersection_time_lundeby(pf.Signal(h, FS))[0])[0])
    end, _ = decay_end_index(h, FS)
    # exact decay 60 dB / 0.5 s down to the −60 dB noise floor: 0.5 s, from the construction
    assert end / FS == pytest.approx(t_ref, rel=0.15)
    assert end / FS == pytest.approx(0.5, rel=0.15)


def test_latency_is_found_to_the_sample_from_a_delayed_wire():
    fs = 16000
    sw = exponential_sweep(0.5, 40.0, 7000.0, fs)
    rec = np.zeros((sw.n_samples + 4000, 2))
    rec[333 : 333 + sw.n_samples, 0] = 0.5 * sw.signal  # the mic path: 0 dB loop, same latency
    rec[333 : 333 + sw.n_samples, 1] = 0.5 * sw.signal  # the reference wire
    a = analyse(rec, sw, level_lin=0.5, mic_index=0, reference_index=1)
    assert a.latency_samples == 333
    assert a.latency_source == "reference"
    assert int(np.argmax(np.abs(a.ir))) == 0
    assert a.snr_db > 100


def test_clipping_counts_samples_at_full_scale():
    y = np.array([0.1, 0.9995, -1.0, 0.5])
    c = clipping(y)
    assert c.clipped and c.n_clipped == 2
    assert c.peak_dbfs == pytest.approx(0.0, abs=1e-9)
    assert not clipping(0.5 * y).clipped


def test_repeat_difference_of_pure_noise_matches_its_expectation():
    rng = np.random.default_rng(5)
    base = np.zeros(4000)
    base[10] = 1.0
    sigma = 1e-2
    irs = base + sigma * rng.standard_normal((4, 4000))
    diff, expected = repeat_difference_db(irs, sigma**2)
    # E Σ(h_r − mean)² = (R−1)/R·σ²·M (sample-variance identity)
    assert diff == pytest.approx(expected, abs=0.3)


def test_octave_noise_floor_of_white_noise_is_its_power_times_length():
    rng = np.random.default_rng(7)
    fs = 16000
    ir = np.zeros(1600)
    ir[0] = 1.0
    sigma = 1e-3
    noise = sigma * rng.standard_normal(16000)
    centres, gain_db, floor_db = octave_noise_floor(ir, noise, fs, 40.0, 7000.0)
    assert centres.size >= 5
    np.testing.assert_allclose(gain_db, 0.0, atol=1e-9)  # a unit impulse is 0 dB everywhere
    # Parseval: E|DFT_M(n)|² = M·σ². Tolerance per band, derived: the 16 000-sample noise gives 1 Hz bins,
    # each |DFT|² exponentially distributed (white Gaussian noise), so the mean of the K ≈ 0.707·fc bins of an
    # octave has a relative standard deviation 1/√K, 4.34/√K dB; allow 3 of them (1.96 dB at 63 Hz, K = 44,
    # down to 0.25 dB at 4 kHz). A wrong length scaling (10·log10 of 10 = 10 dB) fails every band.
    k_bins = np.floor(centres * (2**0.5 - 2**-0.5))
    err = floor_db - 10 * np.log10(1600 * sigma**2)
    assert np.all(np.abs(err) <= 3 * 4.343 / np.sqrt(k_bins)), (centres, err)


def test_trimming_keeps_a_wire_short_and_a_long_decay_whole():
    fs = 16000
    sw = exponential_sweep(0.5, 40.0, 7000.0, fs)
    rec = np.concatenate([sw.signal.astype(np.float32), np.zeros(fs // 2, np.float32)])
    wire = deconvolve(rec, sw).linear_all[0, 0]
    end, _ = decay_end_index(wire, fs)
    assert end < 0.5 * wire.size  # trimmed: ringing below −100 dB re peak counts as noise
    t = np.arange(wire.size) / fs
    reverb = np.random.default_rng(4).standard_normal(t.size) * np.exp(-6.9 * t / 3.0)  # RT60 3 s
    end, _ = decay_end_index(reverb, fs)
    assert end == reverb.size  # the window ends inside the decay: nothing is cut as "noise"
