"""Page layout and drawing of the gain-margin sheet (private; see :mod:`howl.sheet`).

Everything here uses the ``matplotlib.figure.Figure`` API (no pyplot state).
Import this module only inside functions: it imports matplotlib at the top.
Positions are in PostScript points from the page's top-left corner.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any

from howl.errors import InputError
from howl.report.sheet import (
    PAPER_PT,
    Curve,
    MapItem,
    MarginMap,
    MeasuredLine,
    MicLine,
    PlacementMap,
    SheetData,
    _band_hz,
    _hz,
    _num,
)


from howl.report._fonts import _BLACK, _GREY, _LIGHT, _MARGIN_PT, _cut_to_width, _text_width_pt  # noqa: F401  re-exported


class _Page:
    """One page: helpers that place things in points from the top-left."""

    def __init__(self, paper: str, number: int):
        from matplotlib.figure import Figure

        self.w_pt, self.h_pt = PAPER_PT[paper]
        self.fig = Figure(figsize=(self.w_pt / 72.0, self.h_pt / 72.0), dpi=72)
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        self.canvas = FigureCanvasAgg(self.fig)
        self.number = number
        self.left = _MARGIN_PT
        self.right = self.w_pt - _MARGIN_PT
        self.top = _MARGIN_PT
        self.bottom = self.h_pt - _MARGIN_PT - 12.0  # room for the footer
        self.y = self.top

    @property
    def width(self) -> float:
        return self.right - self.left

    def fx(self, x_pt: float) -> float:
        return x_pt / self.w_pt

    def fy(self, y_pt: float) -> float:
        return 1.0 - y_pt / self.h_pt

    def text(self, x, y, s, size=9.0, weight="normal", ha="left", va="baseline", color=_BLACK, max_w=None, **kw):
        t = self.fig.text(self.fx(x), self.fy(y), s, fontsize=size, fontweight=weight, ha=ha, va=va, color=color, **kw)
        if max_w is not None:
            self.fit(t, max_w)
        return t

    def fit(self, t, max_w: float, min_size: float = 6.0) -> None:
        """Shrink a text until it fits ``max_w`` points; then cut it with an ellipsis."""
        weight = t.get_fontweight()
        size = t.get_fontsize()
        s = t.get_text()
        while _text_width_pt(s, size, weight) > max_w and size > min_size:
            size = max(min_size, size - 0.5)
        t.set_fontsize(size)
        if _text_width_pt(s, size, weight) > max_w:
            t.set_text(_cut_to_width(s, size, weight, max_w))

    def width_of(self, s: str, size: float, weight: str = "normal") -> float:
        return _text_width_pt(s, size, weight)

    def hline(self, x0, x1, y, lw=0.8, color=_BLACK, ls="-"):
        from matplotlib.lines import Line2D

        self.fig.add_artist(
            Line2D([self.fx(x0), self.fx(x1)], [self.fy(y), self.fy(y)], lw=lw, color=color, ls=ls, transform=self.fig.transFigure)
        )

    def vline(self, x, y0, y1, lw=0.8, color=_BLACK):
        from matplotlib.lines import Line2D

        self.fig.add_artist(Line2D([self.fx(x), self.fx(x)], [self.fy(y0), self.fy(y1)], lw=lw, color=color, transform=self.fig.transFigure))

    def rect(self, x, y, w, h, lw=0.8, fill=None, edge=_BLACK, hatch=None):
        from matplotlib.patches import Rectangle

        self.fig.add_artist(
            Rectangle(
                (self.fx(x), self.fy(y + h)), w / self.w_pt, h / self.h_pt, lw=lw,
                facecolor=fill if fill else "none", edgecolor=edge, hatch=hatch, transform=self.fig.transFigure,
            )
        )

    def axes(self, x, y, w, h):
        return self.fig.add_axes((self.fx(x), self.fy(y + h), w / self.w_pt, h / self.h_pt))

    def wrap(self, s: str, size: float, max_w: float, weight: str = "normal") -> list[str]:
        """Greedy word wrap measured with the real font."""
        words = s.split()
        lines, cur = [], ""
        for w in words:
            trial = f"{cur} {w}".strip()
            if cur and self.width_of(trial, size, weight) > max_w:
                lines.append(cur)
                cur = w
            else:
                cur = trial
        if cur:
            lines.append(cur)
        return lines


class _Block:
    """A piece of the page flow: knows its height and draws itself at a y."""

    def __init__(self, height: float, draw, gap: float = 8.0):
        self.height = height
        self.draw = draw
        self.gap = gap  # space after the block


# --- header ------------------------------------------------------------------


def _header(page: _Page, data: SheetData, continued: bool) -> float:
    y0 = page.y
    bar_h = 15.0
    page.rect(page.left, y0, page.width, bar_h, lw=0, fill=_BLACK)
    title = "GAIN SHEET" + (f"  (continued) \u2022 {data.rig_name}" if continued else "")
    page.text(page.left + 6, y0 + 11, title, size=9, weight="bold", color="white", max_w=page.width - 110)
    page.text(page.right - 6, y0 + 11, f"made {data.date}", size=8, color="white", ha="right")
    if continued:
        return bar_h + 12.0
    # FSM box on the right
    box_w, box_h = 108.0, 46.0
    bx = page.right - box_w
    by = y0 + bar_h + 6.0
    page.rect(bx, by, box_w, box_h, lw=1.6)
    page.text(bx + box_w / 2, by + 11.0, "FSM (stability margin)", size=6.5, weight="bold", ha="center", max_w=box_w - 6)
    page.text(bx + box_w / 2, by + 36.0, f"{_num(data.fsm_db, sign=False)} dB", size=20, weight="bold", ha="center", max_w=box_w - 8)
    avail = page.width - box_w - 12.0
    page.text(page.left, by + 19.0, data.rig_name, size=21, weight="bold", max_w=avail)
    page.text(page.left, by + 34.0, f"Room: {data.room_name}", size=10, max_w=avail)
    page.text(page.left, by + 47.0, "Numbers rest on: " + data.basis_words, size=9, weight="bold", max_w=avail)
    y = by + box_h + 6.0
    page.hline(page.left, page.right, y, lw=1.2)
    return y - y0 + 8.0


# --- tables --------------------------------------------------------------------


_VERDICT_STYLE = {
    # word on the page, text colour, box fill, box edge width: inverted for the
    # worst case, outlined for the middle one, plain for stable (readable in B&W)
    "will howl": ("WILL HOWL", "white", _BLACK, 1.5),
    "marginal": ("MARGINAL", _BLACK, "white", 1.5),
    "stable": ("STABLE", _BLACK, None, 0.0),
    "muted": ("muted", _GREY, None, 0.0),
}


def _verdict(page: _Page, x: float, y: float, verdict: str | None, size: float, max_w: float):
    key = (verdict or "").strip().lower()
    word, fg, fill, lw = _VERDICT_STYLE.get(key, ((verdict or "\u2013").upper(), _BLACK, None, 0.0))
    bbox = None
    if fill is not None:
        bbox = dict(boxstyle="square,pad=0.25", facecolor=fill, edgecolor=_BLACK, lw=lw)
    t = page.text(x, y, word, size=size, weight="bold", color=fg, bbox=bbox)
    page.fit(t, max_w - 4)


def _measured_table_blocks(data: SheetData) -> list[_Block]:
    if not data.measured:
        return []
    cols = [
        ("loop", "MEASURED LOOP", 0.22),
        ("gm", "PHASE-AWARE\nmargin dB", 0.13),
        ("mm", "PHASE-BLIND\nmargin dB", 0.13),
        ("plan", "PLANNED\nsame pair, blind", 0.13),
        ("hz", "HOWLS FIRST\nat", 0.12),
        ("mark", "DON'T GO PAST", 0.13),
        ("verdict", "VERDICT", 0.14),
    ]
    head_h, row_h, title_h = 24.0, 26.0, 16.0

    def make(chunk, first):
        def draw(page: _Page, y: float) -> None:
            page.text(page.left, y + 11, f"MEASURED {data.measured_date}" + ("" if first else " (continued)"), size=10, weight="bold")
            page.text(page.right, y + 11, "measured: dB at the settings during the measurement; PLANNED: at the rig's "
                      "stated gains", size=7, ha="right")
            yh = y + title_h
            page.rect(page.left, yh, page.width, head_h, lw=0, fill=_LIGHT)
            x = page.left
            xs = {}
            for key, title, frac in cols:
                w = frac * page.width
                xs[key] = (x, w)
                for i, part in enumerate(title.split("\n")):
                    page.text(x + 4, yh + 10 + 9 * i, part, size=7.5 if i == 0 else 6.5, weight="bold" if i == 0 else "normal")
                x += w
            page.hline(page.left, page.right, yh + head_h, lw=1.0)
            yy = yh + head_h
            for m in chunk:
                base = yy + 18
                page.text(xs["loop"][0] + 4, base, m.label, size=10, weight="bold", max_w=xs["loop"][1] - 6)
                page.text(xs["gm"][0] + 4, base, _num(m.gain_margin_db), size=12, weight="bold", max_w=xs["gm"][1] - 6)
                page.text(xs["mm"][0] + 4, base, _num(m.magnitude_margin_db), size=12, max_w=xs["mm"][1] - 6)
                page.text(xs["plan"][0] + 4, base, _num(m.planned_magnitude_margin_db), size=12, max_w=xs["plan"][1] - 6)
                page.text(xs["hz"][0] + 4, base, _hz(m.howl_freq_hz, exact=True), size=12, max_w=xs["hz"][1] - 6)
                page.text(xs["mark"][0] + 4, base, f"{_num(m.max_channel_gain_db)} dB", size=14, weight="bold", max_w=xs["mark"][1] - 6)
                _verdict(page, xs["verdict"][0] + 6, base, m.verdict, 11, xs["verdict"][1] - 6)
                page.hline(page.left, page.right, yy + row_h, lw=0.4, color=_GREY)
                yy += row_h

        return _Block(title_h + head_h + row_h * len(chunk) + 8.0, draw)

    rows = list(data.measured)
    blocks = [make(rows[i : i + 14], i == 0) for i in range(0, len(rows), 14)]
    if data.measured_settings_db:
        line = "Settings during the measurement: " + ", ".join(f"{k} {_num(v)} dB" for k, v in data.measured_settings_db)

        def draw_settings(page: _Page, y: float) -> None:
            page.text(page.left, y + 8, line, size=8, max_w=page.width)

        blocks.append(_Block(12.0, draw_settings))
    return blocks


def _cuts_blocks(data: SheetData, proto: _Page) -> list[_Block]:
    """One block per loop: the cuts (left) and what they buy (right, big)."""
    if not data.cut_sets:
        return []
    blocks = []
    title_h, head_h, row_h = 16.0, 22.0, 18.0
    table_frac = 0.60
    cols = [("n", "#", 0.07), ("hz", "CENTRE Hz", 0.27), ("g", "GAIN dB", 0.23), ("q", "Q", 0.18), ("bw", "WIDTH oct", 0.25)]
    foot_size = 7.5
    for cs in data.cut_sets:
        n_rows = max(len(cs.cuts), 1)
        n_adv = len(cs.advice) if cs.source == "listen" else min(len(cs.advice), 3)
        foot = (
            ([f"Stopped because: {cs.stopped_because}"] if cs.stopped_because else [])
            + (
                [f"Tonal cost: {_num(cs.tonal_cost_db, sign=False)} dB of broadband (pink) program, "
                 f"{_num(cs.tonal_cost_speech_db, sign=False)} dB speech-weighted"]
                if cs.tonal_cost_db is not None else []
            )
            + [(a if cs.source == "listen" else f"Advice: {a}") for a in cs.advice[:n_adv]]
            + ([f"Desk: {cs.desk}"] if getattr(cs, "desk", "") else [])
        )
        # the foot runs under the table, clear of the ASG box on the right
        foot_lines = [ln for f in foot for ln in proto.wrap(f, foot_size, table_frac * proto.width - 8)]
        foot_h = 10.0 * len(foot_lines) + 6.0
        h = title_h + head_h + row_h * n_rows + foot_h
        h = max(h, title_h + 94.0)

        def draw(page: _Page, y: float, cs=cs, n_rows=n_rows, foot_lines=foot_lines) -> None:
            title = f"CUTS FROM RING-OUT for {cs.loop}" if cs.source == "ring-out" else f"CUTS FOUND BY LISTENING: {cs.loop}"
            page.text(page.left, y + 11, title, size=10, weight="bold", max_w=page.width)
            tw = table_frac * page.width
            yh = y + title_h
            page.rect(page.left, yh, tw, head_h, lw=0, fill=_LIGHT)
            x = page.left
            xs = {}
            for key, title, frac in cols:
                w = frac * tw
                xs[key] = (x, w)
                page.text(x + 4, yh + 14, title, size=7.5, weight="bold", max_w=w - 4)
                x += w
            page.hline(page.left, page.left + tw, yh + head_h, lw=1.0)
            yy = yh + head_h
            if not cs.cuts:
                page.text(page.left + 4, yy + 13, "no cut bought a useful amount of stable gain", size=9, max_w=tw - 8)
                yy += row_h
            for i, c in enumerate(cs.cuts, 1):
                base = yy + 14
                page.text(xs["n"][0] + 4, base, str(i), size=10)
                hz = f"{c.band} slider" if getattr(c, "band", "") else _hz(c.freq_hz, exact=True).replace(" Hz", "")
                page.text(xs["hz"][0] + 4, base, hz, size=12, weight="bold")
                page.text(xs["g"][0] + 4, base, "notch" if c.gain_db is None else _num(c.gain_db), size=12, weight="bold")
                page.text(xs["q"][0] + 4, base, f"{c.q:.2f}", size=11)
                page.text(xs["bw"][0] + 4, base, f"{c.bandwidth_oct:.3f}", size=11)
                page.hline(page.left, page.left + tw, yy + row_h, lw=0.3, color=_GREY)
                yy += row_h
            for j, line in enumerate(foot_lines):
                page.text(page.left + 4, yy + 11 + 10 * j, line, size=foot_size)
            # what they buy
            bx = page.left + tw + 14.0
            bw = page.width - tw - 14.0
            bh = 74.0 if cs.mark_after_db is None else 90.0
            page.rect(bx, yh, bw, bh, lw=1.6)
            if cs.mark_after_db is not None:
                page.text(bx + bw / 2, yh + 83, f"with these cuts in: DON'T GO PAST {_num(cs.mark_after_db)} dB", size=8,
                          weight="bold", ha="center", max_w=bw - 8)
            page.text(bx + bw / 2, yh + 14, "THESE CUTS BUY", size=8, weight="bold", ha="center")
            if cs.added_stable_gain_db is None:
                page.text(bx + bw / 2, yh + 40, "not known", size=16, weight="bold", ha="center", max_w=bw - 8)
                page.text(bx + bw / 2, yh + 60, "measure the loop (--measured) to know", size=7, ha="center", max_w=bw - 8)
                return
            page.text(bx + bw / 2, yh + 42, f"{_num(cs.added_stable_gain_db)} dB", size=24, weight="bold", ha="center", max_w=bw - 8)
            page.text(bx + bw / 2, yh + 54, "added stable gain (ASG)", size=7, ha="center", max_w=bw - 8)
            page.text(
                bx + bw / 2, yh + 67,
                f"phase-aware margin {_num(cs.margin_before_db)} \u2192 {_num(cs.margin_after_db)} dB", size=7.5, ha="center",
                max_w=bw - 8,
            )

        blocks.append(_Block(h, draw))
    return blocks


from howl.report._page_plots import _loop_panel, _map_panel  # noqa: E402  the plot panels


def _plot_blocks(data: SheetData, panel_h: float = 112.0, map_h: float = 200.0) -> list[_Block]:
    panels: dict[str, list[Curve]] = {}
    for c in data.curves:
        panels.setdefault(c.panel, []).append(c)
    items: list[tuple[str, Any]] = [("loop", (k, v)) for k, v in panels.items()]
    ncol = 3
    if data.placement is not None and data.placement.items and data.margin_maps:
        # placement maps get their own rows, full size: the contours need the room
        own_maps = [(data.placement, mm) for mm in data.margin_maps]
    elif data.placement is not None and data.placement.items:
        own_maps = []
        crowded = len(data.placement.items) > 14
        if not crowded and len(items) % ncol != 0:
            items.append(("map", data.placement))
        else:
            own_maps = [(data.placement, None)]
    else:
        own_maps = []
    if not items and not own_maps:
        return []
    title_h = 35.0 if data.measured else 26.0
    blocks = []
    rows = [items[i : i + ncol] for i in range(0, len(items), ncol)]
    for r, row in enumerate(rows):
        first = r == 0
        n_leg = max(
            [math.ceil(sum(c.kind == "measured" for c in obj[1]) / 2) if kind == "loop" else 0 for kind, obj in row] + [0]
        )
        extra = 9.0 * n_leg

        def draw(page: _Page, y: float, row=row, first=first) -> None:
            if first:
                page.text(page.left, y + 11, "LOOP GAIN vs FREQUENCY", size=10, weight="bold")
                page.text(
                    page.left, y + 22,
                    "solid line at 0 dB: howls    dashed: \u2212FSM    thick steps: planned band worst peak (\u25b3 rings first)    dotted: band average",
                    size=7, max_w=page.width,
                )
                if data.measured:
                    page.text(page.left, y + 31, "thin lines: measured |H|, one style per loudspeaker    "
                              "\u25bc howls first    \u25bd the next crossings", size=7, max_w=page.width)
            gap = 36.0
            w = (page.width - gap * (ncol - 1) - 24.0) / ncol
            for i, (kind, obj) in enumerate(row):
                x = page.left + 28.0 + i * (w + gap)
                top = y + (title_h if first else 0.0) + 14.0
                h = panel_h - 14.0 - (36.0 if kind == "map" else 22.0)
                ax = page.axes(x, top, w, h)
                if kind == "loop":
                    _loop_panel(ax, obj[0], obj[1], data.fsm_db, legend=any(c.kind == "measured" for c in obj[1]))
                else:
                    _map_panel(ax, obj)

        blocks.append(_Block((title_h if first else 0.0) + panel_h + extra, draw))
    for pm, mm in own_maps:

        def draw_map(page: _Page, y: float, pm=pm, mm=mm) -> None:
            ax = page.axes(page.left + 28.0, y + 16.0, page.width * 0.62, map_h - 46.0)
            _map_panel(ax, pm, legend_right=True, mm=mm)
            if mm is not None:
                page.text(
                    page.left + page.width * 0.70, y + map_h - 40.0,
                    "contours: margin dB with the mic there", size=6.5, max_w=page.width * 0.3,
                )
                page.text(
                    page.left + page.width * 0.70, y + map_h - 30.0,
                    "hatched: below 0 dB", size=6.5, max_w=page.width * 0.3,
                )

        blocks.append(_Block(map_h, draw_map))
    return blocks


# --- cautions and notes -------------------------------------------------------------


def _cautions_block(page_proto: _Page, data: SheetData) -> _Block:
    size = 8.0
    lead = 9.8
    inner_w = page_proto.width - 22.0 - 70.0
    wrapped = [(h, page_proto.wrap(t, size, inner_w)) for h, t in data.cautions]
    h = 20.0 + sum(len(ls) * lead + 4.0 for _, ls in wrapped) + 6.0

    def draw(page: _Page, y: float) -> None:
        page.rect(page.left, y, page.width, h, lw=2.0)
        page.rect(page.left, y, 10.0, h, lw=0, fill=_BLACK)
        page.text(page.left + 18, y + 14, "\u26a0 CAUTIONS", size=10, weight="bold")
        yy = y + 14 + 13
        for head, ls in wrapped:
            page.text(page.left + 18, yy, head, size=size, weight="bold")
            for line in ls:
                page.text(page.left + 18 + 70, yy, line, size=size)
                yy += lead
            yy += 4.0

    return _Block(h, draw)


def _notes_blocks(page_proto: _Page, data: SheetData, size: float = 6.5) -> list[_Block]:
    """The small print, one block per paragraph so it can run on over a page break."""
    lead = size * 1.23
    blocks = []
    for i, note in enumerate(data.notes):
        lines = page_proto.wrap(note, size, page_proto.width)
        head = 10.0 if i == 0 else 0.0
        h = head + len(lines) * lead + 2.0

        def draw(page: _Page, y: float, lines=lines, head=head) -> None:
            if head:
                page.text(page.left, y + 7, "HOW THESE NUMBERS WERE MADE", size=7, weight="bold")
            yy = y + head + lead
            for line in lines:
                page.text(page.left, yy, line, size=size)
                yy += lead

        blocks.append(_Block(h, draw, gap=0.0))
    return blocks


# --- page flow -----------------------------------------------------------------------


def _layout(data: SheetData, paper: str) -> list[_Page]:
    proto = _Page(paper, 0)
    n = max(len(data.mics), 1)
    scale = 1.0 if n <= 5 else max(0.72, 1.0 - 0.04 * (n - 5))

    def flow(panel_h: float, map_h: float, notes_size: float) -> list[_Block]:
        blocks: list[_Block] = []
        from howl.report._page_mics import mic_table_blocks

        blocks += mic_table_blocks(proto.width, data, scale, paper)
        blocks += _measured_table_blocks(data)
        blocks += _plot_blocks(data, panel_h, map_h)
        blocks += _cuts_blocks(data, proto)
        blocks += _notes_blocks(proto, data, notes_size)
        return blocks

    cautions = _cautions_block(proto, data)
    hp = _Page(paper, 0)
    header_h = _header(hp, data, continued=False)
    room = (hp.bottom - cautions.height - 8.0) - (hp.top + header_h)

    def free(blocks: list[_Block]) -> float:
        return room - sum(b.height + b.gap for b in blocks)

    # the normal layout; if it spills over a little, a compact one that fits one page
    base_h = 112.0
    blocks = flow(base_h, 200.0, 6.5)
    if free(blocks) < 0:
        compact = flow(92.0, 150.0, 6.0)
        if free(compact) >= 0:
            blocks = compact
    n_plot_rows = len(_plot_blocks(data, base_h))
    if free(blocks) > 0 and n_plot_rows and blocks[0].height > 0:
        # everything fits on one page: give the spare height to the plots
        grown = flow(base_h + min(70.0, (free(blocks) - 4.0) / n_plot_rows), 200.0, 6.5)
        if free(grown) >= 0:
            blocks = grown

    pages: list[_Page] = []

    def new_page() -> _Page:
        p = _Page(paper, len(pages) + 1)
        p.y += _header(p, data, continued=bool(pages))
        if not pages:
            # the cautions always sit at the foot of page 1
            p.bottom -= cautions.height + 8.0
            cautions.draw(p, p.bottom + 8.0)
        pages.append(p)
        return p

    page = new_page()
    for b in blocks:
        if page.y + b.height > page.bottom and page.y > page.top + 130:
            page = new_page()
        b.draw(page, page.y)
        page.y += b.height + b.gap
    for p in pages:
        foot = f"howl gain sheet \u2022 {data.rig_name} \u2022 page {p.number} of {len(pages)}"
        p.text(p.left, p.h_pt - _MARGIN_PT + 4, foot, size=6.5, color=_GREY)
        p.text(p.right, p.h_pt - _MARGIN_PT + 4, "an estimate: local codes, venue rules and licensed practice come first", size=6.5, ha="right", color=_GREY)
    return pages


def render(data: SheetData, path: str | os.PathLike, *, paper: str = "a4", png_dpi: int = 150) -> list[str]:
    """Render the sheet to ``path`` (``.pdf`` or ``.png``), atomically.

    A PDF holds every page (fonts embedded as TrueType, ``pdf.fonttype`` 42,
    set in a local ``rc_context`` so global matplotlib state is untouched).
    A PNG holds page 1; further pages go to ``NAME-2.png``, ``NAME-3.png``...
    Returns the files written.
    """
    import matplotlib

    from howl.fileio import atomic_path

    paper = paper.lower()
    if paper not in PAPER_PT:
        raise InputError(f"must be one of {', '.join(PAPER_PT)}, got {paper!r}", key="--paper")
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix not in (".pdf", ".png"):
        raise InputError(f"must end in .pdf or .png, got {p.name!r}", key="-o")
    from howl.report._fonts import printable_sheet

    data, families = printable_sheet(data)
    rc = {
        "pdf.fonttype": 42,
        "ps.fonttype": 42,
        "font.family": families,
        "axes.unicode_minus": True,
        "path.simplify": True,
        "hatch.color": "black",
        "hatch.linewidth": 0.5,
    }
    with matplotlib.rc_context(rc):
        pages = _layout(data, paper)
        if suffix == ".pdf":
            from matplotlib.backends.backend_pdf import PdfPages

            with atomic_path(p, option="--out") as tmp:
                with PdfPages(
                    str(tmp),
                    metadata={"Title": f"Gain sheet: {data.rig_name}", "Subject": f"Room: {data.room_name}", "Creator": "howl"},
                ) as pdf:
                    for pg in pages:
                        pdf.savefig(pg.fig)
            return [str(p)]
        from howl.report._png import write_png_pages

        return write_png_pages([pg.fig for pg in pages], p, png_dpi)
