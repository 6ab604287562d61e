"""Polar tables and SOFA (AES69) directivity files for mics and loudspeakers (private; re-exported by
:mod:`howl.model.directivity`, which dispatches between these measured tables and its first-order and
coverage models)."""

from __future__ import annotations

import numpy as np

from howl.errors import InputError
from howl.model.rig import Mic, Speaker

#: Gauss-Legendre nodes and weights in cos θ for the sphere integrals (REE, Q) of every pattern and table.
_GL_U, _GL_W = np.polynomial.legendre.leggauss(48)  # nodes in cos θ for the REE integral


def _freq(freq_hz) -> np.ndarray:
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    if f.ndim != 1 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise InputError(f"must be a 1-D array of frequencies > 0 Hz, got {freq_hz!r}", key="freq_hz")
    return f


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
