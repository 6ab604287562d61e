"""Benchmark: deconvolution + quality figures of a 10 s sweep at 96 kHz, 2 channels.

Target: under 0.5 s per analysis (median), i.e. ``howl.sweep.analyse`` on a recording of
one 10 s sweep plus 2 s of silence, mic and reference channel (FFT deconvolution, latency
from the reference, trimming, peak-to-noise, harmonic separation, octave noise floor,
clipping, explained share). The sweep itself (built once per session) is timed apart.
Run by hand: ``python tests/benchmarks/bench_sweep.py``; prints a table of medians and
writes JSON to tests/benchmarks/results/bench_sweep.json.
"""

from __future__ import annotations

import json
import platform
import statistics
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
TARGET_S = 0.5
FS = 96000


def main(n_runs: int = 7) -> dict:
    from scipy.signal import fftconvolve

    from howl.measure.sweep import analyse, exponential_sweep

    t0 = time.perf_counter()
    sw = exponential_sweep(10.0, 20.0, 20000.0, FS)
    t_sweep = time.perf_counter() - t0
    rng = np.random.default_rng(0)
    t = np.arange(int(1.0 * FS)) / FS
    room = 0.3 * rng.standard_normal(t.size) * np.exp(-6.9 * t / 0.8)
    room[480] += 1.0
    n = sw.n_samples + 2 * FS
    rec = np.zeros((n, 2))
    lat = 1024
    y = fftconvolve(0.25 * sw.signal, room)[: n - lat]
    rec[lat : lat + y.size, 0] = y
    rec[lat : lat + sw.n_samples, 1] = 0.25 * sw.signal
    rec += 1e-5 * rng.standard_normal(rec.shape)
    analyse(rec, sw, level_lin=0.25, mic_index=0, reference_index=1)  # warm-up (imports)
    times, cpu = [], []
    for _ in range(n_runs):
        t0 = time.perf_counter()
        c0 = time.process_time()
        a = analyse(rec, sw, level_lin=0.25, mic_index=0, reference_index=1)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    med = statistics.median(times)
    med_cpu = statistics.median(cpu)
    try:
        import os

        load = os.getloadavg()[0]
    except (AttributeError, OSError):
        load = None
    result = {
        **__import__("_machine").machine_info(),
        "benchmark": "sweep analyse, 10 s sweep, 96 kHz, 2 channels",
        "median_s": med, "min_s": min(times), "target_s": TARGET_S, "meets_target": med < TARGET_S,
        "median_cpu_s": med_cpu, "load_average_1min": load, "n_cpus": __import__("os").cpu_count(),
        "sweep_build_s": t_sweep, "n_runs": n_runs, "latency_found": a.latency_samples, "snr_db": a.snr_db,
        "python": sys.version.split()[0], "numpy": np.__version__, "machine": platform.machine(),
    }
    print(f"{'case':<44} {'median_s':>9} {'cpu_s':>7} {'target_s':>9}")
    print(f"{'analyse (deconvolution + quality figures)':<44} {med:>9.3f} {med_cpu:>7.3f} {TARGET_S:>9.3f}")
    print(f"{'exponential_sweep (built once)':<44} {t_sweep:>9.3f} {'-':>7} {'-':>9}")
    print(f"load average {load}, {__import__('os').cpu_count()} CPUs (wall time grows with other load)")
    out = HERE / "results" / "bench_sweep.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(result, indent=2))
    return result


if __name__ == "__main__":
    main()
