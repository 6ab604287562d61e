"""`howl listen` for real: a recording with a howl is played into the JACK loopback while
`python -m howl listen --device 'loopback, JACK' --duration S --json` listens in another process.

Needs jackd running with its loopback ports (server name from JACK_DEFAULT_SERVER, default
`howlci`; .ci/run starts its own, `howlci<PID>`, and exports its name). Skips without it, fails under CI (HOWL_REQUIRE_AUDIO_LOOPBACK).
The howl is a numpy tone of known frequency (exact by construction); the JACK loopback returns
the float32 samples unchanged (tests/measure/test_measure_loopback.py::
test_portaudio_backend_round_trip_is_bit_exact_and_leaves_defaults_alone checks it on the same
server), so the 0.1 % target applies unchanged.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import time

import numpy as np

from conftest import require_or_skip

FS = 48000
HOWL_HZ = 2345.6


def _env():
    env = dict(os.environ)
    env.setdefault("JACK_DEFAULT_SERVER", "howlci")
    env["JACK_NO_START_SERVER"] = "1"
    env["JACK_NO_AUDIO_RESERVATION"] = "1"
    return env


def _loopback_available(env) -> tuple[bool, str]:
    if shutil.which("jack_lsp") is None:
        return False, "jack_lsp not installed (apt-get install jackd2)"
    r = subprocess.run(["jack_lsp"], env=env, capture_output=True, text=True, timeout=10)
    if r.returncode != 0 or "loopback:capture_1" not in r.stdout:
        return False, f"no JACK server {env['JACK_DEFAULT_SERVER']!r} with loopback ports (jackd -L 2)"
    r = subprocess.run([sys.executable, "-c", "import sounddevice as sd; sd.query_devices('loopback, JACK', 'input')"],
                       env=env, capture_output=True, text=True, timeout=30)
    if r.returncode != 0:
        return False, f"sounddevice cannot see 'loopback, JACK': {r.stderr.strip().splitlines()[-1:]}"
    return True, ""


PLAYER = """
import sys, sounddevice as sd, soundfile as sf
x, fs = sf.read(sys.argv[1], dtype='float32')
sd.play(x, fs, device='loopback, JACK')
sd.wait()
sd._terminate()
"""


def run_while_playing(args: list[str], wav, env, ready_prefix: str, timeout_s: float = 60.0):
    """Start ``python -m howl ARGS`` (a live command on the loopback), wait until its stderr says
    ``ready_prefix`` (its input stream runs), play ``wav`` into the loopback from another process, and
    wait for the command to end. Returns (returncode, stdout, stderr up to ready + the rest, ready lines)."""
    proc = subprocess.Popen([sys.executable, "-m", "howl", *args], env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 30
        seen = []
        while time.monotonic() < deadline:
            line = proc.stderr.readline()
            if not line:
                break
            seen.append(line)
            if line.startswith(ready_prefix):
                break
        assert any(s.startswith(ready_prefix) for s in seen), "".join(seen)
        player = subprocess.run([sys.executable, "-c", PLAYER, str(wav)], env=env, capture_output=True, text=True,
                                timeout=timeout_s)
        assert player.returncode == 0, player.stderr
        out, err = proc.communicate(timeout=timeout_s)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    return proc.returncode, out, "".join(seen) + err, seen


def test_listen_finds_a_howl_played_through_the_jack_loopback(tmp_path):
    env = _env()
    ok, why = _loopback_available(env)
    require_or_skip(ok, why)
    from howl.fileio import write_wav_atomic
    from test_detect import speech_like

    t = np.arange(5 * FS) / FS
    level_db = np.where(t < 1.0, -200.0, np.minimum(-60.0 + 30.0 * (t - 1.0), -10.0))
    y = speech_like(FS, 5.0, 3) + 10 ** (level_db / 20) * np.sin(2 * np.pi * HOWL_HZ * t)
    wav = tmp_path / "howl.wav"
    write_wav_atomic(wav, y, FS)
    log = tmp_path / "events.jsonl"

    rc, out, err, _ = run_while_playing(["listen", "--device", "loopback, JACK", "--duration", "7", "--json",
                                         "--log", str(log)], wav, env, "listening on")
    assert rc == 0, err
    rep = json.loads(out)
    assert rep["sample_rate_hz"] == FS  # from the device
    howls = [e for e in rep["events"] if e["kind"] == "howl"]
    assert howls, rep
    assert abs(howls[0]["freq_hz"] / HOWL_HZ - 1) < 1e-3
    assert any(abs(n["freq_hz"] / HOWL_HZ - 1) < 1e-3 for n in rep["notches"])
    assert isinstance(rep["overflows"], int)
    # the log has the same event, one JSON object per line
    lines = [json.loads(s) for s in log.read_text(encoding="utf-8").splitlines()]
    assert any(e["kind"] == "howl" and abs(e["freq_hz"] / HOWL_HZ - 1) < 1e-3 for e in lines)


def test_listen_without_the_device_says_so_in_one_line():
    from typer.testing import CliRunner

    from howl.cli import app

    res = CliRunner().invoke(app, ["listen", "--device", "no-such-device-xyz", "--duration", "1", "--json"])
    assert res.exit_code == 2
    assert "--device" in res.output or "audio" in res.output
    assert "Traceback" not in res.output


def test_listen_loop_logs_each_event_as_it_happens_and_reports_like_scan(tmp_path):
    # No device: the live loop on a recording (howl.live.ArraySource), compared with `scan`'s report.
    from howl.listen.detect import Detector, report
    from howl.listen.live import ArraySource, listen
    from test_detect import speech_like

    fs = 16000
    t = np.arange(4 * fs) / fs
    y = speech_like(fs, 4.0, 8) + 10 ** (np.where(t < 1, -200, -60 + 30 * (t - 1)) / 20) * np.sin(2 * np.pi * 1234.5 * t)
    y = np.clip(y, -0.9, 0.9)
    log = tmp_path / "ev.jsonl"
    snaps = []
    res = listen(ArraySource(y, fs, block_frames=512), log_path=log, on_update=snaps.append, update_interval_s=0.0)
    det = Detector(fs)
    det.process(y)
    det.finish()
    ref = report(det.events, fs, y.size / fs)
    assert [e["freq_hz"] for e in res.report["events"]] == [e["freq_hz"] for e in ref["events"]]
    assert res.report["events"] and abs(res.report["events"][0]["freq_hz"] / 1234.5 - 1) < 1e-3
    logged = [json.loads(s) for s in log.read_text(encoding="utf-8").splitlines()]
    assert [e["freq_hz"] for e in logged] == [e["freq_hz"] for e in ref["events"]]
    assert snaps and snaps[-1].notches and snaps[-1].overflows == 0
    assert any(c.state == "howl" for s in snaps for c in s.candidates)


def test_listen_needs_duration_for_json_and_a_device():
    from typer.testing import CliRunner

    from howl.cli import app

    res = CliRunner().invoke(app, ["listen", "--device", "x", "--json"])
    assert res.exit_code == 2 and "--duration" in res.output
    res = CliRunner().invoke(app, ["listen"])
    assert res.exit_code == 2 and "--device" in res.output


def test_ctrl_c_stops_the_loop_cleanly_and_overflows_are_reported(tmp_path):
    from howl.listen.live import ArraySource, listen

    class Interrupting(ArraySource):
        def read(self, timeout_s=0.1):
            if self._pos >= 20 * self.block_frames:
                raise KeyboardInterrupt
            self.overflows = 3 if self._pos > 5 * self.block_frames else 0  # as a device would count them
            return super().read(timeout_s)

    fs = 16000
    y = 10 ** (-40 / 20) * np.sin(2 * np.pi * 1000 * np.arange(4 * fs) / fs)
    log = tmp_path / "ev.jsonl"
    res = listen(Interrupting(y, fs, block_frames=512), log_path=log)
    assert res.interrupted and res.n_samples == 20 * 512
    assert res.overflows == 3 and res.report["overflows"] == 3
    assert log.exists()  # closed cleanly, possibly empty


def test_listen_loop_shows_a_ringing_while_it_still_fades(tmp_path):
    # A 2.5 kHz ring-down at 20 dB/s from -12 dBFS (exact by construction) fed in blocks: the
    # ringing event is logged, and in the view, before the tone has faded (it lasts 3 s).
    from howl.cli.listen import _margin_text
    from howl.listen.live import ArraySource, listen

    fs = 16000
    t = np.arange(3 * fs) / fs
    ring = 10 ** ((-12 - 20 * t) / 20) * np.sin(2 * np.pi * 2500.0 * t)
    y = np.concatenate([np.zeros(fs // 2), ring, np.zeros(fs // 2)])
    y = y + 10 ** (-95 / 20) * np.random.default_rng(3).standard_normal(y.size)
    snaps = []
    res = listen(ArraySource(y, fs, block_frames=512), log_path=tmp_path / "ev.jsonl", on_update=snaps.append,
                 update_interval_s=0.0, loop_delay_s=0.075)
    first = next(s for s in snaps if any(e["kind"] == "ringing" for e in s.events))
    assert first.elapsed_s < 0.5 + 1.5  # seen while fading, not when the track ends (> 3.5 s)
    rings = [e for e in res.report["events"] if e["kind"] == "ringing"]
    assert len(rings) == 1 and rings[0]["live"]  # one event per ring-down
    # margin = decay * tau = 20 dB/s * 75 ms = 1.5 dB (first principles)
    assert _margin_text(rings[0]) == "1.5 dB from howling"


def test_listen_loop_with_a_loop_ir_gives_each_ringing_its_margin(tmp_path):
    # The low reverberant loop of test_scan_cli's --loop-ir case, fed in blocks: the logged and
    # reported ringing carries the margin from the IR's loop delay at its frequency.
    from howl.cli.listen import _margin_text
    from howl.listen.detect import LoopDelayFromIR
    from howl.listen.live import ArraySource, listen
    from howl.loop.simulate import simulate_closed_loop
    from test_detect import low_room_loop

    fs = 16000
    h, cross_f, cross_m = low_room_loop(35)
    x = np.zeros(8 * fs)
    x[fs // 2] = 0.5
    x += 1e-5 * np.random.default_rng(1).standard_normal(x.size)
    y = simulate_closed_loop(h, x, fs, gain_db=-1.5)
    log = tmp_path / "ev.jsonl"
    res = listen(ArraySource(y, fs, block_frames=512), log_path=log,
                 loop_delay_s=LoopDelayFromIR(h * 10 ** (-1.5 / 20), fs))
    f_worst = cross_f[np.argmin(cross_m)]
    rings = [e for e in res.report["events"] if e["kind"] == "ringing" and abs(e["freq_hz"] / f_worst - 1) < 1e-3]
    assert rings, res.report["events"]
    # truth: the scipy.signal.freqz crossing (0 dB, test_detect.low_room_loop), then the fader 1.5 dB.
    # Tolerance 0.05 dB + 15 % of the true margin: the estimate is first order in the margin,
    # m = decay·τ_eff with τ_eff = (τ_g² + a²)/τ_g from the IR (the closed-loop pole's shift to first order,
    # howl.listen loop_delay_s); the second-order shift, which grows with m, and a decay fitted on a ring-down
    # that neighbouring modes share make it read low; on the loops of test_detect it read 0-0.29 dB
    # low at 1-3 dB (up to 12 %) while this tolerance was set. The old ±1 dB let 0.5-2.5 dB pass for 1.5.
    assert abs(rings[0]["margin_db"] - 1.5) <= 0.05 + 0.15 * 1.5, rings[0]["margin_db"]
    assert _margin_text(rings[0]).endswith("dB from howling") and not _margin_text(rings[0]).startswith("~")
    logged = [json.loads(s) for s in log.read_text(encoding="utf-8").splitlines()]
    assert any(abs(e["freq_hz"] / f_worst - 1) < 1e-3 and e["margin_db"] is not None for e in logged)


def test_listen_with_the_loop_ir_reports_no_howl_off_the_loop_irs_crossings():
    # A sung note pumped through a low loop 1.5 dB from unity is reported as a howl 1.2 % off the
    # loop's crossing without the IR (docs/scan.md); with the loop IR it is no howl at all (a loop
    # howls only at a crossing: issue 22), so the live view shows none.
    from rich.console import Console

    from howl.cli.listen import _view
    from howl.listen.detect import LoopDelayFromIR
    from howl.listen.live import ArraySource, listen
    from howl.loop.simulate import simulate_closed_loop
    from test_detect import low_room_loop, sung_vowel_swell

    fs = 16000
    h, _, _ = low_room_loop(30)
    y = simulate_closed_loop(h, sung_vowel_swell(fs, 131.0, 10.0, 0.006), fs, gain_db=-1.5)
    snaps = []
    listen(ArraySource(y, fs, block_frames=512), on_update=snaps.append, update_interval_s=0.0,
           loop_delay_s=LoopDelayFromIR(h * 10 ** (-1.5 / 20), fs))
    con = Console(width=120, record=True)
    con.print(_view(snaps[-1], "test", fs))
    text = con.export_text()
    assert not [e for e in snaps[-1].events if e["kind"] == "howl"], snaps[-1].events
    assert "howl" not in text.replace("howl listen", ""), text
