"""The signal chain of a rig, per band: channel high-pass and EQ, mic and loudspeaker responses,
the talker's spectrum and the speech band-importance function (pure numpy).

What the planner uses is :func:`chain_power`: for a set of fractional-octave bands it gives, per
mic, the band average of |capsule response × channel filters|²; per loudspeaker the band average
of |response|²; per mic the talker's band level re its overall level; and the speech
band-importance weights of those bands. A rig that says nothing about its chain gives all ones
(0 dB) for mics and loudspeakers; a talker with no ``spectrum`` is normal-effort speech.

Filters
-------
The channel's filters run at 48 kHz (``fs_hz``) as cascaded biquads, with the formulas of the
RBJ cookbook [1]_ (peaking from :mod:`howl.loop.notch`; low/high-pass and shelves here):

* ``high_pass = {freq_hz, order}``: a Butterworth of order 1..4 with its −3 dB point at
  ``freq_hz``: one RBJ high-pass biquad per pole pair with Q_k = 1/(2·sin((2k−1)π/(2n))) [2]_,
  and for odd orders one first-order section, the bilinear transform of s/(s + ω) prewarped at
  ``freq_hz`` (as the cookbook's biquads are). The result is the bilinear Butterworth that
  ``scipy.signal.butter(n, f, "highpass", fs=48000)`` designs.
* ``eq``: ``peaking`` (gain at f0, Q), ``low_shelf`` / ``high_shelf`` (gain, the cookbook's Q
  form), ``high_pass`` / ``low_pass`` (Q; 0.7071 is Butterworth).

Responses
---------
* A loudspeaker's ``usable_range`` (low and high −10 dB points, slopes in dB/octave) is modelled
  as |H|² = 1/(1 + (f_l/f)^(2n_l)) · 1/(1 + (f/f_h)^(2n_h)) with n = slope/6 (the Butterworth
  magnitude with a real order: its asymptote falls ``slope`` dB per octave) and f_l = low·9^(1/(2n_l)),
  f_h = high/9^(1/(2n_h)), so that each side alone is exactly −10 dB at its point.
* A response table (CSV frequency_hz, level_db) is interpolated linearly in dB over log-frequency,
  held at its end values outside its range, and shifted to 0 dB at 1 kHz: the stated sensitivity
  is the 1 kHz figure.

Talker spectra
--------------
``normal``, ``raised``, ``loud``, ``shouted``: ANSI S3.5-1997 Table 3 [3]_ (standard speech
spectrum levels, one-third-octave bands 160 Hz–8 kHz; the values in
``howl/data/speech_spectrum.toml`` were entered from memory, see that file). Each third-octave
band's power is spectrum level + 10·log10(band width). Outside 160 Hz–8 kHz the standard gives
nothing; howl continues the end bands' slope (band level per third octave) outward, but never
less steep than −2 dB per third octave (−6 dB/octave) — derived: our own choice, so that speech
has little energy outside the standard's range; it matters only for bands outside 160 Hz–8 kHz.
``flat``: the same level in every band of equal relative width (pink). A table file (singers,
instruments): levels as a real-time analyser reads them (level per constant relative band
width), read at one-third-octave resolution. Every spectrum is normalised so that its
one-third-octave bands from 20 Hz to 20 kHz (the audio range) add up in power to 0 dB. Power
within a third-octave band is spread evenly over log-frequency, so band levels of any
1/b-octave bands follow by overlap.

Band importance
---------------
ANSI S3.5-1997 Table 3 [3]_, one-third-octave procedure, spread the same way; zero outside
its bands; normalised to sum 1 over the bands asked for.

References
----------
.. [1] R. Bristow-Johnson, "Cookbook formulae for audio EQ biquad filter coefficients"
       (Audio EQ Cookbook, W3C Working Group Note, 2021, https://www.w3.org/TR/audio-eq-cookbook/).
.. [2] S. Butterworth, "On the theory of filter amplifiers", Wireless Engineer 7 (1930) 536–541;
       pole angles of the normalised Butterworth polynomial (any filter-design text).
.. [3] ANSI S3.5-1997 (R2007), *Methods for Calculation of the Speech Intelligibility Index*,
       Table 3.
"""

from __future__ import annotations

import functools
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from howl.loop.notch import rbj_peaking_sos, sos_response

#: Sample rate of the channel filters (a desk's usual rate).
CHAIN_FS_HZ = 48000.0
#: Points per band for the band averages (log-spaced inside each band).
POINTS_PER_BAND = 16
#: The audio range over which talker spectra add up to 0 dB: third-octave bands k = −17..13
#: (exact centres 19.95 Hz .. 19.95 kHz, IEC 61260-1 base 10).
_AUDIO_K = (-17, 13)
#: Third-octave bands modelled (k = −20..16: 10 Hz .. 40 kHz); power outside is taken as zero.
_MODEL_K = (-20, 16)
#: Floor of the band levels returned (a band with no modelled power), dB.
LEVEL_FLOOR_DB = -150.0
#: Steepest-slope floor of the speech extrapolation: band level falls at least this much per third octave.
_MIN_FALL_DB_PER_THIRD = 2.0

_SPEECH_PATH = Path(__file__).resolve().parents[1] / "data" / "speech_spectrum.toml"


@dataclass(frozen=True)
class ChainPower:
    """The chain per band, for :func:`chain_power`'s bands (see the module docstring).

    mic_power: (M, F) band mean of |capsule response × channel high-pass/EQ|², ``rig.mics`` order.
    speaker_power: (S, F) band mean of |loudspeaker response|², ``rig.speakers`` order.
    talker_level_db: (M, F) the mic's talker's band level re its overall level (power sum over
        the audio range = 0 dB); normal-effort speech for a mic without a talker.
    importance: (F,) speech band-importance weights, summing to 1 over these bands.
    """

    mic_power: np.ndarray
    speaker_power: np.ndarray
    talker_level_db: np.ndarray
    importance: np.ndarray


# --------------------------------------------------------------------------- filters ----

def _biquad(kind: str, f0: float, q: float, gain_db: float, fs: float) -> np.ndarray:
    """One RBJ cookbook section (1, 6) [1]_ of kind high_pass, low_pass, low_shelf, high_shelf, peaking."""
    if kind == "peaking":
        return rbj_peaking_sos(f0, gain_db, q, fs)
    w0 = 2.0 * math.pi * f0 / fs
    c, alpha = math.cos(w0), math.sin(w0) / (2.0 * q)
    if kind == "high_pass":
        b = [(1 + c) / 2, -(1 + c), (1 + c) / 2]
        a = [1 + alpha, -2 * c, 1 - alpha]
    elif kind == "low_pass":
        b = [(1 - c) / 2, 1 - c, (1 - c) / 2]
        a = [1 + alpha, -2 * c, 1 - alpha]
    else:
        big_a = 10.0 ** (gain_db / 40.0)
        r = 2.0 * math.sqrt(big_a) * alpha
        s = 1.0 if kind == "low_shelf" else -1.0  # the cookbook's two shelves differ in these signs only
        b = [big_a * ((big_a + 1) - s * (big_a - 1) * c + r), s * 2 * big_a * ((big_a - 1) - s * (big_a + 1) * c),
             big_a * ((big_a + 1) - s * (big_a - 1) * c - r)]
        a = [(big_a + 1) + s * (big_a - 1) * c + r, -s * 2 * ((big_a - 1) + s * (big_a + 1) * c),
             (big_a + 1) + s * (big_a - 1) * c - r]
    return np.array([[b[0] / a[0], b[1] / a[0], b[2] / a[0], 1.0, a[1] / a[0], a[2] / a[0]]])


def _first_order_high_pass(f0: float, fs: float) -> np.ndarray:
    """Bilinear transform of s/(s + ω0), prewarped at f0: K = tan(π f0/fs), b = [1, −1]/(1+K), a1 = (K−1)/(K+1)."""
    k = math.tan(math.pi * f0 / fs)
    return np.array([[1.0 / (1.0 + k), -1.0 / (1.0 + k), 0.0, 1.0, (k - 1.0) / (k + 1.0), 0.0]])


def butterworth_qs(order: int) -> list[float]:
    """Q of each pole pair of an order-n Butterworth: 1/(2·sin((2k−1)π/(2n))), k = 1..n//2 [2]_."""
    return [1.0 / (2.0 * math.sin((2 * k - 1) * math.pi / (2 * order))) for k in range(1, order // 2 + 1)]


def high_pass_sos(freq_hz: float, order: int, fs_hz: float = CHAIN_FS_HZ) -> np.ndarray:
    """The channel high-pass as SOS rows (n, 6): Butterworth of ``order`` at ``freq_hz`` (−3 dB)."""
    rows = [_biquad("high_pass", freq_hz, q, 0.0, fs_hz) for q in butterworth_qs(order)]
    if order % 2:
        rows.append(_first_order_high_pass(freq_hz, fs_hz))
    return np.vstack(rows)


def channel_sos(mic, fs_hz: float = CHAIN_FS_HZ) -> np.ndarray:
    """All of a mic channel's filters (high-pass, then the EQ bands) as SOS rows; (0, 6) when none."""
    rows = []
    if getattr(mic, "high_pass", None) is not None:
        rows.append(high_pass_sos(mic.high_pass.freq_hz, mic.high_pass.order, fs_hz))
    for band in getattr(mic, "eq", ()):
        rows.append(_biquad(band.kind, band.freq_hz, band.q, band.gain_db, fs_hz))
    return np.vstack(rows) if rows else np.zeros((0, 6))


def channel_response(mic, freq_hz, fs_hz: float = CHAIN_FS_HZ) -> np.ndarray:
    """Complex response of the mic channel's high-pass and EQ at ``freq_hz`` (ones when it has none)."""
    f = np.asarray(freq_hz, dtype=float)
    return sos_response(channel_sos(mic, fs_hz), f.ravel(), fs_hz).reshape(f.shape)


# --------------------------------------------------------------------------- responses ----

def table_response_db(rows, freq_hz, *, ref_hz: float | None = 1000.0) -> np.ndarray:
    """A (frequency_hz, level_db) table at ``freq_hz``: linear in dB over log f, ends held, 0 dB at ``ref_hz``."""
    t = np.asarray(rows, dtype=float)
    lf = np.log(t[:, 0])
    out = np.interp(np.log(np.asarray(freq_hz, dtype=float)), lf, t[:, 1])
    if ref_hz is not None:
        out = out - np.interp(math.log(ref_hz), lf, t[:, 1])
    return out


def range_power(usable_range, freq_hz) -> np.ndarray:
    """|H|² of a loudspeaker's usable range (see the module docstring)."""
    f = np.asarray(freq_hz, dtype=float)
    n_l, n_h = usable_range.low_slope_db_per_oct / 6.0, usable_range.high_slope_db_per_oct / 6.0
    f_l = usable_range.low_hz * 9.0 ** (1.0 / (2.0 * n_l))
    f_h = usable_range.high_hz / 9.0 ** (1.0 / (2.0 * n_h))
    return 1.0 / (1.0 + (f_l / f) ** (2.0 * n_l)) / (1.0 + (f / f_h) ** (2.0 * n_h))


def speaker_response_db(speaker, freq_hz) -> np.ndarray:
    """A loudspeaker's on-axis response in dB re its stated sensitivity (0 where the rig says nothing)."""
    f = np.asarray(freq_hz, dtype=float)
    if getattr(speaker, "response_table", None):
        return table_response_db(speaker.response_table, f)
    if getattr(speaker, "usable_range", None) is not None:
        return 10.0 * np.log10(range_power(speaker.usable_range, f))
    return np.zeros(f.shape)


def mic_response_db(mic, freq_hz) -> np.ndarray:
    """A mic capsule's on-axis response in dB re its stated sensitivity (0 without a response table)."""
    f = np.asarray(freq_hz, dtype=float)
    if getattr(mic, "response_table", None):
        return table_response_db(mic.response_table, f)
    return np.zeros(f.shape)


# --------------------------------------------------------------------------- bands ----

def band_points_hz(freq_hz, fraction: int, n: int = POINTS_PER_BAND) -> np.ndarray:
    """(F, n) log-spaced points inside each 1/fraction-octave band (mid-points of n equal log steps)."""
    from howl.bands import band_edges_hz

    lo, hi = band_edges_hz(np.asarray(freq_hz, dtype=float), fraction)
    u = (np.arange(n) + 0.5) / n
    return np.exp(np.log(lo)[:, None] + np.outer(np.log(hi / lo), u))


def _band_mean(power_fn, freq_hz, fraction: int) -> np.ndarray:
    pts = band_points_hz(freq_hz, fraction)
    return power_fn(pts).mean(axis=-1)


# --------------------------------------------------------------------------- talker spectra ----

@functools.lru_cache(maxsize=1)
def speech_table() -> dict:
    """The shipped ANSI S3.5-1997 Table 3 values (see ``howl/data/speech_spectrum.toml``)."""
    with open(_SPEECH_PATH, "rb") as fh:
        data = tomllib.load(fh)
    return {"centre_hz": np.array(data["centre_hz"], float), "importance": np.array(data["importance"], float),
            "spectrum_level_db": {k: np.array(x, float) for k, x in data["spectrum_level_db"].items()},
            "source": data["source"]}


def _third_centres(k0: int, k1: int) -> np.ndarray:
    return 1000.0 * 10.0 ** (np.arange(k0, k1 + 1) / 10.0)


_SPEECH_K = (-8, 9)  # 160 Hz .. 8 kHz


def _speech_thirds_db(effort: str) -> np.ndarray:
    """Band levels (dB) on the modelled thirds _MODEL_K for one vocal effort (see the module docstring)."""
    fc = _third_centres(*_SPEECH_K)
    width = fc * (10.0 ** 0.05 - 10.0 ** -0.05)
    level = speech_table()["spectrum_level_db"][effort] + 10.0 * np.log10(width)
    n_lo, n_hi = _SPEECH_K[0] - _MODEL_K[0], _MODEL_K[1] - _SPEECH_K[1]
    step_lo = min(level[0] - level[1], -_MIN_FALL_DB_PER_THIRD)  # per third, going down
    step_hi = min(level[-1] - level[-2], -_MIN_FALL_DB_PER_THIRD)  # per third, going up
    lo = level[0] + step_lo * np.arange(n_lo, 0, -1)
    hi = level[-1] + step_hi * np.arange(1, n_hi + 1)
    return np.concatenate([lo, level, hi])


def _thirds_db(spectrum) -> np.ndarray:
    """Band levels on the modelled thirds for a spectrum name or a (frequency_hz, level_db) table."""
    n = _MODEL_K[1] - _MODEL_K[0] + 1
    if isinstance(spectrum, str):
        if spectrum == "flat":
            return np.zeros(n)
        if spectrum in speech_table()["spectrum_level_db"]:
            return _speech_thirds_db(spectrum)
        raise ValueError(f"unknown talker spectrum {spectrum!r}")
    return table_response_db(spectrum, _third_centres(*_MODEL_K), ref_hz=None)


def _overlap(lo: np.ndarray, hi: np.ndarray, e_lo: np.ndarray, e_hi: np.ndarray) -> np.ndarray:
    """(F, K) fraction of each of K cells [e_lo, e_hi] (log f) inside each of F bands [lo, hi]."""
    a = np.maximum(np.log(lo)[:, None], np.log(e_lo)[None, :])
    b = np.minimum(np.log(hi)[:, None], np.log(e_hi)[None, :])
    return np.clip(b - a, 0.0, None) / np.log(e_hi / e_lo)[None, :]


def _third_edges(k0: int, k1: int) -> tuple[np.ndarray, np.ndarray]:
    fc = _third_centres(k0, k1)
    return fc * 10.0 ** -0.05, fc * 10.0 ** 0.05


def talker_band_levels_db(talker_or_spectrum, freq_hz, fraction: int) -> np.ndarray:
    """Band levels (dB re the overall level over the audio range) of a talker's spectrum.

    ``talker_or_spectrum``: a :class:`~howl.model.rig.Talker`, a spectrum name (normal, raised,
    loud, shouted, flat) or a table of (frequency_hz, level_db) rows. Bands are the
    1/``fraction``-octave bands centred on ``freq_hz``.
    """
    from howl.bands import band_edges_hz

    spec = talker_or_spectrum
    if hasattr(spec, "spectrum"):
        spec = spec.spectrum_table if spec.spectrum == "table" else spec.spectrum
    p = 10.0 ** (_thirds_db(spec) / 10.0)
    k_a = slice(_AUDIO_K[0] - _MODEL_K[0], _AUDIO_K[1] - _MODEL_K[0] + 1)
    p = p / p[k_a].sum()
    lo, hi = band_edges_hz(np.asarray(freq_hz, dtype=float), fraction)
    band = _overlap(lo, hi, *_third_edges(*_MODEL_K)) @ p
    with np.errstate(divide="ignore"):
        return np.maximum(10.0 * np.log10(band), LEVEL_FLOOR_DB)


def speech_band_importance(freq_hz, fraction: int) -> np.ndarray:
    """ANSI S3.5-1997 band importance of the 1/``fraction``-octave bands at ``freq_hz``, summing to 1.

    Bands wholly outside 141 Hz–8.9 kHz (the table's third-octave bands) weigh 0; if no band
    overlaps them at all, every band weighs the same.
    """
    from howl.bands import band_edges_hz

    lo, hi = band_edges_hz(np.asarray(freq_hz, dtype=float), fraction)
    w = _overlap(lo, hi, *_third_edges(*_SPEECH_K)) @ speech_table()["importance"]
    total = w.sum()
    return w / total if total > 0 else np.full(w.shape, 1.0 / max(w.size, 1))


# --------------------------------------------------------------------------- the rig ----

def chain_power(rig, freq_hz, fraction: int) -> ChainPower:
    """The rig's chain per 1/``fraction``-octave band at ``freq_hz`` (see :class:`ChainPower`)."""
    f = np.asarray(freq_hz, dtype=float)

    def mic_power(mic):
        return _band_mean(lambda x: np.abs(channel_response(mic, x)) ** 2 * 10.0 ** (mic_response_db(mic, x) / 10.0),
                          f, fraction)

    def speaker_power(spk):
        return _band_mean(lambda x: 10.0 ** (speaker_response_db(spk, x) / 10.0), f, fraction)

    talker_of = {}
    for t in rig.talkers:
        talker_of.setdefault(t.mic, t)
    levels = {}

    def level(m):
        t = talker_of.get(m.name)
        key = "normal" if t is None else (t.name if t.spectrum == "table" else t.spectrum)
        if key not in levels:
            levels[key] = talker_band_levels_db("normal" if t is None else t, f, fraction)
        return levels[key]

    return ChainPower(
        mic_power=np.array([mic_power(m) for m in rig.mics]).reshape(len(rig.mics), f.size),
        speaker_power=np.array([speaker_power(s) for s in rig.speakers]).reshape(len(rig.speakers), f.size),
        talker_level_db=np.array([level(m) for m in rig.mics]).reshape(len(rig.mics), f.size),
        importance=speech_band_importance(f, fraction),
    )
