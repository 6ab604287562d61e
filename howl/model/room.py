"""Room acoustics on frozen rooms: reverberation, room constant, critical distance, air.

Pure functions on numbers and arrays, plus :func:`room_acoustics` that evaluates a
:class:`howl.rig.Room` at any frequencies.

Formulas (V volume, S surface, ᾱ mean absorption coefficient, A = S·ᾱ, c speed of sound,
m power attenuation coefficient of air in 1/m):

* Sabine [1]_: T = 24·ln10·V / (c·(A + 4mV))
* Eyring(-Norris) [2]_ [3]_: T = 24·ln10·V / (c·(−S·ln(1−ᾱ) + 4mV))
* room constant [4]_: R = S·ᾱ/(1−ᾱ)
* critical distance [4]_: D_c = sqrt(Q·R/(16π)) (room-constant form), and from the
  reverberation time D_c = sqrt(Q·A/(16π)) with A = 24·ln10·V/(c·T), i.e.
  ≈ 0.057·sqrt(Q·V/T) [5]_. The two differ by the factor sqrt(1−ᾱ).
* Schroeder frequency [6]_: f_S = 2000·sqrt(T/V)
* mean free path [5]_: 4V/S
* air absorption: ISO 9613-1:1993 [7]_, Eqs. (3)–(5) and Annex B.

References
----------
.. [1] W. C. Sabine, *Collected Papers on Acoustics* (Harvard University Press, 1922).
.. [2] C. F. Eyring, "Reverberation time in 'dead' rooms", J. Acoust. Soc. Am. 1, 217 (1930).
.. [3] IEC 60050-801:1994, IEV 801-31-09 (Eyring reverberation formula, (24 ln 10)V/(−cS ln(1−ᾱ))).
.. [4] H. F. Hopkins and N. R. Stryker, "A proposed loudness-efficiency rating for
   loudspeakers ...", Proc. IRE 36(3), 315–335 (1948); J. Eargle, *Electroacoustical
   Reference Data* (Springer, 1994), ch. 17.
.. [5] H. Kuttruff, *Room Acoustics*, 5th ed. (Spon, 2009), §4.1 and §5.1.
.. [6] M. R. Schroeder, "The 'Schroeder frequency' revisited", J. Acoust. Soc. Am. 99(5),
   3240–3241 (1996) (f_S = 2000·sqrt(T/V), T in s, V in m³).
.. [7] ISO 9613-1:1993, *Acoustics — Attenuation of sound during propagation outdoors —
   Part 1: Calculation of the absorption of sound by the atmosphere*.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from howl.errors import HowlWarning, InputError
from howl.model.rig import OCTAVE_BANDS_HZ, Room
from howl.units import T0_K, speed_of_sound_m_s

_LN10_24 = 24.0 * math.log(10.0)  # 55.262...: the Sabine constant times c

# ISO 9613-1:1993 reference atmosphere
_P_REF_KPA = 101.325  # reference ambient pressure
_T_REF_K = 293.15  # reference air temperature (20 °C)
_T01_K = 273.16  # triple-point isotherm temperature (Annex B)
_DB_PER_NEPER_POWER = 10.0 * math.log10(math.e)  # 4.343: α[dB/m] = 10·log10(e)·m


def _c(speed_of_sound_m_s: float | None) -> float:
    return speed_of_sound_m_s_default() if speed_of_sound_m_s is None else float(speed_of_sound_m_s)


def speed_of_sound_m_s_default() -> float:
    """Speed of sound at 20 °C from :func:`howl.units.speed_of_sound_m_s` (the one constant)."""
    return speed_of_sound_m_s(20.0)


# ------------------------------------------------------------------- air absorption ----

def air_attenuation_db_per_m(
    freq_hz, temperature_c: float = 20.0, humidity_pct: float = 50.0, pressure_kpa: float = 101.325
) -> np.ndarray:
    """Pure-tone attenuation coefficient of air α in dB/m (ISO 9613-1:1993).

    Implements Eq. (5) with the relaxation frequencies of oxygen, Eq. (3), and nitrogen,
    Eq. (4), and the molar concentration of water vapour from relative humidity by
    Annex B (Eqs. B.1–B.3). Stated accuracy ±10 % for −20..50 °C, h = 0.05..5 %,
    p < 200 kPa (ISO 9613-1, §7).
    """
    f = np.asarray(freq_hz, dtype=float)
    t = float(temperature_c) + T0_K
    pa = float(pressure_kpa)
    pr = pa / _P_REF_KPA
    # Annex B: saturation vapour pressure ratio psat/pr = 10^C, C = -6.8346 (T01/T)^1.261 + 4.6151
    c_exp = -6.8346 * (_T01_K / t) ** 1.261 + 4.6151
    h = float(humidity_pct) * (10.0**c_exp) / pr  # molar concentration of water vapour, % (Eq. B.1)
    tr = t / _T_REF_K
    fr_o = pr * (24.0 + 4.04e4 * h * (0.02 + h) / (0.391 + h))  # Eq. (3)
    fr_n = pr * tr ** (-0.5) * (9.0 + 280.0 * h * math.exp(-4.170 * (tr ** (-1.0 / 3.0) - 1.0)))  # Eq. (4)
    alpha = 8.686 * f**2 * (  # Eq. (5)
        1.84e-11 / pr * tr**0.5
        + tr ** (-2.5)
        * (
            0.01275 * math.exp(-2239.1 / t) / (fr_o + f**2 / fr_o)
            + 0.1068 * math.exp(-3352.0 / t) / (fr_n + f**2 / fr_n)
        )
    )
    return alpha


def air_power_attenuation_m_inv(
    freq_hz, temperature_c: float = 20.0, humidity_pct: float = 50.0, pressure_kpa: float = 101.325
) -> np.ndarray:
    """Energy attenuation coefficient of air m in 1/m: m = α / (10·log10 e) (α in dB/m, ISO 9613-1).

    The sound energy falls as exp(−m·d); the reverberation formulas add 4mV to the absorption area.
    """
    return air_attenuation_db_per_m(freq_hz, temperature_c, humidity_pct, pressure_kpa) / _DB_PER_NEPER_POWER


# -------------------------------------------------------------- reverberation time ----

def sabine_rt60_s(volume_m3, absorption_area_m2, air_m_inv=0.0, speed_of_sound_m_s=None):
    """Sabine: T = 24·ln10·V / (c·(A + 4mV)) [1]_ (air term per Kuttruff [5]_)."""
    v = np.asarray(volume_m3, dtype=float)
    a = np.asarray(absorption_area_m2, dtype=float) + 4.0 * np.asarray(air_m_inv, dtype=float) * v
    out = _LN10_24 * v / (_c(speed_of_sound_m_s) * a)
    return float(out) if np.ndim(out) == 0 else out


def eyring_rt60_s(volume_m3, surface_m2, mean_absorption, air_m_inv=0.0, speed_of_sound_m_s=None):
    """Eyring(-Norris): T = 24·ln10·V / (c·(−S·ln(1−ᾱ) + 4mV)) [2]_ [3]_."""
    v = np.asarray(volume_m3, dtype=float)
    s = np.asarray(surface_m2, dtype=float)
    alpha = np.asarray(mean_absorption, dtype=float)
    a = -s * np.log1p(-alpha) + 4.0 * np.asarray(air_m_inv, dtype=float) * v
    out = _LN10_24 * v / (_c(speed_of_sound_m_s) * a)
    return float(out) if np.ndim(out) == 0 else out


def room_constant_m2(surface_m2, mean_absorption):
    """Room constant R = S·ᾱ/(1−ᾱ) in m² (Hopkins & Stryker [4]_)."""
    s = np.asarray(surface_m2, dtype=float)
    a = np.asarray(mean_absorption, dtype=float)
    out = s * a / (1.0 - a)
    return float(out) if np.ndim(out) == 0 else out


def critical_distance_m(q, room_constant_m2):
    """Critical distance D_c = sqrt(Q·R/(16π)) (direct = reverberant level; Hopkins–Stryker [4]_)."""
    out = np.sqrt(np.asarray(q, dtype=float) * np.asarray(room_constant_m2, dtype=float) / (16.0 * math.pi))
    return float(out) if np.ndim(out) == 0 else out


def critical_distance_from_rt60_m(q, volume_m3, rt60_s, speed_of_sound_m_s=None):
    """Critical distance from the reverberation time: sqrt(Q·A/(16π)), A = 24·ln10·V/(c·T).

    ≈ 0.057·sqrt(Q·V/T) at c ≈ 343 m/s (Kuttruff [5]_, the "reverberation distance").
    A is the absorption area that Sabine's formula needs to give the T it is passed, whatever
    formula produced that T. ``howl room`` passes Eyring's RT60 with air, so there A is the
    equivalent area of the Eyring decay, A = −S·ln(1−ᾱ) + 4mV, not Sabine's S·ᾱ + 4mV. Against the
    room-constant form sqrt(Q·R/(16π)), R = S·ᾱ′/(1−ᾱ′), the ratio is sqrt(A/R); without air
    A/R = −(1−ᾱ)·ln(1−ᾱ)/ᾱ (≈ 1 − ᾱ/2 for small ᾱ), so this form is the smaller one and the two
    agree in live rooms (small ᾱ) and part in absorbent ones (derived from the two definitions).
    """
    a = _LN10_24 * np.asarray(volume_m3, dtype=float) / (_c(speed_of_sound_m_s) * np.asarray(rt60_s, dtype=float))
    out = np.sqrt(np.asarray(q, dtype=float) * a / (16.0 * math.pi))
    return float(out) if np.ndim(out) == 0 else out


def schroeder_frequency_hz(rt60_s, volume_m3):
    """Schroeder frequency f_S = 2000·sqrt(T/V) (T in s, V in m³) [6]_."""
    out = 2000.0 * np.sqrt(np.asarray(rt60_s, dtype=float) / np.asarray(volume_m3, dtype=float))
    return float(out) if np.ndim(out) == 0 else out


def mean_free_path_m(volume_m3, surface_m2):
    """Mean free path 4V/S between reflections in a diffuse field (Kuttruff [5]_)."""
    out = 4.0 * np.asarray(volume_m3, dtype=float) / np.asarray(surface_m2, dtype=float)
    return float(out) if np.ndim(out) == 0 else out


def eyring_mean_absorption(volume_m3, surface_m2, rt60_s, air_m_inv=0.0, speed_of_sound_m_s=None):
    """Invert Eyring (with air): the mean absorption ᾱ that gives ``rt60_s``.

    ᾱ = 1 − exp(−(24·ln10·V/(c·T) − 4mV)/S). Where air alone absorbs more than the
    measurement allows, ᾱ is 0 (and the caller should warn).
    """
    v = np.asarray(volume_m3, dtype=float)
    need = _LN10_24 * v / (_c(speed_of_sound_m_s) * np.asarray(rt60_s, dtype=float)) - 4.0 * np.asarray(
        air_m_inv, dtype=float
    ) * v
    out = -np.expm1(-np.maximum(need, 0.0) / np.asarray(surface_m2, dtype=float))
    return float(out) if np.ndim(out) == 0 else out


# ------------------------------------------------------------------ a whole room ----

@dataclass(frozen=True)
class RoomAcoustics:
    """A room's statistical acoustics at the frequencies ``freq_hz`` (arrays per frequency).

    ``mean_absorption`` and ``absorption_area_m2`` are the surfaces' (without air);
    ``room_constant_m2`` uses the total absorption, surfaces plus air (ᾱ' = ᾱ + 4mV/S),
    because the reverberant level depends on all the energy lost.
    """

    freq_hz: np.ndarray
    mean_absorption: np.ndarray
    absorption_area_m2: np.ndarray
    rt60_sabine_s: np.ndarray
    rt60_eyring_s: np.ndarray
    room_constant_m2: np.ndarray
    air_m_inv: np.ndarray
    speed_of_sound_m_s: float
    volume_m3: float
    surface_m2: float

    @property
    def rt60_s(self) -> np.ndarray:
        """The RT60 to use downstream (Eyring)."""
        return self.rt60_eyring_s

    @property
    def mean_free_path_m(self) -> float:
        return mean_free_path_m(self.volume_m3, self.surface_m2)


def _interp_log(freq_hz: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Interpolate octave values on log-frequency; held constant outside 125–8000 Hz."""
    x = np.log(np.asarray(OCTAVE_BANDS_HZ))
    return np.interp(np.log(freq_hz), x, values)


def octave_mean_absorption(room: Room) -> np.ndarray:
    """Surface mean absorption ᾱ per octave band of :data:`howl.rig.OCTAVE_BANDS_HZ`.

    For a room given by measured RT60, ᾱ comes from inverting Eyring with air absorption at
    the band centres, so Eyring reproduces the measurement there.
    """
    bands = np.asarray(OCTAVE_BANDS_HZ)
    if room.rt60_measured_s is not None:
        c = speed_of_sound_m_s(room.temperature_c)
        m = air_power_attenuation_m_inv(bands, room.temperature_c, room.humidity_pct)
        t = np.asarray(room.rt60_measured_s, dtype=float)
        need = _LN10_24 * room.volume_m3 / (c * t) - 4.0 * m * room.volume_m3
        if np.any(need <= 0.0):
            bad = ", ".join(f"{f:g}" for f in bands[need <= 0.0])
            warnings.warn(
                f"{room.source_file or room.name}: measured RT60 at {bad} Hz is longer than air absorption "
                "alone allows; the surfaces are taken as non-absorbing there",
                HowlWarning, stacklevel=2,
            )
        return eyring_mean_absorption(room.volume_m3, room.surface_m2, t, m, c)
    area = np.zeros(len(bands))
    for s in room.surfaces:
        area += s.area_m2 * np.asarray(s.absorption, dtype=float)
    return area / room.surface_m2


def room_acoustics(room: Room, freq_hz) -> RoomAcoustics:
    """Evaluate a room at any frequencies.

    The octave data (surface absorption, or the absorption inverted from measured RT60)
    are interpolated on log-frequency and held constant outside 125–8000 Hz; the air
    absorption (ISO 9613-1) is computed at each frequency. Speed of sound from the
    room's air temperature (:func:`howl.units.speed_of_sound_m_s`).
    """
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    if f.size == 0 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise InputError("must be finite frequencies > 0 Hz", key="freq_hz")
    c = speed_of_sound_m_s(room.temperature_c)
    alpha = np.clip(_interp_log(f, octave_mean_absorption(room)), 0.0, 1.0 - 1e-12)
    m = air_power_attenuation_m_inv(f, room.temperature_c, room.humidity_pct)
    v, s = room.volume_m3, room.surface_m2
    area = s * alpha
    t_sab = sabine_rt60_s(v, area, m, c)
    t_eyr = eyring_rt60_s(v, s, alpha, m, c)
    alpha_total = np.clip(alpha + 4.0 * m * v / s, 0.0, 1.0 - 1e-12)
    return RoomAcoustics(
        freq_hz=f,
        mean_absorption=alpha,
        absorption_area_m2=area,
        rt60_sabine_s=np.asarray(t_sab, dtype=float).reshape(f.shape),
        rt60_eyring_s=np.asarray(t_eyr, dtype=float).reshape(f.shape),
        room_constant_m2=np.asarray(room_constant_m2(s, alpha_total), dtype=float).reshape(f.shape),
        air_m_inv=m,
        speed_of_sound_m_s=float(c),
        volume_m3=float(v),
        surface_m2=float(s),
    )
