"""The detector's settings and results (private: re-exported by :mod:`howl.detect`)."""

from __future__ import annotations

from dataclasses import dataclass

from howl import validate as v


@dataclass(frozen=True)
class DetectorConfig:
    """Detector settings. Thresholds and why (tuned on synthetic tones, harmonic notes
    with vibrato, speech-like programs and closed-loop simulations in
    tests/test_detect.py; the literature values [M] in the notes were starting points).

    window_s: 85 ms Gaussian frame; long enough to separate 100 Hz harmonics and to
        push a howl 20 dB above speech in its bin, short enough for ~0.3 s decisions.
    hop_s: 10 ms (the usual hop for howl detection).
    f_lo_hz, f_hi_hz: analysis band (f_hi defaults to 0.45·fs, capped at 16 kHz).
    n_candidates: peaks per frame (6: a few howls plus the strongest program partials;
        8 gave the same detections in the tests at 20 % more CPU).
    min_papr_db: 10 dB candidate gate (the literature's PAPR threshold [M]).
    min_level_dbfs: ignore peaks below this level (digital silence, dither).
    min_pnpr_db: 12 dB (median over the window). A Gaussian-windowed tone has > 60 dB
        at ±5 bins; noise sits near 0–10 dB; a howl emerging from speech reaches
        12 dB about 0.3 s before 20 dB (the literature's 15 dB [M] was a start).
    min_phpr_db: 12 dB. Voiced partials have neighbours at h·f within ~0–10 dB
        (harmonic spectra roll off ~6–12 dB/octave); a howl has none until the
        loop limits. For a growing track PHPR is taken over all of
        :data:`HARMONIC_MULTIPLIERS` and is co-modulation aware: a partner whose
        level grows at least ``comod_fraction`` (half) as fast as the peak, and that
        sits at the exact multiple in most frames (its interpolated frequency within
        ``0.5 × max(1, h)`` bins of h × the peak's: partials of one sound are harmonic,
        two howls growing at once are not), is a partial of the same sound and rules
        the peak out when within
        ``min_phpr_comod_db`` (20 dB: a swelling note with weak upper partials, a
        sung vowel with its 2nd partial 12 dB down); a partner that does not grow
        along is other program and rules it out only while the peak is not yet
        ``min_phpr_other_db`` (3 dB) above it. (Plain PHPR on the basic points let
        the 3rd partial of a held note in crescendo through: its only basic partner,
        the 6th, was 13 dB down.)
    max_fsd: 0.2 % relative frequency deviation over the window. Vibrato of a
        sung note is ±0.5…3 %; a howl's estimate scatters by < 0.05 %.
    fsd_floor_bins: 0.02 bin: the FSD and drift limits are relative, but the estimate's scatter
        is absolute (the Cramér-Rao bound of a frequency estimate does not depend on the
        frequency; program partials beside a howl jitter it by 0.02–0.1 bin), so each relative
        limit gets a floor of this many bins (scaled as the limit is to ``max_fsd``). It governs
        below 25 bins (about 290 Hz at 48 kHz, 280 Hz at 16 kHz), where 0.2 % is finer than the
        estimate: a 158 Hz howl rising through speech scatters by 0.27 %. Vibrato of a sung note
        there (0.5–3 %) still fails it, or is caught by its co-modulated partials.
    min_ipmp: present in ≥ 80 % of the window frames (the literature uses 3 of 5).
    decision_window_s: 0.3 s of history per decision (30 frames at 10 ms).
    min_growth_db_per_s: 6 dB/s (a loop 0.5 dB past unity with τ = 80 ms grows this
        fast); slower growth is not distinguishable from a crescendo or a note caught
        by a loop resonance within the window, and is caught by ``persist_s``.
    fast_growth_db_per_s: growth of at least 20 dB/s is decided on half the window
        (0.15 s): such a howl gains 6 dB in the time the full window would add. The
        half window is held to stricter tests (PNPR 6 dB higher, IMSD below a quarter
        of the growth, each half growing at ≥ half the rate, drift ≤ max_fsd/2)
        because it sees fewer frames. Its second half must also grow at ≥ ``fast_min_decel_ratio``
        (0.6) × the first: program pumped through a loop crossing 1.5 dB below unity rose at
        37 dB/s and slowed; a howl's growth does not slow before the limiter.
    rise_window_s, rise_min_db_per_s: growth of at least 40 dB/s (a loop 2 dB past
        unity at τ = 50 ms) is decided on 0.10 s, the tests there being the strictest:
        present in every frame, PNPR ≥ ``rise_min_pnpr_db`` (15 dB) in every frame,
        FSD ≤ ``rise_max_fsd`` (0.1 %), frequency drift over the window ≤
        ``rise_max_drift`` (0.03 %: vibrato sweeping a partial through a loop resonance
        raises its level while its frequency moves; a howl stays put), IMSD ≤ 0.15 ×
        the growth, each half ≥ 0.7 × the growth and the second half ≥
        ``rise_min_decel_ratio`` (0.85) × the first (note onsets and swells decelerate),
        a rise ≥ 4 dB, and no co-modulated partner within 20 dB; partners that do not
        grow along are ignored there (the howl is still below the program).
    rise_min_pnpr_one_side_db, rise_contrast_f_hi_hz: contrast of growth on the 0.10 s window.
        Below 1 kHz, where program partials crowd within the ±4…6 PNPR bins, a howl may grow
        beside a louder partial, so its PNPR is low (even negative) for most of the rise. There a
        track whose PNPR fails is still judged when it is pure on its quieter side in every frame
        (one-sided PNPR, the lower of the two sides' neighbours, ≥ 15 dB) and outgrows its
        neighbours: PNPR itself rises at ≥ ``comod_fraction`` × the growth (the louder partial,
        peak level − PNPR, rises at most half as fast). Its frequency is then taken from the
        quieter side (the Gaussian's log-parabola of known curvature through bin k and its
        neighbour away from the partial: the partial leaks into the other neighbour and would pull
        a three-bin estimate toward it). Rising candidates are also accepted there on the
        one-sided test. None turns this off.
    n_rising_candidates, rise_lookback_s, rise_max_shift_bins: a howl starts far below
        the program, below the PAPR gate and outside the strongest peaks. Up to 4 extra
        candidates per frame are taken among pure local maxima (PNPR ≥ 15 dB) anywhere
        above ``min_level_dbfs`` whose power rose by ≥ 40 dB/s over the last 80 ms (a
        third of that in each half, a local maximum also at mid look-back) and whose
        interpolated frequency moved ≤ 0.15 bin meanwhile (gliding speech partials do not).
        They are looked for up to ``rise_f_hi_hz`` (8 kHz: most howls sit between 200 Hz
        and 6 kHz, where loudspeakers and mics have their output and the loop its gain;
        common practice, no source); above, howls are found from the strongest peaks.
        A rising candidate's peak is held as a candidate for the next ``rise_window_s``
        (the local maximum within a bin of it in each frame), so a howl the rising test
        finds in most frames is tracked in all of them (the 0.10 s window needs every frame).
    eval_every_frames, hot_rise_db: tracks are evaluated every 4 frames, or every frame
        while their level rose ≥ 1 dB over the last 0.10 s.
    low_lane_hz: below this (300 Hz) the detector also runs on frames four times longer
        (0.34 s, 2.9 Hz bins), on a copy of the input decimated to about 2.4 kHz (the low lane,
        :mod:`howl._detect_lane`): low howls grow slowly among program partials a semitone away,
        which the 85 ms frame does not separate, and a room's low loop modes ring together there.
        The lane reports howls and ring-downs; one that both lanes report within 1 % (or a lane
        bin) and 3 s is reported once, by whichever decided first. None turns the lane off.
    growth_fit_s: the reported growth of a howl is a Theil-Sen line over up to 0.5 s.
    halves_fraction: the full window's halves must each grow at ≥ 0.25 × its rate.
    max_imsd_db_per_s: straightness of the growth: IMSD below 6 dB/s, or below
        0.6 × the growth rate for fast growth (level scatter ±0.3 dB gives a few dB/s).
    persist_s: a pure, steady tone present this long with level not falling
        counts as a howl that has reached the limiter.
    min_decay_db_per_s, max_decay_db_per_s: a ring-down slower than 3 dB/s is a
        held tone. Faster than 80 dB/s (an RT60 of 0.75 s) is no slower than the
        reverberation of most rooms used for speech, so not reported: a loop with
        τ = 40 ms rings this slowly only at margins below 3.2 dB (margin = rate·τ),
        and a stable loop at the usual 6 dB margin is not flagged.
    max_decay_ratio: optional (off by default; the low lane uses 0.75): also require the
        ring-down to be slower than this fraction of its neighbour bins' decay (the room around
        it). Off in the main frames because a lone decaying tone's own window leakage fills its
        neighbour bins there (a synthetic tone decaying in silence had a ratio of 1), so the test
        rejects true ringing.
    contrast_min_pnpr_one_side_db: None (the main lane): only the 0.10 s window judges a peak
        beside a louder partial by contrast of growth (see ``rise_min_pnpr_one_side_db``); a
        number (the low lane: 15 dB) lets the 0.15 s and full windows do it too, with that
        one-sided PNPR in every frame and PNPR rising at ≥ ``comod_fraction`` × the growth.
    ring_max_fsd: the ring-down's frequency-spread limit (None: ``max_fsd``).
    ring_exact_partners: the ring-down's PHPR counts only partners at the exact multiple in most
        frames (the low lane: there a loop's other modes ring at near-harmonic ratios).
    full_min_decel_ratio, line_min_decel_ratio, line_min_span_windows: a howl grows on a straight
        line in dB from the fader move to the limiter (its rate set by the loop's gain past unity);
        an attack, a fade-in or a swell (linear in amplitude, an RC curve, a raised cosine: an organ
        flue stop swelling in, a sine pad) rises in dB ever more slowly. So the 0.30 s window's
        second half must grow at ≥ 0.6 × its first (as the 0.15 s window's), and the whole rise
        since the track came out of the program (the lowest level of the last ``growth_fit_s``,
        when that spans at least one decision window) at ≥ 0.7 × in its second half. Chosen on
        the tuning split of tests/listen/detect_corpus.py only (issue 22; before: 85 false howls on
        its 244 no-howl cases at full size; on every second case, 38 → 3, no howl lost or later).
    persist_min_growth_db_per_s: a pure steady tone held ``persist_s`` counts as a howl only if it
        still grows, ≥ 1 dB/s and not slowing (second half ≥ ``line_min_decel_ratio`` × the
        first): a held pure tone (an organ flue pipe, a test tone, a sine pad) is ``watch``, not a
        howl, unless it grows like one. None: the earlier rule (not falling faster than
        ``min_decay_db_per_s``).
    max_crossing_offset_pct: with a loop IR's crossings given to the detector, a component farther
        than this (1 %) from every crossing is not a howl: a loop howls only at a crossing.
    max_track_history_s: a track keeps the last 20-40 s of its frames (every test looks back a few
        seconds at most): memory does not grow with a held tone's length.
    slow_window_s, slow_every_frames, slow_min_db_per_s, slow_min_rise_db, slow_min_decel_ratio,
    slow_max_resid_db, slow_min_pnpr_db, slow_max_rest_ratio, slow_max_siblings, slow_low_lane: the
        slow-growth path (:mod:`howl.listen._slow`, issue 22): every ``slow_every_frames`` frames (5:
        50 ms) a snapshot of the spectrum (mean power of those frames) is kept for ``slow_window_s``
        (1.0 s; None turns the path off), and a bin whose level rises on a line over it is a howl:
        ≥ 4 dB/s and ≥ 6 dB over the window (so ≥ 6 dB/s over 1 s), each half ≥ half the rate and the
        second ≥ 0.8 × the first, within 1 dB rms of the line, a local maximum with PNPR ≥ 12 dB, the
        rest of the band rising ≤ 0.5 × as fast, at most 1 other peak rising at the same rate (within
        15 %) in the same snapshot, frequency spread and drift ≤ ``max_fsd`` on single frames, no
        partner growing along within ``min_phpr_comod_db``. Below the low lane's top it is left to
        the low lane, which runs it only with ``slow_low_lane`` (off: on the tuning split it added
        3 false howls and found nothing earlier). Chosen on the tuning split of
        tests/listen/detect_corpus.py only (window 1.0 s against 1.2 and 1.5 s: the same 58 of 64
        found before they dominate, the same 12 false howls, median lead 0.77 s against 0.65 and
        0.61 s; PNPR 12 against 15 dB with residual 1.0 against 0.8 dB: the same counts, lead 0.77
        against 0.67 s).
    min_decay_span_db, min_decay_s: a ring-down must fall ≥ 10 dB over ≥ 0.15 s. It is
        tested while the track still fades (every 4 frames once the level is 10 dB
        under the track's peak) and reported as soon as it passes (``live``); a track
        that ends unreported is tested once more on its whole fall. One event per track.
    """

    window_s: float = 0.085
    hop_s: float = 0.010
    f_lo_hz: float = 60.0
    f_hi_hz: float | None = None
    n_candidates: int = 6
    min_papr_db: float = 10.0
    min_level_dbfs: float = -100.0
    min_pnpr_db: float = 12.0
    min_phpr_db: float = 12.0
    max_fsd: float = 0.002
    fsd_floor_bins: float = 0.02
    min_ipmp: float = 0.8
    decision_window_s: float = 0.3
    min_growth_db_per_s: float = 6.0
    fast_growth_db_per_s: float = 20.0
    fast_min_decel_ratio: float = 0.6
    comod_fraction: float = 0.5
    n_rising_candidates: int = 4
    rise_lookback_s: float = 0.08
    rise_min_db_per_s: float = 40.0
    rise_window_s: float = 0.10
    rise_max_fsd: float = 0.001
    rise_min_pnpr_db: float = 15.0
    rise_min_pnpr_one_side_db: float | None = 15.0
    rise_contrast_f_hi_hz: float | None = 1000.0
    contrast_min_pnpr_one_side_db: float | None = None
    rise_max_shift_bins: float = 0.15
    rise_min_decel_ratio: float = 0.85
    rise_max_drift: float = 0.0003
    rise_f_hi_hz: float = 8000.0
    min_phpr_comod_db: float = 20.0
    min_phpr_other_db: float = 3.0
    halves_fraction: float = 0.25
    max_imsd_db_per_s: float = 6.0
    imsd_points: int = 6
    persist_s: float = 1.5
    min_decay_db_per_s: float = 3.0
    max_decay_db_per_s: float = 80.0
    max_decay_ratio: float | None = None
    min_decay_span_db: float = 10.0
    ring_max_fsd: float | None = None
    ring_exact_partners: bool = False
    min_decay_s: float = 0.15
    track_tol_bins: float = 1.0
    max_gap_frames: int = 4
    max_tracks: int = 40
    eval_every_frames: int = 4
    hot_rise_db: float = 1.0
    growth_fit_s: float = 0.5
    low_lane_hz: float | None = 300.0
    max_track_history_s: float = 20.0
    full_min_decel_ratio: float = 0.6
    line_min_decel_ratio: float | None = 0.7
    line_min_span_windows: float = 1.0
    persist_min_growth_db_per_s: float | None = 1.0
    max_crossing_offset_pct: float | None = 1.0
    slow_window_s: float | None = 1.0
    slow_every_frames: int = 5
    slow_min_db_per_s: float = 4.0
    slow_min_rise_db: float = 6.0
    slow_min_decel_ratio: float = 0.8
    slow_max_resid_db: float = 1.0
    slow_min_pnpr_db: float = 12.0
    slow_max_rest_ratio: float = 0.5
    slow_max_siblings: int | None = 1
    slow_low_lane: bool = False

    def validated(self) -> "DetectorConfig":
        v.in_range(self.window_s, "window_s", 0.01, 1.0, unit="s")
        v.in_range(self.hop_s, "hop_s", 0.001, self.window_s, unit="s")
        v.positive(self.f_lo_hz, "f_lo_hz", unit="Hz")
        if self.f_hi_hz is not None:
            v.in_range(self.f_hi_hz, "f_hi_hz", self.f_lo_hz, None, unit="Hz", lo_open=True)
        v.integer(self.n_candidates, "n_candidates", 1, 64)
        v.in_range(self.min_ipmp, "min_ipmp", 0.0, 1.0)
        v.in_range(self.fsd_floor_bins, "fsd_floor_bins", 0.0, 1.0, unit="bins")
        v.in_range(self.decision_window_s, "decision_window_s", 2 * self.hop_s, 5.0, unit="s")
        v.integer(self.imsd_points, "imsd_points", 3, 50)
        looks_back = max(self.decision_window_s, self.growth_fit_s, self.persist_s if self.persist_s < 1e9 else 0.0)
        v.in_range(self.max_track_history_s, "max_track_history_s", 2.0 * looks_back, None, unit="s")
        if self.rise_min_pnpr_one_side_db is not None:
            v.in_range(self.rise_min_pnpr_one_side_db, "rise_min_pnpr_one_side_db", 0.0, 80.0, unit="dB")
        if self.contrast_min_pnpr_one_side_db is not None:
            v.in_range(self.contrast_min_pnpr_one_side_db, "contrast_min_pnpr_one_side_db", 0.0, 80.0, unit="dB")
        if self.rise_contrast_f_hi_hz is not None:
            v.positive(self.rise_contrast_f_hi_hz, "rise_contrast_f_hi_hz", unit="Hz")
        if self.slow_window_s is not None:
            v.in_range(self.slow_window_s, "slow_window_s", 12 * self.hop_s, 10.0, unit="s")
            v.integer(self.slow_every_frames, "slow_every_frames", 1, 100)
        if self.low_lane_hz is not None:
            v.in_range(self.low_lane_hz, "low_lane_hz", self.f_lo_hz, 500.0, unit="Hz", lo_open=True)
        return self


@dataclass(frozen=True)
class Event:
    """One detection.

    time_s: when the detector decided (end of the last frame used), from the start.
    onset_s: centre of the first frame of the track.
    freq_hz: median tracked frequency over the decision window.
    kind: "howl" or "ringing".
    level_db: level of the component at decision time, dBFS of a sine amplitude
        (0 dB = a full-scale sine).
    growth_db_per_s: howl: Theil-Sen line of the level from where the howl came out of the
        program (lowest level of the last 0.5 s) to the decision, over at least the decision
        window; ringing: least-squares line over the decay (negative: minus the decay rate).
    decay_db_per_s: ringing only: the decay rate (positive).
    margin_db: with a known loop delay τ: −growth·τ (ringing: decay·τ, positive
        headroom; howl: negative, the loop gain above 1). None when τ is unknown.
    papr_db, pnpr_db, phpr_db, ipmp, imsd_db_per_s, fsd: the features (medians over
        the window) that made the decision.
    neighbour_slope_db_per_s: ringing only: level slope of the PNPR neighbour
        bins over the same frames (the room's decay near that frequency).
    steady: a howl found because it persisted at a steady level (already limited).
    window_s: the span of frames the decision used (howl: the decision window that
        passed, 0.10, 0.15 or 0.30 s; ringing: the decay segment).
    phpr_comod_db: howl: PHPR over the partners that grow along with the peak (None
        when none does: no partial of a same sound).
    live: ringing only: reported while the track was still fading (else when it ended).
    """

    time_s: float
    onset_s: float
    freq_hz: float
    kind: str
    level_db: float
    growth_db_per_s: float
    papr_db: float
    pnpr_db: float
    phpr_db: float
    ipmp: float
    imsd_db_per_s: float
    fsd: float
    track_id: int
    decay_db_per_s: float | None = None
    margin_db: float | None = None
    neighbour_slope_db_per_s: float | None = None
    steady: bool = False
    window_s: float | None = None
    phpr_comod_db: float | None = None
    live: bool = False


@dataclass(frozen=True)
class Candidate:
    """A tracked peak as the live view shows it."""

    track_id: int
    freq_hz: float
    level_db: float
    trend_db_per_s: float
    age_s: float
    pnpr_db: float
    phpr_db: float
    fsd: float
    state: str  # "howl", "ringing", "watch" (pure, not growing), "program"


@dataclass(frozen=True)
class DetectionResult:
    events: tuple[Event, ...]
    sample_rate_hz: float
    duration_s: float
    n_frames: int
    window_samples: int
    hop_samples: int
    loop_delay_s: float | None


# --------------------------------------------------------------------------- tracking
