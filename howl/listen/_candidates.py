"""Candidate peaks and their features, per block of frames (private: a base of
:class:`howl.detect.Detector`, which holds the state these methods use).

* :meth:`_CandidateSearch._features`: the feature row of each candidate (see ``_Track``):
  log-parabola frequency and level, PAPR, PNPR (two-sided and on the quieter side), PHPR at
  :data:`~howl._detect_features.HARMONIC_MULTIPLIERS` with how far each partner sits from the exact
  multiple, and the frequency from the quieter side;
* :meth:`_CandidateSearch._add_rising`: rising candidates far below the program, held for the
  decision window once found.

The formulas and references are in :mod:`howl.detect`'s docstring.
"""

from __future__ import annotations

import numpy as np

from howl.listen._features import _TINY, _lp_delta

_NONE = np.zeros(0, dtype=np.int64)
_DB_PER_NEPER_POWER = 10.0 / np.log(10.0)  # dB of a power ratio per unit of its natural log
_GAUSS_S2_BINS = (8.0 / (2.0 * np.pi)) ** 2  # s² of the σ = N/8 Gaussian's main lobe, in bins²


class _CandidateSearch:
    """Candidate search and features; the attributes used (``n_bins``, ``k_lo``, ``k_hi``,
    ``cfg``, ``_harm`` …) are set by :class:`howl.detect.Detector`."""

    def _features(self, power: np.ndarray, mean_p: np.ndarray, rows: np.ndarray, k: np.ndarray) -> list[tuple]:
        """Feature rows (see :class:`_Track`) of the peaks at bins ``k`` of frames ``rows``."""
        nmax = self.n_bins - 1
        # gathers through the flat spectrum (one index array; the same values as power[rows, k])
        flat = power.reshape(-1)
        nb = power.shape[1]
        base = rows * nb
        at = base + k
        pm1 = flat[at - 1].astype(np.float64)
        p0 = flat[at].astype(np.float64)
        pp1 = flat[at + 1].astype(np.float64)
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
        nb_pow = flat[base[:, None] + np.clip(k[:, None] + offs[None, :], 0, nmax)].astype(np.float64)
        m = self._pnpr_off.size
        # the max of a few columns as elementwise maxima (exact; a reduction over a short axis is slow)
        nb_lo = np.maximum(np.maximum(nb_pow[:, 0], nb_pow[:, 1]), nb_pow[:, 2]) if m == 3 else nb_pow[:, :m].max(axis=1)
        nb_hi = np.maximum(np.maximum(nb_pow[:, 3], nb_pow[:, 4]), nb_pow[:, 5]) if m == 3 else nb_pow[:, m:].max(axis=1)
        pnpr = 10.0 * np.log10(peak_p / (np.maximum(nb_lo, nb_hi) + _TINY))
        pnpr1 = 10.0 * np.log10(peak_p / (np.minimum(nb_lo, nb_hi) + _TINY))
        # frequency from the quieter side only: bin k and its neighbour away from a louder partial,
        # on the Gaussian's known log-parabola (curvature 1/s², s = 8/(2π) bins): a partial 4–6 bins
        # away on the other side leaks into bin k±1 and pulls the three-bin estimate toward it
        s2 = _GAUSS_S2_BINS
        d1 = np.where(nb_lo <= nb_hi, s2 * (lb - la) - 0.5, s2 * (lc - lb) + 0.5)
        kf1 = k + np.clip(d1, -0.6, 0.6)
        nb_db = 10.0 * np.log10(nb_pow.mean(axis=1) * self._amp_norm ** 2 + _TINY)
        # PHPR: largest power within ±2 bins of h·k for each multiplier h
        hk = np.rint(kf[:, None] * self._harm[None, :]).astype(np.int64)  # (n, H)
        inside = (hk >= 3) & (hk <= nmax - 3)
        hk = np.clip(hk, 2, nmax - 2)
        n, H = hk.shape
        w5 = np.arange(-2, 3)
        ln_near = np.log(flat[(base[:, None] + hk)[:, :, None] + w5] + np.float32(1e-30))  # (n, H, 5)
        # at low bins the windows of the multiples near 1 (3/4 … 5/6) reach the peak's own main
        # lobe: those bins (within 3 of the peak, where the Gaussian is above −25 dB) are not partners.
        # Only a peak below bin 40 can have one (|h − 1|·k ≤ 5 at h = 5/6 needs k ≤ 30)
        low = np.flatnonzero(k < 40)
        if low.size:
            own = np.abs((hk[low] - k[low, None])[:, :, None] + w5) <= 3
            if own.any():
                ln_near[low] = np.where(own, np.float32(np.log(1e-30)), ln_near[low])
                inside[low] &= ~own.all(axis=2)
        L = ln_near.reshape(n * H, 5)
        jmax = L.argmax(axis=1)
        jc = np.clip(jmax, 1, 3)
        r = np.arange(n * H)
        t0, t1, t2 = L[r, jc - 1], L[r, jc], L[r, jc + 1]
        ln_hp = L[r, jmax].reshape(n, H)
        jmax, jc = jmax.reshape(n, H), jc.reshape(n, H)
        ratio = np.where(inside, _DB_PER_NEPER_POWER * (2.0 * peak_ln[:, None] - ln_hp), np.inf)
        phpr = ratio[:, self._basic].min(axis=1)
        phf = ratio.min(axis=1)
        # is the partner at the exact multiple? (partials of one sound are; another howl is not). A
        # partner whose largest bin is at the edge of the ±2-bin search is a peak outside it: not exact
        den = (t0 - 2.0 * t1 + t2).reshape(n, H)
        with np.errstate(divide="ignore", invalid="ignore"):
            d = np.where(den < 0, 0.5 * (t0 - t2).reshape(n, H) / den, 0.0)
        kf_p = hk + jc - 2 + np.clip(d, -0.5, 0.5)
        dev = np.where(jmax == jc, np.abs(kf_p - kf[:, None] * self._harm[None, :]), np.inf)
        # one array per row: the peak-to-partner ratios (dB), then each partner's distance (bins)
        # from the exact multiple (inf: no peak within the search)
        partners = np.concatenate([ratio, dev], axis=1)
        return list(zip(*(a.tolist() for a in (kf, level_db, papr, pnpr, phpr, nb_db, phf)), list(partners),
                        pnpr1.tolist(), kf1.tolist()))

    def _add_rising(self, power: np.ndarray, rows: np.ndarray, k: np.ndarray, n_f: int):
        """Add the rising candidates (:meth:`_rising`) and keep each one's peak a candidate for the
        next ``rise_window_s`` (:meth:`_held`), so that a howl the rising test finds in most frames
        is tracked in all of them."""
        rr, kk = self._rising(power, rows, k, n_f)
        hr, hk = self._held(power, rr, kk, n_f)
        rr, kk = np.concatenate([rr, hr]), np.concatenate([kk, hk])
        if rr.size == 0:
            return rows, k
        have = set((rows * self.n_bins + k).tolist())
        new = []
        for cd in (rr * self.n_bins + kk).tolist():
            new.append(cd not in have)
            have.add(cd)
        new = np.array(new, dtype=bool)
        rows = np.concatenate([rows, rr[new]])
        k = np.concatenate([k, kk[new]])
        order = np.argsort(rows, kind="stable")
        return rows[order], k[order]

    def _held(self, power: np.ndarray, rr: np.ndarray, kk: np.ndarray, n_f: int):
        """Peaks held from rising candidates: for each candidate found at (frame, bin), the local
        maximum within one bin of it in each of the next ``rise_win_frames`` frames (above the
        level floor). Carried across blocks by global frame index (block size does not matter)."""
        R = self.rise_win_frames
        g0 = self._frame
        gs = [g0 + rr[:, None] + np.arange(1, R + 1)[None, :]]
        bs = [np.repeat(kk[:, None], R, axis=1)]
        if self._held_carry is not None:
            gs.append(self._held_carry[0])
            bs.append(self._held_carry[1])
        g = np.concatenate([a.ravel() for a in gs]).astype(np.int64)
        b = np.concatenate([a.ravel() for a in bs]).astype(np.int64)
        later = g >= g0 + n_f
        self._held_carry = (g[later], b[later]) if np.any(later) else None
        now = (g >= g0) & ~later
        r, b = g[now] - g0, b[now]
        if r.size == 0:
            return _NONE, _NONE
        code = np.unique(r * self.n_bins + b)
        r, b = code // self.n_bins, code % self.n_bins
        b = np.clip(b, self.k_lo + 1, self.k_hi - 2)
        trio = power[r[:, None], b[:, None] + np.arange(-1, 2)[None, :]]
        j = b - 1 + np.argmax(trio, axis=1)
        floor = np.float32((10.0 ** (self.cfg.min_level_dbfs / 20.0) / self._amp_norm) ** 2)
        pj = power[r, j]
        ok = (pj > power[r, j - 1]) & (pj >= power[r, j + 1]) & (pj >= floor)
        return r[ok], j[ok]

    def _rising(self, power: np.ndarray, rows: np.ndarray, k: np.ndarray, n_f: int):
        """Add rising candidates: pure local maxima anywhere above the level floor (also far
        below the PAPR gate, where a howl starts) whose power rose steadily over the last
        ``rise_lookback_s``: at least ``rise_min_db_per_s`` over the whole look-back and a
        third of that over each half. At most ``n_rising_candidates`` per frame, steepest first.

        The dense search runs on even frames (by the global frame count, so blocks of any size
        give the same result); a bin found there is tested again, sparsely, on the next frame."""
        M = self.rise_frames
        h = M // 2
        lo, hi = self.k_lo, self.k_rise_hi
        tail = self._ptail
        ext = power[:, lo - 1: hi + 1] if tail is None else np.concatenate([tail, power[:, lo - 1: hi + 1]])
        off = 0 if tail is None else tail.shape[0]
        self._ptail = ext[-M:].copy() if ext.shape[0] >= M else ext.copy()
        carry, self._rise_carry = self._rise_carry, None
        n = ext.shape[0]
        if n <= M:
            return _NONE, _NONE
        r_all = np.float32(10.0 ** (self.cfg.rise_min_db_per_s * M * self.dt / 10.0))
        r_half = np.float32(r_all ** (1.0 / 3.0))
        floor = np.float32((10.0 ** (self.cfg.min_level_dbfs / 20.0) / self._amp_norm) ** 2)
        first = max(M, off)  # rows of ext that have M frames of history and belong to this chunk
        t0 = self._frame - off  # global frame index of ext row 0
        e_even = first + ((t0 + first) % 2)
        # dense, on even frames and on pairs of bins: the larger of a pair rose by the whole rise
        inner = ext[:, 1:-1]
        w2 = inner.shape[1] // 2 * 2
        cur = inner[e_even::2, :w2]
        old = inner[e_even - M: n - M: 2, :w2][: cur.shape[0]]
        pool_c = np.maximum(cur[:, 0::2], cur[:, 1::2])
        pool_o = np.maximum(old[:, 0::2], old[:, 1::2])
        rr, jj = np.nonzero(pool_c >= r_all * pool_o)
        e = e_even + 2 * rr
        c0 = 2 * jj + 1  # ext column of the pair's first bin
        c = c0 + (ext[e, c0 + 1] > ext[e, c0])

        def sparse(e, c):
            """The bin itself rose (whole and halves), is a local maximum now and at mid look-back."""
            pc, pm, po = ext[e, c], ext[e - h, c], ext[e - M, c]
            return ((pc >= floor) & (pc >= r_all * po) & (pc > ext[e, c - 1]) & (pc >= ext[e, c + 1])
                    & (pc >= r_half * pm) & (pm >= r_half * po) & (pm > ext[e - h, c - 1]) & (pm >= ext[e - h, c + 1]))

        ok = sparse(e, c)
        e, c = e[ok], c[ok]
        # the next (odd) frame: the same bins, sparsely; one past this chunk is carried over
        nxt = e + 1 < n
        if np.any(~nxt):
            self._rise_carry = (t0 + n, c[~nxt])
        e1, c1 = e[nxt] + 1, c[nxt]
        if carry is not None and carry[0] == t0 + first and first < n:
            e1 = np.concatenate([e1, np.full(carry[1].size, first)])
            c1 = np.concatenate([c1, carry[1]])
        ok1 = sparse(e1, c1)
        e = np.concatenate([e, e1[ok1]])
        c = np.concatenate([c, c1[ok1]])
        if e.size == 0:
            return _NONE, _NONE
        # steady in frequency: the interpolated peak moved less than rise_max_shift_bins since the mid frame
        shift = np.abs(_lp_delta(ext[e, c - 1], ext[e, c], ext[e, c + 1])
                       - _lp_delta(ext[e - h, c - 1], ext[e - h, c], ext[e - h, c + 1]))
        steady = shift <= self.cfg.rise_max_shift_bins
        e, c = e[steady], c[steady]
        if e.size == 0:
            return _NONE, _NONE
        return self._rising_keep(power, rows, k, e - off, c - 1 + lo, ext, off, M)

    def _rising_keep(self, power, rows, k, rr, kk, ext, off, M):
        """The rising candidates at (frame ``rr``, bin ``kk``) of this chunk that are pure (PNPR ≥
        ``rise_min_pnpr_db``, or on the quieter side below ``rise_contrast_f_hi_hz``), not already
        candidates, at most ``n_rising_candidates`` per frame, steepest first."""
        lo = self.k_lo
        # purity: PNPR >= the howl threshold in this frame; below rise_contrast_f_hi_hz, on the quieter
        # side is enough (a howl may start beside a louder partial: the contrast-of-growth test)
        p0 = power[rr, kk]
        nb_lo = power[rr[:, None], np.clip(kk[:, None] - self._pnpr_off[None, :], 0, None)].max(axis=1)
        nb_hi = power[rr[:, None], np.clip(kk[:, None] + self._pnpr_off[None, :], 0, self.n_bins - 1)].max(axis=1)
        pure = p0 >= np.maximum(nb_lo, nb_hi) * np.float32(10.0 ** (self.cfg.rise_min_pnpr_db / 10.0))
        one_db = self.cfg.rise_min_pnpr_one_side_db
        if one_db is not None:
            pure |= (kk <= self.k_contrast_hi) & (p0 >= np.minimum(nb_lo, nb_hi) * np.float32(10.0 ** (one_db / 10.0)))
        rr, kk = rr[pure], kk[pure]
        if rr.size == 0:
            return _NONE, _NONE
        # drop those already candidates (or found twice), keep the steepest few per frame
        have = set((rows * self.n_bins + k).tolist())
        code = (rr * self.n_bins + kk).tolist()
        new = []
        for cd in code:
            new.append(cd not in have)
            have.add(cd)
        new = np.array(new, dtype=bool)
        rr, kk = rr[new], kk[new]
        if rr.size == 0:
            return _NONE, _NONE
        steep = power[rr, kk] / (ext[rr + off - M, kk - lo + 1] + np.float32(1e-30))
        order = np.lexsort((-steep, rr))
        rr, kk = rr[order], kk[order]
        rank = np.arange(rr.size) - np.searchsorted(rr, rr)
        keep = rank < self.cfg.n_rising_candidates
        return rr[keep], kk[keep]
