"""A sheet as PNG pages, written all or none (private; see :mod:`howl.report._page`).

Page 1 goes to ``NAME.png``, page k to ``NAME-k.png``. Every page is rendered to a
temporary file first and the pages are renamed into place only when all are done
(:func:`howl.fileio.atomic_paths`): an interrupted run never leaves a new page 1 beside
an old page 2. Pages ``NAME-k.png`` left by an earlier, longer sheet are removed (only
files that are PNG images, and each named in a warning), so the folder never mixes two
sheets.
"""

from __future__ import annotations

import warnings
from pathlib import Path

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def page_path(p: Path, k: int) -> Path:
    """Page ``k`` (1-based) of the sheet written as ``p``."""
    return p if k == 1 else p.with_name(f"{p.stem}-{k}{p.suffix}")


def stale_pages(p: Path, n_pages: int) -> list[Path]:
    """Pages after ``n_pages`` left by an earlier sheet of the same name (PNG files only)."""
    out = []
    k = n_pages + 1
    while True:
        q = page_path(p, k)
        if not q.is_file():
            return out
        try:
            with open(q, "rb") as f:
                if f.read(8) != PNG_MAGIC:
                    return out
        except OSError:
            return out
        out.append(q)
        k += 1


def write_png_pages(figs, p: Path, dpi: int) -> list[str]:
    """Write ``figs`` as the pages of ``p``: all or none; stale later pages removed. Returns the files."""
    from howl.errors import HowlWarning
    from howl.fileio import atomic_paths

    targets = [page_path(p, k) for k in range(1, len(figs) + 1)]
    stale = stale_pages(p, len(figs))
    with atomic_paths(targets, option="--out") as tmps:
        for fig, tmp in zip(figs, tmps):
            fig.savefig(str(tmp), format="png", dpi=dpi, facecolor="white")
    for q in stale:
        try:
            q.unlink()
            warnings.warn(f"removed {q}: a page of an earlier, longer sheet of the same name", HowlWarning)
        except OSError as exc:
            warnings.warn(f"{q} is a page of an earlier, longer sheet of the same name and could not be removed "
                          f"({exc.strerror}); delete it by hand", HowlWarning)
    return [str(t) for t in targets]
