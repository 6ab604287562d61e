"""`howl check`: validate a rig file and the room file it names, and say what it holds."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

ORDER = 10


def register(app: typer.Typer) -> None:
    @app.command(
        "check",
        help=(
            "Validate a rig file and the room it names, then print a short summary of what it holds. "
            "Exit status 0 when valid; 2 with a one-line error naming the file, the key, the value and what "
            "was expected when not. With no RIG, checks the bundled example."
        ),
    )
    def check_cmd(
        rig_file: Optional[Path] = typer.Argument(None, metavar="[RIG.toml]", help="Rig file (default: bundled example)."),
        what_if: list[str] = typer.Option(
            [], "--what-if",
            help="Apply a change before checking, e.g. mics.lectern.position_m=[3,2,1.5] (repeatable).",
        ),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of text."),
    ) -> None:
        from howl.model.rig import bundled_rig_path, load_rig, with_changes
        from howl.cli._common import capture_warnings, emit_json

        with capture_warnings():
            path = bundled_rig_path() if rig_file is None else rig_file
            rig = load_rig(path)
            if what_if:
                rig = with_changes(rig, list(what_if))
            from howl.model._plannable import check_plannable

            check_plannable(rig)  # what the planner would refuse, refused here too (naming the file)
            summary = rig_summary(rig)
        if json_out:
            emit_json(summary)
            return
        for line in summary_lines(summary):
            typer.echo(line)


def rig_summary(rig) -> dict:
    """The JSON object of `howl check --json` (plain dict; numpy imported lazily)."""
    import math

    import numpy as np

    from howl.model.room import room_acoustics

    room = rig.room
    ra = room_acoustics(room, np.array([500.0, 1000.0]))
    mains = [s for x in rig.mixes if x.kind == "mains" for s in x.speakers]
    far = None
    if mains:
        def nearest_main(p):
            return min(math.dist(p, rig.speaker(s).position_m) for s in mains)
        far_l = max(rig.listeners, key=lambda x: nearest_main(x.position_m))
        far = {"name": far_l.name, "distance_to_nearest_mains_m": nearest_main(far_l.position_m)}
    return {
        "valid": True,
        "rig": rig.name,
        "file": rig.source_file,
        "description": rig.description,
        "room": {
            "name": room.name,
            "file": room.source_file,
            "shape": "shoebox" if room.is_shoebox else ("free shape, measured RT60" if room.rt60_measured_s else "free shape"),
            "dimensions_m": list(room.dimensions_m) if room.dimensions_m else None,
            "volume_m3": room.volume_m3,
            "surface_m2": room.surface_m2,
            "temperature_c": room.temperature_c,
            "humidity_pct": room.humidity_pct,
            "rt60_mid_s": float(np.mean(ra.rt60_eyring_s)),
        },
        "speakers": [{"name": s.name, "role": s.role, "position_m": list(s.position_m)} | _speaker_chain(s)
                     for s in rig.speakers],
        "mics": [{"name": m.name, "pattern": m.pattern, "open": m.open, "position_m": list(m.position_m)}
                 | _mic_chain(m) for m in rig.mics],
        "n_open_mics": sum(m.open for m in rig.mics),
        "talkers": [{"name": t.name, "mic": t.mic, "distance_to_mic_m": math.dist(t.position_m, rig.mic(t.mic).position_m),
                     "level_db_spl_1m": t.level_db_spl_1m, "spectrum": t.spectrum, "spectrum_file": t.spectrum_file}
                    for t in rig.talkers],
        "listeners": [{"name": x.name, "position_m": list(x.position_m)} for x in rig.listeners],
        "farthest_listener": far,
        "mixes": [{"name": x.name, "kind": x.kind, "speakers": list(x.speakers), "gains_db": dict(x.gains_db)}
                  for x in rig.mixes],
        "fsm_db": rig.fsm_db,
        "ead_m": rig.ead_m,
        "target_spl_db": rig.target_spl_db,
    }


def _mic_chain(m) -> dict:
    """The chain keys of one mic in `howl check --json` (preset, channel high-pass and EQ, response file)."""
    hp = m.high_pass
    return {
        "preset": m.preset, "sensitivity_dbv_pa": m.sensitivity_dbv_pa,
        "high_pass": None if hp is None else {"freq_hz": hp.freq_hz, "order": hp.order},
        "eq": [{"kind": b.kind, "freq_hz": b.freq_hz, "gain_db": b.gain_db, "q": b.q} for b in m.eq],
        "response_file": m.response_file,
    }


def _speaker_chain(s) -> dict:
    """The chain keys of one loudspeaker in `howl check --json` (preset, usable range or response file)."""
    r = s.usable_range
    return {
        "preset": s.preset, "sensitivity_db_spl_1v_1m": s.sensitivity_db_spl_1v_1m,
        "usable_range": None if r is None else {
            "low_hz": r.low_hz, "high_hz": r.high_hz, "low_slope_db_per_oct": r.low_slope_db_per_oct,
            "high_slope_db_per_oct": r.high_slope_db_per_oct},
        "response_file": s.response_file,
    }


_ORDINAL = {1: "1st", 2: "2nd", 3: "3rd", 4: "4th"}


def chain_lines(s: dict) -> list[str]:
    """What `howl check` says about the signal chain: each channel's high-pass and EQ, each loudspeaker's range."""
    from pathlib import Path as _P

    lines = []
    for m in s["mics"]:
        parts = [f"preset {m['preset']}" if m["preset"] else "no preset", f"{m['sensitivity_dbv_pa']:g} dBV/Pa"]
        hp = m["high_pass"]
        parts.append(f"high-pass {hp['freq_hz']:g} Hz {_ORDINAL[hp['order']]} order" if hp else "no high-pass")
        for b in m["eq"]:
            gain = "" if b["kind"] in ("high_pass", "low_pass") else f" {b['gain_db']:+g} dB"
            parts.append(f"{b['kind'].replace('_', '-')} {b['freq_hz']:g} Hz{gain} Q {b['q']:.2g}")
        if m["response_file"]:
            parts.append(f"response {_P(m['response_file']).name}")
        lines.append(f"  mic {m['name']}: " + ", ".join(parts))
    for x in s["speakers"]:
        parts = [f"preset {x['preset']}" if x["preset"] else "no preset", f"{x['sensitivity_db_spl_1v_1m']:g} dB SPL 1 V/1 m"]
        r = x["usable_range"]
        if r:
            parts.append(f"−10 dB at {r['low_hz']:g} Hz and {r['high_hz']:g} Hz "
                         f"({r['low_slope_db_per_oct']:g}/{r['high_slope_db_per_oct']:g} dB per octave beyond)")
        elif x["response_file"]:
            parts.append(f"response {_P(x['response_file']).name}")
        else:
            parts.append("full range (no usable_range or response_file given)")
        lines.append(f"  loudspeaker {x['name']}: " + ", ".join(parts))
    if s["talkers"]:
        lines.append("  talker spectra: " + ", ".join(
            f"{t['name']} {t['spectrum'] if t['spectrum'] != 'table' else _P(t['spectrum_file']).name}"
            for t in s["talkers"]) + " (ANSI S3.5-1997 speech efforts, flat, or a table)")
    return ["chain    each channel as the desk sets it, each loudspeaker's range:"] + lines


def summary_lines(s: dict) -> list[str]:
    """The text of `howl check`."""
    r = s["room"]
    if r["dimensions_m"]:
        shape = "shoebox " + " x ".join(f"{d:g}" for d in r["dimensions_m"]) + " m"
    else:
        shape = r["shape"]
    lines = [
        f"rig      {s['rig']}  ({s['file']})",
        f"room     {r['name']}: {shape}, V {r['volume_m3']:.0f} m³, S {r['surface_m2']:.0f} m², "
        f"{r['temperature_c']:g} °C, {r['humidity_pct']:g} % RH, RT60 (Eyring, 500 Hz–1 kHz) {r['rt60_mid_s']:.2f} s",
    ]
    lines.append(f"speakers {len(s['speakers'])}: " + ", ".join(f"{x['name']} ({x['role']})" for x in s["speakers"]))
    muted = [m["name"] for m in s["mics"] if not m["open"]]
    mic_txt = ", ".join(f"{m['name']} ({m['pattern']})" for m in s["mics"] if m["open"])
    lines.append(f"mics     {len(s['mics'])}, {s['n_open_mics']} open: {mic_txt}" + (f"; muted: {', '.join(muted)}" if muted else ""))
    if s["talkers"]:
        lines.append("talkers  " + ", ".join(
            f"{t['name']} at {t['mic']} ({t['distance_to_mic_m']:.2f} m, {t['level_db_spl_1m']:g} dB SPL @ 1 m)"
            for t in s["talkers"]))
    else:
        lines.append("talkers  none (the planner needs a talker at each mic for PAG)")
    far = s["farthest_listener"]
    lines.append(f"listen   {len(s['listeners'])}: " + ", ".join(x["name"] for x in s["listeners"])
                 + (f"; farthest from any mains loudspeaker: {far['name']} ({far['distance_to_nearest_mains_m']:.1f} m)" if far else ""))
    for x in s["mixes"]:
        gains = ", ".join(f"{k} {v:+g} dB" for k, v in x["gains_db"].items())
        lines.append(f"mix      {x['name']} ({x['kind']}) -> {', '.join(x['speakers'])}: {gains}")
    aim = (f"target {s['target_spl_db']:g} dB SPL at the farthest listener" if s["target_spl_db"] is not None
           else (f"EAD {s['ead_m']:g} m" if s["ead_m"] is not None else "no target level or EAD given"))
    lines.append(f"aim      FSM {s['fsm_db']:g} dB, {aim}")
    lines += chain_lines(s)
    lines.append("ok: the rig and its room are valid")
    return lines
