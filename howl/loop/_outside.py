"""What an analysis band leaves out: the loop's worst crossing outside it.

``howl margin --band-hz LO HI`` reports the margin inside the band. A loop does not howl
only where the user looks: a crossing outside the band (DC through a coupled path, a
high-frequency one above a tweeter's band) can be worse than the one reported. This module
finds the worst positive real-axis crossing of the whole loop (0 .. fs/2) and says whether
it lies outside the band and is worse than the band's.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from howl.loop.nyquist import mimo_margin, nyquist_margin

#: Two margins closer than this (dB) count as equal (rounding of the exact DTFT refinement).
EQUAL_DB = 1e-6


@dataclass(frozen=True)
class OutsideCrossing:
    """The worst crossing outside the band: its frequency and phase-aware margin."""

    freq_hz: float
    gain_margin_db: float


def worst_crossing_outside_band(
    ir, sample_rate_hz, band_hz, in_band_margin_db: float, *, gain_db=0.0, filters_sos=None
) -> OutsideCrossing | None:
    """The loop's worst crossing when it lies outside ``band_hz`` and is worse than the band's.

    Runs :func:`howl.loop.nyquist.nyquist_margin` over the whole file (0 .. fs/2); when its
    limiting crossing lies outside [LO, HI] and its margin is below ``in_band_margin_db``
    (``inf`` when the band has no crossing) by more than rounding (``EQUAL_DB``), returns it;
    otherwise ``None`` (a crossing outside that only ties with the band's leaves the reported
    margin right). Only the worst crossing of the whole loop is needed: if it lies inside the
    band, no crossing outside can be worse than the band's.
    """
    full = nyquist_margin(ir, sample_rate_hz, gain_db=gain_db, filters_sos=filters_sos, n_risks=0)
    return _outside(full.gain_margin_db, full.howl_freq_hz, band_hz, in_band_margin_db)


def worst_mimo_crossing_outside_band(irs, mix_lin, sample_rate_hz, band_hz, in_band_margin_db: float):
    """The same for a loop of several speakers and mics (generalized Nyquist, :func:`mimo_margin`)."""
    full = mimo_margin(irs, mix_lin, sample_rate_hz)
    return _outside(full.gain_margin_db, full.howl_freq_hz, band_hz, in_band_margin_db)


def _outside(full_margin_db, full_freq_hz, band_hz, in_band_margin_db) -> OutsideCrossing | None:
    if not math.isfinite(full_margin_db):
        return None
    lo, hi = float(band_hz[0]), float(band_hz[1])
    f = float(full_freq_hz)
    if (f < lo or f > hi) and full_margin_db < in_band_margin_db - EQUAL_DB:
        return OutsideCrossing(f, float(full_margin_db))
    return None
