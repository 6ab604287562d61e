"""The low lane: the detector run a second time, below ``low_lane_hz``, on frames four times
longer (private: used by :class:`howl.detect.Detector`).

Why: the 85 ms frame resolves about 12 Hz. Below 300 Hz program partials a semitone apart
(7 Hz at 120 Hz) share one main lobe with a howl, and two howls 7 Hz apart beat in it, so a
slow low howl (5–15 dB/s in a reverberant room: the room's group delay makes it slow) is not a
clean straight line there until it dominates. A 340 ms frame resolves 3 Hz. Time resolution is
not needed at those rates: such a howl takes seconds to reach the program.

The lane is the same detector (one piece of code per idea) at a lower sample rate: the input is
low-pass filtered and decimated by an integer factor (:class:`Decimator`), and the time settings
are scaled (:func:`lane_config`). A long frame also averages away most of the vibrato of a sung
note that the short frame sees, so the lane's limits on frequency spread and drift are a third of
the main lane's (see :func:`lane_config`).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

#: the lane's sample rate is about this (the decimation factor is the integer part of fs / this)
LANE_RATE_HZ = 2400.0
#: time settings of the lane are this many times the main lane's (frame, hop ×2, windows)
LANE_FRAME_FACTOR = 4


def lane_factor(sample_rate_hz: float) -> int:
    """The integer decimation factor to the lane's rate (≥ 1)."""
    return max(1, int(sample_rate_hz // LANE_RATE_HZ))


def lane_config(cfg, lane_hz: float):
    """The main lane's settings changed for the low lane (tuned on tests/benchmarks/bench_detect.py's
    low set and its no-howl programs):

    * frame ×4 (0.34 s: 2.9 Hz bins); hop, decision windows, look-back and growth fit ×2 (0.2 s
      rise window, 0.6 s full window: a window shorter than the frame judges nearly one frame);
      band up to ``lane_hz``, rising candidates within it; no lane of its own;
    * 10 candidates per frame from a 3 dB PAPR gate: in 60–300 Hz the program's fundamentals and
      low partials are the strongest peaks, and a slow howl is not yet among the 6 strongest;
    * FSD and drift limits a third of the main lane's (0.07 %, floor 0.02 bin): the 0.34 s frame
      shows only about a third of a 5–6 Hz vibrato (the Gaussian's σ_t = 42 ms passes
      exp(−(2π·5.5 Hz·σ_t)²/2) ≈ 0.34 of it), while a howl resolved from its neighbours scatters
      by well under 0.01 %;
    * no steady-tone test (``persist_s`` infinite): a sung vowel held after its swell looked steady
      there; a howl that has reached the limiter is loud and clean in the main frames;
    * partners that do not grow along with the peak do not explain it (``min_phpr_other_db`` −∞):
      in a room, loop crossings sit at the multiples of an axial mode (axial modes are harmonic,
      f_n = n·c/2L), so a howl at 101 Hz had a louder stable line at exactly 202 Hz. Partners that
      do grow along (a swelling note's partials) still explain it;
    * contrast of growth on every window (``contrast_min_pnpr_one_side_db`` 15 dB, as the main
      lane's 0.10 s window has it): a slow low howl rises for seconds beside a louder program
      note 4-6 lane bins away; low set 16 -> 18 of 40 found before they dominate, no new false
      alarm on the no-howl programs (measured 2026-12-02; 9-15 dB gave the same);
    * ring-downs: the main lane's spread limit (``ring_max_fsd``: two loop modes a few Hz apart
      beat in the long frame), and PHPR over exact partners only (``ring_exact_partners``): a
      room's low loop modes ring together at near-harmonic ratios (101 and 152 Hz), which the
      main lane's 12 Hz bins do not resolve, so there no low ring-down passed at all;
    * a ring-down must decay slower than 0.75 × its neighbour bins (``max_decay_ratio``): in a
      reverberant room (RT60 over 0.75 s) every narrowband component decays slower than
      ``max_decay_db_per_s``; program through the low loops gave lane ring-downs at 0.9–2.9 × their
      neighbours' rate (note decays pumped through a mode), while every loop mode rung by a click
      (margins 1–4.4 dB) decayed at 0.26–0.58 × (measured 2026-12-02);
    * cheaper: tracks that are not rising are evaluated every 8 lane frames (0.16 s; a rising one
      every frame, as in the main lane).
    """
    kw = dict(
        window_s=LANE_FRAME_FACTOR * cfg.window_s, hop_s=2.0 * cfg.hop_s, f_hi_hz=lane_hz,
        rise_f_hi_hz=lane_hz, decision_window_s=2.0 * cfg.decision_window_s, rise_window_s=2.0 * cfg.rise_window_s,
        rise_lookback_s=2.0 * cfg.rise_lookback_s, growth_fit_s=2.0 * cfg.growth_fit_s, low_lane_hz=None,
        n_candidates=10, min_papr_db=3.0, max_fsd=cfg.max_fsd / 3.0, rise_max_fsd=cfg.rise_max_fsd / 3.0,
        rise_max_drift=cfg.rise_max_drift / 3.0, persist_s=float("inf"),
        min_phpr_other_db=float("-inf"), eval_every_frames=8, ring_max_fsd=cfg.max_fsd, ring_exact_partners=True,
        max_decay_ratio=0.75, contrast_min_pnpr_one_side_db=15.0,
        slow_window_s=2.0 * cfg.slow_window_s if cfg.slow_low_lane and cfg.slow_window_s is not None else None,
    )
    return replace(cfg, **kw)


def kaiser_lowpass(atten_db: float, width: float, cutoff: float) -> np.ndarray:
    """Windowed-sinc low-pass FIR with a Kaiser window, odd length, unit gain at DC (numpy only).

    ``width`` (transition) and ``cutoff`` are fractions of the Nyquist frequency. Kaiser's
    formulas (J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
    function", Proc. IEEE ISCAS 1974): β = 0.1102·(A − 8.7) for A > 50 dB, 0.5842·(A − 21)^0.4
    + 0.07886·(A − 21) for 21 < A ≤ 50, else 0; N = ⌈(A − 7.95)/(2.285·π·width) + 1⌉, made odd.
    The same taps as ``scipy.signal.firwin(kaiserord(A, width)[0] | 1, cutoff, window=("kaiser",
    β))`` (the tests check it), without importing scipy.signal for one small filter.
    """
    a = float(atten_db)
    if a > 50.0:
        beta = 0.1102 * (a - 8.7)
    elif a > 21.0:
        beta = 0.5842 * (a - 21.0) ** 0.4 + 0.07886 * (a - 21.0)
    else:
        beta = 0.0
    n = int(math.ceil((a - 7.95) / 2.285 / (math.pi * width) + 1)) | 1
    m = np.arange(n) - 0.5 * (n - 1)
    h = cutoff * np.sinc(cutoff * m) * np.kaiser(n, beta)
    return h / np.sum(h)


class Decimator:
    """Streaming low-pass FIR and decimation by ``factor``, exact and independent of the block
    sizes fed: output m is Σ_j h[j]·x[m·D − j] (causal: available once input m·D has arrived), and
    outputs are computed in fixed groups of ``group`` samples aligned to the global output index,
    each group by the same dot products, so any split of the input gives the same samples.

    The filter: a Kaiser-window FIR (:func:`kaiser_lowpass`), pass band to 0.375·rate_out, stop band
    from 0.625·rate_out (what folds onto the pass band is attenuated by ≥ 70 dB; Kaiser 1974's
    length formula sizes it). At 48 kHz → 2400 Hz: 900 Hz pass, 1500 Hz stop, about 350 taps.
    """

    def __init__(self, sample_rate_hz: float, factor: int, group: int = 32):
        self.factor = int(factor)
        self.group = int(group)
        rate_out = sample_rate_hz / self.factor
        if self.factor == 1:
            self.h = np.ones(1)
        else:
            nyq = sample_rate_hz / 2.0
            self.h = kaiser_lowpass(70.0, 0.25 * rate_out / nyq, 0.5 * rate_out / nyq)
        # polyphase: with rows of D samples (row n = x[(n−1)·D + 1 … n·D]), output m is
        # Σ_q row(m − q) · g_q, g_q = h[q·D : (q + 1)·D] reversed (h zero-padded to Q·D taps)
        D = self.factor
        self.n_rows = -(-self.h.size // D)  # Q
        hp = np.zeros(self.n_rows * D)
        hp[: self.h.size] = self.h
        self._g = hp.reshape(self.n_rows, D)[:, ::-1].copy()
        self._buf = np.zeros(self.n_rows * D - 1)  # rows m_next − Q + 1 … (the last one partial)
        self._next_in = 0  # global index of the next input sample
        self._next_out = 0  # global index of the next output
        self.delay_s = (self.h.size - 1) / 2.0 / sample_rate_hz  # the FIR's group delay

    def process(self, x: np.ndarray) -> np.ndarray:
        """Feed input samples; returns the outputs completed (whole groups only)."""
        self._buf = np.concatenate([self._buf, x])
        self._next_in += x.size
        D, G, Q = self.factor, self.group, self.n_rows
        # output m needs input m·D: outputs up to (next_in − 1) // D, in whole groups
        n_ready = (self._next_in - 1) // D + 1 - self._next_out if self._next_in else 0
        M = n_ready // G * G
        if M <= 0:
            return np.zeros(0)
        R = self._buf[: (M + Q - 1) * D].reshape(M + Q - 1, D)
        out = np.zeros(M)
        for q in range(Q):  # the same order of sums for every output, whatever the block sizes
            out += R[Q - 1 - q: Q - 1 - q + M] @ self._g[q]
        self._next_out += M
        self._buf = self._buf[M * D:]
        return out
