"""Frequencies at risk of howling, one per lobe of |L| (the list :func:`howl.loop.nyquist_margin`
returns as ``risks``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Risk:
    """A frequency at risk of howling.

    ``kind`` is ``"crossing"`` (a positive real-axis crossing of H: ``margin_db``
    is the phase-aware margin there) or ``"peak"`` (a peak of |H| with no
    crossing in its lobe: ``margin_db`` is the phase-blind margin, what is left
    if the phase drifts onto 0°). ``magnitude_margin_db`` and ``peak_freq_hz``
    give the phase-blind margin and frequency of the highest peak of the lobe
    (between the neighbouring minima of |L|) the risk sits in.
    """

    freq_hz: float
    margin_db: float
    kind: str
    magnitude_margin_db: float = float("nan")  # phase-blind margin of the lobe's peak
    peak_freq_hz: float = float("nan")  # where that peak is


def lobe_risks(f, mag2, margins, cand_f, cand_lo, n_risks: int, n_ties: int, howl_freq_hz: float) -> tuple[Risk, ...]:
    """One risk per lobe of |L| (between neighbouring minima of |L|² ``mag2`` on the grid ``f``): its
    worst crossing if it has one (crossings ``cand_f`` sorted worst first, with ``margins`` and the
    grid index ``cand_lo`` of their brackets; the lobe's phase-blind margin beside it), else its peak.
    The ``n_risks`` most urgent, always with the limiting crossing at ``howl_freq_hz``.
    """
    mid, left, right = mag2[1:-1], mag2[:-2], mag2[2:]
    # (a peak must stand out of its neighbours by more than rounding: a flat loop has none)
    m_in = mid * (1.0 - 2e-9)
    pk = np.flatnonzero((m_in >= left) & (m_in > right)) + 1
    mins = np.flatnonzero((mid <= left) & (mid < right)) + 1
    lobe_pk = np.searchsorted(mins, pk)
    # the highest peak of each lobe
    o_pk = np.lexsort((-mag2[pk], lobe_pk))
    lobes_u, first = np.unique(lobe_pk[o_pk], return_index=True)
    lobe_peak = dict(zip(lobes_u.tolist(), pk[o_pk][first].tolist()))
    lobe_cr = np.searchsorted(mins, cand_lo, side="right")  # crossings are sorted worst first
    seen: set[int] = set()
    risks_all = []
    for m, x, lb in zip(margins, cand_f, lobe_cr):
        if lb in seen:
            continue
        seen.add(int(lb))
        ip = lobe_peak.get(int(lb))
        pm = -10.0 * math.log10(max(mag2[ip], 1e-300)) if ip is not None else float(m)
        pf = float(f[ip]) if ip is not None else float(x)
        risks_all.append(Risk(float(x), float(m), "crossing", min(pm, float(m)), pf))
        if len(seen) >= n_risks + n_ties:
            break
    lobes_with_crossing = set(lobe_cr.tolist())  # built once: a set per item made this quadratic
    free = [(lb, ip) for lb, ip in lobe_peak.items() if lb not in lobes_with_crossing]
    if free:
        ips = np.array([ip for _, ip in free])
        pm = -10.0 * np.log10(np.maximum(mag2[ips], 1e-300))
        for i in np.argsort(pm)[:n_risks]:
            risks_all.append(Risk(float(f[ips[i]]), float(pm[i]), "peak", float(pm[i]), float(f[ips[i]])))
    risks_all.sort(key=lambda r: (r.margin_db, r.kind != "crossing"))
    risks_l = risks_all[:n_risks]
    if n_risks and margins.size and not any(r.kind == "crossing" and r.freq_hz == howl_freq_hz for r in risks_l):
        # the limiting crossing is always listed (in place of the last, less urgent, entry)
        top = next(r for r in risks_all if r.kind == "crossing" and r.freq_hz == howl_freq_hz)
        risks_l = sorted(risks_l[:-1] + [top], key=lambda r: (r.margin_db, r.kind != "crossing"))
    return tuple(risks_l)
