"""Fractional-octave bands: IEC 61260-1 base-10 exact frequencies and ISO 266 labels.

IEC 61260-1:2014 [1]_ (§5.2–5.4), base-10 system:

* octave ratio G = 10^(3/10), reference frequency f_r = 1000 Hz;
* band x of the 1/b-octave series has the exact mid-band frequency
  f_m = f_r · G^(x/b) for odd b, and f_m = f_r · G^((2x + 1)/(2b)) for even b;
* band edges f_1 = f_m · G^(−1/(2b)), f_2 = f_m · G^(+1/(2b)).

Nominal labels for octaves and one-third octaves are the ISO 266:1997 [2]_
preferred frequencies (the R10 series 1, 1.25, 1.6, 2, 2.5, 3.15, 4, 5, 6.3, 8
times a power of ten). For 1/6 to 1/24 octave there is no nominal series; we
label those with the exact frequency rounded to three significant figures.

References
----------
.. [1] IEC 61260-1:2014, *Electroacoustics — Octave-band and fractional-octave-band
   filters — Part 1: Specifications*.
.. [2] ISO 266:1997, *Acoustics — Preferred frequencies*.
"""

from __future__ import annotations

import math

import numpy as np

from howl.errors import InputError

#: Octave frequency ratio, base-10 system (IEC 61260-1:2014, §5.2).
G: float = 10.0 ** (3.0 / 10.0)
#: Reference frequency (IEC 61260-1:2014, §5.3).
F_REF_HZ: float = 1000.0
#: Band fractions supported (1/b octave).
FRACTIONS: tuple[int, ...] = (1, 3, 6, 12, 24)
#: Relative widening of the [f_lo, f_hi] range in :func:`band_centres_hz`.
RANGE_SLACK: float = 0.01
#: ISO 266 R10 mantissas (the preferred third-octave series, one decade).
_R10 = (1.0, 1.25, 1.6, 2.0, 2.5, 3.15, 4.0, 5.0, 6.3, 8.0)


def _check_fraction(fraction: int) -> int:
    if isinstance(fraction, bool) or not isinstance(fraction, (int, np.integer)) or int(fraction) not in FRACTIONS:
        raise InputError(f"must be one of {', '.join(map(str, FRACTIONS))}, got {fraction!r}", key="fraction")
    return int(fraction)


def _exponent(x: np.ndarray | int, b: int):
    # IEC 61260-1:2014 Eq. (2) (b odd) and Eq. (3) (b even)
    return np.asarray(x, dtype=float) / b if b % 2 else (2.0 * np.asarray(x, dtype=float) + 1.0) / (2.0 * b)


def band_index(freq_hz: float, fraction: int) -> int:
    """Index x of the 1/b-octave band whose exact centre is nearest to ``freq_hz`` (log scale)."""
    b = _check_fraction(fraction)
    if not (isinstance(freq_hz, (int, float, np.floating, np.integer)) and math.isfinite(freq_hz) and freq_hz > 0):
        raise InputError(f"must be a finite frequency > 0 Hz, got {freq_hz!r}", key="freq_hz")
    e = math.log(freq_hz / F_REF_HZ) / math.log(G) * b  # = x (odd b) or x + 1/2 (even b)
    return int(round(e)) if b % 2 else int(round(e - 0.5))


def exact_centre_hz(x: int | np.ndarray, fraction: int) -> np.ndarray | float:
    """Exact mid-band frequency of band(s) x (IEC 61260-1:2014, Eqs. 2–3)."""
    b = _check_fraction(fraction)
    out = F_REF_HZ * G ** _exponent(x, b)
    return float(out) if np.ndim(out) == 0 else out


def band_centres_hz(fraction: int, f_lo_hz: float, f_hi_hz: float) -> np.ndarray:
    """IEC 61260-1 base-10 exact mid-band frequencies with centres in [f_lo_hz, f_hi_hz].

    The limits are widened by 1 % (:data:`RANGE_SLACK`) so that nominal limits include their
    own band: ``band_centres_hz(3, 20, 20000)`` gives the 31 bands from the exact 19.95 Hz
    ("20") to 19953 Hz ("20k"), as the ISO 266 nominal range reads. ISO 266 nominal values
    differ from the exact base-10 centres by less than 1 %.
    """
    b = _check_fraction(fraction)
    for name, f in (("f_lo_hz", f_lo_hz), ("f_hi_hz", f_hi_hz)):
        if isinstance(f, bool) or not isinstance(f, (int, float, np.integer, np.floating)) or not (
            math.isfinite(f) and f > 0
        ):
            raise InputError(f"must be a finite frequency > 0 Hz, got {f!r}", key=name)
    if f_hi_hz < f_lo_hz:
        raise InputError(f"must be >= f_lo_hz ({f_lo_hz:g} Hz), got {f_hi_hz:g} Hz", key="f_hi_hz")
    lg = math.log(G)
    off = 0.0 if b % 2 else 0.5
    x_lo = math.ceil(math.log(f_lo_hz / (1 + RANGE_SLACK) / F_REF_HZ) / lg * b - off)
    x_hi = math.floor(math.log(f_hi_hz * (1 + RANGE_SLACK) / F_REF_HZ) / lg * b - off)
    if x_hi < x_lo:
        return np.zeros(0)
    return F_REF_HZ * G ** _exponent(np.arange(x_lo, x_hi + 1), b)


def band_edges_hz(centres_hz: np.ndarray, fraction: int) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper band-edge frequencies f_m·G^(∓1/(2b)) (IEC 61260-1:2014, Eqs. 4–5)."""
    b = _check_fraction(fraction)
    fm = np.asarray(centres_hz, dtype=float)
    k = G ** (1.0 / (2.0 * b))
    return fm / k, fm * k


def _fmt_hz(value: float) -> str:
    if value >= 1000.0:
        s = f"{value / 1000.0:.3g}"
        return f"{float(s):g}k"
    s = f"{value:.3g}"
    return f"{float(s):g}"


def nominal_hz(freq_hz: float, fraction: int) -> float:
    """ISO 266 nominal frequency of the octave or third-octave band nearest ``freq_hz``."""
    b = _check_fraction(fraction)
    if b not in (1, 3):
        raise InputError(f"ISO 266 nominal frequencies exist for octaves and thirds only, got 1/{b}",
                         key="fraction")
    x = band_index(freq_hz, b)
    n = x if b == 3 else 3 * x  # octave x == third-octave 3x (base-10 exact centres coincide)
    decade, k = divmod(n, 10)
    return _R10[k] * 10.0 ** (3 + decade)


def nominal_label(freq_hz: float, fraction: int) -> str:
    """Label of the band nearest ``freq_hz``: ISO 266 nominal for 1/1 and 1/3 ("1k", "31.5",
    "2.5k"); for 1/6..1/24 the exact centre rounded to three significant figures ("1.06k")."""
    b = _check_fraction(fraction)
    if b in (1, 3):
        return _fmt_hz(nominal_hz(freq_hz, b))
    return _fmt_hz(exact_centre_hz(band_index(freq_hz, b), b))
