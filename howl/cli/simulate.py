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
            out.append((float(t), float(g)))
        except ValueError:
            raise InputError(f"must be TIME_S:GAIN_DB pairs of numbers, got {part!r}", key="--steps") from None
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
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of text."),
    ) -> None:
        from howl.cli._common import capture_warnings, emit_json, warn

        warn(CAUTION)
        with capture_warnings():
            if ir.is_dir():
                rep = run_mimo_simulation(
                    ir, program, out, rig_file=rig_file, program_mic=program_mic, gain_db=gain_db,
                    ramp_db=ramp_db, steps=steps, limiter_dbfs=limiter_dbfs, tail_s=tail_s,
                    program_channel=program_channel,
                )
            else:
                rep = run_simulation(
                    ir, program, out, gain_db=gain_db, ramp_db=ramp_db, steps=steps, limiter_dbfs=limiter_dbfs,
                    tail_s=tail_s, channel=channel, program_channel=program_channel,
                )
        if json_out:
            emit_json(rep)
            return
        for line in simulation_lines(rep):
            typer.echo(line)


def _schedule(n, fs, gain_db, ramp_db, steps):
    from howl.errors import InputError
    from howl.loop.simulate import gain_schedule_db

    given = [k for k, v in (("--gain-db", gain_db), ("--ramp-db", ramp_db), ("--steps", steps)) if v is not None]
    if len(given) > 1:
        raise InputError(f"give only one of --gain-db, --ramp-db, --steps; got {' and '.join(given)}", key=given[1])
    return gain_schedule_db(
        n, fs, gain_db=gain_db, ramp_db=None if ramp_db is None else tuple(ramp_db),
        steps=None if steps is None else _parse_steps(steps),
    )


def run_mimo_simulation(folder, program, out, *, rig_file=None, program_mic=None, gain_db=None, ramp_db=None,
                        steps=None, limiter_dbfs=-1.0, tail_s=1.0, program_channel=None) -> dict:
    """Folder mode: one output channel per mic (sorted by name); returns the JSON object."""
    import math
    import warnings

    import numpy as np

    from howl import validate as V
    from howl.errors import HowlWarning, InputError
    from howl.fileio import read_wav, write_wav_atomic
    from howl.loop.mimo import mimo_margin
    from howl.loop.simulate import simulate_mimo
    from howl.cli.margin import load_pair_loop

    irs, mix, speakers, mics, fs, _, mix_source = load_pair_loop([folder], rig_file=rig_file)
    V.in_range(tail_s, "--tail-s", 0.0, 600.0, unit="s")
    V.in_range(limiter_dbfs, "--limiter-dbfs", -60.0, 0.0, unit="dBFS")
    import soundfile as sf

    try:
        n_prog_ch = sf.info(str(program)).channels
    except Exception:
        n_prog_ch = 1  # read_wav below gives the clear message
    if n_prog_ch > 1 and program_channel is None:
        if n_prog_ch != len(mics):
            raise InputError(
                f"has {n_prog_ch} channels; a multichannel program needs one per mic ({len(mics)}: "
                f"{', '.join(mics)}), or pass --program-channel N and --program-mic NAME", file=str(program)
            )
        chans = [read_wav(program, channel=c + 1, option="--program-channel") for c in range(n_prog_ch)]
        fs_p = chans[0][1]
        x = np.vstack([c[0] for c in chans])
    else:
        x1, fs_p = read_wav(program, channel=program_channel, option="--program-channel")
        if program_mic is None:
            if len(mics) > 1:
                raise InputError(f"must name the mic a mono program is heard at (one of {', '.join(mics)})",
                                 key="--program-mic")
            program_mic = mics[0]
        if program_mic not in mics:
            raise InputError(f"must be one of {', '.join(mics)}, got {program_mic!r}", key="--program-mic")
        x = np.zeros((len(mics), x1.size))
        x[mics.index(program_mic)] = x1
    if fs_p != fs:
        from scipy.signal import resample_poly

        g = math.gcd(int(fs), int(fs_p))
        x = resample_poly(x, int(fs) // g, int(fs_p) // g, axis=1)
        warnings.warn(f"{program}: resampled from {fs_p} Hz to the IRs' {fs} Hz", HowlWarning)
    x = np.concatenate([x, np.zeros((x.shape[0], int(round(tail_s * fs))))], axis=1)
    sched = _schedule(x.shape[1], fs, gain_db, ramp_db, steps)
    r = mimo_margin(irs, mix, fs)
    y = simulate_mimo(irs, mix, x, fs, gain_db=sched, limiter_dbfs=limiter_dbfs)
    write_wav_atomic(out, y.T, fs)
    return {
        "irs": str(folder),
        "program": str(program),
        "output": str(out),
        "channels": mics,
        "mix_source": mix_source,
        **_run_summary(fs, y.shape[1], sched, r, y, limiter_dbfs, level_change_db=None),
    }


def run_simulation(ir, program, out, *, gain_db=None, ramp_db=None, steps=None, limiter_dbfs=-1.0, tail_s=1.0,
                   channel=None, program_channel=None) -> dict:
    """Simulate and write OUT; returns the `howl simulate --json` object."""
    import math
    import warnings

    import numpy as np

    from howl import validate as V
    from howl.errors import HowlWarning, InputError
    from howl.fileio import read_wav, write_wav_atomic
    from howl.loop.nyquist import check_ir, ir_warnings, nyquist_margin
    from howl.loop.simulate import simulate_closed_loop

    h, fs = read_wav(ir, channel=channel)
    try:
        h = check_ir(h, fs)
    except InputError as exc:
        raise exc.located(file=str(ir)) from None
    for m in ir_warnings(h, fs):
        warnings.warn(f"{ir}: {m}", HowlWarning)
    x, fs_p = read_wav(program, channel=program_channel, option="--program-channel")
    if fs_p != fs:
        from scipy.signal import resample_poly

        g = math.gcd(int(fs), int(fs_p))
        x = resample_poly(x, int(fs) // g, int(fs_p) // g)
        warnings.warn(f"{program}: resampled from {fs_p} Hz to the IR's {fs} Hz", HowlWarning)
    V.in_range(tail_s, "--tail-s", 0.0, 600.0, unit="s")
    V.in_range(limiter_dbfs, "--limiter-dbfs", -60.0, 0.0, unit="dBFS")
    x = np.concatenate([x, np.zeros(int(round(tail_s * fs)))])
    sched = _schedule(x.size, fs, gain_db, ramp_db, steps)
    r = nyquist_margin(h, fs)
    y = simulate_closed_loop(h, x, fs, gain_db=sched, limiter_dbfs=limiter_dbfs)
    write_wav_atomic(out, y, fs)
    rms_in = float(np.sqrt(np.mean(x**2))) if np.any(x) else 0.0
    rms_out = float(np.sqrt(np.mean(y**2)))
    level_change_db = float(20 * np.log10(max(rms_out, 1e-12) / rms_in)) if rms_in > 0 else None
    return {
        "ir": str(ir),
        "program": str(program),
        "output": str(out),
        **_run_summary(fs, y.size, sched, r, y, limiter_dbfs, level_change_db=level_change_db),
    }


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
    lines.append(
        f"output peak {rep['peak_dbfs']:.1f} dBFS; {rep['limited_fraction']:.1%} of samples in the limiter"
        + (f"; level change {rep['level_change_db']:+.1f} dB" if rep["level_change_db"] is not None else "")
    )
    return lines


def _run_summary(fs, n_samples, sched, r, y, limiter_dbfs, *, level_change_db):
    """The JSON fields common to single and multi-IR simulation: schedule, prediction, output level."""
    import numpy as np

    gmax = float(np.max(sched))
    finite = bool(np.isfinite(r.gain_margin_db))
    ceiling = 10 ** (limiter_dbfs / 20)
    return {
        "sample_rate_hz": fs,
        "duration_s": n_samples / fs,
        "gain_db_start": float(sched[0]),
        "gain_db_end": float(sched[-1]),
        "gain_db_max": gmax,
        "gain_margin_db": r.gain_margin_db if finite else None,
        "howl_freq_hz": r.howl_freq_hz if finite else None,
        "margin_at_max_gain_db": (r.gain_margin_db - gmax) if finite else None,
        "expected": ("stable" if (not finite or r.gain_margin_db - gmax > 0) else "howls"),
        "peak_dbfs": float(20 * np.log10(max(float(np.max(np.abs(y))), 1e-12))),
        "limiter_dbfs": limiter_dbfs,
        "limited_fraction": float(np.mean(np.abs(y) > 0.5 * ceiling)),
        "level_change_db": level_change_db,
        "caution": CAUTION,
    }
