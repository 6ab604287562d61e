"""The desk's EQ: the cuts a console can actually make.

A :class:`Desk` says what the equaliser in the loop can do, in one of two forms:

* ``"parametric"``: a number of free bands (``max_bands``), the deepest cut
  (``max_depth_db``, a depth in dB: 12 means cuts down to −12 dB), the highest Q
  (``max_q``, the cookbook Q of a peaking band; or the narrowest bandwidth in octaves,
  ``min_bandwidth_oct``, which is the same limit said the other way) and the gain step
  (``gain_step_db``; ``None`` = continuous);
* ``"graphic"``: one slider per 1/3-octave band on the ISO 266 nominal centres [1]_,
  each a peaking filter of fixed Q (``graphic_q``, default the Q of a 1/3-octave band
  by the analog cookbook relation [2]_), moved in steps of ``gain_step_db`` within
  ``max_depth_db`` of 0 dB; ``max_bands`` (optional) caps how many sliders may move.

Every limit is optional; a desk with nothing set is ``None`` to the ring-out and the
suggestions, which then behave as they always did. :func:`desk_from_table` reads the
``[desk]`` table of a rig file, :func:`desk_from_options` the command-line options
(which override the table key by key); both raise one-line
:class:`howl.errors.InputError`\\ s naming the key or option.

:meth:`Desk.fit` turns any cut into the nearest one the desk can make (the width is
only ever widened, the depth only ever made shallower to fit the range, and then
rounded to the nearest step; a parametric band's centre to 0.1 Hz and its Q to 0.001,
as the cut list writes them, so every figure is that of the cuts typed into the desk). A graphic slider is modelled as an RBJ peaking section at
the nominal centre: a constant-Q approximation of a real graphic, whose neighbouring
sliders interact in ways that differ from one design to the next.

References
----------
.. [1] ISO 266:1997, Acoustics — Preferred frequencies (the R10 series of nominal
   1/3-octave centres, 25 Hz – 20 kHz). From memory.
.. [2] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note, 2021,
   https://www.w3.org/TR/audio-eq-cookbook/ (peakingEQ; 1/Q = 2·sinh(ln2/2·BW)).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from howl import validate as v

#: Decimals a parametric band's centre (Hz) and Q are set to, as the cut list writes them.
FREQ_DECIMALS = 1
Q_DECIMALS = 3
#: Decimals of a gain on a desk with no gain step (dB), as the cut list writes it.
GAIN_DECIMALS = 2
from howl.errors import InputError
from howl.loop.notch import Notch, bandwidth_oct_from_q, q_from_bandwidth_oct

#: ISO 266 nominal 1/3-octave centre frequencies (Hz), 25 Hz – 20 kHz [1]_.
ISO_266_THIRD_OCTAVE_HZ = (
    25.0, 31.5, 40.0, 50.0, 63.0, 80.0, 100.0, 125.0, 160.0, 200.0, 250.0, 315.0, 400.0, 500.0,
    630.0, 800.0, 1000.0, 1250.0, 1600.0, 2000.0, 2500.0, 3150.0, 4000.0, 5000.0, 6300.0, 8000.0,
    10000.0, 12500.0, 16000.0, 20000.0,
)

#: Q of a 1/3-octave band (analog cookbook relation [2]_), the default graphic slider Q.
THIRD_OCTAVE_Q = 1.0 / (2.0 * math.sinh(math.log(2.0) / 2.0 / 3.0))

#: Defaults of a graphic EQ when only ``eq = "graphic"`` is given: ±12 dB sliders in 0.5 dB steps
#: (a common range and resolution, no source).
GRAPHIC_DEFAULT_RANGE_DB = 12.0
GRAPHIC_DEFAULT_STEP_DB = 0.5

EQ_KINDS = ("parametric", "graphic")
TABLE_KEYS = ("eq", "bands", "max_depth_db", "max_q", "min_bandwidth_oct", "gain_step_db", "graphic_q")


@dataclass(frozen=True)
class Desk:
    """What the console's EQ can do (see the module docstring). ``None`` fields: no limit."""

    eq: str = "parametric"
    max_bands: int | None = None
    max_depth_db: float | None = None
    max_q: float | None = None
    gain_step_db: float | None = None
    graphic_q: float = THIRD_OCTAVE_Q

    @property
    def graphic(self) -> bool:
        return self.eq == "graphic"

    @property
    def min_bandwidth_oct(self) -> float | None:
        """The narrowest band the desk sets (octaves), from ``max_q``; a graphic's fixed width."""
        if self.graphic:
            return bandwidth_oct_from_q(self.graphic_q)
        return None if self.max_q is None else bandwidth_oct_from_q(self.max_q)

    def depth_db(self, default: float) -> float:
        """The deepest cut (dB, > 0): the desk's, or ``default`` when it sets none."""
        return default if self.max_depth_db is None else float(self.max_depth_db)

    def centres_hz(self, sample_rate_hz: float, band_hz=(0.0, math.inf)) -> tuple[float, ...]:
        """The graphic's slider centres inside the band and below 0.49·fs."""
        lo, hi = float(band_hz[0]), min(float(band_hz[1]), 0.49 * float(sample_rate_hz))
        return tuple(f for f in ISO_266_THIRD_OCTAVE_HZ if lo <= f <= hi)

    def round_gain(self, gain_db: float) -> float:
        """A cut's gain as the desk sets it: within its depth, on its step, never 0 dB."""
        g = min(float(gain_db), 0.0)
        if self.max_depth_db is not None:
            g = max(g, -float(self.max_depth_db))
        step = self.gain_step_db
        if step:
            g = -step * round(-g / step)
            if self.max_depth_db is not None and g < -float(self.max_depth_db) - 1e-9:
                g += step
            if g > -step / 2:
                g = -step
        return float(min(round(g, GAIN_DECIMALS), -0.01)) if not step else float(g)

    def fit(self, notch: Notch, sample_rate_hz: float | None = None) -> Notch:
        """The nearest cut the desk can make: a graphic's nearest slider, a parametric band no
        narrower than the desk allows; a full notch becomes the deepest cut the desk has."""
        depth = self.depth_db(18.0 if notch.gain_db is None else max(18.0, -notch.gain_db))
        g = -depth if notch.gain_db is None else notch.gain_db
        if self.graphic:
            fs = math.inf if sample_rate_hz is None else float(sample_rate_hz)
            centres = self.centres_hz(fs) or ISO_266_THIRD_OCTAVE_HZ[:1]
            fc = min(centres, key=lambda c: abs(math.log2(notch.freq_hz / c)))
            return Notch(fc, self.round_gain(g), float(self.graphic_q))
        q = notch.q if self.max_q is None else min(notch.q, float(self.max_q))
        # the centre and Q as the cut list writes them (0.1 Hz, 0.001): the figures howl reports
        # are those of the cuts a technician types in (a Q never rounded past the desk's highest)
        fc = max(round(notch.freq_hz, FREQ_DECIMALS), 10.0 ** -FREQ_DECIMALS)
        q_r = round(q, Q_DECIMALS)
        if self.max_q is not None and q_r > float(self.max_q):
            q_r = math.floor(float(self.max_q) * 10**Q_DECIMALS) / 10**Q_DECIMALS
        if notch.gain_db is None and self.max_depth_db is None and self.gain_step_db is None:
            return replace(notch, freq_hz=fc, q=q_r)  # no depth limit: a full notch stays one
        return Notch(fc, self.round_gain(g), q_r)

    def allows(self, notch: Notch, tol: float = 1e-6) -> bool:
        """True when the desk can make ``notch`` exactly."""
        if notch.gain_db is None:
            return self.max_depth_db is None and not self.graphic
        if self.max_depth_db is not None and -notch.gain_db > self.max_depth_db + tol:
            return False
        if self.gain_step_db and abs(notch.gain_db / self.gain_step_db - round(notch.gain_db / self.gain_step_db)) > tol:
            return False
        if self.graphic:
            return (min(abs(notch.freq_hz - c) for c in ISO_266_THIRD_OCTAVE_HZ) < tol
                    and abs(notch.q - self.graphic_q) < tol)
        return self.max_q is None or notch.q <= self.max_q * (1 + tol)

    def describe(self) -> str:
        """One line for the terminal and the sheet."""
        if self.graphic:
            bands = "" if self.max_bands is None else f", at most {self.max_bands} sliders moved"
            return (f"graphic EQ: 1/3-octave sliders on the ISO 266 centres, Q {self.graphic_q:.2f}, "
                    f"range -{self.depth_db(GRAPHIC_DEFAULT_RANGE_DB):g} dB in {self.gain_step_db or 0:g} dB steps{bands}")
        parts = []
        if self.max_bands is not None:
            parts.append(f"{self.max_bands} band(s)")
        if self.max_depth_db is not None:
            parts.append(f"cuts to -{self.max_depth_db:g} dB")
        if self.max_q is not None:
            parts.append(f"Q up to {self.max_q:g} ({self.min_bandwidth_oct:.3f} oct)")
        if self.gain_step_db:
            parts.append(f"{self.gain_step_db:g} dB steps")
        return "parametric EQ: " + (", ".join(parts) if parts else "no limits")

    def to_json(self) -> dict:
        return {
            "eq": self.eq,
            "max_bands": self.max_bands,
            "max_depth_db": self.max_depth_db,
            "max_q": None if self.graphic else self.max_q,
            "min_bandwidth_oct": self.min_bandwidth_oct,
            "gain_step_db": self.gain_step_db,
            "graphic_q": self.graphic_q if self.graphic else None,
            "graphic_centres_hz": list(ISO_266_THIRD_OCTAVE_HZ) if self.graphic else None,
        }


# --------------------------------------------------------------------------- parsing


def _check(desk: Desk, names: dict, file: str | None) -> Desk:
    """Validate every field; ``names`` maps a field to what the user typed (key or option)."""
    def n(field):
        return names.get(field, field)

    eq = v.choice(desk.eq, n("eq"), EQ_KINDS, file=file)
    bands = None if desk.max_bands is None else v.integer(desk.max_bands, n("max_bands"), 1, 64, file=file)
    depth = None
    if desk.max_depth_db is not None:
        d = v.number(desk.max_depth_db, n("max_depth_db"), unit="dB", file=file)
        if d <= 0:
            raise InputError(f"must be a depth in dB > 0 (12 means cuts down to -12 dB), got {d:g} dB "
                             "(a cut cannot be 0 dB or a boost)", file=file, key=n("max_depth_db"))
        depth = v.in_range(d, n("max_depth_db"), 0.0, 60.0, unit="dB", lo_open=True, file=file)
    q = None if desk.max_q is None else v.in_range(desk.max_q, n("max_q"), 0.0, 200.0, lo_open=True, file=file)
    step = None
    if desk.gain_step_db is not None:
        step = v.in_range(desk.gain_step_db, n("gain_step_db"), 0.0, 12.0, unit="dB", lo_open=True, file=file)
    gq = v.in_range(desk.graphic_q, n("graphic_q"), 0.0, 200.0, lo_open=True, file=file)
    if eq == "graphic":
        if q is not None:
            raise InputError("does not apply to a graphic EQ (its sliders have a fixed Q: use the graphic Q)",
                             file=file, key=n("max_q"))
        depth = GRAPHIC_DEFAULT_RANGE_DB if depth is None else depth
        step = GRAPHIC_DEFAULT_STEP_DB if step is None else step
    if depth is not None and step is not None and step > depth:
        raise InputError(f"must not exceed the deepest cut ({depth:g} dB), got {step:g} dB",
                         file=file, key=n("gain_step_db"))
    return Desk(eq, bands, depth, q, step, gq)


def _q_of(max_q, min_bw, q_name: str, bw_name: str, file: str | None) -> float | None:
    if max_q is not None and min_bw is not None:
        raise InputError(f"give either {q_name} or {bw_name}, not both (they are one limit)", file=file, key=bw_name)
    if min_bw is not None:
        bw = v.in_range(min_bw, bw_name, 0.0, 4.0, unit="oct", lo_open=True, file=file)
        return q_from_bandwidth_oct(bw)
    return max_q


def desk_from_table(table, *, file: str | None = None, prefix: str = "desk") -> Desk:
    """The desk of a rig file's ``[desk]`` table (keys: see :data:`TABLE_KEYS`)."""
    if not isinstance(table, dict):
        raise InputError(f"must be a table, got {type(table).__name__}", file=file, key=prefix)
    v.known_keys(table, prefix, TABLE_KEYS, file=file)
    names = {"eq": f"{prefix}.eq", "max_bands": f"{prefix}.bands", "max_depth_db": f"{prefix}.max_depth_db",
             "max_q": f"{prefix}.max_q", "gain_step_db": f"{prefix}.gain_step_db", "graphic_q": f"{prefix}.graphic_q"}
    eq = table.get("eq", "parametric")
    if not isinstance(eq, str):
        raise v.fail(names["eq"], "a string (parametric or graphic)", eq, file=file)
    q = _q_of(table.get("max_q"), table.get("min_bandwidth_oct"), names["max_q"], f"{prefix}.min_bandwidth_oct", file)
    desk = Desk(eq.strip().lower(), table.get("bands"), table.get("max_depth_db"), q, table.get("gain_step_db"),
                table.get("graphic_q", THIRD_OCTAVE_Q))
    return _check(desk, names, file)


OPTION_NAMES = {"eq": "--eq", "max_bands": "--max-bands", "max_depth_db": "--max-depth-db", "max_q": "--max-q",
                "gain_step_db": "--gain-step-db", "graphic_q": "--graphic-q"}


def desk_from_options(*, eq=None, max_bands=None, max_depth_db=None, max_q=None, min_bandwidth_oct=None,
                      gain_step_db=None, graphic_q=None, base: Desk | None = None) -> Desk | None:
    """The desk from command-line options, each overriding the rig's ``[desk]`` (``base``).

    Returns ``None`` when neither gives anything (the ring-out and suggestions as before).
    """
    given = {k: x for k, x in (("eq", eq), ("max_bands", max_bands), ("max_depth_db", max_depth_db),
                               ("max_q", max_q), ("min_bandwidth_oct", min_bandwidth_oct),
                               ("gain_step_db", gain_step_db), ("graphic_q", graphic_q)) if x is not None}
    if not given:
        return base
    q = _q_of(max_q, min_bandwidth_oct, "--max-q", "--min-width-oct", None)
    d = base or Desk()
    if isinstance(eq, str):
        eq = eq.strip().lower()
    if eq == "graphic" and d.eq != "graphic":
        d = replace(d, max_q=None)
    if eq == "parametric" and d.eq == "graphic":  # the graphic's filled-in range and step do not carry over
        d = Desk()
    new = Desk(
        eq if eq is not None else d.eq,
        max_bands if max_bands is not None else d.max_bands,
        max_depth_db if max_depth_db is not None else (None if eq == "graphic" and d.eq != "graphic" else d.max_depth_db),
        q if q is not None else d.max_q,
        gain_step_db if gain_step_db is not None else (None if eq == "graphic" and d.eq != "graphic" else d.gain_step_db),
        graphic_q if graphic_q is not None else d.graphic_q,
    )
    return _check(new, OPTION_NAMES, None)


# --------------------------------------------------------------------------- suggestions for one ringing frequency


def suggest_on_desk(desk: Desk, freq_hz: float, needed_db: float, *, drift_oct: float = 0.0,
                    min_bandwidth_oct: float = 0.0, sample_rate_hz: float | None = None) -> tuple[Notch, bool]:
    """The shallowest cut the desk can make that takes ``needed_db`` off ``freq_hz`` wherever it
    drifts (f·2^(±drift/2)): (cut, True), or the deepest it has there and False when none reaches.

    Parametric: centred on the frequency, at least ``min_bandwidth_oct`` wide and no narrower than
    the desk allows. Graphic: the nearest slider. Depths are tried on the desk's steps (0.1 dB when
    it has none), judged on the analog prototype of the cookbook peaking filter [2]_.
    """
    import numpy as np

    from howl.loop.notch import MAX_NOTCH_BANDWIDTH_OCT, analog_response

    f0 = v.positive(freq_hz, "freq_hz", unit="Hz")
    need = max(float(needed_db), 0.0)
    if desk.graphic:
        fs = math.inf if sample_rate_hz is None else float(sample_rate_hz)
        centres = desk.centres_hz(fs) or ISO_266_THIRD_OCTAVE_HZ[:1]
        fc = min(centres, key=lambda c: abs(math.log2(f0 / c)))
        q = float(desk.graphic_q)
    else:
        fc = f0
        bw = max(min_bandwidth_oct, desk.min_bandwidth_oct or 0.0)
        bw = min(max(bw, 1.0 / 24.0), max(MAX_NOTCH_BANDWIDTH_OCT, desk.min_bandwidth_oct or 0.0))
        q = min(q_from_bandwidth_oct(bw), desk.max_q or math.inf)
    depth = desk.depth_db(30.0)
    step = desk.gain_step_db or 0.1
    gains = -step * np.arange(1, int(math.floor(depth / step + 1e-9)) + 1)
    if gains.size == 0:
        gains = np.array([-depth])
    half = 2.0 ** (drift_oct / 2.0)
    ratios = np.array([f0 / half, f0, f0 * half]) / fc
    got = np.array([np.min(-20.0 * np.log10(np.abs(analog_response(Notch(fc, float(g), q), ratios)))) for g in gains])
    ok = np.flatnonzero(got >= need - 1e-9)
    if ok.size:
        return Notch(fc, float(gains[ok[0]]), q), True
    return Notch(fc, float(gains[-1]), q), False


def merge_on_desk(desk: Desk, notches, sample_rate_hz: float) -> list[Notch]:
    """Cuts merged as the desk would: a graphic's cuts on one slider become its deepest setting;
    a parametric desk's overlapping cuts merge (:func:`howl.loop.notch.merge_notches`) and are
    then set as the desk sets them (:meth:`Desk.fit`). Sorted by frequency."""
    from howl.loop.notch import MAX_NOTCH_BANDWIDTH_OCT, merge_notches

    fitted = [desk.fit(n, sample_rate_hz) for n in notches]
    if desk.graphic:
        best: dict = {}
        for n in fitted:
            if n.freq_hz not in best or n.gain_db < best[n.freq_hz].gain_db:
                best[n.freq_hz] = n
        return sorted(best.values(), key=lambda n: n.freq_hz)
    cap = max(MAX_NOTCH_BANDWIDTH_OCT, desk.min_bandwidth_oct or 0.0)
    return sorted((desk.fit(n, sample_rate_hz) for n in merge_notches(fitted, sample_rate_hz, cap)),
                  key=lambda n: n.freq_hz)
