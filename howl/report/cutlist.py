"""The sheet's cut lists in desk terms (a small part of the sheet, kept apart from its figures).

:func:`desk_cuts` lists cuts the way a technician types them into the console (a graphic's
sliders by their ISO 266 label); :func:`listened_on_desk` fits cuts found by listening to the
desk (:func:`howl.loop.desk.merge_on_desk`, deepest first within its bands).
"""

from __future__ import annotations


def desk_line(desk) -> str:
    """The desk in one line for the sheet ("" for an ideal EQ)."""
    return "" if desk is None else desk.describe()


def desk_cuts(cut_type, notches, desk=None) -> tuple:
    """``cut_type`` rows (the sheet's ``Cut``) in the order given; a graphic's carry their slider label."""
    from howl.loop.cutfile import slider_label

    graphic = desk is not None and desk.graphic
    return tuple(
        cut_type(float(n.freq_hz), None if n.gain_db is None else float(n.gain_db), float(n.q), float(n.bandwidth_oct),
                 slider_label(n.freq_hz) if graphic else "")
        for n in notches
    )


def listened_on_desk(cut_type, notches, desk, session) -> tuple[list, tuple, str]:
    """(notches as the desk makes them, their ``cut_type`` rows, the desk line); unchanged without a desk."""
    if desk is None:
        rows = tuple(cut_type(float(n.freq_hz), n.gain_db, float(n.q), float(n.bandwidth_oct)) for n in notches)
        return list(notches), rows, ""
    from howl.loop.desk import merge_on_desk

    fs = session.pairs[0].sample_rate_hz if session is not None and session.pairs else 48000.0
    fitted = merge_on_desk(desk, list(notches), fs)
    if desk.max_bands is not None:  # the deepest first, within the desk's bands
        fitted = sorted(fitted, key=lambda n: n.gain_db if n.gain_db is not None else -1e9)[: desk.max_bands]
    return fitted, desk_cuts(cut_type, fitted, desk), desk_line(desk)
