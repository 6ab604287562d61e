"""`howl scan RECORDING.wav`: find howls and ringing in a recording, suggest cuts."""

from __future__ import annotations

from pathlib import Path

import typer

from howl.cli import _desk

ORDER = 70

CAUTION = (
    "howl suggests cuts; the operator decides. Check each cut by ear at a safe level."
)


def _render_text(rep: dict, path: str) -> list[str]:
    lines = [f"{path}: {rep['duration_s']:.2f} s at {rep['sample_rate_hz']:g} Hz, "
             f"{rep['n_howl']} howl(s), {rep['n_ringing']} ringing"]
    if rep["loop_delay_from"] is None:
        lines.append(f"  loop delay not given: cut depths assume {rep['assumed_loop_delay_ms']:g} ms "
                     "(pass --loop-ir or --loop-delay-ms for margins)")
    elif rep["loop_delay_ms"] is None:
        lines.append(f"  margins use the loop delay at each frequency from {rep['loop_delay_from']}")
    if rep["events"]:
        lines.append("  time_s   kind     freq_hz    level_db  trend_db/s  margin_db  cut")
        for e in rep["events"]:
            n = e["notch"]
            cut = "full notch" if n["gain_db"] is None else f"{n['gain_db']:.1f} dB"
            margin = e.get("margin_db")
            ms = "      -  " if margin is None else f"{margin:9.2f}"
            lines.append(f"  {e['time_s']:6.2f}   {e['kind']:<8} {e['freq_hz']:9.1f}  {e['level_db']:8.1f}  "
                         f"{e['growth_db_per_s']:10.1f}  {ms}  {cut} Q {n['q']:.1f}")
            c = e.get("loop_ir_crossing")
            if c is not None and not c["on_crossing"]:
                lines.append(f"           not on a crossing of the loop IR (nearest {c['freq_hz']:.1f} Hz, "
                             f"{c['offset_pct']:.1f} % away): more likely program pumped through the loop")
    else:
        lines.append("  nothing rang or howled")
    if rep["notches"]:
        lines.append("  suggested cuts (merged):")
        for n in rep["notches"]:
            cut = "full notch" if n["gain_db"] is None else f"{n['gain_db']:.1f} dB"
            lines.append(f"    {n['freq_hz']:9.1f} Hz  {cut:>10}  Q {n['q']:.1f} "
                         f"({n['bandwidth_oct']:.3f} oct)  from {n['n_events']} event(s)")
    if rep.get("desk_summary"):
        lines.append(f"  desk: {rep['desk_summary']}")
    if rep.get("cuts_out"):
        lines.append(f"  cut list written to {rep['cuts_out']}")
    for a in rep["advice"]:
        lines.append(f"  advice: {a}")
    lines.append(f"  {CAUTION}")
    return lines


def register(app: typer.Typer) -> None:
    @app.command("scan")
    def scan(
        recording: Path = typer.Argument(..., help="WAV recording to scan (e.g. a soundcheck)."),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of text."),
        channel: int = typer.Option(None, "--channel", help="1-based channel of a multichannel WAV."),
        loop_delay_ms: float = typer.Option(
            None, "--loop-delay-ms",
            help="Loop delay (ms) when known: turns ring-down rates into margins."),
        loop_ir: Path = typer.Option(
            None, "--loop-ir", metavar="IR.wav",
            help="Measured loop IR (as `howl measure` writes): margins from the loop delay at each frequency."),
        max_notches: int = typer.Option(6, "--max-notches", help="Budget of cuts in the summary."),
        temperature_c: float = typer.Option(20.0, "--temperature-c", help="Air temperature (for the drift width of cuts)."),
        swing_c: float = typer.Option(3.0, "--swing-c", help="Temperature swing to cover."),
        eq: str = _desk.EQ,
        max_bands: int = _desk.MAX_BANDS,
        max_depth_db: float = _desk.MAX_DEPTH,
        max_q: float = _desk.MAX_Q,
        min_width_oct: float = _desk.MIN_WIDTH,
        gain_step_db: float = _desk.STEP,
        graphic_q: float = _desk.GRAPHIC_Q,
        desk_from: Path = _desk.DESK_FROM,
        cuts_out: Path = _desk.CUTS_OUT,
    ) -> None:
        """Find howls (growing pure tones) and ringing (slow ring-downs) in a recording; suggest cuts."""
        from howl import validate as v
        from howl.listen.detect import report
        from howl.listen._stream import scan_wav
        from howl.cli._common import capture_warnings, emit_json, loop_delay_option

        tau = loop_delay_option(loop_delay_ms, loop_ir)
        v.integer(max_notches, "--max-notches", 1, 64)
        v.in_range(swing_c, "--swing-c", 0.0, 30.0, unit="°C")
        v.in_range(temperature_c, "--temperature-c", -30.0, 50.0, unit="°C")
        desk = _desk.resolve(eq=eq, max_bands=max_bands, max_depth_db=max_depth_db, max_q=max_q,
                             min_width_oct=min_width_oct, gain_step_db=gain_step_db, graphic_q=graphic_q,
                             desk_from=desk_from)
        if cuts_out is not None and cuts_out.suffix.lower() not in (".csv", ".json"):
            raise v.fail("--cuts-out", "a .csv or .json file name", str(cuts_out))
        with capture_warnings():
            # read in blocks and fed to the incremental detector: memory does not grow with length
            # with a loop IR, a component far from all of its crossings is not a howl
            events, fs, duration_s = scan_wav(recording, channel=channel,
                                              loop_delay_s=None if callable(tau) else tau,
                                              crossings_hz=getattr(tau, "crossings_hz", None),
                                              crossing_resolution_hz=getattr(tau, "crossing_resolution_hz", None))
            rep = report(events, fs, duration_s, loop_delay_s=tau, max_notches=max_notches,
                         temperature_c=temperature_c, swing_c=swing_c, **({} if desk is None else {"desk": desk}))
        rep = {"file": str(recording), "channel": channel, **rep, "caution": CAUTION}
        if cuts_out is not None:
            from howl.loop.cutfile import write_cut_file
            from howl.loop.notch import Notch

            cuts = [Notch(n["freq_hz"], n["gain_db"], n["q"]) for n in rep["notches"]]
            rep["cuts_out"] = write_cut_file(cuts_out, cuts, desk=desk, source=f"howl scan {recording}")
        if json_out:
            emit_json(rep)
        else:
            for line in _render_text(rep, str(recording)):
                typer.echo(line)
