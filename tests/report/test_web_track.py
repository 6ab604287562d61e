"""`howl listen --view web --send-channel N`: the loop tracker (howl.listen.track) beside the
detector on the same input, its margin on the same page; in the JSON, listen's report is unchanged
and the estimates are added as `loop_margin`."""

from __future__ import annotations

import json

import numpy as np
import pytest

FS = 16000
DUR_S = 12.0
# The loop of our own (derived): F = 0.5·δ(t − 5 ms) + 0.3·δ(t − 12 ms), G = a 2 ms delay at
# 20·log10(0.7) dB. L = G·F has taps 0.35 at 7 ms and 0.21 at 14 ms; both are in phase at every
# multiple of 1/(7 ms) = 142.9 Hz, where L = 0.56 on the positive real axis, its largest value:
# the true gain margin is −20·log10(0.56) = 5.04 dB.
G_DB = 20 * np.log10(0.7)
TRUE_MARGIN_DB = -20 * np.log10(0.56)


def send_and_mic(seed: int = 5, dur_s: float = DUR_S, howl_hz: float | None = None, fs: int = FS):
    """(frames, 2) [send, mic]: program-like noise (white through a 1st-order low-pass, our own)
    at the mic through the closed loop above (howl.loop.simulate, sample-accurate), the send u = G*m;
    optionally a tone added to the mic that grows at 30 dB/s from 6 s (a howl, for the detector)."""
    from scipy.signal import lfilter

    from howl.loop.simulate import simulate_closed_loop

    rng = np.random.default_rng(seed)
    n = int(dur_s * fs)
    a = np.exp(-2 * np.pi * 1500 / fs)
    x = lfilter([1 - a], [1, -a], rng.standard_normal(n))
    x *= 10 ** (-30 / 20) / np.sqrt(np.mean(x ** 2))
    f_ir = np.zeros(int(0.013 * fs))
    f_ir[int(0.005 * fs)], f_ir[int(0.012 * fs)] = 0.5, 0.3
    g_ir = np.zeros(int(0.002 * fs) + 1)
    g_ir[-1] = 1.0
    m = simulate_closed_loop(np.convolve(g_ir, f_ir), x, fs, gain_db=G_DB, limiter_dbfs=None)
    if howl_hz is not None:
        t = np.arange(n) / fs
        lv = np.where(t < 6.0, -200.0, np.minimum(-60.0 + 30.0 * (t - 6.0), -12.0))
        m = m + 10 ** (lv / 20) * np.sin(2 * np.pi * howl_hz * t)
    u = lfilter(g_ir, [1.0], m) * 10 ** (G_DB / 20)
    return np.column_stack([u, m])


def _fake_input(y2, realtime=False):
    from howl.listen.live import ArraySource

    class Pair:
        """A (frames, 2) recording as LiveInput(device, [send, mic]) would deliver it."""

        def __init__(self, device, channel, channel_options=None):
            self.channels = channel
            self.mono = isinstance(channel, int)
            cols = y2[:, 1] if self.mono else y2
            self._a = ArraySource(np.arange(y2.shape[0], dtype=float), float(FS), realtime=realtime)
            self._y = cols
            self.sample_rate_hz = float(FS)
            self.overflows = 0
            self.device = type("D", (), {"label": "recording"})()

        @property
        def exhausted(self):
            return self._a.exhausted

        def read(self, timeout_s=0.1):
            idx = self._a.read(timeout_s)
            return None if idx is None else self._y[idx.astype(int)]

        def close(self):
            pass

    return Pair


def test_listen_with_a_send_channel_adds_the_loop_margin_and_keeps_listens_json(monkeypatch):
    from typer.testing import CliRunner

    import howl.measure.audio as audio
    from howl.cli import app

    y2 = send_and_mic(howl_hz=1234.5)
    monkeypatch.setattr(audio, "LiveInput", _fake_input(y2))
    base = ["listen", "--device", "rec", "--duration", str(DUR_S), "--json"]
    res = CliRunner().invoke(app, base + ["--view", "web", "--send-channel", "2", "--in-channel", "1"])
    assert res.exit_code == 0, res.output
    both = json.loads(res.stdout)
    alone = CliRunner().invoke(app, base)  # the mic alone, terminal view
    assert alone.exit_code == 0, alone.output
    lm = both.pop("loop_margin")
    assert both == json.loads(alone.stdout)  # listen's report is the same with the tracker beside it
    est = lm["estimates"]
    # one estimate a second of audio (issue 23), the last at the end of the 12 s
    assert [round(e["time_s"]) for e in est] == list(range(1, int(DUR_S) + 1))
    assert lm["warn_db"] == 3.0
    # the howl the detector found is the tone's (derived: 1234.5 Hz by construction)
    assert both["events"] and abs(both["events"][0]["freq_hz"] / 1234.5 - 1) < 1e-3


@pytest.mark.parametrize("args, key", [
    (["--send-channel", "2"], "--send-channel"),  # without --view web
    (["--view", "web", "--send-channel", "1"], "--send-channel"),  # the mic's own channel
    (["--view", "web", "--send-channel", "0"], "--send-channel"),
    (["--view", "web", "--warn-db", "4"], "--warn-db"),  # without --send-channel
])
def test_bad_send_options_say_so_in_one_line(args, key):
    from typer.testing import CliRunner

    from howl.cli import app

    res = CliRunner().invoke(app, ["listen", "--device", "x", "--duration", "1", *args])
    assert res.exit_code == 2 and key in res.output and "Traceback" not in res.output


def test_in_a_browser_the_margin_shown_equals_the_jsons(tmp_path):
    """Headless Chromium on the page while the recording plays at real speed through the detector and
    the tracker: once the audio has ended, the margin the page shows (now, ±, the frequency that howls
    first, the warning threshold) is /state's, which is the tracker's last estimate."""
    import threading
    import urllib.request

    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    from _browser import chromium
    from howl.cli._webview import WebView
    from howl.listen.live import CAUTIONS, listen

    y2 = send_and_mic(howl_hz=1234.5)
    view = WebView(command="listen + track", label="test recording", sample_rate_hz=FS, cautions=CAUTIONS).start()
    driver = chromium(tmp_path / "profile")
    try:
        driver.get(view.server.url)
        WebDriverWait(driver, 30).until(lambda d: d.find_element(By.ID, "link").text == "live")
        pair = view.track_send(_fake_input(y2, realtime=True)("rec", [2, 1]))
        done = threading.Event()

        def run():
            listen(view.tap_source(pair), on_update=view.on_listen_update, update_interval_s=0.08)
            pair.finish()
            done.set()

        th = threading.Thread(target=run)
        th.start()
        th.join(timeout=120)
        assert done.is_set()
        state = json.loads(urllib.request.urlopen(view.server.url + "state", timeout=10).read())
        # the page has drawn the last update (polled, not timed)
        WebDriverWait(driver, 30, poll_frequency=0.05).until(
            lambda d: d.execute_script("return document.body.dataset.seq") == str(state["seq"]))
        driver.save_screenshot(str(tmp_path / "listen_and_track.png"))
        shown = {k: driver.find_element(By.ID, k).text for k in ("margin-now", "margin-pm", "margin-freq")}
        box_hidden = driver.find_element(By.ID, "margin-box").get_attribute("hidden")
    finally:
        driver.quit()
        view.stop()
    now = state["margin"]["now"]
    last = pair.estimates[-1]
    assert now["time_s"] == round(last["time_s"], 3) and now["gain_margin_db"] == round(last["gain_margin_db"], 3)
    assert box_hidden is None
    # one decimal on the page, the minus sign typeset; the frequency in Hz or kHz
    assert float(shown["margin-now"].replace("−", "-")) == round(now["gain_margin_db"], 1), shown
    assert shown["margin-pm"] == f"± {now['uncertainty_db']:.1f}"
    f = now["howl_freq_hz"]
    assert shown["margin-freq"] == (f"{f / 1000:.3f} kHz" if 1000 <= f < 10000 else f"{f:.1f} Hz"), shown
    assert state["margin"]["warn_db"] == 3.0 and len(state["margin"]["history"]) == len(pair.estimates)
    assert (tmp_path / "listen_and_track.png").stat().st_size > 10_000


def test_listen_with_a_send_channel_through_the_jack_loopback(tmp_path):
    """For real: a two-channel file [send, mic] (the closed loop above at 48 kHz with a howl at the
    mic) is played into the JACK loopback while `python -m howl listen --device 'loopback, JACK'
    --in-channel 2 --send-channel 1 --view web --json` runs in another process (LiveInput with two
    channels). The howl comes out at its frequency, and the margin estimates come once a second.
    Needs jackd with its loopback ports (JACK_DEFAULT_SERVER); skips without, fails under CI
    (HOWL_REQUIRE_AUDIO_LOOPBACK), as tests/listen/test_listen_loopback.py."""
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "listen"))
    from conftest import require_or_skip
    from test_listen_loopback import _env, _loopback_available, run_while_playing

    from howl.fileio import write_wav_atomic

    env = _env()
    ok, why = _loopback_available(env)
    require_or_skip(ok, why)
    fs = 48000
    y2 = send_and_mic(howl_hz=2345.6, dur_s=10.0, fs=fs)
    wav = tmp_path / "send_mic.wav"
    write_wav_atomic(wav, y2.astype(np.float32), fs)
    rc, out, err, seen = run_while_playing(
        ["listen", "--device", "loopback, JACK", "--in-channel", "2", "--send-channel", "1", "--view", "web",
         "--duration", "12", "--json"], wav, env, "live page:")
    assert any(s.startswith("live page: http://127.0.0.1:") for s in seen), err
    assert rc == 0, err
    rep = json.loads(out)
    howls = [e for e in rep["events"] if e["kind"] == "howl"]
    assert howls and abs(howls[0]["freq_hz"] / 2345.6 - 1) < 1e-3, rep["events"]
    est = rep["loop_margin"]["estimates"]
    # one a second of audio (issue 23): 12 s of capture
    assert [round(e["time_s"]) for e in est] == list(range(1, 13))
    assert isinstance(rep["overflows"], int)
