"""`howl scan` reads in blocks: the same events as the whole signal at once, and memory that does
not grow with the recording's length (tracemalloc on two lengths; no timing)."""

from __future__ import annotations

import dataclasses
import sys
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

sys.path.insert(0, str(Path(__file__).parent))
from test_detect import music_like, tone  # noqa: E402

from howl.errors import InputError  # noqa: E402


def _program(fs: int, dur_s: float, seed: int) -> np.ndarray:
    """Music-like program with a pure 1 kHz tone held all through (one track as long as the file)
    and a 2.2 kHz tone growing at 25 dB/s from 60 % of the way (one howl near the end)."""
    x = music_like(fs, dur_s, seed)
    x += 0.01 * np.sin(2 * np.pi * 1000.0 * np.arange(x.size) / fs)
    i = int(0.6 * x.size)
    x[i:] += tone(fs, 2200.0, (x.size - i) / fs, -75, 25)[: x.size - i]
    return np.clip(x, -1, 1)


def _peak_bytes(path, **kw) -> int:
    from howl.listen._stream import scan_wav

    tracemalloc.start()
    try:
        scan_wav(path, **kw)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_scan_in_blocks_gives_the_events_of_the_whole_signal(tmp_path):
    from howl.listen._stream import scan_wav
    from howl.listen.detect import detect

    fs = 16000
    x = _program(fs, 12.0, 3).astype(np.float32)
    p = tmp_path / "prog.wav"
    sf.write(p, x, fs, subtype="FLOAT")
    ev, fs_read, dur = scan_wav(p, block_frames=5000)
    ref = detect(x.astype(np.float64), fs).events
    assert fs_read == fs and dur == pytest.approx(12.0)
    assert [dataclasses.asdict(e) for e in sorted(ev, key=lambda e: e.time_s)] == [dataclasses.asdict(e) for e in ref]
    assert any(e.kind == "howl" and abs(e.freq_hz / 2200.0 - 1) < 1e-3 for e in ev)  # the tone built in


def test_scan_memory_does_not_grow_with_the_recording_length(tmp_path):
    fs = 16000
    peaks = {}
    for dur in (10.0, 40.0):
        p = tmp_path / f"prog{dur:g}.wav"
        sf.write(p, _program(fs, dur, 5), fs, subtype="PCM_16")
        peaks[dur] = _peak_bytes(p)
    # four times the audio (40 s is 5 MB of float64 samples, 1.3 MB as PCM): the peak may not
    # grow by more than 1 MB (what a block, a few FFT batches and track histories take)
    assert peaks[40.0] - peaks[10.0] < 1_000_000, peaks
    assert peaks[40.0] < 20_000_000, peaks


def test_scan_refuses_a_multichannel_file_without_channel_and_nan_samples(tmp_path):
    from howl.listen._stream import scan_wav

    p = tmp_path / "st.wav"
    sf.write(p, np.zeros((1600, 2), np.float32), 16000, subtype="FLOAT")
    with pytest.raises(InputError, match="--channel"):
        scan_wav(p)
    q = tmp_path / "nan.wav"
    y = np.zeros(1600, np.float32)
    y[100] = np.nan
    sf.write(q, y, 16000, subtype="FLOAT")
    with pytest.raises(InputError, match="NaN"):
        scan_wav(q)
