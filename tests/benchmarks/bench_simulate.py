"""Benchmark: `howl.simulate.simulate_closed_loop`, 10 s of program through a 3 s loop IR at 48 kHz.

Target: real-time factor (compute time / program duration) under 0.5 on one core
(BLAS threads pinned to 1 before numpy loads), for loop delays of 1, 5 and 20 ms.
Run by hand: ``python tests/benchmarks/bench_simulate.py``; prints a table of medians
and writes JSON to tests/benchmarks/results/bench_simulate.json.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import json  # noqa: E402
import platform  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
TARGET_RTF = 0.5
FS = 48000
PROGRAM_S = 10.0


def main() -> None:
    from bench_margin import synthetic_loop_ir

    from howl.loop.nyquist import nyquist_margin
    from howl.loop.simulate import simulate_closed_loop

    rng = np.random.default_rng(1)
    x = 0.05 * rng.standard_normal(int(PROGRAM_S * FS))
    rows = []
    for delay_s in (0.001, 0.005, 0.020):
        h = synthetic_loop_ir(3.0, rt60_s=1.2, delay_s=delay_s)
        g = nyquist_margin(h, FS).gain_margin_db - 3.0  # 3 dB below the edge: rings but stays stable
        times = []
        for _ in range(3):
            t0 = time.perf_counter()
            simulate_closed_loop(h, x, FS, gain_db=g)
            times.append(time.perf_counter() - t0)
        med = statistics.median(times)
        rows.append({"loop_delay_s": delay_s, "median_s": med, "real_time_factor": med / PROGRAM_S})
    print(f"{'delay (ms)':>10} {'median (s)':>11} {'RTF':>7}")
    for r in rows:
        print(f"{r['loop_delay_s'] * 1e3:10.1f} {r['median_s']:11.3f} {r['real_time_factor']:7.3f}")
    ok = all(r["real_time_factor"] < TARGET_RTF for r in rows)
    print(f"target: RTF under {TARGET_RTF} -> {'met' if ok else 'NOT met'}")
    out = {
        "benchmark": "simulate",
        "target_real_time_factor": TARGET_RTF,
        "target_met": ok,
        "sample_rate_hz": FS,
        "ir_length_s": 3.0,
        "program_s": PROGRAM_S,
        "rows": rows,
        "python": platform.python_version(),
        "machine": platform.machine(),
        "load_average": os.getloadavg() if hasattr(os, "getloadavg") else None,
    }
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / "bench_simulate.json").write_text(json.dumps(out, indent=2), encoding="utf-8")


if __name__ == "__main__":
    main()
