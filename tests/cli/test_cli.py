"""The command line as a whole: light start-up, help everywhere, one-line errors."""

from __future__ import annotations

import json
import subprocess
import sys

from typer.testing import CliRunner

from howl.cli import app

runner = CliRunner()


def _loaded_modules(code: str) -> set[str]:
    out = subprocess.run(
        [sys.executable, "-c", code + "\nimport sys, json; print(json.dumps(sorted(sys.modules)))"],
        capture_output=True, text=True, check=True,
    )
    return set(json.loads(out.stdout.strip().splitlines()[-1]))


def test_importing_howl_loads_no_audio_or_plotting():
    mods = _loaded_modules("import howl")
    assert "sounddevice" not in mods
    assert "matplotlib" not in mods


def test_cli_help_loads_no_scipy_matplotlib_or_sounddevice():
    mods = _loaded_modules(
        "import sys; sys.argv=['howl','--help']\nimport howl.cli\n"
        "try:\n    howl.cli.app()\nexcept SystemExit:\n    pass"
    )
    for heavy in ("scipy", "matplotlib", "sounddevice"):
        assert heavy not in mods, heavy


def test_every_command_has_help_and_is_in_the_readme(repo):
    readme = (repo / "README.md").read_text(encoding="utf-8")
    result = runner.invoke(app, ["--help"])
    assert result.exit_code == 0
    import typer.main

    group = typer.main.get_command(app)
    names = list(group.commands)
    assert names, "no commands registered"
    for name in names:
        sub = runner.invoke(app, [name, "--help"])
        assert sub.exit_code == 0, (name, sub.output)
        assert f"howl {name}" in readme, f"command {name!r} missing from README"


def test_version_is_printed():
    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0
    assert "howl" in result.output


def test_the_distribution_has_a_name_of_its_own_and_installs_the_howl_command(repo):
    # "howl" on PyPI is an unrelated project (version 0.1.2, 2021, a wake-word toolkit; seen with
    # `pip download --no-deps howl` on 2026-12-04), so a user who installs by that name gets something
    # else. Ours is "howl-gain" (`pip download --no-deps howl-gain` found no such distribution that day);
    # the command stays `howl`.
    import tomllib
    from importlib.metadata import distribution

    meta = tomllib.loads((repo / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    assert meta["name"] == "howl-gain"
    assert meta["scripts"] == {"howl": "howl.cli:main"}
    scripts = {e.name: e.value for e in distribution("howl-gain").entry_points if e.group == "console_scripts"}
    assert scripts == {"howl": "howl.cli:main"}


def test_the_readme_tour_what_if_line_names_its_rig_and_runs(repo):
    # The tour's --what-if line must say which rig it edits (the chapel has a 'lectern' mic, the black-box
    # rig does not) and must run as printed.
    import shlex

    lines = [ln for ln in (repo / "README.md").read_text(encoding="utf-8").splitlines()
             if ln.startswith("howl plan") and "--what-if" in ln]
    assert len(lines) == 1, lines
    args = shlex.split(lines[0].split("#")[0])[1:]
    assert "examples/chapel_lectern.toml" in args
    args = [str(repo / a) if a.endswith(".toml") else a for a in args]
    res = runner.invoke(app, [*args, "--json"])
    assert res.exit_code == 0, res.output
    obj = json.loads(res.stdout)
    assert any(m["name"] == "lectern" for m in obj["mics"])
    assert obj["what_if"] == ["mics.lectern.pattern=supercardioid"]


def test_every_command_module_is_imported_by_name(repo):
    # plain imports make each command visible to `python -X importtime -m howl ...`
    from howl.cli import COMMANDS

    on_disk = {p.stem for p in (repo / "howl" / "cli").glob("*.py") if not p.stem.startswith("_")}
    assert on_disk == set(COMMANDS)


def test_command_modules_show_in_importtime():
    out = subprocess.run([sys.executable, "-X", "importtime", "-m", "howl", "--help"], capture_output=True, text=True)
    shown = {line.rsplit("|", 1)[-1].strip() for line in out.stderr.splitlines()}
    assert {"howl.cli.plan", "howl.cli.scan", "howl.cli.margin"} <= shown
    assert "numpy" not in shown  # --help pays for no numerical library
