"""Make the demo loop impulse responses in examples/loops/ from the example rigs.

These WAVs are *invented demo data*: image-source loops of our own example rigs
(howl.images), not measurements. They let a new user try ``howl margin``,
``howl ringout``, ``howl simulate`` and ``howl scan`` without a sound card. It also writes a
speech-like test program, examples/program_voice_like.wav, for ``howl simulate``.

Each loop IR is the open loop of one mic alone at the rig's stated settings
(mic sensitivity × mix gain × speaker sensitivity × the room), plus what a real
chain adds and the shoebox model lacks: a digital console's 2 ms of latency and
the loudspeaker's low-frequency roll-off (a 2nd-order 70 Hz high-pass), so the
loop blocks DC like a real one.

Run from the repository root:  python examples/make_example_loops.py
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy import signal

from howl.fileio import write_wav_atomic
from howl.model.images import mic_loop_ir
from howl.model.rig import load_rig

HERE = Path(__file__).resolve().parent
SAMPLE_RATE_HZ = 48000
CONSOLE_LATENCY_S = 0.002
HIGHPASS_HZ = 70.0
LENGTH_S = 1.5

CASES = [
    # (rig file, mic, output file)
    ("blackbox_vocals_wedges.toml", "vox_a", "blackbox_vox_a.wav"),
    ("chapel_lectern.toml", "lectern", "chapel_lectern.wav"),
]


def chain(ir: np.ndarray, fs: int) -> np.ndarray:
    """Add console latency and the loudspeaker's LF roll-off; cut to LENGTH_S."""
    n_delay = int(round(CONSOLE_LATENCY_S * fs))
    sos = signal.butter(2, HIGHPASS_HZ, btype="highpass", fs=fs, output="sos")
    out = np.concatenate([np.zeros(n_delay), signal.sosfilt(sos, ir)])
    return out[: int(LENGTH_S * fs)]


def voice_like_program(fs: int, duration_s: float = 6.0, seed: int = 7) -> np.ndarray:
    """A seeded speech-like test program: glottal-like harmonic series with vibrato and
    syllable envelopes (4 syllables/s), formant-shaped, plus a little breath noise.
    Invented for demos; peak −12 dBFS."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(duration_s * fs)) / fs
    f0 = 125.0 * (1 + 0.08 * np.sin(2 * np.pi * 0.7 * t)) * (1 + 0.01 * np.sin(2 * np.pi * 5.5 * t))
    phase = 2 * np.pi * np.cumsum(f0) / fs
    x = sum(np.sin(k * phase) / k for k in range(1, 30))
    for lo, hi in ((300, 900), (1000, 2500)):          # two broad formant regions
        x = x + 0.6 * signal.sosfilt(signal.butter(2, (lo, hi), "bandpass", fs=fs, output="sos"), x)
    syll = np.clip(np.sin(2 * np.pi * 2.0 * t + rng.uniform(0, 1)), 0, None) ** 1.5
    x = x * syll + 0.02 * rng.standard_normal(t.size) * syll
    return 10 ** (-12 / 20) * x / np.max(np.abs(x))


def main() -> None:
    out_dir = HERE / "loops"
    out_dir.mkdir(exist_ok=True)
    for rig_file, mic, name in CASES:
        rig = load_rig(HERE / rig_file)
        ir = chain(mic_loop_ir(rig, mic, SAMPLE_RATE_HZ, seed=1, chain=False), SAMPLE_RATE_HZ)  # its own console chain below
        write_wav_atomic(out_dir / name, ir, SAMPLE_RATE_HZ)
        print(f"wrote {out_dir / name}  ({ir.size / SAMPLE_RATE_HZ:.2f} s, peak {np.max(np.abs(ir)):.3g})")
    program = HERE / "program_voice_like.wav"
    write_wav_atomic(program, voice_like_program(SAMPLE_RATE_HZ), SAMPLE_RATE_HZ, subtype="PCM_16")
    print(f"wrote {program}")


if __name__ == "__main__":
    main()
