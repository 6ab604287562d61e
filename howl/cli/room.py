"""`howl room`: a room's reverberation, room constant and critical distance per octave band."""

from __future__ import annotations

from pathlib import Path

import typer

ORDER = 20


def register(app: typer.Typer) -> None:
    @app.command(
        "room",
        help=(
            "Per octave band 125 Hz–8 kHz: RT60 by Sabine and by Eyring (air absorption included, ISO 9613-1), "
            "the room constant R, and the critical distance for the directivity factor Q you pass (both the "
            "room-constant and the RT60 forms); plus the Schroeder frequency, volume, surface and mean free path."
        ),
    )
    def room_cmd(
        room_file: Path = typer.Argument(..., metavar="ROOM.toml", help="Room file."),
        q: float = typer.Option(1.0, "--q", help="Directivity factor Q of the source for the critical distance "
                                "(1 = omni, 2 = half space; a loudspeaker's Q toward its axis is often 5–20)."),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of a table."),
    ) -> None:
        from howl.validate import in_range
        from howl.model.rig import load_room
        from howl.cli._common import capture_warnings, emit_json

        in_range(q, "--q", 1.0, 1000.0)
        with capture_warnings():
            room = load_room(room_file)
            result = room_report(room, q)
        if json_out:
            emit_json(result)
            return
        for line in room_lines(result):
            typer.echo(line)


def room_report(room, q: float) -> dict:
    """The JSON object of `howl room --json`."""
    import numpy as np

    from howl.bands import nominal_label
    from howl.model.rig import OCTAVE_BANDS_HZ
    from howl.model.room import (
        air_attenuation_db_per_m,
        critical_distance_from_rt60_m,
        critical_distance_m,
        mean_free_path_m,
        room_acoustics,
        schroeder_frequency_hz,
    )

    f = np.asarray(OCTAVE_BANDS_HZ)
    ra = room_acoustics(room, f)
    air_db = air_attenuation_db_per_m(f, room.temperature_c, room.humidity_pct)
    dc_r = critical_distance_m(q, ra.room_constant_m2)
    dc_t = critical_distance_from_rt60_m(q, room.volume_m3, ra.rt60_eyring_s, ra.speed_of_sound_m_s)
    mid = (f >= 500) & (f <= 1000)
    rt_mid = float(np.mean(ra.rt60_eyring_s[mid]))
    bands = []
    for i, fc in enumerate(f):
        bands.append({
            "freq_hz": float(fc),
            "label": nominal_label(float(fc), 1),
            "mean_absorption": float(ra.mean_absorption[i]),
            "absorption_area_m2": float(ra.absorption_area_m2[i]),
            "air_attenuation_db_per_km": float(air_db[i] * 1000.0),
            "rt60_sabine_s": float(ra.rt60_sabine_s[i]),
            "rt60_eyring_s": float(ra.rt60_eyring_s[i]),
            "room_constant_m2": float(ra.room_constant_m2[i]),
            "critical_distance_m": float(dc_r[i]),
            "critical_distance_from_rt60_m": float(dc_t[i]),
            "schroeder_frequency_hz": float(schroeder_frequency_hz(ra.rt60_eyring_s[i], room.volume_m3)),
        })
    return {
        "room": room.name,
        "file": room.source_file,
        "shape": "shoebox" if room.is_shoebox else "free shape",
        "dimensions_m": list(room.dimensions_m) if room.dimensions_m else None,
        "rt60_given": "measured" if room.rt60_measured_s is not None else "from materials",
        "volume_m3": room.volume_m3,
        "surface_m2": room.surface_m2,
        "mean_free_path_m": mean_free_path_m(room.volume_m3, room.surface_m2),
        "temperature_c": room.temperature_c,
        "humidity_pct": room.humidity_pct,
        "speed_of_sound_m_s": ra.speed_of_sound_m_s,
        "q": q,
        "rt60_mid_s": rt_mid,
        "schroeder_frequency_hz": schroeder_frequency_hz(rt_mid, room.volume_m3),
        "bands": bands,
        "notes": [
            "RT60: Sabine and Eyring(-Norris) with 4mV air absorption (ISO 9613-1) in the denominator",
            "room constant R = S·a/(1−a) with a = surface mean absorption + 4mV/S (air)",
            "critical_distance_m = sqrt(Q·R/16π); critical_distance_from_rt60_m = sqrt(Q·A/16π), "
            "A = 24·ln10·V/(c·T_Eyring) ≈ 0.057·sqrt(Q·V/T)",
            "schroeder_frequency_hz = 2000·sqrt(T/V) with T = rt60_mid_s (Eyring, mean of 500 Hz and 1 kHz)",
        ],
    }


def room_lines(r: dict) -> list[str]:
    """The text table of `howl room`."""
    if r["dimensions_m"]:
        shape = "shoebox " + " x ".join(f"{d:g}" for d in r["dimensions_m"]) + " m"
    else:
        shape = "free shape" + (" (measured RT60)" if r["rt60_given"] == "measured" else "")
    lines = [
        f"{r['room']}  ({r['file']})",
        f"{shape}; V {r['volume_m3']:.1f} m³, S {r['surface_m2']:.1f} m², mean free path {r['mean_free_path_m']:.2f} m; "
        f"air {r['temperature_c']:g} °C, {r['humidity_pct']:g} % RH, c {r['speed_of_sound_m_s']:.1f} m/s",
        "",
        f"{'band':>6} {'alpha':>6} {'air':>7} {'RT60':>7} {'RT60':>7} {'R':>8} {'Dc(R)':>7} {'Dc(T)':>7}",
        f"{'Hz':>6} {'':>6} {'dB/km':>7} {'Sabine':>7} {'Eyring':>7} {'m²':>8} {'m':>7} {'m':>7}",
    ]
    for b in r["bands"]:
        lines.append(
            f"{b['label']:>6} {b['mean_absorption']:6.3f} {b['air_attenuation_db_per_km']:7.2f} "
            f"{b['rt60_sabine_s']:7.2f} {b['rt60_eyring_s']:7.2f} {b['room_constant_m2']:8.1f} "
            f"{b['critical_distance_m']:7.2f} {b['critical_distance_from_rt60_m']:7.2f}"
        )
    lines += [
        "",
        f"critical distances for Q = {r['q']:g}: Dc(R) = sqrt(Q·R/16π), Dc(T) = sqrt(Q·A/16π) from the Eyring RT60",
        f"RT60 mid (500 Hz–1 kHz, Eyring) {r['rt60_mid_s']:.2f} s; Schroeder frequency {r['schroeder_frequency_hz']:.0f} Hz "
        "(below it single room modes dominate, above it the statistical model holds)",
    ]
    return lines
