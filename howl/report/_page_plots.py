"""The plot panels of the gain-margin sheet (private; drawn into axes that :mod:`howl.report._page`
places): loop gain against frequency per mic, and the plan view with its margin contours.

Uses the ``matplotlib`` axes API only (no pyplot state); import inside functions, as ``_page``.
"""

from __future__ import annotations

import math
from howl.report._fonts import _BLACK, _text_width_pt
from howl.report.sheet import Curve, MapItem, MarginMap, PlacementMap, _band_hz, _hz, _num

# --- plots ---------------------------------------------------------------------

_MEASURED_STYLES = [("-", 0.9, "0.35"), ("--", 0.9, "0.25"), (":", 1.2, "0.2"), ("-.", 0.9, "0.3")]


def _style_axes(ax) -> None:
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(labelsize=7, length=2.5, width=0.6)
    for s in ax.spines.values():
        s.set_linewidth(0.6)


def _loop_panel(ax, mic: str, curves: list[Curve], fsm_db: float, legend: bool) -> None:
    from matplotlib.ticker import FixedLocator, NullFormatter, NullLocator

    ax.set_xscale("log")
    ymax, ymin = 3.0, -30.0
    fmin, fmax = 1e9, 0.0
    for c in curves:
        if not c.freq_hz:
            continue
        fmin, fmax = min(fmin, min(c.freq_hz)), max(fmax, max(c.freq_hz))
        ymax = max(ymax, max(c.loop_gain_db) + 3.0)
        ymin = min(ymin, max(min(c.loop_gain_db), max(c.loop_gain_db) - 40.0) - 2.0)
    if fmax <= fmin:
        fmin, fmax = 100.0, 10000.0
    ymax = min(ymax, 30.0)
    n_meas = 0
    for c in curves:
        if c.kind == "planned":
            ax.step(c.freq_hz, c.loop_gain_db, where="mid", color=_BLACK, lw=2.0, label="planned, band peak", zorder=3)
        elif c.kind == "planned-average":
            ax.step(c.freq_hz, c.loop_gain_db, where="mid", color=_BLACK, lw=0.8, ls=":", label="planned, band average", zorder=3)
        else:
            ls, lw, col = _MEASURED_STYLES[n_meas % len(_MEASURED_STYLES)]
            n_meas += 1
            ax.plot(c.freq_hz, c.loop_gain_db, ls=ls, lw=lw, color=col, label=c.label.replace("measured ", "meas. "), zorder=2)
    ax.axhline(0.0, color=_BLACK, lw=1.3, zorder=2.5)
    ax.axhline(-fsm_db, color=_BLACK, lw=0.9, ls=(0, (4, 2)), zorder=2.5)
    lx0, lx1 = math.log(fmin / 1.1), math.log(fmax * 1.1)
    for c in curves:
        for f, g, txt in c.marks:
            pos = (math.log(f) - lx0) / (lx1 - lx0) if f > 0 else 0.5
            ha = "left" if pos < 0.15 else ("right" if pos > 0.85 else "center")
            if c.kind == "planned":
                ax.plot([f], [g], marker="^", ms=7, mfc="white", mec=_BLACK, mew=1.4, zorder=5, ls="none")
                ax.annotate(_band_hz(f), (f, g), xytext=(0, 6), textcoords="offset points", ha=ha, fontsize=6.5, weight="bold",
                            bbox=dict(boxstyle="square,pad=0.1", fc="white", ec="none"), zorder=7)
            elif txt == "howls first":
                ax.plot([f], [g], marker="v", ms=7, mfc=_BLACK, mec=_BLACK, zorder=6, ls="none")
                ax.annotate(_hz(f, exact=True), (f, g), xytext=(0, 7), textcoords="offset points", ha=ha, fontsize=6.5, weight="bold",
                            bbox=dict(boxstyle="square,pad=0.1", fc="white", ec="none"), zorder=7)
            else:  # the next worst crossings: hollow, unlabelled
                ax.plot([f], [g], marker="v", ms=5, mfc="white", mec=_BLACK, mew=1.0, zorder=6, ls="none")
    ax.set_xlim(fmin / 1.1, fmax * 1.1)
    ax.set_ylim(ymin, ymax)
    ticks = [t for t in (31.5, 63, 125, 250, 500, 1000, 2000, 4000, 8000, 16000) if fmin / 1.1 <= t <= fmax * 1.1]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_minor_locator(NullLocator())
    ax.xaxis.set_minor_formatter(NullFormatter())
    # label every other octave so the labels never collide on a small panel
    ax.set_xticklabels([(f"{t / 1000:g}k" if t >= 1000 else f"{t:g}") if i % 2 == 0 else "" for i, t in enumerate(ticks)])
    ax.grid(True, which="major", color="0.8", lw=0.4)
    _style_axes(ax)
    ax.set_title(mic, fontsize=10, weight="bold", loc="left", pad=3)
    ax.set_ylabel("loop gain dB", fontsize=7, labelpad=1)
    ax.set_xlabel("Hz", fontsize=7, labelpad=1)
    if legend:
        handles = [h for h in ax.get_lines() if h.get_label().startswith("meas")]
        ax.legend(
            handles=handles,
            fontsize=6, loc="upper center", bbox_to_anchor=(0.5, -0.30), ncol=2, frameon=False,
            handlelength=2.6, columnspacing=0.8, handletextpad=0.4,
        )


def _margin_contours(ax, mm: MarginMap) -> None:
    """The placement map in black and white: labelled contour lines of the margin
    (0 dB solid and thick, negative dashed) and hatching where the margin is below 0 dB."""
    import numpy as np

    z = np.array([[np.nan if v is None else v for v in row] for row in mm.margin_db], dtype=float)
    if not np.isfinite(z).any():
        return
    x, y = np.asarray(mm.x_m), np.asarray(mm.y_m)
    lo, hi = float(np.nanmin(z)), float(np.nanmax(z))
    if lo < 0.0:
        ax.contourf(x, y, z, levels=[lo - 1.0, 0.0], colors="none", hatches=["////"], zorder=1)
    span = max(hi - lo, 1e-6)
    step = next((st for st in (0.25, 0.5, 1.0, 2.0, 5.0, 10.0) if span / st <= 6.0), 20.0)
    levels = [float(v) for v in np.arange(math.floor(lo / step) * step, hi + step, step) if lo < v < hi]
    if lo < 0.0 < hi and 0.0 not in levels:
        levels = sorted(levels + [0.0])
    if levels:
        cs = ax.contour(
            x, y, z, levels=levels, colors=_BLACK, zorder=2,
            linewidths=[1.6 if abs(v) < 1e-9 else 0.6 for v in levels],
            linestyles=["-" if v >= 0 else "--" for v in levels],
        )
        digits = 0 if step >= 1.0 else (1 if step >= 0.5 else 2)
        ax.clabel(cs, fmt=lambda v: f"{v:+.{digits}f}".replace("-", "\u2212"), fontsize=5.5, inline=True)
    if mm.best_position_m is not None:
        bx, by = mm.best_position_m[0], mm.best_position_m[1]
        ax.plot([bx], [by], marker="P", ms=8, mfc="white", mec=_BLACK, mew=1.2, ls="none", zorder=6, label="best spot")


def _map_panel(ax, pm: PlacementMap, legend_right: bool = False, mm: MarginMap | None = None) -> None:
    import numpy as np

    if mm is not None:
        _margin_contours(ax, mm)

    marker = {"speaker": ("s", _BLACK, _BLACK), "mic": ("o", "white", _BLACK), "listener": ("D", "white", _BLACK), "talker": ("+", _BLACK, _BLACK)}
    xs = [i.x_m for i in pm.items] or [0.0]
    ys = [i.y_m for i in pm.items] or [0.0]
    if pm.outline_m is not None:
        L, W = pm.outline_m
        ax.add_patch(__import__("matplotlib.patches", fromlist=["Rectangle"]).Rectangle((0, 0), L, W, fill=False, lw=1.4, ec=_BLACK))
        x0, x1, y0, y1 = 0.0, L, 0.0, W
    else:
        x0, x1, y0, y1 = min(xs), max(xs), min(ys), max(ys)
    span = max(x1 - x0, y1 - y0, 1.0)
    arrow = 0.07 * span
    seen = set()
    for it in pm.items:
        m, fc, ec = marker.get(it.kind, ("x", _BLACK, _BLACK))
        lab = it.kind if it.kind not in seen else None
        seen.add(it.kind)
        ax.plot([it.x_m], [it.y_m], marker=m, ms=6 if it.kind != "talker" else 7, mfc=fc, mec=ec, mew=1.0, ls="none", label=lab, zorder=4)
        if it.azimuth_rad is not None and it.kind in ("speaker", "mic"):
            ax.annotate(
                "", xy=(it.x_m + arrow * np.cos(it.azimuth_rad), it.y_m + arrow * np.sin(it.azimuth_rad)), xytext=(it.x_m, it.y_m),
                arrowprops=dict(arrowstyle="->", lw=0.8, color=_BLACK), zorder=3,
            )
    pad = 0.06 * span
    ax.set_xlim(x0 - pad, x1 + pad)
    ax.set_ylim(y0 - pad, y1 + pad)
    ax.set_aspect("equal", adjustable="box")
    _place_map_labels(ax, [it for it in pm.items if it.kind in ("speaker", "mic")])
    _style_axes(ax)
    if mm is None:
        ax.set_title("PLAN VIEW", fontsize=10, weight="bold", loc="left", pad=3)
    else:
        best = "" if mm.best_margin_db is None else f", best {_num(mm.best_margin_db)}"
        now = "" if mm.current_margin_db is None else f" (now {_num(mm.current_margin_db)})"
        ax.set_title(f"WHERE {mm.mic} COULD GO: margin dB{best}{now}", fontsize=8, weight="bold", loc="left", pad=3)
    ax.set_xlabel("x m (length)", fontsize=7, labelpad=1)
    ax.set_ylabel("y m", fontsize=7, labelpad=1)
    if legend_right:
        ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.04, 1.0), ncol=1, frameon=False, handletextpad=0.4)
    else:
        ax.legend(fontsize=6, loc="upper center", bbox_to_anchor=(0.5, -0.30), ncol=4, frameon=False, handletextpad=0.3,
                  columnspacing=0.8)


def _place_map_labels(ax, items: list[MapItem]) -> None:
    """Name each marker, trying eight spots around it and taking the first free one.

    Works in display points after the axes limits are fixed; label boxes are
    estimated from the font's advance widths (:func:`_text_width_pt`).
    """
    fig = ax.figure
    ax.apply_aspect()
    to_pt = 72.0 / fig.dpi
    size = 6.0
    placed: list[tuple[float, float, float, float]] = []
    pts = []
    for it in items:
        x, y = ax.transData.transform((it.x_m, it.y_m))
        pts.append((x * to_pt, y * to_pt))
    for (px, py) in pts:  # markers are obstacles too
        placed.append((px - 3.5, py - 3.5, px + 3.5, py + 3.5))
    bb = ax.get_window_extent()
    ax_box = (bb.x0 * to_pt, bb.y0 * to_pt, bb.x1 * to_pt, bb.y1 * to_pt)
    for it, (px, py) in zip(items, pts):
        w = _text_width_pt(it.name, size)
        h = size * 1.1
        cands = [(5, 2), (5, -2 - h), (-5 - w, 2), (-5 - w, -2 - h), (-w / 2, 5), (-w / 2, -5 - h), (5, -h / 2), (-5 - w, -h / 2)]
        best, best_cost = cands[0], None
        for dx, dy in cands:
            box = (px + dx, py + dy, px + dx + w, py + dy + h)
            cost = sum(
                max(0.0, min(box[2], b[2]) - max(box[0], b[0])) * max(0.0, min(box[3], b[3]) - max(box[1], b[1])) for b in placed
            )
            outside = (box[2] - box[0]) * (box[3] - box[1]) - max(0.0, min(box[2], ax_box[2]) - max(box[0], ax_box[0])) * max(
                0.0, min(box[3], ax_box[3]) - max(box[1], ax_box[1])
            )
            cost += 2.0 * outside
            if best_cost is None or cost < best_cost - 1e-9:
                best, best_cost = (dx, dy), cost
            if cost == 0.0:
                break
        dx, dy = best
        placed.append((px + dx, py + dy, px + dx + w, py + dy + h))
        ax.annotate(it.name, (it.x_m, it.y_m), xytext=(dx, dy), textcoords="offset points", fontsize=size,
                    ha="left", va="bottom", zorder=5)
