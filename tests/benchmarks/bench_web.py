"""Benchmark: the live page (`howl listen --view web`), from an audio block to its update on the page.

A recording (tests/report/test_web_keepup.clip: program-like noise with a 1 kHz howl every 10 s,
looped) goes through the live loop at real speed (``ArraySource(realtime=True)``, 1024-frame
blocks at 48 kHz) while headless Chromium shows the page. The page notes, after each redraw,
``Date.now() - block_wall_s`` (the wall-clock time when the newest block in that update was
read from the source): the delay covers the detector's work on the block, the snapshot, the
spectrum, the JSON, the event stream and the page's parsing and drawing (not the screen's paint).

CPU share of the view: the process's CPU time (time.process_time, all threads) over the same
run with the page and without any view, divided by the wall time; and the browser's own CPU
(Chromium's processes, /proc) per wall second. BLAS threads pinned to 1.

With ``--send``: ``listen --send-channel``'s path, the loop tracker beside the detector in the same
thread (howl.cli._webview.SendTracker) on a two-channel closed loop of our own
(tests/report/test_web_track.send_and_mic at 48 kHz); "without the page" is then the detector and
the tracker without any view.

Run by hand: ``python tests/benchmarks/bench_web.py [--seconds 60] [--send]``; prints a table and
writes tests/benchmarks/results/bench_web.json (bench_web_send.json with ``--send``).
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse  # noqa: E402
import json  # noqa: E402
import platform  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import threading  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "report"))
FS = 48000
LATE_S = 0.5


def cpu_model() -> str:
    try:
        for line in open("/proc/cpuinfo", encoding="ascii", errors="replace"):
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def _tree_cpu_s(root_pid: int) -> float:
    """CPU seconds (user + system) of ``root_pid`` and all its descendants (/proc/<pid>/stat)."""
    tick = os.sysconf("SC_CLK_TCK")
    stats = {}
    for d in os.listdir("/proc"):
        if d.isdigit():
            try:
                raw = open(f"/proc/{d}/stat", encoding="ascii", errors="replace").read()
            except OSError:
                continue
            f = raw[raw.rindex(")") + 2:].split()
            stats[int(d)] = (int(f[1]), (int(f[11]) + int(f[12])) / tick)
    keep, total, grown = {root_pid}, 0.0, True
    while grown:
        grown = False
        for pid, (ppid, _) in stats.items():
            if ppid in keep and pid not in keep:
                keep.add(pid)
                grown = True
    for pid in keep:
        total += stats.get(pid, (0, 0.0))[1]
    return total


def recording(seconds: float) -> np.ndarray:
    from test_web_keepup import clip

    x = clip()
    return np.tile(x, int(np.ceil(seconds * FS / x.size)))[: int(seconds * FS)]


class PairSource:
    """A (frames, 2) [send, mic] recording in 1024-frame blocks at real speed (as LiveInput with two
    channels delivers it)."""

    def __init__(self, y2: np.ndarray):
        from howl.listen.live import ArraySource

        self._i = ArraySource(np.arange(y2.shape[0], dtype=float), FS, realtime=True)
        self.y2, self.sample_rate_hz, self.overflows = y2, float(FS), 0

    @property
    def exhausted(self) -> bool:
        return self._i.exhausted

    def read(self, timeout_s: float = 0.1):
        idx = self._i.read(timeout_s)
        return None if idx is None else self.y2[idx.astype(int)]

    def close(self) -> None:
        pass


def _source(y: np.ndarray):
    from howl.listen.live import ArraySource

    return ArraySource(y, FS, realtime=True) if y.ndim == 1 else PairSource(y)


def run_without_view(y: np.ndarray) -> dict:
    from howl.cli._webview import SendTracker
    from howl.listen.live import listen

    t0, c0 = time.monotonic(), time.process_time()
    src = _source(y)
    listen(src if y.ndim == 1 else SendTracker(src, lambda e: None))
    return {"wall_s": time.monotonic() - t0, "cpu_s": time.process_time() - c0}


def run_with_page(y: np.ndarray) -> dict:
    from _browser import chromium

    from howl.cli._webview import UPDATE_INTERVAL_S, WebView
    from howl.listen.live import CAUTIONS, listen

    view = WebView(command="listen", label="bench", sample_rate_hz=FS, cautions=CAUTIONS).start()
    with tempfile.TemporaryDirectory() as prof:
        driver = chromium(Path(prof) / "profile")
        try:
            driver.get(view.server.url)
            while driver.execute_script("return document.getElementById('link').textContent") != "live":
                time.sleep(0.05)
            browser_pid = driver.service.process.pid
            b0 = _tree_cpu_s(browser_pid)
            t0, c0, m0 = time.monotonic(), time.process_time(), time.thread_time()
            acc = {"update_cpu_s": 0.0}

            def on_update(snap):
                u0 = time.thread_time()
                view.on_listen_update(snap)
                acc["update_cpu_s"] += time.thread_time() - u0

            def audio():
                a0 = time.thread_time()
                src = _source(y)
                pair = None if y.ndim == 1 else view.track_send(src)
                listen(view.tap_source(pair or src), on_update=on_update, update_interval_s=UPDATE_INTERVAL_S)
                if pair is not None:
                    pair.finish()
                acc["tracker_cpu_s"] = 0.0 if pair is None else pair.thread_cpu_s
                acc["audio_thread_cpu_s"] = time.thread_time() - a0

            th = threading.Thread(target=audio)
            th.start()
            th.join()
            wall, cpu = time.monotonic() - t0, time.process_time() - c0
            # the server's threads: what the process spent outside the audio thread and this one
            server_cpu = cpu - acc["audio_thread_cpu_s"] - acc["tracker_cpu_s"] - (time.thread_time() - m0)
            browser_cpu = _tree_cpu_s(browser_pid) - b0
            time.sleep(0.5)
            lags = driver.execute_script("return window.howlLags")
        finally:
            driver.quit()
            view.stop()
    ms = np.array([row[1] for row in lags], float)
    pub = np.array([row[2] for row in lags], float)
    return {"wall_s": wall, "cpu_s": cpu, "browser_cpu_s": browser_cpu, "n_updates": int(ms.size),
            "view_update_cpu_s": acc["update_cpu_s"], "server_threads_cpu_s": server_cpu,
            "tracker_thread_cpu_s": acc["tracker_cpu_s"],
            "updates_per_s": ms.size / wall,
            "delay_median_ms": float(np.median(ms)), "delay_p95_ms": float(np.percentile(ms, 95)),
            "delay_max_ms": float(ms.max()), "n_late": int(np.sum(ms > 1000 * LATE_S)),
            "publish_to_page_median_ms": float(np.median(pub)), "publish_to_page_p95_ms": float(np.percentile(pub, 95))}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--seconds", type=float, default=60.0, help="audio fed at real speed in each run")
    ap.add_argument("--send", action="store_true", help="the tracker beside the detector (listen --send-channel)")
    args = ap.parse_args()
    if args.send:
        from test_web_track import send_and_mic

        y = send_and_mic(dur_s=args.seconds, fs=FS, howl_hz=1000.0)
    else:
        y = recording(args.seconds)
    base = run_without_view(y)
    page = run_with_page(y)
    share_view = (page["view_update_cpu_s"] + page["server_threads_cpu_s"]) / page["wall_s"]
    share_diff = (page["cpu_s"] - base["cpu_s"]) / page["wall_s"]
    print(f"{args.seconds:.0f} s of 48 kHz audio at real speed, 1024-frame blocks"
          f"{' (detector and loop tracker)' if args.send else ''}; CPU: {cpu_model()}, "
          f"{os.cpu_count()} cores, load {os.getloadavg()[0]:.1f}")
    print(f"updates on the page: {page['n_updates']} ({page['updates_per_s']:.1f}/s)")
    print(f"block → page: median {page['delay_median_ms']:.1f} ms, p95 {page['delay_p95_ms']:.1f} ms, "
          f"max {page['delay_max_ms']:.1f} ms, {page['n_late']} later than {LATE_S} s; of which from the update's "
          f"publication to the page: median {page['publish_to_page_median_ms']:.1f} ms, "
          f"p95 {page['publish_to_page_p95_ms']:.1f} ms")
    print(f"CPU of one core: without the page {100 * base['cpu_s'] / base['wall_s']:.1f} %, with the page "
          f"{100 * page['cpu_s'] / page['wall_s']:.1f} % (difference {100 * share_diff:.1f} %); the view's own "
          f"threads and calls {100 * share_view:.1f} % (updates {page['view_update_cpu_s']:.2f} s, server "
          f"{page['server_threads_cpu_s']:.2f} s of CPU); "
          f"Chromium drawing it {100 * page['browser_cpu_s'] / page['wall_s']:.1f} %")
    out = {"benchmark": "web" + (" --send" if args.send else ""), "audio_s": args.seconds, "sample_rate_hz": FS, "block_frames": 1024,
           "late_threshold_s": LATE_S, "without_view": base, "with_page": page,
           "view_cpu_share_of_one_core": share_view,
           "cpu_share_difference_with_and_without_page": share_diff,
           "listen_cpu_share_of_one_core": base["cpu_s"] / base["wall_s"],
           "browser_cpu_share_of_one_core": page["browser_cpu_s"] / page["wall_s"],
           "cpu_model": cpu_model(), "cpu_count": os.cpu_count(), "python": platform.python_version(),
           "machine": platform.machine(), "load_average": os.getloadavg()}
    (HERE / "results").mkdir(exist_ok=True)
    name = "bench_web_send.json" if args.send else "bench_web.json"
    (HERE / "results" / name).write_text(json.dumps(out, indent=2), encoding="utf-8")


if __name__ == "__main__":
    main()
