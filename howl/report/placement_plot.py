"""Drawing of a placement map (matplotlib Figure API, Agg; imported lazily).

A heat map of the margin over the floor plan with labelled contours (so it
still reads in black and white), the room outline, the loudspeakers with their
aims, the other mics, the mapped mic where the rig has it and its talker, and
the best position marked. The colour map is ``cividis`` (luminance rises
monotonically with the value, so grey prints keep the order).
"""

from __future__ import annotations

import math

import numpy as np

from howl.model.placement import PlacementMap
from howl.model.rig import Rig


def map_figure(m: PlacementMap, rig: Rig):
    """A :class:`matplotlib.figure.Figure` of the map (no pyplot state)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Rectangle

    x, y, z = m.x_m, m.y_m, m.margin_db
    span_x = float(x[-1] - x[0]) if x.size > 1 else 1.0
    span_y = float(y[-1] - y[0]) if y.size > 1 else 1.0
    if rig.room.is_shoebox:
        lx, ly = rig.room.dimensions_m[0], rig.room.dimensions_m[1]
        span_x, span_y = max(span_x, lx), max(span_y, ly)
    w = 9.0
    h = min(max(3.5, w * span_y / max(span_x, 1e-6) * 0.85 + 1.2), 12.0)
    fig = Figure(figsize=(w, h), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(1, 1, 1)
    finite = np.isfinite(z)
    if np.any(finite):
        zmin, zmax = float(np.nanmin(z)), float(np.nanmax(z))
        if zmax - zmin < 1e-6:
            zmin, zmax = zmin - 0.5, zmax + 0.5
        step = x[1] - x[0] if x.size > 1 else (y[1] - y[0] if y.size > 1 else 0.25)
        mesh = ax.pcolormesh(
            np.concatenate([x - step / 2, [x[-1] + step / 2]]),
            np.concatenate([y - step / 2, [y[-1] + step / 2]]),
            np.ma.masked_invalid(z), cmap="cividis", vmin=zmin, vmax=zmax, shading="flat",
        )
        cb = fig.colorbar(mesh, ax=ax, fraction=0.046, pad=0.03)
        cb.set_label("margin PAG − NAG (dB)" if m.method == "statistical" else "margin PAG − NAG, image-source loop (dB)")
        if x.size >= 4 and y.size >= 4 and zmax - zmin > 0.2:  # contours need a few points each way
            levels = _nice_levels(zmin, zmax)
            if len(levels) >= 1:
                cs = ax.contour(x, y, np.ma.masked_invalid(z), levels=levels, colors="k", linewidths=0.7)
                ax.clabel(cs, fmt="%+.0f dB" if levels[1 if len(levels) > 1 else 0] - levels[0] >= 1 else "%+.1f dB",
                          fontsize=7, inline=True)
    if rig.room.is_shoebox:
        ax.add_patch(Rectangle((0, 0), rig.room.dimensions_m[0], rig.room.dimensions_m[1], fill=False, lw=1.5,
                               edgecolor="k"))
    arrow = 0.06 * max(span_x, span_y)
    for s in rig.speakers:
        sx, sy = s.position_m[0], s.position_m[1]
        ax.plot([sx], [sy], marker="s", ms=8, mfc="white", mec="k", mew=1.5, ls="none")
        ax.annotate("", xy=(sx + arrow * math.cos(s.azimuth_rad), sy + arrow * math.sin(s.azimuth_rad)), xytext=(sx, sy),
                    arrowprops=dict(arrowstyle="->", lw=1.5, color="k"))
        ax.annotate(s.name, (sx, sy), xytext=(4, -10), textcoords="offset points", fontsize=7)
    for mic in rig.mics:
        mx, my = mic.position_m[0], mic.position_m[1]
        own = mic.name == m.mic
        ax.plot([mx], [my], marker="o", ms=7 if own else 5, mfc="k" if own else "white", mec="k", ls="none")
        ax.annotate(mic.name + (" (now)" if own else ""), (mx, my), xytext=(4, 4), textcoords="offset points",
                    fontsize=7)
    for t in rig.talkers:
        if t.mic == m.mic:
            ax.plot([t.position_m[0]], [t.position_m[1]], marker="^", ms=6, mfc="white", mec="k", ls="none")
            ax.annotate(t.name, (t.position_m[0], t.position_m[1]), xytext=(4, -10), textcoords="offset points",
                        fontsize=7)
    b = m.best["position_m"]
    ax.plot([b[0]], [b[1]], marker="*", ms=16, mfc="white", mec="k", mew=1.2, ls="none", label="best")
    baz = m.best.get("azimuth_deg")
    if baz is not None:
        a = math.radians(baz)
        ax.annotate("", xy=(b[0] + 0.7 * arrow * math.cos(a), b[1] + 0.7 * arrow * math.sin(a)), xytext=(b[0], b[1]),
                    arrowprops=dict(arrowstyle="->", lw=1.2, color="k", ls="--"))
    ax.set_aspect("equal")
    ax.set_xlabel("x (m)")
    ax.set_ylabel("y (m)")
    cur = m.current.get("margin_db")
    best = m.best.get("margin_db")
    ax.set_title(
        f"{m.rig_name}: where to put mic {m.mic!r} (capsule {m.height_m:g} m above the floor, talker {m.talker_mode})\n"
        + (f"best ★ {_fmt(best)} dB at ({b[0]:g}, {b[1]:g}) m · now {_fmt(cur)} dB" if m.best.get("better", True)
         else f"no better position in the searched area · now {_fmt(cur)} dB (best ★ {_fmt(best)} dB)"),
        fontsize=9,
    )
    fig.text(0.01, 0.01, "squares: loudspeakers with aims · filled circle: the mic now · triangle: its talker · "
             "★ best position and aim", fontsize=7)
    fig.tight_layout(rect=(0, 0.03, 1, 1))
    return fig


def _fmt(v) -> str:
    return "—" if v is None else f"{v:+.1f}"


def _nice_levels(lo: float, hi: float) -> list[float]:
    span = hi - lo
    for step in (0.25, 0.5, 1.0, 2.0, 3.0, 5.0, 10.0, 20.0):
        if span / step <= 8:
            break
    first = math.ceil(lo / step) * step
    levels = list(np.arange(first, hi, step))
    return [float(v) for v in levels if lo < v < hi]


def save_map_png(m: PlacementMap, rig: Rig, path, *, option: str | None = None) -> None:
    """Write the map as PNG atomically (:func:`howl.fileio.atomic_path`); errors name ``option``."""
    from howl.fileio import atomic_path

    fig = map_figure(m, rig)
    with atomic_path(path, option=option) as tmp:
        fig.savefig(tmp, format="png")
