"""Reports: the desk sheet (its data and its page), the margin plot and the placement map's
PNG. matplotlib is imported inside the functions that draw.

The names below are the public API; each is imported from its module on first use.
"""

from howl._lazy import lazy_exports

_NAMES = {
    "SheetData": "sheet",
    "build_sheet_data": "sheet",
    "render_sheet": "sheet",
    "read_session": "sheet",
    "read_cuts": "sheet",
    "read_margin_map": "sheet",
    "margin_figure": "plots",
    "save_figure": "plots",
    "save_map_png": "placement_plot",
}

__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy_exports(__name__, _NAMES)
