"""Room data per band for the image-source model: wall absorption per surface, air absorption,
positions checked inside the shoebox, the diffuse-field power of a directional source or mic
(integrated over the sphere), and the statistical late tail from the room model. Used by
:mod:`howl.model.images`.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from howl import validate as V
from howl.errors import InputError
from howl.model.rig import OCTAVE_BANDS_HZ, SHOEBOX_SURFACES, Room

GainFunction = Callable[[np.ndarray, np.ndarray], np.ndarray]


# ---------------------------------------------------------------------------
# room data per band
# ---------------------------------------------------------------------------


def _surface_absorption(room: Room) -> np.ndarray:
    """(6, B) energy absorption per shoebox surface and octave band."""
    by_name = {s.name: s for s in room.surfaces}
    rows = []
    for name in SHOEBOX_SURFACES:
        s = by_name.get(name)
        if s is None:
            raise InputError(
                f"shoebox room needs a surface named {name!r} for image sources, found "
                f"{', '.join(by_name) or 'none'}",
                file=room.source_file,
                key="surfaces",
            )
        a = np.asarray(s.absorption, dtype=float)
        if a.shape != (len(OCTAVE_BANDS_HZ),):
            raise InputError(
                f"must hold {len(OCTAVE_BANDS_HZ)} octave-band values, got {a.size}",
                file=room.source_file,
                key=f"surfaces.{name}.absorption",
            )
        rows.append(a)
    alpha = np.stack(rows)
    if np.any(alpha < 0) or np.any(alpha >= 1):
        raise InputError("absorption must be in [0, 1)", file=room.source_file, key="surfaces")
    return alpha


def _check_inside(room: Room, p, name: str) -> np.ndarray:
    p = np.asarray(p, dtype=float)
    if p.shape != (3,) or not np.all(np.isfinite(p)):
        raise InputError(f"must be 3 finite coordinates in m, got {p.tolist()}", key=name)
    dims = np.asarray(room.dimensions_m, dtype=float)
    if np.any(p <= 0) or np.any(p >= dims):
        raise InputError(
            f"must lie inside the room (0, 0, 0)–({dims[0]:g}, {dims[1]:g}, {dims[2]:g}) m, got "
            f"({p[0]:g}, {p[1]:g}, {p[2]:g}) m",
            file=room.source_file,
            key=name,
        )
    return p


def _require_shoebox(room: Room) -> None:
    if not room.is_shoebox:
        raise InputError(
            "image sources need a shoebox room (dimensions_m with six surfaces); "
            f"room {room.name!r} has a free shape: use the statistical method",
            file=room.source_file,
            key="dimensions_m",
        )


def _air_m_inv(room: Room, freq_hz: np.ndarray) -> np.ndarray:
    from howl.model.room import air_power_attenuation_m_inv

    return np.asarray(
        air_power_attenuation_m_inv(freq_hz, room.temperature_c, room.humidity_pct), dtype=float
    )


def _sphere_directions(n: int = 1024) -> np.ndarray:
    """Nearly uniform unit vectors (Fibonacci lattice), for averages over the sphere."""
    i = np.arange(n) + 0.5
    z = 1.0 - 2.0 * i / n
    phi = math.pi * (1.0 + math.sqrt(5.0)) * i
    r = np.sqrt(1.0 - z * z)
    return np.stack([r * np.cos(phi), r * np.sin(phi), z], axis=1)


def diffuse_power_factor(gain: GainFunction | None, freq_hz: np.ndarray) -> np.ndarray:
    """Mean of |gain|² over all directions per band (1/Q for a speaker on axis 1; REE for a mic)."""
    freq_hz = np.asarray(freq_hz, dtype=float)
    if gain is None:
        return np.ones(freq_hz.shape)
    g = np.asarray(gain(_sphere_directions(), freq_hz), dtype=float)
    return np.mean(g * g, axis=0)


#: Energy decay rate for a reverberation time T: 60 dB in T seconds → k = 6·ln(10)/T.
_DECAY_LN = 6.0 * math.log(10.0)


def _tail_model(room: Room, bands_hz: np.ndarray):
    """RT60 (Eyring with air) and room constant per band from the room model."""
    from howl.model.room import room_acoustics

    ra = room_acoustics(room, np.asarray(bands_hz, dtype=float))
    rt60 = np.asarray(ra.rt60_eyring_s, dtype=float)
    r_m2 = np.asarray(ra.room_constant_m2, dtype=float)
    return rt60, r_m2


def _add_tail(chan, n, fs, bands, rt60, r_m2, t_x, crossfade_s, delay_s, source_gain, mic_gain, seed):
    """Add the statistical late tail to the band channels ``chan`` (B, n_fft) in place.

    Returns (tail energy per band, the model's reverberant energy per band).
    """
    n_fft = chan.shape[1]
    k = _DECAY_LN / rt60  # (B,) energy decay rate 1/s
    dpf = diffuse_power_factor(source_gain, bands) * diffuse_power_factor(mic_gain, bands)
    rev_energy = dpf / (math.pi * r_m2)  # 4/R on the Green's-function scale 1/(4π)
    t = np.arange(n_fft) / fs
    fade_in = np.sin(0.5 * math.pi * np.clip((t - (t_x - crossfade_s)) / crossfade_s, 0.0, 1.0))
    fade_in[n:] = 0.0
    # mean-square per sample so that Σ over all n (from emission) equals rev_energy
    t_e = np.maximum(t - delay_s, 0.0)  # time since emission
    var = rev_energy[:, None] * (-np.expm1(-k[:, None] / fs)) * np.exp(-k[:, None] * t_e[None, :])
    env = np.sqrt(var) * fade_in[None, :]
    tail_energy = np.sum(env**2, axis=1)
    rng = np.random.default_rng(seed)
    noise = rng.standard_normal(n_fft)
    chan += env * noise[None, :]
    return tail_energy, rev_energy
