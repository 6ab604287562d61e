"""The image-source plan of a rig (private; :func:`howl.model.images.plan_with_images` re-exports it).

Split out of ``images.py`` to keep that module short.
"""

from __future__ import annotations

import math

import numpy as np

from howl import validate as V
from howl.errors import InputError
from howl.model.images import IMAGES_CAUTION, rig_loop_irs
from howl.model.rig import Rig


def _fmt_hz(v) -> str:
    return "—" if v is None or not np.isfinite(v) else f"{v:.0f} Hz"


def _fmt_db(v) -> str:
    return "—" if v is None or not np.isfinite(v) else f"{v:+.1f}"


def plan_with_images(
    rig: Rig,
    *,
    sample_rate_hz: float = 16000,
    max_order: int | None = None,
    seed: int = 0,
    fraction: int = 3,
    f_lo_hz: float = 100.0,
    f_hi_hz: float = 10000.0,
) -> dict:
    """Phase-aware margins of a rig from image-source loop IRs, beside the statistical spread.

    For each open, routed mic alone (the others closed): the Nyquist gain
    margin of its loop Σ_s H[s, m]·mix[s, m], the howl frequency, the
    phase-blind margin, the top risks, the loop gain per band; and the
    statistical estimate of the same single-mic loop (band power, Schroeder
    peak factor with its 10–90 % spread, from :mod:`howl.transfer` and
    :func:`howl.plan.peak_factor_db`). For all open mics together: the
    generalized Nyquist margin (:func:`howl.loop.mimo_margin`).

    Returns a JSON-ready dict; ``lines`` holds the terminal text.
    """
    from howl.bands import band_centres_hz, band_edges_hz
    from howl.loop.nyquist import band_loop_gain_db, loop_response, mimo_margin, nyquist_margin
    from howl.model._images_chain import band_chain_power, chained_loop_irs, statistical_single_mic
    from howl.model.room import room_acoustics
    from howl.model.transfer import statistical_transfer

    fs = V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    irs, mix = rig_loop_irs(rig, fs, max_order=max_order, seed=seed)
    irs = chained_loop_irs(rig, irs, fs)  # the channel as the rig sets it (high-pass, EQ, mic and speaker responses)
    active = [k for k, m in enumerate(rig.mics) if m.open and np.any(mix[:, k] > 0)]
    if not active:
        raise InputError("no open mic reaches any loudspeaker through the mixes; nothing to analyse", key="mixes")
    hi = min(float(f_hi_hz), 0.45 * fs)
    band = (float(f_lo_hz), hi)
    centres = np.asarray(band_centres_hz(fraction, f_lo_hz, hi), float)
    lo_e, hi_e = band_edges_hz(centres, fraction)
    bw = np.asarray(hi_e) - np.asarray(lo_e)
    ac = room_acoustics(rig.room, centres)
    tr = statistical_transfer(rig, centres, ac)
    ch = band_chain_power(rig, centres, fraction)  # (S, M, F): the same chain, per band, on the statistical side
    fsm = float(rig.fsm_db)

    mics_out = []
    lines = [
        f"Image-source loops ({fs:g} Hz, shoebox {rig.room.dimensions_m[0]:g} × {rig.room.dimensions_m[1]:g} × "
        f"{rig.room.dimensions_m[2]:g} m), each mic alone at the rig's settings:",
        f"{'mic':<14}{'margin':>9}{'howl at':>12}{'|L| max':>9}{'statistical (10–90 %)':>26}",
    ]
    for k in active:
        mic = rig.mics[k]
        loop = np.einsum("sn,s->n", irs[:, k, :], mix[:, k])
        res = nyquist_margin(loop, fs, band_hz=band, n_risks=5)
        f, H = loop_response(loop, fs)
        lg = band_loop_gain_db(f, H, centres, fraction)
        # statistical single-mic loop: Σ_s |T|²·mix² per band, plus Schroeder's peak factor
        avg_db, stat, stat_lo, stat_hi = statistical_single_mic(tr, k, ch[:, k, :], mix[:, k], bw)
        gm = float(res.gain_margin_db)
        mics_out.append({
            "name": mic.name,
            "gain_margin_db": _json_num(gm),
            "magnitude_margin_db": _json_num(res.magnitude_margin_db),
            "howl_freq_hz": _json_num(res.howl_freq_hz, 1),
            "howl_freqs_hz": [_json_num(x, 1) for x in res.howl_freqs_hz],
            "max_channel_gain_db": _json_num(gm - fsm),
            "risks": [{"freq_hz": _json_num(r.freq_hz, 1), "margin_db": _json_num(r.margin_db), "kind": r.kind}
                      for r in res.risks],
            "loop_gain_db": [_json_num(x) for x in lg],
            "statistical_loop_gain_db": [_json_num(x) for x in avg_db],
            "statistical_margin_db": _json_num(stat),
            "statistical_spread_db": [_json_num(stat_lo), _json_num(stat_hi)],
        })
        lines.append(
            f"{mic.name:<14}{_fmt_db(gm):>9}{_fmt_hz(res.howl_freq_hz):>12}{_fmt_db(res.magnitude_margin_db):>9}"
            f"{_fmt_db(stat):>12} ({_fmt_db(stat_lo)} … {_fmt_db(stat_hi)})"
        )
    mm = mimo_margin(irs[:, active, :], mix[:, active], fs, band_hz=band)
    worst = rig.mics[active[int(mm.worst_mic_index)]].name
    system = {
        "gain_margin_db": _json_num(mm.gain_margin_db),
        "magnitude_margin_db": _json_num(mm.magnitude_margin_db),
        "howl_freq_hz": _json_num(mm.howl_freq_hz, 1),
        "worst_mic": worst,
        "mics": [rig.mics[k].name for k in active],
    }
    lines.append(
        f"all open mics together: margin {_fmt_db(mm.gain_margin_db)} dB, first howl near "
        f"{_fmt_hz(mm.howl_freq_hz)}, most at fault: {worst}"
    )
    lines.append("margin: phase-aware (Nyquist) gain margin of the estimated loop; |L| max: phase-blind margin.")
    lines.append("Caution: " + IMAGES_CAUTION)
    return {
        "method": "images",
        "chain_applied": True,
        "sample_rate_hz": fs,
        "max_order": 6 if max_order is None else int(max_order),
        "seed": int(seed),
        "band_hz": [band[0], band[1]],
        "bands_hz": [float(x) for x in centres],
        "fraction": int(fraction),
        "mics": mics_out,
        "system": system,
        "caution": IMAGES_CAUTION,
        "lines": lines,
    }


def _json_num(x, nd: int = 2):
    if x is None:
        return None
    v = float(x)
    return round(v, nd) if math.isfinite(v) else None
