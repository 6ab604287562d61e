"""Virtual ring-out: choose feedback cuts on a loop IR and say what each one buys.

A technician rings a system out by raising the gain until it rings, cutting the
ringing frequency and repeating. howl does it on the loop IR, with no one's ears
at risk. The loop with the cuts in it is L(f) = H(f)·C(f) (H the DTFT of the
loop IR, C the cascade of RBJ cuts, :mod:`howl.notch`); its phase-aware gain
margin is the Nyquist margin of :func:`howl.loop.nyquist_margin` [1]_. The added
stable gain (ASG) is the margin with the cuts minus the margin without [2]_.

How the cuts are chosen
-----------------------
In a reverberant room the next crossing is rarely more than a dB below the one
that limits the margin, so a cut at the single worst crossing buys little. howl
plans the cuts together, as a covering problem over the crossings:

1. the planning grid: the zero-padded FFT (4× oversampled) of the part of the
   loop IR that holds all but −50 dB of its energy (:func:`planning_ir`),
   limited to the band and to the points within :data:`PLAN_CAP_DB` of the top
   crossing (a cut never raises |L|, so no other point can limit a margin below
   that cap; the plan is redone on the whole band if it reaches it). The
   positive real-axis crossings of L on it are the points to cover, each with
   its value |L| there;
2. for a target level T, every crossing above T must come down by its excess
   (dB). Sweeping up the frequency axis, each cut covers the lowest uncovered
   crossing and as many of its neighbours as a cut no wider than 1/3 octave and
   no deeper than 18 dB can bring below T, each crossing counted with its
   temperature drift band (±``swing_c``, :func:`howl.notch.drift_bandwidth_oct`)
   and with what the other cuts' skirts already take off. The depth of every
   cut is the shallowest that does it (the exact RBJ response, closed form);
3. a bisection on T finds the lowest level the budget of cuts reaches;
4. cuts move the phase, so crossings move: the cascade is put in the loop, the
   crossings are found again, any new offender joins the set and the plan is
   made again (a few rounds; the best cascade is kept). Beside each plan, simple
   ring-outs (a fixed cut, e.g. −15 dB over 1/3 octave, at each limiting crossing
   in turn, :data:`GREEDY_CUTS`) are run on the same grid. All compete on one
   score: the margin, less 10 dB per dB of tonal cost beyond ``tonal_share`` ×
   the gain (default 0.5: the cuts may cost at most half a dB of pink-noise
   program per dB of stable gain, else they mostly turn the loop down, which the
   fader does too), less a small tie-break per dB of tonal cost;
5. from the best :data:`POLISH_STARTS` cascades of the chosen budget, a pattern
   search (:func:`_polish`) moves each cut's centre, depth and width, or moves a
   cut to the crossing limiting the loop now, keeping every step that scores
   better; each candidate is judged exactly on the planning grid with the other
   cuts in the loop, on the points that can still limit it (:class:`_View`);
6. the ring-out itself then runs as a technician would: find the crossing that
   limits the margin, insert the planned cut that covers it, recompute the loop
   with the cascade in it, repeat, until the target margin is met, the budget is
   spent, or more cuts would buy less than ``min_gain_per_notch_db`` each (plans for
   1..``max_notches`` cuts are compared; a larger plan is taken only if it pays that much per
   extra cut over the last plan taken).

The margins before and after are exact (:func:`howl.loop.nyquist_margin` on the
whole IR with the cascade passed as ``filters_sos``); the per-step margins come
from the planning grid (linear interpolation of Im L between grid points; within
a few hundredths of a dB of the exact values).

References
----------
.. [1] H. Nyquist, "Regeneration theory", Bell System Technical Journal 11(1),
   126–147, 1932.
.. [2] T. van Waterschoot and M. Moonen, "Fifty years of acoustic feedback
   control: state of the art and future challenges", Proc. IEEE 99(2),
   288–327, 2011 (MSG and ASG definitions).
.. [3] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note, 2021,
   https://www.w3.org/TR/audio-eq-cookbook/ (peakingEQ; the digital filter is
   the bilinear transform of the analog prototype prewarped at f0, so its
   magnitude at f equals the prototype's at tan(πf/fs)/tan(πf0/fs)).
.. [4] D. A. Bies, C. H. Hansen and C. Howard, *Engineering Noise Control*,
   5th ed., Table 4.3: male speech, normal effort, octave-band levels at 1 m
   (250–4000 Hz: 72.5, 74.0, 68.0, 62.0, 57.0 dB), used to weight the
   speech tonal cost.
.. [5] M. R. Schroeder, "New method of measuring reverberation time", J. Acoust.
   Soc. Am. 37, 409–412, 1965 (backward integration of the squared IR).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from . import _validate as v
from .notch import (
    MAX_NOTCH_BANDWIDTH_OCT,
    Notch,
    cascade_response,
    cascade_sos,
    drift_bandwidth_oct,
    merge_notches,
    q_from_bandwidth_oct,
)
from .units import temperature_frequency_ratio

#: Deepest peaking cut the planner uses (dB). Deeper cuts cost tone for little
#: extra margin in a reverberant loop (common practice, no source).
PLAN_MAX_DEPTH_DB = 18.0

#: A cascade may cost at most this share of the gain it buys in broadband (pink) tonal cost;
#: beyond it the cuts mostly turn the whole loop down, which the fader does too (our own rule).
MAX_TONAL_SHARE = 0.5

#: Bandwidths (octaves) the planner tries for each cut, up to the 1/3-octave cap.
PLAN_BANDWIDTHS_OCT = (1 / 24, 1 / 16, 1 / 12, 1 / 9, 1 / 7, 1 / 6, 1 / 5, 1 / 4, 1 / 3)

#: Rounds of "insert the cascade, find the crossings again, re-plan".
PLAN_ROUNDS = 5

#: Male speech octave-band levels at 1 m, normal effort [4]_ (dB), for the
#: speech-weighted tonal cost.
SPEECH_OCTAVES_HZ = (250.0, 500.0, 1000.0, 2000.0, 4000.0)
SPEECH_LEVELS_DB = (72.5, 74.0, 68.0, 62.0, 57.0)

#: Cuts whose centres lie within this span (octaves) count as one cluster.
CLUSTER_SPAN_OCT = 1.0
CLUSTER_MIN_CUTS = 3


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class RingOutStep:
    """One step of the ring-out: the cut inserted at the crossing that limited the loop.

    ``target_freq_hz`` is that crossing; ``gain_margin_db`` the margin with all
    cuts so far; ``added_stable_gain_db`` what this step bought;
    ``total_added_stable_gain_db`` the ASG so far.
    """

    index: int
    notch: Notch
    target_freq_hz: float
    gain_margin_db: float
    added_stable_gain_db: float
    total_added_stable_gain_db: float


@dataclass(frozen=True)
class RingOutResult:
    """Result of :func:`ring_out` (all margins in dB; positive = stable headroom).

    added_stable_gain_db: margin after − margin before (in robust mode: the
        worst over the perturbed loops, after − before).
    gain_margin_db_before, gain_margin_db_after: phase-aware Nyquist margins.
    notches: the cuts, in the order the ring-out inserted them.
    steps: one :class:`RingOutStep` per cut.
    stopped_because: why the ring-out stopped, in words.
    tonal_cost_db: broadband tonal cost: the pink-noise (equal energy per
        octave) power the cascade removes over the analysis band, in dB (≥ 0).
    tonal_cost_speech_db: the same, weighted by a male speech spectrum [4]_
        (octave bands 250 Hz–4 kHz).
    advice: plain-language notes (clusters, cuts at the width cap, cautions).
    """

    added_stable_gain_db: float
    gain_margin_db_before: float
    gain_margin_db_after: float
    notches: tuple
    steps: tuple
    stopped_because: str
    tonal_cost_db: float
    advice: tuple
    tonal_cost_speech_db: float = 0.0
    magnitude_margin_db_before: float = float("nan")
    magnitude_margin_db_after: float = float("nan")
    howl_freq_hz_before: float = float("nan")
    howl_freq_hz_after: float = float("nan")
    planned_gain_margin_db: float = float("nan")
    sample_rate_hz: float = 0.0
    band_hz: tuple = (0.0, 0.0)
    temperature_c: float = 20.0
    swing_c: float = 3.0
    robust: bool = False
    robust_loops: tuple = field(default_factory=tuple)  # (name, margin_before_db, margin_after_db)
    tonal_share: float = MAX_TONAL_SHARE
    tonal_weighting: str = "pink"


# --------------------------------------------------------------------------- grid evaluation


def _flips(L: np.ndarray, adj: np.ndarray | None):
    """Indices i where Im L changes sign between points i and i+1 (neighbours per ``adj``), and t."""
    im = L.imag
    neg = im < 0.0
    flip = neg[:-1] != neg[1:]  # exactly one of the two is negative, so im[i] − im[i+1] ≠ 0
    if adj is not None:
        flip &= adj
    i = np.flatnonzero(flip)
    a = im[i]
    return i, a / (a - im[i + 1])


def _crossing_values(L: np.ndarray, f: np.ndarray, adj: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Positive real-axis crossings of L on a grid: (freq_hz, Re L), by linear interpolation.

    ``adj`` (length n − 1, optional) marks which neighbouring points are neighbours on the
    underlying uniform grid; crossings are looked for only between those.
    """
    i, t = _flips(L, adj)
    re = L.real
    rc = re[i] + t * (re[i + 1] - re[i])
    keep = rc > 0
    i, t = i[keep], t[keep]
    return f[i] + t * (f[i + 1] - f[i]), rc[keep]


def _grid_margin_db(L: np.ndarray, f: np.ndarray, adj: np.ndarray | None = None) -> tuple[float, float]:
    """Grid margin −20·log10(largest positive crossing) and its frequency; (inf, nan) if none."""
    i, t = _flips(L, adj)
    if i.size == 0:
        return float("inf"), float("nan")
    re = L.real
    rc = re[i] + t * (re[i + 1] - re[i])
    k = int(np.argmax(rc))
    if rc[k] <= 0.0:
        return float("inf"), float("nan")
    j = i[k]
    return float(-20.0 * math.log10(float(rc[k]))), float(f[j] + float(t[k]) * (f[j + 1] - f[j]))


#: Residual energy (dB re the whole IR) below which the planning grid ignores the IR's tail.
PLAN_TAIL_DB = -50.0

#: How far (dB) below the loop's top crossing the planning grid keeps points: every crossing
#: that could limit a margin up to this much better than the loop's own is on it (cuts never
#: raise |L|), so margins below the cap are exact on the grid. Widened when a plan reaches it.
PLAN_CAP_DB = 10.0


def planning_ir(ir: np.ndarray, sample_rate_hz: float, tail_db: float = PLAN_TAIL_DB) -> np.ndarray:
    """The loop IR cut where the energy still to come falls below ``tail_db`` re the whole.

    Schroeder's backward integral [5]_ of h² gives the energy left after each sample; what
    is cut changes L(f) by at most 10^(tail_db/20) of its RMS (0.3 % at −50 dB), far below
    what moves a crossing that matters. Only the planning uses it: every margin howl reports
    is computed on the whole IR. At least 50 ms past the strongest arrival is kept.
    """
    h = np.asarray(ir, float)
    left = np.cumsum((h * h)[::-1])[::-1]
    if left[0] <= 0.0:
        return h
    n = int(np.flatnonzero(left >= left[0] * 10.0 ** (tail_db / 10.0))[-1]) + 1
    n = max(n, min(h.size, int(np.argmax(np.abs(h))) + int(round(0.05 * sample_rate_hz))))
    return h[:n]


def _cut_on_grid(notch: Notch, cos_w: np.ndarray, inv_sin_w: np.ndarray, fs: float) -> np.ndarray:
    """Response of one RBJ cut at the grid points with cos w and 1/sin w given (w = 2πf/fs).

    With P = 1 − 2cos w0·z⁻¹ + z⁻² and Q = 1 − z⁻², the cookbook peakingEQ is
    (P + αA·Q)/(P + (α/A)·Q) and the notch P/(P + α·Q) [3]_; on the unit circle
    P/Q = j·x with x = (cos w0 − cos w)/sin w, so C = (p + jx)/(q + jx) with
    (p, q) = (αA, α/A) or (0, α): Re C = (pq + x²)/(q² + x²), Im C = x(q − p)/(q² + x²)
    (derived here; equal to the biquad's B(z)/A(z), which the tests check with scipy).
    """
    from .notch import _w0_alpha

    w0, alpha = _w0_alpha(notch.freq_hz, notch.q, fs)
    if notch.gain_db is None:
        p, q = 0.0, alpha
    else:
        a = 10.0 ** (notch.gain_db / 40.0)
        p, q = alpha * a, alpha / a
    x = (math.cos(w0) - cos_w) * inv_sin_w
    x2 = x * x
    d = 1.0 / (q * q + x2)
    out = np.empty(x.shape, np.complex64 if x.dtype == np.float32 else complex)
    out.real = (p * q + x2) * d
    out.imag = x * ((q - p) * d)
    return out


class _GridLoop:
    """One loop (nominal or perturbed) on the planning grid, with each cut's response cached.

    The grid is the zero-padded FFT of :func:`planning_ir` (4× oversampled), limited to the
    analysis band and to the points where |H| is within ``cap_db`` of the loop's top crossing
    (with their grid neighbours): a cut never raises |L|, so no crossing elsewhere can ever
    limit a margin below the cap, and the margin on these points equals the margin on the
    whole grid up to it (``saturated`` tells when a margin reaches the cap).
    """

    def __init__(self, name: str, ir: np.ndarray, fs: float, band: tuple[float, float], cap_db: float):
        from .loop import loop_response

        hp = planning_ir(ir, fs)
        n_fft = max(1 << 14, 1 << int(math.ceil(math.log2(4 * hp.size))))
        f, H = loop_response(hp, fs, n_fft=n_fft)
        m = (f >= band[0]) & (f <= band[1])
        f, H = f[m], H[m]
        self.name, self.ir, self.fs, self.cap_db = name, ir, fs, cap_db
        self.n_full = f.size
        _, rc = _crossing_values(H, f)
        self.top_db = float(20.0 * np.log10(rc.max())) if rc.size else -np.inf
        if rc.size and math.isfinite(cap_db):
            a = np.abs(H)
            p = np.flatnonzero(np.maximum(a[:-1], a[1:]) >= 10.0 ** ((self.top_db - cap_db) / 20.0))
            mask = np.zeros(f.size, bool)
            mask[p] = True
            mask[p + 1] = True
            keep = np.flatnonzero(mask)
        else:
            keep = np.arange(f.size)
        # single precision: 7 digits are 1e-5 dB on a margin, and the grid work runs twice as fast
        self.f, self.H = f[keep], H[keep].astype(np.complex64)
        self.adj = np.diff(keep) == 1
        w = 2.0 * np.pi * self.f / fs
        self._cos_w = np.cos(w).astype(np.float32)
        self._inv_sin_w = (1.0 / np.maximum(np.sin(w), 1e-9)).astype(np.float32)
        self._cache: dict[Notch, np.ndarray] = {}

    def cut(self, notch: Notch) -> np.ndarray:
        c = self._cache.get(notch)
        if c is None:
            c = _cut_on_grid(notch, self._cos_w, self._inv_sin_w, self.fs)
            if len(self._cache) > 512:
                self._cache.clear()
            self._cache[notch] = c
        return c

    def cascade(self, notches) -> np.ndarray | float:
        out = 1.0
        for n in notches:
            out = out * self.cut(n)
        return out

    def crossings(self, L: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return _crossing_values(L, self.f, self.adj)

    def margin(self, L: np.ndarray) -> tuple[float, float]:
        """Grid margin (dB) and its frequency for ``L`` on this loop's points."""
        return _grid_margin_db(L, self.f, self.adj)

    def saturated(self, margin_db: float) -> bool:
        """True when ``margin_db`` reaches the cap (the grid may miss crossings beyond it)."""
        return margin_db >= -self.top_db + self.cap_db - 0.5


# --------------------------------------------------------------------------- planning


def _warped(f: np.ndarray, fc: float, fs: float) -> np.ndarray:
    """tan(πf/fs)/tan(πfc/fs): where the digital RBJ cut equals its analog prototype [3]_."""
    return np.tan(np.pi * np.minimum(f, 0.4999 * fs) / fs) / np.tan(np.pi * np.asarray(fc) / fs)


def _cut_atten_db(f: np.ndarray, fc: float, gain_db: float, q: float, fs: float) -> np.ndarray:
    """Attenuation (dB, ≥ 0) of the digital RBJ peaking cut at f (exact, via the prototype)."""
    w = _warped(f, fc, fs)
    a2 = 10.0 ** (gain_db / 20.0)  # A² with A = 10^(gain/40)
    x = (1.0 - w * w) ** 2
    y = (w / q) ** 2
    return -10.0 * np.log10((x + y * a2) / (x + y / a2))


def _min_gain_db(f: np.ndarray, need_db: np.ndarray, fc: float, q: float, fs: float) -> np.ndarray:
    """Smallest-magnitude peaking gain (dB < 0) that attenuates f by ``need_db``.

    The prototype's |H|² at w is (x + y·A²)/(x + y/A²) with x = (1−w²)²,
    y = (w/Q)² [3]_; setting it to the target a² gives a quadratic in A²:
    A² = [−x(1−a²) + sqrt(x²(1−a²)² + 4a²y²)] / (2y).
    """
    w = _warped(f, fc, fs)
    x = (1.0 - w * w) ** 2
    y = (w / q) ** 2
    a2 = 10.0 ** (-np.maximum(need_db, 0.0) / 10.0)
    big = (-x * (1.0 - a2) + np.sqrt((x * (1.0 - a2)) ** 2 + 4.0 * a2 * y * y)) / (2.0 * y)
    return 20.0 * np.log10(np.maximum(big, 1e-300))


class _Planner:
    """Greedy covering of crossings by at most R cuts, bisection on the level T."""

    def __init__(self, fs: float, drift_oct: float, max_depth_db: float = PLAN_MAX_DEPTH_DB):
        self.fs = fs
        self.drift = drift_oct
        self.gmax = max_depth_db
        self.bw_arr = np.array(PLAN_BANDWIDTHS_OCT)
        self.q_arr = np.array([q_from_bandwidth_oct(bw) for bw in PLAN_BANDWIDTHS_OCT])

    def _one_cut(self, f: np.ndarray, need: np.ndarray):
        """The shallowest cut covering all of (f, need), drift included; None if none can."""
        lf0, lf1 = math.log2(f[0]), math.log2(f[-1])
        span = lf1 - lf0
        ok = self.bw_arr >= 0.5 * span + 0.5 * self.drift
        if not np.any(ok):
            return None
        bw, q = self.bw_arr[ok], self.q_arr[ok]
        u = np.array([0.0, -0.25, 0.25])
        fc = (2.0 ** (0.5 * (lf0 + lf1) + u * span / 2.0))[None, :].repeat(bw.size, 0).ravel()
        qq = np.repeat(q, u.size)
        bb = np.repeat(bw, u.size)
        good = fc < 0.49 * self.fs
        if not np.any(good):
            return None
        fc, qq, bb = fc[good], qq[good], bb[good]
        half = 2.0 ** (self.drift / 2.0)
        fx = np.concatenate([f / half, f, f * half])
        nx = np.concatenate([need, need, need])
        g = _min_gain_db(fx[None, :], nx[None, :], fc[:, None], qq[:, None], self.fs).min(axis=1)
        g = np.where(g >= -self.gmax, g, -np.inf)
        k = int(np.argmax(g))  # shallowest; ties go to the narrowest (listed first)
        if not np.isfinite(g[k]):
            return None
        return float(g[k]), float(fc[k]), float(bb[k]), float(qq[k])

    def cover(self, f: np.ndarray, need: np.ndarray, budget: int):
        """Cuts (fc, gain_db, q) bringing every point down by its need, or None beyond budget."""
        need = need.copy()
        cuts = []
        cap = MAX_NOTCH_BANDWIDTH_OCT * 1.5
        while True:
            open_ = np.flatnonzero(need > 1e-6)
            if open_.size == 0:
                return cuts
            if len(cuts) >= budget:
                return None
            a = open_[0]
            cand = open_[f[open_] <= f[a] * 2.0**cap]
            lo, hi, sol = 0, cand.size - 1, None
            while lo <= hi:  # the widest run starting at a that one cut covers
                mid = (lo + hi) // 2
                r = self._one_cut(f[cand[: mid + 1]], need[cand[: mid + 1]])
                if r is not None:
                    sol, lo = r, mid + 1
                else:
                    hi = mid - 1
            if sol is None:
                return None
            g, fc, bw, q = sol
            cuts.append((fc, g, q))
            need = need - _cut_atten_db(f, fc, g, q, self.fs)

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


def _worst_margin(loops: list[_GridLoop], notches: list[Notch], fs: float) -> tuple[float, float, int]:
    """Worst grid margin over the loops with the cascade in: (margin_db, freq_hz, loop index)."""
    worst = (float("inf"), float("nan"), 0)
    for k, lp in enumerate(loops):
        m, fh = lp.margin(lp.H * lp.cascade(notches))
        if m < worst[0]:
            worst = (m, fh, k)
    return worst


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
        m, _, _ = _worst_margin(loops, notches, fs)
        if m > best[1]:
            best = (notches, m, -t_db)
        new = False
        for lp in loops:  # crossings of the loop with this cascade in it, above the level
            fc, rc = lp.crossings(lp.H * lp.cascade(notches))
            bad = 20.0 * np.log10(rc) > t_db + 0.05
            if np.any(bad):
                new = True
                pts_f.append(fc[bad])
                pts_v.append(rc[bad] / np.abs(cascade_response(notches, fc[bad], fs)))
        if not new:
            break
    return best


# --------------------------------------------------------------------------- perturbed loops


def temperature_shifted_ir(ir: np.ndarray, sample_rate_hz: float, temperature_c: float, delta_c: float) -> np.ndarray:
    """The loop IR after the air warms by ``delta_c`` (cools if negative).

    Every acoustic arrival comes earlier by the factor r = c(T+ΔT)/c(T)
    (:func:`howl.units.temperature_frequency_ratio`): h'(t) = r·h(r·t), so that
    H'(f) = H(f/r) (each arrival keeps its strength). The whole delay is treated
    as acoustic, which errs toward more drift than a loop with a digital
    processing delay. Band-limited resampling (scipy.signal.resample_poly with
    r approximated by a ratio of integers ≤ 2000).
    """
    from scipy.signal import resample_poly

    r = temperature_frequency_ratio(temperature_c, delta_c)
    frac = Fraction(r).limit_denominator(2000)
    up, down = frac.denominator, frac.numerator  # output at fs·up/down, read at fs: time × down/up = r
    if up == down:
        return np.asarray(ir, float).copy()
    out = resample_poly(np.asarray(ir, float), up, down)
    return out * (down / up)


def perturbed_irs(ir, sample_rate_hz, *, temperature_c=20.0, swing_c=3.0, seed=0) -> list[tuple[str, np.ndarray]]:
    """The loops a robust ring-out must survive: ±swing and ±swing/2 °C, and two with room movement.

    "Movement" adds an independent reverberant tail 20 dB below the IR's own
    (noise with the IR's 5 ms RMS envelope, after the first 10 ms past the
    onset), a stand-in for people and air moving (our own model).
    """
    h = np.asarray(ir, float)
    fs = float(sample_rate_hz)
    out = [(f"{delta:+g} C", temperature_shifted_ir(h, fs, temperature_c, delta))
           for delta in (-swing_c, swing_c, -swing_c / 2, swing_c / 2) if delta != 0.0]
    rng = np.random.default_rng(seed)
    win = max(1, int(round(0.005 * fs)))
    env = np.sqrt(np.convolve(h * h, np.ones(win) / win, mode="same"))
    onset = int(np.flatnonzero(np.abs(h) >= 0.1 * np.max(np.abs(h)))[0])
    start = min(h.size, onset + int(round(0.010 * fs)))
    for k in range(2):
        noise = rng.standard_normal(h.size) * env
        noise[:start] = 0.0
        out.append((f"movement {k + 1}", h + 0.1 * noise))
    return out


# --------------------------------------------------------------------------- tonal cost and advice


def tonal_cost_db(notches, band_hz, sample_rate_hz, *, weighting: str = "pink") -> float:
    """Program power the cascade removes, in dB (≥ 0).

    ``weighting="pink"``: pink noise (equal power per octave) over the band
    (from 20 Hz if the band starts lower). ``"speech"``: a male speech spectrum
    [4]_, octave bands 250 Hz–4 kHz, pink within each band.
    """
    notches = list(notches)
    if not notches:
        return 0.0
    fs = float(sample_rate_hz)
    f, w = tonal_grid(band_hz, fs, weighting, 8000)
    return float(-10.0 * math.log10(np.sum(w * np.abs(cascade_response(notches, f, fs)) ** 2)))


def tonal_grid(band_hz, fs: float, weighting: str = "pink", n: int = 8000) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies and weights (summing to 1) of a tonal-cost weighting, about ``n`` points.

    Pink: log-spaced over the band from 20 Hz to below 0.499·fs (equal weight per octave).
    Speech: each octave band 250 Hz–4 kHz [4]_ log-spaced with its share of the speech power.
    """
    if weighting == "speech":
        fs_, ws_ = [], []
        k = max(8, n // len(SPEECH_OCTAVES_HZ))
        tot = sum(10.0 ** (lev / 10.0) for lev in SPEECH_LEVELS_DB)
        for fc, lev in zip(SPEECH_OCTAVES_HZ, SPEECH_LEVELS_DB):
            lo = fc / math.sqrt(2)
            f = np.geomspace(lo, max(lo * 1.001, min(fc * math.sqrt(2), 0.499 * fs)), k)
            fs_.append(f)
            ws_.append(np.full(k, 10.0 ** (lev / 10.0) / tot / k))
        return np.concatenate(fs_), np.concatenate(ws_)
    if weighting != "pink":
        raise ValueError(f"unknown tonal weighting {weighting!r}")
    lo = max(20.0, float(band_hz[0]))
    hi = min(float(band_hz[1]), 0.499 * fs)
    return np.geomspace(lo, max(hi, lo * 1.001), n), np.full(n, 1.0 / n)


def _advice(notches: list[Notch], asg_db: float, margin_before_db: float, tonal_pink_db: float = 0.0,
            tonal_speech_db: float = 0.0, weighting: str = "pink") -> list[str]:
    out = []
    fs_sorted = sorted(n.freq_hz for n in notches)
    # clusters: the most cuts whose centres fit in one octave
    best = (0, 0.0, 0.0)
    for i, f0 in enumerate(fs_sorted):
        inside = [f for f in fs_sorted[i:] if math.log2(f / f0) <= CLUSTER_SPAN_OCT]
        if len(inside) > best[0]:
            best = (len(inside), f0, inside[-1])
    if best[0] >= CLUSTER_MIN_CUTS:
        out.append(
            f"{best[0]} cuts cluster between {best[1]:.0f} and {best[2]:.0f} Hz: a broad EQ cut over that region, "
            "or moving the mic or speaker (or aiming the speaker away from the mic), would serve better than notches."
        )
    wide = [n for n in notches if n.bandwidth_oct >= MAX_NOTCH_BANDWIDTH_OCT - 1e-6]
    if wide:
        fl = ", ".join(f"{n.freq_hz:.0f}" for n in sorted(wide, key=lambda n: n.freq_hz))
        out.append(
            f"{len(wide)} of {len(notches)} cut(s) ({fl} Hz) use the full 1/3-octave cap: the need there is "
            "broader than a notch, a broad-EQ or placement problem as much as a notch one."
        )
    if notches and asg_db < 3.0:
        out.append(
            "notches buy little here: many crossings stand nearly as high as the worst one (a diffuse loop); "
            "mic choice, distance and placement buy more gain than cuts."
        )
    if weighting == "pink" and tonal_speech_db >= 3.0 and tonal_speech_db >= 2.0 * tonal_pink_db:
        out.append(
            f"these cuts take {tonal_speech_db:.1f} dB out of the speech band ({tonal_pink_db:.1f} dB broadband): "
            "for a speech mic, plan with the speech weighting (--tonal-weighting speech)."
        )
    if margin_before_db < 0:
        out.append(
            f"the loop is already unstable at the measured settings (margin {margin_before_db:.1f} dB): "
            "bring the gain down before anything else."
        )
    out.append(
        "This is a virtual ring-out on a frozen IR: confirm at low level, raise the gain slowly, keep a hand on "
        "the fader, and protect ears and tweeters (local codes and licensed practice come first)."
    )
    return out


# --------------------------------------------------------------------------- the ring-out


def _order_as_ringout(loops, planned: list[Notch], fs: float, m0: float):
    """Insert the planned cuts one by one at the crossing that limits the loop.

    At each step the cut covering the limiting crossing goes in, unless another planned cut would
    leave the loop more than 0.1 dB better off now (then that one), so steps rarely lose margin.
    """
    left = list(planned)
    steps = []
    cur = m0
    loop_now = [lp.H for lp in loops]  # each loop with the cuts inserted so far

    def worst(arrs):
        best = (float("inf"), float("nan"))
        for lp, arr in zip(loops, arrs):
            m, fh = lp.margin(arr)
            if m < best[0]:
                best = (m, fh)
        return best

    _, fh = worst(loop_now)
    while left:
        cover = [n for n in left if abs(math.log2(fh / n.freq_hz)) <= n.bandwidth_oct / 2.0] if math.isfinite(fh) else []
        after = {n: worst([a * lp.cut(n) for lp, a in zip(loops, loop_now)])[0] for n in left}
        best = max(left, key=lambda n: after[n])
        pick = best  # the limit is not under any planned cut: take the one that helps most now
        if cover:  # the cut at the ringing frequency, unless another one clearly helps more now
            near = min(cover, key=lambda n: abs(math.log2(fh / n.freq_hz)) / n.bandwidth_oct)
            if after[near] >= after[best] - 0.1:
                pick = near
        left.remove(pick)
        loop_now = [a * lp.cut(pick) for lp, a in zip(loops, loop_now)]
        m_new, fh_next = worst(loop_now)
        steps.append((pick, fh, m_new, m_new - cur))
        cur, fh = m_new, fh_next
    return steps


#: The simple ring-outs also tried at every budget (depth dB, bandwidth oct): a fixed cut at each
#: limiting crossing in turn, on the loop with the earlier cuts in it. Where a few regions dominate
#: the loop, deep 1/3-octave cuts at the limit found this way often beat the plan. One is kept only
#: if its pink-noise tonal cost is at most half the gain it buys (otherwise it mostly turns the
#: whole loop down, which the fader does too).
GREEDY_CUTS = ((-10.0, 1 / 6), (-6.0, 1 / 6), (-10.0, 1 / 10), (-12.0, 1 / 3), (-15.0, 1 / 3), (-18.0, 1 / 3), (-15.0, 1 / 4))


def _greedy_prefixes(loops, budget: int, fs: float) -> dict[int, list[tuple[list[Notch], float]]]:
    """For each budget b, the cuts and margin of each simple ring-out after b cuts."""
    out: dict[int, list] = {b: [] for b in range(1, budget + 1)}
    for depth, bw in GREEDY_CUTS:
        q = q_from_bandwidth_oct(bw)
        now = [lp.H for lp in loops]
        cuts: list[Notch] = []
        for b in range(1, budget + 1):
            worst = min((lp.margin(a) for lp, a in zip(loops, now)), key=lambda t: t[0])
            if not math.isfinite(worst[1]) or worst[1] >= 0.49 * fs:
                break
            n = Notch(worst[1], depth, q)
            cuts = cuts + [n]
            now = [a * lp.cut(n) for lp, a in zip(loops, now)]
            m = min(lp.margin(a)[0] for lp, a in zip(loops, now))
            out[b].append((cuts, m))
    return out


#: Steps of the pattern search around each cut: centre (fractions of its bandwidth), depth (dB)
#: and width (log2 of the factor). They are halved when a pass finds nothing better.
SEARCH_CENTRE_STEPS = (-0.25, -0.1, 0.1, 0.25)
SEARCH_DEPTH_STEPS_DB = (-3.0, -1.0, 1.0, 3.0)
SEARCH_WIDTH_STEPS = (-0.5, -0.2, 0.2, 0.5)
#: Depths (dB) and widths (octaves) a cut is tried at when moved to the limiting crossing.
RELOCATE_DEPTHS_DB = (-3.0, -6.0, -10.0)
RELOCATE_WIDTHS_OCT = (1 / 24, 1 / 10, 1 / 6)


#: Tie-break of the search (dB of margin per dB of tonal cost): of two cascades with the same
#: margin, the one that removes less program wins, so depths stay as shallow as they can.
TONAL_TIE_BREAK = 0.05


class _Score:
    """What the search maximises: the worst grid margin, less the tonal cost beyond its share.

    The tonal cost is :func:`tonal_cost_db`'s figure (pink or speech weighting) on a coarser
    grid (each cut's power response cached), so the search sees what will be reported.
    """

    def __init__(self, loops, fs: float, band, m0_db: float, share: float = MAX_TONAL_SHARE,
                 weighting: str = "pink"):
        self.loops, self.fs, self.m0, self.share = loops, fs, m0_db, share
        self.f, self.w = tonal_grid(band, fs, weighting, 1200)
        self._power: dict[Notch, np.ndarray] = {}

    def power(self, cuts) -> np.ndarray:
        """|C(f)|² of the cascade on the tonal grid."""
        p = np.ones(self.f.size)
        for n in cuts:
            c = self._power.get(n)
            if c is None:
                if len(self._power) > 4096:
                    self._power.clear()
                if n.gain_db is None:
                    c = np.abs(cascade_response([n], self.f, self.fs)) ** 2
                else:  # the exact digital magnitude, in closed form
                    c = 10.0 ** (-_cut_atten_db(self.f, n.freq_hz, n.gain_db, n.q, self.fs) / 10.0)
                self._power[n] = c
            p = p * c
        return p

    def tonal_db(self, cuts, rest_power: np.ndarray | None = None) -> float:
        """Tonal cost of ``cuts`` (times the cascade whose power is ``rest_power``, if given)."""
        p = self.power(cuts)
        if rest_power is not None:
            p = p * rest_power
        return float(-10.0 * math.log10(np.dot(self.w, p)))

    def __call__(self, cuts, margin_db: float, rest_power: np.ndarray | None = None) -> float:
        t = self.tonal_db(cuts, rest_power)
        over = 0.0 if self.share == math.inf else max(0.0, t - self.share * (margin_db - self.m0))
        return margin_db - TONAL_TIE_BREAK * t - 10.0 * over


#: How many of the best-scored cascades at the chosen budget the search starts from.
POLISH_STARTS = 2

#: The search judges a candidate cut on the points where the loop without it stands within this
#: many dB of the current limit (a cut never raises |L|); a candidate that lifts the margin past
#: that is judged again on the whole planning grid.
POLISH_VIEW_DB = 4.0


class _View:
    """The points of a loop where |L| ≥ the level of a margin ``ceiling_db``, and their neighbours.

    No crossing elsewhere can stand above that level once a cut (|C| ≤ 1) is added, so a margin
    below ``ceiling_db`` computed on the view is the margin on the whole grid.
    """

    def __init__(self, lp: _GridLoop, L: np.ndarray, ceiling_db: float):
        self.L, self.ceiling_db, self.fs = L, ceiling_db - 0.05, lp.fs
        a = np.abs(L)
        p = np.flatnonzero((np.maximum(a[:-1], a[1:]) >= 10.0 ** (-ceiling_db / 20.0)) & lp.adj)
        mask = np.zeros(a.size, bool)
        mask[p] = True
        mask[p + 1] = True
        idx = np.flatnonzero(mask)
        self.Lv, self.f = L[idx], lp.f[idx]
        self.adj = (np.diff(idx) == 1) & lp.adj[idx[:-1]]
        self.cos_w, self.inv_sin_w = lp._cos_w[idx], lp._inv_sin_w[idx]

    def margin(self, notch: Notch) -> float:
        return self.margin_at(notch)[0]

    def margin_at(self, notch: Notch) -> tuple[float, float]:
        """(margin dB, its frequency) with ``notch`` added."""
        c = _cut_on_grid(notch, self.cos_w, self.inv_sin_w, self.fs)
        return _grid_margin_db(self.Lv * c, self.f, self.adj)


def _polish(loops, cuts: list[Notch], score: _Score, passes: int, min_bw_oct: float,
            relocate: bool = True) -> tuple[list[Notch], float]:
    """Pattern search around each cut (centre, depth, width), keeping every step that scores better.

    A fourth move takes a cut away from where it is and puts it, at a few depths and widths, on
    the crossing that limits the loop now (a cut that has become nearly useless finds new work).

    Each candidate is judged on the whole planning grid with the other cuts in the loop, so the
    phase the cuts add (which moves the crossings) is accounted for exactly. Widths stay between
    ``min_bw_oct`` and the 1/3-octave cap, depths within :data:`PLAN_MAX_DEPTH_DB`.
    """
    cuts = list(cuts)

    def margin(views, cand):
        worst = math.inf
        for lp, view in zip(loops, views):
            m = view.margin(cand)
            if m >= view.ceiling_db:  # the candidate lifted the loop past the view: judge it whole
                m = lp.margin(view.L * lp.cut(cand))[0]
            worst = min(worst, m)
        return worst

    m_best = _worst_margin(loops, cuts, score.fs)[0]
    best = score(cuts, m_best)
    scale = 1.0
    for _ in range(passes):
        improved = False
        for i in range(len(cuts)):
            c = cuts[i]
            rest = cuts[:i] + cuts[i + 1 :]
            others = [_View(lp, lp.H * lp.cascade(rest), m_best + POLISH_VIEW_DB) for lp in loops]
            rest_power = score.power(rest)
            f_lim = math.nan
            if relocate and scale == 1.0:  # where the loop is limited now, with every cut in
                m_now = []
                for lp, view in zip(loops, others):
                    mv = view.margin_at(c)
                    m_now.append(mv if mv[0] < view.ceiling_db else lp.margin(view.L * lp.cut(c)))
                f_lim = min(m_now)[1]
            for kind in range(4):
                bw, g = c.bandwidth_oct, (-PLAN_MAX_DEPTH_DB if c.gain_db is None else c.gain_db)
                if kind == 3:  # move the cut to where the loop is limited now
                    if not math.isfinite(f_lim):
                        continue
                    cands = [Notch(f_lim, d, q_from_bandwidth_oct(b)) for d in RELOCATE_DEPTHS_DB
                             for b in RELOCATE_WIDTHS_OCT]
                elif kind == 0:
                    cands = [Notch(c.freq_hz * 2.0 ** (u * scale * bw), g, c.q) for u in SEARCH_CENTRE_STEPS]
                elif kind == 1:
                    cands = [Notch(c.freq_hz, float(min(-0.1, max(-PLAN_MAX_DEPTH_DB, g + d * scale))), c.q)
                             for d in SEARCH_DEPTH_STEPS_DB]
                else:
                    cands = [Notch(c.freq_hz, g, q_from_bandwidth_oct(
                        float(min(MAX_NOTCH_BANDWIDTH_OCT, max(min_bw_oct, bw * 2.0 ** (w * scale))))))
                        for w in SEARCH_WIDTH_STEPS]
                for cand in cands:
                    if cand == c or cand.freq_hz >= 0.49 * score.fs:
                        continue
                    m = margin(others, cand)
                    j = score([cand], m, rest_power)
                    if j > best + 0.005:
                        best, m_best, c, improved = j, m, cand, True
            cuts[i] = c
        if not improved:
            scale *= 0.5
            if scale < 0.2:
                break
    return cuts, m_best


def _tidy(loops, cuts: list[Notch], fs: float) -> list[Notch]:
    """Drop cuts of ~0 dB; merge overlapping cuts when that costs no margin."""
    cuts = [n for n in cuts if n.gain_db is None or n.gain_db < -0.05]
    merged = merge_notches(cuts, fs)
    if len(merged) < len(cuts) and _worst_margin(loops, merged, fs)[0] >= _worst_margin(loops, cuts, fs)[0] - 0.05:
        return merged
    return cuts


def _choose_cuts(loops, *, budget, target, min_gain, fs, drift, band, polish, tonal_share, tonal_weighting):
    """The cuts to insert: (cuts, planned grid margin, why the ring-out stops)."""
    m0_grid = _worst_margin(loops, [], fs)[0]
    planned: list[Notch] = []
    planned_margin = float("nan")
    reason = None
    if budget == 0:
        reason = "no cuts allowed (max_notches = 0)"
    elif not math.isfinite(m0_grid):
        reason = "the loop never crosses the positive real axis in the band: nothing to cut"
    elif target is not None and m0_grid >= target:
        reason = f"the margin already meets the target ({m0_grid:.2f} dB >= {target:g} dB)"
    else:
        planner = _Planner(fs, drift)
        score = _Score(loops, fs, band, m0_grid, tonal_share, tonal_weighting)
        plans = {0: ([], m0_grid)}
        starts: dict[int, list] = {0: [[]]}
        # every budget 1..max is planned: the per-notch rule compares them, and a plan for more
        # cuts that ends up worse (the cuts' phase moved the crossings) falls back on a smaller one.
        # At each budget the covering plan and the simple ring-outs compete on the score: the
        # margin, less any tonal cost beyond its share of the gain.
        greedy = _greedy_prefixes(loops, budget, fs)
        for b in range(1, budget + 1):
            cuts, _, _ = _plan_cuts(loops, b, planner, fs)
            options = [_tidy(loops, cuts, fs)] + [_tidy(loops, g_cuts, fs) for g_cuts, _ in greedy[b]]
            scored = []
            for c in options:
                m_c = _worst_margin(loops, c, fs)[0] if c else m0_grid
                scored.append((score(c, m_c), m_c, c))
            scored.sort(key=lambda t: -t[0])
            j_b, m_b, cuts = scored[0]
            prev = plans[max(plans)]
            if j_b < score(prev[0], prev[1]):  # more budget never has to do worse
                cuts, m_b = prev
                scored.insert(0, (score(prev[0], prev[1]), prev[1], prev[0]))
            plans[b] = (cuts, m_b)
            starts[b] = [c for _, _, c in scored[:POLISH_STARTS]]
            if target is not None and m_b >= target:
                break
        gains = {b: plans[b][1] - m0_grid for b in plans}
        chosen = 0  # grow the plan while each step up pays min_gain per extra cut over the last one kept
        for b in sorted(plans)[1:]:
            if gains[b] - gains[chosen] >= min_gain * (b - chosen) - 1e-9:
                chosen = b
        planned, planned_margin = plans[chosen]
        if polish and planned:
            # one pass of the search from each of the best few starts at that budget, then the
            # search carried on from the best of them
            best = None
            for start in starts[chosen]:
                if start:
                    c, m_c = _polish(loops, start, score, 1, min(PLAN_BANDWIDTHS_OCT))
                    if best is None or score(c, m_c) > score(best[0], best[1]):
                        best = (c, m_c)
            if best is not None:
                c, _ = _polish(loops, best[0], score, polish, min(PLAN_BANDWIDTHS_OCT))
                c = _tidy(loops, c, fs)
                m_c = _worst_margin(loops, c, fs)[0]
                if score(c, m_c) >= score(planned, planned_margin):
                    planned, planned_margin = c, m_c
        n_used = len(planned)
        if target is not None and planned_margin >= target:
            reason = f"target margin met ({planned_margin:.2f} dB >= {target:g} dB) with {n_used} cut(s)"
        elif chosen < max(plans):
            top = max(plans)
            reason = (
                f"more cuts would buy less than {min_gain:g} dB per notch ({chosen} cut(s) buy "
                f"{gains[chosen]:.2f} dB; the best plan with {top} buys {gains[top]:.2f} dB)"
            )
        elif n_used < budget and chosen == budget:
            reason = f"budget of {budget} cut(s) spent ({n_used} after merging cuts that overlap)"
        elif chosen == budget:
            reason = f"budget spent ({budget} cut(s))"
        else:
            reason = f"no placement of more than {n_used} cut(s) lowers the limiting crossings further"

    return planned, planned_margin, reason, m0_grid


def ring_out(
    ir,
    sample_rate_hz,
    *,
    max_notches: int = 6,
    target_margin_db: float | None = None,
    min_gain_per_notch_db: float = 0.5,
    band_hz=None,
    temperature_c: float = 20.0,
    swing_c: float = 3.0,
    robust: bool = False,
    seed: int = 0,
    polish: int = 6,
    tonal_share: float = MAX_TONAL_SHARE,
    tonal_weighting: str = "pink",
) -> RingOutResult:
    """Ring a loop out virtually: the cuts that buy the most stable gain, step by step.

    Parameters
    ----------
    ir : loop IR at the reference settings (1-D, time zero = sample 0).
    sample_rate_hz : its sample rate; cuts are evaluated as digital filters at it.
    max_notches : the budget of cuts (default 6).
    target_margin_db : stop as soon as the margin reaches this (default: spend the budget).
    min_gain_per_notch_db : plans for 1..max_notches cuts are compared; a larger plan is taken
        only if it buys at least this much per extra cut (dB) over the last one taken.
    band_hz : (lo, hi) analysis band (default: all the file holds, as :func:`howl.loop.nyquist_margin`).
    temperature_c, swing_c : air temperature and the swing every cut must cover.
    robust : design and judge the cuts on the loop and on perturbed copies of it
        (:func:`perturbed_irs`); the reported margins are the worst over them.
    seed : seed of the movement perturbation (robust mode).
    polish : at most this many passes of the pattern search around the planned cuts (0 = plan only).
    tonal_share : the most broadband tonal cost (dB) the cuts may spend per dB of stable gain they
        buy (default 0.5); a cascade past it is scored down (``math.inf``: no limit).
    tonal_weighting : the tonal cost that rule counts: ``"pink"`` (broadband, the default) or
        ``"speech"`` (a male speech spectrum, for a speech system). Both are reported.
    """
    from .loop import check_ir, nyquist_margin

    h = check_ir(ir, sample_rate_hz)
    fs = v.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    budget = v.integer(max_notches, "max_notches", 0, 64)
    min_gain = v.in_range(min_gain_per_notch_db, "min_gain_per_notch_db", 0.0, None, unit="dB")
    target = None if target_margin_db is None else v.number(target_margin_db, "target_margin_db", unit="dB")
    temperature_c = v.in_range(temperature_c, "temperature_c", -50.0, 60.0, unit="°C")
    swing_c = v.in_range(swing_c, "swing_c", 0.0, 30.0, unit="°C")
    drift = drift_bandwidth_oct(temperature_c, swing_c)
    tonal_weighting = v.choice(tonal_weighting, "tonal_weighting", ("pink", "speech"))
    if not (isinstance(tonal_share, float) and tonal_share == math.inf):
        tonal_share = v.in_range(tonal_share, "tonal_share", 0.0, None)

    before = nyquist_margin(h, fs, band_hz=band_hz)
    band = tuple(float(x) for x in before.band_hz)
    irs = [("nominal", h)]
    if robust:
        irs += perturbed_irs(h, fs, temperature_c=temperature_c, swing_c=swing_c, seed=seed)
    loops = [_GridLoop(name, x, fs, band, PLAN_CAP_DB) for name, x in irs]
    kw = dict(budget=budget, target=target, min_gain=min_gain, fs=fs, drift=drift, band=band, polish=polish,
              tonal_share=tonal_share, tonal_weighting=tonal_weighting)
    planned, planned_margin, reason, m0_grid = _choose_cuts(loops, **kw)
    if planned and any(lp.saturated(planned_margin) for lp in loops):
        # the plan reached the grid's cap: plan again on every point of the band
        loops = [_GridLoop(name, x, fs, band, math.inf) for name, x in irs]
        planned, planned_margin, reason, m0_grid = _choose_cuts(loops, **kw)

    steps_raw = _order_as_ringout(loops, planned, fs, m0_grid) if planned else []
    n_keep = len(steps_raw)
    if target is not None:
        for k, s in enumerate(steps_raw):
            if s[2] >= target:
                n_keep = k + 1
                reason = f"target margin met ({s[2]:.2f} dB >= {target:g} dB) after {n_keep} cut(s)"
                break
    steps_raw = steps_raw[:n_keep]
    notches = tuple(s[0] for s in steps_raw)

    sos = cascade_sos(notches, fs) if notches else None
    after = nyquist_margin(h, fs, band_hz=band, filters_sos=sos)
    m_before, m_after = before.gain_margin_db, after.gain_margin_db
    robust_loops = []
    if robust:
        robust_loops.append(("nominal", m_before, m_after))
        for name, x in irs[1:]:
            b = nyquist_margin(x, fs, band_hz=band).gain_margin_db
            a = nyquist_margin(x, fs, band_hz=band, filters_sos=sos).gain_margin_db
            robust_loops.append((name, b, a))
        m_before = min(r[1] for r in robust_loops)
        m_after = min(r[2] for r in robust_loops)
    asg = m_after - m_before if math.isfinite(m_before) and math.isfinite(m_after) else 0.0

    tonal_pink = tonal_cost_db(notches, band, fs)
    tonal_speech = tonal_cost_db(notches, band, fs, weighting="speech")
    steps = []
    for i, (n, fh, m, gain) in enumerate(steps_raw):
        steps.append(RingOutStep(i + 1, n, float(fh), float(m), float(gain), float(m - m0_grid)))
    return RingOutResult(
        added_stable_gain_db=float(asg),
        gain_margin_db_before=float(m_before),
        gain_margin_db_after=float(m_after),
        notches=notches,
        steps=tuple(steps),
        stopped_because=reason,
        tonal_cost_db=tonal_pink,
        advice=tuple(_advice(list(notches), asg, m_before, tonal_pink, tonal_speech, tonal_weighting)),
        tonal_cost_speech_db=tonal_speech,
        magnitude_margin_db_before=float(before.magnitude_margin_db),
        magnitude_margin_db_after=float(after.magnitude_margin_db),
        howl_freq_hz_before=float(before.howl_freq_hz),
        howl_freq_hz_after=float(after.howl_freq_hz),
        planned_gain_margin_db=float(planned_margin),
        sample_rate_hz=fs,
        band_hz=band,
        temperature_c=float(temperature_c),
        swing_c=float(swing_c),
        robust=bool(robust),
        robust_loops=tuple(robust_loops),
        tonal_share=float(tonal_share),
        tonal_weighting=tonal_weighting,
    )
