"""`--view web` for the live commands: the page's state and server around a listen loop.

``listen`` calls :func:`check_options` before it opens the device and :func:`run_listen` instead
of its terminal view. A margin tracker feeds the same page through :meth:`WebView.add_margin`
(estimates as dicts: time_s, gain_margin_db, howl_freq_hz, magnitude_margin_db, uncertainty_db,
status), so a command running both shows both on one page: ``listen --send-channel N`` does so
with :class:`SendTracker` (howl.listen.track beside the detector, same input).
"""

from __future__ import annotations

import sys

import typer

from howl.listen.live import SourceWrapper as _SourceWrapper

VIEWS = ("terminal", "web")
#: The page is redrawn at least 10 times a second: an update is pushed once this long has passed
#: (checked after each audio block, so ~0.064 s at 1024 frames and 48 kHz: ~15 updates/s, with
#: room for a loaded machine).
UPDATE_INTERVAL_S = 0.06
#: The caution added to the page when the loop margin is tracked beside the detector.
MARGIN_CAUTION = ("The loop margin is an estimate from the program, with its ± : it can be wrong, and a loop can "
                  "start to howl within a fraction of a second. Hearing protection and local rules on sound levels "
                  "come first; follow licensed practice.")


def check_options(view: str, port: int | None, share: bool, send_channel: int | None = None,
                  in_channel: int = 1) -> bool:
    """Validate --view/--port/--share/--send-channel; True when the web view is wanted."""
    from howl import validate as v
    from howl.errors import InputError

    if view not in VIEWS:
        raise InputError(f"must be one of {', '.join(VIEWS)}, got {view!r}", key="--view")
    web = view == "web"
    if not web and (port is not None or share or send_channel is not None):
        key = "--port" if port is not None else "--share" if share else "--send-channel"
        raise InputError("needs --view web", key=key)
    if port is not None:
        v.integer(port, "--port", 1, 65535)
    if send_channel is not None:
        v.integer(send_channel, "--send-channel", 1, 1024)
        if send_channel == in_channel:
            raise InputError(f"is the mic's channel too (--in-channel {in_channel}); the send is the console "
                             "output that drives the loudspeaker, on its own channel", key="--send-channel")
    return web


class WebView:
    """The page for one run: start it (prints the link, and with ``share`` a QR code), feed it,
    stop it. ``err``: print the link on stderr (when stdout carries the JSON)."""

    def __init__(self, *, command: str, label: str, sample_rate_hz: float, port: int | None = None,
                 share: bool = False, err: bool = False, cautions=(), margin_warn_db: float = 3.0):
        from howl.report.web import LiveState

        self.state = LiveState(command=command, label=label, sample_rate_hz=sample_rate_hz, cautions=cautions,
                               margin_warn_db=margin_warn_db)
        self.port, self.share, self.err = port, share, err
        self.server = None
        self.tap = None

    def start(self) -> "WebView":
        from howl.errors import InputError
        from howl.report.web import LiveServer, lan_address, new_token

        host, token = "127.0.0.1", None
        if self.share:
            host, token = lan_address(), new_token()
            if host.startswith("127."):
                raise InputError("found no network address to share the page on (is the laptop on the LAN?)",
                                 key="--share")
        try:
            self.server = LiveServer(self.state, host=host, port=self.port or 0, token=token).start()
        except OSError as e:
            raise InputError(f"cannot serve the page on {host}:{self.port or 0}: {e.strerror or e}",
                             key="--port" if self.port else "--view") from None
        self._announce()
        return self

    def _announce(self) -> None:
        url = self.server.url
        typer.echo(f"live page: {url}  (read-only; Ctrl-C stops)", err=self.err)
        if self.share:
            typer.echo("open it on a tablet on the same network (the key in the link is needed):", err=self.err)
            import segno

            segno.make(url, error="m").terminal(out=sys.stderr if self.err else sys.stdout, compact=True)

    def tap_source(self, source):
        """Wrap the listen source so the page gets the mic spectrum and the block times."""
        from howl.report.web import BlockTap

        self.tap = BlockTap(source)
        return self.tap

    def on_listen_update(self, snap) -> None:
        from howl.report.web import spectrum_db

        spec = None
        if self.tap is not None and self.tap.n_read:
            spec = spectrum_db(self.tap.recent(), self.tap.sample_rate_hz)
        self.state.update(snap, spec, None if self.tap is None else self.tap.block_wall_s)

    def add_margin(self, estimate: dict) -> None:
        self.state.add_margin(estimate)

    def track_send(self, source, settings=None) -> "SendTracker":
        """Split a two-channel [send, mic] source: the mic goes on to the detector, both to a loop
        tracker whose estimates feed this page's margin panel."""
        return SendTracker(source, self.add_margin, settings=settings)

    def stop(self) -> None:
        if self.server is not None:
            self.server.stop()
            self.server = None

    def __enter__(self):
        return self.start()

    def __exit__(self, *exc):
        self.stop()


class SendTracker(_SourceWrapper):
    """A (frames, 2) [send, mic] source as the detector's mono source: :meth:`read` returns the mic
    column and queues both columns for a :class:`howl.listen.track.LoopTracker` that runs in its own
    thread, so its once-a-second estimate (~0.1 s of work at 48 kHz) does not hold up the detector
    and the page. Blocks reach the tracker in order, none dropped: the queue holds up to
    ``MAX_QUEUE_BLOCKS`` (~40 s at 1024 frames and 48 kHz) and then makes the reader wait. Each
    estimate goes to ``on_estimate`` (from the tracker's thread) and is kept in ``estimates``. Call
    :meth:`finish` when the loop ends: the tracker catches up, then gives the estimate at the end."""

    MAX_QUEUE_BLOCKS = 2000

    def __init__(self, source, on_estimate, settings=None):
        import queue
        import threading

        from howl.listen.track import LoopTracker

        super().__init__(source)
        self.tracker = LoopTracker(self.sample_rate_hz, settings=settings)
        self.on_estimate = on_estimate
        self.estimates: list[dict] = []
        self.error: BaseException | None = None
        self.thread_cpu_s = 0.0
        self._q: queue.Queue = queue.Queue(maxsize=self.MAX_QUEUE_BLOCKS)
        self._thread = threading.Thread(target=self._work, name="howl-track", daemon=True)
        self._thread.start()

    def read(self, timeout_s: float = 0.1):
        import numpy as np

        b = self.source.read(timeout_s)
        if b is None:
            return None
        b = np.asarray(b, dtype=float).reshape(-1, 2)
        if self.error is None:
            self._q.put(b)
        return b[:, 1]

    def _work(self) -> None:
        import time

        try:
            while (b := self._q.get()) is not None:
                self._take(self.tracker.process(b[:, 0], b[:, 1]))
            self._take(self.tracker.finish())
        except BaseException as exc:  # kept for finish() to raise in the caller's thread
            self.error = exc
            while self._q.get() is not None:  # drain so the reader never blocks on a full queue
                pass
        finally:
            self.thread_cpu_s = time.thread_time()  # the tracker's CPU (this thread's), for the benchmark

    def finish(self) -> None:
        """Wait for the tracker to take every queued block and give its last estimate."""
        self._q.put(None)
        self._thread.join()
        if self.error is not None:
            raise self.error

    def _take(self, estimates) -> None:
        for e in estimates:
            self.estimates.append(e)
            self.on_estimate(e)

    def close(self) -> None:
        self.source.close()


def run_listen(src, *, label: str, port: int | None, share: bool, err: bool, send: bool = False,
               warn_db: float = 3.0, **listen_kw):
    """``listen(...)`` with the page: started before the loop, stopped when the audio ends or on Ctrl-C.

    ``send``: ``src`` gives (frames, 2) blocks [send, mic]; the loop tracker runs beside the detector
    and the page shows the margin too (warning below ``warn_db``). The result's report then carries
    ``loop_margin``: the tracker's estimates (added to listen's JSON; nothing renamed)."""
    from howl.listen.live import CAUTIONS, listen

    command = "listen + track" if send else "listen"
    with WebView(command=command, label=label, sample_rate_hz=src.sample_rate_hz, port=port, share=share,
                 err=err, cautions=CAUTIONS + ((MARGIN_CAUTION,) if send else ()), margin_warn_db=warn_db) as view:
        pair = view.track_send(src) if send else None
        try:
            res = listen(view.tap_source(pair or src), on_update=view.on_listen_update,
                         update_interval_s=UPDATE_INTERVAL_S, **listen_kw)
        finally:
            if pair is not None:
                pair.finish()  # the tracker takes every block read, then its last estimate reaches the page
        if pair is not None:
            res.report["loop_margin"] = {"warn_db": float(warn_db), "estimates": pair.estimates}
        return res


def run_track(src, *, label: str, port: int | None, share: bool, err: bool, warn_db: float, cautions=(), **track_kw):
    """``run_track(...)`` with the page (its margin panel fed each estimate), stopped when the audio
    ends or on Ctrl-C."""
    from howl.listen._track_live import run_track as _run

    with WebView(command="track", label=label, sample_rate_hz=src.sample_rate_hz, port=port, share=share,
                 err=err, cautions=cautions, margin_warn_db=warn_db) as view:
        return _run(src, on_estimate=view.add_margin, warn_db=warn_db, **track_kw)
