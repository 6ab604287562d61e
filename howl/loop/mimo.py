"""MIMO loops (several mics and speakers): the generalized Nyquist margin [1]_.

With L(f) the mics × mics loop transfer matrix, the closed loop (I − k·L)⁻¹ loses
stability at the smallest broadband gain k for which some eigenvalue λ(f) of L
satisfies k·λ(f) = 1, i.e. where an eigenvalue locus crosses the positive real axis.
Same positive-feedback convention as :mod:`howl.loop.nyquist`.

References
----------
.. [1] A. G. J. MacFarlane and I. Postlethwaite, "The generalized Nyquist
   stability criterion and multivariable root loci", Int. J. Control 25(1),
   81–127, 1977.
.. [2] C. A. Desoer and Y.-T. Wang, "On the generalized Nyquist stability
   criterion", IEEE Trans. Automatic Control AC-25(2), 187–196, April 1980.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from howl import validate as V
from howl.errors import InputError
from howl.loop.nyquist import _band, _FastDTFT, _next_pow2
from howl.units import db, from_db


@dataclass(frozen=True, eq=False)
class MimoMarginResult:
    """Result of :func:`mimo_margin` (generalized Nyquist on det(I − k·L(f))).

    gain_margin_db : −20·log10 of the largest positive real eigenvalue of L(f) in the
        band: the broadband gain scale (all sends together) at which the loop howls.
    howl_freq_hz : where that eigenvalue crosses the positive real axis.
    worst_mic_index : the mic with the largest share in the howl mode
        (``participation``: |w_i·v_i|/Σ|w·v| with right/left eigenvectors v, w;
        the first-order sensitivity of the eigenvalue to that mic's channel gain).
    eigenvector : right eigenvector (mic signals of the howl mode), unit norm.
    magnitude_margin_db : −20·log10 of the largest spectral radius of L in the band
        (phase-blind).
    crossings_freq_hz, crossings_value : every eigenvalue crossing (frequency, λ).
    """

    gain_margin_db: float
    howl_freq_hz: float
    worst_mic_index: int
    eigenvector: np.ndarray
    participation: np.ndarray = field(default_factory=lambda: np.zeros(0))
    magnitude_margin_db: float = float("nan")
    crossings_freq_hz: np.ndarray = field(default_factory=lambda: np.zeros(0))
    crossings_value: np.ndarray = field(default_factory=lambda: np.zeros(0))
    sample_rate_hz: float = float("nan")
    band_hz: tuple = ()


def loop_matrix(irs: np.ndarray, mix_lin: np.ndarray) -> np.ndarray:
    """Mic-to-mic loop IRs l[i, j, k] = Σ_spk mix[spk, j]·h[spk, i, k].

    ``irs[spk, mic]`` runs from speaker ``spk``'s feed to mic ``mic``'s channel;
    ``mix_lin[spk, mic]`` is the linear send from mic's channel to that speaker.
    """
    return np.einsum("sik,sj->ijk", irs, mix_lin)


def _check_mimo(irs, mix_lin, sample_rate_hz):
    V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    a = V.finite_array(irs, "irs", ndim=3)
    m = V.finite_array(mix_lin, "mix_lin", ndim=2)
    if m.shape != a.shape[:2]:
        raise InputError(f"must have shape (n_spk, n_mic) = {a.shape[:2]}, got {m.shape}", key="mix_lin")
    if not np.any(a):
        raise InputError("are all silent", key="irs")
    return a, m


class _MatrixLoop:
    """Exact L(f) (n × n) of mic-to-mic loop IRs at any frequency."""

    def __init__(self, l, fs):
        self.fs = fs
        self.n = l.shape[0]
        self.parts = [[_FastDTFT(l[i, j]) if np.any(l[i, j]) else None for j in range(self.n)] for i in range(self.n)]

    def matrices(self, f) -> np.ndarray:
        """L at frequencies ``f`` (M,) → (M, n, n)."""
        return self.with_deriv(f, deriv=False)

    def with_deriv(self, f, deriv: bool = True):
        """L and dL/df (per Hz) at frequencies ``f`` (M,) → (M, n, n) each."""
        f = np.atleast_1d(np.asarray(f, dtype=float))
        w = 2.0 * np.pi * f / self.fs
        Lm = np.zeros((f.size, self.n, self.n), dtype=complex)
        dL = np.zeros_like(Lm)
        for i in range(self.n):
            for j in range(self.n):
                part = self.parts[i][j]
                if part is None:
                    continue
                if deriv:
                    Lm[:, i, j], d = part(w, deriv=True)
                    dL[:, i, j] = d * (2.0 * np.pi / self.fs)
                else:
                    Lm[:, i, j] = part(w)
        edge = (f == 0.0) | (f == self.fs / 2.0)
        if np.any(edge):
            Lm[edge] = Lm[edge].real
        return (Lm, dL) if deriv else Lm

    def __call__(self, f: float) -> np.ndarray:
        w = 2.0 * np.pi * f / self.fs
        Lm = np.zeros((self.n, self.n), dtype=complex)
        for i in range(self.n):
            for j in range(self.n):
                if self.parts[i][j] is not None:
                    Lm[i, j] = self.parts[i][j](w)[0]
        if f == 0.0 or f == self.fs / 2.0:
            Lm = Lm.real.astype(complex)
        return Lm


#: Frequency steps matched per block in :func:`_track_loci` (bounds its scratch memory: n²·8 bytes a step).
_TRACK_BLOCK = 4096


def _track_loci(lam: np.ndarray) -> np.ndarray:
    """Order eigenvalues along frequency so each column follows one locus.

    Between neighbouring frequency steps the eigenvalues are paired by the assignment of least
    total distance Σ|λ_prev[a] − λ_now[b]| (a linear sum assignment problem, solved by
    ``scipy.optimize.linear_sum_assignment``; the same pairing an exhaustive search over all n!
    orders finds whenever its minimum is unique, in O(n³) instead of O(n!·n)). Where every
    eigenvalue's nearest neighbour is a different one, that pairing already attains the lower bound
    Σ_a min_b |…| and is the optimum, so the solver runs only on the few steps where nearest
    neighbours collide. The step pairings are then composed along frequency by a prefix scan.
    """
    F, n = lam.shape
    if n < 2 or F < 2:
        return lam.copy()
    from scipy.optimize import linear_sum_assignment

    ident = np.arange(n)
    step = np.empty((F - 1, n), dtype=np.intp)  # step[q][a]: index in raw row q+1 of raw row q's entry a
    for q0 in range(0, F - 1, _TRACK_BLOCK):
        q1 = min(F - 1, q0 + _TRACK_BLOCK)
        cost = np.abs(lam[q0 + 1 : q1 + 1, None, :] - lam[q0:q1, :, None])  # (block, a, b)
        near = np.argmin(cost, axis=2)
        for k in np.flatnonzero(np.any(np.sort(near, axis=1) != ident, axis=1)):
            rows, cols = linear_sum_assignment(cost[k])
            near[k, rows] = cols
        step[q0:q1] = near
    # order[q][e]: index in raw row q of locus e; order[q] = step[q-1][order[q-1]], order[0] = identity
    order = np.empty((F, n), dtype=np.intp)
    order[0] = ident
    order[1:] = step
    k = 1
    while k < F:  # Hillis–Steele inclusive scan of the composition (log2 F passes)
        order[k:] = np.take_along_axis(order[k:], order[:-k], axis=1)
        k *= 2
    return np.take_along_axis(lam, order, axis=1)


def _refine_loci(ev_at: "_MatrixLoop", a, b, za, zb, max_iter: int = 40):
    """Frequencies where eigenvalue loci cross the real axis, one per bracket (vectorised).

    Newton steps on Im λ(f) with the eigenvalue derivative dλ/df = wᵀ (dL/df) v (v the right
    eigenvector, wᵀ the matching row of V⁻¹, so wᵀv = 1), kept inside the shrinking bracket
    (bisection when a step leaves it); the locus is followed by taking, at each step, the
    eigenvalue nearest to the previous one. Returns (f, λ).
    """
    a = np.array(a, dtype=float)
    b = np.array(b, dtype=float)
    za = np.asarray(za, dtype=complex)
    zb = np.asarray(zb, dtype=complex)
    sa = np.sign(za.imag)
    t = za.imag / (za.imag - zb.imag)
    x = a + t * (b - a)
    z = za + t * (zb - za)
    active = np.ones(x.size, bool)
    tol = 1e-12 * ev_at.fs
    for _ in range(max_iter):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        Lm, dL = ev_at.with_deriv(x[idx])
        ev, V = np.linalg.eig(Lm)
        k = np.argmin(np.abs(ev - z[idx, None]), axis=1)
        lam = ev[np.arange(idx.size), k]
        try:
            W = np.linalg.inv(V)
        except np.linalg.LinAlgError:  # a rank-deficient loop (more mics than paths): the zero eigenvalues'
            W = np.linalg.pinv(V)      # eigenvectors coincide; the tracked eigenvalue's left vector is still defined
        w = W[np.arange(idx.size), k, :]
        v = V[np.arange(idx.size), :, k]
        dlam = np.einsum("mi,mij,mj->m", w, dL, v)
        z[idx] = lam
        fx = lam.imag
        left = np.sign(fx) == sa[idx]
        a[idx[left]] = x[idx[left]]
        b[idx[~left]] = x[idx[~left]]
        with np.errstate(divide="ignore", invalid="ignore"):
            xn = x[idx] - fx / dlam.imag
        bad = ~np.isfinite(xn) | (xn <= a[idx]) | (xn >= b[idx])
        xn[bad] = 0.5 * (a[idx[bad]] + b[idx[bad]])
        step_tol = tol + 1e-11 * np.abs(x[idx])
        done = (fx == 0.0) | (np.abs(xn - x[idx]) < step_tol) | (b[idx] - a[idx] < step_tol)
        x[idx] = np.where(fx == 0.0, x[idx], xn)
        active[idx[done]] = False
    # final values at the final frequencies, on the same loci
    Lm = ev_at.matrices(x)
    ev = np.linalg.eigvals(Lm)
    k = np.argmin(np.abs(ev - z[:, None]), axis=1)
    return x, ev[np.arange(x.size), k]


def _loci_loop(a: np.ndarray, m: np.ndarray) -> np.ndarray:
    """The loop IRs whose eigenvalue loci are followed: the smaller of two equivalent loops.

    With H(f) (n_spk × n_mic) and the sends M (n_spk × n_mic), the mics' loop is L = Hᵀ·M
    (n_mic × n_mic) and the loudspeakers' loop is K = M·Hᵀ (n_spk × n_spk). Sylvester's
    determinant identity, det(I − k·AB) = det(I − k·BA), makes det(I − k·L(f)) = det(I − k·K(f)) for
    every k and f: the same crossings and margins, and L's other n_mic − n_spk eigenvalues are 0.
    So a rig with more mics than loudspeakers is followed on K: k[s, t] = Σ_i M[s, i]·h[t, i].
    """
    if m.shape[0] < m.shape[1]:
        return np.einsum("tik,si->stk", a, m)
    return loop_matrix(a, m)


def _eigen_loci(l: np.ndarray, fs: float, lo: float, hi: float, oversample: int):
    """Eigenvalue loci of the loop IRs ``l`` (n × n × taps) on a zero-padded FFT grid in [lo, hi]: (f, λ (F, n))."""
    n = l.shape[0]
    n_fft = max(1 << 14, _next_pow2(oversample * l.shape[2]))
    f_all = np.fft.rfftfreq(n_fft, 1.0 / fs)
    sel = (f_all >= lo) & (f_all <= hi)
    Lf = np.moveaxis(np.fft.rfft(l, n_fft, axis=2)[:, :, sel], 2, 0)  # (F, i, j)
    if n == 2:  # closed form: λ = tr/2 ± √((tr/2)² − det)
        half = 0.5 * (Lf[:, 0, 0] + Lf[:, 1, 1])
        det = Lf[:, 0, 0] * Lf[:, 1, 1] - Lf[:, 0, 1] * Lf[:, 1, 0]
        root = np.sqrt(half * half - det)
        lam = np.stack([half + root, half - root], axis=1)
    else:
        lam = np.linalg.eigvals(Lf)  # (F, n), unordered
    return f_all[sel], (_track_loci(lam) if n > 1 else lam)


def _real_axis_crossings(l: np.ndarray, fs: float, f: np.ndarray, lam: np.ndarray):
    """Every positive real-axis point of the loci: exact grid points (DC, Nyquist), the largest
    crossings refined with exact DTFTs (:func:`_refine_loci`), the rest interpolated. (f, λ) arrays."""
    n = lam.shape[1]
    c_e, c_i, c_r = [], [], []
    for e in range(n):
        z = lam[:, e]
        s = np.sign(z.imag)
        iv = np.flatnonzero((s[:-1] * s[1:] < 0) & ((z.real[:-1] > 0) | (z.real[1:] > 0)))
        t = z.imag[iv] / (z.imag[iv] - z.imag[iv + 1])
        c_e.append(np.full(iv.size, e))
        c_i.append(iv)
        c_r.append(z.real[iv] + t * (z.real[iv + 1] - z.real[iv]))
    c_e, c_i, c_r = (np.concatenate(v) for v in (c_e, c_i, c_r))
    exact = [(i, e) for e in range(n) for i in np.flatnonzero((lam[:, e].imag == 0.0) & (lam[:, e].real > 0))]
    cr_f = [float(f[i]) for i, e in exact]
    cr_v = [lam[i, e] for i, e in exact]
    if c_r.size:
        order = np.argsort(-c_r)
        best = c_r[order[0]]
        n_ref = min(max(int(np.count_nonzero(c_r >= best * from_db(-1.0))) if best > 0 else 1, 4), 64)
        ii, ee = c_i[order[:n_ref]], c_e[order[:n_ref]]
        fz, zc = _refine_loci(_MatrixLoop(l, fs), f[ii], f[ii + 1], lam[ii, ee], lam[ii + 1, ee])
        # a locus mismatch between grid points can fake a sign change: keep true crossings only
        for fq, zq in zip(fz, zc):
            if zq.real > 0 and abs(zq.imag) <= 1e-6 * abs(zq):
                cr_f.append(float(fq))
                cr_v.append(complex(zq))
        rest = order[n_ref:]
        rest = rest[c_r[rest] > 0]
        if rest.size:
            i = c_i[rest]
            za_, zb_ = lam[i, c_e[rest]], lam[i + 1, c_e[rest]]
            t = za_.imag / (za_.imag - zb_.imag)
            cr_f.extend((f[i] + t * (f[i + 1] - f[i])).tolist())
            cr_v.extend(c_r[rest].astype(complex).tolist())
    return np.asarray(cr_f, dtype=float), np.asarray(cr_v, dtype=complex)


def _howl_mode(Lm: np.ndarray, lam: complex):
    """Right eigenvector (unit norm) of the mics' loop ``Lm`` for the eigenvalue nearest ``lam``, and
    each mic's participation |w_i·v_i|/Σ|w·v| (w the left eigenvector)."""
    ev, vr = np.linalg.eig(Lm)
    idx = int(np.argmin(np.abs(ev - lam)))
    v = vr[:, idx]
    evl, vl = np.linalg.eig(Lm.T)  # left eigenvectors: w^T L = λ w^T
    wl = vl[:, int(np.argmin(np.abs(evl - ev[idx])))]
    part = np.abs(wl * v)
    part = part / part.sum() if part.sum() > 0 else part
    return v / np.linalg.norm(v), part


def mimo_margin(irs, mix_lin, sample_rate_hz, *, band_hz=None, oversample: int = 4) -> MimoMarginResult:
    """Generalized Nyquist margin of a multi-mic, multi-speaker loop [1]_, [2]_.

    L(f)[i, j] = Σ_spk H[spk, i](f)·mix[spk, j]. The loop y = x + k·L·y loses
    stability at the smallest broadband gain k with det(I − k·L(f)) = 0 for some
    f, i.e. k·λ(f) = 1 for an eigenvalue λ(f) that is real and positive. The
    eigenvalue loci (of L, or of the smaller loudspeaker-side loop with the same
    determinant, :func:`_loci_loop`) are followed on a zero-padded FFT grid (from one
    frequency to the next, the pairing of least total distance, :func:`_track_loci`:
    an assignment solver, so any number of mics), every crossing of the positive real
    axis is refined with exact DTFTs, and the worst one sets the margin.
    """
    a, m = _check_mimo(irs, mix_lin, sample_rate_hz)
    fs = float(sample_rate_hz)
    lo, hi = _band(band_hz, fs)
    n_mic = a.shape[1]
    side = _loci_loop(a, m)
    f, lam = _eigen_loci(side, fs, lo, hi, oversample)
    magnitude_margin_db = -db(float(np.max(np.abs(lam))))
    cr_f, cr_v = _real_axis_crossings(side, fs, f, lam)
    if cr_f.size == 0:
        return MimoMarginResult(
            gain_margin_db=float("inf"), howl_freq_hz=float("nan"), worst_mic_index=-1,
            eigenvector=np.zeros(n_mic, complex), participation=np.zeros(n_mic),
            magnitude_margin_db=magnitude_margin_db, sample_rate_hz=fs, band_hz=(lo, hi),
        )
    o = np.argsort(cr_f)
    cr_f, cr_v = cr_f[o], cr_v[o]
    magnitude_margin_db = min(magnitude_margin_db, float(-db(np.max(np.abs(cr_v)))))
    w = int(np.argmax(cr_v.real))
    fh = float(cr_f[w])
    v, part = _howl_mode(_MatrixLoop(loop_matrix(a, m), fs)(fh), cr_v[w])
    return MimoMarginResult(
        gain_margin_db=float(-db(cr_v[w].real)),
        howl_freq_hz=fh,
        worst_mic_index=int(np.argmax(part)),
        eigenvector=v,
        participation=part,
        magnitude_margin_db=magnitude_margin_db,
        crossings_freq_hz=cr_f,
        crossings_value=cr_v,
        sample_rate_hz=fs,
        band_hz=(lo, hi),
    )
