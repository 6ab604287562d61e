"""`howl simulate`: hear what a fader move does to the loop before the show."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

ORDER = 45

CAUTION = (
    "caution: the output may be loud: a loop past its margin grows until the limiter holds it near "
    "--limiter-dbfs. Start playback at a low volume, never on in-ear monitors or headphones at level, and "
    "protect tweeters; local codes and licensed practice on sound exposure take precedence."
)


def _parse_steps(text: str):
    from howl.errors import InputError

    out = []
    for part in text.split(","):
        part = part.strip()
        if not part:
            continue
        if ":" not in part:
            raise InputError(f"must be TIME_S:GAIN_DB[,TIME_S:GAIN_DB...], got {part!r}", key="--steps")
        t, g = part.split(":", 1)
        try:
            t_s, g_db = float(t), float(g)
        except ValueError:
            raise InputError(f"must be TIME_S:GAIN_DB pairs of numbers, got {part!r}", key="--steps") from None
        from howl import validate as V
        from howl.cli._common import added_gain_db

        V.in_range(t_s, f"--steps (time in {part!r})", 0.0, 24 * 3600.0, unit="s")
        added_gain_db(g_db, f"--steps (gain in {part!r})")
        out.append((t_s, g_db))
    if not out:
        raise InputError("must hold at least one TIME_S:GAIN_DB pair", key="--steps")
    return out


def register(app: typer.Typer) -> None:
    @app.command(
        "simulate",
        help=(
            "Closed-loop simulation: play PROGRAM (what the mic hears without feedback) through the loop "
            "IR at a gain schedule and write the console signal, feedback included, as a WAV. Exact to the "
            "sample (the loop delay may be shorter than any block), with a soft limiter so an unstable loop "
            "saturates instead of overflowing. Gain: --gain-db G, --ramp-db A B (over the program) or "
            "--steps 0:-6,4:-3,8:0 (from time s, gain dB)."
        ),
    )
    def simulate_cmd(
        ir: Path = typer.Argument(
            ..., metavar="IR.wav | FOLDER",
            help="Loop IR at the reference settings, or a folder of <speaker>__<mic>.wav loop IRs.",
        ),
        program: Path = typer.Argument(..., metavar="PROGRAM.wav", help="Speech or music at the mic."),
        out: Path = typer.Option(..., "-o", "--out", metavar="OUT.wav", help="Output WAV (float32, written atomically)."),
        gain_db: Optional[float] = typer.Option(None, "--gain-db", help="Constant added loop gain (dB)."),
        ramp_db: Optional[tuple[float, float]] = typer.Option(
            None, "--ramp-db", metavar="A B", help="Gain ramp from A to B dB over the program."
        ),
        steps: Optional[str] = typer.Option(None, "--steps", metavar="T:G,...", help="Gain steps: from T s, G dB."),
        limiter_dbfs: float = typer.Option(-1.0, "--limiter-dbfs", help="Soft-limiter ceiling (dBFS)."),
        tail_s: float = typer.Option(1.0, "--tail-s", help="Seconds of silence appended to hear the ring-down."),
        channel: Optional[int] = typer.Option(None, "--channel", help="Channel (1-based) of a multichannel IR."),
        program_channel: Optional[int] = typer.Option(
            None, "--program-channel", help="Channel (1-based) of a multichannel program."
        ),
        rig_file: Optional[Path] = typer.Option(
            None, "--rig", metavar="RIG.toml", help="Folder mode: the rig whose mixes give the sends."
        ),
        program_mic: Optional[str] = typer.Option(
            None, "--program-mic", help="Folder mode: the mic a mono program is heard at (others hear silence)."
        ),
        cuts: Optional[Path] = typer.Option(
            None, "--cuts", metavar="CUTS.json|CUTS.csv",
            help="Put a cut list in the console channel: the JSON of howl ringout or howl scan, or a --cuts-out file.",
        ),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of text."),
    ) -> None:
        from howl.cli._common import added_gain_db, capture_warnings, emit_json, options_named, warn
        from howl.fileio import check_suffix, check_writable_folder, refuse_input_as_output

        refuse_input_as_output(out, [ir, program, rig_file], option="--out")
        check_suffix(out, [".wav"], option="--out", what="a WAV")
        check_writable_folder(out, option="--out")
        if gain_db is not None:
            added_gain_db(gain_db, "--gain-db")
        for i, g in enumerate(ramp_db or ()):
            added_gain_db(g, f"--ramp-db ({'A' if i == 0 else 'B'})")
        if steps is not None:
            _parse_steps(steps)  # refused before the caution, so an error stays one line
        from howl import validate as V

        V.in_range(tail_s, "--tail-s", 0.0, 600.0, unit="s")
        V.in_range(limiter_dbfs, "--limiter-dbfs", -60.0, 0.0, unit="dBFS")
        warn(CAUTION)
        with capture_warnings(), options_named({"gain_db": "--gain-db", "ramp_db": "--ramp-db", "steps": "--steps"}):
            if ir.is_dir():
                if cuts is not None:
                    from howl.errors import InputError

                    raise InputError("applies to one loop IR, not to a folder of loops", key="--cuts")
                rep = run_mimo_simulation(
                    ir, program, out, rig_file=rig_file, program_mic=program_mic, gain_db=gain_db,
                    ramp_db=ramp_db, steps=steps, limiter_dbfs=limiter_dbfs, tail_s=tail_s,
                    program_channel=program_channel,
                )
            else:
                rep = run_simulation(
                    ir, program, out, gain_db=gain_db, ramp_db=ramp_db, steps=steps, limiter_dbfs=limiter_dbfs,
                    tail_s=tail_s, channel=channel, program_channel=program_channel, cuts=cuts,
                )
        if json_out:
            emit_json(rep)
            return
        for line in simulation_lines(rep):
            typer.echo(line)


def _schedule(n, fs, gain_db, ramp_db, steps):
    """The gain schedule of the options, a piece at a time (:class:`howl.loop.simulate.GainSchedule`)."""
    from howl.errors import InputError
    from howl.loop.simulate import GainSchedule

    given = [k for k, v in (("--gain-db", gain_db), ("--ramp-db", ramp_db), ("--steps", steps)) if v is not None]
    if len(given) > 1:
        raise InputError(f"give only one of --gain-db, --ramp-db, --steps; got {' and '.join(given)}", key=given[1])
    return GainSchedule(
        n, fs, gain_db=gain_db, ramp_db=None if ramp_db is None else tuple(ramp_db),
        steps=None if steps is None else _parse_steps(steps),
    )


#: Program and output are read and written in blocks of this many samples.
BLOCK = 1 << 16


def _program_chunks(program, *, channels, fs, n_rows, row=None, tail_s):
    """(n_samples with the tail, chunks (n_rows, C)) of PROGRAM at the IRs' rate ``fs``, then the silent tail.

    Read a block at a time; a program at another rate is read whole and resampled (band-limited,
    scipy.signal.resample_poly). ``row``: the one row a mono program goes to (others silent).
    """
    import math
    import warnings

    import numpy as np

    from howl import validate as V
    from howl.errors import HowlWarning
    from howl.fileio import wav_blocks

    fs_p, n_prog, blocks = wav_blocks(program, channels=channels, option="--program-channel", blocksize=BLOCK)
    if fs_p != fs:
        from scipy.signal import resample_poly

        from howl.fileio import resampled_length

        resampled_length(n_prog, int(fs_p), int(fs), file=str(program))  # bound the size before the work
        g = math.gcd(int(fs), int(fs_p))
        x = resample_poly(np.concatenate(list(blocks), axis=1), int(fs) // g, int(fs_p) // g, axis=1)
        whose = "IRs'" if n_rows > 1 else "IR's"
        warnings.warn(f"{program}: resampled from {fs_p} Hz to the {whose} {fs} Hz", HowlWarning)
        n_prog, blocks = x.shape[1], iter([x])
    V.in_range(tail_s, "--tail-s", 0.0, 600.0, unit="s")
    n_tail = int(round(tail_s * fs))

    def chunks():
        for b in blocks:
            if row is None:
                yield b
            else:
                full = np.zeros((n_rows, b.shape[1]))
                full[row] = b[0]
                yield full
        for a in range(0, n_tail, BLOCK):
            yield np.zeros((n_rows, min(BLOCK, n_tail - a)))

    return n_prog + n_tail, chunks()


def _stream_to_wav(out, irs, chunks, n, sched, limiter_dbfs, fs) -> dict:
    """Run the loop over the program chunks, writing OUT (float32, atomically) as it goes.

    Returns the figures of the run without holding it: the schedule's first, last and highest
    gain, the output peak, the share of samples in the limiter, and the RMS of input and output
    (summed as numpy sums a whole array, so the figures match an in-memory run to the bit).
    """
    import numpy as np
    import soundfile as sf

    from howl.fileio import atomic_path
    from howl.loop.simulate import PairwiseSum, stream_closed_loop

    n_ch = irs.shape[0]
    st = {"first": None, "last": None, "max": -np.inf, "peak": 0.0, "limited": 0, "any_in": False}
    sq_in, sq_out = PairwiseSum(n), PairwiseSum(n)
    ceiling = 10 ** (limiter_dbfs / 20)

    def gains(a, b):
        v = sched.values(a, b)
        st["first"] = v[0] if st["first"] is None else st["first"]
        st["last"], st["max"] = v[-1], max(st["max"], float(np.max(v)))
        return v

    def watched():
        for c in chunks:
            st["any_in"] = st["any_in"] or bool(np.any(c))
            if n_ch == 1:
                sq_in.add(c[0] ** 2)
            yield c

    with atomic_path(out) as tmp:
        with sf.SoundFile(str(tmp), "w", samplerate=int(fs), channels=n_ch, subtype="FLOAT", format="WAV") as f:
            for y in stream_closed_loop(irs, watched(), gains, limiter_dbfs=limiter_dbfs):
                f.write(np.asarray(y.T if n_ch > 1 else y[0], dtype=np.float32))
                st["peak"] = max(st["peak"], float(np.max(np.abs(y))))
                st["limited"] += int(np.count_nonzero(np.abs(y) > 0.5 * ceiling))
                if n_ch == 1:
                    sq_out.add(y[0] ** 2)
    level_change_db = None
    if n_ch == 1:
        rms_in = float(np.sqrt(np.float64(sq_in.total()) / n)) if st["any_in"] else 0.0
        rms_out = float(np.sqrt(np.float64(sq_out.total()) / n))
        level_change_db = float(20 * np.log10(max(rms_out, 1e-12) / rms_in)) if rms_in > 0 else None
    return {"n": n, "n_ch": n_ch, "gain_first": float(st["first"]), "gain_last": float(st["last"]), "gain_max": st["max"],
            "peak": st["peak"], "limited_fraction": st["limited"] / (n * n_ch), "level_change_db": level_change_db}


def run_mimo_simulation(folder, program, out, *, rig_file=None, program_mic=None, gain_db=None, ramp_db=None,
                        steps=None, limiter_dbfs=-1.0, tail_s=1.0, program_channel=None) -> dict:
    """Folder mode: one output channel per mic (sorted by name); returns the JSON object."""
    from howl import validate as V
    from howl.errors import InputError
    from howl.loop.mimo import _check_mimo, loop_matrix, mimo_margin
    from howl.cli.margin import load_pair_loop

    irs, mix, speakers, mics, fs, _, mix_source = load_pair_loop([folder], rig_file=rig_file)
    V.in_range(tail_s, "--tail-s", 0.0, 600.0, unit="s")
    V.in_range(limiter_dbfs, "--limiter-dbfs", -60.0, 0.0, unit="dBFS")
    import soundfile as sf

    try:
        n_prog_ch = sf.info(str(program)).channels
    except Exception:
        n_prog_ch = 1  # wav_blocks below gives the clear message
    if n_prog_ch > 1 and program_channel is None:
        if n_prog_ch != len(mics):
            raise InputError(
                f"has {n_prog_ch} channels; a multichannel program needs one per mic ({len(mics)}: "
                f"{', '.join(mics)}), or pass --program-channel N and --program-mic NAME", file=str(program)
            )
        channels, row = list(range(1, n_prog_ch + 1)), None
    else:
        channels = None if program_channel is None else [program_channel]
        if program_mic is None:
            if len(mics) > 1:
                raise InputError(f"must name the mic a mono program is heard at (one of {', '.join(mics)})",
                                 key="--program-mic")
            program_mic = mics[0]
        if program_mic not in mics:
            raise InputError(f"must be one of {', '.join(mics)}, got {program_mic!r}", key="--program-mic")
        row = mics.index(program_mic)
    n, chunks = _program_chunks(program, channels=channels, fs=fs, n_rows=len(mics), row=row, tail_s=tail_s)
    sched = _schedule(n, fs, gain_db, ramp_db, steps)
    r = mimo_margin(irs, mix, fs)
    a, m = _check_mimo(irs, mix, fs)
    run = _stream_to_wav(out, loop_matrix(a, m), chunks, n, sched, limiter_dbfs, fs)
    return {
        "irs": str(folder),
        "program": str(program),
        "output": str(out),
        "channels": mics,
        "mix_source": mix_source,
        **_run_summary(fs, run, r, limiter_dbfs),
    }


def run_simulation(ir, program, out, *, gain_db=None, ramp_db=None, steps=None, limiter_dbfs=-1.0, tail_s=1.0,
                   channel=None, program_channel=None, cuts=None) -> dict:
    """Simulate and write OUT as it goes (memory does not grow with the program); returns the
    `howl simulate --json` object. ``cuts``: a cut file put in the console channel (loop IR and
    program both pass through it)."""
    import warnings

    from howl import validate as V
    from howl.errors import HowlWarning, InputError
    from howl.fileio import read_wav
    from howl.loop.nyquist import check_ir, ir_warnings, nyquist_margin

    h, fs = read_wav(ir, channel=channel)
    try:
        h = check_ir(h, fs)
    except InputError as exc:
        raise exc.located(file=str(ir)) from None
    for m in ir_warnings(h, fs):
        warnings.warn(f"{ir}: {m}", HowlWarning)
    channels = None if program_channel is None else [program_channel]
    n, chunks = _program_chunks(program, channels=channels, fs=fs, n_rows=1, tail_s=tail_s)
    V.in_range(limiter_dbfs, "--limiter-dbfs", -60.0, 0.0, unit="dBFS")
    sched = _schedule(n, fs, gain_db, ramp_db, steps)
    cut_list = None
    if cuts is not None:
        from howl.loop.cutfile import read_cut_file
        from howl.loop.notch import cascade_sos

        cut_list = read_cut_file(cuts)
        top = max((c.freq_hz for c in cut_list), default=0.0)
        if top >= fs / 2:
            raise InputError(f"has a cut at {top:g} Hz, above half the IR's sample rate ({fs} Hz)", file=str(cuts))
        r0 = nyquist_margin(h, fs)
        r = nyquist_margin(h, fs, filters_sos=cascade_sos(cut_list, fs)) if cut_list else r0
        h, chunks = _through_cuts(h, chunks, fs, cut_list)
    else:
        r = nyquist_margin(h, fs)
    run = _stream_to_wav(out, h[None, None, :], chunks, n, sched, limiter_dbfs, fs)
    rep = {
        "ir": str(ir),
        "program": str(program),
        "output": str(out),
        **_run_summary(fs, run, r, limiter_dbfs),
    }
    if cut_list is not None:
        import numpy as np

        finite = bool(np.isfinite(r0.gain_margin_db))
        rep["cuts_file"] = str(cuts)
        rep["cuts"] = [{"freq_hz": n.freq_hz, "gain_db": n.gain_db, "q": n.q, "bandwidth_oct": n.bandwidth_oct}
                       for n in cut_list]
        rep["gain_margin_db_without_cuts"] = r0.gain_margin_db if finite else None
        rep["cuts_where"] = ("in the console channel: the loop IR and the program both pass through them; "
                             "gain_margin_db and the output are with the cuts in")
    return rep


def _through_cuts(h, chunks, fs, cut_list):
    """The loop IR with the cuts in (C∗h) and the program chunks filtered by the cuts as they
    stream (the filter state carried from chunk to chunk: the same as filtering the whole)."""
    from scipy.signal import sosfilt, sosfilt_zi

    from howl.loop.simulate import cut_loop_ir

    hc, sos = cut_loop_ir(h, fs, cut_list)
    if sos is None:
        return hc, chunks

    def filtered():
        zi = sosfilt_zi(sos) * 0.0
        for c in chunks:
            y, zi_new = sosfilt(sos, c[0], zi=zi)
            zi[...] = zi_new
            yield y[None, :]

    return hc, filtered()


def simulation_lines(rep: dict) -> list[str]:
    lines = [
        f"wrote {rep['output']}: {rep['duration_s']:.2f} s at {rep['sample_rate_hz']} Hz",
        f"gain schedule: {rep['gain_db_start']:+.1f} dB → {rep['gain_db_end']:+.1f} dB (max {rep['gain_db_max']:+.1f} dB)",
    ]
    if rep["gain_margin_db"] is None:
        lines.append("the loop never reaches 0° phase with positive gain: it cannot howl")
    else:
        lines.append(
            f"gain margin at the reference settings {rep['gain_margin_db']:.2f} dB (howl at {rep['howl_freq_hz']:.1f} Hz); "
            f"at the highest gain {rep['margin_at_max_gain_db']:+.2f} dB → expected: {rep['expected']}"
        )
    if "cuts" in rep:
        wo = rep["gain_margin_db_without_cuts"]
        lines.append(f"with {len(rep['cuts'])} cut(s) from {rep['cuts_file']} in the channel"
                     + ("" if wo is None else f" (margin without them {wo:.2f} dB)"))
    lines.append(
        f"output peak {rep['peak_dbfs']:.1f} dBFS; {rep['limited_fraction']:.1%} of samples in the limiter"
        + (f"; level change {rep['level_change_db']:+.1f} dB" if rep["level_change_db"] is not None else "")
    )
    return lines


def _run_summary(fs, run, r, limiter_dbfs):
    """The JSON fields common to single and multi-IR simulation: schedule, prediction, output level."""
    import math

    import numpy as np

    gmax = run["gain_max"]
    finite = bool(math.isfinite(r.gain_margin_db))
    return {
        "sample_rate_hz": fs,
        "duration_s": run["n"] / fs,
        "gain_db_start": run["gain_first"],
        "gain_db_end": run["gain_last"],
        "gain_db_max": gmax,
        "gain_margin_db": r.gain_margin_db if finite else None,
        "howl_freq_hz": r.howl_freq_hz if finite else None,
        "margin_at_max_gain_db": (r.gain_margin_db - gmax) if finite else None,
        "expected": ("stable" if (not finite or r.gain_margin_db - gmax > 0) else "howls"),
        "peak_dbfs": float(20 * np.log10(max(run["peak"], 1e-12))),
        "limiter_dbfs": limiter_dbfs,
        "limited_fraction": run["limited_fraction"],
        "level_change_db": run["level_change_db"],
        "caution": CAUTION,
    }
