"""Benchmark: `howl.loop.nyquist_margin` on a 2 s loop IR at 48 kHz, and the MIMO margin of many mics.

Target: under 0.2 s of compute (median of repeated runs after a warm-up), on one
core (BLAS threads pinned to 1 before numpy loads). Also times 0.5 s and 4 s IRs.

MIMO (issue 17 item 6): ``mimo_margin`` on the image-source loops of the 8-mic example
(examples/council_delegates.toml) and of the 16-mic test rig (tests/data/council_16_mics.toml),
and the whole ``howl plan RIG --method images`` in a fresh process (wall clock and peak memory);
target for the 16-mic plan: under 60 s. Before issue 17 the 8-mic plan died of a memory error
(all 8! orders of the eigenvalues).
Run by hand: ``python tests/benchmarks/bench_margin.py`` (about 1 min); prints a table of medians and
writes JSON to tests/benchmarks/results/bench_margin.json.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import json  # noqa: E402
import math  # noqa: E402
import platform  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
REPO = HERE.parent.parent
TARGET_S = 0.2
TARGET_MIMO_PLAN_S = 60.0
RIGS = {8: REPO / "examples" / "council_delegates.toml", 16: REPO / "tests" / "data" / "council_16_mics.toml"}
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


def mimo_rows() -> list[dict]:
    """mimo_margin on each rig's image-source loops (median of 3), and `howl plan --method images` (fresh process)."""
    import resource
    import subprocess
    import sys
    import warnings

    from howl.loop.mimo import mimo_margin
    from howl.model import load_rig
    from howl.model.images import rig_loop_irs

    rows = []
    for n_mic, path in RIGS.items():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            irs, mix = rig_loop_irs(load_rig(path), 16000.0)
        times = []
        for _ in range(3):
            t0 = time.perf_counter()
            r = mimo_margin(irs, mix, 16000.0, band_hz=(100.0, 7200.0))
            times.append(time.perf_counter() - t0)
        cmd = [sys.executable, "-m", "howl", "plan", str(path), "--method", "images", "--json"]
        before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
        t0 = time.perf_counter()
        proc = subprocess.run(cmd, capture_output=True, text=True, cwd=REPO)
        wall = time.perf_counter() - t0
        peak_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
        system = json.loads(proc.stdout)["images"]["system"] if proc.returncode == 0 else None
        # what the matching before issue 17 (every one of the n! orders at every step) would allocate
        n_fft = max(1 << 14, 1 << int(np.ceil(np.log2(4 * irs.shape[2]))))
        f = np.fft.rfftfreq(n_fft, 1 / 16000.0)
        n_steps = int(np.count_nonzero((f >= 100.0) & (f <= 7200.0))) - 1
        perm_gib = n_steps * math.factorial(irs.shape[1]) * irs.shape[1] * 16 / 2**30
        rows.append({
            "rig": str(path.relative_to(REPO)),
            "permutation_matching_would_allocate_gib": perm_gib, "n_mic": int(irs.shape[1]), "n_spk": int(irs.shape[0]),
            "ir_samples": int(irs.shape[2]), "sample_rate_hz": 16000.0,
            "mimo_margin_median_s": statistics.median(times), "gain_margin_db": r.gain_margin_db,
            "howl_freq_hz": r.howl_freq_hz,
            "plan_images_command": " ".join(["howl"] + cmd[3:-1] + ["--json"]).replace(str(REPO) + "/", ""),
            "plan_images_wall_s": wall, "plan_images_exit": proc.returncode,
            "plan_images_peak_rss_mb": peak_kb / 1024 if peak_kb > before else None,
            "plan_system_margin_db": None if system is None else system["gain_margin_db"],
        })
    return rows


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
    many = mimo_rows()
    print(f"{'rig':<40} {'mics':>4} {'mimo_margin (s)':>16} {'plan --method images (s)':>25} {'peak MB':>8} "
          f"{'n! matching (GiB)':>18}")
    for r in many:
        peak = "—" if r["plan_images_peak_rss_mb"] is None else f"{r['plan_images_peak_rss_mb']:.0f}"
        print(f"{r['rig']:<40} {r['n_mic']:>4} {r['mimo_margin_median_s']:16.2f} {r['plan_images_wall_s']:25.1f} {peak:>8} "
              f"{r['permutation_matching_would_allocate_gib']:18.3g}")
    sixteen = next(r for r in many if r["n_mic"] == 16)
    ok16 = sixteen["plan_images_exit"] == 0 and sixteen["plan_images_wall_s"] < TARGET_MIMO_PLAN_S
    print(f"target: 16-mic plan --method images under {TARGET_MIMO_PLAN_S:g} s -> {'met' if ok16 else 'NOT met'}")
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
        "mimo_rigs": many,
        "target_mimo_plan_s": TARGET_MIMO_PLAN_S,
        "target_mimo_plan_met": ok16,
        "python": platform.python_version(),
        "machine": platform.machine(),
        "load_average": os.getloadavg() if hasattr(os, "getloadavg") else None,
    }
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / "bench_margin.json").write_text(json.dumps(out, indent=2), encoding="utf-8")


if __name__ == "__main__":
    main()
