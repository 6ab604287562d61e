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
     persists steady for ``persist_s``. Fast growth is decided on shorter windows
     (0.10 s from 40 dB/s, 0.15 s from 20 dB/s, else 0.30 s), each shorter one
     with stricter tests; rising peaks far below the program are candidates too
     (held for 0.1 s once found); PHPR counts only partners that grow along with
     the peak at the exact multiple, or that the peak has not yet passed; below
     1 kHz a peak beside a louder partial may pass on its quieter side when it
     outgrows its neighbours (contrast of growth);
   * **ringing**: a pure, steady track whose level falls on a straight line in
     dB at a rate between ``min_decay_db_per_s`` and ``max_decay_db_per_s``
     over at least ``min_decay_span_db`` — the ring-down of a loop close to
     instability after a transient; reported while it still fades;
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
import operator
from dataclasses import replace

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from howl import validate as v
from howl.listen._features import (  # noqa: F401  (re-exported)
    _TINY,
    BASIC_MULTIPLIERS,
    HARMONIC_MULTIPLIERS,
    _imsd_on_line,
    _linfit,
    _lp_delta,
    _median,
    _rel_std,
    _slope,
    estimate_peak,
    gaussian_window,
    imsd_db_per_s,
    ipmp,
    loop_delay_s,
    margin_from_decay_db,
    papr_db,
    phpr_db,
    pnpr_db,
)
from howl.listen._report import (  # noqa: F401  (re-exported)
    DEFAULT_LOOP_DELAY_S,
    TARGET_MARGIN_DB,
    LoopDelayFromIR,
    event_record,
    event_to_dict,
    report,
    suggest_event_cut,
    summarise_notches,
)
from howl.listen._candidates import _CandidateSearch
from howl.listen._slow import _SlowGrowth
from howl.listen._decide import RING_EXACT_TOL_BINS, REFINE_FACTOR, _Decisions, _Tier, _Track  # noqa: F401
from howl.listen._lane import Decimator, lane_config, lane_factor
from howl.listen._types import Candidate, DetectionResult, DetectorConfig, Event  # noqa: F401  (re-exported)

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
    "event_record",
    "event_to_dict",
    "report",
    "DEFAULT_LOOP_DELAY_S",
    "LoopDelayFromIR",
    "TARGET_MARGIN_DB",
    "HARMONIC_MULTIPLIERS",
    "BASIC_MULTIPLIERS",
]


_LAST_KF = operator.attrgetter("last_kf")
#: a howl reported by both lanes within this time (s) and max(1 %, a lane bin) is reported once
LANE_SAME_S = 3.0
#: track ids of the low lane's events are offset by this (the two lanes number their tracks apart)
LANE_TRACK_ID_OFFSET = 1_000_000

#: frames analysed per batch (one FFT call, one feature pass)
CHUNK_FRAMES = 256

class Detector(_CandidateSearch, _Decisions, _SlowGrowth):
    """Streaming detector: feed blocks of any length with :meth:`process`.

    Parameters
    ----------
    sample_rate_hz: sample rate of the blocks.
    config: :class:`DetectorConfig` (defaults documented there).
    loop_delay_s: the loop delay τ when known (measured loop IR, or passed in);
        enables ``margin_db`` on events.
    crossings_hz: the positive real-axis crossings of a measured loop IR (Hz), when known: a
        component farther than ``max_crossing_offset_pct`` from every one, and than half of
        ``crossing_resolution_hz``, is not a howl (it may be shown as ``watch``).
    crossing_resolution_hz: the IR's frequency resolution, 1 / its length (s): it places a
        crossing to ± half of it (None: the percentage alone);
        :attr:`howl.listen.detect.LoopDelayFromIR.crossing_resolution_hz`.
    """

    def __init__(self, sample_rate_hz: float, config: DetectorConfig | None = None, *, loop_delay_s: float | None = None,
                 crossings_hz=None, crossing_resolution_hz: float | None = None):
        self.fs = v.in_range(sample_rate_hz, "sample_rate_hz", 2000.0, 768000.0, unit="Hz")
        self.cfg = (config or DetectorConfig()).validated()
        self.loop_delay_s = None if loop_delay_s is None else v.positive(loop_delay_s, "loop_delay_s", unit="s")
        # the loop's positive real-axis crossings (Hz), when a loop IR is known: a howl can only be on one
        self.crossings_hz = None if crossings_hz is None else np.asarray(crossings_hz, float).ravel()
        self.crossing_resolution_hz = (0.0 if crossing_resolution_hz is None else
                                       v.in_range(crossing_resolution_hz, "crossing_resolution_hz", 0.0, None, unit="Hz"))
        from howl.listen import _fft  # scipy's pocketfft without importing scipy.fft (start-up, issue 21)

        self._fft = _fft
        n = _fft.next_fast_len(int(round(self.cfg.window_s * self.fs)))
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
                  min_pnpr_one_side_db=c.rise_min_pnpr_one_side_db,
                  min_rise_db=4.0, other_partners=False, min_decel_ratio=c.rise_min_decel_ratio,
                  max_drift=c.rise_max_drift),
            _Tier(self.fast_frames, c.fast_growth_db_per_s, min_pnpr_db=c.min_pnpr_db + 6.0, min_pnpr_each_db=None,
                  min_phpr_db=c.min_phpr_db, max_fsd=c.max_fsd, imsd_fraction=0.25, imsd_floor_db_per_s=0.0,
                  min_ipmp=c.min_ipmp, halves_fraction=0.5, min_rise_db=0.0, max_drift=c.max_fsd / 2,
                  min_decel_ratio=c.fast_min_decel_ratio, min_pnpr_one_side_db=c.contrast_min_pnpr_one_side_db),
            _Tier(self.win_frames, c.min_growth_db_per_s, min_pnpr_db=c.min_pnpr_db, min_pnpr_each_db=None,
                  min_phpr_db=c.min_phpr_db, max_fsd=c.max_fsd, imsd_fraction=0.6,
                  imsd_floor_db_per_s=c.max_imsd_db_per_s, min_ipmp=c.min_ipmp, halves_fraction=c.halves_fraction,
                  min_rise_db=0.0, full=True, max_drift=c.max_fsd, min_decel_ratio=c.full_min_decel_ratio,
                  min_pnpr_one_side_db=c.contrast_min_pnpr_one_side_db),
        )
        self._hist_cap = max(1, int(round(self.cfg.max_track_history_s / self.dt)))
        persist = self.cfg.persist_s / self.dt
        self.persist_frames = max(self.win_frames, int(round(persist))) if np.isfinite(persist) else 2 ** 62
        self._buf = np.zeros(0)
        self.n_long = REFINE_FACTOR * self.n_win  # the frame a howl's frequency is refined on
        self._win_long = gaussian_window(self.n_long)
        self._past = np.zeros(0)  # the last n_long samples before _buf[0]
        self._frame = 0  # index of the next frame to compute
        self._buf_start = 0  # sample index of _buf[0]
        self._tracks: list[_Track] = []
        self._next_tid = 0
        self.events: list[Event] = []
        self._pnpr_off = np.array([4, 5, 6])
        self._ptail = self._rise_carry = self._held_carry = None
        self.rise_frames = max(2, int(round(self.cfg.rise_lookback_s / self.dt)))
        self.k_rise_hi = max(self.k_lo + 3, min(self.k_hi, int(np.ceil(self.cfg.rise_f_hi_hz / self.bin_hz))))
        c_hi = self.cfg.rise_contrast_f_hi_hz
        self.k_contrast_hi = -1.0 if c_hi is None else c_hi / self.bin_hz
        self._harm = np.array(HARMONIC_MULTIPLIERS)
        self._slow_setup()
        self._exact_tol_bins = 0.5 * np.maximum(1.0, self._harm)
        # a decaying partial is a clean tone, its frequency precise: a tighter tolerance there tells
        # a note's partials from loop modes ringing at near-harmonic ratios 0.2-0.6 bin off
        self._ring_exact_tol_bins = RING_EXACT_TOL_BINS * np.maximum(1.0, self._harm)
        self._basic = np.array([any(abs(h - b) < 1e-12 for b in BASIC_MULTIPLIERS) for h in HARMONIC_MULTIPLIERS])
        self.n_samples = 0
        # the low lane (see DetectorConfig.low_lane_hz): the same detector on a decimated copy
        self._lane = self._dec = None
        # indices in self.events of each lane's reports, by kind (see _same_event)
        self._reported_at: dict[tuple[str, str], list[int]] = {
            (lane, kind): [] for lane in ("main", "lane") for kind in ("howl", "ringing")}
        self._call_start = 0
        lane_hz = self.cfg.low_lane_hz
        if lane_hz is not None and lane_factor(self.fs) >= 2:
            self._dec = Decimator(self.fs, lane_factor(self.fs))
            self._lane = Detector(self.fs / self._dec.factor, lane_config(self.cfg, lane_hz),
                                  loop_delay_s=self.loop_delay_s, crossings_hz=self.crossings_hz,
                                  crossing_resolution_hz=self.crossing_resolution_hz)

    # ------------------------------------------------------------------ public

    @property
    def time_s(self) -> float:
        return self.n_samples / self.fs

    def process(self, block: np.ndarray) -> list[Event]:
        """Analyse a block (1-D float samples, full scale ±1). Returns the new events."""
        x = np.asarray(block, dtype=float).ravel()
        if x.size and not np.all(np.isfinite(x)):
            raise v.fail("block", "finite samples", "NaN/inf")
        self._call_start = before = len(self.events)
        # with the low lane, in pieces of CHUNK_FRAMES hops (2.56 s at a 10 ms hop: whole batches of
        # the main lane; 1 s pieces cost 15 % more CPU), so the two lanes stay within a piece of each
        # other (which reported a howl first is decided on the event times, see _merge_lane)
        step = x.size if self._lane is None else CHUNK_FRAMES * self.hop
        for i in range(0, x.size, step):
            self._process_piece(x[i: i + step])
        return self.events[before:]

    def _process_piece(self, x: np.ndarray) -> None:
        self.n_samples += x.size
        self._buf = np.concatenate([self._buf, x]) if self._buf.size else x.copy()
        chunk = CHUNK_FRAMES
        while True:
            start0 = self._frame * self.hop - self._buf_start
            avail = (self._buf.size - start0 - self.n_win) // self.hop + 1
            if avail <= 0:
                break
            n_f = int(min(avail, chunk))
            self._analyse(start0, n_f)
        if self._lane is not None:
            y = self._dec.process(x)
            if y.size:
                self._merge_lane(self._lane.process(y))
        # drop consumed samples
        keep_from = self._frame * self.hop - self._buf_start
        if keep_from > 0:
            self._past = np.concatenate([self._past, self._buf[:keep_from]])[-self.n_long:]
            self._buf = self._buf[keep_from:]
            self._buf_start += keep_from

    def finish(self) -> list[Event]:
        """Close all tracks (end of file or of a live run) and return the new events."""
        before = len(self.events)
        for tr in self._tracks:
            self._close(tr)
        self._tracks = []
        if self._lane is not None:
            self._merge_lane(self._lane.finish())
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
                trend_db_per_s=float(slope), age_s=(tr.frames[-1] - tr.first + 1) * self.dt,
                pnpr_db=_median(tr.col("pnpr", i0)), phpr_db=_median(tr.col("phpr", i0)),
                fsd=float(np.std(kf) / max(np.mean(kf), _TINY)), state=tr.reported or tr.state,
            ))
        out.sort(key=lambda c: -c.level_db)
        return out[:max_n]

    # ------------------------------------------------------------------ internals

    def _same_event(self, freq_hz: float, time_s: float, lane: str, kind: str = "howl") -> int | None:
        """The index in ``self.events`` of a ``kind`` event that ``lane`` ("main" or "lane")
        reported within max(1 %, a lane bin) of ``freq_hz`` and ``LANE_SAME_S`` of ``time_s`` (the
        other lane's report of it is the same howl or ring-down), or None."""
        if self._lane is None:
            return None
        tol = max(0.01 * freq_hz, self._lane.bin_hz)
        for i in self._reported_at[lane, kind]:
            e = self.events[i]
            if abs(e.freq_hz - freq_hz) <= tol and abs(time_s - e.time_s) <= LANE_SAME_S:
                return i
        return None

    def _merge_lane(self, events: list[Event]) -> None:
        """Take the low lane's new howls and ring-downs (not products of howls already reported).
        One both lanes report is reported once, at the earlier time: the main lane's report is
        replaced when it is later and not yet returned."""
        for e in events:
            if e.kind == "howl" and self._is_howl_product(e.freq_hz):
                continue
            e = replace(e, track_id=e.track_id + LANE_TRACK_ID_OFFSET, onset_s=max(0.0, e.onset_s - self._dec.delay_s))
            i = self._same_event(e.freq_hz, e.time_s, "main", e.kind)
            if i is not None:
                if self.events[i].time_s <= e.time_s or i < self._call_start:
                    continue
                self.events[i] = e
                self._reported_at["main", e.kind].remove(i)
                self._reported_at["lane", e.kind].append(i)
                continue
            self._report(e, "lane")

    def _report(self, e: Event, lane: str = "main") -> None:
        self._reported_at[lane, e.kind].append(len(self.events))
        self.events.append(e)

    def _analyse(self, start0: int, n_f: int) -> None:

        seg = self._buf[start0: start0 + (n_f - 1) * self.hop + self.n_win]
        # float32 FFT: 2x faster; its ~-140 dB rounding floor is far below any decision
        frames = sliding_window_view(seg.astype(np.float32), self.n_win)[:: self.hop][:n_f]
        spec = self._fft.rfft(frames * self._win32)
        # |X|² in place on the interleaved (re, im) float32 pairs: the same float32 operations as
        # re² + im², without the temporaries
        ri = spec.view(np.float32)
        np.square(ri, out=ri)
        power = ri[:, 0::2] + ri[:, 1::2]  # (F, n_bins) float32
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
        allrows = self._features(power, mean_p, rows, k)
        bounds = np.searchsorted(rows, np.arange(n_f + 1))
        t0 = self._frame
        slow = self._slow_scan(power, n_f) if self._slow_on else []
        js = 0
        for i in range(n_f):
            i0 = int(bounds[i])
            i1 = int(bounds[i + 1])
            self._step(t0 + i, allrows[i0:i1])
            while js < len(slow) and slow[js][0] == i:  # slow howls decided at this frame
                self._slow_report(slow[js][1:], t0 + i)
                js += 1
        self._frame += n_f

    def _step(self, t, rows) -> None:
        """One frame: link this frame's candidate rows to the tracks, then test the tracks due.

        Written for speed (issue 21): this runs for every frame and every track, so the link and
        the bookkeeping of :meth:`_Track.add` are inlined, and the tracks not due for a test are
        passed over with a few comparisons."""
        cfg = self.cfg
        tol = cfg.track_tol_bins
        # tracks kept sorted by their last frequency (nearly sorted already: the sort is cheap), so
        # each candidate looks only at its neighbours; a track matched in this frame has seen == t
        tracks = self._tracks
        if rows:
            tracks.sort(key=_LAST_KF)
            lasts = [tr.last_kf for tr in tracks]
            n_tr = len(tracks)
            bl = bisect.bisect_left
            born = []
            for row in rows:
                kj = row[0]
                best = None
                bd = tol
                i = bl(lasts, kj - tol)
                while i < n_tr and lasts[i] <= kj + tol:
                    d = abs(lasts[i] - kj)
                    if d <= bd and tracks[i].seen != t:
                        bd, best = d, tracks[i]
                    i += 1
                if best is None:
                    if n_tr + len(born) >= cfg.max_tracks:
                        continue
                    best = _Track(self._next_tid, self._hist_cap)
                    self._next_tid += 1
                    born.append(best)
                # _Track.add, inlined
                fr = best.frames
                if not fr:
                    best.first = t
                elif len(fr) >= 2 * best.cap:
                    del fr[: best.cap]
                    del best.rows[: best.cap]
                fr.append(t)
                best.rows.append(row)
                best.last_kf = kj
                best.gap = 0
                best.seen = t
                if row[1] > best.peak:
                    best.peak = row[1]
                    best.peak_at = t
            if born:
                tracks.extend(born)
        else:
            tracks.sort(key=_LAST_KF)
        every = cfg.eval_every_frames
        span_db = cfg.min_decay_span_db
        max_gap = cfg.max_gap_frames
        closed = False
        for tr in tracks:
            if tr.seen != t:
                tr.gap += 1
                if tr.gap > max_gap:
                    self._close(tr)
                    closed = True
                continue
            if tr.reported is not None:
                continue
            if t - tr.last_eval >= (1 if tr.hot else every):
                tr.last_eval = t
                self._evaluate(tr, t)
                if tr.reported is not None:
                    continue
            # a ring-down is reported while it still fades, once enough of it has been seen
            if tr.peak - tr.rows[-1][1] >= span_db and t - tr.last_ring >= every:
                tr.last_ring = t
                ev = self._ringdown(tr, live=True)
                if ev is not None:
                    tr.reported = "ringing"
                    tr.state = "ringing"
                    self._report_ringing(ev)
        if closed:
            self._tracks = [tr for tr in tracks if tr.gap <= max_gap]

    def _close(self, tr: _Track) -> None:
        """A track ended: was its end a ring-down?"""
        if tr.reported is not None:
            return
        ev = self._ringdown(tr)
        if ev is not None:
            tr.reported = "ringing"
            self._report_ringing(ev)

    def _report_ringing(self, ev: Event) -> None:
        """A main-lane ring-down, unless the low lane has reported it."""
        if self._same_event(ev.freq_hz, ev.time_s, "lane", "ringing") is None:
            self._report(ev)

def detect(x: np.ndarray, sample_rate_hz: float, config: DetectorConfig | None = None, *,
           loop_delay_s: float | None = None, block_samples: int | None = None, crossings_hz=None,
           crossing_resolution_hz: float | None = None) -> DetectionResult:
    """Run the detector over a whole signal (optionally in blocks, as a live input would);
    ``crossings_hz``, ``crossing_resolution_hz``: a loop IR's crossings, as for :class:`Detector`."""
    x = v.finite_array(x, "signal", ndim=1)
    det = Detector(sample_rate_hz, config, loop_delay_s=loop_delay_s, crossings_hz=crossings_hz,
                   crossing_resolution_hz=crossing_resolution_hz)
    if block_samples is None:
        det.process(x)
    else:
        b = v.integer(block_samples, "block_samples", 1)
        for i in range(0, x.size, b):
            det.process(x[i: i + b])
    det.finish()
    return DetectionResult(
        events=tuple(sorted(det.events, key=lambda e: e.time_s)), sample_rate_hz=det.fs, duration_s=x.size / det.fs,
        n_frames=det._frame,
        window_samples=det.n_win, hop_samples=det.hop, loop_delay_s=det.loop_delay_s,
    )
