"""The plan's headline figures on one basis (private; :mod:`howl.model.plan` uses and re-exports them).

One basis: a flat fader on each channel as the rig sets it (its high-pass, EQ, the
capsule and loudspeaker responses in). Every figure a tech acts on comes from
:func:`band_limits_db`, the gain (dB, the same in every band, i.e. a flat fader) at which
the whole loop matrix's worst-peak loop gain reaches −FSM in each band:

* the limit of one fader (``max_channel_gain_db``) is the smallest of its band limits,
  the band where that happens is the band that rings first (:func:`rings_first`);
* the limit of all open mics together (``headroom_together_db``) likewise, with every
  column of the loop matrix raised at once (the desk's balance kept);
* what a perfect EQ could still buy in a band is that band's limit less the smallest
  (``eq_could_buy_db``), what the old per-band "ideal EQ" PAG assumed for free.

Where the chain enters the loop matrix. P[f, i, j] is the band-average power from
channel j's output (after its high-pass and EQ, before the fader and the mixes) round
the room to channel i's output: mix gain E[s, j]², loudspeaker s's response, the room
T[s, i], then mic i's capsule and channel i's high-pass/EQ. So

    P[f, i, j] = mic_power[i, f] · Σ_s T[s, i, f] · speaker_power[s, f] · E[s, j]²,

the mic chain of the *receiving* channel i on the row. Putting channel j's chain on the
column instead (the loop cut at the channel inputs) is D·P·D⁻¹ with D = diag(mic_power),
which has the same eigenvalues and the same Schur complements: the figures do not depend
on where the loop is cut.

Speech weighting of broadband figures (:func:`speech_weights`): a band's weight is the
talker's band power (its long-term spectrum re its overall level) times the band's
importance for speech (ANSI S3.5-1997, Speech Intelligibility Index, band-importance
function), normalised to sum 1; band figures in dB are averaged with these weights, as
the SII sums importance-weighted band audibilities that are linear in dB. A fader adds
the same dB to every band, so the weighted PAG at a fader setting is the weighted
acoustic gain plus that setting.
"""

from __future__ import annotations

import numpy as np

_TINY = 1e-30
#: Search range of a fader limit, dB from the rig's setting (a desk's range and then some).
LIMIT_RANGE_DB = (-150.0, 150.0)
#: Bisection steps: 300 dB / 2^40 ≈ 3e-10 dB.
_STEPS = 40

STABILITY = ("stable", "inside_fsm", "howls")
REACH = ("reaches_target", "short")

def speech_weights(talker_level_db, importance) -> np.ndarray:
    """(M, F) weights: talker band power × band importance, each row summing to 1 (uniform if all zero)."""
    w = 10.0 ** (np.asarray(talker_level_db, float) / 10.0) * np.asarray(importance, float)[None, :]
    s = w.sum(axis=1, keepdims=True)
    return np.where(s > 0, w / np.where(s > 0, s, 1.0), 1.0 / w.shape[1])


def weighted_db(band_db, weights) -> np.ndarray:
    """Speech-weighted broadband figure of (M, F) band figures in dB (weights from :func:`speech_weights`)."""
    return np.sum(np.asarray(band_db, float) * weights, axis=-1)


def worst_peak_db(p_dir, p_rev, peak_fn, quantile: int = 0) -> np.ndarray:
    """Worst-peak loop gain of the whole loop matrix per band, dB: 10·log10 ρ(P) plus the peak factor.

    The ONE definition every limit uses. ``peak_fn(k)`` gives the peak factor (mean, 10 %, 90 %) for the
    Perron-weighted direct-to-reverberant ratio ``k`` of each band; ``quantile`` picks which (0, 1, 2).
    """
    from howl.model.plan import perron_vectors

    p = p_dir + p_rev
    rho, right, left = perron_vectors(p)
    k = np.einsum("fi,fij,fj->f", left, p_dir, right) / np.maximum(np.einsum("fi,fij,fj->f", left, p_rev, right),
                                                                     _TINY)
    return 10.0 * np.log10(np.maximum(rho, _TINY)) + peak_fn(k)[quantile]


def band_limits_db(p_dir, p_rev, peak_fn, fsm_db: float, column: int | None, quantile: int = 0) -> np.ndarray:
    """Per band (F,), the flat gain x (dB from the rig's setting) at which the worst peak reaches −FSM.

    ``column``: the mic whose fader moves (its column of P, in every mix it feeds), or None for all open
    mics together. +inf where that fader cannot make the band reach −FSM within :data:`LIMIT_RANGE_DB`
    (no path), −inf where the band is past −FSM even with that fader closed (the others ring on their own).
    Vectorised bisection over the bands: the Perron root grows with every entry of P, so the worst peak
    grows with x (the peak factor moves a little with the direct-to-reverberant ratio; bisection still
    finds the crossing).
    """
    n_f = p_dir.shape[0]

    def excess(x):  # worst peak + FSM at gain x (dB) per band
        g = 10.0 ** (x / 10.0)
        if column is None:
            sd, sr = p_dir * g[:, None, None], p_rev * g[:, None, None]
        else:
            sd, sr = p_dir.copy(), p_rev.copy()
            sd[:, :, column] *= g[:, None]
            sr[:, :, column] *= g[:, None]
        return worst_peak_db(sd, sr, peak_fn, quantile) + fsm_db

    lo = np.full(n_f, LIMIT_RANGE_DB[0])
    hi = np.full(n_f, LIMIT_RANGE_DB[1])
    e_lo, e_hi = excess(lo), excess(hi)
    for _ in range(_STEPS):
        mid = 0.5 * (lo + hi)
        up = excess(mid) >= 0.0
        hi = np.where(up, mid, hi)
        lo = np.where(up, lo, mid)
    out = 0.5 * (lo + hi)
    out = np.where(e_hi < 0.0, np.inf, out)
    return np.where(e_lo >= 0.0, -np.inf, out)


def rings_first(limits_db):
    """Index of the band that rings first: the smallest band limit (the first such band on a tie).

    The one rule plan, map and sheet share (the sheet prints the plan's). It looks only at the band
    limits on the flat-fader basis, so bands past the chain's roll-off (large limits) never win. For a
    (P, F) array, one index per row.
    """
    lim = np.asarray(limits_db, float)
    idx = np.argmin(np.where(np.isnan(lim), np.inf, lim), axis=-1)
    return int(idx) if np.ndim(idx) == 0 else idx


def fader_limits(p_dir, p_rev, peak_fn, fsm_db: float, column: int, together_band_db=None) -> dict:
    """One fader's figures from the (N, M, M) loop matrices of N bands (or points × bands, reshaped by the
    caller): band limits for the mean, 90 % and 10 % worst peak. Where the fader alone cannot bring a band
    to −FSM (−inf: the other open mics keep the loop past it) and ``together_band_db`` is given, the caller
    falls back to the together basis (see :func:`howl.model._plan_core.plan_core`)."""
    return {q: band_limits_db(p_dir, p_rev, peak_fn, fsm_db, column, quantile=i)
            for q, i in (("mean", 0), ("q90", 2), ("q10", 1))}


def stability_as_set(worst_peak_db: float, fsm_db: float) -> str:
    """The rig as set, from the whole loop's largest worst-peak loop gain (dB): ``stable`` at or below −FSM,
    ``inside_fsm`` between −FSM and unity, ``howls`` at or past unity (0 dB)."""
    if worst_peak_db >= 0.0:
        return "howls"
    return "stable" if worst_peak_db <= -fsm_db else "inside_fsm"


def reach(margin_db: float | None) -> tuple[str, float]:
    """``reaches_target`` when PAG ≥ NAG, else ``short`` by NAG − PAG (dB)."""
    if margin_db is None or not np.isfinite(margin_db):
        return "short", float("inf")
    return ("reaches_target", 0.0) if margin_db >= 0.0 else ("short", float(-margin_db))


def legacy_verdict(stab: str, rch: str) -> str:
    """The deprecated single ``verdict``: ``will howl`` only when the rig as set howls, ``stable`` when it is
    stable and reaches the target, ``marginal`` otherwise."""
    if stab == "howls":
        return "will howl"
    return "stable" if (stab == "stable" and rch == "reaches_target") else "marginal"


def davis_per_speaker(davis_pag, ds_m, d0_m, mic_pos, listener_pos, speaker_pos, fed, nom, fsm_db):
    """Classic Davis PAG with D1 and D2 from the same loudspeaker, the worst over the fed loudspeakers.

    Returns (pag_db, index of that loudspeaker, d1_m, d2_m); (nan, -1, nan, nan) when nothing is fed.
    """
    best = (float("nan"), -1, float("nan"), float("nan"))
    for s in np.flatnonzero(fed):
        d1 = float(np.linalg.norm(speaker_pos[s] - mic_pos))
        d2 = float(np.linalg.norm(speaker_pos[s] - listener_pos))
        if d1 <= 0 or d2 <= 0:
            continue
        v = davis_pag(ds_m, d0_m, d1, d2, nom, fsm_db)
        if best[1] < 0 or v < best[0]:
            best = (v, int(s), d1, d2)
    return best
