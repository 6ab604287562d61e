"""The plan on one basis (issue 17): fader and together limits, the band that rings first, verdicts, Davis."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from typer.testing import CliRunner

from howl.cli import app
from howl.model import _plan_limits as lim
from howl.model import plan as pl
from howl.model.rig import Listener, Mic, Mix, Rig, Room, Speaker, Surface, Talker, load_rig, with_changes

runner = CliRunner()
BLACKBOX = "examples/blackbox_vocals_wedges.toml"


def _plan_json(*args):
    res = runner.invoke(app, ["plan", "--json", *args])
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


def _raise_all(obj, mic_names, by_db):
    """--what-if edits that raise the named mics by ``by_db`` in every mix they feed (from the stated gains)."""
    edits = []
    for m in obj["mics"]:
        if m["name"] in mic_names:
            edits += [f"mixes.{mx}.gains_db.{m['name']}={g + by_db:.4f}" for mx, g in m["gains_db"].items()]
    return [a for e in edits for a in ("--what-if", e)]


@pytest.mark.parametrize("rig", [BLACKBOX, "examples/chapel_lectern.toml"])
def test_raising_one_fader_by_its_limit_leaves_it_no_limit(rig):
    # the definition (issue 17): raising that mic by exactly max_channel_gain_db in every mix it feeds puts the
    # whole loop's worst peak at −FSM, so its new limit is 0 (± 0.2 dB: the JSON rounds gains to 0.01 dB)
    base = _plan_json(rig)
    m0 = base["mics"][0]
    assert m0["max_channel_gain_db"] is not None
    new = _plan_json(rig, *_raise_all(base, {m0["name"]}, m0["max_channel_gain_db"]))
    assert new["mics"][0]["max_channel_gain_db"] == pytest.approx(0.0, abs=0.2)


@pytest.mark.parametrize("rig", [BLACKBOX, "examples/council_delegates.toml"])
def test_raising_all_open_mics_by_the_together_headroom_leaves_none(rig):
    base = _plan_json(rig)
    names = {m["name"] for m in base["mics"]}
    new = _plan_json(rig, *_raise_all(base, names, base["headroom_together_db"]))
    assert new["headroom_together_db"] == pytest.approx(0.0, abs=0.2)


def test_single_fader_limits_do_not_add():
    # two mics sharing the loop: raising both by their own limits goes past −FSM (the loop power a + b·g of each
    # limit assumed the other at its stated gain; derived). The screen says so.
    first = _plan_json(BLACKBOX)
    low = _raise_all(first, {m["name"] for m in first["mics"]}, -6.0)  # start with room on every fader
    base = _plan_json(BLACKBOX, *low)
    assert all(m["max_channel_gain_db"] > 1.0 for m in base["mics"])
    edits = []
    for m in base["mics"]:
        edits += _raise_all(base, {m["name"]}, m["max_channel_gain_db"])
    both = _plan_json(BLACKBOX, *edits)
    assert both["headroom_together_db"] < -1.0
    out = runner.invoke(app, ["plan", BLACKBOX]).output
    assert "do not add" in out and "together" in out


_HP = "high_pass={freq_hz=150,order=2}"
_RANGE = "usable_range={low_hz=60,high_hz=6000,low_slope_db_per_oct=24,high_slope_db_per_oct=12}"


def _rings(rig_path, edits=(), **kw):
    rig = with_changes(load_rig(rig_path), list(edits)) if edits else load_rig(rig_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = pl.plan_rig(rig, **kw)
    return r, [m.limiting_band_hz for m in r.mics]


def _with_high_pass(rig, hp):
    from dataclasses import replace

    return replace(rig, mics=tuple(replace(m, high_pass=hp) if m.name.startswith("vox") else m for m in rig.mics))


def test_a_150_hz_high_pass_moves_rings_first_off_the_bottom_band_and_back():
    # issue 17's check: a 2nd-order 150 Hz high-pass on the vocal channels (howl.model.chain's HighPass)
    from howl.model.rig import HighPass

    def rings(rig):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            r = pl.plan_rig(rig)
        return r, [m.limiting_band_hz for m in r.mics]

    bare = _with_high_pass(load_rig(BLACKBOX), None)
    r0, flat = rings(bare)
    # the finding: with no high-pass the low end rings first (the bottom bands, 100-125 Hz; the example's
    # loudspeakers roll off below about 60 Hz, so not always the very bottom band any more)
    assert all(f <= 126.0 for f in flat)
    r1, hp = rings(_with_high_pass(bare, HighPass(150.0, 2)))
    assert all(f > 150.0 for f in hp) and r1.rings_first_hz > 150.0  # moved up, above the cut-off
    _, back = rings(_with_high_pass(bare, None))  # the high-pass taken out again
    assert back == flat


def test_rings_first_does_not_follow_the_top_of_the_analysis_range():
    # with vocal high-passes and every loudspeaker rolling off above 6 kHz, extending the analysis range past
    # the roll-off must not move the band that rings first, nor the limits (issue 17, --f-hi-hz 4000/8000/16000)
    edits = [f"mics.vox_a.{_HP}", f"mics.vox_b.{_HP}"]
    edits += [f"speakers.{s}.{_RANGE}" for s in ("main_left", "main_right", "wedge_a", "wedge_b")]
    got = {}
    for top in (4000.0, 8000.0, 16000.0):
        r, rings = _rings(BLACKBOX, edits, f_hi_hz=top)
        got[top] = (rings, [m.max_channel_gain_db for m in r.mics], r.rings_first_hz, r.headroom_together_db)
    assert got[8000.0][0] == got[4000.0][0] == got[16000.0][0]
    assert got[4000.0][2] == got[16000.0][2] < 4000.0
    np.testing.assert_allclose(got[16000.0][1], got[4000.0][1], atol=1e-6)
    assert got[16000.0][3] == pytest.approx(got[4000.0][3], abs=1e-6)


def test_sheet_map_and_plan_share_the_rings_first_rule():
    # one function: the plan's per-mic limiting band is the band with the smallest band limit
    lims = np.array([3.0, 1.0, 1.0, 7.0, np.inf])
    assert lim.rings_first(lims) == 1
    assert lim.rings_first(np.array([np.nan, 2.0, 5.0])) == 1


def test_stability_and_reach_verdicts():
    # thresholds by definition (issue 17): howls only at or past unity; between −FSM and unity inside the FSM
    assert lim.stability_as_set(-6.5, 6.0) == "stable"
    assert lim.stability_as_set(-6.0, 6.0) == "stable"
    assert lim.stability_as_set(-3.0, 6.0) == "inside_fsm"
    assert lim.stability_as_set(0.0, 6.0) == "howls"
    assert lim.reach(1.0) == ("reaches_target", 0.0)
    assert lim.reach(-2.5) == ("short", 2.5)
    assert lim.legacy_verdict("stable", "short") == "marginal"  # stable but short is not "will howl"
    assert lim.legacy_verdict("howls", "reaches_target") == "will howl"
    assert lim.legacy_verdict("stable", "reaches_target") == "stable"


def test_a_rig_raised_past_unity_howls_and_one_inside_the_fsm_says_so():
    base = _plan_json(BLACKBOX)
    names = {m["name"] for m in base["mics"]}
    up = base["headroom_together_db"]
    fsm = base["fsm_db"]
    inside = _plan_json(BLACKBOX, *_raise_all(base, names, up + fsm / 2))
    howls = _plan_json(BLACKBOX, *_raise_all(base, names, up + fsm + 1.0))
    down = _plan_json(BLACKBOX, *_raise_all(base, names, up - 1.0))
    assert {m["stability"] for m in inside["mics"]} == {"inside_fsm"}
    assert {m["stability"] for m in howls["mics"]} == {"howls"}
    assert {m["stability"] for m in down["mics"]} == {"stable"}
    for m in down["mics"]:  # reach is its own question: short_by_db is NAG − PAG when short
        if m["reach"] == "short":
            assert m["short_by_db"] == pytest.approx(m["nag_db"] - m["pag_db"], abs=0.02)
        assert m["verdict"] in pl.VERDICTS


def test_davis_uses_one_loudspeaker_for_d1_and_d2_and_the_worst_of_them():
    # Hand computation (Davis: PAG = 20·log10(D0·D1/(Ds·D2)) − 10·log10 NOM − FSM; Ballou, Handbook for Sound
    # Engineers 4th ed., ch. 34, Eq. 34-5). Mic at (10, 10, 1.5), talker 0.5 m in front (Ds 0.5), listener at
    # (40, 10, 1.5): D0 = 30.5. Main at (12, 10, 1.5): D1 = 2, D2 = 28. Delay at (30, 10, 1.5): D1 = 20, D2 = 10.
    # main:  20·log10(30.5·2/(0.5·28))  − 6 = 20·log10(4.35714) − 6 = 12.7840 − 6 = 6.7840 dB
    # delay: 20·log10(30.5·20/(0.5·10)) − 6 = 20·log10(122)     − 6 = 41.7272 − 6 = 35.7272 dB
    # worst = the main (6.78 dB). The old mix of nearest-to-mic D1 (2) and nearest-to-listener D2 (10) gave
    # 20·log10(30.5·2/(0.5·10)) − 6 = 15.73 dB.
    room = Room("r", 20000.0, 5000.0, (Surface("average", 5000.0, "x", (0.3,) * 7),), (60.0, 40.0, 10.0))
    spk = (Speaker("main", (12.0, 10.0, 1.5), 0.0, 0.0, (90.0,) * 7, (60.0,) * 7, 100.0),
           Speaker("delay", (30.0, 10.0, 1.5), 0.0, 0.0, (90.0,) * 7, (60.0,) * 7, 100.0))
    mic = Mic("m", (10.0, 10.0, 1.5), math.pi, 0.0, "cardioid", None, -54.0)
    rig = Rig("d", room, spk, (mic,), (Talker("t", (9.5, 10.0, 1.5), "m", 60.0),),
              (Listener("back", (40.0, 10.0, 1.5)),), (Mix("mains", ("main", "delay"), (("m", 0.0),)),), ead_m=3.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        mp = pl.plan_rig(rig).mics[0]
    assert mp.davis_pag_db == pytest.approx(6.7840, abs=1e-3)
    assert mp.davis_speaker == "main"
    assert (mp.distances_m["d1"], mp.distances_m["d2"]) == pytest.approx((2.0, 28.0), abs=1e-9)


def test_speech_weights_follow_talker_power_times_importance():
    # derived: w ∝ 10^(L/10)·I, normalised; a band 10 dB down with the same importance weighs a tenth
    w = lim.speech_weights(np.array([[0.0, -10.0, 0.0]]), np.array([0.25, 0.25, 0.5]))
    np.testing.assert_allclose(w, [[0.25 / 0.775, 0.025 / 0.775, 0.5 / 0.775]])


def test_eq_could_buy_is_the_band_headroom_past_the_flat_fader_limit():
    obj = _plan_json(BLACKBOX)
    for m in obj["mics"]:
        buy = [v for v in m["eq_could_buy_band_db"] if v is not None]
        assert min(buy) == pytest.approx(0.0, abs=0.011)  # the band that rings first has nothing left
        k = int(np.argmin(np.abs(np.asarray(obj["bands_hz"]) - m["rings_first_hz"])))
        assert m["eq_could_buy_band_db"][k] == pytest.approx(0.0, abs=0.011)
        assert m["limiting_band_hz"] == m["limiting_channel_band_hz"] == m["rings_first_hz"]


def test_what_if_rig_api_matches_the_cli():
    rig = with_changes(load_rig(BLACKBOX), ["mixes.mains.gains_db.vox_a=20"])
    assert dict(rig.mixes[0].gains_db)["vox_a"] == 20.0 or any(
        dict(mx.gains_db).get("vox_a") == 20.0 for mx in rig.mixes)


def test_a_pairs_prediction_is_the_whole_loop_when_one_mic_feeds_one_loudspeaker():
    # derived: with one mic and one loudspeaker the loop matrix is 1×1, so the pair's loop is the whole loop and
    # its predicted worst peak equals the rig's; with two loudspeakers each pair is less than the whole (powers add)
    room = Room("r", 20000.0, 5000.0, (Surface("average", 5000.0, "x", (0.3,) * 7),), (60.0, 40.0, 10.0))
    spk = (Speaker("main", (12.0, 10.0, 3.0), math.pi, -0.2, (90.0,) * 7, (60.0,) * 7, 100.0),
           Speaker("fill", (14.0, 14.0, 3.0), math.pi, -0.2, (90.0,) * 7, (60.0,) * 7, 100.0))
    mic = Mic("m", (10.0, 10.0, 1.5), math.pi, 0.0, "cardioid", None, -54.0)
    base = dict(talkers=(Talker("t", (9.5, 10.0, 1.5), "m", 60.0),), listeners=(Listener("back", (40.0, 10.0, 1.5)),),
                ead_m=3.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = pl.plan_rig(Rig("1", room, spk[:1], (mic,), mixes=(Mix("mains", ("main",), (("m", 20.0),)),), **base))
        two = pl.plan_rig(Rig("2", room, spk, (mic,), mixes=(Mix("mains", ("main", "fill"), (("m", 20.0),)),), **base))
    assert one.mics[0].pairs[0]["worst_peak_loop_gain_db"] == pytest.approx(
        float(np.max(one.worst_peak_spectral_radius_db)), abs=1e-9)
    assert [q["speaker"] for q in two.mics[0].pairs] == ["main", "fill"]
    assert all(q["worst_peak_loop_gain_db"] < float(np.max(two.worst_peak_spectral_radius_db)) for q in two.mics[0].pairs)


def test_a_shortfall_is_printed_rounded_up_never_as_zero():
    # derived: a rig short by 0.04 dB is short; printing "short by 0.0" would tell the tech nothing
    # is missing, so the printed figure is rounded up to the next 0.1 dB (and exact tenths stay)
    from howl.model._plan_limits import shortfall_shown_db

    assert shortfall_shown_db(0.04) == 0.1
    assert shortfall_shown_db(2.0) == 2.0
    assert shortfall_shown_db(2.01) == 2.1
    assert shortfall_shown_db(float("inf")) == float("inf")


# ============================================ batched fader limits against the plain per-column loop ====
# The reference below is the fixed point of band_limits_db written out the plain way, as the plan computed it
# before it was batched: per column and per quantile, each step a full eigendecomposition (numpy.linalg.eig) of
# every band's scaled loop matrix for the Perron vectors and an explicit inverse for the Schur complement. The
# batched form must give the same figures (to 1e-6 dB, far inside the 1e-3 dB the JSON needs), including the
# bands where the other mics alone are past −FSM (−inf).

FSM_DB = 6.0
RANGE_DB = (-150.0, 150.0)


def _perron(p):
    """Perron root and (right, left) vectors by numpy.linalg.eig, band by band (reference)."""
    rho, right, left = [], [], []
    for a in p:
        w, v = np.linalg.eig(a)
        k = int(np.argmax(np.abs(w)))
        wl, vl = np.linalg.eig(a.T)
        kl = int(np.argmax(np.abs(wl)))
        rho.append(abs(w[k]))
        right.append(np.abs(np.real(v[:, k])))
        left.append(np.abs(np.real(vl[:, kl])))
    return np.array(rho), np.array(right), np.array(left)


def _schur_gain(p, c, col):
    """L_i(P/c) = 1 − 1/[(I − P/c)⁻¹]_ii; +inf where the others alone have ρ(P_oo/c) ≥ 1 or L < 0 (reference)."""
    m = p.shape[-1]
    keep = [j for j in range(m) if j != col]
    out = np.empty(p.shape[0])
    for b, a in enumerate(p / c[:, None, None]):
        rho = np.max(np.abs(np.linalg.eigvals(a)))
        lch = 1.0 - 1.0 / np.linalg.inv(np.eye(m) - a)[col, col]
        if rho >= 1.0 and np.max(np.abs(np.linalg.eigvals(a[np.ix_(keep, keep)]))) >= 1.0:
            lch = np.inf
        out[b] = np.inf if (np.isfinite(lch) and lch < 0) else lch
    return out


def _plain_limits(p_dir, p_rev, peak_fn, col, quantile, x0=None):
    """One column, one quantile: the fixed point g = 1/L_i(P/c), c = 10^(−(FSM + peak factor(K))/10)."""
    p = p_dir + p_rev
    x = np.zeros(p.shape[0]) if x0 is None else np.array(x0, float)
    for _ in range(8):
        g = 10.0 ** (np.clip(x, *RANGE_DB) / 10.0)
        sd, sr = p_dir.copy(), p_rev.copy()
        sd[:, :, col] *= g[:, None]
        sr[:, :, col] *= g[:, None]
        _, r, lf = _perron(sd + sr)
        k = np.einsum("fi,fij,fj->f", lf, sd, r) / np.einsum("fi,fij,fj->f", lf, sr, r)
        c = 10.0 ** (-(FSM_DB + peak_fn(k)[quantile]) / 10.0)
        with np.errstate(divide="ignore"):
            lch = _schur_gain(p, c, col)
            x_new = np.where(np.isinf(lch), -np.inf, np.where(lch > 0, -10.0 * np.log10(np.where(lch > 0, lch, 1)),
                                                               np.inf))
        both = np.isfinite(x) & np.isfinite(x_new)
        done = np.all(np.abs(x_new[both] - x[both]) < 1e-3)
        x = x_new
        if done:
            break
    return x


def _loop(seed, n_mics=5, n_spk=3, n_f=24):
    """A random non-negative loop matrix P[f, i, j] = mic_i · Σ_s T[s, i] · spk_s · E[s, j]² (direct, reverberant)."""
    rng = np.random.default_rng(seed)
    e2 = rng.uniform(0.0, 1.0, (n_spk, n_mics)) ** 2
    e2[rng.integers(n_spk), 0] = 0.0  # one mic not sent to one loudspeaker
    mic = rng.uniform(0.2, 1.0, (n_mics, n_f))
    spk = rng.uniform(0.5, 1.0, (n_spk, n_f))
    t_dir = rng.uniform(0.0, 0.02, (n_spk, n_mics, n_f)) ** 2
    t_rev = rng.uniform(0.002, 0.01, (n_spk, n_mics, n_f))
    level = 10.0 ** (rng.uniform(-25.0, 12.0, n_f) / 10.0)  # from far below −FSM to past unity
    p_dir = np.einsum("if,sif,sf,sj->fij", mic, t_dir, spk, e2) * level[:, None, None]
    p_rev = np.einsum("if,sif,sf,sj->fij", mic, t_rev, spk, e2) * level[:, None, None]
    freqs = np.geomspace(100.0, 8000.0, n_f)
    bw, rt60 = 0.23 * freqs, np.full(n_f, 1.2)

    def peak_fn(k):
        return pl.peak_factor_db(bw, rt60, k)

    return p_dir, p_rev, peak_fn


def _assert_same(got, ref):
    assert np.array_equal(np.isposinf(got), np.isposinf(ref)) and np.array_equal(np.isneginf(got), np.isneginf(ref))
    fin = np.isfinite(ref)
    np.testing.assert_allclose(got[fin], ref[fin], atol=1e-6, rtol=0)


@pytest.mark.parametrize("seed", [3, 11])
def test_batched_limits_match_the_plain_loop(seed):
    p_dir, p_rev, peak_fn = _loop(seed)
    got = lim.all_fader_limits(p_dir, p_rev, peak_fn, FSM_DB)
    kinds = set()
    for col in range(p_dir.shape[-1]):
        mean = _plain_limits(p_dir, p_rev, peak_fn, col, 0)
        start = np.where(np.isfinite(mean), mean, 0.0)
        _assert_same(got["mean"][col], mean)
        _assert_same(got["q90"][col], _plain_limits(p_dir, p_rev, peak_fn, col, 2, start))
        _assert_same(got["q10"][col], _plain_limits(p_dir, p_rev, peak_fn, col, 1, start))
        _assert_same(lim.band_limits_db(p_dir, p_rev, peak_fn, FSM_DB, col), mean)
        kinds |= {"finite" if np.isfinite(v) else str(v) for v in mean}
    assert {"finite", "-inf"} <= kinds  # the random loop reaches both kinds of band


def test_limit_puts_the_worst_peak_at_minus_fsm():
    # derived: the limit x of column i is the flat gain at which 10·log10 ρ(P') + peak factor(K(P')) = −FSM,
    # checked here with numpy's eigvals on the scaled matrix, independent of the Schur complement
    p_dir, p_rev, peak_fn = _loop(5)
    x = lim.all_fader_limits(p_dir, p_rev, peak_fn, FSM_DB, columns=[2])["mean"][0]
    g = 10.0 ** (x / 10.0)
    fin = np.flatnonzero(np.isfinite(x))
    assert fin.size > 5
    sd, sr = p_dir[fin].copy(), p_rev[fin].copy()
    sd[:, :, 2] *= g[fin, None]
    sr[:, :, 2] *= g[fin, None]
    _, r, lf = _perron(sd + sr)
    k = np.einsum("fi,fij,fj->f", lf, sd, r) / np.einsum("fi,fij,fj->f", lf, sr, r)
    k_all = np.zeros(x.size)
    k_all[fin] = k
    worst = 10.0 * np.log10(np.max(np.abs(np.linalg.eigvals(sd + sr)), axis=-1)) + peak_fn(k_all)[0][fin]
    np.testing.assert_allclose(worst, -FSM_DB, atol=2e-3)  # the fixed point settles to 1e-3 dB in x


def test_points_times_bands_stack_matches_each_point():
    # the map stacks many positions × bands into one (P·F, M, M) array: each point's rows must be its own limits
    pts = [_loop(s, n_f=10) for s in (21, 22, 23)]
    p_dir = np.concatenate([p[0] for p in pts])
    p_rev = np.concatenate([p[1] for p in pts])
    freqs = np.geomspace(100.0, 8000.0, 10)

    def peak_fn(k):
        return pl.peak_factor_db(np.tile(0.23 * freqs, 3), np.full(30, 1.2), k)

    got = lim.fader_limits(p_dir, p_rev, peak_fn, FSM_DB, 1)
    for n, (pd, pr, pf) in enumerate(pts):
        ref = _plain_limits(pd, pr, pf, 1, 0)
        start = np.where(np.isfinite(ref), ref, 0.0)
        _assert_same(got["mean"][n * 10:(n + 1) * 10], ref)
        _assert_same(got["q90"][n * 10:(n + 1) * 10], _plain_limits(pd, pr, pf, 1, 2, start))


def test_perron_pairs_from_a_poor_start_match_numpy_eig():
    # reference: numpy.linalg.eig (the Perron pair of a positive matrix is its unique positive eigenvector pair);
    # ten reducible matrices (a zero column) must take the fallback and still agree
    rng = np.random.default_rng(7)
    a = rng.random((120, 6, 6)) ** 3
    a[:10, :, 2] = 0.0
    x, y = lim._perron_pair_update(a, rng.random((120, 6)) + 0.1, rng.random((120, 6)) + 0.1)
    _, r, lf = _perron(a)
    for got, ref in ((x, r), (y, lf)):
        np.testing.assert_allclose(got / got.sum(1, keepdims=True), ref / ref.sum(1, keepdims=True), atol=1e-9)
