"""Reading a measured session folder for the desk sheet (``session.json`` with ``pairs``, each naming a
speaker, a mic and an ``ir_file`` relative to the folder); re-exported by :mod:`howl.report.sheet`."""

from __future__ import annotations

import datetime as _dt
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from howl.errors import InputError

# ----------------------------------------------------------------------------
# Reading a measured session
# ----------------------------------------------------------------------------


@dataclass(frozen=True)
class SessionPair:
    speaker: str
    mic: str
    ir_file: str  # as written in session.json (relative)
    ir: Any  # numpy array
    sample_rate_hz: int


@dataclass(frozen=True)
class Session:
    folder: str
    date: str | None
    pairs: tuple[SessionPair, ...]
    meta: dict = field(default_factory=dict)


def _read_json(path: Path, option: str | None):
    """Parse one JSON file; any problem is a one-line InputError naming it (and the option)."""
    from howl.fileio import read_json_file

    return read_json_file(path, option=option)


def read_session(folder: str | os.PathLike) -> Session:
    """Read a measurement session folder: ``session.json`` and its IR WAVs.

    ``session.json`` holds ``pairs``: a list of objects with at least
    ``speaker``, ``mic`` and ``ir_file`` (relative to the folder); a ``date``
    (ISO text) if present is taken as the measurement date, else the file's
    modification date.
    """
    from howl.fileio import read_wav

    folder_p = Path(folder)
    name = str(folder)
    if not folder_p.is_dir():
        raise InputError("is not a folder; expected a measurement session folder holding session.json", key="--measured", file=name)
    meta_p = folder_p / "session.json"
    if not meta_p.is_file():
        raise InputError("holds no session.json; expected a folder written by howl measure", key="--measured", file=name)
    meta = _read_json(meta_p, None)
    if not isinstance(meta, dict):
        raise InputError("must hold a JSON object", file=str(meta_p))
    raw_pairs = meta.get("pairs")
    if not isinstance(raw_pairs, list) or not raw_pairs:
        raise InputError("must be a non-empty list of {speaker, mic, ir_file}", file=str(meta_p), key="pairs")
    import warnings

    from howl.errors import HowlWarning

    pairs = []
    for i, p in enumerate(raw_pairs):
        key = f"pairs[{i}]"
        if not isinstance(p, dict):
            raise InputError("must be an object {speaker, mic, ir_file}", file=str(meta_p), key=key)
        status = p.get("status", "ok")
        if status != "ok" or not p.get("ir_file"):
            warnings.warn(
                f"{meta_p}: {key} ({p.get('speaker')} -> {p.get('mic')}) has status {status!r} and no usable IR; left off the sheet",
                HowlWarning,
            )
            continue
        for k in ("speaker", "mic", "ir_file"):
            if not isinstance(p.get(k), str) or not p.get(k).strip():
                raise InputError(f"must be a non-empty string, got {p.get(k)!r}", file=str(meta_p), key=f"{key}.{k}")
        ir_rel = p["ir_file"]
        ir, fs = read_wav(folder_p / ir_rel, option="")  # a loop IR per pair: one channel
        pairs.append(SessionPair(p["speaker"], p["mic"], ir_rel, ir, fs))
    if not pairs:
        raise InputError("holds no pair with a usable IR (status 'ok' and an ir_file)", file=str(meta_p), key="pairs")
    date = meta.get("date") or meta.get("created_utc") or meta.get("created")
    if isinstance(date, str) and len(date.strip()) >= 10:
        date = date.strip()[:10]
    else:
        date = _dt.date.fromtimestamp(meta_p.stat().st_mtime).isoformat()
    return Session(folder=name, date=date, pairs=tuple(pairs), meta=meta)


#: How a mic's summed loop is named in the measured table (the "speaker" column).
COMBINED_SPEAKER = "all {n} speakers"


def with_combined_loops(session: Session) -> Session:
    """The session plus, for each mic measured through two or more loudspeakers, their loops summed.

    Each pair's loop IR holds that mic's send to that loudspeaker at the measurement settings,
    with time zero at sample 0 for all of them, so the mic's own loop with all those
    loudspeakers on at once is the sum of its pair loops (superposition of linear paths). The
    summed pair is named ``all N speakers`` and its ``ir_file`` joins the files with " + ".
    Loops of other open mics still add to it (the sheet's small print says so). Pairs at a
    different sample rate from the mic's first are left out of the sum, with a warning.
    """
    import warnings

    import numpy as np

    from howl.errors import HowlWarning

    by_mic: dict[str, list[SessionPair]] = {}
    for pair in session.pairs:
        by_mic.setdefault(pair.mic, []).append(pair)
    extra = []
    for mic, pairs in by_mic.items():
        fs = pairs[0].sample_rate_hz
        same = [p for p in pairs if p.sample_rate_hz == fs]
        if len(same) < len(pairs):
            warnings.warn(f"{mic}: loops at other sample rates than {fs} Hz are left out of its summed loop", HowlWarning)
        if len({p.speaker for p in same}) < 2:
            continue
        n = max(np.asarray(p.ir).size for p in same)
        total = np.zeros(n)
        for p in same:
            h = np.asarray(p.ir, dtype=float)
            total[: h.size] += h
        extra.append(SessionPair(COMBINED_SPEAKER.format(n=len(same)), mic, " + ".join(p.ir_file for p in same), total, fs))
    if not extra:
        return session
    return Session(folder=session.folder, date=session.date, pairs=session.pairs + tuple(extra), meta=session.meta)


def check_session(session: Session, rig) -> None:
    """Refuse a session whose pairs name a mic the rig does not have."""
    mic_names = {m.name for m in rig.mics}
    for i, pair in enumerate(session.pairs):
        if pair.mic not in mic_names:
            raise InputError(
                f"names mic {pair.mic!r}, which the rig does not have (mics: {', '.join(sorted(mic_names))})",
                file=os.path.join(session.folder, "session.json"),
                key=f"pairs[{i}].mic",
            )


# ----------------------------------------------------------------------------
# Building the sheet data
# ----------------------------------------------------------------------------
