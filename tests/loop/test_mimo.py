"""The generalized Nyquist margin of many mics (issue 17 item 6): eigenvalue loci matched by an
assignment solver, checked against the exhaustive search it replaced, against closed forms, and on a
16-mic rig; a memory error in any command is one line and exit 2.
"""

from __future__ import annotations

import itertools
import json
import math
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq
from typer.testing import CliRunner

from howl.loop import mimo
from howl.loop.mimo import _track_loci, mimo_margin

REPO = Path(__file__).resolve().parents[2]
RIG16 = REPO / "tests" / "data" / "council_16_mics.toml"
FS = 8000


# ------------------------------------------------------------------ the search it replaced


def _track_loci_by_permutations(lam: np.ndarray) -> np.ndarray:
    """The matching before issue 17, verbatim from commit 35bb65b (howl/loop/mimo.py), kept as the
    reference: for each frequency step, the order of the new eigenvalues with the least
    Σ|λ_prev − λ_now| over all n! orders (exhaustive search)."""
    import itertools

    F, n = lam.shape
    perms = list(itertools.permutations(range(n)))
    P = np.array(perms)
    # best permutation of row q's raw order to match row q-1's raw order
    cost = np.abs(lam[1:, :][:, P] - lam[:-1, None, :]).sum(axis=2)  # (F-1, n_perm)
    step = np.argmin(cost, axis=1)
    if n == 2:  # the two orders form a group of two: the running order is the parity of the swaps
        parity = np.concatenate([[0], np.cumsum(step != 0) % 2])
        out = lam.copy()
        sw = parity == 1
        out[sw] = lam[sw][:, ::-1]
        return out
    index = {p: k for k, p in enumerate(perms)}
    # table[s][c]: the permutation π with π[k] = perms[s][perms[c][k]]
    table = [[index[tuple(perms[s_][c] for c in perms[c_])] for c_ in range(len(perms))] for s_ in range(len(perms))]
    out = np.empty_like(lam)
    out[0] = lam[0]
    cur = 0  # permutation applied to row q-1 (identity)
    for q in range(1, F):
        # row q reordered by perms[step] matches raw row q-1; raw row q-1 was reordered by cur
        cur = table[step[q - 1]][cur]
        out[q] = lam[q][list(perms[cur])]
    return out


def _matching_is_well_defined(lam) -> bool:
    """Whether the least-cost order of the exhaustive search is unique at every step."""
    n = lam.shape[1]
    perms = np.array(list(itertools.permutations(range(n))))
    cost = np.sort(np.abs(lam[1:, :][:, perms] - lam[:-1, None, :]).sum(axis=2), axis=1)
    return bool(np.all(cost[:, 1] - cost[:, 0] > 1e-9 * (1.0 + cost[:, 0])))


def _random_loop(n, seed, length=1500, n_spk=None):
    """n_spk (default n) speakers × n mics of room-like IRs (a delay, then decaying noise), seeded."""
    rng = np.random.default_rng(seed)
    n_spk = n if n_spk is None else n_spk
    irs = np.zeros((n_spk, n, length))
    for s in range(n_spk):
        for m in range(n):
            d = int(rng.integers(10, 60))
            irs[s, m, d:] = rng.standard_normal(length - d) * np.exp(-np.arange(length - d) / 250.0) * 0.03
    mix = rng.uniform(0.3, 1.0, (n_spk, n))
    return irs, mix


@pytest.mark.parametrize("n", [2, 3, 4])
def test_assignment_matching_equals_the_exhaustive_search_on_random_loops(n):
    """Same loci, same margin as the n!-order search wherever its least order is unique at every step."""
    well_defined = 0
    for seed in range(6):
        irs, mix = _random_loop(n, 100 * n + seed)
        l = np.einsum("sik,sj->ijk", irs, mix)
        H = np.moveaxis(np.fft.rfft(l, 4096, axis=2), 2, 0)
        lam = np.linalg.eigvals(H)
        ref = _track_loci_by_permutations(lam)
        if not _matching_is_well_defined(lam):
            continue
        well_defined += 1
        np.testing.assert_array_equal(_track_loci(lam), ref)
        new = mimo_margin(irs, mix, FS, band_hz=(50.0, 3900.0))
        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(mimo, "_track_loci", _track_loci_by_permutations)
            old = mimo_margin(irs, mix, FS, band_hz=(50.0, 3900.0))
        assert new.gain_margin_db == old.gain_margin_db
        assert new.howl_freq_hz == old.howl_freq_hz
        assert new.worst_mic_index == old.worst_mic_index
        np.testing.assert_array_equal(new.crossings_freq_hz, old.crossings_freq_hz)
    assert well_defined >= 4  # the comparison was made, not skipped


@pytest.mark.parametrize(("n_spk", "n_mic"), [(1, 3), (2, 3), (3, 4)])
def test_fewer_loudspeakers_than_mics_give_the_margin_of_the_exhaustive_search_on_the_mics_loop(n_spk, n_mic):
    """With fewer loudspeakers than mics the loci are followed on the loudspeakers' loop (same
    det(I − k·L), Sylvester's identity); the margin equals the n!-order search on the mics' loop
    (the method before issue 17) to far below a display's 0.1 dB."""
    compared = 0
    for seed in range(4):
        irs, mix = _random_loop(n_mic, 1000 + 10 * n_spk + seed, n_spk=n_spk)
        # the mics' loop's extra eigenvalues are 0 (rounding noise: their order is never defined), so
        # the matching that matters is that of the n_spk nonzero loci, the loudspeakers' loop's
        k_loop = np.einsum("tik,si->stk", irs, mix)
        lam_k = np.linalg.eigvals(np.moveaxis(np.fft.rfft(k_loop, 4096, axis=2), 2, 0))
        if n_spk > 1 and not _matching_is_well_defined(lam_k):
            continue
        compared += 1
        new = mimo_margin(irs, mix, FS, band_hz=(50.0, 3900.0))
        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(mimo, "_track_loci", _track_loci_by_permutations)
            mp.setattr(mimo, "_loci_loop", mimo.loop_matrix)  # the mics' loop, as before
            old = mimo_margin(irs, mix, FS, band_hz=(50.0, 3900.0))
        # to the refinement's precision, not bit for bit: the mics' loop has n_mic − n_spk (repeated)
        # zero eigenvalues, whose ill-conditioned eigenvectors blur its Newton steps at the 1e-8 dB level
        assert new.gain_margin_db == pytest.approx(old.gain_margin_db, abs=1e-6)
        assert new.howl_freq_hz == pytest.approx(old.howl_freq_hz, rel=1e-8)
        assert new.worst_mic_index == old.worst_mic_index
    assert compared >= 2


def test_loci_are_kept_whole_where_nearest_neighbours_collide():
    # a(q) = 0.06·q and b(q) = 0.1 + 0.1·q on the real axis, c = 5 fixed, rows shuffled.
    # derived: from step 0 to 1, a = 0 → 0.06 and b = 0.1 → 0.2; b's nearest new value is a's
    # (|0.1 − 0.06| = 0.04 < 0.1), so nearest neighbours collide; the least total distance pairs
    # a→a (0.06) and b→b (0.1), 0.16 against 0.24 swapped, and so on for every later step.
    q = np.arange(12.0)
    true = np.stack([0.06 * q, 0.1 + 0.1 * q, np.full_like(q, 5.0)], axis=1).astype(complex)
    assert abs(true[0, 1] - true[1, 0]) < abs(true[0, 1] - true[1, 1])  # the collision is there
    rng = np.random.default_rng(7)
    raw = np.array([row[rng.permutation(3)] for row in true])
    raw[0] = true[0]
    np.testing.assert_array_equal(_track_loci(raw), true)


def test_loci_that_pass_close_come_back_whole():
    # a(t) = t and b(t) = 1 − t + 0.05j pass within 0.05 of each other at t = 0.5; c = 3 fixed.
    # derived: with step 1/200, each moves 0.005 a step while the two stay ≥ 0.05 apart.
    t = np.linspace(0.0, 1.0, 201)
    true = np.stack([t + 0j, 1 - t + 0.05j, np.full_like(t, 3.0) + 0j], axis=1)
    rng = np.random.default_rng(7)
    raw = np.array([row[rng.permutation(3)] for row in true])
    raw[0] = true[0]
    np.testing.assert_array_equal(_track_loci(raw), true)


# ------------------------------------------------------------------ closed forms


def test_two_by_two_symmetric_loop_margin_in_closed_form():
    # L(z) = [[a·z^-4, b·z^-6], [b·z^-6, a·z^-4]]: one loudspeaker per mic, each also heard by the other.
    # derived: a symmetric 2×2 [[p, q], [q, p]] has eigenvalues p ± q (eigenvectors [1, ±1]/√2), so
    # λ±(ω) = a·e^{−4jω} ± b·e^{−6jω}; |λ±| ≤ a + b, reached on the positive real axis only where
    # both phases are 0 mod 2π (λ+: ω = 0 or π, outside the band) or 4ω ≡ 0 and 6ω ≡ π (λ−: ω = π/2,
    # i.e. f = fs/4). So the margin is −20·log10(a + b) at fs/4, and both mics share the mode equally.
    a, b = 0.3, 0.2
    irs = np.zeros((2, 2, 64))  # with mix = I, L[i, j] = Σ_s h[s, i]·I[s, j] = h[j, i]
    irs[0, 0, 4] = irs[1, 1, 4] = a  # speaker s → mic s (its own channel): 4 samples
    irs[0, 1, 6] = irs[1, 0, 6] = b  # speaker s → the other mic: 6 samples
    r = mimo_margin(irs, np.eye(2), FS, band_hz=(100.0, 3900.0))
    assert r.gain_margin_db == pytest.approx(-20 * math.log10(a + b), abs=1e-9)  # 6.0206 dB
    assert r.howl_freq_hz == pytest.approx(FS / 4, abs=1e-6)
    np.testing.assert_allclose(r.participation, [0.5, 0.5], atol=1e-9)
    assert abs(r.eigenvector[0] + r.eigenvector[1]) < 1e-9  # the [1, −1]/√2 mode


def _commuting_loop(n, seed, d1=3, d2=7):
    """L(z) = z^-d1·C1 + z^-d2·C2 with C1 = Q·diag(μ1)·Qᵀ, C2 = Q·diag(μ2)·Qᵀ (Q orthogonal).
    derived: C1 and C2 share the eigenvectors Q, so L's eigenvalues are exactly
    λ_k(ω) = μ1_k·e^{−jωd1} + μ2_k·e^{−jωd2}: n loci whose crossings need no matching at all."""
    rng = np.random.default_rng(seed)
    Q, _ = np.linalg.qr(rng.standard_normal((n, n)))
    mu1 = rng.uniform(0.05, 0.45, n) * rng.choice([-1.0, 1.0], n)
    mu2 = rng.uniform(0.05, 0.45, n) * rng.choice([-1.0, 1.0], n)
    C1, C2 = Q @ np.diag(mu1) @ Q.T, Q @ np.diag(mu2) @ Q.T
    irs = np.zeros((n, n, 32))  # mix = I, so L[i, j] = irs[j, i]
    irs[:, :, d1] = C1.T
    irs[:, :, d2] = C2.T
    return irs, np.eye(n), mu1, mu2


def _largest_crossing(mu1, mu2, d1, d2, w_lo, w_hi):
    """Largest positive real crossing of the scalar loci (brentq on Im λ_k on a fine grid)."""
    best, where = -np.inf, np.nan
    w = np.linspace(w_lo, w_hi, 20001)
    for m1, m2 in zip(mu1, mu2):
        g = lambda x: m1 * np.sin(x * d1) + m2 * np.sin(x * d2)  # −Im λ_k
        gv = g(w)
        for i in np.flatnonzero(np.sign(gv[:-1]) * np.sign(gv[1:]) < 0):
            x = brentq(g, w[i], w[i + 1], xtol=1e-15)
            re = m1 * math.cos(x * d1) + m2 * math.cos(x * d2)
            if re > best:
                best, where = re, x
    return best, where


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_sixteen_commuting_loci_give_the_closed_form_margin(seed):
    n, d1, d2 = 16, 3, 7
    irs, mix, mu1, mu2 = _commuting_loop(n, seed, d1, d2)
    lo, hi = 100.0, 3900.0
    best, w = _largest_crossing(mu1, mu2, d1, d2, 2 * np.pi * lo / FS, 2 * np.pi * hi / FS)
    r = mimo_margin(irs, mix, FS, band_hz=(lo, hi))
    assert r.gain_margin_db == pytest.approx(-20 * math.log10(best), abs=1e-7)
    assert r.howl_freq_hz == pytest.approx(w * FS / (2 * np.pi), rel=1e-8)


def test_more_mics_than_loudspeakers_give_the_closed_form_margin_of_the_loudspeaker_loop():
    # 16 mics, 4 loudspeakers. derived: with sends M (4 × 16, full row rank) and IRs chosen as
    # Hᵀ = M⁺·K (M⁺ the pseudo-inverse, so M·Hᵀ = K), Sylvester's identity det(I − k·Hᵀ·M) =
    # det(I − k·M·Hᵀ) = det(I − k·K) gives the 16 × 16 loop L = Hᵀ·M the nonzero eigenvalues of the
    # 4 × 4 K = z^-3·C1 + z^-7·C2 (commuting, closed-form loci as above), and twelve zeros.
    n_spk, n_mic, d1, d2 = 4, 16, 3, 7
    k_irs, _, mu1, mu2 = _commuting_loop(n_spk, 11, d1, d2)
    rng = np.random.default_rng(12)
    M = rng.uniform(0.2, 1.0, (n_spk, n_mic))
    P = np.linalg.pinv(M)  # (16, 4)
    irs = np.zeros((n_spk, n_mic, 32))
    for d in (d1, d2):
        K = k_irs[:, :, d].T  # K[s, t] (k_irs[t, s] = K[s, t] as built for mix = I)
        irs[:, :, d] = (P @ K).T  # h[t, i] = (M⁺·K)[i, t]
    lo, hi = 100.0, 3900.0
    best, w = _largest_crossing(mu1, mu2, d1, d2, 2 * np.pi * lo / FS, 2 * np.pi * hi / FS)
    r = mimo_margin(irs, M, FS, band_hz=(lo, hi))
    assert r.gain_margin_db == pytest.approx(-20 * math.log10(best), abs=1e-7)
    assert r.howl_freq_hz == pytest.approx(w * FS / (2 * np.pi), rel=1e-8)
    assert r.eigenvector.shape == (n_mic,) and r.participation.sum() == pytest.approx(1.0)


# ------------------------------------------------------------------ a 16-mic rig


@pytest.fixture(scope="module")
def rig16_loops():
    from howl.model import load_rig
    from howl.model.images import rig_loop_irs

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rig = load_rig(RIG16)
        irs, mix = rig_loop_irs(rig, 16000.0)
    return irs, mix


def test_sixteen_mic_rig_margin_is_an_eigenvalue_of_the_loop_at_the_howl_frequency(rig16_loops):
    irs, mix = rig16_loops
    assert irs.shape[1] == 16
    r = mimo_margin(irs, mix, 16000.0, band_hz=(100.0, 7200.0))
    assert np.isfinite(r.gain_margin_db)
    # derived (definition): det(I − k·L(f)) = 0 with k = 10^(margin/20) means L(f_howl) has the
    # eigenvalue 1/k; L from a direct DTFT sum (numpy only), not from howl's DTFT.
    k = np.arange(irs.shape[2])
    e = np.exp(-2j * np.pi * r.howl_freq_hz * k / 16000.0)
    L = np.einsum("sik,k,sj->ij", irs, e, mix)
    lam = 10 ** (-r.gain_margin_db / 20)
    smin = np.linalg.svd(lam * np.eye(16) - L, compute_uv=False)[-1]
    assert smin < 1e-7 * np.linalg.norm(L, 2)
    assert r.participation.sum() == pytest.approx(1.0) and 0 <= r.worst_mic_index < 16


def test_plan_with_images_runs_on_a_sixteen_mic_rig():
    # before issue 17 this tried all 16! orders of the eigenvalues and died of a memory error
    from howl.cli import app

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = CliRunner().invoke(app, ["plan", str(RIG16), "--method", "images", "--json"])
    assert res.exit_code == 0, res.stderr
    obj = json.loads(res.stdout)
    system = obj["images"]["system"]
    assert len(system["mics"]) == 16
    assert system["gain_margin_db"] is not None and system["worst_mic"] in system["mics"]


# ------------------------------------------------------------------ memory errors


_NUMPY_LIKE = "Unable to allocate 140. GiB for an array with shape (40320, 29000, 8)\nand data type complex128"


@pytest.mark.parametrize("where", ["plan_rig", "mimo_loci"])
def test_a_memory_error_is_one_line_and_exit_2(monkeypatch, where):
    import howl.model.plan as plan_mod
    from howl.cli import app

    def boom(*_a, **_k):
        raise MemoryError(_NUMPY_LIKE)

    if where == "plan_rig":  # the statistical plan
        monkeypatch.setattr(plan_mod, "plan_rig", boom)
        args = ["plan", "--json"]
    else:  # deep in the generalized Nyquist margin, where issue 17's error came from
        monkeypatch.setattr(mimo, "_track_loci", boom)
        args = ["plan", str(REPO / "examples" / "council_delegates.toml"), "--method", "images"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = CliRunner().invoke(app, args)
    lines = [ln for ln in res.stderr.splitlines() if not ln.startswith("howl: warning:")]
    assert res.exit_code == 2, (res.exit_code, res.stderr, res.exception)
    assert len(lines) == 1 and lines[0].startswith("howl: error: "), res.stderr
    assert "memory" in lines[0] and "140. GiB" in lines[0]
    assert "reduce" in lines[0] and "--fraction" in lines[0]  # says what to reduce, with an option plan has
    assert "Traceback" not in res.stderr and res.stdout == ""
