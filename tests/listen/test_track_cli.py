"""`howl track REC.wav`: the JSON contract, the log, the saved loop, and bad input.

The recording is a closed loop of tests/listen/track_cases.py (pyroomacoustics room, the project's
exact simulator); the saved loop IR is checked against ``howl margin`` on the same file (the issue
asks that margin reads it), the contract's field names against issue 23's text.
"""

from __future__ import annotations

import functools
import json

import numpy as np
import pytest
from typer.testing import CliRunner

import track_cases as C
from howl.cli import app
from howl.fileio import write_wav_atomic

runner = CliRunner()


@functools.lru_cache(maxsize=None)
def _loop_signals():
    u, m, before, _a, _f, _g = C.render(C.HELDOUT[0], 6.0)
    return u, m, before


def _rec(tmp_path, name="rec.wav", send=None, mic=None):
    u, m, _ = _loop_signals()
    u = u if send is None else send
    m = m if mic is None else mic
    path = tmp_path / name
    write_wav_atomic(path, np.stack([m, np.zeros_like(m) + 1e-4 * np.sign(m), u], axis=1), C.FS)
    return path


def test_json_contract_log_and_saved_loop(tmp_path):
    path = _rec(tmp_path)
    log = tmp_path / "track.jsonl"
    loop = tmp_path / "loop.wav"
    res = runner.invoke(app, ["track", str(path), "--send-channel", "3", "--mic-channel", "1", "--json",
                              "--log", str(log), "--save-loop", str(loop)])
    assert res.exit_code == 0, res.output
    rep = json.loads(res.stdout)
    # issue 23: one object with sample_rate_hz, estimates {time_s, gain_margin_db, howl_freq_hz,
    # magnitude_margin_db, uncertainty_db} (at least one per second once estimating) and events
    assert rep["sample_rate_hz"] == C.FS
    assert isinstance(rep["events"], list)
    times = [e["time_s"] for e in rep["estimates"]]
    assert times == pytest.approx([1, 2, 3, 4, 5, 6])
    for e in rep["estimates"]:
        assert {"time_s", "gain_margin_db", "howl_freq_hz", "magnitude_margin_db", "uncertainty_db"} <= set(e)
    lines = [json.loads(x) for x in log.read_text().splitlines()]
    assert [x["estimate"]["time_s"] for x in lines if "estimate" in x] == times
    assert all("logged_utc" in x and "overflows" in x for x in lines)
    # howl margin reads the saved loop and finds the same margin as the last estimate
    res2 = runner.invoke(app, ["margin", str(loop), "--json"])
    assert res2.exit_code == 0, res2.output
    last = rep["estimates"][-1]
    assert json.loads(res2.stdout)["gain_margin_db"] == pytest.approx(last["gain_margin_db"], abs=0.05)


@pytest.mark.parametrize("args, needle", [
    (["--send-channel", "1", "--mic-channel", "1"], "--mic-channel"),
    (["--send-channel", "4", "--mic-channel", "1"], "--send-channel"),
    (["--send-channel", "3", "--mic-channel", "9"], "--mic-channel"),
    (["--send-channel", "3"], "--mic-channel"),
])
def test_bad_channels_are_one_line_errors(tmp_path, args, needle):
    path = _rec(tmp_path)
    res = runner.invoke(app, ["track", str(path), *args])
    assert res.exit_code == 2
    err = res.stderr.strip().splitlines()
    assert len(err) == 1 and needle in err[0], res.stderr


def test_a_mono_file_is_refused(tmp_path):
    u, m, _ = _loop_signals()
    path = tmp_path / "mono.wav"
    write_wav_atomic(path, m, C.FS)
    res = runner.invoke(app, ["track", str(path), "--send-channel", "1", "--mic-channel", "2"])
    assert res.exit_code == 2
    assert "mono" in res.stderr and len(res.stderr.strip().splitlines()) == 1


def test_a_silent_send_and_a_send_equal_to_the_mic_warn(tmp_path):
    u, m, _ = _loop_signals()
    silent = _rec(tmp_path, "silent.wav", send=np.zeros_like(u))
    res = runner.invoke(app, ["track", str(silent), "--send-channel", "3", "--mic-channel", "1", "--json"])
    assert res.exit_code == 0
    rep = json.loads(res.stdout)
    assert "silent" in res.stderr and any(e["kind"] == "silent_send" for e in rep["events"])
    assert all(e["status"] != "ok" for e in rep["estimates"])
    same = _rec(tmp_path, "same.wav", send=m)
    res = runner.invoke(app, ["track", str(same), "--send-channel", "3", "--mic-channel", "1", "--json"])
    assert res.exit_code == 0
    assert "same signal" in res.stderr
    assert any(e["kind"] == "send_equals_mic" for e in json.loads(res.stdout)["events"])


def test_the_web_view_gets_every_estimate_in_its_margin_panel(tmp_path, monkeypatch):
    # the page's /state is LiveState.snapshot(); read it when the run ends, before the server stops
    from howl.cli import _webview

    seen = {}
    stop = _webview.WebView.stop

    def _stop(self):
        seen["state"] = self.state.snapshot()
        stop(self)

    monkeypatch.setattr(_webview.WebView, "stop", _stop)
    path = _rec(tmp_path)
    res = runner.invoke(app, ["track", str(path), "--send-channel", "3", "--mic-channel", "1", "--json",
                              "--view", "web", "--warn-db", "4"])
    assert res.exit_code == 0, res.output
    rep = json.loads(res.stdout)
    panel = seen["state"]["margin"]
    assert panel["now"]["gain_margin_db"] == pytest.approx(rep["estimates"][-1]["gain_margin_db"], abs=0.01)
    assert panel["warn_db"] == 4.0
    assert len(panel["history"]) == len(rep["estimates"])
