"""dB and linear helpers, the speed of sound, and constants with their sources.

One place for every physical constant so that no two modules drift apart
(two speeds of sound in one program give two sets of howl frequencies).
"""

from __future__ import annotations

import numpy as np

#: Reference sound pressure for SPL, 20 µPa (ISO 1683:2015, also IEC 60050-801).
P_REF_PA = 20e-6

#: 0 °C in kelvin.
T0_K = 273.15

#: Ratio of specific heats of air and its specific gas constant, used in
#: c = sqrt(gamma * R_specific * T) (ideal gas; e.g. Kinsler et al.,
#: *Fundamentals of Acoustics*, 4th ed., §5.6 — from memory).
GAMMA_AIR = 1.4
R_SPECIFIC_AIR_J_PER_KG_K = 287.05


def speed_of_sound_m_s(temperature_c: float | np.ndarray = 20.0) -> float | np.ndarray:
    """Speed of sound in dry air, ideal-gas model.

    c = sqrt(gamma * R * T). At 20 °C this gives 343.2 m/s, the usual handbook
    value (343 m/s at 20 °C, common practice, no source).
    """
    t_k = np.asarray(temperature_c, dtype=float) + T0_K
    c = np.sqrt(GAMMA_AIR * R_SPECIFIC_AIR_J_PER_KG_K * t_k)
    return float(c) if np.ndim(c) == 0 else c


def db(x_lin: float | np.ndarray, floor_lin: float = 1e-300) -> float | np.ndarray:
    """Amplitude ratio to dB: 20·log10(|x|), floored so zero gives a big negative, not -inf."""
    out = 20.0 * np.log10(np.maximum(np.abs(np.asarray(x_lin, dtype=float)), floor_lin))
    return float(out) if np.ndim(out) == 0 else out


def power_db(p_lin: float | np.ndarray, floor_lin: float = 1e-300) -> float | np.ndarray:
    """Power ratio to dB: 10·log10(p)."""
    out = 10.0 * np.log10(np.maximum(np.asarray(p_lin, dtype=float), floor_lin))
    return float(out) if np.ndim(out) == 0 else out


def from_db(x_db: float | np.ndarray) -> float | np.ndarray:
    """dB to amplitude ratio: 10**(x/20)."""
    out = 10.0 ** (np.asarray(x_db, dtype=float) / 20.0)
    return float(out) if np.ndim(out) == 0 else out


def from_power_db(x_db: float | np.ndarray) -> float | np.ndarray:
    """dB to power ratio: 10**(x/10)."""
    out = 10.0 ** (np.asarray(x_db, dtype=float) / 10.0)
    return float(out) if np.ndim(out) == 0 else out


def temperature_frequency_ratio(temperature_c: float, swing_c: float) -> float:
    """How far a howl frequency moves when the air warms by ``swing_c``.

    Loop phase is 2π·f·d/c for an acoustic path d, so a given phase (and the
    frequency of a given crossing) scales with c: f' / f = c(T+ΔT) / c(T).
    Derived from the ideal-gas speed of sound (first principles).
    """
    return speed_of_sound_m_s(temperature_c + swing_c) / speed_of_sound_m_s(temperature_c)
