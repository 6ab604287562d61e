"""What the live page shows, held between the audio loop and the web server.

The audio side calls :meth:`LiveState.update` with the listen loop's snapshot (and the mic
spectrum from :class:`BlockTap`) and :meth:`LiveState.add_margin` with each loop-margin
estimate; the server's threads read :meth:`LiveState.payload` (one JSON text per update,
serialised once for every client) and wait for the next ones with :meth:`LiveState.wait_newer`.
Nothing here writes back into the audio path: the page is read-only.

Every update is numbered (``seq``) and the newest :data:`BACKLOG` of them are kept, so a stream
that reads late still gets every update in order, then the last one (``ended``: the audio stopped),
whatever the timing between the audio thread and the reader; only a reader more than
:data:`BACKLOG` updates behind skips the oldest it missed (it is told how many).
"""

from __future__ import annotations

import json
import math
import threading
import time
from collections import deque

import numpy as np

from howl.listen.live import SourceWrapper

#: The detector's states in the words a tech uses on the page.
STATE_WORDS = {"howl": "howling", "ringing": "ringing", "watch": "watch", "program": "program",
               "product": "overtone of a howl"}
#: A candidate's level trend in words (dB/s thresholds: a howl grows at ≥ 6 dB/s, see DetectorConfig).
TREND_RISE_DB_PER_S = 3.0
#: How many events and margin estimates the page keeps (memory stays flat over a long show).
MAX_EVENTS = 40
MAX_MARGIN_POINTS = 3000
#: How many recent updates (JSON texts) are kept for streams that read late: ~8 s at 15 updates/s;
#: bounded so memory stays flat (a client further behind skips the oldest, counted).
BACKLOG = 128
#: The page's spectrum: 1/24-octave bands (max of the FFT bins in each), 40 Hz to 20 kHz.
SPECTRUM_FRACTION = 24
SPECTRUM_LO_HZ = 40.0
SPECTRUM_N_FFT = 8192


def trend_words(trend_db_per_s: float) -> str:
    if trend_db_per_s >= TREND_RISE_DB_PER_S:
        return "rising"
    if trend_db_per_s <= -TREND_RISE_DB_PER_S:
        return "falling"
    return "steady"


class BlockTap(SourceWrapper):
    """Wraps a listen source; keeps the last ``keep`` samples read and when the last block
    arrived (wall clock), for the spectrum and the block-to-page delay. Reads pass through."""

    def __init__(self, source, keep: int = SPECTRUM_N_FFT):
        super().__init__(source)
        self._buf = np.zeros(int(keep))
        self.n_read = 0
        self.block_wall_s = None  # time.time() when the newest block was read

    def read(self, timeout_s: float = 0.1):
        b = self.source.read(timeout_s)
        if b is not None:
            x = np.asarray(b, dtype=float).ravel()
            k = min(x.size, self._buf.size)
            if k:
                self._buf = np.roll(self._buf, -k)
                self._buf[-k:] = x[-k:]
            self.n_read += x.size
            self.block_wall_s = time.time()
        return b

    def recent(self) -> np.ndarray:
        return self._buf.copy()

    def close(self) -> None:
        self.source.close()


_BAND_CACHE: dict = {}


def _bands(fs: float, n_fft: int):
    key = (fs, n_fft)
    if key not in _BAND_CACHE:
        hi = min(20000.0, 0.5 * fs)
        n = int(math.floor(SPECTRUM_FRACTION * math.log2(hi / SPECTRUM_LO_HZ)))
        centres = SPECTRUM_LO_HZ * 2.0 ** (np.arange(n + 1) / SPECTRUM_FRACTION)
        half = 2.0 ** (0.5 / SPECTRUM_FRACTION)
        bin_hz = fs / n_fft
        # bin k belongs to the band whose edges hold its frequency (lo ≤ k·Δf < hi); a band
        # narrower than a bin shows the bin nearest its centre
        lo = np.ceil(centres / half / bin_hz).astype(int)
        hi_i = np.ceil(centres * half / bin_hz).astype(int)
        near = np.round(centres / bin_hz).astype(int)
        empty = hi_i <= lo
        lo[empty], hi_i[empty] = near[empty], near[empty] + 1
        top = n_fft // 2
        lo, hi_i = np.minimum(lo, top), np.minimum(hi_i, top + 1)
        # one row of bin indices per band, padded with the band's last bin: max over a row = the band
        width = int((hi_i - lo).max())
        idx = np.minimum(lo[:, None] + np.arange(width)[None, :], (hi_i - 1)[:, None])
        _BAND_CACHE[key] = (centres, idx)
    return _BAND_CACHE[key]


def spectrum_db(samples: np.ndarray, fs: float) -> tuple[np.ndarray, np.ndarray]:
    """Fractional-octave spectrum of the newest samples for the page: band centres (Hz) and the
    largest Hann-windowed FFT bin in each band, in dB re full-scale sine (a 0 dBFS sine reads 0 dB:
    the window's coherent gain, sum(w)/2, is divided out)."""
    x = np.asarray(samples, float)[-SPECTRUM_N_FFT:]
    n = x.size
    w = np.hanning(n)
    mag = np.abs(np.fft.rfft(x * w)) / (0.5 * w.sum())
    centres, idx = _bands(fs, n)
    peak = mag[idx].max(axis=1)
    return centres, 20 * np.log10(peak + 1e-10)


def _num(x, nd: int = 2):
    """A float for the page: rounded, None for NaN/inf."""
    if x is None:
        return None
    x = float(x)
    return round(x, nd) if math.isfinite(x) else None


class LiveState:
    """The page's live state. Thread-safe: one writer (the audio loop, plus ``add_margin`` from
    a margin tracker's thread) and any number of readers (the server's clients)."""

    def __init__(self, *, command: str = "listen", label: str = "", sample_rate_hz: float = 48000.0,
                 cautions=(), margin_warn_db: float = 3.0, margin_history_s: float = 300.0):
        self._cond = threading.Condition()
        self.seq = 0
        self.ended = False
        self.margin_warn_db = float(margin_warn_db)
        self.margin_history_s = float(margin_history_s)
        self._margins: deque = deque(maxlen=MAX_MARGIN_POINTS)
        self._base = {"command": command, "label": label, "sample_rate_hz": float(sample_rate_hz),
                      "cautions": list(cautions)}
        self._listen = {"elapsed_s": 0.0, "level_dbfs": None, "overflows": 0, "block_wall_s": None,
                        "spectrum": {"freq_hz": [], "level_db": []}, "candidates": [], "events": [],
                        "n_events": 0, "cuts": [], "advice": []}
        self._payload = self._render()
        self._backlog: deque = deque([(self.seq, self._payload, False)], maxlen=BACKLOG)

    # ---------------------------------------------------------------- writers
    def update(self, snap, spectrum=None, block_wall_s=None) -> None:
        """Take a listen snapshot (:class:`howl.listen.live.Snapshot`) and the spectrum (freqs, dB)."""
        d = {"elapsed_s": _num(snap.elapsed_s, 3), "level_dbfs": _num(snap.level_dbfs, 1),
             "overflows": int(snap.overflows), "block_wall_s": block_wall_s,
             "candidates": [self._candidate(c) for c in snap.candidates],
             "events": [self._event(r) for r in reversed(snap.events[-MAX_EVENTS:])],
             "n_events": len(snap.events),
             "cuts": [self._cut(n.freq_hz, n.gain_db, n.q, n.bandwidth_oct) for n in snap.notches],
             "advice": list(snap.advice)}
        if spectrum is not None:
            f, db = spectrum
            db = np.nan_to_num(np.asarray(db, float), nan=-140.0, neginf=-140.0, posinf=0.0)
            d["spectrum"] = {"freq_hz": np.round(np.asarray(f, float), 1).tolist(),
                             "level_db": np.round(np.maximum(db, -140.0), 1).tolist()}
        else:
            d["spectrum"] = self._listen["spectrum"]
        with self._cond:
            if self.ended:  # the update that says "ended" stays the last one
                return
            self._listen = d
            self._publish()

    def add_margin(self, estimate: dict) -> None:
        """One loop-margin estimate: {time_s, gain_margin_db, howl_freq_hz, magnitude_margin_db,
        uncertainty_db, status}. Kept for ``margin_history_s`` of its own time axis."""
        need = ("time_s", "gain_margin_db", "howl_freq_hz", "magnitude_margin_db", "uncertainty_db", "status")
        missing = [k for k in need if k not in estimate]
        if missing:
            raise ValueError(f"margin estimate lacks {missing}")
        e = {k: (_num(estimate[k], 3) if k != "status" else str(estimate[k])) for k in need}
        with self._cond:
            if self.ended:
                return
            self._margins.append(e)
            t_new = e["time_s"] if e["time_s"] is not None else 0.0
            while self._margins and (self._margins[0]["time_s"] or 0.0) < t_new - self.margin_history_s:
                self._margins.popleft()
            self._publish()

    def end(self) -> None:
        """The audio stopped: clients get one last update (``ended`` true) and their streams close.
        Idempotent: a second call publishes nothing (the last update stays the last)."""
        with self._cond:
            if self.ended:
                return
            self.ended = True
            self._publish()

    # ---------------------------------------------------------------- readers
    def payload(self) -> tuple[int, str]:
        with self._cond:
            return self.seq, self._payload

    def latest(self) -> tuple[int, str, bool]:
        """The newest update as (seq, JSON text, ended), read at one moment."""
        with self._cond:
            return self.seq, self._payload, self.ended

    def snapshot(self) -> dict:
        return json.loads(self.payload()[1])

    def wait_newer(self, seq: int, timeout_s: float) -> tuple[int, str]:
        """Block until an update newer than ``seq`` (or ``timeout_s``); returns (seq, JSON text) of
        the newest one (the same ``seq`` and text again after a timeout)."""
        with self._cond:
            self._cond.wait_for(lambda: self.seq > seq or self.ended, timeout=timeout_s)
            return self.seq, self._payload

    def updates_after(self, seq: int, timeout_s: float) -> tuple[list[tuple[int, str, bool]], int]:
        """Every kept update newer than ``seq``, oldest first, as (seq, JSON text, ended), waiting up to
        ``timeout_s`` for one (an empty list after the timeout); and how many newer ones were no
        longer kept (0 unless the reader fell more than :data:`BACKLOG` updates behind).

        The list and the ``ended`` flag come from one moment under the lock: the update that carries
        ``ended`` is the last the state ever publishes, so a reader that stops after sending it has
        sent everything."""
        with self._cond:
            self._cond.wait_for(lambda: self.seq > seq, timeout=timeout_s)
            new = [u for u in self._backlog if u[0] > seq]
            skipped = (new[0][0] if new else self.seq + 1) - seq - 1
            return new, max(0, skipped)

    # ---------------------------------------------------------------- internals
    def _publish(self) -> None:
        self.seq += 1
        self._payload = self._render()
        self._backlog.append((self.seq, self._payload, self.ended))
        self._cond.notify_all()

    def _render(self) -> str:
        d = {"seq": self.seq, "ended": self.ended, "sent_wall_s": time.time(), **self._base, **self._listen,
             "margin": self._margin_panel()}
        return json.dumps(d, allow_nan=False, separators=(",", ":"))

    def _margin_panel(self):
        if not self._margins:
            return None
        now = self._margins[-1]
        return {"now": now, "warn_db": self.margin_warn_db, "history_s": self.margin_history_s,
                "below_warning": now["gain_margin_db"] is not None and now["gain_margin_db"] < self.margin_warn_db,
                "history": [[m["time_s"], m["gain_margin_db"], m["uncertainty_db"]] for m in self._margins]}

    @staticmethod
    def _candidate(c) -> dict:
        return {"freq_hz": _num(c.freq_hz, 3), "level_db": _num(c.level_db, 1),
                "trend_db_per_s": _num(c.trend_db_per_s, 1), "trend": trend_words(c.trend_db_per_s),
                "age_s": _num(c.age_s, 2), "state": c.state, "words": STATE_WORDS.get(c.state, c.state)}

    @staticmethod
    def _cut(freq_hz, gain_db, q, bandwidth_oct) -> dict:
        return {"centre_hz": _num(freq_hz, 3), "depth_db": None if gain_db is None else _num(gain_db, 1),
                "full_notch": gain_db is None, "q": _num(q, 2), "bandwidth_oct": _num(bandwidth_oct, 4)}

    def _event(self, r: dict) -> dict:
        n = r["notch"]
        c = r.get("loop_ir_crossing")
        margin = r.get("margin_db")
        assumed = margin is None
        if assumed:
            margin = r.get("margin_assumed_db")
        return {"time_s": _num(r["time_s"], 2), "kind": r["kind"], "words": STATE_WORDS.get(r["kind"], r["kind"]),
                "freq_hz": _num(r["freq_hz"], 3), "level_db": _num(r["level_db"], 1),
                "growth_db_per_s": _num(r.get("growth_db_per_s"), 1),
                "decay_db_per_s": _num(r.get("decay_db_per_s"), 1),
                "margin_db": _num(margin, 2), "margin_assumed": assumed,
                "off_crossing": c is not None and not c["on_crossing"],
                "cut": self._cut(n["freq_hz"], n["gain_db"], n["q"], n["bandwidth_oct"])}
