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


def loop_k(p_dir, p_rev) -> tuple[np.ndarray, np.ndarray]:
    """ρ(P) and the Perron-weighted direct-to-reverberant ratio K of each (…, M, M) loop matrix."""
    from howl.model.plan import perron_vectors

    rho, right, left = perron_vectors(p_dir + p_rev)
    k = np.einsum("fi,fij,fj->f", left, p_dir, right) / np.maximum(np.einsum("fi,fij,fj->f", left, p_rev, right),
                                                                     _TINY)
    return rho, k


def worst_peak_db(p_dir, p_rev, peak_fn, quantile: int = 0) -> np.ndarray:
    """Worst-peak loop gain of the whole loop matrix per band, dB: 10·log10 ρ(P) plus the peak factor.

    The ONE definition every limit uses. ``peak_fn(k)`` gives the peak factor (mean, 10 %, 90 %) for the
    Perron-weighted direct-to-reverberant ratio ``k`` of each band; ``quantile`` picks which (0, 1, 2).
    """
    rho, k = loop_k(p_dir, p_rev)
    return 10.0 * np.log10(np.maximum(rho, _TINY)) + peak_fn(k)[quantile]


#: Fixed-point steps for the peak factor's dependence on the fader (it converges in 2-4; see band_limits_db).
_FIXED_POINT_STEPS = 8


def band_limits_db(p_dir, p_rev, peak_fn, fsm_db: float, column: int | None, quantile: int = 0, *, x0=None,
                   rho=None) -> np.ndarray:
    """Per band (F,), the flat gain x (dB from the rig's setting) at which the worst peak reaches −FSM.

    ``column``: the mic whose fader moves (its column of P, in every mix it feeds), or None for all open
    mics together (then P scales as a whole, K and the peak factor do not change: x = −FSM − worst peak).
    One fader: for a target Perron root c the gain is exact, g = 1/L_i(P/c), L_i the Schur complement of
    :func:`howl.model.plan.channel_loop_gain` (scaling column i by g scales L_i by g, and
    det(I − P/c) = det(I − P_oo/c)·(1 − L_i) vanishes first where the Perron root of P/c reaches one);
    c = 10^(−(FSM + peak factor)/10) depends on K at that gain, so a short fixed-point iteration settles it.
    +inf where that fader has no path in the band, −inf where the band is past −FSM even with that fader
    closed (the other open mics keep it there on their own). ``x0``: a starting guess (e.g. the mean
    limit when asking for a quantile); ``rho``: ρ(P) per band if known. Converged to 1e-3 dB (the JSON
    rounds to 0.01 dB).
    """
    from howl.model.plan import channel_loop_gain

    if column is None:
        return -fsm_db - worst_peak_db(p_dir, p_rev, peak_fn, quantile)
    p = p_dir + p_rev
    x = np.zeros(p.shape[0]) if x0 is None else np.asarray(x0, float).copy()
    if rho is None:
        from howl.model.plan import spectral_radius

        rho = spectral_radius(p)
    for _ in range(_FIXED_POINT_STEPS):
        gk = 10.0 ** (np.clip(x, *LIMIT_RANGE_DB) / 10.0)
        sd, sr = p_dir.copy(), p_rev.copy()
        sd[:, :, column] *= gk[:, None]
        sr[:, :, column] *= gk[:, None]
        _, k = loop_k(sd, sr)
        c = 10.0 ** (-(fsm_db + np.asarray(peak_fn(k)[quantile], float)) / 10.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            lch = channel_loop_gain(p / c[:, None, None], rho / c)[:, column]
            g = np.where(np.isinf(lch), 0.0, np.where(lch > 0, 1.0 / np.where(lch > 0, lch, 1.0), np.inf))
            x_new = 10.0 * np.log10(g)
        both = np.isfinite(x_new) & np.isfinite(x)
        done = np.all(np.abs(np.where(both, x_new, 0.0) - np.where(both, x, 0.0)) < 1e-3)
        x = x_new
        if done:
            break
    return x


def rings_first(limits_db):
    """Index of the band that rings first: the smallest band limit (the first such band on a tie).

    The one rule plan, map and sheet share (the sheet prints the plan's). It looks only at the band
    limits on the flat-fader basis, so bands past the chain's roll-off (large limits) never win. For a
    (P, F) array, one index per row.
    """
    lim = np.asarray(limits_db, float)
    idx = np.argmin(np.where(np.isnan(lim), np.inf, lim), axis=-1)
    return int(idx) if np.ndim(idx) == 0 else idx


def fader_limits(p_dir, p_rev, peak_fn, fsm_db: float, column: int) -> dict:
    """One fader's band limits (N bands, or points × bands reshaped by the caller) for the mean, 90 % and
    10 % worst peak (the quantiles start from the mean's solution)."""
    from howl.model.plan import spectral_radius

    rho = spectral_radius(p_dir + p_rev)
    mean = band_limits_db(p_dir, p_rev, peak_fn, fsm_db, column, 0, rho=rho)
    start = np.where(np.isfinite(mean), mean, 0.0)
    return {"mean": mean, "q90": band_limits_db(p_dir, p_rev, peak_fn, fsm_db, column, 2, x0=start, rho=rho),
            "q10": band_limits_db(p_dir, p_rev, peak_fn, fsm_db, column, 1, x0=start, rho=rho)}


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


def shortfall_shown_db(short_by_db: float) -> float:
    """A shortfall as printed (plan's table, the sheet): rounded UP to 0.1 dB, so a rig that is short
    never reads "short by 0.0"."""
    import math

    if not np.isfinite(short_by_db):
        return float(short_by_db)
    return max(0.1, math.ceil(round(short_by_db * 10.0, 6)) / 10.0)


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
