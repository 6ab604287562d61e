"""`howl track`: the loop's gain margin, live or from a two-channel recording, from the program itself."""

from __future__ import annotations

import sys
from pathlib import Path

import typer

ORDER = 76


def _spark(values) -> str:
    bars = "▁▂▃▄▅▆▇█"
    v = [x for x in values if x is not None]
    if not v:
        return ""
    lo, hi = min(v), max(v)
    span = hi - lo or 1.0
    return "".join(" " if x is None else bars[int((x - lo) / span * (len(bars) - 1))] for x in values)


def view_text(run, label: str, warn_db: float) -> str:
    """The terminal view: the margin now, its trend over the last minute, the frequency, the ±."""
    fs = run.sample_rate_hz
    t = run.n_samples / fs
    head = (f"howl track  {label}  {fs:g} Hz  {t:7.1f} s  send {run.level_dbfs[0]:6.1f} dBFS  "
            f"mic {run.level_dbfs[1]:6.1f} dBFS  overflows {run.overflows}   (Ctrl-C stops)")
    if not run.estimates:
        return head + "\n  listening: the first estimate comes after a second of program"
    e = run.estimates[-1]
    last_min = [x for x in run.estimates if x["time_s"] >= e["time_s"] - 60.0]
    gm = e["gain_margin_db"]
    now = "no crossing" if gm is None else f"{gm:5.1f} dB"
    pm = "" if e["uncertainty_db"] is None else f" ± {e['uncertainty_db']:.1f}"
    freq = "" if e["howl_freq_hz"] is None else f"   first howl near {e['howl_freq_hz']:.0f} Hz"
    mag = "" if e["magnitude_margin_db"] is None else f"   phase-blind {e['magnitude_margin_db']:.1f} dB"
    lines = [head, f"  margin now {now}{pm}{freq}{mag}   [{e['status']}]"]
    old = [x["gain_margin_db"] for x in last_min if x["gain_margin_db"] is not None]
    if len(old) >= 2:
        lines.append(f"  last minute {_spark([x['gain_margin_db'] for x in last_min])}  "
                     f"({old[-1] - old[0]:+.1f} dB over {last_min[-1]['time_s'] - last_min[0]['time_s']:.0f} s)")
    if gm is not None and gm < warn_db:
        lines.append(f"  WARNING: less than {warn_db:g} dB before howling: pull the fader or cut near "
                     f"{e['howl_freq_hz']:.0f} Hz")
    return "\n".join(lines)


def _check_outputs(log, record, save_loop, inputs) -> None:
    from howl.errors import InputError
    from howl.fileio import check_suffix, check_writable_folder, refuse_input_as_output

    for path, opt in ((record, "--record"), (save_loop, "--save-loop")):
        if path is not None:
            refuse_input_as_output(path, inputs, option=opt)
            check_suffix(path, (".wav",), option=opt, what="a WAV file")
            check_writable_folder(path, option=opt)
    if record is not None and save_loop is not None and Path(record).resolve() == Path(save_loop).resolve():
        raise InputError("is the same file as --record", key="--save-loop")
    if log is not None:
        from howl.cli.listen import _check_log

        refuse_input_as_output(log, inputs, option="--log")
        _check_log(log, None)


def _file_source(rec: Path, send: int, mic: int):
    import soundfile as sf

    from howl.errors import InputError
    from howl.fileio import wav_blocks
    from howl.listen._track_live import BlockSource

    try:
        n_ch = sf.info(str(rec)).channels if rec.is_file() else None
    except Exception:
        n_ch = None  # wav_blocks names the problem
    if n_ch == 1:
        raise InputError("is mono; howl track needs two channels (the send and the mic)", file=str(rec))
    for ch, opt in ((send, "--send-channel"), (mic, "--mic-channel")):
        if n_ch is not None and not 1 <= ch <= n_ch:
            raise InputError(f"must be a channel in 1..{n_ch} of {str(rec)!r}, got {ch}", key=opt)
    fs, _n, blocks = wav_blocks(rec, channels=[send, mic], option="--send-channel")
    return BlockSource(blocks, fs)


class _Recorder:
    """The raw two channels, written as they come and synced after each block (nothing lost on a crash)."""

    def __init__(self, path: Path, fs: float):
        import soundfile as sf

        self._f = sf.SoundFile(str(path), "w", samplerate=int(fs), channels=2, subtype="FLOAT", format="WAV")

    def __call__(self, block):
        self._f.write(block.astype("float32"))
        self._f.flush()

    def close(self):
        self._f.close()


def _run(source, label, kw, json_out, view, warn_db, web=None):
    from howl.listen._track_live import CAUTIONS, run_track

    if web is not None:
        from howl.cli import _webview

        return _webview.run_track(source, label=label, port=web[0], share=web[1], err=json_out, warn_db=warn_db,
                                  cautions=CAUTIONS, **kw)
    if json_out or not view or not sys.stdout.isatty():
        return run_track(source, warn_db=warn_db, **kw)
    import time

    from rich.console import Console
    from rich.live import Live
    from rich.text import Text

    last = [0.0]
    with Live(console=Console(), refresh_per_second=4, transient=False) as live:
        def upd(run):
            now = time.monotonic()
            if now - last[0] >= 0.25:
                last[0] = now
                live.update(Text(view_text(run, label, warn_db)))

        run = run_track(source, warn_db=warn_db, on_update=upd, **kw)
        live.update(Text(view_text(run, label, warn_db)))
    return run


def _validate(recording, device, send_channel, mic_channel, duration, warn_db, loop_length_ms, record) -> None:
    from howl import validate as v
    from howl.errors import InputError

    if (recording is None) == (device is None):
        raise InputError("give a recording (REC.wav) or --device, one of them", key="--device")
    if send_channel is None or mic_channel is None:
        raise InputError("must be given (the send and the mic are two channels)",
                         key="--send-channel" if send_channel is None else "--mic-channel")
    v.integer(send_channel, "--send-channel", 1, 1024)
    v.integer(mic_channel, "--mic-channel", 1, 1024)
    if send_channel == mic_channel:
        raise InputError(f"must differ from --send-channel, got {mic_channel} for both", key="--mic-channel")
    if duration is not None:
        v.in_range(duration, "--duration", 0.0, 24 * 3600.0, unit="s", lo_open=True)
    v.in_range(warn_db, "--warn-db", -20.0, 40.0, unit="dB")
    v.in_range(loop_length_ms, "--loop-length-ms", 20.0, 4000.0, unit="ms")
    if recording is not None and record is not None:
        raise InputError("records a live input; a recording is already a recording", key="--record")


def _track_run(recording, device, send_channel, mic_channel, record, log, duration, loop_length_ms, json_out,
               view, warn_db, web, port, share):
    """Open the source (a recording or the live input), track it, close everything; returns (run, label)."""
    from howl.listen.live import JsonlLog
    from howl.listen.track import TrackSettings

    settings = TrackSettings(loop_length_s=loop_length_ms / 1000.0)
    src = rec_w = lg = None
    try:
        if recording is not None:
            src = _file_source(recording, send_channel, mic_channel)
            label = str(recording)
        else:
            from howl.measure.audio import LiveInput

            src = LiveInput(device, [send_channel, mic_channel], channel_options=["--send-channel", "--mic-channel"])
            label = src.device.label
            typer.echo(f"tracking on {label!r} send {send_channel} mic {mic_channel} at {src.sample_rate_hz:g} Hz",
                       err=True)
            if record is not None:
                rec_w = _Recorder(record, src.sample_rate_hz)
        lg = JsonlLog(log) if log is not None else None
        kw = dict(settings=settings, duration_s=duration, log=lg, recorder=rec_w,
                  channels=(send_channel, mic_channel))
        try:
            run = _run(src, label, kw, json_out, view != "web", warn_db, web=(port, share) if web else None)
        except KeyboardInterrupt:  # stopped before the tracking loop ran (it handles its own interrupts)
            if not json_out:
                raise
            from howl.listen._track_live import TrackRun

            run = TrackRun(sample_rate_hz=float(src.sample_rate_hz), interrupted=True)
    finally:
        for closer in (rec_w, lg, src):
            if closer is not None:
                try:
                    closer.close()
                except KeyboardInterrupt:
                    pass
    return run, label


def register(app: typer.Typer) -> None:
    @app.command("track")
    def track_cmd(
        recording: Path = typer.Argument(None, metavar="[REC.wav]", help="A multichannel recording (instead of --device)."),
        device: str = typer.Option(None, "--device", help="Input device: index or part of its name (see `howl devices`)."),
        send_channel: int = typer.Option(None, "--send-channel", help="1-based channel of the send (console output to the amplifier)."),
        mic_channel: int = typer.Option(None, "--mic-channel", help="1-based channel of the mic, before the fader."),
        duration: float = typer.Option(None, "--duration", help="Stop after this many seconds of audio."),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object at the end (estimates and events)."),
        log: Path = typer.Option(None, "--log", help="Append estimates and events as JSON lines (flushed per line)."),
        record: Path = typer.Option(None, "--record", help="Live: write the raw send and mic to this WAV as they come."),
        save_loop: Path = typer.Option(None, "--save-loop", help="Write the final loop estimate as a loop IR WAV "
                                       "(for `howl margin`, `ringout`, `sheet`)."),
        warn_db: float = typer.Option(3.0, "--warn-db", help="Warn when the margin falls below this (dB)."),
        loop_length_ms: float = typer.Option(500.0, "--loop-length-ms", help="Length of the loop estimate (ms)."),
        view: str = typer.Option("terminal", "--view", help="terminal (text) or web (a live page; the address is printed)."),
        port: int = typer.Option(None, "--port", help="With --view web: the page's port (default: a free one)."),
        share: bool = typer.Option(False, "--share", help="With --view web: serve on the LAN address behind a key."),
    ) -> None:
        """Track the loop's gain margin from the program: the send and the mic, no test signal."""
        from howl.cli._common import emit_json
        from howl.listen._track_live import CAUTIONS

        _validate(recording, device, send_channel, mic_channel, duration, warn_db, loop_length_ms, record)
        _check_outputs(log, record, save_loop, [recording])
        from howl.cli import _webview

        web = _webview.check_options(view, port, share)
        for line in CAUTIONS:
            typer.echo(line, err=json_out)

        run, label = _track_run(recording, device, send_channel, mic_channel, record, log, duration, loop_length_ms,
                                json_out, view, warn_db, web, port, share)
        if save_loop is not None and run.loop_ir is not None:
            from howl.fileio import write_wav_atomic

            write_wav_atomic(save_loop, run.loop_ir, int(run.sample_rate_hz), option="--save-loop")
        from howl.cli._common import warn

        for ev in run.events:
            if ev["kind"] in ("silent_send", "send_equals_mic", "overflow"):
                warn(ev["message"])
        rep = {"source": label, "send_channel": send_channel, "mic_channel": mic_channel,
               "sample_rate_hz": run.sample_rate_hz, "duration_s": run.n_samples / run.sample_rate_hz,
               "estimates": run.estimates, "events": run.events, "overflows": run.overflows,
               "interrupted": run.interrupted, "warn_db": warn_db,
               "loop_ir": None if save_loop is None or run.loop_ir is None else str(save_loop)}
        if json_out:
            emit_json(rep)
            return
        end = "stopped (Ctrl-C)" if run.interrupted else "done"
        typer.echo(f"{end}: {rep['duration_s']:.1f} s, {len(run.estimates)} estimate(s)")
        if run.estimates:
            typer.echo(view_text(run, label, warn_db).split("\n", 1)[-1])
