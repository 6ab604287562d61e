"""`howl ringout`: virtual ring-out of a measured loop IR: the cuts that buy stable gain."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from howl.cli import _desk

ORDER = 50


def register(app: typer.Typer) -> None:
    @app.command(
        "ringout",
        help=(
            "Virtual ring-out of a loop impulse response: finds the crossing that limits the Nyquist margin, "
            "places a cut there (RBJ peaking cut, no wider than 1/3 octave, wide enough for the howl "
            "frequency's drift with air temperature), recomputes the loop with the cuts in it and repeats. "
            "Reports the added stable gain per step and in total, the margin before and after, the tonal "
            "cost, and each cut as centre Hz, gain dB, Q and bandwidth plus biquad coefficients."
        ),
    )
    def ringout_cmd(
        ir: Path = typer.Argument(..., metavar="IR.wav", help="Loop IR (mono WAV, time zero at sample 0)."),
        max_notches: int = typer.Option(6, "--max-notches", help="Budget of cuts."),
        target_margin_db: Optional[float] = typer.Option(
            None, "--target-margin-db", help="Stop as soon as the margin reaches this (dB)."
        ),
        min_gain_db: float = typer.Option(
            0.5, "--min-gain-db", help="Drop cuts that buy less than this much stable gain each (dB)."
        ),
        band_hz: Optional[tuple[float, float]] = typer.Option(
            None, "--band-hz", metavar="LO HI", help="Analysis band in Hz (default: all the file holds)."
        ),
        temperature_c: float = typer.Option(20.0, "--temperature-c", help="Air temperature (°C)."),
        swing_c: float = typer.Option(3.0, "--swing-c", help="Temperature swing each cut must cover (± °C)."),
        tonal_share: float = typer.Option(
            0.5, "--tonal-share",
            help="Most tonal cost (dB of program power removed, as --tonal-weighting counts it) the cuts may spend per dB of stable gain.",
        ),
        tonal_weighting: str = typer.Option(
            "pink", "--tonal-weighting", help="What --tonal-share counts: pink (broadband) or speech.",
        ),
        robust: bool = typer.Option(
            False, "--robust", help="Judge the cuts also on the loop warmed/cooled by the swing and with room movement."
        ),
        sample_rate_hz: Optional[float] = typer.Option(
            None, "--sample-rate-hz", help="Sample rate of the printed biquad coefficients (default: the IR's)."
        ),
        channel: Optional[int] = typer.Option(None, "--channel", help="Channel (1-based) of a multichannel WAV."),
        max_length_s: float = typer.Option(20.0, "--max-length-s", help="Longest IR accepted (s)."),
        trim_s: Optional[float] = typer.Option(None, "--trim-s", help="Use only the first TRIM_S seconds of the IR."),
        eq: Optional[str] = _desk.EQ,
        max_bands: Optional[int] = _desk.MAX_BANDS,
        max_depth_db: Optional[float] = _desk.MAX_DEPTH,
        max_q: Optional[float] = _desk.MAX_Q,
        min_width_oct: Optional[float] = _desk.MIN_WIDTH,
        gain_step_db: Optional[float] = _desk.STEP,
        graphic_q: Optional[float] = _desk.GRAPHIC_Q,
        desk_from: Optional[Path] = _desk.DESK_FROM,
        cuts_out: Optional[Path] = _desk.CUTS_OUT,
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of text."),
    ) -> None:
        from howl.cli._common import capture_warnings, emit_json

        desk = _desk.resolve(eq=eq, max_bands=max_bands, max_depth_db=max_depth_db, max_q=max_q,
                             min_width_oct=min_width_oct, gain_step_db=gain_step_db, graphic_q=graphic_q,
                             desk_from=desk_from)
        if cuts_out is not None and cuts_out.suffix.lower() not in (".csv", ".json"):
            from howl.errors import InputError

            raise InputError(f"must end in .csv or .json, got {str(cuts_out)!r}", key="--cuts-out")
        with capture_warnings():
            report = ringout_report(
                ir, max_notches=max_notches, target_margin_db=target_margin_db, min_gain_db=min_gain_db,
                band_hz=band_hz, temperature_c=temperature_c, swing_c=swing_c, robust=robust,
                tonal_share=tonal_share, tonal_weighting=tonal_weighting, sample_rate_hz=sample_rate_hz, channel=channel, max_length_s=max_length_s, trim_s=trim_s,
                desk=desk,
            )
            if cuts_out is not None:
                from howl.loop.cutfile import write_cut_file
                from howl.loop.notch import Notch

                cuts = [Notch(n["freq_hz"], n["gain_db"], n["q"]) for n in report["notches"]]
                report["cuts_out"] = write_cut_file(cuts_out, cuts, desk=desk, source=f"howl ringout {ir}")
        if json_out:
            emit_json(report)
            return
        for line in report_lines(report):
            typer.echo(line)


def _notch_json(n, coeff_fs: float) -> dict:
    from howl.loop.notch import notch_sos

    sos = notch_sos(n, coeff_fs)[0]
    return {
        "freq_hz": n.freq_hz,
        "gain_db": n.gain_db,
        "q": n.q,
        "bandwidth_oct": n.bandwidth_oct,
        "type": "notch" if n.gain_db is None else "peaking",
        "biquad": {"b": [float(x) for x in sos[:3]], "a": [float(x) for x in sos[3:]]},
    }


def ringout_report(
    path: Path, *, max_notches=6, target_margin_db=None, min_gain_db=0.5, band_hz=None, temperature_c=20.0,
    swing_c=3.0, robust=False, tonal_share=0.5, tonal_weighting="pink", sample_rate_hz=None, channel=None, max_length_s=20.0, trim_s=None,
    desk=None,
) -> dict:
    """The `howl ringout --json` object."""
    import warnings

    from howl import validate as V
    from howl.errors import HowlWarning, InputError
    from howl.loop.ringout import ring_out
    from howl.cli.margin import load_loop_ir

    h, fs, warns = load_loop_ir(path, channel=channel, max_length_s=max_length_s, trim_s=trim_s)
    for w in warns:
        warnings.warn(w, HowlWarning)
    V.integer(max_notches, "--max-notches", 0, 64)
    V.in_range(min_gain_db, "--min-gain-db", 0.0, 60.0, unit="dB")  # no cut buys more than a desk's range
    if target_margin_db is not None:
        V.in_range(target_margin_db, "--target-margin-db", -60.0, 60.0, unit="dB")
    coeff_fs = float(fs) if sample_rate_hz is None else V.positive(sample_rate_hz, "--sample-rate-hz", unit="Hz")
    band = None if band_hz is None else (float(band_hz[0]), float(band_hz[1]))
    try:
        res = ring_out(
            h, fs, max_notches=max_notches, target_margin_db=target_margin_db, min_gain_per_notch_db=min_gain_db,
            band_hz=band, temperature_c=temperature_c, swing_c=swing_c, robust=robust, tonal_share=tonal_share,
            tonal_weighting=tonal_weighting, desk=desk,
        )
    except InputError as exc:  # name the option the user typed
        if exc.key == "freq_hz" and exc.file is None:  # a cut asked for at 0 Hz: the loop's worst crossing is DC
            raise InputError("the loop's worst crossing is at 0 Hz (DC), where no cut can act; restrict the band "
                             "(--band-hz) or high-pass the IR", file=str(path)) from None
        opt = {"band_hz": "--band-hz", "max_notches": "--max-notches", "min_gain_per_notch_db": "--min-gain-db",
               "target_margin_db": "--target-margin-db", "temperature_c": "--temperature-c",
               "swing_c": "--swing-c", "tonal_share": "--tonal-share",
               "tonal_weighting": "--tonal-weighting"}.get((exc.key or "").split("[")[0])
        if opt is not None:  # about an option the user typed: name it, not the file
            raise InputError(exc.message, key=opt) from None
        raise InputError(exc.message, file=str(path), key=exc.key) from None
    top = max((n.freq_hz for n in res.notches), default=0.0)
    if top >= coeff_fs / 2:
        raise InputError(
            f"must be more than twice the highest cut ({top:.0f} Hz), got {coeff_fs:g}", key="--sample-rate-hz"
        )
    if sample_rate_hz is not None and abs(coeff_fs - fs) > 0.5 and top > coeff_fs / 8:
        warnings.warn(
            f"cuts were evaluated at the IR's {fs} Hz; at {coeff_fs:g} Hz the same Q gives a slightly different "
            "width near Nyquist (bilinear warping)", HowlWarning,
        )
    return {
        "file": str(path),
        "sample_rate_hz": fs,
        "band_hz": list(res.band_hz),
        "added_stable_gain_db": res.added_stable_gain_db,
        "gain_margin_db_before": res.gain_margin_db_before,
        "gain_margin_db_after": res.gain_margin_db_after,
        "magnitude_margin_db_before": res.magnitude_margin_db_before,
        "magnitude_margin_db_after": res.magnitude_margin_db_after,
        "howl_freq_hz_before": res.howl_freq_hz_before,
        "howl_freq_hz_after": res.howl_freq_hz_after,
        "stopped_because": res.stopped_because,
        "notches": [_notch_json(n, coeff_fs) for n in res.notches],
        "coefficients_sample_rate_hz": coeff_fs,
        "coefficients_form": "b0 b1 b2 / a0 a1 a2 normalised to a0 = 1 (RBJ cookbook; q is the cookbook Q of that type)",
        "steps": [
            {
                "index": s.index,
                "target_freq_hz": s.target_freq_hz,
                "freq_hz": s.notch.freq_hz,
                "gain_db": s.notch.gain_db,
                "q": s.notch.q,
                "bandwidth_oct": s.notch.bandwidth_oct,
                "gain_margin_db": s.gain_margin_db,
                "added_stable_gain_db": s.added_stable_gain_db,
                "total_added_stable_gain_db": s.total_added_stable_gain_db,
                "tonal_cost_db": s.tonal_cost_db,
                "tonal_cost_speech_db": s.tonal_cost_speech_db,
            }
            for s in res.steps
        ],
        "tonal_cost_db": res.tonal_cost_db,
        "tonal_cost_weighting": "pink noise (equal power per octave) over the analysis band",
        "tonal_cost_speech_db": res.tonal_cost_speech_db,
        "tonal_share": res.tonal_share,
        "tonal_rule_weighting": res.tonal_weighting,
        "tonal_cost_speech_weighting": "male speech, normal effort, octave bands 250 Hz-4 kHz (Bies, Hansen & Howard, Table 4.3)",
        "temperature_c": res.temperature_c,
        "swing_c": res.swing_c,
        "robust": res.robust,
        "robust_loops": [
            {"name": n, "gain_margin_db_before": b, "gain_margin_db_after": a} for n, b, a in res.robust_loops
        ],
        "advice": list(res.advice),
        "desk": None if desk is None else desk.to_json(),
        "desk_summary": "ideal EQ (no desk limits given)" if desk is None else desk.describe(),
        "margins_exact": "every margin and added stable gain, per step and in total, is the Nyquist margin of the whole IR with the cuts so far (as howl margin computes it)",
    }


def report_lines(r: dict) -> list[str]:
    """The terminal table."""
    def gain(g):
        return "notch" if g is None else f"{g:6.1f}"

    lines = [
        f"{r['file']}: virtual ring-out, band {r['band_hz'][0]:.0f}-{r['band_hz'][1]:.0f} Hz"
        + (" (robust: worst of the perturbed loops)" if r["robust"] else ""),
        f"  margin before {r['gain_margin_db_before']:6.2f} dB   after {r['gain_margin_db_after']:6.2f} dB   "
        f"added stable gain {r['added_stable_gain_db']:5.2f} dB",
        f"  stopped: {r['stopped_because']}",
        "",
        f"  desk: {r['desk_summary']}",
        "  step  centre Hz  gain dB     Q   width oct  margin dB  +dB step  +dB total  tone dB (pink/speech)",
    ]
    costly = False
    for s in r["steps"]:
        dear = s["tonal_cost_db"] > r["tonal_share"] * max(s["added_stable_gain_db"], 0.0)
        costly |= dear
        lines.append(
            f"  {s['index']:4d}  {s['freq_hz']:9.1f}  {gain(s['gain_db'])}  {s['q']:6.2f}  {s['bandwidth_oct']:9.3f}"
            f"  {s['gain_margin_db']:9.2f}  {s['added_stable_gain_db']:8.2f}  {s['total_added_stable_gain_db']:9.2f}"
            f"  {s['tonal_cost_db']:5.2f} / {s['tonal_cost_speech_db']:5.2f}" + ("  *" if dear else "")
        )
    if costly:
        lines.append(
            f"  * this cut removes more program than {r['tonal_share']:g} dB per dB it buys: a broad EQ, a mic move "
            "or a pattern change may serve better there"
        )
    if not r["steps"]:
        lines.append("  (no cuts)")
    lines += [
        "",
        f"  tonal cost {r['tonal_cost_db']:.2f} dB (pink noise over the band), {r['tonal_cost_speech_db']:.2f} dB (speech-weighted)",
        f"  biquads at {r['coefficients_sample_rate_hz']:g} Hz (b0 b1 b2 a1 a2, a0 = 1):",
    ]
    for n in r["notches"]:
        b, a = n["biquad"]["b"], n["biquad"]["a"]
        lines.append(
            f"    {n['freq_hz']:9.1f} Hz  " + " ".join(f"{x:+.12f}" for x in (*b, a[1], a[2]))
        )
    for rl in r["robust_loops"]:
        lines.append(
            f"  loop {rl['name']:<12} margin before {rl['gain_margin_db_before']:6.2f}  after {rl['gain_margin_db_after']:6.2f} dB"
        )
    if r.get("cuts_out"):
        lines.append(f"  cut list written to {r['cuts_out']}")
    lines.append("")
    lines += [f"  note: {a}" for a in r["advice"]]
    return lines
