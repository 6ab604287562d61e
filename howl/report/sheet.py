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
import os
from pathlib import Path
from typing import Sequence

from howl.errors import InputError

# ----------------------------------------------------------------------------
# Paper
# ----------------------------------------------------------------------------

#: Paper sizes in PostScript points (1/72 in): ISO 216 A4 is 210 × 297 mm,
#: US Letter 8.5 × 11 in.
PAPER_PT: dict[str, tuple[float, float]] = {
    "a4": (210.0 / 25.4 * 72.0, 297.0 / 25.4 * 72.0),
    "letter": (8.5 * 72.0, 11.0 * 72.0),
}


from howl.report._sheet_types import (  # noqa: E402,F401  the data model, re-exported
    Curve, Cut, CutSet, MapItem, MarginMap, MeasuredLine, MicLine, PlacementMap, SheetData,
)
from howl.report._sheet_rules import (  # noqa: E402,F401  the sheet's rules and formats, re-exported
    MINUS, _band_hz, _f, _hz, _num, _pair, measured_mark_db, measured_verdict,
)
from howl.report._sheet_session import (  # noqa: E402,F401  reading a measured session, re-exported
    COMBINED_SPEAKER, Session, SessionPair, _read_json, check_session, read_session, with_combined_loops,
)
from howl.report._sheet_cuts import (  # noqa: E402,F401  cut lists, re-exported
    cut_set_from_ringout, cut_sets_from_listen, read_cuts,
)


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
# Rendering (the drawing lives in howl/report/_page.py, imported lazily)
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
