"""Exponential sine sweep, its inverse filter, deconvolution and quality figures.

Pure core: numpy/scipy in, frozen dataclasses out. No devices, files or printing.

The measurement follows Farina's exponential sweep method [1]_:

* sweep ``x(t) = sin(2π f1 L (e^{t/L} − 1))`` with ``L = T / ln(f2/f1)``, so the
  instantaneous frequency is ``f1·e^{t/L}``;
* inverse filter: the time-reversed sweep weighted by ``e^{−t/L}`` (its envelope falls
  6 dB per octave as its frequency falls, which undoes the sweep's pink spectrum), scaled here so that the sweep
  deconvolved with itself has unit gain inside the band;
* deconvolution by FFT with the sweep's regularised spectral inverse [4]_, laid out like
  the full linear convolution with the inverse filter: the linear impulse response
  starts at index ``N − 1`` (N = sweep length); the response of the k-th harmonic lands ``L·ln k`` seconds
  *before* it [1]_, so it can be cut away and measured (a THD-like figure).

Quality figures follow the needs of ISO 18233 [2]_ (linearity and time invariance:
repeated sweeps must agree before they may be averaged) and the usual impulse
response practice: peak-to-noise ratio, the point where the decay meets the noise
floor (a simplified form of Lundeby et al. [3]_), the noise floor per octave band,
and clipping of the recording.

References
----------
.. [1] A. Farina, "Simultaneous measurement of impulse response and distortion with a
       swept-sine technique", 108th AES Convention, Paris, 2000, preprint 5093.
.. [2] ISO 18233:2006, Acoustics — Application of new measurement methods in building
       and room acoustics.
.. [3] A. Lundeby, T. E. Vigran, H. Bietz, M. Vorländer, "Uncertainties of measurements
       in room acoustics", Acustica 81:344–355, 1995.
.. [4] S. Müller, P. Massarani, "Transfer-function measurement with sweeps",
       J. Audio Eng. Soc. 49(6):443–471, 2001.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import fft as sp_fft

from howl import validate as v
from howl.errors import InputError

_WORKERS = 2  # FFT threads; the machines this runs on are small


# --------------------------------------------------------------------------- sweep


@dataclass(frozen=True, eq=False)
class Sweep:
    """An exponential sweep and its inverse filter.

    Attributes
    ----------
    signal : unit-amplitude sweep (N samples, fades applied).
    inverse : Farina inverse filter (N samples), scaled so that ``signal ⊛ inverse``
        has unit gain in the band; its delay is ``N − 1`` samples.
    sample_rate_hz, f_lo_hz, f_hi_hz : the sweep's rate and band.
    rate_s : Farina's ``L = T / ln(f2/f1)`` in seconds (T = N / fs).
    n_fade_in, n_fade_out : fade lengths in samples.
    """

    signal: np.ndarray
    inverse: np.ndarray
    sample_rate_hz: int
    f_lo_hz: float
    f_hi_hz: float
    rate_s: float
    n_fade_in: int
    n_fade_out: int

    @property
    def n_samples(self) -> int:
        return int(self.signal.shape[0])

    def spectrum(self, nfft: int) -> np.ndarray:
        """rfft of the sweep zero-padded to ``nfft`` (kept for reuse: a session deconvolves
        many recordings of the same length)."""
        cache = self.__dict__.setdefault("_spectra", {})
        if nfft not in cache:
            if len(cache) > 4:
                cache.clear()
            xf = sp_fft.rfft(self.signal, nfft, workers=_WORKERS)
            xf.setflags(write=False)
            cache[nfft] = xf
        return cache[nfft]

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sample_rate_hz

    @property
    def octaves_per_s(self) -> float:
        """Sweep rate in octaves per second, log2(f2/f1)/T."""
        return math.log2(self.f_hi_hz / self.f_lo_hz) / self.duration_s

    def harmonic_advance_s(self, order: int) -> float:
        """How far the response of harmonic ``order`` lands before the linear IR: L·ln(order) [1]_."""
        return self.rate_s * math.log(order)

    def harmonic_advance_samples(self, order: int) -> float:
        return self.harmonic_advance_s(order) * self.sample_rate_hz


def _fade_in(n: int) -> np.ndarray:
    # squared-sine ramp 0 → 1 (common practice, no source)
    return np.sin(np.linspace(0.0, np.pi / 2, n)) ** 2


def _fade_out(n: int) -> np.ndarray:
    return np.cos(np.linspace(0.0, np.pi / 2, n)) ** 2


def exponential_sweep(
    duration_s: float,
    f_lo_hz: float,
    f_hi_hz: float,
    sample_rate_hz: int,
    *,
    fade_in_s: float = 0.02,
    fade_out_s: float = 0.005,
    n_fade_in: int | None = None,
    n_fade_out: int | None = None,
) -> Sweep:
    """Farina's exponential sweep with fades, and its inverse filter.

    ``x[n] = sin(2π f1 L (e^{t/L} − 1))``, ``t = n/fs``, ``L = T/ln(f2/f1)``, ``T = N/fs`` [1]_.
    The fade-in (squared sine) and fade-out (squared cosine) keep the start and the end
    free of clicks and spectral ripple [4]_. ``n_fade_in``/``n_fade_out`` override the
    durations in samples.

    The inverse filter is ``x(T − t) · e^{−t/L}`` (the reversed sweep, starting at f2, with an
    envelope falling by 20·log10(f2/f1) dB, i.e. −6 dB per octave of the sweep) [1]_, scaled so that
    the median gain of ``x ⊛ inverse`` over the inner band [2·f1, f2/2] is exactly 1.
    """
    fs_f = v.in_range(sample_rate_hz, "sample_rate_hz", 1000.0, None, unit="Hz")
    if not fs_f.is_integer():
        raise InputError(f"must be a whole number of Hz, got {fs_f:g}", key="sample_rate_hz")
    fs = int(fs_f)
    duration_s = v.positive(duration_s, "duration_s", unit="s")
    f_lo_hz = v.positive(f_lo_hz, "f_lo_hz", unit="Hz")
    f_hi_hz = v.in_range(f_hi_hz, "f_hi_hz", f_lo_hz, fs / 2, unit="Hz", lo_open=True)
    if f_hi_hz / f_lo_hz < 2.0:
        raise InputError(f"must span at least one octave, got {f_lo_hz:g}–{f_hi_hz:g} Hz", key="f_lo_hz/f_hi_hz")
    n = int(round(duration_s * fs))
    if n < 256:
        raise InputError(f"must give at least 256 samples, got {n}", key="duration_s")
    c = math.log(f_hi_hz / f_lo_hz)
    rate_s = n / fs / c  # L for the actual number of samples
    t = np.arange(n) / fs
    x = np.sin(2.0 * np.pi * f_lo_hz * rate_s * (np.exp(t / rate_s) - 1.0))
    nfi = int(round(fade_in_s * fs)) if n_fade_in is None else int(n_fade_in)
    nfo = int(round(fade_out_s * fs)) if n_fade_out is None else int(n_fade_out)
    if nfi < 0 or nfo < 0 or nfi + nfo > n // 2:
        raise InputError(f"fades must be >= 0 and together at most half the sweep, got {nfi} + {nfo} of {n} samples",
                         key="fade_in_s/fade_out_s")
    if nfi > 0:
        x[:nfi] *= _fade_in(nfi)
    if nfo > 0:
        x[-nfo:] *= _fade_out(nfo)
    inv = x[::-1] * np.exp(-t / rate_s)  # reversed sweep, envelope falls 20·log10(f2/f1) dB [1]_
    # Normalise: unit gain in the inner band of x ⊛ inverse (computed, not assumed).
    nfft = sp_fft.next_fast_len(2 * n, real=True)
    g = np.abs(sp_fft.rfft(x, nfft, workers=_WORKERS) * sp_fft.rfft(inv, nfft, workers=_WORKERS))
    freqs = np.fft.rfftfreq(nfft, 1.0 / fs)
    inner = (freqs >= 2.0 * f_lo_hz) & (freqs <= f_hi_hz / 2.0)
    if not np.any(inner):
        inner = (freqs >= f_lo_hz) & (freqs <= f_hi_hz)
    inv /= float(np.median(g[inner]))
    x.setflags(write=False)
    inv.setflags(write=False)
    return Sweep(x, inv, fs, float(f_lo_hz), float(f_hi_hz), rate_s, nfi, nfo)


# ------------------------------------------------------------------- deconvolution


@dataclass(frozen=True, eq=False)
class Deconvolved:
    """Deconvolved segments, one per repeat and channel.

    ``segments[r, c]`` holds, for repeat r and recorded channel c, the part of the full
    linear convolution (recording ⊛ inverse filter) from ``n_pre`` samples before the
    recording's time zero up to the last valid linear-IR sample. Index ``zero_index``
    (= ``n_pre``) is time zero, i.e. the instant the sweep left the interface's
    output buffer. ``linear(r, c)`` is the linear IR, ``n_valid`` samples long; the
    harmonic responses live in ``segments[..., :zero_index]``.
    """

    segments: np.ndarray  # (n_repeats, n_channels, n_pre + n_valid)
    zero_index: int
    n_valid: int
    sample_rate_hz: int
    level_lin: float
    nfft: int = 0
    sweep_spectrum: np.ndarray | None = None  # rfft(sweep, nfft)
    recording_spectrum: np.ndarray | None = None  # rfft(recording, nfft), (n_channels, nfft//2+1)
    period_samples: int = 0

    @property
    def n_repeats(self) -> int:
        return int(self.segments.shape[0])

    @property
    def linear_all(self) -> np.ndarray:
        """(n_repeats, n_channels, n_valid) linear IRs (time zero at index 0)."""
        return self.segments[:, :, self.zero_index:]


def band_window(freq_hz: np.ndarray, f_lo_hz: float, f_hi_hz: float, sample_rate_hz: float) -> np.ndarray:
    """1 inside [f_lo, f_hi], raised-cosine (on log frequency) skirts half an octave wide
    outside, 0 beyond (and at DC); the upper skirt stops at Nyquist (common practice, no source)."""
    f = np.asarray(freq_hz, dtype=float)
    w = np.zeros_like(f)
    w[(f >= f_lo_hz) & (f <= f_hi_hz)] = 1.0
    lo0 = f_lo_hz / math.sqrt(2.0)
    sel = (f > lo0) & (f < f_lo_hz)
    w[sel] = 0.5 - 0.5 * np.cos(np.pi * np.log(f[sel] / lo0) / np.log(f_lo_hz / lo0))
    hi1 = min(f_hi_hz * math.sqrt(2.0), sample_rate_hz / 2.0)
    if hi1 > f_hi_hz:
        sel = (f > f_hi_hz) & (f <= hi1)
        w[sel] = 0.5 + 0.5 * np.cos(np.pi * np.log(f[sel] / f_hi_hz) / np.log(hi1 / f_hi_hz))
    return w


def deconvolve(
    recording: np.ndarray,
    sweep: Sweep,
    *,
    level_lin: float = 1.0,
    n_repeats: int = 1,
    period_samples: int | None = None,
    pre_s: float | None = None,
    band_limit: bool = True,
) -> Deconvolved:
    """Deconvolve a recording of ``n_repeats`` sweeps by FFT.

    The recording's spectrum is multiplied by the sweep's regularised inverse
    ``X*/(|X|² + ε)`` (ε = 10⁻³ of the in-band median of |X|², so it acts only outside
    the band) [4]_. In the band this is exact, where Farina's time-domain inverse filter
    (:attr:`Sweep.inverse`) is exact only to the stationary-phase approximation (a few
    per cent of ripple at the low end of short sweeps); the results are laid out like
    the full linear convolution with that filter: time zero at index N − 1, the harmonic
    responses before it, at −L·ln k [1]_.

    Parameters
    ----------
    recording : (n,) or (n, n_channels) samples, as recorded (full scale = 1).
    sweep : the sweep that was played.
    level_lin : the amplitude the sweep was played at (0 dBFS = 1); the IR is divided
        by it, so it comes out in loop units (input full scale per output full scale).
    n_repeats, period_samples : the recording holds ``n_repeats`` sweeps starting every
        ``period_samples`` samples (sweep + silence); default one sweep.
    pre_s : how much of the acausal (harmonic) part to keep before time zero; default
        up to the 5th harmonic plus 10 ms, at most N − 1 samples.
    band_limit : multiply by :func:`band_window` (the sweep's band with half-octave
        raised-cosine skirts) so that DC offsets and out-of-band noise, which the sweep
        does not excite, stay out of the IR.
    """
    y = np.asarray(recording, dtype=float)
    if y.ndim == 1:
        y = y[:, None]
    if y.ndim != 2:
        raise InputError(f"must be 1-D or 2-D (samples, channels), got shape {y.shape}", key="recording")
    n = sweep.n_samples
    fs = sweep.sample_rate_hz
    period = int(period_samples) if period_samples is not None else y.shape[0]
    if n_repeats < 1 or period < n + 1 or n_repeats * period > y.shape[0] + 0:
        raise InputError(
            f"needs {n_repeats} period(s) of at least {n + 1} samples, got period {period} and {y.shape[0]} samples",
            key="recording",
        )
    n_valid = period - n + 1
    if pre_s is None:
        n_pre = int(math.ceil(sweep.harmonic_advance_samples(5) + 0.01 * fs))
    else:
        n_pre = int(round(pre_s * fs))
    n_pre = max(0, min(n_pre, n - 1))
    total = n_repeats * period
    # circular deconvolution is enough: the acausal part deeper than n_pre wraps to indices
    # after the last valid linear-IR sample, so nothing that is used is aliased
    nfft = sp_fft.next_fast_len(total + n_pre + 1, real=True)
    xf = sweep.spectrum(nfft)
    x2 = np.abs(xf) ** 2
    freqs = np.fft.rfftfreq(nfft, 1.0 / fs)
    inband = (freqs >= sweep.f_lo_hz) & (freqs <= sweep.f_hi_hz)
    eps = 1e-3 * float(np.median(x2[inband])) if np.any(inband) else 1e-12
    finv = np.conj(xf) / (x2 + eps)  # the sweep's regularised spectral inverse [4]_
    if band_limit:
        finv *= band_window(freqs, sweep.f_lo_hz, sweep.f_hi_hz, fs)
    # single precision for the two big transforms: recordings are float32 to begin with, and
    # the rounding floor (about −120 dB re the IR peak) is far below any acoustic noise floor
    yf = sp_fft.rfft(y[:total].T.astype(np.float32), nfft, axis=-1, workers=_WORKERS)
    h = sp_fft.irfft(yf * finv.astype(np.complex64), nfft, axis=-1, workers=_WORKERS).astype(float)
    if level_lin != 1.0:
        h /= float(level_lin)
    seg_len = n_pre + n_valid
    segs = np.empty((n_repeats, y.shape[1], seg_len))
    for r in range(n_repeats):
        z = r * period  # time zero of repeat r; harmonics before it (wrapping for r = 0)
        idx = np.arange(z - n_pre, z + n_valid) % nfft
        segs[r] = h[:, idx]
    return Deconvolved(segs, n_pre, n_valid, fs, float(level_lin), nfft, xf, yf, period)


# ------------------------------------------------------------------ quality figures


def peak_index(ir: np.ndarray) -> int:
    """Index of the largest |sample|."""
    return int(np.argmax(np.abs(np.asarray(ir))))


def noise_power(ir: np.ndarray, interval: tuple[float, float] = (0.9, 1.0)) -> float:
    """Mean of h² over a relative interval of the IR (default its last 10 %).

    The same estimator as pyrato's ``estimate_noise_energy`` (which follows [3]_).
    """
    h = np.asarray(ir, dtype=float)
    a = int(h.shape[-1] * interval[0])
    b = int(h.shape[-1] * interval[1])
    if b <= a:
        raise InputError(f"noise interval {interval} holds no samples of a {h.shape[-1]}-sample IR", key="interval")
    return float(np.mean(h[..., a:b] ** 2))


def peak_to_noise_db(ir: np.ndarray, noise_power_lin: float | None = None) -> float:
    """Peak-to-noise ratio 10·log10(max h² / noise power) in dB.

    With ``noise_power_lin`` None the noise power is the mean of h² over the last 10 %.
    A zero noise power is floored at the smallest positive double, so the result stays finite.
    """
    h = np.asarray(ir, dtype=float)
    npow = noise_power(h) if noise_power_lin is None else float(noise_power_lin)
    return float(10.0 * np.log10(max(float(np.max(h**2)), 1e-300) / max(npow, 1e-300)))


def _block_energy_db(h: np.ndarray, block: int) -> np.ndarray:
    nb = h.shape[0] // block
    e = np.mean(h[: nb * block].reshape(nb, block) ** 2, axis=1)
    return 10.0 * np.log10(np.maximum(e, 1e-300))


def decay_end_index(
    ir: np.ndarray,
    sample_rate_hz: float,
    *,
    block_s: float = 0.01,
    headroom_db: float = 10.0,
    n_iterations: int = 3,
    dynamic_range_db: float = 100.0,
) -> tuple[int, float]:
    """Where the decay of an IR meets its noise floor (simplified Lundeby et al. [3]_).

    1. Energy in blocks of ``block_s``; noise = mean energy of the last 10 % of the IR.
    2. A straight line is fitted (least squares, dB vs. time) to the blocks from the
       peak down to ``headroom_db`` above the noise; its intersection with the noise
       level is the crossing point.
    3. The noise is re-estimated from the blocks later than the crossing plus the time
       the decay takes to fall 5 dB further (but from at least the last 10 %), and 2–3 repeat.
    4. If the later half of what lies after the crossing still falls by more than 3 dB
       along a fitted line, it is reverberation, not noise: the whole IR is kept (the window ends in the decay).
    Levels more than ``dynamic_range_db`` below the peak block count as noise (the
    slow band-limiting ringing of an electrical loopback decays to the rounding floor
    only after a long time, and no loop analysis needs more range than that).

    Returns
    -------
    (index, noise_power) : the crossing point in samples from the IR's start (at most the
        IR length) and the final noise power estimate (mean h² per sample).
    """
    h = np.asarray(ir, dtype=float)
    fs = float(sample_rate_hz)
    block = max(1, int(round(block_s * fs)))
    n = h.shape[0]
    if n < 4 * block:
        return n, noise_power(h)
    e_db = _block_energy_db(h, block)
    floor_db = float(np.max(e_db)) - dynamic_range_db
    e_db = np.maximum(e_db, floor_db)
    nb = e_db.shape[0]
    t = (np.arange(nb) + 0.5) * block / fs
    noise_lin = max(noise_power(h), 10.0 ** (floor_db / 10.0))
    p = int(np.argmax(e_db))
    cross = n
    for _ in range(n_iterations):
        noise_db = 10.0 * math.log10(max(noise_lin, 1e-300))
        above = np.nonzero(e_db[p:] < noise_db + headroom_db)[0]
        stop = p + (int(above[0]) if above.size else nb - p)
        if stop - p < 2:
            # the IR falls into the noise within one or two blocks (a wire, an impulse) —
            # unless what follows still decays: then it is reverberation, not noise
            cross = n if _still_decaying(e_db[p + 1 :], block / fs) else min(n, (p + 1) * block)
            break
        slope, intercept = np.polyfit(t[p:stop], e_db[p:stop], 1)
        if slope >= 0:
            cross = n
            break
        tc = (noise_db - intercept) / slope
        cross = int(min(n, max((p + 1) * block, round(tc * fs))))
        # re-estimate the noise after the crossing (+5 dB further decay), at least the last 10 %
        start = int(min(cross + round((-5.0 / slope) * fs), int(0.9 * n)))
        if n - start >= block:
            noise_lin = max(float(np.mean(h[start:] ** 2)), 10.0 ** (floor_db / 10.0))
    if cross < n and _still_decaying(e_db[min(nb - 1, cross // block) :], block / fs):
        cross = n  # the "noise" after the crossing still decays: the window ends inside the decay
    return int(cross), float(noise_lin)


def _still_decaying(e_db: np.ndarray, block_s: float, min_drop_db: float = 3.0) -> bool:
    """True when the later half of the block energies still falls by more than ``min_drop_db``
    along a fitted line (noise is flat; the first half may hold the last of the decay)."""
    e_db = e_db[e_db.shape[0] // 2 :]
    if e_db.shape[0] < 4:
        return False
    t = np.arange(e_db.shape[0]) * block_s
    slope = float(np.polyfit(t, e_db, 1)[0])
    return slope * (t[-1] - t[0]) < -min_drop_db


@dataclass(frozen=True)
class ClipReport:
    """Clipping of a recording: samples at or above ``threshold`` of full scale."""

    n_clipped: int
    peak_dbfs: float
    clipped: bool
    threshold: float


def clipping(recording: np.ndarray, threshold: float = 0.999) -> ClipReport:
    """Count samples with |y| ≥ threshold (full scale = 1). Any such sample counts as clipped
    (converters saturate at full scale; common practice, no source)."""
    y = np.asarray(recording, dtype=float)
    peak = float(np.max(np.abs(y))) if y.size else 0.0
    n = int(np.count_nonzero(np.abs(y) >= threshold))
    return ClipReport(n, float(20.0 * np.log10(max(peak, 1e-15))), n > 0, float(threshold))


@dataclass(frozen=True)
class Distortion:
    """Harmonic-distortion responses separated from the linear IR [1]_.

    ``harmonic_db[k-2]`` = 10·log10(E_k / E_1,k): energy of the k-th harmonic response
    in [k·f1, f2/√2] (noise energy of its window subtracted) over the linear IR's energy there.
    ``thd_db`` sums the ratios, ``thd_pct`` = 100·sqrt(Σ E_k/E_1,k). These are broadband
    energy ratios, a THD-like figure, not the THD of one tone.
    ``peak_offsets`` are the harmonic arrivals (peaks of the Hilbert envelope) in samples
    relative to the linear IR's peak (negative: before it). ``noise_limited[k-2]`` is true where the harmonic's window holds
    no more than twice the noise energy expected there.
    """

    orders: tuple[int, ...]
    harmonic_db: tuple[float, ...]
    peak_offsets: tuple[int, ...]
    noise_limited: tuple[bool, ...]
    thd_db: float
    thd_pct: float


def _envelope_peak(s: np.ndarray, a: int, b: int) -> int:
    """Peak of the Hilbert envelope of s[a:b] (index relative to a). The harmonic responses are
    band-pass pulses with a phase offset, so their envelope, not their largest sample, marks
    their arrival."""
    from scipy.signal import hilbert

    guard = min(a, 256)
    env = np.abs(hilbert(s[a - guard : b]))[guard:]
    return int(np.argmax(env))


def _band_energy_fn(x: np.ndarray, sample_rate_hz: float):
    """Energy of x in [f_min, f_max], one FFT for many bands."""
    x = np.asarray(x, dtype=float)
    nfft = sp_fft.next_fast_len(max(1, x.shape[-1]), real=True)
    p = np.abs(sp_fft.rfft(x, nfft)) ** 2
    p[1:] *= 2.0
    if nfft % 2 == 0:
        p[-1] /= 2.0
    f = np.fft.rfftfreq(nfft, 1.0 / sample_rate_hz)
    c = np.concatenate([[0.0], np.cumsum(p)]) / nfft

    def energy(f_min_hz: float, f_max_hz: float) -> float:
        a = int(np.searchsorted(f, f_min_hz, side="left"))
        b = int(np.searchsorted(f, f_max_hz, side="right"))
        return float(c[b] - c[a]) if b > a else 0.0

    return energy


def _energy_above(x: np.ndarray, sample_rate_hz: float, f_min_hz: float, f_max_hz: float = math.inf) -> float:
    """Energy of x in the band [f_min, f_max] (Parseval on a one-sided spectrum)."""
    x = np.asarray(x, dtype=float)
    if x.size == 0:
        return 0.0
    nfft = sp_fft.next_fast_len(x.shape[-1], real=True)
    p = np.abs(sp_fft.rfft(x, nfft)) ** 2
    f = np.fft.rfftfreq(nfft, 1.0 / sample_rate_hz)
    w = np.full(p.shape, 2.0)
    w[0] = 1.0
    if nfft % 2 == 0:
        w[-1] = 1.0
    return float(np.sum((w * p)[(f >= f_min_hz) & (f <= f_max_hz)]) / nfft)


def harmonic_distortion(
    segment: np.ndarray,
    zero_index: int,
    sweep: Sweep,
    *,
    linear_len: int | None = None,
    noise: np.ndarray | None = None,
    max_order: int = 5,
    pre_s: float = 0.01,
) -> Distortion:
    """Measure the harmonic responses in a deconvolved segment (see :class:`Deconvolved`).

    The linear IR's peak is found after ``zero_index``; harmonic k is expected
    ``L·ln k`` before it [1]_. Its window runs from ``pre_s`` before its own expected
    position to ``pre_s`` before that of harmonic k−1 (the linear IR for k = 2); its last
    fifth is faded out (squared cosine) against spectral leakage. The default
    10 ms keeps the linear IR's symmetric pre-ringing from the sweep's sharp upper band edge
    (a few ms) out of the second harmonic's window.

    The k-th harmonic of a fundamental swept from f1 can only appear at or above k·f1, so
    E_k is the window's energy in [k·f1, f2/√2] and it is compared with the linear IR's energy
    in the same band (|H_k(f)| = a_k there for a memoryless k-th order term, because the k-th
    harmonic of the sweep is itself an exponential sweep with the same rate [1]_). This also
    keeps the linear IR's own band-limiting ringing (the sinc tails of the band edges at f1
    and f2) out of the figure.
    ``noise`` (a noise-only stretch of the deconvolved IR) gives the noise energy expected
    in each window, which is subtracted.
    """
    s = np.asarray(segment, dtype=float)
    fs = sweep.sample_rate_hz
    lin = s[zero_index:] if linear_len is None else s[zero_index : zero_index + linear_len]
    p_lin = zero_index + peak_index(lin)
    pre = int(round(pre_s * fs))
    # the linear IR with its own pre-ringing (band-limiting is zero-phase, so it rings both ways)
    lin = s[max(0, p_lin - pre) : zero_index + lin.shape[0]]
    nz = None if noise is None or np.asarray(noise).size < 16 else np.asarray(noise, dtype=float)
    lin_band = _band_energy_fn(lin, fs)
    noise_band = _band_energy_fn(nz, fs) if nz is not None else None
    orders, hdb, offs, lim = [], [], [], []
    total = 0.0
    prev_start = p_lin - pre
    for k in range(2, max_order + 1):
        f_min = k * sweep.f_lo_hz
        f_max = sweep.f_hi_hz / math.sqrt(2.0)
        if f_min >= f_max:
            break
        centre = p_lin - int(round(sweep.harmonic_advance_samples(k)))
        start = centre - pre
        if start < 0:
            break
        w = s[start:prev_start]
        if w.size == 0:
            break
        # fade the end that cuts through the next-later response's pre-ringing (spectral leakage)
        m = max(1, w.size // 5)
        w = w.copy()
        w[-m:] *= _fade_out(m)
        ek = _energy_above(w, fs, f_min, f_max)
        e1 = max(lin_band(f_min, f_max), 1e-300)
        expected_noise = 0.0 if nz is None else noise_band(f_min, f_max) / nz.shape[0] * w.size
        net = ek - expected_noise
        orders.append(k)
        offs.append(int(start + _envelope_peak(s, start, prev_start) - p_lin))
        lim.append(bool(ek <= 2.0 * expected_noise))
        hdb.append(float(10.0 * np.log10(max(net, 1e-300) / e1)))
        total += max(net, 0.0) / e1
        prev_start = start
    ratio = total
    return Distortion(
        tuple(orders), tuple(hdb), tuple(offs), tuple(lim),
        float(10.0 * np.log10(max(ratio, 1e-300))), float(100.0 * math.sqrt(ratio)),
    )


def ir_difference_db(a: np.ndarray, b: np.ndarray) -> float:
    """Normalised difference 10·log10(Σ(a−b)² / Σ((a+b)/2)²) in dB (−inf-safe)."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    m = min(a.shape[-1], b.shape[-1])
    a, b = a[..., :m], b[..., :m]
    ref = float(np.sum(((a + b) / 2.0) ** 2))
    return float(10.0 * np.log10(max(float(np.sum((a - b) ** 2)), 1e-300) / max(ref, 1e-300)))


def repeat_difference_db(irs: np.ndarray, noise_power_lin: float) -> tuple[float, float]:
    """Time-variance check between repeated sweeps (ISO 18233 [2]_ asks repeats to agree).

    Returns ``(difference_db, expected_db)``: the mean energy of each repeat's deviation
    from the mean IR over the mean IR's energy, and the same figure that noise of power
    ``noise_power_lin`` per sample alone would give, ((R−1)/R)·σ²·M / E.
    """
    h = np.asarray(irs, dtype=float)
    r, m = h.shape
    mean = h.mean(axis=0)
    e = max(float(np.sum(mean**2)), 1e-300)
    dev = float(np.mean(np.sum((h - mean) ** 2, axis=1)))
    expected = (r - 1) / r * noise_power_lin * m
    return float(10 * np.log10(max(dev, 1e-300) / e)), float(10 * np.log10(max(expected, 1e-300) / e))


def octave_noise_floor(
    ir: np.ndarray,
    noise: np.ndarray,
    sample_rate_hz: float,
    f_lo_hz: float,
    f_hi_hz: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Loop gain and noise floor of an IR per octave band (IEC 61260-1 centres).

    The loop gain per band is the power average of |H(f)|² of ``ir``. The noise floor is
    what the noise would contribute to an IR of the same length M: M times the mean power
    spectral density of ``noise`` (white-noise scaling, E|DFT_M(n)|² = M·σ², from Parseval).
    Both in dB re a loop gain of 1 (0 dB). Bands whose edges leave [f_lo, f_hi] are dropped.

    Returns ``(centres_hz, loop_gain_db, noise_floor_db)``.
    """
    from howl.bands import band_centres_hz, band_edges_hz

    h = np.asarray(ir, dtype=float)
    nz = np.asarray(noise, dtype=float)
    centres = np.asarray(band_centres_hz(1, f_lo_hz, f_hi_hz), dtype=float)
    if centres.size == 0 or nz.size < 8:
        return np.zeros(0), np.zeros(0), np.zeros(0)
    lo, hi = band_edges_hz(centres, 1)
    keep = (lo >= f_lo_hz * 0.999) & (hi <= min(f_hi_hz, sample_rate_hz / 2) * 1.001)
    centres, lo, hi = centres[keep], lo[keep], hi[keep]
    m = h.shape[0]
    nfft = max(m, nz.shape[0])
    H2 = np.abs(sp_fft.rfft(h, nfft)) ** 2
    N2 = np.abs(sp_fft.rfft(nz, nfft)) ** 2 * (m / nz.shape[0])
    f = np.fft.rfftfreq(nfft, 1.0 / sample_rate_hz)
    g_db, n_db = [], []
    for a, b in zip(lo, hi):
        sel = (f >= a) & (f < b)
        if not np.any(sel):
            sel = np.array([np.argmin(np.abs(f - math.sqrt(a * b)))])
        g_db.append(10 * np.log10(max(float(np.mean(H2[sel])), 1e-300)))
        n_db.append(10 * np.log10(max(float(np.mean(N2[sel])), 1e-300)))
    return centres, np.array(g_db), np.array(n_db)


def explained_fraction(recording: np.ndarray, sweep: Sweep, ir_with_latency: np.ndarray, level_lin: float) -> float:
    """Share of the recording's energy that the sweep through the IR explains.

    ``1 − Σ(y − a·x⊛h)² / Σy²`` over the recording (one sweep at its start). A clean
    measurement gives nearly 1; a recording that does not contain the sweep (wrong
    channel, loud talk) gives ≈ 0 or less.
    """
    y = np.asarray(recording, dtype=float)
    e = float(np.sum(y**2))
    if e <= 0.0:
        return 0.0
    n = y.shape[0]
    h = np.asarray(ir_with_latency, dtype=float)[:n]
    nfft = sp_fft.next_fast_len(sweep.n_samples + h.shape[0] - 1, real=True)
    yh = sp_fft.irfft(sp_fft.rfft(sweep.signal, nfft, workers=_WORKERS) * sp_fft.rfft(h, nfft, workers=_WORKERS),
                      nfft, workers=_WORKERS)
    yhat = np.zeros(n)
    m = min(n, nfft)
    yhat[:m] = yh[:m] * level_lin
    return float(1.0 - np.sum((y - yhat) ** 2) / e)


def _explained_from_spectra(dec: Deconvolved, channel: int, ir_with_latency: np.ndarray, n_repeats: int) -> float:
    """:func:`explained_fraction` over all repeats, from the spectra the deconvolution already has.

    Parseval on the circular residual Y − a·X·R·H (R = Σ_r e^{−jω r P}, the repeats);
    exact as long as the buffer holds sweep ⊛ IR without wrapping, which the layout of
    :func:`deconvolve` guarantees for IRs shorter than the valid window.
    """
    yf = dec.recording_spectrum[channel]
    nfft = dec.nfft
    w = np.full(yf.shape, 2.0)
    w[0] = 1.0
    if nfft % 2 == 0:
        w[-1] = 1.0
    e = float(np.sum(w * np.abs(yf) ** 2))
    if e <= 0.0:
        return 0.0
    hf = sp_fft.rfft(np.asarray(ir_with_latency, dtype=float), nfft, workers=_WORKERS)
    k = np.arange(yf.shape[0])
    rep = np.zeros(yf.shape, dtype=complex)
    for r in range(n_repeats):
        rep += np.exp(-2j * np.pi * k * (r * dec.period_samples) / nfft)
    resid = yf - dec.level_lin * dec.sweep_spectrum * rep * hf
    return float(1.0 - np.sum(w * np.abs(resid) ** 2) / e)


# --------------------------------------------------------------- whole analysis


@dataclass(frozen=True, eq=False)
class Analysis:
    """Everything measured from one recording block (one or more repeated sweeps).

    ir : the loop IR, averaged over repeats, time zero = interface latency removed when
        known (else time zero = recording start), trimmed where the decay meets the noise.
    latency_samples : round-trip latency of the interface (None: unknown).
    latency_source : "reference", "calibration", "given" or "unknown".
    reference_latencies : per-repeat latency seen on the reference channel (empty without one).
    snr_db : peak-to-noise ratio of the averaged IR (noise from after the decay).
    single_snr_db : the same for one repeat (what a single sweep gives).
    noise_power_lin : noise power per sample of one repeat's IR.
    clip : clipping of the recorded channels used.
    distortion : harmonic responses (THD-like figures).
    repeat_difference_db / repeat_expected_db : time-variance check (None with one repeat).
    explained : share of the recording explained by sweep ⊛ IR.
    reference_snr_db : peak-to-noise ratio of the reference channel's IR (None without one).
    band_* : octave bands (centres, loop gain, noise floor, both dB re loop gain 1).
    """

    ir: np.ndarray
    sample_rate_hz: int
    latency_samples: int | None
    latency_source: str
    reference_latencies: tuple[int, ...]
    snr_db: float
    single_snr_db: float
    noise_power_lin: float
    clip: ClipReport
    distortion: Distortion
    repeat_difference_db: float | None
    repeat_expected_db: float | None
    explained: float
    reference_snr_db: float | None
    recording_rms_dbfs: float
    band_centres_hz: np.ndarray
    band_loop_gain_db: np.ndarray
    band_noise_floor_db: np.ndarray
    per_repeat_irs: np.ndarray  # (n_repeats, len(ir)), untrimmed-fade, for linearity checks
    window_samples: int = 0  # the IR window available after the latency
    decay_reached_noise: bool = True  # False: the IR was still decaying at the end of the window


def analyse(
    recording: np.ndarray,
    sweep: Sweep,
    *,
    level_lin: float,
    mic_index: int = 0,
    reference_index: int | None = None,
    n_repeats: int = 1,
    period_samples: int | None = None,
    latency_samples: int | None = None,
    latency_source: str = "given",
    min_ir_s: float = 0.02,
) -> Analysis:
    """Deconvolve a recording and compute all quality figures.

    ``recording`` is (n, n_channels); ``mic_index``/``reference_index`` are 0-based columns.
    With a reference column, the latency of each repeat is the peak of that column's IR
    (the straight wire from output to input), which overrides ``latency_samples``.
    """
    y = np.asarray(recording, dtype=float)
    if y.ndim == 1:
        y = y[:, None]
    fs = sweep.sample_rate_hz
    dec = deconvolve(y, sweep, level_lin=level_lin, n_repeats=n_repeats, period_samples=period_samples)
    lin = dec.linear_all  # (R, C, n_valid)
    ref_lat: tuple[int, ...] = ()
    ref_snr = None
    if reference_index is not None:
        ref = lin[:, reference_index, :]
        ref_lat = tuple(peak_index(ref[r]) for r in range(dec.n_repeats))
        d0 = ref_lat[0]
        ref_snr = min(peak_to_noise_db(ref[r]) for r in range(dec.n_repeats))
        latency = d0
        source = "reference"
    elif latency_samples is not None:
        latency = int(latency_samples)
        source = latency_source
    else:
        latency = None
        source = "unknown"
    start = 0 if latency is None else int(latency)
    mic = lin[:, mic_index, start:]  # (R, n_valid - start)
    if mic.shape[1] < 8:
        raise InputError(f"latency {start} samples leaves no IR in the {dec.n_valid}-sample window; lengthen the tail",
                         key="tail_s")
    mean = mic.mean(axis=0)
    end, noise_mean = decay_end_index(mean, fs)
    end = max(end, min(mic.shape[1], int(round(min_ir_s * fs))))
    # noise of one repeat: from the same region after the decay
    tail_start = min(max(end, int(0.9 * mic.shape[1])), mic.shape[1] - 1)
    if mic.shape[1] - end >= max(16, mic.shape[1] // 20):
        tail_start = end
    noise_single = float(np.mean(mic[:, tail_start:] ** 2))
    noise_avg = float(np.mean(mean[tail_start:] ** 2))
    ir = mean[:end].copy()
    nf = min(int(round(0.005 * fs)), max(1, end // 10))
    if nf > 1 and end - nf > peak_index(ir):
        ir[-nf:] *= _fade_out(nf)
    snr = peak_to_noise_db(mean[:end], noise_avg)
    single = peak_to_noise_db(mic[0, :end], noise_single)
    if dec.n_repeats > 1:
        rd, re_ = repeat_difference_db(mic[:, :end], noise_single)
    else:
        rd = re_ = None
    # harmonics: from the mean segment of the mic channel
    seg = dec.segments[:, mic_index, :].mean(axis=0)
    dist = harmonic_distortion(seg, dec.zero_index + start, sweep, linear_len=end,
                               noise=mean[tail_start:])
    cols = [mic_index] + ([reference_index] if reference_index is not None else [])
    clip = clipping(y[:, cols])
    h_lat = np.concatenate([np.zeros(start), mean[:end]])
    expl = _explained_from_spectra(dec, mic_index, h_lat, dec.n_repeats)
    rms = float(np.sqrt(np.mean(y[:, mic_index] ** 2)))
    centres, g_db, n_db = octave_noise_floor(mean[:end], mean[tail_start:], fs, sweep.f_lo_hz, sweep.f_hi_hz)
    return Analysis(
        ir=ir, sample_rate_hz=fs, latency_samples=latency, latency_source=source,
        reference_latencies=ref_lat, snr_db=snr, single_snr_db=single, noise_power_lin=noise_single,
        clip=clip, distortion=dist, repeat_difference_db=rd, repeat_expected_db=re_, explained=expl,
        reference_snr_db=ref_snr, recording_rms_dbfs=float(20 * np.log10(max(rms, 1e-15))),
        band_centres_hz=centres, band_loop_gain_db=g_db, band_noise_floor_db=n_db,
        per_repeat_irs=mic[:, :end].copy(),
        window_samples=int(mic.shape[1]), decay_reached_noise=bool(end < 0.9 * mic.shape[1]),
    )
