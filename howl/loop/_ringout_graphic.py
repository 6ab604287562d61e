"""The ring-out on a graphic EQ: which sliders to pull, and by how much.

Private to :mod:`howl.loop.ringout` (see docs/ringout.md, "Within the desk's EQ"). The sliders
are the ISO 266 nominal 1/3-octave centres of :mod:`howl.loop.desk`, each an RBJ cookbook peaking
section of the graphic's fixed Q; every move is judged exactly on the planning grid of
:mod:`howl.loop._ringout_grid`, all the moves of a round in one array.
"""

from __future__ import annotations

import math

import numpy as np

from howl.loop._ringout_grid import POLISH_VIEW_DB, _cuts_on_grid, _grid_margins_rows, _View, _worst_margin
from howl.loop.notch import Notch


#: Slider moves the graphic search tries (in steps of the desk's gain step).
GRAPHIC_PULLS = (1, 2, 4, 8, 16)


def graphic_search(loops, score, desk, budget: int, fs: float, band, target) -> tuple[list[Notch], float, list[Notch]]:
    """Which sliders of a graphic EQ to pull, and by how much: (cuts, grid margin, the naive cuts).

    Greedy on the score: at each round every slider is tried pulled 1, 2, 4, 8 or 16 steps further
    (within the range, and at most ``budget`` sliders moved), each judged exactly on the planning
    grid with the others as they are; the best move is kept while it scores better. A last pass
    lets each pulled slider up a step where that scores better. The search also starts from each
    prefix of the naive ring-out of the same desk (the slider nearest the limiting crossing pulled
    to the bottom, in turn); the best-scored result is kept, unless the naive ring-out itself buys
    more margin within the tonal share (the tie-break then does not cost margin against it).
    """
    centres = desk.centres_hz(fs, band)
    step, depth, q = float(desk.gain_step_db), float(desk.depth_db(12.0)), float(desk.graphic_q)
    m0 = _worst_margin(loops, [], fs)[0]

    def cuts_of(g: dict) -> list[Notch]:
        return [Notch(fc, g[fc], q) for fc in centres if g.get(fc, 0.0) < 0.0]

    def run(g: dict) -> tuple[dict, float, float]:
        cuts = cuts_of(g)
        m = _worst_margin(loops, cuts, fs)[0]
        best = score(cuts, m)
        while True:
            now = [lp.H * lp.cascade(cuts) for lp in loops]
            views = [_View(lp, L, m + POLISH_VIEW_DB) for lp, L in zip(loops, now)]
            moved = sum(1 for fc in centres if g.get(fc, 0.0) < 0.0)
            moves = []
            for fc in centres:
                g0 = g.get(fc, 0.0)
                if g0 >= 0.0 and moved >= budget:
                    continue
                for k in GRAPHIC_PULLS:
                    g1 = round(g0 - k * step, 9)
                    if g1 >= -depth - 1e-9:
                        moves.append((fc, g0, g1))
            if not moves:
                break
            ms = np.full(len(moves), np.inf)
            for lp, view in zip(loops, views):
                new = _cuts_on(view, [Notch(fc, g1, q) for fc, _, g1 in moves])
                old = _cuts_on(view, [Notch(fc, g0 if g0 < 0 else -1.0, q) for fc, g0, _ in moves])
                unit = np.array([g0 >= 0.0 for _, g0, _ in moves])
                ratio = np.where(unit[:, None], new, new / np.where(unit[:, None], 1.0, old))
                m_l, _ = _grid_margins_rows(view.Lv[None, :] * ratio, view.f, view.adj)
                for k in np.flatnonzero(m_l >= view.ceiling_db):
                    fc, g0, g1 = moves[k]
                    trial = {**g, fc: g1}
                    m_l[k] = lp.margin(lp.H * lp.cascade(cuts_of(trial)))[0]
                ms = np.minimum(ms, m_l)
            js = [score(cuts_of({**g, fc: g1}), float(mm)) for (fc, _, g1), mm in zip(moves, ms)]
            k = int(np.argmax(js))
            if js[k] <= best + 0.005:
                break
            fc, _, g1 = moves[k]
            g[fc] = g1
            cuts, m, best = cuts_of(g), float(ms[k]), js[k]
            if target is not None and m >= target:
                break
        for fc in list(centres):  # let each pulled slider up a step where that scores better
            if g.get(fc, 0.0) < 0.0:
                trial = {**g, fc: round(g[fc] + step, 9)}
                c_t = cuts_of(trial)
                m_t = _worst_margin(loops, c_t, fs)[0]
                j = score(c_t, m_t)
                if j > best + 0.005:
                    g, cuts, m, best = trial, c_t, m_t, j
        return g, m, best

    # the naive ring-out of this desk (the slider nearest the limit pulled to the bottom, in turn):
    # the search also starts from each of its prefixes, since one slider pulled alone often buys
    # nothing where several crossings stand level
    naive: dict = {}
    prefixes = []
    for _ in range(min(budget, len(centres))):
        m_n, f_n, _ = _worst_margin(loops, cuts_of(naive), fs)
        if not math.isfinite(f_n):
            break
        fc = min(centres, key=lambda c: abs(math.log2(f_n / c)))
        if naive.get(fc, 0.0) <= -depth + 1e-9:
            break
        naive[fc] = desk.round_gain(-depth)
        prefixes.append(dict(naive))
    results = [run({})] + [run(p) for p in prefixes]
    g, m, _ = max(results, key=lambda r: r[2])
    if prefixes:  # the score's tie-break (less program removed) never costs margin against the naive one
        m_n = _worst_margin(loops, cuts_of(naive), fs)[0]
        if m_n > m and score.within_share(cuts_of(naive), m_n):
            g, m = naive, m_n
    if not cuts_of(g):
        return [], m0, cuts_of(naive)
    return cuts_of(g), m, cuts_of(naive)


def _cuts_on(view, notches) -> np.ndarray:
    return _cuts_on_grid(notches, view.cos_w, view.inv_sin_w, view.fs)
