"""Benchmark of the virtual ring-out (run by hand, not collected by pytest).

    python tests/benchmarks/bench_ringout.py            # timing + both room sets, 20 rooms each
    python tests/benchmarks/bench_ringout.py --rooms 5  # quicker

1. Timing: ring_out with 8 notches on a 2 s loop IR at 48 kHz (target < 1 s).
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

Prints a table of medians and writes tests/benchmarks/results/ringout.json.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from howl.loop.nyquist import nyquist_margin  # noqa: E402
from howl.loop.notch import Notch, cascade_sos, q_from_bandwidth_oct  # noqa: E402
from howl.loop.ringout import ring_out, tonal_cost_db  # noqa: E402

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


def timing(repeats: int = 3) -> dict:
    fs = 48000
    rng = np.random.default_rng(1)
    n = 2 * fs
    ir = np.zeros(n)
    t = np.arange(n - 240) / fs
    ir[240:] = rng.standard_normal(n - 240) * np.exp(-6.9 * t / 0.8)  # RT60 0.8 s, 5 ms delay
    ir *= 5.0 / np.sqrt(np.sum(ir**2))
    ring_out(ir[:4800], fs, max_notches=2)  # warm-up (imports)
    times, cpu = [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        res = ring_out(ir, fs, max_notches=8, min_gain_per_notch_db=0.0)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    t0 = time.perf_counter()
    nyquist_margin(ir, fs)
    nyquist_margin(ir, fs, filters_sos=cascade_sos(res.notches, fs))
    t_margin = time.perf_counter() - t0
    return {
        "case": "8 notches, 2 s IR at 48 kHz, full band",
        "median_s": float(np.median(times)),
        "median_cpu_s": float(np.median(cpu)),
        "target_s": 1.0,
        "of_which_two_nyquist_margin_calls_s": t_margin,
        "n_notches": len(res.notches),
    }


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
        })
        r = rows[-1]
        print(f"  {name} room {seed:2d}: ASG 6 cuts {r['asg_6_cuts_db']:5.2f} dB (tonal {r['tonal_cost_6_cuts_db']:.2f}), "
              f"share 1 {r['asg_6_cuts_share_1_db']:5.2f} dB (tonal {r['tonal_cost_6_cuts_share_1_db']:.2f}), "
              f"default {r['asg_default_db']:5.2f} dB ({r['n_cuts_default']} cuts), "
              f"naive {r['asg_naive_db']:5.2f} dB (tonal {r['tonal_cost_naive_db']:.2f})  [{t_six:.1f} s]", flush=True)
    med = {k: float(np.median([r[k] for r in rows])) for k in
           ("asg_6_cuts_db", "asg_default_db", "asg_naive_db", "tonal_cost_6_cuts_db", "n_cuts_default", "time_s",
            "asg_6_cuts_share_1_db", "tonal_cost_6_cuts_share_1_db", "tonal_cost_naive_db")}
    return {"name": name, "n_rooms": n_rooms, "fs_hz": FS, "band_hz": list(BAND), "medians": med, "rooms": rows}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rooms", type=int, default=20)
    ap.add_argument("--skip-timing", action="store_true")
    args = ap.parse_args()
    out = {}
    if not args.skip_timing:
        out["timing"] = timing()
        tm = out["timing"]
        print(f"timing: {tm['case']}: median {tm['median_s']:.2f} s wall, {tm['median_cpu_s']:.2f} s CPU "
              f"(target {tm['target_s']:.0f} s; "
              f"two nyquist_margin calls alone {tm['of_which_two_nyquist_margin_calls_s']:.2f} s)")
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
    res_dir = Path(__file__).resolve().parent / "results"
    res_dir.mkdir(exist_ok=True)
    from _machine import machine_info

    out = {**machine_info(), **out}  # CPU model and core count beside the figures
    (res_dir / "ringout.json").write_text(json.dumps(out, indent=2), encoding="utf-8")


if __name__ == "__main__":
    main()
