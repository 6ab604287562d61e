"""Loop gain per fractional-octave band (private; re-exported by :mod:`howl.loop.nyquist`).

Split out of ``nyquist.py`` to keep that module short.
"""

from __future__ import annotations

import numpy as np

from howl.bands import band_centres_hz, band_edges_hz


def band_loop_gain_db(freq_hz, H, centres_hz, fraction) -> np.ndarray:
    """Broadband loop gain per fractional-octave band: 10·log10 of the mean |H|² in each band.

    On a uniform frequency grid the mean of |H|² over the band is the power
    average (Parseval). Band edges per IEC 61260-1:2014 (base 10, :func:`howl.bands.band_edges_hz`).
    Bands with no grid point get NaN.
    """
    f = np.asarray(freq_hz, dtype=float)
    p = np.abs(np.asarray(H)) ** 2
    lo, hi = band_edges_hz(np.atleast_1d(np.asarray(centres_hz, dtype=float)), int(fraction))
    out = np.full(np.size(lo), np.nan)
    a = np.searchsorted(f, lo, side="left")
    b = np.searchsorted(f, hi, side="left")
    cs = np.concatenate([[0.0], np.cumsum(p)])
    for i, (ia, ib) in enumerate(zip(a, b)):
        if ib > ia:
            out[i] = 10.0 * np.log10(max((cs[ib] - cs[ia]) / (ib - ia), 1e-300))
    return out


def third_octave_loop_gain(freq_hz, H, band_hz) -> tuple[np.ndarray, np.ndarray]:
    """1/3-octave centres inside ``band_hz`` (≥ 20 Hz) and the loop gain per band (dB)."""
    lo = max(float(band_hz[0]), 20.0)
    hi = float(band_hz[1])
    c = np.asarray(band_centres_hz(3, lo, hi), dtype=float)
    return c, band_loop_gain_db(freq_hz, H, c, 3)
