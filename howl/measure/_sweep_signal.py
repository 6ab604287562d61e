"""The exponential sweep (Farina), its inverse filter and the deconvolution: the signal half of
:mod:`howl.measure.sweep` (see its docstring for the method and references).
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
