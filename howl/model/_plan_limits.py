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
def _mv(a, x):
    """A·x for stacks (…, M, M) and (…, M), broadcasting the stack axes (matmul: faster than einsum here)."""
    return np.matmul(a, x[..., None])[..., 0]


def _vm(y, a):
    """yᵀ·A (= Aᵀ·y) for stacks (…, M) and (…, M, M), broadcasting the stack axes."""
    return np.matmul(y[..., None, :], a)[..., 0, :]


#: Noda steps for a Perron pair before falling back to a full eigendecomposition (it converges in 2-5).
_NODA_STEPS = 12


def _perron_pair_update(a, right, left, products=None):
    """Perron right/left vectors of each (N, M, M) non-negative matrix ``a``, refined from a warm start.

    ``a`` may instead be a function of flat indices returning those matrices, with ``products`` = (A·x, Aᵀ·y)
    of the warm start given (then only the elements that need iterating are ever built).

    Noda's inverse iteration (T. Noda, "Note on the computation of the maximal eigenvalue of a
    non-negative irreducible matrix", Numer. Math. 17, 1971): with x > 0 the Collatz-Wielandt bounds
    min_i (Ax)_i/x_i ≤ ρ(A) ≤ max_i (Ax)_i/x_i = σ hold, so σI − A has a non-negative inverse and
    x' = (σI − A)⁻¹x stays positive; σ falls to ρ superlinearly. A few cheap solves replace an
    eigendecomposition; the left vector is the same iteration on Aᵀ. Accepted where the bounds meet to
    1e-12 (a certificate that this is the Perron pair); every other element (a singular or failed solve,
    a vector that is not positive, a zero entry) falls back to :func:`howl.model.plan.perron_vectors`.
    Returns (right, left), (N, M).
    """
    from howl.model.plan import perron_vectors

    n, m = right.shape
    v = np.concatenate([right, left])
    ok = np.zeros(2 * n, bool)
    todo = np.arange(2 * n)
    eye = np.eye(m)[None]
    get = a if callable(a) else (lambda flat: a[flat])
    if products is None:
        products = (_mv(a, right), _vm(left, a))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # A·x and Aᵀ·y, no copy of A
        ratio = np.concatenate(products) / v
    for _ in range(_NODA_STEPS):
        vt = v[todo]
        with np.errstate(invalid="ignore"):
            hi, lo = np.max(ratio, axis=1), np.min(ratio, axis=1)
            pos = np.all(vt > 0, axis=1) & np.isfinite(hi) & (lo > 0)
            conv = pos & (hi - lo <= 1e-12 * hi)
        ok[todo[conv]] = True
        keep = pos & ~conv
        todo, vt, hi = todo[keep], vt[keep], hi[keep]
        if todo.size == 0:
            break
        bt = get(todo % n)
        flip = todo >= n
        bt[flip] = np.swapaxes(bt[flip], -1, -2)
        try:
            w = np.linalg.solve(hi[:, None, None] * eye - bt, vt[..., None])[..., 0]
        except np.linalg.LinAlgError:  # σ exactly ρ somewhere: let the fallback decide
            break
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            v[todo] = w / np.max(np.abs(w), axis=1, keepdims=True)
            ratio = _mv(bt, v[todo]) / v[todo]
    bad = np.flatnonzero(~(ok[:n] & ok[n:]))
    x, y = v[:n].copy(), v[n:].copy()
    if bad.size:
        _, x[bad], y[bad] = perron_vectors(get(bad))
    return x, y


def _scaled_perron(p, gk, cols, right, left):
    """Perron (right, left) vectors (A, F, M) of P (F, M, M) with column cols[a] scaled by gk[a] (A, F), from
    a warm start; the scaled matrices are built only for the elements Noda has to iterate on."""
    n_a, n_f, m = right.shape
    idx = np.arange(n_a)
    ax = right.copy()
    ax[idx, :, cols] *= gk
    ax = _mv(p, ax)
    aty = _vm(left, p)
    aty[idx, :, cols] *= gk

    def build(flat):
        a, f = np.divmod(flat, n_f)
        out = p[f].copy()
        out[np.arange(flat.size), :, cols[a]] *= gk[a, f][:, None]
        return out

    r, lf = _perron_pair_update(build, right.reshape(-1, m), left.reshape(-1, m),
                                (ax.reshape(-1, m), aty.reshape(-1, m)))
    return r.reshape(n_a, n_f, m), lf.reshape(n_a, n_f, m)


def _column_schur_inverse(p, c, columns, eig=None):
    """Column and row i of (I − P/c)⁻¹ for the moved column i of each element, (C, F, M) each, from
    P (F, M, M) and c (C, F); the diagonal entry [(I − P/c)⁻¹]_ii is the Schur complement's.

    ``eig``: (λ, V, V⁻¹) of P per band, if known: then (I − P/c)⁻¹ = V·diag(c/(c − λ))·V⁻¹ costs no solve,
    and it is kept only where its residual ‖(I − P/c)·z − e_i‖ is below 1e-12·‖z‖ (a backward-stable
    answer, like the solve's); every other element is solved.
    """
    m, n_c = p.shape[-1], len(columns)
    idx = np.arange(n_c)
    z = np.full((2 * n_c,) + c.shape[1:] + (m,), np.nan)
    todo = np.ones(2 * n_c * c.shape[1], bool)
    if eig is not None:
        w, v, vi = eig
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            sc = c[..., None] / (c[..., None] - w[None])  # (C, F, M)
            z[:n_c] = _mv(v, sc * np.moveaxis(vi[:, :, columns], -1, 0)).real
            z[n_c:] = _vm(sc * np.moveaxis(v[:, columns, :], 1, 0), vi).real
            res_c = z[:n_c] - _mv(p, z[:n_c]) / c[..., None]
            res_r = z[n_c:] - _vm(z[n_c:], p) / c[..., None]
            res_c[idx, :, columns] -= 1.0
            res_r[idx, :, columns] -= 1.0
            size = np.max(np.abs(z), axis=-1)
            good = np.concatenate([np.max(np.abs(res_c), axis=-1), np.max(np.abs(res_r), axis=-1)]) <= 1e-12 * size
        todo = ~good.ravel()
    flat = np.flatnonzero(todo)
    if flat.size:
        pair, band = np.divmod(flat, c.shape[1])
        if flat.size == todo.size:  # all of them (no eigenbasis): no gathering
            a = np.eye(m)[None, None] - p[None] / c[..., None, None]
            a = np.concatenate([a, np.swapaxes(a, -1, -2)]).reshape(-1, m, m)
        else:
            a = np.eye(m)[None] - p[band] / c[pair % n_c, band][:, None, None]
            flip = pair >= n_c
            a[flip] = np.swapaxes(a[flip], -1, -2)
        rhs = np.zeros((flat.size, m, 1))
        rhs[np.arange(flat.size), columns[pair % n_c], 0] = 1.0
        try:
            sol = np.linalg.solve(a, rhs)[..., 0]
        except np.linalg.LinAlgError:  # exactly singular somewhere (ρ = c there): element by element
            sol = np.full((flat.size, m), np.inf)
            for e in range(flat.size):  # rare fallback, not the hot path
                try:
                    sol[e] = np.linalg.solve(a[e], rhs[e])[..., 0]
                except np.linalg.LinAlgError:
                    pass
        z[pair, band] = sol
    return z[:n_c], z[n_c:]


def _others_radius(p, column, bands, cache):
    """ρ(P_oo) (the loop without ``column``'s row and column) in ``bands``, cached per column (F,)."""
    from howl.model.plan import spectral_radius

    got = cache.setdefault(column, np.full(p.shape[0], np.nan))
    need = bands[np.isnan(got[bands])]
    if need.size:
        keep = np.array([j for j in range(p.shape[-1]) if j != column])
        got[need] = spectral_radius(p[need][:, keep[:, None], keep[None, :]])
    return got[bands]


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
    if column is None:
        return -fsm_db - worst_peak_db(p_dir, p_rev, peak_fn, quantile)
    return band_limits_batch(p_dir, p_rev, peak_fn, fsm_db, [column], [quantile], x0=x0, rho=rho)[0][0]


def band_limits_batch(p_dir, p_rev, peak_fn, fsm_db: float, columns, quantiles, x0=None, rho=None,
                      vectors=None, eig=None) -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray]]:
    """:func:`band_limits_db` for several (column, quantile) pairs at once: (C, F) limits and the Perron
    vectors (C, F, M) at the last step (a warm start for a further call).

    The same fixed point, each step batched over (pairs × bands): the Perron vectors of the column-scaled
    matrices by Noda's iteration from a warm start (:func:`_perron_pair_update`), the moved channel's Schur
    complement by one solve per element, ρ(P_oo) (which does not depend on the fader) once per column
    and only where needed. Each pair stops when all its bands have settled to 1e-3 dB, as the one-pair
    loop does. ``vectors``: (right, left) warm start, (C, F, M) or (F, M); by default P's own. ``eig``: (λ, V, V⁻¹)
    of P per band, to spare the per-step solves (see :func:`_column_schur_inverse`).
    """
    from howl.model.plan import perron_vectors, spectral_radius

    columns = np.asarray(columns, int)
    quantiles = np.asarray(quantiles, int)
    p = p_dir + p_rev
    n_c, (n_f, m, _) = columns.size, p.shape
    x = np.zeros((n_c, n_f)) if x0 is None else np.broadcast_to(np.asarray(x0, float), (n_c, n_f)).copy()
    if rho is None:
        rho = spectral_radius(p)
    if vectors is None:
        _, r0, l0 = perron_vectors(p)
        vectors = (r0, l0)
    right = np.broadcast_to(vectors[0], (n_c, n_f, m)).copy()
    left = np.broadcast_to(vectors[1], (n_c, n_f, m)).copy()
    act = np.arange(n_c)  # the pairs still moving
    cache: dict = {}
    for _ in range(_FIXED_POINT_STEPS):
        cols, n_a = columns[act], act.size
        gk = 10.0 ** (np.clip(x[act], *LIMIT_RANGE_DB) / 10.0)
        r, lf = _scaled_perron(p, gk, cols, right[act], left[act])
        rg = r.copy()
        rg[np.arange(n_a), :, cols] *= gk  # P'·x = P·(D_g·x): the scaled matrices are never built
        num = np.sum(lf * _mv(p_dir, rg), axis=-1)
        den = np.sum(lf * _mv(p_rev, rg), axis=-1)
        k = num / np.maximum(den, _TINY)
        pf = np.stack([np.asarray(v, float) for v in peak_fn(k)])  # (3, A, F)
        c = 10.0 ** (-(fsm_db + pf[quantiles[act], np.arange(n_a)]) / 10.0)
        x_new, right[act], left[act] = _moved_limit_db(p, rho, c, cols, cache, eig)
        x_old = x[act]
        both = np.isfinite(x_new) & np.isfinite(x_old)
        with np.errstate(invalid="ignore"):
            done = np.all(np.abs(np.where(both, x_new - np.where(both, x_old, 0.0), 0.0)) < 1e-3, axis=1)
        x[act] = x_new
        act = act[~done]
        if act.size == 0:
            break
    return x, (right, left)


def _moved_limit_db(p, rho, c, cols, cache, eig=None):
    """(A, F) dB gain 1/L_i(P/c) of the moved column i of each pair (the steps of :func:`band_limits_db`),
    and the Perron (right, left) vectors (A, F, M) of P with column i scaled by that gain.

    At that gain the Perron root of the scaled matrix P' = P + (g − 1)·P·e_i·e_iᵀ is c, and from
    P'x = cx, yᵀP' = cyᵀ: x ∝ (cI − P)⁻¹·P·e_i = (I − P/c)⁻¹e_i − e_i and y ∝ (cI − Pᵀ)⁻¹e_i, the column
    and row of the inverse the Schur complement solves for anyway: the next step's warm start.
    """
    m = p.shape[-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        if m == 1:
            lch = p[None, :, 0, 0] / c
            col_z = row_z = np.ones(c.shape + (1,))
        else:
            col_z, row_z = _column_schur_inverse(p, c, cols, eig)
            lch = 1.0 - 1.0 / col_z[np.arange(cols.size), :, cols]
            for ci, col in enumerate(cols):  # the other mics howling among themselves: +inf
                bad = np.flatnonzero(rho / c[ci] >= 1.0)
                if bad.size:
                    lch[ci, bad] = np.where(_others_radius(p, int(col), bad, cache) / c[ci, bad] >= 1.0,
                                            np.inf, lch[ci, bad])
            lch = np.where(np.isfinite(lch) & (lch < 0), np.inf, lch)
        g = np.where(np.isinf(lch), 0.0, np.where(lch > 0, 1.0 / np.where(lch > 0, lch, 1.0), np.inf))
        if m > 1:
            col_z[np.arange(cols.size), :, cols] -= 1.0
        return 10.0 * np.log10(g), col_z, row_z


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
    out = all_fader_limits(p_dir, p_rev, peak_fn, fsm_db, [column])
    return {q: v[0] for q, v in out.items()}


def all_fader_limits(p_dir, p_rev, peak_fn, fsm_db: float, columns=None, rho=None, vectors=None) -> dict:
    """Band limits (C, F) of each fader in ``columns`` (default: every mic) for the mean, 90 % and 10 %
    worst peak: the mean for all columns in one batch, then both quantiles from it in a second.
    ``rho``, ``vectors``: ρ(P) and P's Perron (right, left) vectors (F, M) if already known."""
    from howl.model.plan import spectral_radius

    p = p_dir + p_rev
    cols = np.arange(p.shape[-1]) if columns is None else np.asarray(columns, int)
    rho = spectral_radius(p) if rho is None else rho
    eig = None
    if cols.size >= 3 and p.shape[-1] > 1:  # one eigendecomposition of P then spares a solve per pair and step
        try:
            w, v = np.linalg.eig(p)
            eig = (w, v, np.linalg.inv(v))
        except np.linalg.LinAlgError:  # defective somewhere: solve every step instead
            eig = None
    mean, (r, lf) = band_limits_batch(p_dir, p_rev, peak_fn, fsm_db, cols, np.zeros(cols.size, int), rho=rho,
                                      vectors=vectors, eig=eig)
    start = np.where(np.isfinite(mean), mean, 0.0)
    two = np.concatenate([cols, cols])
    q, _ = band_limits_batch(p_dir, p_rev, peak_fn, fsm_db, two, np.repeat([2, 1], cols.size),
                             x0=np.concatenate([start, start]), rho=rho,
                             vectors=(np.concatenate([r, r]), np.concatenate([lf, lf])), eig=eig)
    return {"mean": mean, "q90": q[:cols.size], "q10": q[cols.size:]}


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
