"""Cut suggestions and the JSON report of detector events (private: re-exported by :mod:`howl.detect`)."""

from __future__ import annotations

import dataclasses

import numpy as np


#: Assumed loop delay when none is known: 20 ms ≈ 6.9 m of acoustic path, a
#: typical speaker-to-mic distance on a small stage (common practice, no source).
DEFAULT_LOOP_DELAY_S = 0.020
#: An event this close (%) to a crossing of the measured loop IR sits on it. A howl grows at the
#: closed loop's mode, which a loop well past unity has off its crossing: in the low simulated
#: rooms a howl 3 dB past unity (146 dB/s) was reported 0.85 % off, while a sung note pumped
#: through a mode 1.5 dB from unity was reported 1.2 % off it (tests/benchmarks/bench_detect.py).
ON_CROSSING_PCT = 1.0


def on_crossing(freq_hz: float, crossing_hz: float, resolution_hz: float = 0.0,
                pct: float = ON_CROSSING_PCT) -> bool:
    """Is a component at ``freq_hz`` on the loop crossing at ``crossing_hz``? Within ``pct`` % of
    it (a howl past unity grows at the closed loop's mode, off the crossing: up to 0.85 % at 3 dB
    past unity in the simulated rooms), or within half the IR's resolution (``resolution_hz``:
    1 / the IR's length; the IR places a crossing to ±half of it), whichever is wider. "Far from
    every crossing" is the negation for all of them."""
    return abs(freq_hz / crossing_hz - 1.0) * 100.0 <= pct or abs(freq_hz - crossing_hz) <= 0.5 * resolution_hz


#: Headroom a suggested cut aims for beyond "just stops it" (3 dB: the lower end of
#: the usual 3–6 dB feedback stability margin, common practice, no source).
TARGET_MARGIN_DB = 3.0


class LoopDelayFromIR:
    """τ at each frequency from a measured loop IR (:func:`howl.detect.loop_delay_s`, the
    effective delay τ_eff = |N/H|²/Re(N/H)): in a reverberant room a low loop mode's τ_eff is
    the loop's group delay there, 0.08-0.25 s in the simulated rooms, not the 10-30 ms of the
    direct path, so one fixed delay gives margins several times too small there."""

    def __init__(self, ir: np.ndarray, sample_rate_hz: float, label: str = "loop IR"):
        self.ir = np.asarray(ir, float)
        self.sample_rate_hz = float(sample_rate_hz)
        self.label = label
        from howl.loop.nyquist import nyquist_margin

        # the crossings now, not at the first event (listen must not stall its input then)
        r = nyquist_margin(self.ir, self.sample_rate_hz)
        self._crossings = (np.asarray(r.crossings_freq_hz, float), np.asarray(r.crossings_value, float))

    @property
    def crossing_resolution_hz(self) -> float:
        """The IR's frequency resolution (Hz), 1 / its length: an IR of length T cannot tell
        features closer than 1/T apart (its spectrum is the true loop's convolved with the
        truncation's sinc), so it places a crossing only to ±1/(2T), and a component within
        that of a crossing is on it, whatever the percentage (:func:`on_crossing`)."""
        return self.sample_rate_hz / max(self.ir.size, 1)

    @property
    def crossings_hz(self) -> np.ndarray:
        """The IR's positive real-axis crossings (Hz): the only frequencies the loop can howl at."""
        return self._crossings[0]

    def nearest_crossing(self, freq_hz: float) -> tuple[float, float] | None:
        """The IR's positive real-axis crossing nearest ``freq_hz`` (howl.loop.nyquist_margin) and
        its margin (dB) at the IR's own settings, or None when it has none."""
        f, val = self._crossings
        if f.size == 0:
            return None
        i = int(np.argmin(np.abs(f - freq_hz)))
        return float(f[i]), float(-20.0 * np.log10(val[i]))

    def __call__(self, freq_hz: float) -> float | None:
        from howl.listen._features import loop_delay_s

        if not 0.0 < freq_hz < self.sample_rate_hz / 2:
            return None
        tau = loop_delay_s(self.ir, self.sample_rate_hz, freq_hz)
        return tau if np.isfinite(tau) and tau > 0 else None


def event_loop_delay_s(event, loop_delay_s) -> float | None:
    """The loop delay that applies to ``event``: a number, a :class:`LoopDelayFromIR` evaluated
    at its frequency, or None (unknown)."""
    if callable(loop_delay_s):
        return loop_delay_s(event.freq_hz)
    return loop_delay_s


def suggest_event_cut(event, *, loop_delay_s=None, target_margin_db: float = TARGET_MARGIN_DB,
                      temperature_c: float = 20.0, swing_c: float = 3.0, desk=None, sample_rate_hz=None):
    """The cut (a :class:`howl.notch.Notch`) that stops an event, by the ring-out rules.

    needed_db = target margin − current margin, where the current margin is
    −growth·τ for a howl (the loop is that far above unity) and decay·τ for a
    ringing (headroom left). τ is the known loop delay (a number, or a
    :class:`LoopDelayFromIR` evaluated at the event's frequency) or
    :data:`DEFAULT_LOOP_DELAY_S`. The width covers the temperature drift
    (``howl.notch.suggest_cut``). Returns (notch, needed_db, margin_used_db).

    With a ``desk`` (:class:`howl.loop.desk.Desk`) the cut is one that desk can make
    (:func:`howl.loop.desk.suggest_on_desk`: no narrower than its highest Q, no deeper than its
    deepest cut, on its steps, or its nearest graphic slider); whether it reaches the needed
    depth is :func:`event_cut_on_desk`'s second value.
    """
    return _event_cut(event, loop_delay_s=loop_delay_s, target_margin_db=target_margin_db,
                      temperature_c=temperature_c, swing_c=swing_c, desk=desk, sample_rate_hz=sample_rate_hz)[:3]


def event_cut_on_desk(event, desk, **kw):
    """(notch, reaches) of :func:`suggest_event_cut` on ``desk``."""
    n, _, _, reaches = _event_cut(event, desk=desk, **kw)
    return n, reaches


def _event_cut(event, *, loop_delay_s=None, target_margin_db: float = TARGET_MARGIN_DB,
               temperature_c: float = 20.0, swing_c: float = 3.0, desk=None, sample_rate_hz=None):
    from howl.loop.notch import suggest_cut

    tau = event_loop_delay_s(event, loop_delay_s)
    if tau is None:
        tau = DEFAULT_LOOP_DELAY_S
    elif callable(loop_delay_s):
        event = dataclasses.replace(event, margin_db=None)  # the event's own margin used a fixed τ
    if event.margin_db is not None:
        margin = event.margin_db
    elif event.kind == "howl":
        margin = -max(event.growth_db_per_s, 0.0) * tau
    else:
        margin = (event.decay_db_per_s or 0.0) * tau
    needed = max(target_margin_db - margin, 0.5)
    if desk is not None:
        from howl.loop.desk import suggest_on_desk
        from howl.loop.notch import drift_bandwidth_oct

        drift = drift_bandwidth_oct(temperature_c, swing_c)
        notch, reaches = suggest_on_desk(desk, event.freq_hz, needed, drift_oct=drift, min_bandwidth_oct=drift,
                                         sample_rate_hz=sample_rate_hz)
        return notch, float(needed), float(margin), reaches
    notch = suggest_cut(event.freq_hz, needed, temperature_c=temperature_c, swing_c=swing_c)
    return notch, float(needed), float(margin), True


def summarise_notches(notches, sample_rate_hz: float, *, max_notches: int = 6, desk=None):
    """Merge cuts at the same frequency (``howl.notch.merge_notches``) and keep a budget.

    Returns (kept notches sorted by frequency, advice strings). When more distinct
    cuts are needed than the budget, or merged cuts reach the 1/3-octave cap,
    the advice says a broad EQ or a placement change would serve better. With a ``desk``, the cuts
    are merged as that desk would (:func:`howl.loop.desk.merge_on_desk`: one setting per graphic
    slider) and its ``max_bands`` is the budget.
    """
    from howl.loop.notch import merge_notches

    advice = []
    if not notches:
        return [], advice
    if desk is not None:
        from howl.loop.desk import merge_on_desk

        merged = merge_on_desk(desk, list(notches), sample_rate_hz)
        max_notches = desk.max_bands or max_notches
    else:
        merged = list(merge_notches(list(notches), sample_rate_hz))
    depth = [(-(n.gain_db if n.gain_db is not None else -60.0)) for n in merged]
    order = np.argsort(depth)[::-1]
    kept = [merged[i] for i in order[:max_notches]]
    if len(merged) > max_notches:
        advice.append(
            f"{len(merged)} separate frequencies ring but the cut budget is {max_notches}: "
            "a broad EQ or moving the mic/speaker would serve better than more notches"
        )
    wide = [] if desk is not None and desk.graphic else [n for n in kept if n.bandwidth_oct >= 1 / 3 - 1e-9]
    if wide:
        advice.append(
            "cut(s) at " + ", ".join(f"{n.freq_hz:.0f} Hz" for n in wide)
            + " reached the 1/3-octave width cap: a broad EQ may serve better"
        )
    kept.sort(key=lambda n: n.freq_hz)
    return kept, advice


def event_to_dict(event) -> dict:
    """JSON-ready dict of an event (None fields kept as null)."""
    return dataclasses.asdict(event)


def event_record(e, *, loop_delay_s=None, target_margin_db: float = TARGET_MARGIN_DB,
                 temperature_c: float = 20.0, swing_c: float = 3.0, desk=None, sample_rate_hz=None) -> dict:
    """One event as the JSON of ``howl scan``/``howl listen`` shows it, with its suggested cut."""
    notch, needed, margin_used, reaches = _event_cut(
        e, loop_delay_s=loop_delay_s, target_margin_db=target_margin_db, temperature_c=temperature_c, swing_c=swing_c,
        desk=desk, sample_rate_hz=sample_rate_hz)
    d = {
        "time_s": e.time_s, "onset_s": e.onset_s, "freq_hz": e.freq_hz, "kind": e.kind,
        "level_db": e.level_db, "growth_db_per_s": e.growth_db_per_s,
        "decay_db_per_s": e.decay_db_per_s, "steady": e.steady, "live": e.live, "window_s": e.window_s,
        "notch": {"freq_hz": notch.freq_hz, "gain_db": notch.gain_db, "q": notch.q,
                  "bandwidth_oct": notch.bandwidth_oct},
        "needed_cut_db": needed,
        **({} if desk is None else {"cut_reaches_needed": bool(reaches)}),
        "features": {"papr_db": e.papr_db, "pnpr_db": e.pnpr_db, "phpr_db": e.phpr_db, "ipmp": e.ipmp,
                     "imsd_db_per_s": e.imsd_db_per_s, "fsd": e.fsd, "phpr_comod_db": e.phpr_comod_db},
    }
    tau = event_loop_delay_s(e, loop_delay_s)
    if callable(loop_delay_s):  # from a loop IR, at this frequency
        d["loop_delay_ms"] = None if tau is None else 1000.0 * tau
        near = loop_delay_s.nearest_crossing(e.freq_hz) if hasattr(loop_delay_s, "nearest_crossing") else None
        if near is not None:
            off_pct = 100.0 * abs(e.freq_hz / near[0] - 1.0)
            res = getattr(loop_delay_s, "crossing_resolution_hz", 0.0)
            d["loop_ir_crossing"] = {"freq_hz": near[0], "margin_db": near[1], "offset_pct": off_pct,
                                     "on_crossing": on_crossing(e.freq_hz, near[0], res)}
        if tau is not None:
            d["margin_db"] = margin_used
        else:
            d["margin_assumed_db"] = margin_used
    elif loop_delay_s is not None:
        d["margin_db"] = e.margin_db
    else:
        d["margin_assumed_db"] = margin_used
    return d


def report(events, sample_rate_hz: float, duration_s: float, *, loop_delay_s=None,
           max_notches: int = 6, temperature_c: float = 20.0, swing_c: float = 3.0,
           target_margin_db: float = TARGET_MARGIN_DB, desk=None) -> dict:
    """The JSON-ready report shared by ``howl scan`` and ``howl listen``.

    ``loop_delay_s``: a number (s), a :class:`LoopDelayFromIR` (τ at each event's frequency),
    or None (cut depths assume :data:`DEFAULT_LOOP_DELAY_S`).
    ``events``: each with its suggested cut (``notch``) and the cut depth it needs;
    ``notches``: the cuts merged across events (same frequency → one cut) within the
    budget ``max_notches``; ``advice``: when a broad EQ or placement would serve better.
    """
    ev_out = [event_record(e, loop_delay_s=loop_delay_s, target_margin_db=target_margin_db,
                           temperature_c=temperature_c, swing_c=swing_c, desk=desk, sample_rate_hz=sample_rate_hz)
              for e in events]
    from howl.loop.notch import Notch

    cuts = [Notch(d["notch"]["freq_hz"], d["notch"]["gain_db"], d["notch"]["q"]) for d in ev_out]
    kept, advice = summarise_notches(cuts, sample_rate_hz, max_notches=max_notches, desk=desk)
    short = sorted({round(d["freq_hz"], 1) for d in ev_out if d.get("cut_reaches_needed") is False})
    if short:
        advice.append(
            f"the desk's deepest cut (-{desk.depth_db(30.0):g} dB) does not stop the ringing at "
            + ", ".join(f"{f:g} Hz" for f in short) + ": bring the gain down, or move the mic or speaker")
    notches = []
    for n in kept:
        lo, hi = n.band_edges_hz()
        members = [e for e in events if lo <= e.freq_hz <= hi]
        notches.append({"freq_hz": n.freq_hz, "gain_db": n.gain_db, "q": n.q, "bandwidth_oct": n.bandwidth_oct,
                        "n_events": len(members), "kinds": sorted({e.kind for e in members})})
    return {
        "sample_rate_hz": float(sample_rate_hz),
        "duration_s": float(duration_s),
        "loop_delay_ms": None if loop_delay_s is None or callable(loop_delay_s) else 1000.0 * loop_delay_s,
        "loop_delay_from": (getattr(loop_delay_s, "label", "loop IR") if callable(loop_delay_s)
                            else None if loop_delay_s is None else "given"),
        "assumed_loop_delay_ms": None if loop_delay_s is not None else 1000.0 * DEFAULT_LOOP_DELAY_S,
        "target_margin_db": target_margin_db,
        "events": ev_out,
        "notches": notches,
        "advice": advice,
        "n_howl": sum(e.kind == "howl" for e in events),
        "n_ringing": sum(e.kind == "ringing" for e in events),
        **({} if desk is None else {"desk": desk.to_json(), "desk_summary": desk.describe()}),
    }
