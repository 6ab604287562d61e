"""The measurement session: levels, quality gates, the session folder.

Built on :mod:`howl.sweep` (pure analysis) and :mod:`howl.audio` (any
:class:`~howl.audio.AudioBackend`). This is an edge module: it writes files and
reports progress through a ``say`` callback; it never prints.

Order of work for every speaker→mic pair
----------------------------------------
1. Probe at the start level (default −30 dBFS): one sweep, the raw recording is
   written to ``raw/`` *before* it is analysed.
2. Step up by ``step_db`` only while the recording is clean (no clipping, no
   dropout), the predicted peak stays below ``−headroom_db`` dBFS and the SNR is short
   of the target; never past ``max_level_dbfs``. A clipped probe steps back down.
3. At the chosen level, a block of ``repeats`` sweeps in one stream (so they share one
   latency). Repeats must agree (ISO 18233 time-invariance) before they are averaged.
4. The averaged IR, trimmed (time zero = interface latency removed when known; end where
   the decay meets the noise), is written as a float32 WAV to ``ir/``.
5. ``session.json`` is rewritten (atomically) after every step, so an interruption keeps
   everything measured so far.

Quality gates (each a :class:`~howl.errors.MeasurementQualityError` with advice): no
signal, clipping at the lowest level, a recording that does not contain the sweep
(wrong channel), dropouts that persist, repeats that disagree, a reference channel that
shows no clean loopback, SNR below the hard minimum.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import json
import math
import os
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from howl import __version__
from howl import validate as v
from howl.measure.audio import AudioBackend, DeviceInfo, PlaybackInterrupted, PlayRecordResult
from howl.errors import HowlError, InputError, MeasurementQualityError
from howl.fileio import dumps_json, write_text_atomic, write_wav_atomic
from howl.measure.sweep import Analysis, Sweep, analyse, exponential_sweep, ir_difference_db
from howl.units import db, from_db

# --------------------------------------------------------------------- settings


@dataclass(frozen=True)
class SweepSettings:
    """The excitation: sweep length and band, silence after it (the longest IR kept)."""

    duration_s: float = 3.0
    f_lo_hz: float = 40.0
    f_hi_hz: float | None = None  # None: min(20 kHz, 0.45·fs)
    tail_s: float = 2.0
    fade_in_s: float = 0.02
    fade_out_s: float = 0.005

    def build(self, sample_rate_hz: int) -> Sweep:
        f_hi = self.f_hi_hz if self.f_hi_hz is not None else min(20000.0, 0.45 * sample_rate_hz)
        v.in_range(self.duration_s, "--sweep-s", 0.05, 120.0, unit="s")
        v.positive(self.f_lo_hz, "--f-lo-hz", unit="Hz")
        if f_hi >= sample_rate_hz / 2:
            raise InputError(f"must be below half the sample rate ({sample_rate_hz / 2:g} Hz), got {f_hi:g} Hz",
                             key="--f-hi-hz")
        if f_hi < 2 * self.f_lo_hz:
            raise InputError(f"must be at least an octave above --f-lo-hz ({self.f_lo_hz:g} Hz), got {f_hi:g} Hz",
                             key="--f-hi-hz")
        v.positive(self.tail_s, "--tail-s", unit="s")
        return exponential_sweep(self.duration_s, self.f_lo_hz, f_hi, sample_rate_hz,
                                 fade_in_s=self.fade_in_s, fade_out_s=self.fade_out_s)


@dataclass(frozen=True)
class LevelPolicy:
    """How loud: start low, step up only while clean and short of the target SNR."""

    start_level_dbfs: float = -30.0
    max_level_dbfs: float = -6.0
    step_db: float = 6.0
    target_snr_db: float = 50.0
    min_snr_db: float = 20.0
    headroom_db: float = 3.0

    def validate(self) -> "LevelPolicy":
        v.in_range(self.max_level_dbfs, "--max-level-dbfs", None, 0.0, unit="dBFS")
        v.in_range(self.start_level_dbfs, "--start-level-dbfs", -120.0, self.max_level_dbfs, unit="dBFS")
        v.in_range(self.step_db, "--step-db", 0.5, 20.0, unit="dB")
        v.in_range(self.target_snr_db, "--target-snr-db", 0.0, 200.0, unit="dB")
        return self


@dataclass(frozen=True)
class QualityPolicy:
    """Thresholds of the quality gates (common practice, no source, unless noted)."""

    max_repeat_difference_db: float = -20.0  # repeats must agree at least this well (or within noise)
    noise_allowance_db: float = 6.0  # ... or within this of what the noise alone explains
    max_dropout_retries: int = 2
    max_disagree_retries: int = 1
    min_reference_snr_db: float = 30.0
    loud_recording_dbfs: float = -50.0  # a recording this loud with no sweep in it is the wrong channel
    silence_dbfs: float = -120.0  # digital silence


@dataclass(frozen=True)
class Pair:
    """One speaker→mic measurement: which interface output feeds the speaker, which input the mic."""

    speaker: str
    mic: str
    out_channel: int = 1
    in_channel: int = 1


def slug(name: str) -> str:
    """A file-name-safe version of a speaker or mic name."""
    s = re.sub(r"[^A-Za-z0-9._-]+", "-", name.strip()).strip("-")
    return s or "x"


def cautions(level: LevelPolicy) -> list[str]:
    """The usual cautions before a sweep is played through a PA."""
    return [
        "CAUTION: this plays loud sine sweeps through the loudspeakers.",
        "- Wear hearing protection and warn everyone in the room (and next door) before each sweep.",
        "- Tweeters: a sweep carries full power at high frequencies. Keep amplifier and processor limiters on,",
        "  take out any high-frequency boost, and never exceed the drivers' rated power.",
        f"- howl starts at {level.start_level_dbfs:g} dBFS and never goes above {level.max_level_dbfs:g} dBFS;",
        "  set the amplifier/console gains so that this cap cannot damage anything.",
        "- Ctrl-C stops the output at once and keeps what has been recorded.",
        "- Exposure limits: follow local law and licensed practice (e.g. NIOSH 85 dB(A) 8 h / 3 dB exchange;",
        "  EU 2003/10/EC action values 80/85 dB(A)).",
    ]


# -------------------------------------------------------------- calibration file


def default_calibration_file() -> Path:
    env = os.environ.get("HOWL_CALIBRATION_FILE")
    if env:
        return Path(env)
    base = os.environ.get("XDG_CONFIG_HOME") or os.path.join(os.path.expanduser("~"), ".config")
    return Path(base) / "howl" / "latency.json"


def _calib_key(output_device: DeviceInfo, input_device: DeviceInfo, sample_rate_hz: int) -> dict:
    return {"output_device": output_device.label, "input_device": input_device.label,
            "sample_rate_hz": int(sample_rate_hz)}


def load_calibration(path: Path, output_device: DeviceInfo, input_device: DeviceInfo,
                     sample_rate_hz: int) -> int | None:
    """The stored round-trip latency (samples) for this device pair and rate, or None."""
    p = Path(path)
    if not p.exists():
        return None
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot read the latency calibration ({exc})", file=str(p)) from None
    key = _calib_key(output_device, input_device, sample_rate_hz)
    for e in data.get("entries", []):
        if all(e.get(k) == val for k, val in key.items()):
            return int(e["latency_samples"])
    return None


def save_calibration(path: Path, output_device: DeviceInfo, input_device: DeviceInfo, sample_rate_hz: int,
                     latency_samples: int) -> None:
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    data = {"entries": []}
    if p.exists():
        try:
            data = json.loads(p.read_text(encoding="utf-8"))
        except ValueError:
            data = {"entries": []}
    key = _calib_key(output_device, input_device, sample_rate_hz)
    entries = [e for e in data.get("entries", []) if not all(e.get(k) == val for k, val in key.items())]
    entries.append({**key, "latency_samples": int(latency_samples),
                    "latency_s": latency_samples / sample_rate_hz, "measured_utc": _now()})
    write_text_atomic(p, dumps_json({"entries": entries}))


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


# ------------------------------------------------------------------- the session


@dataclass
class Session:
    """A measurement session and its folder. ``record`` is what session.json holds."""

    backend: AudioBackend
    session_dir: Path
    output_device: DeviceInfo
    input_device: DeviceInfo
    sample_rate_hz: int
    sweep_settings: SweepSettings = field(default_factory=SweepSettings)
    level: LevelPolicy = field(default_factory=LevelPolicy)
    quality: QualityPolicy = field(default_factory=QualityPolicy)
    repeats: int = 2
    reference_channel: int | None = None
    calibrated_latency_samples: int | None = None
    gain_settings: dict = field(default_factory=dict)
    say: Callable[[str], None] = lambda msg: None
    record: dict = field(default_factory=dict)

    def __post_init__(self):
        self.level.validate()
        v.integer(self.repeats, "--repeats", 1, 16)
        self.sweep = self.sweep_settings.build(self.sample_rate_hz)
        self.n_tail = int(round(self.sweep_settings.tail_s * self.sample_rate_hz))
        self.period = self.sweep.n_samples + self.n_tail
        self.session_dir = Path(self.session_dir)
        (self.session_dir / "raw").mkdir(parents=True, exist_ok=True)
        (self.session_dir / "ir").mkdir(parents=True, exist_ok=True)
        write_wav_atomic(self.session_dir / "sweep.wav", self.sweep.signal, self.sample_rate_hz)
        self.record = {
            "howl_version": __version__,
            "created_utc": _now(),
            "status": "running",
            "session_dir": str(self.session_dir),
            "output_device": self.output_device.label,
            "input_device": self.input_device.label,
            "sample_rate_hz": self.sample_rate_hz,
            "sweep": {"file": "sweep.wav", "duration_s": self.sweep.duration_s, "f_lo_hz": self.sweep.f_lo_hz,
                      "f_hi_hz": self.sweep.f_hi_hz, "tail_s": self.sweep_settings.tail_s,
                      "rate_s": self.sweep.rate_s, "n_fade_in": self.sweep.n_fade_in,
                      "n_fade_out": self.sweep.n_fade_out, "method": "Farina exponential sweep"},
            "levels": dataclasses.asdict(self.level),
            "repeats": self.repeats,
            "reference_channel": self.reference_channel,
            "calibrated_latency_samples": self.calibrated_latency_samples,
            "reference_gain_settings_db": dict(self.gain_settings),
            "pairs": [],
        }
        self.save()

    # -- files
    def save(self) -> None:
        write_text_atomic(self.session_dir / "session.json", dumps_json(self.record))

    def _write_raw(self, name: str, data: np.ndarray) -> str:
        rel = f"raw/{name}.wav"
        write_wav_atomic(self.session_dir / rel, data, self.sample_rate_hz)
        return rel

    def _raw_name(self, pair: Pair, entry: dict, tag: str, level_dbfs: float) -> str:
        """The next raw recording's name: attempts numbered per pair for the whole session.

        A re-measured block (repeats that disagreed) or a retried sweep gets the next
        number, never a name already used, so no raw recording is ever overwritten.
        """
        stem = f"{entry['index']:02d}_{slug(pair.speaker)}_{slug(pair.mic)}_{tag}_{level_dbfs:+.0f}dBFS"
        used = self.__dict__.setdefault("_raw_attempts", {})
        n = used.get(stem, 0)
        while True:
            n += 1
            name = f"{stem}_try{n}"
            if not any((self.session_dir / "raw" / f"{name}{extra}.wav").exists() for extra in ("", "_interrupted")):
                used[stem] = n
                return name

    # -- one play-record
    def _play(self, pair: Pair, level_dbfs: float, n_repeats: int, entry: dict, tag: str
              ) -> tuple[PlayRecordResult, str]:
        amp = float(from_db(level_dbfs))
        n = n_repeats * self.period
        sig = np.zeros(n)
        for r in range(n_repeats):
            sig[r * self.period : r * self.period + self.sweep.n_samples] = amp * self.sweep.signal
        out_ch = [pair.out_channel]
        in_ch = [pair.in_channel]
        cols = [sig]
        if self.reference_channel is not None:
            out_ch.append(self.reference_channel)
            in_ch.append(self.reference_channel)
            cols.append(sig)
        buf = np.stack(cols, axis=1)
        attempts = 0
        while True:
            attempts += 1
            name = self._raw_name(pair, entry, tag, level_dbfs)
            try:
                res = self.backend.play_record(
                    buf, sample_rate_hz=self.sample_rate_hz, output_device=self.output_device,
                    input_device=self.input_device, output_channels=out_ch, input_channels=in_ch)
            except PlaybackInterrupted as stop:
                part = stop.result.recording[: stop.result.n_frames_done]
                if part.shape[0] > 0:
                    rel = self._write_raw(name + "_interrupted", part)
                    entry["raw_files"].append({"file": rel, "level_dbfs": level_dbfs, "status": "interrupted"})
                raise
            rel = self._write_raw(name, res.recording)  # raw first, before any processing
            raw = {"file": rel, "level_dbfs": level_dbfs, "repeats": n_repeats,
                   "status_flags": list(res.status_flags), "status": "recorded"}
            entry["raw_files"].append(raw)
            self.save()
            if not res.dropout:
                return res, rel
            raw["status"] = "dropout"
            self.save()
            self.say(f"  dropout ({', '.join(res.status_flags)}): repeating the sweep")
            if attempts > self.quality.max_dropout_retries:
                raise MeasurementQualityError(
                    f"{pair.speaker}→{pair.mic}: audio dropouts ({', '.join(res.status_flags)}) in {attempts} attempts; "
                    "close other programs, use a larger buffer in the audio server or interface driver, "
                    "and measure again")

    def _analyse(self, res: PlayRecordResult, level_dbfs: float, n_repeats: int) -> Analysis:
        lat = None if self.reference_channel is not None else self.calibrated_latency_samples
        return analyse(
            res.recording, self.sweep, level_lin=float(from_db(level_dbfs)), mic_index=0,
            reference_index=1 if self.reference_channel is not None else None,
            n_repeats=n_repeats, period_samples=self.period, latency_samples=lat,
            latency_source="calibration")

    def _gates(self, pair: Pair, an: Analysis, res: PlayRecordResult, level_dbfs: float) -> None:
        """Hard gates that no level change can fix."""
        q = self.quality
        who = f"{pair.speaker}→{pair.mic}"
        mic_peak = float(np.max(np.abs(res.recording[:, 0]))) if res.recording.size else 0.0
        if db(mic_peak) <= q.silence_dbfs:
            raise MeasurementQualityError(
                f"{who}: no signal at all on input {pair.in_channel}; the mic is unplugged or muted, or the input "
                "is wrong (check the cable, phantom power, the channel's mute and --in-channel)")
        if self.reference_channel is not None:
            if an.reference_snr_db is None or an.reference_snr_db < q.min_reference_snr_db:
                raise MeasurementQualityError(
                    f"{who}: reference channel {self.reference_channel} shows no clean loopback "
                    f"(peak-to-noise {an.reference_snr_db:.0f} dB); wire output {self.reference_channel} straight to "
                    f"input {self.reference_channel}")
            if len(set(an.reference_latencies)) > 1:
                raise MeasurementQualityError(
                    f"{who}: the reference latency changed between repeats ({list(an.reference_latencies)} samples): "
                    "samples were lost in the stream; measure again with a larger buffer")
        if an.snr_db < q_min_snr(self) and an.recording_rms_dbfs > q.loud_recording_dbfs:
            raise MeasurementQualityError(
                f"{who}: input {pair.in_channel} is loud ({an.recording_rms_dbfs:.0f} dBFS rms) but does not contain "
                f"the sweep (peak-to-noise {an.snr_db:.0f} dB, {100 * max(an.explained, 0):.0f} % explained); "
                "wrong channel or wrong routing? check --in-channel/--out-channel and the console routing"
                + ("" if an.decay_reached_noise else
                   f"; or the room's decay outlasts the {an.window_samples / self.sample_rate_hz:.2f} s window "
                   "(lengthen --tail-s)"))

    # -- one pair
    def measure_pair(self, pair: Pair) -> dict:
        """Measure one speaker→mic pair; returns its session.json entry (also stored)."""
        entry = {"index": len(self.record["pairs"]) + 1, "speaker": pair.speaker, "mic": pair.mic,
                 "out_channel": pair.out_channel, "in_channel": pair.in_channel, "status": "running",
                 "raw_files": [], "levels_tried": [], "warnings": []}
        self.record["pairs"].append(entry)
        self.save()
        try:
            self._measure_into(pair, entry)
        except KeyboardInterrupt:
            entry["status"] = "interrupted"
            self.record["status"] = "interrupted"
            self.save()
            raise
        except HowlError as exc:
            entry["status"] = "failed"
            entry["error"] = str(exc)
            self.save()
            raise
        return entry

    def _measure_into(self, pair: Pair, entry: dict) -> None:
        lp = self.level
        level = lp.start_level_dbfs
        prev: tuple[float, Analysis] | None = None
        chosen: tuple[float, Analysis, PlayRecordResult] | None = None
        while True:
            self.say(f"  sweep at {level:+.1f} dBFS ...")
            res, rel = self._play(pair, level, 1, entry, "probe")
            an = self._analyse(res, level, 1)
            self._gates(pair, an, res, level)
            entry["levels_tried"].append({"level_dbfs": level, "snr_db": an.snr_db, "peak_dbfs": an.clip.peak_dbfs,
                                          "clipped": an.clip.clipped, "thd_pct": an.distortion.thd_pct,
                                          "raw_file": rel})
            self.save()
            self.say(f"    peak {an.clip.peak_dbfs:.1f} dBFS, SNR {an.snr_db:.1f} dB"
                     + (", CLIPPED" if an.clip.clipped else ""))
            if an.clip.clipped:
                if prev is None:
                    raise MeasurementQualityError(
                        f"{pair.speaker}→{pair.mic}: the recording clips already at {level:+.1f} dBFS; turn down the "
                        "interface input gain (or the console/amplifier gain) and measure again")
                level = prev[0]
                self.say(f"    clipped: back to {level:+.1f} dBFS")
                entry["warnings"].append(f"clipped at a higher level; measured at {level:+.1f} dBFS")
                break
            short = an.snr_db < lp.target_snr_db
            nxt = min(level + lp.step_db, lp.max_level_dbfs)
            room = an.clip.peak_dbfs + (nxt - level) <= -lp.headroom_db
            if short and nxt > level + 1e-9 and room:
                prev = (level, an)
                level = nxt
                continue
            if short and not room:
                entry["warnings"].append(f"level not raised above {level:+.1f} dBFS: the recording peak "
                                         f"({an.clip.peak_dbfs:.1f} dBFS) leaves no headroom for the next step")
            chosen = (level, an, res)
            break
        # the final block of repeats
        if self.repeats == 1 and chosen is not None and chosen[0] == level:
            final = chosen[1]
        else:
            final = self._repeat_block(pair, level, entry)
        if final.clip.clipped:
            raise MeasurementQualityError(
                f"{pair.speaker}→{pair.mic}: the repeated sweeps clip at {level:+.1f} dBFS; lower --max-level-dbfs or "
                "the input gain")
        q = self.quality
        if final.snr_db < q_min_snr(self):
            raise MeasurementQualityError(
                f"{pair.speaker}→{pair.mic}: SNR {final.snr_db:.1f} dB at the highest allowed level {level:+.1f} dBFS, "
                f"below the minimum {q_min_snr(self):g} dB: is the mic open and the speaker on? raise the amplifier "
                "or console gain, lengthen the sweep (--sweep-s) or quieten the room")
        if final.snr_db < lp.target_snr_db:
            entry["warnings"].append(
                f"SNR {final.snr_db:.1f} dB is below the target {lp.target_snr_db:g} dB at {level:+.1f} dBFS; the IR's "
                "late part is noise-limited (raise the gain, lengthen the sweep or quieten the room)")
        if not final.decay_reached_noise:
            entry["warnings"].append(
                f"the IR was still decaying at the end of the {final.window_samples / self.sample_rate_hz:.2f} s "
                "window: lengthen --tail-s (its SNR is then underestimated, the IR's tail is cut)")
        if final.explained < 0.5:
            entry["warnings"].append(
                f"only {100 * max(final.explained, 0):.0f} % of the recording is explained by the sweep: other "
                "sounds were loud during the measurement")
        linearity = None
        if prev is not None and prev[0] != level:
            # ISO 18233 linearity: the level-normalised IRs of two levels must agree
            linearity = ir_difference_db(final.ir, prev[1].ir[: final.ir.shape[0]])
            noise_db = -min(final.snr_db, prev[1].snr_db) + 10 * math.log10(max(final.ir.shape[0], 1))
            if linearity > max(q.max_repeat_difference_db, noise_db + q.noise_allowance_db):
                entry["warnings"].append(
                    f"the IRs at {prev[0]:+.0f} and {level:+.0f} dBFS differ by {linearity:.1f} dB: the chain is not "
                    "linear at these levels (a limiter or compressor working? distortion?); check the dynamics "
                    "processing and measure at the lower level")
        self._finish(pair, entry, level, final, linearity)

    def _repeat_block(self, pair: Pair, level: float, entry: dict) -> Analysis:
        q = self.quality
        tries = 0
        while True:
            tries += 1
            self.say(f"  {self.repeats} sweeps at {level:+.1f} dBFS ...")
            res, _rel = self._play(pair, level, self.repeats, entry, "block")
            an = self._analyse(res, level, self.repeats)
            self._gates(pair, an, res, level)
            if an.repeat_difference_db is None:
                return an
            limit = max(q.max_repeat_difference_db, an.repeat_expected_db + q.noise_allowance_db)
            if an.repeat_difference_db <= limit:
                return an
            entry["warnings"].append(
                f"repeats disagreed ({an.repeat_difference_db:.1f} dB, limit {limit:.1f} dB); measured again")
            self.save()
            self.say(f"    repeats disagree ({an.repeat_difference_db:.1f} dB): measuring again")
            if tries > q.max_disagree_retries:
                raise MeasurementQualityError(
                    f"{pair.speaker}→{pair.mic}: repeated sweeps disagree ({an.repeat_difference_db:.1f} dB difference, "
                    f"limit {limit:.1f} dB) in {tries} blocks; the room changed during the measurement (someone "
                    "walking, doors, wind, a fan). Keep the room still and measure again; averaging is only valid "
                    "when repeats agree (ISO 18233)")

    def _finish(self, pair: Pair, entry: dict, level: float, an: Analysis, linearity: float | None) -> None:
        fs = self.sample_rate_hz
        rel = f"ir/{entry['index']:02d}_{slug(pair.speaker)}_{slug(pair.mic)}.wav"
        write_wav_atomic(self.session_dir / rel, an.ir.astype(np.float32), fs)
        lat = an.latency_samples
        if lat is None:
            entry["warnings"].append(
                "interface latency unknown: the IR's time zero includes the interface's round-trip latency "
                "(use --reference-channel, or calibrate once with --calibrate); margins are unaffected, "
                "delay-based figures are not")
        entry.update({
            "status": "ok",
            "ir_file": rel,
            "level_dbfs": level,
            "snr_db": an.snr_db,
            "single_sweep_snr_db": an.single_snr_db,
            "latency_s": None if lat is None else lat / fs,
            "latency_samples": lat,
            "latency_source": an.latency_source,
            "clipped": bool(an.clip.clipped),
            "peak_dbfs": an.clip.peak_dbfs,
            "ir_length_s": an.ir.shape[0] / fs,
            "distortion": {"thd_db": an.distortion.thd_db, "thd_pct": an.distortion.thd_pct,
                           "orders": list(an.distortion.orders), "harmonic_db": list(an.distortion.harmonic_db),
                           "noise_limited": list(an.distortion.noise_limited),
                           "note": "energy of each harmonic response over the linear IR's, in [k·f1, f2/√2]"},
            "repeat_difference_db": an.repeat_difference_db,
            "repeat_noise_expected_db": an.repeat_expected_db,
            "linearity_difference_db": linearity,
            "explained_fraction": an.explained,
            "reference_snr_db": an.reference_snr_db,
            "octave_bands_hz": list(an.band_centres_hz),
            "band_loop_gain_db": list(an.band_loop_gain_db),
            "band_noise_floor_db": list(an.band_noise_floor_db),
            "sample_rate_hz": fs,
        })
        self.save()
        lat_txt = "unknown" if lat is None else f"{lat} samples ({1000 * lat / fs:.2f} ms, {an.latency_source})"
        self.say(f"  done: SNR {an.snr_db:.1f} dB, latency {lat_txt}, THD-like {an.distortion.thd_pct:.2f} %, "
                 f"IR {an.ir.shape[0] / fs:.3f} s → {rel}")

    def close(self, status: str = "done") -> dict:
        self.record["status"] = status
        self.record["finished_utc"] = _now()
        self.save()
        return self.record

    # -- calibration: the output wired straight to the input
    def calibrate(self, out_channel: int, in_channel: int, level_dbfs: float) -> int:
        """Measure the interface's round-trip latency through a wire from output to input."""
        entry = {"index": 0, "speaker": "loopback", "mic": "loopback", "raw_files": []}
        pair = Pair("loopback", "loopback", out_channel, in_channel)
        saved_ref, self.reference_channel = self.reference_channel, None
        try:
            res, _ = self._play(pair, level_dbfs, 1, entry, "calibration")
            an = analyse(res.recording, self.sweep, level_lin=float(from_db(level_dbfs)), mic_index=0,
                         reference_index=0, n_repeats=1, period_samples=self.period)
        finally:
            self.reference_channel = saved_ref
        if an.reference_snr_db is None or an.reference_snr_db < self.quality.min_reference_snr_db or an.clip.clipped:
            raise MeasurementQualityError(
                f"calibration: no clean loopback from output {out_channel} to input {in_channel} "
                f"(peak-to-noise {an.reference_snr_db:.0f} dB{', clipped' if an.clip.clipped else ''}); "
                "wire that output straight to that input")
        lat = int(an.reference_latencies[0])
        self.record["calibration"] = {"out_channel": out_channel, "in_channel": in_channel,
                                      "latency_samples": lat, "latency_s": lat / self.sample_rate_hz,
                                      "snr_db": an.reference_snr_db, "raw_files": entry["raw_files"]}
        self.save()
        return lat


def q_min_snr(session: Session) -> float:
    return session.level.min_snr_db


def summary(record: dict) -> dict:
    """The ``--json`` summary: session_dir and pairs [{speaker, mic, ir_file, snr_db, latency_s, clipped}, ...]."""
    pairs = []
    for e in record.get("pairs", []):
        pairs.append({k: e.get(k) for k in ("speaker", "mic", "ir_file", "snr_db", "latency_s", "clipped",
                                             "latency_samples", "latency_source", "status", "level_dbfs",
                                             "out_channel", "in_channel", "repeat_difference_db", "warnings",
                                             "error")}
                     | {"thd_pct": (e.get("distortion") or {}).get("thd_pct")})
    return {"session_dir": record["session_dir"], "sample_rate_hz": record["sample_rate_hz"],
            "output_device": record["output_device"], "input_device": record["input_device"],
            "status": record.get("status"), "session_file": "session.json", "pairs": pairs,
            **({"calibration": record["calibration"]} if "calibration" in record else {})}


def rig_pairs(rig, *, out_channel: int, in_channel: int, speaker_channels: dict[str, int],
              mic_channels: dict[str, int], speakers: Sequence[str] | None = None,
              mics: Sequence[str] | None = None) -> list[Pair]:
    """Every speaker→mic pair of a rig (or the named subset), with its interface channels."""
    spk_names = [s.name for s in rig.speakers]
    mic_names = [m.name for m in rig.mics]
    for name in speaker_channels:
        if name not in spk_names:
            raise InputError(f"no speaker {name!r} in the rig (speakers: {', '.join(spk_names)})", key="--speaker-channel")
    for name in mic_channels:
        if name not in mic_names:
            raise InputError(f"no mic {name!r} in the rig (mics: {', '.join(mic_names)})", key="--mic-channel")
    sel_s = list(speakers) if speakers else spk_names
    sel_m = list(mics) if mics else mic_names
    for s in sel_s:
        if s not in spk_names:
            hint = v.closest(s, spk_names)
            raise InputError(f"no speaker {s!r} in the rig{f' (did you mean {hint!r}?)' if hint else ''}; "
                             f"speakers: {', '.join(spk_names)}", key="--speaker")
    for m in sel_m:
        if m not in mic_names:
            hint = v.closest(m, mic_names)
            raise InputError(f"no mic {m!r} in the rig{f' (did you mean {hint!r}?)' if hint else ''}; "
                             f"mics: {', '.join(mic_names)}", key="--mic")
    return [Pair(s, m, speaker_channels.get(s, out_channel), mic_channels.get(m, in_channel))
            for s in sel_s for m in sel_m]


# the acoustic path → loop IR arithmetic lives in its own module (kept importable from here)
from howl.measure._combine import (  # noqa: E402,F401
    DB_SPL_OF_1_PA, GainChain, InterfaceCalibration, LoopCombination, combine_acoustic_to_loop)
