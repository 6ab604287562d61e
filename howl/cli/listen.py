"""`howl listen`: the ringing detector on a live input, with a terminal view and a JSON-lines log."""

from __future__ import annotations

import sys
from pathlib import Path

import typer

from howl.cli import _desk

ORDER = 75


def _margin_text(rec: dict) -> str:
    """How far from howling: "1.5 dB from howling" for a ringing, "0.6 dB past" for a howl;
    "~" when the loop delay was assumed (no --loop-delay-ms)."""
    m = rec.get("margin_db")
    approx = ""
    if m is None:
        m = rec.get("margin_assumed_db")
        approx = "~"
    if m is None:
        return "-"
    return f"{approx}{m:.1f} dB from howling" if m > 0 else f"{approx}{-m:.1f} dB past"


def _hz(freq_hz: float) -> str:
    """A frequency as a tech reads it: "523.4 Hz", "2.346 kHz"."""
    return f"{freq_hz / 1000:.3f} kHz" if freq_hz >= 1000 else f"{freq_hz:.1f} Hz"


def _clock(t_s: float) -> str:
    m = int(t_s // 60)
    return f"{m}:{t_s - 60 * m:04.1f}"


def _depth(gain_db) -> str:
    return "full notch" if gain_db is None else f"{gain_db:.1f} dB"


def _view(snap, device_label: str, fs: float):
    """The terminal view: the same words as the page (howl.report.web): states a tech uses, cuts in
    desk terms (centre, depth, Q and width), no detector-internal figures."""
    from rich.console import Group
    from rich.table import Table
    from rich.text import Text

    from howl.report.web.state import STATE_WORDS, trend_words

    head = Text(f"howl listen  {device_label}  {fs:g} Hz  clock {_clock(snap.elapsed_s)}  "
                f"input {snap.level_dbfs:6.1f} dBFS  dropped blocks {snap.overflows}   (Ctrl-C stops)")
    cand = Table(title="peaks being followed", expand=False)
    for col in ("frequency", "level dBFS", "trend", "for", "above nearby", "state"):
        cand.add_column(col, justify="right")
    for c in snap.candidates:
        cand.add_row(_hz(c.freq_hz), f"{c.level_db:.1f}",
                     f"{trend_words(c.trend_db_per_s)} {c.trend_db_per_s:+.1f} dB/s", f"{c.age_s:.1f} s",
                     f"{c.pnpr_db:.0f} dB", STATE_WORDS.get(c.state, c.state))
    ev = Table(title="what happened (newest last)", expand=False)
    for col in ("clock", "what", "frequency", "level dBFS", "trend", "how close", "cut for the desk"):
        ev.add_column(col, justify="right")
    off_any = False
    for r in snap.events[-6:]:
        n = r["notch"]
        c = r.get("loop_ir_crossing")
        off = c is not None and not c["on_crossing"]
        off_any |= off
        ev.add_row(_clock(r["time_s"]), STATE_WORDS.get(r["kind"], r["kind"]) + (" *" if off else ""),
                   _hz(r["freq_hz"]), f"{r['level_db']:.1f}", f"{r['growth_db_per_s']:+.1f} dB/s", _margin_text(r),
                   f"{_hz(n['freq_hz'])} {_depth(n['gain_db'])} Q {n['q']:.1f}")
    if off_any:
        ev.caption = "* not on a crossing of the loop IR: more likely program pumped through the loop"
    notches = Table(title="cut list for the desk", expand=False)
    for col in ("centre", "depth", "Q", "width"):
        notches.add_column(col, justify="right")
    for n in snap.notches:
        notches.add_row(_hz(n.freq_hz), _depth(n.gain_db), f"{n.q:.1f}", f"{n.bandwidth_oct:.2f} oct")
    parts = [head, cand, ev, notches]
    parts += [Text(f"advice: {a}") for a in snap.advice]
    return Group(*parts)


def _run(device, in_channel, kw, json_out, web=None):
    """Open the input, listen until the end, Ctrl-C or a stop signal; returns (result, device label)."""
    from howl.listen.detect import Detector
    from howl.listen.live import listen
    from howl.measure.audio import LiveInput

    src = None
    label = str(device)
    try:
        Detector(48000.0)  # warm up (imports, FFT plans) before the stream starts: no GIL stall in the callback
        send = None if web is None else web[2]
        if send is None:
            src = LiveInput(device, in_channel)
        else:  # [send, mic] blocks for the tracker beside the detector (LiveInput with a channel list)
            src = LiveInput(device, [send, in_channel], channel_options=["--send-channel", "--in-channel"])
        label = src.device.label
        typer.echo(f"listening on {label!r} channel {in_channel} at {src.sample_rate_hz:g} Hz"
                   + ("" if send is None else f"; the send on channel {send} for the loop margin"), err=True)
        if web is not None:
            from howl.cli import _webview

            res = _webview.run_listen(src, label=label, port=web[0], share=web[1], err=json_out,
                                      send=send is not None, warn_db=web[3], **kw)
        elif json_out or not sys.stdout.isatty():
            res = listen(src, **kw)
        else:
            from rich.console import Console
            from rich.live import Live

            console = Console()
            with Live(console=console, refresh_per_second=4, transient=False) as live:
                res = listen(src, on_update=lambda s: live.update(_view(s, label, src.sample_rate_hz)), **kw)
    except KeyboardInterrupt:  # stopped before the listening loop ran (it handles its own interrupts)
        if not json_out:
            raise
        res = _empty_result(src, kw)  # --json promises one object: an empty report, marked interrupted
    finally:
        if src is not None:
            try:
                src.close()
            except KeyboardInterrupt:  # a second Ctrl-C while closing: the report still goes out
                pass
    return res, label


def _empty_result(src, kw):
    """The result of a run stopped before any audio was analysed (no events, zero duration)."""
    from howl.listen.detect import report
    from howl.listen.live import ListenResult

    fs = float(src.sample_rate_hz) if src is not None else 48000.0
    rep = report([], fs, 0.0, max_notches=kw["max_notches"], loop_delay_s=kw["loop_delay_s"],
                 temperature_c=kw["temperature_c"], swing_c=kw["swing_c"])
    overflows = int(getattr(src, "overflows", 0) or 0)
    rep["overflows"] = overflows
    rep["interrupted"] = True
    return ListenResult(report=rep, overflows=overflows, interrupted=True, n_samples=0)


def _check_log(log: Path, loop_ir) -> None:
    """--log must be a file howl can append to (checked before the stream opens): one line otherwise."""
    from howl.errors import InputError
    from howl.fileio import refuse_input_as_output

    refuse_input_as_output(log, [loop_ir], option="--log")
    if log.is_dir():
        raise InputError(f"{str(log)!r} is a folder; expected a file to append events to", key="--log")
    try:
        with open(log, "a", encoding="utf-8"):
            pass
    except OSError as exc:
        raise InputError(f"cannot append to {str(log)!r}: {exc.strerror or exc}", key="--log") from None


def _print_summary(rep: dict, res) -> None:
    """The end-of-run summary on the terminal: cuts, advice, the last loop margin, overflows."""
    end = "stopped (Ctrl-C)" if res.interrupted else "done"
    typer.echo(f"{end}: {rep['duration_s']:.1f} s, {rep['n_howl']} howl(s), {rep['n_ringing']} ringing, "
               f"{res.overflows} input overflow(s)")
    for n in rep["notches"]:
        cut = "full notch" if n["gain_db"] is None else f"{n['gain_db']:.1f} dB"
        typer.echo(f"  cut {n['freq_hz']:9.1f} Hz  {cut:>10}  Q {n['q']:.1f}  from {n['n_events']} event(s)")
    for a in rep["advice"]:
        typer.echo(f"  advice: {a}")
    lm = rep.get("loop_margin")
    if lm and lm["estimates"]:
        e = lm["estimates"][-1]
        m = "no crossing" if e["gain_margin_db"] is None else f"{e['gain_margin_db']:.1f} dB"
        f = "" if e["howl_freq_hz"] is None else f", first howl near {e['howl_freq_hz']:.0f} Hz"
        typer.echo(f"  loop margin at the end: {m} ± {e['uncertainty_db']:.1f} dB{f} ({e['status']})")
    if res.overflows:
        typer.echo(f"  warning: {res.overflows} input overflow(s): audio was lost; results may miss events",
                   err=True)


def register(app: typer.Typer) -> None:
    @app.command("listen")
    def listen_cmd(
        device: str = typer.Option(None, "--device", help="Input device: index or part of its name (see `howl devices`)."),
        in_channel: int = typer.Option(1, "--in-channel", help="1-based input channel."),
        duration: float = typer.Option(None, "--duration", help="Stop after this many seconds of audio."),
        log: Path = typer.Option(None, "--log", help="Append events as JSON lines to this file (flushed per event)."),
        json_out: bool = typer.Option(False, "--json", help="With --duration: print the same JSON as `howl scan` at the end."),
        loop_delay_ms: float = typer.Option(None, "--loop-delay-ms", help="Loop delay (ms) when known: margins from ring-downs."),
        loop_ir: Path = typer.Option(None, "--loop-ir", metavar="IR.wav",
                                     help="Measured loop IR: margins from the loop delay at each frequency."),
        max_notches: int = typer.Option(6, "--max-notches", help="Budget of cuts in the running list."),
        temperature_c: float = typer.Option(20.0, "--temperature-c", help="Air temperature (drift width of cuts)."),
        swing_c: float = typer.Option(3.0, "--swing-c", help="Temperature swing to cover."),
        eq: str = _desk.EQ,
        max_bands: int = _desk.MAX_BANDS,
        max_depth_db: float = _desk.MAX_DEPTH,
        max_q: float = _desk.MAX_Q,
        min_width_oct: float = _desk.MIN_WIDTH,
        gain_step_db: float = _desk.STEP,
        graphic_q: float = _desk.GRAPHIC_Q,
        desk_from: Path = _desk.DESK_FROM,
        view: str = typer.Option("terminal", "--view", help="terminal (a text table) or web (a live page in the "
                                 "browser; the address is printed)."),
        port: int = typer.Option(None, "--port", help="With --view web: the page's port (default: a free one)."),
        share: bool = typer.Option(False, "--share", help="With --view web: serve on the LAN address for a tablet, "
                                   "behind a key in the link (printed with a QR code)."),
        send_channel: int = typer.Option(None, "--send-channel", help="With --view web: the input channel carrying "
                                         "the console's send to the loudspeaker; the loop margin is tracked from it "
                                         "and the mic and shown on the same page."),
        warn_db: float = typer.Option(3.0, "--warn-db", help="With --send-channel: warn when the loop margin "
                                      "falls below this (dB)."),
    ) -> None:
        """Listen to a live input for ringing and howls; show candidates, suggested cuts and a running notch list."""
        from howl import validate as v
        from howl.errors import InputError
        from howl.listen.live import CAUTIONS
        from howl.cli._common import emit_json, loop_delay_option

        if device is None:
            raise InputError("must name the input device (index or part of its name; `howl devices` lists them)",
                             key="--device")
        v.integer(in_channel, "--in-channel", 1, 1024)
        v.integer(max_notches, "--max-notches", 1, 64)
        if duration is not None:
            v.in_range(duration, "--duration", 0.0, 24 * 3600.0, unit="s", lo_open=True)
        if json_out and duration is None:
            raise InputError("needs --duration (the JSON report is printed when the run ends)", key="--json")
        if log is not None:
            _check_log(log, loop_ir)
        tau = loop_delay_option(loop_delay_ms, loop_ir)
        desk = _desk.resolve(eq=eq, max_bands=max_bands, max_depth_db=max_depth_db, max_q=max_q,
                             min_width_oct=min_width_oct, gain_step_db=gain_step_db, graphic_q=graphic_q,
                             desk_from=desk_from)
        from howl.cli import _webview

        web = _webview.check_options(view, port, share, send_channel, in_channel)
        if warn_db != 3.0 and send_channel is None:
            raise InputError("needs --send-channel (the margin is tracked from the send)", key="--warn-db")
        v.in_range(warn_db, "--warn-db", 0.0, 40.0, unit="dB")
        # start-up cautions: stderr under --json (stdout carries exactly one JSON object)
        for line in CAUTIONS:
            typer.echo(line, err=json_out)

        kw = dict(duration_s=duration, log_path=log, loop_delay_s=tau, max_notches=max_notches,
                  temperature_c=temperature_c, swing_c=swing_c, **({} if desk is None else {"desk": desk}))
        res, label = _run(device, in_channel, kw, json_out, web=(port, share, send_channel, warn_db) if web else None)
        rep = {"device": label, "in_channel": in_channel, **res.report}
        if json_out:
            emit_json(rep)
            return
        _print_summary(rep, res)
