"""The planner's core on one basis (private; :func:`howl.model.plan.plan_rig` calls :func:`plan_core`).

See :mod:`howl.model._plan_limits` for the basis (a flat fader on the channel as the rig sets
it) and :mod:`howl.model.plan` for the model. This module builds the loop matrices with the
signal chain in, the forward path talker → listener, and the per-mic results.
"""

from __future__ import annotations

import warnings

import numpy as np

from howl.errors import HowlWarning, InputError
from howl.model import _plan_limits as lim
from howl.model import directivity as _dir
from howl.model.transfer import TALKER_Q, BandTransfer, effective_room_constant_m2, speaker_field_pa2

_TINY = 1e-30


def _pdb(x) -> np.ndarray:
    return 10.0 * np.log10(np.maximum(np.asarray(x, float), _TINY))


def _loops(tr: BandTransfer, chain, e, act):
    """Direct and reverberant loop matrices (F, M, M) of the active mics, the chain in (see _plan_limits)."""
    from howl.model.plan import loop_power_matrix

    sp = np.asarray(chain.speaker_power, float)[:, None, :]  # (S, 1, F)
    mp = np.asarray(chain.mic_power, float)[act]  # (M, F)
    p_dir = loop_power_matrix(tr.direct_power[:, act, :] * sp, e) * mp.T[:, :, None]
    p_rev = loop_power_matrix(tr.reverberant_power[:, act, :] * sp, e) * mp.T[:, :, None]
    return p_dir, p_rev


def _forward(rig, acoustics, freqs, tr, chain, e, act, ideal_mics):
    """Talker → mic → chain → mixes → loudspeakers → farthest listener: acoustic gain at the stated settings.

    Returns a dict: ag_db (M, F), unaided (M, F) power re p1², talker names/positions/levels, ds, d0,
    listener index per mic, and the per-listener distances of the loudspeakers.
    """
    from howl.model.plan import _talker_for

    rc = effective_room_constant_m2(acoustics)
    air = np.asarray(acoustics.air_m_inv, float)
    lst_pos = np.array([x.position_m for x in rig.listeners], float)
    spk_dir_l, spk_rev, spk_r_l, _ = speaker_field_pa2(rig.speakers, lst_pos, freqs, acoustics, room_constant_m2=rc,
                                                        point_names=[x.name for x in rig.listeners],
                                                        point_kind="listener")
    mic_objs = [rig.mics[k] for k in act]
    m = len(mic_objs)
    sens2 = (10.0 ** (np.array([mc.sensitivity_dbv_pa for mc in mic_objs]) / 20.0)) ** 2
    temp = float(getattr(rig.room, "temperature_c", 20.0))
    ree = tr.mic_ree[act] if tr.mic_ree is not None else _dir.mics_ree(mic_objs, freqs, ideal=ideal_mics,
                                                                        temperature_c=temp)
    mpos = np.array([mc.position_m for mc in mic_objs], float)
    axes = np.array([_dir.aim_vector(mc.azimuth_rad, mc.elevation_rad) for mc in mic_objs], float)
    talk = [_talker_for(rig, mc) for mc in mic_objs]
    tnames = [t[0] for t in talk]
    tpos = np.array([t[1] for t in talk], float)
    tlevel = np.array([t[2] for t in talk], float)
    ds = np.linalg.norm(tpos - mpos, axis=-1)
    for k in np.flatnonzero(ds < 1e-3):
        raise InputError(f"talker {tnames[k]!r} is at mic {mic_objs[k].name!r}'s capsule (0 m); expected a "
                         f"distance > 0", key=f"talkers.{tnames[k]}.position_m")
    d0_all = np.linalg.norm(lst_pos[None, :, :] - tpos[:, None, :], axis=-1)  # (M, L)
    li = np.argmax(d0_all, axis=1)
    d0 = d0_all[np.arange(m), li]
    for k in range(m):
        lname = rig.listeners[li[k]].name
        if d0[k] < 1e-3:
            raise InputError(f"listener {lname!r} is at talker {tnames[k]!r}'s position (0 m)",
                             key=f"listeners.{lname}.position_m")
        if ds[k] >= d0[k]:
            warnings.warn(
                f"talker {tnames[k]!r} is {ds[k]:.2f} m from mic {mic_objs[k].name!r} but only {d0[k]:.2f} m from "
                f"the farthest listener {lname!r}: the listener hears the talker better than the mic does",
                HowlWarning, stacklevel=4,
            )
    cos_t = np.einsum("mk,mk->m", (tpos - mpos) / ds[:, None], axes)
    g_t = _dir.mics_gain_cos(mic_objs, cos_t, freqs, ideal=ideal_mics, temperature_c=temp)  # (M, F)
    t_rev = 16.0 * np.pi / (TALKER_Q * rc)  # (F,)
    u2 = sens2[:, None] * (np.exp(-air[None, :] * ds[:, None]) / (ds * ds)[:, None] * g_t * g_t + t_rev * ree)
    u2 = u2 * np.asarray(chain.mic_power, float)[act]
    sp = np.asarray(chain.speaker_power, float)  # (S, F)
    amp = u2 * np.einsum("sm,smf->mf", e**2, (spk_dir_l[:, li, :] + spk_rev[:, None, :]) * sp[:, None, :])
    unaided = np.exp(-air[None, :] * d0[:, None]) / (d0 * d0)[:, None] + t_rev[None, :]
    return dict(ag_db=_pdb(amp) - _pdb(unaided), unaided=unaided, air=air, t_rev=t_rev, tnames=tnames,
                tlevel=tlevel, ds=ds, d0=d0, li=li, mpos=mpos, lst_pos=lst_pos, spk_r_l=spk_r_l, rc=rc)


def _nag(rig, fw, m):
    """NAG per band (M, F), the EAD per mic and a note when the target is assumed (Ballou Eq. 34-24, Form 2)."""
    from howl.model.plan import DEFAULT_TARGET_SPL_DB

    unaided, air, t_rev, tlevel = fw["unaided"], fw["air"], fw["t_rev"], fw["tlevel"]
    if rig.ead_m is not None:
        ead = np.full(m, float(rig.ead_m))
        wanted = np.exp(-air * rig.ead_m) / rig.ead_m**2 + t_rev  # the talker heard at EAD in the same room
        return _pdb(wanted)[None, :] - _pdb(unaided), ead, None
    target = rig.target_spl_db
    note = None
    if target is None:
        target = DEFAULT_TARGET_SPL_DB
        note = (f"the rig gives neither ead_m nor target_spl_db; assuming a target of "
                f"{DEFAULT_TARGET_SPL_DB:g} dB SPL at the farthest listener")
    ead = 10.0 ** ((tlevel - target) / 20.0)
    return target - (tlevel[:, None] + _pdb(unaided)), ead, note


def _pair_peaks(tr, chain, e, act, rig, peak_fn, freqs):
    """Per active mic, per loudspeaker it feeds: the predicted worst-peak loop gain (dB) of that one pair alone
    (the loop mic → its send to that loudspeaker → the room → the mic) at the stated settings, and its band:
    what a measurement of that pair's loop should show (its phase-blind margin is minus this figure)."""
    sp = np.asarray(chain.speaker_power, float)
    mp = np.asarray(chain.mic_power, float)
    idx = [(col, int(k), int(s)) for col, k in enumerate(act) for s in np.flatnonzero(e[:, col] > 0)]
    out = [[] for _ in act]
    if not idx:
        return out
    cols, ks, ss = (np.array(v) for v in zip(*idx))
    g = e[ss, cols][:, None] ** 2 * mp[ks] * sp[ss]  # (pairs, F)
    d, r = tr.direct_power[ss, ks] * g, tr.reverberant_power[ss, ks] * g
    wp = _pdb(d + r) + np.asarray(peak_fn(d / np.maximum(r, _TINY))[0], float)  # every pair in one call
    for i, (col, _, s) in enumerate(idx):
        b = int(np.argmax(wp[i]))
        out[col].append({"speaker": rig.speakers[s].name, "worst_peak_loop_gain_db": float(wp[i, b]),
                         "band_hz": float(freqs[b])})
    return out


def _active_mics(rig, e_all):
    """The mix matrix on the mics that reach a loudspeaker, their indices, the muted and the unrouted mics."""
    routed = np.any(e_all > 0, axis=0)
    muted = tuple(m.name for m in rig.mics if not m.open)
    unrouted = tuple(m.name for k, m in enumerate(rig.mics) if m.open and not routed[k])
    for name in unrouted:
        warnings.warn(f"mic {name!r} is open but in no mix that reaches a loudspeaker; it is left out of the plan",
                      HowlWarning, stacklevel=4)
    act = np.flatnonzero(routed)
    if act.size == 0:
        raise InputError("no open mic reaches any loudspeaker through the mixes; nothing to plan", key="mixes")
    return e_all[:, act], act, muted, unrouted


def _system(p_dir, p_rev, peak_fn, fsm, freqs):
    """The whole loop's figures: spectral radius, its worst peak, channel loop gains, the limit all together."""
    from howl.model.plan import channel_loop_gain, perron_vectors

    p = p_dir + p_rev
    rho, right, left = perron_vectors(p)
    k_sys = np.einsum("fi,fij,fj->f", left, p_dir, right) / np.maximum(
        np.einsum("fi,fij,fj->f", left, p_rev, right), _TINY)
    pf_sys = np.asarray(peak_fn(k_sys)[0], float)
    rho_db = _pdb(rho)
    rho_peak_db = lim.worst_peak_db(p_dir, p_rev, peak_fn)  # the one definition
    lch = channel_loop_gain(p, rho)
    finite_l = np.isfinite(lch)
    lch_db = np.where(finite_l, _pdb(np.where(finite_l, lch, 1.0)), np.inf)

    stated_margin = float(-np.max(rho_peak_db))
    if stated_margin < 0:
        warnings.warn(
            f"at the rig's stated settings the worst-peak loop gain reaches {-stated_margin:+.1f} dB "
            f"(near {float(freqs[int(np.argmax(rho_peak_db))]):.0f} Hz): the rig as set would howl",
            HowlWarning, stacklevel=4,
        )
    together_band = -fsm - rho_peak_db  # all columns scaled: K is unchanged, so the limit is closed-form
    ti = lim.rings_first(together_band)
    together = float(together_band[ti])
    together_q = [float(np.min(-fsm - rho_db - np.asarray(peak_fn(k_sys)[q], float))) for q in (2, 1)]
    stab = lim.stability_as_set(float(np.max(rho_peak_db)), fsm)
    return dict(rho=rho, right=right, left=left, rho_db=rho_db, rho_peak_db=rho_peak_db, pf_sys=pf_sys, lch_db=lch_db,
                stated_margin=stated_margin, together_band=together_band, ti=ti, together=together,
                together_q=together_q, stab=stab)


def _mic_plan(rig, col, mc, freqs, fsm, sy, fw, tg, e, pairs, fl):
    """The :class:`howl.model.plan.MicPlan` of active mic ``col``: its own fader's limit (or all together's),
    PAG, NAG and margin, the Davis figures, and what EQ could buy. ``tg``: NAG per band, EAD, weights;
    ``fl``: every fader's band limits (:func:`howl.model._plan_limits.all_fader_limits`)."""
    from howl.model.plan import MicPlan, davis_nag_db, davis_pag_db

    together, weights = sy["together"], tg["weights"]
    ag_w, nag_w, ead, m = tg["ag_w"], tg["nag_w"], tg["ead"], e.shape[1]
    bl = fl["mean"][col]
    ci = lim.rings_first(bl)
    max_ch = float(bl[ci]) if np.isfinite(bl[ci]) else None
    if max_ch is not None:  # PAG with this fader at its own limit
        base, basis = max_ch, "own_fader"
        q_lim = [float(np.min(fl[q][col])) for q in ("q90", "q10")]
    else:  # the others alone keep the loop past -FSM: only pulling all together brings it back
        base, basis, q_lim, ci = together, "together", sy["together_q"], sy["ti"]
    pag_band = fw["ag_db"][col] + base
    pag = float(ag_w[col] + base)
    nag = float(nag_w[col])
    margin = pag - nag
    spread = tuple(float(ag_w[col] + q) if np.isfinite(q) else float("nan") for q in q_lim)
    rch, short = lim.reach(margin)
    lname = rig.listeners[fw["li"][col]].name
    spk_pos = np.array([s.position_m for s in rig.speakers], float)
    d_pag, si, d1, d2 = lim.davis_per_speaker(davis_pag_db, fw["ds"][col], fw["d0"][col], fw["mpos"][col],
                                              fw["lst_pos"][fw["li"][col]], spk_pos, e[:, col] > 0, m, fsm)
    if not d2 > 1e-3:
        raise InputError(f"listener {lname!r} is at a loudspeaker (0 m)", key=f"listeners.{lname}.position_m")
    eq_buy = np.where(np.isfinite(bl), bl - base, np.inf) if max_ch is not None else sy["together_band"] - together
    stab = sy["stab"]
    return MicPlan(
        name=mc.name, pag_db=pag, nag_db=nag, margin_db=margin, pag_basis=basis,
        limiting_band_hz=float(freqs[ci]), max_channel_gain_db=max_ch,
        verdict=lim.legacy_verdict(stab, rch), pag_spread_db=spread, davis_pag_db=d_pag,
        davis_nag_db=davis_nag_db(fw["d0"][col], ead[col]),
        margin_spread_db=(spread[0] - nag, spread[1] - nag),
        loop_gain_db=sy["lch_db"][:, col].copy(), worst_peak_loop_gain_db=-fsm - bl,
        pag_band_db=pag_band, nag_band_db=tg["nag_band"][col], acoustic_gain_db=fw["ag_db"][col],
        talker=fw["tnames"][col], listener=lname, ead_m=float(ead[col]),
        distances_m={"ds": float(fw["ds"][col]), "d0": float(fw["d0"][col]), "d1": d1, "d2": d2},
        limiting_channel_band_hz=float(freqs[ci]), stability=stab, reach=rch, short_by_db=short,
        eq_could_buy_band_db=eq_buy, eq_could_buy_db=float(weighted_db_finite(eq_buy, weights[col])),
        pag_together_db=float(ag_w[col] + together), davis_speaker=rig.speakers[si].name if si >= 0 else None,
        gains_db={mx.name: g for mx in rig.mixes for mn, g in mx.gains_db if mn == mc.name},
        pairs=tuple(pairs),
    )


def plan_core(rig, tr: BandTransfer, acoustics, freqs, bw, fsm, fraction, peak_statistics, ideal_mics, chain):
    """The plan of ``rig`` on one basis; returns :class:`howl.model.plan.PlanResult`.

    One pass: the active mics (:func:`_active_mics`), the loop matrices (:func:`_loops`), the whole
    loop's figures (:func:`_system`), the forward path (:func:`_forward`) and NAG (:func:`_nag`),
    then one :func:`_mic_plan` per active mic.
    """
    from howl.model.plan import ASSUMPTIONS, PlanResult, mix_matrix, peak_factor_db
    from howl.model.room import schroeder_frequency_hz

    e, act, muted, unrouted = _active_mics(rig, mix_matrix(rig))
    p_dir, p_rev = _loops(tr, chain, e, act)
    m = p_dir.shape[1]
    rt60 = np.asarray(tr.rt60_s, float)
    if not np.all(np.isfinite(rt60)):
        raise InputError("room acoustics gave no finite RT60; cannot apply peak statistics", key="room")

    def peak_fn(k):
        if not peak_statistics:
            z = np.zeros(np.shape(k))
            return z, z, z
        return peak_factor_db(bw, rt60, k)

    sy = _system(p_dir, p_rev, peak_fn, fsm, freqs)
    fw = _forward(rig, acoustics, freqs, tr, chain, e, act, ideal_mics)
    nag_band, ead, ead_note = _nag(rig, fw, m)
    weights = lim.speech_weights(np.asarray(chain.talker_level_db, float)[act], chain.importance)
    tg = dict(nag_band=nag_band, ead=ead, weights=weights, ag_w=lim.weighted_db(fw["ag_db"], weights),
              nag_w=lim.weighted_db(nag_band, weights))
    pair_peaks = _pair_peaks(tr, chain, e, act, rig, peak_fn, freqs)
    fl = lim.all_fader_limits(p_dir, p_rev, peak_fn, fsm, rho=sy["rho"], vectors=(sy["right"], sy["left"]))
    out = [_mic_plan(rig, col, rig.mics[k], freqs, fsm, sy, fw, tg, e, pair_peaks[col], fl)
           for col, k in enumerate(act)]
    assumptions = list(ASSUMPTIONS)
    if ead_note:
        warnings.warn(ead_note, HowlWarning, stacklevel=3)
        assumptions.append(ead_note)
    i1k = int(np.argmin(np.abs(np.log(freqs / 1000.0))))
    fs_hz = float(schroeder_frequency_hz(float(rt60[i1k]), float(acoustics.volume_m3)))
    return PlanResult(
        rig_name=rig.name, rig_file=rig.source_file, fraction=int(fraction), fsm_db=fsm, bands_hz=freqs,
        mics=tuple(out), spectral_radius_db=sy["rho_db"], worst_peak_spectral_radius_db=sy["rho_peak_db"],
        peak_factor_db=sy["pf_sys"], rt60_s=rt60, room_constant_m2=np.asarray(fw["rc"], float),
        schroeder_frequency_hz=fs_hz, nom=int(m), stated_margin_db=sy["stated_margin"], muted_mics=muted,
        unrouted_mics=unrouted, assumptions=tuple(assumptions), headroom_together_db=sy["together"],
        rings_first_hz=float(freqs[sy["ti"]]), importance=np.asarray(chain.importance, float),
    )


def weighted_db_finite(band_db, w) -> float:
    """Speech-weighted mean over the bands where the figure is finite (the weights renormalised there)."""
    v = np.asarray(band_db, float)
    ok = np.isfinite(v)
    if not ok.any() or w[ok].sum() <= 0:
        return float("nan")
    return float(np.sum(v[ok] * w[ok]) / w[ok].sum())
