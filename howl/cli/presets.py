"""`howl presets`: the generic device classes a rig may name with ``preset = "..."``, and the materials."""

from __future__ import annotations

import typer

ORDER = 15
KINDS = ("mics", "speakers", "materials")


def register(app: typer.Typer) -> None:
    @app.command(
        "presets",
        help=(
            "List the shipped presets (generic device classes for [[mics]] and [[speakers]]: "
            "preset = \"<key>\", any key the rig gives wins) and the materials a room file may name. "
            "Every preset value is typical for its class and from memory; put a data sheet's figures "
            "in the rig when you have them."
        ),
    )
    def presets_cmd(
        kind: str = typer.Option("all", "--kind", help="What to list: mics, speakers, materials or all."),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON object instead of tables."),
    ) -> None:
        from howl.cli._common import emit_json
        from howl.validate import choice

        choice(kind, "--kind", KINDS + ("all",))
        data = presets_report()
        if kind != "all":
            data = {k: (val if k == kind else {}) if k in KINDS else val for k, val in data.items()}
        if json_out:
            emit_json(data)
            return
        for line in presets_lines(data):
            typer.echo(line)


def presets_report() -> dict:
    """The JSON object of `howl presets --json`."""
    from howl.model._chainfile import PRESETS_PATH, bundled_presets
    from howl.model.materials import TABLE_PATH, bundled_materials

    presets = bundled_presets()

    def plain(x):
        return {k: plain(val) for k, val in x.items()} if hasattr(x, "items") else x

    return {
        "presets_file": str(PRESETS_PATH),
        "materials_file": str(TABLE_PATH),
        "mics": {name: plain(entry) for name, entry in presets["mics"].items()},
        "speakers": {name: plain(entry) for name, entry in presets["speakers"].items()},
        "materials": {
            name: {"description": m.description, "absorption": list(m.absorption), "source": m.source}
            for name, m in bundled_materials().items()
        },
        "octave_bands_hz": [125, 250, 500, 1000, 2000, 4000, 8000],
    }


def _bands(x) -> str:
    return f"{x:g}" if not isinstance(x, list) else "/".join(f"{v:g}" for v in x)


def presets_lines(d: dict) -> list[str]:
    """The text of `howl presets`."""
    lines: list[str] = []
    if d["mics"]:
        lines += ["mic presets (typical values, from memory)  preset = \"<key>\" in [[mics]]",
                  f"  {'key':40} {'pattern':14} {'dBV/Pa':>7}  description"]
        for name, e in d["mics"].items():
            lines.append(f"  {name:40} {e['pattern']:14} {e['sensitivity_dbv_pa']:7.1f}  {e.get('description', '')}")
    if d["speakers"]:
        lines += ["" if lines else None,
                  "loudspeaker presets (typical values, from memory)  preset = \"<key>\" in [[speakers]]",
                  f"  {'key':28} {'dB SPL 1V/1m':>12}  {'range −10 dB (slopes dB/oct)':30} coverage h / v (125 Hz–8 kHz)"]
        lines = [x for x in lines if x is not None]
        for name, e in d["speakers"].items():
            r = e.get("usable_range")
            rng = (f"{r['low_hz']:g}–{r['high_hz']:g} Hz ({r.get('low_slope_db_per_oct', 24):g}/"
                   f"{r.get('high_slope_db_per_oct', 12):g})") if r else "flat"
            lines.append(f"  {name:28} {e['sensitivity_db_spl_1v_1m']:12.1f}  {rng:30} "
                         f"{_bands(e['coverage_h_deg'])} / {_bands(e['coverage_v_deg'])}")
            lines.append(f"  {'':28} {e.get('description', '')}")
    if d["materials"]:
        if lines:
            lines.append("")
        lines += ["materials (absorption per octave 125 Hz–8 kHz; see each source)  in room files",
                  f"  {'name':28} absorption"]
        for name, m in d["materials"].items():
            lines.append(f"  {name:28} " + " ".join(f"{a:4.2f}" for a in m["absorption"]) + f"  {m['description']}")
    return lines
