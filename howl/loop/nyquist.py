"""Loop analysis of impulse responses: Nyquist gain margin and howl frequencies.

Convention (positive feedback): the closed loop is ``y[n] = x[n] + Σ_k h[k]·y[n−k]``,
so with the open-loop transfer H(f) (the DTFT of the loop IR ``h``) the closed
loop is 1 / (1 − H). The loop howls where H(f) = 1: magnitude one and phase a
multiple of 360°.

* Phase-aware gain margin (Nyquist criterion, [1]_, [2]_ for the positive-feedback
  wording): −20·log10 of the largest **positive real-axis crossing** of H(f),
  i.e. of the largest real value H takes where Im H = 0 and Re H > 0. This is the
  maximum stable gain (MSG) of [2]_ with the broadband gain as the free parameter.
* Phase-blind margin: −20·log10 max|H(f)| in the band. The phase of a room's
  loop drifts with temperature and movement, so any peak can become a crossing.

MIMO loops (several mics and speakers, the generalized Nyquist criterion) are in
:mod:`howl.loop.mimo`.

References
----------
.. [1] H. Nyquist, "Regeneration theory", Bell System Technical Journal 11(1),
   126–147, 1932.
.. [2] T. van Waterschoot and M. Moonen, "Fifty years of acoustic feedback
   control: state of the art and future challenges", Proc. IEEE 99(2),
   288–327, 2011 (MSG = −20·log10 max |J F| over the frequencies where the
   loop phase is a multiple of 2π).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from howl import validate as V
from howl.errors import HowlWarning, InputError
from howl.loop._dtft import _FastDTFT, _next_pow2, dtft  # noqa: F401  (re-exported)
from howl.loop._bandgain import band_loop_gain_db, third_octave_loop_gain  # noqa: F401  (re-exported)
from howl.loop._risks import Risk, lobe_risks  # noqa: F401  (Risk re-exported)
from howl.units import db, from_db

#: Default zero-padding factor of the search grid relative to the IR length.
#: The loop phase advances by 2π·τ·Δf between grid points; for any group delay
#: τ ≤ N/fs and Δf = fs/(4N) that is at most π/2, so a phase cycle always
#: spans at least 4 grid points (first principles).
DEFAULT_OVERSAMPLE = 4

#: Minimum FFT size of the search grid (resolves sharp notch filters in the loop
#: even for short IRs).
MIN_N_FFT = 1 << 16

#: Two crossings whose margins differ by less than this are both "the" howl frequency.
TIE_DB = 0.02

#: At most this many tied howl frequencies are listed (a flat, real loop ties everywhere).
MAX_TIES = 1000

#: A first sample above this fraction of the peak (−50 dB) is taken as a real arrival at time zero.
FIRST_SAMPLE_LIM = 10 ** (-50 / 20)

#: Longest loop IR accepted (s); longer files are almost always a wrong file.
MAX_IR_S = 20.0

#: The MIMO names live in :mod:`howl.loop.mimo`; importing them from here still works.
_MIMO_NAMES = ("MimoMarginResult", "loop_matrix", "mimo_margin", "_check_mimo", "_MatrixLoop", "_track_loci", "_refine_loci")


def __getattr__(name: str):
    if name in _MIMO_NAMES:
        from howl.loop import mimo

        return getattr(mimo, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


# --------------------------------------------------------------------------- checks


def check_ir(ir, sample_rate_hz, *, name: str = "ir", file: str | None = None) -> np.ndarray:
    """Validate a loop IR: 1-D, finite, not empty, not silent. Returns float64 array.

    Raises :class:`~howl.errors.InputError` with a one-line message.
    """
    V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    h = V.finite_array(ir, name, ndim=1, file=file)
    if not np.any(h):
        raise InputError("is silent (all samples are zero); expected a loop impulse response", file=file, key=name)
    return np.ascontiguousarray(h, dtype=float)


def ir_warnings(ir: np.ndarray, sample_rate_hz: float, *, max_length_s: float = MAX_IR_S) -> list[str]:
    """Doubts about a loop IR that do not stop the analysis (the CLI prints them).

    * first sample not zero (above −50 dB re the peak, so measurement noise
      does not count): a zero-delay loop is unphysical (every real loop has at
      least converter and acoustic delay);
    * DC gain not about zero: real loops block DC (transformers, coupling
      capacitors, loudspeakers); a DC crossing would then dominate the margin;
    * samples at full scale: the IR was probably clipped when measured.
    """
    h = np.asarray(ir, dtype=float)
    out: list[str] = []
    peak = float(np.max(np.abs(h)))
    if abs(h[0]) > FIRST_SAMPLE_LIM * peak:
        out.append(
            f"first sample of the loop IR is {h[0]:.3g} ({db(h[0]) - db(peak):.0f} dB re the peak), not zero: "
            "a zero-delay loop is unphysical (check the IR alignment)"
        )
    dc = float(np.sum(h))
    hmax = float(np.max(np.abs(np.fft.rfft(h, 1 << max(10, int(math.ceil(math.log2(h.size))) + 1)))))
    if abs(dc) > 0.1 * hmax:
        out.append(
            f"loop DC gain is {db(dc):.1f} dB ({db(dc) - db(hmax):.1f} dB re the peak), not about zero: "
            "real loops block DC; restrict the band (--band-hz) or high-pass the IR"
        )
    n_full = int(np.count_nonzero(np.abs(h) >= 0.999))
    if n_full >= 2:
        out.append(f"{n_full} samples of the loop IR are at full scale: the measurement was probably clipped")
    if h.size > max_length_s * sample_rate_hz:
        out.append(f"loop IR is {h.size / sample_rate_hz:.1f} s long (more than {max_length_s:g} s)")
    return out


def _band(band_hz, sample_rate_hz: float) -> tuple[float, float]:
    nyq = sample_rate_hz / 2.0
    if band_hz is None:
        return 0.0, nyq
    if len(band_hz) != 2:
        raise InputError(f"must be two numbers LO HI, got {band_hz!r}", key="band_hz")
    lo = V.in_range(band_hz[0], "band_hz[0]", 0.0, nyq, unit="Hz")
    hi = V.in_range(band_hz[1], "band_hz[1]", 0.0, nyq, unit="Hz")
    if not hi > lo:
        raise InputError(f"must have LO < HI, got {lo:g} {hi:g} Hz", key="band_hz")
    return lo, hi


def _sos(filters_sos):
    if filters_sos is None:
        return None
    sos = np.atleast_2d(np.asarray(filters_sos, dtype=float))
    if sos.size == 0:
        return None
    if sos.ndim != 2 or sos.shape[1] != 6:
        raise InputError(f"must be an (n, 6) second-order-sections array, got shape {sos.shape}", key="filters_sos")
    if not np.all(np.isfinite(sos)):
        raise InputError("must hold only finite numbers", key="filters_sos")
    return sos


# --------------------------------------------------------------------------- transfer


def loop_response(ir, sample_rate_hz, freq_hz=None, n_fft=None) -> tuple[np.ndarray, np.ndarray]:
    """Open-loop transfer H(f) of a loop IR (the DTFT, positive-feedback convention).

    Parameters
    ----------
    ir : 1-D array, the loop impulse response (time zero = sample 0).
    sample_rate_hz : sample rate.
    freq_hz : if given, H is evaluated exactly (direct DTFT sum) at these frequencies.
    n_fft : otherwise, the FFT size of a uniform grid 0..fs/2 (default: the next
        power of two ≥ 8·len(ir), at least 65536).

    Returns
    -------
    (freq_hz, H) : frequencies and complex transfer.
    """
    h = check_ir(ir, sample_rate_hz)
    fs = float(sample_rate_hz)
    if freq_hz is not None:
        f = np.asarray(freq_hz, dtype=float)
        return f, dtft(h, f, fs)
    if n_fft is None:
        n_fft = max(MIN_N_FFT, _next_pow2(DEFAULT_OVERSAMPLE * h.size))
    n_fft = V.integer(n_fft, "n_fft", 2)
    if n_fft < h.size:
        raise InputError(f"must be >= the IR length {h.size}, got {n_fft}", key="n_fft")
    H = np.fft.rfft(h, n_fft)
    return np.fft.rfftfreq(n_fft, 1.0 / fs), H


def _sos_response(sos, freq_hz, fs):
    from howl.loop.notch import sos_response

    return sos_response(sos, np.atleast_1d(np.asarray(freq_hz, dtype=float)), fs)


# --------------------------------------------------------------------------- results




@dataclass(frozen=True, eq=False)
class MarginResult:
    """Result of :func:`nyquist_margin`. All margins include ``gain_db``.

    gain_margin_db : phase-aware margin (inf when H never crosses the positive real axis in the band).
    magnitude_margin_db : phase-blind margin −20·log10 max|H| in the band.
    howl_freq_hz : frequency of the limiting crossing (nan when there is none).
    howl_freqs_hz : every crossing whose margin ties with the limiting one within ``TIE_DB``
        (worst first, at most ``MAX_TIES``).
    risks : worst first.
    crossings_freq_hz, crossings_value : every positive real-axis crossing in the band
        (frequency, Re H there), sorted by frequency; the worst ones are refined.
    magnitude_peak_freq_hz : where |H| is largest in the band.
    ring_decay_db_per_s : predicted decay rate of a tone ringing at the howl
        frequency (first-order pole shift, see :func:`ring_decay_rate_db_per_s`);
        negative means it grows.
    """

    gain_margin_db: float
    magnitude_margin_db: float
    howl_freq_hz: float
    howl_freqs_hz: tuple
    risks: tuple
    crossings_freq_hz: np.ndarray
    crossings_value: np.ndarray
    sample_rate_hz: float
    band_hz: tuple
    gain_db: float = 0.0
    magnitude_peak_freq_hz: float = float("nan")
    ring_decay_db_per_s: float = float("nan")
    group_delay_s: float = float("nan")
    n_fft: int = 0
    dc_gain: float = float("nan")


# --------------------------------------------------------------------------- refinement


class _Loop:
    """L(f) = g·H(f)·C(f) evaluated exactly at any frequencies (vectorised)."""

    def __init__(self, h, fs, g, sos, dtft=None):
        self.fs = fs
        self.g = g
        self.sos = sos
        self.dtft = _FastDTFT(h) if dtft is None else dtft

    def _real_points(self, f, v):
        edge = (f == 0.0) | (f == self.fs / 2.0)
        if np.any(edge):
            v = v.copy()
            v[edge] = v[edge].real
        return v

    def __call__(self, f) -> np.ndarray:
        f = np.atleast_1d(np.asarray(f, dtype=float))
        v = self.g * self.dtft(2.0 * np.pi * f / self.fs)
        if self.sos is not None:
            v = v * _sos_response(self.sos, f, self.fs)
        return self._real_points(f, v)

    def with_deriv(self, f) -> tuple[np.ndarray, np.ndarray]:
        """L and dL/df (per Hz); exact for the IR, central difference for the filters."""
        f = np.atleast_1d(np.asarray(f, dtype=float))
        H, dH = self.dtft(2.0 * np.pi * f / self.fs, deriv=True)
        H = H * self.g
        dH = dH * self.g * (2.0 * np.pi / self.fs)
        if self.sos is not None:
            from howl.loop.notch import SOS_CACHE_MIN_POINTS

            df = 1e-6 * self.fs
            m = f.size
            if 3 * m < SOS_CACHE_MIN_POINTS:  # one call for the three (the same arithmetic per point)
                c3 = _sos_response(self.sos, np.concatenate([f, f + df, np.abs(f - df)]), self.fs)
                c0, cp, cm = c3[:m], c3[m : 2 * m], c3[2 * m :]
            else:
                c0 = _sos_response(self.sos, f, self.fs)
                cp = _sos_response(self.sos, f + df, self.fs)
                cm = _sos_response(self.sos, np.abs(f - df), self.fs)
            dc = (cp - cm) / (2 * df)
            dH = dH * c0 + H * dc
            H = H * c0
        return self._real_points(f, H), dH


def _refine_crossings(L: _Loop, a, b, ia, ib, x0, tol_hz: float, max_iter: int = 40):
    """Roots of Im L(f), one per bracket [a, b] with Im changing sign (vectorised).

    Newton steps from the interpolated start ``x0``, kept inside the shrinking
    bracket (bisection when a step leaves it). Returns (f, L(f)).
    """
    a = np.array(a, dtype=float)
    b = np.array(b, dtype=float)
    sa = np.sign(np.asarray(ia, dtype=float))
    x = np.array(x0, dtype=float)
    v = np.zeros(x.size, complex)
    active = np.ones(x.size, bool)
    for _ in range(max_iter):
        if not np.any(active):
            break
        idx = np.flatnonzero(active)
        val, dv = L.with_deriv(x[idx])
        v[idx] = val
        fx = val.imag
        sx = np.sign(fx)
        # shrink brackets
        left = sx == sa[idx]
        a[idx[left]] = x[idx[left]]
        b[idx[~left]] = x[idx[~left]]
        with np.errstate(divide="ignore", invalid="ignore"):
            step = fx / dv.imag
        xn = x[idx] - step
        bad = ~np.isfinite(xn) | (xn <= a[idx]) | (xn >= b[idx])
        xn[bad] = 0.5 * (a[idx[bad]] + b[idx[bad]])
        tol = tol_hz + 1e-11 * np.abs(x[idx])
        done = (fx == 0.0) | (np.abs(xn - x[idx]) < tol) | (b[idx] - a[idx] < tol)
        x[idx] = np.where(fx == 0.0, x[idx], xn)
        active[idx[done]] = False
    return x, L(x)


def ring_decay_rate_db_per_s(margin_db: float, dlnL_domega: complex) -> float:
    """Decay rate of the closed-loop pole that sits near a crossing, to first order.

    At the crossing gain the pole is at s = jω_c. Lowering the gain by ``margin_db``
    (Δln g = −m·ln10/20) moves it by Δs = −Δln g / (d ln L/ds), with
    d ln L/ds = −j·d ln L/dω = −τ_g − j·a, where τ_g = −dφ/dω is the group delay
    and a = d ln|L|/dω. Hence Re Δs = −(m·ln10/20)·τ_g/(τ_g² + a²) Np/s, i.e. a
    decay of m·τ_g/(τ_g² + a²) dB/s. For a pure delay (a = 0) this is m/τ dB/s
    (first principles: m dB lost per trip round the loop).
    """
    z = complex(dlnL_domega)
    tau = -z.imag
    a = z.real
    den = tau * tau + a * a
    if den == 0.0:
        return float("nan")
    return float(margin_db * tau / den)


# --------------------------------------------------------------------------- SISO margin


def nyquist_margin(
    ir,
    sample_rate_hz,
    *,
    band_hz=None,
    gain_db=0.0,
    filters_sos=None,
    n_risks: int = 10,
    oversample: int = DEFAULT_OVERSAMPLE,
    tie_db: float = TIE_DB,
) -> MarginResult:
    """Phase-aware and phase-blind gain margins of a loop IR (Nyquist criterion [1]_, [2]_).

    Every positive real-axis crossing of L(f) = g·H(f)·C(f) (g = 10^(gain_db/20),
    C the optional second-order-section cascade in the loop) is located on a
    zero-padded FFT grid (``oversample``·len(ir) points, at least 65536), then
    the worst ones (the ``n_risks`` worst and all within 1 dB of the worst, up to
    512) are refined by Newton steps kept inside the bracketing grid interval, on
    Im L(f) evaluated as an exact DTFT (and exact filter response) at arbitrary
    frequency, so the frequency is exact to ~1e-10 relative and the margin to the
    rounding of the sum. Crossings farther down keep their grid-interpolated values.

    Many margins of one IR (a cascade growing cut by cut) share the FFT through
    :class:`LoopGrid`, which this function uses: the figures are the same.

    Parameters
    ----------
    ir : loop IR at the reference settings (1-D).
    sample_rate_hz : its sample rate.
    band_hz : (lo, hi) analysis band; default 0 .. fs/2 (all the file holds).
    gain_db : added loop gain (a fader move) before the analysis.
    filters_sos : (n, 6) SOS array of filters inserted in the loop.
    n_risks : how many risk frequencies to return.
    oversample : grid zero-padding factor.
    tie_db : crossings within this of the worst are all listed as howl frequencies.
    """
    grid = LoopGrid(ir, sample_rate_hz, band_hz=band_hz, oversample=oversample)
    return grid.margin(gain_db=gain_db, filters_sos=filters_sos, n_risks=n_risks, tie_db=tie_db)


#: Points per chunk when :class:`LoopGrid` grows a cascade (the section's temporaries stay in cache).
_CHUNK = 8192


class LoopGrid:
    """A loop IR's spectrum on :func:`nyquist_margin`'s search grid, computed once.

    ``margin(...)`` is :func:`nyquist_margin` of that IR; ``cascade_on_grid(sos, start)``
    multiplies the response of further SOS sections on the grid onto ``start`` (a cascade
    already on it), bit for bit what the filters' response on the grid is, so the margin after
    each step of a growing cascade costs one section's response and the crossings, not an FFT
    and the whole cascade again.
    """

    def __init__(self, ir, sample_rate_hz, *, band_hz=None, oversample: int = DEFAULT_OVERSAMPLE):
        self.h = check_ir(ir, sample_rate_hz)
        self.fs = float(sample_rate_hz)
        oversample = V.integer(oversample, "oversample", 1)
        self.band_hz = _band(band_hz, self.fs)
        lo, hi = self.band_hz
        self.n_fft = max(MIN_N_FFT, _next_pow2(oversample * self.h.size))
        df = self.fs / self.n_fft
        i0 = int(math.ceil(lo / df - 1e-9))
        i1 = min(int(math.floor(hi / df + 1e-9)), self.n_fft // 2) + 1
        H_all = np.fft.rfft(self.h, self.n_fft)
        self.dc = float(H_all[0].real)
        self.f = np.arange(i0, i1) * df  # the FFT bins inside the band (edges added per margin)
        self.H = H_all[i0:i1]
        self.dtft = _FastDTFT(self.h)
        self._trig = None

    def cascade_on_grid(self, filters_sos, start=None) -> np.ndarray:
        """``start`` (default 1) times the response of the sections of ``filters_sos`` on the grid.

        ``start`` (a cascade already on this grid, e.g. the last result) is multiplied in place
        and returned: pass a copy to keep it. Each section's response is computed in place
        (:func:`howl.loop.notch.section_response_into`, the same bits as the filters' response
        :func:`nyquist_margin` takes on the grid, section by section).
        """
        from howl.loop.notch import grid_trig, section_response_into

        sos = _sos(filters_sos)
        out = start
        if sos is None:
            return np.ones(self.f.shape, complex) if out is None else out
        n = self.f.size
        if self._trig is None:
            self._trig = grid_trig(self.f, self.fs)
            self._work = [np.empty(min(n, _CHUNK)) for _ in range(7)]
            self._c = np.empty(min(n, _CHUNK), complex)
        for j in range(sos.shape[0]):
            new = out is None
            if new:
                out = np.empty(n, complex)
            # in chunks that stay in the cache: the same operations on each point, so the same bits
            for a in range(0, n, _CHUNK):
                b = min(n, a + _CHUNK)
                m = b - a
                c = section_response_into(sos[j], tuple(t[a:b] for t in self._trig), [w[:m] for w in self._work],
                                          self._c[:m])
                if new:
                    out[a:b] = c
                else:
                    np.multiply(out[a:b], c, out=out[a:b])
        return out

    def margin(self, *, gain_db=0.0, filters_sos=None, n_risks: int = 10, tie_db: float = TIE_DB,
               filters_on_grid=None) -> MarginResult:
        """:func:`nyquist_margin` of this IR; ``filters_on_grid``: the response of ``filters_sos``
        on the grid, from :meth:`cascade_on_grid` (computed here when not given)."""
        fs = self.fs
        gdb = V.number(gain_db, "gain_db", unit="dB")
        n_risks = V.integer(n_risks, "n_risks", 0)
        lo, hi = self.band_hz
        sos = _sos(filters_sos)
        g = from_db(gdb)
        L = _Loop(self.h, fs, g, sos, dtft=self.dtft)
        f, Lg = self._loop_grid(g, sos, L, filters_on_grid)
        re, im = Lg.real, Lg.imag
        mag2 = re * re
        mag2 += im * im
        cand_f, cand_r, cand_lo = _crossings(L, f, re, im, n_risks, 1e-12 * fs)
        fpk, mpk = _magnitude_peak(L, f, mag2)
        magnitude_margin_db = -db(mpk)
        cand_f, cand_r, cand_lo, margins, howl_freqs, ring, tau_g = _worst_crossing(L, cand_f, cand_r, cand_lo, tie_db)
        gain_margin_db = float(margins[0]) if margins.size else float("inf")
        howl_freq_hz = float(cand_f[0]) if margins.size else float("nan")
        risks = lobe_risks(f, mag2, margins, cand_f, cand_lo, n_risks, len(howl_freqs), howl_freq_hz) if n_risks else ()
        o = np.argsort(cand_f)
        return MarginResult(
            gain_margin_db=gain_margin_db,
            magnitude_margin_db=float(magnitude_margin_db),
            howl_freq_hz=howl_freq_hz,
            howl_freqs_hz=howl_freqs,
            risks=risks,
            crossings_freq_hz=cand_f[o],
            crossings_value=cand_r[o],
            sample_rate_hz=fs,
            band_hz=(lo, hi),
            gain_db=gdb,
            magnitude_peak_freq_hz=float(fpk),
            ring_decay_db_per_s=ring,
            group_delay_s=tau_g,
            n_fft=self.n_fft,
            dc_gain=self.dc * g,
        )

    def _loop_grid(self, g, sos, L, filters_on_grid):
        """(f, L on f): L on the zero-padded FFT grid inside the band, band edges exact."""
        lo, hi = self.band_hz
        f = self.f
        Lg = self.H if g == 1.0 else self.H * g  # (×1 changes no bit; skipped)
        if sos is not None and f.size:
            c = _sos_response(sos, f, self.fs) if filters_on_grid is None else np.asarray(filters_on_grid)
            if c.shape != f.shape:
                raise InputError(f"must hold the filters' response on the grid ({f.size} points), got shape "
                                 f"{c.shape}", key="filters_on_grid")
            Lg = Lg * c
        if Lg is self.H:
            Lg = Lg.copy()
        # band edges evaluated exactly (L includes the filters)
        if f.size == 0 or f[0] > lo:
            f = np.concatenate([[lo], f])
            Lg = np.concatenate([L(lo), Lg])
        if f[-1] < hi:
            f = np.concatenate([f, [hi]])
            Lg = np.concatenate([Lg, L(hi)])
        for e in (0, -1):  # a real IR has a real transfer at DC and Nyquist
            if f[e] == 0.0 or f[e] == self.fs / 2.0:
                Lg[e] = Lg[e].real
        return f, Lg


def _worst_crossing(L, cand_f, cand_r, cand_lo, tie_db):
    """Crossings sorted worst first, their margins (dB), the tied howl frequencies, and the ring-down
    rate and group delay at the worst one (NaN without a crossing)."""
    if not cand_r.size:
        return cand_f, cand_r, cand_lo, np.zeros(0), (), float("nan"), float("nan")
    o = np.argsort(-cand_r)
    cand_f, cand_r, cand_lo = cand_f[o], cand_r[o], cand_lo[o]
    margins = -db(cand_r)
    tie = margins <= margins[0] + tie_db
    howl_freqs = tuple(float(x) for x in cand_f[tie][:MAX_TIES])
    # ring-down prediction at the howl frequency
    v, dv = L.with_deriv(float(cand_f[0]))
    dln = complex(dv[0] / v[0]) / (2.0 * np.pi)  # d ln L / dω, ω in rad/s
    return cand_f, cand_r, cand_lo, margins, howl_freqs, ring_decay_rate_db_per_s(float(margins[0]), dln), float(-dln.imag)


def _crossings(L, f, re, im, n_risks, tol_hz):
    """Positive real-axis crossings (frequency, value, grid index of the bracket start): sign changes
    of Im L with Re L > 0 and exact real points; the worst (top ``n_risks`` and all within 1 dB of
    the coarse best, up to 512) refined by :func:`_refine_crossings`."""
    pos = im > 0
    neg = im < 0
    iv = np.flatnonzero((pos[:-1] & neg[1:]) | (neg[:-1] & pos[1:]))
    iv = iv[(re[iv] > 0) | (re[iv + 1] > 0)]
    t = im[iv] / (im[iv] - im[iv + 1])
    fc = f[iv] + t * (f[iv + 1] - f[iv])
    rc = re[iv] + t * (re[iv + 1] - re[iv])
    ex = np.flatnonzero((im == 0.0) & (re > 0))
    cand_f = np.concatenate([fc, f[ex]])
    cand_r = np.concatenate([rc, re[ex]])
    cand_lo = np.concatenate([iv, ex])  # grid index of the bracket start (for lobes)
    n_iv = iv.size
    order = np.argsort(-cand_r)
    n_ref = 0
    if cand_r.size:
        best = cand_r[order[0]]
        close = int(np.count_nonzero(cand_r >= best * from_db(-1.0))) if best > 0 else 1
        n_ref = min(cand_r.size, max(n_risks, close, 1), 512)
    cand_f = cand_f.copy()
    cand_r = cand_r.copy()
    j = order[:n_ref]
    j = j[j < n_iv]  # exact real points need no refinement
    if j.size:
        i = iv[j]
        x, v = _refine_crossings(L, f[i], f[i + 1], im[i], im[i + 1], cand_f[j], tol_hz)
        cand_f[j] = x
        cand_r[j] = v.real
    keep = cand_r > 0
    return cand_f[keep], cand_r[keep], cand_lo[keep]


def _magnitude_peak(L, f, mag2):
    """(frequency, |L|) of the global maximum of |L| in the band: parabolic interpolation of |L| in dB
    on the grid, kept if the exact value there is higher."""
    ipk = int(np.argmax(mag2))
    fpk, mpk = float(f[ipk]), float(np.sqrt(mag2[ipk]))
    if 0 < ipk < mag2.size - 1 and f[ipk + 1] - f[ipk - 1] > 0:
        y0, y1, y2 = 10.0 * np.log10(np.maximum(mag2[ipk - 1 : ipk + 2], 1e-300))
        den = y0 - 2 * y1 + y2
        if den < 0:
            off = 0.5 * (y0 - y2) / den
            fx = f[ipk] + off * (f[ipk + 1] - f[ipk])
            mx = float(np.abs(L(fx))[0])
            if mx > mpk:
                fpk, mpk = float(fx), mx
    return fpk, mpk


def warn_ir(ir, sample_rate_hz) -> None:
    """Issue :func:`ir_warnings` as :class:`~howl.errors.HowlWarning` warnings."""
    for msg in ir_warnings(np.asarray(ir, dtype=float), float(sample_rate_hz)):
        warnings.warn(msg, HowlWarning, stacklevel=2)
