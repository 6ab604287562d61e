"""The desk options shared by ringout, scan, listen and sheet (what the console's EQ can do).

Each command declares the same options (``--eq``, ``--max-bands``, ``--max-depth-db``,
``--max-q`` or ``--min-width-oct``, ``--gain-step-db``, ``--graphic-q``, and where no rig is
given ``--desk-from RIG.toml``); :func:`resolve` turns them into a
:class:`howl.loop.desk.Desk` or ``None`` (nothing given: the cuts of an ideal EQ, as before).
"""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

EQ = typer.Option(None, "--eq", help="The desk's EQ: parametric (free bands) or graphic (1/3-octave sliders on the ISO 266 centres).")
MAX_BANDS = typer.Option(None, "--max-bands", help="Free EQ bands the desk has for feedback cuts (graphic: most sliders moved).")
MAX_DEPTH = typer.Option(None, "--max-depth-db", help="Deepest cut the desk makes, as a depth in dB (12: down to -12 dB; graphic default 12).")
MAX_Q = typer.Option(None, "--max-q", help="Highest Q of the desk's parametric bands (cookbook Q).")
MIN_WIDTH = typer.Option(None, "--min-width-oct", help="Narrowest bandwidth (octaves) of the desk's bands: --max-q said the other way.")
STEP = typer.Option(None, "--gain-step-db", help="The desk's gain step in dB (graphic default 0.5; parametric default continuous).")
GRAPHIC_Q = typer.Option(None, "--graphic-q", help="Q of the graphic's sliders (default 4.32, one 1/3 octave).")
DESK_FROM = typer.Option(None, "--desk-from", metavar="RIG.toml", help="Read the desk's limits from the [desk] table of this rig file (options override it).")
CUTS_OUT = typer.Option(None, "--cuts-out", metavar="FILE.csv|FILE.json", help="Write the cuts as a plain table to type into a console (CSV or JSON).")


def desk_table_of(path: Path):
    """The :class:`howl.loop.desk.Desk` of a rig file's ``[desk]`` table (None when it has none);
    only that table is read, so the rest of the rig need not be complete."""
    import tomllib

    from howl.errors import InputError
    from howl.loop.desk import desk_from_table

    try:
        data = tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("no such file", file=str(path), key="--desk-from") from None
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise InputError(f"cannot be read as TOML ({exc})", file=str(path), key="--desk-from") from None
    if "desk" not in data:
        return None
    return desk_from_table(data["desk"], file=str(path))


def resolve(*, eq: Optional[str] = None, max_bands: Optional[int] = None, max_depth_db: Optional[float] = None,
            max_q: Optional[float] = None, min_width_oct: Optional[float] = None, gain_step_db: Optional[float] = None,
            graphic_q: Optional[float] = None, desk_from: Optional[Path] = None, base=None):
    """The desk from the options over ``base`` (a rig's desk) or the ``--desk-from`` file's."""
    from howl.loop.desk import desk_from_options

    if desk_from is not None:
        base = desk_table_of(desk_from)
    return desk_from_options(eq=eq, max_bands=max_bands, max_depth_db=max_depth_db, max_q=max_q,
                             min_bandwidth_oct=min_width_oct, gain_step_db=gain_step_db, graphic_q=graphic_q, base=base)
