"""`howl measure` end to end through a real PortAudio stream and a user-space audio server.

On CI, .ci/run starts jackd with the dummy driver and its built-in loopback ports
(`-L 2`, `--sync`, 48 kHz, period 1024) and sets HOWL_REQUIRE_AUDIO_LOOPBACK=1, which
turns a missing server into a failure instead of a skip. The command runs in a
subprocess, so PortAudio's device list (fixed at import) and its JACK client never leak
into other tests; the command terminates PortAudio itself at the end (sd._terminate).

Check values: the loopback returns the signal one JACK period later, bit-exact
(1024 samples at --period 1024, recorded on this kind of setup; common practice of the
JACK dummy driver, no source), so the recovered IR is an impulse at time zero once the
latency is removed.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from conftest import require_or_skip

PERIOD = 1024  # jackd --period in .ci/run
RATE = 48000


def _jack_env() -> dict:
    env = dict(os.environ)
    env.setdefault("JACK_DEFAULT_SERVER", "howlci")
    env.setdefault("JACK_NO_START_SERVER", "1")
    env.setdefault("JACK_NO_AUDIO_RESERVATION", "1")
    return env


@pytest.fixture(scope="module")
def jack_env():
    env = _jack_env()
    lsp = shutil.which("jack_lsp")
    ok = False
    if lsp:
        r = subprocess.run([lsp], env=env, capture_output=True, text=True, timeout=20)
        ok = r.returncode == 0 and "loopback:capture_1" in r.stdout
    require_or_skip(ok, f"no JACK server {env['JACK_DEFAULT_SERVER']!r} with loopback ports "
                        "(start: jackd --no-realtime --sync --name howlci -L 2 -d dummy --rate 48000 --period 1024)")
    code = "import sounddevice"
    r = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=60)
    require_or_skip(r.returncode == 0, f"sounddevice/PortAudio unavailable: {r.stderr.strip()[-200:]}")
    return env


def _howl(env, *args, timeout=120):
    return subprocess.run([sys.executable, "-m", "howl", *args], env=env, capture_output=True, text=True,
                          timeout=timeout)


def test_devices_lists_the_jack_loopback(jack_env):
    r = _howl(jack_env, "devices", "--json")
    assert r.returncode == 0, r.stderr
    names = [(d["name"], d["hostapi"]) for d in json.loads(r.stdout)["devices"]]
    assert any(n == "loopback" and "JACK" in h for n, h in names)


def test_measure_through_the_loopback_finds_latency_snr_and_an_impulse(jack_env, tmp_path):
    out = tmp_path / "session"
    r = _howl(jack_env, "measure", "--device", "loopback, JACK", "--reference-channel", "2", "--out", str(out),
              "--yes", "--json", "--sweep-s", "0.5", "--tail-s", "0.3")
    assert r.returncode == 0, r.stderr  # also: no SIGABRT (134) at exit
    res = json.loads(r.stdout)
    assert res["session_dir"] == str(out)
    (pair,) = res["pairs"]
    assert pair["latency_s"] == pytest.approx(PERIOD / RATE, abs=0.5 / RATE)  # to the sample
    assert pair["latency_samples"] == PERIOD
    assert pair["snr_db"] > 60
    assert pair["clipped"] is False
    ir, fs = sf.read(out / pair["ir_file"])
    assert fs == RATE
    # an impulse at time zero: the peak is sample 0 and holds most of the energy (the rest is
    # the band-limiting of a 40 Hz – 20 kHz sweep: about (20000 − 40) / 24000 of full band)
    assert int(np.argmax(np.abs(ir))) == 0
    assert ir[0] == pytest.approx((20000 - 40) / 24000, abs=0.08)
    assert ir[0] ** 2 / np.sum(ir**2) > 0.75
    rec = json.loads((out / "session.json").read_text())
    assert all((out / f["file"]).exists() for f in rec["pairs"][0]["raw_files"])


def _wait_for(path, text, timeout_s=60.0):
    import time

    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout_s:
        if path.exists() and text in path.read_text(errors="replace"):
            return True
        time.sleep(0.05)
    return False


def test_calibration_is_stored_and_then_gives_the_latency_without_a_reference(jack_env, tmp_path):
    cal = tmp_path / "latency.json"
    r = _howl(jack_env, "measure", "--device", "loopback, JACK", "--calibrate", "--calibration-file", str(cal),
              "--out", str(tmp_path / "cal"), "--yes", "--json", "--sweep-s", "0.5", "--tail-s", "0.3")
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["latency_samples"] == PERIOD
    r = _howl(jack_env, "measure", "--device", "loopback, JACK", "--calibration-file", str(cal),
              "--out", str(tmp_path / "m"), "--yes", "--json", "--sweep-s", "0.5", "--tail-s", "0.3",
              "--repeats", "1")
    assert r.returncode == 0, r.stderr
    (pair,) = json.loads(r.stdout)["pairs"]
    assert pair["latency_samples"] == PERIOD and pair["latency_source"] == "calibration"


def test_ctrl_c_stops_at_once_and_keeps_the_partial_recording(jack_env, tmp_path):
    import signal
    import time

    out = tmp_path / "s"
    err = tmp_path / "stderr.txt"
    with open(err, "w") as fh:
        p = subprocess.Popen([sys.executable, "-m", "howl", "measure", "--device", "loopback, JACK", "--out", str(out),
                              "--yes", "--json", "--sweep-s", "4", "--tail-s", "0.5"],
                             env=jack_env, stdout=subprocess.PIPE, stderr=fh, text=True)
        assert _wait_for(err, "sweep at"), err.read_text()
        time.sleep(1.0)
        t0 = time.monotonic()
        p.send_signal(signal.SIGINT)
        rc = p.wait(timeout=30)
        stopped_s = time.monotonic() - t0
    assert rc == 130, err.read_text()
    assert stopped_s < 5.0  # the remaining 3.5 s of sweep were not played out
    rec = json.loads((out / "session.json").read_text())
    assert rec["status"] == "interrupted"
    kept = [f for f in rec["pairs"][0]["raw_files"] if f["status"] == "interrupted"]
    assert kept and (out / kept[0]["file"]).exists()
    data, _ = sf.read(out / kept[0]["file"])
    assert 0.3 * RATE < data.shape[0] < 4.0 * RATE


def test_server_going_away_mid_sweep_is_reported_not_hung(jack_env, tmp_path):
    # A private, short-lived jackd (never the shared one), killed during the sweep.
    import time

    jackd = shutil.which("jackd")
    require_or_skip(jackd is not None, "jackd not installed (apt-get install jackd2)")
    env = dict(jack_env)
    env["JACK_DEFAULT_SERVER"] = f"howlwatchdog{os.getpid()}"
    server = subprocess.Popen([jackd, "--no-realtime", "--sync", "--name", env["JACK_DEFAULT_SERVER"], "-L", "2",
                               "-d", "dummy", "--rate", "48000", "--period", "1024", "--capture", "2",
                               "--playback", "2"], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        # Wait until the private server lists its loopback ports (up to 20 s: on a loaded
        # 2-core machine jackd can take seconds to come up).
        for _ in range(400):
            lsp = subprocess.run(["jack_lsp"], env=env, capture_output=True, text=True)
            if lsp.returncode == 0 and "loopback:" in lsp.stdout:
                break
            time.sleep(0.05)
        else:
            pytest.fail("private jackd did not come up with its loopback ports within 20 s")
        out = tmp_path / "s"
        err = tmp_path / "stderr.txt"
        with open(err, "w") as fh:
            p = subprocess.Popen([sys.executable, "-m", "howl", "measure", "--device", "loopback, JACK", "--out",
                                  str(out), "--yes", "--json", "--sweep-s", "4", "--tail-s", "0.5"],
                                 env=env, stdout=subprocess.PIPE, stderr=fh, text=True)
            assert _wait_for(err, "sweep at"), err.read_text()
            time.sleep(0.8)
            # SIGTERM: for the client the server is gone just as after a crash, but jackd
            # releases its slot in JACK's shared registry (SIGKILL leaks one per run, and
            # after a handful JACK refuses new servers with "Too many servers already active").
            server.terminate()
            server.wait(timeout=10)
            rc = p.wait(timeout=30)
        assert rc == 2, err.read_text()  # one-line error, neither a hang nor SIGABRT (134)
        assert "went away" in err.read_text()
        assert json.loads((out / "session.json").read_text())["status"] == "failed"
    finally:
        if server.poll() is None:
            server.terminate()
            try:
                server.wait(timeout=10)
            except subprocess.TimeoutExpired:
                server.kill()
                server.wait(timeout=10)


_BACKEND_SCRIPT = r"""
import json, numpy as np
from howl.measure.audio import PortAudioBackend
b = PortAudioBackend()
sd = b._sd
before = (list(sd.default.device), sd.default.samplerate, list(sd.default.channels))
dev = b.resolve("loopback, JACK", "both")
rng = np.random.default_rng(0)
x = np.zeros((24000, 2), dtype=np.float32)
x[:12000] = (0.25 * rng.standard_normal((12000, 2))).astype(np.float32)
res = b.play_record(x, sample_rate_hz=48000, output_device=dev, input_device=dev,
                    output_channels=[1, 2], input_channels=[2, 1])
after = (list(sd.default.device), sd.default.samplerate, list(sd.default.channels))
y = res.recording
lag = int(np.argmax(np.abs(np.correlate(y[:16000, 1], x[:4000, 0], mode="valid"))))
exact = bool(np.array_equal(y[lag:lag + 12000, 1], x[:12000, 0]) and np.array_equal(y[lag:lag + 12000, 0], x[:12000, 1]))
b.close()
print(json.dumps({"lag": lag, "exact": exact, "flags": list(res.status_flags), "same_defaults": before == after}))
"""


def test_portaudio_backend_round_trip_is_bit_exact_and_leaves_defaults_alone(jack_env):
    r = subprocess.run([sys.executable, "-c", _BACKEND_SCRIPT], env=jack_env, capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout.strip().splitlines()[-1])
    assert out["lag"] == PERIOD  # one JACK period
    assert out["exact"]  # float32 in, the same float32 out, channels in the order asked for
    assert not [f for f in out["flags"] if f != "priming_output"]  # no over/underflow
    assert out["same_defaults"]  # sounddevice's global defaults never touched


@pytest.mark.parametrize("signame", ["SIGTERM", "SIGHUP"])
def test_a_stop_signal_mid_measure_keeps_the_partial_raw_and_marks_the_session(jack_env, tmp_path, signame):
    # issue 18 item 3: `kill` or a closed terminal is handled as Ctrl-C is
    import signal
    import time

    sig = getattr(signal, signame)
    out = tmp_path / "s"
    err = tmp_path / "stderr.txt"
    with open(err, "w") as fh:
        p = subprocess.Popen([sys.executable, "-m", "howl", "measure", "--device", "loopback, JACK", "--out", str(out),
                              "--yes", "--json", "--sweep-s", "4", "--tail-s", "0.5"],
                             env=jack_env, stdout=subprocess.PIPE, stderr=fh, text=True)
        assert _wait_for(err, "sweep at"), err.read_text()
        time.sleep(1.0)  # let part of the sweep play and be recorded
        p.send_signal(sig)
        rc = p.wait(timeout=30)
    assert rc == 128 + sig, err.read_text()  # the shell's convention for a death by signal
    assert "Traceback" not in err.read_text()
    rec = json.loads((out / "session.json").read_text())
    assert rec["status"] == "interrupted" and rec["pairs"][0]["status"] == "interrupted"
    kept = [f for f in rec["pairs"][0]["raw_files"] if f["status"] == "interrupted"]
    assert kept and (out / kept[0]["file"]).exists()
    data, _ = sf.read(out / kept[0]["file"])
    assert 0 < data.shape[0] < 4.0 * RATE
    assert not [q.name for q in out.rglob(".*") if q.is_file()]  # no temporaries left


_FORCE_ONE_DISAGREEMENT = """
import dataclasses, sys
import howl.measure.session as s

_analyse = s.analyse
blocks = []

def first_block_disagrees(*args, **kw):
    an = _analyse(*args, **kw)
    if kw.get("n_repeats", 1) > 1:
        blocks.append(1)
        if len(blocks) == 1:  # the first block of repeats is made to disagree: the session measures again
            an = dataclasses.replace(an, repeat_difference_db=0.0)
    return an

s.analyse = first_block_disagrees
sys.argv = ["howl", *sys.argv[1:]]
from howl.cli import main
main()
"""


def test_a_forced_re_measure_keeps_both_raw_recordings(jack_env, tmp_path):
    # issue 18 item 2: the second block once overwrote the first block's raw recording
    out = tmp_path / "s"
    r = subprocess.run([sys.executable, "-c", _FORCE_ONE_DISAGREEMENT, "measure", "--device", "loopback, JACK",
                        "--reference-channel", "2", "--out", str(out), "--yes", "--json", "--sweep-s", "0.5",
                        "--tail-s", "0.3"], env=jack_env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    rec = json.loads((out / "session.json").read_text())
    (pair,) = rec["pairs"]
    assert any("repeats disagreed" in w for w in pair["warnings"])
    files = [f["file"] for f in pair["raw_files"]]
    assert len(set(files)) == len(files), files  # no name used twice
    # blocks that were analysed (a loaded machine may add dropout retries, each its own file too)
    blocks = [f["file"] for f in pair["raw_files"] if "_block_" in f["file"] and f["status"] != "dropout"]
    assert len(blocks) == 2, pair["raw_files"]
    first, second = (sf.read(out / f)[0] for f in blocks)
    assert first.shape == second.shape and first.shape[0] > 0  # both blocks kept, whole
    assert sorted(q.name for q in (out / "raw").iterdir()) == sorted(Path(f).name for f in files)
