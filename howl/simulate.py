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
B = min(d, P) and exact to rounding:

* the **head** taps [d, P) by direct convolution of the recent outputs
  (``numpy.convolve``, valid part) for each sub-block;
* the **tail** taps [P, N) by uniformly partitioned overlap-save convolution
  in the frequency domain ([1]_, [2]_): because every tail tap is at least P
  samples late, the tail's contribution to a whole block of P outputs is known
  before the block starts, and costs one FFT, one multiply-accumulate over the
  frequency-domain delay line and one inverse FFT per block.

A nonzero tap 0 makes the loop implicit; it is solved exactly in the linear
regime (u = (x + g·rest)/(1 − g·h[0])) before the limiter.

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

from . import _validate as V
from .errors import InputError
from .units import from_db

#: Longest program simulated in one call (samples), to keep memory bounded.
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


def _partition_size(n_taps: int) -> int:
    """Partition size P ≈ 2·√N (balances the O(P) head and O(N/P) tail cost), a power of two."""
    p = 1 << int(round(math.log2(max(2.0, 2.0 * math.sqrt(max(n_taps, 1))))))
    return int(min(max(p, 64), 8192))


def _gain_array(gain_db, n: int, name: str = "gain_db") -> np.ndarray | float:
    if np.ndim(gain_db) == 0:
        return float(from_db(V.number(float(gain_db), name, unit="dB")))
    g = np.asarray(gain_db, dtype=float)
    if g.ndim != 1 or g.size != n:
        raise InputError(f"must be a number or one value per program sample ({n}), got shape {g.shape}", key=name)
    if not np.all(np.isfinite(g)):
        raise InputError("must hold only finite numbers", key=name)
    return from_db(g)


def _engine(l: np.ndarray, x: np.ndarray, g, ceiling: float | None, partition: int | None = None) -> np.ndarray:
    """Closed loop y_i = sat(x_i + g·Σ_j l[i, j] * y_j) for loop IRs l (n, n, N), program x (n, T)."""
    n_ch, _, N = l.shape
    T = x.shape[1]
    # trim trailing zeros
    nzk = np.flatnonzero(np.any(l != 0, axis=(0, 1)))
    if nzk.size == 0:
        return x.copy() if ceiling is None else np.vstack([soft_limit(xi, ceiling) for xi in x])
    N = int(nzk[-1]) + 1
    l = l[:, :, :N]
    h0 = l[:, :, 0].copy()
    implicit = bool(np.any(h0))
    rest = np.flatnonzero(np.any(l[:, :, 1:] != 0, axis=(0, 1)))
    d = int(rest[0]) + 1 if rest.size else N + T  # loop delay in samples (taps ≥ 1)
    P = int(partition) if partition else _partition_size(N)
    B = max(1, min(d, P))
    n_blocks = -(-T // P)
    Tp = n_blocks * P
    xp = np.zeros((n_ch, Tp))
    xp[:, :T] = x
    g_arr = np.full(Tp, g) if np.ndim(g) == 0 else np.concatenate([g, np.full(Tp - T, g[-1])])
    # outputs with P zeros of history in front
    y = np.zeros((n_ch, P + Tp))

    # head taps [d, P) (direct), tail taps [P, N) (partitioned FFT)
    head_lo = d
    head = l[:, :, head_lo:P] if head_lo < P else None
    head_nz = [[head is not None and bool(np.any(head[i, j])) for j in range(n_ch)] for i in range(n_ch)]
    tail = l[:, :, P:] if N > P else None
    if tail is not None:
        Q = -(-tail.shape[2] // P)
        tp = np.zeros((n_ch, n_ch, Q * P))
        tp[:, :, : tail.shape[2]] = tail
        parts = tp.reshape(n_ch, n_ch, Q, P)
        pad = np.zeros((n_ch, n_ch, Q, 2 * P))
        pad[..., :P] = parts
        Tspec = np.fft.rfft(pad, axis=3)  # (i, j, Q, P+1)
        Tspec = np.ascontiguousarray(np.moveaxis(Tspec, 2, 0))  # (Q, i, j, P+1)
        fdl = np.zeros((2 * Q, n_ch, P + 1), dtype=complex)
        w = 0
        tail_nz = np.array([[np.any(tp[i, j]) for j in range(n_ch)] for i in range(n_ch)])
    eye = np.eye(n_ch)
    fb = np.zeros((n_ch, P))
    for blk in range(n_blocks):
        s0 = blk * P
        # ---- tail contribution for the whole block, from outputs before it
        if tail is not None:
            # input spectrum of [y block blk-2, y block blk-1] (history offset P in y)
            # y index of sample m is m + P; we need samples [s0 - 2P, s0) → y[:, s0 - P : s0 + P]
            lo_i = s0 - P
            if lo_i < 0:
                seg = np.concatenate([np.zeros((n_ch, -lo_i)), y[:, 0 : s0 + P]], axis=1)
            else:
                seg = y[:, lo_i : s0 + P]
            X = np.fft.rfft(seg, axis=1)  # (j, P+1)
            w = (w - 1) % Q
            fdl[w] = X
            fdl[w + Q] = X
            win = fdl[w : w + Q]  # (Q, j, P+1): newest first
            acc = np.zeros((n_ch, P + 1), dtype=complex)
            for i in range(n_ch):
                for j in range(n_ch):
                    if tail_nz[i, j]:
                        acc[i] += (win[:, j] * Tspec[:, i, j]).sum(axis=0)
            fb[:] = np.fft.irfft(acc, n=2 * P, axis=1)[:, P:]
        else:
            fb[:] = 0.0
        # ---- sub-blocks of length ≤ d, sample-accurate
        s = s0
        end = s0 + P
        while s < end:
            e = min(s + B, end)
            nb = e - s
            f_sub = fb[:, s - s0 : e - s0].copy()
            if head is not None:
                # needed outputs: samples [s - P + 1, e - d] → y[:, s + 1 : e - d + P]
                for i in range(n_ch):
                    for j in range(n_ch):
                        if head_nz[i][j]:
                            seg = y[j, s + 1 : e - d + P]
                            f_sub[i] += np.convolve(seg, head[i, j], mode="valid")[:nb]
            gs = g_arr[s:e]
            if not implicit:
                u = xp[:, s:e] + gs * f_sub
            elif n_ch == 1:
                u = (xp[:, s:e] + gs * f_sub) / (1.0 - gs * h0[0, 0])
            else:
                A = eye[None, :, :] - gs[:, None, None] * h0[None, :, :]
                rhs = (xp[:, s:e] + gs * f_sub).T[:, :, None]
                u = np.linalg.solve(A, rhs)[:, :, 0].T
            if ceiling is not None:
                u = soft_limit(u, ceiling)
            y[:, s + P : e + P] = u
            s = e
    return y[:, P : P + T]


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
    partition : FFT partition size (default ≈ 2·√len(ir), a power of two).

    Returns
    -------
    y : the mic/console signal, same length as ``program``.
    """
    from .loop import check_ir

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
    from .loop import _check_mimo, loop_matrix

    V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    a, m = _check_mimo(irs, mix_lin, sample_rate_hz)
    x = V.finite_array(program, "program", ndim=2)
    if x.shape[0] != a.shape[1]:
        raise InputError(f"must have one row per mic ({a.shape[1]}), got {x.shape[0]}", key="program")
    g = _gain_array(gain_db, x.shape[1])
    ceiling = None if limiter_dbfs is None else float(from_db(V.in_range(limiter_dbfs, "limiter_dbfs", -60.0, 20.0, unit="dBFS")))
    return _engine(loop_matrix(a, m), x, g, ceiling, partition)


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
    n = V.integer(n_samples, "n_samples", 1)
    fs = V.positive(sample_rate_hz, "sample_rate_hz", unit="Hz")
    given = sum(v is not None for v in (gain_db, ramp_db, steps))
    if given > 1:
        raise InputError("give only one of a constant gain, a ramp or steps", key="gain schedule")
    if ramp_db is not None:
        a = V.number(ramp_db[0], "ramp_db[0]", unit="dB")
        b = V.number(ramp_db[1], "ramp_db[1]", unit="dB")
        return np.linspace(a, b, n)
    if steps:
        st = sorted((V.in_range(t, "steps time", 0.0, None, unit="s"), V.number(gv, "steps gain", unit="dB")) for t, gv in steps)
        out = np.full(n, st[0][1])
        for t, gv in st:
            out[min(n, int(round(t * fs))) :] = gv
        return out
    return np.full(n, 0.0 if gain_db is None else V.number(gain_db, "gain_db", unit="dB"))
