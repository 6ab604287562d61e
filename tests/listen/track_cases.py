"""Closed-loop cases for the loop tracker, in two splits.

* ``TUNING``: the split the tracker's settings (howl.listen.track.TrackSettings) were chosen on;
* ``HELDOUT``: never used to choose anything; tests assert on it and docs/track.md quotes it.

A case: F is a room impulse response from pyroomacoustics (``ShoeBox``, image sources,
Sabine-inverted absorption, fixed seeds) through a loudspeaker/mic passband (2nd-order 100 Hz
high-pass, 4th-order 6 kHz low-pass: scipy.signal.butter); G is the console: a processing delay,
a gain, and optionally a notch (scipy.signal.iirnotch). The mic signal comes from the project's
exact closed-loop simulator (``howl.loop.simulate.simulate_closed_loop``) around L = G·F with the
program plus ambient noise as its input; the send is u = G*m (scipy.signal.lfilter). A fader
step is a gain schedule in the simulator and the same step on u.
The truth is the Nyquist margin of the true G·F (``howl.loop.nyquist_margin``, the reference the
issue names; it is not the code under test).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

FS = 16000


@functools.lru_cache(maxsize=None)
def room_f(seed: int, fs: int = FS, keep_s: float = 0.45) -> np.ndarray:
    """F: a pyroomacoustics ShoeBox RIR (RT60 0.3–0.6 s) through the speaker/mic passband, unscaled."""
    import pyroomacoustics as pra
    from scipy.signal import butter, sosfilt

    rng = np.random.default_rng(seed)
    dims = [rng.uniform(5, 10), rng.uniform(4, 8), rng.uniform(2.7, 4)]
    src = [rng.uniform(1, dims[0] - 1), rng.uniform(1, dims[1] - 1), 1.8]
    mic = [rng.uniform(1, dims[0] - 1), rng.uniform(1, dims[1] - 1), 1.5]
    e_abs, order = pra.inverse_sabine(rng.uniform(0.3, 0.6), dims)
    room = pra.ShoeBox(dims, fs=fs, materials=pra.Material(e_abs), max_order=min(order, 14))
    room.add_source(src)
    room.add_microphone(mic)
    room.compute_rir()
    h = np.asarray(room.rir[0][0], float)
    h = sosfilt(butter(2, 100, "highpass", fs=fs, output="sos"), h)
    h = sosfilt(butter(4, 6000, "lowpass", fs=fs, output="sos"), h)
    n = min(h.size, int(keep_s * fs))
    return h[:n] * np.hanning(2 * n)[n:] ** 0.1


def console_ir(fs: int, delay_ms: float, notch=None) -> np.ndarray:
    """G at unity gain: a delay and an optional notch (freq_hz, q) (scipy.signal.iirnotch)."""
    from scipy.signal import iirnotch, lfilter

    g = np.zeros(int(0.06 * fs))
    g[int(round(delay_ms * 1e-3 * fs))] = 1.0
    if notch is not None:
        b, a = iirnotch(notch[0], notch[1], fs=fs)
        g = lfilter(b, a, g)
    return g


def truth(f_ir, g_ir, fs, gain_db=0.0):
    from howl.loop.nyquist import nyquist_margin

    return nyquist_margin(np.convolve(g_ir, f_ir), fs, gain_db=gain_db)


def program(kind: str, fs: int, dur_s: float, seed: int, noise_db: float) -> np.ndarray:
    """A program plus ambient noise ``noise_db`` below it (pink-ish: white through a one-pole
    low-pass at 1 kHz). Kinds: ``voiced`` and ``chords`` (tests/listen/test_detect.py's
    speech_like and music_like: purely harmonic, the hard cases), ``speech`` (voiced syllables with
    fricatives) and ``band`` (bass, keys, held chords, drums, a sung line) from
    tests/listen/detect_corpus.py's generators."""
    from scipy.signal import lfilter
    from test_detect import music_like, speech_like

    if kind == "voiced":
        x = speech_like(fs, dur_s, seed)
    elif kind == "chords":
        x = music_like(fs, dur_s, seed)
    else:
        from detect_corpus import GENERATORS

        x = GENERATORS[kind](np.random.default_rng(seed), fs, dur_s)
        x = 0.03 * x / np.sqrt(np.mean(x ** 2))
    rng = np.random.default_rng(seed + 7777)
    n = rng.standard_normal(x.size)
    a = np.exp(-2 * np.pi * 1000 / fs)
    n = lfilter([1 - a], [1, -a], n)
    n *= np.sqrt(np.mean(x ** 2)) * 10 ** (-noise_db / 20) / np.sqrt(np.mean(n ** 2))
    return x + n


@dataclass(frozen=True)
class Case:
    room: int
    kind: str        # speech | music
    seed: int        # program seed
    margin_db: float  # the true margin at the start
    delay_ms: float = 4.0
    noise_db: float = 30.0


def render(case: Case, dur_s: float, fs: int = FS, *, step_at_s=None, step_db=0.0, notch=None):
    """(send, mic, true_margin_before, true_margin_after, f_ir, g_ir) for a case.
    The fader steps by ``step_db`` at ``step_at_s``; ``notch`` (freq_hz, q) sits in G throughout."""
    from howl.loop.simulate import simulate_closed_loop
    from scipy.signal import lfilter

    f_ir = room_f(case.room, fs)
    g0 = console_ir(fs, case.delay_ms)
    base = truth(f_ir, g0, fs).gain_margin_db
    gain_db = base - case.margin_db  # the fader that puts the plain loop at margin_db
    g_ir = console_ir(fs, case.delay_ms, notch)
    x = program(case.kind, fs, dur_s, case.seed, case.noise_db)
    sched = np.full(x.size, gain_db)
    if step_at_s is not None:
        sched[int(step_at_s * fs):] += step_db
    loop = np.convolve(g_ir, f_ir)
    m = simulate_closed_loop(loop, x, fs, gain_db=sched, limiter_dbfs=None)
    u = lfilter(g_ir, [1.0], m) * 10 ** (sched / 20)
    before = truth(f_ir, g_ir, fs, gain_db)
    after = truth(f_ir, g_ir, fs, gain_db + step_db)
    return u, m, before, after, f_ir, g_ir


TUNING = [Case(1, "speech", 11, 6.0), Case(2, "band", 12, 4.0, 6.0), Case(3, "speech", 13, 3.0, 2.5),
          Case(4, "band", 14, 8.0, 3.0, 25.0), Case(5, "speech", 15, 5.0, 5.0, 35.0),
          Case(6, "voiced", 16, 5.0, 4.0), Case(7, "chords", 17, 5.0, 4.0),
          # added with issue 23 (the split grew from 7 to 12 cases; new rooms and program seeds)
          Case(8, "band", 18, 5.5, 3.0), Case(9, "speech", 19, 4.0, 5.0, 25.0), Case(10, "chords", 20, 3.5, 3.0),
          Case(11, "voiced", 21, 6.5, 5.0, 35.0), Case(12, "speech", 22, 2.0, 4.0)]
HELDOUT = [Case(101, "speech", 211, 5.0), Case(102, "band", 212, 3.5, 5.0), Case(103, "speech", 213, 7.0, 3.0),
           Case(104, "band", 214, 4.5, 2.0, 35.0), Case(105, "speech", 215, 2.5, 6.0, 25.0),
           Case(106, "band", 216, 6.0, 4.0), Case(107, "voiced", 217, 4.0, 3.0), Case(108, "chords", 218, 6.0, 5.0),
           # added with issue 23 (the split grew from 8 to 12 cases; the first 8 keep their indices)
           Case(109, "speech", 219, 3.5, 4.0, 35.0), Case(110, "band", 220, 5.0, 3.0, 25.0),
           Case(111, "chords", 221, 4.0, 5.0), Case(112, "voiced", 222, 2.0, 2.0)]


def run_tracker(u, m, fs, settings=None, block=1024):
    from howl.listen.track import LoopTracker

    tr = LoopTracker(fs, settings=settings)
    out = []
    for i in range(0, u.size, block):
        out += tr.process(u[i:i + block], m[i:i + block])
    out += tr.finish()
    return out, tr


def plain_margins(u, m, fs, settings=None, every_s=1.0):
    """The biased open-loop formula in closed loop, margins once a second: L̂ = (S_mu/S_mm)·(S_um/S_uu)
    from Welch spectra of the raw signals with the tracker's forgetting (no prewhitening)."""
    from howl.listen._pem import Spectra, causal_ir
    from howl.listen.track import TrackSettings
    from howl.loop.nyquist import nyquist_margin

    settings = settings or TrackSettings()
    n_loop = int(settings.loop_length_s * fs)
    nf = 1 << int(np.ceil(np.log2(2 * n_loop)))
    S = Spectra(nf, nf // 2, settings.f_memory_s, fs)
    ng = 1 << int(np.ceil(np.log2(2 * settings.g_length_s * fs)))
    Sg = Spectra(ng, ng // 4, settings.g_memory_s, fs)
    out = []
    step = int(every_s * fs)
    for i in range(0, u.size, step):
        S.process(u[i:i + step], m[i:i + step])
        Sg.process(m[i:i + step], u[i:i + step])
        if S.n_eff == 0 or Sg.n_eff == 0:
            out.append(None)
            continue
        g = causal_ir(Sg.estimate(), ng, int(settings.g_length_s * fs), 8)
        L = np.fft.rfft(g, nf) * S.estimate()
        ir = causal_ir(L, nf, n_loop, n_loop // 8)
        r = nyquist_margin(ir, fs, band_hz=(50.0, 0.45 * fs), n_risks=0)
        out.append(r.gain_margin_db if np.isfinite(r.gain_margin_db) else None)
    return out
