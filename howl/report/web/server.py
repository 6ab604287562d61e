"""The live page's server: the standard library's threading HTTP server with server-sent events.

Routes (GET and HEAD only: the page is read-only, anything else is 405):
``/`` the page, ``/view.js`` and ``/view.css`` its assets (package data, no network),
``/state`` the live state as one JSON object, ``/stream`` the same state pushed as server-sent
events on every update. With a token (``--share``) every route needs ``?k=<token>`` and answers
403 without it; the page carries the token into its own requests.
"""

from __future__ import annotations

import hmac
import secrets
import socket
import socketserver
import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from importlib import resources
from urllib.parse import parse_qs, urlsplit

#: Seconds between keep-alive comments on an idle event stream (so a dead client is noticed).
KEEPALIVE_S = 5.0
#: A stream whose client takes longer than this to accept a write is closed (so a dead or stalled
#: tablet cannot hold the program at exit); ``stop`` waits at most this long for the streams.
STREAM_WRITE_TIMEOUT_S = 5.0
_ASSETS = {"/view.js": ("view.js", "text/javascript; charset=utf-8"),
           "/view.css": ("view.css", "text/css; charset=utf-8")}
_HEADERS = {"Cache-Control": "no-store", "X-Content-Type-Options": "nosniff", "Referrer-Policy": "no-referrer",
            "Content-Security-Policy": "default-src 'self'; img-src 'self' data:; style-src 'self'; "
                                       "script-src 'self'; connect-src 'self'; frame-ancestors 'none'"}


def _asset(name: str) -> bytes:
    return resources.files("howl.report.web").joinpath("assets", name).read_bytes()


def lan_address() -> str:
    """This machine's address on the local network (the interface a packet to the LAN would
    leave by; nothing is sent), or 127.0.0.1 when there is none."""
    s = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    try:
        s.connect(("10.255.255.255", 1))
        return s.getsockname()[0]
    except OSError:
        return "127.0.0.1"
    finally:
        s.close()


def new_token() -> str:
    return secrets.token_urlsafe(16)


class _Handler(BaseHTTPRequestHandler):
    server_version = "howl-view"
    sys_version = ""
    protocol_version = "HTTP/1.1"

    def log_message(self, format, *args):  # noqa: A002 - the base class's name
        pass  # quiet: the terminal belongs to the command

    # -------------------------------------------------------------- routing
    def do_GET(self):
        self._route(head=False)

    def do_HEAD(self):
        self._route(head=True)

    def _refuse(self):
        self._send(405, b"read-only: GET only\n", "text/plain; charset=utf-8", extra={"Allow": "GET, HEAD"})

    do_POST = do_PUT = do_DELETE = do_PATCH = do_OPTIONS = _refuse

    def _route(self, head: bool):
        url = urlsplit(self.path)
        token = self.server.token
        if token is not None:
            given = parse_qs(url.query).get("k", [""])[0]
            if not hmac.compare_digest(given.encode(), token.encode()):
                self._send(403, b"forbidden: this page needs the link with its key\n", "text/plain; charset=utf-8")
                return
        path = url.path
        if path in ("/", "/index.html"):
            q = "" if token is None else f"?k={token}"
            body = _asset("page.html").replace(b"{{Q}}", q.encode())
            self._send(200, body, "text/html; charset=utf-8", head=head)
        elif path in _ASSETS:
            name, ctype = _ASSETS[path]
            self._send(200, _asset(name), ctype, head=head)
        elif path == "/state":
            self._send(200, self.server.state.payload()[1].encode(), "application/json", head=head)
        elif path == "/stream" and not head:
            self._stream()
        else:
            self._send(404, b"not found\n", "text/plain; charset=utf-8", head=head)

    def _send(self, code: int, body: bytes, ctype: str, head: bool = False, extra=None):
        self.send_response(code)
        self.send_header("Content-Type", ctype)
        self.send_header("Content-Length", str(len(body)))
        for k, v in {**_HEADERS, **(extra or {})}.items():
            self.send_header(k, v)
        self.end_headers()
        if not head:
            self.wfile.write(body)

    def _stream(self):
        """Server-sent events: the newest state, then every later update in order (each as one
        ``data:`` line with its ``id``), then ``event: end`` once the update that says the audio
        ended has gone out. A browser that reconnects sends ``Last-Event-ID`` and gets the updates
        after it. The stream is counted open from before its headers go out, so :meth:`LiveServer.stop`
        waits for it to send its last update and the end."""
        state = self.server.state
        self.server.open_streams.acquire()
        try:
            self.connection.settimeout(STREAM_WRITE_TIMEOUT_S)  # a client that stops reading is let go
            seq, text, ended = state.latest()
            resume = _last_event_id(self.headers.get("Last-Event-ID"))
            self.send_response(200)
            self.send_header("Content-Type", "text/event-stream")
            for k, v in _HEADERS.items():
                self.send_header(k, v)
            self.send_header("Connection", "close")
            self.end_headers()
            self.close_connection = True
            if resume is not None and 0 <= resume < seq:
                updates, skipped = state.updates_after(resume, 0.0)
            else:
                updates, skipped = [(seq, text, ended)], 0
            while True:
                if skipped:
                    self.wfile.write(b": %d updates skipped (this client fell behind)\n\n" % skipped)
                if not updates:
                    self.wfile.write(b": idle\n\n")
                for seq, text, ended in updates:
                    self.wfile.write(b"id: %d\ndata: %s\n\n" % (seq, text.encode()))
                if ended:
                    self.wfile.write(b"event: end\ndata: {}\n\n")
                self.wfile.flush()
                if ended or self.server.stopping.is_set():
                    break
                updates, skipped = state.updates_after(seq, KEEPALIVE_S)
                if updates:
                    ended = updates[-1][2]
        except (BrokenPipeError, ConnectionResetError, TimeoutError):
            pass
        finally:
            self.server.open_streams.release()


def _last_event_id(text):
    try:
        return int(text) if text is not None else None
    except ValueError:
        return None


class _OpenCount:
    """How many event streams are open (so ``stop`` can let each send its last update)."""

    def __init__(self):
        self._n = 0
        self._cond = threading.Condition()

    def acquire(self):
        with self._cond:
            self._n += 1

    def release(self):
        with self._cond:
            self._n -= 1
            self._cond.notify_all()

    def wait_zero(self, timeout_s: float) -> bool:
        with self._cond:
            return self._cond.wait_for(lambda: self._n == 0, timeout=timeout_s)


class _Server(ThreadingHTTPServer):
    daemon_threads = True
    allow_reuse_address = True  # a restart may take the same --port at once (Linux: never two listeners)

    def server_bind(self):
        """Bind without HTTPServer's reverse DNS lookup of the host (slow or hanging off-line)."""
        socketserver.TCPServer.server_bind(self)
        host, port = self.server_address[:2]
        self.server_name, self.server_port = host, port


class LiveServer:
    """Serve ``state`` on ``host:port`` (port 0: a free one) in a background thread.

    ``token``: None for the laptop-only default (127.0.0.1); a string for ``--share``, which
    every request must carry as ``?k=``. ``url`` is the link to print.
    """

    def __init__(self, state, host: str = "127.0.0.1", port: int = 0, token: str | None = None):
        self.state = state
        self._srv = _Server((host, int(port)), _Handler)
        self._srv.state = state
        self._srv.token = token
        self._srv.stopping = threading.Event()
        self._srv.open_streams = _OpenCount()
        self.token = token
        self._thread = None

    @property
    def address(self) -> tuple[str, int]:
        return self._srv.server_address[:2]

    @property
    def url(self) -> str:
        host, port = self.address
        return f"http://{host}:{port}/" + ("" if self.token is None else f"?k={self.token}")

    def start(self) -> "LiveServer":
        self._thread = threading.Thread(target=self._srv.serve_forever, kwargs={"poll_interval": 0.2},
                                        name="howl-view", daemon=True)
        self._thread.start()
        return self

    def stop(self) -> None:
        """End every stream (every update still unsent, the last one, then the end go out), stop
        accepting, close the socket. Waits for the open streams (at most about
        ``STREAM_WRITE_TIMEOUT_S``: a client that stopped reading is let go)."""
        self.state.end()  # from here the state publishes nothing more: the streams can finish
        if self._thread is not None:
            self._srv.shutdown()  # no new connection is taken after this returns
        self._srv.open_streams.wait_zero(STREAM_WRITE_TIMEOUT_S + 1.0)
        self._srv.stopping.set()
        self._srv.server_close()
        if self._thread is not None:
            self._thread.join(timeout=5)

    def __enter__(self):
        return self.start()

    def __exit__(self, *exc):
        self.stop()
