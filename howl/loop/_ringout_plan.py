"""The ring-out's covering plan: a greedy sweep of cuts over the crossings, bisection on the level.

Private to :mod:`howl.loop.ringout` (see its docstring, steps 2–4, for the method); split out of
:mod:`howl.loop._ringout_search`, which compares these plans with the simple ring-outs and polishes
the best.

References
----------
.. [1] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note, 2021,
   https://www.w3.org/TR/audio-eq-cookbook/ (the peakingEQ whose exact digital magnitude
   :func:`howl.loop._ringout_grid._min_gain_db` inverts).
"""

from __future__ import annotations

import math

import numpy as np

from howl.loop._ringout_grid import _cut_atten_db, _GridLoop, _tan_f, _worst_margin
from howl.loop.notch import MAX_NOTCH_BANDWIDTH_OCT, Notch, cascade_response, q_from_bandwidth_oct

#: Deepest peaking cut the planner uses (dB). Deeper cuts cost tone for little
#: extra margin in a reverberant loop (common practice, no source).
PLAN_MAX_DEPTH_DB = 18.0

#: Bandwidths (octaves) the planner tries for each cut, up to the 1/3-octave cap.
PLAN_BANDWIDTHS_OCT = (1 / 24, 1 / 16, 1 / 12, 1 / 9, 1 / 7, 1 / 6, 1 / 5, 1 / 4, 1 / 3)

def plan_bandwidths_oct(min_bw_oct: float) -> tuple[float, ...]:
    """The planner's widths no narrower than ``min_bw_oct`` (which leads when it is not one of them)."""
    if min_bw_oct <= PLAN_BANDWIDTHS_OCT[0] * (1 + 1e-12):
        return PLAN_BANDWIDTHS_OCT
    keep = tuple(bw for bw in PLAN_BANDWIDTHS_OCT if bw > min_bw_oct * (1 + 1e-9))
    return (float(min_bw_oct),) + keep


#: Rounds of "insert the cascade, find the crossings again, re-plan".
PLAN_ROUNDS = 5

#: Where the planner tries a cut's centre: the middle of the run, and a quarter of its span either side.
_CENTRE_OFFSETS = np.array([0.0, -0.25, 0.25])


class _Planner:
    """Greedy covering of crossings by at most R cuts, bisection on the level T."""

    def __init__(self, fs: float, drift_oct: float, max_depth_db: float = PLAN_MAX_DEPTH_DB,
                 min_bw_oct: float = PLAN_BANDWIDTHS_OCT[0]):
        self.fs = fs
        self.drift = drift_oct
        self.gmax = max_depth_db
        widths = plan_bandwidths_oct(min_bw_oct)
        self.bw_arr = np.array(widths)
        self.q_arr = np.array([q_from_bandwidth_oct(bw) for bw in widths])
        self._sweeps: dict = {}  # cover's sweeps, by (points, needs)

    def _one_cut(self, f: np.ndarray, need: np.ndarray, tan_x: np.ndarray | None = None):
        """The shallowest cut covering all of (f, need), drift included; None if none can.

        ``tan_x``: :func:`_tan_f` of the points with their drift (f/d, f, f·d), when known. The
        candidates are every allowed width at each of three centres; what depends only on the
        centre (the warped frequencies of :func:`_min_gain_db`) is computed once per centre, the
        rest per candidate with the same operations, so the choice is :func:`_min_gain_db`'s.
        """
        lf0, lf1 = math.log2(f[0]), math.log2(f[-1])
        span = lf1 - lf0
        k0 = int(np.searchsorted(self.bw_arr, 0.5 * span + 0.5 * self.drift, side="left"))  # widths >= it
        if k0 >= self.bw_arr.size:
            return None
        bw, q = self.bw_arr[k0:], self.q_arr[k0:]
        fc3 = 2.0 ** (0.5 * (lf0 + lf1) + _CENTRE_OFFSETS * span / 2.0)
        fcg = fc3[fc3 < 0.49 * self.fs]
        if fcg.size == 0:
            return None
        if tan_x is None:
            half = 2.0 ** (self.drift / 2.0)
            tan_x = _tan_f(np.concatenate([f / half, f, f * half]), self.fs)
        a2 = 10.0 ** (-np.maximum(np.concatenate([need, need, need]), 0.0) / 10.0)
        # the closed form of _min_gain_db: w per centre, then per (width, centre) candidate
        w = tan_x[None, :] / np.tan(np.pi * fcg[:, None] / self.fs)
        x = (1.0 - w * w) ** 2
        xa, xb = -x * (1.0 - a2), (x * (1.0 - a2)) ** 2
        y = (w[None, :, :] / q[:, None, None]) ** 2
        big = (xa + np.sqrt(xb + 4.0 * a2 * y * y)) / (2.0 * y)
        g = (20.0 * np.log10(np.maximum(big, 1e-300))).min(axis=2).ravel()  # width-major, as listed
        g = np.where(g >= -self.gmax, g, -np.inf)
        k = int(np.argmax(g))  # shallowest; ties go to the narrowest (listed first)
        if not np.isfinite(g[k]):
            return None
        i, j = divmod(k, fcg.size)
        return float(g[k]), float(fcg[j]), float(bw[i]), float(q[i])

    def cover(self, f: np.ndarray, need: np.ndarray, budget: int):
        """Cuts (fc, gain_db, q) bringing every point down by its need, or None beyond budget.

        The greedy sweep does not depend on the budget, which only stops it: each sweep's state
        is kept (per points and needs), so the same problem asked again with a larger budget (the
        ring-out plans every budget 1..max on the same crossings) resumes where it stopped.
        """
        key = (f.tobytes(), need.tobytes())
        st = self._sweeps.get(key)
        if st is None:
            half = 2.0 ** (self.drift / 2.0)
            st = self._sweeps[key] = {
                "need": need.copy(), "cuts": [], "end": None,
                "tan": (_tan_f(f / half, self.fs), _tan_f(f, self.fs), _tan_f(f * half, self.fs)),
            }
        if st["end"] is None:
            self._sweep(f, st, budget)
        if st["end"] == "covered" and len(st["cuts"]) <= budget:
            return list(st["cuts"])
        return None

    def _sweep(self, f: np.ndarray, st: dict, budget: int) -> None:
        """Carry the greedy sweep of :meth:`cover` on until the points are covered (``end``
        "covered"), a point cannot be (``end`` "stuck"), or ``budget`` cuts are placed."""
        need, cuts = st["need"], st["cuts"]
        t_lo, t_mid, t_hi = st["tan"]
        cap = MAX_NOTCH_BANDWIDTH_OCT * 1.5
        while True:
            open_ = np.flatnonzero(need > 1e-6)
            if open_.size == 0:
                st["end"] = "covered"
                break
            if len(cuts) >= budget:
                break
            a = open_[0]
            cand = open_[f[open_] <= f[a] * 2.0**cap]
            lo, hi, sol = 0, cand.size - 1, None
            while lo <= hi:  # the widest run starting at a that one cut covers
                mid = (lo + hi) // 2
                run = cand[: mid + 1]
                r = self._one_cut(f[run], need[run], np.concatenate([t_lo[run], t_mid[run], t_hi[run]]))
                if r is not None:
                    sol, lo = r, mid + 1
                else:
                    hi = mid - 1
            if sol is None:
                st["end"] = "stuck"
                break
            g, fc, bw, q = sol
            cuts.append((fc, g, q))
            need = need - _cut_atten_db(f, fc, g, q, self.fs, t_mid)
        st["need"] = need

    def plan(self, f: np.ndarray, value: np.ndarray, budget: int, tol_db: float = 0.05):
        """Lowest level T (dB re 1) that ``budget`` cuts reach over the points; (T_db, cuts)."""
        o = np.argsort(f)
        f, vdb = f[o], 20.0 * np.log10(value[o])
        top = float(vdb.max())
        lo, hi = top - self.gmax, top
        best = (top, [])
        while hi - lo > tol_db:
            t = 0.5 * (lo + hi)
            off = vdb > t
            cuts = self.cover(f[off], vdb[off] - t, budget)
            if cuts is None:
                lo = t
            else:
                hi, best = t, (t, cuts)
        return best


def _as_notches(cuts) -> list[Notch]:
    return [Notch(float(fc), float(min(g, -0.01)), float(q)) for fc, g, q in cuts]


def _plan_cuts(loops: list[_GridLoop], budget: int, planner: _Planner, fs: float):
    """Plan, insert, find the moved crossings, re-plan; keep the best cascade: (cuts, margin, −level)."""
    pts_f, pts_v = [], []
    for lp in loops:
        fc, rc = lp.crossings(lp.H)
        pts_f.append(fc)
        pts_v.append(rc)
    best = ([], _worst_margin(loops, [], fs)[0], float("nan"))
    for _ in range(PLAN_ROUNDS):
        pf, pv = np.concatenate(pts_f), np.concatenate(pts_v)
        if pf.size == 0:
            break
        t_db, cuts = planner.plan(pf, pv, budget)
        notches = _as_notches(cuts)
        now = [lp.H * lp.cascade(notches) for lp in loops]  # each loop with this cascade in it
        m = min(lp.margin(L)[0] for lp, L in zip(loops, now))  # (as _worst_margin)
        if m > best[1]:
            best = (notches, m, -t_db)
        new = False
        for lp, L in zip(loops, now):  # crossings of the loop with this cascade in it, above the level
            fc, rc = lp.crossings(L)
            bad = 20.0 * np.log10(rc) > t_db + 0.05
            if np.any(bad):
                new = True
                pts_f.append(fc[bad])
                pts_v.append(rc[bad] / np.abs(cascade_response(notches, fc[bad], fs)))
        if not new:
            break
    return best


