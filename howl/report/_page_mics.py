"""The sheet's per-microphone table (private; split out of :mod:`howl.report._page`).

One row per mic, every planned figure on the plan's one basis (``howl plan --json``): the
stated gain in each mix, how far that fader may rise (DON'T GO PAST), the band that rings
first, the rig as set (AS SET), PAG and NAG with the classic Davis figures, and whether the
talker reaches the target (REACH). A measured loop is printed in its own column beside the
planned limit, labelled with its loudspeaker → mic pair: it never replaces the plan's figure.
Above the table, the limit of all open mics together. Imports matplotlib through ``_page``:
import it only inside functions.
"""

from __future__ import annotations

from howl.model._plan_limits import shortfall_shown_db
from howl.report._page import _BLACK, _GREY, _LIGHT, _MARGIN_PT, PAPER_PT, _Block, _Page, _verdict
from howl.report.sheet import MeasuredLine, MicLine, SheetData, _band_hz, _hz, _num

#: AS SET words: inverted box for "howls", outlined for "inside FSM", plain for "stable" (readable in B&W).
_STABILITY_WORD = {"stable": "stable", "inside_fsm": "marginal", "howls": "will howl"}
_STABILITY_TEXT = {"stable": "STABLE", "inside_fsm": "INSIDE FSM", "howls": "HOWLS"}

COLUMNS = [  # (key, title, width fraction); the first word of each title is unique (the tests read by it)
    ("mic", "MIC", 0.14),
    ("gains", "STATED\ngain per mix", 0.15),
    ("mark", "DON'T GO PAST\nthis fader, planned", 0.15),
    ("meas", "MEASURED\nloop, its pair", 0.13),
    ("ring", "RINGS\nFIRST", 0.085),
    ("stab", "AS SET\nthe rig now", 0.115),
    ("pag", "PAG\ndB", 0.075),
    ("nag", "NAG\ndB", 0.075),
    ("reach", "REACH\ntarget", 0.08),
]


def _stability_box(page: _Page, x: float, y: float, stab: str | None, size: float, max_w: float) -> None:
    key = _STABILITY_WORD.get(stab or "")
    if key is None:
        _verdict(page, x, y, stab, size, max_w)
        return
    from howl.report import _page as pg

    word, fg, fill, lw = pg._VERDICT_STYLE[key]
    bbox = None if fill is None else dict(boxstyle="square,pad=0.25", facecolor=fill, edgecolor=_BLACK, lw=lw)
    t = page.text(x, y, _STABILITY_TEXT[stab], size=size, weight="bold", color=fg, bbox=bbox)
    page.fit(t, max_w - 4)


def _together_line(data: SheetData) -> str:
    if data.headroom_together_db is None:
        return ""
    return (f"ALL OPEN MICS TOGETHER: don't go past {_num(data.headroom_together_db)} dB (rings first at "
            f"{_band_hz(data.rings_first_hz)}). Single-fader limits do not add.")


def _draw_head(page: _Page, y: float, head_h: float) -> None:
    """The table's column titles on a light band ``head_h`` tall."""
    x = page.left
    page.rect(page.left, y, page.width, head_h, lw=0, fill=_LIGHT)
    for _key, title, frac in COLUMNS:
        w = frac * page.width
        for i, part in enumerate(title.split("\n")):
            page.text(x + 3, y + 11 + 9 * i, part, size=7.5 if i == 0 else 6.0, weight="bold" if i == 0 else "normal",
                      max_w=w - 4)
        x += w
    page.hline(page.left, page.right, y + head_h, lw=1.0)

def _draw_row(page: _Page, y: float, m: MicLine, shade: bool, scale: float, row_h: float,
              meas: list[MeasuredLine]) -> None:
    """One mic's row: name, gains, planned and measured mark, ring band, stability, PAG/NAG, reach."""
    big, mid, small = 18.0 * scale, 12.0 * scale, max(6.0, 6.5 * scale)
    base, sub = y + row_h * 0.45, y + row_h * 0.80
    if shade:
        page.rect(page.left, y, page.width, row_h, lw=0, fill="0.95")
    xs, x = {}, page.left
    for key, _, frac in COLUMNS:
        xs[key] = (x, frac * page.width)
        x += frac * page.width

    def put(key, yy, s, size, **kw):
        page.text(xs[key][0] + 3, yy, s, size=size, max_w=xs[key][1] - 5, **kw)

    put("mic", base, m.name, mid, weight="bold")
    put("mic", sub, f"{m.pattern} at ({', '.join(f'{v:.1f}' for v in m.position_m)}) m", small)
    for i, (mix, g) in enumerate(m.gains_db[:3]):
        put("gains", y + 11 + 9 * i * scale, f"{mix} {_num(g)}", small + 0.5)
    if len(m.gains_db) > 3:
        put("gains", y + 11 + 27 * scale, f"+{len(m.gains_db) - 3} more mixes", small)
    if m.max_channel_gain_db is not None:
        put("mark", base + 2 * scale, f"{_num(m.max_channel_gain_db)} dB", big, weight="bold")
        put("mark", sub + 1, "planned, whole loop", small)
    else:
        put("mark", base, "\u2013", mid, weight="bold")
        why = ("mic muted in the rig" if not m.is_open or m.verdict in ("muted", None)
               else "others alone past FSM" if m.pag_basis == "together" else "no limit found")
        put("mark", sub + 1, why, small)
    if meas:
        worst = min(meas, key=lambda t: t.max_channel_gain_db)
        put("meas", base, f"{_num(worst.max_channel_gain_db)} dB", mid, weight="bold")
        put("meas", sub + 1, f"{worst.label}, howls {_hz(worst.howl_freq_hz, exact=True)}", small)
    else:
        put("meas", base, "not measured", small)
    put("ring", base, _band_hz(m.limiting_band_hz), mid)
    if m.stability is not None:
        _stability_box(page, xs["stab"][0] + 5, base, m.stability, mid * 0.85, xs["stab"][1] - 5)
    elif m.is_open is False or m.verdict in ("muted", "not routed"):
        _verdict(page, xs["stab"][0] + 5, base, m.verdict if m.is_open else "muted", mid * 0.85, xs["stab"][1] - 5)
    put("pag", base, _num(m.pag_db, sign=False), mid)
    put("nag", base, _num(m.nag_db, sign=False), mid)
    if m.davis_pag_db is not None:
        put("pag", sub, f"Davis {_num(m.davis_pag_db, sign=False)}", small)
    if m.davis_nag_db is not None:
        put("nag", sub, f"Davis {_num(m.davis_nag_db, sign=False)}", small)
    if m.reach == "reaches_target":
        put("reach", base, "REACHES", mid * 0.8, weight="bold")
    elif m.reach == "short":
        put("reach", base, "SHORT", mid * 0.8, weight="bold")
        put("reach", sub, f"by {_num(shortfall_shown_db(m.short_by_db), sign=False)} dB", small)
    page.hline(page.left, page.right, y + row_h, lw=0.4, color=_GREY)


def mic_table_blocks(page_w: float, data: SheetData, scale: float, paper: str = "a4") -> list[_Block]:
    """The per-mic table, split into blocks of rows that fit a page."""
    measured_by_mic: dict[str, list[MeasuredLine]] = {}
    for m in data.measured:
        measured_by_mic.setdefault(m.mic, []).append(m)
    head_h = 26.0
    row_h = 38.0 * scale
    rows = list(data.mics)
    together = _together_line(data)
    title_h = 16.0 + (12.0 if together else 0.0)

    def make(chunk, first):
        def draw(page: _Page, y: float) -> None:
            page.text(page.left, y + 11, "PER MICROPHONE" + ("" if first else " (continued)"), size=10, weight="bold")
            page.text(page.right, y + 11, "dB relative to the STATED gains", size=7, ha="right")
            if together:
                page.text(page.left, y + 24, together, size=8.5, weight="bold", max_w=page.width)
            _draw_head(page, y + title_h, head_h)
            yy = y + title_h + head_h
            for i, m in enumerate(chunk):
                _draw_row(page, yy, m, i % 2 == 1, scale, row_h, measured_by_mic.get(m.name, []))
                yy += row_h

        return _Block(title_h + head_h + row_h * len(chunk) + 8.0, draw)

    page_h = PAPER_PT[paper][1]
    n_max = max(6, int((page_h - 2 * _MARGIN_PT - 12.0 - 120.0 - 190.0 - title_h - head_h - 8.0) // row_h))
    return [make(rows[i: i + n_max], i == 0) for i in range(0, max(len(rows), 1), n_max)]
