"""The desk sheet's own rules and number formats (private; re-exported by :mod:`howl.report.sheet`):
the only numbers the sheet forms itself (the measured "don't go past" mark and a measured loop's verdict
words) and the one place the page and the tests take their rounding from."""

from __future__ import annotations

import math
from typing import Any

MINUS = "\u2212"  # typographic minus sign on the page


# ----------------------------------------------------------------------------
# Rules of the sheet (the only numbers it forms itself)
# ----------------------------------------------------------------------------


def measured_mark_db(gain_margin_db: float, magnitude_margin_db: float, fsm_db: float) -> float:
    """The "don't go past" channel-gain change for a measured loop, in dB.

    The lower of two limits:

    * the phase-aware (Nyquist) margin less the feedback stability margin
      FSM: the fader stays FSM below the gain at which the frozen loop
      would howl [4]_;
    * the phase-blind margin −20·log10 max|H|: the gain at which the loudest
      peak of |H| would reach unity if the room's phase moved onto it (air
      temperature, people moving). A rise above it is a bet on the phase.

    Positive: the channel may rise that far above the measured settings;
    negative: bring it down at least that far.
    """
    return min(gain_margin_db - fsm_db, magnitude_margin_db)


def measured_verdict(gain_margin_db: float, magnitude_margin_db: float, fsm_db: float) -> str:
    """Verdict words for a measured loop at its measured settings.

    ``"will howl"`` when the phase-aware margin is ≤ 0 dB (the loop is
    unstable as measured), ``"marginal"`` when it is stable but the
    "don't go past" mark (:func:`measured_mark_db`) is below 0 dB, else
    ``"stable"``.
    """
    if gain_margin_db <= 0.0:
        return "will howl"
    if measured_mark_db(gain_margin_db, magnitude_margin_db, fsm_db) < 0.0:
        return "marginal"
    return "stable"


def _f(x: Any) -> float | None:
    if x is None:
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _pair(x: Any) -> tuple[float, float] | None:
    if isinstance(x, (list, tuple)) and len(x) == 2:
        a, b = _f(x[0]), _f(x[1])
        if a is not None and b is not None:
            return (a, b)
    return None


# ----------------------------------------------------------------------------
# Number formats (one place, so the page and the tests agree on rounding)
# ----------------------------------------------------------------------------


def _num(x: float | None, digits: int = 1, sign: bool = True) -> str:
    """dB value with one decimal, a typographic minus and (optionally) a plus."""
    if x is None or not math.isfinite(x):
        return "\u2013"
    s = f"{x:+.{digits}f}" if sign else f"{x:.{digits}f}"
    if s.lstrip("+-").strip("0.") == "":  # -0.0 → 0.0
        s = f"{0.0:+.{digits}f}" if sign else f"{0.0:.{digits}f}"
    return s.replace("-", MINUS)


def _hz(freq_hz: float | None, exact: bool = False) -> str:
    """A frequency: exact Hz (measured, cuts) or 3 significant figures (bands)."""
    if freq_hz is None or not math.isfinite(freq_hz):
        return "\u2013"
    if exact:
        return f"{freq_hz:.1f} Hz" if freq_hz < 100 else f"{freq_hz:.0f} Hz"
    if freq_hz >= 1000:
        return f"{freq_hz / 1000:.3g} kHz"
    return f"{freq_hz:.3g} Hz"


def _band_hz(freq_hz: float | None) -> str:
    """A planner band by its nominal label (ISO 266 for octaves and thirds)."""
    if freq_hz is None or not math.isfinite(freq_hz):
        return "\u2013"
    try:
        from howl.bands import nominal_label

        lab = nominal_label(freq_hz, 3)
        return f"{lab[:-1]} kHz" if lab.endswith("k") else f"{lab} Hz"
    except Exception:  # bands module missing or label refused: plain figures
        return _hz(freq_hz)
