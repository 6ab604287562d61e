"""The ring-out's search: simple ring-outs, the score and the pattern search over the covering plans
(:mod:`howl.loop._ringout_plan`).

Private to :mod:`howl.ringout` (see its docstring for the method); the tonal costs
(:func:`tonal_cost_db`, :func:`tonal_grid`) are re-exported there.

References
----------
.. [1] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note, 2021,
   https://www.w3.org/TR/audio-eq-cookbook/.
.. [2] D. A. Bies, C. H. Hansen and C. Howard, *Engineering Noise Control*,
   5th ed., Table 4.3: male speech, normal effort, octave-band levels at 1 m
   (250–4000 Hz: 72.5, 74.0, 68.0, 62.0, 57.0 dB), used to weight the
   speech tonal cost.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from howl.loop._ringout_grid import POLISH_VIEW_DB, _cut_atten_db, _tan_f, _View, _view_margins, _worst_margin
from howl.loop._ringout_plan import (  # noqa: F401  (the planner's names re-exported)
    PLAN_BANDWIDTHS_OCT,
    PLAN_MAX_DEPTH_DB,
    PLAN_ROUNDS,
    _Planner,
    _plan_cuts,
    plan_bandwidths_oct,
)
from howl.loop.notch import (
    MAX_NOTCH_BANDWIDTH_OCT,
    Notch,
    cascade_response,
    merge_notches,
    q_from_bandwidth_oct,
)

#: A cascade may cost at most this share of the gain it buys in broadband (pink) tonal cost;
#: beyond it the cuts mostly turn the whole loop down, which the fader does too (our own rule).
MAX_TONAL_SHARE = 0.5


@dataclass(frozen=True)
class Limits:
    """What the search may use: the deepest cut (dB > 0), the narrowest and widest band (oct)."""

    max_depth_db: float = PLAN_MAX_DEPTH_DB
    min_bw_oct: float = PLAN_BANDWIDTHS_OCT[0]
    max_bw_oct: float = MAX_NOTCH_BANDWIDTH_OCT


#: Male speech octave-band levels at 1 m, normal effort [2]_ (dB), for the
#: speech-weighted tonal cost.
SPEECH_OCTAVES_HZ = (250.0, 500.0, 1000.0, 2000.0, 4000.0)
SPEECH_LEVELS_DB = (72.5, 74.0, 68.0, 62.0, 57.0)


def tonal_cost_db(notches, band_hz, sample_rate_hz, *, weighting: str = "pink") -> float:
    """Program power the cascade removes, in dB (≥ 0).

    ``weighting="pink"``: pink noise (equal power per octave) over the band
    (from 20 Hz if the band starts lower). ``"speech"``: a male speech spectrum
    [2]_, octave bands 250 Hz–4 kHz, pink within each band.
    """
    notches = list(notches)
    if not notches:
        return 0.0
    fs = float(sample_rate_hz)
    f, w = tonal_grid(band_hz, fs, weighting, 8000)
    return float(-10.0 * math.log10(np.sum(w * np.abs(cascade_response(notches, f, fs)) ** 2)))


def tonal_grid(band_hz, fs: float, weighting: str = "pink", n: int = 8000) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies and weights (summing to 1) of a tonal-cost weighting, about ``n`` points.

    Pink: log-spaced over the band from 20 Hz to below 0.499·fs (equal weight per octave).
    Speech: each octave band 250 Hz–4 kHz [2]_ log-spaced with its share of the speech power.
    """
    if weighting == "speech":
        fs_, ws_ = [], []
        k = max(8, n // len(SPEECH_OCTAVES_HZ))
        tot = sum(10.0 ** (lev / 10.0) for lev in SPEECH_LEVELS_DB)
        for fc, lev in zip(SPEECH_OCTAVES_HZ, SPEECH_LEVELS_DB):
            lo = fc / math.sqrt(2)
            f = np.geomspace(lo, max(lo * 1.001, min(fc * math.sqrt(2), 0.499 * fs)), k)
            fs_.append(f)
            ws_.append(np.full(k, 10.0 ** (lev / 10.0) / tot / k))
        return np.concatenate(fs_), np.concatenate(ws_)
    if weighting != "pink":
        raise ValueError(f"unknown tonal weighting {weighting!r}")
    lo = max(20.0, float(band_hz[0]))
    hi = min(float(band_hz[1]), 0.499 * fs)
    return np.geomspace(lo, max(hi, lo * 1.001), n), np.full(n, 1.0 / n)


#: The simple ring-outs also tried at every budget (depth dB, bandwidth oct): a fixed cut at each
#: limiting crossing in turn, on the loop with the earlier cuts in it. Where a few regions dominate
#: the loop, deep 1/3-octave cuts at the limit found this way often beat the plan. One is kept only
#: if its pink-noise tonal cost is at most half the gain it buys (otherwise it mostly turns the
#: whole loop down, which the fader does too).
GREEDY_CUTS = ((-10.0, 1 / 6), (-6.0, 1 / 6), (-10.0, 1 / 10), (-12.0, 1 / 3), (-15.0, 1 / 3), (-18.0, 1 / 3), (-15.0, 1 / 4))


def _greedy_prefixes(loops, budget: int, fs: float, lim: "Limits | None" = None) -> dict[int, list[tuple[list[Notch], float]]]:
    """For each budget b, the cuts and margin of each simple ring-out after b cuts.

    Within a desk's limits (``lim``) every fixed cut is made to fit them (no deeper, no
    narrower), and the naive ring-out of those limits (the deepest allowed cut at the
    narrowest allowed width) is one of them.
    """
    out: dict[int, list] = {b: [] for b in range(1, budget + 1)}
    kinds = list(GREEDY_CUTS)
    if lim is not None:
        kinds = [(max(d, -lim.max_depth_db), max(bw, lim.min_bw_oct)) for d, bw in kinds]
        kinds.append((-lim.max_depth_db, lim.min_bw_oct))
        kinds = list(dict.fromkeys(kinds))
    for depth, bw in kinds:
        q = q_from_bandwidth_oct(bw)
        now = [lp.H for lp in loops]
        cuts: list[Notch] = []
        for b in range(1, budget + 1):
            worst = min((lp.margin(a) for lp, a in zip(loops, now)), key=lambda t: t[0])
            if not math.isfinite(worst[1]) or worst[1] >= 0.49 * fs:
                break
            n = Notch(worst[1], depth, q)
            cuts = cuts + [n]
            now = [a * lp.cut(n) for lp, a in zip(loops, now)]
            m = min(lp.margin(a)[0] for lp, a in zip(loops, now))
            out[b].append((cuts, m))
    return out


#: Steps of the pattern search around each cut: centre (fractions of its bandwidth), depth (dB)
#: and width (log2 of the factor). They are halved when a pass finds nothing better.
SEARCH_CENTRE_STEPS = (-0.25, -0.1, 0.1, 0.25)
SEARCH_DEPTH_STEPS_DB = (-3.0, -1.0, 1.0, 3.0)
SEARCH_WIDTH_STEPS = (-0.5, -0.2, 0.2, 0.5)
#: Depths (dB) and widths (octaves) a cut is tried at when moved to the limiting crossing.
RELOCATE_DEPTHS_DB = (-3.0, -6.0, -10.0)
RELOCATE_WIDTHS_OCT = (1 / 24, 1 / 10, 1 / 6)


#: Tie-break of the search (dB of margin per dB of tonal cost): of two cascades with the same
#: margin, the one that removes less program wins, so depths stay as shallow as they can.
TONAL_TIE_BREAK = 0.05


class _Score:
    """What the search maximises: the worst grid margin, less the tonal cost beyond its share.

    The tonal cost is :func:`tonal_cost_db`'s figure (pink or speech weighting) on a coarser
    grid (each cut's power response cached), so the search sees what will be reported.
    """

    def __init__(self, loops, fs: float, band, m0_db: float, share: float = MAX_TONAL_SHARE,
                 weighting: str = "pink"):
        self.loops, self.fs, self.m0, self.share = loops, fs, m0_db, share
        self.f, self.w = tonal_grid(band, fs, weighting, 1200)
        self._tan = _tan_f(self.f, fs)
        self._power: dict[Notch, np.ndarray] = {}

    def power(self, cuts) -> np.ndarray:
        """|C(f)|² of the cascade on the tonal grid (read only: it may be a cached array)."""
        p = None  # (1·c is c bit for bit: the product starts from the first cut's power)
        for n in cuts:
            c = self._power.get(n)
            if c is None:
                if len(self._power) > 4096:
                    self._power.clear()
                if n.gain_db is None:
                    c = np.abs(cascade_response([n], self.f, self.fs)) ** 2
                else:  # the exact digital magnitude, in closed form
                    c = 10.0 ** (-_cut_atten_db(self.f, n.freq_hz, n.gain_db, n.q, self.fs, self._tan) / 10.0)
                self._power[n] = c
            p = c if p is None else p * c
        return np.ones(self.f.size) if p is None else p

    def tonal_db(self, cuts, rest_power: np.ndarray | None = None) -> float:
        """Tonal cost of ``cuts`` (times the cascade whose power is ``rest_power``, if given)."""
        p = self.power(cuts)
        if rest_power is not None:
            p = p * rest_power
        return float(-10.0 * math.log10(np.dot(self.w, p)))

    def within_share(self, cuts, margin_db: float) -> bool:
        """True when the cuts' tonal cost stays within their share of the gain they buy."""
        return self.share == math.inf or self.tonal_db(cuts) <= self.share * (margin_db - self.m0) + 1e-9

    def __call__(self, cuts, margin_db: float, rest_power: np.ndarray | None = None) -> float:
        t = self.tonal_db(cuts, rest_power)
        over = 0.0 if self.share == math.inf else max(0.0, t - self.share * (margin_db - self.m0))
        return margin_db - TONAL_TIE_BREAK * t - 10.0 * over


#: How many of the best-scored cascades at the chosen budget the search starts from.
POLISH_STARTS = 2


def _margins(loops, views, cands) -> np.ndarray:
    """Worst margin over the loops for each candidate cut added to its view (one array per loop).

    A candidate that lifts a loop past its view's ceiling is judged again on the whole grid.
    """
    worst = np.full(len(cands), np.inf)
    for lp, view in zip(loops, views):
        m, _ = _view_margins(view, cands)
        for k in np.flatnonzero(m >= view.ceiling_db):
            m[k] = lp.margin(view.L * lp.cut(cands[k]))[0]
        worst = np.minimum(worst, m)
    return worst


def _moves(kind: int, c: Notch, scale: float, f_lim: float, lim: Limits) -> list[Notch]:
    """The candidates of one move of the pattern search around cut ``c``."""
    bw, g = c.bandwidth_oct, (-lim.max_depth_db if c.gain_db is None else c.gain_db)
    if kind == 3:  # move the cut to where the loop is limited now
        if not math.isfinite(f_lim):
            return []
        return [Notch(f_lim, max(d, -lim.max_depth_db), q_from_bandwidth_oct(max(b, lim.min_bw_oct)))
                for d in RELOCATE_DEPTHS_DB for b in RELOCATE_WIDTHS_OCT]
    if kind == 0:
        return [Notch(c.freq_hz * 2.0 ** (u * scale * bw), g, c.q) for u in SEARCH_CENTRE_STEPS]
    if kind == 1:
        return [Notch(c.freq_hz, float(min(-0.1, max(-lim.max_depth_db, g + d * scale))), c.q)
                for d in SEARCH_DEPTH_STEPS_DB]
    return [Notch(c.freq_hz, g, q_from_bandwidth_oct(
        float(min(lim.max_bw_oct, max(lim.min_bw_oct, bw * 2.0 ** (w * scale)))))) for w in SEARCH_WIDTH_STEPS]


def _polish(loops, cuts: list[Notch], score: _Score, passes: int, lim: Limits,
            relocate: bool = True) -> tuple[list[Notch], float]:
    """Pattern search around each cut (centre, depth, width), keeping every step that scores better.

    A fourth move takes a cut away from where it is and puts it, at a few depths and widths, on
    the crossing that limits the loop now (a cut that has become nearly useless finds new work).

    Each candidate is judged on the planning grid with the other cuts in the loop, so the phase
    the cuts add (which moves the crossings) is accounted for exactly. The candidates of one move
    are judged together in one array (:func:`_margins`), then taken in turn as a one-at-a-time
    search would take them. Widths stay within the limits' band, depths within their depth.
    """
    cuts = list(cuts)
    m_best = _worst_margin(loops, cuts, score.fs)[0]
    best = score(cuts, m_best)
    scale = 1.0
    for _ in range(passes):
        improved = False
        # each loop without cut i is H·(cuts before i, as the pass left them)·(cuts after i): the
        # products after i are taken once per pass, those before i grow as the pass goes
        after = []
        for lp in loops:
            acc = [np.ones(lp.H.size, lp.H.dtype)]
            for n in reversed(cuts[1:]):
                acc.append(acc[-1] * lp.cut(n))
            after.append(acc[::-1])  # after[k][i] = product of the cuts after i
        before = [lp.H for lp in loops]
        for i in range(len(cuts)):
            c = cuts[i]
            rest = cuts[:i] + cuts[i + 1 :]
            others = [_View(lp, b * a[i], m_best + POLISH_VIEW_DB) for lp, b, a in zip(loops, before, after)]
            rest_power = score.power(rest)
            f_lim = math.nan
            if relocate and scale == 1.0:  # where the loop is limited now, with every cut in
                m_now = []
                for lp, view in zip(loops, others):
                    mv = view.margin_at(c)
                    m_now.append(mv if mv[0] < view.ceiling_db else lp.margin(view.L * lp.cut(c)))
                f_lim = min(m_now)[1]
            # each move starts from where the earlier ones left the cut: the candidates of all four
            # are judged in one array around the cut as it stands, and those of a move after an
            # accepted step again around the moved cut (rows are bit for bit the one-move figures)
            todo = {kind: [n for n in _moves(kind, c, scale, f_lim, lim) if n != c and n.freq_hz < 0.49 * score.fs]
                    for kind in range(4)}
            flat = [n for kind in range(4) for n in todo[kind]]
            ms_all = _margins(loops, others, flat) if flat else np.zeros(0)
            judged = dict(zip(flat, ms_all))
            c_first = c
            for kind in range(4):
                if c == c_first:
                    cands = todo[kind]
                else:
                    cands = [n for n in _moves(kind, c, scale, f_lim, lim) if n != c and n.freq_hz < 0.49 * score.fs]
                if not cands:
                    continue
                if all(n in judged for n in cands):
                    ms = [judged[n] for n in cands]
                else:
                    ms = _margins(loops, others, cands)
                for cand, m in zip(cands, ms):
                    if cand == c:
                        continue
                    j = score([cand], float(m), rest_power)
                    if j > best + 0.005:
                        best, m_best, c, improved = j, float(m), cand, True
            cuts[i] = c
            before = [b * lp.cut(c) for lp, b in zip(loops, before)]
        if not improved:
            scale *= 0.5
            if scale < 0.2:
                break
    return cuts, m_best


def _tidy(loops, cuts: list[Notch], fs: float, desk=None) -> list[Notch]:
    """Drop cuts of ~0 dB; merge overlapping cuts when that costs no margin (and the desk can make them)."""
    cuts = [n for n in cuts if n.gain_db is None or n.gain_db < -0.05]
    if desk is not None and desk.graphic:
        return cuts
    cap = MAX_NOTCH_BANDWIDTH_OCT
    merged = merge_notches(cuts, fs, cap)
    if desk is not None:
        merged = [desk.fit(n, fs) for n in merged]
    if len(merged) < len(cuts) and _worst_margin(loops, merged, fs)[0] >= _worst_margin(loops, cuts, fs)[0] - 0.05:
        return merged
    return cuts


def _on_desk(loops, cuts: list[Notch], score: _Score, desk, fs: float) -> tuple[list[Notch], float]:
    """The cuts as the desk sets them (:meth:`howl.loop.desk.Desk.fit`), then each gain moved a step
    up or down while that scores better (a rounded gain can cost margin a step would win back)."""
    cuts = [desk.fit(n, fs) for n in cuts]
    m = _worst_margin(loops, cuts, fs)[0]
    step = desk.gain_step_db
    if not step or not cuts:
        return cuts, m
    best = score(cuts, m)
    for _ in range(3):
        better = False
        for i, c in enumerate(cuts):
            for d in (-step, step):
                g = c.gain_db + d
                if g > -step / 2 or g < -desk.depth_db(PLAN_MAX_DEPTH_DB) - 1e-9:
                    continue
                trial = cuts[:i] + [Notch(c.freq_hz, float(g), c.q)] + cuts[i + 1 :]
                m_t = _worst_margin(loops, trial, fs)[0]
                j = score(trial, m_t)
                if j > best + 0.005:
                    cuts, m, best, better, c = trial, m_t, j, True, trial[i]
        if not better:
            break
    return cuts, m


def _plans_by_budget(loops, budget, target, fs, desk, lim, planner, score, m0_grid):
    """The best plan at each budget 1..``budget`` (``{b: (cuts, margin)}``, stopping at the target) and the
    best few starts of the search at each budget."""
    plans = {0: ([], m0_grid)}
    starts: dict[int, list] = {0: [[]]}
    # every budget 1..max is planned: the per-notch rule compares them, and a plan for more
    # cuts that ends up worse (the cuts' phase moved the crossings) falls back on a smaller one.
    # At each budget the covering plan and the simple ring-outs compete on the score: the
    # margin, less any tonal cost beyond its share of the gain.
    greedy = _greedy_prefixes(loops, budget, fs, lim)
    for b in range(1, budget + 1):
        cuts, _, _ = _plan_cuts(loops, b, planner, fs)
        options = [_tidy(loops, cuts, fs, desk)] + [_tidy(loops, g_cuts, fs, desk) for g_cuts, _ in greedy[b]]
        scored = []
        for c in options:
            m_c = _worst_margin(loops, c, fs)[0] if c else m0_grid
            scored.append((score(c, m_c), m_c, c))
        scored.sort(key=lambda t: -t[0])
        j_b, m_b, cuts = scored[0]
        prev = plans[max(plans)]
        if j_b < score(prev[0], prev[1]):  # more budget never has to do worse
            cuts, m_b = prev
            scored.insert(0, (score(prev[0], prev[1]), prev[1], prev[0]))
        plans[b] = (cuts, m_b)
        starts[b] = [c for _, _, c in scored[:POLISH_STARTS]]
        if target is not None and m_b >= target:
            break
    return plans, starts


def _polished(loops, planned, planned_margin, starts, score, polish, lim_p, fs, desk):
    """The plan after the search, when it scores at least as well; else the plan as given."""
    # one pass of the search from each of the best few starts at that budget, then the
    # search carried on from the best of them
    best = None
    for start in starts:
        if start:
            c, m_c = _polish(loops, start, score, 1, lim_p)
            if best is None or score(c, m_c) > score(best[0], best[1]):
                best = (c, m_c)
    if best is not None:
        c, _ = _polish(loops, best[0], score, polish, lim_p)
        c = _tidy(loops, c, fs, desk)
        m_c = _worst_margin(loops, c, fs)[0]
        if score(c, m_c) >= score(planned, planned_margin):
            planned, planned_margin = c, m_c
    return planned, planned_margin


def _choose_cuts(loops, *, budget, target, min_gain, fs, drift, band, polish, tonal_share, tonal_weighting,
                 desk=None):
    """The cuts to insert: (cuts, planned grid margin, why the ring-out stops, the grid margin
    without cuts, the naive ring-out of the desk it was compared with, or [] without a desk).

    With a parametric ``desk`` the plan, the simple ring-outs and the search stay within its
    depth and width, and the cuts are then set as the desk sets them (:func:`_on_desk`); a
    graphic desk is searched by :func:`howl.loop._ringout_graphic.graphic_search` instead; a
    parametric one plans every budget (:func:`_plans_by_budget`), keeps the budget whose cuts
    pay, then searches on from it (:func:`_polished`).
    """
    m0_grid = _worst_margin(loops, [], fs)[0]
    naive: list[Notch] = []  # the naive ring-out of the desk, when one was compared
    planned: list[Notch] = []
    planned_margin = float("nan")
    reason = None
    if budget == 0:
        reason = "no cuts allowed (max_notches = 0)"
    elif not math.isfinite(m0_grid):
        reason = "the loop never crosses the positive real axis in the band: nothing to cut"
    elif target is not None and m0_grid >= target:
        reason = f"the margin already meets the target ({m0_grid:.2f} dB >= {target:g} dB)"
    elif desk is not None and desk.graphic:
        score = _Score(loops, fs, band, m0_grid, tonal_share, tonal_weighting)
        from howl.loop._ringout_graphic import graphic_search

        planned, planned_margin, naive = graphic_search(loops, score, desk, budget, fs, band, target)
        n = len(planned)
        if target is not None and planned_margin >= target:
            reason = f"target margin met ({planned_margin:.2f} dB >= {target:g} dB) with {n} slider(s)"
        elif n >= budget:
            reason = f"budget of {budget} slider(s) spent"
        else:
            reason = f"pulling any slider further no longer pays ({n} slider(s) pulled)"
    else:
        lim = None
        if desk is not None:
            lim = Limits(desk.depth_db(PLAN_MAX_DEPTH_DB), max(desk.min_bandwidth_oct or 0.0, PLAN_BANDWIDTHS_OCT[0]),
                         max(MAX_NOTCH_BANDWIDTH_OCT, desk.min_bandwidth_oct or 0.0))
        planner = _Planner(fs, drift, *(() if lim is None else (lim.max_depth_db, lim.min_bw_oct)))
        score = _Score(loops, fs, band, m0_grid, tonal_share, tonal_weighting)
        plans, starts = _plans_by_budget(loops, budget, target, fs, desk, lim, planner, score, m0_grid)
        gains = {b: plans[b][1] - m0_grid for b in plans}
        chosen = 0  # grow the plan while each step up pays min_gain per extra cut over the last one kept
        for b in sorted(plans)[1:]:
            if gains[b] - gains[chosen] >= min_gain * (b - chosen) - 1e-9:
                chosen = b
        planned, planned_margin = plans[chosen]
        lim_p = lim or Limits()
        if polish and planned:
            planned, planned_margin = _polished(loops, planned, planned_margin, starts[chosen], score, polish,
                                                lim_p, fs, desk)
        if desk is not None and planned:
            planned, planned_margin = _on_desk(loops, planned, score, desk, fs)
        if lim is not None:  # the score's tie-break never costs margin against the naive ring-out
            naive = _naive_cuts(loops, chosen, fs, lim, desk)  # as many cuts as the plan chosen
            m_n = _worst_margin(loops, naive, fs)[0] if naive else -math.inf
            if m_n > planned_margin + 1e-9 and score.within_share(naive, m_n):
                planned, planned_margin = naive, m_n
        n_used = len(planned)
        if target is not None and planned_margin >= target:
            reason = f"target margin met ({planned_margin:.2f} dB >= {target:g} dB) with {n_used} cut(s)"
        elif chosen < max(plans):
            top = max(plans)
            reason = (
                f"more cuts would buy less than {min_gain:g} dB per notch ({chosen} cut(s) buy "
                f"{gains[chosen]:.2f} dB; the best plan with {top} buys {gains[top]:.2f} dB)"
            )
        elif n_used < budget and chosen == budget:
            reason = f"budget of {budget} cut(s) spent ({n_used} after merging cuts that overlap)"
        elif chosen == budget:
            reason = f"budget spent ({budget} cut(s))"
        else:
            reason = f"no placement of more than {n_used} cut(s) lowers the limiting crossings further"

    return planned, planned_margin, reason, m0_grid, naive


def _naive_cuts(loops, budget: int, fs: float, lim: Limits, desk) -> list[Notch]:
    """The naive ring-out within the limits: the deepest allowed cut at the narrowest allowed width
    at each limiting crossing in turn (as the desk sets it)."""
    q = q_from_bandwidth_oct(lim.min_bw_oct)
    cuts: list[Notch] = []
    for _ in range(budget):
        f = _worst_margin(loops, cuts, fs)[1]
        if not math.isfinite(f) or f >= 0.49 * fs:
            break
        cuts.append(desk.fit(Notch(f, -lim.max_depth_db, q), fs))
    return cuts
