"""`howl devices`: list the audio devices PortAudio sees."""

from __future__ import annotations

import typer

ORDER = 60


def register(app: typer.Typer) -> None:
    @app.command("devices")
    def devices(
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of a table."),
    ) -> None:
        """List audio input/output devices with their channels and default sample rates.

        Pick one for `howl measure` with --device (both directions), --input-device or
        --output-device, by index or by words of its name ("loopback, JACK").
        """
        from howl.measure.audio import PortAudioBackend
        from howl.cli._common import emit_json, warn

        backend = PortAudioBackend()
        try:
            devs = backend.list_devices()
        finally:
            backend.close()
        rows = [
            {"index": d.index, "name": d.name, "hostapi": d.hostapi, "max_input_channels": d.max_input_channels,
             "max_output_channels": d.max_output_channels, "default_sample_rate_hz": d.default_sample_rate_hz}
            for d in devs
        ]
        if not rows:
            warn("no audio devices found: is the interface plugged in and the audio server (e.g. JACK) running?")
        if json_out:
            emit_json({"devices": rows})
            return
        typer.echo(f"{'idx':>3}  {'in':>3} {'out':>3}  {'rate_hz':>8}  name, host API")
        for r in rows:
            typer.echo(f"{r['index']:>3}  {r['max_input_channels']:>3} {r['max_output_channels']:>3}  "
                       f"{r['default_sample_rate_hz']:>8.0f}  {r['name']}, {r['hostapi']}")
