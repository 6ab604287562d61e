"""The slow-growth path of the ringing detector (private: a base of :class:`howl.listen.detect.Detector`,
which holds the state these methods use).

Why: a loop m dB past unity with a loop delay τ grows at about m/τ dB/s; in a reverberant hall the
closed loop's pole gives a few dB/s to 20 dB/s. Such a howl starts at the program's level in its own
narrow band, far below the strongest peaks and far slower than the rising candidates (40 dB/s), so
no track follows it until it is nearly as loud as the program. Yet it rises on a straight line in
dB from the fader move, in one band that stays put, and it becomes the loudest thing in its own band
long before it dominates the whole program (the program's power is spread over hundreds of bins).

How: every ``slow_every_frames`` frames a snapshot of the spectrum (the mean power of those frames,
in dB) is kept for the last ``slow_window_s``. For every bin the least-squares slope of its level over
the window and over each half is had from running sums (a few operations per bin and snapshot).
A bin is a slow howl when, at the newest snapshot:

* it rises at ≥ ``slow_min_db_per_s`` by ≥ ``slow_min_rise_db`` over the window, each half at ≥
  half that rate and the second half at ≥ ``slow_min_decel_ratio`` × the first (a swell linear in
  amplitude, an attack, a fade-in, a raised cosine rise ever more slowly in dB; a howl does not slow
  before the limiter);
* it is a local maximum, pure (``slow_min_pnpr_db`` over the ±4…6 bin neighbours) in the newest
  snapshot, and its level lies on the line (rms residual ≤ ``slow_max_resid_db``);
* its interpolated frequency in the last half of the window stays within ``max_fsd`` (relative
  spread, with the detector's floor in bins) and drifts by no more than that (vibrato wanders);
* no partial of the same sound grows along with it: a partner at a multiple in
  :data:`~howl.listen._features.HARMONIC_MULTIPLIERS` that rises at ≥ ``comod_fraction`` × its rate
  and sits within ``min_phpr_comod_db`` of it makes it a note (a brass crescendo at a constant dB/s
  is harmonic).

The reported frequency is refined on the long frame (as a track's), the growth is a Theil-Sen line
over the window (median of pairwise slopes; Sen 1968).
"""

from __future__ import annotations

import numpy as np

from howl.listen._features import HARMONIC_MULTIPLIERS, _TINY
from howl.listen._lane import lane_factor
from howl.listen._types import Event


#: at most this many bins per snapshot go on to the detailed tests, the purest first (a clipped howl's
#: spectrum can flag thousands at once)
SLOW_MAX_PER_SNAPSHOT = 8


class _SlowGrowth:
    """Slow-growth decisions; the attributes used (``cfg``, ``k_lo``, ``k_hi``, ``dt`` …) are set by
    :class:`howl.listen.detect.Detector`."""

    def _slow_setup(self) -> None:
        c = self.cfg
        self._slow_on = c.slow_window_s is not None
        self._slow_reported: list[float] = []  # bins (kf) of the howls this path reported
        if not self._slow_on:
            return
        self.slow_every = int(c.slow_every_frames)
        self.slow_len = max(6, 2 * int(round(c.slow_window_s / (self.slow_every * self.dt) / 2)))
        self._slow_c0 = self.k_lo - 1  # bin of history column 0
        # up to the rising candidates' top (8 kHz: the whole band at 16 kHz; half of it at 48 kHz, for CPU)
        self._slow_nb = min(self.k_rise_hi, self.k_hi) + 2 - self._slow_c0
        self._slow_khi = self._slow_nb - 2
        # below the low lane's top, the lane (finer bins) has the slow path if any (``slow_low_lane``)
        lane = c.low_lane_hz is not None and lane_factor(self.fs) >= 2
        self._slow_klo = max(7, int(np.ceil(c.low_lane_hz / self.bin_hz)) - self._slow_c0 if lane else 7)
        self._slow_acc = np.zeros(self._slow_nb)
        self._slow_cnt = 0
        self._slow_hist = np.zeros((0, self._slow_nb))
        self._slow_last = np.zeros((0, self._slow_nb))  # the last frame of each snapshot (for frequency)

    def _slow_scan(self, power: np.ndarray, n_f: int) -> list[tuple]:
        """Snapshots of this chunk's frames into the history, and the slow howls they show: a list
        of (chunk frame index, kf, growth dB/s, level dB, PNPR dB, residual dB, FSD, PHPR dB, window s, PAPR dB)."""
        S = self.slow_every
        band = power[:, self._slow_c0: self._slow_c0 + self._slow_nb]
        t0 = self._frame
        # the frames that complete the snapshot begun in the last chunk, whole snapshots, the rest
        i1 = min(n_f, (S - t0 % S) % S)
        self._slow_acc += band[:i1].sum(axis=0, dtype=np.float64)
        self._slow_cnt += i1
        snaps, ends = [], []
        if (t0 + i1) % S == 0 and self._slow_cnt:
            snaps.append((self._slow_acc / self._slow_cnt)[None, :])
            ends.append(i1 - 1)
            self._slow_acc, self._slow_cnt = np.zeros(self._slow_nb), 0
        n_g = (n_f - i1) // S
        if n_g:
            whole = band[i1: i1 + n_g * S].reshape(n_g, S, -1).sum(axis=1, dtype=np.float64) / S
            snaps.append(whole)
            ends.extend(range(i1 + S - 1, i1 + n_g * S, S))
        i2 = i1 + n_g * S
        self._slow_acc += band[i2:].sum(axis=0, dtype=np.float64)
        self._slow_cnt += n_f - i2
        lasts = band[ends] if ends else None
        if not snaps:
            return []
        new = 10.0 * np.log10(np.concatenate(snaps) * self._amp_norm ** 2 + _TINY)
        L = self.slow_len
        H = np.concatenate([self._slow_hist, new]) if self._slow_hist.size else new
        new_f = 10.0 * np.log10(lasts.astype(np.float64) + _TINY)
        F = np.concatenate([self._slow_last, new_f]) if self._slow_last.size else new_f
        self._slow_hist = H[-(L - 1):]
        self._slow_last = F[-(L - 1):]
        first = max(L - 1, H.shape[0] - new.shape[0])
        if first >= H.shape[0]:
            return []
        out = []
        for r, (kk, grow) in self._slow_bins(H, first).items():
            e = ends[r - (H.shape[0] - new.shape[0])]
            for k, g in zip(kk, grow):
                d = self._slow_check(H[r - L + 1: r + 1], F[r - L + 1: r + 1], int(k), float(g))
                if d is not None:
                    out.append((e,) + d)
        out.sort(key=lambda d: d[0])
        return out

    def _slow_bins(self, H: np.ndarray, first: int) -> dict:
        """The (row: bins, slopes) of rows ``first``… of the history H whose bins pass the cheap tests:
        the window's slope and its halves', local maximum, PNPR (vectorised over all bins)."""
        c = self.cfg
        L = self.slow_len
        h = L // 2
        ds = self.slow_every * self.dt
        m = np.arange(H.shape[0], dtype=float)[:, None]
        C0 = np.vstack([np.zeros((1, H.shape[1])), np.cumsum(H, axis=0)])
        C1 = np.vstack([np.zeros((1, H.shape[1])), np.cumsum(m * H, axis=0)])

        def slope(end, n, k=slice(None)):
            """Least-squares slope (dB/s) over rows end-n+1 … end, for each end in ``end`` (at bins ``k``)."""
            sy = C0[end + 1, k] - C0[end + 1 - n, k]
            smy = C1[end + 1, k] - C1[end + 1 - n, k]
            mx = (end - (n - 1) / 2.0) if isinstance(k, np.ndarray) else (end[:, None] - (n - 1) / 2.0)
            return (smy - mx * sy) / (n * (n * n - 1) / 12.0) / ds

        ends = np.arange(first, H.shape[0])
        s = slope(ends, L)
        ok = (s >= c.slow_min_db_per_s) & (s * L * ds >= c.slow_min_rise_db)
        ok[:, : self._slow_klo] = False
        ok[:, min(self._slow_khi, H.shape[1] - 7):] = False  # room for the ±6-bin neighbours
        rr, kk = np.nonzero(ok)
        # the halves, only where the whole window passed (few bins)
        s_rk = s[rr, kk]
        s_b = slope(ends[rr], h, kk)
        s_a = slope(ends[rr] - h, h, kk)
        half_ok = (np.minimum(s_a, s_b) >= 0.5 * s_rk) & (s_b >= c.slow_min_decel_ratio * s_a)
        ok[rr[~half_ok], kk[~half_ok]] = False
        rr, kk = np.nonzero(ok)
        if rr.size == 0:
            return {}
        er = ends[rr]  # only the few bins needed, never whole rows (a clipped howl can flag thousands)
        y0 = H[er, kk]
        nmax = H.shape[1] - 1
        nb = np.max([H[er, np.clip(kk + o, 0, nmax)] for o in (-6, -5, -4, 4, 5, 6)], axis=0)
        peak = (y0 > H[er, kk - 1]) & (y0 >= H[er, kk + 1])
        keep = peak & (y0 - nb >= c.slow_min_pnpr_db)
        g_all = s[rr, kk]
        out: dict = {}
        sib = c.slow_max_siblings
        for r in np.unique(rr[keep]):
            row = rr == r
            pk, gk = kk[row & peak], g_all[row & peak]
            cand = np.flatnonzero(row & keep)
            cand = cand[np.argsort(nb[cand] - y0[cand], kind="stable")][:SLOW_MAX_PER_SNAPSHOT]  # purest first
            for i in cand:
                k, g = kk[i], g_all[i]
                # partials of one note in crescendo rise at one rate: other peaks growing as fast, at the same time
                if sib is not None and np.count_nonzero((np.abs(pk - k) > 8) & (np.abs(gk - g) <= 0.15 * g)) > sib:
                    continue
                out.setdefault(int(ends[r]), ([], []))
                out[int(ends[r])][0].append(k)
                out[int(ends[r])][1].append(g)
        return out

    def _slow_check(self, W: np.ndarray, Wf: np.ndarray, k: int, growth: float):
        """The detailed tests on one bin ``k`` (history column) over the window W (snapshots × bins,
        dB; ``Wf``: the last single frame of each snapshot, where vibrato is not averaged out): the
        line's residual, the rest of the program not rising along, the frequency's spread and drift,
        the co-modulated partners. None, or
        (kf, growth, level, PNPR, residual, FSD, PHPR, window s, PAPR)."""
        c = self.cfg
        L = W.shape[0]
        ds = self.slow_every * self.dt
        ts = np.arange(L) * ds
        y = W[:, k]
        a, b = np.polyfit(ts, y, 1)
        resid = float(np.sqrt(np.mean((y - (a * ts + b)) ** 2)))
        if resid > c.slow_max_resid_db:
            return None
        # one narrow band grows, not the whole sound (a crescendo raises every partial of a note)
        lin = 10.0 ** (W / 10.0)
        rest = lin.sum(axis=1) - lin[:, max(0, k - 8): k + 9].sum(axis=1)
        if np.polyfit(ts, 10.0 * np.log10(rest + _TINY), 1)[0] > c.slow_max_rest_ratio * a:
            return None
        # frequency in the second half, on single frames: the log-parabola through the local maximum near k
        half = Wf[L // 2:]
        cols = k - 1 + np.argmax(half[:, k - 1: k + 2], axis=1)
        cols = np.clip(cols, 1, W.shape[1] - 2)
        r = np.arange(half.shape[0])
        la, lb, lc = half[r, cols - 1], half[r, cols], half[r, cols + 1]
        den = la - 2.0 * lb + lc
        with np.errstate(divide="ignore", invalid="ignore"):
            dlt = np.clip(np.where(den < 0, 0.5 * (la - lc) / den, 0.0), -0.5, 0.5)
        kf = cols + dlt + self._slow_c0
        kf_now = float(kf[-1])
        lim = self._fsd_limit(c.max_fsd, kf_now)
        fsd = float(np.std(kf) / np.mean(kf))
        drift = abs(float(np.polyfit(np.arange(kf.size), kf, 1)[0])) * (kf.size - 1) / kf_now
        if fsd > lim or drift > lim:
            return None
        # partials of the same sound grow along with it; a howl has none
        ph = np.inf
        for hm in HARMONIC_MULTIPLIERS:
            cp = int(round(kf_now * hm)) - self._slow_c0
            if cp < 1 or cp > W.shape[1] - 2 or abs(cp - k) <= 3:
                continue
            yp = W[:, cp - 1: cp + 2].max(axis=1)
            ratio = float(np.median(y - yp))
            grows = np.polyfit(ts, yp, 1)[0] >= c.comod_fraction * a
            if grows and ratio < c.min_phpr_comod_db:
                return None
            ph = min(ph, ratio)
        papr = float(y[-1] - 10.0 * np.log10(lin[-1, 1:-1].mean() + _TINY))
        ts_pairs = [(y[j] - y[i]) / (ts[j] - ts[i]) for i in range(L) for j in range(i + 1, L)]
        pn = float(y[-1] - max(W[-1, k + o] for o in (-6, -5, -4, 4, 5, 6)))
        return kf_now, float(np.median(ts_pairs)), float(y[-1]), pn, resid, fsd, ph, L * ds, papr

    def _slow_report(self, d: tuple, t: int) -> None:
        """Report the slow howl ``d`` (from :meth:`_slow_scan`) decided at frame ``t``, unless this lane
        already reported a howl there (a track did, or an earlier slow decision)."""
        kf, growth, level, pn, resid, fsd, ph, win_s, papr = d
        kf_med = self._refine_kf(kf, t * self.hop + self.n_win)
        f = kf_med * self.bin_hz
        tol = max(1.5 * self.bin_hz, 0.005 * f)
        if any(e.kind == "howl" and abs(e.freq_hz - f) <= tol for e in self.events):
            return
        if self._is_howl_product(f) or self._off_crossings(f):
            return
        time_s = (t * self.hop + self.n_win) / self.fs
        for tr in self._tracks:  # the track on it (if any) is this howl: not reported again
            if abs(tr.last_kf - kf_med) <= 1.5 and tr.reported is None:
                tr.reported = tr.state = "howl"
        if self._same_event(f, time_s, "lane") is not None:
            return
        self._slow_reported.append(kf_med)
        self._report(Event(
            time_s=time_s, onset_s=max(0.0, time_s - win_s), freq_hz=f, kind="howl", level_db=level,
            growth_db_per_s=growth, papr_db=papr, pnpr_db=pn, phpr_db=ph if np.isfinite(ph) else 200.0,
            ipmp=1.0, imsd_db_per_s=resid, fsd=fsd, track_id=-1,
            margin_db=None if self.loop_delay_s is None else -growth * self.loop_delay_s,
            window_s=win_s, phpr_comod_db=None,
        ))
