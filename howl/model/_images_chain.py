"""The rig's signal chain put into the image-source loop IRs (one basis with the statistical plan).

:func:`chained_loop_irs` turns the bare-room pair IRs of :func:`howl.model.images.rig_loop_irs`
(loudspeaker input → mic output, flat devices) into the loop as the rig sets it: each pair
``irs[s, m]`` gets

* loudspeaker s's on-axis response (:func:`howl.model.chain.speaker_response_db`),
* mic m's capsule response (:func:`howl.model.chain.mic_response_db`),
* the complex response of mic m's channel high-pass and EQ
  (:func:`howl.model.chain.channel_response`, RBJ cookbook biquads at 48 kHz, the channel the
  statistical plan uses) — mic m is the channel that sends into loudspeaker s in that pair.

It is done in the frequency domain: the IRs are zero-padded to ``N`` samples, transformed on
the FFT grid f_k = k·fs/N, multiplied by the chain there and transformed back, so the result's
N-point FFT is, bin for bin, the bare spectrum times the chain (to rounding), and the margins
(:func:`howl.loop.nyquist_margin`, :func:`howl.loop.mimo_margin`) read it like any loop IR.

Phase of the magnitude-only tables: the loudspeaker and capsule responses are magnitudes; they
get their **minimum phase**, derived from the real cepstrum (the folded cepstrum of log|A|,
A. V. Oppenheim and R. W. Schafer, "Discrete-Time Signal Processing", 3rd ed., 2010, §5.6 and
§13.5). Zero phase would be simpler but its response is non-causal: the N-point transform wraps
the part before time zero to the end of the buffer, which is right on the FFT bins but wrong
between them, where the Nyquist search refines its crossings. A minimum-phase response is
causal and decays, and it is the phase a loudspeaker's roll-offs and a capsule's smooth
response roughly have. The channel's filters keep their own (causal, IIR) phase.

Padding: N ≥ len(ir) + the time the slowest channel pole takes to decay by 160 dB (from the
biquads' poles at 48 kHz) + 0.1 s for the minimum-phase responses, so that what the chain adds
after the IR's end is not wrapped. The bin at fs/2 cannot hold a complex value in a real IR: the
48 kHz channel's response there keeps only its real part. That bin is outside the images plan's
band (it stops at 0.45·fs), and the imaginary part dropped leaves a small ringing over the buffer
that moves the response between the bins by a few 1e-5 relative (tests/model/test_images_chain.py),
a few 1e-4 dB.

A rig that says nothing about its chain (no high-pass, no EQ, no response tables or usable
ranges) gets its IRs back unchanged (the same array), so its figures are exactly the bare ones.
"""

from __future__ import annotations

import math

import numpy as np

from howl.model.chain import CHAIN_FS_HZ, channel_response, channel_sos, mic_response_db, speaker_response_db

#: Floor of a magnitude response before its logarithm (−120 dB): keeps the cepstrum finite where a
#: loudspeaker's usable range falls to nothing (at 0 Hz).
_MAG_FLOOR = 1e-6

#: Extra padding (s) for the minimum-phase loudspeaker and capsule responses.
_MINPHASE_PAD_S = 0.1

#: The channel's impulse response is followed until it has decayed by this much (dB).
_CHANNEL_DECAY_DB = 160.0


def _mic_has_chain(mic) -> bool:
    return (getattr(mic, "high_pass", None) is not None or bool(getattr(mic, "eq", ()))
            or bool(getattr(mic, "response_table", None)))


def _speaker_has_chain(spk) -> bool:
    return bool(getattr(spk, "response_table", None)) or getattr(spk, "usable_range", None) is not None


def rig_has_chain(rig) -> bool:
    """True when any mic channel or loudspeaker of ``rig`` has a response other than flat."""
    return any(_mic_has_chain(m) for m in rig.mics) or any(_speaker_has_chain(s) for s in rig.speakers)


def _channel_decay_s(rig) -> float:
    """Time (s) for the slowest pole of any mic channel to decay by ``_CHANNEL_DECAY_DB``."""
    r_max = 0.0
    for mic in rig.mics:
        for row in channel_sos(mic):
            r_max = max(r_max, float(np.max(np.abs(np.roots(row[3:])), initial=0.0)))
    if r_max <= 0.0:
        return 0.0
    if r_max >= 1.0:  # not expected of a valid rig (its filters are stable); keep a bounded pad
        return 10.0
    n48 = _CHANNEL_DECAY_DB / 20.0 * math.log(10.0) / -math.log(r_max)
    return min(10.0, n48 / CHAIN_FS_HZ)


def minimum_phase_response(magnitude: np.ndarray, n_fft: int) -> np.ndarray:
    """The minimum-phase response (rfft grid of ``n_fft`` points) with the magnitude ``magnitude``.

    Homomorphic method (Oppenheim & Schafer, see the module docstring): the real cepstrum c of
    log|A| is folded onto its causal half (c[0], 2·c[1..N/2−1], c[N/2]) and exponentiated back;
    the magnitude is exactly ``magnitude`` (floored at −120 dB) on the grid.
    """
    log_a = np.log(np.maximum(np.asarray(magnitude, float), _MAG_FLOOR))
    c = np.fft.irfft(log_a, n_fft)
    fold = np.zeros(n_fft)
    half = n_fft // 2
    fold[0] = c[0]
    fold[1:half] = 2.0 * c[1:half]
    fold[half] = c[half]
    return np.exp(np.fft.rfft(fold))


def _magnitude(response_db: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore"):
        return 10.0 ** (np.asarray(response_db, float) / 20.0)


def chain_on_grid(rig, freq_hz: np.ndarray, n_fft: int) -> tuple[np.ndarray, np.ndarray]:
    """(speaker (S, F), mic (M, F)) complex chain factors on the rfft grid ``freq_hz`` of ``n_fft`` points.

    Loudspeakers: minimum-phase response. Mics: minimum-phase capsule response × channel
    high-pass and EQ. Flat devices get exact ones.
    """
    f = np.asarray(freq_hz, float)
    spk = np.ones((len(rig.speakers), f.size), complex)
    mic = np.ones((len(rig.mics), f.size), complex)
    with np.errstate(divide="ignore", invalid="ignore"):  # 0 Hz: log(0) in the tables, 1/0 in usable ranges
        for si, s in enumerate(rig.speakers):
            if _speaker_has_chain(s):
                spk[si] = minimum_phase_response(np.nan_to_num(_magnitude(speaker_response_db(s, f)), nan=0.0), n_fft)
        for mi, m in enumerate(rig.mics):
            if getattr(m, "response_table", None):
                mic[mi] = minimum_phase_response(np.nan_to_num(_magnitude(mic_response_db(m, f)), nan=0.0), n_fft)
            if getattr(m, "high_pass", None) is not None or getattr(m, "eq", ()):
                mic[mi] = mic[mi] * channel_response(m, f)
    return spk, mic


def chained_loop_irs(rig, irs: np.ndarray, sample_rate_hz: float) -> np.ndarray:
    """The pair IRs ``irs`` (S, M, n) of ``rig`` with its chain in (see the module docstring).

    Returns ``irs`` itself when the rig has no chain; otherwise a new (S, M, N) array, N ≥ n,
    whose N-point FFT is the bare N-point FFT times speaker[s] · mic[m] of :func:`chain_on_grid`
    on every bin below fs/2.
    """
    if not rig_has_chain(rig):
        return irs
    from scipy.fft import next_fast_len

    fs = float(sample_rate_hz)
    irs = np.asarray(irs, float)
    n = irs.shape[-1]
    pad = int(math.ceil(fs * (_channel_decay_s(rig) + _MINPHASE_PAD_S)))
    n_fft = next_fast_len(n + pad, real=True)
    n_fft += n_fft % 2  # an even N: the fold of the cepstrum and the Nyquist bin as documented
    f = np.fft.rfftfreq(n_fft, 1.0 / fs)
    spk, mic = chain_on_grid(rig, f, n_fft)
    H = np.fft.rfft(irs, n_fft, axis=-1)
    H *= spk[:, None, :]
    H *= mic[None, :, :]
    return np.fft.irfft(H, n_fft, axis=-1)


def band_chain_power(rig, centres_hz, fraction: int) -> np.ndarray:
    """(S, M, F) band power of loudspeaker s's response × mic m's capsule and channel, per band
    (:func:`howl.model.chain.chain_power`, the factors the statistical plan applies)."""
    from howl.model.chain import chain_power

    ch = chain_power(rig, np.asarray(centres_hz, float), fraction)
    return np.asarray(ch.speaker_power, float)[:, None, :] * np.asarray(ch.mic_power, float)[None, :, :]



def statistical_single_mic(tr, k: int, chain_power_sf: np.ndarray, mix_s: np.ndarray, bandwidth_hz: np.ndarray):
    """The statistical estimate of mic ``k``'s loop alone, the chain in (the images plan's comparison column).

    Σ_s (direct + reverberant band power)·chain·mix² per band (``tr`` from
    :func:`howl.model.transfer.statistical_transfer`, ``chain_power_sf`` (S, F) from
    :func:`band_chain_power` for this mic, ``mix_s`` its send to each loudspeaker), plus
    Schroeder's peak factor with its 10–90 % spread (:func:`howl.model.plan.peak_factor_db`).

    Returns (band loop gain dB (F,), margin dB, margin at the high peak factor, at the low one).
    """
    from howl.model.plan import peak_factor_db

    m2 = np.asarray(mix_s, float) ** 2
    p_dir = np.einsum("sf,s->f", tr.direct_power[:, k, :] * chain_power_sf, m2)
    p_rev = np.einsum("sf,s->f", tr.reverberant_power[:, k, :] * chain_power_sf, m2)
    kf = p_dir / np.maximum(p_rev, 1e-300)
    pf, pf_lo, pf_hi = peak_factor_db(bandwidth_hz, tr.rt60_s, kf)
    avg_db = 10.0 * np.log10(np.maximum(p_dir + p_rev, 1e-300))
    stat = float(-np.max(avg_db + pf))
    return avg_db, stat, float(-np.max(avg_db + pf_hi)), float(-np.max(avg_db + pf_lo))
