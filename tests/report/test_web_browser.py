"""The live page in a real browser (headless Chromium): a recording with a howl of known
frequency goes through the live loop (howl.listen.live.ArraySource at real speed) while the page
is open; the page itself must mark the followed peak and list the event at that frequency, and
show the margin that /state carries. A screenshot is written under the test's tmp_path.
"""

from __future__ import annotations

import json
import re
import threading
import urllib.request

import numpy as np

from _browser import chromium

FS = 48000
HOWL_HZ = 2345.6  # the tone's frequency: exact by construction (derived)


def howl_recording(seed: int = 7, dur_s: float = 7.0) -> np.ndarray:
    """Program-like noise (our own: white noise through a 1st-order low-pass, -35 dBFS) with a
    tone that rises from 1 s at 30 dB/s (a loop past unity) and holds at -10 dBFS (the limiter)."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(dur_s * FS)) / FS
    a = np.exp(-2 * np.pi * 800 / FS)
    from scipy.signal import lfilter

    noise = lfilter([1 - a], [1, -a], rng.standard_normal(t.size))
    noise *= 10 ** (-35 / 20) / np.sqrt(np.mean(noise ** 2))
    level_db = np.where(t < 1.0, -200.0, np.minimum(-60.0 + 30.0 * (t - 1.0), -10.0))
    return noise + 10 ** (level_db / 20) * np.sin(2 * np.pi * HOWL_HZ * t + 0.3)


_TAG = """for (const t of document.querySelectorAll('#tags .tag'))
  if (t.dataset.state === 'howling') return [t.innerText, parseFloat(t.dataset.freqHz)];
return null;"""
_EVENT = """const e = document.querySelector('#events li.event');
return e ? [e.innerText, parseFloat(e.dataset.freqHz)] : null;"""


def _hz(text: str) -> float:
    m = re.search(r"([\d.]+) (k?)Hz", text)
    return float(m.group(1)) * (1000 if m.group(2) else 1)


def test_the_page_marks_the_howl_lists_its_event_and_shows_the_margin(tmp_path):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    from howl.cli._webview import WebView
    from howl.listen.live import CAUTIONS, ArraySource, listen

    y = howl_recording()
    view = WebView(command="listen", label="test recording", sample_rate_hz=FS, cautions=CAUTIONS).start()
    driver = chromium(tmp_path / "profile")
    try:
        driver.get(view.server.url)
        WebDriverWait(driver, 30).until(lambda d: d.find_element(By.ID, "link").text == "live")
        result = {}
        src = view.tap_source(ArraySource(y, FS, realtime=True))
        run = threading.Thread(target=lambda: result.setdefault(
            "res", listen(src, on_update=view.on_listen_update, update_interval_s=0.08)))
        run.start()
        # margin estimates as a loop-margin tracker would send them (values of our own)
        for i in range(30):
            view.add_margin({"time_s": 2.0 * i, "gain_margin_db": 6.0 - 0.13 * i, "howl_freq_hz": 2340.0 + i,
                             "magnitude_margin_db": 4.5 - 0.1 * i, "uncertainty_db": 0.4 + 0.01 * i,
                             "status": "tracking"})
        # the howl is followed and marked: a tag on the spectrum saying "howling" (polled, not timed)
        # (read in one script call each: the page redraws its elements ten times a second)
        tag_text, tag_hz = WebDriverWait(driver, 60, poll_frequency=0.05).until(lambda d: d.execute_script(_TAG))
        ev_text, ev_hz = WebDriverWait(driver, 60, poll_frequency=0.05).until(lambda d: d.execute_script(_EVENT))
        driver.save_screenshot(str(tmp_path / "live_page.png"))
        margin_text = driver.find_element(By.ID, "margin-now").text
        state = json.loads(urllib.request.urlopen(view.server.url + "state", timeout=10).read())
        run.join(timeout=60)
    finally:
        driver.quit()
        view.stop()
    assert "howling" in tag_text
    assert abs(tag_hz / HOWL_HZ - 1) < 1e-3 and abs(_hz(tag_text) / HOWL_HZ - 1) < 1e-3, tag_text
    assert "howling" in ev_text and "cut" in ev_text
    assert abs(ev_hz / HOWL_HZ - 1) < 1e-3 and abs(_hz(ev_text) / HOWL_HZ - 1) < 1e-3, ev_text
    # the margin shown is the JSON's (one decimal on the page; the minus sign typeset)
    gm = state["margin"]["now"]["gain_margin_db"]
    assert gm == round(6.0 - 0.13 * 29, 3)
    assert float(margin_text.replace("−", "-")) == round(gm, 1)
    assert (tmp_path / "live_page.png").stat().st_size > 10_000
    assert result["res"].report["events"] and abs(result["res"].report["events"][0]["freq_hz"] / HOWL_HZ - 1) < 1e-3
