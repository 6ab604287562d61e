"""The gain-margin sheet: one printable page (or a few) per rig for the desk.

Two halves:

* **building** (:func:`build_sheet_data`): gathers numbers that other modules
  computed — the planner's JSON object (``howl.plan.plan_to_json``, the same
  object ``howl plan --json`` prints), the loop analysis of measured IRs
  (``howl.loop.nyquist_margin``) and the virtual ring-out
  (``howl.ringout.ring_out``) — into one frozen :class:`SheetData`. Nothing
  here recomputes a planner or loop number; the sheet only *combines* them
  with two stated rules (the measured "don't go past" mark and the verdict
  words for a measured loop, see :func:`measured_mark_db`).
* **rendering** (:func:`render_sheet`): draws a :class:`SheetData` with the
  ``matplotlib.figure.Figure`` API (no pyplot state; matplotlib is imported
  inside the functions) to PDF (TrueType fonts embedded: ``pdf.fonttype`` 42,
  set in a local ``rc_context``) or PNG. A4 and US Letter. Black-and-white
  printable: nothing is told by colour alone (line styles, markers, boxes and
  words carry the meaning).

The measured-session folder (``session.json`` with ``pairs``, each naming a
speaker, a mic and an ``ir_file`` relative to the folder) is read by
:func:`read_session`.

References
----------
.. [1] NIOSH, *Criteria for a Recommended Standard: Occupational Noise
   Exposure*, revised criteria 1998, DHHS (NIOSH) Publication No. 98-126:
   REL 85 dB(A) as an 8-hour TWA, 3 dB exchange rate.
.. [2] Directive 2003/10/EC of the European Parliament and of the Council
   (noise at work), Art. 3: lower/upper exposure action values 80/85 dB(A)
   L_EX,8h, exposure limit value 87 dB(A).
.. [3] World Health Organization, *WHO global standard for safe listening
   venues and events*, 2022: audience level at most 100 dB L_Aeq over 15 min.
.. [4] T. van Waterschoot and M. Moonen, "Fifty years of acoustic feedback
   control: state of the art and future challenges", Proc. IEEE 99(2), 2011
   (maximum stable gain, added stable gain, the Nyquist stability condition).
"""

from __future__ import annotations

import datetime as _dt
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

from howl.errors import InputError
from howl.report.cutlist import desk_cuts, desk_line, listened_on_desk

# ----------------------------------------------------------------------------
# Paper
# ----------------------------------------------------------------------------

#: Paper sizes in PostScript points (1/72 in): ISO 216 A4 is 210 × 297 mm,
#: US Letter 8.5 × 11 in.
PAPER_PT: dict[str, tuple[float, float]] = {
    "a4": (210.0 / 25.4 * 72.0, 297.0 / 25.4 * 72.0),
    "letter": (8.5 * 72.0, 11.0 * 72.0),
}

MINUS = "\u2212"  # typographic minus sign on the page

from howl.report._sheet_types import (  # noqa: E402,F401  the data model, re-exported
    Curve, Cut, CutSet, MapItem, MarginMap, MeasuredLine, MicLine, PlacementMap, SheetData,
)


# ----------------------------------------------------------------------------
# Rules of the sheet (the only numbers it forms itself)
# ----------------------------------------------------------------------------


def measured_mark_db(gain_margin_db: float, magnitude_margin_db: float, fsm_db: float) -> float:
    """The "don't go past" channel-gain change for a measured loop, in dB.

    The lower of two limits:

    * the phase-aware (Nyquist) margin less the feedback stability margin
      FSM: the fader stays FSM below the gain at which the frozen loop
      would howl [4]_;
    * the phase-blind margin −20·log10 max|H|: the gain at which the loudest
      peak of |H| would reach unity if the room's phase moved onto it (air
      temperature, people moving). A rise above it is a bet on the phase.

    Positive: the channel may rise that far above the measured settings;
    negative: bring it down at least that far.
    """
    return min(gain_margin_db - fsm_db, magnitude_margin_db)


def measured_verdict(gain_margin_db: float, magnitude_margin_db: float, fsm_db: float) -> str:
    """Verdict words for a measured loop at its measured settings.

    ``"will howl"`` when the phase-aware margin is ≤ 0 dB (the loop is
    unstable as measured), ``"marginal"`` when it is stable but the
    "don't go past" mark (:func:`measured_mark_db`) is below 0 dB, else
    ``"stable"``.
    """
    if gain_margin_db <= 0.0:
        return "will howl"
    if measured_mark_db(gain_margin_db, magnitude_margin_db, fsm_db) < 0.0:
        return "marginal"
    return "stable"


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


def _f(x: Any) -> float | None:
    if x is None:
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _pair(x: Any) -> tuple[float, float] | None:
    if isinstance(x, (list, tuple)) and len(x) == 2:
        a, b = _f(x[0]), _f(x[1])
        if a is not None and b is not None:
            return (a, b)
    return None


def _plan_mic_curves(plan_json: dict, m: dict) -> dict[str, tuple[tuple[float, ...], tuple[float, ...]]]:
    """Per-band curves of one mic from the plan JSON: ``worst_peak`` and ``average``.

    ``bands_hz`` (top level) gives the band centres; each mic object carries
    ``worst_peak_loop_gain_db`` (the band's expected highest peak, what the
    PAG and the channel limit rest on) and ``loop_gain_db`` (band average),
    both at the rig's stated settings.
    """
    centres = plan_json.get("bands_hz")
    out = {}
    if not isinstance(centres, list):
        return out
    for key, name in (("worst_peak_loop_gain_db", "worst_peak"), ("loop_gain_db", "average")):
        gains = m.get(key)
        if not isinstance(gains, list) or len(gains) != len(centres):
            continue
        pts = [(_f(c), _f(g)) for c, g in zip(centres, gains)]
        pts = [(c, g) for c, g in pts if c is not None and g is not None and c > 0]
        if pts:
            out[name] = (tuple(p[0] for p in pts), tuple(p[1] for p in pts))
    return out


def _mic_lines(rig, plan_json: dict | None) -> tuple[list[MicLine], list[Curve]]:
    by_name = {}
    muted, unrouted = set(), set()
    if plan_json is not None:
        for m in plan_json.get("mics", []):
            by_name[m.get("name")] = m
        muted = set(plan_json.get("muted_mics", []) or [])
        unrouted = set(plan_json.get("unrouted_mics", []) or [])
    lines, curves = [], []
    for mic in rig.mics:
        m = by_name.get(mic.name, {})
        pag, nag = _f(m.get("pag_db")), _f(m.get("nag_db"))
        spread = _pair(m.get("margin_spread_db"))
        if m:
            verdict = m.get("verdict")
        elif mic.name in muted or not mic.open:
            verdict = "muted"
        elif mic.name in unrouted:
            verdict = "not routed"
        else:
            verdict = None
        ring = _f(m.get("limiting_channel_band_hz"))
        if ring is None:
            ring = _f(m.get("limiting_band_hz"))
        lines.append(
            MicLine(
                name=mic.name,
                pattern=mic.pattern,
                position_m=tuple(float(v) for v in mic.position_m),
                is_open=bool(mic.open),
                pag_db=pag,
                nag_db=nag,
                margin_db=_f(m.get("margin_db")),
                margin_spread_db=spread,
                max_channel_gain_db=_f(m.get("max_channel_gain_db")),
                limiting_band_hz=ring,
                verdict=verdict,
                davis_pag_db=_f(m.get("davis_pag_db")),
                davis_nag_db=_f(m.get("davis_nag_db")),
                gains_db=tuple((str(k), float(v)) for k, v in (m.get("gains_db") or {}).items() if _f(v) is not None),
                stability=m.get("stability"), reach=m.get("reach"), short_by_db=_f(m.get("short_by_db")),
                pag_basis=m.get("pag_basis"),
            )
        )
        cs = _plan_mic_curves(plan_json, m) if (plan_json is not None and m) else {}
        if "worst_peak" in cs:
            f, g = cs["worst_peak"]
            ring_hz = _f(m.get("rings_first_hz"))  # the plan's one rule; else the highest worst peak
            k = (min(range(len(f)), key=lambda i: abs(f[i] - ring_hz)) if ring_hz is not None
                 else max(range(len(g)), key=lambda i: g[i]))
            curves.append(Curve(mic.name, "planned, band worst peak", "planned", f, g, ((f[k], g[k], "rings first"),)))
        if "average" in cs:
            f, g = cs["average"]
            curves.append(Curve(mic.name, "planned, band average", "planned-average", f, g))
    return lines, curves


def _measured_curve(pair: SessionPair, margin, label: str) -> Curve:
    """|H| of a measured loop for plotting (LOOP's DTFT), thinned for the page.

    The loop response comes from ``howl.loop.loop_response``. For the page
    it is reduced to the maximum over ~600 log-spaced slices, which keeps
    every peak a tech has to see and drops the detail no printer can show.
    """
    import numpy as np

    from howl.loop.nyquist import loop_response

    f, h = loop_response(pair.ir, pair.sample_rate_hz)
    f = np.asarray(f, dtype=float)
    mag_db = 20.0 * np.log10(np.maximum(np.abs(h), 1e-12))
    lo, hi = getattr(margin, "band_hz", None) or (20.0, pair.sample_rate_hz / 2)
    lo = max(float(lo), 20.0, f[1] if f.size > 1 else 20.0)
    hi = min(float(hi), float(f[-1]))
    edges = np.geomspace(lo, hi, 601)
    idx = np.searchsorted(f, edges)
    ff, gg = [], []
    for a, b in zip(idx[:-1], idx[1:]):
        if b > a:
            j = a + int(np.argmax(mag_db[a:b]))
            ff.append(float(f[j]))
            gg.append(float(mag_db[j]))
    marks = []
    hz = _f(margin.howl_freq_hz)
    if hz is not None:
        marks.append((hz, -float(margin.gain_margin_db), "howls first"))
    # the next worst crossings (LOOP's risk list, worst first), unlabelled
    for r in getattr(margin, "risks", ()) or ():
        if len(marks) >= 4:
            break
        rf, rm = _f(getattr(r, "freq_hz", None)), _f(getattr(r, "margin_db", None))
        if getattr(r, "kind", "") != "crossing" or rf is None or rm is None:
            continue
        if hz is not None and abs(rf - hz) <= 1e-6 * hz:
            continue
        marks.append((rf, -rm, "next crossing"))
    return Curve(panel=pair.mic, label=label, kind="measured", freq_hz=tuple(ff), loop_gain_db=tuple(gg), marks=tuple(marks))


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


def read_margin_map(path: str | os.PathLike, rig=None) -> MarginMap:
    """Read a placement map: the JSON that ``howl map --json`` prints."""
    p = Path(path)
    name = str(path)
    if not p.is_file():
        raise InputError("file not found; expected the JSON of howl map --json", key="--map", file=name)
    obj = _read_json(p, "--map")
    grid = obj.get("grid") if isinstance(obj, dict) else None
    if not isinstance(grid, dict) or not all(isinstance(grid.get(k), list) for k in ("x_m", "y_m", "margin_db")):
        raise InputError("holds no grid {x_m, y_m, margin_db}; expected the JSON of howl map --json", key="--map", file=name)
    x = [_f(v) for v in grid["x_m"]]
    y = [_f(v) for v in grid["y_m"]]
    rows = grid["margin_db"]
    if None in x or None in y or len(rows) != len(y) or any(not isinstance(r, list) or len(r) != len(x) for r in rows):
        raise InputError(f"grid.margin_db must be {len(y)} rows of {len(x)} values", key="--map", file=name)
    mic = str(obj.get("mic", ""))
    if rig is not None and mic not in {m.name for m in rig.mics}:
        raise InputError(f"maps mic {mic!r}, which the rig does not have", key="--map", file=name)
    best = obj.get("best") or {}
    cur = obj.get("current") or {}
    pos = best.get("position_m")
    return MarginMap(
        mic=mic,
        method=str(obj.get("method", "")),
        height_m=float(_f(obj.get("height_m")) or 0.0),
        x_m=tuple(x),
        y_m=tuple(y),
        margin_db=tuple(tuple(_f(v) for v in r) for r in rows),
        best_position_m=tuple(float(v) for v in pos) if isinstance(pos, list) and len(pos) == 3 else None,
        best_margin_db=_f(best.get("margin_db")),
        current_margin_db=_f(cur.get("margin_db")),
    )


def placement_from_rig(rig) -> PlacementMap:
    items = []
    for s in rig.speakers:
        items.append(MapItem("speaker", s.name, s.position_m[0], s.position_m[1], s.azimuth_rad))
    for m in rig.mics:
        items.append(MapItem("mic", m.name, m.position_m[0], m.position_m[1], m.azimuth_rad))
    for t in rig.talkers:
        items.append(MapItem("talker", t.name, t.position_m[0], t.position_m[1]))
    for l in rig.listeners:
        items.append(MapItem("listener", l.name, l.position_m[0], l.position_m[1]))
    outline = None
    if rig.room.dimensions_m is not None:
        outline = (float(rig.room.dimensions_m[0]), float(rig.room.dimensions_m[1]))
    return PlacementMap(outline_m=outline, items=tuple(items))


def default_cautions(fsm_db: float) -> tuple[tuple[str, str], ...]:
    """The cautions box, with the sources of its figures ([1]_, [2]_, [3]_)."""
    return (
        (
            "Hearing",
            "A howl or a ring-out can go far above show level within a second. Crew: NIOSH REL "
            "85 dB(A) over 8 h, 3 dB exchange rate, so 100 dB(A) is a full day's dose in 15 min "
            "(DHHS (NIOSH) Publ. 98-126, 1998); in the EU, Directive 2003/10/EC action values "
            "80 and 85 dB(A) L_EX,8h, limit 87 dB(A). Audience: at most 100 dB L_Aeq over 15 min "
            "(WHO global standard for safe listening venues and events, 2022). Wear hearing "
            "protection while ringing out and warn everyone in the room first.",
        ),
        (
            "Loudspeakers",
            "A sustained howl drives one frequency at full power: tweeters and compression drivers "
            "fail first. Keep limiters and protection in, raise faders in small steps, keep a hand "
            "on the master.",
        ),
        (
            "Scope",
            "This sheet is an estimate. Local codes, venue rules and licensed practice come first. "
            "Emergency and voice-alarm systems are outside its scope.",
        ),
    )


def default_notes(data_basis: str, fsm_db: float, plan_json: dict | None, has_cuts: bool) -> tuple[str, ...]:
    notes = []
    if "planned" in data_basis:
        method = (plan_json or {}).get("method", "statistical")
        notes.append(
            f"Planned ({method} model of the room, per band), every figure for a flat fader on the channel as the "
            "rig sets it (high-pass, EQ, transducer responses in). DON'T GO PAST = how far that one fader may rise "
            "in every mix it feeds, from the STATED gains, before the whole loop's expected worst peak reaches "
            f"-FSM ({_num(fsm_db, sign=False)} dB); RINGS FIRST = the band where it does; the limit of all open "
            "mics together is printed above the table: single-fader limits do not add. AS SET = the rig at its "
            "stated gains: STABLE (below -FSM), INSIDE FSM (between -FSM and unity), HOWLS (at or past unity). "
            "PAG = the talker's gain at the farthest listener with that fader at its limit, NAG = gain needed "
            "(EAD), both speech-weighted over the bands; REACH = PAG against NAG. Davis = the classic "
            "distance-only free-field figures, D1 and D2 from the worst single loudspeaker. A measured loop "
            "is printed beside the plan's figure, labelled with its pair; it never replaces it."
        )
        assumed = [str(a).rstrip(".") for a in (plan_json or {}).get("assumptions", []) or []]
        if assumed:
            notes.append("Planner's assumptions: " + "; ".join(assumed) + ".")
    if "measured" in data_basis:
        notes.append(
            "Measured: loop IRs at the settings in force during the measurement. Phase-aware margin = "
            "-20 log10 of the largest positive real-axis crossing of the loop response (Nyquist); it says "
            "where the loop howls today. Phase-blind margin = -20 log10 max|H|; it holds if the room's phase "
            "drifts (warmer air, people moving) onto the highest peak. Both are shown because the first is "
            "exact but fragile and the second is safe but pessimistic. Measured DON'T GO PAST = the lower of "
            "(phase-aware - FSM) and (phase-blind); where a mic has planned and measured marks, the measured "
            "one is printed large."
        )
    if has_cuts:
        notes.append(
            "Cuts: RBJ Audio EQ Cookbook peaking cuts ('notch' = full notch); Q as the cookbook defines "
            "it for that filter type, width in octaves. ASG = the rise in phase-aware margin with the cuts in "
            "the loop (margin after - margin before); for cuts found by listening, of the worst measured loop."
        )
    notes.append(
        "Assumed: the rig file's positions, aims, patterns and mix gains; air at the room file's temperature; "
        "a measured IR is one loudspeaker-to-mic loop at the settings of its measurement; a line 'all N speakers' "
        "is the sum of one mic's measured loops, that mic's own loop with those loudspeakers on at once (loops "
        "of other open mics add to it). Positions in metres from the room corner (x along the length, y across)."
    )
    return tuple(notes)


def _measured_lines(rig, session: Session, margins, plan_json: dict | None, fsm: float, curves: list) -> list:
    """One :class:`MeasuredLine` per measured pair; each pair's measured curve is appended to ``curves``."""
    measured = []
    if margins is None or len(margins) != len(session.pairs):
        raise InputError("need one margin result per measured pair", key="margins")
    check_session(session, rig)
    for pair, mr in zip(session.pairs, margins):
        gm = float(mr.gain_margin_db)
        mm = float(mr.magnitude_margin_db)
        measured.append(
            MeasuredLine(
                speaker=pair.speaker,
                mic=pair.mic,
                ir_file=pair.ir_file,
                gain_margin_db=gm,
                magnitude_margin_db=mm,
                howl_freq_hz=float(mr.howl_freq_hz),
                max_channel_gain_db=measured_mark_db(gm, mm, fsm),
                verdict=measured_verdict(gm, mm, fsm),
                planned_magnitude_margin_db=_planned_pair(plan_json, pair.speaker, pair.mic),
            )
        )
        curves.append(_measured_curve(pair, mr, f"measured via {pair.speaker}"))
    return measured


def build_sheet_data(
    rig,
    *,
    plan_json: dict | None = None,
    session: Session | None = None,
    margins: Sequence | None = None,
    ringouts: Sequence | None = None,
    listen_cuts: tuple[list, str] | None = None,
    margin_maps: Sequence[MarginMap] = (),
    date: str | None = None,
    desk=None,  # a howl.loop.desk.Desk: listened cuts are listed as it makes them (ring-outs carry their own)
) -> SheetData:
    """Assemble the sheet from the planner's JSON and measured analyses.

    Parameters
    ----------
    rig: a ``howl.rig.Rig``.
    plan_json: ``howl.plan.plan_to_json(plan_rig(rig))`` or None.
    session: a :class:`Session` from :func:`read_session` or None.
    margins: one ``howl.loop.MarginResult`` per session pair (same order).
    ringouts: one ``howl.ringout.RingOutResult`` per session pair, or None.
    listen_cuts: (notches, label) from :func:`read_cuts`, or None.
    margin_maps: placement maps from :func:`read_margin_map`.
    date: the sheet's date (ISO); today by default.
    """
    if plan_json is None and session is None:
        raise InputError("nothing to print: need a plan or a measured session", key="sheet")
    fsm = float(rig.fsm_db)
    lines, curves = _mic_lines(rig, plan_json)
    measured = [] if session is None else _measured_lines(rig, session, margins, plan_json, fsm, curves)
    cut_sets = []
    if ringouts is not None and session is not None:
        for pair, ro in zip(session.pairs, ringouts):
            cut_sets.append(cut_set_from_ringout(f"{pair.speaker} \u2192 {pair.mic}", ro, fsm))
    if listen_cuts is not None:
        cut_sets += cut_sets_from_listen(listen_cuts[0], listen_cuts[1], session, margins, fsm, desk=desk)
    if plan_json is not None and session is not None:
        basis = "planned+measured"
        words = f"PLANNED from the room model + MEASURED {session.date}"
    elif session is not None:
        basis = "measured"
        words = f"MEASURED {session.date}"
    else:
        basis = "planned"
        words = "PLANNED from the room model (not measured)"
    return SheetData(
        rig_name=rig.name,
        room_name=rig.room.name,
        date=date or _dt.date.today().isoformat(),
        fsm_db=fsm,
        basis=basis,
        basis_words=words,
        measured_date=None if session is None else session.date,
        mics=tuple(lines),
        measured=tuple(measured),
        curves=tuple(curves),
        cut_sets=tuple(cut_sets),
        placement=placement_from_rig(rig),
        cautions=default_cautions(fsm),
        notes=default_notes(basis, fsm, plan_json, bool(cut_sets)),
        rig_file=rig.source_file,
        measured_settings_db=_settings(session),
        margin_maps=tuple(margin_maps),
        headroom_together_db=_f((plan_json or {}).get("headroom_together_db")),
        rings_first_hz=_f((plan_json or {}).get("rings_first_hz")),
        what_if=tuple(str(w) for w in (plan_json or {}).get("what_if", ()) or ()),
    )


def _planned_pair(plan_json: dict | None, speaker: str, mic: str) -> float | None:
    """The plan's phase-blind margin of one loudspeaker → mic pair (minus its predicted worst peak), if planned."""
    for m in (plan_json or {}).get("mics", []):
        if m.get("name") == mic:
            for q in m.get("pairs", []) or []:
                if q.get("speaker") == speaker and _f(q.get("worst_peak_loop_gain_db")) is not None:
                    return -float(q["worst_peak_loop_gain_db"])
    return None


def _settings(session: Session | None) -> tuple[tuple[str, float], ...]:
    if session is None:
        return ()
    raw = session.meta.get("reference_gain_settings_db") or {}
    out = []
    if isinstance(raw, dict):
        for k, v in raw.items():
            fv = _f(v)
            if fv is not None:
                out.append((str(k), fv))
    return tuple(out)


# ----------------------------------------------------------------------------
# Number formats (one place, so the page and the tests agree on rounding)
# ----------------------------------------------------------------------------


def _num(x: float | None, digits: int = 1, sign: bool = True) -> str:
    """dB value with one decimal, a typographic minus and (optionally) a plus."""
    if x is None or not math.isfinite(x):
        return "\u2013"
    s = f"{x:+.{digits}f}" if sign else f"{x:.{digits}f}"
    if s.lstrip("+-").strip("0.") == "":  # -0.0 → 0.0
        s = f"{0.0:+.{digits}f}" if sign else f"{0.0:.{digits}f}"
    return s.replace("-", MINUS)


def _hz(freq_hz: float | None, exact: bool = False) -> str:
    """A frequency: exact Hz (measured, cuts) or 3 significant figures (bands)."""
    if freq_hz is None or not math.isfinite(freq_hz):
        return "\u2013"
    if exact:
        return f"{freq_hz:.1f} Hz" if freq_hz < 100 else f"{freq_hz:.0f} Hz"
    if freq_hz >= 1000:
        return f"{freq_hz / 1000:.3g} kHz"
    return f"{freq_hz:.3g} Hz"


def _band_hz(freq_hz: float | None) -> str:
    """A planner band by its nominal label (ISO 266 for octaves and thirds)."""
    if freq_hz is None or not math.isfinite(freq_hz):
        return "\u2013"
    try:
        from howl.bands import nominal_label

        lab = nominal_label(freq_hz, 3)
        return f"{lab[:-1]} kHz" if lab.endswith("k") else f"{lab} Hz"
    except Exception:  # bands module missing or label refused: plain figures
        return _hz(freq_hz)


# ----------------------------------------------------------------------------
# Rendering (the drawing lives in howl/_sheet_page.py, imported lazily)
# ----------------------------------------------------------------------------


def render_sheet(data: SheetData, path: str | os.PathLike, *, paper: str = "a4", png_dpi: int = 150) -> list[str]:
    """Render the sheet to ``path`` (``.pdf`` or ``.png``), atomically.

    A PDF holds every page (fonts embedded as TrueType, ``pdf.fonttype`` 42,
    set in a local ``rc_context`` so global matplotlib state is untouched).
    A PNG holds page 1; further pages go to ``NAME-2.png``, ``NAME-3.png``...
    Returns the files written.
    """
    from howl.report._page import render

    return render(data, path, paper=paper, png_dpi=png_dpi)
