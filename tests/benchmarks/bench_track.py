"""Benchmark: `howl track`'s loop tracker on the TUNING and HELD-OUT closed-loop cases, beside a
plain (biased) cross-spectral estimate, and its real-time factor at 48 kHz.

Cases: tests/listen/track_cases.py (pyroomacoustics rooms, the project's exact closed-loop
simulator, speech / band / purely harmonic programs with ambient noise). For each case:

* the error of the margin at 10 s of program against the truth (nyquist_margin of the true G·F);
* after a fader step of +3 dB and of −3 dB at 10 s, the error 3 s later against the new truth;
* with a notch (Q 8, scipy.signal.iirnotch) in G at the true worst crossing: the rise of the
  estimated margin against the rise of the truth;
* coverage: the share of all estimates (status ok, and all) whose ± holds the truth.

The plain estimate: L̂ = (S_mu/S_mm)·(S_um/S_uu) from Welch spectra of the raw signals (the same
forgetting), i.e. the open-loop formula applied in closed loop.

Real-time factor: CPU time of LoopTracker.process over 20 s of a 48 kHz closed loop with a
0.5 s loop estimate, BLAS pinned to one thread (target < 0.2).

Run by hand: ``python tests/benchmarks/bench_track.py [--quick] [--set NAME=VALUE ...] [--out FILE.json]``;
prints a table and writes tests/benchmarks/results/bench_track.json (or ``--out``, a name in results/).
``--set`` changes a TrackSettings field for the run (e.g. ``--set held_tone_k=0`` for the figures
without the held-tone term). Takes about 10 min on the shared 2-core machine.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import json  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE.parent / "listen"), str(HERE.parent), str(HERE)]

import track_cases as C  # noqa: E402
from _machine import machine_info  # noqa: E402

from howl.listen.track import LoopTracker, TrackSettings  # noqa: E402


SETTINGS = TrackSettings()  # replaced by --set


def _settings_from_argv(argv) -> TrackSettings:
    """TrackSettings with the ``--set NAME=VALUE`` changes (VALUE read as JSON)."""
    import dataclasses

    kw = {}
    for i, a in enumerate(argv):
        if a == "--set":
            name, value = argv[i + 1].split("=", 1)
            kw[name] = json.loads(value)
    return dataclasses.replace(TrackSettings(), **kw)


def _at(est, t):
    return min(est, key=lambda e: abs(e["time_s"] - t))


def evaluate(case, quick=False):
    row = {"case": f"room{case.room}-{case.kind}-seed{case.seed}", "kind": case.kind}
    u, m, before, _a, f_ir, _g = C.render(case, 11.0)
    est, _ = C.run_tracker(u, m, C.FS, SETTINGS)
    truth = before.gain_margin_db
    e10 = _at(est, 10.0)
    row.update(truth_db=truth, truth_freq_hz=before.howl_freq_hz, est10_db=e10["gain_margin_db"],
               err10_db=None if e10["gain_margin_db"] is None else e10["gain_margin_db"] - truth,
               unc10_db=e10["uncertainty_db"], status10=e10["status"], est10_freq_hz=e10["howl_freq_hz"],
               held_tone_share10=e10.get("held_tone_share"))
    pl = C.plain_margins(u, m, C.FS)
    row["plain10_db"] = pl[9]
    row["plain_err10_db"] = None if pl[9] is None else pl[9] - truth
    cover = [(abs(e["gain_margin_db"] - truth) <= e["uncertainty_db"], e["status"]) for e in est
             if e["gain_margin_db"] is not None and e["time_s"] >= 3]
    steps = {}
    if not quick:
        for step in (3.0, -3.0):
            u2, m2, b2, a2, _f, _g2 = C.render(case, 13.0, step_at_s=10.0, step_db=step)
            est2, _ = C.run_tracker(u2, m2, C.FS, SETTINGS)
            e13 = _at(est2, 13.0)
            steps[f"{step:+.0f}"] = {"truth_after_db": a2.gain_margin_db, "est13_db": e13["gain_margin_db"],
                                     "err13_db": None if e13["gain_margin_db"] is None
                                     else e13["gain_margin_db"] - a2.gain_margin_db}
            cover += [(abs(e["gain_margin_db"] - (b2.gain_margin_db if e["time_s"] < 10 else a2.gain_margin_db))
                       <= e["uncertainty_db"], e["status"]) for e in est2
                      if e["gain_margin_db"] is not None and e["time_s"] >= 3 and not 10 <= e["time_s"] < 12]
        u3, m3, b3, _a3, _f3, _g3 = C.render(case, 11.0, notch=(before.howl_freq_hz, 8.0))
        est3, _ = C.run_tracker(u3, m3, C.FS, SETTINGS)
        e3 = _at(est3, 10.0)
        row["notch"] = {"truth_rise_db": b3.gain_margin_db - truth,
                        "est_rise_db": None if e3["gain_margin_db"] is None or e10["gain_margin_db"] is None
                        else e3["gain_margin_db"] - e10["gain_margin_db"]}
    row["steps"] = steps
    row["n_estimates"] = len(cover)
    row["n_inside"] = int(sum(c for c, _ in cover))
    row["n_ok"] = int(sum(s == "ok" for _, s in cover))
    row["n_ok_inside"] = int(sum(c for c, s in cover if s == "ok"))
    return row


def realtime_factor(seconds=20.0):
    from howl.loop.simulate import simulate_closed_loop
    from scipy.signal import lfilter

    fs = 48000
    case = C.HELDOUT[0]
    f_ir = C.room_f(case.room, fs)
    g = C.console_ir(fs, case.delay_ms)
    base = C.truth(f_ir, g, fs).gain_margin_db
    gain = 10 ** ((base - case.margin_db) / 20)
    x = C.program(case.kind, fs, seconds, case.seed, case.noise_db)
    m = simulate_closed_loop(np.convolve(g, f_ir) * gain, x, fs, limiter_dbfs=None)
    u = lfilter(g, [1.0], m) * gain
    tr = LoopTracker(fs, settings=TrackSettings(loop_length_s=0.5))
    t0 = time.process_time()
    for i in range(0, u.size, 1024):
        tr.process(u[i:i + 1024], m[i:i + 1024])
    cpu = time.process_time() - t0
    return {"sample_rate_hz": fs, "loop_length_s": 0.5, "audio_s": seconds, "cpu_s": cpu, "rtf": cpu / seconds}


def _summary(rows):
    def fr(vals, cond):
        v = [x for x in vals if x is not None]
        return None if not v else sum(cond(x) for x in v) / len(v)

    errs = [r["err10_db"] for r in rows]
    perr = [r["plain_err10_db"] for r in rows]
    steps = [s["err13_db"] for r in rows for s in r["steps"].values()]
    n = sum(r["n_estimates"] for r in rows)
    n_ok = sum(r["n_ok"] for r in rows)
    return {
        "n_cases": len(rows),
        "within_1db_at_10s": fr(errs, lambda e: abs(e) <= 1.0),
        "median_abs_err10_db": float(np.median([abs(e) for e in errs if e is not None])) if errs else None,
        "plain_within_1db_at_10s": fr(perr, lambda e: abs(e) <= 1.0),
        "plain_median_abs_err10_db": float(np.median([abs(e) for e in perr if e is not None])) if any(
            e is not None for e in perr) else None,
        "steps_within_1db_after_3s": fr(steps, lambda e: abs(e) <= 1.0),
        "coverage_all": sum(r["n_inside"] for r in rows) / n if n else None,
        "coverage_ok": sum(r["n_ok_inside"] for r in rows) / n_ok if n_ok else None,
        # the worst case's share of "ok" estimates holding the truth (a pooled figure can hide one program)
        "coverage_ok_worst_case": min((r["n_ok_inside"] / r["n_ok"] for r in rows if r["n_ok"]), default=None),
        "share_ok": n_ok / n if n else None,
    }


def main():
    global SETTINGS
    quick = "--quick" in sys.argv
    SETTINGS = _settings_from_argv(sys.argv)
    out = {"machine": machine_info(), "settings": SETTINGS.__dict__, "splits": {}}
    for split, cases in (("tuning", C.TUNING), ("heldout", C.HELDOUT)):
        rows = [evaluate(c, quick) for c in cases]
        out["splits"][split] = {"summary": _summary(rows), "cases": rows}
        print(f"--- {split}")
        for r in rows:
            print(f"{r['case']:28s} truth {r['truth_db']:5.2f}  est@10 {r['est10_db']}  ±{r['unc10_db']}  "
                  f"plain {r['plain10_db']}  steps {[s['err13_db'] for s in r['steps'].values()]}  "
                  f"notch {r.get('notch')}")
        print(json.dumps(out["splits"][split]["summary"], indent=1))
    out["realtime"] = realtime_factor()
    print("real-time factor at 48 kHz, 0.5 s loop:", out["realtime"])
    name = sys.argv[sys.argv.index("--out") + 1] if "--out" in sys.argv else "bench_track.json"
    res = HERE / "results" / Path(name).name
    res.write_text(json.dumps(out, indent=1, default=lambda o: None if o is None else float(o)) + "\n")
    print("wrote", res)


if __name__ == "__main__":
    main()
