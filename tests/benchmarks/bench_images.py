"""Benchmark: howl's image-source IRs beside pyroomacoustics, and the placement map.

1. Image-source IR of a 20 × 14 × 8 m room with RT60 ≈ 1.5 s (octave-band
   absorption, Eyring ≈ 1.5 s at 1 kHz) at 48 kHz, howl and pyroomacoustics in the
   same run, for the same reflection order, the same absorption, no air absorption,
   no tail (pyroomacoustics has none) and the same IR length (both cut to the shorter).
   Target: howl no slower than the reference library's compiled engine (ratio ≤ 1).
   pyroomacoustics is run with one thread (``num_threads = 1``) and also with its
   default thread count, because howl's numpy code runs on one core.
2. The same with **flat** absorption (α = 0.2 on every surface in every band: one band, the
   case where pyroomacoustics needs no band filtering either) at orders 5, 10 and 17. The two
   run alternately, ``FLAT_REPEATS`` times each, in CPU time of this process
   (``time.process_time``), pyroomacoustics on one thread; the ratio is of the best runs (the
   machine may be shared: the best run is the least disturbed one) and the medians are given
   too. Target: ratio ≤ 1.0 at every order.
3. howl's IR with its statistical tail (order 6, full −60 dB length), for information.
4. ``howl map``'s statistical grid of 40 × 40 points on the bundled rig. Target < 2 s.

Run by hand: ``python tests/benchmarks/bench_images.py`` (about 3 minutes on a quiet 2-core
machine); prints a table of medians and writes JSON to
tests/benchmarks/results/bench_images.json with the CPU model and core count.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import json  # noqa: E402
import platform  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
FS = 48000
DIMS = (20.0, 14.0, 8.0)
ALPHA = (0.14, 0.16, 0.18, 0.19, 0.2, 0.22, 0.26)  # per octave 125 Hz–8 kHz
SRC = (4.0, 7.0, 2.0)
MIC = (12.0, 5.0, 1.5)
MAP_TARGET_S = 2.0
FLAT_ALPHA = 0.2
FLAT_ORDERS = (5, 10, 17)
FLAT_REPEATS = 21


def flat_rows(pra, c) -> list[dict]:
    """howl and pyroomacoustics side by side with flat absorption, alternating runs, CPU time."""
    from howl.model.images import image_source_ir
    from howl.model.rig import Room, Surface

    lx, ly, lz = DIMS
    areas = {"floor": lx * ly, "ceiling": lx * ly, "wall_x0": ly * lz, "wall_x1": ly * lz,
             "wall_y0": lx * lz, "wall_y1": lx * lz}
    room = Room("flat", lx * ly * lz, 2 * (lx * ly + ly * lz + lx * lz),
                tuple(Surface(n, a, "bench", (FLAT_ALPHA,) * 7) for n, a in areas.items()), dimensions_m=DIMS)
    pra.constants.set("num_threads", 1)

    def pra_ir(order):
        r = pra.ShoeBox(list(DIMS), fs=FS, max_order=order, materials=pra.Material(FLAT_ALPHA))
        r.add_source(list(SRC))
        r.add_microphone(np.asarray(MIC)[:, None])
        r.compute_rir()
        return r.rir[0][0]

    rows = []
    for order in FLAT_ORDERS:
        dur = (pra_ir(order).size - 40) / FS

        def ours():
            return image_source_ir(room, SRC, MIC, FS, max_order=order, tail=False, air_absorption=False,
                                   speed_of_sound_m_s=c, duration_s=dur)

        ours(), pra_ir(order)  # warm-up: caches, first-call costs
        t_o, t_r = [], []
        for _ in range(FLAT_REPEATS):
            for fn, acc in ((ours, t_o), (lambda: pra_ir(order), t_r)):
                t0 = time.process_time()
                fn()
                acc.append(time.process_time() - t0)
        rows.append({"max_order": order, "n_images": int((2 * order + 1) * (2 * order**2 + 2 * order + 3) // 3),
                     "ir_length_s": round(dur, 3), "howl_best_cpu_s": min(t_o), "pra_1thread_best_cpu_s": min(t_r),
                     "howl_median_cpu_s": statistics.median(t_o), "pra_1thread_median_cpu_s": statistics.median(t_r),
                     "ratio_best": min(t_o) / min(t_r), "ratio_median": statistics.median(t_o) / statistics.median(t_r)})
    return rows


def _room():
    from howl.model.rig import Room, Surface

    lx, ly, lz = DIMS
    areas = {"floor": lx * ly, "ceiling": lx * ly, "wall_x0": ly * lz, "wall_x1": ly * lz,
             "wall_y0": lx * lz, "wall_y1": lx * lz}
    surfs = tuple(Surface(n, a, "bench", ALPHA) for n, a in areas.items())
    return Room("bench", lx * ly * lz, 2 * (lx * ly + ly * lz + lx * lz), surfs, dimensions_m=DIMS)


def _median(fn, repeats):
    fn()  # warm-up
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main() -> None:
    import pyroomacoustics as pra

    from howl.model.images import image_source_ir
    from howl.model.rig import OCTAVE_BANDS_HZ
    from howl.model.room import room_acoustics

    room = _room()
    rt = room_acoustics(room, np.array([500.0, 1000.0, 2000.0])).rt60_eyring_s
    c = pra.constants.get("c")
    pra.constants.set("rir_hpf_enable", False)
    default_threads = pra.constants.get("num_threads")
    mat = pra.Material({"coeffs": list(ALPHA), "center_freqs": list(OCTAVE_BANDS_HZ)})

    def pra_ir(order):
        r = pra.ShoeBox(list(DIMS), fs=FS, max_order=order, materials=mat)
        r.add_source(list(SRC))
        r.add_microphone(np.asarray(MIC)[:, None])
        r.compute_rir()
        return r.rir[0][0]

    rows = []
    for order in (10, 20, 30, 40):
        repeats = 5 if order <= 20 else 3
        n_ref = pra_ir(order).size - 40  # pyroomacoustics' IR without its 40-sample filter delay
        dur = n_ref / FS

        def ours():
            return image_source_ir(room, SRC, MIC, FS, max_order=order, tail=False, air_absorption=False,
                                   speed_of_sound_m_s=c, duration_s=dur)

        t_ours, h = _median(ours, repeats)
        pra.constants.set("num_threads", 1)
        t_ref1, _ = _median(lambda: pra_ir(order), repeats)
        pra.constants.set("num_threads", default_threads)
        t_refn, _ = _median(lambda: pra_ir(order), repeats)
        rows.append({
            "max_order": order, "n_images": int((2 * order + 1) * (2 * order**2 + 2 * order + 3) // 3),
            "ir_length_s": round(h.size / FS, 3), "howl_s": t_ours, "pyroomacoustics_1thread_s": t_ref1,
            "pyroomacoustics_default_threads_s": t_refn, "threads_default": int(default_threads),
            "ratio_howl_over_pra_1thread": t_ours / t_ref1, "ratio_howl_over_pra_default": t_ours / t_refn,
        })

    flat = flat_rows(pra, c)
    pra.constants.set("num_threads", default_threads)

    def with_tail():
        return image_source_ir(room, SRC, MIC, FS, max_order=6, tail=True, seed=0)

    t_tail, h_tail = _median(with_tail, 3)

    # the map: a 40 × 40 statistical grid over the bundled rig's floor plan (x and y spaced
    # to fill the 24 × 10 m floor; margin_map takes one step for both, so time its compute path)
    from howl.model.placement import statistical_margins
    from howl.model.rig import bundled_rig_path, load_rig

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rig = load_rig(bundled_rig_path())
        lx, ly, _ = rig.room.dimensions_m
        gx, gy = np.meshgrid(np.linspace(0.25, lx - 0.25, 40), np.linspace(0.25, ly - 0.25, 40))
        z = rig.mic("lectern").position_m[2]
        pts = np.stack([gx.ravel(), gy.ravel(), np.full(gx.size, z)], axis=1)
        t_map, res = _median(lambda: statistical_margins(rig, "lectern", pts), 5)
    grid = (40, 40)
    n_ok = int(np.sum(np.isfinite(res["margin_db"])))
    print(f"Image-source IR, {DIMS[0]:g} × {DIMS[1]:g} × {DIMS[2]:g} m, RT60 (Eyring) 0.5/1/2 kHz = "
          f"{', '.join(f'{v:.2f}' for v in rt)} s, {FS} Hz, no tail, no air (medians)")
    print(f"{'order':>5} {'images':>8} {'length s':>9} {'howl s':>8} {'pra 1 thr s':>12} {'pra dflt s':>11} "
          f"{'ratio 1 thr':>12} {'ratio dflt':>11}")
    for r in rows:
        print(f"{r['max_order']:>5} {r['n_images']:>8} {r['ir_length_s']:>9.3f} {r['howl_s']:>8.3f} "
              f"{r['pyroomacoustics_1thread_s']:>12.3f} {r['pyroomacoustics_default_threads_s']:>11.3f} "
              f"{r['ratio_howl_over_pra_1thread']:>12.2f} {r['ratio_howl_over_pra_default']:>11.2f}")
    print(f"Flat absorption α = {FLAT_ALPHA}, CPU time, pyroomacoustics on one thread, {FLAT_REPEATS} alternating runs")
    print(f"{'order':>5} {'images':>8} {'howl best ms':>13} {'pra best ms':>12} {'ratio best':>11} {'ratio median':>13}")
    for r in flat:
        print(f"{r['max_order']:>5} {r['n_images']:>8} {r['howl_best_cpu_s'] * 1e3:>13.2f} "
              f"{r['pra_1thread_best_cpu_s'] * 1e3:>12.2f} {r['ratio_best']:>11.2f} {r['ratio_median']:>13.2f}")
    print(f"target: ratio <= 1.0 at orders {', '.join(map(str, FLAT_ORDERS))} -> "
          f"{'met' if all(r['ratio_best'] <= 1.0 for r in flat) else 'NOT met'}")
    print(f"howl with statistical tail (order 6, {h_tail.size / FS:.2f} s IR): {t_tail:.3f} s")
    print(f"map, statistical, {grid[1]} × {grid[0]} grid ({n_ok} points evaluated): {t_map:.3f} s "
          f"(target < {MAP_TARGET_S:g} s)")

    from _machine import machine_info

    out = {
        "benchmark": "bench_images",
        **machine_info(),
        "platform": platform.platform(),
        "python": platform.python_version(),
        "pyroomacoustics": pra.__version__,
        "room_m": DIMS, "absorption": ALPHA, "rt60_eyring_s_500_1k_2k": [float(v) for v in rt],
        "sample_rate_hz": FS,
        "ir_rows": rows,
        "flat_absorption": FLAT_ALPHA, "flat_rows": flat,
        "flat_target_met": all(r["ratio_best"] <= 1.0 for r in flat),
        "tail_ir_s": t_tail, "tail_ir_length_s": h_tail.size / FS,
        "map_grid": list(grid), "map_points_evaluated": n_ok, "map_s": t_map, "map_target_s": MAP_TARGET_S,
    }
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / "bench_images.json").write_text(json.dumps(out, indent=2))


if __name__ == "__main__":
    main()
