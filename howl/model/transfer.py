"""Statistical loudspeaker → microphone transfer per band (direct field + Hopkins-Stryker reverberant field).

For a loudspeaker s driven with 1 V and a point x at distance r, the band-average
mean-square pressure is the sum of a direct and a reverberant part [1]_, [2]_:

    p²_direct = p₁²·g_s(θ)²·e^{−m·r} / r²
    p²_reverb = 4·ρc·W / R = p₁²·16π / (Q_s·R)

with p₁ the on-axis pressure at 1 m for 1 V (from ``sensitivity_db_spl_1v_1m``),
g_s the loudspeaker's polar gain toward x (:mod:`howl.directivity`), m the
power attenuation coefficient of air (ISO 9613-1, via :mod:`howl.room`), Q_s
the loudspeaker's directivity factor and R the room constant. The acoustic power
follows from the on-axis level and Q: p₁² = ρc·W·Q/(4π·1 m²), so
W ∝ p₁²·4π/Q. The reverberant term is Hopkins-Stryker's 4/R [1]_, [2]_.

A microphone at x hears the direct part through its polar gain toward the
loudspeaker, g_m(θ')², and the reverberant part through its random-energy
efficiency REE_m (a diffuse field arrives from all directions), so the power
transfer from loudspeaker input volts to mic output volts is

    |T|² = M²·(p²_direct·g_m² + p²_reverb·REE_m),   M = mic sensitivity in V/Pa.

Air absorption is also counted in the reverberant field: the room constant is
formed with the effective mean absorption ᾱ' = ᾱ + 4mV/S (the air's
equivalent absorption area 4mV, Sabine's and Eyring's usual addition [3]_).

References
----------
.. [1] H. F. Hopkins & N. R. Stryker, "A proposed loudness-efficiency rating for
   loudspeakers and the determination of system power requirements for
   enclosures", Proc. IRE 36(3):315–335 (1948) (from memory).
.. [2] J. Eargle, *Electroacoustical Reference Data*, Springer 1994, ch. 17
   (Lp = Lw + 10·log10(Q/(4πr²) + 4/R)).
.. [3] H. Kuttruff, *Room Acoustics*, 5th ed. (2009), air attenuation in the
   reverberation formulae (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from howl.model import directivity as _dir
from howl.errors import InputError
from howl.model.rig import Rig, Speaker
from howl.units import P_REF_PA

#: Directivity factor assumed for a talker (treated as omni, like the classic gain equations).
TALKER_Q = 1.0


def hopkins_stryker_level_db(lw_db, q, r_m, room_constant_m2) -> np.ndarray:
    """Lp = Lw + 10·log10(Q/(4πr²) + 4/R) (ρc ≈ 400 rayl, reference constants dropped) [2]_."""
    q = np.asarray(q, float)
    r = np.asarray(r_m, float)
    rc = np.asarray(room_constant_m2, float)
    return np.asarray(lw_db, float) + 10.0 * np.log10(q / (4.0 * np.pi * r * r) + 4.0 / rc)


def effective_room_constant_m2(acoustics) -> np.ndarray:
    """Room constant R = S·ᾱ'/(1 − ᾱ') with the air's absorption included, ᾱ' = ᾱ + 4mV/S.

    ``acoustics`` is a :class:`howl.room.RoomAcoustics` (any object with
    ``mean_absorption``, ``air_m_inv``, ``volume_m3`` and ``surface_m2``).
    """
    a = np.asarray(acoustics.mean_absorption, float) + 4.0 * np.asarray(acoustics.air_m_inv, float) * float(
        acoustics.volume_m3
    ) / float(acoustics.surface_m2)
    a = np.clip(a, 1e-6, 1.0 - 1e-6)
    return float(acoustics.surface_m2) * a / (1.0 - a)


def on_axis_pressure2_pa2(sensitivity_db_spl) -> np.ndarray:
    """p₁² in Pa² for an on-axis SPL at 1 m (re 20 µPa)."""
    return (P_REF_PA * 10.0 ** (np.asarray(sensitivity_db_spl, float) / 20.0)) ** 2


@dataclass(frozen=True)
class BandTransfer:
    """Speaker → mic power transfers per band (mic output V² per speaker input V²).

    ``direct_power`` and ``reverberant_power``: (n_speakers, n_mics, F).
    ``distance_m``: (n_speakers, n_mics). ``room_constant_m2``, ``rt60_s``: (F,).
    """

    freq_hz: np.ndarray
    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]
    direct_power: np.ndarray
    reverberant_power: np.ndarray
    distance_m: np.ndarray
    room_constant_m2: np.ndarray
    rt60_s: np.ndarray
    mic_ree: np.ndarray | None = None  # (n_mics, F) random-energy efficiency used for the reverberant part

    @property
    def power(self) -> np.ndarray:
        return self.direct_power + self.reverberant_power


def _speaker_arrays(speakers: tuple[Speaker, ...], freq_hz: np.ndarray):
    """Positions (S,3), frames (S,3,3), the polar model (n_h, n_v, Q; each (S,F)), p₁² (S,)."""
    pos = np.array([s.position_m for s in speakers], float)
    frames = _dir._frame(np.array([s.azimuth_rad for s in speakers]), np.array([s.elevation_rad for s in speakers]))
    model = _dir.speakers_model(speakers, freq_hz)
    p1 = on_axis_pressure2_pa2([s.sensitivity_db_spl_1v_1m for s in speakers])
    return pos, frames, model, p1


def _check_distance(r: np.ndarray, speakers, point_names, point_kind: str, min_m: float = 1e-3) -> None:
    """Refuse zero-distance loudspeaker → point paths (the direct field has 1/r²)."""
    bad = np.argwhere(r < min_m)
    if bad.size:
        s, p = (int(i) for i in bad[0])
        who = f"{point_kind} {point_names[p]!r}" if point_names else f"{point_kind} {p}"
        raise InputError(
            f"{who} is {float(r[s, p]):.3g} m from loudspeaker {speakers[s].name!r}; expected a path longer than "
            f"{min_m:g} m (a zero-distance path has no inverse-square level)",
            key=f"{point_kind}s.{point_names[p]}.position_m" if point_names else f"speakers.{speakers[s].name}.position_m",
        )


def speaker_field_pa2(speakers, points_m, freq_hz, acoustics, *, room_constant_m2=None, point_names=None,
                      point_kind: str = "point"):
    """Band-average p² per speaker input V² at points: direct (S, P, F) and reverberant (S, F).

    The direct part includes the loudspeaker's polar gain toward each point and
    air absorption e^{−m·r}; the reverberant part is p₁²·16π/(Q·R).
    Returns ``(direct, reverberant, distance_m (S, P), unit vectors speaker→point (S, P, 3))``.
    """
    f = np.asarray(freq_hz, float)
    speakers = tuple(speakers)
    pos, frames, model, p1 = _speaker_arrays(speakers, f)
    q = model[2]
    pts = np.atleast_2d(np.asarray(points_m, float))
    vec = pts[None, :, :] - pos[:, None, :]
    r = np.linalg.norm(vec, axis=-1)
    _check_distance(r, speakers, point_names, point_kind)
    u = vec / r[..., None]
    local = np.einsum("spk,sjk->spj", u, frames)  # (S, P, 3) components forward/left/up
    g = _dir.speakers_gain_local(speakers, local, f, model=model)  # (S, P, F)
    air = np.asarray(acoustics.air_m_inv, float)
    direct = p1[:, None, None] * g * g * np.exp(-air[None, None, :] * r[..., None]) / (r * r)[..., None]
    rc = effective_room_constant_m2(acoustics) if room_constant_m2 is None else np.asarray(room_constant_m2, float)
    reverb = p1[:, None] * 16.0 * np.pi / (q * rc[None, :])
    return direct, reverb, r, u


def statistical_transfer(rig: Rig, freq_hz, acoustics=None, *, ideal_mics: bool = False) -> BandTransfer:
    """Speaker → mic band transfers for every (speaker, mic) pair of ``rig`` (muted mics included).

    Parameters
    ----------
    rig : the rig (positions, aims, patterns, sensitivities).
    freq_hz : (F,) band centres.
    acoustics : :class:`howl.room.RoomAcoustics` at ``freq_hz``; computed from
        ``rig.room`` when omitted.
    ideal_mics : use the textbook first-order patterns (no frequency model).
    """
    f = np.asarray(freq_hz, float)
    if acoustics is None:
        from howl.model.room import room_acoustics

        acoustics = room_acoustics(rig.room, f)
    mics = rig.mics
    mic_pos = np.array([m.position_m for m in mics], float)
    direct_p, reverb_p, r, u = speaker_field_pa2(rig.speakers, mic_pos, f, acoustics,
                                                 point_names=[m.name for m in mics], point_kind="mic")
    # mic side: gain toward the speaker (unit vector mic → speaker = −u)
    axes = np.array([_dir.aim_vector(m.azimuth_rad, m.elevation_rad) for m in mics], float)  # (M, 3)
    cos_m = -np.einsum("smk,mk->sm", u, axes)
    temp = float(getattr(rig.room, "temperature_c", 20.0))
    gm = _dir.mics_gain_cos(mics, cos_m, f, ideal=ideal_mics, temperature_c=temp)  # (S, M, F)
    ree = _dir.mics_ree(mics, f, ideal=ideal_mics, temperature_c=temp)  # (M, F)
    sens2 = (10.0 ** (np.array([m.sensitivity_dbv_pa for m in mics], float) / 20.0)) ** 2  # V²/Pa²
    direct = sens2[None, :, None] * direct_p * gm * gm
    reverb = sens2[None, :, None] * reverb_p[:, None, :] * ree[None, :, :]
    rt = np.asarray(getattr(acoustics, "rt60_eyring_s", np.full(f.shape, math.nan)), float)
    return BandTransfer(
        freq_hz=f,
        speaker_names=tuple(s.name for s in rig.speakers),
        mic_names=tuple(m.name for m in mics),
        direct_power=direct,
        reverberant_power=reverb,
        distance_m=r,
        room_constant_m2=effective_room_constant_m2(acoustics),
        rt60_s=rt,
        mic_ree=ree,
    )


def talker_field_pa2(talker_pos_m, points_m, freq_hz, acoustics, *, room_constant_m2=None):
    """p² at points per unit on-axis p₁² of an omni talker (Q = 1): direct (P, F), reverberant (F,)."""
    f = np.asarray(freq_hz, float)
    pts = np.atleast_2d(np.asarray(points_m, float))
    r = np.linalg.norm(pts - np.asarray(talker_pos_m, float)[None, :], axis=-1)
    air = np.asarray(acoustics.air_m_inv, float)
    direct = np.exp(-air[None, :] * r[:, None]) / (r * r)[:, None]
    rc = effective_room_constant_m2(acoustics) if room_constant_m2 is None else np.asarray(room_constant_m2, float)
    reverb = 16.0 * np.pi / (TALKER_Q * rc) * np.ones_like(f)
    return direct, reverb, r
