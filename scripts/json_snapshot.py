"""Run every computing command with --json on the bundled examples and demo loops,
and write each output to a folder, so two versions of howl can be compared.

    python scripts/json_snapshot.py OUT_DIR            # write the snapshot
    python scripts/json_snapshot.py OUT_DIR --compare REF_DIR   # write, then diff against REF_DIR

Fields that measure time (``*cpu_s``, ``*elapsed_s``, ``*wall_s``) are dropped before
comparing. Exits 1 when anything differs.
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
EX = ROOT / "examples"
LOOPS = sorted((EX / "loops").glob("*.wav"))
RIGS = sorted(EX.glob("*.toml"))
ROOMS = sorted((ROOT / "rooms").glob("*.toml"))
PROG = EX / "program_voice_like.wav"


def cases(tmp: Path):
    for rig in RIGS:
        yield f"check_{rig.stem}", ["check", str(rig)]
        yield f"plan_{rig.stem}", ["plan", str(rig)]
        yield f"plan_bands_{rig.stem}", ["plan", str(rig), "--bands"]
        yield f"sheet_{rig.stem}", ["sheet", str(rig), "-o", str(tmp / f"{rig.stem}.pdf")]
    yield "plan_images_chapel", ["plan", str(EX / "chapel_lectern.toml"), "--method", "images"]
    yield "map_chapel", ["map", str(EX / "chapel_lectern.toml"), "--mic", "lectern"]
    for room in ROOMS:
        yield f"room_{room.stem}", ["room", str(room)]
    for ir in LOOPS:
        yield f"margin_{ir.stem}", ["margin", str(ir)]
        yield f"ringout_{ir.stem}", ["ringout", str(ir)]
    soundcheck = tmp / "soundcheck.wav"
    yield "simulate_vox_a", ["simulate", str(EX / "loops" / "blackbox_vox_a.wav"), str(PROG), "-o", str(soundcheck),
                             "--steps", "0:0,3:9.6"]
    yield "scan_soundcheck", ["scan", str(soundcheck)]
    yield "scan_soundcheck_loopir", ["scan", str(soundcheck), "--loop-ir", str(EX / "loops" / "blackbox_vox_a.wav")]


def _strip(obj):
    if isinstance(obj, dict):
        return {k: _strip(v) for k, v in obj.items()
                if not (k.endswith("cpu_s") or k.endswith("elapsed_s") or k.endswith("wall_s"))
                and k not in ("path", "output", "out", "file")}
    if isinstance(obj, list):
        return [_strip(v) for v in obj]
    if isinstance(obj, str) and obj.startswith(tempfile.gettempdir()):
        return "<tmp>/" + Path(obj).name
    return obj


def main(argv: list[str]) -> int:
    out = Path(argv[0])
    out.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory() as td:
        for name, args in cases(Path(td)):
            r = subprocess.run([sys.executable, "-m", "howl", *args, "--json"], capture_output=True, text=True, cwd=ROOT)
            try:
                obj = _strip(json.loads(r.stdout))
            except json.JSONDecodeError:
                obj = {"exit": r.returncode, "stderr": r.stderr.strip().splitlines()[-1:]}
            (out / f"{name}.json").write_text(json.dumps(obj, indent=1, sort_keys=True) + "\n")
            print(f"{name}: exit {r.returncode}", file=sys.stderr)
    if len(argv) >= 3 and argv[1] == "--compare":
        ref = Path(argv[2])
        bad = 0
        for f in sorted(ref.glob("*.json")):
            g = out / f.name
            if not g.exists() or g.read_text() != f.read_text():
                print(f"DIFFERS: {f.name}")
                bad += 1
        print(f"{bad} of {len(list(ref.glob('*.json')))} outputs differ")
        return 1 if bad else 0
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
