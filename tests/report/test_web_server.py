"""The live page's server: loopback only by default, a key for sharing (403 without it), read-only,
/state and /stream, and `howl listen --view web` end to end with a recording as the input."""

from __future__ import annotations

import http.client
import json
import socket
import threading
import urllib.error
import urllib.request

import numpy as np
import pytest

from howl.report.web import LiveServer, LiveState, lan_address


def _get(url: str, method: str = "GET"):
    req = urllib.request.Request(url, method=method)
    try:
        with urllib.request.urlopen(req, timeout=10) as r:
            return r.status, r.read(), dict(r.headers)
    except urllib.error.HTTPError as e:
        return e.code, e.read(), dict(e.headers)


def _listening_addresses(port: int) -> set[str]:
    """Local addresses of every listening TCP socket on ``port`` on this machine (/proc/net/tcp, tcp6)."""
    out = set()
    for name, width in (("/proc/net/tcp", 8), ("/proc/net/tcp6", 32)):
        try:
            lines = open(name, encoding="ascii").read().splitlines()[1:]
        except OSError:
            continue
        for ln in lines:
            f = ln.split()
            addr, p = f[1].split(":")
            if f[3] == "0A" and int(p, 16) == port:  # 0A: TCP_LISTEN (linux/include/net/tcp_states.h)
                raw = bytes.fromhex(addr)
                if width == 8:
                    out.add(socket.inet_ntop(socket.AF_INET, raw[::-1]))
                else:
                    words = b"".join(raw[i:i + 4][::-1] for i in range(0, 16, 4))
                    out.add(socket.inet_ntop(socket.AF_INET6, words))
    return out


def test_without_share_nothing_listens_but_on_127_0_0_1():
    from howl.cli._webview import WebView

    with WebView(command="listen", label="t", sample_rate_hz=48000.0) as view:
        host, port = view.server.address
        assert host == "127.0.0.1" and view.server.url.startswith("http://127.0.0.1:")
        assert _listening_addresses(port) == {"127.0.0.1"}
        lan = lan_address()
        if not lan.startswith("127."):
            with pytest.raises(OSError):
                socket.create_connection((lan, port), timeout=2).close()
        assert _get(view.server.url + "state")[0] == 200
    assert _listening_addresses(port) == set()  # stopped: the port is closed


def test_with_a_key_every_route_refuses_a_request_without_it():
    state = LiveState()
    with LiveServer(state, token="s3cret-key") as srv:
        base = "http://127.0.0.1:%d" % srv.address[1]
        for path in ("/", "/state", "/view.js", "/view.css", "/stream", "/nothing"):
            assert _get(base + path)[0] == 403, path
            assert _get(base + path + "?k=wrong")[0] == 403, path
        code, body, _ = _get(base + "/?k=s3cret-key")
        assert code == 200
        # the page carries the key into its own requests
        assert b"/view.js?k=s3cret-key" in body and b'data-q="?k=s3cret-key"' in body
        assert _get(base + "/state?k=s3cret-key")[0] == 200
        assert srv.url == base + "/?k=s3cret-key"


def test_share_binds_the_lan_address_and_needs_the_key():
    from howl.cli._webview import WebView

    lan = lan_address()
    if lan.startswith("127."):
        pytest.skip("this machine has no LAN address")
    with WebView(command="listen", label="t", sample_rate_hz=48000.0, share=True) as view:
        host, port = view.server.address
        assert host == lan and _listening_addresses(port) == {lan}
        assert _get(f"http://{lan}:{port}/state")[0] == 403
        assert _get(view.server.url)[0] == 200


def test_the_page_is_read_only():
    state = LiveState()
    with LiveServer(state) as srv:
        seq = state.payload()[0]
        for method in ("POST", "PUT", "DELETE", "PATCH"):
            code, _, headers = _get(srv.url + "state", method=method)
            assert code == 405 and headers["Allow"] == "GET, HEAD"
        assert state.payload()[0] == seq
        code, body, headers = _get(srv.url)
        assert code == 200 and "default-src 'self'" in headers["Content-Security-Policy"]
        # no network: nothing on the page points off the server
        for name in ("", "view.js", "view.css"):
            text = _get(srv.url + name)[1].decode()
            assert "http://" not in text and "https://" not in text and "//cdn" not in text


def _read_stream(resp, got: list, events: list, delay_s: float = 0.0):
    """Parse server-sent events from ``resp`` into ``got`` (the data objects) and ``events`` (event
    names), after waiting ``delay_s`` (a client that reads late)."""
    import time

    time.sleep(delay_s)
    kind = "message"
    for raw in resp:
        line = raw.decode().rstrip("\n")
        if line.startswith("event: "):
            kind = line[7:]
            events.append(kind)
        elif line.startswith("data: ") and kind == "message":
            got.append(json.loads(line[6:]))
        elif not line:
            kind = "message"


def _open_stream(srv, headers=None):
    host, port = srv.address
    conn = http.client.HTTPConnection(host, port, timeout=30)
    conn.request("GET", "/stream", headers=headers or {})
    resp = conn.getresponse()
    assert resp.status == 200 and resp.getheader("Content-Type") == "text/event-stream"
    return conn, resp


@pytest.mark.parametrize("read_delay_s", [0.0, 0.5])
def test_the_stream_pushes_every_update_in_order_and_ends_when_the_audio_ends(read_delay_s):
    """The client reads at once or only after the audio has ended and the server stopped: either way
    it gets the state at connection, every one of the 20 updates in order, the last state (ended),
    then the end (the audio thread never waits for the client)."""
    from howl.listen.live import Snapshot

    state = LiveState()
    srv = LiveServer(state).start()
    conn, resp = _open_stream(srv)
    got, events = [], []
    th = threading.Thread(target=_read_stream, args=(resp, got, events, read_delay_s))
    th.start()
    for i in range(20):
        state.update(Snapshot(float(i), -30.0, (), (), (), (), 0))
    srv.stop()  # ends the stream: the updates not yet sent, the last update, then "end"
    th.join(timeout=30)
    conn.close()
    seqs = [g["seq"] for g in got]
    # derived: seq 0 is the empty state at connection, 1..20 the updates, 21 the end of the audio
    assert seqs == list(range(22)) and events == ["end"]
    assert [g["elapsed_s"] for g in got] == [0.0] + [float(i) for i in range(20)] + [19.0]
    assert [g["ended"] for g in got] == [False] * 21 + [True]


def test_a_client_that_connects_after_the_audio_ended_gets_the_last_state_and_the_end():
    from howl.listen.live import Snapshot

    state = LiveState()
    with LiveServer(state) as srv:
        state.update(Snapshot(3.0, -30.0, (), (), (), (), 0))
        state.end()
        state.update(Snapshot(4.0, -30.0, (), (), (), (), 0))  # after the end: ignored
        conn, resp = _open_stream(srv)
        got, events = [], []
        _read_stream(resp, got, events)
        conn.close()
    assert [(g["seq"], g["elapsed_s"], g["ended"]) for g in got] == [(2, 3.0, True)] and events == ["end"]


def test_a_reconnecting_page_gets_the_updates_after_its_last_event_id():
    """A browser's EventSource reconnects with Last-Event-ID (WHATWG HTML, server-sent events §9.2):
    the stream resumes after it, nothing lost or repeated."""
    from howl.listen.live import Snapshot

    state = LiveState()
    with LiveServer(state) as srv:
        for i in range(6):
            state.update(Snapshot(float(i), -30.0, (), (), (), (), 0))
        state.end()
        conn, resp = _open_stream(srv, {"Last-Event-ID": "3"})
        got, events = [], []
        _read_stream(resp, got, events)
        conn.close()
    assert [g["seq"] for g in got] == [4, 5, 6, 7] and got[-1]["ended"] is True and events == ["end"]


def test_listen_view_web_runs_on_a_recording_and_keeps_its_json(monkeypatch, tmp_path):
    """`howl listen --view web --json`: the link on stderr, the same JSON on stdout as the terminal view."""
    from typer.testing import CliRunner

    import howl.measure.audio as audio
    from howl.cli import app
    from howl.listen.live import ArraySource

    fs = 48000
    t = np.arange(4 * fs) / fs
    level_db = np.where(t < 1.0, -200.0, np.minimum(-60.0 + 30.0 * (t - 1.0), -10.0))
    y = 1e-3 * np.random.default_rng(3).standard_normal(t.size) + 10 ** (level_db / 20) * np.sin(2 * np.pi * 1500.0 * t)

    class FakeInput(ArraySource):
        def __init__(self, device, channel):
            super().__init__(y, float(fs))
            self.device = type("D", (), {"label": "recording"})()

    monkeypatch.setattr(audio, "LiveInput", FakeInput)
    outs = {}
    for view in ("terminal", "web"):
        res = CliRunner().invoke(app, ["listen", "--device", "rec", "--duration", "4", "--json", "--view", view])
        assert res.exit_code == 0, res.output
        outs[view] = json.loads(res.stdout)
        if view == "web":
            assert "live page: http://127.0.0.1:" in res.stderr
    assert outs["web"] == outs["terminal"]
    assert outs["web"]["events"] and abs(outs["web"]["events"][0]["freq_hz"] / 1500.0 - 1) < 1e-3


@pytest.mark.parametrize("args, key", [
    (["--view", "tablet"], "--view"),
    (["--port", "8080"], "--port"),
    (["--share"], "--share"),
    (["--view", "web", "--port", "70000"], "--port"),
])
def test_bad_view_options_say_so_in_one_line(args, key):
    from typer.testing import CliRunner

    from howl.cli import app

    res = CliRunner().invoke(app, ["listen", "--device", "x", "--duration", "1", *args])
    assert res.exit_code == 2 and key in res.output and "Traceback" not in res.output


def test_a_port_in_use_or_no_lan_address_is_one_input_error(monkeypatch):
    import howl.report.web.server as server
    from howl.cli._webview import WebView
    from howl.errors import InputError

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        s.listen()
        busy = s.getsockname()[1]
        with pytest.raises(InputError) as e:
            WebView(command="listen", label="t", sample_rate_hz=48000.0, port=busy).start()
        assert e.value.key == "--port"
    monkeypatch.setattr(server, "lan_address", lambda: "127.0.0.1")
    with pytest.raises(InputError) as e:
        WebView(command="listen", label="t", sample_rate_hz=48000.0, share=True).start()
    assert e.value.key == "--share"


def test_ctrl_c_stops_the_listen_loop_and_the_page_cleanly(monkeypatch):
    """Ctrl-C (KeyboardInterrupt raised while reading the input) ends the run: summary printed,
    exit 0, the page's port closed."""
    from typer.testing import CliRunner

    import howl.cli._webview as webview
    import howl.measure.audio as audio
    from howl.cli import app
    from howl.listen.live import ArraySource

    seen = {}

    class InterruptedInput(ArraySource):
        def __init__(self, device, channel):
            super().__init__(np.zeros(48000 * 60), 48000.0)
            self.device = type("D", (), {"label": "interrupted"})()

        def read(self, timeout_s=0.1):
            if self._pos >= 48000:
                raise KeyboardInterrupt
            return super().read(timeout_s)

    real_start = webview.WebView.start

    def start(self):
        out = real_start(self)
        seen["port"] = self.server.address[1]
        return out

    monkeypatch.setattr(audio, "LiveInput", InterruptedInput)
    monkeypatch.setattr(webview.WebView, "start", start)
    res = CliRunner().invoke(app, ["listen", "--device", "x", "--view", "web"])
    assert res.exit_code == 0, res.output
    assert "stopped (Ctrl-C)" in res.stdout and "live page: http://127.0.0.1:" in res.stdout
    assert _listening_addresses(seen["port"]) == set()


def test_a_client_that_stops_reading_cannot_hold_the_server_at_the_end():
    """A tablet that connected and then stalled (it never reads): the stream gives up after its write
    timeout, so stop() returns and the port closes (the audio side never waits for a client)."""
    from howl.report.web.server import STREAM_WRITE_TIMEOUT_S

    state = LiveState(label="x" * 200_000)  # 200 kB updates: the socket's buffers fill within a few
    srv = LiveServer(state).start()
    port = srv.address[1]
    s = socket.create_connection(("127.0.0.1", port), timeout=10)
    s.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 4096)
    s.sendall(b"GET /stream HTTP/1.1\r\nHost: x\r\n\r\n")
    from howl.listen.live import Snapshot

    for i in range(100):  # 20 MB offered to a client that reads nothing
        state.update(Snapshot(float(i), -30.0, (), (), (), (), 0))
    done = threading.Event()
    threading.Thread(target=lambda: (srv.stop(), done.set()), daemon=True).start()
    # derived: the stream's write gives up after STREAM_WRITE_TIMEOUT_S; stop() waits that plus 1 s
    assert done.wait(timeout=4 * STREAM_WRITE_TIMEOUT_S + 10)
    assert _listening_addresses(port) == set()
    assert srv._srv.open_streams.wait_zero(0.0)  # the stalled stream was let go, not left blocked
    s.close()
