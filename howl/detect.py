"""Ringing and howl detector on blocks of samples (pure: no device, no files).

What it does, frame by frame
----------------------------
1. Short-time spectra: a Gaussian window of about 85 ms (``window_s``), hop about
   10 ms (``hop_s``), at any sample rate. The Gaussian has σ = N/8 so its
   truncation sidelobes sit near −70 dB and a pure tone's main lobe is a
   parabola in log-magnitude.
2. Candidate peaks: local maxima whose peak-to-average power ratio passes a gate,
   the ``n_candidates`` strongest per frame.
3. Features per candidate (van Waterschoot & Moonen [1]_, [2]_; definitions as
   written below, the exact notation of the papers was not seen):

   * PAPR  = 10·log10(|Y(k)|² / mean_l |Y(l)|²) over the analysis band;
   * PNPR  = 10·log10(|Y(k)|² / max_m |Y(k+m)|²), m = ±4, ±5, ±6 bins, just
     outside the Gaussian main lobe (σ ≈ 1.27 bins, −67 dB at 5 bins);
   * PHPR  = 10·log10(|Y(k)|² / max |Y(h·k ± 2 bins)|²) over h in
     :data:`BASIC_MULTIPLIERS` (1/2, 3/2, 2, 3) for a growing howl, and over all of
     :data:`HARMONIC_MULTIPLIERS` (adds 1/3, 2/3 … 5/6) for steady tones and
     ring-downs: low when the peak is a partial of a harmonic sound (a lower
     partial, the fundamental or a multiple carries power), high for a pure tone;
   * IPMP  = fraction of the last frames of the decision window in which the
     peak was a candidate (tracked within one bin);
   * IMSD  = mean |s_j − mean(s)| of the dB slopes s_j = (L(t) − L(t−jΔ))/(jΔ),
     j = 1…Q−1, over the decision window: 0 for growth that is a straight line in
     dB (exponential), large for onsets, tremolo and decays of program [1]_;
   * FSD   = relative standard deviation of the tracked frequency: vibrato of a
     sung or bowed note (0.5–3 %) is large, a howl is steady.

4. Tracking: peaks are linked frame to frame when within ``track_tol_bins``;
   a track survives ``max_gap_frames`` missing frames.
5. Decisions (thresholds and their reasons: :class:`DetectorConfig`):

   * **howl**: a track that is pure (median PNPR and PHPR above their
     thresholds), steady in frequency (FSD), present (IPMP) and either grows on a
     straight line in dB (slope ≥ ``min_growth_db_per_s``, IMSD small) or
     persists steady for ``persist_s``;
   * **ringing**: a pure, steady track whose level falls on a straight line in
     dB at a rate between ``min_decay_db_per_s`` and ``max_decay_db_per_s``
     over at least ``min_decay_span_db`` — the ring-down of a loop close to
     instability after a transient;
   * everything else is program (harmonics, vibrato, onsets and decays).

Frequency below the bin width: for a Gaussian window the log-magnitude of a
tone's main lobe is exactly a parabola, so quadratic interpolation of the three
log-magnitude bins around the peak is unbiased apart from truncation
(Smith & Serra [3]_; Gasior & Gonzalez [4]_). The event's frequency is the
median over the decision window.

Ring-down margin: for a loop peak of gain k < 1 and loop delay τ the ringing
energy falls by k² per round trip, so the decay rate D (dB/s) = −20·log10(k)/τ
and margin_db = D·τ. More precisely τ is the loop's group delay at the ringing
frequency (pole of 1/(1 − k·e^(−sτ)) at σ = ln k / τ); :func:`loop_delay_s`
measures it from a loop IR.

References
----------
.. [1] T. van Waterschoot, M. Moonen, "Comparative evaluation of howling
   detection criteria in notch-filter-based howling suppression", J. Audio Eng.
   Soc. 58(11), 923–940, 2010.
.. [2] T. van Waterschoot, M. Moonen, "Fifty years of acoustic feedback
   control: state of the art and future challenges", Proc. IEEE 99(2),
   288–327, 2011.
.. [3] J. O. Smith, X. Serra, "PARSHL: an analysis/synthesis program for
   non-harmonic sounds based on a sinusoidal representation", Proc. ICMC 1987
   (quadratic interpolation of log-magnitude peaks).
.. [4] M. Gasior, J. L. Gonzalez, "Improving FFT frequency measurement
   resolution by parabolic and Gaussian spectrum interpolation", AIP Conf.
   Proc. 732, 276, 2004 (Gaussian window: parabolic fit on the log spectrum is
   exact).
"""

from __future__ import annotations

import bisect
import dataclasses
from dataclasses import dataclass

import numpy as np

from . import _validate as v

__all__ = [
    "DetectorConfig",
    "Event",
    "Candidate",
    "DetectionResult",
    "Detector",
    "detect",
    "gaussian_window",
    "estimate_peak",
    "papr_db",
    "pnpr_db",
    "phpr_db",
    "ipmp",
    "imsd_db_per_s",
    "margin_from_decay_db",
    "loop_delay_s",
    "suggest_event_cut",
    "summarise_notches",
]

_TINY = 1e-30

#: Where PHPR looks for partials of a harmonic sound, as multiples of the
#: candidate's frequency: if the candidate is the h-th partial, the (h−1)-th sits
#: at (h−1)/h (h = 2…6) and the fundamental at 1/h; if it is the fundamental, the
#: 2nd and 3rd partials sit at 2 and 3; 3/2 catches a 2nd partial's neighbour.
HARMONIC_MULTIPLIERS = (1 / 3, 1 / 2, 2 / 3, 3 / 4, 4 / 5, 5 / 6, 3 / 2, 2.0, 3.0)
#: The subset used for a growing howl: the literature's sub-harmonic and harmonic
#: set (1/2, 3/2, 2, 3) [1]_. The lower-partial points (2/3 … 5/6) fall inside the
#: formant region of speech for a howl at 1–5 kHz and would hide a howl that is
#: already louder than the program there; they are used for the steady-tone and
#: ringing decisions, where there is time.
BASIC_MULTIPLIERS = (1 / 2, 3 / 2, 2.0, 3.0)


@dataclass(frozen=True)
class DetectorConfig:
    """Detector settings. Thresholds and why (tuned on synthetic tones, harmonic notes
    with vibrato, speech-like programs and closed-loop simulations in
    tests/test_detect.py; the literature values [M] in the notes were starting points).

    window_s: 85 ms Gaussian frame; long enough to separate 100 Hz harmonics and to
        push a howl 20 dB above speech in its bin, short enough for ~0.3 s decisions.
    hop_s: 10 ms (the usual hop for howl detection).
    f_lo_hz, f_hi_hz: analysis band (f_hi defaults to 0.45·fs, capped at 16 kHz).
    n_candidates: peaks per frame (6: a few howls plus the strongest program partials;
        8 gave the same detections in the tests at 20 % more CPU).
    min_papr_db: 10 dB candidate gate (the literature's PAPR threshold [M]).
    min_level_dbfs: ignore peaks below this level (digital silence, dither).
    min_pnpr_db: 12 dB (median over the window). A Gaussian-windowed tone has > 60 dB
        at ±5 bins; noise sits near 0–10 dB; a howl emerging from speech reaches
        12 dB about 0.3 s before 20 dB (the literature's 15 dB [M] was a start).
    min_phpr_db: 12 dB. Voiced partials have neighbours at h·f within ~0–10 dB
        (harmonic spectra roll off ~6–12 dB/octave); a howl has none until the
        loop limits.
    max_fsd: 0.2 % relative frequency deviation over the window. Vibrato of a
        sung note is ±0.5…3 %; a howl's estimate scatters by < 0.05 %.
    min_ipmp: present in ≥ 80 % of the window frames (the literature uses 3 of 5).
    decision_window_s: 0.3 s of history per decision (30 frames at 10 ms).
    min_growth_db_per_s: 6 dB/s (a loop 0.5 dB past unity with τ = 80 ms grows this
        fast); slower growth is not distinguishable from a crescendo or a note caught
        by a loop resonance within the window, and is caught by ``persist_s``.
    fast_growth_db_per_s: growth of at least 20 dB/s is decided on half the window
        (0.15 s): such a howl gains 6 dB in the time the full window would add. The
        half window is held to stricter tests (PNPR 6 dB higher, all PHPR multipliers,
        IMSD below a quarter of the growth) because it sees fewer frames.
    max_imsd_db_per_s: straightness of the growth: IMSD below 6 dB/s, or below
        0.6 × the growth rate for fast growth (level scatter ±0.3 dB gives a few dB/s).
    persist_s: a pure, steady tone present this long with level not falling
        counts as a howl that has reached the limiter.
    min_decay_db_per_s, max_decay_db_per_s: a ring-down slower than 3 dB/s is a
        held tone. Faster than 80 dB/s (an RT60 of 0.75 s) is no slower than the
        reverberation of most rooms used for speech, so not reported: a loop with
        τ = 40 ms rings this slowly only at margins below 3.2 dB (margin = rate·τ),
        and a stable loop at the usual 6 dB margin is not flagged.
    max_decay_ratio: optional (off by default): also require the ring-down to be
        slower than this fraction of its neighbour bins' decay. Off because near a
        loop crossing the neighbouring closed-loop poles ring almost as slowly
        (seen in reverberant simulated loops), so the test rejects true ringing.
    min_decay_span_db, min_decay_s: a ring-down must fall ≥ 10 dB over ≥ 0.15 s.
    """

    window_s: float = 0.085
    hop_s: float = 0.010
    f_lo_hz: float = 60.0
    f_hi_hz: float | None = None
    n_candidates: int = 6
    min_papr_db: float = 10.0
    min_level_dbfs: float = -100.0
    min_pnpr_db: float = 12.0
    min_phpr_db: float = 12.0
    max_fsd: float = 0.002
    min_ipmp: float = 0.8
    decision_window_s: float = 0.3
    min_growth_db_per_s: float = 6.0
    fast_growth_db_per_s: float = 20.0
    comod_fraction: float = 0.5
    n_rising_candidates: int = 4
    rise_lookback_s: float = 0.08
    rise_min_db_per_s: float = 40.0
    rise_window_s: float = 0.10
    rise_max_fsd: float = 0.001
    rise_min_pnpr_db: float = 15.0
    rise_max_shift_bins: float = 0.15
    rise_min_decel_ratio: float = 0.85
    rise_max_drift: float = 0.0003
    min_phpr_comod_db: float = 20.0
    min_phpr_other_db: float = 3.0
    halves_fraction: float = 0.25
    max_imsd_db_per_s: float = 6.0
    imsd_points: int = 6
    persist_s: float = 1.5
    min_decay_db_per_s: float = 3.0
    max_decay_db_per_s: float = 80.0
    max_decay_ratio: float | None = None
    min_decay_span_db: float = 10.0
    min_decay_s: float = 0.15
    track_tol_bins: float = 1.0
    max_gap_frames: int = 4
    max_tracks: int = 40
    eval_every_frames: int = 4
    hot_rise_db: float = 1.0
    growth_fit_s: float = 0.5

    def validated(self) -> "DetectorConfig":
        v.in_range(self.window_s, "window_s", 0.01, 1.0, unit="s")
        v.in_range(self.hop_s, "hop_s", 0.001, self.window_s, unit="s")
        v.positive(self.f_lo_hz, "f_lo_hz", unit="Hz")
        if self.f_hi_hz is not None:
            v.in_range(self.f_hi_hz, "f_hi_hz", self.f_lo_hz, None, unit="Hz", lo_open=True)
        v.integer(self.n_candidates, "n_candidates", 1, 64)
        v.in_range(self.min_ipmp, "min_ipmp", 0.0, 1.0)
        v.in_range(self.decision_window_s, "decision_window_s", 2 * self.hop_s, 5.0, unit="s")
        v.integer(self.imsd_points, "imsd_points", 3, 50)
        return self


@dataclass(frozen=True)
class Event:
    """One detection.

    time_s: when the detector decided (end of the last frame used), from the start.
    onset_s: centre of the first frame of the track.
    freq_hz: median tracked frequency over the decision window.
    kind: "howl" or "ringing".
    level_db: level of the component at decision time, dBFS of a sine amplitude
        (0 dB = a full-scale sine).
    growth_db_per_s: howl: Theil-Sen line of the level from where the howl came out of the
        program (lowest level of the last 0.5 s) to the decision, over at least the decision
        window; ringing: least-squares line over the decay (negative: minus the decay rate).
    decay_db_per_s: ringing only: the decay rate (positive).
    margin_db: with a known loop delay τ: −growth·τ (ringing: decay·τ, positive
        headroom; howl: negative, the loop gain above 1). None when τ is unknown.
    papr_db, pnpr_db, phpr_db, ipmp, imsd_db_per_s, fsd: the features (medians over
        the window) that made the decision.
    neighbour_slope_db_per_s: ringing only: level slope of the PNPR neighbour
        bins over the same frames (the room's decay near that frequency).
    steady: a howl found because it persisted at a steady level (already limited).
    window_s: the span of frames the decision used (howl: the decision window that
        passed, 0.10, 0.15 or 0.30 s; ringing: the decay segment).
    phpr_comod_db: howl: PHPR over the partners that grow along with the peak (None
        when none does: no partial of a same sound).
    live: ringing only: reported while the track was still fading (else when it ended).
    """

    time_s: float
    onset_s: float
    freq_hz: float
    kind: str
    level_db: float
    growth_db_per_s: float
    papr_db: float
    pnpr_db: float
    phpr_db: float
    ipmp: float
    imsd_db_per_s: float
    fsd: float
    track_id: int
    decay_db_per_s: float | None = None
    margin_db: float | None = None
    neighbour_slope_db_per_s: float | None = None
    steady: bool = False
    window_s: float | None = None
    phpr_comod_db: float | None = None
    live: bool = False


@dataclass(frozen=True)
class Candidate:
    """A tracked peak as the live view shows it."""

    track_id: int
    freq_hz: float
    level_db: float
    trend_db_per_s: float
    age_s: float
    pnpr_db: float
    phpr_db: float
    fsd: float
    state: str  # "howl", "ringing", "watch" (pure, not growing), "program"


@dataclass(frozen=True)
class DetectionResult:
    events: tuple[Event, ...]
    sample_rate_hz: float
    duration_s: float
    n_frames: int
    window_samples: int
    hop_samples: int
    loop_delay_s: float | None


# --------------------------------------------------------------------------- features


def gaussian_window(n: int) -> np.ndarray:
    """Gaussian window of length n with σ = n/8 (truncated at ±4σ, edge ≈ 3e-4)."""
    t = np.arange(n) - (n - 1) / 2.0
    return np.exp(-0.5 * (t / (n / 8.0)) ** 2)


def estimate_peak(log_mag: np.ndarray, k: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Quadratic interpolation on natural-log magnitudes around integer peaks ``k``.

    Returns (fractional bin, interpolated natural-log magnitude). For a Gaussian
    window the log-magnitude main lobe is a parabola, so this is exact up to
    window truncation [3]_ [4]_. ``log_mag`` may be (n_bins,) or (F, n_bins) with
    ``k`` of shape (F, C).
    """
    k = np.asarray(k)
    if log_mag.ndim == 1:
        a, b, c = log_mag[k - 1], log_mag[k], log_mag[k + 1]
    else:
        rows = np.arange(log_mag.shape[0])[:, None]
        a, b, c = log_mag[rows, k - 1], log_mag[rows, k], log_mag[rows, k + 1]
    den = a - 2.0 * b + c
    with np.errstate(divide="ignore", invalid="ignore"):
        delta = np.where(den < 0, 0.5 * (a - c) / den, 0.0)
    delta = np.clip(delta, -0.5, 0.5)
    return k + delta, b - 0.25 * (a - c) * delta


def papr_db(power: np.ndarray, k: int, band: slice | None = None) -> float:
    """Peak-to-average power ratio of bin k in dB (mean over ``band``) [1]_."""
    p = power if band is None else power[band]
    return float(10.0 * np.log10((power[k] + _TINY) / (np.mean(p) + _TINY)))


def pnpr_db(power: np.ndarray, k: int, offsets=(4, 5, 6)) -> float:
    """Peak-to-neighbouring power ratio in dB: peak over the largest of bins k ± m [1]_."""
    idx = [k + s * m for m in offsets for s in (-1, 1) if 0 <= k + s * m < power.size]
    return float(10.0 * np.log10((power[k] + _TINY) / (np.max(power[idx]) + _TINY)))


def phpr_db(power: np.ndarray, k_frac: float, multipliers=None, half_width_bins: int = 2) -> float:
    """Peak-to-harmonic power ratio in dB: min over h of peak / max |Y(h·k ± w)|² [1]_.

    Multipliers whose bin falls outside the spectrum are skipped (inf if none).
    """
    k = int(round(k_frac))
    out = np.inf
    for h in (HARMONIC_MULTIPLIERS if multipliers is None else multipliers):
        c = int(round(h * k_frac))
        if c - half_width_bins < 1 or c + half_width_bins >= power.size:
            continue
        ref = np.max(power[c - half_width_bins: c + half_width_bins + 1])
        out = min(out, 10.0 * np.log10((power[k] + _TINY) / (ref + _TINY)))
    return float(out)


def ipmp(present: np.ndarray) -> float:
    """Interframe peak magnitude persistence: fraction of frames in which the peak was a candidate [1]_."""
    present = np.asarray(present, dtype=bool)
    return float(np.mean(present)) if present.size else 0.0


def imsd_db_per_s(levels_db: np.ndarray, dt_s: float) -> float:
    """Interframe magnitude slope deviation [1]_ of levels sampled every ``dt_s``.

    ``levels_db[-1]`` is the newest. s_j = (L(t) − L(t − j·dt)) / (j·dt) for
    j = 1…Q−1; IMSD = mean_j |s_j − mean(s)| (dB/s). Zero for a straight line in dB.
    """
    lv = np.asarray(levels_db, dtype=float)
    q = lv.size
    if q < 3:
        return float("nan")
    j = np.arange(1, q)
    s = (lv[-1] - lv[-1 - j]) / (j * dt_s)
    return float(np.mean(np.abs(s - np.mean(s))))


def margin_from_decay_db(decay_db_per_s: float, loop_delay_s: float) -> float:
    """Gain margin from a ring-down: margin_db = decay rate (dB/s) × loop delay τ (s).

    A loop peak of gain k < 1 loses k² in energy per round trip τ, so the decay
    rate is −20·log10(k)/τ dB/s (first principles; pole of 1/(1 − k·e^(−sτ))).
    """
    return float(decay_db_per_s) * float(loop_delay_s)


def loop_delay_s(ir: np.ndarray, sample_rate_hz: float, freq_hz: float, *, effective: bool = True) -> float:
    """The loop delay τ (s) that turns a ring-down rate into a margin, from a loop IR.

    With N(ω) = Σ n·h[n]·e^(−jωn) and H(ω) = Σ h[n]·e^(−jωn), d ln H/dω = −j·N/H,
    so the group delay is τ_g = Re(N/H) and the log-magnitude slope is
    a = Im(N/H) (samples). ``effective=False`` returns τ_g. ``effective=True``
    returns τ_eff = (τ_g² + a²)/τ_g = |N/H|²/Re(N/H): lowering the loop gain by
    m dB below a crossing moves the closed-loop pole to a decay of m·τ_g/(τ_g² + a²)
    dB/s to first order (pole shift Δs = −Δln g / (d ln L/ds), first principles),
    so margin_db = decay_db_per_s × τ_eff. For a pure delay both equal the delay.
    """
    h = v.finite_array(ir, "ir", ndim=1)
    fs = v.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    f = v.in_range(freq_hz, "freq_hz", 0.0, fs / 2, unit="Hz", lo_open=True)
    n = np.arange(h.size)
    e = np.exp(-2j * np.pi * f / fs * n)
    den = np.sum(h * e)
    if abs(den) < _TINY:
        return float("nan")
    r = np.sum(n * h * e) / den
    tau_g = float(np.real(r))
    if not effective:
        return tau_g / fs
    if tau_g <= 0:
        return float("nan")
    return float(abs(r) ** 2 / tau_g) / fs


# --------------------------------------------------------------------------- tracking


@dataclass(frozen=True)
class _Tier:
    """One decision window and the tests a growing track must pass on it."""

    frames: int
    min_growth_db_per_s: float
    min_pnpr_db: float
    min_pnpr_each_db: float | None
    min_phpr_db: float
    max_fsd: float
    imsd_fraction: float
    imsd_floor_db_per_s: float
    min_ipmp: float
    halves_fraction: float
    min_rise_db: float
    full: bool = False
    other_partners: bool = True
    min_decel_ratio: float = 0.0
    max_drift: float = 1.0


class _Track:
    """One tracked peak. Per frame: the frame index and a row
    (kf, level, papr, pnpr, phpr, nb, phf, ratios); columns are built only when evaluated.
    ``ratios`` holds the peak-to-partner ratios (dB) at :data:`HARMONIC_MULTIPLIERS`."""

    __slots__ = ("tid", "frames", "rows", "last_kf", "gap", "reported", "state", "last_eval", "hot", "peak",
                 "last_ring")
    FIELDS = {"kf": 0, "level": 1, "papr": 2, "pnpr": 3, "phpr": 4, "nb": 5, "phf": 6, "ratios": 7}

    def __init__(self, tid: int):
        self.tid = tid
        self.frames: list[int] = []
        self.rows: list[tuple] = []
        self.last_kf = 0.0
        self.gap = 0
        self.reported: str | None = None
        self.state = "program"
        self.last_eval = -1
        self.hot = False  # rising lately: evaluated every frame
        self.peak = -np.inf  # highest level so far (dB)
        self.last_ring = -1  # frame of the last live ring-down test

    def add(self, t: int, row: tuple) -> None:
        self.frames.append(t)
        self.rows.append(row)
        self.last_kf = row[0]
        self.gap = 0
        if row[1] > self.peak:
            self.peak = row[1]

    def col(self, name: str, start: int = 0) -> list:
        k = self.FIELDS[name]
        return [r[k] for r in self.rows[start:]]


def _median(values: list[float]) -> float:
    s = sorted(values)
    n = len(s)
    return s[n // 2] if n % 2 else 0.5 * (s[n // 2 - 1] + s[n // 2])


def _lp_delta(pm1: np.ndarray, p0: np.ndarray, pp1: np.ndarray) -> np.ndarray:
    """Fractional-bin offset of a peak from the log-parabola through three power bins."""
    la, lb, lc = (np.log(p.astype(np.float64) + _TINY) for p in (pm1, p0, pp1))
    den = la - 2.0 * lb + lc
    with np.errstate(divide="ignore", invalid="ignore"):
        d = np.where(den < 0, 0.5 * (la - lc) / den, 0.0)
    return np.clip(d, -0.5, 0.5)


def _imsd_on_line(frames: list, levels: list[float], dt: float, q: int) -> float:
    """IMSD (:func:`imsd_db_per_s`) of the level line sampled at q equally spaced instants of
    the window (linear interpolation between frames; pure Python for short windows)."""
    f0, f1 = frames[0], frames[-1]
    if f1 <= f0:
        return 0.0
    step = (f1 - f0) / (q - 1)
    pts = []
    j = 0
    for i in range(q):
        x = f0 + i * step
        while j < len(frames) - 2 and frames[j + 1] < x:
            j += 1
        xa, xb = frames[j], frames[j + 1]
        w = (x - xa) / (xb - xa)
        pts.append(levels[j] + w * (levels[j + 1] - levels[j]))
    d = step * dt
    s = [(pts[-1] - pts[-1 - k]) / (k * d) for k in range(1, q)]
    m = sum(s) / len(s)
    return sum(abs(v - m) for v in s) / len(s)


def _rel_std(values: list[float]) -> float:
    """Relative standard deviation of a short list (pure Python: cheaper than numpy on < 50 values)."""
    n = len(values)
    m = sum(values) / n
    return (sum((v - m) * (v - m) for v in values) / n) ** 0.5 / m


def _slope(x: list, y: list[float]) -> float:
    """Least-squares slope of a short list (pure Python)."""
    n = len(x)
    xm = sum(x) / n
    ym = sum(y) / n
    sxx = sum((a - xm) * (a - xm) for a in x)
    if sxx <= 0:
        return 0.0
    return sum((a - xm) * (b - ym) for a, b in zip(x, y)) / sxx


def _linfit(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float]:
    """Least-squares line: (slope, intercept, rms residual)."""
    xm = x.mean()
    ym = y.mean()
    dx = x - xm
    sxx = float(np.dot(dx, dx))
    if sxx <= 0:
        return 0.0, float(ym), 0.0
    slope = float(np.dot(dx, y - ym)) / sxx
    icpt = float(ym - slope * xm)
    res = y - (icpt + slope * x)
    return slope, icpt, float(np.sqrt(np.mean(res * res)))


class Detector:
    """Streaming detector: feed blocks of any length with :meth:`process`.

    Parameters
    ----------
    sample_rate_hz: sample rate of the blocks.
    config: :class:`DetectorConfig` (defaults documented there).
    loop_delay_s: the loop delay τ when known (measured loop IR, or passed in);
        enables ``margin_db`` on events.
    """

    def __init__(self, sample_rate_hz: float, config: DetectorConfig | None = None, *, loop_delay_s: float | None = None):
        import scipy.fft  # noqa: F401  (checked here so the error is early)

        self.fs = v.in_range(sample_rate_hz, "sample_rate_hz", 4000.0, 768000.0, unit="Hz")
        self.cfg = (config or DetectorConfig()).validated()
        self.loop_delay_s = None if loop_delay_s is None else v.positive(loop_delay_s, "loop_delay_s", unit="s")
        import scipy.fft as sfft

        self._fft = sfft
        n = sfft.next_fast_len(int(round(self.cfg.window_s * self.fs)), real=True)
        self.n_win = int(n)
        self.hop = max(1, int(round(self.cfg.hop_s * self.fs)))
        self.dt = self.hop / self.fs
        self.win = gaussian_window(self.n_win)
        self._win32 = self.win.astype(np.float32)
        self._amp_norm = 2.0 / float(np.sum(self.win))  # |X| of a sine of amplitude A is A·Σw/2
        self.n_bins = self.n_win // 2 + 1
        self.bin_hz = self.fs / self.n_win
        f_hi = self.cfg.f_hi_hz if self.cfg.f_hi_hz is not None else min(16000.0, 0.45 * self.fs)
        f_hi = min(f_hi, 0.49 * self.fs)
        if self.cfg.f_lo_hz >= f_hi:
            raise v.fail("f_lo_hz", f"below the band top {f_hi:g} Hz", self.cfg.f_lo_hz, "Hz")
        self.k_lo = max(7, int(np.floor(self.cfg.f_lo_hz / self.bin_hz)))
        self.k_hi = min(self.n_bins - 8, int(np.ceil(f_hi / self.bin_hz)))
        self.win_frames = max(3, int(round(self.cfg.decision_window_s / self.dt)))
        self.fast_frames = max(3, self.win_frames // 2)
        c = self.cfg
        self.rise_win_frames = max(3, int(round(self.cfg.rise_window_s / self.dt)))
        self._tiers = (
            _Tier(self.rise_win_frames, c.rise_min_db_per_s, min_pnpr_db=c.rise_min_pnpr_db,
                  min_pnpr_each_db=c.rise_min_pnpr_db, min_phpr_db=c.min_phpr_comod_db, max_fsd=c.rise_max_fsd,
                  imsd_fraction=0.15, imsd_floor_db_per_s=0.0, min_ipmp=1.0, halves_fraction=0.7,
                  min_rise_db=4.0, other_partners=False, min_decel_ratio=c.rise_min_decel_ratio,
                  max_drift=c.rise_max_drift),
            _Tier(self.fast_frames, c.fast_growth_db_per_s, min_pnpr_db=c.min_pnpr_db + 6.0, min_pnpr_each_db=None,
                  min_phpr_db=c.min_phpr_db, max_fsd=c.max_fsd, imsd_fraction=0.25, imsd_floor_db_per_s=0.0,
                  min_ipmp=c.min_ipmp, halves_fraction=0.5, min_rise_db=0.0, max_drift=c.max_fsd / 2),
            _Tier(self.win_frames, c.min_growth_db_per_s, min_pnpr_db=c.min_pnpr_db, min_pnpr_each_db=None,
                  min_phpr_db=c.min_phpr_db, max_fsd=c.max_fsd, imsd_fraction=0.6,
                  imsd_floor_db_per_s=c.max_imsd_db_per_s, min_ipmp=c.min_ipmp, halves_fraction=c.halves_fraction,
                  min_rise_db=0.0, full=True, max_drift=c.max_fsd),
        )
        self.persist_frames = max(self.win_frames, int(round(self.cfg.persist_s / self.dt)))
        self._buf = np.zeros(0)
        self._frame = 0  # index of the next frame to compute
        self._buf_start = 0  # sample index of _buf[0]
        self._tracks: list[_Track] = []
        self._next_tid = 0
        self.events: list[Event] = []
        self._pnpr_off = np.array([4, 5, 6])
        self._ptail = None
        self.rise_frames = max(2, int(round(self.cfg.rise_lookback_s / self.dt)))
        self._harm = np.array(HARMONIC_MULTIPLIERS)
        self._basic = np.array([any(abs(h - b) < 1e-12 for b in BASIC_MULTIPLIERS) for h in HARMONIC_MULTIPLIERS])
        self.n_samples = 0

    # ------------------------------------------------------------------ public

    @property
    def time_s(self) -> float:
        return self.n_samples / self.fs

    def process(self, block: np.ndarray) -> list[Event]:
        """Analyse a block (1-D float samples, full scale ±1). Returns the new events."""
        x = np.asarray(block, dtype=float).ravel()
        if x.size and not np.all(np.isfinite(x)):
            raise v.fail("block", "finite samples", "NaN/inf")
        self.n_samples += x.size
        self._buf = np.concatenate([self._buf, x]) if self._buf.size else x.copy()
        before = len(self.events)
        chunk = 256
        while True:
            start0 = self._frame * self.hop - self._buf_start
            avail = (self._buf.size - start0 - self.n_win) // self.hop + 1
            if avail <= 0:
                break
            n_f = int(min(avail, chunk))
            self._analyse(start0, n_f)
        # drop consumed samples
        keep_from = self._frame * self.hop - self._buf_start
        if keep_from > 0:
            self._buf = self._buf[keep_from:]
            self._buf_start += keep_from
        return self.events[before:]

    def finish(self) -> list[Event]:
        """Close all tracks (end of file or of a live run) and return the new events."""
        before = len(self.events)
        for tr in self._tracks:
            self._close(tr)
        self._tracks = []
        return self.events[before:]

    def candidates(self, max_n: int = 8) -> list[Candidate]:
        """Current tracks, strongest first (for a live view)."""
        out = []
        for tr in self._tracks:
            if len(tr.frames) < 3 or tr.gap > 0:
                continue
            i0 = len(tr.frames) - min(len(tr.frames), self.win_frames)
            fr = np.asarray(tr.frames[i0:], float)
            lv = np.asarray(tr.col("level", i0))
            slope = _linfit(fr * self.dt, lv)[0] if fr.size >= 3 else 0.0
            kf = np.asarray(tr.col("kf", i0))
            out.append(Candidate(
                track_id=tr.tid, freq_hz=float(np.median(kf)) * self.bin_hz, level_db=float(lv[-1]),
                trend_db_per_s=float(slope), age_s=(tr.frames[-1] - tr.frames[0] + 1) * self.dt,
                pnpr_db=_median(tr.col("pnpr", i0)), phpr_db=_median(tr.col("phpr", i0)),
                fsd=float(np.std(kf) / max(np.mean(kf), _TINY)), state=tr.reported or tr.state,
            ))
        out.sort(key=lambda c: -c.level_db)
        return out[:max_n]

    # ------------------------------------------------------------------ internals

    def _analyse(self, start0: int, n_f: int) -> None:
        from numpy.lib.stride_tricks import sliding_window_view

        seg = self._buf[start0: start0 + (n_f - 1) * self.hop + self.n_win]
        # float32 FFT: 2x faster; its ~-140 dB rounding floor is far below any decision
        frames = sliding_window_view(seg.astype(np.float32), self.n_win)[:: self.hop][:n_f]
        spec = self._fft.rfft(frames * self._win32, axis=1)
        power = spec.real ** 2 + spec.imag ** 2  # (F, n_bins) float32
        lo, hi = self.k_lo, self.k_hi
        band = power[:, lo:hi]
        mean_p = band.mean(axis=1, dtype=np.float64) + _TINY
        gate = (mean_p * 10.0 ** (self.cfg.min_papr_db / 10.0)).astype(np.float32)
        floor = np.float32((10.0 ** (self.cfg.min_level_dbfs / 20.0) / self._amp_norm) ** 2)
        gate = np.maximum(gate, floor)
        # PAPR gate first (sparse), then the local-maximum test on the survivors only
        rows, cols = np.nonzero(band[:, 1:-1] >= gate[:, None])
        k = cols + lo + 1  # absolute bin
        pk = power[rows, k]
        is_max = (pk > power[rows, k - 1]) & (pk >= power[rows, k + 1])
        rows, k, pk = rows[is_max], k[is_max], pk[is_max]
        # strongest first within each frame, at most n_candidates per frame (before the features)
        order = np.lexsort((-pk, rows))
        rows, k = rows[order], k[order]
        rank = np.arange(rows.size) - np.searchsorted(rows, rows)
        keep = rank < self.cfg.n_candidates
        rows, k = rows[keep], k[keep]
        if self.cfg.n_rising_candidates:
            rows, k = self._add_rising(power, rows, k, n_f)
        nmax = self.n_bins - 1
        pm1 = power[rows, k - 1].astype(np.float64)
        p0 = power[rows, k].astype(np.float64)
        pp1 = power[rows, k + 1].astype(np.float64)
        la, lb, lc = (0.5 * np.log(p + _TINY) for p in (pm1, p0, pp1))
        den = la - 2.0 * lb + lc
        with np.errstate(divide="ignore", invalid="ignore"):
            delta = np.where(den < 0, 0.5 * (la - lc) / den, 0.0)
        delta = np.clip(delta, -0.5, 0.5)
        kf = k + delta
        peak_ln = lb - 0.25 * (la - lc) * delta
        peak_p = np.exp(2.0 * peak_ln)
        level_db = 20.0 * np.log10(np.exp(peak_ln) * self._amp_norm + _TINY)
        papr = 10.0 * np.log10(peak_p / mean_p[rows])
        offs = np.concatenate([-self._pnpr_off, self._pnpr_off])
        nb_pow = power[rows[:, None], np.clip(k[:, None] + offs[None, :], 0, nmax)].astype(np.float64)
        pnpr = 10.0 * np.log10(peak_p / (nb_pow.max(axis=1) + _TINY))
        nb_db = 10.0 * np.log10(nb_pow.mean(axis=1) * self._amp_norm ** 2 + _TINY)
        # PHPR: largest power within ±2 bins of h·k for each multiplier h
        hk = np.rint(kf[:, None] * self._harm[None, :]).astype(np.int64)  # (n, H)
        inside = (hk >= 3) & (hk <= nmax - 3)
        hk = np.clip(hk, 2, nmax - 2)
        w5 = np.arange(-2, 3)
        hp = power[rows[:, None, None], hk[:, :, None] + w5[None, None, :]].max(axis=2).astype(np.float64)
        ratio = np.where(inside, 10.0 * np.log10(peak_p[:, None] / (hp + _TINY)), np.inf)
        phpr = ratio[:, self._basic].min(axis=1)
        phf = ratio.min(axis=1)
        bounds = np.searchsorted(rows, np.arange(n_f + 1))
        allrows = list(zip(*(a.tolist() for a in (kf, level_db, papr, pnpr, phpr, nb_db, phf)), ratio))
        t0 = self._frame
        for i in range(n_f):
            i0 = int(bounds[i])
            i1 = int(bounds[i + 1])
            self._step(t0 + i, allrows[i0:i1])
        self._frame += n_f

    def _add_rising(self, power: np.ndarray, rows: np.ndarray, k: np.ndarray, n_f: int):
        """Add rising candidates: pure local maxima anywhere above the level floor (also far
        below the PAPR gate, where a howl starts) whose power rose steadily over the last
        ``rise_lookback_s``: at least ``rise_min_db_per_s`` over the whole look-back and a
        third of that over each half. At most ``n_rising_candidates`` per frame, steepest first."""
        M = self.rise_frames
        h = M // 2
        lo, hi = self.k_lo, self.k_hi
        tail = self._ptail
        ext = power[:, lo - 1: hi + 1] if tail is None else np.concatenate([tail, power[:, lo - 1: hi + 1]])
        off = 0 if tail is None else tail.shape[0]
        self._ptail = ext[-M:].copy() if ext.shape[0] >= M else ext.copy()
        if ext.shape[0] <= M:
            return rows, k
        r_all = 10.0 ** (self.cfg.rise_min_db_per_s * M * self.dt / 10.0)
        r_half = r_all ** (1.0 / 3.0)
        first = max(M, off)  # rows of ext that have M frames of history and belong to this chunk
        floor = np.float32((10.0 ** (self.cfg.min_level_dbfs / 20.0) / self._amp_norm) ** 2)
        n = ext.shape[0]
        cur = ext[first:, 1:-1]
        old = ext[first - M: n - M, 1:-1]
        # dense: the whole rise and a local maximum now; then sparse: the halves, a local maximum
        # at mid look-back
        ok = cur >= np.float32(r_all) * old
        ok &= cur > ext[first:, :-2]
        ok &= cur >= ext[first:, 2:]
        ok &= cur >= floor
        rr, cc = np.nonzero(ok)
        if rr.size == 0:
            return rows, k
        e = rr + first
        c = cc + 1
        pc, pm, po = ext[e, c], ext[e - h, c], ext[e - M, c]
        ok = ((pc >= np.float32(r_half) * pm) & (pm >= np.float32(r_half) * po)
              & (pm > ext[e - h, c - 1]) & (pm >= ext[e - h, c + 1]))
        rr, cc, e, c = rr[ok], cc[ok], e[ok], c[ok]
        if rr.size == 0:
            return rows, k
        # steady in frequency: the interpolated peak moved less than rise_max_shift_bins since the mid frame
        shift = np.abs(_lp_delta(ext[e, c - 1], ext[e, c], ext[e, c + 1])
                       - _lp_delta(ext[e - h, c - 1], ext[e - h, c], ext[e - h, c + 1]))
        steady = shift <= self.cfg.rise_max_shift_bins
        rr, cc = rr[steady], cc[steady]
        if rr.size == 0:
            return rows, k
        rr = rr + (first - off)  # frame index within this chunk
        kk = cc + lo
        # purity: PNPR >= the howl threshold in this frame
        p0 = power[rr, kk]
        offs = np.concatenate([-self._pnpr_off, self._pnpr_off])
        nb = power[rr[:, None], np.clip(kk[:, None] + offs[None, :], 0, self.n_bins - 1)].max(axis=1)
        pure = p0 >= nb * np.float32(10.0 ** (self.cfg.rise_min_pnpr_db / 10.0))
        rr, kk = rr[pure], kk[pure]
        if rr.size == 0:
            return rows, k
        # drop those already candidates, keep the steepest few per frame
        have = set((rows * self.n_bins + k).tolist())
        code = rr * self.n_bins + kk
        new = np.array([c not in have for c in code.tolist()], dtype=bool)
        rr, kk = rr[new], kk[new]
        if rr.size == 0:
            return rows, k
        steep = power[rr, kk] / (ext[rr + off - M, kk - lo + 1] + np.float32(1e-30))
        order = np.lexsort((-steep, rr))
        rr, kk = rr[order], kk[order]
        rank = np.arange(rr.size) - np.searchsorted(rr, rr)
        keep = rank < self.cfg.n_rising_candidates
        rows = np.concatenate([rows, rr[keep]])
        k = np.concatenate([k, kk[keep]])
        order = np.argsort(rows, kind="stable")
        return rows[order], k[order]

    def _step(self, t, rows) -> None:
        tol = self.cfg.track_tol_bins
        matched = set()
        # tracks sorted by their last frequency: each candidate looks only at its neighbours
        tracks = sorted(self._tracks, key=lambda tr: tr.last_kf)
        lasts = [tr.last_kf for tr in tracks]
        n_tr = len(tracks)
        bl = bisect.bisect_left
        for j in range(len(rows)):
            kj = rows[j][0]
            best = None
            bd = tol
            i = bl(lasts, kj - tol)
            while i < n_tr and lasts[i] <= kj + tol:
                d = abs(lasts[i] - kj)
                if d <= bd and tracks[i].tid not in matched:
                    bd, best = d, tracks[i]
                i += 1
            if best is None:
                if len(self._tracks) >= self.cfg.max_tracks:
                    continue
                best = _Track(self._next_tid)
                self._next_tid += 1
                self._tracks.append(best)
            best.add(t, rows[j])
            matched.add(best.tid)
        alive = []
        for tr in self._tracks:
            if tr.tid not in matched:
                tr.gap += 1
                if tr.gap > self.cfg.max_gap_frames:
                    self._close(tr)
                    continue
            alive.append(tr)
            if tr.reported is None and tr.gap == 0 and t - tr.last_eval >= (1 if tr.hot else self.cfg.eval_every_frames):
                tr.last_eval = t
                self._evaluate(tr, t)
            # a ring-down is reported while it still fades, once enough of it has been seen
            if (tr.reported is None and tr.gap == 0 and tr.peak - tr.rows[-1][1] >= self.cfg.min_decay_span_db
                    and t - tr.last_ring >= self.cfg.eval_every_frames):
                tr.last_ring = t
                ev = self._ringdown(tr, live=True)
                if ev is not None:
                    tr.reported = "ringing"
                    tr.state = "ringing"
                    self.events.append(ev)
        self._tracks = alive

    def _window(self, tr: _Track, t: int, n_frames: int):
        fr = np.asarray(tr.frames)
        i0 = np.searchsorted(fr, t - n_frames + 1)
        return i0, fr[i0:]

    def _window_test(self, tr: _Track, t: int, tier: "_Tier"):
        """Features over the last ``tier.frames`` frames; None when the track is not pure and steady there.

        Returns (i0, ipmp, pnpr, phpr, kf, fsd, levels, slope, imsd, growing, phpr_comod).
        """
        W = tier.frames
        # cheap tests first (pure Python on <= W values): IPMP, PNPR, FSD
        i0 = bisect.bisect_left(tr.frames, t - W + 1)
        ip = (len(tr.frames) - i0) / W
        if ip < tier.min_ipmp:
            return None
        # quick gate: a growing track has risen over the window (the steady-tone test needs a long track)
        rows = tr.rows
        if (rows[-1][1] - rows[i0][1] < 0.3 * tier.min_growth_db_per_s * (W - 1) * self.dt
                and not (tier.full and tr.frames[-1] - tr.frames[0] + 1 >= self.persist_frames)):
            return None
        pns = tr.col('pnpr', i0)
        pn = _median(pns)
        if pn < tier.min_pnpr_db or (tier.min_pnpr_each_db is not None and min(pns) < tier.min_pnpr_each_db):
            return None
        kfl = tr.col('kf', i0)
        fsd = _rel_std(kfl)
        if fsd > tier.max_fsd:
            return None
        frl = tr.frames[i0:]
        lvl = tr.col('level', i0)
        dt = self.dt
        slope = _slope(frl, lvl) / dt
        if slope < tier.min_growth_db_per_s and not tier.full:
            return None
        # straightness (pure Python): both halves grow, the second not much slower than the
        # first (an onset or a swell that levels off is not a line), the total rise, IMSD
        n = len(lvl)
        h = n // 2
        s_a = _slope(frl[:h + 1], lvl[:h + 1]) / dt
        s_b = _slope(frl[h:], lvl[h:]) / dt
        rise = slope * (frl[-1] - frl[0]) * dt
        imsd = _imsd_on_line(frl, lvl, dt, self.cfg.imsd_points)
        # frequency drift over the window (a partial swept through a loop resonance by vibrato or a
        # glide rises in level while its frequency moves; a howl stays put)
        drift = abs(_slope(frl, kfl)) * (frl[-1] - frl[0]) / kfl[-1]
        growing = (slope >= tier.min_growth_db_per_s and drift <= tier.max_drift
                   and imsd <= max(tier.imsd_floor_db_per_s, tier.imsd_fraction * slope)
                   and min(s_a, s_b) >= tier.halves_fraction * slope
                   and s_b >= tier.min_decel_ratio * s_a and rise >= tier.min_rise_db)
        if not growing and not tier.full:
            return None
        ph = _median(tr.col('phf', i0))
        kf = np.asarray(kfl)
        lv = np.asarray(lvl)
        if not growing:
            # not growing: the full window goes on to the steady-tone test, on the plain PHPR
            if ph < self.cfg.min_phpr_db:
                return None
            return i0, ip, pn, ph, kf, fsd, lv, slope, imsd, False, ph
        # PHPR over the partners that grow along with the peak (co-modulated: a partial of the
        # same note); a partner that does not grow with it (other program) does not explain it
        # unless the peak is not yet min_phpr_other_db above it.
        cfg = self.cfg
        ts = np.asarray(frl) * dt
        R = np.minimum(np.asarray(tr.col('ratios', i0)), 200.0)
        med = np.median(R, axis=0)
        dx = ts - ts.mean()
        r_slope = dx @ (R - R.mean(axis=0)) / float(dx @ dx)
        grows_along = r_slope <= (1.0 - cfg.comod_fraction) * slope
        explains = grows_along & (med < max(tier.min_phpr_db, cfg.min_phpr_comod_db))
        if tier.other_partners:
            explains |= med < cfg.min_phpr_other_db
        ph_c = float(med[grows_along].min()) if np.any(grows_along) else float("inf")
        if np.any(explains):
            return None
        return i0, ip, pn, ph, kf, fsd, lv, slope, imsd, True, ph_c

    def _evaluate(self, tr: _Track, t: int) -> None:
        cfg = self.cfg
        span = tr.frames[-1] - tr.frames[0] + 1
        rows = tr.rows
        back = rows[max(0, len(rows) - self.rise_win_frames)]
        last = rows[-1]
        tr.hot = last[1] - back[1] >= cfg.hot_rise_db
        # quick rejections (no window test can pass): the newest frame is far from pure, or the
        # frequency moved by more than a few times the allowed spread (a glide) since the look-back
        if last[3] < cfg.min_pnpr_db - 6.0 or abs(last[0] - back[0]) > 6.0 * cfg.max_fsd * last[0]:
            if span >= self._tiers[0].frames:
                tr.state = "program"
            return
        res = None
        # fast growth is decided on shorter windows (a loop well past unity must not wait);
        # the shorter the window, the stricter the tests (fewer frames to judge by)
        for tier in self._tiers:
            if span >= tier.frames:
                res = self._window_test(tr, t, tier)
                if res is not None:
                    break
        if res is None:
            tr.state = "program" if span >= self._tiers[0].frames else tr.state
            return
        i0, ip, pn, ph, kf, fsd, lv, slope, imsd, growing, ph_c = res
        steady = False
        if not growing and tr.frames[-1] - tr.frames[0] + 1 >= self.persist_frames:
            j0, frp = self._window(tr, t, self.persist_frames)
            kfp = np.asarray(tr.col('kf', j0))
            lvp = np.asarray(tr.col('level', j0))
            sp = _linfit(frp * self.dt, lvp)[0]
            steady = (frp.size / self.persist_frames >= cfg.min_ipmp
                      and np.std(kfp) / np.mean(kfp) <= cfg.max_fsd
                      and float(np.median(tr.col('pnpr', j0))) >= cfg.min_pnpr_db
                      and _median(tr.col('phf', j0)) >= cfg.min_phpr_db
                      and sp > -cfg.min_decay_db_per_s)
        if (growing or steady) and self._is_howl_product(float(np.median(kf)) * self.bin_hz):
            tr.reported = "product"
            tr.state = "product"
            return
        if growing:
            slope = self._growth_estimate(tr, len(lv), slope)
        if growing or steady:
            fr_end = tr.frames[-1]
            tr.reported = "howl"
            tr.state = "howl"
            margin = None if self.loop_delay_s is None else -slope * self.loop_delay_s
            self.events.append(Event(
                time_s=(t * self.hop + self.n_win) / self.fs,
                onset_s=(tr.frames[0] * self.hop + self.n_win / 2) / self.fs,
                freq_hz=float(np.median(kf)) * self.bin_hz, kind="howl", level_db=float(lv[-1]),
                growth_db_per_s=float(slope), papr_db=float(np.median(tr.col('papr', i0))), pnpr_db=pn, phpr_db=ph,
                ipmp=float(ip), imsd_db_per_s=float(imsd), fsd=fsd, track_id=tr.tid, margin_db=margin,
                steady=bool(steady and not growing), window_s=len(lv) and (fr_end - tr.frames[i0] + 1) * self.dt,
                phpr_comod_db=None if not np.isfinite(ph_c) else float(ph_c),
            ))
        else:
            tr.state = "watch"

    def _growth_estimate(self, tr: _Track, n_window: int, slope_window: float) -> float:
        """The growth rate reported for a howl: a Theil-Sen line (median of pairwise slopes; Sen 1968)
        from the lowest level of the last ``growth_fit_s`` (where the howl came out of the program
        or the noise) to now, over at least the decision window. Longer and robust: the first
        window to pass the tests tends to be a steep one, and a few frames scatter."""
        n_fit = max(n_window, int(round(self.cfg.growth_fit_s / self.dt)))
        lv = tr.col('level', max(0, len(tr.rows) - n_fit))
        fr = tr.frames[len(tr.frames) - len(lv):]
        j = min(range(len(lv)), key=lv.__getitem__)
        if len(lv) - j < n_window:
            j = len(lv) - n_window
        # Theil-Sen: the median of the pairwise slopes (robust to a few scattered frames)
        f, y = fr[j:], lv[j:]
        pairs = [(y[b] - y[a]) / (f[b] - f[a]) for a in range(len(f)) for b in range(a + 1, len(f)) if f[b] > f[a]]
        return _median(pairs) / self.dt if pairs else slope_window

    def _is_howl_product(self, freq_hz: float) -> bool:
        """Is ``freq_hz`` a harmonic or a two-tone product of howls already reported
        (folded about the Nyquist frequency)? A howl that reaches a limiter or clips
        makes those; they are the same howl, not new ones."""
        fh = [e.freq_hz for e in self.events if e.kind == "howl"]
        if not fh:
            return False
        cand = []
        for i, a in enumerate(fh):
            cand += [h * a for h in range(2, 6)]
            for b in fh[i + 1:]:
                cand += [abs(2 * a - b), abs(2 * b - a), a + b, abs(a - b)]
        tol = max(2.0 * self.bin_hz, 0.005 * freq_hz)
        nyq = self.fs / 2.0
        for f in cand:
            f = f % self.fs
            if f > nyq:
                f = self.fs - f
            if abs(f - freq_hz) <= tol:
                return True
        return False

    def _close(self, tr: _Track) -> None:
        """A track ended: was its end a ring-down?"""
        if tr.reported is not None:
            return
        ev = self._ringdown(tr)
        if ev is not None:
            tr.reported = "ringing"
            self.events.append(ev)

    def _ringdown(self, tr: _Track, live: bool = False) -> Event | None:
        """Was the fall of this track a ring-down? ``live``: the track is still fading (tested on the
        frames so far); else it has ended (the last frames near the floor it ended at are left out)."""
        cfg = self.cfg
        n = len(tr.frames)
        min_frames = int(round(cfg.min_decay_s / self.dt))
        if n < min_frames + 2:
            return None
        # cheap tests first: a ring-down is pure over most of the track
        if _median(tr.col('pnpr')) < cfg.min_pnpr_db - 6.0 or _median(tr.col('phf')) < cfg.min_phpr_db - 6.0:
            return None
        lv = np.asarray(tr.col('level'))
        fr = np.asarray(tr.frames)
        ipk = int(np.argmax(lv))
        # skip the frames in which the window still straddles the transient
        i0 = np.searchsorted(fr, fr[ipk] + int(np.ceil(0.5 * self.n_win / self.hop)))
        # stop where the level nears the noise floor at which the track ended
        end_level = float(np.min(lv[i0:])) if i0 < n else 0.0
        seg = np.arange(i0, n)
        if seg.size and not live:
            seg = seg[lv[seg] >= end_level + 3.0]
        if seg.size < min_frames:
            return None
        if seg.size / (fr[seg[-1]] - fr[seg[0]] + 1) < cfg.min_ipmp:
            return None
        ts = fr[seg] * self.dt
        if ts[-1] - ts[0] < cfg.min_decay_s:
            return None
        slope, icpt, res = _linfit(ts, lv[seg])
        span = -slope * (ts[-1] - ts[0])
        kf = np.asarray(tr.col('kf'))[seg]
        fsd = float(np.std(kf) / np.mean(kf))
        pn = float(np.median(np.asarray(tr.col('pnpr'))[seg]))
        ph = float(np.median(np.asarray(tr.col('phf'))[seg]))
        q = cfg.imsd_points
        tq = np.linspace(ts[0], ts[-1], q)
        imsd = imsd_db_per_s(np.interp(tq, ts, lv[seg]), (ts[-1] - ts[0]) / (q - 1))
        decay = -slope
        ok = (cfg.min_decay_db_per_s <= decay <= cfg.max_decay_db_per_s and span >= cfg.min_decay_span_db
              and fsd <= cfg.max_fsd and pn >= cfg.min_pnpr_db and ph >= cfg.min_phpr_db
              and imsd <= max(cfg.max_imsd_db_per_s, 0.3 * decay))
        if not ok:
            return None
        nb_slope = _linfit(ts, np.asarray(tr.col('nb'))[seg])[0]
        if (cfg.max_decay_ratio is not None and -nb_slope > cfg.min_decay_db_per_s
                and decay > cfg.max_decay_ratio * (-nb_slope)):
            return None
        margin = None if self.loop_delay_s is None else margin_from_decay_db(decay, self.loop_delay_s)
        t_end = fr[-1]
        return Event(
            time_s=(t_end * self.hop + self.n_win) / self.fs,
            onset_s=(fr[0] * self.hop + self.n_win / 2) / self.fs,
            freq_hz=float(np.median(kf)) * self.bin_hz, kind="ringing", level_db=float(lv[ipk]),
            growth_db_per_s=float(slope), papr_db=float(np.median(np.asarray(tr.col('papr'))[seg])), pnpr_db=pn,
            phpr_db=ph, ipmp=float(seg.size / (fr[seg[-1]] - fr[seg[0]] + 1)), imsd_db_per_s=float(imsd), fsd=fsd,
            track_id=tr.tid, decay_db_per_s=float(decay), margin_db=margin, neighbour_slope_db_per_s=float(nb_slope),
            window_s=float(ts[-1] - ts[0] + self.dt), live=live,
        )


def detect(x: np.ndarray, sample_rate_hz: float, config: DetectorConfig | None = None, *,
           loop_delay_s: float | None = None, block_samples: int | None = None) -> DetectionResult:
    """Run the detector over a whole signal (optionally in blocks, as a live input would)."""
    x = v.finite_array(x, "signal", ndim=1)
    det = Detector(sample_rate_hz, config, loop_delay_s=loop_delay_s)
    if block_samples is None:
        det.process(x)
    else:
        b = v.integer(block_samples, "block_samples", 1)
        for i in range(0, x.size, b):
            det.process(x[i: i + b])
    det.finish()
    return DetectionResult(
        events=tuple(det.events), sample_rate_hz=det.fs, duration_s=x.size / det.fs, n_frames=det._frame,
        window_samples=det.n_win, hop_samples=det.hop, loop_delay_s=det.loop_delay_s,
    )


# --------------------------------------------------------------------------- notch suggestions

#: Assumed loop delay when none is known: 20 ms ≈ 6.9 m of acoustic path, a
#: typical speaker-to-mic distance on a small stage (common practice, no source).
DEFAULT_LOOP_DELAY_S = 0.020
#: Headroom a suggested cut aims for beyond "just stops it" (3 dB: the lower end of
#: the usual 3–6 dB feedback stability margin, common practice, no source).
TARGET_MARGIN_DB = 3.0


def suggest_event_cut(event: Event, *, loop_delay_s: float | None = None, target_margin_db: float = TARGET_MARGIN_DB,
                      temperature_c: float = 20.0, swing_c: float = 3.0):
    """The cut (a :class:`howl.notch.Notch`) that stops an event, by the ring-out rules.

    needed_db = target margin − current margin, where the current margin is
    −growth·τ for a howl (the loop is that far above unity) and decay·τ for a
    ringing (headroom left). τ is the known loop delay or
    :data:`DEFAULT_LOOP_DELAY_S`. The width covers the temperature drift
    (``howl.notch.suggest_cut``). Returns (notch, needed_db, margin_used_db).
    """
    from .notch import suggest_cut

    tau = loop_delay_s if loop_delay_s is not None else DEFAULT_LOOP_DELAY_S
    if event.margin_db is not None:
        margin = event.margin_db
    elif event.kind == "howl":
        margin = -max(event.growth_db_per_s, 0.0) * tau
    else:
        margin = (event.decay_db_per_s or 0.0) * tau
    needed = max(target_margin_db - margin, 0.5)
    notch = suggest_cut(event.freq_hz, needed, temperature_c=temperature_c, swing_c=swing_c)
    return notch, float(needed), float(margin)


def summarise_notches(notches, sample_rate_hz: float, *, max_notches: int = 6):
    """Merge cuts at the same frequency (``howl.notch.merge_notches``) and keep a budget.

    Returns (kept notches sorted by frequency, advice strings). When more distinct
    cuts are needed than the budget, or merged cuts reach the 1/3-octave cap,
    the advice says a broad EQ or a placement change would serve better.
    """
    from .notch import merge_notches

    advice = []
    if not notches:
        return [], advice
    merged = list(merge_notches(list(notches), sample_rate_hz))
    depth = [(-(n.gain_db if n.gain_db is not None else -60.0)) for n in merged]
    order = np.argsort(depth)[::-1]
    kept = [merged[i] for i in order[:max_notches]]
    if len(merged) > max_notches:
        advice.append(
            f"{len(merged)} separate frequencies ring but the cut budget is {max_notches}: "
            "a broad EQ or moving the mic/speaker would serve better than more notches"
        )
    wide = [n for n in kept if n.bandwidth_oct >= 1 / 3 - 1e-9]
    if wide:
        advice.append(
            "cut(s) at " + ", ".join(f"{n.freq_hz:.0f} Hz" for n in wide)
            + " reached the 1/3-octave width cap: a broad EQ may serve better"
        )
    kept.sort(key=lambda n: n.freq_hz)
    return kept, advice


def event_to_dict(event: Event) -> dict:
    """JSON-ready dict of an event (None fields kept as null)."""
    return dataclasses.asdict(event)


def event_record(e: Event, *, loop_delay_s: float | None = None, target_margin_db: float = TARGET_MARGIN_DB,
                 temperature_c: float = 20.0, swing_c: float = 3.0) -> dict:
    """One event as the JSON of ``howl scan``/``howl listen`` shows it, with its suggested cut."""
    notch, needed, margin_used = suggest_event_cut(
        e, loop_delay_s=loop_delay_s, target_margin_db=target_margin_db, temperature_c=temperature_c, swing_c=swing_c)
    d = {
        "time_s": e.time_s, "onset_s": e.onset_s, "freq_hz": e.freq_hz, "kind": e.kind,
        "level_db": e.level_db, "growth_db_per_s": e.growth_db_per_s,
        "decay_db_per_s": e.decay_db_per_s, "steady": e.steady, "live": e.live, "window_s": e.window_s,
        "notch": {"freq_hz": notch.freq_hz, "gain_db": notch.gain_db, "q": notch.q,
                  "bandwidth_oct": notch.bandwidth_oct},
        "needed_cut_db": needed,
        "features": {"papr_db": e.papr_db, "pnpr_db": e.pnpr_db, "phpr_db": e.phpr_db, "ipmp": e.ipmp,
                     "imsd_db_per_s": e.imsd_db_per_s, "fsd": e.fsd, "phpr_comod_db": e.phpr_comod_db},
    }
    if loop_delay_s is not None:
        d["margin_db"] = e.margin_db
    else:
        d["margin_assumed_db"] = margin_used
    return d


def report(events, sample_rate_hz: float, duration_s: float, *, loop_delay_s: float | None = None,
           max_notches: int = 6, temperature_c: float = 20.0, swing_c: float = 3.0,
           target_margin_db: float = TARGET_MARGIN_DB) -> dict:
    """The JSON-ready report shared by ``howl scan`` and ``howl listen``.

    ``events``: each with its suggested cut (``notch``) and the cut depth it needs;
    ``notches``: the cuts merged across events (same frequency → one cut) within the
    budget ``max_notches``; ``advice``: when a broad EQ or placement would serve better.
    """
    ev_out = [event_record(e, loop_delay_s=loop_delay_s, target_margin_db=target_margin_db,
                           temperature_c=temperature_c, swing_c=swing_c) for e in events]
    from .notch import Notch

    cuts = [Notch(d["notch"]["freq_hz"], d["notch"]["gain_db"], d["notch"]["q"]) for d in ev_out]
    kept, advice = summarise_notches(cuts, sample_rate_hz, max_notches=max_notches)
    notches = []
    for n in kept:
        lo, hi = n.band_edges_hz()
        members = [e for e in events if lo <= e.freq_hz <= hi]
        notches.append({"freq_hz": n.freq_hz, "gain_db": n.gain_db, "q": n.q, "bandwidth_oct": n.bandwidth_oct,
                        "n_events": len(members), "kinds": sorted({e.kind for e in members})})
    return {
        "sample_rate_hz": float(sample_rate_hz),
        "duration_s": float(duration_s),
        "loop_delay_ms": None if loop_delay_s is None else 1000.0 * loop_delay_s,
        "assumed_loop_delay_ms": None if loop_delay_s is not None else 1000.0 * DEFAULT_LOOP_DELAY_S,
        "target_margin_db": target_margin_db,
        "events": ev_out,
        "notches": notches,
        "advice": advice,
        "n_howl": sum(e.kind == "howl" for e in events),
        "n_ringing": sum(e.kind == "ringing" for e in events),
    }
