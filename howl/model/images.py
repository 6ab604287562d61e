"""Image-source impulse responses for shoebox rooms, and loop IRs of a rig from geometry.

The engine follows the image method of Allen & Berkley [1]: the field of a
point source in a rectangular room with rigid-ish walls is the free field of
the source plus its mirror images in the six walls, each image weakened by the
reflection factors of the walls its path meets. Everything is vectorised over
images (numpy; no Python loop per image):

* **Images.** For integer indices (kx, ky, kz) with |kx|+|ky|+|kz| ≤ max_order
  the image coordinate along an axis of length L is ``k·L + s`` for even k and
  ``(k+1)·L − s`` for odd k; an image of index k has met the far wall
  ⌈k/2⌉ times and the near wall ⌊k/2⌋ times (k ≥ 0; mirrored for k < 0) [1].
* **Walls.** Each surface reflects with pressure amplitude ``sqrt(1 − α)`` in
  each octave band (α: the material's energy absorption coefficient). An
  image's band gain is the product over surfaces of ``sqrt(1−α_s)**n_s``,
  computed for all images at once as ``exp(hits @ log_reflection)``.
* **Air.** ``exp(−m·d/2)`` in amplitude per band, m the power attenuation
  coefficient of ISO 9613-1 [2] from :func:`howl.room.air_power_attenuation_m_inv`.
* **Directivity.** The loudspeaker's gain toward each image's *departure*
  direction (the direction of the ray as it left the real source: the image →
  mic vector with each mirrored axis flipped back) and the mic's gain toward
  each *arrival* direction (mic → image), per band.
* **Placement.** Each image is a windowed-sinc (Kaiser) band-limited
  fractional delay, normalised to unit DC gain, so arrival times are not
  rounded to samples (no comb artefacts from rounding).
* **Band synthesis.** Per-band impulse trains are combined in the frequency
  domain with zero-phase weights that form a partition of unity on a
  log-frequency axis (raised-cosine crossovers between adjacent octave
  centres, held flat below the lowest and above the highest centre). An image
  whose band gains are all equal therefore comes out as exactly its
  fractional delay; otherwise its spectrum is the smooth interpolation of its
  band gains with no added phase. (Where band gains differ, each arrival gets
  a short symmetric spread in time, ≈ one period of the crossover frequency,
  at about 1e-4 of its level; the IR is set to zero before the first
  arrival's fractional-delay filter, so the loop stays causal.)
* **Late tail.** Beyond the order used, the image set is incomplete. From the
  transition time (the earliest arrival of the first missing order) the
  images are faded out and Gaussian noise is faded in (equal-power
  crossfade). Its mean-square envelope per band is the classical diffuse
  decay ``e(t) ∝ exp(−13.82·t/T)`` with T the room's RT60 in that band, and
  its total level is the Hopkins–Stryker reverberant energy 4/R (R the room
  constant) [3], weighted by the loudspeaker's power (1/Q relative to on
  axis) and the mic's random-energy efficiency, both integrated numerically
  over the sphere from the gain functions given. So the tail's decay and
  energy are the room model's (:func:`howl.room.room_acoustics`).

Normalisation: an omni source and mic at distance d give a direct path of
amplitude ``1/(4π·d)`` (the free-field Green's function, as in [1]); the IR is
sampled so that its DTFT is the transfer function (no 1/fs factor).

References
----------
.. [1] J. B. Allen and D. A. Berkley, "Image method for efficiently simulating
       small-room acoustics", J. Acoust. Soc. Am. 65(4):943–950, 1979.
.. [2] ISO 9613-1:1993, Acoustics — Attenuation of sound during propagation
       outdoors — Part 1: Calculation of the absorption of sound by the atmosphere.
.. [3] H. F. Hopkins and N. R. Stryker, "A proposed loudness-efficiency rating
       for loudspeakers and the determination of system power requirements for
       enclosures", Proc. IRE 36(3):315–335, 1948 (reverberant term 4/R).
.. [4] H. Kuttruff, *Room Acoustics*, 5th ed., Spon 2009, ch. 4–5 (diffuse
       decay, image density; from memory).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from howl import validate as V
from howl.errors import InputError
from howl.model.rig import OCTAVE_BANDS_HZ, SHOEBOX_SURFACES, Mic, Rig, Room, Speaker
from howl.units import speed_of_sound_m_s
from howl.model._image_room import (  # noqa: F401  (re-exported)
    _DECAY_LN,
    _add_tail,
    _air_m_inv,
    _check_inside,
    _require_shoebox,
    _sphere_directions,
    _surface_absorption,
    _tail_model,
    diffuse_power_factor,
)
from howl.model._image_synth import (  # noqa: F401  (re-exported: the public names and what tests reach)
    ImageSet,
    _first_missing_arrival_s,
    _fractional_delay_kernel,
    _image_layout,
    _images_from_indices,
    _index_triples,
    _kernel_table,
    _place_images,
    _scatter,
    band_weights,
    shoebox_images,
)

GainFunction = Callable[[np.ndarray, np.ndarray], np.ndarray]

#: Largest image set one IR may use (memory: about 1 kB per image during synthesis).
MAX_IMAGES = 3_000_000



@dataclass(frozen=True)
class ImageSourceInfo:
    """What an IR was made of (for reports and tests)."""

    n_images: int
    max_order: int
    transition_time_s: float | None  # images faded out / tail faded in here (None: no tail)
    crossfade_s: float
    bands_hz: np.ndarray
    rt60_s: np.ndarray | None  # per band, the tail's decay
    tail_energy: np.ndarray | None  # per band, expected Σh² of the tail (after the crossfade)
    reverberant_energy: np.ndarray | None  # per band, the model's total 4/R reverberant energy (see module doc)
    speed_of_sound_m_s: float


# ---------------------------------------------------------------------------
# the image-source IR
# ---------------------------------------------------------------------------



def image_source_ir(
    room: Room,
    source_position_m,
    mic_position_m,
    sample_rate_hz: float,
    *,
    max_order: int | None = None,
    source_gain: GainFunction | None = None,
    mic_gain: GainFunction | None = None,
    tail: bool = True,
    seed: int = 0,
    duration_s: float | None = None,
    speed_of_sound_m_s: float | None = None,
    air_absorption: bool = True,
    half_width: int = 16,
    crossfade_s: float | None = None,
    delay_s: float = 0.0,
    return_info: bool = False,
):
    """Impulse response from a point source to a point receiver in a shoebox room.

    Parameters
    ----------
    room : howl.rig.Room
        A shoebox room (``dimensions_m`` and six surfaces with octave-band absorption).
    source_position_m, mic_position_m : 3 numbers, inside the room.
    sample_rate_hz : float
    max_order : int, optional
        Highest number of reflections of an image. Default: 6 with a tail, 20 without.
    source_gain : callable(directions (N, 3), freq_hz (B,)) -> (N, B), optional
        Amplitude toward unit vectors pointing from the source outward (1 on axis). None: omni.
    mic_gain : callable(directions (N, 3), freq_hz (B,)) -> (N, B), optional
        Amplitude toward unit vectors pointing from the mic toward the sound's origin. None: omni.
    tail : bool
        Add the statistical late tail after the transition time (needs the room model).
    seed : int
        Seed of the tail's noise.
    duration_s : float, optional
        IR length. Default: up to the −60 dB point of the slowest band's decay
        (with tail) or the last image's arrival (without).
    speed_of_sound_m_s : float, optional
        Default: from the room's temperature (:func:`howl.units.speed_of_sound_m_s`).
    air_absorption : bool
        Apply ISO 9613-1 air absorption to each image path.
    half_width : int
        Fractional-delay filter half length in samples (taps = 2·half_width).
    crossfade_s : float, optional
        Length of the image→tail crossfade ending at the transition time.
        Default: a quarter of the transition time, at most 20 ms.
    delay_s : float
        Electronic delay before the source (a delay line): shifts the whole IR.
    return_info : bool
        Also return an :class:`ImageSourceInfo`.

    Returns
    -------
    ir : ndarray (n,), float64; sample 0 is the emission time.

    (Long for its documented parameters: the body is about 45 lines.)
    """
    _require_shoebox(room)
    fs = V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    src = _check_inside(room, source_position_m, "source_position_m")
    mic = _check_inside(room, mic_position_m, "mic_position_m")
    max_order = _checked_order(max_order, tail)
    half_width = V.integer(half_width, "half_width", 2, 512)
    c = speed_of_sound_m_s_default(room) if speed_of_sound_m_s is None else V.positive(
        speed_of_sound_m_s, "speed_of_sound_m_s", unit="m/s"
    )
    delay_s = V.in_range(delay_s, "delay_s", 0.0, 10.0, unit="s")
    dims = np.asarray(room.dimensions_m, dtype=float)
    bands = np.asarray(OCTAVE_BANDS_HZ, dtype=float)
    imgs = shoebox_images(dims, src, max_order)
    amp, dist = _image_amplitudes(room, imgs, mic, bands, source_gain, mic_gain, air_absorption)
    t_arr = dist / c + delay_s
    rt60 = r_m2 = t_x = tail_energy = rev_energy = None
    if tail:
        rt60, r_m2 = _tail_model(room, bands)
        t_x = _first_missing_arrival_s(dims, src, mic, max_order, c) + delay_s
        amp, t_arr, crossfade_s = _fade_out_images(amp, t_arr, t_x, crossfade_s, fs)
    else:
        crossfade_s = 0.0 if crossfade_s is None else float(crossfade_s)
    delay = t_arr * fs
    n = _ir_length(duration_s, rt60, t_x, delay, half_width, fs)
    inside = delay < n + half_width
    amp_in = amp[inside]
    if not tail and (amp_in.size == 0 or np.all(amp_in == amp_in[:, :1])):
        # equal band gains: the band weights sum to one, so skip the band synthesis and scale each
        # image's kernel by its gain directly
        ir = _place_images(delay[inside], amp_in[:, 0] if amp_in.size else np.zeros(0), half_width, n)
        return _finish(ir, return_info, imgs, max_order, t_x, crossfade_s, bands, rt60, tail_energy, rev_energy, c)
    ir, tail_energy, rev_energy = _band_synthesis(
        delay[inside], amp_in, n, fs, bands, half_width,
        (rt60, r_m2, t_x, crossfade_s, delay_s, source_gain, mic_gain, seed) if tail else None,
    )
    # causal: nothing before the first arrival's fractional-delay filter (the zero-phase band
    # crossovers leak ~1e-4 of the peak ahead of an arrival whose band gains differ)
    if delay.size:
        ir[: max(0, int(math.floor(float(delay.min()))) - half_width + 1)] = 0.0
    return _finish(ir, return_info, imgs, max_order, t_x, crossfade_s, bands, rt60, tail_energy, rev_energy, c)


def _checked_order(max_order, tail: bool) -> int:
    """The image order (default 6 with a tail, 20 without), refused past :data:`MAX_IMAGES` images."""
    if max_order is None:
        max_order = 6 if tail else 20
    max_order = V.integer(max_order, "max_order", 0, 150)
    n_img = (2 * max_order + 1) * (2 * max_order**2 + 2 * max_order + 3) // 3  # |kx|+|ky|+|kz| ≤ N
    if n_img > MAX_IMAGES:
        raise InputError(
            f"gives {n_img} image sources; expected at most {MAX_IMAGES} (lower the order: the statistical "
            "tail takes over the late part)", key="max_order",
        )
    return max_order


def _ir_length(duration_s, rt60, t_x, delay, half_width, fs) -> int:
    """Samples of the IR: ``duration_s``, else to the −60 dB point of the slowest band (with a tail,
    ``rt60`` given) or to the last image's arrival (without)."""
    if duration_s is None:
        if rt60 is not None:
            n = int(math.ceil((float(np.max(rt60)) * 1.05 + t_x) * fs))  # t_x includes delay_s
        else:
            n = int(math.ceil(delay.max())) + half_width + 1
    else:
        n = int(math.ceil(V.positive(duration_s, "duration_s", unit="s") * fs))
    return max(n, 1)


def _fade_out_images(amp, t_arr, t_x, crossfade_s, fs):
    """Images faded out (equal-power) over the crossfade ending at the transition time ``t_x``;
    those past it dropped. Returns (amplitudes, arrival times, crossfade length)."""
    if crossfade_s is None:
        crossfade_s = min(0.25 * t_x, 0.02)
    crossfade_s = max(float(crossfade_s), 2.0 / fs)
    u = np.clip((t_arr - (t_x - crossfade_s)) / crossfade_s, 0.0, 1.0)
    w_img = np.cos(0.5 * math.pi * u)
    keep = w_img > 0
    return amp[keep] * w_img[keep, None], t_arr[keep], crossfade_s


def _band_synthesis(delay, amp_in, n, fs, bands, half_width, tail_args):
    """The IR (n,) from images with per-band amplitudes: each band's images placed in one FFT frame,
    the statistical tail added per band (``tail_args``, or None), the bands summed through zero-phase
    crossover weights. Returns (ir, tail energy per band, reverberant energy per band)."""
    start, taps = _fractional_delay_kernel(delay, half_width)
    # zero-phase band synthesis in one FFT frame with room for the kernels' spread
    pad = int(math.ceil(0.1 * fs)) + 2 * half_width
    n_fft = _good_fft_size(n + pad)
    chan = _scatter(start, taps, np.broadcast_to(amp_in, (amp_in.shape[0], bands.size)), n_fft)  # (B, n_fft)
    tail_energy = rev_energy = None
    if tail_args is not None:
        tail_energy, rev_energy = _add_tail(chan, n, fs, bands, *tail_args)
    from scipy import fft as sfft

    weights = band_weights(np.fft.rfftfreq(n_fft, 1.0 / fs), bands)  # (B, F)
    spec = np.einsum("bf,bf->f", weights, sfft.rfft(chan, axis=1))
    return sfft.irfft(spec, n_fft)[:n], tail_energy, rev_energy


def _image_amplitudes(room, imgs, mic, bands, source_gain, mic_gain, air_absorption):
    """Band amplitudes (N, B) of the images at the mic, and their distances (N,).

    With the same absorption in every band, no air absorption and omni source and mic, every
    band has the same amplitude: computed once, as (N, 1).
    """
    alpha = _surface_absorption(room)  # (6, B)
    if source_gain is None and mic_gain is None and not air_absorption and np.all(alpha == alpha[:, :1]):
        alpha = alpha[:, :1]
    vec = imgs.positions_m - mic  # mic → image
    dist = np.linalg.norm(vec, axis=1)
    dist = np.maximum(dist, 1e-6)
    log_refl = 0.5 * np.log1p(-alpha)  # (6, B)
    log_amp = imgs.hits.astype(float) @ log_refl
    if air_absorption:
        m = _air_m_inv(room, bands)
        log_amp -= 0.5 * dist[:, None] * m[None, :]
    amp = np.exp(log_amp) / (4.0 * math.pi * dist[:, None])
    if source_gain is not None or mic_gain is not None:
        arrive_dir = vec / dist[:, None]
        depart_dir = (-arrive_dir) * imgs.mirror_sign  # as the ray left the real source
        if source_gain is not None:
            amp *= np.asarray(source_gain(depart_dir, bands), dtype=float)
        if mic_gain is not None:
            amp *= np.asarray(mic_gain(arrive_dir, bands), dtype=float)
    return amp, dist



def _finish(ir, return_info, imgs, max_order, t_x, crossfade_s, bands, rt60, tail_energy, rev_energy, c):
    if not return_info:
        return ir
    info = ImageSourceInfo(
        n_images=int(imgs.order.size),
        max_order=int(max_order),
        transition_time_s=t_x,
        crossfade_s=float(crossfade_s),
        bands_hz=bands,
        rt60_s=rt60,
        tail_energy=tail_energy,
        reverberant_energy=rev_energy,
        speed_of_sound_m_s=float(c),
    )
    return ir, info


def _good_fft_size(n: int) -> int:
    from scipy.fft import next_fast_len

    return int(next_fast_len(int(n), real=True))


def speed_of_sound_m_s_default(room: Room) -> float:
    """The speed of sound at the room's temperature."""
    return float(speed_of_sound_m_s(room.temperature_c))


# ---------------------------------------------------------------------------
# loops of a rig
# ---------------------------------------------------------------------------

#: Amplitude factor from the Green's-function scale 1/(4π·r) to "pressure at r per pressure at 1 m" (1/r).
_GREEN_TO_1M = 4.0 * math.pi


def _speaker_gain_fn(speaker: Speaker) -> GainFunction:
    from howl.model.directivity import speaker_gain

    return lambda d, f: speaker_gain(speaker, d, f)


def _mic_gain_fn(mic: Mic) -> GainFunction:
    from howl.model.directivity import mic_gain

    return lambda d, f: mic_gain(mic, d, f)


def _electrical_gain(speaker: Speaker, mic: Mic) -> float:
    """Volts at the mic output per volt at the speaker input, per unit Green's-function amplitude.

    Speaker: on-axis SPL at 1 m for 1 V → p₁ = 20 µPa·10^(S/20) Pa/V; the image IR
    is on the 1/(4πr) scale, so ×4π gives p₁/r. Mic: 10^(s/20) V/Pa (see :mod:`howl.rig`).
    """
    from howl.units import P_REF_PA

    p1 = P_REF_PA * 10.0 ** (speaker.sensitivity_db_spl_1v_1m / 20.0)
    m = 10.0 ** (mic.sensitivity_dbv_pa / 20.0)
    return _GREEN_TO_1M * p1 * m


def rig_loop_irs(
    rig: Rig,
    sample_rate_hz: float,
    *,
    max_order: int | None = None,
    tail: bool = True,
    seed: int = 0,
    duration_s: float | None = None,
    half_width: int = 16,
):
    """Loop IRs of every (speaker, mic) pair of ``rig`` from image sources, with the electrical gains.

    ``irs[s, m]`` runs from loudspeaker s's input (volts) to mic m's output
    (volts): speaker sensitivity × acoustic path (images with both
    directivities, the speaker's delay line) × mic sensitivity. ``mix_lin[s, m]``
    is the voltage gain from mic m's output to speaker s's input
    (:func:`howl.plan.mix_matrix`; muted mics 0). The loop of the whole rig is
    then L(f)[i, j] = Σ_s H[s, i](f)·mix[s, j] (:func:`howl.loop.mimo_margin`).

    Each pair's tail gets its own noise (seeded from ``(seed, s, m)``).

    Returns
    -------
    irs : ndarray (n_spk, n_mic, n)
    mix_lin : ndarray (n_spk, n_mic)
    """
    from howl.model.plan import mix_matrix

    _require_shoebox(rig.room)
    fs = V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    mix = mix_matrix(rig)
    parts = []
    for si, spk in enumerate(rig.speakers):
        row = []
        for mi, mic in enumerate(rig.mics):
            try:
                h = image_source_ir(
                    rig.room, spk.position_m, mic.position_m, fs, max_order=max_order,
                    source_gain=_speaker_gain_fn(spk), mic_gain=_mic_gain_fn(mic), tail=tail,
                    seed=np.random.SeedSequence([int(seed), si, mi]).generate_state(1)[0],
                    duration_s=duration_s, half_width=half_width, delay_s=spk.delay_s,
                )
            except InputError as exc:
                key = exc.key or ""
                who = f"speakers.{spk.name}.position_m" if key.startswith("source") else (
                    f"mics.{mic.name}.position_m" if key.startswith("mic") else key)
                raise InputError(exc.message, file=rig.source_file or exc.file, key=who) from None
            row.append(h * _electrical_gain(spk, mic))
        parts.append(row)
    n = max(h.size for row in parts for h in row)
    irs = np.zeros((len(rig.speakers), len(rig.mics), n))
    for si, row in enumerate(parts):
        for mi, h in enumerate(row):
            irs[si, mi, : h.size] = h
    return irs, mix


def mic_loop_ir(rig: Rig, mic_name: str, sample_rate_hz: float, *, max_order: int | None = None, seed: int = 0,
                tail: bool = True, chain: bool = True) -> np.ndarray:
    """The loop IR of one mic alone (the other mics closed): Σ_s H[s, m]·mix[s, m] from image sources.

    ``chain``: with the rig's signal chain in (each loudspeaker's response on its own path, then the
    mic's capsule and channel: :func:`howl.model._images_chain.chained_loop_irs`), the one basis of
    the plan; False gives the bare room."""
    from howl.model.plan import mix_matrix

    names = [m.name for m in rig.mics]
    if mic_name not in names:
        raise InputError(f"must name a mic of the rig ({', '.join(names)}), got {mic_name!r}", key="mic")
    k = names.index(mic_name)
    mic = rig.mics[k]
    mix = mix_matrix(rig)
    fs = V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    parts = []
    for si, spk in enumerate(rig.speakers):
        if mix[si, k] == 0:
            continue
        h = image_source_ir(rig.room, spk.position_m, mic.position_m, fs, max_order=max_order,
                            source_gain=_speaker_gain_fn(spk), mic_gain=_mic_gain_fn(mic), tail=tail,
                            seed=np.random.SeedSequence([int(seed), si, k]).generate_state(1)[0],
                            delay_s=spk.delay_s)
        parts.append((h * (_electrical_gain(spk, mic) * mix[si, k]), si))
    if not parts:
        raise InputError(f"mic {mic_name!r} reaches no loudspeaker through the mixes", key="mixes")
    n = max(p.size for p, _ in parts)
    if chain:
        from howl.model._images_chain import chained_loop_irs, rig_has_chain

        if rig_has_chain(rig):  # each loudspeaker's response goes on its own path, before the sum
            stack = np.zeros((len(rig.speakers), len(rig.mics), n))
            for p, si in parts:
                stack[si, k, : p.size] = p
            return chained_loop_irs(rig, stack, fs)[:, k, :].sum(axis=0)
    out = np.zeros(n)
    for p, _ in parts:
        out[: p.size] += p
    return out


IMAGES_CAUTION = (
    "Predicted exact howl frequencies depend on details the model lacks: it is an idealised shoebox with flat, "
    "smooth walls, point sources and a statistically modelled late tail, while furniture, people, temperature "
    "and the exact positions move the crossings. Treat the frequencies as examples of where the loop comes "
    "closest to unity, and the statistical spread beside them as the range to expect."
)


def __getattr__(name: str):
    if name == "plan_with_images":  # lives in _images_plan (kept apart to keep this module short)
        from howl.model._images_plan import plan_with_images

        return plan_with_images
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
