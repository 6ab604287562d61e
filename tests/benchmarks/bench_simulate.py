"""Benchmark: `howl.simulate.simulate_closed_loop`, 10 s of program through a 3 s loop IR at 48 kHz.

Target: real-time factor (CPU time / program duration) under 0.5 on one core
(BLAS threads pinned to 1 before numpy loads), for loop delays of 1, 5 and 20 ms.

Then a long render through the command line: ``howl simulate`` of a 30-minute 48 kHz program
(noise at −26 dBFS) through the bundled ``examples/loops/blackbox_vox_a.wav``, in a child
process whose peak resident memory is read from the kernel (``ru_maxrss``). Target: under
300 MB (the command streams; a whole-program run needed about 2.6 MB per second of program).

Run by hand: ``python tests/benchmarks/bench_simulate.py`` (about 1 minute for the table and
3–5 minutes for the long render on a quiet 2-core machine; ``--long-minutes 0`` skips it);
prints a table of medians and writes JSON to tests/benchmarks/results/bench_simulate.json.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import json  # noqa: E402
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
TARGET_LONG_MB = 300.0
ROOT = HERE.parent.parent


def long_render(minutes: float) -> dict:
    """``howl simulate`` of a ``minutes``-long program in a child process: its peak RSS and CPU."""
    import subprocess
    import tempfile

    import soundfile as sf

    with tempfile.TemporaryDirectory() as td:
        prog, out = Path(td) / "program.wav", Path(td) / "out.wav"
        rng = np.random.default_rng(21)
        with sf.SoundFile(prog, "w", FS, 1, subtype="FLOAT") as f:
            for _ in range(int(minutes * 60)):
                f.write(0.05 * rng.standard_normal(FS))
        code = (
            "import resource, subprocess, sys, json\n"
            "p = subprocess.run(sys.argv[1:], capture_output=True, text=True)\n"
            "r = resource.getrusage(resource.RUSAGE_CHILDREN)\n"
            "print(json.dumps({'rc': p.returncode, 'maxrss_kb': r.ru_maxrss, 'cpu_s': r.ru_utime + r.ru_stime,"
            " 'err': p.stderr[-300:]}))"
        )
        cmd = [sys.executable, "-c", code, sys.executable, "-m", "howl", "simulate",
               str(ROOT / "examples" / "loops" / "blackbox_vox_a.wav"), str(prog), "-o", str(out), "--gain-db", "-3", "--json"]
        r = json.loads(subprocess.run(cmd, capture_output=True, text=True, check=True, cwd=ROOT).stdout)
        if r["rc"] != 0:
            raise SystemExit(f"howl simulate failed: {r['err']}")
        frames = sf.info(out).frames
    return {"program_min": minutes, "output_frames": frames, "peak_rss_mb": r["maxrss_kb"] / 1024.0,
            "cpu_s": r["cpu_s"], "target_peak_mb": TARGET_LONG_MB, "target_met": r["maxrss_kb"] / 1024.0 < TARGET_LONG_MB}


def main() -> None:
    import argparse

    from _machine import machine_info
    from bench_margin import synthetic_loop_ir

    ap = argparse.ArgumentParser()
    ap.add_argument("--long-minutes", type=float, default=30.0)
    args = ap.parse_args()

    from howl.loop.nyquist import nyquist_margin
    from howl.loop.simulate import simulate_closed_loop

    rng = np.random.default_rng(1)
    x = 0.05 * rng.standard_normal(int(PROGRAM_S * FS))
    rows = []
    for delay_s in (0.001, 0.005, 0.020):
        h = synthetic_loop_ir(3.0, rt60_s=1.2, delay_s=delay_s)
        g = nyquist_margin(h, FS).gain_margin_db - 3.0  # 3 dB below the edge: rings but stays stable
        times, cpu = [], []
        for _ in range(3):
            t0, c0 = time.perf_counter(), time.process_time()
            simulate_closed_loop(h, x, FS, gain_db=g)
            times.append(time.perf_counter() - t0)
            cpu.append(time.process_time() - c0)
        med = statistics.median(cpu)  # CPU time: the wall clock of a shared machine measures the others too
        rows.append({"loop_delay_s": delay_s, "median_s": med, "real_time_factor": med / PROGRAM_S,
                     "median_wall_s": statistics.median(times)})
    print(f"{'delay (ms)':>10} {'median CPU s':>11} {'RTF':>7}")
    for r in rows:
        print(f"{r['loop_delay_s'] * 1e3:10.1f} {r['median_s']:11.3f} {r['real_time_factor']:7.3f}")
    ok = all(r["real_time_factor"] < TARGET_RTF for r in rows)
    print(f"target: RTF under {TARGET_RTF} -> {'met' if ok else 'NOT met'}")
    long = long_render(args.long_minutes) if args.long_minutes > 0 else None
    if long:
        print(f"howl simulate of {long['program_min']:g} min: peak RSS {long['peak_rss_mb']:.0f} MB, "
              f"{long['cpu_s']:.1f} s CPU (target under {TARGET_LONG_MB:g} MB -> {'met' if long['target_met'] else 'NOT met'})")
    out = {
        "benchmark": "simulate",
        **machine_info(),
        "long_render": long,
        "target_real_time_factor": TARGET_RTF,
        "target_met": ok,
        "sample_rate_hz": FS,
        "ir_length_s": 3.0,
        "program_s": PROGRAM_S,
        "rows": rows,
    }
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / "bench_simulate.json").write_text(json.dumps(out, indent=2), encoding="utf-8")


if __name__ == "__main__":
    main()
