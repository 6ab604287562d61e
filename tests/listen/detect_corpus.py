"""The detector's evaluation corpus, in two splits that differ in rooms, programs and seeds.

* ``tuning``: the split any threshold may be chosen on;
* ``heldout``: never used to choose anything; the docs quote its figures only.

Everything here is our own synthetic model (no recordings): loop IRs of a statistical room (a
delayed direct sound, a few early reflections and an exponentially decaying Gaussian tail,
band-limited like a loudspeaker and a mic), and program families drawn from seeded generators:

=============  =========================================================================
family         what it models
=============  =========================================================================
organ          flue-like held notes and chords, nearly pure partials (2nd 25-40 dB down),
               swelling in by a linear amplitude ramp (so its level in dB rises ever more
               slowly) or a swell box, some with a tremulant; pedal notes from 65 Hz
pure           pure held sines (one or two), faded in over 20-300 ms, 60 Hz - 4 kHz
choir          3-6 voices on a chord, each with its own vibrato (0.3-1.2 % at 4.5-6 Hz),
               vowel formants, phrases that swell and release
piano          struck and plucked notes and chords with string inharmonicity, decaying
               6-35 dB/s (higher partials faster)
strings        bowed (vibrato 0.5-1.5 %) and brass-like (bright, little vibrato, crescendos
               at a constant 4-15 dB/s) sustained notes
pad            keyboard sine pads: chords of pure sines (some chorus-detuned), slow attacks
               (linear or RC curve) and long holds
band           bass, held chord notes, kick/snare/hat, a sung line with vibrato
speech         voiced syllables in several voices (f0 80-400 Hz) and rhythms (even,
               long-short, short), with unvoiced noise
=============  =========================================================================

A case is a program either as it is, or through a stable loop 2-6 dB below unity (no-howl
cases), or through a loop whose gain steps at 2 s from 6 dB below unity to 0.5-3 dB past it
(howl cases). The truth for a howl is the closed loop's mode at that gain
(test_detect.closed_loop_modes); it dominates when its narrow band is louder than the whole
program (test_detect.t_dominates).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

FS = 16000
#: every split's seeds start here; the two ranges never meet
SPLIT_SEED = {"tuning": 100_000, "heldout": 900_000}
#: the rooms of each split: small rooms and stages for tuning; halls, chapels and gyms held out
ROOM_KIND = {
    "tuning": dict(rt60_s=(0.35, 0.9), delay_s=(0.003, 0.012), direct=(0.5, 1.0), hp_hz=(90.0, 160.0),
                   lp_hz=(5000.0, 7000.0), lift_p=0.3),
    "heldout": dict(rt60_s=(0.8, 2.2), delay_s=(0.008, 0.025), direct=(0.2, 0.6), hp_hz=(60.0, 120.0),
                    lp_hz=(4500.0, 6500.0), lift_p=0.5),
}
FAMILIES = ("organ", "pure", "choir", "piano", "strings", "pad", "band", "speech")
#: no-howl programs per family at full size (organ + pure: 50 of 180)
N_DRY = {"organ": 30, "pure": 20, "choir": 20, "piano": 20, "strings": 20, "pad": 20, "band": 20, "speech": 30}
N_ROOMS = 8
HOWL_OVERS_DB = (0.5, 1.0, 2.0, 3.0)
STEP_S = 2.0
PROGRAM_RMS = 0.03


# ----------------------------------------------------------------------------- rooms


def _crossings(h: np.ndarray, fs: float, n_fft: int = 2 ** 21):
    """Positive real-axis crossings of the loop's DTFT (sampled by a zero-padded FFT, linear
    interpolation of Im = 0): (freq_hz, real part)."""
    H = np.fft.rfft(h, n_fft)
    w = np.arange(H.size) * fs / n_fft
    im = H.imag
    idx = np.nonzero(im[:-1] * im[1:] < 0)[0]
    a = im[idx] / (im[idx] - im[idx + 1])
    re = H.real[idx] + a * (H.real[idx + 1] - H.real[idx])
    f = w[idx] + a * (w[idx + 1] - w[idx])
    pos = re > 0
    return f[pos], re[pos]


@functools.lru_cache(maxsize=None)
def room(split: str, i: int, fs: int = FS):
    """Loop IR ``i`` of a split, scaled so its largest positive real-axis crossing is exactly 1.
    Returns (ir, crossings_freq_hz, crossings_margin_db)."""
    from scipy.signal import butter, sosfilt

    p = ROOM_KIND[split]
    rng = np.random.default_rng(SPLIT_SEED[split] + 17 * i)
    rt60 = rng.uniform(*p["rt60_s"])
    d = int(rng.uniform(*p["delay_s"]) * fs)
    n = int(min(1.2, 0.8 * rt60 + 0.05) * fs)
    t = np.arange(n) / fs
    h = np.zeros(n)
    h[d] = rng.uniform(*p["direct"])
    for _ in range(6):  # early reflections
        j = d + int(rng.uniform(0.001, 0.03) * fs)
        h[j] += rng.uniform(-0.5, 0.5) * h[d]
    tail = rng.standard_normal(n) * np.exp(-6.91 * t / rt60) * (t > d / fs + 0.004)
    h += 0.08 * tail * np.sqrt(0.5 / rt60)
    h = sosfilt(butter(2, rng.uniform(*p["hp_hz"]), "highpass", fs=fs, output="sos"), h)
    if rng.uniform() < p["lift_p"]:  # a vocal mic used close: low lift
        h = h + (10 ** (rng.uniform(4, 10) / 20) - 1) * sosfilt(butter(2, 250, "lowpass", fs=fs, output="sos"), h)
    h = sosfilt(butter(4, rng.uniform(*p["lp_hz"]), "lowpass", fs=fs, output="sos"), h)
    h = h * np.hanning(2 * n)[n:] ** 0.1
    f, re = _crossings(h, fs)
    return h / re.max(), f, -20 * np.log10(re / re.max())


# ----------------------------------------------------------------------------- programs


def _partials(fs, t, f_inst, amps, phases=None, rng=None):
    """Sum of partials h·f_inst(t) with the given amplitudes (up to 0.45·fs)."""
    ph = 2 * np.pi * np.cumsum(f_inst) / fs
    fmax = float(np.max(f_inst))
    out = np.zeros(t.size)
    for h, a in enumerate(amps, start=1):
        if h * fmax >= 0.45 * fs or a == 0:
            break
        p0 = rng.uniform(0, 2 * np.pi) if rng is not None else (phases[h - 1] if phases is not None else 0.0)
        out += a * np.sin(h * ph + p0)
    return out


def _vibrato(t, f, depth, rate, fade_s, rng):
    return f * (1 + depth * np.sin(2 * np.pi * rate * t + rng.uniform(0, 6.3)) * np.minimum(1, t / max(fade_s, 1e-3)))


def _semitone(f0, k):
    return f0 * 2 ** (k / 12)


def organ(rng, fs, dur):
    """Flue-like held notes: linear amplitude swell (or swell box), nearly pure partials."""
    t = np.arange(int(dur * fs)) / fs
    base = _semitone(65.4, int(rng.integers(0, 40)))  # C2 upward (pedal notes too)
    notes = [base] + [_semitone(base, k) for k in rng.choice([4, 7, 12, 16], size=int(rng.integers(0, 3)), replace=False)]
    t_on = rng.uniform(0.0, 1.0)
    swell = rng.uniform(1.0, 4.0)
    kind = rng.choice(["linear", "box", "linear"])
    ramp = np.clip((t - t_on) / swell, 0, 1)
    env = ramp if kind == "linear" else 0.5 - 0.5 * np.cos(np.pi * ramp)
    if rng.uniform() < 0.3:  # tremulant
        env = env * (1 + 0.12 * np.sin(2 * np.pi * rng.uniform(5, 7) * t))
    x = np.zeros(t.size)
    for f in notes:
        stops = [1.0] + ([0.5] if rng.uniform() < 0.4 else []) + ([0.3] if rng.uniform() < 0.3 else [])
        for mult, a_stop in zip((1, 2, 4), stops):
            amps = [1.0, 10 ** (-rng.uniform(25, 40) / 20), 10 ** (-rng.uniform(35, 50) / 20)]
            x += a_stop * _partials(fs, t, np.full(t.size, f * mult), amps, rng=rng)
    return env * x


def pure(rng, fs, dur):
    """One or two pure held sines, faded in linearly over 20-300 ms."""
    t = np.arange(int(dur * fs)) / fs
    x = np.zeros(t.size)
    for _ in range(int(rng.integers(1, 3))):
        f = float(np.exp(rng.uniform(np.log(60), np.log(4000))))
        t_on, fade = rng.uniform(0, 1.5), rng.uniform(0.02, 0.3)
        x += rng.uniform(0.3, 1) * np.clip((t - t_on) / fade, 0, 1) * np.sin(2 * np.pi * f * t + rng.uniform(0, 6.3))
    return x


def choir(rng, fs, dur):
    """Voices on a chord, each with vibrato and vowel formants, phrases that swell and release."""
    t = np.arange(int(dur * fs)) / fs
    root = _semitone(98.0, int(rng.integers(0, 14)))
    x = np.zeros(t.size)
    formants = rng.uniform([300, 800, 2300], [750, 1500, 3000])
    for v in range(int(rng.integers(3, 7))):
        f = _semitone(root, int(rng.choice([0, 4, 7, 12, 16, 19, 24])))
        fi = _vibrato(t, f * (1 + rng.uniform(-0.003, 0.003)), rng.uniform(0.003, 0.012), rng.uniform(4.5, 6), 0.4, rng)
        amps = [sum(np.exp(-0.5 * ((h * f - F) / (0.12 * F + 60)) ** 2) for F in formants) / h + 0.02 for h in range(1, 25)]
        pos = rng.uniform(0, 0.5)
        env = np.zeros(t.size)
        while pos < dur:
            length = rng.uniform(1.0, 3.0)
            tt = (t - pos) / length
            env += np.where((tt >= 0) & (tt <= 1), np.sin(np.pi * np.clip(tt, 0, 1)) ** rng.uniform(0.5, 2), 0)
            pos += length + rng.uniform(0.1, 0.5)
        x += env * _partials(fs, t, fi, amps, rng=rng)
    return x


def piano(rng, fs, dur):
    """Struck and plucked notes and chords with inharmonicity, partial h decaying at d·sqrt(h)."""
    n = int(dur * fs)
    t = np.arange(n) / fs
    x = np.zeros(n)
    pos = rng.uniform(0, 0.3)
    B = rng.uniform(1e-4, 5e-4)
    while pos < dur - 0.2:
        for _ in range(int(rng.integers(1, 4))):
            f = _semitone(41.2, int(rng.integers(0, 52)))
            d = rng.uniform(6, 35)
            i0 = int(pos * fs)
            tt = t[: n - i0]
            seg = np.zeros(tt.size)
            for h in range(1, 16):
                fh = h * f * np.sqrt(1 + B * h * h)
                if fh > 0.45 * fs:
                    break
                seg += 0.75 ** (h - 1) * 10 ** (-d * np.sqrt(h) * tt / 20) * np.sin(2 * np.pi * fh * tt + rng.uniform(0, 6.3))
            x[i0:] += rng.uniform(0.4, 1) * np.minimum(1, tt / 0.004) * seg
        pos += rng.uniform(0.15, 0.9)
    return x


def strings(rng, fs, dur):
    """Bowed notes with vibrato, or brass-like notes with crescendos at a constant dB/s."""
    t = np.arange(int(dur * fs)) / fs
    x = np.zeros(t.size)
    brass = rng.uniform() < 0.5
    for _v in range(int(rng.integers(1, 4))):
        pos = rng.uniform(0, 0.5)
        while pos < dur - 0.3:
            length = rng.uniform(0.8, 3.0)
            f = _semitone(98.0 if not brass else 82.4, int(rng.integers(0, 30)))
            tt = t - pos
            on = (tt >= 0) & (tt <= length)
            depth = rng.uniform(0.0, 0.005) if brass else rng.uniform(0.005, 0.015)
            fi = _vibrato(t, f, depth, rng.uniform(5, 7), 0.3, rng)
            amps = [(0.85 if brass else 0.6) ** (h - 1) for h in range(1, 21)]
            if brass:
                rate = rng.uniform(4, 15)  # a crescendo at a constant dB/s from 25 dB down
                lvl = np.clip(-25 + rate * np.clip(tt, 0, None), None, 0)
                env = 10 ** (lvl / 20) * np.minimum(1, np.clip(tt, 0, None) / 0.05)
            else:
                env = np.minimum(1, np.clip(tt, 0, None) / rng.uniform(0.1, 0.4))
            env = env * np.minimum(1, np.clip(length - tt, 0, None) / 0.1) * on
            x += env * _partials(fs, t, fi, amps, rng=rng)
            pos += length + rng.uniform(0.0, 0.3)
    return x


def pad(rng, fs, dur):
    """Chords of pure sines with slow attacks (linear or RC), some chorus-detuned, held."""
    t = np.arange(int(dur * fs)) / fs
    root = _semitone(130.8, int(rng.integers(0, 24)))
    t_on, att = rng.uniform(0, 1.0), rng.uniform(0.5, 3.0)
    tt = np.clip(t - t_on, 0, None)
    env = np.minimum(1, tt / att) if rng.uniform() < 0.5 else 1 - np.exp(-tt / (att / 3))
    x = np.zeros(t.size)
    for k in (0, 4, 7, 12)[: int(rng.integers(2, 5))]:
        f = _semitone(root, k)
        x += np.sin(2 * np.pi * f * t + rng.uniform(0, 6.3))
        if rng.uniform() < 0.4:  # chorus: a second sine a fraction of a hertz away
            x += 0.7 * np.sin(2 * np.pi * f * (1 + rng.uniform(0.001, 0.004)) * t)
    return env * x


def band(rng, fs, dur):
    """Bass, held chord notes, drums and a sung line."""
    n = int(dur * fs)
    t = np.arange(n) / fs
    beat = 60.0 / rng.uniform(80, 140)
    x = 0.6 * piano(np.random.default_rng(rng.integers(1 << 30)), fs, dur)  # plucked bass and keys
    x += 0.4 * organ(np.random.default_rng(rng.integers(1 << 30)), fs, dur)  # held chord notes
    for j in range(int(dur / beat)):
        i0 = int(j * beat * fs)
        tt = t[: n - i0]
        if j % 2 == 0:  # kick: a falling sine
            x[i0:] += 1.5 * np.exp(-tt * 25) * np.sin(2 * np.pi * (50 * tt + 60 * (1 - np.exp(-tt * 30)) / 30))
        else:  # snare
            x[i0:] += 0.5 * np.exp(-tt * 30) * rng.standard_normal(tt.size)
        x[i0:] += 0.1 * np.exp(-tt * 80) * np.diff(rng.standard_normal(tt.size + 1))  # hat
    f = _semitone(196.0, int(rng.integers(0, 12)))
    line = _partials(fs, t, _vibrato(t, f, 0.01, 5.5, 0.5, rng), [1, 0.5, 0.3, 0.2, 0.1], rng=rng)
    return x + 0.4 * line * (np.sin(np.pi * t / 1.7) ** 2)


def speech(rng, fs, dur):
    """Voiced syllables in one of several voices and rhythms, with unvoiced noise."""
    n = int(dur * fs)
    t = np.arange(n) / fs
    lo, hi = [(80, 150), (160, 260), (240, 400)][int(rng.integers(0, 3))]
    rhythm = rng.choice(["even", "long-short", "short"])
    formants0 = np.array([rng.uniform(280, 800), rng.uniform(850, 1900), rng.uniform(2100, 3100)])
    x = np.zeros(n)
    pos, j = 0.05, 0
    while pos < dur - 0.2:
        length = {"even": rng.uniform(0.16, 0.22), "short": rng.uniform(0.09, 0.14),
                  "long-short": rng.uniform(0.25, 0.4) if j % 2 == 0 else rng.uniform(0.08, 0.13)}[rhythm]
        i0, i1 = int(pos * fs), min(n, int((pos + length) * fs))
        tt = t[i0:i1] - pos
        fa, fb = rng.uniform(lo, hi, 2)
        f0 = fa + (fb - fa) * tt / length
        formants = formants0 * rng.uniform(0.8, 1.2, 3)
        amps = [sum(np.exp(-0.5 * ((h * (fa + fb) / 2 - F) / (0.1 * F + 60)) ** 2) for F in formants) / h ** 0.5 + 0.02
                for h in range(1, int(0.45 * fs / hi))]
        seg = _partials(fs, tt, f0, amps, rng=rng)
        x[i0:i1] += np.sin(np.pi * tt / length) ** 2 * seg
        if rng.uniform() < 0.3:  # a fricative after the syllable
            k0, k1 = i1, min(n, i1 + int(0.08 * fs))
            x[k0:k1] += 0.2 * np.diff(rng.standard_normal(k1 - k0 + 1))
        pos += length + rng.uniform(0.02, 0.3 if rhythm != "short" else 0.12)
        j += 1
    return x


GENERATORS = {"organ": organ, "pure": pure, "choir": choir, "piano": piano, "strings": strings, "pad": pad,
              "band": band, "speech": speech}


def program(split: str, family: str, i: int, dur_s: float = 6.0, fs: int = FS) -> np.ndarray:
    """Program ``i`` of a family in a split, at ``PROGRAM_RMS``."""
    seed = SPLIT_SEED[split] + 1000 * (1 + FAMILIES.index(family)) + i
    x = GENERATORS[family](np.random.default_rng(seed), fs, dur_s)
    x = x + 1e-5 * np.random.default_rng(seed + 7).standard_normal(x.size)  # a noise floor (-100 dBFS)
    return PROGRAM_RMS * x / np.sqrt(np.mean(x ** 2))


# ----------------------------------------------------------------------------- cases


@dataclass(frozen=True)
class Case:
    """One case: ``kind`` is "dry" (the program alone), "stable" (through ``room`` at ``margin_db``
    below unity) or "howl" (through ``room``, the gain stepped at STEP_S to ``over_db`` past unity)."""

    split: str
    kind: str
    family: str
    index: int
    room: int | None = None
    margin_db: float | None = None
    over_db: float | None = None

    @property
    def name(self) -> str:
        s = f"{self.split}/{self.kind}/{self.family}{self.index}"
        if self.kind == "stable":
            s += f"/room{self.room}@-{self.margin_db:.1f}dB"
        if self.kind == "howl":
            s += f"/room{self.room}+{self.over_db:g}dB"
        return s

    def signal(self, fs: int = FS):
        """(y, program) at ``fs``."""
        from howl.loop.simulate import simulate_closed_loop

        dur = 7.0 if self.kind == "howl" else 6.0
        x = program(self.split, self.family, self.index, dur, fs)
        if self.kind == "dry":
            return x, x
        h = room(self.split, self.room, fs)[0]
        if self.kind == "stable":
            return simulate_closed_loop(h, x, fs, gain_db=-self.margin_db), x
        g = np.full(x.size, -6.0)
        g[int(STEP_S * fs):] = self.over_db
        return simulate_closed_loop(h, x, fs, gain_db=g), x


def cases(split: str, every: int = 1) -> list[Case]:
    """All cases of a split (``every``: keep one in this many of each list, a reduced run)."""
    rng = np.random.default_rng(SPLIT_SEED[split] + 5)
    dry = [Case(split, "dry", fam, i) for fam in FAMILIES for i in range(N_DRY[fam])]
    stable = [Case(split, "stable", fam, 100 + r, room=r, margin_db=round(float(rng.uniform(2.0, 6.0)), 1))
              for fam in FAMILIES for r in range(N_ROOMS)]
    howl = [Case(split, "howl", fam, 200 + r, room=r, over_db=HOWL_OVERS_DB[(r + FAMILIES.index(fam)) % 4])
            for fam in FAMILIES for r in range(N_ROOMS)]
    return dry[::every] + stable[::every] + howl[::every]


#: the issue's own probes (not part of either split's counts): a 65 Hz pure pedal note swelling in
#: over 3 s (linear amplitude), and an 880 Hz sine rising at a constant dB/s (a howl's signature)
def probes(fs: int = FS) -> dict[str, np.ndarray]:
    t = np.arange(int(6 * fs)) / fs
    rng = np.random.default_rng(4242)
    floor = 1e-4 * rng.standard_normal(t.size)
    pedal = 0.1 * np.clip(t / 3.0, 0, 1) * np.sin(2 * np.pi * 65.0 * t)
    db_rise = 10 ** (np.minimum(-60 + 20 * t, -10) / 20) * np.sin(2 * np.pi * 880.0 * t)
    return {"pedal 65 Hz linear swell 3 s": pedal + floor, "880 Hz sine at 20 dB/s": db_rise + floor}


# ----------------------------------------------------------------------------- evaluation

#: a howl's reported frequency must be within this of the closed loop's mode (issue 22: 0.2 %)
FREQ_TOL = 0.002


def loop_known(case: Case, fs: int = FS) -> dict:
    """The detector's loop arguments when the case's loop IR is known (as `howl scan --loop-ir`
    gives them: crossings from howl.loop.nyquist, the IR's resolution 1 / its length); {} for a
    dry case (no loop)."""
    if case.room is None:
        return {}
    from howl.listen.detect import LoopDelayFromIR

    ir = LoopDelayFromIR(room(case.split, case.room, fs)[0], fs)
    return {"crossings_hz": ir.crossings_hz, "crossing_resolution_hz": ir.crossing_resolution_hz}


def evaluate(case: Case, config=None, fs: int = FS, *, with_loop: bool = False) -> dict:
    """Run the detector on one case and score it (see the module docstring). ``with_loop``: the
    detector is given the case's loop IR (:func:`loop_known`)."""
    from howl.listen.detect import detect
    from test_detect import closed_loop_modes, t_dominates

    y, x = case.signal(fs)
    ev = detect(y, fs, config, **(loop_known(case, fs) if with_loop else {})).events
    howls = [e for e in ev if e.kind == "howl"]
    row = {"case": case.name, "kind": case.kind, "family": case.family, "audio_s": y.size / fs,
           "n_howl_events": len(howls), "n_ringing_events": sum(e.kind == "ringing" for e in ev),
           "howls": [[round(e.time_s, 3), round(e.freq_hz, 2), round(e.growth_db_per_s, 1)] for e in howls]}
    if case.kind != "howl":
        return row
    h, cf, cm = room(case.split, case.room, fs)
    unstable, growth = closed_loop_modes(h, case.over_db, cf[cm - case.over_db < 0], fs)
    early = [e for e in howls if e.time_s < STEP_S]
    after = [e for e in howls if e.time_s >= STEP_S]
    rms = float(np.sqrt(np.mean(x ** 2)))
    row.update(over_db=case.over_db, n_unstable=int(unstable.size), n_before_step=len(early),
               modes_hz=[round(float(f), 2) for f in unstable])
    near_edge, _ = closed_loop_modes(h, case.over_db, cf[cm - case.over_db < 0.5], fs)  # unstable or within 0.5 dB
    off = [e for e in after if np.min(np.abs(near_edge / e.freq_hz - 1)) > 0.01]
    on = [e for e in after if np.min(np.abs(unstable / e.freq_hz - 1)) <= FREQ_TOL]
    row["n_off_mode_howls"] = len(off)  # howls more than 1 % from every mode unstable or within 0.5 dB of it
    if not on:
        t_any = min(t_dominates(y, fs, f, rms, STEP_S) for f in unstable)
        errs = [float(np.min(np.abs(unstable / e.freq_hz - 1))) for e in after]
        row.update(found=False, right_freq=False, lead_s=None, t_dominates_s=t_any if np.isfinite(t_any) else None,
                   freq_err_nearest=min(errs) if errs else None)
        return row
    e = on[0]
    i = int(np.argmin(np.abs(unstable / e.freq_hz - 1)))
    err = float(abs(e.freq_hz / unstable[i] - 1))
    t_dom = t_dominates(y, fs, float(unstable[i]), rms, STEP_S)
    row.update(found=True, right_freq=True, freq_err=err, time_s=e.time_s, latency_s=e.time_s - STEP_S,
               mode_hz=float(unstable[i]), mode_growth_db_per_s=float(growth[i]),
               t_dominates_s=float(t_dom) if np.isfinite(t_dom) else None,
               lead_s=float(t_dom - e.time_s) if np.isfinite(t_dom) else None,
               before_dominance=bool(t_dom > e.time_s))
    return row


def summarise(rows: list[dict]) -> dict:
    """The split's figures: howls found before they dominate at the right frequency, lead,
    frequency error, false howls on the no-howl cases (and per hour of program)."""
    hw = [r for r in rows if r["kind"] == "howl"]
    nh = [r for r in rows if r["kind"] != "howl"]
    ok = [r for r in hw if r["found"] and r["right_freq"]]
    leads = [r["lead_s"] for r in ok if r["lead_s"] is not None]
    errs = [r["freq_err"] for r in hw if r["found"]]
    held = [r for r in nh if r["family"] in ("organ", "pure")]
    hours = sum(r["audio_s"] for r in nh) / 3600.0
    n_false = sum(r["n_howl_events"] for r in nh)
    return {
        "n_howl_cases": len(hw),
        "found_right_freq": len(ok),  # a howl within FREQ_TOL of an unstable mode after the step
        "found_before_dominance": sum(1 for r in ok if r["before_dominance"]),
        "found_late": sum(1 for r in ok if not r["before_dominance"]),
        "missed": sum(1 for r in hw if not r["found"]),
        # of those, the howl (any unstable mode) dominated within the run: missed though it got loud
        "missed_though_it_dominated": sum(1 for r in hw if not r["found"] and r.get("t_dominates_s") is not None),
        "never_dominated_within_run": sum(1 for r in hw if r.get("t_dominates_s") is None),
        "off_mode_howls_in_howl_cases": sum(r.get("n_off_mode_howls", 0) for r in hw),
        "howl_cases_with_a_howl_before_the_step": sum(1 for r in hw if r["n_before_step"]),
        "lead_s_median": float(np.median(leads)) if leads else None,
        "lead_s_p10": float(np.percentile(leads, 10)) if leads else None,
        "latency_s_median": float(np.median([r["latency_s"] for r in ok])) if ok else None,
        "freq_err_pct_median": 100 * float(np.median(errs)) if errs else None,
        "freq_err_pct_max": 100 * float(np.max(errs)) if errs else None,
        "n_no_howl_cases": len(nh),
        "no_howl_audio_s": sum(r["audio_s"] for r in nh),
        "n_organ_or_pure_held": len(held),
        "false_howls": n_false,
        "cases_with_false_howl": [r["case"] for r in nh if r["n_howl_events"]],
        "false_howls_organ_or_pure": sum(r["n_howl_events"] for r in held),
        "false_howls_stable_loop": sum(r["n_howl_events"] for r in nh if r["kind"] == "stable"),
        "false_howls_per_hour": n_false / hours if hours else None,
        "ringing_events_on_no_howl": sum(r["n_ringing_events"] for r in nh),
    }
