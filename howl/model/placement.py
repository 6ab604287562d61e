"""Where should the mic go? Its margin (PAG − NAG) over a grid of candidate positions.

For every candidate position of one mic (the others stay where the rig puts
them), the mic is aimed at its talker and the planner's quantities are
evaluated there:

* **statistical** (default, fast): exactly the model of :func:`howl.plan.plan_rig`
  (Hopkins–Stryker band transfers from :mod:`howl.transfer`, the loop power
  matrix of all open mics, its spectral radius with Schroeder's peak factor,
  the talker → mic → loudspeakers → farthest listener forward path, NAG from
  the EAD or the target level), vectorised over all positions at once instead
  of planning one rig per point. A test checks it against ``plan_rig`` on
  rigs moved to sample points.
* **images** (on request, slow): the band-average loop power is replaced by
  image-source loop IRs (:func:`howl.images.image_source_ir`) of the candidate
  mic with every loudspeaker, together with the fixed IRs of the other open
  mics: per band, the largest spectral radius of the complex loop matrix L(f)
  over the band's frequencies (phase-blind worst peak, the counterpart of the
  statistical worst peak). The forward path and NAG are the statistical ones.

Talker: ``"follow"`` (default) keeps the talker's offset from the mic (the
lectern or singer moves with the mic); ``"fixed"`` leaves the talker where the
rig puts it and only moves (and re-aims) the mic.

The best position is the grid point (or the rig's own position, which is
always evaluated too) with the largest margin.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from howl import validate as V
from howl.errors import InputError
from howl.model.rig import Rig

#: Candidate points closer than this to a loudspeaker are left out (NaN): no inverse-square model there.
MIN_SPEAKER_DISTANCE_M = 0.3

TALKER_MODES = ("follow", "fixed")
#: A candidate must beat the rig's own position by more than this to be called better: the model's
#: resolution. Its inputs (absorption and patterns typical and from memory, band averages, peak statistics)
#: do not support finer differences; our choice, no source.
RESOLUTION_DB = 1.0
METHODS = ("statistical", "images")


@dataclass(frozen=True, eq=False)
class PlacementMap:
    """Margins of one mic over a horizontal grid (arrays are (ny, nx); NaN where not evaluated)."""

    rig_name: str
    mic: str
    method: str
    talker_mode: str
    height_m: float
    x_m: np.ndarray
    y_m: np.ndarray
    margin_db: np.ndarray
    azimuth_deg: np.ndarray
    elevation_deg: np.ndarray
    limiting_band_hz: np.ndarray
    margin_spread_db: np.ndarray  # (ny, nx, 2): 10 % and 90 % peak-statistics bounds (statistical)
    best: dict
    current: dict
    fraction: int
    notes: tuple[str, ...] = ()


# ----------------------------------------------------------------------------- helpers


def _mic_index(rig: Rig, mic_name: str) -> int:
    names = [m.name for m in rig.mics]
    if mic_name not in names:
        hint = V.closest(mic_name, names)
        tail = f" (did you mean {hint!r}?)" if hint else ""
        raise InputError(f"must name a mic of the rig ({', '.join(names)}), got {mic_name!r}{tail}", key="--mic")
    return names.index(mic_name)


def _talker_position(rig: Rig, k: int) -> np.ndarray:
    """The talker the planner uses for mic k (farthest of its talkers; default 0.3 m on axis)."""
    from howl.model.directivity import aim_vector
    from howl.model.plan import DEFAULT_TALKER_DISTANCE_M

    mic = rig.mics[k]
    ts = [t for t in rig.talkers if t.mic == mic.name]
    if not ts:
        return np.asarray(mic.position_m, float) + DEFAULT_TALKER_DISTANCE_M * aim_vector(mic.azimuth_rad, mic.elevation_rad)
    t = max(ts, key=lambda t: math.dist(t.position_m, mic.position_m))
    return np.asarray(t.position_m, float)


def _aims(points: np.ndarray, talkers: np.ndarray):
    v = talkers - points
    d = np.linalg.norm(v, axis=-1)
    u = v / np.maximum(d, 1e-12)[..., None]
    az = np.arctan2(u[..., 1], u[..., 0])
    el = np.arcsin(np.clip(u[..., 2], -1.0, 1.0))
    return u, az, el, d


def moved_rig(rig: Rig, mic_name: str, position_m, *, talker: str = "follow") -> Rig:
    """The rig with one mic moved to ``position_m`` and aimed at its talker (moved along in "follow" mode)."""
    k = _mic_index(rig, mic_name)
    mic = rig.mics[k]
    p = np.asarray(position_m, float)
    t_old = _talker_position(rig, k)
    t_new = t_old - np.asarray(mic.position_m, float) + p if talker == "follow" else t_old
    _, az, el, _ = _aims(p, t_new)
    mics = list(rig.mics)
    mics[k] = replace(mic, position_m=tuple(float(x) for x in p), azimuth_rad=float(az), elevation_rad=float(el))
    talkers = tuple(
        replace(t, position_m=tuple(float(x) for x in (np.asarray(t.position_m, float) - t_old + t_new)))
        if t.mic == mic.name else t
        for t in rig.talkers
    )
    return replace(rig, mics=tuple(mics), talkers=talkers)


def _inside(rig: Rig, pts: np.ndarray) -> np.ndarray:
    if not rig.room.is_shoebox:
        return np.ones(pts.shape[0], dtype=bool)
    dims = np.asarray(rig.room.dimensions_m, float)
    return np.all((pts > 0.0) & (pts < dims), axis=-1)


# ----------------------------------------------------------------------------- the statistical grid


def _candidate_limits(p, p_dir, p_rev, band_loop_db, fsm: float, c: int, bw, rt60, freqs) -> dict:
    """The candidate fader's limit per band at each point (mean, q90, q10; (P, F) dB), as the plan sets it:
    its own limit, or all together's where the others alone keep the loop past -FSM."""
    from howl.model import _plan_limits as lim
    from howl.model.plan import peak_factor_db

    np_, m_ = p.shape[0], p_dir.shape[-1]
    if band_loop_db is not None:  # images: the band's worst peak scales with this fader (exact alone)
        rho_peak = np.asarray(band_loop_db(p), float)
        q_lim = {q: -fsm - rho_peak for q in ("mean", "q90", "q10")}
    else:
        nb = freqs.size

        def peak_fn(kk, _n=np_):
            return peak_factor_db(np.tile(bw, _n), np.tile(rt60, _n), kk)

        q_lim = lim.fader_limits(p_dir.reshape(-1, m_, m_), p_rev.reshape(-1, m_, m_), peak_fn, fsm, c)
        q_lim = {q: v.reshape(np_, nb) for q, v in q_lim.items()}
        if not np.all(np.isfinite(q_lim["mean"].min(axis=1))):  # the others alone past -FSM somewhere
            wp = {q: lim.worst_peak_db(p_dir.reshape(-1, m_, m_), p_rev.reshape(-1, m_, m_), peak_fn, i)
                  .reshape(np_, nb) for q, i in (("mean", 0), ("q90", 2), ("q10", 1))}
            own = np.isfinite(q_lim["mean"].min(axis=1))[:, None]
            q_lim = {q: np.where(own, v, -fsm - wp[q]) for q, v in q_lim.items()}
    return q_lim


def statistical_margins(
    rig: Rig,
    mic_name: str,
    points_m,
    *,
    talker: str = "follow",
    fraction: int = 3,
    f_lo_hz: float = 100.0,
    f_hi_hz: float = 10000.0,
    band_loop_db: Callable[[np.ndarray], np.ndarray] | None = None,
    chunk: int = 512,
    progress: Callable[[int, int], None] | None = None,
) -> dict:
    """PAG − NAG of ``mic_name`` at each of ``points_m`` (P, 3), aimed at its talker.

    Mirrors :func:`howl.plan.plan_rig` (same transfers, loop matrix, peak
    statistics, forward path and NAG) for one moved mic, vectorised over the
    points. ``band_loop_db`` (images method) replaces the statistical
    worst-peak loop gain per band: called with the chunk's points, it returns
    (P, F) dB.

    Returns arrays over the points: ``margin_db``, ``margin_lo_db``,
    ``margin_hi_db``, ``limiting_band_hz``, ``azimuth_rad``, ``elevation_rad``,
    ``margin_band_db`` (P, F) and ``bands_hz``.
    """
    from howl.model import directivity as _dir
    from howl.bands import band_centres_hz, band_edges_hz
    from howl.model import _plan_limits as lim
    from howl.model import plan as _plan
    from howl.model.plan import DEFAULT_TARGET_SPL_DB, mix_matrix, perron_vectors
    from howl.model.room import room_acoustics
    from howl.model.transfer import TALKER_Q, effective_room_constant_m2, speaker_field_pa2, statistical_transfer

    V.choice(talker, "--talker", TALKER_MODES)
    k = _mic_index(rig, mic_name)
    pts = np.atleast_2d(np.asarray(points_m, float))
    if pts.shape[-1] != 3:
        raise InputError(f"must be (P, 3) positions, got shape {pts.shape}", key="points_m")
    freqs = np.asarray(band_centres_hz(fraction, f_lo_hz, f_hi_hz), float)
    lo_e, hi_e = band_edges_hz(freqs, fraction)
    lo3, hi3 = band_edges_hz(freqs, 3)  # as the plan: peak statistics over at least a third of an octave
    bw = np.maximum(np.asarray(hi_e) - np.asarray(lo_e), np.asarray(hi3) - np.asarray(lo3))
    ac = room_acoustics(rig.room, freqs)
    tr = statistical_transfer(rig, freqs, ac)
    e_all = mix_matrix(rig)
    mic = rig.mics[k]
    if not mic.open:
        raise InputError(f"mic {mic_name!r} is muted (open = false): it takes no part in the loop, nothing to map",
                         key="--mic")
    routed = np.any(e_all > 0, axis=0)
    if not routed[k]:
        raise InputError(f"mic {mic_name!r} is in no mix that reaches a loudspeaker: nothing to map", key="--mic")
    act = np.flatnonzero(routed)
    c = int(np.flatnonzero(act == k)[0])  # the candidate's column among the active mics
    e = e_all[:, act]
    rt60 = np.asarray(tr.rt60_s, float)
    rc = effective_room_constant_m2(ac)
    air = np.asarray(ac.air_m_inv, float)
    a_coef = float(_dir._mic_a(mic))
    sens2 = (10.0 ** (mic.sensitivity_dbv_pa / 20.0)) ** 2
    ree = _dir.pattern_ree(np.array([a_coef]), freqs)[0]  # (F,)
    temp = float(rig.room.temperature_c)
    fsm = float(rig.fsm_db)
    chain = _plan._chain(rig, freqs, fraction)  # the plan's one hook: the channel as the rig sets it
    sp = np.asarray(chain.speaker_power, float)  # (S, F)
    mp = np.asarray(chain.mic_power, float)[act]  # (M, F); the candidate keeps its channel
    weights = lim.speech_weights(np.asarray(chain.talker_level_db, float)[[k]], chain.importance)[0]
    t_dir0 = tr.direct_power[:, act, :] * sp[:, None, :]
    t_rev0 = tr.reverberant_power[:, act, :] * sp[:, None, :]

    t_old = _talker_position(rig, k)
    m_old = np.asarray(mic.position_m, float)
    tlevel = 60.0
    ts = [t for t in rig.talkers if t.mic == mic.name]
    if ts:
        tlevel = float(max(ts, key=lambda t: math.dist(t.position_m, mic.position_m)).level_db_spl_1m)
    lst_pos = np.array([x.position_m for x in rig.listeners], float)
    spk_dir_l, spk_rev_l, _, _ = speaker_field_pa2(rig.speakers, lst_pos, freqs, ac, room_constant_m2=rc)
    t_rev_talk = 16.0 * np.pi / (TALKER_Q * rc)  # (F,)
    spk_pos = np.array([s.position_m for s in rig.speakers], float)

    n = pts.shape[0]
    out = {
        "margin_db": np.full(n, np.nan), "margin_lo_db": np.full(n, np.nan), "margin_hi_db": np.full(n, np.nan),
        "limiting_band_hz": np.full(n, np.nan), "azimuth_rad": np.full(n, np.nan),
        "elevation_rad": np.full(n, np.nan), "margin_band_db": np.full((n, freqs.size), np.nan), "bands_hz": freqs,
    }
    talk_all = pts - m_old + t_old if talker == "follow" else np.broadcast_to(t_old, pts.shape)
    d_spk = np.linalg.norm(pts[:, None, :] - spk_pos[None, :, :], axis=-1).min(axis=1)
    ok_all = (_inside(rig, pts) & _inside(rig, np.asarray(talk_all)) & (d_spk >= MIN_SPEAKER_DISTANCE_M)
              & (np.linalg.norm(talk_all - pts, axis=-1) > 1e-3))
    done = 0
    for start in range(0, n, chunk):
        sl = slice(start, min(start + chunk, n))
        ok = np.flatnonzero(ok_all[sl]) + start
        if ok.size:
            p = pts[ok]
            tp = np.asarray(talk_all)[ok]
            aim, az, el, ds = _aims(p, tp)
            # candidate's transfers from every speaker (S, P, F), as howl.transfer.statistical_transfer does
            direct_p, reverb_p, _, u = speaker_field_pa2(rig.speakers, p, freqs, ac)
            cos_m = -np.einsum("spk,pk->sp", u, aim)
            gm = _dir.mic_pattern_gain(np.full(cos_m.shape, a_coef), cos_m, freqs, temperature_c=temp)
            cand_dir = sens2 * direct_p * gm * gm * sp[:, None, :]  # (S, P, F)
            cand_rev = sens2 * reverb_p[:, None, :] * ree[None, None, :] * sp[:, None, :]
            # loop power matrices (P, F, M, M) with the candidate's row replaced
            np_ = p.shape[0]
            t_dir = np.broadcast_to(t_dir0[None], (np_,) + t_dir0.shape).copy()
            t_rev = np.broadcast_to(t_rev0[None], (np_,) + t_rev0.shape).copy()
            t_dir[:, :, c, :] = np.moveaxis(cand_dir, 1, 0)
            t_rev[:, :, c, :] = np.moveaxis(cand_rev, 1, 0)
            e2 = e**2
            p_dir = np.einsum("psif,sj->pfij", t_dir, e2) * mp.T[None, :, :, None]
            p_rev = np.einsum("psif,sj->pfij", t_rev, e2) * mp.T[None, :, :, None]
            q_lim = _candidate_limits(p, p_dir, p_rev, band_loop_db, fsm, c, bw, rt60, freqs)
            # forward path: talker → mic (on axis: the mic is aimed at the talker) → speakers → farthest listener
            g_t = _dir.mic_pattern_gain(np.full(np_, a_coef), np.ones(np_), freqs)  # (P, F)
            u2 = sens2 * (np.exp(-air[None, :] * ds[:, None]) / (ds * ds)[:, None] * g_t * g_t
                          + t_rev_talk[None, :] * ree[None, :])
            d0_all = np.linalg.norm(lst_pos[None, :, :] - tp[:, None, :], axis=-1)  # (P, L)
            li = np.argmax(d0_all, axis=1)
            d0 = d0_all[np.arange(np_), li]
            e2c = e2[:, c]  # (S,)
            amp = u2 * mp[c][None, :] * np.einsum("s,spf->pf", e2c,
                                                   (spk_dir_l[:, li, :] + spk_rev_l[:, None, :]) * sp[:, None, :])
            unaided = np.exp(-air[None, :] * d0[:, None]) / (d0 * d0)[:, None] + t_rev_talk[None, :]
            pdb = lambda x: 10.0 * np.log10(np.maximum(x, 1e-30))  # noqa: E731
            ag_db = pdb(amp) - pdb(unaided)
            if rig.ead_m is not None:
                wanted = np.exp(-air * rig.ead_m) / rig.ead_m**2 + t_rev_talk
                nag_band = pdb(wanted)[None, :] - pdb(unaided)
            else:
                target = DEFAULT_TARGET_SPL_DB if rig.target_spl_db is None else float(rig.target_spl_db)
                nag_band = target - (tlevel + pdb(unaided))
            fi = lim.rings_first(q_lim["mean"])  # one rule with the plan
            rows = np.arange(np_)
            base = q_lim["mean"][rows, fi]
            ag_w, nag_w = ag_db @ weights, nag_band @ weights
            out["margin_db"][ok] = ag_w + base - nag_w
            out["margin_lo_db"][ok] = ag_w + q_lim["q90"].min(axis=1) - nag_w
            out["margin_hi_db"][ok] = ag_w + q_lim["q10"].min(axis=1) - nag_w
            out["limiting_band_hz"][ok] = freqs[fi]
            margin_band = ag_db + base[:, None] - nag_band
            out["azimuth_rad"][ok] = az
            out["elevation_rad"][ok] = el
            out["margin_band_db"][ok] = margin_band
        done = sl.stop
        if progress is not None:
            progress(done, n)
    return out


# ----------------------------------------------------------------------------- the images grid


def _images_band_loop(rig: Rig, mic_name: str, talker: str, freqs: np.ndarray, fraction: int,
                      sample_rate_hz: float, max_order: int | None, seed: int):
    """A callable points (P, 3) → (P, F) dB: per band, max over f of the spectral radius of L(f) from images."""
    from howl.bands import band_edges_hz
    from howl.model.images import _electrical_gain, _mic_gain_fn, _speaker_gain_fn, image_source_ir, rig_loop_irs
    from howl.model.plan import mix_matrix

    fs = float(sample_rate_hz)
    k = _mic_index(rig, mic_name)
    mix = mix_matrix(rig)
    act = np.flatnonzero(np.any(mix > 0, axis=0))
    c = int(np.flatnonzero(act == k)[0])
    irs0, _ = rig_loop_irs(rig, fs, max_order=max_order, seed=seed)
    irs0 = irs0[:, act, :]
    e = mix[:, act]
    lo, hi = band_edges_hz(freqs, fraction)
    n_len = irs0.shape[2]
    n_fft = 1 << int(math.ceil(math.log2(max(2 * n_len, 4096))))
    f = np.fft.rfftfreq(n_fft, 1.0 / fs)
    a_idx = np.searchsorted(f, lo)
    b_idx = np.searchsorted(f, hi)
    hs0 = np.fft.rfft(irs0, n_fft, axis=2)  # (S, M, F): the fixed mics' transfers, once
    from howl.model._images_chain import chain_on_grid, rig_has_chain

    if rig_has_chain(rig):  # the one basis: each pair's loudspeaker response, the receiving mic's capsule and channel
        spk_c, mic_c = chain_on_grid(rig, f, n_fft)
        moved_chain = spk_c * mic_c[k][None, :]  # (S, F) for the moved mic's row
        hs0 = hs0 * (spk_c[:, None, :] * mic_c[act][None, :, :])
    else:
        moved_chain = None

    def fn(points: np.ndarray) -> np.ndarray:
        out = np.empty((points.shape[0], freqs.size))
        for q, p in enumerate(points):
            r = moved_rig(rig, mic_name, p, talker=talker)
            mic = r.mics[k]
            row = np.empty((len(r.speakers), n_len))
            for si, spk in enumerate(r.speakers):
                h = image_source_ir(r.room, spk.position_m, mic.position_m, fs, max_order=max_order,
                                    source_gain=_speaker_gain_fn(spk), mic_gain=_mic_gain_fn(mic),
                                    seed=np.random.SeedSequence([int(seed), si, k]).generate_state(1)[0],
                                    duration_s=n_len / fs, delay_s=spk.delay_s)
                row[si] = h[:n_len] * _electrical_gain(spk, mic)
            hs = hs0.copy()
            hs[:, c, :] = np.fft.rfft(row, n_fft, axis=1)  # only the moved mic's row changes
            if moved_chain is not None:
                hs[:, c, :] *= moved_chain
            L = np.einsum("sif,sj->fij", hs, e)  # (F, M, M)
            sr = np.max(np.abs(np.linalg.eigvals(L)), axis=-1) if L.shape[-1] > 1 else np.abs(L[:, 0, 0])
            out[q] = [20.0 * np.log10(max(float(np.max(sr[i:j])) if j > i else 1e-15, 1e-15))
                      for i, j in zip(a_idx, b_idx)]
        return out

    return fn


# ----------------------------------------------------------------------------- the map


def default_area(rig: Rig, inset_m: float = 0.25) -> tuple[float, float, float, float]:
    """The floor plan of a shoebox room, inset from the walls."""
    if not rig.room.is_shoebox:
        raise InputError("the room has no floor plan (free shape): give the area as X0 Y0 X1 Y1", key="--area")
    lx, ly, _ = rig.room.dimensions_m
    return (inset_m, inset_m, lx - inset_m, ly - inset_m)


def _map_grid(rig: Rig, mic, step_m, height_m, area_m):
    """The checked grid of a map: (height, x's, y's, grid points, the points and the mic's own position last)."""
    step = V.in_range(step_m, "--step-m", 0.01, 10.0, unit="m")
    z = float(mic.position_m[2]) if height_m is None else V.positive(height_m, "--height-m", unit="m")
    if rig.room.is_shoebox and z >= rig.room.dimensions_m[2]:
        raise InputError(f"must be below the ceiling ({rig.room.dimensions_m[2]:g} m), got {z:g} m", key="--height-m")
    if area_m is None:
        area_m = default_area(rig)
    x0, y0, x1, y1 = (V.number(v, f"--area[{i}]", unit="m") for i, v in enumerate(area_m))
    if not (x1 > x0 and y1 > y0):
        raise InputError(f"must be X0 Y0 X1 Y1 with X1 > X0 and Y1 > Y0, got {x0:g} {y0:g} {x1:g} {y1:g}", key="--area")
    nx = int(math.floor((x1 - x0) / step + 1e-9)) + 1
    ny = int(math.floor((y1 - y0) / step + 1e-9)) + 1
    if nx * ny > 250_000:
        raise InputError(f"gives {nx} × {ny} points; expected at most 250000 (use a larger --step-m)", key="--step-m")
    xs = x0 + step * np.arange(nx)
    ys = y0 + step * np.arange(ny)
    gx, gy = np.meshgrid(xs, ys)
    pts = np.stack([gx.ravel(), gy.ravel(), np.full(gx.size, z)], axis=1)
    own = np.asarray(mic.position_m, float)
    pts_all = np.vstack([pts, own[None, :]])  # the rig's own position is always evaluated too
    return z, xs, ys, pts, pts_all


def _map_point(res: dict, pts_all, i: int) -> dict:
    """One evaluated position of a map as JSON-ready figures."""
    return {
        "position_m": [round(float(v), 3) for v in pts_all[i]],
        "margin_db": _num(res["margin_db"][i]),
        "margin_spread_db": [_num(res["margin_lo_db"][i]), _num(res["margin_hi_db"][i])],
        "azimuth_deg": _num(math.degrees(res["azimuth_rad"][i]), 1),
        "elevation_deg": _num(math.degrees(res["elevation_rad"][i]), 1),
        "limiting_band_hz": _num(res["limiting_band_hz"][i], 1),
    }


def _images_best(rig: Rig, mic_name, position_m, talker, sample_rate_hz, max_order, seed, f_lo_hz, f_hi_hz,
                 best: dict, notes: list) -> None:
    """Add the phase-aware margin of the mic alone at its best position to ``best`` and ``notes`` (images)."""
    from howl.model.images import IMAGES_CAUTION, mic_loop_ir
    from howl.loop.nyquist import nyquist_margin

    r = moved_rig(rig, mic_name, position_m, talker=talker)
    loop = mic_loop_ir(r, mic_name, sample_rate_hz, max_order=max_order, seed=seed)
    nm = nyquist_margin(loop, sample_rate_hz, band_hz=(float(f_lo_hz), float(f_hi_hz)), n_risks=3)
    best["gain_margin_db"] = _num(nm.gain_margin_db)
    best["magnitude_margin_db"] = _num(nm.magnitude_margin_db)
    best["howl_freq_hz"] = _num(nm.howl_freq_hz, 1)
    notes.append("best position, the mic alone: phase-aware gain margin "
                 f"{nm.gain_margin_db:+.1f} dB at the rig's settings, first howl near {nm.howl_freq_hz:.0f} Hz. "
                 + IMAGES_CAUTION)


def margin_map(
    rig: Rig,
    mic_name: str,
    *,
    area_m=None,
    height_m: float | None = None,
    step_m: float = 0.25,
    method: str = "statistical",
    talker: str = "follow",
    fraction: int = 3,
    f_lo_hz: float = 100.0,
    f_hi_hz: float = 10000.0,
    sample_rate_hz: float = 8000.0,
    max_order: int | None = 3,
    seed: int = 0,
    progress: Callable[[int, int], None] | None = None,
) -> PlacementMap:
    """The margin of ``mic_name`` over a horizontal grid of candidate positions.

    Parameters
    ----------
    area_m : (x0, y0, x1, y1) in metres; default the room's floor plan inset 0.25 m.
    height_m : capsule height; default the mic's own.
    step_m : grid spacing.
    method : "statistical" or "images" (image-source loops; ``sample_rate_hz``,
        ``max_order`` and ``seed`` apply; slow: seconds per point).
    talker : "follow" (the talker keeps its offset from the mic) or "fixed".
    progress : called as progress(done, total).
    """
    V.choice(method, "--method", METHODS)
    V.choice(talker, "--talker", TALKER_MODES)
    k = _mic_index(rig, mic_name)
    mic = rig.mics[k]
    z, xs, ys, pts, pts_all = _map_grid(rig, mic, step_m, height_m, area_m)
    ny, nx = len(ys), len(xs)

    band_fn = None
    notes = []
    if method == "images":
        from howl.bands import band_centres_hz

        if not rig.room.is_shoebox:
            raise InputError("image sources need a shoebox room; use --method statistical", key="--method")
        hi = min(float(f_hi_hz), 0.45 * float(sample_rate_hz))
        f_hi_hz = hi
        freqs = np.asarray(band_centres_hz(fraction, f_lo_hz, hi), float)
        band_fn = _images_band_loop(rig, mic_name, talker, freqs, fraction, sample_rate_hz, max_order, seed)
        notes.append(f"images: loop peaks per band from image-source IRs at {sample_rate_hz:g} Hz, order "
                     f"{max_order}, with a statistical tail; forward path and NAG statistical")
    res = statistical_margins(rig, mic_name, pts_all, talker=talker, fraction=fraction, f_lo_hz=f_lo_hz,
                              f_hi_hz=f_hi_hz, band_loop_db=band_fn, chunk=(1 if method == "images" else 512),
                              progress=progress)
    grid = lambda a: a[:-1].reshape(ny, nx)  # noqa: E731
    margin = grid(res["margin_db"])
    if not np.any(np.isfinite(res["margin_db"])):
        raise InputError("no candidate position could be evaluated (all outside the room or at a loudspeaker)",
                         key="--area")
    i_best = int(np.nanargmax(res["margin_db"]))

    best = _map_point(res, pts_all, i_best)
    best["on_grid"] = bool(i_best < pts.shape[0])
    if method == "images":  # the phase-aware margin of the mic alone at its best position
        _images_best(rig, mic_name, pts_all[i_best], talker, sample_rate_hz, max_order, seed, f_lo_hz, f_hi_hz,
                     best, notes)
    current = _map_point(res, pts_all, pts_all.shape[0] - 1)
    gain = (best["margin_db"] - current["margin_db"]) if None not in (best["margin_db"], current["margin_db"]) else None
    best["beats_rig_by_db"] = None if gain is None else round(gain, 2)
    best["better"] = bool(gain is not None and best["on_grid"] and gain > RESOLUTION_DB)
    return PlacementMap(
        rig_name=rig.name, mic=mic_name, method=method, talker_mode=talker, height_m=z, x_m=xs, y_m=ys,
        margin_db=margin, azimuth_deg=np.degrees(grid(res["azimuth_rad"])),
        elevation_deg=np.degrees(grid(res["elevation_rad"])), limiting_band_hz=grid(res["limiting_band_hz"]),
        margin_spread_db=np.stack([grid(res["margin_lo_db"]), grid(res["margin_hi_db"])], axis=-1),
        best=best, current=current, fraction=int(fraction), notes=tuple(notes),
    )


def _num(x, nd: int = 2):
    v = float(x)
    return round(v, nd) if math.isfinite(v) else None


def map_to_json(m: PlacementMap) -> dict:
    """The ``howl map --json`` object."""
    return {
        "rig": m.rig_name,
        "mic": m.mic,
        "method": m.method,
        "talker": m.talker_mode,
        "height_m": m.height_m,
        "fraction": m.fraction,
        "best": m.best,
        "resolution_db": RESOLUTION_DB,
        "basis": "flat fader on the channel as the rig sets it: that mic's own fader at its limit (howl plan)",
        "current": m.current,
        "grid": {
            "x_m": [round(float(v), 3) for v in m.x_m],
            "y_m": [round(float(v), 3) for v in m.y_m],
            "margin_db": [[_num(v) for v in row] for row in m.margin_db],
            "azimuth_deg": [[_num(v, 1) for v in row] for row in m.azimuth_deg],
            "elevation_deg": [[_num(v, 1) for v in row] for row in m.elevation_deg],
            "limiting_band_hz": [[_num(v, 1) for v in row] for row in m.limiting_band_hz],
        },
        "notes": list(m.notes),
    }
