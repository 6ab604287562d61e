"""The signal chain's keys in rig files: presets, channel high-pass and EQ, response tables (private).

Called by the rig loader (:mod:`howl.model._rigfile`) for each ``[[mics]]``, ``[[speakers]]`` and
``[[talkers]]`` block; every problem is one :class:`~howl.errors.InputError` naming the rig file
and the key path (``mics[0].eq[1].freq_hz``), the value and what was expected. A response table's
own problems name the rig key and, in the message, the table file and its line.

The keys (units and defaults in ``docs/file-formats.md``):

* mics: ``preset``, ``high_pass = {freq_hz, order}``, ``eq = [{kind, freq_hz, gain_db, q}, ...]``,
  ``response_file``;
* speakers: ``preset``, ``usable_range = {low_hz, high_hz, low_slope_db_per_oct,
  high_slope_db_per_oct}`` or ``response_file``;
* talkers: ``spectrum`` (normal, raised, loud, shouted, flat) or ``spectrum_file``.
"""

from __future__ import annotations

import functools
import math
import tomllib
from pathlib import Path
from types import MappingProxyType
from typing import Any

from howl import validate as v
from howl.errors import InputError
from howl.model.rig import EQ_KINDS, TALKER_SPECTRA, EqBand, HighPass, UsableRange

#: The presets table shipped with howl (generic device classes, typical values from memory).
PRESETS_PATH = Path(__file__).resolve().parents[1] / "data" / "presets.toml"
#: Keys a preset may give, per kind (each one a rig key of that block).
PRESET_KEYS = {
    "mics": ("description", "source", "pattern", "sensitivity_dbv_pa"),
    "speakers": ("description", "source", "coverage_h_deg", "coverage_v_deg", "sensitivity_db_spl_1v_1m",
                 "usable_range", "role"),
}
HIGH_PASS_KEYS = ("freq_hz", "order")
EQ_BAND_KEYS = ("kind", "freq_hz", "gain_db", "q")
RANGE_KEYS = ("low_hz", "high_hz", "low_slope_db_per_oct", "high_slope_db_per_oct")
#: The chain's keys on each block (added to the rig loader's key lists).
MIC_CHAIN_KEYS = ("preset", "high_pass", "eq", "response_file")
SPEAKER_CHAIN_KEYS = ("preset", "usable_range", "response_file")
TALKER_CHAIN_KEYS = ("spectrum", "spectrum_file")

#: The filters run at this rate (a desk's usual rate); every frequency must lie below its Nyquist.
CHAIN_FS_HZ = 48000.0
#: Filter and range frequencies are accepted in [10 Hz, 0.45·48 kHz] (below the bilinear warp's worst).
MIN_FILTER_HZ, MAX_FILTER_HZ = 10.0, 0.45 * CHAIN_FS_HZ
#: Most EQ bands on one channel (a desk's parametric has 4–8; a generous bound).
MAX_EQ_BANDS = 16
#: Largest response table read (rows) and file (bytes).
MAX_TABLE_ROWS, MAX_TABLE_BYTES = 10_000, 1_000_000


# --------------------------------------------------------------------------- presets ----

@functools.lru_cache(maxsize=1)
def bundled_presets() -> MappingProxyType:
    """The shipped presets: ``{"mics": {key: {...}}, "speakers": {key: {...}}}`` (read once)."""
    with open(PRESETS_PATH, "rb") as fh:
        data = tomllib.load(fh)
    out = {}
    for kind in PRESET_KEYS:
        table = data.get(kind, {})
        for name, entry in table.items():
            v.known_keys(entry, f"{kind}.{name}", PRESET_KEYS[kind], file=str(PRESETS_PATH))
        out[kind] = MappingProxyType({k: MappingProxyType(dict(e)) for k, e in table.items()})
    return MappingProxyType(out)


def apply_preset(block: dict, kind: str, key: str, file: str | None) -> tuple[dict, str | None]:
    """The block with its preset's values filled in under the rig's own keys (the rig wins).

    ``usable_range`` merges key by key (a rig may give only ``low_hz``); a rig that gives
    ``response_file`` drops the preset's range. Returns (merged block, preset name or None).
    """
    if "preset" not in block:
        return block, None
    name = block["preset"]
    known = bundled_presets()[kind]
    if not isinstance(name, str) or name not in known:
        hint = v.closest(name, known) if isinstance(name, str) else None
        tail = f" (did you mean {hint!r}?)" if hint else ""
        raise InputError(f"unknown preset {name!r}{tail}; known: {', '.join(sorted(known))} (see `howl presets`)",
                         file=file, key=f"{key}.preset")
    preset = {k: val for k, val in known[name].items() if k not in ("description", "source")}
    merged = dict(preset)
    for k, val in block.items():
        if k == "usable_range" and isinstance(val, dict) and isinstance(preset.get(k), dict):
            merged[k] = {**preset[k], **val}
        else:
            merged[k] = val
    if "response_file" in block and "usable_range" not in block:
        merged.pop("usable_range", None)
    return merged, name


# --------------------------------------------------------------------------- filters ----

def _freq(value: Any, key: str, file: str | None) -> float:
    return v.in_range(value, key, MIN_FILTER_HZ, MAX_FILTER_HZ, unit="Hz", file=file)


def _table(value: Any, key: str, file: str | None, what: str, allowed) -> dict:
    if not isinstance(value, dict):
        raise v.fail(key, what, value, file=file)
    v.known_keys(value, key, allowed, file=file)
    return value


def _need(table: dict, name: str, key: str, file: str | None, hint: str) -> Any:
    if name not in table:
        raise InputError(f"missing key (expected {hint})", file=file, key=f"{key}.{name}")
    return table[name]


def parse_high_pass(value: Any, key: str, file: str | None) -> HighPass:
    t = _table(value, key, file, "a table {freq_hz = ..., order = 1..4}", HIGH_PASS_KEYS)
    f = _freq(_need(t, "freq_hz", key, file, "the −3 dB frequency in Hz"), f"{key}.freq_hz", file)
    order = v.integer(t.get("order", 2), f"{key}.order", 1, 4, file=file)
    return HighPass(f, order)


def parse_eq(value: Any, key: str, file: str | None) -> tuple[EqBand, ...]:
    if not isinstance(value, list):
        raise v.fail(key, "a list of EQ bands [{kind = ..., freq_hz = ...}, ...]", value, file=file)
    if len(value) > MAX_EQ_BANDS:
        raise InputError(f"holds {len(value)} bands; expected at most {MAX_EQ_BANDS}", file=file, key=key)
    bands = []
    for i, item in enumerate(value):
        k = f"{key}[{i}]"
        t = _table(item, k, file, "a table {kind, freq_hz, gain_db, q}", EQ_BAND_KEYS)
        kind = v.choice(_need(t, "kind", k, file, "one of " + ", ".join(EQ_KINDS)), f"{k}.kind", EQ_KINDS,
                        file=file)
        f = _freq(_need(t, "freq_hz", k, file, "a frequency in Hz"), f"{k}.freq_hz", file)
        if kind in ("high_pass", "low_pass"):
            if "gain_db" in t:
                raise InputError(f"a {kind} band has no gain; leave gain_db out", file=file, key=f"{k}.gain_db")
            gain = 0.0
        else:
            gain = v.in_range(_need(t, "gain_db", k, file, "the gain in dB, −30..+15"), f"{k}.gain_db", -30.0, 15.0,
                              unit="dB", file=file)
        q = v.in_range(t.get("q", 1.0 if kind == "peaking" else 1.0 / math.sqrt(2.0)), f"{k}.q", 0.1, 40.0,
                       file=file)
        bands.append(EqBand(kind, f, gain, q))
    return tuple(bands)


def check_pass_order(high_pass: HighPass | None, eq: tuple[EqBand, ...], key: str, file: str | None) -> None:
    """A channel whose high-pass sits at or above one of its low-passes passes nothing: refuse it."""
    his = [("high_pass", high_pass.freq_hz)] if high_pass else []
    his += [(f"eq[{i}]", b.freq_hz) for i, b in enumerate(eq) if b.kind == "high_pass"]
    los = [(f"eq[{i}]", b.freq_hz) for i, b in enumerate(eq) if b.kind == "low_pass"]
    for hk, hf in his:
        for lk, lf in los:
            if hf >= lf:
                raise InputError(f"high-pass at {hf:g} Hz is at or above the low-pass {key}.{lk} at {lf:g} Hz; "
                                 "expected the high-pass below the low-pass", file=file, key=f"{key}.{hk}")


def parse_range(value: Any, key: str, file: str | None) -> UsableRange:
    t = _table(value, key, file, "a table {low_hz, high_hz, low_slope_db_per_oct, high_slope_db_per_oct}",
               RANGE_KEYS)
    lo = _freq(_need(t, "low_hz", key, file, "the low −10 dB point in Hz"), f"{key}.low_hz", file)
    hi = _freq(_need(t, "high_hz", key, file, "the high −10 dB point in Hz"), f"{key}.high_hz", file)
    if hi <= lo * 2.0:
        raise InputError(f"must be more than an octave above low_hz ({lo:g} Hz), got {hi:g} Hz", file=file,
                         key=f"{key}.high_hz")
    slopes = [v.in_range(t.get(n, d), f"{key}.{n}", 6.0, 96.0, unit="dB/octave", file=file)
              for n, d in (("low_slope_db_per_oct", 24.0), ("high_slope_db_per_oct", 12.0))]
    return UsableRange(lo, hi, slopes[0], slopes[1])


# --------------------------------------------------------------------------- tables ----

def read_response_table(value: Any, key: str, file: str | None, base_dir: Path) -> tuple[str, tuple]:
    """A CSV of ``frequency_hz, level_db`` rows (one optional header line, ``#`` comments).

    Frequencies strictly increasing in (0, 100 kHz], levels finite in [−120, +60] dB, at least two
    rows. Returns (absolute path, ((f, level), ...)); every problem names the rig key, and the
    table file and line in the message.
    """
    if not isinstance(value, str) or not value.strip():
        raise v.fail(key, "the path of a CSV file (frequency_hz, level_db)", value, file=file)
    p = Path(value)
    if not p.is_absolute():
        p = base_dir / p
    if not p.is_file():
        raise InputError(f"file not found: {str(p)!r}", file=file, key=key)
    if p.stat().st_size > MAX_TABLE_BYTES:
        raise InputError(f"table {str(p)!r} is over {MAX_TABLE_BYTES // 1000} kB; expected a short CSV",
                         file=file, key=key)
    try:
        text = p.read_bytes().decode("utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"table {str(p)!r} cannot be read as UTF-8 text ({exc})", file=file, key=key) from None
    rows: list[tuple[float, float]] = []
    header_seen = False
    for n, line in enumerate(text.splitlines(), start=1):
        s = line.split("#", 1)[0].strip()
        if not s:
            continue
        parts = [x.strip() for x in s.replace(";", ",").split(",")] if ("," in s or ";" in s) else s.split()
        try:
            f, lev = (float(x) for x in parts) if len(parts) == 2 else (None, None)
        except ValueError:
            f = lev = None
        if f is None:
            if not rows and not header_seen:
                header_seen = True  # one header line before the data
                continue
            raise InputError(f"table {p.name!r} line {n}: expected two numbers frequency_hz, level_db, got {s[:40]!r}",
                             file=file, key=key)
        header_seen = True
        if not (math.isfinite(f) and 0.0 < f <= 100_000.0) or not (math.isfinite(lev) and -120.0 <= lev <= 60.0):
            raise InputError(f"table {p.name!r} line {n}: expected 0 < frequency_hz <= 100000 and −120 <= level_db "
                             f"<= 60, got {f:g}, {lev:g}", file=file, key=key)
        if rows and f <= rows[-1][0]:
            raise InputError(f"table {p.name!r} line {n}: frequencies must increase, got {f:g} Hz after "
                             f"{rows[-1][0]:g} Hz", file=file, key=key)
        rows.append((f, lev))
        if len(rows) > MAX_TABLE_ROWS:
            raise InputError(f"table {p.name!r} has over {MAX_TABLE_ROWS} rows", file=file, key=key)
    if len(rows) < 2:
        raise InputError(f"table {p.name!r} has {len(rows)} data row(s); expected at least 2 (frequency_hz, level_db)",
                         file=file, key=key)
    return str(p.resolve()), tuple(rows)


# --------------------------------------------------------------------------- per block ----

def mic_chain(m: dict, key: str, file: str | None, base_dir: Path) -> dict:
    """The Mic fields of the chain keys of one ``[[mics]]`` block (after :func:`apply_preset`)."""
    hp = parse_high_pass(m["high_pass"], f"{key}.high_pass", file) if "high_pass" in m else None
    eq = parse_eq(m["eq"], f"{key}.eq", file) if "eq" in m else ()
    check_pass_order(hp, eq, key, file)
    out: dict = {"high_pass": hp, "eq": eq}
    if "response_file" in m:
        out["response_file"], out["response_table"] = read_response_table(m["response_file"], f"{key}.response_file",
                                                                          file, base_dir)
    return out


def speaker_chain(s: dict, key: str, file: str | None, base_dir: Path) -> dict:
    """The Speaker fields of the chain keys of one ``[[speakers]]`` block (after :func:`apply_preset`)."""
    if "usable_range" in s and "response_file" in s:
        raise InputError("give usable_range or response_file, not both", file=file, key=f"{key}.usable_range")
    out: dict = {}
    if "usable_range" in s:
        out["usable_range"] = parse_range(s["usable_range"], f"{key}.usable_range", file)
    if "response_file" in s:
        out["response_file"], out["response_table"] = read_response_table(s["response_file"], f"{key}.response_file",
                                                                          file, base_dir)
    return out


def talker_chain(t: dict, key: str, file: str | None, base_dir: Path) -> dict:
    """The Talker fields of ``spectrum`` / ``spectrum_file``."""
    if "spectrum_file" in t:
        if t.get("spectrum", "table") != "table":
            raise InputError(f"spectrum_file is given, so spectrum must be 'table' or left out, got "
                             f"{t['spectrum']!r}", file=file, key=f"{key}.spectrum")
        path, rows = read_response_table(t["spectrum_file"], f"{key}.spectrum_file", file, base_dir)
        return {"spectrum": "table", "spectrum_file": path, "spectrum_table": rows}
    if t.get("spectrum") == "table":
        raise InputError("spectrum = 'table' needs spectrum_file (a CSV of frequency_hz, level_db)", file=file,
                         key=f"{key}.spectrum_file")
    spectrum = v.choice(t.get("spectrum", "normal"), f"{key}.spectrum", TALKER_SPECTRA, file=file)
    return {"spectrum": spectrum}


def chain_to_dict(item) -> dict:
    """The chain keys of a Mic, Speaker or Talker as file data (for ``rig_to_dict``)."""
    out: dict = {}
    if getattr(item, "high_pass", None) is not None:
        out["high_pass"] = {"freq_hz": item.high_pass.freq_hz, "order": item.high_pass.order}
    if getattr(item, "eq", ()):
        out["eq"] = [{"kind": b.kind, "freq_hz": b.freq_hz, "q": b.q}
                     | ({} if b.kind in ("high_pass", "low_pass") else {"gain_db": b.gain_db}) for b in item.eq]
    r = getattr(item, "usable_range", None)
    if r is not None:
        out["usable_range"] = {"low_hz": r.low_hz, "high_hz": r.high_hz, "low_slope_db_per_oct": r.low_slope_db_per_oct,
                               "high_slope_db_per_oct": r.high_slope_db_per_oct}
    if getattr(item, "response_file", None):
        out["response_file"] = item.response_file
    if hasattr(item, "spectrum"):
        out["spectrum"] = item.spectrum
        if item.spectrum_file:
            out["spectrum_file"] = item.spectrum_file
    if getattr(item, "preset", None):
        out["preset"] = item.preset
    return out
