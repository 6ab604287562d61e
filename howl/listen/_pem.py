"""The pieces of the loop tracker: a short-term linear-prediction prewhitener and exponentially
forgotten cross/auto spectra (pure numpy, no I/O).

Prediction-error prewhitening: in a closed loop the source s at the mic reaches the send u
through the console path G, so s and u are correlated and a plain cross-spectral estimate of the
room path F from u to m is biased (Ljung, *System Identification*, 2nd ed., 1999, sec. 13.4,
the direct method in closed loop). If s is modelled as white noise through a short-term all-pole
filter 1/A(z), filtering both u and m by A(z) turns the source term into (nearly) white noise,
which is uncorrelated with the prewhitened send as long as the loop holds a delay (the console's
and the acoustic path's): the prediction-error method of adaptive feedback cancellation
(A. Spriet, I. Proudler, M. Moonen, J. Wouters, "Adaptive feedback cancellation in hearing aids
with linear prediction of the desired signal", IEEE Trans. Signal Process. 53(10):3749–3763,
2005; reviewed in T. van Waterschoot & M. Moonen, "Fifty years of acoustic feedback control:
state of the art and future challenges", Proc. IEEE 99(2):288–327, 2011). A(z) is re-estimated
every short frame (autocorrelation method, Levinson–Durbin recursion).
"""

from __future__ import annotations

import numpy as np
from scipy.signal import lfilter


def levinson(r: np.ndarray, order: int) -> np.ndarray:
    """Prediction-error filter A(z) = [1, a1..ap] from autocorrelation lags r[0..p] (Levinson–Durbin)."""
    a = np.zeros(order + 1)
    a[0] = 1.0
    err = float(r[0])
    if err <= 0.0:
        return a
    for k in range(1, order + 1):
        acc = r[k] + np.dot(a[1:k], r[k - 1:0:-1])
        refl = -acc / err
        a[1:k] = a[1:k] + refl * a[k - 1:0:-1]
        a[k] = refl
        err *= 1.0 - refl * refl
        if err <= 1e-12 * r[0]:
            break
    return a


class Prewhitener:
    """Filter (u, m) pairs by a per-frame prediction-error filter estimated on the mic signal.

    ``frame`` samples at a time (about 20 ms): the autocorrelation of the Hann-windowed frame,
    with a white-noise correction of ``1 + 1e-4`` on lag 0 (keeps A(z) well conditioned), gives
    the short-term predictor A(z) of ``order``; then, with ``pitch_lags`` = (lo, hi) samples, a
    one-tap long-term (pitch) predictor 1 − β z^(−T) on the short-term residual removes the
    periodicity of voiced speech and held notes that A(z) leaves (the cascade of short- and
    long-term predictors of G. Rombouts, T. van Waterschoot, K. Struyve, M. Moonen, "Acoustic
    feedback cancellation for long acoustic paths using a nonstationary source model", IEEE Trans.
    Signal Process. 54(9):3426–3434, 2006; from memory). Both signals are filtered by the same
    cascade with their own history, so the output is continuous across frames.
    """

    def __init__(self, frame: int, order: int, pitch_lags: tuple | None = None, pitch_stages: int = 1):
        self.frame, self.order = int(frame), int(order)
        self.pitch_lags = None if pitch_lags is None else (int(pitch_lags[0]), int(pitch_lags[1]))
        self._win = np.hanning(self.frame)
        self._hist = np.zeros((2, self.order))
        hi = 0 if self.pitch_lags is None else self.pitch_lags[1]
        # residual history of each pitch stage (a cascade: each finds the strongest period left)
        self._rhists = [np.zeros((2, hi)) for _ in range(pitch_stages if self.pitch_lags else 0)]
        self._buf = np.zeros((2, 0))

    def process(self, u: np.ndarray, m: np.ndarray) -> np.ndarray:
        """Append samples; return the prewhitened (2, n) pairs for every completed frame."""
        self._buf = np.concatenate([self._buf, np.vstack([u, m])], axis=1)
        n_frames = self._buf.shape[1] // self.frame
        out = np.empty((2, n_frames * self.frame))
        p, F = self.order, self.frame
        for k in range(n_frames):
            seg = self._buf[:, k * F:(k + 1) * F]
            xw = seg[1] * self._win
            r = np.array([np.dot(xw[: F - i], xw[i:]) for i in range(p + 1)])
            r[0] *= 1.0 + 1e-4
            a = levinson(r, p) if r[0] > 0 else np.r_[1.0, np.zeros(p)]
            ext = np.concatenate([self._hist, seg], axis=1)
            res = lfilter(a, [1.0], ext, axis=1)[:, p:]
            self._hist = seg[:, F - p:]
            for j in range(len(self._rhists)):
                res = self._long_term(res, j)
            out[:, k * F:(k + 1) * F] = res
        self._buf = self._buf[:, n_frames * F:]
        return out

    def _long_term(self, res: np.ndarray, stage: int) -> np.ndarray:
        """Pitch predictor ``stage`` on one frame of residuals (2, F)."""
        lo, hi = self.pitch_lags
        F = res.shape[1]
        ext = np.concatenate([self._rhists[stage], res], axis=1)  # ext[:, hi + t] = res[:, t]
        self._rhists[stage] = ext[:, -hi:]
        y = res[1]
        # c(T) = Σ_t y[t]·ext[hi + t − T], energies of the lagged segments
        full = np.correlate(ext[1], y, mode="valid")  # full[j] = Σ_t y[t] ext[j + t], j = 0..hi
        lags = np.arange(lo, hi + 1)
        c = full[hi - lags]
        e2 = np.cumsum(np.r_[0.0, ext[1] ** 2])
        e = e2[hi - lags + F] - e2[hi - lags]
        score = np.where(c > 0, c * c / np.maximum(e, 1e-300), 0.0)
        j = int(np.argmax(score))
        if score[j] <= 0.0 or e[j] <= 0.0:
            return res
        T = int(lags[j])
        beta = float(np.clip(c[j] / e[j], 0.0, 1.0))
        return res - beta * ext[:, hi - T: hi - T + F]


class Spectra:
    """Exponentially forgotten auto and cross spectra of (x → y) on Hann frames of ``n_fft``
    with 50 % overlap (Welch), for the H1 estimate Y/X = S_xy/S_xx and its coherence.

    ``tau_s``: the forgetting time constant (each frame's weight decays as exp(−t/τ)).
    ``n_eff`` is the sum of weights, ``n_dof`` the equivalent number of independent averages
    ((Σw)²/Σw²), the figure that enters the random error of the estimate.
    Frames whose x power is below ``floor`` are skipped (the accumulators keep their history:
    silence neither informs nor erases the estimate).
    """

    def __init__(self, n_fft: int, hop: int, tau_s: float, sample_rate_hz: float):
        self.n_fft, self.hop = int(n_fft), int(hop)
        self.decay = float(np.exp(-self.hop / (tau_s * sample_rate_hz)))
        self._win = np.hanning(self.n_fft + 1)[:-1]
        n_bins = self.n_fft // 2 + 1
        self.sxx = np.zeros(n_bins)
        self.syy = np.zeros(n_bins)
        self.sxy = np.zeros(n_bins, complex)
        self.n_eff = 0.0
        self._w2 = 0.0
        self._buf = np.zeros((2, 0))
        self.last_power = 0.0
        self.n_frames = 0

    @property
    def n_dof(self) -> float:
        return self.n_eff * self.n_eff / self._w2 if self._w2 > 0 else 0.0

    def process(self, x: np.ndarray, y: np.ndarray, floor: float = 0.0) -> int:
        """Append samples; fold every completed frame in. Returns how many frames were used."""
        self._buf = np.concatenate([self._buf, np.vstack([x, y])], axis=1)
        used = 0
        while self._buf.shape[1] >= self.n_fft:
            seg = self._buf[:, : self.n_fft] * self._win
            self._buf = self._buf[:, self.hop:]
            self.last_power = float(np.mean(seg[0] ** 2))
            self.n_frames += 1
            if self.last_power <= floor:
                continue
            X, Y = np.fft.rfft(seg, axis=1)
            d = self.decay
            self.sxx = d * self.sxx + (X.real ** 2 + X.imag ** 2)
            self.syy = d * self.syy + (Y.real ** 2 + Y.imag ** 2)
            self.sxy = d * self.sxy + np.conj(X) * Y
            self.n_eff = d * self.n_eff + 1.0
            self._w2 = d * d * self._w2 + 1.0
            used += 1
        return used

    def estimate(self, rel_reg: float = 1e-6) -> np.ndarray:
        """H1 = S_xy / S_xx, regularised by ``rel_reg`` × the mean of S_xx."""
        reg = rel_reg * float(np.mean(self.sxx)) + 1e-300
        return self.sxy / (self.sxx + reg)

    def coherence(self) -> np.ndarray:
        """|S_xy|² / (S_xx S_yy) in [0, 1]."""
        den = self.sxx * self.syy
        with np.errstate(invalid="ignore", divide="ignore"):
            c = np.where(den > 0, (self.sxy.real ** 2 + self.sxy.imag ** 2) / np.where(den > 0, den, 1.0), 0.0)
        return np.clip(c, 0.0, 1.0)


def causal_ir(H: np.ndarray, n_fft: int, n_keep: int, fade: int) -> np.ndarray:
    """The first ``n_keep`` samples of the inverse FFT of H, with a half-Hann fade over the last ``fade``."""
    h = np.fft.irfft(H, n_fft)[:n_keep].copy()
    if fade > 0:
        h[-fade:] *= np.hanning(2 * fade)[fade:]
    return h


class Correlations:
    """Exponentially forgotten auto- and cross-correlations of a pair (x → y) over lags 0..n−1, by
    the covariance method on blocks of ``n`` samples with ``n`` samples of x's history (no window
    taper): r_xx(k) = Σ_t x(t) x(t−k), r_xy(k) = Σ_t y(t) x(t−k). These are the normal equations of
    the causal least-squares (prediction-error) FIR estimate of the path x → y (Ljung 1999, sec. 7.3).
    Blocks whose x power is below ``floor`` are skipped.
    """

    def __init__(self, n: int, tau_s: float, sample_rate_hz: float):
        self.n = int(n)
        self.decay = float(np.exp(-self.n / (tau_s * sample_rate_hz)))
        self.p = 1 << int(np.ceil(np.log2(3 * self.n)))
        self.rxx = np.zeros(self.n)
        self.rxy = np.zeros(self.n)
        self.ryy0 = 0.0
        self.n_eff_samples = 0.0
        self._hist = np.zeros(self.n)
        self._buf = np.zeros((2, 0))
        self.blocks = 0

    def process(self, x: np.ndarray, y: np.ndarray, floor: float = 0.0) -> int:
        self._buf = np.concatenate([self._buf, np.vstack([x, y])], axis=1)
        used = 0
        n, p = self.n, self.p
        while self._buf.shape[1] >= n:
            xb, yb = self._buf[0, :n], self._buf[1, :n]
            self._buf = self._buf[:, n:]
            xe = np.concatenate([self._hist, xb])  # xe[j] = x(b − n + j)
            self._hist = xb.copy()
            self.blocks += 1
            if float(np.mean(xb * xb)) <= floor:
                continue
            Xe = np.fft.rfft(xe, p)
            # c(l) = Σ_i v[i] xe[i + l]; lag k = n − l for l = n .. 1
            cxy = np.fft.irfft(np.conj(np.fft.rfft(yb, p)) * Xe, p)[n:0:-1]
            cxx = np.fft.irfft(np.conj(np.fft.rfft(xb, p)) * Xe, p)[n:0:-1]
            d = self.decay
            self.rxx = d * self.rxx + cxx
            self.rxy = d * self.rxy + cxy
            self.ryy0 = d * self.ryy0 + float(yb @ yb)
            self.n_eff_samples = d * self.n_eff_samples + n
            used += 1
        return used


def solve_toeplitz_pcg(r: np.ndarray, b: np.ndarray, x0: np.ndarray | None = None, *, ridge: float = 1e-3,
                       iters: int = 40, tol: float = 1e-6) -> np.ndarray:
    """Solve (T(r) + ridge·r0·I) x = b, T(r) the symmetric Toeplitz matrix of ``r``, by conjugate
    gradients with FFT products and T. Chan's optimal circulant preconditioner (R. H. Chan &
    M. K. Ng, "Conjugate gradient methods for Toeplitz systems", SIAM Review 38(3):427–482, 1996),
    warm-started from ``x0``: O(n log n) per iteration instead of Levinson's O(n²)."""
    n = r.size
    lam = ridge * float(r[0]) + 1e-300
    p = 1 << int(np.ceil(np.log2(2 * n)))
    emb = np.zeros(p)
    emb[:n] = r
    emb[p - n + 1:] = r[1:][::-1]
    E = np.fft.rfft(emb)

    def A(v):
        return np.fft.irfft(E * np.fft.rfft(v, p), p)[:n] + lam * v

    k = np.arange(n)
    c = ((n - k) * r + k * np.r_[r[0], r[1:][::-1]]) / n  # Chan's circulant, first column
    ev = np.maximum(np.fft.fft(c).real, 1e-6 * float(r[0])) + lam

    def Minv(v):
        return np.fft.ifft(np.fft.fft(v) / ev).real

    x = np.zeros(n) if x0 is None else x0.copy()
    res = b - A(x)
    z = Minv(res)
    d = z.copy()
    rz = res @ z
    bn = np.linalg.norm(b) + 1e-300
    for _ in range(iters):
        if np.linalg.norm(res) <= tol * bn:
            break
        Ad = A(d)
        alpha = rz / (d @ Ad)
        x += alpha * d
        res -= alpha * Ad
        z = Minv(res)
        rz_new = res @ z
        d = z + (rz_new / rz) * d
        rz = rz_new
    return x


def decay_prior(f: np.ndarray, noise_var: float, sample_rate_hz: float, *, smooth_s: float = 0.005,
                default_rt60_s: float = 0.5, skip_s: float = 0.02) -> np.ndarray:
    """Prior variance of each tap of F: flat up to the strongest arrival, then the larger of the
    smoothed squared estimate and an exponential decay fitted to it from ``skip_s`` after the
    strongest arrival down to where it meets the estimate's own noise
    (the exponentially decaying kernel of regularised FIR identification: T. Chen, H. Ohlsson,
    L. Ljung, "On the estimation of transfer functions, regularizations and Gaussian processes —
    Revisited", Automatica 48(8):1525–1535, 2012; hyperparameters by a fit, not by marginal
    likelihood). A room's tail decays exponentially (Sabine), so the prior is the room's physics."""
    n = f.size
    w = max(1, int(smooth_s * sample_rate_hz))
    e = np.convolve(f * f, np.ones(w) / w, mode="same")
    k0 = int(np.argmax(e))
    peak = float(e[k0])
    floor = max(noise_var, 1e-30)
    b = 6.91 * 2 / (default_rt60_s * sample_rate_hz)  # ln(1e6)/(RT60·fs): energy decay per sample
    a = np.log(max(peak, 1e-300))
    ks = k0 + int(skip_s * sample_rate_hz)  # the fit starts after the direct sound and first reflections
    above = np.nonzero(e[ks:] < 3 * floor)[0] if ks < n else np.zeros(0, int)
    k1 = ks + (int(above[0]) if above.size else n - ks)
    if k1 - ks > 4 * w and float(e[ks]) > 3 * floor:
        k = np.arange(ks, k1)
        slope, icpt = np.polyfit(k - k0, np.log(np.maximum(e[ks:k1], 1e-300)), 1)
        if slope < 0:
            b, a = -slope, icpt
    k = np.arange(n)
    tail = np.exp(np.minimum(a - b * (k - k0), np.log(max(peak, 1e-300))))
    return np.where(k <= k0, peak, np.maximum(tail, np.minimum(e, peak)))


def solve_regularised(r: np.ndarray, b: np.ndarray, prior: np.ndarray, noise_var: float,
                      x0: np.ndarray | None = None, *, iters: int = 60, tol: float = 1e-6) -> np.ndarray:
    """The posterior mean of a Gaussian FIR prior: (T(r) + σ²·diag(1/P)) x = b, solved as
    (P½ T P½ + σ² I) g = P½ b, x = P½ g, by conjugate gradients with FFT products (warm start)."""
    n = r.size
    p = 1 << int(np.ceil(np.log2(2 * n)))
    emb = np.zeros(p)
    emb[:n] = r
    emb[p - n + 1:] = r[1:][::-1]
    E = np.fft.rfft(emb)
    sq = np.sqrt(np.maximum(prior, 1e-300))
    lam = max(noise_var, 1e-300)

    def A(v):
        return sq * np.fft.irfft(E * np.fft.rfft(sq * v, p), p)[:n] + lam * v

    rhs = sq * b
    g = np.zeros(n) if x0 is None else x0 / sq
    res = rhs - A(g)
    d = res.copy()
    rr = res @ res
    bn = np.linalg.norm(rhs) + 1e-300
    for _ in range(iters):
        if np.sqrt(rr) <= tol * bn:
            break
        Ad = A(d)
        alpha = rr / (d @ Ad)
        g += alpha * d
        res -= alpha * Ad
        rr_new = res @ res
        d = res + (rr_new / rr) * d
        rr = rr_new
    return sq * g
