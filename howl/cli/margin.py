"""`howl margin`: how much more gain a measured loop takes before it howls, and where."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

ORDER = 40

#: File naming of a multi-IR folder: ``<speaker>__<mic>.wav``.
PAIR_SEPARATOR = "__"


def register(app: typer.Typer) -> None:
    @app.command(
        "margin",
        help=(
            "Phase-aware gain margin (Nyquist) of a measured loop impulse response: how many dB the loop "
            "gain can still rise before it howls, the frequency it howls at first, the phase-blind margin, "
            "the risk frequencies and the loop gain per 1/3 octave. A loop IR is a mono WAV of the open-loop "
            "response from the console's mix output round to the same point, time zero at sample 0. "
            "Give a FOLDER (or several WAVs) named <speaker>__<mic>.wav for a loop of several mics and "
            "speakers; --rig supplies the mix sends."
        ),
    )
    def margin_cmd(
        irs: list[Path] = typer.Argument(..., metavar="IR.wav | FOLDER | SPK__MIC.wav...", help="Loop IR(s)."),
        gain_db: float = typer.Option(0.0, "--gain-db", help="Added loop gain (a fader move, dB) before the analysis."),
        band_hz: Optional[tuple[float, float]] = typer.Option(
            None, "--band-hz", metavar="LO HI", help="Analysis band in Hz (default: all the file holds, 0 .. fs/2)."
        ),
        channel: Optional[int] = typer.Option(None, "--channel", help="Channel (1-based) of a multichannel WAV."),
        n_risks: int = typer.Option(10, "--risks", min=0, max=100, help="How many risk frequencies to list."),
        plot: Optional[Path] = typer.Option(None, "--plot", metavar="FILE.png", help="Draw |L| and the Nyquist curve."),
        rig_file: Optional[Path] = typer.Option(
            None, "--rig", metavar="RIG.toml", help="Rig whose mixes give the sends of a multi-IR loop."
        ),
        what_if: list[str] = typer.Option(
            [], "--what-if", help="With --rig: try a change of the rig first, e.g. mixes.mains.gains_db.lectern=28 (repeatable)."
        ),
        max_length_s: float = typer.Option(
            20.0, "--max-length-s", help="Longest IR accepted (s); use --trim-s to analyse the start of a longer one."
        ),
        trim_s: Optional[float] = typer.Option(None, "--trim-s", help="Use only the first TRIM_S seconds of the IR."),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of text."),
    ) -> None:
        from howl.cli._common import added_gain_db, capture_warnings, emit_json, options_named

        added_gain_db(gain_db, "--gain-db")
        if what_if and rig_file is None:
            from howl.errors import InputError

            raise InputError("needs --rig (it changes the rig whose mixes give the sends)", key="--what-if")
        if band_hz is not None:
            from howl import validate as V

            for i, f in enumerate(band_hz):
                V.in_range(f, f"--band-hz ({'LO' if i == 0 else 'HI'})", 0.0, 1e6, unit="Hz")
        if plot is not None:
            from howl.fileio import check_suffix, check_writable_folder, refuse_input_as_output

            refuse_input_as_output(plot, [*irs, rig_file], option="--plot")
            check_suffix(plot, [".png"], option="--plot", what="a PNG image")
            check_writable_folder(plot, option="--plot")
        with capture_warnings(), options_named({"band_hz": "--band-hz", "gain_db": "--gain-db"}):
            if len(irs) == 1 and not irs[0].is_dir():
                report, plot_data = siso_report(
                    irs[0], gain_db=gain_db, band_hz=band_hz, channel=channel, n_risks=n_risks,
                    max_length_s=max_length_s, trim_s=trim_s,
                )
                if plot is not None:
                    _plot(plot, plot_data, irs[0].name)
                    report["plot"] = str(plot)
            else:
                if plot is not None:
                    from howl.errors import InputError

                    raise InputError("is only available for a single loop IR", key="--plot")
                report = mimo_report(
                    irs, rig_file=rig_file, what_if=list(what_if), gain_db=gain_db, band_hz=band_hz, channel=channel,
                    max_length_s=max_length_s, trim_s=trim_s,
                )
        if json_out:
            emit_json(report)
            return
        for line in report_lines(report):
            typer.echo(line)


def load_loop_ir(path: Path, *, channel, max_length_s, trim_s):
    """Read and check one loop IR; returns (h, fs, warnings list).

    Shared by every command that reads a loop IR (margin, ringout), so all refuse
    the same bad files with the same one-line messages.
    """
    import numpy as np

    from howl import validate as V
    from howl.errors import InputError
    from howl.fileio import read_wav
    from howl.loop.nyquist import check_ir, ir_warnings

    V.positive(max_length_s, "--max-length-s", unit="s")
    try:  # refuse a very long file before reading it all
        import soundfile as sf

        info = sf.info(str(path))
        too_long = info.frames > max_length_s * info.samplerate and trim_s is None
    except Exception:  # read_wav gives the clear message for unreadable files
        too_long = False
    if too_long:
        raise InputError(
            f"is {info.frames / info.samplerate:.1f} s long, more than --max-length-s {max_length_s:g} s; a loop IR "
            "rarely needs more than a few RT60s (pass --trim-s T, or raise --max-length-s)",
            file=str(path),
        )
    h, fs = read_wav(path, channel=channel)
    if trim_s is not None:
        V.positive(trim_s, "--trim-s", unit="s")
        h = h[: max(2, int(round(trim_s * fs)))]
    if h.size > max_length_s * fs:
        raise InputError(
            f"is {h.size / fs:.1f} s long, more than --max-length-s {max_length_s:g} s; a loop IR rarely needs "
            "more than a few RT60s (pass --trim-s T, or raise --max-length-s)",
            file=str(path),
        )
    try:
        h = check_ir(h, fs)
    except InputError as exc:
        raise exc.located(file=str(path)) from None
    if np.max(np.abs(h)) < 1e-7:
        raise InputError(f"peaks at {20 * np.log10(np.max(np.abs(h))):.0f} dBFS: practically silent", file=str(path))
    warns = [f"{path}: {m}" for m in ir_warnings(h, fs, max_length_s=max_length_s)]
    return h, fs, warns


def siso_report(path: Path, *, gain_db=0.0, band_hz=None, channel=None, n_risks=10, max_length_s=20.0, trim_s=None):
    """The `howl margin --json` object for one loop IR, plus what the plot needs."""
    import warnings

    import numpy as np

    from howl.bands import nominal_label
    from howl.errors import HowlWarning
    from howl.loop.nyquist import loop_response, nyquist_margin, third_octave_loop_gain
    from howl.units import from_db

    h, fs, warns = load_loop_ir(path, channel=channel, max_length_s=max_length_s, trim_s=trim_s)
    for w in warns:
        warnings.warn(w, HowlWarning)
    band = None if band_hz is None else (float(band_hz[0]), float(band_hz[1]))
    from howl.errors import InputError

    try:
        r = nyquist_margin(h, fs, band_hz=band, gain_db=gain_db, n_risks=n_risks)
    except InputError as exc:
        if exc.key and exc.key.startswith("band_hz"):
            raise InputError(exc.message, key="--band-hz") from None
        raise
    outside = None
    if band is not None:
        from howl.loop import worst_crossing_outside_band

        out = worst_crossing_outside_band(h, fs, r.band_hz, r.gain_margin_db, gain_db=r.gain_db)
        outside = _outside_band_warning(out, band_hz, r.gain_margin_db, r.howl_freq_hz)
    f, H = loop_response(h, fs, n_fft=r.n_fft)
    H = H * from_db(r.gain_db)
    centres, bands_db = third_octave_loop_gain(f, H, r.band_hz)
    finite = bool(np.isfinite(r.gain_margin_db))
    report = {
        "file": str(path),
        "sample_rate_hz": fs,
        "ir_length_s": h.size / fs,
        "gain_db": r.gain_db,
        "band_hz": list(r.band_hz),
        "gain_margin_db": r.gain_margin_db if finite else None,
        "magnitude_margin_db": r.magnitude_margin_db,
        "howl_freq_hz": r.howl_freq_hz if finite else None,
        "howl_freqs_hz": list(r.howl_freqs_hz),
        "magnitude_peak_freq_hz": r.magnitude_peak_freq_hz,
        "stable_now": bool(r.gain_margin_db > 0),
        "crosses_positive_real_axis": finite,
        "ring_decay_db_per_s": r.ring_decay_db_per_s if finite else None,
        "group_delay_s": r.group_delay_s if finite else None,
        "n_crossings": int(r.crossings_freq_hz.size),
        "risks": [
            {"freq_hz": k.freq_hz, "margin_db": k.margin_db, "kind": k.kind,
             "magnitude_margin_db": k.magnitude_margin_db, "peak_freq_hz": k.peak_freq_hz}
            for k in r.risks
        ],
        "third_octave": [
            {"centre_hz": float(c), "label": nominal_label(float(c), 3), "loop_gain_db": (float(g) if np.isfinite(g) else None)}
            for c, g in zip(centres, bands_db)
        ],
        "n_fft": r.n_fft,
        "dc_gain": r.dc_gain,
        "outside_band_crossing": outside,
        "warnings": warns,
    }
    return report, (r, f, H)


def _outside_band_warning(out, band_hz, in_margin_db: float, in_freq_hz: float) -> dict | None:
    """Warn (HowlWarning) when ``out``, the loop's worst crossing outside --band-hz (worse than the band's), is set.

    Returns ``{"freq_hz", "gain_margin_db"}`` of that crossing for the JSON, or None.
    """
    import math
    import warnings

    from howl.errors import HowlWarning

    if out is None:
        return None
    lo, hi = (float(x) for x in band_hz)
    where = "DC (0 Hz)" if out.freq_hz == 0.0 else f"{out.freq_hz:.1f} Hz"
    inside = ("it has no crossing" if not math.isfinite(in_margin_db)
              else f"its worst is {in_margin_db:.2f} dB at {in_freq_hz:.1f} Hz")
    warnings.warn(
        f"--band-hz {lo:g} {hi:g} leaves out a worse crossing: the loop crosses at {where} with a gain margin "
        f"of {out.gain_margin_db:.2f} dB, outside the band ({inside}); it howls there first",
        HowlWarning,
    )
    return {"freq_hz": out.freq_hz, "gain_margin_db": out.gain_margin_db}


def _plot(path: Path, plot_data, title: str) -> None:
    from howl.report.plots import margin_figure, save_figure

    r, f, H = plot_data
    save_figure(margin_figure(r, f, H, title=title), path, option="--plot")


def _pairs(paths: list[Path]):
    """(speaker, mic, path) for every <speaker>__<mic>.wav in the folder or list."""
    from howl.errors import InputError

    files: list[Path] = []
    for p in paths:
        if p.is_dir():
            found = sorted(q for q in p.iterdir() if q.suffix.lower() == ".wav")
            if not found:
                raise InputError("holds no .wav files; expected <speaker>__<mic>.wav loop IRs", file=str(p))
            files += found
        else:
            files.append(p)
    out = []
    for q in files:
        stem = q.stem
        if stem.count(PAIR_SEPARATOR) != 1 or not all(stem.split(PAIR_SEPARATOR)):
            raise InputError(
                f"name must be <speaker>{PAIR_SEPARATOR}<mic>.wav for a multi-IR loop, got {q.name!r}", file=str(q)
            )
        spk, mic = stem.split(PAIR_SEPARATOR)
        out.append((spk, mic, q))
    return out


def load_pair_loop(paths, *, rig_file=None, what_if=(), channel=None, max_length_s=20.0, trim_s=None):
    """Read <speaker>__<mic>.wav loop IRs and the sends.

    Returns (irs (n_spk, n_mic, n), mix_lin (n_spk, n_mic), speakers, mics, sample_rate_hz,
    pair paths, mix_source). Speakers and mics are sorted by name.
    """
    import warnings

    import numpy as np

    from howl.errors import HowlWarning, InputError
    from howl.units import from_db

    pairs = _pairs(list(paths))
    speakers = sorted({s for s, _, _ in pairs})
    mics = sorted({m for _, m, _ in pairs})
    data = {}
    fs0 = None
    for spk, mic, q in pairs:
        if (spk, mic) in data:
            raise InputError(f"pair {spk}{PAIR_SEPARATOR}{mic} is given twice", file=str(q))
        h, fs, warns = load_loop_ir(q, channel=channel, max_length_s=max_length_s, trim_s=trim_s)
        for w in warns:
            warnings.warn(w, HowlWarning)
        if fs0 is None:
            fs0 = fs
        elif fs != fs0:
            raise InputError(f"sample rate {fs} Hz differs from the other IRs' {fs0} Hz", file=str(q))
        data[(spk, mic)] = h
    n = max(v.size for v in data.values())
    irs = np.zeros((len(speakers), len(mics), n))
    for (spk, mic), h in data.items():
        irs[speakers.index(spk), mics.index(mic), : h.size] = h
    missing = [f"{s}{PAIR_SEPARATOR}{m}" for s in speakers for m in mics if (s, m) not in data]
    if missing:
        warnings.warn(f"no IR for {', '.join(missing)}: taken as no coupling", HowlWarning)
    mix = np.ones((len(speakers), len(mics)))
    mix_source = "unity sends (no --rig given)"
    if rig_file is not None:
        from howl.model.rig import load_rig

        rig = load_rig(rig_file)
        if what_if:
            from howl.model.rig import with_changes

            rig = with_changes(rig, list(what_if))
            mix_source_note = " with --what-if " + ", ".join(what_if)
        else:
            mix_source_note = ""
        mix = np.zeros((len(speakers), len(mics)))
        names_s = {s.name for s in rig.speakers}
        names_m = {m.name: m for m in rig.mics}
        for s in speakers:
            if s not in names_s:
                raise InputError(f"speaker {s!r} of the IR files is not in the rig ({', '.join(sorted(names_s))})", file=str(rig_file))
        for m in mics:
            if m not in names_m:
                raise InputError(f"mic {m!r} of the IR files is not in the rig ({', '.join(sorted(names_m))})", file=str(rig_file))
        for mx in rig.mixes:
            for s in mx.speakers:
                if s in speakers:
                    for m, g in mx.gains_db:
                        if m in mics and names_m[m].open:
                            mix[speakers.index(s), mics.index(m)] += from_db(g)
        mix_source = f"mixes of {rig_file}{mix_source_note}"
        if not np.any(mix):
            raise InputError("sends no open mic of the IR files to any of their speakers", file=str(rig_file))
    else:
        warnings.warn("no --rig given: every mic is taken as sent to every speaker at 0 dB", HowlWarning)
    return irs, mix, speakers, mics, fs0, pairs, mix_source


def mimo_report(paths, *, rig_file=None, what_if=(), gain_db=0.0, band_hz=None, channel=None, max_length_s=20.0, trim_s=None):
    """The `howl margin --json` object for a loop of several speakers and mics."""
    import numpy as np

    from howl.errors import InputError
    from howl.loop.mimo import mimo_margin
    from howl.units import from_db

    irs, mix, speakers, mics, fs0, pairs, mix_source = load_pair_loop(
        paths, rig_file=rig_file, what_if=what_if, channel=channel, max_length_s=max_length_s, trim_s=trim_s
    )
    band = None if band_hz is None else (float(band_hz[0]), float(band_hz[1]))
    try:
        r = mimo_margin(irs, mix * from_db(gain_db), fs0, band_hz=band)
    except InputError as exc:
        if exc.key and exc.key.startswith("band_hz"):
            raise InputError(exc.message, key="--band-hz") from None
        raise
    outside = None
    if band is not None:
        from howl.loop import worst_mimo_crossing_outside_band

        out = worst_mimo_crossing_outside_band(irs, mix * from_db(gain_db), fs0, r.band_hz, r.gain_margin_db)
        outside = _outside_band_warning(out, band_hz, r.gain_margin_db, r.howl_freq_hz)
    finite = bool(np.isfinite(r.gain_margin_db))
    return {
        "outside_band_crossing": outside,
        "files": [str(q) for _, _, q in pairs],
        "speakers": speakers,
        "mics": mics,
        "mix_lin": mix.tolist(),
        "mix_source": mix_source,
        "sample_rate_hz": fs0,
        "gain_db": gain_db,
        "band_hz": list(r.band_hz),
        "gain_margin_db": r.gain_margin_db if finite else None,
        "magnitude_margin_db": r.magnitude_margin_db,
        "howl_freq_hz": r.howl_freq_hz if finite else None,
        "worst_mic": mics[r.worst_mic_index] if finite else None,
        "mic_participation": {m: float(p) for m, p in zip(mics, r.participation)} if finite else {},
        "howl_mode_mic_levels_db": (
            {m: float(20 * np.log10(max(abs(v), 1e-12) / np.max(np.abs(r.eigenvector)))) for m, v in zip(mics, r.eigenvector)}
            if finite else {}
        ),
        "risks": (
            [{"freq_hz": float(fz), "margin_db": float(-20 * np.log10(v.real)), "kind": "crossing"}
             for fz, v in sorted(zip(r.crossings_freq_hz, r.crossings_value), key=lambda t: -t[1].real)[:10]]
        ),
        "stable_now": bool(r.gain_margin_db > 0),
    }


def report_lines(rep: dict) -> list[str]:
    """Terminal text for a margin report."""

    def fmt_f(x):
        return "—" if x is None else f"{x:.1f} Hz"

    lines = []
    gm = rep["gain_margin_db"]
    if "file" in rep:
        lines.append(
            f"loop IR {rep['file']}: {rep['sample_rate_hz']} Hz, {rep['ir_length_s']:.2f} s; added gain "
            f"{rep['gain_db']:+.1f} dB; band {rep['band_hz'][0]:g}–{rep['band_hz'][1]:g} Hz"
        )
    else:
        lines.append(
            f"loop of {len(rep['speakers'])} speaker(s) × {len(rep['mics'])} mic(s) ({', '.join(rep['mics'])}), "
            f"{rep['sample_rate_hz']} Hz; sends: {rep['mix_source']}; added gain {rep['gain_db']:+.1f} dB"
        )
    if gm is None:
        lines.append("gain margin (phase-aware): the loop never reaches 0° phase with positive gain in the band")
    else:
        state = "stable" if gm > 0 else "UNSTABLE: it howls at these settings"
        lines.append(f"gain margin (phase-aware): {gm:6.2f} dB  ({state}); howls first at {fmt_f(rep['howl_freq_hz'])}")
        others = [f for f in rep.get("howl_freqs_hz", []) if f != rep["howl_freq_hz"]]
        if others:
            lines.append("  tied within 0.02 dB: " + ", ".join(f"{f:.1f} Hz" for f in others[:12]))
    pk = rep.get("magnitude_peak_freq_hz")
    lines.append(
        f"phase-blind margin:        {rep['magnitude_margin_db']:6.2f} dB"
        + (f"  (peak at {pk:.1f} Hz)" if pk is not None else "")
        + "  — what is left if the room's phase drifts (temperature, people moving)"
    )
    if rep.get("worst_mic"):
        parts = ", ".join(f"{m} {p:.0%}" for m, p in rep["mic_participation"].items())
        lines.append(f"most at fault: {rep['worst_mic']} (share of the howl mode: {parts})")
    if rep.get("ring_decay_db_per_s") is not None and gm is not None and gm > 0:
        lines.append(f"a tone at the howl frequency rings down at about {rep['ring_decay_db_per_s']:.0f} dB/s")
    if rep["risks"]:
        lines.append("risk frequencies (worst first; 'crossing' = phase in step now, its margin phase-aware;")
        lines.append("  'peak' = a loop peak whose phase is not in step now, its margin phase-blind: it howls if the phase drifts):")
        lines.append("    freq_hz  margin_db  kind      phase-blind (lobe peak)")
        for k in rep["risks"]:
            extra = ""
            if k.get("magnitude_margin_db") is not None and k["kind"] == "crossing":
                extra = f"{k['magnitude_margin_db']:9.2f} dB at {k['peak_freq_hz']:.1f} Hz"
            lines.append(f"  {k['freq_hz']:9.1f}  {k['margin_db']:9.2f}  {k['kind']:<8}  {extra}")
    if rep.get("third_octave"):
        lines.append("loop gain per 1/3 octave (dB, power average):")
        row = [f"{b['label']:>5}:{b['loop_gain_db']:6.1f}" for b in rep["third_octave"] if b["loop_gain_db"] is not None]
        for i in range(0, len(row), 6):
            lines.append("  " + "  ".join(row[i : i + 6]))
    if rep.get("plot"):
        lines.append(f"plot written to {rep['plot']}")
    return lines
