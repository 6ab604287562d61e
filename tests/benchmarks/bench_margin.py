"""Benchmark: `howl.loop.nyquist_margin` on a 2 s loop IR at 48 kHz.

Target: under 0.2 s of compute (median of repeated runs after a warm-up), on one
core (BLAS threads pinned to 1 before numpy loads). Also times 0.5 s and 4 s IRs.
Run by hand: ``python tests/benchmarks/bench_margin.py``; prints a table of medians and
writes JSON to tests/benchmarks/results/bench_margin.json.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import json  # noqa: E402
import platform  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
TARGET_S = 0.2
FS = 48000


def synthetic_loop_ir(length_s: float, rt60_s: float = 0.9, delay_s: float = 0.008, seed: int = 0) -> np.ndarray:
    """A room-like loop IR: a direct path, then exponentially decaying noise (RT60), band-passed 80 Hz–12 kHz."""
    from scipy.signal import butter, sosfilt

    rng = np.random.default_rng(seed)
    n = int(length_s * FS)
    t = np.arange(n) / FS
    h = rng.standard_normal(n) * 10 ** (-3 * t / rt60_s) * 0.02
    d = int(delay_s * FS)
    h[:d] = 0.0
    h[d] += 0.3
    return sosfilt(butter(2, [80, 12000], btype="bandpass", fs=FS, output="sos"), h)


def main() -> None:
    from howl.loop.nyquist import nyquist_margin

    rows = []
    for length_s in (0.5, 2.0, 4.0):
        h = synthetic_loop_ir(length_s)
        nyquist_margin(h, FS)  # warm-up
        times = []
        for _ in range(7):
            t0 = time.perf_counter()
            r = nyquist_margin(h, FS)
            times.append(time.perf_counter() - t0)
        rows.append({
            "ir_length_s": length_s,
            "median_s": statistics.median(times),
            "min_s": min(times),
            "gain_margin_db": r.gain_margin_db,
            "howl_freq_hz": r.howl_freq_hz,
            "n_fft": r.n_fft,
            "n_crossings": int(r.crossings_freq_hz.size),
        })
    # a 2 x 2 loop (two speakers, two mics) of 2 s IRs: generalized Nyquist (no target, for reference)
    from howl.loop.mimo import mimo_margin

    irs = np.array([[synthetic_loop_ir(2.0, seed=2 * s + m) * 0.5 for m in range(2)] for s in range(2)])
    mimo_margin(irs, np.ones((2, 2)), FS)
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        rm = mimo_margin(irs, np.ones((2, 2)), FS)
        times.append(time.perf_counter() - t0)
    mimo_row = {"ir_length_s": 2.0, "n_spk": 2, "n_mic": 2, "median_s": statistics.median(times),
                "gain_margin_db": rm.gain_margin_db, "howl_freq_hz": rm.howl_freq_hz}
    print(f"{'IR (s)':>7} {'median (s)':>11} {'min (s)':>9} {'n_fft':>9} {'crossings':>10}")
    for r in rows:
        print(f"{r['ir_length_s']:7.1f} {r['median_s']:11.3f} {r['min_s']:9.3f} {r['n_fft']:9d} {r['n_crossings']:10d}")
    print(f"2x2 loop of 2 s IRs (mimo_margin): median {mimo_row['median_s']:.3f} s (no target)")
    two = next(r for r in rows if r["ir_length_s"] == 2.0)
    ok = two["median_s"] < TARGET_S
    print(f"target: 2 s IR under {TARGET_S} s -> {'met' if ok else 'NOT met'}")
    out = {
        **__import__("_machine").machine_info(),
        "benchmark": "margin",
        "target_s": TARGET_S,
        "target_met": ok,
        "sample_rate_hz": FS,
        "rows": rows,
        "mimo_2x2": mimo_row,
        "python": platform.python_version(),
        "machine": platform.machine(),
        "load_average": os.getloadavg() if hasattr(os, "getloadavg") else None,
    }
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / "bench_margin.json").write_text(json.dumps(out, indent=2), encoding="utf-8")


if __name__ == "__main__":
    main()
