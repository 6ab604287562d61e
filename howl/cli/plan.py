"""`howl plan`: potential gain before feedback per mic and per band, from a rig file."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

ORDER = 30

_CAUTION = (
    "A plan is a prediction from a model, not a measurement: check it by measuring the loop and ring the system "
    "out at a safe level, with hearing protection and care for tweeters; follow local codes and licensed practice."
)


def register(app: typer.Typer) -> None:
    @app.command(
        "plan",
        help=(
            "Predict gain before feedback for a rig: how far each fader and all open mics together may rise, the "
            "band that rings first, PAG, NAG, stability and reach per mic, and the classic Davis figures beside them. With no RIG, runs on the bundled example."
        ),
    )
    def plan_cmd(
        rig_file: Optional[Path] = typer.Argument(None, metavar="[RIG.toml]", help="Rig file (default: bundled example)."),
        bands: bool = typer.Option(False, "--bands", help="Also print the per-band detail."),
        fraction: int = typer.Option(3, "--fraction", help="Bands per octave: 1, 3, 6, 12 or 24."),
        fsm_db: Optional[float] = typer.Option(None, "--fsm-db", help="Feedback stability margin in dB (default: the rig's, else 6)."),
        what_if: list[str] = typer.Option(
            [], "--what-if", help="Try a change without editing the file, e.g. mics.lectern.pattern=supercardioid (repeatable)."
        ),
        method: str = typer.Option("statistical", "--method", help="statistical (band averages) or images (adds image-source loops)."),
        f_lo_hz: float = typer.Option(100.0, "--f-lo-hz", help="Lowest band centre, Hz."),
        f_hi_hz: float = typer.Option(10000.0, "--f-hi-hz", help="Highest band centre, Hz."),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of tables."),
    ) -> None:
        from howl.validate import choice, in_range
        from howl.errors import InputError
        from howl.model.rig import bundled_rig_path, load_rig, with_changes
        from howl.cli._common import capture_warnings, emit_json

        choice(method, "--method", ("statistical", "images"))
        if fraction not in (1, 3, 6, 12, 24):
            raise InputError(f"must be one of 1, 3, 6, 12, 24, got {fraction}", key="--fraction")
        if fsm_db is not None:
            in_range(fsm_db, "--fsm-db", 0.0, 30.0, unit="dB")
        in_range(f_lo_hz, "--f-lo-hz", 20.0, 20000.0, unit="Hz")
        in_range(f_hi_hz, "--f-hi-hz", 20.0, 20000.0, unit="Hz")
        if f_hi_hz <= f_lo_hz:
            raise InputError(f"must be above --f-lo-hz ({f_lo_hz:g} Hz), got {f_hi_hz:g} Hz", key="--f-hi-hz")

        with capture_warnings():
            path = bundled_rig_path() if rig_file is None else rig_file
            rig = load_rig(path)
            if what_if:
                rig = with_changes(rig, list(what_if))
            from howl.model._plannable import check_plannable

            check_plannable(rig)  # as `howl check` does: refused naming the rig file
            from howl.model.plan import plan_rig, plan_to_json

            result = plan_rig(rig, fraction=fraction, f_lo_hz=f_lo_hz, f_hi_hz=f_hi_hz, fsm_db=fsm_db)
            obj = plan_to_json(result)
            obj["what_if"] = list(what_if)
            images = None
            if method == "images":
                from howl.model.images import plan_with_images

                images = plan_with_images(rig, sample_rate_hz=16000, fraction=fraction, f_lo_hz=f_lo_hz,
                                          f_hi_hz=f_hi_hz)
                obj["images"] = images
                obj["method"] = "statistical+images"

        if json_out:
            emit_json(obj)
            return
        _print_tables(obj, bands, images)


def _fmt(v, spec="+.1f", none="—") -> str:
    return none if v is None else format(v, spec)


def _print_tables(obj: dict, bands: bool, images: dict | None) -> None:
    from rich.markup import escape
    from rich.table import Table
    from howl.model._plan_limits import shortfall_shown_db as _shown

    from howl.cli._common import make_console

    con = make_console()
    con.print(f"[bold]{escape(str(obj['rig']))}[/bold]  ({escape(str(obj['rig_file'] or 'rig'))})")
    con.print(
        f"FSM {obj['fsm_db']:g} dB · {obj['nom']} open mic(s) in the loop · 1/{obj['fraction']} octave bands · "
        f"headroom of the rig as set: {_fmt(obj['stated_margin_db'])} dB (worst-peak loop gain to unity)"
    )
    if obj["what_if"]:
        con.print("what if: " + escape(", ".join(obj["what_if"])))
    con.print(
        f"all open mics together may rise {_fmt(obj.get('headroom_together_db'))} dB before the worst-peak loop gain "
        f"reaches −FSM (rings first at {_fmt(obj.get('rings_first_hz'), '.0f')} Hz). Single-fader limits do not add: "
        f"raising several faders each by its own 'max ch.' goes past −FSM."
    )
    t = Table(title="Gain before feedback per mic (dB; flat fader, the channel as the rig sets it)", pad_edge=False)
    for col, just in (("mic", "left"), ("max ch.", "right"), ("rings Hz", "right"),
                      ("as set", "left"), ("PAG", "right"), ("10–90 %", "right"), ("NAG", "right"),
                      ("reach", "left"), ("EQ +", "right"), ("Davis PAG/NAG", "right")):
        t.add_column(col, justify=just, no_wrap=True)
    style = {"stable": "green", "inside_fsm": "yellow", "howls": "bold red", "reaches_target": "green", "short": "yellow"}
    for m in obj["mics"]:
        lo, hi = m["pag_spread_db"]
        rch = "reaches" if m["reach"] == "reaches_target" else f"short {_fmt(_shown(m['short_by_db']), '.1f')}"
        t.add_row(
            escape(m["name"]) + ("*" if m.get("pag_basis") == "together" else ""), _fmt(m["max_channel_gain_db"]), f"{m['rings_first_hz']:.0f}",
            f"[{style.get(m['stability'], '')}]{m['stability'].replace('_', ' ')}[/]", _fmt(m["pag_db"]),
            f"{_fmt(lo)}…{_fmt(hi)}", _fmt(m["nag_db"]), f"[{style.get(m['reach'], '')}]{rch}[/]",
            _fmt(m["eq_could_buy_db"]), f"{_fmt(m['davis_pag_db'])}/{_fmt(m['davis_nag_db'])}",
        )
    con.print(t)
    _print_gains(con, obj)
    if obj["muted_mics"]:
        con.print("muted (not in the loop): " + escape(", ".join(obj["muted_mics"])))
    if obj["unrouted_mics"]:
        con.print("open but in no mix: " + escape(", ".join(obj["unrouted_mics"])))
    con.print(
        "max ch.: how far that one fader may rise in every mix it feeds (all else as set) before the whole loop's "
        "worst-peak loop gain reaches −FSM; rings Hz: the band where it does. as set: stable (below −FSM), inside fsm "
        "(between −FSM and unity), howls (at or past unity). PAG: the talker's gain at the farthest listener with "
        "that fader at its limit; NAG: gain needed for the target (EAD); both speech-weighted over the bands. "
        "reach: PAG against NAG. EQ +: what a perfect EQ could add beyond the flat fader (speech-weighted). "
        "Davis: distances only, omni, free field, D1 and D2 from the worst single loudspeaker."
        + (" *: the other open mics alone keep the loop past −FSM, so this fader has no limit of its own; its PAG is "
           "for all open mics pulled together to their common limit." if any(m.get("pag_basis") == "together"
                                                                               for m in obj["mics"]) else "")
    )
    if bands:
        bt = Table(title="Per band: worst-peak loop gain at the stated settings (dB)")
        for col in ("band", "RT60 s", "ρ avg", "peak", "ρ peak"):
            bt.add_column(col, justify="right")
        for m in obj["mics"]:
            bt.add_column(escape(m["name"]), justify="right")
        room = obj["room"]
        for i, label in enumerate(obj["band_labels"]):
            row = [label, f"{room['rt60_s'][i]:.2f}", _fmt(obj["spectral_radius_db"][i]), _fmt(obj["peak_factor_db"][i]),
                   _fmt(obj["worst_peak_spectral_radius_db"][i])]
            row += [_fmt(m["worst_peak_loop_gain_db"][i]) for m in obj["mics"]]
            bt.add_row(*row)
        con.print(bt)
        con.print(
            f"ρ: spectral radius of the loop power matrix (the whole rig); per-mic columns: loop gain at that "
            f"channel with the other open mics in the loop. Schroeder frequency ≈ "
            f"{room['schroeder_frequency_hz']:.0f} Hz: below it the room is modal and peaks are only indicative."
        )
    if images is not None:
        for line in images.get("lines", []):
            con.print(escape(str(line)))
    con.print(f"[dim]{_CAUTION}[/dim]")


def _print_gains(con, obj: dict) -> None:
    """The gains the limits are relative to: each mic's stated gain in each mix (dB)."""
    from rich.markup import escape
    from rich.table import Table

    mixes: list[str] = []
    for m in obj["mics"]:
        mixes += [k for k in (m.get("gains_db") or {}) if k not in mixes]
    if not mixes:
        return
    con.print("stated gains the limits are relative to (dB, mic → mix):")
    t = Table(pad_edge=False)
    t.add_column("mic")
    for k in mixes:
        t.add_column(escape(k), justify="right", no_wrap=True)
    for m in obj["mics"]:
        g = m.get("gains_db") or {}
        t.add_row(escape(m["name"]), *[_fmt(g.get(k)) if k in g else "·" for k in mixes])
    con.print(t)
