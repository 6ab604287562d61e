"""Benchmark of the virtual ring-out (run by hand, not collected by pytest).

    python tests/benchmarks/bench_ringout.py            # timing + both room sets, 20 rooms each
    python tests/benchmarks/bench_ringout.py --rooms 5  # quicker

1. Timing: ring_out with 8 notches on a 2 s loop IR at 48 kHz (target < 0.5 s of CPU, issue 21), BLAS on
   one thread; each repeat starts with an empty filter-response cache (a single `howl ringout` run has one).
2. Added stable gain (and the pink tonal cost) over reference-simulator rooms (pyroomacoustics shoebox image-source RIRs used as
   loop IRs with a processing delay), for ring_out with 6 cuts and for a naive greedy ring-out (a
   -10 dB, 1/6-octave cut at each limiting crossing in turn). Every ASG is the exact Nyquist margin
   (howl.loop.nyquist_margin with the cascade as filters_sos) after minus before.

   "stage" set: rooms 7-25 m long, 5-18 m wide, 3-8 m high; walls, floor and ceiling drawn from
   pyroomacoustics' material table (frequency-dependent absorption), air absorption on, image order
   30; a cardioid loudspeaker 1.5-3.5 m from the stage edge aimed into the room, a cardioid mic on
   stage aimed away from it, at least 2 m apart; a 2nd-order 80 Hz high-pass for the loudspeaker;
   2-8 ms processing delay. fs 16 kHz, analysis band 100 Hz-7 kHz.
   "diffuse" set: rooms 5-20 m, uniform frequency-independent absorption for RT60 0.4-1.5 s
   (Sabine inversion), omni source and mic anywhere, 5 ms delay, same band.

3. Within a desk's EQ (issue 20): on both sets, the constrained ring-out (6 bands, cuts to
   -12 dB, Q up to 10) against the naive ring-out within the same limits (the deepest allowed
   cut, -12 dB at Q 10, at each limiting crossing in turn), and the graphic search (6 sliders of
   a 1/3-octave graphic on the ISO 266 centres, -12 dB range, 0.5 dB steps) against the naive
   graphic (the slider nearest each limiting crossing in turn pulled to -12 dB). Both compared
   with the tonal rule off and every cut allowed (--tonal-share inf, --min-gain-db 0: the naive
   ring-outs know neither), and also with the default rules. Every ASG is exact (nyquist_margin).
4. CPU time of the constrained ring-out (6 bands) and of the graphic search on the 2 s IR, and
   how much of each ring-out is the exact Nyquist margins (one per step).

Prints a table of medians and writes tests/benchmarks/results/ringout.json (with the machine's CPU
model and core count). About 4-8 minutes with --rooms 8 on a shared 2-core machine (it was 10 before the
speed work of issue 21); --timing-only about 20 seconds.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import sys
import time
from pathlib import Path

# one BLAS thread, as the other benchmarks: CPU time then counts the work, not idle BLAS threads
# spinning (unpinned, the exact margins' DTFT products cost about twice the CPU on 2 cores)
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from howl.loop.nyquist import nyquist_margin  # noqa: E402
from howl.loop.notch import Notch, cascade_sos, q_from_bandwidth_oct  # noqa: E402
from howl.loop.desk import ISO_266_THIRD_OCTAVE_HZ, THIRD_OCTAVE_Q, desk_from_options  # noqa: E402
from howl.loop.ringout import _exact_margins, ring_out, tonal_cost_db  # noqa: E402

PARAMETRIC = dict(max_bands=6, max_depth_db=12.0, max_q=10.0)
GRAPHIC = dict(eq="graphic", max_bands=6)
SAME_RULES = dict(min_gain_per_notch_db=0.0, tonal_share=math.inf)

FS = 16000
BAND = (100.0, 7000.0)
WALLS = ["plasterboard", "brickwork", "wooden_lining", "hard_surface", "rough_concrete", "limestone_wall"]
FLOORS = ["stage_floor", "carpet_thin", "audience_floor", "linoleum_on_concrete", "wood_16mm"]
CEILINGS = ["plasterboard", "fibre_absorber_2", "hard_surface", "wood_1.6cm"]


def stage_room(seed: int) -> np.ndarray:
    import pyroomacoustics as pra
    import scipy.signal as sig
    from pyroomacoustics.directivities import CardioidFamily, DirectionVector

    rng = np.random.default_rng(seed)
    length = rng.uniform(7, 25)
    width = rng.uniform(5, min(length, 18))
    height = rng.uniform(3, 8)
    wall, floor, ceiling = rng.choice(WALLS), rng.choice(FLOORS), rng.choice(CEILINGS)
    mats = pra.make_materials(ceiling=ceiling, floor=floor, east=wall, west=wall, north=wall, south=wall)
    room = pra.ShoeBox([length, width, height], fs=FS, materials=mats, max_order=30, air_absorption=True)
    spk = np.array([rng.uniform(1.5, 3.5), rng.uniform(0.7, width - 0.7), rng.uniform(2.0, min(3.5, height - 0.5))])
    mic = np.array([rng.uniform(0.8, 3.0), rng.uniform(0.7, width - 0.7), rng.uniform(1.3, 1.7)])
    while np.linalg.norm(spk - mic) < 2.0:
        mic[0], mic[1] = rng.uniform(0.8, 3.0), rng.uniform(0.7, width - 0.7)
    sd = CardioidFamily(orientation=DirectionVector(azimuth=rng.uniform(-30, 30), colatitude=100, degrees=True), p=0.5)
    md = CardioidFamily(orientation=DirectionVector(azimuth=180 + rng.uniform(-40, 40), colatitude=90, degrees=True), p=0.5)
    room.add_source(spk, directivity=sd)
    room.add_microphone(mic, directivity=md)
    room.compute_rir()
    h = sig.sosfilt(sig.butter(2, 80, "highpass", fs=FS, output="sos"), np.asarray(room.rir[0][0], float))
    return np.concatenate([np.zeros(int(round(rng.uniform(0.002, 0.008) * FS))), h])


def diffuse_room(seed: int) -> np.ndarray:
    import pyroomacoustics as pra

    rng = np.random.default_rng(seed)
    length = rng.uniform(5, 20)
    width = rng.uniform(4, min(length, 15))
    height = rng.uniform(2.7, 6)
    e_abs, max_order = pra.inverse_sabine(rng.uniform(0.4, 1.5), [length, width, height])
    room = pra.ShoeBox([length, width, height], fs=FS, materials=pra.Material(e_abs), max_order=min(max_order, 40))
    room.add_source([rng.uniform(0.5, length - 0.5), rng.uniform(0.5, width - 0.5), rng.uniform(1.5, 2.5)])
    room.add_microphone([rng.uniform(0.5, length - 0.5), rng.uniform(0.5, width - 0.5), rng.uniform(1.2, 1.8)])
    room.compute_rir()
    return np.concatenate([np.zeros(int(0.005 * FS)), np.asarray(room.rir[0][0], float)])


def naive_greedy(ir, n=6) -> tuple[float, float]:
    """(ASG, pink tonal cost) of the naive ring-out."""
    m0 = nyquist_margin(ir, FS, band_hz=BAND).gain_margin_db
    cuts: list[Notch] = []
    for _ in range(n):
        r = nyquist_margin(ir, FS, band_hz=BAND, filters_sos=cascade_sos(cuts, FS) if cuts else None)
        cuts.append(Notch(r.howl_freq_hz, -10.0, q_from_bandwidth_oct(1 / 6)))
    asg = nyquist_margin(ir, FS, band_hz=BAND, filters_sos=cascade_sos(cuts, FS)).gain_margin_db - m0
    return asg, tonal_cost_db(cuts, BAND, FS)


def timing(repeats: int = 5) -> dict:
    fs = 48000
    rng = np.random.default_rng(1)
    n = 2 * fs
    ir = np.zeros(n)
    t = np.arange(n - 240) / fs
    ir[240:] = rng.standard_normal(n - 240) * np.exp(-6.9 * t / 0.8)  # RT60 0.8 s, 5 ms delay
    ir *= 5.0 / np.sqrt(np.sum(ir**2))
    ring_out(ir[:4800], fs, max_notches=2)  # warm-up (imports)
    times, cpu = [], []
    from howl.loop import notch as _notch

    for _ in range(repeats):
        _notch._sos_cache.clear()  # as in a single command run
        t0, c0 = time.perf_counter(), time.process_time()
        res = ring_out(ir, fs, max_notches=8, min_gain_per_notch_db=0.0)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    t0 = time.perf_counter()
    nyquist_margin(ir, fs)
    nyquist_margin(ir, fs, filters_sos=cascade_sos(res.notches, fs))
    t_margin = time.perf_counter() - t0
    before = nyquist_margin(ir, fs)
    c0 = time.process_time()
    _exact_margins([("nominal", ir)], fs, tuple(before.band_hz), list(res.notches), before)
    cpu_exact = time.process_time() - c0
    desk_cases = {}
    for name, kw in (("parametric 6 bands, -12 dB, Q 10", PARAMETRIC), ("graphic, 6 sliders", GRAPHIC)):
        desk = desk_from_options(**kw)
        cpu_d = []
        for _ in range(repeats):
            _notch._sos_cache.clear()
            c0 = time.process_time()
            r_d = ring_out(ir, fs, desk=desk, min_gain_per_notch_db=0.0)
            cpu_d.append(time.process_time() - c0)
        c0 = time.process_time()
        _exact_margins([("nominal", ir)], fs, tuple(before.band_hz), list(r_d.notches), before)
        desk_cases[name] = {"median_cpu_s": float(np.median(cpu_d)), "n_cuts": len(r_d.notches),
                            "of_which_exact_step_margins_cpu_s": time.process_time() - c0,
                            "added_stable_gain_db": r_d.added_stable_gain_db}
    return {
        "case": "8 notches, 2 s IR at 48 kHz, full band",
        "median_s": float(np.median(times)),
        "median_cpu_s": float(np.median(cpu)),
        "target_s": 1.0,
        "blas_threads": os.environ.get("OPENBLAS_NUM_THREADS"),
        "load_average_1min": os.getloadavg()[0],  # CPU time grows with the machine's load (shared cores)
        "of_which_two_nyquist_margin_calls_s": t_margin,
        "of_which_exact_step_margins_cpu_s": cpu_exact,
        "n_notches": len(res.notches),
        "target_issue21_cpu_s": 0.5,
        "desk": desk_cases,
        "desk_target_cpu_s": 1.0,
    }


def naive_desk(ir, desk_kw: dict, n=6) -> float:
    """ASG of the naive ring-out within a desk's limits (see the module docstring, 3.)."""
    m0 = nyquist_margin(ir, FS, band_hz=BAND).gain_margin_db
    graphic = desk_kw.get("eq") == "graphic"
    centres = [c for c in ISO_266_THIRD_OCTAVE_HZ if BAND[0] <= c <= min(BAND[1], 0.49 * FS)]
    cuts: dict = {}
    for _ in range(n):
        r = nyquist_margin(ir, FS, band_hz=BAND, filters_sos=cascade_sos(list(cuts.values()), FS) if cuts else None)
        if graphic:
            fc = min(centres, key=lambda c: abs(math.log2(r.howl_freq_hz / c)))
            cuts[fc] = Notch(fc, -12.0, THIRD_OCTAVE_Q)
        else:
            cuts[len(cuts)] = Notch(r.howl_freq_hz, -12.0, 10.0)
    return nyquist_margin(ir, FS, band_hz=BAND, filters_sos=cascade_sos(list(cuts.values()), FS)).gain_margin_db - m0


def desk_rows(ir) -> dict:
    out = {}
    for tag, kw in (("parametric", PARAMETRIC), ("graphic", GRAPHIC)):
        desk = desk_from_options(**kw)
        c0 = time.process_time()
        same = ring_out(ir, FS, band_hz=BAND, desk=desk, **SAME_RULES)
        cpu = time.process_time() - c0
        dflt = ring_out(ir, FS, band_hz=BAND, desk=desk)
        out.update({
            f"asg_{tag}_db": same.added_stable_gain_db,
            f"tonal_cost_{tag}_db": same.tonal_cost_db,
            f"asg_{tag}_naive_db": naive_desk(ir, kw),
            f"asg_{tag}_default_rules_db": dflt.added_stable_gain_db,
            f"tonal_cost_{tag}_default_rules_db": dflt.tonal_cost_db,
            f"n_cuts_{tag}_default_rules": len(dflt.notches),
            f"cpu_{tag}_s": cpu,
        })
        # "not worse": within 0.05 dB (the score's tie-break gives up to that for less program removed)
        out[f"{tag}_not_worse_than_naive"] = bool(out[f"asg_{tag}_db"] >= out[f"asg_{tag}_naive_db"] - 0.05)
    return out


DESK_KEYS = ("asg_parametric_db", "asg_parametric_naive_db", "asg_parametric_default_rules_db",
             "tonal_cost_parametric_db", "tonal_cost_parametric_default_rules_db", "n_cuts_parametric_default_rules",
             "asg_graphic_db", "asg_graphic_naive_db", "asg_graphic_default_rules_db", "tonal_cost_graphic_db",
             "tonal_cost_graphic_default_rules_db", "n_cuts_graphic_default_rules", "cpu_parametric_s", "cpu_graphic_s")


def room_set(name: str, make, n_rooms: int) -> dict:
    rows = []
    for seed in range(n_rooms):
        ir = make(seed)
        t0 = time.perf_counter()
        six = ring_out(ir, FS, band_hz=BAND, max_notches=6, min_gain_per_notch_db=0.0)
        t_six = time.perf_counter() - t0
        dflt = ring_out(ir, FS, band_hz=BAND)
        loose = ring_out(ir, FS, band_hz=BAND, max_notches=6, min_gain_per_notch_db=0.0, tonal_share=1.0)
        naive_asg, naive_tonal = naive_greedy(ir)
        rows.append({
            "seed": seed,
            "margin_before_db": six.gain_margin_db_before,
            "asg_6_cuts_db": six.added_stable_gain_db,
            "asg_default_db": dflt.added_stable_gain_db,
            "n_cuts_default": len(dflt.notches),
            "asg_naive_db": naive_asg,
            "tonal_cost_naive_db": naive_tonal,
            "asg_6_cuts_share_1_db": loose.added_stable_gain_db,
            "tonal_cost_6_cuts_share_1_db": loose.tonal_cost_db,
            "widest_cut_oct": max((n.bandwidth_oct for n in six.notches), default=0.0),
            "tonal_cost_6_cuts_db": six.tonal_cost_db,
            "time_s": t_six,
            **desk_rows(ir),
        })
        r = rows[-1]
        print(f"  {name} room {seed:2d} desk: parametric {r['asg_parametric_db']:5.2f} dB vs naive "
              f"{r['asg_parametric_naive_db']:5.2f} dB; graphic {r['asg_graphic_db']:5.2f} dB vs naive "
              f"{r['asg_graphic_naive_db']:5.2f} dB", flush=True)
        print(f"  {name} room {seed:2d}: ASG 6 cuts {r['asg_6_cuts_db']:5.2f} dB (tonal {r['tonal_cost_6_cuts_db']:.2f}), "
              f"share 1 {r['asg_6_cuts_share_1_db']:5.2f} dB (tonal {r['tonal_cost_6_cuts_share_1_db']:.2f}), "
              f"default {r['asg_default_db']:5.2f} dB ({r['n_cuts_default']} cuts), "
              f"naive {r['asg_naive_db']:5.2f} dB (tonal {r['tonal_cost_naive_db']:.2f})  [{t_six:.1f} s]", flush=True)
    med = {k: float(np.median([r[k] for r in rows])) for k in
           ("asg_6_cuts_db", "asg_default_db", "asg_naive_db", "tonal_cost_6_cuts_db", "n_cuts_default", "time_s",
            "asg_6_cuts_share_1_db", "tonal_cost_6_cuts_share_1_db", "tonal_cost_naive_db") + DESK_KEYS}
    worse = {t: sum(not r[f"{t}_not_worse_than_naive"] for r in rows) for t in ("parametric", "graphic")}
    return {"name": name, "n_rooms": n_rooms, "fs_hz": FS, "band_hz": list(BAND), "medians": med,
            "rooms_worse_than_naive": worse, "rooms": rows}


def _cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rooms", type=int, default=20)
    ap.add_argument("--skip-timing", action="store_true")
    ap.add_argument("--timing-only", action="store_true",
                    help="only the timing; merged into an existing results file")
    args = ap.parse_args()
    res_file = Path(__file__).resolve().parent / "results" / "ringout.json"
    if args.timing_only:
        out = json.loads(res_file.read_text()) if res_file.exists() else {}
        out["timing"] = timing()
        out["machine"] = {"cpu_model": _cpu_model(), "cores": os.cpu_count(), "python": platform.python_version(),
                          "numpy": np.__version__}
        print(json.dumps(out["timing"], indent=2))
        res_file.parent.mkdir(exist_ok=True)
        res_file.write_text(json.dumps(out, indent=2), encoding="utf-8")
        return
    out = {}
    if not args.skip_timing:
        out["timing"] = timing()
        tm = out["timing"]
        print(f"timing: {tm['case']}: median {tm['median_s']:.2f} s wall, {tm['median_cpu_s']:.2f} s CPU "
              f"(target {tm['target_s']:.0f} s; "
              f"two nyquist_margin calls alone {tm['of_which_two_nyquist_margin_calls_s']:.2f} s; "
              f"the exact step margins {tm['of_which_exact_step_margins_cpu_s']:.2f} s CPU)")
        for k, d in tm["desk"].items():
            print(f"timing: {k}: {d['median_cpu_s']:.2f} s CPU ({d['n_cuts']} cuts; exact step margins "
                  f"{d['of_which_exact_step_margins_cpu_s']:.2f} s)")
    out["sets"] = [room_set("stage", stage_room, args.rooms), room_set("diffuse", diffuse_room, args.rooms)]
    print()
    print(f"{'set':<8} {'rooms':>5} {'ASG 6 cuts':>11} {'tonal':>7} {'ASG share 1':>12} {'tonal':>7} "
          f"{'ASG default':>12} {'cuts (dflt)':>12} {'ASG naive':>10} {'tonal':>7}")
    for s in out["sets"]:
        m = s["medians"]
        print(f"{s['name']:<8} {s['n_rooms']:>5} {m['asg_6_cuts_db']:>9.2f}dB {m['tonal_cost_6_cuts_db']:>5.2f}dB "
              f"{m['asg_6_cuts_share_1_db']:>10.2f}dB {m['tonal_cost_6_cuts_share_1_db']:>5.2f}dB "
              f"{m['asg_default_db']:>10.2f}dB {m['n_cuts_default']:>12.1f} {m['asg_naive_db']:>8.2f}dB "
              f"{m['tonal_cost_naive_db']:>5.2f}dB")
    print("(medians over rooms; ASG = exact Nyquist margin with the cuts minus without; tonal = pink-noise power the "
          "cuts remove; 'share 1' lets the cuts cost up to 1 dB of tone per dB of gain instead of 0.5)")
    print()
    print(f"{'set':<8} {'desk':<11} {'ASG':>8} {'naive':>8} {'worse':>6} {'ASG dflt':>9} {'tonal dflt':>11} {'CPU':>6}")
    for s in out["sets"]:
        m = s["medians"]
        for t in ("parametric", "graphic"):
            print(f"{s['name']:<8} {t:<11} {m[f'asg_{t}_db']:>6.2f}dB {m[f'asg_{t}_naive_db']:>6.2f}dB "
                  f"{s['rooms_worse_than_naive'][t]:>6d} {m[f'asg_{t}_default_rules_db']:>7.2f}dB "
                  f"{m[f'tonal_cost_{t}_default_rules_db']:>9.2f}dB {m[f'cpu_{t}_s']:>5.2f}s")
    out["machine"] = {"cpu_model": _cpu_model(), "cores": os.cpu_count(), "python": platform.python_version(),
                      "numpy": np.__version__}
    res_dir = Path(__file__).resolve().parent / "results"
    res_dir.mkdir(exist_ok=True)
    from _machine import machine_info

    out = {**machine_info(), **out}  # CPU model and core count beside the figures
    (res_dir / "ringout.json").write_text(json.dumps(out, indent=2), encoding="utf-8")


if __name__ == "__main__":
    main()
