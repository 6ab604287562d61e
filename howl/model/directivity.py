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
_GL_U, _GL_W = np.polynomial.legendre.leggauss(48)  # nodes in cos θ for the REE integral


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


def _freq(freq_hz) -> np.ndarray:
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    if f.ndim != 1 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise InputError(f"must be a 1-D array of frequencies > 0 Hz, got {freq_hz!r}", key="freq_hz")
    return f


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


# ==================================================================================== table files ====
#
# Polar tables are TOML files of our own layout (docs/plan.md shows them):
#
#   mic (axisymmetric about its axis):        loudspeaker (symmetric left/right and up/down):
#     freq_hz = [125, 250, ...]                  freq_hz = [125, 250, ...]
#     angle_deg = [0, 30, ..., 180]              angle_deg = [0, 15, ..., 180]
#     gain_db = [[0, -0.4, ...], ...]            horizontal_db = [[0, -1.2, ...], ...]
#                                                vertical_db = [[0, -2.0, ...], ...]
#
# one row per frequency, one value per angle, level re on axis in dB (each row is
# renormalised to 0 dB at 0°). Values are interpolated linearly in angle and dB, and
# on log frequency (held constant outside the table). Off the two planes a
# loudspeaker's level in dB is blended as cos²φ·H(θ) + sin²φ·V(θ) around the axis
# (the same blend the coverage model uses for its exponent). Q and REE follow by
# numerical integration over the sphere.

_TABLE_CACHE: dict = {}


class PolarTable:
    """A parsed polar table: ``freq_hz`` (F,), ``angle_rad`` (A,), ``levels_db`` (planes, F, A)."""

    def __init__(self, freq_hz: np.ndarray, angle_rad: np.ndarray, levels_db: np.ndarray, source: str):
        self.freq_hz = freq_hz
        self.angle_rad = angle_rad
        self.levels_db = levels_db
        self.source = source

    def level_db(self, plane: int, theta_rad: np.ndarray, freq_hz: np.ndarray) -> np.ndarray:
        """Level (..., F) at off-axis angles (...) for the requested frequencies."""
        f = _freq(freq_hz)
        lv = self.levels_db[plane]  # (Ft, A)
        # frequency first: interpolate each angle column on log f → (F, A)
        lf = np.log(self.freq_hz)
        w = np.stack([np.interp(np.log(f), lf, np.eye(len(lf))[k]) for k in range(len(lf))], axis=-1)  # (F, Ft)
        at_f = w @ lv  # (F, A)
        th = np.clip(np.asarray(theta_rad, float), 0.0, np.pi)
        # angle: linear interpolation, vectorised over frequencies
        idx = np.clip(np.searchsorted(self.angle_rad, th, side="right") - 1, 0, len(self.angle_rad) - 2)
        a0, a1 = self.angle_rad[idx], self.angle_rad[idx + 1]
        t = np.clip((th - a0) / (a1 - a0), 0.0, 1.0)[..., None]
        return at_f.T[idx] * (1.0 - t) + at_f.T[idx + 1] * t  # (..., F)


def _table_array(data: dict, key: str, path: str, shape: tuple[int, ...] | None = None) -> np.ndarray:
    if key not in data:
        raise InputError("missing key (a polar table needs freq_hz, angle_deg and its level tables)", file=path,
                         key=key)
    try:
        arr = np.asarray(data[key], dtype=float)
    except (TypeError, ValueError):
        raise InputError("must be a list (of lists) of numbers", file=path, key=key) from None
    if shape is not None and arr.shape != shape:
        raise InputError(f"must have shape {shape} (one row per frequency, one value per angle), got {arr.shape}",
                         file=path, key=key)
    if arr.size == 0 or not np.all(np.isfinite(arr)):
        raise InputError("must hold finite numbers", file=path, key=key)
    return arr


def load_polar_table(path: str, planes: tuple[str, ...]) -> PolarTable:
    """Read and validate a polar table file (cached per path and modification time)."""
    import os

    from howl.model._tomlfile import _read_toml

    try:
        stamp = os.stat(path).st_mtime_ns
    except OSError:
        raise InputError("file not found", file=path) from None
    key = (path, planes, stamp)
    if key in _TABLE_CACHE:
        return _TABLE_CACHE[key]
    data = _read_toml(path)  # size bound, BOM, UTF-8, syntax and nesting: one line naming the file
    allowed = ("freq_hz", "angle_deg", "description", "source") + planes
    for k in data:
        if k not in allowed:
            raise InputError(f"unknown key; valid keys: {', '.join(allowed)}", file=path, key=k)
    freq = _table_array(data, "freq_hz", path)
    ang = _table_array(data, "angle_deg", path)
    if freq.ndim != 1 or np.any(freq <= 0) or np.any(np.diff(freq) <= 0):
        raise InputError("must be increasing frequencies > 0 Hz", file=path, key="freq_hz")
    if ang.ndim != 1 or len(ang) < 2 or ang[0] != 0.0 or ang[-1] != 180.0 or np.any(np.diff(ang) <= 0):
        raise InputError("must be increasing angles from 0 to 180 degrees", file=path, key="angle_deg")
    levels = np.stack([_table_array(data, p, path, (len(freq), len(ang))) for p in planes])
    levels = levels - levels[:, :, :1]  # 0 dB on axis
    if np.any(levels > 20.0):
        raise InputError("holds levels more than 20 dB above on-axis; expected dB re on axis", file=path,
                         key=planes[0])
    table = PolarTable(freq, np.radians(ang), levels, path)
    _TABLE_CACHE[key] = table
    return table


def _named(exc: InputError, who: str, key: str) -> InputError:  # the same error, naming whose file it is
    return InputError(exc.message, file=exc.file, key=f"{who} ({key} {exc.key})" if exc.key else f"{who} ({key})")


def _mic_table(mic: Mic) -> PolarTable:
    try:
        return load_polar_table(str(mic.pattern_file), ("gain_db",))
    except InputError as exc:
        raise _named(exc, f"mic {mic.name!r}", "pattern_file") from None


def _speaker_table(speaker: Speaker):
    path = str(speaker.directivity_file)
    try:
        sofa = path.lower().endswith(".sofa")
        return load_sofa_directivity(path) if sofa else load_polar_table(path, ("horizontal_db", "vertical_db"))
    except InputError as exc:
        raise _named(exc, f"speaker {speaker.name!r}", "directivity_file") from None


class SofaDirectivity:
    """Loudspeaker directivity read from an AES69 (SOFA) file, convention FreeFieldDirectivityTF.

    ``directions`` (R, 3): unit vectors of the receivers in the source's local
    frame (forward = SourceView, up = SourceUp); ``levels_db`` (F, R): |TF| in dB
    re the direction nearest on axis; ``freq_hz`` (F,). Gains toward other
    directions take the nearest measured direction (no smoothing), and log-linear
    interpolation in frequency.
    """

    def __init__(self, freq_hz, directions, levels_db, source):
        self.freq_hz = freq_hz
        self.directions = directions
        self.levels_db = levels_db
        self.source = source

    def gain(self, local: np.ndarray, freq_hz) -> np.ndarray:
        f = _freq(freq_hz)
        loc = np.asarray(local, float)
        flat = loc.reshape(-1, 3)
        nearest = np.argmax(flat @ self.directions.T, axis=-1)  # (P,)
        lf = np.log(self.freq_hz)
        if lf.size == 1:
            at_f = np.repeat(self.levels_db, f.size, axis=0)
        else:
            w = np.stack([np.interp(np.log(f), lf, np.eye(lf.size)[k]) for k in range(lf.size)], axis=-1)
            at_f = w @ self.levels_db  # (F, R)
        db = at_f[:, nearest].T  # (P, F)
        return (10.0 ** (db / 20.0)).reshape(loc.shape[:-1] + (f.size,))


def load_sofa_directivity(path: str) -> SofaDirectivity:
    """Read a FreeFieldDirectivityTF SOFA file with sofar (AES69-2022); cached per path and time stamp."""
    import os

    try:
        stamp = os.stat(path).st_mtime_ns
    except OSError:
        raise InputError("file not found", file=path) from None
    key = (path, "sofa", stamp)
    if key in _TABLE_CACHE:
        return _TABLE_CACHE[key]
    try:
        import sofar
    except ImportError:
        raise InputError("reading SOFA files needs the sofar package (pip install sofar)", file=path) from None
    try:
        sofa = sofar.read_sofa(path, verify=False, verbose=False)
    except Exception as exc:  # sofar/netCDF raise many kinds
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"cannot be read as SOFA ({first})", file=path) from None
    conv = str(getattr(sofa, "GLOBAL_SOFAConventions", ""))
    if conv != "FreeFieldDirectivityTF":
        raise InputError(f"has SOFA convention {conv!r}; expected 'FreeFieldDirectivityTF'", file=path,
                         key="GLOBAL_SOFAConventions")
    try:
        data = np.asarray(sofa.Data_Real, float) + 1j * np.asarray(sofa.Data_Imag, float)  # (M, R, N)
        freq = np.atleast_1d(np.asarray(sofa.N, float)).ravel()
        pos = np.atleast_2d(np.asarray(sofa.ReceiverPosition, float))
        pos_type = str(sofa.ReceiverPosition_Type)
        view = np.asarray(sofa.SourceView, float).reshape(-1, 3)[0]
        up = np.asarray(sofa.SourceUp, float).reshape(-1, 3)[0]
    except AttributeError as exc:
        raise InputError(f"lacks a FreeFieldDirectivityTF field ({exc})", file=path) from None
    if data.ndim != 3 or data.shape[1] != pos.shape[0] or data.shape[2] != freq.size:
        raise InputError(f"Data shape {data.shape} does not match {pos.shape[0]} receivers and {freq.size} "
                         f"frequencies", file=path, key="Data_Real")
    if pos_type.startswith("spherical"):
        az, el = np.radians(pos[:, 0]), np.radians(pos[:, 1])
        dirs = np.stack([np.cos(el) * np.cos(az), np.cos(el) * np.sin(az), np.sin(el)], axis=-1)
    else:
        dirs = pos - np.asarray(sofa.SourcePosition, float).reshape(-1, 3)[0]
    n = np.linalg.norm(dirs, axis=-1, keepdims=True)
    if np.any(n == 0) or np.any(freq <= 0) or not np.all(np.isfinite(data)):
        raise InputError("holds a receiver at the source, a frequency <= 0 Hz or non-finite data", file=path)
    dirs = dirs / n
    fwd = view / np.linalg.norm(view)
    upv = up - (up @ fwd) * fwd
    upv = upv / np.linalg.norm(upv)
    left = np.cross(upv, fwd)
    local = dirs @ np.stack([fwd, left, upv]).T  # components forward / left / up
    order = np.argsort(freq)
    mag = np.abs(data[0][:, order]).T  # first measurement (F, R)
    ref = int(np.argmax(local[:, 0]))
    db = 20.0 * np.log10(np.maximum(mag, 1e-12) / np.maximum(mag[:, ref : ref + 1], 1e-30))
    table = SofaDirectivity(freq[order], local, np.minimum(db, 20.0), path)
    _TABLE_CACHE[key] = table
    return table


def _table_speaker_gain(table, local: np.ndarray, freq_hz) -> np.ndarray:
    if isinstance(table, SofaDirectivity):
        return table.gain(local, freq_hz)
    x, y, z = local[..., 0], local[..., 1], local[..., 2]
    th = np.arccos(np.clip(x, -1.0, 1.0))
    r2 = y * y + z * z
    c2 = np.where(r2 > 0.0, y * y / np.where(r2 > 0.0, r2, 1.0), 0.5)[..., None]
    db = c2 * table.level_db(0, th, freq_hz) + (1.0 - c2) * table.level_db(1, th, freq_hz)
    return 10.0 ** (db / 20.0)


_PHI = (np.arange(32) + 0.5) * (np.pi / 2) / 32  # midpoints on a quarter turn (the tables are symmetric)


def _table_speaker_q(table, freq_hz) -> np.ndarray:
    u = _GL_U[:, None]
    s = np.sqrt(1.0 - u * u)
    if isinstance(table, SofaDirectivity):  # measured data need not be symmetric: the whole turn
        phi = (np.arange(128) + 0.5) * (2 * np.pi) / 128
        shape = (48, 128)
    else:
        phi, shape = _PHI, (48, 32)
    local = np.stack([np.broadcast_to(u, shape), s * np.cos(phi), s * np.sin(phi)], axis=-1)
    g2 = _table_speaker_gain(table, local, freq_hz) ** 2  # (48, nφ, F)
    mean_over_sphere = 0.5 * np.einsum("k,kf->f", _GL_W, g2.mean(axis=1))
    return 1.0 / mean_over_sphere


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
