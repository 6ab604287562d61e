"""2·J1(x)/x, the far-field response of a rigid circular piston, without scipy.special."""

from __future__ import annotations

import numpy as np

#: Terms of the power series of 2·J1(x)/x and where it hands over to the large-argument expansion.
_PISTON_TERMS = 40
_PISTON_SERIES_MAX_X = 16.0


def piston_factor(x) -> np.ndarray:
    """2·J1(x)/x (1 at x = 0), the far-field response of a rigid circular piston.

    J1 without scipy.special (one Bessel function is not worth its import): the power
    series 2·J1(x)/x = Σ (−x²/4)^m / (m!·(m+1)!) up to x = 16 (the largest term is
    about 2·10⁴ there, so about 1e-11 absolute), and the large-argument expansion
    J1(x) ≈ √(2/(πx))·(P·cos χ − Q·sin χ), χ = x − 3π/4, beyond (Abramowitz & Stegun
    9.2.5, 9.2.9–10, two terms each: about 1e-8 absolute). The capsule's x stays below 9
    up to 48 kHz, well inside the series.
    """
    x = np.asarray(x, dtype=float)
    small = x <= _PISTON_SERIES_MAX_X
    z = -0.25 * np.where(small, x, 0.0) ** 2
    s = np.ones_like(z)
    for m in range(_PISTON_TERMS, 0, -1):  # Horner: 1 + z/(1·2)·(1 + z/(2·3)·(1 + ...))
        s = 1.0 + z / (m * (m + 1)) * s
    if np.all(small):
        return s
    xl = np.where(small, _PISTON_SERIES_MAX_X, x)
    y = 1.0 / (8.0 * xl) ** 2
    mu = 4.0  # 4·ν², ν = 1
    p = 1.0 - (mu - 1) * (mu - 9) / 2.0 * y * (1.0 - (mu - 25) * (mu - 49) / 12.0 * y)
    q = (mu - 1) / (8.0 * xl) * (1.0 - (mu - 9) * (mu - 25) / 6.0 * y)
    chi = xl - 0.75 * np.pi
    big = 2.0 * np.sqrt(2.0 / (np.pi * xl)) * (p * np.cos(chi) - q * np.sin(chi)) / xl
    return np.where(small, s, big)
