"""Benchmark: each command's fixed cost (start-up) beside its own work, in CPU seconds.

For every command that computes, on a bundled example:

* ``cli``: the CPU time (user + system) of a fresh ``python -m howl <command> ... --json``
  process, the best of ``--repeats`` runs (the machine is shared: the best run is the one
  least disturbed by the others);
* ``work``: the same command run again inside one warm process (``app(args)`` after a first
  run has paid the imports and the one-off set-up), the best of 3: the command's own work
  (reading its files, computing, writing its output), no interpreter, no imports;
* ``fixed`` = ``cli`` − ``work``: what the tech pays before the work starts (interpreter,
  imports, tables, argument parsing). Target: under 0.5 s on this machine class.

Also ``howl --help`` (no work) and a bare ``python -c pass`` for scale.

Run by hand: ``python tests/benchmarks/bench_startup.py`` (about 2 minutes on a quiet 2-core
machine; ``--repeats 3`` for a quicker look; ``--only scan listen …`` measures only those
commands and replaces their rows in the existing results file, keeping the others); prints a table and writes JSON to
tests/benchmarks/results/bench_startup.json with the CPU model and core count. BLAS is
pinned to one thread.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import argparse  # noqa: E402
import json  # noqa: E402
import resource  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent.parent
EX = ROOT / "examples"
TARGET_FIXED_S = 0.5


def cases(tmp: Path) -> list[tuple[str, list[str]]]:
    """(name, howl arguments) in an order where each input exists before it is read."""
    sound = tmp / "soundcheck.wav"
    return [
        ("check", ["check", str(EX / "chapel_lectern.toml")]),
        ("room", ["room", str(ROOT / "rooms" / "stone_chapel.toml")]),
        ("plan", ["plan", str(EX / "chapel_lectern.toml")]),
        ("map", ["map", str(EX / "chapel_lectern.toml"), "--mic", "lectern"]),
        ("margin", ["margin", str(EX / "loops" / "chapel_lectern.wav")]),
        ("ringout", ["ringout", str(EX / "loops" / "chapel_lectern.wav")]),
        ("simulate", ["simulate", str(EX / "loops" / "blackbox_vox_a.wav"), str(EX / "program_voice_like.wav"),
                      "-o", str(sound), "--steps", "0:0,3:9.6"]),
        ("scan", ["scan", str(sound)]),
        ("sheet", ["sheet", str(EX / "chapel_lectern.toml"), "-o", str(tmp / "sheet.pdf")]),
    ]


def _child_cpu(argv: list[str]) -> tuple[float, int]:
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    p = subprocess.run(argv, capture_output=True, text=True, cwd=ROOT)
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    return (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime), p.returncode


def _warm(args: list[str]) -> None:
    """Run in a child: the command once (cold), then 3 times more; print the best CPU time."""
    import contextlib
    import io

    from howl.cli import app

    def once() -> float:
        t = time.process_time()
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
            try:
                app(args, standalone_mode=False)
            except SystemExit:
                pass
        return time.process_time() - t

    first = once()
    print(json.dumps({"first_s": first, "work_s": min(once() for _ in range(3))}))


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--only", nargs="+", metavar="COMMAND", help="measure only these commands; the other rows of "
                    "the results file are kept as they were")
    ap.add_argument("--warm", nargs=argparse.REMAINDER)
    a = ap.parse_args()
    if a.warm:
        _warm(a.warm)
        return 0
    py = sys.executable
    rows = []
    with tempfile.TemporaryDirectory() as td:
        scale = {
            "python -c pass": min(_child_cpu([py, "-c", "pass"])[0] for _ in range(a.repeats)),
            "import numpy": min(_child_cpu([py, "-c", "import numpy"])[0] for _ in range(a.repeats)),
            "howl --help": min(_child_cpu([py, "-m", "howl", "--help"])[0] for _ in range(a.repeats)),
        }
        for name, args in cases(Path(td)):
            if a.only and name not in a.only:
                if name == "simulate" and "scan" in a.only:  # scan reads what simulate writes
                    subprocess.run([py, "-m", "howl", *args], capture_output=True, check=True, cwd=ROOT)
                continue
            args = [*args, "--json"]
            runs = [_child_cpu([py, "-m", "howl", *args]) for _ in range(a.repeats)]
            if any(rc != 0 for _, rc in runs):
                print(f"{name}: exit {runs[0][1]}", file=sys.stderr)
                return 1
            w = subprocess.run([py, __file__, "--warm", *args], capture_output=True, text=True, cwd=ROOT, check=True)
            warm = json.loads(w.stdout.strip().splitlines()[-1])
            cli = min(c for c, _ in runs)
            rows.append({"command": name, "args": args, "cli_cpu_s": round(cli, 3),
                         "cli_cpu_median_s": round(sorted(c for c, _ in runs)[len(runs) // 2], 3),
                         "work_cpu_s": round(warm["work_s"], 3), "first_in_process_cpu_s": round(warm["first_s"], 3),
                         "fixed_cpu_s": round(cli - warm["work_s"], 3)})
            r = rows[-1]
            print(f"{name:9s} cli {r['cli_cpu_s']:6.3f} s  work {r['work_cpu_s']:6.3f} s  fixed {r['fixed_cpu_s']:6.3f} s"
                  f"  {'ok' if r['fixed_cpu_s'] < TARGET_FIXED_S else 'OVER'}", flush=True)
    for k, v in scale.items():
        print(f"{k:16s} {v:6.3f} s")
    import typer

    out = HERE / "results"
    out.mkdir(exist_ok=True)
    from _machine import machine_info

    path = out / "bench_startup.json"
    if a.only and path.exists():  # keep the rows not measured this time (and say which were)
        old = {r["command"]: r for r in json.loads(path.read_text()).get("commands", [])}
        new = {r["command"]: {**r, "date": time.strftime("%Y-%m-%d")} for r in rows}
        rows = [new.get(k, v) for k, v in old.items()] + [r for k, r in new.items() if k not in old]
    (out / "bench_startup.json").write_text(json.dumps({
        **machine_info(), "benchmark": "bench_startup", "typer": typer.__version__, "repeats": a.repeats,
        "target_fixed_cpu_s": TARGET_FIXED_S, "scale_cpu_s": {k: round(v, 3) for k, v in scale.items()},
        "commands": rows,
        "all_under_target": all(r["fixed_cpu_s"] < TARGET_FIXED_S for r in rows),
        "date": time.strftime("%Y-%m-%d"), "only": a.only,
    }, indent=1) + "\n")
    print(f"wrote {out / 'bench_startup.json'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
