"""The ring-out's planning grid: where candidate cascades are judged, fast and exactly.

Private to :mod:`howl.ringout` (see its docstring for the method). Everything here works on
the zero-padded FFT of the loop IR, restricted to the points that can limit a margin:

* :func:`planning_ir` drops the IR's tail below −50 dB of residual energy (Schroeder's
  backward integral [1]_);
* :class:`_GridLoop` keeps the points within :data:`PLAN_CAP_DB` of the loop's top crossing
  (a cut never raises |L|), and evaluates a cut in closed form (:func:`_cut_on_grid`);
* :class:`_View` narrows that further to the points within :data:`POLISH_VIEW_DB` of the
  current limit, for the search;
* :func:`_cut_atten_db`, :func:`_min_gain_db`: the exact magnitude of a digital RBJ peaking
  cut [2]_ and the shallowest one that takes a given attenuation off at a frequency.

References
----------
.. [1] M. R. Schroeder, "New method of measuring reverberation time", J. Acoust.
   Soc. Am. 37, 409–412, 1965 (backward integration of the squared IR).
.. [2] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note, 2021,
   https://www.w3.org/TR/audio-eq-cookbook/ (peakingEQ and notch; the digital filter is
   the bilinear transform of the analog prototype prewarped at f0, so its magnitude at f
   equals the prototype's at tan(πf/fs)/tan(πf0/fs)).
"""

from __future__ import annotations

import math

import numpy as np

from howl.loop.notch import Notch

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

    Schroeder's backward integral [1]_ of h² gives the energy left after each sample; what
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
    (P + αA·Q)/(P + (α/A)·Q) and the notch P/(P + α·Q) [2]_; on the unit circle
    P/Q = j·x with x = (cos w0 − cos w)/sin w, so C = (p + jx)/(q + jx) with
    (p, q) = (αA, α/A) or (0, α): Re C = (pq + x²)/(q² + x²), Im C = x(q − p)/(q² + x²)
    (derived here; equal to the biquad's B(z)/A(z), which the tests check with scipy).
    """
    from howl.loop.notch import _w0_alpha

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
        from howl.loop.nyquist import loop_response

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




def _tan_f(f: np.ndarray, fs: float) -> np.ndarray:
    """tan(πf/fs) (f capped just below fs/2): the numerator of :func:`_warped`, to compute once."""
    return np.tan(np.pi * np.minimum(f, 0.4999 * fs) / fs)


def _warped(f: np.ndarray, fc: float, fs: float, tan_f: np.ndarray | None = None) -> np.ndarray:
    """tan(πf/fs)/tan(πfc/fs): where the digital RBJ cut equals its analog prototype [2]_
    (``tan_f``: :func:`_tan_f` of ``f``, when already known)."""
    return (_tan_f(f, fs) if tan_f is None else tan_f) / np.tan(np.pi * np.asarray(fc) / fs)


def _cut_atten_db(f: np.ndarray, fc: float, gain_db: float, q: float, fs: float,
                  tan_f: np.ndarray | None = None) -> np.ndarray:
    """Attenuation (dB, ≥ 0) of the digital RBJ peaking cut at f (exact, via the prototype)."""
    w = _warped(f, fc, fs, tan_f)
    a2 = 10.0 ** (gain_db / 20.0)  # A² with A = 10^(gain/40)
    x = (1.0 - w * w) ** 2
    y = (w / q) ** 2
    return -10.0 * np.log10((x + y * a2) / (x + y / a2))


def _min_gain_db(f: np.ndarray, need_db: np.ndarray, fc: float, q: float, fs: float,
                 tan_f: np.ndarray | None = None) -> np.ndarray:
    """Smallest-magnitude peaking gain (dB < 0) that attenuates f by ``need_db``.

    The prototype's |H|² at w is (x + y·A²)/(x + y/A²) with x = (1−w²)²,
    y = (w/Q)² [2]_; setting it to the target a² gives a quadratic in A²:
    A² = [−x(1−a²) + sqrt(x²(1−a²)² + 4a²y²)] / (2y).
    """
    w = _warped(f, fc, fs, tan_f)
    x = (1.0 - w * w) ** 2
    y = (w / q) ** 2
    a2 = 10.0 ** (-np.maximum(need_db, 0.0) / 10.0)
    big = (-x * (1.0 - a2) + np.sqrt((x * (1.0 - a2)) ** 2 + 4.0 * a2 * y * y)) / (2.0 * y)
    return 20.0 * np.log10(np.maximum(big, 1e-300))


def _worst_margin(loops: list[_GridLoop], notches: list[Notch], fs: float) -> tuple[float, float, int]:
    """Worst grid margin over the loops with the cascade in: (margin_db, freq_hz, loop index)."""
    worst = (float("inf"), float("nan"), 0)
    for k, lp in enumerate(loops):
        m, fh = lp.margin(lp.H * lp.cascade(notches))
        if m < worst[0]:
            worst = (m, fh, k)
    return worst


#: The search judges a candidate cut on the points where the loop without it stands within this
#: many dB of the current limit (a cut never raises |L|); a candidate that lifts the margin past
#: that is judged again on the whole planning grid.
POLISH_VIEW_DB = 2.0


class _View:
    """The points of a loop where |L| ≥ the level of a margin ``ceiling_db``, and their neighbours.

    No crossing elsewhere can stand above that level once a cut (|C| ≤ 1) is added, so a margin
    below ``ceiling_db`` computed on the view is the margin on the whole grid.
    """

    def __init__(self, lp: _GridLoop, L: np.ndarray, ceiling_db: float):
        self.L, self.ceiling_db, self.fs = L, ceiling_db - 0.05, lp.fs
        # |L|² against the level squared (no square roots): the 0.05 dB kept below the ceiling is
        # far more than any rounding at the edge, and a view may hold extra points anyway
        a2 = L.real * L.real
        a2 += L.imag * L.imag
        p = np.flatnonzero((np.maximum(a2[:-1], a2[1:]) >= 10.0 ** (-ceiling_db / 10.0)) & lp.adj)
        mask = np.zeros(a2.size, bool)
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


# --------------------------------------------------------------------------- many candidates at once


def _cuts_on_grid(notches, cos_w: np.ndarray, inv_sin_w: np.ndarray, fs: float) -> np.ndarray:
    """:func:`_cut_on_grid` for many peaking cuts at once: shape (len(notches), n).

    Row k is bit for bit what :func:`_cut_on_grid` gives for ``notches[k]`` (the scalars are
    rounded to the grid's precision in the same places), so a search that judges its moves in
    one array chooses exactly what it chose one move at a time.
    """
    from howl.loop.notch import _w0_alpha

    k = len(notches)
    dt = np.float32 if cos_w.dtype == np.float32 else float
    cw0, pq, qq, qmp = (np.empty((k, 1), dt) for _ in range(4))
    for i, n in enumerate(notches):
        w0, alpha = _w0_alpha(n.freq_hz, n.q, fs)
        if n.gain_db is None:
            p, q = 0.0, alpha
        else:
            a = 10.0 ** (n.gain_db / 40.0)
            p, q = alpha * a, alpha / a
        cw0[i, 0], pq[i, 0], qq[i, 0], qmp[i, 0] = math.cos(w0), p * q, q * q, q - p
    x = (cw0 - cos_w[None, :]) * inv_sin_w[None, :]
    x2 = x * x
    d = 1.0 / (qq + x2)
    out = np.empty(x.shape, np.complex64 if dt is np.float32 else complex)
    out.real = (pq + x2) * d
    out.imag = x * (qmp * d)
    return out


def _grid_margins_rows(L: np.ndarray, f: np.ndarray, adj: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_grid_margin_db` of every row of ``L`` (K, n): (margins dB, frequencies Hz).

    The same arithmetic on the same sign changes as :func:`_grid_margin_db`, so each row's
    result is bit for bit the one-row result.
    """
    im, re = L.imag, L.real
    neg = im < 0.0
    flip = neg[:, :-1] != neg[:, 1:]
    if adj is not None:
        flip &= adj[None, :]
    r, c = np.nonzero(flip)
    a = im[r, c]
    t = a / (a - im[r, c + 1])
    rc = re[r, c] + t * (re[r, c + 1] - re[r, c])
    out_m = np.full(L.shape[0], np.inf)
    out_f = np.full(L.shape[0], np.nan)
    starts = np.searchsorted(r, np.arange(L.shape[0] + 1))
    for row in range(L.shape[0]):
        lo, hi = starts[row], starts[row + 1]
        if hi == lo:
            continue
        k = lo + int(np.argmax(rc[lo:hi]))
        if rc[k] <= 0.0:
            continue
        j = c[k]
        out_m[row] = -20.0 * math.log10(float(rc[k]))
        out_f[row] = float(f[j] + float(t[k]) * (f[j + 1] - f[j]))
    return out_m, out_f


def _view_margins(view: "_View", notches) -> tuple[np.ndarray, np.ndarray]:
    """(margins, frequencies) on a view with each of ``notches`` added, in one array."""
    if not notches:
        return np.zeros(0), np.zeros(0)
    c = _cuts_on_grid(notches, view.cos_w, view.inv_sin_w, view.fs)
    return _grid_margins_rows(view.Lv[None, :] * c, view.f, view.adj)
