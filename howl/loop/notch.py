"""Notch and peaking-cut biquads for feedback control (RBJ Audio EQ Cookbook).

A feedback cut in howl is a :class:`Notch`: a centre frequency, a depth and a
Q. ``gain_db=None`` means a full notch (the cookbook's *notch*, zero at the
centre); a finite negative ``gain_db`` means the cookbook's *peakingEQ* with
that gain (a cut that reaches exactly ``gain_db`` at the centre and returns to
0 dB far away). The ``q`` is always the cookbook's Q for that filter type, so
anyone can rebuild the exact filter from (freq_hz, gain_db, q) and a sample
rate with the formulas of [1]_.

Bandwidth in octaves
--------------------
:func:`bandwidth_oct_from_q` and :func:`q_from_bandwidth_oct` use the
cookbook's **analog** relation ``1/Q = 2·sinh(ln2/2 · BW)`` [1]_, which does
not depend on the sample rate. For the notch, BW spans the −3 dB points; for
the peakingEQ, BW spans the points where the cut is half its dB depth
(``gain_db/2``), as the cookbook defines it. A digital filter built with the
Q case (``alpha = sin(w0)/(2Q)``) is slightly narrower than BW near Nyquist
(bilinear-transform warping, factor ≈ sin(w0)/w0); below fs/8 the difference
is under 3 %.

References
----------
.. [1] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note,
       8 June 2021, https://www.w3.org/TR/audio-eq-cookbook/ (notch and
       peakingEQ coefficients, alpha for the Q and BW cases, Q↔BW).
.. [2] Speed of sound from air temperature: ideal gas, see
       :func:`howl.units.temperature_frequency_ratio`.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from howl import validate as v
from howl.errors import InputError
from howl.units import temperature_frequency_ratio

#: The widest cut howl calls a notch (octaves). A wider need is a broad-EQ or
#: placement problem (common practice, no source).
MAX_NOTCH_BANDWIDTH_OCT = 1.0 / 3.0

#: Narrowest cut :func:`suggest_cut` proposes when the peak's own width is not
#: known (octaves, Q ≈ 34.6): about the narrowest a console parametric EQ sets
#: (common practice, no source).
MIN_NOTCH_BANDWIDTH_OCT = 1.0 / 24.0

#: Deepest peaking cut :func:`suggest_cut` proposes before it switches to a
#: full notch (dB; common practice, no source).
MAX_CUT_DEPTH_DB = 30.0


# --------------------------------------------------------------------------- Q and bandwidth

def q_from_bandwidth_oct(bw_oct: float) -> float:
    """Cookbook Q for a bandwidth in octaves, analog relation [1]_.

    ``1/Q = 2·sinh(ln2/2 · BW)``  ⇔  ``Q = sqrt(2**BW) / (2**BW − 1)``.
    (The cookbook's digital relation multiplies BW by ``w0/sin(w0)``; howl
    states bandwidths with the analog one, independent of the sample rate.)
    """
    bw = v.positive(bw_oct, "bandwidth_oct", unit="oct")
    return float(1.0 / (2.0 * math.sinh(math.log(2.0) / 2.0 * bw)))


def bandwidth_oct_from_q(q: float) -> float:
    """Bandwidth in octaves for a cookbook Q, analog relation [1]_.

    ``BW = (2/ln2)·asinh(1/(2Q))``, the inverse of :func:`q_from_bandwidth_oct`.
    """
    q = v.positive(q, "q")
    return float(2.0 / math.log(2.0) * math.asinh(1.0 / (2.0 * q)))


# --------------------------------------------------------------------------- the cut

@dataclass(frozen=True)
class Notch:
    """One feedback cut.

    Attributes
    ----------
    freq_hz: centre frequency.
    gain_db: ``None`` for a full RBJ notch; otherwise the RBJ peakingEQ gain,
        which must be < 0 (a cut).
    q: the cookbook Q of that filter type (notch or peakingEQ).
    """

    freq_hz: float
    gain_db: float | None
    q: float

    def __post_init__(self) -> None:
        v.positive(self.freq_hz, "freq_hz", unit="Hz")
        v.positive(self.q, "q")
        if self.gain_db is not None:
            v.in_range(self.gain_db, "gain_db", None, 0.0, unit="dB", hi_open=True)

    @property
    def bandwidth_oct(self) -> float:
        """Bandwidth in octaves from ``q`` (analog cookbook relation).

        Between the −3 dB points for a full notch, between the ``gain_db/2``
        points for a peaking cut.
        """
        return bandwidth_oct_from_q(self.q)

    @property
    def is_full_notch(self) -> bool:
        return self.gain_db is None

    def band_edges_hz(self) -> tuple[float, float]:
        """Lower and upper band edges, f0·2^(∓BW/2) (analog, geometric symmetry)."""
        half = 2.0 ** (self.bandwidth_oct / 2.0)
        return self.freq_hz / half, self.freq_hz * half


# --------------------------------------------------------------------------- coefficients

def _w0_alpha(freq_hz: float, q: float, sample_rate_hz: float) -> tuple[float, float]:
    fs = v.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    f0 = v.in_range(freq_hz, "freq_hz", 0.0, fs / 2.0, unit="Hz", lo_open=True, hi_open=True)
    q = v.positive(q, "q")
    w0 = 2.0 * math.pi * f0 / fs  # [1] w0 = 2π f0/Fs
    return w0, math.sin(w0) / (2.0 * q)  # [1] alpha, Q case


def rbj_notch_sos(freq_hz: float, q: float, sample_rate_hz: float) -> np.ndarray:
    """RBJ cookbook notch as one second-order section, shape (1, 6).

    ``b = [1, −2cos w0, 1]``, ``a = [1+α, −2cos w0, 1−α]``, normalised by a0,
    ``α = sin(w0)/(2Q)`` [1]_.
    """
    w0, alpha = _w0_alpha(freq_hz, q, sample_rate_hz)
    c = math.cos(w0)
    a0 = 1.0 + alpha
    return np.array([[1.0 / a0, -2.0 * c / a0, 1.0 / a0, 1.0, -2.0 * c / a0, (1.0 - alpha) / a0]])


def rbj_peaking_sos(freq_hz: float, gain_db: float, q: float, sample_rate_hz: float) -> np.ndarray:
    """RBJ cookbook peakingEQ as one second-order section, shape (1, 6).

    ``A = 10^(gain/40)``; ``b = [1+αA, −2cos w0, 1−αA]``,
    ``a = [1+α/A, −2cos w0, 1−α/A]``, normalised by a0 [1]_. The response at
    the centre is exactly ``gain_db``.
    """
    w0, alpha = _w0_alpha(freq_hz, q, sample_rate_hz)
    g = v.number(gain_db, "gain_db", unit="dB")
    big_a = 10.0 ** (g / 40.0)  # [1] A = 10^(dBgain/40)
    c = math.cos(w0)
    a0 = 1.0 + alpha / big_a
    return np.array([[
        (1.0 + alpha * big_a) / a0, -2.0 * c / a0, (1.0 - alpha * big_a) / a0,
        1.0, -2.0 * c / a0, (1.0 - alpha / big_a) / a0,
    ]])


def notch_sos(notch: Notch, sample_rate_hz: float) -> np.ndarray:
    """The section (1, 6) of one cut at ``sample_rate_hz``."""
    if notch.gain_db is None:
        return rbj_notch_sos(notch.freq_hz, notch.q, sample_rate_hz)
    return rbj_peaking_sos(notch.freq_hz, notch.gain_db, notch.q, sample_rate_hz)


def cascade_sos(notches: Iterable[Notch], sample_rate_hz: float) -> np.ndarray:
    """All cuts as one SOS array (n, 6); an empty cascade is shape (0, 6)."""
    rows = [notch_sos(n, sample_rate_hz) for n in notches]
    if not rows:
        return np.zeros((0, 6))
    return np.vstack(rows)


#: Grids at least this long keep their cascade responses (see :func:`sos_response`).
SOS_CACHE_MIN_POINTS = 8192
_SOS_CACHE_ENTRIES = 10
_sos_cache: dict = {}


def _grid_key(f: np.ndarray, fs: float) -> tuple:
    import hashlib

    return (f.size, float(fs), hashlib.blake2b(np.ascontiguousarray(f).tobytes(), digest_size=16).digest())


def grid_trig(f: np.ndarray, fs: float) -> tuple[np.ndarray, ...]:
    """(cos w, sin w, cos 2w, sin 2w) at w = 2πf/fs: what :func:`sections_response_trig` needs
    (computed once per grid, it makes each further section cost a few array operations)."""
    w = (2.0 * np.pi / float(fs)) * np.asarray(f, dtype=float)
    c1, s1 = np.cos(w), np.sin(w)
    return c1, s1, 2.0 * c1 * c1 - 1.0, 2.0 * s1 * c1


def _sections_response(sos: np.ndarray, f: np.ndarray, fs: float) -> np.ndarray:
    """Product of the sections' responses, real arithmetic (see :func:`sos_response`)."""
    return sections_response_trig(sos, grid_trig(f, fs))


def sections_response_trig(sos: np.ndarray, trig: tuple[np.ndarray, ...]) -> np.ndarray:
    """Product of the SOS sections' responses on a grid given by :func:`grid_trig`.

    Bit for bit what :func:`sos_response` gives on that grid for the same sections (the same
    real arithmetic), so a caller that grows a cascade one section at a time on a long grid
    (``prev * sections_response_trig(sos[j:j+1], trig)``) gets exactly its cached products.
    """
    c1, s1, c2, s2 = trig
    nr = ni = dr = di = None
    for b0, b1, b2, a0, a1, a2 in sos:
        xr, xi = b0 + b1 * c1 + b2 * c2, -(b1 * s1 + b2 * s2)
        yr, yi = a0 + a1 * c1 + a2 * c2, -(a1 * s1 + a2 * s2)
        if nr is None:
            nr, ni, dr, di = xr, xi, yr, yi
        else:
            nr, ni = nr * xr - ni * xi, nr * xi + ni * xr
            dr, di = dr * yr - di * yi, dr * yi + di * yr
    den = dr * dr + di * di
    out = np.empty(c1.shape, dtype=complex)
    out.real = (nr * dr + ni * di) / den
    out.imag = (ni * dr - nr * di) / den
    return out


def section_response_into(row, trig: tuple[np.ndarray, ...], work: list, out: np.ndarray) -> np.ndarray:
    """One SOS section's response written into ``out`` (complex, the grid's shape), with seven float
    ``work`` arrays of that shape: the same operations, in the same order, as
    :func:`sections_response_trig` for that one section (so the same bits), without allocating the
    grid-sized temporaries (on a 262 144-point grid the fresh pages cost more than the arithmetic).
    """
    c1, s1, c2, s2 = trig
    b0, b1, b2, a0, a1, a2 = (np.float64(x) for x in row)
    xr, xi, yr, yi, t, u, v = work
    np.multiply(b1, c1, out=xr)
    np.multiply(b2, c2, out=t)
    np.add(b0, xr, out=xr)
    np.add(xr, t, out=xr)  # b0 + b1·c1 + b2·c2
    np.multiply(b1, s1, out=xi)
    np.multiply(b2, s2, out=t)
    np.add(xi, t, out=xi)
    np.negative(xi, out=xi)  # −(b1·s1 + b2·s2)
    np.multiply(a1, c1, out=yr)
    np.multiply(a2, c2, out=t)
    np.add(a0, yr, out=yr)
    np.add(yr, t, out=yr)
    np.multiply(a1, s1, out=yi)
    np.multiply(a2, s2, out=t)
    np.add(yi, t, out=yi)
    np.negative(yi, out=yi)
    np.multiply(yr, yr, out=t)
    np.multiply(yi, yi, out=u)
    np.add(t, u, out=t)  # den = dr·dr + di·di
    den = t
    np.multiply(xr, yr, out=u)
    np.multiply(xi, yi, out=v)
    np.add(u, v, out=u)
    np.divide(u, den, out=u)  # (nr·dr + ni·di)/den
    out.real = u
    np.multiply(xi, yr, out=u)
    np.multiply(xr, yi, out=v)
    np.subtract(u, v, out=u)
    np.divide(u, den, out=u)  # (ni·dr − nr·di)/den
    out.imag = u
    return out


def sos_response(sos: np.ndarray, freq_hz: np.ndarray, sample_rate_hz: float) -> np.ndarray:
    """Complex response of an SOS cascade at arbitrary frequencies.

    Evaluates each section's ``B(z)/A(z)`` at ``z = exp(j·2π f/fs)`` directly
    (the same as ``scipy.signal.sosfreqz(sos, worN=freq_hz, fs=fs)``, without
    its per-call overhead), in real arithmetic on cos/sin of w and 2w.

    On long grids (:data:`SOS_CACHE_MIN_POINTS` points or more) the response of every
    leading run of sections is kept (the last few), so a cascade that grows one cut at a time
    (the ring-out's exact margin after each step) costs one section per step, not all of them.
    """
    f = np.asarray(freq_hz, dtype=float)
    sos = np.atleast_2d(np.asarray(sos, dtype=float))
    if sos.size == 0:
        return np.ones(f.shape, dtype=complex)
    fs = float(sample_rate_hz)
    if f.ndim != 1 or f.size < SOS_CACHE_MIN_POINTS:
        return _sections_response(sos, f, fs)
    grid = _grid_key(f, fs)
    rows = tuple(tuple(float(x) for x in r) for r in sos)
    k = len(rows)
    while k > 0 and (grid, rows[:k]) not in _sos_cache:
        k -= 1
    out = _sos_cache[(grid, rows[:k])].copy() if k else None
    for j in range(k, len(rows)):
        c = _sections_response(sos[j : j + 1], f, fs)
        out = c if out is None else out * c
        if len(_sos_cache) >= _SOS_CACHE_ENTRIES:
            _sos_cache.pop(next(iter(_sos_cache)))
        _sos_cache[(grid, rows[: j + 1])] = out.copy()
    return out


def cascade_response(notches: Iterable[Notch], freq_hz: np.ndarray, sample_rate_hz: float) -> np.ndarray:
    """Complex response of the cascade of ``notches`` at ``freq_hz`` (any frequencies)."""
    return sos_response(cascade_sos(list(notches), sample_rate_hz), freq_hz, sample_rate_hz)


# --------------------------------------------------------------------------- analog prototypes

def analog_response(notch: Notch, freq_ratio: np.ndarray | float) -> np.ndarray:
    """Response of the cut's analog prototype at ``f/f0`` (no sample rate).

    Notch ``(s²+1)/(s²+s/Q+1)``; peakingEQ ``(s²+s·A/Q+1)/(s²+s/(A·Q)+1)`` [1]_,
    with ``s = j·f/f0``. Used where no sample rate is given (suggestions for a
    console); the digital filter matches it closely below fs/8.
    """
    s = 1j * np.asarray(freq_ratio, dtype=float)
    if notch.gain_db is None:
        return (s * s + 1.0) / (s * s + s / notch.q + 1.0)
    big_a = 10.0 ** (notch.gain_db / 40.0)
    return (s * s + s * big_a / notch.q + 1.0) / (s * s + s / (big_a * notch.q) + 1.0)


# --------------------------------------------------------------------------- drift, suggestion, merging

def drift_bandwidth_oct(temperature_c: float = 20.0, swing_c: float = 3.0) -> float:
    """Width in octaves of the band a howl frequency wanders over for ±``swing_c``.

    A crossing's frequency scales with the speed of sound, f'/f = c(T+ΔT)/c(T)
    (:func:`howl.units.temperature_frequency_ratio`), so over T−swing…T+swing
    it spans ``log2(c(T+s)/c(T−s))`` octaves (about 0.0148 oct at 20 ± 3 °C).
    """
    t = v.in_range(temperature_c, "temperature_c", -50.0, 60.0, unit="°C")
    s = v.in_range(swing_c, "swing_c", 0.0, 30.0, unit="°C")
    up = temperature_frequency_ratio(t, s)
    down = temperature_frequency_ratio(t, -s)
    return float(math.log2(up / down))


def _depth_at(notch: Notch, ratio: float) -> float:
    """Attenuation in dB (positive) of the analog prototype at f/f0 = ratio."""
    return float(-20.0 * np.log10(max(abs(complex(analog_response(notch, ratio))), 1e-300)))


def suggest_cut(
    freq_hz: float,
    needed_db: float,
    peak_bandwidth_oct: float | None = None,
    temperature_c: float = 20.0,
    swing_c: float = 3.0,
) -> Notch:
    """The shallowest cut that takes ``needed_db`` off a peak wherever it drifts.

    Width: the peak's own bandwidth plus the temperature drift band
    (:func:`drift_bandwidth_oct`), at least :data:`MIN_NOTCH_BANDWIDTH_OCT`
    and capped at 1/3 octave. Depth: the smallest peakingEQ cut whose analog
    response is at least ``needed_db`` down over the whole drift band
    (f0·2^(±drift/2)); if that needs more than :data:`MAX_CUT_DEPTH_DB`, a
    full notch of the same width.

    Parameters
    ----------
    freq_hz: the peak (howl) frequency.
    needed_db: how much the loop must come down there (> 0 dB).
    peak_bandwidth_oct: the peak's own −3 dB width in octaves, if known.
    temperature_c, swing_c: air temperature and the swing to cover.
    """
    f0 = v.positive(freq_hz, "freq_hz", unit="Hz")
    need = v.positive(needed_db, "needed_db", unit="dB")
    drift = drift_bandwidth_oct(temperature_c, swing_c)
    peak_bw = 0.0 if peak_bandwidth_oct is None else v.in_range(peak_bandwidth_oct, "peak_bandwidth_oct", 0.0, None, unit="oct")
    bw = min(max(peak_bw + drift, MIN_NOTCH_BANDWIDTH_OCT), MAX_NOTCH_BANDWIDTH_OCT)
    q = q_from_bandwidth_oct(bw)
    edge = 2.0 ** (drift / 2.0)

    def reaches(g: float) -> bool:
        return _depth_at(Notch(f0, g, q), edge) >= need

    if not reaches(-MAX_CUT_DEPTH_DB):
        return Notch(f0, None, q)
    lo, hi = -MAX_CUT_DEPTH_DB, -min(need, MAX_CUT_DEPTH_DB) * 0.999  # hi may not reach; lo does
    if reaches(hi):
        return Notch(f0, float(hi), q)
    for _ in range(60):  # bisection on the depth, to 1e-6 dB
        mid = 0.5 * (lo + hi)
        if reaches(mid):
            lo = mid
        else:
            hi = mid
        if hi - lo < 1e-6:
            break
    return Notch(f0, float(lo), q)


def _merged_pair(a: Notch, b: Notch, sample_rate_hz: float, max_bw: float) -> Notch | None:
    lo = min(a.band_edges_hz()[0], b.band_edges_hz()[0])
    hi = max(a.band_edges_hz()[1], b.band_edges_hz()[1])
    bw = math.log2(hi / lo)
    if bw > max_bw + 1e-12:
        return None
    fc = math.sqrt(lo * hi)
    q = q_from_bandwidth_oct(bw)
    if a.gain_db is None or b.gain_db is None:
        return Notch(fc, None, q)
    # Depth: at least as deep, at each original centre, as the pair was there.
    centres = np.array([a.freq_hz, b.freq_hz])
    want_db = 20.0 * np.log10(np.abs(cascade_response([a, b], centres, sample_rate_hz)))
    g = min(a.gain_db, b.gain_db)
    while g >= -MAX_CUT_DEPTH_DB:
        got_db = 20.0 * np.log10(np.abs(cascade_response([Notch(fc, g, q)], centres, sample_rate_hz)))
        if np.all(got_db <= want_db + 1e-3):
            return Notch(fc, float(g), q)
        g -= 0.25
    return Notch(fc, None, q)


def merge_notches(
    notches: Sequence[Notch], sample_rate_hz: float, max_bandwidth_oct: float = MAX_NOTCH_BANDWIDTH_OCT
) -> list[Notch]:
    """Merge cuts closer than their widths into one wider cut.

    Two neighbours merge when their centres are closer (in octaves) than the
    mean of their bandwidths, i.e. their bands overlap. The merged cut spans
    both bands (centre at the geometric mean of the outer edges) and is at
    least as deep at each original centre as the pair was there (checked on
    the digital filters at ``sample_rate_hz``); a full notch merged with
    anything stays a full notch. A merge that would be wider than
    ``max_bandwidth_oct`` is not made: both cuts stay. Returned sorted by
    frequency.
    """
    fs = v.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    cap = v.positive(max_bandwidth_oct, "max_bandwidth_oct", unit="oct")
    items = sorted(notches, key=lambda n: n.freq_hz)
    for n in items:
        if not isinstance(n, Notch):
            raise InputError(f"must hold Notch objects, got {type(n).__name__}", key="notches")
    changed = True
    while changed:  # repeat: a merge can make a cut reach its next neighbour
        changed = False
        out: list[Notch] = []
        for n in items:
            if out:
                prev = out[-1]
                dist = math.log2(n.freq_hz / prev.freq_hz)
                if dist < (prev.bandwidth_oct + n.bandwidth_oct) / 2.0:
                    m = _merged_pair(prev, n, fs, cap)
                    if m is not None:
                        out[-1] = m
                        changed = True
                        continue
            out.append(n)
        items = out
    return items
