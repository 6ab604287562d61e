"""Exact closed-loop time-domain simulation of a feedback loop, with a soft limiter.

The loop (positive-feedback convention, see :mod:`howl.loop`)::

    u[n] = x[n] + g[n] · Σ_{k≥0} h[k] · y[n−k]
    y[n] = sat(u[n])

``x`` is the program at the mic (console point), ``h`` the loop IR at the
reference settings, ``g[n]`` a per-sample broadband gain (a fader schedule) and
``sat`` a memoryless soft limiter: linear up to half the ceiling, then a tanh
curve that approaches the ceiling, so an unstable loop saturates like a real
system instead of overflowing.

Sample-accurate feedback with fast convolution
----------------------------------------------
Let d ≥ 1 be the first nonzero tap of h after tap 0 (the loop delay). The
feedback for samples [s, s + B) with B ≤ d depends only on outputs before s,
which are already known, so the loop is computed in sub-blocks of length
B = min(d, S0) and is exact to rounding:

* the first taps [d, S0) by direct convolution of the recent outputs
  (``numpy.convolve``, valid part) for each sub-block;
* the taps [S0, N) by partitioned overlap-save convolution in the frequency
  domain ([1]_, [2]_), in levels of growing partition size S0, 8·S0, 64·S0, …
  (level ℓ holds the taps [S_ℓ, 8·S_ℓ) in 7 partitions of S_ℓ; the last level
  runs to the end of the IR). Because every tap of a level is at least S_ℓ
  samples late, that level's contribution to the next S_ℓ outputs is known
  before they start: one FFT, one multiply-accumulate over the level's
  frequency-domain delay line and one inverse FFT every S_ℓ samples.

S0 is a power of two ≤ d when the delay is long (no direct taps at all),
else 256.

A nonzero tap 0 makes the loop implicit; it is solved exactly in the linear
regime (u = (x + g·rest)/(1 − g·h[0])) before the limiter.

Only the outputs the longest tap reaches back to are kept between chunks, so
:func:`stream_closed_loop` runs a program of any length in constant memory, with
the same output to the bit as the whole program at once (``howl simulate`` uses it).

References
----------
.. [1] T. G. Stockham, "High-speed convolution and correlation", AFIPS Spring
   Joint Computer Conference, 1966 (sectioned FFT convolution).
.. [2] W. G. Gardner, "Efficient convolution without input-output delay",
   J. Audio Eng. Soc. 43(3), 127–136, 1995 (partitioned convolution).
"""

from __future__ import annotations

import math

import numpy as np

from howl import validate as V
from howl.errors import InputError
from howl.units import from_db

#: Longest program :func:`simulate_closed_loop` takes in one call (samples), to keep memory bounded;
#: :func:`stream_closed_loop` has no limit.
MAX_SAMPLES = 48000 * 60 * 30


def soft_limit(u: np.ndarray, ceiling: float) -> np.ndarray:
    """Memoryless soft limiter: identity below ceiling/2, tanh knee above (C¹, odd, |y| < ceiling)."""
    u = np.asarray(u, dtype=float)
    knee = 0.5 * ceiling
    a = np.abs(u)
    over = a > knee
    if not np.any(over):
        return u
    out = u.copy()
    span = ceiling - knee
    out[over] = np.sign(u[over]) * (knee + span * np.tanh((a[over] - knee) / span))
    return out


def _first_partition(delay: int, n_taps: int) -> int:
    """Size S0 of the first FFT partition: a power of two ≤ the loop delay when the delay is long
    (then no tap needs direct convolution), else 256; within [64, 4096]."""
    if delay >= 256:
        p = 1 << int(math.floor(math.log2(delay)))
    else:
        p = 256
    return int(min(max(p, 64), 4096))


#: Growth factor between the partition sizes of successive levels (non-uniform partitioning).
LEVEL_RATIO = 8


class _Level:
    """Uniformly partitioned overlap-save convolution of one tap range [lo, hi) with partition S ≤ lo.

    Every S samples, :meth:`block` returns the contribution of these taps to the next S outputs,
    from outputs that are all in the past (every tap is at least S samples late).
    """

    def __init__(self, l: np.ndarray, lo: int, hi: int, S: int):
        n = l.shape[0]
        self.S = S
        taps = l[:, :, lo:hi]
        Q = -(-taps.shape[2] // S)
        tp = np.zeros((n, n, Q * S))
        tp[:, :, : taps.shape[2]] = taps
        pad = np.zeros((n, n, Q, 2 * S))
        pad[..., :S] = tp.reshape(n, n, Q, S)
        spec = np.fft.rfft(pad, axis=3)  # (i, j, Q, S+1)
        self.spec = [[np.ascontiguousarray(spec[i, j]) if np.any(tp[i, j]) else None for j in range(n)] for i in range(n)]
        self.Q = Q
        self.n = n
        # taps start at lo = S·m; the input window for output block k is [kS − lo − S, kS − lo + S)
        self.shift = lo - S
        self.fdl = np.zeros((n, 2 * Q, S + 1), dtype=complex)
        self.w = 0

    def block(self, y: np.ndarray, s0: int, hist: int) -> np.ndarray:
        """Contribution to outputs [s0, s0 + S); ``y`` holds outputs with ``hist`` samples of zeros in front."""
        S = self.S
        a = s0 - self.shift - 2 * S + hist
        seg = y[:, a : a + 2 * S]
        X = np.fft.rfft(seg, axis=1)  # (j, S+1)
        self.w = (self.w - 1) % self.Q
        self.fdl[:, self.w] = X
        self.fdl[:, self.w + self.Q] = X
        acc = np.zeros((self.n, S + 1), dtype=complex)
        for i in range(self.n):
            for j in range(self.n):
                t = self.spec[i][j]
                if t is not None:
                    acc[i] += (self.fdl[j, self.w : self.w + self.Q] * t).sum(axis=0)
        return np.fft.irfft(acc, n=2 * S, axis=1)[:, S:]


def _gain_array(gain_db, n: int, name: str = "gain_db") -> np.ndarray | float:
    if np.ndim(gain_db) == 0:
        return float(from_db(V.number(float(gain_db), name, unit="dB")))
    g = np.asarray(gain_db, dtype=float)
    if g.ndim != 1 or g.size != n:
        raise InputError(f"must be a number or one value per program sample ({n}), got shape {g.shape}", key=name)
    if not np.all(np.isfinite(g)):
        raise InputError("must hold only finite numbers", key=name)
    return from_db(g)


class _ClosedLoop:
    """The loop engine as a stream: closed loop y_i = sat(x_i + g·Σ_j l[i, j] * y_j) for loop IRs
    l (n, n, N), fed program chunks (n, C) with their gains (C,), C a multiple of :attr:`chunk`
    (the last chunk any length).

    Taps [d, S0) by direct convolution per sub-block of ≤ d samples; taps [S0, S1), [S1, S2), …
    by partitioned FFT convolution with partitions S0, S1 = 8·S0, … (non-uniform partitioning,
    Gardner 1995), each level computed every S_ℓ samples from outputs already final. Only the
    outputs the longest tap reaches back to are kept (``hist`` samples), so memory does not grow
    with the program; the arithmetic is the same whatever the chunks, so the outputs are too.
    """

    def __init__(self, l: np.ndarray, ceiling: float | None, partition: int | None = None):
        n_ch, _, N = l.shape
        self.n_ch, self.ceiling = n_ch, ceiling
        nzk = np.flatnonzero(np.any(l != 0, axis=(0, 1)))
        self.silent = nzk.size == 0
        if self.silent:
            self.chunk = 1
            return
        N = int(nzk[-1]) + 1
        l = l[:, :, :N]
        self.h0 = l[:, :, 0].copy()
        self.implicit = bool(np.any(self.h0))
        rest = np.flatnonzero(np.any(l[:, :, 1:] != 0, axis=(0, 1)))
        d = int(rest[0]) + 1 if rest.size else None  # loop delay in samples (taps ≥ 1); None: no feedback taps
        S0 = int(partition) if partition else _first_partition(d if d is not None else N + (1 << 30), N)
        self.S0, self.d = S0, d
        self.B = max(1, min(d if d is not None else S0, S0))
        # levels: [S0, 8·S0), [8·S0, 64·S0), ... the last one runs to N
        self.levels: list[_Level] = []
        lo, S = S0, S0
        while lo < N:
            hi = min(N, lo * LEVEL_RATIO)
            if (N - lo) <= 2 * (LEVEL_RATIO - 1) * S or S >= 65536:  # few partitions left: finish at this size
                hi = N
            self.levels.append(_Level(l, lo, hi, S))
            lo, S = hi, S * LEVEL_RATIO
        S_max = max([lv.S for lv in self.levels], default=S0)
        self.chunk = S_max * max(1, (1 << 16) // S_max)  # every level block lies inside one chunk
        hist = 2 * max(S_max, S0) + max((lv.shift for lv in self.levels), default=0)
        self.hist = max(hist, S0)
        self.y_hist = np.zeros((n_ch, self.hist))  # the last `hist` outputs (zeros before the start)
        self.s_done = 0  # outputs computed so far
        head_hi = min(S0, N)
        self.head = l[:, :, d:head_hi] if d is not None and d < head_hi else None
        self.n_head = head_hi - d if self.head is not None else 0
        self.head_nz = [[self.head is not None and bool(np.any(self.head[i, j])) for j in range(n_ch)] for i in range(n_ch)]
        self.eye = np.eye(n_ch)

    def run(self, x: np.ndarray, g) -> np.ndarray:
        """Outputs for program ``x`` (n, C) at gains ``g`` (a number or (C,))."""
        if self.silent:
            return x.copy() if self.ceiling is None else np.vstack([soft_limit(xi, self.ceiling) for xi in x])
        n_ch, T = x.shape
        S0, hist = self.S0, self.hist
        n_blocks = -(-T // S0)
        Tp = n_blocks * S0
        xp = np.zeros((n_ch, Tp))
        xp[:, :T] = x
        g_arr = np.full(Tp, g) if np.ndim(g) == 0 else np.concatenate([g, np.full(Tp - T, g[-1])])
        S_max = max([lv.S for lv in self.levels], default=S0)
        y = np.zeros((n_ch, hist + Tp))  # outputs with `hist` samples of history in front
        y[:, :hist] = self.y_hist
        fb = np.zeros((n_ch, Tp + S_max))
        base = self.s_done  # global index of this chunk's first output (a multiple of every level's S)
        for blk in range(n_blocks):
            s0 = blk * S0
            for lv in self.levels:
                if (base + s0) % lv.S == 0:
                    fb[:, s0 : s0 + lv.S] += lv.block(y, s0, hist)
            s = s0
            end = s0 + S0
            while s < end:
                e = min(s + self.B, end)
                y[:, hist + s : hist + e] = self._sub_block(y, xp, fb, g_arr, s, e)
                s = e
        self.y_hist = y[:, Tp:].copy()
        self.s_done += Tp
        return y[:, hist : hist + T]

    def _sub_block(self, y, xp, fb, g_arr, s, e):
        """Outputs [s, e) (at most the loop delay long): the feedback is all from final outputs."""
        n_ch, hist, d, head = self.n_ch, self.hist, self.d, self.head
        f_sub = fb[:, s:e].copy()
        if head is not None:
            # taps k in [d, d + n_head) need outputs s − d − n_head + 1 … e − 1 − d (all final)
            for i in range(n_ch):
                for j in range(n_ch):
                    if self.head_nz[i][j]:
                        seg = y[j, hist + s - d - self.n_head + 1 : hist + e - d]
                        f_sub[i] += np.convolve(seg, head[i, j], mode="valid")
        gs = g_arr[s:e]
        if not self.implicit:
            u = xp[:, s:e] + gs * f_sub
        elif n_ch == 1:
            u = (xp[:, s:e] + gs * f_sub) / (1.0 - gs * self.h0[0, 0])
        else:
            A = self.eye[None, :, :] - gs[:, None, None] * self.h0[None, :, :]
            rhs = (xp[:, s:e] + gs * f_sub).T[:, :, None]
            u = np.linalg.solve(A, rhs)[:, :, 0].T
        if self.ceiling is not None:
            u = soft_limit(u, self.ceiling)
        return u


def _engine(l: np.ndarray, x: np.ndarray, g, ceiling: float | None, partition: int | None = None) -> np.ndarray:
    """The whole program at once through :class:`_ClosedLoop` (x (n, T), g a number or (T,))."""
    return _ClosedLoop(l, ceiling, partition).run(x, g)


def simulate_closed_loop(
    ir,
    program,
    sample_rate_hz,
    *,
    gain_db=0.0,
    limiter_dbfs: float | None = -1.0,
    partition: int | None = None,
) -> np.ndarray:
    """Simulate the closed loop y[n] = sat(x[n] + g[n]·Σ h[k]·y[n−k]), sample-accurate.

    Parameters
    ----------
    ir : loop IR at the reference settings (1-D).
    program : the signal at the mic/console point without feedback (1-D).
    sample_rate_hz : the common sample rate.
    gain_db : added loop gain in dB: a number, or one value per program sample (a schedule).
    limiter_dbfs : ceiling of the soft limiter in dBFS (None: no limiter, purely linear).
    partition : size of the first FFT partition S0 (default: see the module docstring).

    Returns
    -------
    y : the mic/console signal, same length as ``program``.
    """
    from howl.loop.nyquist import check_ir

    h = check_ir(ir, sample_rate_hz)
    x = V.finite_array(program, "program", ndim=1)
    if x.size > MAX_SAMPLES:
        raise InputError(f"must have at most {MAX_SAMPLES} samples, got {x.size}", key="program")
    g = _gain_array(gain_db, x.size)
    ceiling = None if limiter_dbfs is None else float(from_db(V.in_range(limiter_dbfs, "limiter_dbfs", -60.0, 20.0, unit="dBFS")))
    return _engine(h[None, None, :], x[None, :], g, ceiling, partition)[0]


def simulate_mimo(
    irs,
    mix_lin,
    program,
    sample_rate_hz,
    gain_db=0.0,
    *,
    limiter_dbfs: float | None = -1.0,
    partition: int | None = None,
) -> np.ndarray:
    """Closed-loop simulation of several mics and speakers.

    ``irs[spk, mic]`` runs from speaker ``spk``'s feed to mic ``mic``'s channel,
    ``mix_lin[spk, mic]`` is the send from mic's channel to that speaker, and
    ``program`` (n_mic, T) is what each mic hears without feedback. Mic channel
    i carries y_i = sat(x_i + g·Σ_j l_ij * y_j), l_ij = Σ_spk mix[spk, j]·h[spk, i]
    (see :func:`howl.loop.loop_matrix`). Returns (n_mic, T).
    """
    from howl.loop.mimo import _check_mimo, loop_matrix

    V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    a, m = _check_mimo(irs, mix_lin, sample_rate_hz)
    x = V.finite_array(program, "program", ndim=2)
    if x.shape[0] != a.shape[1]:
        raise InputError(f"must have one row per mic ({a.shape[1]}), got {x.shape[0]}", key="program")
    g = _gain_array(gain_db, x.shape[1])
    ceiling = None if limiter_dbfs is None else float(from_db(V.in_range(limiter_dbfs, "limiter_dbfs", -60.0, 20.0, unit="dBFS")))
    return _engine(loop_matrix(a, m), x, g, ceiling, partition)


def stream_closed_loop(
    irs: np.ndarray,
    chunks,
    gains_db,
    *,
    limiter_dbfs: float | None = -1.0,
    partition: int | None = None,
):
    """The closed loop as a generator: program chunks in, output chunks out, memory bounded.

    ``irs`` are the mic-to-mic loop IRs (n, n, N) (one loop: ``h[None, None, :]``), already
    checked; ``chunks`` yields program chunks (n, C) of any lengths; ``gains_db(start, stop)``
    gives the gain schedule (dB) for samples [start, stop). Yields output chunks (n, C'); their
    concatenation is bit for bit what :func:`simulate_closed_loop` / :func:`simulate_mimo`
    return for the whole program (the engine does the same arithmetic whatever the chunking).
    No length limit: only the outputs the longest tap reaches back to are kept.
    """
    l = np.asarray(irs, dtype=float)
    ceiling = None if limiter_dbfs is None else float(from_db(V.in_range(limiter_dbfs, "limiter_dbfs", -60.0, 20.0, unit="dBFS")))
    eng = _ClosedLoop(l, ceiling, partition)
    n = l.shape[0]
    pending: list[np.ndarray] = []
    have = 0
    start = 0
    for c in chunks:
        c = np.asarray(c, dtype=float).reshape(n, -1)
        pending.append(c)
        have += c.shape[1]
        while have >= eng.chunk:
            buf = np.concatenate(pending, axis=1)
            take = have // eng.chunk * eng.chunk
            x, rest = buf[:, :take], buf[:, take:]
            pending, have = [rest], rest.shape[1]
            yield eng.run(x, from_db(np.asarray(gains_db(start, start + take), dtype=float)))
            start += take
    if have:
        x = np.concatenate(pending, axis=1)
        yield eng.run(x, from_db(np.asarray(gains_db(start, start + have), dtype=float)))


class PairwiseSum:
    """Sum of a stream of n numbers, bit for bit what ``numpy.sum`` gives for all n at once.

    numpy sums a float64 array pairwise (halves, split at a multiple of 8, down to blocks of
    128); the split depends only on the length, so the sums of the sub-ranges down to
    ``leaf`` samples are computed as they complete and combined in the same tree.
    """

    def __init__(self, n: int, leaf: int = 1 << 16):
        self.n, self.leaf = int(n), int(leaf)
        self.leaves = self._split(0, self.n)
        self.sums: list[float] = []
        self.buf: list[np.ndarray] = []
        self.have = 0

    def _big(self, n: int) -> bool:
        return n > self.leaf and n > 128

    def _split(self, a: int, n: int) -> list[int]:
        if not self._big(n):
            return [n]
        h = n // 2
        h -= h % 8
        return self._split(a, h) + self._split(a + h, n - h)

    def add(self, v: np.ndarray) -> None:
        """Feed the next values."""
        self.buf.append(np.asarray(v, dtype=float).ravel())
        self.have += self.buf[-1].size
        k = len(self.sums)
        while k < len(self.leaves) and self.have >= self.leaves[k]:
            b = np.concatenate(self.buf)
            m = self.leaves[k]
            self.sums.append(float(np.sum(b[:m])))
            self.buf, self.have = [b[m:]], b.size - m
            k += 1

    def total(self) -> float:
        """The sum (all n values must have been fed)."""
        if len(self.sums) != len(self.leaves):
            raise ValueError(f"fed {sum(self.leaves[: len(self.sums)]) + self.have} of {self.n} values")
        it = iter(self.sums)

        def node(n: int) -> float:
            if not self._big(n):
                return next(it)
            h = n // 2
            h -= h % 8
            left = node(h)
            return left + node(n - h)

        return node(self.n) if self.n else 0.0


class GainSchedule:
    """The per-sample gain schedule of :func:`gain_schedule_db`, a piece at a time.

    ``values(a, b)`` equals ``gain_schedule_db(...)[a:b]`` bit for bit (the ramp is numpy's
    ``linspace`` arithmetic), so a long program never holds the whole schedule.
    """

    def __init__(self, n_samples: int, sample_rate_hz: float, *, gain_db: float | None = None,
                 ramp_db: tuple[float, float] | None = None, steps: list[tuple[float, float]] | None = None):
        n = V.integer(n_samples, "n_samples", 1)
        fs = V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
        given = sum(v is not None for v in (gain_db, ramp_db, steps))
        if given > 1:
            raise InputError("give only one of a constant gain, a ramp or steps", key="gain schedule")
        self.n = n
        self.ramp = self.steps = None
        if ramp_db is not None:
            self.ramp = (V.number(ramp_db[0], "ramp_db[0]", unit="dB"), V.number(ramp_db[1], "ramp_db[1]", unit="dB"))
        elif steps:
            st = sorted((V.in_range(t, "steps time", 0.0, None, unit="s"), V.number(gv, "steps gain", unit="dB"))
                        for t, gv in steps)
            self.first = st[0][1]
            self.steps = ([min(n, int(round(t * fs))) for t, _ in st], [gv for _, gv in st])
        else:
            self.const = 0.0 if gain_db is None else V.number(gain_db, "gain_db", unit="dB")

    def values(self, a: int, b: int) -> np.ndarray:
        """The gains (dB) of samples [a, b)."""
        if self.ramp is not None:
            lo, hi = self.ramp
            if self.n == 1:
                return np.full(b - a, lo)
            delta, div = hi - lo, self.n - 1
            step = delta / div
            idx = np.arange(a, b, dtype=float)
            y = idx / div * delta if step == 0 else idx * step
            y += lo
            if b == self.n and b > a:
                y[-1] = hi
            return y
        if self.steps is not None:
            out = np.full(b - a, self.first)
            for i0, gv in zip(*self.steps):
                out[max(0, i0 - a):] = gv
            return out
        return np.full(b - a, self.const)


def gain_schedule_db(
    n_samples: int,
    sample_rate_hz: float,
    *,
    gain_db: float | None = None,
    ramp_db: tuple[float, float] | None = None,
    steps: list[tuple[float, float]] | None = None,
) -> np.ndarray:
    """A per-sample gain schedule in dB: constant, a linear ramp (in dB) over the whole
    program, or steps ``[(start_s, gain_db), ...]`` (the first step applies from its start;
    before it the gain is the first step's)."""
    return GainSchedule(n_samples, sample_rate_hz, gain_db=gain_db, ramp_db=ramp_db, steps=steps).values(0, int(n_samples))


#: The loop IR with cuts in it is extended until the slowest cut has rung down this far (dB).
CUT_TAIL_DB = 140.0
#: ... but by at most this long (s).
CUT_TAIL_MAX_S = 10.0


def with_cuts(ir, program, sample_rate_hz, notches) -> tuple[np.ndarray, np.ndarray]:
    """The loop IR and program with a cut list in the console's channel: (C∗h, C∗x).

    With the cuts C in the channel (between the mic input and the output the loop IR starts
    from), the output v obeys v = C∗(x + g·h∗v) = C∗x + g·(C∗h)∗v, so simulating the loop IR C∗h
    with the program C∗x gives exactly the console output with the cuts in (and the program
    heard through them, tonal cost included). The IR is extended until the slowest cut's
    response has decayed by :data:`CUT_TAIL_DB` (its poles' time constant 2·Q·A/ω0 samples for
    a peaking cut of gain A², 2·Q/ω0 for a notch; at most :data:`CUT_TAIL_MAX_S`).
    """
    from scipy.signal import sosfilt

    notches = list(notches)
    hc, sos = cut_loop_ir(ir, sample_rate_hz, notches)
    x = np.asarray(program, float)
    return (hc, x) if sos is None else (hc, sosfilt(sos, x))


def cut_loop_ir(ir, sample_rate_hz, notches) -> tuple[np.ndarray, np.ndarray | None]:
    """The loop IR with the cuts in it, C∗h (extended as :func:`with_cuts` says), and the cuts'
    second-order sections (None without cuts), for a caller that filters the program itself
    a block at a time (``scipy.signal.sosfilt`` with its state carried)."""
    from scipy.signal import sosfilt

    from howl.loop.notch import cascade_sos

    fs = V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    h = np.asarray(ir, float)
    notches = list(notches)
    if not notches:
        return h, None
    sos = cascade_sos(notches, fs)
    tau = 0.0
    for n in notches:
        w0 = 2.0 * math.pi * n.freq_hz / fs
        a = 1.0 if n.gain_db is None else 10.0 ** (n.gain_db / 40.0)
        tau = max(tau, 2.0 * n.q * a / w0)
    pad = int(min(math.ceil(tau * CUT_TAIL_DB / 20.0 * math.log(10.0)), CUT_TAIL_MAX_S * fs))
    return sosfilt(sos, np.concatenate([h, np.zeros(pad)])), sos
