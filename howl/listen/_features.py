"""Howling-detection features on spectra and level tracks, and the ring-down margin (private:
re-exported by :mod:`howl.detect`; the references [1]_ … [4]_ are listed there).

.. [1] T. van Waterschoot, M. Moonen, JAES 58(11), 2010 (the features).
.. [3] J. O. Smith, X. Serra, Proc. ICMC 1987 (quadratic interpolation of log-magnitude peaks).
.. [4] M. Gasior, J. L. Gonzalez, AIP Conf. Proc. 732, 276, 2004 (Gaussian window).
"""

from __future__ import annotations

import numpy as np

from howl import validate as v

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
