"""The loop's gain margin, live, from the show's own program (closed-loop identification).

Signals: the send u (console output to the amplifier) and the mic m (pre-fader). Model:
m = s + F*u + n, u = G*m; the loop is L = G·F in the convention of ``howl margin`` (positive
feedback, howl where L = 1).

* **F** (loudspeaker → room → mic) sits inside the closed loop, so a plain cross-spectral
  estimate from u to m is biased by the program reaching u through G. Both signals are
  prewhitened by a short-term linear predictor of the mic signal (20 ms frames, Levinson–Durbin)
  and F is the H1 estimate S_um/S_uu of the prewhitened pair, with exponential forgetting (a long
  memory, ``f_memory_s``): the prediction-error method in closed loop (L. Ljung, *System
  Identification: Theory for the User*, 2nd ed., Prentice Hall 1999, sec. 13.4; A. Spriet,
  I. Proudler, M. Moonen, J. Wouters, "Adaptive feedback cancellation in hearing aids with linear
  prediction of the desired signal", IEEE Trans. Signal Process. 53(10):3749–3763, 2005; T. van
  Waterschoot & M. Moonen, "Fifty years of acoustic feedback control: state of the art and future
  challenges", Proc. IEEE 99(2):288–327, 2011). Frequency-domain averaging was chosen over block
  NLMS because it gives the coherence (hence the uncertainty) for free, has no step size to tune
  against the program level, and costs two FFTs per half frame.
* **G** (the console: fader, EQ, processing delay) is a deterministic function of m: identified
  directly from m → u on short frames with a short memory (``g_memory_s``), so a fader move shows
  within a second while F keeps its history.
* Every ``update_interval_s`` of audio: L̂ = Ĝ·F̂ as a loop IR of ``loop_length_s``, its margins by
  :func:`howl.loop.nyquist.nyquist_margin` (the routine of ``howl margin``), and an uncertainty in
  dB from the coherence of the F estimate near the howl frequency and its number of averages
  (the normalised random error of a frequency-response gain estimate, ε = √(1−γ²)/(|γ|√(2 n_d));
  J. S. Bendat & A. G. Piersol, *Random Data*, 4th ed., Wiley 2010, sec. 9.2.4), scaled by a
  tuned coverage factor.

Stable interface (the web view and ``howl track`` rely on it)::

    tr = LoopTracker(sample_rate_hz, settings=TrackSettings())
    for send_block, mic_block in blocks:
        for est in tr.process(send_block, mic_block):   # 1-D float arrays of equal length
            ...   # est: {time_s, gain_margin_db, howl_freq_hz, magnitude_margin_db,
                  #       uncertainty_db, status, coherence, relative_error, program_s,
                  #       held_tone_share}
    tr.finish()      # the estimate at the end (a list of 0 or 1 dict)
    tr.loop_ir()     # the current L̂ as a loop IR (numpy array) or None

``status`` is ``"ok"`` or ``"not enough program to tell"`` (then the uncertainty is widened);
``gain_margin_db``/``howl_freq_hz`` are None when L̂ never crosses the positive real axis and
before the first estimate. The estimate dicts are what ``LiveState.add_margin`` takes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from howl.listen._pem import (Correlations, Prewhitener, Spectra, causal_ir, decay_prior, solve_regularised,
                              solve_toeplitz_pcg)

NOT_ENOUGH = "not enough program to tell"
OK = "ok"


def _next_pow2(n: float) -> int:
    return 1 << max(1, int(math.ceil(math.log2(max(2.0, n)))))


@dataclass(frozen=True)
class TrackSettings:
    """The tracker's settings (tuned on the TUNING split of tests/listen/test_track.py only)."""

    loop_length_s: float = 0.5       #: length of the loop IR estimate
    update_interval_s: float = 1.0   #: one estimate per this much audio
    lpc_frame_s: float = 0.02        #: prewhitening frame
    lpc_order: int = 20              #: prewhitening predictor order
    pitch_hz: tuple | None = (60.0, 500.0)  #: range of the long-term (pitch) predictor (None: off)
    pitch_stages: int = 2            #: long-term predictors in cascade (one per voice it can remove)
    f_memory_s: float = 30.0         #: F's forgetting time constant
    g_memory_s: float = 0.4          #: G's forgetting time constant
    g_length_s: float = 0.04         #: longest console response (delay + EQ ring) that G holds
    min_program_s: float = 4.0       #: program (in F's memory) before an estimate is trusted
    silence_dbfs: float = -90.0      #: frames of the prewhitened send below this power are skipped
    band_hz: tuple = (50.0, None)    #: analysis band (None: 0.45 × the sample rate)
    coverage_k: float = 3.5          #: uncertainty = 20·log10(1 + this × the relative random error + …) (tuned: ≥ 90 % coverage)
    held_tone_k: float = 8.0         #: … + this × the share of the band held by tones (the bias the ± must hold; tuned)
    floor_db: float = 0.3            #: uncertainty floor (IR truncation and model error)
    max_ok_db: float = 6.0           #: beyond this uncertainty the status says not enough program
    widen_db_per_s: float = 1.0      #: growth of the uncertainty per second without program
    min_coherence: float = 0.05      #: below this coherence at the crossing: not enough program
    ridge: float = 1e-3              #: diagonal loading of F's normal equations (× r_uu(0))
    decay_prior: bool = True         #: regularise F's taps by an exponentially decaying prior
    prior_scale: float = 1.0         #: the prior's variance × this (less shrinkage toward zero)
    tonal_db: float | None = 8.0     #: bridge bins of held tones this far above the local median (None: off)
    tonal_width_hz: float = 40.0     #: half-width of the local median for the tonal test
    compensate: bool = False         #: estimate the predictors on the feedback-compensated mic m − F̂∗u (worse on TUNING)
    cg_iters: int = 40               #: conjugate-gradient iterations per estimate (warm-started)


class LoopTracker:
    """Streaming loop-margin tracker fed with blocks of (send, mic). See the module docstring."""

    def __init__(self, sample_rate_hz: float, *, settings: TrackSettings | None = None):
        from howl import validate as V

        self.fs = V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
        s = self.settings = settings or TrackSettings()
        fs = self.fs
        self.n_loop = int(round(s.loop_length_s * fs))
        lags = None if s.pitch_hz is None else (int(fs / s.pitch_hz[1]), int(math.ceil(fs / s.pitch_hz[0])))
        self._pw = Prewhitener(max(8, int(round(s.lpc_frame_s * fs))), s.lpc_order, lags, s.pitch_stages)
        nf = _next_pow2(2 * self.n_loop)
        self._F = Spectra(nf, nf // 2, s.f_memory_s, fs)  # for the residual and the variance
        self._R = Correlations(self.n_loop, s.f_memory_s, fs)  # the normal equations of F
        self._f_ir = None
        self._u_hist = np.zeros(self.n_loop)
        self.n_g = int(round(s.g_length_s * fs))
        ng = _next_pow2(2 * self.n_g)
        self._G = Spectra(ng, ng // 4, s.g_memory_s, fs)
        self._floor = 10 ** (s.silence_dbfs / 10)
        self.n_samples = 0
        self._next_update = s.update_interval_s
        self._last_active_s = None
        self._program_s = 0.0
        self._loop = None
        self.latest: dict | None = None
        lo, hi = s.band_hz
        self.band_hz = (float(lo), float(hi) if hi is not None else 0.45 * fs)

    # ------------------------------------------------------------------ feeding
    def process(self, send, mic) -> list[dict]:
        """Feed equal-length blocks of the send and the mic; returns the estimates due in them."""
        u = np.asarray(send, dtype=float).ravel()
        m = np.asarray(mic, dtype=float).ravel()
        if u.size != m.size:
            raise ValueError(f"send and mic blocks differ in length ({u.size} vs {m.size})")
        out = []
        step = max(1, int(round(self.settings.update_interval_s * self.fs)))
        pos = 0
        while pos < u.size:  # cut at the update instants so estimates fall every interval
            due = int(round(self._next_update * self.fs)) - self.n_samples
            take = min(u.size - pos, max(1, due))
            self._feed(u[pos:pos + take], m[pos:pos + take])
            pos += take
            if self.n_samples >= int(round(self._next_update * self.fs)):
                out.append(self._estimate())
                self._next_update += step / self.fs
        return out

    def finish(self) -> list[dict]:
        """The estimate at the end of the audio (if the last one is older than a tenth of an interval)."""
        t = self.n_samples / self.fs
        if self.latest is not None and t - self.latest["time_s"] < 0.1 * self.settings.update_interval_s:
            return []
        if self.n_samples == 0:
            return []
        return [self._estimate()]

    def _feed(self, u, m) -> None:
        self.n_samples += u.size
        ref = None
        if self.settings.compensate and self._f_ir is not None:
            from scipy.signal import fftconvolve

            x = np.concatenate([self._u_hist, u])
            ref = m - fftconvolve(x, self._f_ir)[self.n_loop: self.n_loop + u.size]
        self._u_hist = np.concatenate([self._u_hist, u])[-self.n_loop:]
        w = self._pw.process(u, m, ref)
        if w.shape[1]:
            self._F.process(w[0], w[1], floor=self._floor)
            used = self._R.process(w[0], w[1], floor=self._floor)
            self._program_s = self._R.n_eff_samples / self.fs
            if used:
                self._last_active_s = self.n_samples / self.fs
        self._G.process(m, u, floor=self._floor)

    # ------------------------------------------------------------------ estimating
    def loop_ir(self) -> np.ndarray | None:
        """The current loop estimate L̂ = Ĝ·F̂ as a loop IR of ``loop_length_s`` (None before any program)."""
        if self._R.n_eff_samples == 0 or self._G.n_eff == 0:
            return None
        g_ir = causal_ir(self._G.estimate(), self._G.n_fft, self.n_g, max(1, self.n_g // 8))
        ir = np.convolve(g_ir, self._f_ir)[: self.n_loop]
        return self._in_band(ir)

    def tonal_mask(self) -> np.ndarray:
        """Bins of F's Welch grid where the prewhitened mic holds a line ``tonal_db`` above its
        local median (±``tonal_width_hz``): held notes the short- and long-term predictors leave.
        There the source is not white and the closed-loop estimate is biased toward L = 1."""
        from scipy.ndimage import maximum_filter1d, median_filter

        s = self.settings
        F = self._F
        half = max(2, int(s.tonal_width_hz / (self.fs / F.n_fft)))
        med = median_filter(F.syy, size=2 * half + 1, mode="nearest")
        mask = F.syy > 10 ** (s.tonal_db / 10) * med
        return maximum_filter1d(mask.astype(np.uint8), size=5) > 0

    def held_tone_share(self) -> float:
        """The share of the analysis band's bins that :meth:`tonal_mask` flags (0 when the test is off)."""
        if self.settings.tonal_db is None or not self._F.n_eff:
            return 0.0
        f = np.fft.rfftfreq(self._F.n_fft, 1.0 / self.fs)
        lo, hi = self.band_hz
        band = (f >= lo) & (f <= hi)
        return float(np.mean(self.tonal_mask()[band])) if band.any() else 0.0

    def _in_band(self, ir: np.ndarray) -> np.ndarray:
        """L̂ kept to the analysis band (outside it the program says nothing: faded to zero over a
        sixth of an octave) with its tonal bins replaced by a linear interpolation of their neighbours."""
        nf = self._F.n_fft
        H = np.fft.rfft(ir, nf)
        f = np.fft.rfftfreq(nf, 1.0 / self.fs)
        if self.settings.tonal_db is not None and self._F.n_eff:
            mask = self.tonal_mask()
            if mask.any() and not mask.all():
                k = np.arange(H.size)
                good = ~mask
                H = np.interp(k, k[good], H.real[good]) + 1j * np.interp(k, k[good], H.imag[good])
        lo, hi = self.band_hz
        w = np.clip(np.log2(np.maximum(f, 1e-9) / (lo * 2 ** (-1 / 6))) * 6, 0, 1)
        w = w * np.clip(np.log2(hi * 2 ** (1 / 6) / np.maximum(f, 1e-9)) * 6, 0, 1)
        return np.fft.irfft(H * np.sin(0.5 * np.pi * w) ** 2, nf)[: self.n_loop]

    def _solve_f(self) -> None:
        """Update the causal FIR estimate of F from the normal equations (warm-started PCG)."""
        s = self.settings
        if self._R.n_eff_samples == 0:
            return
        R = self._R
        if self._f_ir is None or not s.decay_prior:
            self._f_ir = solve_toeplitz_pcg(R.rxx, R.rxy, self._f_ir, ridge=s.ridge, iters=s.cg_iters)
        if s.decay_prior:
            # residual variance per sample of the prewhitened mic, and the per-tap noise of a plain fit
            sig2 = max(R.ryy0 - float(self._f_ir @ R.rxy), 1e-12 * R.ryy0) / max(R.n_eff_samples, 1.0)
            prior = s.prior_scale * decay_prior(self._f_ir, sig2 / max(R.rxx[0], 1e-300), self.fs)
            self._f_ir = solve_regularised(R.rxx, R.rxy, prior, sig2, self._f_ir, iters=s.cg_iters)

    def _estimate(self) -> dict:
        from howl.loop.nyquist import nyquist_margin

        s = self.settings
        t = self.n_samples / self.fs
        est = {"time_s": round(t, 6), "gain_margin_db": None, "howl_freq_hz": None, "magnitude_margin_db": None,
               "uncertainty_db": None, "status": NOT_ENOUGH, "coherence": None, "relative_error": None,
               "program_s": round(self._program_s, 3), "held_tone_share": None}
        self._solve_f()
        ir = self.loop_ir()
        if ir is None or not np.any(ir):
            self.latest = est
            return est
        r = nyquist_margin(ir, self.fs, band_hz=self.band_hz, n_risks=0)
        f0 = r.howl_freq_hz if math.isfinite(r.gain_margin_db) else r.magnitude_peak_freq_hz
        coh, eps = self._random_error(f0)
        # held tones are the source the predictors cannot whiten: their bias is not in eps, so the ±
        # grows with the share of the band they hold (held_tone_k chosen on the TUNING split)
        tones = self.held_tone_share()
        unc = max(s.floor_db, 20 * math.log10(1 + s.coverage_k * eps + s.held_tone_k * tones))
        silent_s = t - (self._last_active_s if self._last_active_s is not None else 0.0)
        enough = (self._program_s >= s.min_program_s and unc <= s.max_ok_db and coh >= s.min_coherence
                  and silent_s < 2 * s.update_interval_s)
        if not enough:
            unc = max(unc, s.max_ok_db) + s.widen_db_per_s * max(0.0, silent_s - s.update_interval_s)
        est.update(gain_margin_db=float(r.gain_margin_db) if math.isfinite(r.gain_margin_db) else None,
                   howl_freq_hz=float(r.howl_freq_hz) if math.isfinite(r.gain_margin_db) else None,
                   magnitude_margin_db=float(r.magnitude_margin_db), uncertainty_db=round(unc, 3),
                   status=OK if enough else NOT_ENOUGH, coherence=round(coh, 4), relative_error=round(eps, 5),
                   held_tone_share=round(tones, 4))
        self.latest = est
        return est

    def _random_error(self, f0: float) -> tuple[float, float]:
        """(coherence, relative standard error of F̂) around ``f0`` (the median over ±4 bins).

        The variance of a high-order FIR estimate at frequency f is (n/N)·Φ_v(f)/Φ_u(f) (n taps,
        N samples, Φ_v the residual's spectrum, Φ_u the input's; Ljung 1999, sec. 9.4, eq. 9.62
        for open loop and sec. 13.4 for the direct method in closed loop; from memory). Here Φ_v is
        the residual of the prewhitened mic after F̂, Φ_u the prewhitened send (Welch spectra) and
        N the forgetting-weighted number of samples in F's memory.
        """
        F = self._F
        if F.n_eff == 0 or self._f_ir is None:
            return 0.0, 10.0
        df = self.fs / F.n_fft
        k0 = int(round(f0 / df)) if math.isfinite(f0) else 0
        sl = slice(max(0, k0 - 4), k0 + 5)
        Fh = np.fft.rfft(self._f_ir, F.n_fft)[sl]
        suu, smm, sum_ = F.sxx[sl], F.syy[sl], F.sxy[sl]
        see = np.maximum(smm - 2 * np.real(np.conj(Fh) * sum_) + np.abs(Fh) ** 2 * suu, 0.0)
        var_rel = (self.n_loop / max(self._R.n_eff_samples, 1.0)) * see / np.maximum(suu * np.abs(Fh) ** 2, 1e-300)
        g2 = float(np.median(F.coherence()[sl]))
        return g2, float(math.sqrt(np.median(var_rel)))
