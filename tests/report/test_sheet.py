"""The gain-margin sheet: the numbers on the printed page are the numbers of plan/margin/ringout.

The page is read back with poppler-utils (pdftotext -bbox, pdftoppm, pdffonts: Debian's
poppler-utils, installed by .ci/run), so these tests check what a reader of the PDF sees,
not the sheet's own data structure.
"""

from __future__ import annotations

import html
import json
import math
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from howl.cli import app
from howl.fileio import write_wav_atomic
from howl.model.rig import bundled_rig_path

runner = CliRunner()

needs_poppler = pytest.mark.skipif(
    shutil.which("pdftotext") is None or shutil.which("pdftoppm") is None,
    reason="poppler-utils (pdftotext, pdftoppm) not installed; .ci/run installs it",
)

# Paper sizes in PostScript points: ISO 216 A4 = 210 x 297 mm, US Letter = 8.5 x 11 in.
PAPER_PT = {"a4": (595.276, 841.890), "letter": (612.0, 792.0)}

FS_HZ = 8000


# ----------------------------------------------------------------------------- helpers


def _cli_json(args: list[str]) -> dict:
    res = runner.invoke(app, args)
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


def _words(pdf: Path, page: int = 1) -> list[tuple[float, float, float, float, str]]:
    """Words on one page with their boxes (xMin, yMin, xMax, yMax, text), y down from the top."""
    out = subprocess.run(
        ["pdftotext", "-bbox", "-f", str(page), "-l", str(page), str(pdf), "-"],
        capture_output=True, text=True, check=True,
    ).stdout
    words = []
    for m in re.finditer(r'<word xMin="([\d.]+)" yMin="([\d.]+)" xMax="([\d.]+)" yMax="([\d.]+)">(.*?)</word>', out):
        words.append((float(m[1]), float(m[2]), float(m[3]), float(m[4]), html.unescape(m[5])))
    return words


def _words_on_page_with(pdf: Path, word: str):
    """The words of the first page that holds ``word``."""
    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True).stdout
    n = int(re.search(r"Pages:\s+(\d+)", info).group(1))
    for page in range(1, n + 1):
        words = _words(pdf, page)
        if any(w[4] == word for w in words):
            return words
    raise AssertionError(f"{word!r} is on no page")


def _num(text: str) -> float:
    """A number as printed on the sheet (typographic minus, signs, brackets, units around it)."""
    t = text.replace("\u2212", "-").strip("()")
    return float(re.sub(r"[^0-9.+-]", "", t))


def _is_num(text: str) -> bool:
    return re.fullmatch(r"\(?[+\u2212-]?\d+(\.\d+)?\)?", text) is not None


def _freq_hz(cell: list[str]) -> float:
    """'2.5 kHz' or '1492 Hz' read back to Hz."""
    value = _num(cell[0])
    unit = cell[1] if len(cell) > 1 else "Hz"
    return value * (1000.0 if unit.lower() == "khz" else 1.0)


def _table_rows(words, header_titles: list[str], first_col_names: list[str], below_y: float = 0.0, last_w: float = 130.0):
    """Read a table: columns from the header words, rows from the first-column names.

    Returns {name: {header: [words top-to-bottom, left-to-right]}}.
    """
    heads = []
    for title in header_titles:
        cands = [w for w in words if w[4] == title and w[1] > below_y]
        assert cands, f"column {title!r} not found on the page"
        if not heads:  # the first column's title fixes the header line
            heads.append((min(cands, key=lambda w: w[1]), title))
        else:
            heads.append((min(cands, key=lambda w: abs(w[1] - heads[0][0][1])), title))
    head_y = max(h[0][3] for h in heads)
    heads.sort(key=lambda h: h[0][0])
    col_x = [h[0][0] for h in heads]
    starts = []
    for name in first_col_names:
        cands = [w for w in words if w[4] == name and w[1] > head_y and w[0] < col_x[0] + 1.0]
        assert cands, f"row {name!r} not found on the page"
        starts.append((min(cands, key=lambda w: w[1]), name))
    starts.sort(key=lambda s: s[0][1])
    rows = {}
    for i, (w0, name) in enumerate(starts):
        top = w0[1] - 6.0
        bottom = starts[i + 1][0][1] - 6.0 if i + 1 < len(starts) else w0[1] + 40.0
        cells: dict[str, list] = {t: [] for _, t in heads}
        for w in words:
            yc = 0.5 * (w[1] + w[3])
            if not (top <= yc < bottom):
                continue
            k = max([j for j, x in enumerate(col_x) if w[0] >= x - 1.0], default=None)
            if k is not None and w[0] < col_x[-1] + last_w:
                cells[heads[k][1]].append(w)
        rows[name] = {t: [w[4] for w in sorted(ws, key=lambda w: (round(w[1] / 3.0), w[0]))] for t, ws in cells.items()}
    return rows


def _first_num(cell: list[str]) -> float:
    return _num(next(t for t in cell if _is_num(t)))


def _close_to_print(page_value: float, json_value: float, digits: int = 1) -> bool:
    """The page shows the JSON value rounded to ``digits`` decimals."""
    return abs(page_value - json_value) <= 0.5 * 10.0 ** (-digits) + 1e-9


def _write_session(folder: Path) -> dict[str, Path]:
    """A synthetic measurement session for the bundled rig (two loops, seeded)."""
    (folder / "ir").mkdir(parents=True)
    # Loop A: inverting pure delay, -0.5·z^-8 at 8 kHz (1 ms). Its phase-aware and
    # phase-blind margins are both -20·log10(0.5) = 6.021 dB and it howls at odd
    # multiples of 500 Hz (first principles; van Waterschoot & Moonen, Proc. IEEE 2011,
    # MSG definition).
    a = np.zeros(800)
    a[8] = -0.5
    # Loop B: two taps plus a decaying diffuse tail (seeded), a loop that is unstable as measured.
    rng = np.random.default_rng(20261202)
    n = np.arange(2400)
    b = 0.03 * rng.standard_normal(n.size) * np.exp(-n / 600.0)
    b[:16] = 0.0
    b[16] += 0.3
    b[40] -= 0.2
    write_wav_atomic(folder / "ir" / "a.wav", a, FS_HZ)
    write_wav_atomic(folder / "ir" / "b.wav", b, FS_HZ)
    meta = {
        "date": "2026-11-30T19:05:00",
        "sample_rate_hz": FS_HZ,
        "pairs": [
            {"speaker": "column_north", "mic": "lectern", "ir_file": "ir/a.wav"},
            {"speaker": "column_south", "mic": "ambo", "ir_file": "ir/b.wav"},
        ],
    }
    (folder / "session.json").write_text(json.dumps(meta), encoding="utf-8")
    return {"lectern": folder / "ir" / "a.wav", "ambo": folder / "ir" / "b.wav"}


def _margin_json(ir: Path) -> dict:
    """`howl margin IR --json`: the command the sheet's measured numbers must agree with."""
    return _cli_json(["margin", str(ir), "--json"])


PLAN_COLUMNS = ["MIC", "STATED", "DON'T", "MEASURED", "RINGS", "AS", "PAG", "NAG", "REACH"]
_AS_SET = {"stable": "STABLE", "inside_fsm": "INSIDE FSM", "howls": "HOWLS"}


# ----------------------------------------------------------------------------- fixtures


@pytest.fixture(scope="module")
def planned(tmp_path_factory):
    """The bundled rig's sheet (A4 PDF) and its `howl plan --json`."""
    out = tmp_path_factory.mktemp("planned") / "sheet.pdf"
    rig = str(bundled_rig_path())
    sheet = _cli_json(["sheet", rig, "-o", str(out), "--date", "2026-12-02", "--json"])
    plan = _cli_json(["plan", rig, "--json"])
    return out, plan, sheet


@pytest.fixture(scope="module")
def measured(tmp_path_factory):
    """A sheet with a synthetic measured session, and `howl margin --json` of each IR."""
    root = tmp_path_factory.mktemp("measured")
    irs = _write_session(root / "session")
    out = root / "sheet.pdf"
    sheet = _cli_json(["sheet", str(bundled_rig_path()), "--measured", str(root / "session"), "-o", str(out), "--json"])
    margins = {mic: _margin_json(p) for mic, p in irs.items()}
    return out, margins, sheet


# ----------------------------------------------------------------------------- planned numbers


@needs_poppler
def test_per_mic_numbers_on_the_page_equal_the_plan_json(planned):
    _check_rows_against_plan(*planned[:2])


def _check_rows_against_plan(pdf, plan):
    mics = [m for m in plan["mics"]]
    assert mics, "the rig plans no mic"
    words = _words(pdf)
    rows = _table_rows(words, PLAN_COLUMNS, [m["name"] for m in mics])
    for m in mics:
        row = rows[m["name"]]
        # the stated gains the limits are relative to, per mix
        stated = " ".join(row["STATED"])
        for mix, g in m["gains_db"].items():
            assert f"{mix} {g:+.1f}".replace("-", "\u2212") in stated, (mix, stated)
        assert _close_to_print(_first_num(row["PAG"]), m["pag_db"]), (m["name"], row["PAG"])
        assert _close_to_print(_first_num(row["NAG"]), m["nag_db"]), (m["name"], row["NAG"])
        assert _close_to_print(_first_num(row["DON'T"]), m["max_channel_gain_db"]), (m["name"], row["DON'T"])
        assert "planned," in row["DON'T"]
        # the ring band is printed by its nominal ISO 266 label: within 3 % of the exact centre
        assert _freq_hz(row["RINGS"]) == pytest.approx(m["rings_first_hz"], rel=0.03), (m["name"], row["RINGS"])
        assert " ".join(row["AS"]).startswith(_AS_SET[m["stability"]]), row["AS"]
        if m["reach"] == "short":
            # a shortfall is printed rounded UP to 0.1 dB (never "by 0.0"): derived, ceil to the tenth
            shown = max(0.1, math.ceil(round(m["short_by_db"] * 10, 6)) / 10)
            assert row["REACH"][0] == "SHORT" and _first_num(row["REACH"]) == pytest.approx(shown), row["REACH"]
        else:
            assert row["REACH"][0] == "REACHES"
        # classic Davis figures beside PAG and NAG
        assert _close_to_print(_num(row["PAG"][row["PAG"].index("Davis") + 1]), m["davis_pag_db"])
        assert _close_to_print(_num(row["NAG"][row["NAG"].index("Davis") + 1]), m["davis_nag_db"])
    text = subprocess.run(["pdftotext", "-l", "1", str(pdf), "-"], capture_output=True, text=True, check=True).stdout
    together = re.search(r"ALL OPEN MICS TOGETHER: don't go past (\S+) dB", text)
    assert together and _close_to_print(_num(together[1]), plan["headroom_together_db"]), text[:400]
    assert "Single-fader limits do not add" in text


@needs_poppler
def test_sheet_with_what_if_prints_the_numbers_of_plan_with_the_same_what_if(tmp_path):
    # a 150 Hz high-pass on the lectern and a lowered ambo: the sheet and `plan --json` read the same rig
    edits = ["--what-if", "mics.lectern.high_pass={freq_hz=150,order=2}", "--what-if", "mixes.mains.gains_db.ambo=20"]
    rig = str(bundled_rig_path())
    out = tmp_path / "s.pdf"
    sheet = _cli_json(["sheet", rig, "-o", str(out), "--json", *edits])
    plan = _cli_json(["plan", rig, "--json", *edits])
    assert sheet["what_if"] == plan["what_if"] == edits[1::2]
    _check_rows_against_plan(out, plan)


@needs_poppler
def test_sheet_json_carries_the_plan_numbers_unchanged(planned):
    _, plan, sheet = planned
    by_name = {m["name"]: m for m in sheet["mics"]}
    for m in plan["mics"]:
        s = by_name[m["name"]]
        for key in ("pag_db", "nag_db", "margin_db", "max_channel_gain_db", "davis_pag_db", "davis_nag_db"):
            assert s[key] == m[key], key
    muted = set(plan.get("muted_mics", []))
    for name in muted:
        assert by_name[name]["verdict"] == "muted"


@needs_poppler
def test_header_names_rig_room_date_fsm_and_basis(planned):
    pdf, plan, sheet = planned
    text = subprocess.run(["pdftotext", "-l", "1", str(pdf), "-"], capture_output=True, text=True, check=True).stdout
    assert sheet["rig_name"] in text
    assert sheet["room_name"] in text
    assert "2026-12-02" in text
    assert f"{plan['fsm_db']:.1f} dB" in text
    assert "PLANNED from the room model" in text
    # the cautions with their sources sit on page 1
    for needle in ("NIOSH REL", "98-126", "2003/10/EC", "WHO", "voice-alarm"):
        assert needle in text, needle


# ----------------------------------------------------------------------------- measured numbers


@needs_poppler
def test_measured_numbers_on_the_page_equal_the_margin_json(measured):
    pdf, margins, sheet = measured
    words = _words(pdf)
    aware = [w for w in words if w[4] == "PHASE-AWARE"]
    assert aware, "no measured table on page 1"
    rows = _table_rows(
        words, ["MEASURED", "PHASE-AWARE", "PHASE-BLIND", "HOWLS", "DON'T", "VERDICT"],
        ["column_north", "column_south"], below_y=aware[0][1] - 5.0,
    )
    fsm = sheet["fsm_db"]
    for spk, mic in (("column_north", "lectern"), ("column_south", "ambo")):
        row, mj = rows[spk], margins[mic]
        assert mic in row["MEASURED"]
        assert _close_to_print(_first_num(row["PHASE-AWARE"]), mj["gain_margin_db"]), row
        assert _close_to_print(_first_num(row["PHASE-BLIND"]), mj["magnitude_margin_db"]), row
        assert abs(_freq_hz(row["HOWLS"]) - mj["howl_freq_hz"]) <= 0.5, row
        # the documented rule: the lower of (phase-aware - FSM) and phase-blind
        mark = min(mj["gain_margin_db"] - fsm, mj["magnitude_margin_db"])
        assert _close_to_print(_first_num(row["DON'T"]), mark), row


@needs_poppler
def test_pure_delay_loop_prints_its_textbook_margin(measured):
    # -0.5·z^-8 at 8 kHz: MSG = -20·log10(0.5) = 6.021 dB at 500·(2n+1) Hz
    # (first principles; van Waterschoot & Moonen, Proc. IEEE 2011, MSG definition)
    pdf, margins, _ = measured
    words = _words(pdf)
    aware = [w for w in words if w[4] == "PHASE-AWARE"]
    rows = _table_rows(words, ["MEASURED", "PHASE-AWARE", "PHASE-BLIND", "HOWLS"], ["column_north"], below_y=aware[0][1] - 5.0)
    row = rows["column_north"]
    assert _first_num(row["PHASE-AWARE"]) == pytest.approx(6.0, abs=0.05)
    assert _first_num(row["PHASE-BLIND"]) == pytest.approx(6.0, abs=0.05)
    f = _freq_hz(row["HOWLS"])
    assert (f / 500.0) % 2.0 == pytest.approx(1.0, abs=0.01)


@needs_poppler
def test_a_measured_loop_is_printed_beside_the_planned_limit_labelled_by_its_pair(measured):
    pdf, margins, sheet = measured
    rows = _table_rows(_words(pdf), PLAN_COLUMNS, ["lectern", "ambo"])
    fsm = sheet["fsm_db"]
    plan = {m["name"]: m for m in sheet["mics"]}
    for mic, spk in (("lectern", "column_north"), ("ambo", "column_south")):
        mj = margins[mic]
        mark = min(mj["gain_margin_db"] - fsm, mj["magnitude_margin_db"])
        assert _close_to_print(_first_num(rows[mic]["MEASURED"]), mark)
        assert spk in " ".join(rows[mic]["MEASURED"])
        # the plan's whole-loop figure stays in its own column: one measured pair does not replace it
        assert _close_to_print(_first_num(rows[mic]["DON'T"]), plan[mic]["max_channel_gain_db"])
        assert "planned," in rows[mic]["DON'T"]
    text = subprocess.run(["pdftotext", "-l", "1", str(pdf), "-"], capture_output=True, text=True, check=True).stdout
    assert "MEASURED 2026-11-30" in text


@needs_poppler
def test_each_measured_pair_has_the_plans_prediction_for_that_pair_beside_it(measured):
    pdf, margins, sheet = measured
    plan = _cli_json(["plan", str(bundled_rig_path()), "--json"])
    words = _words(pdf)
    aware = [w for w in words if w[4] == "PHASE-AWARE"]
    rows = _table_rows(words, ["MEASURED", "PHASE-AWARE", "PHASE-BLIND", "PLANNED", "HOWLS"],
                       ["column_north", "column_south"], below_y=aware[0][1] - 5.0)
    for spk, mic in (("column_north", "lectern"), ("column_south", "ambo")):
        m = next(x for x in plan["mics"] if x["name"] == mic)
        pair = next(q for q in m["pairs"] if q["speaker"] == spk)
        assert _close_to_print(_first_num(rows[spk]["PLANNED"]), -pair["worst_peak_loop_gain_db"]), rows[spk]
        line = next(x for x in sheet["measured"] if x["speaker"] == spk)
        assert line["planned_magnitude_margin_db"] == pytest.approx(-pair["worst_peak_loop_gain_db"], abs=0.011)


# ----------------------------------------------------------------------------- the page itself


def _check_page(pdf: Path, paper: str, tmp: Path) -> None:
    from PIL import Image

    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True).stdout
    w, h = (float(v) for v in re.search(r"Page size:\s+([\d.]+) x ([\d.]+) pts", info).groups())
    assert (w, h) == pytest.approx(PAPER_PT[paper], abs=0.5)
    subprocess.run(["pdftoppm", "-r", "36", "-f", "1", "-l", "1", "-png", str(pdf), str(tmp / f"{paper}-p")], check=True)
    png = next(tmp.glob(f"{paper}-p*.png"))
    img = np.asarray(Image.open(png).convert("L"), dtype=float)
    # 36 dpi: one pixel per 2 pt
    assert img.shape[1] == pytest.approx(PAPER_PT[paper][0] / 2, abs=1)
    assert img.shape[0] == pytest.approx(PAPER_PT[paper][1] / 2, abs=1)
    ink = img < 128
    assert ink.mean() > 0.03, "page is (nearly) blank"
    # nothing runs off the paper: a 20 pt border stays white (the sheet keeps 34 pt margins)
    b = 10
    border = np.concatenate([ink[:b].ravel(), ink[-b:].ravel(), ink[:, :b].ravel(), ink[:, -b:].ravel()])
    assert not border.any(), "ink in the page border: something is clipped"


@needs_poppler
def test_a4_page_fits_the_paper_and_is_not_blank(planned, tmp_path):
    _check_page(planned[0], "a4", tmp_path)


@needs_poppler
def test_letter_page_fits_the_paper_and_is_not_blank_and_leaves_global_settings_alone(tmp_path):
    import matplotlib

    before = (matplotlib.rcParams["pdf.fonttype"], matplotlib.rcParams["font.family"])
    out = tmp_path / "sheet.pdf"
    res = runner.invoke(app, ["sheet", str(bundled_rig_path()), "--paper", "letter", "-o", str(out)])
    assert res.exit_code == 0, res.output
    _check_page(out, "letter", tmp_path)
    assert (matplotlib.rcParams["pdf.fonttype"], matplotlib.rcParams["font.family"]) == before


@needs_poppler
def test_fonts_are_embedded(planned):
    pdf, _, _ = planned
    out = subprocess.run(["pdffonts", str(pdf)], capture_output=True, text=True, check=True).stdout
    lines = out.strip().splitlines()[2:]
    assert lines, "no fonts listed"
    for line in lines:
        # columns: name type encoding emb sub uni object ID
        assert re.search(r"\s(yes)\s+(yes|no)\s+(yes|no)\s+\d+\s+\d+\s*$", line), line
        assert "Type 3" not in line


def test_png_preview_is_written_at_the_paper_aspect(tmp_path):
    from PIL import Image

    _write_session(tmp_path / "s")
    out = tmp_path / "sheet.png"
    res = runner.invoke(
        app, ["sheet", str(bundled_rig_path()), "--measured", str(tmp_path / "s"), "--no-plan", "--paper", "letter", "-o", str(out)]
    )
    assert res.exit_code == 0, res.output
    img = Image.open(out)
    assert img.size[1] / img.size[0] == pytest.approx(11.0 / 8.5, rel=0.01)
    ink = np.asarray(img.convert("L")) < 128
    assert ink.mean() > 0.03


# ----------------------------------------------------------------------------- rules and bad input


def test_measured_mark_is_fsm_below_the_howl_and_never_above_the_phase_blind_margin():
    from howl.report.sheet import measured_mark_db, measured_verdict

    # stable loop with plenty of phase-aware margin but a high peak elsewhere
    assert measured_mark_db(12.0, 3.0, 6.0) == 3.0
    assert measured_mark_db(8.0, 7.5, 6.0) == pytest.approx(2.0)
    assert measured_verdict(8.0, 7.5, 6.0) == "stable"
    assert measured_verdict(4.0, 3.0, 6.0) == "marginal"
    assert measured_verdict(-0.5, -1.0, 6.0) == "will howl"
    # no crossing at all (margin inf): only the phase-blind margin limits
    assert measured_mark_db(float("inf"), 4.0, 6.0) == 4.0


@pytest.mark.parametrize(
    "args, needle",
    [
        (["-o", "sheet.txt"], "-o"),
        (["-o", "sheet.pdf", "--paper", "a3"], "--paper"),
        (["-o", "sheet.pdf", "--ringout"], "--ringout"),
        (["-o", "sheet.pdf", "--measured", "no_such_folder"], "--measured"),
        (["-o", "sheet.pdf", "--date", "2 Dec"], "--date"),
    ],
    ids=["bad-suffix", "bad-paper", "ringout-without-measured", "missing-session", "bad-date"],
)
def test_bad_options_give_one_line_and_exit_2(tmp_path, monkeypatch, args, needle):
    monkeypatch.chdir(tmp_path)
    res = runner.invoke(app, ["sheet", str(bundled_rig_path()), *args])
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.stderr.strip().splitlines() if ln.startswith("howl: error")]
    assert len(lines) == 1 and needle in lines[0], res.stderr
    assert not (tmp_path / "sheet.pdf").exists()


def test_session_naming_a_mic_the_rig_lacks_is_refused(tmp_path):
    _write_session(tmp_path / "s")
    meta = json.loads((tmp_path / "s" / "session.json").read_text())
    meta["pairs"][0]["mic"] = "pulpit"
    (tmp_path / "s" / "session.json").write_text(json.dumps(meta))
    res = runner.invoke(app, ["sheet", str(bundled_rig_path()), "--measured", str(tmp_path / "s"), "-o", str(tmp_path / "x.pdf")])
    assert res.exit_code == 2
    assert "pulpit" in res.stderr and "session.json" in res.stderr


@needs_poppler
def test_cuts_found_by_listening_are_printed_with_the_asg_they_buy(tmp_path):
    from howl.fileio import read_wav
    from howl.loop.nyquist import nyquist_margin
    from howl.loop.notch import Notch, cascade_sos

    irs = _write_session(tmp_path / "s")
    # a cut where loop B howls first (as a listener would have found it) and a full notch at 500 Hz
    f_b = round(float(nyquist_margin(*read_wav(irs["ambo"])).howl_freq_hz), 1)
    listen = {"notches": [{"freq_hz": f_b, "gain_db": -6.0, "q": 8.0}, {"freq_hz": 500.0, "gain_db": None, "q": 10.0}]}
    (tmp_path / "listen.json").write_text(json.dumps(listen))
    out = tmp_path / "sheet.pdf"
    sheet = _cli_json([
        "sheet", str(bundled_rig_path()), "--measured", str(tmp_path / "s"), "--no-plan",
        "--cuts", str(tmp_path / "listen.json"), "-o", str(out), "--json",
    ])
    words = _words_on_page_with(out, "#")
    rows = _table_rows(words, ["#", "CENTRE", "GAIN", "Q", "WIDTH"], ["1", "2"], below_y=0.0, last_w=60.0)
    notches = [Notch(f_b, -6.0, 8.0), Notch(500.0, None, 10.0)]
    for key, n in zip(("1", "2"), notches):
        assert _first_num(rows[key]["CENTRE"]) == pytest.approx(n.freq_hz, abs=0.5)
        if n.gain_db is None:
            assert rows[key]["GAIN"][0] == "notch"
        else:
            assert _close_to_print(_first_num(rows[key]["GAIN"]), n.gain_db)
        assert _close_to_print(_first_num(rows[key]["Q"]), n.q, digits=2)
        assert _close_to_print(_first_num(rows[key]["WIDTH"]), n.bandwidth_oct, digits=3)
    # ASG of the rig = worst loop's margin with the cuts in the loop minus without (van Waterschoot
    # & Moonen 2011, ASG definition), each margin from the loop analysis with the RBJ cascade inserted
    before, after = [], []
    for p in irs.values():
        h, fs = read_wav(p)
        before.append(nyquist_margin(h, fs).gain_margin_db)
        after.append(nyquist_margin(h, fs, filters_sos=cascade_sos(notches, fs)).gain_margin_db)
    asg = min(after) - min(before)
    assert asg > 0.1  # the cut at the howl frequency buys something
    (cs,) = sheet["cut_sets"]
    assert cs["added_stable_gain_db"] == pytest.approx(asg, abs=1e-9)
    text = subprocess.run(["pdftotext", str(out), "-"], capture_output=True, text=True, check=True).stdout
    assert f"{asg:+.1f} dB".replace("-", "\u2212") in text
    assert "THESE CUTS BUY" in text


@needs_poppler
def test_ringout_cuts_on_the_page_equal_the_ringout_json(tmp_path):
    irs = _write_session(tmp_path / "s")
    meta = json.loads((tmp_path / "s" / "session.json").read_text())
    meta["pairs"] = meta["pairs"][1:]  # loop B only (unstable as measured: the ring-out has work to do)
    (tmp_path / "s" / "session.json").write_text(json.dumps(meta))
    out = tmp_path / "sheet.pdf"
    sheet = _cli_json([
        "sheet", str(bundled_rig_path()), "--measured", str(tmp_path / "s"), "--no-plan", "--ringout", "-o", str(out), "--json",
    ])
    ro = _cli_json(["ringout", str(irs["ambo"]), "--json"])
    assert ro["notches"], "the ring-out found nothing to cut"
    words = _words_on_page_with(out, "#")
    names = [str(i) for i in range(1, len(ro["notches"]) + 1)]
    rows = _table_rows(words, ["#", "CENTRE", "GAIN", "Q", "WIDTH"], names, last_w=60.0)
    for name, n in zip(names, ro["notches"]):
        row = rows[name]
        assert abs(_first_num(row["CENTRE"]) - n["freq_hz"]) <= 0.5 + 1e-9, row
        if n["gain_db"] is None:
            assert row["GAIN"][0] == "notch"
        else:
            assert _close_to_print(_first_num(row["GAIN"]), n["gain_db"]), row
        assert _close_to_print(_first_num(row["Q"]), n["q"], digits=2), row
        assert _close_to_print(_first_num(row["WIDTH"]), n["bandwidth_oct"], digits=3), row
    (cs,) = sheet["cut_sets"]
    assert cs["added_stable_gain_db"] == pytest.approx(ro["added_stable_gain_db"], abs=1e-9)
    text = subprocess.run(["pdftotext", str(out), "-"], capture_output=True, text=True, check=True).stdout
    asg = round(ro["added_stable_gain_db"], 1)
    assert f"{asg:+.1f} dB".replace("-", "\u2212") in text
    assert "THESE CUTS BUY" in text


@needs_poppler
def test_placement_map_is_drawn_with_the_best_spot_of_howl_map(tmp_path):
    rig = str(bundled_rig_path())
    m = _cli_json(["map", rig, "--mic", "lectern", "--step-m", "2.0", "--json"])
    (tmp_path / "map.json").write_text(json.dumps(m))
    out = tmp_path / "sheet.pdf"
    res = runner.invoke(app, ["sheet", rig, "--map", str(tmp_path / "map.json"), "-o", str(out)])
    assert res.exit_code == 0, res.output
    text = subprocess.run(["pdftotext", str(out), "-"], capture_output=True, text=True, check=True).stdout
    best = m["best"]["margin_db"]
    assert f"WHERE lectern COULD GO: margin dB, best {best:+.1f}".replace("-", "\u2212") in text.replace("\n", " ")


def test_map_of_a_mic_the_rig_lacks_is_refused(tmp_path):
    (tmp_path / "map.json").write_text(json.dumps({"mic": "pulpit", "grid": {"x_m": [1.0], "y_m": [1.0], "margin_db": [[0.0]]}}))
    res = runner.invoke(app, ["sheet", str(bundled_rig_path()), "--map", str(tmp_path / "map.json"), "-o", str(tmp_path / "x.pdf")])
    assert res.exit_code == 2
    assert "pulpit" in res.stderr and "--map" in res.stderr


def test_a_mic_heard_through_two_loudspeakers_gets_their_summed_loop(tmp_path):
    # Two pure-delay loops into one mic, 0.3·z^-8 and 0.3·z^-20 at 8 kHz. Each alone: margin
    # -20·log10(0.3) = 10.46 dB; both on at once the loop is 0.3·(z^-8 + z^-20), whose largest
    # positive real-axis crossing is 0.6 at 0 Hz (and every 666.7 Hz): margin -20·log10(0.6) = 4.44 dB
    # (first principles: superposition of the two paths; hand calculation).
    folder = tmp_path / "s"
    (folder / "ir").mkdir(parents=True)
    for name, d in (("n", 8), ("s", 20)):
        h = np.zeros(400)
        h[d] = 0.3
        write_wav_atomic(folder / "ir" / f"{name}.wav", h, FS_HZ)
    meta = {"date": "2026-12-01", "pairs": [
        {"speaker": "column_north", "mic": "lectern", "ir_file": "ir/n.wav"},
        {"speaker": "column_south", "mic": "lectern", "ir_file": "ir/s.wav"},
    ]}
    (folder / "session.json").write_text(json.dumps(meta), encoding="utf-8")
    out = tmp_path / "sheet.png"
    sheet = _cli_json(["sheet", str(bundled_rig_path()), "--measured", str(folder), "--no-plan", "-o", str(out), "--json"])
    lines = {m["speaker"]: m for m in sheet["measured"]}
    assert lines["column_north"]["gain_margin_db"] == pytest.approx(-20 * math.log10(0.3), abs=1e-6)
    assert lines["column_south"]["gain_margin_db"] == pytest.approx(-20 * math.log10(0.3), abs=1e-6)
    both = lines["all 2 speakers"]
    assert both["mic"] == "lectern" and both["ir_file"] == "ir/n.wav + ir/s.wav"
    assert both["gain_margin_db"] == pytest.approx(-20 * math.log10(0.6), abs=1e-6)
    assert both["magnitude_margin_db"] == pytest.approx(-20 * math.log10(0.6), abs=1e-6)


# ----------------------------------------------------------------------------- nothing lost (issue 18)


def test_png_pages_left_by_an_earlier_longer_sheet_are_removed(tmp_path):
    _write_session(tmp_path / "s")
    out = tmp_path / "sheet.png"
    args = ["sheet", str(bundled_rig_path()), "--measured", str(tmp_path / "s"), "-o", str(out), "--json"]
    first = runner.invoke(app, args)
    assert first.exit_code == 0, first.output
    n = len(json.loads(first.stdout)["files"])
    magic = b"\x89PNG\r\n\x1a\n"
    stale = [tmp_path / f"sheet-{k}.png" for k in (n + 1, n + 2)]
    for q in stale:
        q.write_bytes(magic + b"an older sheet's page")
    foreign = tmp_path / f"sheet-{n + 3}.png"  # after the stale pages, but not a PNG: not ours, kept
    foreign.write_text("notes", encoding="utf-8")
    again = runner.invoke(app, args)
    assert again.exit_code == 0, again.output
    assert not any(q.exists() for q in stale)
    assert foreign.read_text(encoding="utf-8") == "notes"
    for q in stale:
        assert f"removed {q}" in again.stderr


def test_a_name_no_installed_font_draws_is_printed_as_question_marks(tmp_path):
    from howl.report._fonts import fallback_for

    name = "\u8bb2\u53f0\U0001F3A4"  # two CJK ideographs and a microphone emoji
    src = Path(bundled_rig_path())
    text = src.read_text(encoding="utf-8").replace('"lectern"', f'"{name}"').replace("\nlectern = ", f'\n"{name}" = ')
    room = re.search(r'room_file\s*=\s*"([^"]+)"', text).group(1)
    text = text.replace(f'"{room}"', f'"{(src.parent / room).resolve().as_posix()}"')
    rig = tmp_path / "rig.toml"
    rig.write_text(text, encoding="utf-8")
    res = runner.invoke(app, ["sheet", str(rig), "-o", str(tmp_path / "s.pdf")])
    assert res.exit_code == 0, (res.output, res.exception)
    if all(fallback_for(ch) is None for ch in name):  # the usual case: no font here draws them
        assert "U+8BB2" in res.stderr and "printed as '?'" in res.stderr
        txt = subprocess.run(["pdftotext", str(tmp_path / "s.pdf"), "-"], capture_output=True, text=True).stdout
        assert "???" in txt


def test_a_long_name_is_cut_to_the_longest_start_that_fits():
    from howl.report._page import _cut_to_width, _text_width_pt

    s = "lectern-" * 1250  # 10 000 characters, no spaces (none stripped at the cut)
    cut = _cut_to_width(s, 9.0, "normal", 120.0)
    assert cut.endswith("\u2026")
    assert _text_width_pt(cut, 9.0) <= 120.0 + 1e-9
    longer = s[: len(cut)] + "\u2026"  # one more character of the name
    assert _text_width_pt(longer, 9.0) > 120.0
