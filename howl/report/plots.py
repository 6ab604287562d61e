"""Plots of the loop (matplotlib through the ``Figure`` API, Agg canvas, imported lazily).

Nothing here is imported by the core; the CLI calls these functions and writes
the PNG atomically.
"""

from __future__ import annotations

import numpy as np


def margin_figure(result, freq_hz: np.ndarray, H: np.ndarray, *, title: str | None = None):
    """Two panels: |L| in dB over frequency with the margin and the crossings marked,
    and the Nyquist curve of L near the critical point +1 (positive-feedback convention).

    Parameters
    ----------
    result : :class:`howl.loop.MarginResult` of the same loop (its ``gain_db`` included in ``H``).
    freq_hz, H : the loop transfer on a grid (as from :func:`howl.loop.loop_response`, scaled by the gain).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    f = np.asarray(freq_hz, dtype=float)
    L = np.asarray(H)
    lo, hi = result.band_hz
    # The audio band: below 20 Hz a log axis would spend decades on nothing a tech can hear
    # (an analysis band that starts lower is still analysed; the plot starts at 20 Hz).
    sel = (f >= max(lo, 20.0)) & (f <= hi)
    if np.count_nonzero(sel) < 2:
        sel = (f >= max(lo, 1e-3)) & (f <= hi)
    f, L = f[sel], L[sel]
    fig = Figure(figsize=(11, 4.6), layout="constrained")
    FigureCanvasAgg(fig)
    ax, ax2 = fig.subplots(1, 2, width_ratios=[1.8, 1])

    mag_db = 20 * np.log10(np.maximum(np.abs(L), 1e-12))
    ax.semilogx(f, mag_db, lw=0.6, color="0.35", label="|L| loop gain")
    ax.axhline(0.0, color="black", lw=1.0)
    ax.text(f[0], 0.5, "howl line (0 dB)", fontsize=8, va="bottom")
    if np.isfinite(result.magnitude_margin_db):
        ax.axhline(-result.magnitude_margin_db, color="tab:orange", lw=0.8, ls="--",
                   label=f"phase-blind margin {result.magnitude_margin_db:.1f} dB")
    cf = np.asarray(result.crossings_freq_hz)
    cv = np.asarray(result.crossings_value)
    ok = (cf > 0) & (cv > 0)
    if np.any(ok):
        ax.semilogx(cf[ok], 20 * np.log10(cv[ok]), ".", ms=3, color="tab:blue", label="phase 0° crossings")
    if np.isfinite(result.gain_margin_db):
        ax.axhline(-result.gain_margin_db, color="tab:red", lw=0.8, ls=":")
        for fh in result.howl_freqs_hz:
            if fh > 0:
                ax.plot([fh], [-result.gain_margin_db], "v", color="tab:red", ms=8)
        ax.plot([], [], "v", color="tab:red",
                label=f"howl {result.howl_freq_hz:.1f} Hz, margin {result.gain_margin_db:.2f} dB")
    top = max(3.0, float(np.max(mag_db)) + 3.0)
    ax.set_ylim(max(top - 60.0, float(np.min(mag_db))), top)
    ax.set_xlim(f[0], f[-1])
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("loop gain (dB)")
    ax.grid(True, which="both", lw=0.3)
    ax.legend(loc="lower left", fontsize=8)
    if title:
        ax.set_title(title, fontsize=10)

    # Nyquist curve near +1: the loop howls when the curve passes through +1
    r = max(1.5, 1.1 * float(np.max(np.abs(L))))
    ax2.plot(L.real, L.imag, lw=0.3, color="0.45")
    t = np.linspace(0, 2 * np.pi, 361)
    ax2.plot(np.cos(t), np.sin(t), lw=0.6, color="tab:green", label="|L| = 1")
    ax2.plot([1.0], [0.0], "+", color="black", ms=14, mew=2, label="critical point +1")
    if np.isfinite(result.gain_margin_db):
        x = 10 ** (-result.gain_margin_db / 20)
        ax2.plot([x], [0.0], "o", color="tab:red", ms=6, label="largest 0° crossing")
    ax2.axhline(0, color="black", lw=0.5)
    ax2.axvline(0, color="black", lw=0.5)
    ax2.set_xlim(-r, r)
    ax2.set_ylim(-r, r)
    ax2.set_aspect("equal")
    ax2.set_xlabel("Re L")
    ax2.set_ylabel("Im L")
    ax2.set_title("Nyquist curve (positive feedback)", fontsize=10)
    ax2.legend(loc="lower left", fontsize=7)
    return fig


def save_figure(fig, path, *, option: str | None = None) -> None:
    """Write a figure as PNG atomically; errors name ``option``."""
    from howl.fileio import atomic_path

    with atomic_path(path, suffix=".png", option=option) as tmp:
        fig.savefig(str(tmp), format="png", dpi=120)
