"""Tuning helper for the detector (run by hand): one split of tests/listen/detect_corpus.py, one case in
``--every N`` (default 2: every second case, as the thresholds of issue 22 were chosen), with settings
overridden as ``name=value`` (DetectorConfig fields; ``none`` for None). Prints the split's summary,
its false howls and its late or missed howls. Only the ``tuning`` split may be used to choose a
setting; ``--split heldout`` is for the final report alone.

    python tests/benchmarks/tune_detect.py [--split tuning] [--every 2] [slow_min_db_per_s=5 ...]
"""

from __future__ import annotations

import os
import sys
import time
from dataclasses import fields, replace
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "listen"))

import detect_corpus as C  # noqa: E402

from howl.listen.detect import DetectorConfig  # noqa: E402


def main() -> None:
    args = sys.argv[1:]
    split = args[args.index("--split") + 1] if "--split" in args else "tuning"
    every = int(args[args.index("--every") + 1]) if "--every" in args else 2
    kinds = {f.name: f.type for f in fields(DetectorConfig)}
    over = {}
    for a in args:
        if "=" in a:
            k, val = a.split("=", 1)
            if k not in kinds:
                raise SystemExit(f"tune_detect: unknown setting {k!r}")
            typ = str(kinds[k])
            over[k] = (None if val.lower() == "none" else val.lower() == "true" if typ == "bool"
                       else int(val) if "int" in typ else float(val))
    cfg = replace(DetectorConfig(), **over)
    t0 = time.process_time()
    rows = [C.evaluate(c, cfg) for c in C.cases(split, every)]
    summ = C.summarise(rows)
    print(f"{split} every {every} {over}: {len(rows)} cases, {time.process_time() - t0:.0f} s of CPU")
    for k, val in summ.items():
        if k != "cases_with_false_howl":
            print(f"  {k:<40} {val if not isinstance(val, float) else round(val, 4)}")
    for name in summ["cases_with_false_howl"]:
        r = next(r for r in rows if r["case"] == name)
        print(f"  false howl: {name} {r['howls']}")
    for r in rows:
        if r["kind"] == "howl" and not (r["found"] and r["right_freq"] and r["before_dominance"]):
            print(f"  {'late' if r['found'] else 'missed'}: {r['case']} lead {r.get('lead_s')} modes {r['modes_hz'][:4]} "
                  f"growth {r.get('mode_growth_db_per_s')} dominates {r.get('t_dominates_s')} howls {r['howls'][:3]}")


if __name__ == "__main__":
    main()
