"""Plan a rig: loop power matrix per band, mean-square stability, peak statistics, PAG/NAG per mic.

The model, step by step (docs/plan.md explains it for users):

1. **Transfers** (:mod:`howl.transfer`): for every loudspeaker s and mic i and
   band f, the band-average power transfer T[s, i, f] from loudspeaker input to
   mic output, direct (inverse square, both directivities, air) plus
   reverberant (Hopkins-Stryker, loudspeaker power from sensitivity and Q, mic REE).
2. **Mix**: E[s, j] = 10^(g/20) for the gain g (dB) with which mix k feeds mic j
   to loudspeaker s (each loudspeaker takes one mix, see :mod:`howl.rig`).
3. **Loop power matrix** P[f][i, j] = Σ_s T[s, i, f]·E[s, j]²: the band-average
   power that goes from mic j's output around the room into mic i's output.
   Paths from different loudspeakers add in power (band averages of responses
   with different delays are incoherent). The loop is stable in the
   mean-square sense while the spectral radius ρ(P) stays below one; with N
   equal open mics feeding one mix, P is N×N with equal entries and ρ = N·P₁₁,
   which is the 10·log10(N) open-mic rule of the classic gain equation [1]_.
4. **Channel loop gain** of mic i, with every other open mic in the loop:
   L_i = P_ii + P_io·(I − P_oo)⁻¹·P_oi (the Schur complement; o = the other
   mics). Raising mic i's gain alone by x (power) multiplies L_i by x, and
   det(I − P) = det(I − P_oo)·(1 − L_i), so L_i = 1 is exactly where the whole
   loop reaches ρ = 1. Hence the maximum channel gain −FSM − max_f L_i,peak.
5. **Peaks above the band average** [2]_, [3]_, [4]_: above the Schroeder
   frequency a room transfer function behaves as a complex Gaussian process, so
   |H|² is exponentially distributed (Rayleigh |H|) and the expected highest peak
   in a band of width B with reverberation time T is ΔL ≈ 10·log10(ln(B·T)) above
   the band's mean power. howl turns this into a distribution: the band holds N
   independent samples of |H|², the largest of which is the worst peak; N is set
   so that the expected maximum of N exponential samples (the harmonic number
   H_N ≈ ln N + γ) equals Schroeder's ln(B·T), i.e. N = B·T·e^{−γ} (γ = Euler's
   constant; derived here). With a direct field the samples are Rician:
   |H|² = |d + r|² with a fixed part of power K·σ² and a Gaussian part of power
   σ², K the direct-to-reverberant power ratio of the loop. The largest of N
   non-central χ² (2 degrees of freedom) samples, divided by the mean
   (1 + K)·σ², gives the peak factor: 10·log10(ln(BT)) for K = 0, shrinking
   toward 0 dB as K grows. Its mean and its 10 % and 90 % quantiles
   (F_max(x) = F(x)^N) give the worst-peak loop gain with a spread. B is the
   band's width, but at least a third of an octave, so that the plan does not
   depend on the display resolution (finer bands would otherwise each hold
   fewer samples and report lower peaks).
6. **PAG** of mic i per band: the acoustic gain its talker gets at the farthest
   listener (amplified level re the unamplified talker there) when all open
   mics are raised together, keeping the desk's balance, until the worst-peak
   loop gain ρ_peak reaches −FSM: PAG_i(f) = AG_i(f) − FSM − ρ_peak,dB(f),
   AG_i the acoustic gain at the rig's stated settings.
   **NAG** per band from the equivalent acoustic distance, in the room
   (Handbook Eq. 34-24 form, NAG = ΔD0 − ΔEAD [1]_), or from the talker level
   and the target SPL. The **margin** is PAG − NAG; the limiting band is where
   it is smallest, and PAG and NAG are quoted in that band.
7. **Classic Davis** [1]_, [5]_: distances only, omni, free field,
   PAG = 20·log10(D0·D1/(Ds·D2)) − 10·log10(NOM) − FSM, NAG = 20·log10(D0/EAD).

References
----------
.. [1] G. Ballou (ed.), *Handbook for Sound Engineers*, 4th ed., Focal Press,
   ch. 34 "Sound System Design", pp. 1243 and 1252 (Eqs. 34-5, 34-8, 34-21 to 34-24).
.. [2] M. R. Schroeder, "Statistical parameters of the frequency response curves
   of large rooms", Acustica 4 (1954); English transl. JAES 35(5):299–306 (1987).
.. [3] M. R. Schroeder, "Improvement of acoustic-feedback stability by
   frequency shifting", JASA 36(9):1718–1724 (1964) (peak formula as restated
   in H. Kuttruff, *Room Acoustics*; from memory).
.. [4] M. R. Schroeder, "The 'Schroeder frequency' revisited", JASA 99(5):3240–3241 (1996).
.. [5] D. Davis & C. Davis, *Sound System Engineering* (1975; 2nd ed. 1987) (from memory);
   C. P. & R. E. Boner, "The gain of a sound system", JAES 17(2) (1969) (from memory).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from howl.model import _peak_table as pt  # the peak-factor table, shipped as data
from howl.model import directivity as _dir
from howl.errors import HowlWarning, InputError
from howl.model.rig import Mic, Rig
from howl.model.transfer import statistical_transfer

EULER_GAMMA = 0.5772156649015329
#: Peak-statistics quantiles for the spread (10 % and 90 %).
SPREAD_QUANTILES = (0.10, 0.90)
#: Target SPL assumed when a rig gives neither ead_m nor target_spl_db (speech, 65–75 dB practice; from memory).
DEFAULT_TARGET_SPL_DB = 70.0
#: Talker distance assumed for a mic without a talker (on its axis; our choice for a close-talked mic).
DEFAULT_TALKER_DISTANCE_M = 0.3
#: Floor for powers before logarithms (never −inf in the output).
_TINY = 1e-30
#: dB value reported instead of −inf for a power floor (a mic with no path at all).
_FLOOR_DB = -300.0

VERDICTS = ("stable", "marginal", "will howl")


# ================================================================================= classic Davis ====

def davis_pag_db(ds_m, d0_m, d1_m, d2_m, nom=1, fsm_db=6.0) -> float:
    """Outdoor (free-field, omni) PAG = 20·log10(D0·D1/(Ds·D2)) − 10·log10(NOM) − FSM [1]_ (Eq. 34-5)."""
    return float(20.0 * math.log10(d0_m * d1_m / (ds_m * d2_m)) - 10.0 * math.log10(nom) - fsm_db)


def davis_nag_db(d0_m, ead_m) -> float:
    """Outdoor NAG = 20·log10(D0/EAD) [1]_ (Eq. 34-8)."""
    return float(20.0 * math.log10(d0_m / ead_m))


def ead_from_levels_m(talker_level_db_spl_1m: float, target_spl_db: float) -> float:
    """EAD = 1 m·10^((L_talker,1m − L_target)/20): where the unaided talker is as loud as wanted (inverse square) [1]_."""
    return float(10.0 ** ((talker_level_db_spl_1m - target_spl_db) / 20.0))


def hs_attenuation_db(x_m, q, absorption_m2) -> np.ndarray:
    """Handbook Δx = −10·log10(Q/(4πx²) + 4/A) (Eq. 34-23 form; A = S·ā in the book, R in howl) [1]_."""
    x = np.asarray(x_m, float)
    return -10.0 * np.log10(np.asarray(q, float) / (4.0 * np.pi * x * x) + 4.0 / np.asarray(absorption_m2, float))


def indoor_pag_db(ds_m, d0_m, d1_m, d2_m, nom, fsm_db, q, absorption_m2) -> np.ndarray:
    """Indoor PAG = ΔD0 + ΔD1 − ΔDs − ΔD2 − 10·log10 NOM − FSM (Handbook Eq. 34-22, Form 2) [1]_."""
    d = lambda x: hs_attenuation_db(x, q, absorption_m2)  # noqa: E731
    return d(d0_m) + d(d1_m) - d(ds_m) - d(d2_m) - 10.0 * np.log10(nom) - fsm_db


def indoor_nag_db(d0_m, ead_m, q, absorption_m2) -> np.ndarray:
    """Indoor NAG = ΔD0 − ΔEAD (Handbook Eq. 34-24, Form 2) [1]_."""
    return hs_attenuation_db(d0_m, q, absorption_m2) - hs_attenuation_db(ead_m, q, absorption_m2)


# ================================================================================ loop matrices ====

def loop_power_matrix(transfer_power: np.ndarray, mix_lin: np.ndarray) -> np.ndarray:
    """P[f, i, j] = Σ_s T[s, i, f]·E[s, j]²: band-average loop power from mic j's output to mic i's output.

    ``transfer_power``: (S, M, F) power transfers; ``mix_lin``: (S, M) amplitude gains.
    """
    e2 = np.asarray(mix_lin, float) ** 2
    return np.einsum("sif,sj->fij", np.asarray(transfer_power, float), e2)


def spectral_radius(p: np.ndarray) -> np.ndarray:
    """Largest |eigenvalue| of each (…, M, M) matrix (the Perron root of a non-negative loop matrix)."""
    return np.max(np.abs(np.linalg.eigvals(p)), axis=-1)


def perron_vectors(p: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Perron root and its right and left eigenvectors (non-negative), for a stack (F, M, M).

    One eigendecomposition P = V·Λ·V⁻¹: the left eigenvectors are the rows of V⁻¹.
    """
    w, v = np.linalg.eig(p)
    k = np.argmax(np.abs(w), axis=-1)
    idx = np.arange(p.shape[0])
    rho = np.abs(w[idx, k])
    right = np.abs(np.real(v[idx, :, k]))
    try:
        left = np.abs(np.real(np.linalg.inv(v)[idx, k, :]))
    except np.linalg.LinAlgError:  # defective (not diagonalisable) somewhere: fall back to the transpose
        wl, vl = np.linalg.eig(np.swapaxes(p, -1, -2))
        left = np.abs(np.real(vl[idx, :, np.argmax(np.abs(wl), axis=-1)]))
    return rho, right, left


def channel_loop_gain(p: np.ndarray, rho: np.ndarray | None = None) -> np.ndarray:
    """Loop gain at each mic's channel with the other open mics in the loop, (F, M).

    L_i = P_ii + P_io·(I − P_oo)⁻¹·P_oi (o = the other mics), computed for all
    channels at once as 1 − 1/[(I − P)⁻¹]_ii (Schur complement:
    det(I − P) = det(I − P_oo)·(1 − L_i)). Where the other mics already howl
    among themselves (ρ(P_oo) ≥ 1, possible only where ρ(P) ≥ 1) the value is
    +inf: no setting of mic i alone makes the loop stable. ``rho``: ρ(P) per
    band if already known.
    """
    p = np.asarray(p, float)
    n_f, m, _ = p.shape
    if m == 1:
        return p[:, :, 0].copy()
    eye = np.eye(m)
    with np.errstate(divide="ignore", invalid="ignore"):
        try:
            d = np.diagonal(np.linalg.inv(eye[None] - p), axis1=-2, axis2=-1)
        except np.linalg.LinAlgError:  # exactly singular in some band (ρ = 1 there): band by band
            d = np.full((n_f, m), np.inf)
            for b in range(n_f):  # rare fallback, not the hot path
                try:
                    d[b] = np.diagonal(np.linalg.inv(eye - p[b]))
                except np.linalg.LinAlgError:
                    pass
        out = 1.0 - 1.0 / d
    rho = spectral_radius(p) if rho is None else np.asarray(rho, float)
    bad = np.flatnonzero(rho >= 1.0)
    if bad.size:  # Perron: a principal submatrix can only reach ρ ≥ 1 where the whole matrix does
        keep = np.array([[j for j in range(m) if j != i] for i in range(m)])  # (M, M-1)
        sub = p[bad][:, keep[:, :, None], keep[:, None, :]]  # (B, M, M-1, M-1)
        rho_o = spectral_radius(sub)
        out[bad] = np.where(rho_o >= 1.0, np.inf, out[bad])
    out = np.where(np.isfinite(out) & (out < 0), np.inf, out)  # only possible past instability
    return out


# ============================================================================== peak statistics ====

def schroeder_peak_factor_db(bandwidth_hz, rt60_s) -> np.ndarray:
    """Expected highest peak above the band's mean power, 10·log10(ln(B·T)) dB (Rayleigh, diffuse) [2]_, [3]_."""
    bt = np.asarray(bandwidth_hz, float) * np.asarray(rt60_s, float)
    return 10.0 * np.log10(np.log(np.maximum(bt, math.e)))


def independent_samples(bandwidth_hz, rt60_s) -> np.ndarray:
    """N = max(1, B·T·e^{−γ}): the count of independent |H|² samples whose expected maximum is ln(B·T)."""
    return np.maximum(1.0, np.asarray(bandwidth_hz, float) * np.asarray(rt60_s, float) * math.exp(-EULER_GAMMA))


def peak_factor_db(bandwidth_hz, rt60_s, k_factor=0.0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Worst peak above the band-average power, dB: (mean, 10 % quantile, 90 % quantile).

    Rayleigh (K = 0) reproduces Schroeder's 10·log10(ln(BT)) in the mean; a
    direct-to-reverberant power ratio K > 0 (Rician) lowers it. See the module
    docstring, step 5. Broadcasts over its arguments.
    """
    n = independent_samples(bandwidth_hz, rt60_s)
    k = np.nan_to_num(np.asarray(k_factor, float), nan=0.0, posinf=1e3)
    b = np.broadcast_arrays(np.log10(n), np.log10(np.clip(k, 0.0, 1e3) + 1e-3))
    pts = np.stack([np.clip(b[0], pt.LOGN[0], pt.LOGN[-1]), np.clip(b[1], pt.LOGK[0], pt.LOGK[-1])], axis=-1)
    vals = pt.interpolate(*pts.reshape(-1, 2).T)  # (P, 3): mean, 10 %, 90 %
    shape = b[0].shape
    return tuple(vals[:, j].reshape(shape) for j in range(3))


# ==================================================================================== results ====

@dataclass(frozen=True)
class MicPlan:
    """The plan for one open, routed mic (all ``_band`` arrays are per band, (F,))."""

    name: str
    pag_db: float
    nag_db: float
    margin_db: float
    limiting_band_hz: float
    max_channel_gain_db: float | None
    verdict: str
    pag_spread_db: tuple[float, float]
    davis_pag_db: float
    davis_nag_db: float
    margin_spread_db: tuple[float, float]
    loop_gain_db: np.ndarray  # channel loop gain, band average, at the stated settings
    worst_peak_loop_gain_db: np.ndarray  # the same plus the mean peak factor
    pag_band_db: np.ndarray
    nag_band_db: np.ndarray
    acoustic_gain_db: np.ndarray  # at the stated settings
    talker: str
    listener: str
    ead_m: float
    distances_m: dict = field(default_factory=dict)  # ds, d0, d1, d2 of the Davis equation
    limiting_channel_band_hz: float | None = None
    stability: str = "stable"  # the rig as set: stable, inside_fsm, howls
    reach: str = "reaches_target"  # at this fader's limit: reaches_target or short
    short_by_db: float = 0.0
    eq_could_buy_band_db: np.ndarray | None = None  # per band: what a perfect EQ could add past the fader limit
    eq_could_buy_db: float | None = None  # speech-weighted
    pag_together_db: float | None = None  # PAG with all open mics raised together to their common limit
    davis_speaker: str | None = None  # the loudspeaker whose D1 and D2 give the worst Davis PAG
    gains_db: dict = field(default_factory=dict)  # the rig's stated gain of this mic per mix
    pag_basis: str = "own_fader"  # "together" when the other mics alone keep the loop past -FSM
    pairs: tuple = ()  # per fed loudspeaker: that pair's predicted worst-peak loop gain alone (dB) and its band


@dataclass(frozen=True)
class PlanResult:
    """Everything ``howl plan`` reports."""

    rig_name: str
    rig_file: str | None
    fraction: int
    fsm_db: float
    bands_hz: np.ndarray
    mics: tuple[MicPlan, ...]
    spectral_radius_db: np.ndarray  # band average, at the stated settings
    worst_peak_spectral_radius_db: np.ndarray
    peak_factor_db: np.ndarray  # system, mean
    rt60_s: np.ndarray
    room_constant_m2: np.ndarray
    schroeder_frequency_hz: float
    nom: int
    stated_margin_db: float  # −max worst-peak ρ in dB: headroom of the whole rig at its stated settings
    muted_mics: tuple[str, ...]
    unrouted_mics: tuple[str, ...]
    assumptions: tuple[str, ...]
    headroom_together_db: float | None = None  # how far all open mics may rise together (worst peak to -FSM)
    rings_first_hz: float | None = None  # the band that rings first when all rise together
    importance: np.ndarray | None = None  # speech band-importance weights used


ASSUMPTIONS = (
    "band averages: direct field by inverse square with both directivities and air absorption, reverberant "
    "field by Hopkins-Stryker 4/R (R with air absorption), paths from different loudspeakers add in power",
    "mics: first-order patterns with howl's frequency model (wider below ~300 Hz, narrower with a filled rear "
    "null above ~4 kHz; sizes are our choice), reverberant pick-up by the random-energy efficiency",
    "loudspeakers: power-cardioid polar model through the -6 dB coverage angles, -20 dB rear floor, Q from "
    "that model (not Molloy's relation)",
    "talker: omni (Q = 1), at the farthest distance from its mic if several; the listener is the one farthest "
    "from the talker",
    "one basis: every headline figure is for a flat fader on the channel as the rig sets it (high-pass, EQ, "
    "capsule and loudspeaker responses in); max ch.: that one fader raised in every mix it feeds until the whole "
    "loop's worst-peak loop gain reaches -FSM in some band (that band rings first); together: all open mics raised "
    "at once; single-fader limits do not add",
    "PAG: the talker's acoustic gain at the farthest listener with its own fader at its limit; PAG and NAG both "
    "take the unaided talker (direct and reverberant) at that listener as reference (Handbook ch. 34 Form 2), "
    "averaged over the bands in dB with weights talker band power x speech band importance (ANSI S3.5)",
    "peaks: Schroeder statistics (Rayleigh), Rician with the loop's direct-to-reverberant ratio, over at least a "
    "third of an octave around each band centre; below the Schroeder frequency the room is modal and the peak "
    "statistics are only indicative",
    "stability (the rig as set): stable below -FSM, inside_fsm between -FSM and unity, howls at or past unity; "
    "reach: reaches_target when PAG >= NAG, else short; verdict (deprecated) derives from the two",
)


# ============================================================================== the planner ====

def mix_matrix(rig: Rig) -> np.ndarray:
    """E (n_speakers, n_mics): amplitude gain from each mic's output to each loudspeaker's input.

    Muted mics (``open = false``) get 0: they take no part in the loop.
    """
    spk = {s.name: k for k, s in enumerate(rig.speakers)}
    mic = {m.name: k for k, m in enumerate(rig.mics)}
    e = np.zeros((len(rig.speakers), len(rig.mics)))
    for mx in rig.mixes:
        for mname, g in mx.gains_db:
            if mname not in mic:
                raise InputError(f"names an unknown mic {mname!r}", key=f"mixes.{mx.name}.gains_db")
            for sname in mx.speakers:
                if sname not in spk:
                    raise InputError(f"names an unknown loudspeaker {sname!r}", key=f"mixes.{mx.name}.speakers")
                e[spk[sname], mic[mname]] += 10.0 ** (g / 20.0)
    for k, m in enumerate(rig.mics):
        if not m.open:
            e[:, k] = 0.0
    return e


def _pdb(x) -> np.ndarray:
    return 10.0 * np.log10(np.maximum(np.asarray(x, float), _TINY))


def _talker_for(rig: Rig, mic: Mic):
    ts = [t for t in rig.talkers if t.mic == mic.name]
    if not ts:
        pos = np.asarray(mic.position_m) + DEFAULT_TALKER_DISTANCE_M * _dir.aim_vector(mic.azimuth_rad, mic.elevation_rad)
        warnings.warn(
            f"mic {mic.name!r} has no talker; assuming one on its axis at {DEFAULT_TALKER_DISTANCE_M:g} m, "
            f"60 dB SPL at 1 m", HowlWarning, stacklevel=3,
        )
        return f"(assumed, {DEFAULT_TALKER_DISTANCE_M:g} m on axis)", pos, 60.0
    t = max(ts, key=lambda t: math.dist(t.position_m, mic.position_m))
    return t.name, np.asarray(t.position_m, float), float(t.level_db_spl_1m)


def plan_rig(
    rig: Rig,
    *,
    fraction: int = 3,
    f_lo_hz: float = 100.0,
    f_hi_hz: float = 10000.0,
    fsm_db: float | None = None,
    acoustics=None,
    peak_statistics: bool = True,
    ideal_mics: bool = False,
) -> PlanResult:
    """Plan ``rig`` per band and per mic (see the module docstring for the model).

    Parameters
    ----------
    fraction : bands per octave (1, 3, 6, 12 or 24).
    f_lo_hz, f_hi_hz : band range (IEC 61260-1 centres inside it).
    fsm_db : feedback stability margin; ``rig.fsm_db`` when omitted.
    acoustics : precomputed :class:`howl.room.RoomAcoustics` at the band centres (tests).
    peak_statistics : False turns the Schroeder peak factor off (band averages only).
    ideal_mics : textbook first-order mic patterns (no frequency model).
    """
    from howl.bands import band_centres_hz, band_edges_hz

    fsm = float(rig.fsm_db if fsm_db is None else fsm_db)
    if not math.isfinite(fsm):
        raise InputError(f"must be a finite number of dB, got {fsm!r}", key="fsm_db")
    freqs = np.asarray(band_centres_hz(fraction, f_lo_hz, f_hi_hz), float)
    if freqs.size == 0:
        raise InputError(f"holds no band centre between {f_lo_hz:g} and {f_hi_hz:g} Hz", key="bands")
    lo, hi = band_edges_hz(freqs, fraction)
    # peak statistics over at least a third of an octave around each centre, so the worst peak does not
    # depend on the display resolution (a finer band would otherwise hold fewer samples and a lower peak)
    lo3, hi3 = band_edges_hz(freqs, 3)
    bw = np.maximum(np.asarray(hi) - np.asarray(lo), np.asarray(hi3) - np.asarray(lo3))
    if acoustics is None:
        from howl.model.room import room_acoustics

        acoustics = room_acoustics(rig.room, freqs)
    tr = statistical_transfer(rig, freqs, acoustics, ideal_mics=ideal_mics)
    from howl.model._plan_core import plan_core

    return plan_core(rig, tr, acoustics, freqs, bw, fsm, fraction, peak_statistics, ideal_mics,
                     _chain(rig, freqs, fraction))


def _chain(rig: Rig, freqs: np.ndarray, fraction: int):
    """The signal chain's band powers (mic, loudspeaker), talker spectra and band importance: the one place
    the chain enters the plan (:func:`howl.model.chain.chain_power`; tests replace it to try a chain)."""
    from howl.model.chain import chain_power

    return chain_power(rig, freqs, fraction)


# ======================================================================================= JSON ====

def _num(x, nd=2):
    if x is None:
        return None
    v = float(x)
    return round(v, nd) if math.isfinite(v) else None


def _arr(a, nd=2):
    v = np.round(np.asarray(a, float), nd)
    ok = np.isfinite(v)
    out = v.tolist()
    if not ok.all():
        out = [x if good else None for x, good in zip(out, ok.tolist())]
    return out


def band_labels(result: PlanResult) -> list[str]:
    """Nominal labels of the plan's bands (ISO 266 for octaves and thirds)."""
    from howl.bands import nominal_label

    return [nominal_label(float(f), result.fraction) for f in result.bands_hz]


def plan_to_json(result: PlanResult) -> dict:
    """The ``howl plan --json`` object (no NaN: non-finite values become null)."""
    mics = []
    for mp in result.mics:
        mics.append({
            "name": mp.name,
            "pag_db": _num(mp.pag_db),
            "nag_db": _num(mp.nag_db),
            "margin_db": _num(mp.margin_db),
            "limiting_band_hz": _num(mp.limiting_band_hz, 1),
            "max_channel_gain_db": _num(mp.max_channel_gain_db),
            "verdict": mp.verdict,
            "pag_spread_db": [_num(mp.pag_spread_db[0]), _num(mp.pag_spread_db[1])],
            "margin_spread_db": [_num(mp.margin_spread_db[0]), _num(mp.margin_spread_db[1])],
            "davis_pag_db": _num(mp.davis_pag_db),
            "davis_nag_db": _num(mp.davis_nag_db),
            "talker": mp.talker,
            "listener": mp.listener,
            "ead_m": _num(mp.ead_m, 3),
            "distances_m": {k: _num(v, 3) for k, v in mp.distances_m.items()},
            "limiting_channel_band_hz": _num(mp.limiting_channel_band_hz, 1),
            "rings_first_hz": _num(mp.limiting_band_hz, 1),
            "stability": mp.stability,
            "reach": mp.reach,
            "short_by_db": _num(mp.short_by_db),
            "eq_could_buy_db": _num(mp.eq_could_buy_db),
            "eq_could_buy_band_db": _arr(mp.eq_could_buy_band_db) if mp.eq_could_buy_band_db is not None else None,
            "pag_together_db": _num(mp.pag_together_db),
            "davis_loudspeaker": mp.davis_speaker,
            "gains_db": {k: _num(v) for k, v in mp.gains_db.items()},
            "pag_basis": mp.pag_basis,
            "pairs": [{"speaker": q["speaker"], "worst_peak_loop_gain_db": _num(q["worst_peak_loop_gain_db"]),
                       "band_hz": _num(q["band_hz"], 1)} for q in mp.pairs],
            "loop_gain_db": _arr(mp.loop_gain_db),
            "worst_peak_loop_gain_db": _arr(mp.worst_peak_loop_gain_db),
            "pag_band_db": _arr(mp.pag_band_db),
            "nag_band_db": _arr(mp.nag_band_db),
            "acoustic_gain_db": _arr(mp.acoustic_gain_db),
        })
    return {
        "rig": result.rig_name,
        "rig_file": result.rig_file,
        "method": "statistical",
        "fraction": result.fraction,
        "fsm_db": result.fsm_db,
        "nom": result.nom,
        "bands_hz": _arr(result.bands_hz, 3),
        "band_labels": band_labels(result),
        "mics": mics,
        "loop_gain_db": {mp.name: _arr(mp.loop_gain_db) for mp in result.mics},
        "spectral_radius_db": _arr(result.spectral_radius_db),
        "worst_peak_spectral_radius_db": _arr(result.worst_peak_spectral_radius_db),
        "peak_factor_db": _arr(result.peak_factor_db),
        "stated_margin_db": _num(result.stated_margin_db),
        "headroom_together_db": _num(result.headroom_together_db),
        "rings_first_hz": _num(result.rings_first_hz, 1),
        "band_importance": _arr(result.importance, 4) if result.importance is not None else None,
        "room": {
            "rt60_s": _arr(result.rt60_s, 3),
            "room_constant_m2": _arr(result.room_constant_m2, 1),
            "schroeder_frequency_hz": _num(result.schroeder_frequency_hz, 1),
        },
        "muted_mics": list(result.muted_mics),
        "unrouted_mics": list(result.unrouted_mics),
        "assumptions": list(result.assumptions),
    }
