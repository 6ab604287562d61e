"""The error contract at every I/O edge (issue 18): a bad file, option or output path is exit 2,
one line on stderr naming what the user typed, no traceback, and the user's files untouched.

Each row builds its inputs in tmp_path, runs the command in-process and checks the contract.
Rows whose defect was data loss also check that the input's bytes are unchanged. No value here
comes from the code under test: the expectations are the contract itself (DEVELOPERS.md).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import stat
import warnings
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
from typer.testing import CliRunner

from howl.cli import app

REPO = Path(__file__).resolve().parents[2]
IR = REPO / "examples" / "loops" / "blackbox_vox_a.wav"
PROG = REPO / "examples" / "program_voice_like.wav"
RIG = REPO / "examples" / "chapel_lectern.toml"
ROOMS = REPO / "rooms"


def _run(args):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return CliRunner().invoke(app, [str(a) for a in args])


def _digest(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def _nested(depth: int) -> str:
    return "[" * depth + "]" * depth


def _rig_copy(tmp: Path, edit=lambda text: text) -> Path:
    text = RIG.read_text(encoding="utf-8").replace('room_file = "../rooms/', f'room_file = "{ROOMS.as_posix()}/')
    p = tmp / "rig.toml"
    p.write_text(edit(text), encoding="utf-8")
    return p


def _session(tmp: Path, ir_data: np.ndarray, meta: str | None = None) -> Path:
    folder = tmp / "session"
    (folder / "ir").mkdir(parents=True)
    sf.write(folder / "ir" / "01.wav", ir_data, 48000, subtype="FLOAT")
    pairs = [{"speaker": "mains", "mic": "lectern", "ir_file": "ir/01.wav", "status": "ok"}]
    (folder / "session.json").write_text(meta if meta is not None else json.dumps({"pairs": pairs}),
                                         encoding="utf-8")
    return folder


# Each case: (id, build(tmp) -> (args, files whose bytes must not change), words the one line must hold)
def _sim_out_is_program(t):
    p = shutil.copy(PROG, t / "p.wav")
    return ["simulate", IR, p, "-o", p], [Path(p)]


def _sim_out_is_ir(t):
    ir = shutil.copy(IR, t / "ir.wav")
    return ["simulate", ir, PROG, "-o", ir], [Path(ir)]


def _sim_out_is_symlink_to_program(t):
    p = Path(shutil.copy(PROG, t / "p.wav"))
    link = t / "link.wav"
    link.symlink_to(p)
    return ["simulate", IR, p, "-o", link], [p]


def _margin_plot_is_ir(t):
    ir = Path(shutil.copy(IR, t / "ir.wav"))
    return ["margin", ir, "--plot", ir], [ir]


def _margin_plot_symlink_to_ir(t):
    ir = Path(shutil.copy(IR, t / "ir.wav"))
    link = t / "plot.png"
    link.symlink_to(ir)
    return ["margin", ir, "--plot", link], [ir]


def _combine_out_is_input(t):
    ir = Path(shutil.copy(IR, t / "ir.wav"))
    return ["measure", "--combine", ir, "--combined-out", ir, "--mic-sensitivity-dbv-pa", "-40",
            "--speaker-sensitivity-db-spl", "100"], [ir]


def _sheet_out_is_rig(t):
    rig = _rig_copy(t)
    return ["sheet", rig, "-o", rig], [rig]


def _sim_unwritable_folder(t):
    return ["simulate", IR, PROG, "-o", "/proc/howl-test/x.wav"], []


def _margin_plot_is_folder(t):
    (t / "adir.png").mkdir()
    return ["margin", IR, "--plot", t / "adir.png"], []


def _sheet_out_is_folder(t):
    return ["sheet", "-o", t], []


def _sheet_out_in_missing_folder(t):
    return ["sheet", "-o", t / "no" / "such" / "s.pdf"], []


def _listen_log_unwritable(t):
    return ["listen", "--device", "none", "--log", "/proc/howl-test.log"], []


def _listen_log_is_folder(t):
    return ["listen", "--device", "none", "--log", t], []


def _sheet_cuts_nested(t):
    (t / "cuts.json").write_text(_nested(100_000), encoding="utf-8")
    return ["sheet", "--cuts", t / "cuts.json", "-o", t / "s.pdf"], []


def _sheet_map_nested(t):
    (t / "map.json").write_text(_nested(100_000), encoding="utf-8")
    return ["sheet", "--map", t / "map.json", "-o", t / "s.pdf"], []


def _sheet_measured_nested(t):
    folder = _session(t, np.zeros(480), meta=_nested(100_000))
    return ["sheet", "--measured", folder, "-o", t / "s.pdf"], []


def _sheet_measured_stereo(t):
    folder = _session(t, np.zeros((4800, 2)))
    return ["sheet", "--measured", folder, "-o", t / "s.pdf"], []


def _polar_not_utf8(t):
    (t / "box.toml").write_bytes(b"\xff\xfe\x00garbage\x9c")
    rig = _rig_copy(t, lambda s: s.replace("[[speakers]]", '[[speakers]]\ndirectivity_file = "box.toml"', 1))
    return ["check", rig], []


def _polar_nested(t):
    (t / "box.toml").write_text("freq_hz = " + _nested(50_000), encoding="utf-8")
    rig = _rig_copy(t, lambda s: s.replace("[[speakers]]", '[[speakers]]\ndirectivity_file = "box.toml"', 1))
    return ["check", rig], []


def _sim_gain_huge(t):
    return ["simulate", IR, PROG, "-o", t / "n.wav", "--gain-db", "1e308"], []


def _sim_steps_huge(t):
    return ["simulate", IR, PROG, "-o", t / "n.wav", "--steps", "0:1e300"], []


def _sim_ramp_huge(t):
    return ["simulate", IR, PROG, "-o", t / "n.wav", "--ramp-db", "-10", "1e9"], []


def _margin_gain_huge(t):
    return ["margin", IR, "--gain-db", "1e308"], []


def _map_area_outside(t):
    return ["map", "--mic", "lectern", "--area", "100", "100", "200", "200"], []


def _sheet_long_name(t):
    rig = _rig_copy(t, lambda s: s.replace('name = "lectern"', f'name = "{"x" * 10_000}"', 1))
    return ["sheet", rig, "-o", t / "s.pdf"], []


def _sim_program_at_7_hz(t):
    sf.write(t / "slow.wav", np.zeros(70), 7, subtype="FLOAT")
    return ["simulate", IR, t / "slow.wav", "-o", t / "n.wav"], []


def _margin_band_beyond_nyquist(t):
    return ["margin", IR, "--band-hz", "10", "1e6"], []


def _ringout_band_beyond_nyquist(t):
    return ["ringout", IR, "--band-hz", "10", "1e6"], []


def _ringout_dc_crossing(t):
    sf.write(t / "tiny.wav", np.array([0.0, 0.5, 0.2, 0.1]), 48000, subtype="FLOAT")
    return ["ringout", t / "tiny.wav"], []


def _click_unknown_option(t):
    return ["margin", IR, "--bogus"], []


def _click_missing_option(t):
    return ["simulate", IR, PROG], []


def _click_bad_number(t):
    return ["margin", IR, "--gain-db", "loud"], []


def _sim_wrong_extension(t):
    return ["simulate", IR, PROG, "-o", t / "x.mp3"], []


def _plot_wrong_extension(t):
    return ["margin", IR, "--plot", t / "p.txt"], []


def _map_wrong_extension(t):
    return ["map", "--mic", "lectern", "-o", t / "m.jpg"], []


def _check_listener_on_speaker(t):
    # the farthest seat moved onto a mains loudspeaker (its position in the example rig)
    edit = lambda s: s.replace("position_m = [21.5, 5.0, 1.2]", "position_m = [15.0, 9.65, 3.2]", 1)  # noqa: E731
    return ["check", _rig_copy(t, edit)], []


def _check_huge_rig(t):
    p = t / "rig.toml"
    p.write_text('name = "x"\nroom_file = "r.toml"\n' + "# padding\n" * 500_000, encoding="utf-8")  # 5 MB
    return ["check", p], []


def _check_no_open_mic(t):
    return ["check", _rig_copy(t, lambda s: s.replace("open = true", "open = false"))], []


# ---- the signal chain's keys (issue 17): the example's lectern mic (mics[0]) and first column (speakers[0])
_LECTERN_HP = "high_pass = { freq_hz = 120.0, order = 2 }"


def _chain_edit(t, old, new):
    def edit(s):
        assert old in s, old  # the example rig still holds the line this case edits
        return s.replace(old, new, 1)
    return ["check", _rig_copy(t, edit)], []


def _check_hp_above_lp(t):
    return _chain_edit(t, _LECTERN_HP, _LECTERN_HP + '\neq = [{ kind = "low_pass", freq_hz = 100.0 }]')


def _check_hp_order_zero(t):
    return _chain_edit(t, _LECTERN_HP, "high_pass = { freq_hz = 120.0, order = 0 }")


def _check_hp_order_negative(t):
    return _chain_edit(t, _LECTERN_HP, "high_pass = { freq_hz = 120.0, order = -2 }")


def _check_missing_response_file(t):
    return _chain_edit(t, _LECTERN_HP, _LECTERN_HP + '\nresponse_file = "no_such_capsule.csv"')


def _check_unknown_preset(t):
    return _chain_edit(t, 'preset = "column-loudspeaker"', 'preset = "column-speaker"')


def _check_malformed_table(t):
    (t / "capsule.csv").write_text("frequency_hz, level_db\n100, -3\n1000, loud\n", encoding="utf-8")
    return _chain_edit(t, _LECTERN_HP, _LECTERN_HP + '\nresponse_file = "capsule.csv"')


def _check_table_not_increasing(t):
    (t / "column.csv").write_text("100, -3\n1000, 0\n800, -1\n", encoding="utf-8")
    return _chain_edit(t, 'usable_range = { low_hz = 110.0, high_hz = 15000.0 }   # this pair',
                       'response_file = "column.csv"  # this pair')


def _check_range_inverted(t):
    return _chain_edit(t, "usable_range = { low_hz = 110.0, high_hz = 15000.0 }",
                       "usable_range = { low_hz = 15000.0, high_hz = 110.0 }")


def _check_unknown_spectrum(t):
    return _chain_edit(t, 'spectrum = "raised"', 'spectrum = "whispered"')


def _check_eq_unknown_kind(t):
    return _chain_edit(t, _LECTERN_HP, _LECTERN_HP + '\neq = [{ kind = "bell", freq_hz = 2500.0, gain_db = -3.0 }]')


CASES = [
    ("simulate -o PROGRAM", _sim_out_is_program, ["--out", "input"]),
    ("simulate -o IR", _sim_out_is_ir, ["--out", "input"]),
    ("simulate -o symlink to PROGRAM", _sim_out_is_symlink_to_program, ["--out", "input"]),
    ("margin --plot IR", _margin_plot_is_ir, ["--plot", "input"]),
    ("margin --plot symlink to IR", _margin_plot_symlink_to_ir, ["--plot", "input"]),
    ("measure --combined-out input", _combine_out_is_input, ["--combined-out", "input"]),
    ("sheet -o RIG", _sheet_out_is_rig, ["--out", "input"]),
    ("simulate -o unwritable", _sim_unwritable_folder, ["--out"]),
    ("margin --plot folder", _margin_plot_is_folder, ["--plot", "folder"]),
    ("sheet -o folder", _sheet_out_is_folder, ["--out"]),
    ("sheet -o missing folder", _sheet_out_in_missing_folder, ["--out", "does not exist"]),
    ("listen --log unwritable", _listen_log_unwritable, ["--log"]),
    ("listen --log folder", _listen_log_is_folder, ["--log", "folder"]),
    ("sheet --cuts nested JSON", _sheet_cuts_nested, ["--cuts", "cuts.json"]),
    ("sheet --map nested JSON", _sheet_map_nested, ["--map", "map.json"]),
    ("sheet --measured nested JSON", _sheet_measured_nested, ["session.json"]),
    ("sheet --measured stereo IR", _sheet_measured_stereo, ["01.wav", "mono"]),
    ("polar table not UTF-8", _polar_not_utf8, ["box.toml", "UTF-8", "speaker"]),
    ("polar table nested", _polar_nested, ["box.toml", "speaker"]),
    ("simulate --gain-db 1e308", _sim_gain_huge, ["--gain-db"]),
    ("simulate --steps 0:1e300", _sim_steps_huge, ["--steps"]),
    ("simulate --ramp-db -10 1e9", _sim_ramp_huge, ["--ramp-db"]),
    ("margin --gain-db 1e308", _margin_gain_huge, ["--gain-db"]),
    ("map --area outside the room", _map_area_outside, ["--area", "floor"]),
    ("sheet 10000-character name", _sheet_long_name, ["rig.toml", "100 characters"]),
    ("simulate 7 Hz program", _sim_program_at_7_hz, ["slow.wav", "sample rate"]),
    ("margin --band-hz beyond Nyquist", _margin_band_beyond_nyquist, ["--band-hz"]),
    ("ringout --band-hz beyond Nyquist", _ringout_band_beyond_nyquist, ["--band-hz"]),
    ("ringout 4-sample IR", _ringout_dc_crossing, ["tiny.wav", "0 Hz"]),
    ("click: unknown option", _click_unknown_option, ["--bogus", "howl margin --help"]),
    ("click: missing option", _click_missing_option, ["--out"]),
    ("click: not a number", _click_bad_number, ["--gain-db"]),
    ("simulate -o x.mp3", _sim_wrong_extension, ["--out", ".wav"]),
    ("margin --plot p.txt", _plot_wrong_extension, ["--plot", ".png"]),
    ("map -o m.jpg", _map_wrong_extension, ["--out", ".png"]),
    ("check: listener on a loudspeaker", _check_listener_on_speaker, ["rig.toml", "listener", "loudspeaker"]),
    ("check: no open mic", _check_no_open_mic, ["rig.toml", "no open mic"]),
    ("check: a 5 MB rig", _check_huge_rig, ["rig.toml", "MB"]),
    ("check: high-pass above low-pass", _check_hp_above_lp, ["rig.toml", "mics[0].high_pass", "low-pass", "120 Hz"]),
    ("check: high-pass order 0", _check_hp_order_zero, ["rig.toml", "mics[0].high_pass.order", "got 0"]),
    ("check: high-pass order -2", _check_hp_order_negative, ["rig.toml", "mics[0].high_pass.order", "got -2"]),
    ("check: missing response file", _check_missing_response_file,
     ["rig.toml", "mics[0].response_file", "not found", "no_such_capsule.csv"]),
    ("check: unknown preset", _check_unknown_preset,
     ["rig.toml", "speakers[0].preset", "column-speaker", "column-loudspeaker", "howl presets"]),
    ("check: malformed response table", _check_malformed_table,
     ["rig.toml", "mics[0].response_file", "capsule.csv", "line 3"]),
    ("check: response table not increasing", _check_table_not_increasing,
     ["rig.toml", "speakers[0].response_file", "column.csv", "line 3", "increase"]),
    ("check: usable range inverted", _check_range_inverted, ["rig.toml", "speakers[0].usable_range.high_hz"]),
    ("check: unknown talker spectrum", _check_unknown_spectrum, ["rig.toml", "talkers[0].spectrum", "whispered"]),
    ("check: unknown EQ kind", _check_eq_unknown_kind, ["rig.toml", "mics[0].eq[0].kind", "bell", "peaking"]),
]

# internal names that must never reach the user in place of the option they typed
INTERNAL = ("gain_db:", "band_hz", "steps time", "ramp_db[", "freq_hz:", "min_gain_per_notch_db")


@pytest.mark.parametrize("build, words", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_one_line_exit_2_no_traceback_inputs_untouched(tmp_path, build, words):
    args, keep = build(tmp_path)
    before = {p: _digest(p) for p in keep}
    r = _run(args)
    lines = [ln for ln in r.stderr.splitlines() if not ln.startswith("howl: warning:")]
    assert r.exit_code == 2, (r.exit_code, r.stderr, r.exception)
    assert len(lines) == 1 and lines[0].startswith("howl: error: "), r.stderr
    assert "Traceback" not in r.stderr and r.stdout == ""
    for w in words:
        assert w in lines[0], (w, lines[0])
    for bad in INTERNAL:
        assert bad not in lines[0], (bad, lines[0])
    for p in keep:
        assert _digest(p) == before[p], f"{p} changed"
    leftovers = [q.name for q in tmp_path.rglob(".*") if q.is_file()]
    assert not leftovers, leftovers  # no hidden temporaries left beside a target


def test_a_bom_at_the_start_of_a_rig_file_is_accepted(tmp_path):
    rig = _rig_copy(tmp_path)
    rig.write_bytes(b"\xef\xbb\xbf" + rig.read_bytes())
    r = _run(["check", rig])
    assert r.exit_code == 0, r.stderr


def test_outputs_follow_the_umask(tmp_path):
    # issue 19 item 10: a new output gets 0666 less the umask, like any file a tool writes
    old = os.umask(0o022)
    try:
        r = _run(["simulate", IR, PROG, "-o", tmp_path / "a.wav", "--gain-db", "-6"])
        os.umask(0o077)
        r2 = _run(["simulate", IR, PROG, "-o", tmp_path / "b.wav", "--gain-db", "-6"])
    finally:
        os.umask(old)
    assert r.exit_code == 0 and r2.exit_code == 0, (r.stderr, r2.stderr)
    assert stat.S_IMODE((tmp_path / "a.wav").stat().st_mode) == 0o644
    assert stat.S_IMODE((tmp_path / "b.wav").stat().st_mode) == 0o600


def test_one_spelling_for_the_output_file_across_commands():
    # issue 19 item 10: "-o/--out" everywhere; map's old "--output" still works but is not shown
    for cmd in ("simulate", "sheet", "map"):
        text = CliRunner().invoke(app, [cmd, "--help"], terminal_width=200).stdout
        assert "--out " in text or "--out\n" in text or "-o, --out" in text, (cmd, text)
        assert "--output " not in text, (cmd, text)


def test_the_old_map_output_spelling_still_writes(tmp_path):
    r = _run(["map", "--mic", "lectern", "--step-m", "1.0", "--output", tmp_path / "m.png"])
    assert r.exit_code == 0, r.stderr
    assert (tmp_path / "m.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_a_truncated_wav_is_read_with_a_warning(tmp_path):
    sf.write(tmp_path / "ir.wav", np.r_[0.0, 0.5, np.zeros(4000)], 48000, subtype="FLOAT")
    data = (tmp_path / "ir.wav").read_bytes()
    (tmp_path / "cut.wav").write_bytes(data[: len(data) - 8000])  # the header still claims 4002 samples
    from howl.errors import HowlWarning
    from howl.fileio import read_wav

    with pytest.warns(HowlWarning, match="truncated"):
        x, fs = read_wav(tmp_path / "cut.wav")
    assert fs == 48000 and x.size == 4002 - 2000  # 8000 bytes = 2000 float32 samples gone
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        read_wav(tmp_path / "ir.wav")  # the whole file: no warning


def test_sigterm_inside_an_atomic_write_removes_the_temporary(tmp_path):
    # issue 18 item 3: SIGTERM is raised as an interrupt, so the temporary beside the target goes
    from howl.cli import _stop_signals_as_interrupt
    from howl.errors import Terminated
    from howl.fileio import atomic_path

    target = tmp_path / "out.wav"
    target.write_bytes(b"old")
    with pytest.raises(Terminated):
        with _stop_signals_as_interrupt():
            with atomic_path(target) as tmp:
                tmp.write_bytes(b"half")
                os.kill(os.getpid(), signal.SIGTERM)
                for _ in range(1000):  # the handler runs between bytecodes
                    pass
    assert target.read_bytes() == b"old"
    assert sorted(q.name for q in tmp_path.iterdir()) == ["out.wav"]


def test_atomic_paths_write_all_or_none(tmp_path):
    from howl.fileio import atomic_paths

    a, b = tmp_path / "s.png", tmp_path / "s-2.png"
    a.write_bytes(b"old 1")
    b.write_bytes(b"old 2")
    with pytest.raises(KeyboardInterrupt):
        with atomic_paths([a, b]) as (ta, tb):
            ta.write_bytes(b"new 1")
            raise KeyboardInterrupt  # stopped before page 2 was written
    assert a.read_bytes() == b"old 1" and b.read_bytes() == b"old 2"
    assert sorted(q.name for q in tmp_path.iterdir()) == ["s-2.png", "s.png"]
    with atomic_paths([a, b]) as (ta, tb):
        ta.write_bytes(b"new 1")
        tb.write_bytes(b"new 2")
    assert a.read_bytes() == b"new 1" and b.read_bytes() == b"new 2"


def test_scan_warns_about_a_heavily_clipped_recording_and_not_about_a_clean_one(tmp_path):
    # issue 18 item 11; the clean case is a sine whose samples hit its peak exactly (1 kHz at 48 kHz:
    # every 24th sample) without a flat top
    t = np.arange(2 * 48000) / 48000
    sf.write(tmp_path / "clipped.wav", np.clip(3 * np.sin(2 * np.pi * 1000 * t), -1, 1), 48000, subtype="FLOAT")
    sf.write(tmp_path / "clean.wav", 0.5 * np.sin(2 * np.pi * 1000 * t), 48000, subtype="FLOAT")
    clipped = CliRunner().invoke(app, ["scan", str(tmp_path / "clipped.wav"), "--json"])
    clean = CliRunner().invoke(app, ["scan", str(tmp_path / "clean.wav"), "--json"])
    assert clipped.exit_code == 0 and clean.exit_code == 0
    assert "clipped" in clipped.stderr
    assert "clipped" not in clean.stderr


def test_listen_json_stopped_before_the_stream_starts_still_prints_its_report(monkeypatch):
    # issue 18 item 11: Ctrl-C (or SIGTERM) while the input opens: --json still prints one object
    from howl.measure import audio

    def stopped(*_a, **_k):
        raise KeyboardInterrupt

    monkeypatch.setattr(audio, "LiveInput", stopped)
    r = CliRunner().invoke(app, ["listen", "--device", "any", "--duration", "20", "--json"])
    assert r.exit_code == 0, (r.stderr, r.exception)
    rep = json.loads(r.stdout)
    assert rep["interrupted"] is True and rep["duration_s"] == 0.0 and rep["n_howl"] == 0
    r2 = CliRunner().invoke(app, ["listen", "--device", "any", "--duration", "20"])
    assert r2.exit_code == 130  # without --json: the usual interrupt


def test_an_input_folder_protects_its_data_but_a_sheet_may_be_rewritten_there(tmp_path):
    from howl.errors import InputError
    from howl.fileio import refuse_input_as_output

    folder = tmp_path / "session"
    (folder / "ir").mkdir(parents=True)
    (folder / "ir" / "01.wav").write_bytes(b"RIFF")
    (folder / "sheet.pdf").write_bytes(b"%PDF")
    with pytest.raises(InputError, match="input folder"):
        refuse_input_as_output(folder / "ir" / "01.wav", [folder], option="--out")
    refuse_input_as_output(folder / "sheet.pdf", [folder], option="--out")  # an earlier sheet: not an input
    refuse_input_as_output(folder / "ir" / "02.wav", [folder], option="--out")  # a new file: nothing to lose


_TERM_WHILE_WRITING = """
import os, signal, sys
import soundfile

_write = soundfile.write

def write_then_killed(path, *a, **k):
    _write(path, *a, **k)  # the temporary beside the target is on disk now
    os.kill(os.getpid(), signal.SIGTERM)
    for _ in range(10 ** 6):  # the handler runs between bytecodes
        pass
    raise SystemExit("SIGTERM was not delivered")

_block_write = soundfile.SoundFile.write

def block_then_killed(self, data):  # simulate writes its output a block at a time as it goes
    _block_write(self, data)
    os.kill(os.getpid(), signal.SIGTERM)
    for _ in range(10 ** 6):
        pass
    raise SystemExit("SIGTERM was not delivered")

soundfile.write = write_then_killed
soundfile.SoundFile.write = block_then_killed
sys.argv = ["howl", *sys.argv[1:]]
from howl.cli import main
main()
"""


def test_sigterm_while_simulate_writes_leaves_no_temporary(tmp_path):
    # issue 18 item 3: a killed simulate once left hidden temporaries of up to 24 MB beside the target
    import subprocess
    import sys

    out = tmp_path / "out.wav"
    r = subprocess.run([sys.executable, "-c", _TERM_WHILE_WRITING, "simulate", str(IR), str(PROG), "-o", str(out),
                        "--gain-db", "-6"], capture_output=True, text=True, timeout=300)
    assert r.returncode == 128 + signal.SIGTERM, r.stderr
    assert "Traceback" not in r.stderr and "stopped by SIGTERM" in r.stderr
    assert sorted(q.name for q in tmp_path.iterdir()) == []  # neither the target nor a temporary
