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

from dataclasses import dataclass

import numpy as np

from howl.errors import InputError
from howl.measure._quality import (  # noqa: F401  (re-exported: the measurement API)
    ClipReport,
    Distortion,
    _explained_from_spectra,
    clipping,
    decay_end_index,
    explained_fraction,
    harmonic_distortion,
    ir_difference_db,
    noise_power,
    octave_noise_floor,
    peak_to_noise_db,
    repeat_difference_db,
)
from howl.measure._sweep_signal import (  # noqa: F401  (re-exported)
    Deconvolved,
    Sweep,
    _fade_in,
    _fade_out,
    band_window,
    deconvolve,
    exponential_sweep,
    peak_index,
)


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


def _latency(lin, n_repeats, reference_index, latency_samples, latency_source):
    """(latency, its source, per-repeat reference latencies, reference peak-to-noise dB or None).

    With a reference column, the latency is the peak of its IR (the wire from output to input).
    """
    if reference_index is not None:
        ref = lin[:, reference_index, :]
        ref_lat = tuple(peak_index(ref[r]) for r in range(n_repeats))
        ref_snr = min(peak_to_noise_db(ref[r]) for r in range(n_repeats))
        return ref_lat[0], "reference", ref_lat, ref_snr
    if latency_samples is not None:
        return int(latency_samples), latency_source, (), None
    return None, "unknown", (), None


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
    latency, source, ref_lat, ref_snr = _latency(lin, dec.n_repeats, reference_index, latency_samples, latency_source)
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
