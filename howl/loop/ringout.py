"""Virtual ring-out: choose feedback cuts on a loop IR and say what each one buys.

A technician rings a system out by raising the gain until it rings, cutting the
ringing frequency and repeating. howl does it on the loop IR, with no one's ears
at risk. The loop with the cuts in it is L(f) = H(f)·C(f) (H the DTFT of the
loop IR, C the cascade of RBJ cuts, :mod:`howl.notch`); its phase-aware gain
margin is the Nyquist margin of :func:`howl.loop.nyquist_margin` [1]_. The added
stable gain (ASG) is the margin with the cuts minus the margin without [2]_.

How the cuts are chosen
-----------------------
In a reverberant room the next crossing is rarely more than a dB below the one
that limits the margin, so a cut at the single worst crossing buys little. howl
plans the cuts together, as a covering problem over the crossings:

1. the planning grid: the zero-padded FFT (4× oversampled) of the part of the
   loop IR that holds all but −50 dB of its energy (:func:`planning_ir`),
   limited to the band and to the points within :data:`PLAN_CAP_DB` of the top
   crossing (a cut never raises |L|, so no other point can limit a margin below
   that cap; the plan is redone on the whole band if it reaches it). The
   positive real-axis crossings of L on it are the points to cover, each with
   its value |L| there;
2. for a target level T, every crossing above T must come down by its excess
   (dB). Sweeping up the frequency axis, each cut covers the lowest uncovered
   crossing and as many of its neighbours as a cut no wider than 1/3 octave and
   no deeper than 18 dB can bring below T, each crossing counted with its
   temperature drift band (±``swing_c``, :func:`howl.notch.drift_bandwidth_oct`)
   and with what the other cuts' skirts already take off. The depth of every
   cut is the shallowest that does it (the exact RBJ response, closed form);
3. a bisection on T finds the lowest level the budget of cuts reaches;
4. cuts move the phase, so crossings move: the cascade is put in the loop, the
   crossings are found again, any new offender joins the set and the plan is
   made again (a few rounds; the best cascade is kept). Beside each plan, simple
   ring-outs (a fixed cut, e.g. −15 dB over 1/3 octave, at each limiting crossing
   in turn, :data:`GREEDY_CUTS`) are run on the same grid. All compete on one
   score: the margin, less 10 dB per dB of tonal cost beyond ``tonal_share`` ×
   the gain (default 0.5: the cuts may cost at most half a dB of pink-noise
   program per dB of stable gain, else they mostly turn the loop down, which the
   fader does too), less a small tie-break per dB of tonal cost;
5. from the best :data:`POLISH_STARTS` cascades of the chosen budget, a pattern
   search (:func:`_polish`) moves each cut's centre, depth and width, or moves a
   cut to the crossing limiting the loop now, keeping every step that scores
   better; each candidate is judged exactly on the planning grid with the other
   cuts in the loop, on the points that can still limit it (:class:`_View`);
6. the ring-out itself then runs as a technician would: find the crossing that
   limits the margin, insert the planned cut that covers it, recompute the loop
   with the cascade in it, repeat, until the target margin is met, the budget is
   spent, or more cuts would buy less than ``min_gain_per_notch_db`` each (plans for
   1..``max_notches`` cuts are compared; a larger plan is taken only if it pays that much per
   extra cut over the last plan taken).

Every margin reported is exact (:func:`howl.loop.nyquist_margin` on the whole IR
with the cuts so far passed as ``filters_sos``), before, after each step and
after the last, so the steps add up to the total. They share one FFT of the IR
(:class:`howl.loop.nyquist.LoopGrid`, the routine ``nyquist_margin`` itself runs),
each step adding one cut's response to the cascade on its grid.

Within a desk's EQ (``desk``, :mod:`howl.loop.desk`) the plan, the simple
ring-outs and the search keep to its depth and width, the cuts are then set as
the desk sets them (gain steps), and a graphic EQ is searched slider by slider
(:mod:`howl.loop._ringout_graphic`); the naive ring-out of the same desk is
never beaten on margin by the score's tie-break: after the exact step margins it
is judged exactly too, and taken if it buys more within the tonal share.

References
----------
.. [1] H. Nyquist, "Regeneration theory", Bell System Technical Journal 11(1),
   126–147, 1932.
.. [2] T. van Waterschoot and M. Moonen, "Fifty years of acoustic feedback
   control: state of the art and future challenges", Proc. IEEE 99(2),
   288–327, 2011 (MSG and ASG definitions).
.. [3] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note, 2021,
   https://www.w3.org/TR/audio-eq-cookbook/ (peakingEQ; the digital filter is
   the bilinear transform of the analog prototype prewarped at f0, so its
   magnitude at f equals the prototype's at tan(πf/fs)/tan(πf0/fs)).
.. [4] D. A. Bies, C. H. Hansen and C. Howard, *Engineering Noise Control*,
   5th ed., Table 4.3: male speech, normal effort, octave-band levels at 1 m
   (250–4000 Hz: 72.5, 74.0, 68.0, 62.0, 57.0 dB), used to weight the
   speech tonal cost.
.. [5] M. R. Schroeder, "New method of measuring reverberation time", J. Acoust.
   Soc. Am. 37, 409–412, 1965 (backward integration of the squared IR).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from howl import validate as v
from howl.loop._ringout_grid import PLAN_CAP_DB, PLAN_TAIL_DB, _GridLoop, _worst_margin, planning_ir
from howl.loop._ringout_search import (
    MAX_TONAL_SHARE,
    PLAN_MAX_DEPTH_DB,
    SPEECH_LEVELS_DB,
    SPEECH_OCTAVES_HZ,
    _choose_cuts,
    tonal_cost_db,
    tonal_grid,
)
from howl.loop.notch import MAX_NOTCH_BANDWIDTH_OCT, Notch, cascade_sos, drift_bandwidth_oct
from howl.units import temperature_frequency_ratio

__all__ = [
    "ring_out",
    "RingOutResult",
    "RingOutStep",
    "tonal_cost_db",
    "tonal_grid",
    "temperature_shifted_ir",
    "perturbed_irs",
    "planning_ir",
    "PLAN_CAP_DB",
    "PLAN_TAIL_DB",
    "PLAN_MAX_DEPTH_DB",
    "MAX_TONAL_SHARE",
    "SPEECH_OCTAVES_HZ",
    "SPEECH_LEVELS_DB",
]

#: Cuts whose centres lie within this span (octaves) count as one cluster.
CLUSTER_SPAN_OCT = 1.0
CLUSTER_MIN_CUTS = 3


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class RingOutStep:
    """One step of the ring-out: the cut inserted at the crossing that limited the loop.

    ``target_freq_hz`` is that crossing; ``gain_margin_db`` the margin with all
    cuts so far; ``added_stable_gain_db`` what this step bought;
    ``total_added_stable_gain_db`` the ASG so far. Every margin is exact (the Nyquist margin
    of the whole IR with the cuts so far, :func:`howl.loop.nyquist_margin`), so the steps add
    up to the total. ``tonal_cost_db`` / ``tonal_cost_speech_db``: the program power this cut
    alone removes (pink, speech-weighted), beside what it buys.
    """

    index: int
    notch: Notch
    target_freq_hz: float
    gain_margin_db: float
    added_stable_gain_db: float
    total_added_stable_gain_db: float
    tonal_cost_db: float = 0.0
    tonal_cost_speech_db: float = 0.0


@dataclass(frozen=True)
class RingOutResult:
    """Result of :func:`ring_out` (all margins in dB; positive = stable headroom).

    added_stable_gain_db: margin after − margin before (in robust mode: the
        worst over the perturbed loops, after − before).
    gain_margin_db_before, gain_margin_db_after: phase-aware Nyquist margins.
    notches: the cuts, in the order the ring-out inserted them.
    steps: one :class:`RingOutStep` per cut.
    stopped_because: why the ring-out stopped, in words.
    tonal_cost_db: broadband tonal cost: the pink-noise (equal energy per
        octave) power the cascade removes over the analysis band, in dB (≥ 0).
    tonal_cost_speech_db: the same, weighted by a male speech spectrum [4]_
        (octave bands 250 Hz–4 kHz).
    advice: plain-language notes (clusters, cuts at the width cap, cautions).
    """

    added_stable_gain_db: float
    gain_margin_db_before: float
    gain_margin_db_after: float
    notches: tuple
    steps: tuple
    stopped_because: str
    tonal_cost_db: float
    advice: tuple
    tonal_cost_speech_db: float = 0.0
    magnitude_margin_db_before: float = float("nan")
    magnitude_margin_db_after: float = float("nan")
    howl_freq_hz_before: float = float("nan")
    howl_freq_hz_after: float = float("nan")
    planned_gain_margin_db: float = float("nan")
    sample_rate_hz: float = 0.0
    band_hz: tuple = (0.0, 0.0)
    temperature_c: float = 20.0
    swing_c: float = 3.0
    robust: bool = False
    robust_loops: tuple = field(default_factory=tuple)  # (name, margin_before_db, margin_after_db)
    tonal_share: float = MAX_TONAL_SHARE
    tonal_weighting: str = "pink"
    desk: object = None  # the howl.loop.desk.Desk the cuts were made for (None: an ideal EQ)


# --------------------------------------------------------------------------- perturbed loops


def temperature_shifted_ir(ir: np.ndarray, sample_rate_hz: float, temperature_c: float, delta_c: float) -> np.ndarray:
    """The loop IR after the air warms by ``delta_c`` (cools if negative).

    Every acoustic arrival comes earlier by the factor r = c(T+ΔT)/c(T)
    (:func:`howl.units.temperature_frequency_ratio`): h'(t) = r·h(r·t), so that
    H'(f) = H(f/r) (each arrival keeps its strength). The whole delay is treated
    as acoustic, which errs toward more drift than a loop with a digital
    processing delay. Band-limited resampling (scipy.signal.resample_poly with
    r approximated by a ratio of integers ≤ 2000).
    """
    from scipy.signal import resample_poly

    r = temperature_frequency_ratio(temperature_c, delta_c)
    frac = Fraction(r).limit_denominator(2000)
    up, down = frac.denominator, frac.numerator  # output at fs·up/down, read at fs: time × down/up = r
    if up == down:
        return np.asarray(ir, float).copy()
    out = resample_poly(np.asarray(ir, float), up, down)
    return out * (down / up)


def perturbed_irs(ir, sample_rate_hz, *, temperature_c=20.0, swing_c=3.0, seed=0) -> list[tuple[str, np.ndarray]]:
    """The loops a robust ring-out must survive: ±swing and ±swing/2 °C, and two with room movement.

    "Movement" adds an independent reverberant tail 20 dB below the IR's own
    (noise with the IR's 5 ms RMS envelope, after the first 10 ms past the
    onset), a stand-in for people and air moving (our own model).
    """
    h = np.asarray(ir, float)
    fs = float(sample_rate_hz)
    out = [(f"{delta:+g} C", temperature_shifted_ir(h, fs, temperature_c, delta))
           for delta in (-swing_c, swing_c, -swing_c / 2, swing_c / 2) if delta != 0.0]
    rng = np.random.default_rng(seed)
    win = max(1, int(round(0.005 * fs)))
    env = np.sqrt(np.convolve(h * h, np.ones(win) / win, mode="same"))
    onset = int(np.flatnonzero(np.abs(h) >= 0.1 * np.max(np.abs(h)))[0])
    start = min(h.size, onset + int(round(0.010 * fs)))
    for k in range(2):
        noise = rng.standard_normal(h.size) * env
        noise[:start] = 0.0
        out.append((f"movement {k + 1}", h + 0.1 * noise))
    return out


# --------------------------------------------------------------------------- tonal cost and advice


def _advice(notches: list[Notch], asg_db: float, margin_before_db: float, tonal_pink_db: float = 0.0,
            tonal_speech_db: float = 0.0, weighting: str = "pink") -> list[str]:
    out = []
    fs_sorted = sorted(n.freq_hz for n in notches)
    # clusters: the most cuts whose centres fit in one octave
    best = (0, 0.0, 0.0)
    for i, f0 in enumerate(fs_sorted):
        inside = [f for f in fs_sorted[i:] if math.log2(f / f0) <= CLUSTER_SPAN_OCT]
        if len(inside) > best[0]:
            best = (len(inside), f0, inside[-1])
    if best[0] >= CLUSTER_MIN_CUTS:
        out.append(
            f"{best[0]} cuts cluster between {best[1]:.0f} and {best[2]:.0f} Hz: a broad EQ cut over that region, "
            "or moving the mic or speaker (or aiming the speaker away from the mic), would serve better than notches."
        )
    wide = [n for n in notches if n.bandwidth_oct >= MAX_NOTCH_BANDWIDTH_OCT - 1e-6]
    if wide:
        fl = ", ".join(f"{n.freq_hz:.0f}" for n in sorted(wide, key=lambda n: n.freq_hz))
        out.append(
            f"{len(wide)} of {len(notches)} cut(s) ({fl} Hz) use the full 1/3-octave cap: the need there is "
            "broader than a notch, a broad-EQ or placement problem as much as a notch one."
        )
    if notches and asg_db < 3.0:
        out.append(
            "notches buy little here: many crossings stand nearly as high as the worst one (a diffuse loop); "
            "mic choice, distance and placement buy more gain than cuts."
        )
    if weighting == "pink" and tonal_speech_db >= 3.0 and tonal_speech_db >= 2.0 * tonal_pink_db:
        out.append(
            f"these cuts take {tonal_speech_db:.1f} dB out of the speech band ({tonal_pink_db:.1f} dB broadband): "
            "for a speech mic, plan with the speech weighting (--tonal-weighting speech)."
        )
    if margin_before_db < 0:
        out.append(
            f"the loop is already unstable at the measured settings (margin {margin_before_db:.1f} dB): "
            "bring the gain down before anything else."
        )
    out.append(
        "This is a virtual ring-out on a frozen IR: confirm at low level, raise the gain slowly, keep a hand on "
        "the fader, and protect ears and tweeters (local codes and licensed practice come first)."
    )
    return out


# --------------------------------------------------------------------------- the ring-out


def _order_as_ringout(loops, planned: list[Notch], fs: float, m0: float):
    """Insert the planned cuts one by one at the crossing that limits the loop.

    At each step the cut covering the limiting crossing goes in, unless another planned cut would
    leave the loop more than 0.1 dB better off now (then that one), so steps rarely lose margin.
    """
    left = list(planned)
    steps = []
    cur = m0
    loop_now = [lp.H for lp in loops]  # each loop with the cuts inserted so far

    def worst(arrs):
        best = (float("inf"), float("nan"))
        for lp, arr in zip(loops, arrs):
            m, fh = lp.margin(arr)
            if m < best[0]:
                best = (m, fh)
        return best

    _, fh = worst(loop_now)
    while left:
        cover = [n for n in left if abs(math.log2(fh / n.freq_hz)) <= n.bandwidth_oct / 2.0] if math.isfinite(fh) else []
        after = {n: worst([a * lp.cut(n) for lp, a in zip(loops, loop_now)])[0] for n in left}
        best = max(left, key=lambda n: after[n])
        pick = best  # the limit is not under any planned cut: take the one that helps most now
        if cover:  # the cut at the ringing frequency, unless another one clearly helps more now
            near = min(cover, key=lambda n: abs(math.log2(fh / n.freq_hz)) / n.bandwidth_oct)
            if after[near] >= after[best] - 0.1:
                pick = near
        left.remove(pick)
        loop_now = [a * lp.cut(pick) for lp, a in zip(loops, loop_now)]
        m_new, fh_next = worst(loop_now)
        steps.append((pick, fh, m_new, m_new - cur))
        cur, fh = m_new, fh_next
    return steps


def ring_out(
    ir,
    sample_rate_hz,
    *,
    max_notches: int = 6,
    target_margin_db: float | None = None,
    min_gain_per_notch_db: float = 0.5,
    band_hz=None,
    temperature_c: float = 20.0,
    swing_c: float = 3.0,
    robust: bool = False,
    seed: int = 0,
    polish: int = 6,
    tonal_share: float = MAX_TONAL_SHARE,
    tonal_weighting: str = "pink",
    desk=None,
) -> RingOutResult:
    """Ring a loop out virtually: the cuts that buy the most stable gain, step by step.

    Parameters
    ----------
    ir : loop IR at the reference settings (1-D, time zero = sample 0).
    sample_rate_hz : its sample rate; cuts are evaluated as digital filters at it.
    max_notches : the budget of cuts (default 6).
    target_margin_db : stop as soon as the margin reaches this (default: spend the budget).
    min_gain_per_notch_db : plans for 1..max_notches cuts are compared; a larger plan is taken
        only if it buys at least this much per extra cut (dB) over the last one taken.
    band_hz : (lo, hi) analysis band (default: all the file holds, as :func:`howl.loop.nyquist_margin`).
    temperature_c, swing_c : air temperature and the swing every cut must cover.
    robust : design and judge the cuts on the loop and on perturbed copies of it
        (:func:`perturbed_irs`); the reported margins are the worst over them.
    seed : seed of the movement perturbation (robust mode).
    polish : at most this many passes of the pattern search around the planned cuts (0 = plan only).
    tonal_share : the most broadband tonal cost (dB) the cuts may spend per dB of stable gain they
        buy (default 0.5); a cascade past it is scored down (``math.inf``: no limit).
    tonal_weighting : the tonal cost that rule counts: ``"pink"`` (broadband, the default) or
        ``"speech"`` (a male speech spectrum, for a speech system). Both are reported.
    desk : a :class:`howl.loop.desk.Desk`: the cuts stay within what that console's EQ can do
        (its ``max_bands`` replaces ``max_notches``; a graphic EQ is searched slider by slider),
        and every figure is computed with the cuts as the desk sets them. ``None``: an ideal EQ.
    """
    from howl.loop.nyquist import LoopGrid, check_ir

    h = check_ir(ir, sample_rate_hz)
    fs = v.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    budget = v.integer(max_notches, "max_notches", 0, 64)
    min_gain = v.in_range(min_gain_per_notch_db, "min_gain_per_notch_db", 0.0, None, unit="dB")
    target = None if target_margin_db is None else v.number(target_margin_db, "target_margin_db", unit="dB")
    temperature_c = v.in_range(temperature_c, "temperature_c", -50.0, 60.0, unit="°C")
    swing_c = v.in_range(swing_c, "swing_c", 0.0, 30.0, unit="°C")
    drift = drift_bandwidth_oct(temperature_c, swing_c)
    tonal_weighting = v.choice(tonal_weighting, "tonal_weighting", ("pink", "speech"))
    if desk is not None:
        from howl.loop.desk import Desk

        if not isinstance(desk, Desk):
            raise v.fail("desk", "a howl.loop.desk.Desk or None", desk)
        if desk.max_bands is not None:
            budget = int(desk.max_bands)
    if not (isinstance(tonal_share, float) and tonal_share == math.inf):
        tonal_share = v.in_range(tonal_share, "tonal_share", 0.0, None)

    grid0 = LoopGrid(h, fs, band_hz=band_hz)  # the exact margins share one FFT of the IR
    before = grid0.margin()
    band = tuple(float(x) for x in before.band_hz)
    irs = [("nominal", h)]
    if robust:
        irs += perturbed_irs(h, fs, temperature_c=temperature_c, swing_c=swing_c, seed=seed)
    loops = [_GridLoop(name, x, fs, band, PLAN_CAP_DB) for name, x in irs]
    kw = dict(budget=budget, target=target, min_gain=min_gain, fs=fs, drift=drift, band=band, polish=polish,
              tonal_share=tonal_share, tonal_weighting=tonal_weighting, desk=desk)
    planned, planned_margin, reason, m0_grid, naive = _choose_cuts(loops, **kw)
    if planned and any(lp.saturated(planned_margin) for lp in loops):
        # the plan reached the grid's cap: plan again on every point of the band
        loops = [_GridLoop(name, x, fs, band, math.inf) for name, x in irs]
        planned, planned_margin, reason, m0_grid, naive = _choose_cuts(loops, **kw)

    grids = {0: grid0}  # each loop's exact-margin grid (one FFT per IR)
    steps_raw, notches, exact, reason = _finish(loops, irs, grids, planned, reason, target, fs, band, m0_grid, before)
    if desk is not None and naive and list(naive) != list(notches) and (target is None or exact[-1][1] < target):
        # the naive ring-out of the same desk, judged exactly: the plan never loses margin to it
        sos_n = cascade_sos(naive, fs)
        m_n = min(grids[j].margin(filters_sos=sos_n, n_risks=0, filters_on_grid=grids[j].cascade_on_grid(sos_n))
                  .gain_margin_db for j in range(len(irs)))
        tonal_n = tonal_cost_db(naive, band, fs, weighting=tonal_weighting)
        if m_n > exact[-1][1] + 1e-9 and tonal_n <= tonal_share * (m_n - exact[0][1]) + 1e-9:
            steps_raw, notches, exact, _ = _finish(loops, irs, grids, list(naive), reason, None, fs, band, m0_grid, before)
            planned_margin = _worst_margin(loops, list(notches), fs)[0]
            reason = (f"the naive ring-out of this desk ({len(notches)} cut(s) at the limit in turn, as deep as it "
                      "allows) buys more here, exactly, than the search's plan")
    after = exact[-1][0]
    m_before, m_after = exact[0][1], exact[-1][1]
    robust_loops = []
    if robust:
        robust_loops = [(name, exact[0][2][k], exact[-1][2][k]) for k, (name, _) in enumerate(irs)]
    asg = m_after - m_before if math.isfinite(m_before) and math.isfinite(m_after) else 0.0
    if target is not None and notches and reason.startswith("target margin met"):  # say it with the exact figure
        word = "met" if m_after >= target else "met on the planning grid, not quite exactly"
        reason = f"target margin {word} ({m_after:.2f} dB vs {target:g} dB) after {len(notches)} cut(s)"

    tonal_pink = tonal_cost_db(notches, band, fs)
    tonal_speech = tonal_cost_db(notches, band, fs, weighting="speech")
    steps = []
    for i, (n, fh, _, _) in enumerate(steps_raw):
        m, m_prev = exact[i + 1][1], exact[i][1]
        steps.append(RingOutStep(i + 1, n, float(fh), float(m), float(m - m_prev), float(m - m_before),
                                 tonal_cost_db([n], band, fs), tonal_cost_db([n], band, fs, weighting="speech")))
    return RingOutResult(
        added_stable_gain_db=float(asg),
        gain_margin_db_before=float(m_before),
        gain_margin_db_after=float(m_after),
        notches=notches,
        steps=tuple(steps),
        stopped_because=reason,
        tonal_cost_db=tonal_pink,
        advice=tuple(_advice(list(notches), asg, m_before, tonal_pink, tonal_speech, tonal_weighting)),
        tonal_cost_speech_db=tonal_speech,
        magnitude_margin_db_before=float(before.magnitude_margin_db),
        magnitude_margin_db_after=float(after.magnitude_margin_db),
        howl_freq_hz_before=float(before.howl_freq_hz),
        howl_freq_hz_after=float(after.howl_freq_hz),
        planned_gain_margin_db=float(planned_margin),
        sample_rate_hz=fs,
        band_hz=band,
        temperature_c=float(temperature_c),
        swing_c=float(swing_c),
        robust=bool(robust),
        robust_loops=tuple(robust_loops),
        tonal_share=float(tonal_share),
        tonal_weighting=tonal_weighting,
        desk=desk,
    )


def _finish(loops, irs, grids, planned, reason, target, fs, band, m0_grid, before):
    """The planned cuts inserted as a ring-out, cut to the target, with every margin exact:
    (steps, cuts, exact margins per step (:func:`_exact_margins`), why it stopped)."""
    steps_raw = _order_as_ringout(loops, planned, fs, m0_grid) if planned else []
    n_keep = len(steps_raw)
    if target is not None:
        for k, s in enumerate(steps_raw):
            if s[2] >= target:
                n_keep = k + 1
                reason = f"target margin met ({s[2]:.2f} dB >= {target:g} dB) after {n_keep} cut(s)"
                break
    steps_raw = steps_raw[:n_keep]
    notches = tuple(s[0] for s in steps_raw)
    # every figure exact: the Nyquist margin of the whole IR (of each perturbed loop in robust
    # mode, the worst of them) with the cuts so far, so the steps add up to the total
    exact = _exact_margins(irs, fs, band, notches, before, grids=grids)
    return steps_raw, notches, exact, reason


def _exact_margins(irs, fs: float, band, notches, before, grids=None):
    """For 0..len(notches) cuts: (the nominal MarginResult, the worst margin, each loop's margin).

    Each margin is :func:`howl.loop.nyquist_margin` of the whole IR with the cuts so far, on one
    :class:`howl.loop.nyquist.LoopGrid` per IR (one FFT; each step adds one cut's response on
    the grid to the cascade before it). ``grids``: those already made, by index in ``irs``.
    """
    from howl.loop.nyquist import LoopGrid

    grids = {} if grids is None else grids  # (filled in for the caller)
    for j, (_, x) in enumerate(irs):
        if j not in grids:
            grids[j] = LoopGrid(x, fs, band_hz=band)
    sos_all = cascade_sos(notches, fs) if notches else None
    on_grid = [None] * len(irs)
    out = []
    for k in range(len(notches) + 1):
        sos = sos_all[:k] if k else None
        per = []
        res0 = before
        for j in range(len(irs)):
            if j == 0 and k == 0:
                r = before
            else:
                if k:
                    on_grid[j] = grids[j].cascade_on_grid(sos_all[k - 1 : k], on_grid[j])
                r = grids[j].margin(filters_sos=sos, n_risks=0 if k < len(notches) else 10, filters_on_grid=on_grid[j])
            if j == 0:
                res0 = r
            per.append(float(r.gain_margin_db))
        out.append((res0, min(per), per))
    return out
