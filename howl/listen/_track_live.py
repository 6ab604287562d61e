"""The tracking loop: a two-channel source → :class:`howl.listen.track.LoopTracker` → estimates,
events, a JSON-lines log, an optional raw recording, and a view callback.

The source is anything with ``sample_rate_hz``, ``overflows``, ``read(timeout_s)`` returning a
(frames, 2) block [send, mic] or None, optionally ``exhausted``, and ``close()``:
:class:`howl.audio.LiveInput` with two channels, or :class:`BlockSource` over a file's blocks.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field

import numpy as np

from howl.listen.track import NOT_ENOUGH, LoopTracker

CAUTIONS = (
    "CAUTION: the margin is an estimate from the program; a loop can start to howl within a fraction of a "
    "second, loud enough to hurt ears and to burn tweeters and compression drivers.",
    "howl only reports; the operator decides what goes on the desk. Keep a hand on the fader.",
    "Hearing protection and local rules on sound levels come first; follow licensed practice.",
)


class BlockSource:
    """A file's blocks ((2, n) arrays from ``howl.fileio.wav_blocks``) as a source, cut into
    ``block_frames`` pieces (the size the live input delivers)."""

    def __init__(self, blocks, sample_rate_hz: float, block_frames: int = 4096):
        self._it = iter(blocks)
        self.sample_rate_hz = float(sample_rate_hz)
        self.block_frames = int(block_frames)
        self.overflows = 0
        self.exhausted = False
        self._pending = np.zeros((2, 0))

    def read(self, timeout_s: float = 0.1):
        while self._pending.shape[1] < self.block_frames and not self.exhausted:
            try:
                self._pending = np.concatenate([self._pending, next(self._it)], axis=1)
            except StopIteration:
                self.exhausted = True
        if self._pending.shape[1] == 0:
            return None
        b, self._pending = self._pending[:, : self.block_frames], self._pending[:, self.block_frames:]
        return b.T

    def close(self) -> None:
        pass


@dataclass
class TrackRun:
    sample_rate_hz: float
    estimates: list = field(default_factory=list)
    events: list = field(default_factory=list)
    n_samples: int = 0
    overflows: int = 0
    interrupted: bool = False
    level_dbfs: tuple = (-200.0, -200.0)
    loop_ir: np.ndarray | None = None


class _Checks:
    """Running checks of the input: a silent send, a send equal to the mic."""

    def __init__(self):
        self.uu = self.mm = self.dd = 0.0

    def add(self, u, m):
        self.uu += float(u @ u)
        self.mm += float(m @ m)
        self.dd += float((u - m) @ (u - m))

    def messages(self, send_channel, mic_channel) -> list[tuple[str, str]]:
        out = []
        if self.uu == 0.0:
            out.append(("silent_send", f"the send (channel {send_channel}) is silent: nothing to estimate the "
                                       "loop from; check --send-channel"))
        elif self.mm > 0.0 and self.dd <= 1e-10 * self.mm:
            out.append(("send_equals_mic", f"the send (channel {send_channel}) and the mic (channel {mic_channel}) "
                                           "carry the same signal: is one of them the wrong channel?"))
        return out


def run_track(source, *, settings=None, duration_s: float | None = None, log=None, recorder=None,
              on_estimate=None, on_update=None, warn_db: float = 3.0, stop=None, channels=(1, 2)) -> TrackRun:
    """Feed ``source`` to a tracker until ``duration_s`` of audio, the source ends, ``stop()`` or
    Ctrl-C. ``log``: a :class:`howl.listen.live.JsonlLog` (estimates and events, one line each);
    ``recorder(block)`` gets every raw (frames, 2) block as it comes; ``on_estimate(dict)`` each
    estimate; ``on_update(run)`` after every block (the view throttles itself)."""
    fs = float(source.sample_rate_hz)
    tr = LoopTracker(fs, settings=settings)
    run = TrackRun(sample_rate_hz=fs)
    limit = None if duration_s is None else int(round(duration_s * fs))
    checks = _Checks()
    state = {"below": False, "status": None}

    def _log(obj):
        if log is not None:
            log.write({"logged_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="milliseconds"),
                       "overflows": int(source.overflows), **obj})

    def _event(kind, message, t):
        ev = {"time_s": round(t, 3), "kind": kind, "message": message}
        run.events.append(ev)
        _log({"event": ev})

    def _take(ests):
        for e in ests:
            run.estimates.append(e)
            _log({"estimate": e})
            if on_estimate is not None:
                on_estimate(e)
            if e["status"] != state["status"]:
                if e["status"] == NOT_ENOUGH and state["status"] is not None:
                    _event("not_enough_program", "not enough program to tell: the margin is held with a wider ±",
                           e["time_s"])
                state["status"] = e["status"]
            below = e["status"] != NOT_ENOUGH and e["gain_margin_db"] is not None and e["gain_margin_db"] < warn_db
            if below and not state["below"]:
                _event("below_warning", f"margin {e['gain_margin_db']:.1f} dB is below {warn_db:g} dB "
                                        f"(first howl near {e['howl_freq_hz']:.0f} Hz)", e["time_s"])
            state["below"] = below

    try:
        while limit is None or run.n_samples < limit:
            if stop is not None and stop():
                break
            block = source.read(0.1)
            if block is None:
                if getattr(source, "exhausted", False):
                    break
                continue
            block = np.asarray(block, dtype=float).reshape(-1, 2)
            if limit is not None:
                block = block[: limit - run.n_samples]
            if recorder is not None:
                recorder(block)
            u, m = block[:, 0], block[:, 1]
            run.n_samples += u.size
            checks.add(u, m)
            if u.size:
                run.level_dbfs = tuple(float(10 * np.log10(np.mean(x * x) + 1e-20)) for x in (u, m))
            _take(tr.process(u, m))
            run.overflows = int(source.overflows)
            if on_update is not None:
                on_update(run)
    except KeyboardInterrupt:
        run.interrupted = True
    _take(tr.finish())
    run.overflows = int(source.overflows)
    for kind, msg in checks.messages(*channels):
        _event(kind, msg, run.n_samples / fs)
    if run.overflows:
        _event("overflow", f"{run.overflows} input overflow(s): audio was lost", run.n_samples / fs)
    run.loop_ir = tr.loop_ir()
    if on_update is not None:
        on_update(run)
    return run
