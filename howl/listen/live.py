"""The live listening loop: an input source → the detector → events, a log and a view.

The source is anything with ``sample_rate_hz``, ``overflows``, ``read(timeout_s)``
(a 1-D block or None) and ``close()``: :class:`howl.audio.LiveInput` for a real
device, :class:`ArraySource` for tests and for replaying a file at speed. This
module holds no device code itself; the CLI draws the view from the snapshots.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import time
from dataclasses import dataclass, field

import numpy as np

from howl.listen.detect import Detector, event_record, report, summarise_notches

CAUTIONS = (
    "CAUTION: a howl can jump to full level within a fraction of a second: loud enough to hurt ears "
    "and to burn tweeters and compression drivers.",
    "howl only suggests cuts; the operator decides what goes on the desk.",
    "Keep a hand on the fader the whole time and pull it at the first sign of ringing.",
)


@dataclass
class ArraySource:
    """A recording as a live source (blocks of ``block_frames``), optionally paced in real time."""

    samples: np.ndarray
    sample_rate_hz: float
    block_frames: int = 1024
    realtime: bool = False
    overflows: int = 0
    _pos: int = 0
    _t0: float = field(default=0.0)

    def read(self, timeout_s: float = 0.1):
        if self._pos >= self.samples.size:
            return None
        if self.realtime:
            if self._t0 == 0.0:
                self._t0 = time.monotonic()
            due = self._t0 + (self._pos + self.block_frames) / self.sample_rate_hz
            wait = due - time.monotonic()
            if wait > 0:
                time.sleep(min(wait, timeout_s))
                if time.monotonic() < due:
                    return None
        b = self.samples[self._pos: self._pos + self.block_frames]
        self._pos += self.block_frames
        return b

    @property
    def exhausted(self) -> bool:
        return self._pos >= self.samples.size

    def close(self) -> None:
        pass


class SourceWrapper:
    """Base of a source that wraps another (a tap for the page, a send/mic splitter): forwards
    ``sample_rate_hz``, ``overflows`` and ``exhausted``; a subclass defines ``read``."""

    def __init__(self, source):
        self.source = source
        self.sample_rate_hz = float(source.sample_rate_hz)

    @property
    def overflows(self) -> int:
        return int(self.source.overflows)

    @property
    def exhausted(self) -> bool:
        return bool(getattr(self.source, "exhausted", False))


@dataclass(frozen=True)
class Snapshot:
    """What the view shows, a few times a second."""

    elapsed_s: float
    level_dbfs: float
    candidates: tuple
    events: tuple  # event records (dicts), newest last
    notches: tuple  # merged running notch list
    advice: tuple
    overflows: int


@dataclass
class ListenResult:
    report: dict
    overflows: int
    interrupted: bool
    n_samples: int


class JsonlLog:
    """Append-only JSON-lines log, flushed and fsync'ed after every line (nothing lost if the laptop dies)."""

    def __init__(self, path):
        self.path = str(path)
        folder = os.path.dirname(os.path.abspath(self.path))
        if not os.path.isdir(folder):
            from howl.errors import InputError

            raise InputError(f"folder {folder!r} does not exist", key="--log")
        self._f = open(self.path, "a", encoding="utf-8")

    def write(self, obj: dict) -> None:
        from howl.fileio import to_jsonable

        self._f.write(json.dumps(to_jsonable(obj), allow_nan=False) + "\n")
        self._f.flush()
        os.fsync(self._f.fileno())

    def close(self) -> None:
        self._f.close()


def listen(source, *, duration_s: float | None = None, log_path=None, on_update=None, update_interval_s: float = 0.25,
           loop_delay_s=None, max_notches: int = 6, temperature_c: float = 20.0,
           swing_c: float = 3.0, stop=None, desk=None) -> ListenResult:
    """Run the detector on ``source`` until ``duration_s`` of audio, the source ends, ``stop()`` is
    true, or Ctrl-C. Events are logged as they happen; ``on_update(Snapshot)`` is called about every
    ``update_interval_s`` of wall time. Returns the same report as ``howl scan`` plus the overflow count.
    """
    fs = float(source.sample_rate_hz)
    det = Detector(fs, loop_delay_s=None if callable(loop_delay_s) else loop_delay_s,
                   crossings_hz=getattr(loop_delay_s, "crossings_hz", None),
                   crossing_resolution_hz=getattr(loop_delay_s, "crossing_resolution_hz", None))
    log = JsonlLog(log_path) if log_path else None
    limit = None if duration_s is None else int(round(duration_s * fs))
    n = 0
    records: list[dict] = []
    level = -200.0
    last_update = 0.0
    interrupted = False
    kw = dict(loop_delay_s=loop_delay_s, temperature_c=temperature_c, swing_c=swing_c)
    if desk is not None:  # the suggestions within the desk's EQ (howl.loop.desk)
        kw.update(desk=desk)
    kw_desk = {} if desk is None else {"desk": desk}

    def _emit(new_events):
        for e in new_events:
            rec = event_record(e, **kw, **({} if desk is None else {"sample_rate_hz": fs}))
            records.append(rec)
            if log:
                log.write({"logged_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="milliseconds"),
                           "overflows": int(source.overflows), **rec})

    def _snapshot():
        from howl.loop.notch import Notch

        cuts = [Notch(r["notch"]["freq_hz"], r["notch"]["gain_db"], r["notch"]["q"]) for r in records]
        kept, advice = summarise_notches(cuts, fs, max_notches=max_notches, **kw_desk)
        return Snapshot(elapsed_s=n / fs, level_dbfs=level, candidates=tuple(det.candidates()),
                        events=tuple(records), notches=tuple(kept), advice=tuple(advice),
                        overflows=int(source.overflows))

    try:
        while limit is None or n < limit:
            if stop is not None and stop():
                break
            block = source.read(0.1)
            if block is None:
                if getattr(source, "exhausted", False):
                    break
            else:
                block = np.asarray(block, dtype=float).ravel()
                if limit is not None:
                    block = block[: limit - n]
                n += block.size
                if block.size:
                    level = float(10 * np.log10(np.mean(block * block) + 1e-20))
                _emit(det.process(block))
            now = time.monotonic()
            if on_update is not None and now - last_update >= update_interval_s:
                last_update = now
                on_update(_snapshot())
    except KeyboardInterrupt:
        interrupted = True
    finally:
        _emit(det.finish())
        if log:
            log.close()
    if on_update is not None:
        on_update(_snapshot())
    rep = report(det.events, fs, n / fs, max_notches=max_notches, **kw)
    rep["overflows"] = int(source.overflows)
    rep["interrupted"] = interrupted
    return ListenResult(report=rep, overflows=int(source.overflows), interrupted=interrupted, n_samples=n)
