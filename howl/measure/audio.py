"""Audio I/O: the ONLY module that imports sounddevice (lazily).

An :class:`AudioBackend` plays a multichannel buffer and records at the same time.
Two implementations:

* :class:`PortAudioBackend` — the real thing, through sounddevice/PortAudio. Device,
  channels and sample rate are always passed explicitly; sounddevice's global
  ``default`` object is never touched. Every play-record reports the over/underflow
  flags PortAudio raised, and a watchdog notices when the audio server or device goes
  away (PortAudio's JACK host API then leaves the stream inactive but not stopped, and
  ``stop()``/``close()`` would hang, so they are not called).
* :class:`FakeBackend` — for tests: convolves each output channel with a known IR per
  (output, input) pair, adds seeded noise, clips at full scale, and can inject faults
  (silence, dropouts with status flags, a change of the IR between repeats, an
  interruption part-way through, the server going away).

Channels are 1-based everywhere (as printed on interfaces).
"""

from __future__ import annotations

import atexit
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np

from howl.errors import AudioUnavailableError, InputError

INSTALL_HINT = (
    "install PortAudio (Debian/Ubuntu: apt-get install libportaudio2; macOS: brew install portaudio) "
    "and the Python package sounddevice"
)

#: PortAudio status flags that mean samples were lost or invented.
DROPOUT_FLAGS = ("input_overflow", "input_underflow", "output_overflow", "output_underflow")


def import_sounddevice():
    """Import sounddevice, turning a missing PortAudio into a clear one-line error.

    ``import sounddevice`` raises ``OSError: PortAudio library not found`` when the
    shared library is missing, and ``ImportError`` when the package is missing.
    """
    try:
        import sounddevice as sd  # noqa: PLC0415 — lazy on purpose
    except (ImportError, OSError) as exc:
        raise AudioUnavailableError(f"audio is unavailable ({exc}); {INSTALL_HINT}") from None
    return sd


@dataclass(frozen=True)
class DeviceInfo:
    """One audio device as PortAudio lists it."""

    index: int
    name: str
    hostapi: str
    max_input_channels: int
    max_output_channels: int
    default_sample_rate_hz: float

    @property
    def label(self) -> str:
        return f"{self.name}, {self.hostapi}"


@dataclass(frozen=True, eq=False)
class PlayRecordResult:
    """What one play-record gave back.

    ``recording`` is (n_frames, len(input_channels)) float32 in the order of the
    requested input channels. ``status_flags`` names every PortAudio flag seen
    during the stream. ``interrupted`` is true when Ctrl-C stopped it early (the
    recording then holds only ``n_frames_done`` valid frames).
    """

    recording: np.ndarray
    sample_rate_hz: int
    status_flags: tuple[str, ...]
    n_frames_done: int
    interrupted: bool = False

    @property
    def dropout(self) -> bool:
        return any(f in DROPOUT_FLAGS for f in self.status_flags)


class PlaybackInterrupted(KeyboardInterrupt):
    """Ctrl-C during a play-record: the output was stopped at once; ``result`` keeps what was recorded."""

    def __init__(self, result: PlayRecordResult):
        super().__init__("interrupted")
        self.result = result


class AudioServerGone(AudioUnavailableError):
    """The audio server or the device disappeared during a stream."""


class AudioBackend(Protocol):
    """What the measurement needs from audio I/O."""

    def list_devices(self) -> list[DeviceInfo]: ...

    def resolve(self, spec: str | int | None, kind: str, option: str | None = None) -> DeviceInfo: ...

    def play_record(
        self,
        output: np.ndarray,
        *,
        sample_rate_hz: int,
        output_device: DeviceInfo,
        input_device: DeviceInfo,
        output_channels: Sequence[int],
        input_channels: Sequence[int],
    ) -> PlayRecordResult: ...

    def close(self) -> None: ...


def _check_channels(channels: Sequence[int], dev: DeviceInfo, kind: str, option: str) -> None:
    limit = dev.max_output_channels if kind == "output" else dev.max_input_channels
    for ch in channels:
        if not isinstance(ch, (int, np.integer)) or ch < 1 or ch > limit:
            raise InputError(
                f"must be a channel in 1..{limit} of {kind} device {dev.label!r}, got {ch}", key=option
            )


def _resolve_in(devices: list[DeviceInfo], spec: str | int | None, kind: str, option: str | None = None
                ) -> DeviceInfo:
    """Pick a device by index or by name fragment(s), the way sounddevice matches names:
    every space/comma-separated word of ``spec`` must occur in "name, host API" (case-insensitive).
    ``option`` is the option the user typed (default ``--device`` / ``--input-device`` / ``--output-device``)."""
    option = option or ("--device" if kind == "both" else f"--{kind}-device")
    want_in = kind in ("input", "both")
    want_out = kind in ("output", "both")

    def ok(d: DeviceInfo) -> bool:
        return (not want_in or d.max_input_channels > 0) and (not want_out or d.max_output_channels > 0)

    listing = "; ".join(f"{d.index}: {d.label}" for d in devices) or "none (is the audio server running?)"
    if spec is None:
        raise InputError(f"must name a device (index or part of its name); devices: {listing}", key=option)
    if isinstance(spec, (int, np.integer)) or (isinstance(spec, str) and spec.strip().isdigit()):
        idx = int(spec)
        for d in devices:
            if d.index == idx:
                if not ok(d):
                    raise InputError(f"device {idx} ({d.label}) has no {kind} channels", key=option)
                return d
        raise InputError(f"no device with index {idx}; devices: {listing}", key=option)
    words = [w for w in str(spec).lower().replace(",", " ").split() if w]
    hits = [d for d in devices if ok(d) and all(w in d.label.lower() for w in words)]
    if not hits:
        raise InputError(f"no {kind if kind != 'both' else 'duplex'} device matches {spec!r}; devices: {listing}",
                         key=option)
    if len(hits) > 1:
        exact = [d for d in hits if d.name.lower() == str(spec).lower()]
        if len(exact) == 1:
            return exact[0]
        names = "; ".join(f"{d.index}: {d.label}" for d in hits)
        raise InputError(f"{spec!r} matches several devices ({names}); give more of the name or the index",
                         key=option)
    return hits[0]


# ----------------------------------------------------------------------- PortAudio


class PortAudioBackend:
    """Play-record through PortAudio with explicit device, channels and rate.

    ``stall_timeout_s``: if the stream callback makes no progress for this long, or the
    stream is neither active nor stopped, the audio server is taken to have gone away.
    """

    def __init__(self, *, stall_timeout_s: float = 3.0):
        self._sd = import_sounddevice()
        self.stall_timeout_s = float(stall_timeout_s)
        self._server_lost = False

    def list_devices(self) -> list[DeviceInfo]:
        sd = self._sd
        apis = sd.query_hostapis()
        out = []
        for d in sd.query_devices():
            out.append(DeviceInfo(
                index=int(d["index"]), name=str(d["name"]), hostapi=str(apis[d["hostapi"]]["name"]),
                max_input_channels=int(d["max_input_channels"]),
                max_output_channels=int(d["max_output_channels"]),
                default_sample_rate_hz=float(d["default_samplerate"]),
            ))
        return out

    def resolve(self, spec: str | int | None, kind: str, option: str | None = None) -> DeviceInfo:
        return _resolve_in(self.list_devices(), spec, kind, option)

    def play_record(
        self,
        output: np.ndarray,
        *,
        sample_rate_hz: int,
        output_device: DeviceInfo,
        input_device: DeviceInfo,
        output_channels: Sequence[int],
        input_channels: Sequence[int],
    ) -> PlayRecordResult:
        sd = self._sd
        out = np.asarray(output, dtype=np.float32)
        if out.ndim != 2 or out.shape[1] != len(output_channels):
            raise InputError(f"output buffer must be (frames, {len(output_channels)}), got {out.shape}", key="output")
        _check_channels(output_channels, output_device, "output", "--out-channel")
        _check_channels(input_channels, input_device, "input", "--in-channel")
        n_out = max(output_channels)
        n_in = max(input_channels)
        n = out.shape[0]
        buf = np.zeros((n, n_out), dtype=np.float32)
        for j, ch in enumerate(output_channels):
            buf[:, ch - 1] += out[:, j]
        rec = np.zeros((n, n_in), dtype=np.float32)
        state = {"pos": 0, "flags": set(), "abort": False, "last": time.monotonic()}

        def callback(indata, outdata, frames, _time, status):
            pos = state["pos"]
            for name in DROPOUT_FLAGS + ("priming_output",):
                if getattr(status, name, False):
                    state["flags"].add(name)
            if state["abort"]:
                outdata.fill(0)
                raise sd.CallbackAbort
            k = min(frames, n - pos)
            outdata[:k] = buf[pos : pos + k]
            outdata[k:] = 0
            rec[pos : pos + k] = indata[:k, :n_in]
            state["pos"] = pos + k
            state["last"] = time.monotonic()
            if pos + k >= n:
                raise sd.CallbackStop

        try:
            stream = sd.Stream(
                samplerate=float(sample_rate_hz),
                device=(input_device.index, output_device.index),
                channels=(n_in, n_out),
                dtype="float32",
                callback=callback,
            )
        except Exception as exc:  # PortAudioError (e.g. invalid sample rate), ValueError
            raise AudioUnavailableError(
                f"cannot open {input_device.label!r} → {output_device.label!r} at {sample_rate_hz} Hz: {exc}"
            ) from None
        interrupted = False
        stop: BaseException | None = None
        try:
            stream.start()
            state["last"] = time.monotonic()
            while True:
                if state["pos"] >= n and not stream.active:
                    break
                if not stream.active and not stream.stopped and state["pos"] < n:
                    self._lose_server()
                    raise AudioServerGone("the audio server or device went away during the sweep; "
                                          "check the interface and the audio server, then measure again")
                if time.monotonic() - state["last"] > self.stall_timeout_s:
                    self._lose_server()
                    raise AudioServerGone(f"no audio for {self.stall_timeout_s:g} s: the audio server or device "
                                          "stopped responding; check it and measure again")
                time.sleep(0.02)
        except KeyboardInterrupt as exc:  # Ctrl-C, or SIGTERM/SIGHUP raised as an interrupt by the CLI
            state["abort"] = True
            interrupted = True
            stop = exc
            try:
                stream.abort()  # stop the output at once
            except Exception:
                pass
        if not self._server_lost:
            try:
                stream.close()
            except Exception:
                pass
        picked = np.ascontiguousarray(rec[:, [ch - 1 for ch in input_channels]])
        result = PlayRecordResult(picked, int(sample_rate_hz), tuple(sorted(state["flags"])), int(state["pos"]),
                                  interrupted)
        if interrupted:
            raise PlaybackInterrupted(result) from stop
        return result

    def _lose_server(self) -> None:
        # PortAudio's JACK host API hangs in stop()/close() and aborts at exit once the
        # server is gone: skip both, and drop sounddevice's exit handler.
        self._server_lost = True
        try:
            atexit.unregister(self._sd._exit_handler)
        except Exception:
            pass

    def close(self) -> None:
        """Terminate PortAudio (call before the audio server stops; see the JACK pitfall)."""
        if self._server_lost:
            return
        try:
            while getattr(self._sd, "_initialized", 0) > 0:
                self._sd._terminate()
        except Exception:
            pass


# ------------------------------------------------------------------------- Fake


@dataclass
class FakeBackend:
    """A deterministic stand-in for an interface and a room.

    Parameters
    ----------
    paths : {(out_channel, in_channel): ir} — the IR from each output to each input
        (1-based). Inputs without a path record only noise.
    sample_rate_hz : the one rate this fake device accepts.
    latency_samples : the interface's round-trip latency added to every path.
    noise_rms : rms of the white noise added to every input (seeded).
    seed : seed of the noise generator (one generator per backend, so repeats differ).
    silent_inputs : inputs that record digital silence (a muted or unplugged mic).
    dropout_calls : 1-based numbers of play-record calls that report ``input_overflow``
        and lose a block (zeros) in the recording.
    vary_calls : {call number: extra_ir} — on those calls the extra IR is added to every
        path (someone walked past).
    vary_segment : (start_frame, extra_ir) — from that frame on, within every call, the
        extra IR is added (changes one repeat inside a block of repeats).
    interrupt_call / interrupt_frame : raise :class:`PlaybackInterrupted` in that call
        after that many frames.
    gone_call : raise :class:`AudioServerGone` in that call.
    """

    paths: Mapping[tuple[int, int], np.ndarray]
    sample_rate_hz: int = 48000
    latency_samples: int = 0
    noise_rms: float = 1e-5
    seed: int = 0
    n_inputs: int = 2
    n_outputs: int = 2
    silent_inputs: tuple[int, ...] = ()
    dropout_calls: tuple[int, ...] = ()
    vary_calls: Mapping[int, np.ndarray] = field(default_factory=dict)
    vary_segment: tuple[int, np.ndarray] | None = None
    interrupt_call: int | None = None
    interrupt_frame: int = 0
    gone_call: int | None = None
    nonlinear_coeffs: tuple[float, ...] = ()
    calls: list = field(default_factory=list)

    def __post_init__(self):
        self._rng = np.random.default_rng(self.seed)
        self.device = DeviceInfo(0, "fake interface", "Fake API", self.n_inputs, self.n_outputs,
                                 float(self.sample_rate_hz))

    def list_devices(self) -> list[DeviceInfo]:
        return [self.device]

    def resolve(self, spec, kind, option=None) -> DeviceInfo:
        return _resolve_in(self.list_devices(), spec if spec is not None else "fake", kind, option)

    def play_record(self, output, *, sample_rate_hz, output_device, input_device, output_channels, input_channels):
        from scipy.signal import fftconvolve

        call = len(self.calls) + 1
        self.calls.append({"output_channels": tuple(output_channels), "input_channels": tuple(input_channels),
                           "peak": float(np.max(np.abs(output))) if np.size(output) else 0.0,
                           "n_frames": int(np.shape(output)[0])})
        if int(sample_rate_hz) != self.sample_rate_hz:
            raise AudioUnavailableError(f"fake device runs at {self.sample_rate_hz} Hz, asked {sample_rate_hz} Hz")
        _check_channels(output_channels, output_device, "output", "--out-channel")
        _check_channels(input_channels, input_device, "input", "--in-channel")
        if self.gone_call == call:
            raise AudioServerGone("the audio server or device went away during the sweep (fake)")
        out = np.asarray(output, dtype=np.float32).astype(float)  # what a float32 stream carries
        n = out.shape[0]
        rec = np.zeros((n, len(input_channels)))
        for j_in, ch_in in enumerate(input_channels):
            acc = np.zeros(n + self.latency_samples)
            for j_out, ch_out in enumerate(output_channels):
                h = self.paths.get((ch_out, ch_in))
                if h is None:
                    continue
                x = out[:, j_out]
                if self.nonlinear_coeffs:
                    x = x + sum(c * x ** (p + 2) for p, c in enumerate(self.nonlinear_coeffs))
                h = np.asarray(h, dtype=float)
                if call in self.vary_calls:
                    extra = np.asarray(self.vary_calls[call], dtype=float)
                    m = max(h.size, extra.size)
                    h = np.pad(h, (0, m - h.size)) + np.pad(extra, (0, m - extra.size))
                y = fftconvolve(x, h)[:n]
                if self.vary_segment is not None:
                    start, extra = self.vary_segment
                    xs = np.zeros(n)
                    xs[start:] = x[start:]
                    y = y + fftconvolve(xs, np.asarray(extra, dtype=float))[:n]
                acc[self.latency_samples : self.latency_samples + n] += y
            r = acc[:n] + self.noise_rms * self._rng.standard_normal(n)
            if ch_in in self.silent_inputs:
                r = np.zeros(n)
            rec[:, j_in] = np.clip(r, -1.0, 1.0)
        flags: tuple[str, ...] = ()
        if call in self.dropout_calls:
            rec[n // 3 : n // 3 + 1024] = 0.0
            flags = ("input_overflow",)
        rec = rec.astype(np.float32)
        if self.interrupt_call == call:
            k = int(self.interrupt_frame)
            rec[k:] = 0
            raise PlaybackInterrupted(PlayRecordResult(rec, self.sample_rate_hz, flags, k, True))
        return PlayRecordResult(rec, self.sample_rate_hz, flags, n, False)

    def close(self) -> None:
        pass


def open_backend() -> AudioBackend:
    """The backend the CLI uses (tests replace this function with one returning a FakeBackend)."""
    return PortAudioBackend()


# ----------------------------------------------------------------------- live input
# (added by the listen work: one class for `howl listen`; the measurement code above is untouched)


class LiveInput:
    """A callback input stream of one channel (or several: ``channel`` a list) for live listening.

    Blocks go into a queue that :meth:`read` drains. Every PortAudio input status
    flag is counted (``overflows`` for ``input_overflow``, ``flags`` for all), never
    ignored. The watchdog of :meth:`PortAudioBackend.play_record` applies: a stream
    that is neither active nor stopped, or no callback for ``stall_timeout_s``, means
    the server or device went away (:class:`AudioServerGone`); ``stop``/``close``
    are then skipped because they hang on PortAudio 19.6's JACK host API.
    The sample rate defaults to the device's own. With a list of channels, :meth:`read` returns
    (frames, len(channels)) blocks in that order; ``channel_options`` names the option of each
    (for the error on a channel the device lacks).
    """

    def __init__(self, device: str | int | None, channel: int | Sequence[int] = 1, *, sample_rate_hz: float | None = None,
                 block_frames: int = 1024, stall_timeout_s: float = 3.0, max_queue_blocks: int = 1000,
                 channel_options: Sequence[str] | None = None):
        import queue

        multi = not isinstance(channel, (int, np.integer))
        chans = [int(c) for c in channel] if multi else [int(channel)]
        opts = list(channel_options) if channel_options else ["--in-channel"] * len(chans)

        self._backend = PortAudioBackend(stall_timeout_s=stall_timeout_s)
        sd = self._backend._sd
        try:
            dev = self._backend.resolve(device, "input", "--device")
            for ch, opt in zip(chans, opts):
                _check_channels([ch], dev, "input", opt)
        except InputError as exc:
            self._backend.close()
            raise InputError(exc.message, key=exc.key if exc.key in opts else "--device") from None
        self.device = dev
        self.channel = chans if multi else chans[0]
        cols = [c - 1 for c in chans] if multi else chans[0] - 1
        self.sample_rate_hz = float(sample_rate_hz or dev.default_sample_rate_hz)
        self.overflows = 0
        self.flags: set[str] = set()
        self.dropped_blocks = 0
        self._q: queue.Queue = queue.Queue(maxsize=max_queue_blocks)
        self._last = time.monotonic()
        self.stall_timeout_s = float(stall_timeout_s)

        def callback(indata, frames, _time, status):
            if status:
                for name in DROPOUT_FLAGS:
                    if getattr(status, name, False):
                        self.flags.add(name)
                if getattr(status, "input_overflow", False):
                    self.overflows += 1
            self._last = time.monotonic()
            try:
                self._q.put_nowait(indata[:, cols].copy())
            except queue.Full:  # the reader fell behind: count it as an overflow too
                self.dropped_blocks += 1
                self.overflows += 1

        try:
            self._stream = sd.InputStream(samplerate=self.sample_rate_hz, device=dev.index, channels=max(chans),
                                          dtype="float32", blocksize=int(block_frames), latency="high",
                                          callback=callback)
            self._stream.start()
        except Exception as exc:  # PortAudioError (wrong rate, device busy), ValueError
            self._backend.close()
            raise AudioUnavailableError(f"cannot open input {dev.label!r} at {self.sample_rate_hz:g} Hz: {exc}") from None
        self._last = time.monotonic()

    def read(self, timeout_s: float = 0.1) -> np.ndarray | None:
        """The next block (float32, 1-D; (frames, k) for a list of channels), or None if none arrived
        within ``timeout_s``."""
        import queue

        try:
            return self._q.get(timeout=timeout_s)
        except queue.Empty:
            pass
        st = self._stream
        if not st.active and not st.stopped:
            self._backend._lose_server()
            raise AudioServerGone("the audio server or input device went away; check it and start again")
        if time.monotonic() - self._last > self.stall_timeout_s:
            self._backend._lose_server()
            raise AudioServerGone(f"no audio for {self.stall_timeout_s:g} s from {self.device.label!r}: "
                                  "the audio server or device stopped responding")
        return None

    def close(self) -> None:
        """Stop the stream and terminate PortAudio (skipped if the server went away)."""
        if not self._backend._server_lost:
            try:
                self._stream.abort()
                self._stream.close()
            except Exception:
                pass
        self._backend.close()
