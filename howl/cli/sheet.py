"""`howl sheet`: the printable gain-margin sheet for the desk (PDF or PNG)."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from howl.cli import _desk

ORDER = 80


def _check_options(out, paper, rig_file, measured, cuts, maps, ringout, no_plan, date) -> str:
    """Refuse bad options before any work (naming the option); returns the paper size in lower case."""
    from howl import validate as V
    from howl.errors import InputError
    from howl.fileio import check_suffix, check_writable_folder, refuse_input_as_output

    paper_l = V.choice(paper.lower(), "--paper", ["a4", "letter"])
    refuse_input_as_output(out, [rig_file, measured, cuts, *maps], option="--out")
    check_suffix(out, [".pdf", ".png"], option="--out", what="a PDF or PNG sheet")
    check_writable_folder(out, option="--out")
    if ringout and measured is None:
        raise InputError("needs loop IRs to ring out: pass --measured DIR as well", key="--ringout")
    if no_plan and measured is None:
        raise InputError("leaves nothing to print without --measured DIR", key="--no-plan")
    if date is not None:
        import datetime as dt

        try:
            dt.date.fromisoformat(date)
        except ValueError:
            raise InputError(f"must be a date YYYY-MM-DD, got {date!r}", key="--date") from None
    return paper_l


def _print_result(data, written, paper_l: str, as_json: bool) -> None:
    """The sheet's numbers as one JSON object, or the files written."""
    from howl.cli._common import emit_json

    if as_json:
        obj = data.to_json()
        obj["files"] = written
        obj["paper"] = paper_l
        emit_json(obj)
    else:
        for w in written:
            typer.echo(f"wrote {w}")


def register(app: typer.Typer) -> None:
    @app.command("sheet")
    def sheet(
        rig_file: Optional[Path] = typer.Argument(
            None, metavar="RIG.toml", help="The rig file (default: the bundled example rig)."
        ),
        out: Path = typer.Option(..., "-o", "--out", help="Output file: SHEET.pdf (all pages) or SHEET.png (page 1; more pages as SHEET-2.png ...)."),
        measured: Optional[Path] = typer.Option(
            None, "--measured", metavar="DIR", help="A measurement session folder (session.json + loop IR WAVs) to add measured margins."
        ),
        ringout: bool = typer.Option(
            False, "--ringout", help="Run the virtual ring-out on each measured loop and print the cuts (needs --measured)."
        ),
        cuts: Optional[Path] = typer.Option(
            None, "--cuts", metavar="LISTEN.json", help="Cuts found by listening: the JSON of howl listen/scan (with --measured, the ASG they buy on each loop)."
        ),
        maps: list[Path] = typer.Option(
            [], "--map", metavar="MAP.json", help="A placement map (the JSON of howl map --json) to draw on the plan view (repeatable)."
        ),
        paper: str = typer.Option("a4", "--paper", help="Paper size: a4 or letter."),
        no_plan: bool = typer.Option(False, "--no-plan", help="Leave the room-model plan out (measured numbers only)."),
        date: Optional[str] = typer.Option(None, "--date", metavar="YYYY-MM-DD", help="Date printed on the sheet (default: today)."),
        as_json: bool = typer.Option(False, "--json", help="Print the sheet's numbers as one JSON object."),
        what_if: list[str] = typer.Option(
            [], "--what-if", help="Try a change without editing the file, e.g. mixes.mains.gains_db.lectern=20 (repeatable)."
        ),
        eq: Optional[str] = _desk.EQ,
        max_bands: Optional[int] = _desk.MAX_BANDS,
        max_depth_db: Optional[float] = _desk.MAX_DEPTH,
        max_q: Optional[float] = _desk.MAX_Q,
        min_width_oct: Optional[float] = _desk.MIN_WIDTH,
        gain_step_db: Optional[float] = _desk.STEP,
        graphic_q: Optional[float] = _desk.GRAPHIC_Q,
    ) -> None:
        """Print the gain-margin sheet: per-mic limits, loop plots, cuts and cautions."""
        from howl.cli._common import capture_warnings

        paper_l = _check_options(out, paper, rig_file, measured, cuts, maps, ringout, no_plan, date)

        with capture_warnings():
            from howl.model.rig import bundled_rig_path, load_rig
            from howl.report.sheet import (
                build_sheet_data, check_session, read_cuts, read_margin_map, read_session, render_sheet, with_combined_loops,
            )

            rig = load_rig(rig_file if rig_file is not None else bundled_rig_path())
            if what_if:
                from howl.model.rig import with_changes

                rig = with_changes(rig, list(what_if))
            desk = _desk.resolve(eq=eq, max_bands=max_bands, max_depth_db=max_depth_db, max_q=max_q,
                                 min_width_oct=min_width_oct, gain_step_db=gain_step_db, graphic_q=graphic_q,
                                 base=getattr(rig, "desk", None))
            if not no_plan:
                from howl.model._plannable import check_plannable

                check_plannable(rig)
            session = None
            if measured is not None:
                session = read_session(measured)
                check_session(session, rig)
                session = with_combined_loops(session)
            listen_cuts = read_cuts(cuts) if cuts is not None else None
            margin_maps = [read_margin_map(m, rig) for m in maps]
            plan_json, margins, ringouts = _compute(rig, session, no_plan, ringout, desk)
            if plan_json is not None:
                plan_json["what_if"] = list(what_if)
            data = build_sheet_data(
                rig, plan_json=plan_json, session=session, margins=margins, ringouts=ringouts, listen_cuts=listen_cuts,
                margin_maps=margin_maps, date=date, desk=desk,
            )
            written = render_sheet(data, out, paper=paper_l)

        _print_result(data, written, paper_l, as_json)


def _compute(rig, session, no_plan: bool, ringout: bool, desk=None):
    """The plan (unless --no-plan), and each measured loop's margins (and ring-out): progress on stderr."""
    plan_json = margins = ringouts = None
    if not no_plan:
        from howl.model.plan import plan_rig, plan_to_json

        plan_json = plan_to_json(plan_rig(rig))
    if session is not None:
        from howl.cli._common import progress_iter
        from howl.loop.nyquist import nyquist_margin

        margins = [nyquist_margin(p.ir, p.sample_rate_hz)
                   for p in progress_iter(session.pairs, "margins of the measured loops")]
        if ringout:
            from howl.loop.ringout import ring_out

            ringouts = [ring_out(p.ir, p.sample_rate_hz, desk=desk)
                        for p in progress_iter(session.pairs, "ringing out the measured loops")]
    return plan_json, margins, ringouts
