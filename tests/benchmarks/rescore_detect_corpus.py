"""Recompute the summaries of a bench_detect_corpus results file from its rows (after a change to
detect_corpus.summarise): python tests/benchmarks/rescore_detect_corpus.py FILE.json"""

import json
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "listen"))
import detect_corpus as C  # noqa: E402

for name in sys.argv[1:]:
    d = json.loads(Path(name).read_text())
    for split, v in d["splits"].items():
        cpu = v["summary"].get("cpu_s")
        v["summary"] = {**C.summarise(v["rows"]), "cpu_s": cpu}
        print(name, split, {k: x for k, x in v["summary"].items() if k != "cases_with_false_howl"})
    Path(name).write_text(json.dumps(d, indent=1), encoding="utf-8")
