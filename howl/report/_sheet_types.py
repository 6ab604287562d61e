"""The sheet's data model: frozen dataclasses that :mod:`howl.report.sheet` builds and the page draws (private).

Import them from :mod:`howl.report.sheet`, which re-exports them.
"""

from __future__ import annotations

from dataclasses import dataclass, field

# ----------------------------------------------------------------------------
# Data model
# ----------------------------------------------------------------------------


@dataclass(frozen=True)
class MicLine:
    """One microphone as the planner sees it (numbers from ``plan_to_json``)."""

    name: str
    pattern: str
    position_m: tuple[float, float, float]
    is_open: bool
    pag_db: float | None
    nag_db: float | None
    margin_db: float | None
    margin_spread_db: tuple[float, float] | None  # (low, high) of the margin
    max_channel_gain_db: float | None  # the planned "don't go past" mark
    limiting_band_hz: float | None  # the band that rings first
    verdict: str | None
    davis_pag_db: float | None = None
    davis_nag_db: float | None = None
    gains_db: tuple[tuple[str, float], ...] = ()  # the rig's stated gain of this mic per mix
    stability: str | None = None  # the rig as set: stable, inside_fsm, howls
    reach: str | None = None  # at this fader's limit: reaches_target, short
    short_by_db: float | None = None
    pag_basis: str | None = None  # "own_fader" or "together" (plan JSON)


@dataclass(frozen=True)
class MeasuredLine:
    """One measured loop (speaker → mic) with its Nyquist analysis."""

    speaker: str
    mic: str
    ir_file: str
    gain_margin_db: float  # phase-aware (Nyquist)
    magnitude_margin_db: float  # phase-blind
    howl_freq_hz: float
    max_channel_gain_db: float  # the measured "don't go past" mark
    verdict: str
    planned_magnitude_margin_db: float | None = None  # the plan's prediction for the same pair (phase-blind)

    @property
    def label(self) -> str:
        return f"{self.speaker} \u2192 {self.mic}"


@dataclass(frozen=True)
class Curve:
    """A loop-gain curve for one panel.

    ``kind`` is ``"planned"`` (per-band worst-peak loop gain from the planner,
    drawn as steps) or ``"measured"`` (|H| of a measured loop IR).
    ``marks`` are (freq_hz, level_db, text) points to flag (worst crossings).
    """

    panel: str  # the mic the curve belongs to
    label: str
    kind: str
    freq_hz: tuple[float, ...]
    loop_gain_db: tuple[float, ...]
    marks: tuple[tuple[float, float, str], ...] = ()


@dataclass(frozen=True)
class Cut:
    """One cut in console terms; ``gain_db`` None is a full notch."""

    freq_hz: float
    gain_db: float | None
    q: float
    bandwidth_oct: float
    band: str = ""  # a graphic EQ's slider label (ISO 266 centre, "1.25k"); "" for a parametric band


@dataclass(frozen=True)
class CutSet:
    """The cuts for one loop and the stable gain they buy."""

    loop: str
    source: str  # "ring-out" or "listen"
    cuts: tuple[Cut, ...]
    added_stable_gain_db: float | None
    margin_before_db: float | None
    margin_after_db: float | None
    stopped_because: str = ""
    advice: tuple[str, ...] = ()
    tonal_cost_db: float | None = None  # broadband (pink) power the cuts remove
    tonal_cost_speech_db: float | None = None  # the same, speech-weighted
    mark_after_db: float | None = None  # measured "don't go past" with the cuts in
    desk: str = ""  # the desk's EQ the cuts were made for (howl.report.cutlist); "" = ideal EQ


@dataclass(frozen=True)
class MapItem:
    kind: str  # "speaker" | "mic" | "listener" | "talker"
    name: str
    x_m: float
    y_m: float
    azimuth_rad: float | None = None


@dataclass(frozen=True)
class PlacementMap:
    """Plan view (x along the length, y along the width)."""

    outline_m: tuple[float, float] | None  # (length, width) of a shoebox room, else None
    items: tuple[MapItem, ...]


@dataclass(frozen=True)
class MarginMap:
    """A placement map of one mic (the JSON of ``howl map``): margin over a floor grid."""

    mic: str
    method: str
    height_m: float
    x_m: tuple[float, ...]
    y_m: tuple[float, ...]
    margin_db: tuple[tuple[float | None, ...], ...]  # (ny, nx), None where not evaluated
    best_position_m: tuple[float, float, float] | None
    best_margin_db: float | None
    current_margin_db: float | None


@dataclass(frozen=True)
class SheetData:
    """Everything the page shows, already computed."""

    rig_name: str
    room_name: str
    date: str  # ISO date the sheet was made
    fsm_db: float
    basis: str  # "planned", "measured" or "planned+measured"
    basis_words: str
    measured_date: str | None
    mics: tuple[MicLine, ...]
    measured: tuple[MeasuredLine, ...] = ()
    curves: tuple[Curve, ...] = ()
    cut_sets: tuple[CutSet, ...] = ()
    placement: PlacementMap | None = None
    cautions: tuple[tuple[str, str], ...] = ()  # (heading, text)
    notes: tuple[str, ...] = ()
    rig_file: str | None = None
    measured_settings_db: tuple[tuple[str, float], ...] = ()  # reference gains typed in at the measurement
    margin_maps: tuple[MarginMap, ...] = ()
    headroom_together_db: float | None = None  # all open mics together (plan JSON)
    rings_first_hz: float | None = None  # the band that rings first when all rise together
    what_if: tuple[str, ...] = ()  # --what-if edits the rig was read with

    def to_json(self) -> dict:
        """The sheet's numbers as a JSON-ready dict (``howl sheet --json``)."""
        from howl.fileio import to_jsonable

        d = to_jsonable(self)
        d["measured"] = [dict(to_jsonable(m), label=m.label) for m in self.measured]
        return d


