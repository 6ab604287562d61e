"""Scan a WAV file in blocks (private: used by ``howl scan``): the file is read with
:func:`howl.fileio.wav_blocks` and fed to the incremental :class:`howl.listen.detect.Detector`,
so memory stays constant with the recording's length (the detector keeps a few seconds of
samples and a bounded history per track). The clipping check runs on the same blocks."""

from __future__ import annotations

import os

import numpy as np

#: samples read per block (1.4 s at 48 kHz: the detector analyses 2.56 s pieces anyway)
BLOCK_FRAMES = 65536

#: a recording with more than this share of its samples pinned at its peak is called clipped
CLIPPED_SHARE = 0.001


class ClipWatch:
    """Count samples inside flat runs (3+ samples) at the recording's peak, block by block.

    A clipped howl is a square-ish wave: its harmonics look like further howls and its growth
    stops at full scale, so frequencies may be doubled up and growth rates understated. The
    running peak restarts the count when a louder block arrives; a run that straddles two
    blocks is missed (at most two samples per block boundary).
    """

    def __init__(self) -> None:
        self.peak = 0.0
        self.flat = 0
        self.n = 0

    def add(self, x: np.ndarray) -> None:
        self.n += x.size
        if x.size == 0:
            return
        a = np.abs(x)
        p = float(np.max(a))
        if p > self.peak * (1.0 + 1e-6):
            self.peak, self.flat = p, 0
        if self.peak <= 0.0 or p < self.peak * (1.0 - 1e-6):
            return
        at = a >= self.peak * (1.0 - 1e-6)
        self.flat += int(np.sum(at[1:-1] & at[:-2] & at[2:]))

    def warning(self, name: str) -> str | None:
        """The warning text when the recording is clipped, else None."""
        share = self.flat / max(self.n - 2, 1)
        if share > CLIPPED_SHARE and self.flat >= 16:
            return (f"{name}: {100 * share:.1f} % of the samples sit at the peak level "
                    f"({20 * np.log10(self.peak):+.1f} dBFS): the recording is clipped; growth rates stop at "
                    "the clip and harmonics may show as extra howls (record with more headroom)")
        return None


def scan_wav(path: str | os.PathLike, *, channel: int | None = None, config=None, loop_delay_s=None,
             crossings_hz=None, crossing_resolution_hz=None, block_frames: int = BLOCK_FRAMES):
    """Run the detector over a WAV file block by block. Returns (events, sample_rate_hz, duration_s).
    ``crossings_hz``: a loop IR's crossings (a howl can only be on one), or None. Warns
    (:class:`howl.errors.HowlWarning`) when the recording is clipped."""
    import warnings

    from howl import validate as v
    from howl.errors import HowlWarning
    from howl.fileio import wav_blocks
    from howl.listen.detect import Detector

    fs, _, blocks = wav_blocks(path, channels=None if channel is None else [channel], blocksize=block_frames)
    if fs < 4000:
        raise v.fail("sample rate", ">= 4000 Hz", fs, "Hz", file=str(path))
    det = Detector(fs, config, loop_delay_s=loop_delay_s, crossings_hz=crossings_hz,
                   crossing_resolution_hz=crossing_resolution_hz)
    clip = ClipWatch()
    for b in blocks:
        x = b[0]
        clip.add(x)
        det.process(x)
    det.finish()
    msg = clip.warning(str(path))
    if msg:
        warnings.warn(msg, HowlWarning)
    return list(det.events), fs, clip.n / fs
