"""Directivity of microphones and loudspeakers: polar gains, Q, DI, random-energy efficiency.

Microphones
-----------
First-order family ρ(θ) = a + (1 − a)·cos θ with the usual coefficients
(omni a = 1, subcardioid 0.7, cardioid 0.5, supercardioid (√3 − 1)/2 = 0.366,
hypercardioid 0.25, figure-8 0) [1]_, [2]_. Its random-energy efficiency is
REE = ½∫₀^π ρ(θ)² sin θ dθ = a² + (1 − a)²/3, its directivity index
DI = −10·log10(REE) and its distance factor DSF = 1/√REE [1]_.

Real capsules depart from the ideal pattern with frequency. howl's frequency
model (``ideal=False``, the default) is a model of our own; the *direction*
of each effect is the textbook behaviour (patterns widen toward low
frequencies and narrow and lose rear rejection toward high frequencies, [1]_
ch. 5–6, from memory), the *sizes* are our choice and are flagged as such:

* **Low-frequency widening** (mixed patterns 0 < a < 1 only; a pure pressure
  or pure gradient capsule keeps its shape): the coefficient moves toward omni,
  a_eff = a + (1 − a)·w(f), w(f) = 0.4 / (1 + (f / 150 Hz)²). At 100 Hz a
  cardioid behaves like a = 0.64 (between subcardioid and cardioid); at 1 kHz
  the change is below 0.01.
* **High-frequency narrowing**: the polar gain is multiplied by the directivity
  of a rigid circular piston of radius 10 mm (a handheld or lectern capsule),
  2·J1(k·r·sin θ)/(k·r·sin θ) (Kinsler et al., *Fundamentals of Acoustics*,
  piston in a baffle, from memory). At 8 kHz and 90° this is −2.4 dB.
* **High-frequency rear fill**: a leakage floor ε(f) = 0.25·x/(1 + x),
  x = (f / 8 kHz)², added in power, |g| = √(ρ² + ε²)/√(1 + ε²) (on axis
  stays 0 dB). The null of a cardioid fills to about −26 dB at 4 kHz and
  −18 dB at 8 kHz (our choice, order of magnitude of common practice, no source).

``ideal=True`` gives the textbook first-order pattern at every frequency.

Loudspeakers
------------
Coverage angles are the −6 dB beamwidths per octave band, horizontal and
vertical (the way loudspeaker data sheets give them). howl's polar model is a
"power cardioid" p(θ) = ((1 + cos θ)/2)^n with n chosen so that p = ½ at
θ = BW/2 (methods of this kind: the cardioid family raised to a power; the
per-plane exponent n = ln ½ / ln((1 + cos(BW/2))/2) is derived here, and corrected slightly
so that −6 dB still holds once the rear floor below is added). Off the
two principal planes the exponent is blended elliptically,
n(φ) = n_h·cos²φ + n_v·sin²φ, φ the angle around the axis, so the −6 dB
contour is an ellipse-like curve through both coverage angles. A rear floor of
−20 dB (added in power, on axis stays 0 dB) stands for cabinet diffraction and
rear radiation (our choice, common practice order of magnitude, no source).

The directivity factor follows from this polar model *exactly*: integrating
((1+cos θ)/2)^{2n(φ)} over the sphere gives ∫dΩ p² = ∫₀^{2π} 2/(2n(φ)+1) dφ,
and with n(φ) as above, Q₀ = √((2n_h + 1)(2n_v + 1)), the geometric mean of
the two planes' Q (the same combination as in [3]_). The floor ε² lowers it to
Q = (1 + ε²)/(1/Q₀ + ε²). Molloy's relation from the coverage angles,
Q = 180° / asin(sin(θ/2)·sin(φ/2)) [4]_, assumes a beam that stops sharply at
its −6 dB angles; it is given here for comparison (:func:`molloy_q`). For
typical horns (60–120° by 40–90°) the polar-model Q is 1–2 dB of DI above
Molloy's; docs/plan.md shows the comparison.

Tables
------
Instead of the models, a mic may name a polar table (``pattern = "table"``) and a
loudspeaker a table or an AES69 (SOFA) FreeFieldDirectivityTF file
(``directivity_file``), read with sofar; REE and Q are then integrated
numerically (see the table section below and docs/plan.md).

Coordinates: a direction is a unit vector in room coordinates (x along the
length, y along the width, z up). Aim: azimuth from +x toward +y, elevation
up (see :mod:`howl.rig`).

References
----------
.. [1] J. Eargle, *The Microphone Book*, 2nd ed., Focal Press 2004, Table 6-1
   (data after H. F. Olson, 1972).
.. [2] HyperPhysics, "Directional Patterns of Microphones",
   http://hyperphysics.phy-astr.gsu.edu/hbase/Audio/mic3.html
.. [3] DI from polar data per plane, Q = √(Q_h·Q_v): e.g. Ballou (ed.),
   *Handbook for Sound Engineers*, loudspeaker directivity chapter (from memory).
.. [4] C. T. Molloy, "Calculation of the directivity index for various types of
   radiators", JASA 20(4):387–405 (1948) (from memory); the coverage-angle form
   as quoted in the Handbook for Sound Engineers.
"""

from __future__ import annotations

import math

import numpy as np

from howl.errors import InputError
from howl.model._dirtables import (  # noqa: F401  the measured tables (_dirtables.py), re-exported
    _GL_U, _GL_W, PolarTable, SofaDirectivity, _freq, _mic_table, _speaker_table, _table_speaker_gain, _table_speaker_q,
    load_polar_table, load_sofa_directivity,
)
from howl.model._piston import piston_factor
from howl.model.rig import OCTAVE_BANDS_HZ, Mic, Speaker
from howl.units import speed_of_sound_m_s

#: First-order coefficients a in ρ(θ) = a + (1 − a)·cos θ (Eargle [1], Table 6-1).
MIC_FIRST_ORDER_A: dict[str, float] = {
    "omni": 1.0,
    "subcardioid": 0.7,
    "cardioid": 0.5,
    "supercardioid": (math.sqrt(3.0) - 1.0) / 2.0,  # maximum front-to-back energy ratio
    "hypercardioid": 0.25,  # minimum random-energy efficiency
    "figure8": 0.0,
}

# --- the microphone frequency model (our choice; see the module docstring) ---------------------------
#: Largest low-frequency widening weight w (a_eff = a + (1 − a)·w).
MIC_LF_WIDEN_MAX = 0.4
#: Corner of the low-frequency widening, Hz.
MIC_LF_CORNER_HZ = 150.0
#: Capsule radius for the high-frequency piston narrowing, m.
MIC_CAPSULE_RADIUS_M = 0.010
#: Largest high-frequency rear-fill floor (amplitude, −12 dB).
MIC_HF_LEAK_MAX = 10.0 ** (-12.0 / 20.0)
#: Corner of the high-frequency rear fill, Hz.
MIC_HF_LEAK_CORNER_HZ = 8000.0

# --- the loudspeaker model --------------------------------------------------------------------------
#: Rear / off-axis floor of the loudspeaker polar model, dB re on axis (our choice, no source).
SPEAKER_REAR_FLOOR_DB = -20.0

_LOG_OCT = np.log(np.asarray(OCTAVE_BANDS_HZ))


# ======================================================================================== helpers ====

def aim_vector(azimuth_rad: float, elevation_rad: float) -> np.ndarray:
    """Unit vector of an aim (azimuth from +x toward +y, elevation up)."""
    ce = math.cos(elevation_rad)
    return np.array([ce * math.cos(azimuth_rad), ce * math.sin(azimuth_rad), math.sin(elevation_rad)])


def _frame(azimuth_rad: np.ndarray, elevation_rad: np.ndarray) -> np.ndarray:
    """Local frames (..., 3, 3): rows forward, left, up, for arrays of aims."""
    az = np.asarray(azimuth_rad, dtype=float)
    el = np.asarray(elevation_rad, dtype=float)
    ca, sa, ce, se = np.cos(az), np.sin(az), np.cos(el), np.sin(el)
    fwd = np.stack([ce * ca, ce * sa, se], axis=-1)
    left = np.stack([-sa, ca, np.zeros_like(az)], axis=-1)
    up = np.stack([-se * ca, -se * sa, ce], axis=-1)
    return np.stack([fwd, left, up], axis=-2)


def _unit(directions: np.ndarray) -> np.ndarray:
    d = np.asarray(directions, dtype=float)
    if d.shape[-1:] != (3,):
        raise InputError(f"must have a last axis of length 3, got shape {d.shape}", key="directions")
    n = np.linalg.norm(d, axis=-1, keepdims=True)
    if np.any(n == 0) or not np.all(np.isfinite(d)):
        raise InputError("must be finite, non-zero vectors", key="directions")
    return d / n




def octave_interp_matrix(freq_hz) -> np.ndarray:
    """Weights (F, 7) that interpolate per-octave-band data linearly on log frequency.

    Values are held constant below 125 Hz and above 8 kHz (the same rule as
    :func:`howl.room.room_acoustics`). ``data_per_band @ W.T`` gives (…, F).
    """
    f = _freq(freq_hz)
    eye = np.eye(len(OCTAVE_BANDS_HZ))
    return np.stack([np.interp(np.log(f), _LOG_OCT, eye[k]) for k in range(eye.shape[0])], axis=-1)


# ==================================================================================== microphones ====

def first_order_coefficient(pattern: str) -> float:
    """The coefficient a of a named first-order pattern (Eargle [1], Table 6-1)."""
    try:
        return MIC_FIRST_ORDER_A[pattern]
    except KeyError:
        raise InputError(
            f"must be one of {', '.join(MIC_FIRST_ORDER_A)}, got {pattern!r}", key="pattern"
        ) from None


def first_order_gain(a, cos_theta) -> np.ndarray:
    """ρ(θ) = a + (1 − a)·cos θ (signed amplitude)."""
    a = np.asarray(a, dtype=float)
    return a + (1.0 - a) * np.asarray(cos_theta, dtype=float)


def first_order_ree(a) -> np.ndarray:
    """Random-energy efficiency of a first-order pattern, a² + (1 − a)²/3 (from RE = ½∫ρ² sin θ dθ [1])."""
    a = np.asarray(a, dtype=float)
    return a * a + (1.0 - a) ** 2 / 3.0


def first_order_null_deg(a: float) -> float | None:
    """Null angle acos(−a/(1 − a)) in degrees, or None when the pattern has no null (a > ½)."""
    if a >= 1.0 or -a / (1.0 - a) < -1.0:
        return None
    return math.degrees(math.acos(-a / (1.0 - a)))


def directivity_index_db(q) -> np.ndarray:
    """DI = 10·log10(Q)."""
    return 10.0 * np.log10(np.asarray(q, dtype=float))


def distance_factor(ree) -> np.ndarray:
    """Distance factor 1/√REE: how much farther a directional mic may be for the same direct/reverberant ratio [1]."""
    return 1.0 / np.sqrt(np.asarray(ree, dtype=float))


def _mic_a(mic: Mic) -> float:
    """First-order coefficient of a named-pattern mic (1.0 for a table mic, whose gain comes from its file)."""
    return 1.0 if _is_table_mic(mic) else first_order_coefficient(mic.pattern)


def mic_pattern_gain(a, cos_theta, freq_hz, *, ideal: bool = False, temperature_c: float = 20.0) -> np.ndarray:
    """Signed amplitude gain of a first-order mic, frequency model included.

    Parameters
    ----------
    a : array (...)  first-order coefficient(s), broadcast against ``cos_theta``.
    cos_theta : array (...)  cosine of the angle between the mic's axis and the
        direction toward the sound's origin.
    freq_hz : (F,)
    ideal : True for the textbook pattern at every frequency.

    Returns
    -------
    (..., F) signed amplitude, 1 on axis.
    """
    f = _freq(freq_hz)
    a = np.asarray(a, dtype=float)[..., None]
    u = np.clip(np.asarray(cos_theta, dtype=float), -1.0, 1.0)[..., None]
    if ideal:
        return np.broadcast_to(a + (1.0 - a) * u, np.broadcast_shapes(a.shape, u.shape)[:-1] + f.shape).copy()
    mixed = (a > 0.0) & (a < 1.0)
    w = MIC_LF_WIDEN_MAX / (1.0 + (f / MIC_LF_CORNER_HZ) ** 2)
    a_eff = np.where(mixed, a + (1.0 - a) * w, a)
    rho = a_eff + (1.0 - a_eff) * u
    k = 2.0 * np.pi * f / speed_of_sound_m_s(temperature_c)
    x = k * MIC_CAPSULE_RADIUS_M * np.sqrt(np.maximum(0.0, 1.0 - u * u))
    rho = rho * piston_factor(x)
    xx = (f / MIC_HF_LEAK_CORNER_HZ) ** 2
    eps2 = (MIC_HF_LEAK_MAX * xx / (1.0 + xx)) ** 2
    mag = np.sqrt((rho * rho + eps2) / (1.0 + eps2))
    return np.where(rho < 0.0, -mag, mag)


def mic_gain(mic: Mic, directions, freq_hz, *, ideal: bool = False) -> np.ndarray:
    """Amplitude response of ``mic`` toward unit vectors pointing FROM the mic TOWARD the sound's origin.

    Returns (..., F), signed (the rear lobe of a figure-8 or hypercardioid is
    negative); use its square for power.
    """
    d = _unit(directions)
    u = d @ aim_vector(mic.azimuth_rad, mic.elevation_rad)
    return mics_gain_cos((mic,), u[..., None], freq_hz, ideal=ideal)[..., 0, :]


def pattern_ree(a, freq_hz, *, ideal: bool = False, temperature_c: float = 20.0) -> np.ndarray:
    """Random-energy efficiency ½∫ g(θ, f)² sin θ dθ of the (frequency-dependent) pattern, (..., F).

    Integrated numerically (48-point Gauss-Legendre in cos θ; exact for the
    ideal first-order patterns, whose square is a quadratic in cos θ). Each
    distinct coefficient is integrated once.
    """
    a = np.asarray(a, dtype=float)
    uniq, inv = np.unique(a.ravel(), return_inverse=True)
    g = mic_pattern_gain(uniq[:, None], _GL_U, freq_hz, ideal=ideal, temperature_c=temperature_c)  # (U, 48, F)
    ree_u = 0.5 * np.einsum("k,ukf->uf", _GL_W, g * g)
    return ree_u[inv].reshape(a.shape + (ree_u.shape[-1],))


def mic_random_energy_efficiency(mic: Mic, freq_hz, *, ideal: bool = False) -> np.ndarray:
    """The mic's random-energy efficiency per frequency (F,): its pick-up of a diffuse field re omni."""
    return mics_ree((mic,), freq_hz, ideal=ideal)[0]


# ================================================================================== loudspeakers ====

def coverage_exponent(beamwidth_deg, *, with_floor: bool = False) -> np.ndarray:
    """Exponent n of p(θ) = ((1 + cos θ)/2)^n that puts −6 dB at ±BW/2.

    n = ln ½ / ln((1 + cos(BW/2))/2); BW = 180° gives n = 1 (a cardioid),
    BW ≥ 360° gives 0 (omni). ``with_floor=True`` solves for the exponent
    that keeps exactly −6 dB at ±BW/2 once the rear floor ε² is added in power:
    p(BW/2) = √(¼ − ¾·ε²).
    """
    bw = np.asarray(beamwidth_deg, dtype=float)
    half = np.radians(np.clip(bw, 1e-3, 360.0)) / 2.0
    base = (1.0 + np.cos(half)) / 2.0
    target = math.sqrt(0.25 - 0.75 * _floor2()) if with_floor else 0.5
    with np.errstate(divide="ignore"):
        n = np.where(base <= 0.0, 0.0, math.log(target) / np.log(np.where(base <= 0.0, 0.5, base)))
    return np.where(bw >= 360.0, 0.0, n)


def speaker_coverage_deg(speaker: Speaker, freq_hz) -> tuple[np.ndarray, np.ndarray]:
    """Horizontal and vertical −6 dB coverage (F,) interpolated on log frequency from the octave data."""
    w = octave_interp_matrix(freq_hz)
    return w @ np.asarray(speaker.coverage_h_deg, float), w @ np.asarray(speaker.coverage_v_deg, float)


def _floor2() -> float:
    return 10.0 ** (SPEAKER_REAR_FLOOR_DB / 10.0)


def coverage_gain(n_h, n_v, local_directions) -> np.ndarray:
    """Amplitude of the coverage model for directions in the speaker's local frame.

    ``n_h``, ``n_v``: exponents broadcast to (..., F); ``local_directions``:
    (..., 3) with components (forward, left, up). Returns (..., F), ≥ 0.
    """
    ld = np.asarray(local_directions, dtype=float)
    x, y, z = ld[..., 0, None], ld[..., 1, None], ld[..., 2, None]
    r2 = y * y + z * z
    c2 = np.where(r2 > 0.0, y * y / np.where(r2 > 0.0, r2, 1.0), 0.5)
    n = np.asarray(n_h) * c2 + np.asarray(n_v) * (1.0 - c2)
    base = np.clip((1.0 + x) / 2.0, 1e-300, 1.0)
    p2 = np.exp(2.0 * n * np.log(base))
    e2 = _floor2()
    return np.sqrt((p2 + e2) / (1.0 + e2))


def speaker_gain(speaker: Speaker, directions, freq_hz) -> np.ndarray:
    """Amplitude (≥ 0, 1 on axis) of ``speaker`` toward unit vectors pointing FROM the speaker outward, (..., F)."""
    d = _unit(directions)
    local = d @ _frame(speaker.azimuth_rad, speaker.elevation_rad).T
    shape = local.shape[:-1]
    g = speakers_gain_local((speaker,), local.reshape(1, -1, 3), freq_hz)[0]
    return g.reshape(shape + (g.shape[-1],))


def coverage_q(coverage_h_deg, coverage_v_deg) -> np.ndarray:
    """Directivity factor of the coverage model, exact: Q = (1 + ε²)/(1/√((2n_h+1)(2n_v+1)) + ε²)."""
    n_h = coverage_exponent(coverage_h_deg, with_floor=True)
    n_v = coverage_exponent(coverage_v_deg, with_floor=True)
    q0 = np.sqrt((2.0 * n_h + 1.0) * (2.0 * n_v + 1.0))
    e2 = _floor2()
    return (1.0 + e2) / (1.0 / q0 + e2)


def speaker_q(speaker: Speaker, freq_hz) -> np.ndarray:
    """Directivity factor Q per frequency (F,) of the loudspeaker's polar model or table (see the module docstring)."""
    return speakers_q((speaker,), freq_hz)[0]


def molloy_q(coverage_h_deg, coverage_v_deg) -> np.ndarray:
    """Molloy's Q from −6 dB coverage angles: 180° / asin(sin(θ/2)·sin(φ/2)) (asin in degrees) [4]."""
    h = np.radians(np.asarray(coverage_h_deg, dtype=float))
    v = np.radians(np.asarray(coverage_v_deg, dtype=float))
    s = np.clip(np.sin(np.minimum(h, np.pi) / 2.0) * np.sin(np.minimum(v, np.pi) / 2.0), 1e-12, 1.0)
    return 180.0 / np.degrees(np.arcsin(s))




# ============================================================ dispatch (first order or table) ====

def _is_table_mic(mic: Mic) -> bool:
    return mic.pattern == "table" or (mic.pattern_file is not None and mic.pattern not in MIC_FIRST_ORDER_A)


def mics_gain_cos(mics, cos_theta, freq_hz, *, ideal: bool = False, temperature_c: float = 20.0) -> np.ndarray:
    """Signed gains (..., M, F) of several mics; ``cos_theta`` (..., M) per mic (last axis = mic)."""
    cos_theta = np.asarray(cos_theta, float)
    a = np.array([1.0 if _is_table_mic(m) else first_order_coefficient(m.pattern) for m in mics])
    out = mic_pattern_gain(np.broadcast_to(a, cos_theta.shape), cos_theta, freq_hz, ideal=ideal,
                           temperature_c=temperature_c)
    for k, m in enumerate(mics):
        if _is_table_mic(m):
            th = np.arccos(np.clip(cos_theta[..., k], -1.0, 1.0))
            out[..., k, :] = 10.0 ** (_mic_table(m).level_db(0, th, freq_hz) / 20.0)
    return out


def mics_ree(mics, freq_hz, *, ideal: bool = False, temperature_c: float = 20.0) -> np.ndarray:
    """Random-energy efficiency (M, F) of several mics (tables integrated numerically)."""
    a = np.array([1.0 if _is_table_mic(m) else first_order_coefficient(m.pattern) for m in mics])
    out = pattern_ree(a, freq_hz, ideal=ideal, temperature_c=temperature_c)
    for k, m in enumerate(mics):
        if _is_table_mic(m):
            g = 10.0 ** (_mic_table(m).level_db(0, np.arccos(_GL_U), freq_hz) / 20.0)  # (48, F)
            out[k] = 0.5 * np.einsum("k,kf->f", _GL_W, g * g)
    return out


def speakers_model(speakers, freq_hz) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Coverage-model exponents n_h, n_v and Q, each (S, F), for several loudspeakers (tables override Q)."""
    w = octave_interp_matrix(freq_hz)
    cov = np.array([s.coverage_h_deg for s in speakers] + [s.coverage_v_deg for s in speakers], float) @ w.T
    n = coverage_exponent(cov, with_floor=True)
    n_h, n_v = n[: len(speakers)], n[len(speakers):]
    e2 = _floor2()
    q = (1.0 + e2) / (1.0 / np.sqrt((2.0 * n_h + 1.0) * (2.0 * n_v + 1.0)) + e2)  # = coverage_q
    for k, s in enumerate(speakers):
        if s.directivity_file:
            q[k] = _table_speaker_q(_speaker_table(s), freq_hz)
    return n_h, n_v, q


def speakers_gain_local(speakers, local_directions, freq_hz, *, model=None) -> np.ndarray:
    """Gains (S, P, F) of several loudspeakers toward local directions (S, P, 3) (forward, left, up).

    ``model``: the result of :func:`speakers_model` for these speakers and frequencies, if already known.
    """
    n_h, n_v, _ = speakers_model(speakers, freq_hz) if model is None else model
    out = coverage_gain(n_h[:, None, :], n_v[:, None, :], local_directions)
    for k, s in enumerate(speakers):
        if s.directivity_file:
            out[k] = _table_speaker_gain(_speaker_table(s), np.asarray(local_directions)[k], freq_hz)
    return out


def speakers_q(speakers, freq_hz) -> np.ndarray:
    """Directivity factors (S, F) of several loudspeakers."""
    return speakers_model(speakers, freq_hz)[2]
