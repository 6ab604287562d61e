"""Decisions of the ringing detector (private: a base of :class:`howl.listen.detect.Detector`,
which holds the state these methods use): the tracks, the window tests of a growing track, the
steady-tone test, the howl's reported frequency and growth, and the ring-down test.

The formulas, thresholds and references are in :mod:`howl.listen.detect`'s docstring and
:class:`howl.listen._types.DetectorConfig`.
"""

from __future__ import annotations

import bisect
from dataclasses import dataclass
from operator import itemgetter

import numpy as np

from howl.listen._features import (
    _TINY,
    _imsd_on_line,
    _linfit,
    _lp_delta,
    _median,
    _rel_std,
    _slope,
    imsd_db_per_s,
    margin_from_decay_db,
)
from howl.listen._types import Event

#: a howl's frequency is refined on a frame this many times the analysis frame (see _Decisions._refine_kf)
REFINE_FACTOR = 4
#: a ring-down's partner is at the exact multiple h when its median distance from it is within
#: this many bins × max(1, h) (a plucked string's inharmonicity, B = 0.0004, puts its 2nd partial
#: 0.08 % off: 0.06 bin at 880 Hz; a loop's modes 4/5 or 3/2 apart were 0.25-0.64 bin off)
RING_EXACT_TOL_BINS = 0.1



def _partner_trends(partners: np.ndarray, ts: np.ndarray):
    """From a track's partner rows (frames × [ratios dB, distances from the exact multiple, bins])
    over times ``ts``: the ratios R (capped at 200 dB), the distances, each partner's median ratio
    and the least-squares slope of its ratio (dB/s). A partner whose ratio stays put rises or
    falls with the peak: a partial of the same sound."""
    H = partners.shape[1] // 2
    R = np.minimum(partners[:, :H], 200.0)
    dx = ts - ts.mean()
    r_slope = dx @ (R - R.mean(axis=0)) / float(dx @ dx)
    return R, partners[:, H:], np.median(R, axis=0), r_slope


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
    min_pnpr_one_side_db: float | None = None


class _Track:
    """One tracked peak. Per frame: the frame index and a row
    (kf, level, papr, pnpr, phpr, nb, phf, ratios); columns are built only when evaluated.
    ``ratios`` holds the peak-to-partner ratios (dB) at :data:`HARMONIC_MULTIPLIERS`.
    At most the last ``2 × cap`` frames are kept (``cap``: ``max_track_history_s`` in frames; every
    test looks back a few seconds at most), so a tone held for an hour does not grow memory;
    ``first`` is the track's first frame all the same."""

    __slots__ = ("tid", "frames", "rows", "last_kf", "gap", "reported", "state", "last_eval", "hot", "peak",
                 "last_ring", "seen", "first", "cap", "peak_at")
    FIELDS = {"kf": 0, "level": 1, "papr": 2, "pnpr": 3, "phpr": 4, "nb": 5, "phf": 6, "partners": 7, "pnpr1": 8, "kf1": 9}

    def __init__(self, tid: int, cap: int = 1 << 62):
        self.tid = tid
        self.cap = cap
        self.first = -1
        self.frames: list[int] = []
        self.rows: list[tuple] = []
        self.last_kf = 0.0
        self.gap = 0
        self.reported: str | None = None
        self.state = "program"
        self.last_eval = -1
        self.hot = False  # rising lately: evaluated every frame
        self.peak = -np.inf  # highest level so far (dB)
        self.peak_at = -1  # the first frame that reached it
        self.last_ring = -1  # frame of the last live ring-down test
        self.seen = -1  # the last frame in which the track got a peak

    def add(self, t: int, row: tuple) -> None:
        if not self.frames:
            self.first = t
        elif len(self.frames) >= 2 * self.cap:
            del self.frames[: self.cap]
            del self.rows[: self.cap]
        self.frames.append(t)
        self.rows.append(row)
        self.last_kf = row[0]
        self.gap = 0
        self.seen = t
        if row[1] > self.peak:
            self.peak = row[1]
            self.peak_at = t

    def col(self, name: str, start: int = 0) -> list:
        rows = self.rows
        return list(map(_GETTERS[name], rows[start:] if start else rows))




_GETTERS = {name: itemgetter(k) for name, k in _Track.FIELDS.items()}


def _median_col(tr: "_Track", name: str) -> float:
    """:func:`_median` of a whole column of a track, the same value (the same one or two middle
    elements, averaged the same way); on a long track by a partial sort (np.partition) of the
    column read straight into an array, instead of a list and a full sort."""
    rows = tr.rows
    n = len(rows)
    if n < 64:
        return _median(tr.col(name))
    a = np.fromiter(map(_GETTERS[name], rows), float, n)
    if n % 2:
        return float(np.partition(a, n // 2)[n // 2])
    p = np.partition(a, (n // 2 - 1, n // 2))
    return 0.5 * (float(p[n // 2 - 1]) + float(p[n // 2]))


class _Decisions:
    """Track decisions; the attributes used (``cfg``, ``dt``, ``_tiers``, ``events`` …) are set by
    :class:`howl.listen.detect.Detector`."""

    def _fsd_limit(self, rel_limit: float, kf: float) -> float:
        """A relative frequency-spread (or drift) limit, with the floor ``fsd_floor_bins`` (scaled
        as ``rel_limit`` is to ``max_fsd``): the estimate's scatter is in bins, not relative, so
        at low frequencies a relative limit alone is finer than the estimate can be."""
        return max(rel_limit, self.cfg.fsd_floor_bins * rel_limit / (self.cfg.max_fsd * max(kf, 1.0)))

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
        contrast = False
        if pn < tier.min_pnpr_db or (tier.min_pnpr_each_db is not None and min(pns) < tier.min_pnpr_each_db):
            # contrast of growth: a peak beside a louder partial is allowed when it is pure on its
            # other side in every frame and outgrows its neighbours (checked below, on the level line)
            if tier.min_pnpr_one_side_db is None or tr.last_kf > self.k_contrast_hi:
                return None
            if min(tr.col('pnpr1', i0)) < tier.min_pnpr_one_side_db:
                return None
            contrast = True
        # beside a louder partial, the frequency comes from the quieter side (kf1: no pull toward it)
        kfl = tr.col('kf1' if contrast else 'kf', i0)
        fsd = _rel_std(kfl)
        if fsd > self._fsd_limit(tier.max_fsd, kfl[-1]):
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
        growing = (slope >= tier.min_growth_db_per_s and drift <= self._fsd_limit(tier.max_drift, kfl[-1])
                   and imsd <= max(tier.imsd_floor_db_per_s, tier.imsd_fraction * slope)
                   and min(s_a, s_b) >= tier.halves_fraction * slope
                   and s_b >= tier.min_decel_ratio * s_a and rise >= tier.min_rise_db)
        if contrast and growing:
            # the neighbours' level (peak level − PNPR) rose at most (1 − comod_fraction) × as
            # fast as the peak: PNPR's own slope is at least comod_fraction × the growth
            growing = _slope(frl, pns) / dt >= self.cfg.comod_fraction * slope
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
        ph_c = self._comod_phpr(tr, i0, np.asarray(frl) * dt, slope, tier)
        if ph_c is None:
            return None
        return i0, ip, pn, ph, kf, fsd, lv, slope, imsd, True, ph_c

    def _comod_phpr(self, tr: _Track, i0: int, ts: np.ndarray, slope: float, tier: "_Tier") -> float | None:
        """PHPR over the partners that grow along with the peak (co-modulated: a partial of the
        same note; inf when none does), or None when a partner explains the peak away. A partner
        that does not grow with it (other program) does not explain it unless the peak is not yet
        ``min_phpr_other_db`` above it."""
        cfg = self.cfg
        R, dev, med, r_slope = _partner_trends(np.asarray(tr.col('partners', i0)), ts)
        grows_along = r_slope <= (1.0 - cfg.comod_fraction) * slope
        grows_along &= np.mean(dev <= self._exact_tol_bins, axis=0) >= 0.5  # exact in most frames
        explains = grows_along & (med < max(tier.min_phpr_db, cfg.min_phpr_comod_db))
        if tier.other_partners:
            explains |= med < cfg.min_phpr_other_db
        if np.any(explains):
            return None
        return float(med[grows_along].min()) if np.any(grows_along) else float("inf")

    def _evaluate(self, tr: _Track, t: int) -> None:
        """Decide one live track's state at frame ``t`` (howl, ringing, watch, program).

        Long because this runs for every live track on every frame: the two cheap window tests that end
        most calls are inlined ahead of :meth:`_window_test` to save Python call overhead (issue 21's
        CPU target; the golden events pin the behaviour).
        """
        cfg = self.cfg
        span = tr.frames[-1] - tr.frames[0] + 1
        rows = tr.rows
        back = rows[max(0, len(rows) - self.rise_win_frames)]
        last = rows[-1]
        tr.hot = last[1] - back[1] >= cfg.hot_rise_db
        # quick rejections (no window test can pass): the newest frame is far from pure, or the
        # frequency moved by more than a few times the allowed spread (a glide) since the look-back
        kl = last[0]
        pure_now = max(last[3], last[8]) if kl <= self.k_contrast_hi else last[3]
        # _fsd_limit(max_fsd, kl), inlined (called for every evaluation)
        mx = cfg.max_fsd
        lim = max(mx, cfg.fsd_floor_bins * mx / (mx * max(kl, 1.0)))
        if pure_now < cfg.min_pnpr_db - 6.0 or abs(kl - back[0]) > 6.0 * lim * kl:
            if span >= self._tiers[0].frames:
                tr.state = "program"
            return
        res = None
        # fast growth is decided on shorter windows (a loop well past unity must not wait);
        # the shorter the window, the stricter the tests (fewer frames to judge by)
        # the first two tests of _window_test (presence, and the quick gate on the rise), inlined:
        # most windows end there, and the call costs more than the tests
        frames = tr.frames
        n_fr = len(frames)
        level_now = last[1]
        held = span >= self.persist_frames
        dt = self.dt
        for tier in self._tiers:
            if span >= tier.frames:
                W = tier.frames
                i0 = bisect.bisect_left(frames, t - W + 1)
                if (n_fr - i0) / W < tier.min_ipmp:
                    continue
                if (level_now - rows[i0][1] < 0.3 * tier.min_growth_db_per_s * (W - 1) * dt
                        and not (tier.full and held)):
                    continue
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
            if steady and cfg.persist_min_growth_db_per_s is not None:
                # a held pure tone is not a howl unless it grows like one: on a line, not slowing
                h = frp.size // 2
                s_a = _linfit(frp[:h + 1] * self.dt, lvp[:h + 1])[0]
                s_b = _linfit(frp[h:] * self.dt, lvp[h:])[0]
                steady = sp >= cfg.persist_min_growth_db_per_s and s_b >= (cfg.line_min_decel_ratio or 0.0) * s_a
        if (growing or steady) and self._is_howl_product(float(np.median(kf)) * self.bin_hz):
            tr.reported = "product"
            tr.state = "product"
            return
        if growing and self._slows_down(tr, len(lv)):
            growing = False  # an onset, an attack or a swell: its level in dB rises ever more slowly
        if growing:
            slope = self._growth_estimate(tr, len(lv), slope)
        if (growing or steady) and self._off_crossings(float(np.median(kf)) * self.bin_hz):
            tr.reported = "off_crossing"  # the loop cannot howl there: program, however it grows
            tr.state = "watch"
            return
        if growing or steady:
            fr_end = tr.frames[-1]
            kf_med = float(np.median(kf))
            if (fr_end - tr.frames[0]) * self.hop + self.n_win >= self.n_long:  # tracked over the long frame
                kf_med = self._refine_kf(kf_med, t * self.hop + self.n_win)
            time_s = (t * self.hop + self.n_win) / self.fs
            if (self._same_event(kf_med * self.bin_hz, time_s, "lane") is not None
                    or any(abs(k - kf_med) <= 1.5 for k in self._slow_reported)):
                tr.reported = "howl"  # the low lane or the slow-growth path has reported it
                tr.state = "howl"
                return
            tr.reported = "howl"
            tr.state = "howl"
            margin = None if self.loop_delay_s is None else -slope * self.loop_delay_s
            self._report(Event(
                time_s=time_s,
                onset_s=(tr.first * self.hop + self.n_win / 2) / self.fs,
                freq_hz=kf_med * self.bin_hz, kind="howl", level_db=float(lv[-1]),
                growth_db_per_s=float(slope), papr_db=float(np.median(tr.col('papr', i0))), pnpr_db=pn, phpr_db=ph,
                ipmp=float(ip), imsd_db_per_s=float(imsd), fsd=fsd, track_id=tr.tid, margin_db=margin,
                steady=bool(steady and not growing), window_s=len(lv) and (fr_end - tr.frames[i0] + 1) * self.dt,
                phpr_comod_db=None if not np.isfinite(ph_c) else float(ph_c),
            ))
        else:
            tr.state = "watch"

    def _refine_kf(self, kf: float, end_sample: int) -> float:
        """The howl's frequency (in short-frame bins) refined on a frame ``REFINE_FACTOR`` times
        longer that ends with the decision frame (used when the track spans that frame, so the
        frame holds the howl and not the program before it), when it is a clean peak there (PNPR ≥
        ``min_pnpr_db`` over that frame's ±4…6 bins, a quarter of the short ones). Program partials a
        bin or two away pull the short frame's estimate by up to a few tenths of a bin (0.5 % at
        150 Hz); the long frame resolves them. Else, or before enough samples, ``kf`` is kept."""
        n = self.n_long
        start = end_sample - n
        past0 = self._buf_start - self._past.size
        if start < past0:
            return kf
        both = np.concatenate([self._past, self._buf]) if self._past.size else self._buf
        seg = both[start - past0: end_sample - past0]
        if seg.size < n:
            return kf
        p = np.abs(self._fft.rfft(seg * self._win_long)) ** 2
        c = int(round(kf * REFINE_FACTOR))
        if c - 9 < 1 or c + 9 >= p.size:
            return kf
        j = c - 2 + int(np.argmax(p[c - 2: c + 3]))
        if not (p[j] > p[j - 1] and p[j] >= p[j + 1]):
            return kf
        kf_long = (j + float(_lp_delta(p[j - 1: j], p[j: j + 1], p[j + 1: j + 2])[0])) / REFINE_FACTOR
        nb = max(p[j + d] for d in (-6, -5, -4, 4, 5, 6))
        if abs(kf_long - kf) > 0.5 or 10.0 * np.log10(p[j] / max(nb, _TINY)) < self.cfg.min_pnpr_db:
            return kf
        return kf_long

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

    def _slows_down(self, tr: _Track, n_window: int) -> bool:
        """Did the track's rise slow down since it came out of the program (the lowest level of the
        last ``growth_fit_s``, when that is at least ``line_min_span_windows`` decision windows)? A howl grows on a straight line
        in dB from the fader move to the limiter; an attack, a fade-in or a swell (linear in
        amplitude, an RC curve, a raised cosine) rises in dB ever more slowly. Slowing: the second
        half's least-squares slope is under ``line_min_decel_ratio`` × the first half's."""
        r = self.cfg.line_min_decel_ratio
        if r is None:
            return False
        n_fit = max(n_window, int(round(self.cfg.growth_fit_s / self.dt)))
        lv = tr.col('level', max(0, len(tr.rows) - n_fit))
        fr = tr.frames[len(tr.frames) - len(lv):]
        j = min(range(len(lv)), key=lv.__getitem__)
        if len(lv) - j < self.cfg.line_min_span_windows * n_window:
            return False
        f, y = fr[j:], lv[j:]
        h = len(f) // 2
        s_a = _slope(f[:h + 1], y[:h + 1])
        s_b = _slope(f[h:], y[h:])
        return s_a > 0 and s_b < r * s_a

    def _off_crossings(self, freq_hz: float) -> bool:
        """With the loop's crossings known (a measured loop IR): is ``freq_hz`` far from every one,
        farther than ``max_crossing_offset_pct`` of it and than half the IR's resolution
        (``crossing_resolution_hz``: 1 / the IR's length; the IR places a crossing to ± half of it)?
        The loop can only howl at a crossing (where its phase comes round to a whole number of
        turns; past unity at the closed loop's mode, within 1 % of it: docs/scan.md), so a
        component growing elsewhere is program."""
        c = self.crossings_hz
        if c is None or self.cfg.max_crossing_offset_pct is None:
            return False
        if c.size == 0:
            return True
        far_pct = np.abs(c / freq_hz - 1.0) * 100.0 > self.cfg.max_crossing_offset_pct
        return bool(np.all(far_pct & (np.abs(c - freq_hz) > 0.5 * self.crossing_resolution_hz)))

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

    def _ringdown(self, tr: _Track, live: bool = False) -> Event | None:
        """Was the fall of this track a ring-down? ``live``: the track is still fading (tested on the
        frames so far); else it has ended (the last frames near the floor it ended at are left out).

        Long because the criteria are tested in order, each only when the ones before pass, with the
        cheap ones before any array is built (issue 21's CPU target); splitting them would rebuild the
        shared slices per criterion."""
        cfg = self.cfg
        n = len(tr.frames)
        min_frames = int(round(cfg.min_decay_s / self.dt))
        if n < min_frames + 2:
            return None
        # cheap tests first (each one only rejects, so their order does not change the result):
        # enough frames after the peak (the segment test below, before any array) ...
        frames = tr.frames
        if tr.peak_at >= frames[0]:  # the track's highest level is still in its history: its first frame
            ipk = bisect.bisect_left(frames, tr.peak_at)
        else:
            lvl = tr.col('level')
            ipk = max(range(n), key=lvl.__getitem__)  # the first maximum, as np.argmax
        # skip the frames in which the window still straddles the transient
        i0 = bisect.bisect_left(frames, frames[ipk] + int(np.ceil(0.5 * self.n_win / self.hop)))
        if n - i0 < min_frames:
            return None
        # ... and a ring-down is pure over most of the track (PHPR first: it rejects most)
        if not cfg.ring_exact_partners and _median_col(tr, 'phf') < cfg.min_phpr_db - 6.0:
            return None
        if _median_col(tr, 'pnpr') < cfg.min_pnpr_db - 6.0:
            return None
        lv = np.asarray(tr.col('level'))
        fr = np.asarray(frames)
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
        decay = -slope
        # the tests of a ring-down, each computed only when the ones before pass (the same
        # result as computing all and testing them together: each value depends on the data only)
        if not (cfg.min_decay_db_per_s <= decay <= cfg.max_decay_db_per_s and span >= cfg.min_decay_span_db):
            return None
        kf = np.asarray(tr.col('kf'))[seg]
        fsd = float(np.std(kf) / np.mean(kf))
        if not fsd <= (cfg.max_fsd if cfg.ring_max_fsd is None else cfg.ring_max_fsd):
            return None
        pn = float(np.median(np.asarray(tr.col('pnpr'))[seg]))
        if not pn >= cfg.min_pnpr_db:
            return None
        q = cfg.imsd_points
        tq = np.linspace(ts[0], ts[-1], q)
        imsd = imsd_db_per_s(np.interp(tq, ts, lv[seg]), (ts[-1] - ts[0]) / (q - 1))
        if not imsd <= max(cfg.max_imsd_db_per_s, 0.3 * decay):
            return None
        # a partner at the exact multiple in most frames that decays along with the peak (falls at
        # >= comod_fraction x its rate: a plucked or struck note's partials fall together, the
        # higher ones faster) and starts within min_phpr_comod_db of it (the fitted ratio at the
        # start of the fall: a faster partial's ratio grows through the fall, so its median
        # over a long fall passes 20 dB) makes it a note, not a loop mode
        R, dev, med, r_slope = _partner_trends(np.asarray(tr.col('partners'))[seg], ts)
        exact = np.median(dev, axis=0) <= self._ring_exact_tol_bins
        along = exact & (r_slope >= -(1.0 - cfg.comod_fraction) * decay)
        r_start = R.mean(axis=0) - r_slope * (ts.mean() - ts[0])
        if np.any(along & (np.minimum(med, r_start) < max(cfg.min_phpr_db, cfg.min_phpr_comod_db))):
            return None
        if cfg.ring_exact_partners:
            # PHPR over the exact partners only (other loop modes ringing at near-harmonic ratios
            # are not partials)
            ph = float(med[exact].min()) if exact.any() else 200.0
        else:
            ph = float(np.median(np.asarray(tr.col('phf'))[seg]))
        if ph < cfg.min_phpr_db:
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


