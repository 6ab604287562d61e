"""`howl map`: the margin of one mic over a grid of candidate positions, aimed at its talker."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

ORDER = 35

_CAUTION = (
    "A map is a prediction from a model: the best spot still needs checking by measuring the loop and a careful "
    "ring-out at a safe level (hearing protection, care for tweeters); follow local codes and licensed practice."
)


class _LazyProgress:
    """A rich progress bar on stderr that appears only once the work has taken more than a second."""

    def __init__(self, label: str, quiet: bool):
        import time

        self._t0 = time.monotonic()
        self._time = time.monotonic
        self._label = label
        self._quiet = quiet
        self._bar = None
        self._task = None

    def __call__(self, done: int, total: int) -> None:
        if self._quiet:
            return
        if self._bar is None:
            if self._time() - self._t0 < 1.0 or done >= total:
                return
            from rich.console import Console
            from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

            self._bar = Progress(TextColumn(self._label), BarColumn(), TextColumn("{task.completed}/{task.total}"),
                                 TimeRemainingColumn(), console=Console(stderr=True), transient=True)
            self._bar.start()
            self._task = self._bar.add_task(self._label, total=total)
        self._bar.update(self._task, completed=done)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.stop()


def register(app: typer.Typer) -> None:
    @app.command(
        "map",
        help=(
            "Map where one mic should go: its margin (PAG − NAG) over a grid of candidate positions, the mic aimed "
            "at its talker, as a heat map over the floor plan (-o MAP.png) and the best position and aim."
        ),
    )
    def map_cmd(
        rig_file: Optional[Path] = typer.Argument(None, metavar="[RIG.toml]", help="Rig file (default: bundled example)."),
        mic: str = typer.Option(..., "--mic", help="The mic to place (its name in the rig)."),
        area: Optional[tuple[float, float, float, float]] = typer.Option(
            None, "--area", metavar="X0 Y0 X1 Y1", help="Candidate area in metres (default: the whole floor, 0.25 m from the walls)."
        ),
        height_m: Optional[float] = typer.Option(None, "--height-m", help="Capsule height in m (default: the mic's own)."),
        step_m: float = typer.Option(0.25, "--step-m", help="Grid spacing in m."),
        method: str = typer.Option("statistical", "--method", help="statistical (fast) or images (image-source loops, slow)."),
        talker: str = typer.Option("follow", "--talker", help="follow: the talker moves with the mic; fixed: the talker stays, the mic turns to it."),
        fraction: int = typer.Option(3, "--fraction", help="Bands per octave: 1, 3, 6, 12 or 24."),
        what_if: list[str] = typer.Option([], "--what-if", help="Try a change first, e.g. mics.lectern.pattern=supercardioid (repeatable)."),
        sample_rate_hz: float = typer.Option(8000.0, "--sample-rate-hz", help="Images method: sample rate of the loop IRs."),
        max_order: int = typer.Option(3, "--max-order", help="Images method: highest reflection order before the statistical tail."),
        output: Optional[Path] = typer.Option(None, "-o", "--out", help="Write the heat map as PNG."),
        output_alias: Optional[Path] = typer.Option(None, "--output", hidden=True,
                                                    help="Old spelling of --out (kept for scripts)."),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of text."),
    ) -> None:
        from howl.validate import choice, in_range, integer
        from howl.errors import InputError
        from howl.model.rig import bundled_rig_path, load_rig, with_changes
        from howl.cli._common import capture_warnings, emit_json

        choice(method, "--method", ("statistical", "images"))
        choice(talker, "--talker", ("follow", "fixed"))
        if fraction not in (1, 3, 6, 12, 24):
            raise InputError(f"must be one of 1, 3, 6, 12, 24, got {fraction}", key="--fraction")
        in_range(step_m, "--step-m", 0.01, 10.0, unit="m")
        in_range(sample_rate_hz, "--sample-rate-hz", 4000.0, 96000.0, unit="Hz")
        integer(max_order, "--max-order", 0, 30)
        from howl.fileio import check_suffix, check_writable_folder, refuse_input_as_output

        if output is not None and output_alias is not None:
            raise InputError("give the output once (--out; --output is its old spelling)", key="--output")
        output = output if output is not None else output_alias
        if output is not None:
            refuse_input_as_output(output, [rig_file], option="--out")
            check_suffix(output, [".png"], option="--out", what="a PNG image")
            check_writable_folder(output, option="--out")

        with capture_warnings():
            path = bundled_rig_path() if rig_file is None else rig_file
            rig = load_rig(path)
            if what_if:
                rig = with_changes(rig, list(what_if))
            if area is not None:
                _check_area(area, rig)
            from howl.model.placement import map_to_json, margin_map

            prog = _LazyProgress(f"mapping {mic}", quiet=False)
            try:
                m = margin_map(rig, mic, area_m=area, height_m=height_m, step_m=step_m, method=method, talker=talker,
                               fraction=fraction, sample_rate_hz=sample_rate_hz, max_order=max_order, progress=prog)
            finally:
                prog.close()
            obj = map_to_json(m)
            obj["rig_file"] = str(path)
            obj["what_if"] = list(what_if)
            obj["caution"] = _CAUTION
            if output is not None:
                from howl.report.placement_plot import save_map_png

                save_map_png(m, rig, output, option="--out")
                obj["plot"] = str(output)

        if json_out:
            emit_json(obj)
            return
        _print(obj, m)


def _check_area(area, rig) -> None:
    """--area must lie on the room's floor (a shoebox room; a free shape has no floor plan to check)."""
    from howl.errors import InputError
    from howl.validate import number

    x0, y0, x1, y1 = (number(v, "--area", unit="m") for v in area)
    if not (x1 > x0 and y1 > y0):
        raise InputError(f"must be X0 Y0 X1 Y1 with X1 > X0 and Y1 > Y0, got {x0:g} {y0:g} {x1:g} {y1:g}", key="--area")
    if rig.room.is_shoebox:
        lx, ly, _ = rig.room.dimensions_m
        if x0 < 0 or y0 < 0 or x1 > lx or y1 > ly:
            raise InputError(f"must lie on the floor of room {rig.room.name!r} (0 0 {lx:g} {ly:g} m), got "
                             f"{x0:g} {y0:g} {x1:g} {y1:g}", key="--area")


def _fmt(v, spec="+.1f") -> str:
    return "—" if v is None else format(v, spec)


def _print(obj: dict, m) -> None:
    from rich.console import Console

    con = Console(highlight=False)
    b, c = obj["best"], obj["current"]
    ny, nx = m.margin_db.shape
    con.print(f"[bold]{obj['rig']}[/bold]: mic {obj['mic']!r}, {nx} × {ny} positions, capsule height "
              f"{obj['height_m']:g} m above the floor, {obj['method']} model, talker {obj['talker']}")

    def line(name, p):
        lo, hi = p["margin_spread_db"]
        pos = ", ".join(f"{v:g}" for v in p["position_m"])
        return (f"{name:<8} ({pos}) m  aim {_fmt(p['azimuth_deg'], '.0f')}° / {_fmt(p['elevation_deg'], '.0f')}°  "
                f"margin {_fmt(p['margin_db'])} dB  (10–90 %: {_fmt(lo)} … {_fmt(hi)})  limit {_fmt(p['limiting_band_hz'], '.0f')} Hz")

    con.print(line("best", b) + ("" if b.get("on_grid", True) else "  (the rig's own position)"))
    con.print(line("now", c))
    if not b.get("better", False):
        con.print(f"no better position in the searched area (no candidate beats the rig's own position by more than "
                  f"the model's resolution, {obj['resolution_db']:g} dB)")
    else:
        con.print(f"moving there gains {b['beats_rig_by_db']:+.1f} dB of margin (PAG − NAG with that fader at its "
                  f"limit, as howl plan computes it)")
    for n in obj.get("notes", []):
        con.print(n)
    if "plot" in obj:
        con.print(f"map written to {obj['plot']}")
    con.print("Caution: " + obj["caution"])
