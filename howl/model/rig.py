"""Rooms and rigs: frozen dataclasses and their TOML loaders.

Coordinates
-----------
The room corner is the origin; **x** runs along the length, **y** along the
width, **z** up, all in metres. Azimuth 0° points along +x and grows toward
+y; elevation is positive upward. Files give angles in degrees
(``azimuth_deg``); inside the code they are radians (``azimuth_rad``).

Gains and sensitivities (the loop at the rig's stated settings)
----------------------------------------------------------------
* ``Mic.sensitivity_dbv_pa``: mic output in dBV for 1 Pa (e.g. −54 for a
  typical dynamic vocal mic, common practice, no source).
* ``Mix.gains_db[mic]``: the voltage gain in dB from that mic's output to the
  input of every loudspeaker the mix feeds (preamp + channel + fader + bus +
  amplifier input), at the settings the tech states.
* ``Speaker.sensitivity_db_spl_1v_1m``: on-axis SPL at 1 m for 1 V rms at the
  loudspeaker's (or its amplifier's) input.

The product mic sensitivity × mix gain × speaker sensitivity × acoustic path
is the dimensionless open-loop gain from mic to mic, so the planner can say
how many dB each channel may still rise.

Octave bands
------------
Material absorption, measured RT60 and loudspeaker coverage are given per
octave band at the nominal centres :data:`OCTAVE_BANDS_HZ` (125 Hz–8 kHz).

Loading
-------
:func:`load_room` and :func:`load_rig` read the TOML files described in
``docs/file-formats.md`` (a rig names its room file relative to itself) and
return these frozen dataclasses, or raise :class:`howl.errors.InputError` —
and nothing else — naming the file, the key path (list items counted from 0,
``speakers[2].position_m``), the bad value and what was expected.
:func:`with_changes` applies ``--what-if`` edits (``mics.lectern.pattern=omni``)
and re-validates; :func:`rig_to_dict` gives a rig back as file data;
:func:`bundled_rig_path` is the example shipped in ``howl/data/examples``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

#: Nominal octave-band centres (ISO 266) at which room data are given.
OCTAVE_BANDS_HZ: tuple[float, ...] = (125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0)

#: Mic pattern names understood by ``howl.directivity``.
MIC_PATTERNS: tuple[str, ...] = ("omni", "subcardioid", "cardioid", "supercardioid", "hypercardioid", "figure8")

#: Talker source spectra: ANSI S3.5-1997 speech at four vocal efforts, or flat (see howl.model.chain).
TALKER_SPECTRA: tuple[str, ...] = ("normal", "raised", "loud", "shouted", "flat")

#: Shoebox surface names, in this order.
SHOEBOX_SURFACES: tuple[str, ...] = ("floor", "ceiling", "wall_x0", "wall_x1", "wall_y0", "wall_y1")


@dataclass(frozen=True)
class Material:
    """An absorbing finish: energy absorption coefficient per octave band."""

    name: str
    absorption: tuple[float, ...]  # per OCTAVE_BANDS_HZ, each in [0, 1)
    source: str = ""  # provenance note ("from memory, check against product data", a book...)
    description: str = ""


@dataclass(frozen=True)
class Surface:
    """One surface of a room with its material."""

    name: str
    area_m2: float
    material: str
    absorption: tuple[float, ...]  # per OCTAVE_BANDS_HZ


@dataclass(frozen=True)
class Room:
    """A room: a shoebox with materials, or a free shape.

    Shoebox: ``dimensions_m`` = (length, width, height) and six ``surfaces``
    in :data:`SHOEBOX_SURFACES` order (wall_x0 is the wall at x = 0, and so on).
    Free shape: ``dimensions_m`` is None; either ``surfaces`` holds one
    surface named ``"average"`` with the mean absorption over ``surface_m2``,
    or ``surfaces`` is empty and ``rt60_measured_s`` gives the RT60 per band.
    """

    name: str
    volume_m3: float
    surface_m2: float
    surfaces: tuple[Surface, ...]
    dimensions_m: tuple[float, float, float] | None = None
    rt60_measured_s: tuple[float, ...] | None = None
    temperature_c: float = 20.0
    humidity_pct: float = 50.0
    source_file: str | None = None
    description: str = ""

    @property
    def is_shoebox(self) -> bool:
        return self.dimensions_m is not None


@dataclass(frozen=True)
class HighPass:
    """A channel high-pass: a Butterworth of ``order`` (1..4) with its −3 dB point at ``freq_hz``,
    realised as cascaded RBJ cookbook biquads (and one first-order section for odd orders) at 48 kHz."""

    freq_hz: float
    order: int = 2


#: EQ band kinds (RBJ cookbook filters): a cut/boost bell, shelves and pass filters.
EQ_KINDS: tuple[str, ...] = ("peaking", "low_shelf", "high_shelf", "high_pass", "low_pass")


@dataclass(frozen=True)
class EqBand:
    """One band of a channel EQ: an RBJ cookbook biquad of ``kind`` (see :data:`EQ_KINDS`).

    ``gain_db`` applies to peaking and shelves (0 for the pass filters); ``q`` is the cookbook Q
    (for shelves the Q form of the cookbook; 0.7071 is the shelf slope S = 1).
    """

    kind: str
    freq_hz: float
    gain_db: float = 0.0
    q: float = 0.7071067811865476


@dataclass(frozen=True)
class UsableRange:
    """A loudspeaker's usable range: its −10 dB points and the roll-off slopes beyond them.

    Modelled as a high-pass and a low-pass of Butterworth shape with non-integer order
    slope/6, each placed so that it is exactly −10 dB at its point (see ``howl.model.chain``).
    """

    low_hz: float
    high_hz: float
    low_slope_db_per_oct: float = 24.0
    high_slope_db_per_oct: float = 12.0


@dataclass(frozen=True)
class Speaker:
    """A loudspeaker. Coverage angles are −6 dB beamwidths per octave band."""

    name: str
    position_m: tuple[float, float, float]
    azimuth_rad: float
    elevation_rad: float
    coverage_h_deg: tuple[float, ...]  # per OCTAVE_BANDS_HZ
    coverage_v_deg: tuple[float, ...]  # per OCTAVE_BANDS_HZ
    sensitivity_db_spl_1v_1m: float = 100.0
    directivity_file: str | None = None  # table or SOFA file, resolved to an absolute path
    role: str = "main"  # "main", "fill", "delay" or "monitor" (informational)
    delay_s: float = 0.0  # electronic delay in this loudspeaker's feed (delay lines), seconds
    preset: str | None = None  # key in howl/data/presets.toml the file started from
    usable_range: UsableRange | None = None  # None: flat (no roll-off modelled)
    response_file: str | None = None  # CSV frequency_hz, level_db (absolute path), instead of usable_range
    response_table: tuple[tuple[float, float], ...] | None = None  # its (frequency_hz, level_db) rows


@dataclass(frozen=True)
class Mic:
    """A microphone."""

    name: str
    position_m: tuple[float, float, float]
    azimuth_rad: float
    elevation_rad: float
    pattern: str = "cardioid"  # one of MIC_PATTERNS, or "table" with pattern_file
    pattern_file: str | None = None
    sensitivity_dbv_pa: float = -54.0
    open: bool = True  # a muted mic does not take part in the loop
    preset: str | None = None  # key in howl/data/presets.toml the file started from
    high_pass: HighPass | None = None  # the desk channel's high-pass; None: off
    eq: tuple[EqBand, ...] = ()  # the desk channel's EQ bands, in signal order
    response_file: str | None = None  # capsule response CSV frequency_hz, level_db (absolute path)
    response_table: tuple[tuple[float, float], ...] | None = None  # its (frequency_hz, level_db) rows


@dataclass(frozen=True)
class Talker:
    """A source at a mic (a voice, an instrument)."""

    name: str
    position_m: tuple[float, float, float]
    mic: str  # the mic this talker uses
    level_db_spl_1m: float = 60.0  # on-axis level at 1 m (normal speech ≈ 60 dB(A), IEC 60268-16, from memory)
    spectrum: str = "normal"  # one of TALKER_SPECTRA, or "table" with spectrum_file
    spectrum_file: str | None = None  # CSV frequency_hz, level_db (absolute path)
    spectrum_table: tuple[tuple[float, float], ...] | None = None  # its (frequency_hz, level_db) rows


@dataclass(frozen=True)
class Listener:
    """A listening position (at least the farthest one)."""

    name: str
    position_m: tuple[float, float, float]


@dataclass(frozen=True)
class Mix:
    """A console output: which mics feed which speakers, at what gain.

    ``gains_db`` maps mic name → voltage gain in dB (see the module docstring).
    Mains and monitor sends are separate mixes.
    """

    name: str
    speakers: tuple[str, ...]
    gains_db: tuple[tuple[str, float], ...]  # (mic, gain_db) pairs, frozen-friendly
    kind: str = "mains"  # "mains" or "monitor"

    def gain_db(self, mic: str) -> float | None:
        for m, g in self.gains_db:
            if m == mic:
                return g
        return None


@dataclass(frozen=True)
class Rig:
    """Everything the planner needs about one show setup."""

    name: str
    room: Room
    speakers: tuple[Speaker, ...]
    mics: tuple[Mic, ...]
    talkers: tuple[Talker, ...]
    listeners: tuple[Listener, ...]
    mixes: tuple[Mix, ...]
    fsm_db: float = 6.0  # feedback stability margin
    ead_m: float | None = None  # equivalent acoustic distance; None: derived from talker level and target SPL
    target_spl_db: float | None = None  # wanted level at the farthest listener (dB SPL)
    source_file: str | None = None
    description: str = ""
    notes: tuple[str, ...] = field(default_factory=tuple)
    desk: object = None  # howl.loop.desk.Desk from the [desk] table; None: no limits given

    def speaker(self, name: str) -> Speaker:
        for s in self.speakers:
            if s.name == name:
                return s
        raise KeyError(name)

    def mic(self, name: str) -> Mic:
        for m in self.mics:
            if m.name == name:
                return m
        raise KeyError(name)



# The loaders live in howl/model/_rigfile.py (what-if edits in _rigedit.py) (kept apart to keep this module short) and are part of
# this module's public API: ``from howl.rig import load_rig`` works. They are looked up lazily
# (PEP 562) so that the two modules can import each other in either order.
_LOADER_NAMES = (
    "load_room", "load_rig", "with_changes", "rig_to_dict", "bundled_rig_path",
    "ROOM_KEYS", "SHOEBOX_KEYS", "FREE_SHAPE_KEYS", "PATCH_KEYS", "RIG_KEYS", "SPEAKER_KEYS", "MIC_KEYS",
    "TALKER_KEYS", "LISTENER_KEYS", "MIX_KEYS", "SPEAKER_ROLES", "MIX_KINDS",
    "MIN_MIC_SPEAKER_DISTANCE_M", "MIN_TALKER_MIC_DISTANCE_M",
)


def __getattr__(name: str):
    if name in ("with_changes", "rig_to_dict"):
        from howl.model import _rigedit

        return getattr(_rigedit, name)
    if name in _LOADER_NAMES:
        from howl.model import _rigfile

        return getattr(_rigfile, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(list(globals()) + list(_LOADER_NAMES))
