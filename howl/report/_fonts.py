"""The page font and the characters it lacks (private; see :mod:`howl.report._page`).

The sheet is set in DejaVu Sans (matplotlib ships it). A rig may name a mic or a
speaker in any script (the loader accepts any text), and a font without a glyph
makes matplotlib fail while laying out the page. So every text of the sheet goes
through :func:`printable` first: a character the page font lacks is taken from an
installed font that has it (matplotlib's font fallback, PDF and PNG alike), and
when no installed font has it, it is printed as ``?`` and the run warns, naming
the text. The sheet is always written.

Imports matplotlib: import this module only inside functions.
"""

from __future__ import annotations

import dataclasses
import functools
import unicodedata
from typing import Any

PAGE_FAMILY = "DejaVu Sans"
REPLACEMENT = "?"
#: how many installed fonts are searched for a missing character (a large system has thousands)
MAX_FONTS_SEARCHED = 400


def _weight(weight: Any) -> str:
    return "bold" if weight in ("bold", 700, "heavy", "black", "semibold") else "normal"


@functools.lru_cache(maxsize=None)
def font_file(family: str = PAGE_FAMILY, weight: str = "normal") -> str:
    from matplotlib.font_manager import FontProperties, findfont

    return findfont(FontProperties(family=family, weight=weight), fallback_to_default=True)


@functools.lru_cache(maxsize=None)
def _charmap(path: str) -> frozenset[int]:
    from matplotlib.font_manager import get_font

    return frozenset(get_font(path).get_charmap())


def has_glyph(ch: str, path: str) -> bool:
    return ord(ch) in _charmap(path)


@functools.lru_cache(maxsize=None)
def fallback_for(ch: str) -> str | None:
    """The family of an installed font that has ``ch`` (None: no font here has it)."""
    from matplotlib.font_manager import fontManager

    for i, entry in enumerate(fontManager.ttflist):
        if i >= MAX_FONTS_SEARCHED:
            break
        if entry.name.lower().startswith("last resort"):  # draws a placeholder box for everything: not a glyph
            continue
        try:
            if has_glyph(ch, entry.fname):
                return entry.name
        except Exception:  # an unreadable font file: skip it
            continue
    return None


def _needs_no_glyph(ch: str) -> bool:
    return ch in "\n\t" or unicodedata.category(ch) in ("Cc", "Cf", "Zl", "Zp")


def printable(s: str, missing: set[str], families: list[str]) -> str:
    """``s`` with each character no installed font can draw replaced by ``?``.

    Characters missing from the page font but found in another font add that font's
    family to ``families`` (the fallback list); characters no font has are added to
    ``missing``. Control characters (never drawn) become a space.
    """
    page = font_file()
    out = []
    for ch in s:
        if has_glyph(ch, page):
            out.append(ch)
        elif _needs_no_glyph(ch):
            out.append(" ")
        else:
            fam = fallback_for(ch)
            if fam is None:
                missing.add(ch)
                out.append(REPLACEMENT)
            else:
                if fam not in families:
                    families.append(fam)
                out.append(ch)
    return "".join(out)


def printable_tree(obj: Any, missing: set[str], families: list[str]) -> Any:
    """Every string inside dataclasses, tuples, lists and dicts made :func:`printable` (arrays untouched)."""
    if isinstance(obj, str):
        return printable(obj, missing, families)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        changes = {f.name: printable_tree(getattr(obj, f.name), missing, families)
                   for f in dataclasses.fields(obj) if f.init}
        try:
            return dataclasses.replace(obj, **changes)
        except (TypeError, ValueError):
            return obj
    if isinstance(obj, tuple) and not hasattr(obj, "_fields"):
        return tuple(printable_tree(v, missing, families) for v in obj)
    if isinstance(obj, list):
        return [printable_tree(v, missing, families) for v in obj]
    if isinstance(obj, dict):
        return {printable_tree(k, missing, families) if isinstance(k, str) else k:
                printable_tree(v, missing, families) for k, v in obj.items()}
    return obj


def printable_sheet(data):
    """(the sheet's data with every text printable, the font family list to set); warns once, naming
    the characters no installed font has."""
    missing: set[str] = set()
    families: list[str] = [PAGE_FAMILY]
    data = printable_tree(data, missing, families)
    if missing:
        import warnings

        from howl.errors import HowlWarning

        shown = " ".join(f"{c} (U+{ord(c):04X})" for c in sorted(missing)[:8])
        warnings.warn(f"no installed font draws {shown}{' ...' if len(missing) > 8 else ''}: printed as "
                      f"{REPLACEMENT!r} on the sheet (install a font that has them to print them)", HowlWarning)
    return data, families


_ADVANCE_CACHE: dict[tuple[str, str], float] = {}


def advance_pt_per_pt(ch: str, weight: Any = "normal") -> float:
    """The advance width of one character, in points per point of font size (cached).

    Taken from the page font, else from the fallback font that has the character,
    else the width of the replacement character.
    """
    w = _weight(weight)
    key = (w, ch)
    adv = _ADVANCE_CACHE.get(key)
    if adv is None:
        from matplotlib.font_manager import get_font

        path = font_file(PAGE_FAMILY, w)
        if not has_glyph(ch, path):
            fam = None if _needs_no_glyph(ch) else fallback_for(ch)
            path = font_file(fam, w) if fam else path
            if not has_glyph(ch, path):
                ch_use = " " if _needs_no_glyph(ch) else REPLACEMENT
                return advance_pt_per_pt(ch_use, weight)
        font = get_font(path)
        font.set_size(100.0, 72)
        glyph = font.load_char(ord(ch))
        adv = glyph.linearHoriAdvance / 65536.0 / 100.0
        _ADVANCE_CACHE[key] = adv
    return adv


# --- the page's inks and text measure (used by _page, _page_mics and _page_plots) ---------------------

_MARGIN_PT = 34.0
_BLACK = "black"
_GREY = "0.45"
_LIGHT = "0.88"


def _text_width_pt(s: str, size: float, weight: Any = "normal") -> float:
    """Width of a one-line text in points, from the font's advance widths (:mod:`howl.report._fonts`).

    Summing per-character advances (cached) ignores kerning, so 3 % is added
    to stay on the safe side; it is much faster than laying out each trial
    string with the renderer.
    """
    return sum(advance_pt_per_pt(ch, weight) for ch in s) * size * 1.03


def _cut_to_width(s: str, size: float, weight: Any, max_w: float) -> str:
    """The longest start of ``s`` that fits ``max_w`` with an ellipsis: a binary search over the
    cumulative advances (a 10 000-character name costs one pass, not one pass per character)."""
    import bisect
    import itertools

    scale = size * 1.03
    room = max_w / scale - advance_pt_per_pt("\u2026", weight)
    widths = list(itertools.accumulate(advance_pt_per_pt(ch, weight) for ch in s))
    n = max(2, bisect.bisect_right(widths, room))
    return s[:n].rstrip() + "\u2026"
