"""Cut lists for the desk sheet: a virtual ring-out's cuts, a cut file, and what ``listen``/``scan``
suggested, all in desk terms; re-exported by :mod:`howl.report.sheet`."""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Sequence

from howl.errors import InputError
from howl.report._sheet_rules import _f, _num, measured_mark_db
from howl.report._sheet_session import Session, _read_json
from howl.report._sheet_types import Cut, CutSet
from howl.report.cutlist import desk_cuts, desk_line, listened_on_desk

def cut_set_from_ringout(loop: str, result, fsm_db: float | None = None) -> CutSet:
    """Turn a ``howl.ringout.RingOutResult`` into a :class:`CutSet`.

    With ``fsm_db``, also the measured "don't go past" mark with the cuts in
    (:func:`measured_mark_db` of the margins after the ring-out).
    """
    cuts = desk_cuts(Cut, result.notches, getattr(result, "desk", None))
    advice = getattr(result, "advice", ()) or ()
    if isinstance(advice, str):
        advice = (advice,)
    return CutSet(
        loop=loop,
        source="ring-out",
        cuts=tuple(cuts),
        added_stable_gain_db=_f(result.added_stable_gain_db),
        margin_before_db=_f(result.gain_margin_db_before),
        margin_after_db=_f(result.gain_margin_db_after),
        stopped_because=str(getattr(result, "stopped_because", "") or ""),
        advice=tuple(str(a) for a in advice),
        tonal_cost_db=_f(getattr(result, "tonal_cost_db", None)),
        tonal_cost_speech_db=_f(getattr(result, "tonal_cost_speech_db", None)),
        mark_after_db=_mark_or_none(result.gain_margin_db_after, getattr(result, "magnitude_margin_db_after", None), fsm_db),
        desk=desk_line(getattr(result, "desk", None)),
    )


def _mark_or_none(gm, mm, fsm_db) -> float | None:
    if fsm_db is None or gm is None or mm is None:
        return None
    gm, mm = float(gm), float(mm)
    if math.isnan(gm) or math.isnan(mm):
        return None
    return _f(measured_mark_db(gm, mm, float(fsm_db)))


def read_cuts(path: str | os.PathLike) -> tuple[list, str]:
    """Cuts from a listen/scan session JSON (``howl listen --json`` / ``howl scan --json``).

    Takes the summary notch list (key ``notches``, ``summary_notches`` or
    ``summary.notches``), else every event's ``notch``. Each cut needs
    ``freq_hz`` and ``q``; ``gain_db`` null is a full notch. Returns
    (list of ``howl.notch.Notch``, a label for the sheet).
    """
    from howl.loop.notch import Notch

    p = Path(path)
    name = str(path)
    if not p.is_file():
        raise InputError("file not found; expected the JSON of howl listen or howl scan", key="--cuts", file=name)
    obj = _read_json(p, "--cuts")
    if not isinstance(obj, dict):
        raise InputError("must hold one JSON object", key="--cuts", file=name)
    raw = obj.get("notches") or obj.get("summary_notches")
    if raw is None and isinstance(obj.get("summary"), dict):
        raw = obj["summary"].get("notches")
    if raw is None and isinstance(obj.get("events"), list):
        raw = [e.get("notch") for e in obj["events"] if isinstance(e, dict) and isinstance(e.get("notch"), dict)]
    if not isinstance(raw, list):
        raise InputError("holds no notch list (notches, summary.notches or events[].notch)", key="--cuts", file=name)
    cuts = []
    for i, n in enumerate(raw):
        if not isinstance(n, dict):
            raise InputError("must be an object {freq_hz, gain_db, q}", key=f"notches[{i}]", file=name)
        try:
            g = n.get("gain_db")
            cuts.append(Notch(float(n["freq_hz"]), None if g is None else float(g), float(n["q"])))
        except (KeyError, TypeError, ValueError) as exc:
            msg = exc.message if isinstance(exc, InputError) else f"needs numbers freq_hz and q ({exc})"
            raise InputError(msg, key=f"notches[{i}]", file=name) from None
    return cuts, p.name


def cut_sets_from_listen(
    notches, label: str, session: Session | None = None, margins: Sequence | None = None, fsm_db: float | None = None,
    desk=None,
) -> list[CutSet]:
    """Cut sets for cuts found by listening; with measured loops, the ASG they buy on each.

    The ASG on a measured loop is ``nyquist_margin`` with the cuts' cascade
    (``howl.notch.cascade_sos``) in the loop, minus the margin without:
    the definition of added stable gain in van Waterschoot & Moonen [4]_.
    """
    notches, cuts, desk_s = listened_on_desk(Cut, notches, desk, session)  # with a desk: as it makes them
    if session is None or not margins:
        return [CutSet(loop=label, source="listen", cuts=cuts, added_stable_gain_db=None, margin_before_db=None, margin_after_db=None, desk=desk_s)]
    from howl.loop.nyquist import nyquist_margin
    from howl.loop.notch import cascade_sos

    befores, afters, lines, marks = [], [], [], []
    for pair, before in zip(session.pairs, margins):
        after = nyquist_margin(pair.ir, pair.sample_rate_hz, filters_sos=cascade_sos(list(notches), pair.sample_rate_hz)) if notches else before
        bm, am = float(before.gain_margin_db), float(after.gain_margin_db)
        marks.append(_mark_or_none(am, after.magnitude_margin_db, fsm_db))
        befores.append(bm)
        afters.append(am)
        lines.append(f"{pair.speaker} \u2192 {pair.mic}: phase-aware margin {_num(_f(bm))} \u2192 {_num(_f(am))} dB")
    # the rig is limited by its worst loop: ASG = worst margin with the cuts - worst margin without
    b, a = _f(min(befores)), _f(min(afters))
    return [
        CutSet(
            loop=f"{label}, on every measured loop",
            source="listen",
            cuts=cuts,
            added_stable_gain_db=None if a is None or b is None else a - b,
            margin_before_db=b,
            margin_after_db=a,
            advice=tuple(lines),
            mark_after_db=None if any(m is None for m in marks) or not marks else min(marks),
            desk=desk_s,
        )
    ]
