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
from howl.model.transfer import TALKER_Q, BandTransfer, effective_room_constant_m2, speaker_field_pa2, statistical_transfer

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


ASSUMPTIONS = (
    "band averages: direct field by inverse square with both directivities and air absorption, reverberant "
    "field by Hopkins-Stryker 4/R (R with air absorption), paths from different loudspeakers add in power",
    "mics: first-order patterns with howl's frequency model (wider below ~300 Hz, narrower with a filled rear "
    "null above ~4 kHz; sizes are our choice), reverberant pick-up by the random-energy efficiency",
    "loudspeakers: power-cardioid polar model through the -6 dB coverage angles, -20 dB rear floor, Q from "
    "that model (not Molloy's relation)",
    "talker: omni (Q = 1), at the farthest distance from its mic if several; the listener is the one farthest "
    "from the talker",
    "PAG: all open mics raised together (the desk's balance kept) until the worst-peak loop gain reaches -FSM; "
    "quoted in the limiting band (smallest PAG - NAG)",
    "peaks: Schroeder statistics (Rayleigh), Rician with the loop's direct-to-reverberant ratio, over at least a "
    "third of an octave around each band centre; below the Schroeder frequency the room is modal and the peak "
    "statistics are only indicative",
    "verdict: stable if PAG - NAG >= 0 at the 90 % worst peak, will howl if even the 10 % peak exceeds unity "
    "loop gain at the needed gain, marginal otherwise",
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
    return _plan_core(rig, tr, acoustics, freqs, bw, fsm, fraction, peak_statistics, ideal_mics)


def _plan_core(rig, tr: BandTransfer, acoustics, freqs, bw, fsm, fraction, peak_statistics, ideal_mics) -> PlanResult:
    e_all = mix_matrix(rig)
    routed = np.any(e_all > 0, axis=0)
    muted = tuple(m.name for m in rig.mics if not m.open)
    unrouted = tuple(m.name for k, m in enumerate(rig.mics) if m.open and not routed[k])
    for name in unrouted:
        warnings.warn(f"mic {name!r} is open but in no mix that reaches a loudspeaker; it is left out of the plan",
                      HowlWarning, stacklevel=3)
    act = np.flatnonzero(routed)
    if act.size == 0:
        raise InputError("no open mic reaches any loudspeaker through the mixes; nothing to plan", key="mixes")
    e = e_all[:, act]
    t_dir = tr.direct_power[:, act, :]
    t_rev = tr.reverberant_power[:, act, :]
    p_dir = loop_power_matrix(t_dir, e)
    p_rev = loop_power_matrix(t_rev, e)
    p = p_dir + p_rev
    n_f, m, _ = p.shape
    rt60 = np.asarray(tr.rt60_s, float)
    if not np.all(np.isfinite(rt60)):
        raise InputError("room acoustics gave no finite RT60; cannot apply peak statistics", key="room")

    # system: spectral radius and its Rician K (Perron-weighted direct/reverberant split)
    rho, right, left = perron_vectors(p)
    k_sys = np.einsum("fi,fij,fj->f", left, p_dir, right) / np.maximum(
        np.einsum("fi,fij,fj->f", left, p_rev, right), _TINY)
    # channels: Schur loop gain; K from the mic's own loop
    lch = channel_loop_gain(p, rho)  # (F, M)
    diag = np.arange(m)
    k_ch = p_dir[:, diag, diag] / np.maximum(p_rev[:, diag, diag], _TINY)
    if peak_statistics:
        pf_sys, pf_sys_lo, pf_sys_hi = peak_factor_db(bw, rt60, k_sys)
        pf_ch, _, _ = peak_factor_db(bw[:, None], rt60[:, None], k_ch)
    else:
        pf_sys = pf_sys_lo = pf_sys_hi = np.zeros(n_f)
        pf_ch = np.zeros((n_f, m))
    rho_db = _pdb(rho)
    rho_peak_db = rho_db + pf_sys
    finite_l = np.isfinite(lch)
    lch_db = np.where(finite_l, _pdb(np.where(finite_l, lch, 1.0)), np.inf)
    lch_peak_db = lch_db + pf_ch

    # stated settings
    stated_margin = float(-np.max(rho_peak_db))
    if stated_margin < 0:
        f_bad = float(freqs[int(np.argmax(rho_peak_db))])
        warnings.warn(
            f"at the rig's stated settings the worst-peak loop gain reaches {-stated_margin:+.1f} dB "
            f"(near {f_bad:.0f} Hz): the rig as set would howl",
            HowlWarning, stacklevel=3,
        )

    # forward path: talker → mic → mixes → loudspeakers → listener (vectorised over mics and bands)
    rc = effective_room_constant_m2(acoustics)
    air = np.asarray(acoustics.air_m_inv, float)
    lst_pos = np.array([x.position_m for x in rig.listeners], float)
    spk_dir_l, spk_rev, spk_r_l, _ = speaker_field_pa2(rig.speakers, lst_pos, freqs, acoustics, room_constant_m2=rc,
                                                        point_names=[x.name for x in rig.listeners],
                                                        point_kind="listener")
    mic_objs = [rig.mics[k] for k in act]
    sens2 = (10.0 ** (np.array([mc.sensitivity_dbv_pa for mc in mic_objs]) / 20.0)) ** 2
    temp = float(getattr(rig.room, "temperature_c", 20.0))
    ree = tr.mic_ree[act] if tr.mic_ree is not None else _dir.mics_ree(mic_objs, freqs, ideal=ideal_mics,
                                                                        temperature_c=temp)  # (M, F)
    nom = int(m)
    mpos = np.array([mc.position_m for mc in mic_objs], float)
    axes = np.array([_dir.aim_vector(mc.azimuth_rad, mc.elevation_rad) for mc in mic_objs], float)
    talk = [_talker_for(rig, mc) for mc in mic_objs]
    tnames = [t[0] for t in talk]
    tpos = np.array([t[1] for t in talk], float)
    tlevel = np.array([t[2] for t in talk], float)
    ds = np.linalg.norm(tpos - mpos, axis=-1)
    for k in np.flatnonzero(ds < 1e-3):
        raise InputError(f"talker {tnames[k]!r} is at mic {mic_objs[k].name!r}'s capsule (0 m); expected a "
                         f"distance > 0", key=f"talkers.{tnames[k]}.position_m")
    d0_all = np.linalg.norm(lst_pos[None, :, :] - tpos[:, None, :], axis=-1)  # (M, L)
    li = np.argmax(d0_all, axis=1)
    d0 = d0_all[np.arange(m), li]
    for k in range(m):
        lname = rig.listeners[li[k]].name
        if d0[k] < 1e-3:
            raise InputError(f"listener {lname!r} is at talker {tnames[k]!r}'s position (0 m)",
                             key=f"listeners.{lname}.position_m")
        if ds[k] >= d0[k]:
            warnings.warn(
                f"talker {tnames[k]!r} is {ds[k]:.2f} m from mic {mic_objs[k].name!r} but only {d0[k]:.2f} m from "
                f"the farthest listener {lname!r}: the listener hears the talker better than the mic does",
                HowlWarning, stacklevel=3,
            )
    # mic output per unit talker p1² (talker omni, Q = 1)
    cos_t = np.einsum("mk,mk->m", (tpos - mpos) / ds[:, None], axes)
    g_t = _dir.mics_gain_cos(mic_objs, cos_t, freqs, ideal=ideal_mics, temperature_c=temp)  # (M, F)
    t_rev = 16.0 * np.pi / (TALKER_Q * rc)  # (F,)
    u2 = sens2[:, None] * (np.exp(-air[None, :] * ds[:, None]) / (ds * ds)[:, None] * g_t * g_t + t_rev * ree)
    e2 = e**2  # (S, M)
    amp = u2 * np.einsum("sm,smf->mf", e2, spk_dir_l[:, li, :] + spk_rev[:, None, :])
    unaided = np.exp(-air[None, :] * d0[:, None]) / (d0 * d0)[:, None] + t_rev[None, :]
    ag_db = _pdb(amp) - _pdb(unaided)  # (M, F)
    ead_note = None
    if rig.ead_m is not None:
        ead = np.full(m, float(rig.ead_m))
        wanted = np.exp(-air * rig.ead_m) / rig.ead_m**2 + t_rev  # the talker heard at EAD in the same room
        nag_band = _pdb(wanted)[None, :] - _pdb(unaided)
    else:
        target = rig.target_spl_db
        if target is None:
            target = DEFAULT_TARGET_SPL_DB
            ead_note = (f"the rig gives neither ead_m nor target_spl_db; assuming a target of "
                        f"{DEFAULT_TARGET_SPL_DB:g} dB SPL at the farthest listener")
        ead = 10.0 ** ((tlevel - target) / 20.0)
        nag_band = target - (tlevel[:, None] + _pdb(unaided))
    pag_band = ag_db - fsm - rho_peak_db[None, :]
    margin_band = pag_band - nag_band
    fi = np.argmin(margin_band, axis=1)
    rows = np.arange(m)
    pag_lo = ag_db[rows, fi] - fsm - (rho_db[fi] + pf_sys_hi[fi])
    pag_hi = ag_db[rows, fi] - fsm - (rho_db[fi] + pf_sys_lo[fi])
    nag = nag_band[rows, fi]
    # Davis distances: nearest fed loudspeaker to the mic (D1) and to the listener (D2)
    spk_pos = np.array([s.position_m for s in rig.speakers], float)
    d_ms = np.linalg.norm(spk_pos[:, None, :] - mpos[None, :, :], axis=-1)  # (S, M)
    fed = e > 0
    d1 = np.where(fed, d_ms, np.inf).min(axis=0)
    d2 = np.where(fed, spk_r_l[:, li], np.inf).min(axis=0)

    out = []
    for col, mc in enumerate(mic_objs):
        lname = rig.listeners[li[col]].name
        if d2[col] < 1e-3:
            raise InputError(f"listener {lname!r} is at a loudspeaker (0 m)", key=f"listeners.{lname}.position_m")
        lo_, hi_, n_ = float(pag_lo[col]), float(pag_hi[col]), float(nag[col])
        if lo_ - n_ >= 0.0:
            verdict = "stable"
        elif hi_ - n_ + fsm < 0.0:
            verdict = "will howl"
        else:
            verdict = "marginal"
        lp = lch_peak_db[:, col]
        if np.all(np.isfinite(lp)):
            ci = int(np.argmax(lp))
            max_ch = float(-fsm - lp[ci])
        else:
            ci = int(np.argmax(~np.isfinite(lp)))
            max_ch = None
        out.append(MicPlan(
            name=mc.name, pag_db=float(pag_band[col, fi[col]]), nag_db=n_, margin_db=float(margin_band[col, fi[col]]),
            limiting_band_hz=float(freqs[fi[col]]), max_channel_gain_db=max_ch, verdict=verdict,
            pag_spread_db=(lo_, hi_), davis_pag_db=davis_pag_db(ds[col], d0[col], d1[col], d2[col], nom, fsm),
            davis_nag_db=davis_nag_db(d0[col], ead[col]), margin_spread_db=(lo_ - n_, hi_ - n_),
            loop_gain_db=lch_db[:, col].copy(), worst_peak_loop_gain_db=lp.copy(),
            pag_band_db=pag_band[col], nag_band_db=nag_band[col], acoustic_gain_db=ag_db[col],
            talker=tnames[col], listener=lname, ead_m=float(ead[col]),
            distances_m={"ds": float(ds[col]), "d0": float(d0[col]), "d1": float(d1[col]), "d2": float(d2[col])},
            limiting_channel_band_hz=float(freqs[ci]),
        ))
    assumptions = list(ASSUMPTIONS)
    if ead_note:
        warnings.warn(ead_note, HowlWarning, stacklevel=3)
        assumptions.append(ead_note)
    from howl.model.room import schroeder_frequency_hz

    i1k = int(np.argmin(np.abs(np.log(freqs / 1000.0))))
    fs_hz = float(schroeder_frequency_hz(float(rt60[i1k]), float(acoustics.volume_m3)))
    return PlanResult(
        rig_name=rig.name, rig_file=rig.source_file, fraction=int(fraction), fsm_db=fsm, bands_hz=freqs,
        mics=tuple(out), spectral_radius_db=rho_db,
        worst_peak_spectral_radius_db=rho_peak_db, peak_factor_db=np.asarray(pf_sys, float),
        rt60_s=rt60, room_constant_m2=np.asarray(rc, float), schroeder_frequency_hz=fs_hz, nom=nom,
        stated_margin_db=stated_margin, muted_mics=muted, unrouted_mics=unrouted, assumptions=tuple(assumptions),
    )


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
        "room": {
            "rt60_s": _arr(result.rt60_s, 3),
            "room_constant_m2": _arr(result.room_constant_m2, 1),
            "schroeder_frequency_hz": _num(result.schroeder_frequency_hz, 1),
        },
        "muted_mics": list(result.muted_mics),
        "unrouted_mics": list(result.unrouted_mics),
        "assumptions": list(result.assumptions),
    }
