"""Cut lists a technician types into a console, and reading cut lists back.

:func:`cut_rows` turns cuts into plain rows in desk terms (centre Hz, gain dB, Q and the
bandwidth in octaves by the analog cookbook relation, :mod:`howl.loop.notch`); for a
graphic EQ, one row per slider on the ISO 266 centres with its setting (0 dB where
untouched). :func:`write_cut_file` writes them as CSV or JSON (by the file's suffix,
atomically). :func:`read_cut_file` reads a cut list for ``howl simulate --cuts``: the
CSV or JSON written here, or the ``--json`` output of ``howl ringout`` or ``howl scan``
(their ``notches``); every error is one line naming the file and the row or key.
"""

from __future__ import annotations

import csv
import io
import json
import math
from pathlib import Path

from howl.errors import InputError
from howl.loop.notch import Notch, bandwidth_oct_from_q

CSV_COLUMNS = ("band", "type", "freq_hz", "gain_db", "q", "bandwidth_oct")
FORMAT = "howl cut list"


def slider_label(freq_hz: float) -> str:
    """A graphic slider's label: 31.5, 250, 1k, 1.25k, 12.5k."""
    if freq_hz >= 1000.0:
        return f"{freq_hz / 1000.0:g}k"
    return f"{freq_hz:g}"


def cut_rows(notches, desk=None) -> list[dict]:
    """The cuts as rows in desk terms (see the module docstring), sorted by frequency."""
    rows = []
    if desk is not None and desk.graphic:
        from howl.loop.desk import ISO_266_THIRD_OCTAVE_HZ

        set_ = {round(n.freq_hz, 6): n.gain_db for n in notches}
        for i, fc in enumerate(ISO_266_THIRD_OCTAVE_HZ):
            g = set_.get(round(fc, 6), 0.0)
            rows.append({"band": slider_label(fc), "type": "graphic", "freq_hz": fc, "gain_db": float(g),
                         "q": float(desk.graphic_q), "bandwidth_oct": bandwidth_oct_from_q(desk.graphic_q)})
        return rows
    for i, n in enumerate(sorted(notches, key=lambda n: n.freq_hz)):
        rows.append({"band": i + 1, "type": "notch" if n.gain_db is None else "peaking", "freq_hz": float(n.freq_hz),
                     "gain_db": None if n.gain_db is None else float(n.gain_db), "q": float(n.q),
                     "bandwidth_oct": float(n.bandwidth_oct)})
    return rows


def _csv_text(rows: list[dict]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for r in rows:
        g = "notch" if r["gain_db"] is None else f"{r['gain_db']:.2f}"
        w.writerow([r["band"], r["type"], f"{r['freq_hz']:.1f}", g, f"{r['q']:.3f}", f"{r['bandwidth_oct']:.4f}"])
    return buf.getvalue()


def write_cut_file(path, notches, *, desk=None, source: str = "", option: str = "--cuts-out") -> str:
    """Write the cut list to ``path`` (.csv or .json, atomically); returns the path written."""
    from howl.fileio import write_text_atomic

    p = Path(path)
    suffix = p.suffix.lower()
    if suffix not in (".csv", ".json"):
        raise InputError(f"must end in .csv or .json, got {str(path)!r}", key=option)
    rows = cut_rows(notches, desk)
    if suffix == ".csv":
        text = _csv_text(rows)
    else:
        obj = {"format": FORMAT, "version": 1, "source": source,
               "desk": None if desk is None else desk.to_json(),
               "bandwidth_relation": "analog cookbook: 1/Q = 2 sinh(ln2/2 * BW)",
               "cuts": rows}
        text = json.dumps(obj, indent=2) + "\n"
    write_text_atomic(p, text)
    return str(p)


def _number(x, where: str, file: str, *, lo: float | None = None, hi_open: float | None = None) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        raise InputError(f"must be a number, got {x!r}", file=file, key=where) from None
    if not math.isfinite(v) or (lo is not None and v <= lo) or (hi_open is not None and v >= hi_open):
        cond = "a finite number"
        if lo is not None:
            cond = f"> {lo:g}"
        if hi_open is not None:
            cond = f"< {hi_open:g}"
        raise InputError(f"must be {cond}, got {x!r}", file=file, key=where)
    return v


def _cut(freq, gain, q, where: str, file: str) -> Notch | None:
    f = _number(freq, f"{where}.freq_hz", file, lo=0.0)
    qq = _number(q, f"{where}.q", file, lo=0.0)
    if gain is None or (isinstance(gain, str) and gain.strip().lower() in ("notch", "none", "")):
        return Notch(f, None, qq)
    g = _number(gain, f"{where}.gain_db", file)
    if g > 0:
        raise InputError(f"must be a cut (<= 0 dB), got {g:g} dB", file=file, key=f"{where}.gain_db")
    if g == 0:
        return None  # an untouched slider
    return Notch(f, g, qq)


def read_cut_file(path) -> list[Notch]:
    """The cuts of a cut list (CSV/JSON written by ``--cuts-out``, or ringout/scan JSON)."""
    p = Path(path)
    file = str(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("no such file", file=file) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot be read as text ({exc.__class__.__name__})", file=file) from None
    cuts: list[Notch | None] = []
    if p.suffix.lower() == ".csv":
        rows = list(csv.DictReader(io.StringIO(text)))
        if not rows or not {"freq_hz", "gain_db", "q"} <= set(rows[0]):
            raise InputError("must be a CSV cut list with the columns freq_hz, gain_db and q (as --cuts-out writes)",
                             file=file)
        for i, r in enumerate(rows):
            cuts.append(_cut(r["freq_hz"], r["gain_db"], r["q"], f"row {i + 2}", file))
    else:
        try:
            obj = json.loads(text)
        except json.JSONDecodeError as exc:
            raise InputError(f"is not valid JSON (line {exc.lineno}: {exc.msg})", file=file) from None
        key = "cuts" if isinstance(obj, dict) and "cuts" in obj else "notches"
        items = obj.get(key) if isinstance(obj, dict) else None
        if not isinstance(items, list):
            raise InputError("must hold a list of cuts under 'cuts' (a --cuts-out file) or 'notches' "
                             "(the --json of howl ringout or howl scan)", file=file)
        for i, it in enumerate(items):
            if not isinstance(it, dict) or not {"freq_hz", "q"} <= set(it) or "gain_db" not in it:
                raise InputError("must be an object with freq_hz, gain_db and q", file=file, key=f"{key}[{i}]")
            cuts.append(_cut(it["freq_hz"], it["gain_db"], it["q"], f"{key}[{i}]", file))
    return [c for c in cuts if c is not None]
