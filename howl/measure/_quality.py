"""Quality figures of a deconvolved sweep: peak-to-noise ratio, where the decay meets the noise,
clipping, harmonic distortion, repeat agreement, octave noise floor and the explained share of the
recording (the figures half of :mod:`howl.measure.sweep`; its docstring gives the references).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import fft as sp_fft

from howl.errors import InputError

from howl.measure._sweep_signal import _WORKERS, Deconvolved, Sweep, _fade_out, peak_index


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
