"""`howl measure`: play sweeps, record the mics, save loop IRs in a session folder."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

ORDER = 65


def _parse_assignments(items: list[str], option: str, kind: str) -> dict:
    from howl.errors import InputError

    out = {}
    for item in items or []:
        name, sep, val = item.rpartition("=")
        if not sep or not name.strip():
            raise InputError(f"must look like NAME=VALUE, got {item!r}", key=option)
        try:
            out[name.strip()] = int(val) if kind == "int" else float(val)
        except ValueError:
            raise InputError(f"must end in a {'channel number' if kind == 'int' else 'number (dB)'}, got {item!r}",
                             key=option) from None
    return out


def register(app: typer.Typer) -> None:
    @app.command("measure")
    def measure(
        rig: Optional[Path] = typer.Option(None, "--rig", help="Rig file: walk through its speaker→mic pairs."),
        speaker: Optional[List[str]] = typer.Option(None, "--speaker", help="Speaker name (repeat; with --rig: only these)."),
        mic: Optional[List[str]] = typer.Option(None, "--mic", help="Mic name (repeat; with --rig: only these)."),
        device: Optional[str] = typer.Option(None, "--device", help="Audio device for both directions (index or name words)."),
        input_device: Optional[str] = typer.Option(None, "--input-device", help="Input device (overrides --device)."),
        output_device: Optional[str] = typer.Option(None, "--output-device", help="Output device (overrides --device)."),
        out_channel: int = typer.Option(1, "--out-channel", help="Interface output feeding the console/amplifier (1-based)."),
        in_channel: int = typer.Option(1, "--in-channel", help="Interface input carrying the mic (1-based)."),
        speaker_channel: Optional[List[str]] = typer.Option(None, "--speaker-channel", help="NAME=N: output for one speaker of the rig."),
        mic_channel: Optional[List[str]] = typer.Option(None, "--mic-channel", help="NAME=N: input for one mic of the rig."),
        reference_channel: Optional[int] = typer.Option(None, "--reference-channel", help="N: the sweep also goes out on output N, wired straight to input N (exact time zero)."),
        calibrate: bool = typer.Option(False, "--calibrate", help="Measure the interface latency once, with --out-channel wired to --in-channel, and store it."),
        calibration_file: Optional[Path] = typer.Option(None, "--calibration-file", help="Where latency calibrations live (default ~/.config/howl/latency.json or $HOWL_CALIBRATION_FILE)."),
        sample_rate_hz: Optional[int] = typer.Option(None, "--sample-rate-hz", help="Sample rate (default: the output device's default)."),
        sweep_s: float = typer.Option(3.0, "--sweep-s", help="Sweep length in seconds."),
        tail_s: float = typer.Option(2.0, "--tail-s", help="Silence after each sweep: the longest IR kept (include the latency)."),
        f_lo_hz: float = typer.Option(40.0, "--f-lo-hz", help="Sweep start frequency."),
        f_hi_hz: Optional[float] = typer.Option(None, "--f-hi-hz", help="Sweep end frequency (default min(20 kHz, 0.45·rate))."),
        start_level_dbfs: float = typer.Option(-30.0, "--start-level-dbfs", help="First sweep's peak level."),
        max_level_dbfs: float = typer.Option(-6.0, "--max-level-dbfs", help="Never play louder than this."),
        step_db: float = typer.Option(6.0, "--step-db", help="Level step while the SNR is short of the target."),
        target_snr_db: float = typer.Option(50.0, "--target-snr-db", help="Stop raising the level at this peak-to-noise ratio."),
        min_snr_db: float = typer.Option(20.0, "--min-snr-db", help="Refuse a measurement below this peak-to-noise ratio."),
        repeats: int = typer.Option(2, "--repeats", help="Sweeps averaged at the final level (must agree)."),
        gain_setting: Optional[List[str]] = typer.Option(None, "--gain-setting", help="NAME=DB: a reference gain setting to store (e.g. 'lectern preamp=32')."),
        out: Optional[Path] = typer.Option(None, "--out", help="Session folder (new). Default howl-session-<UTC time>."),
        yes: bool = typer.Option(False, "--yes", help="Skip the confirmation and the walk-through pauses."),
        combine: Optional[Path] = typer.Option(None, "--combine", help="Offline: turn an acoustic-path IR WAV into a loop IR with the gains below."),
        combined_out: Optional[Path] = typer.Option(None, "--combined-out", help="Where --combine writes the loop IR WAV."),
        mic_sensitivity_dbv_pa: Optional[float] = typer.Option(None, "--mic-sensitivity-dbv-pa", help="--combine: show mic sensitivity."),
        preamp_gain_db: float = typer.Option(0.0, "--preamp-gain-db", help="--combine: preamp gain."),
        console_gain_db: float = typer.Option(0.0, "--console-gain-db", help="--combine: console gain to the mix output."),
        amp_gain_db: float = typer.Option(0.0, "--amp-gain-db", help="--combine: amplifier gain."),
        speaker_sensitivity_db: Optional[float] = typer.Option(None, "--speaker-sensitivity-db-spl", help="--combine: speaker dB SPL at 1 m for 1 V."),
        interface_out_dbv_fs: Optional[float] = typer.Option(None, "--interface-out-dbv-fs", help="--combine a digital measurement: output dBV of a full-scale sine."),
        interface_in_dbv_fs: Optional[float] = typer.Option(None, "--interface-in-dbv-fs", help="--combine a digital measurement: input dBV reading full scale."),
        measurement_mic_dbv_pa: Optional[float] = typer.Option(None, "--measurement-mic-dbv-pa", help="--combine a digital measurement: measurement mic sensitivity."),
        drive_gain_db: float = typer.Option(0.0, "--drive-gain-db", help="--combine a digital measurement: gain from interface output to the speaker's reference point."),
        json_out: bool = typer.Option(False, "--json", help="Print the session summary as one JSON object."),
    ) -> None:
        """Measure loop impulse responses with sweeps (one pair, or every pair of a rig).

        Plays an exponential sweep out of the interface (into the console or amplifier),
        records the mic, and saves raw recordings, float32 IR WAVs and session.json in a
        new session folder. Starts quiet and raises the level only while the recording
        is clean. With --combine, turns an acoustic-path IR into a loop IR offline.
        """
        import sys

        def say(msg: str) -> None:
            print(msg, file=sys.stderr, flush=True)

        if combine is not None:
            _combine(combine, combined_out, mic_sensitivity_dbv_pa, preamp_gain_db, console_gain_db, amp_gain_db,
                     speaker_sensitivity_db, interface_out_dbv_fs, interface_in_dbv_fs, measurement_mic_dbv_pa,
                     drive_gain_db, json_out, say)
            return
        pairs, session_dir = _pairs_and_folder(rig, speaker, mic, out_channel, in_channel, reference_channel,
                                               speaker_channel, mic_channel, out)
        from howl.measure.session import LevelPolicy, SweepSettings

        _run_session(
            pairs, session_dir, device=device, input_device=input_device, output_device=output_device,
            reference_channel=reference_channel, calibrate=calibrate, calibration_file=calibration_file,
            sample_rate_hz=sample_rate_hz, sweep=SweepSettings(sweep_s, f_lo_hz, f_hi_hz, tail_s),
            level=LevelPolicy(start_level_dbfs, max_level_dbfs, step_db, target_snr_db, min_snr_db),
            repeats=repeats, gains=_parse_assignments(gain_setting, "--gain-setting", "float"), yes=yes,
            json_out=json_out, say=say, calib_channels=(out_channel, in_channel))


def _pairs_and_folder(rig, speaker, mic, out_channel, in_channel, reference_channel, speaker_channel,
                      mic_channel, out):
    """The speaker→mic pairs to measure and the (new) session folder, checked before any sound."""
    import datetime as dt

    from howl import validate as v
    from howl.errors import InputError
    from howl.measure.session import Pair, rig_pairs

    v.integer(out_channel, "--out-channel", 1, 1024)
    v.integer(in_channel, "--in-channel", 1, 1024)
    if reference_channel is not None:
        v.integer(reference_channel, "--reference-channel", 1, 1024)
        if reference_channel in (out_channel, in_channel):
            raise InputError(f"must differ from --out-channel and --in-channel, got {reference_channel}",
                             key="--reference-channel")
    spk_ch = _parse_assignments(speaker_channel, "--speaker-channel", "int")
    mic_ch = _parse_assignments(mic_channel, "--mic-channel", "int")
    if rig is not None:
        from howl.model.rig import load_rig

        pairs = rig_pairs(load_rig(rig), out_channel=out_channel, in_channel=in_channel,
                          speaker_channels=spk_ch, mic_channels=mic_ch, speakers=speaker, mics=mic)
    else:
        if (speaker and len(speaker) > 1) or (mic and len(mic) > 1):
            raise InputError("more than one name needs --rig (which knows the speakers and mics)", key="--speaker/--mic")
        pairs = [Pair(speaker[0] if speaker else f"out{out_channel}", mic[0] if mic else f"in{in_channel}",
                      out_channel, in_channel)]
    session_dir = out if out is not None else Path(
        dt.datetime.now(dt.timezone.utc).strftime("howl-session-%Y%m%d-%H%M%S"))
    if (session_dir / "session.json").exists():
        raise InputError(f"already holds a session ({session_dir / 'session.json'}); choose a new folder",
                         key="--out")
    if session_dir.exists() and not session_dir.is_dir():
        raise InputError(f"{str(session_dir)!r} is a file; expected a (new) folder", key="--out")
    return pairs, session_dir


def _check_pair_channels(pairs, reference_channel, out_dev, in_dev) -> None:
    """Refuse a channel the interface lacks before the session folder is made."""
    from howl.measure.audio import _check_channels

    for p in pairs:
        _check_channels([p.out_channel], out_dev, "output", "--out-channel")
        _check_channels([p.in_channel], in_dev, "input", "--in-channel")
    if reference_channel is not None:
        _check_channels([reference_channel], out_dev, "output", "--reference-channel")
        _check_channels([reference_channel], in_dev, "input", "--reference-channel")


def _run_session(pairs, session_dir, *, device, input_device, output_device, reference_channel, calibrate,
                 calibration_file, sample_rate_hz, sweep, level, repeats, gains, yes, json_out, say,
                 calib_channels=(1, 1)) -> None:
    """Open the interface, show the cautions, measure every pair (or calibrate), report."""
    from howl import validate as v
    from howl.errors import InputError
    from howl.measure import audio
    from howl.measure.session import cautions, default_calibration_file, load_calibration

    if not (device or (input_device and output_device)):
        raise InputError("must name the audio interface (index or words of its name, see `howl devices`); "
                         "howl never falls back to a default device", key="--device")
    level.validate()
    v.integer(repeats, "--repeats", 1, 16)
    backend = audio.open_backend()
    try:
        out_dev = backend.resolve(output_device or device, "output",
                                  "--output-device" if output_device else "--device")
        in_dev = backend.resolve(input_device or device, "input", "--input-device" if input_device else "--device")
        _check_pair_channels(pairs, reference_channel, out_dev, in_dev)
        fs = int(sample_rate_hz) if sample_rate_hz is not None else int(round(out_dev.default_sample_rate_hz))
        v.in_range(fs, "--sample-rate-hz", 8000, 384000, unit="Hz")
        sweep.build(fs)  # a bad sweep option is refused before the session folder is made
        cal_path = calibration_file or default_calibration_file()
        cal = None
        if reference_channel is None and not calibrate:
            cal = load_calibration(cal_path, out_dev, in_dev, fs)
        say("\n".join(cautions(level)))
        say(f"device: out {out_dev.label!r}, in {in_dev.label!r}, {fs} Hz; session folder {session_dir}")
        if not yes:
            if not typer.confirm("Everyone warned, levels safe: start the first sweep?", default=False, err=True):
                say("not started")
                raise typer.Exit(code=1)
        _measure_all(backend, pairs, session_dir, out_dev, in_dev, fs, sweep, level, repeats, reference_channel,
                     cal, gains, calib_channels if calibrate else None, cal_path, yes, json_out, say)
    finally:
        backend.close()


def _measure_all(backend, pairs, session_dir, out_dev, in_dev, fs, sweep, level, repeats, reference_channel,
                 cal, gains, calibrate, cal_path, yes, json_out, say) -> None:
    """Measure every pair in one session (or, with ``calibrate`` = (out, in) channels, the latency)."""
    from howl.cli._common import capture_warnings, emit_json
    from howl.errors import HowlError, MeasurementQualityError
    from howl.measure.session import QualityPolicy, Session, save_calibration, summary

    with capture_warnings():
        session = Session(backend, session_dir, out_dev, in_dev, fs, sweep, level, QualityPolicy(), repeats,
                          reference_channel, cal, gains, say)
        try:
            if calibrate:
                lat = session.calibrate(calibrate[0], calibrate[1], level.start_level_dbfs)
                save_calibration(cal_path, out_dev, in_dev, fs, lat)
                rec = session.close()
                say(f"latency {lat} samples ({1000 * lat / fs:.2f} ms) stored in {cal_path}")
                if json_out:
                    emit_json(summary(rec) | {"latency_samples": lat, "latency_s": lat / fs,
                                              "calibration_file": str(cal_path)})
                return
            failures = 0
            for i, pair in enumerate(pairs, 1):
                say(f"[{i}/{len(pairs)}] speaker {pair.speaker!r} (output {pair.out_channel}) → "
                    f"mic {pair.mic!r} (input {pair.in_channel})")
                if len(pairs) > 1:
                    say(f"  route output {pair.out_channel} to speaker {pair.speaker!r} only; open mic "
                        f"{pair.mic!r} only (all other mics muted)")
                    if not yes and not typer.confirm("  ready?", default=True, err=True):
                        say("  skipped")
                        continue
                try:
                    session.measure_pair(pair)
                except MeasurementQualityError as exc:
                    if len(pairs) == 1:
                        raise
                    failures += 1
                    say(f"  FAILED: {exc}")
            rec = session.close("done" if not failures else "done_with_failures")
        except KeyboardInterrupt:  # Ctrl-C, SIGTERM, SIGHUP: keep everything recorded so far
            session.close("interrupted")
            say(f"stopped; everything recorded so far is in {session_dir}")
            raise
        except HowlError:
            session.close("failed")
            raise
    _report(rec, session_dir, json_out, say)
    if failures:
        raise typer.Exit(code=1)


def _report(rec, session_dir, json_out, say) -> None:
    from howl.cli._common import emit_json
    from howl.measure.session import summary

    for e in rec["pairs"]:
        for w in e.get("warnings", []):
            say(f"howl: warning: {e['speaker']}→{e['mic']}: {w}")
    if json_out:
        emit_json(summary(rec))
        return
    for e in rec["pairs"]:
        if e.get("status") == "ok":
            lat = "unknown" if e["latency_s"] is None else f"{1000 * e['latency_s']:.2f} ms"
            typer.echo(f"{e['speaker']} → {e['mic']}: {e['ir_file']}  SNR {e['snr_db']:.1f} dB  "
                       f"latency {lat}  level {e['level_dbfs']:+.0f} dBFS")
        else:
            typer.echo(f"{e['speaker']} → {e['mic']}: {e.get('status')} {e.get('error', '')}")
    typer.echo(f"session: {session_dir / 'session.json'}")


def _combine(path, out_path, mic_s, pre, console, amp, spk_s, if_out, if_in, meas_s, drive, json_out, say):
    import numpy as np

    from howl.errors import InputError
    from howl.fileio import check_suffix, read_wav, refuse_input_as_output, write_wav_atomic
    from howl.measure.session import GainChain, InterfaceCalibration, combine_acoustic_to_loop
    from howl.cli._common import emit_json

    if mic_s is None or spk_s is None:
        raise InputError("needs --mic-sensitivity-dbv-pa and --speaker-sensitivity-db-spl", key="--combine")
    given = [x is not None for x in (if_out, if_in, meas_s)]
    if any(given) and not all(given):
        raise InputError("a digital measurement needs all of --interface-out-dbv-fs, --interface-in-dbv-fs and "
                         "--measurement-mic-dbv-pa", key="--combine")
    if out_path is not None:
        check_suffix(out_path, [".wav"], option="--combined-out", what="a WAV")
        refuse_input_as_output(out_path, [path], option="--combined-out")
    ir, fs = read_wav(path)
    iface = InterfaceCalibration(if_out, if_in, meas_s, drive) if all(given) else None
    res = combine_acoustic_to_loop(ir, GainChain(mic_s, pre, console, amp, spk_s), iface)
    if out_path is not None:
        write_wav_atomic(out_path, res.loop_ir.astype(np.float32), fs, option="--combined-out")
    for line in res.lines:
        say(line) if json_out else typer.echo(line)
    if json_out:
        emit_json({"input_file": str(path), "loop_ir_file": None if out_path is None else str(out_path),
                   "sample_rate_hz": fs, "input_kind": "digital measurement" if iface else "acoustic path",
                   "acoustic_scale_db": res.acoustic_scale_db, "loop_scale_db": res.loop_scale_db,
                   "total_scale_db": res.total_scale_db,
                   "terms_db": [{"term": n, "value_db": val} for n, val in res.terms],
                   "loop_ir_peak_db": float(20 * np.log10(max(float(np.max(np.abs(res.loop_ir))), 1e-300))),
                   "lines": list(res.lines)})
