"""RBJ cookbook notch / peaking cuts, Q↔bandwidth, cascades, drift width, suggestions, merging.

Sources of check values:
[RBJ] R. Bristow-Johnson, "Audio EQ Cookbook", W3C Working Group Note 2021,
      https://www.w3.org/TR/audio-eq-cookbook/ : formulas; coefficient values below were computed
      by hand from those formulas (fs = 48 kHz) and cross-checked with scipy 1.17.1.
[SCIPY] scipy.signal.iirnotch (Orfanidis design), equal to the RBJ notch with
      Q_eq = sin(w0) / (2·tan(w0/(2Q))).
[PYFAR] pyfar.dsp.filter.bell(..., bell_type='III', quality_warp='sin') equals the RBJ peakingEQ BW case.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal as sig

from howl.errors import InputError
from howl.loop.notch import (
    MAX_NOTCH_BANDWIDTH_OCT,
    Notch,
    analog_response,
    bandwidth_oct_from_q,
    cascade_response,
    cascade_sos,
    drift_bandwidth_oct,
    merge_notches,
    notch_sos,
    q_from_bandwidth_oct,
    rbj_notch_sos,
    rbj_peaking_sos,
    suggest_cut,
)

FS = 48000.0


def _db(h):
    return 20 * np.log10(np.abs(h))


def _q_digital_bw(bw_oct, f0, fs):
    """[RBJ] BW case: 1/Q = 2 sinh(ln2/2 · BW · w0/sin w0)."""
    w0 = 2 * math.pi * f0 / fs
    return 1.0 / (2 * math.sinh(math.log(2) / 2 * bw_oct * w0 / math.sin(w0)))


# ---------------------------------------------------------------- coefficients against the cookbook

def test_notch_coefficients_match_the_cookbook_worked_case_1khz_q30():
    # [RBJ] notch f0 = 1 kHz, Q = 30, fs = 48 kHz, computed by hand from the formulas
    sos = rbj_notch_sos(1000.0, 30.0, FS)
    np.testing.assert_allclose(sos[0, :3], [0.997829285714, -1.978585435699, 0.997829285714], atol=1e-11)
    np.testing.assert_allclose(sos[0, 3:], [1.0, -1.978585435699, 0.995658571428], atol=1e-11)


def test_notch_coefficients_match_the_cookbook_bandwidth_case_tenth_octave():
    # [RBJ] notch 1 kHz, BW = 0.1 oct (BW case), fs = 48 kHz, by hand
    sos = rbj_notch_sos(1000.0, _q_digital_bw(0.1, 1000.0, FS), FS)
    np.testing.assert_allclose(sos[0, :3], [0.995482945235, -1.973932901277, 0.995482945235], atol=1e-11)
    np.testing.assert_allclose(sos[0, 3:], [1.0, -1.973932901277, 0.99096589047], atol=1e-11)


def test_peaking_cut_coefficients_match_the_cookbook_sixth_octave_minus_12db():
    # [RBJ] peakingEQ 2.5 kHz, BW = 1/6 oct (BW case), -12 dB, fs = 48 kHz, by hand
    sos = rbj_peaking_sos(2500.0, -12.0, _q_digital_bw(1 / 6, 2500.0, FS), FS)
    np.testing.assert_allclose(sos[0, :3], [0.972769347479, -1.824989708131, 0.954500311903], atol=1e-11)
    np.testing.assert_allclose(sos[0, 3:], [1.0, -1.824989708131, 0.927269659382], atol=1e-11)


def test_scipy_iirnotch_equals_the_cookbook_notch_through_the_q_mapping():
    # [SCIPY] iirnotch sets tan(dw/2) with dw = w0/Q; RBJ with Q_eq = sin(w0)/(2 tan(w0/(2Q))) equals it
    f0, q = 1000.0, 30.0
    w0 = 2 * math.pi * f0 / FS
    q_eq = math.sin(w0) / (2 * math.tan(w0 / (2 * q)))
    assert q_eq == pytest.approx(29.914352, abs=1e-6)
    b, a = sig.iirnotch(f0, q, fs=FS)
    sos = rbj_notch_sos(f0, q_eq, FS)
    np.testing.assert_allclose(sos[0, :3], b, atol=1e-13)
    np.testing.assert_allclose(sos[0, 3:], a, atol=1e-13)
    # and the same Q unmapped gives a different filter: iirnotch is not the cookbook notch
    assert not np.allclose(rbj_notch_sos(f0, q, FS)[0, :3], b, rtol=0, atol=1e-7)


def test_pyfar_bell_type_iii_equals_the_cookbook_peaking_cut():
    pf = pytest.importorskip("pyfar")
    # [PYFAR] bell(None, 2500, -12, 8.651359, bell_type='III', quality_warp='sin') == RBJ BW case, 1/6 oct
    flt = pf.dsp.filter.bell(None, 2500, -12, 8.651359, bell_type="III", quality_warp="sin", sampling_rate=48000)
    coef = np.asarray(flt.coefficients)[0]
    b, a = coef[0] / coef[1][0], coef[1] / coef[1][0]
    sos = rbj_peaking_sos(2500.0, -12.0, _q_digital_bw(1 / 6, 2500.0, FS), FS)
    np.testing.assert_allclose(sos[0, :3], b, atol=1e-8)
    np.testing.assert_allclose(sos[0, 3:], a, atol=1e-8)


# ---------------------------------------------------------------- Q and bandwidth

@pytest.mark.parametrize(
    "bw_oct, q",
    # [RBJ] analog relation Q = sqrt(2^BW)/(2^BW - 1), table computed by hand
    [(2.0, 0.6667), (1.0, 1.4142), (2 / 3, 2.1449), (0.5, 2.8710), (1 / 3, 4.3185), (1 / 6, 8.6514),
     (0.1, 14.4241), (1 / 12, 17.3099), (1 / 24, 34.6235), (1 / 48, 69.2488)],
)
def test_q_for_a_bandwidth_follows_the_analog_cookbook_relation(bw_oct, q):
    assert q_from_bandwidth_oct(bw_oct) == pytest.approx(q, abs=6e-5)
    assert bandwidth_oct_from_q(q_from_bandwidth_oct(bw_oct)) == pytest.approx(bw_oct, rel=1e-12)
    assert Notch(1000.0, -6.0, q_from_bandwidth_oct(bw_oct)).bandwidth_oct == pytest.approx(bw_oct, rel=1e-12)


# ---------------------------------------------------------------- defining properties

def test_notch_is_zero_at_its_centre_and_3db_down_at_its_band_edges():
    # common practice, no source: the -3 dB points of a notch bound its bandwidth [RBJ]
    n = Notch(100.0, None, q_from_bandwidth_oct(1 / 6))  # low f0: warping negligible
    assert abs(cascade_response([n], np.array([100.0]), FS)[0]) < 1e-10
    lo, hi = n.band_edges_hz()
    np.testing.assert_allclose(_db(cascade_response([n], np.array([lo, hi]), FS)), -10 * math.log10(2), atol=0.01)
    # the analog prototype meets it exactly
    np.testing.assert_allclose(_db(analog_response(n, np.array([lo, hi]) / 100.0)), -10 * math.log10(2), atol=1e-9)


def test_notch_3db_width_at_1khz_q30_is_33_238_hz_on_a_dense_grid():
    # [RBJ] -3 dB width = 2·atan(alpha)·Fs/2π = 33.238 Hz for f0 = 1 kHz, Q = 30, fs = 48 kHz (by hand)
    f = np.linspace(900.0, 1100.0, 400001)
    h = _db(sig.sosfreqz(rbj_notch_sos(1000.0, 30.0, FS), worN=f, fs=FS)[1])
    below = f[h < -10 * math.log10(2)]
    assert below.max() - below.min() == pytest.approx(33.238, abs=0.002)


def test_peaking_cut_reaches_exactly_its_gain_at_the_centre_and_0db_far_away():
    sos = rbj_peaking_sos(2500.0, -12.0, _q_digital_bw(1 / 6, 2500.0, FS), FS)
    h = _db(sig.sosfreqz(sos, worN=np.array([2500.0, 100.0, 20000.0]), fs=FS)[1])
    assert h[0] == pytest.approx(-12.0, abs=1e-9)  # [RBJ] depth at f0 equals dBgain
    assert h[1] == pytest.approx(-0.00035, abs=2e-5)  # by hand from [RBJ] formulas
    assert h[2] == pytest.approx(-0.00044, abs=2e-5)


def test_peaking_cut_is_half_its_depth_at_its_band_edges():
    # [RBJ] peakingEQ bandwidth runs between the dBgain/2 points
    n = Notch(120.0, -10.0, q_from_bandwidth_oct(1 / 3))
    lo, hi = n.band_edges_hz()
    np.testing.assert_allclose(_db(analog_response(n, np.array([lo, hi]) / 120.0)), -5.0, atol=1e-9)
    np.testing.assert_allclose(_db(cascade_response([n], np.array([lo, hi]), FS)), -5.0, atol=0.01)


def test_peaking_boost_then_equal_cut_is_exactly_flat():
    # [RBJ] for peakingEQ, A·Q is the EE Q: +N dB then -N dB with the same Q is exactly flat
    f = np.geomspace(20, 20000, 200)
    boost = rbj_peaking_sos(3000.0, 9.0, 5.0, FS)
    cut = rbj_peaking_sos(3000.0, -9.0, 5.0, FS)
    h = sig.sosfreqz(np.vstack([boost, cut]), worN=f, fs=FS)[1]
    np.testing.assert_allclose(np.abs(h), 1.0, atol=1e-12)


def test_cascade_response_equals_scipy_sosfreqz_at_arbitrary_frequencies():
    cuts = [Notch(440.0, -6.0, 8.0), Notch(1234.5, None, 20.0), Notch(7000.0, -15.0, 4.5)]
    f = np.array([37.0, 439.9, 440.0, 1234.5, 3333.3, 6999.0, 23000.0])
    sos = cascade_sos(cuts, FS)
    assert sos.shape == (3, 6)
    np.testing.assert_allclose(cascade_response(cuts, f, FS), sig.sosfreqz(sos, worN=f, fs=FS)[1], atol=1e-12)
    np.testing.assert_array_equal(notch_sos(cuts[1], FS), rbj_notch_sos(1234.5, 20.0, FS))
    assert cascade_sos([], FS).shape == (0, 6)
    np.testing.assert_array_equal(cascade_response([], f, FS), np.ones(f.size))


def test_cascade_grown_section_by_section_on_a_long_grid_equals_scipy_sosfreqz():
    # the exact step margins of the ring-out grow the cascade on nyquist_margin's grid one section
    # at a time, in place (nyquist.LoopGrid.cascade_on_grid); reference: scipy.signal.sosfreqz
    from howl.loop.nyquist import LoopGrid

    rng = np.random.default_rng(3)
    grid = LoopGrid(rng.standard_normal(4096) * np.exp(-np.arange(4096) / 800.0), FS, band_hz=(50.0, 20000.0))
    cuts = [Notch(440.0, -6.0, 8.0), Notch(1234.5, None, 20.0), Notch(7000.0, -15.0, 4.5)]
    sos = cascade_sos(cuts, FS)
    c = None
    for k in range(len(cuts)):
        c = grid.cascade_on_grid(sos[k : k + 1], c)
        ref = sig.sosfreqz(sos[: k + 1], worN=grid.f, fs=FS)[1]
        np.testing.assert_allclose(c, ref, rtol=0, atol=1e-12)
    assert grid.f.size >= 8192  # a long grid, where the responses are grown in place


def test_bad_cuts_are_refused_with_the_field_named():
    with pytest.raises(InputError, match="gain_db"):
        Notch(1000.0, 3.0, 5.0)
    with pytest.raises(InputError, match="q"):
        Notch(1000.0, -3.0, 0.0)
    with pytest.raises(InputError, match="freq_hz"):
        rbj_notch_sos(30000.0, 5.0, FS)


# ---------------------------------------------------------------- drift, suggestion, merging

def test_drift_band_for_plus_minus_3c_follows_the_ideal_gas_speed_of_sound():
    # c ∝ sqrt(T) for an ideal gas (first principles): log2(sqrt(296.15/290.15)) octaves
    assert drift_bandwidth_oct(20.0, 3.0) == pytest.approx(0.5 * math.log2(296.15 / 290.15), rel=1e-9)
    assert drift_bandwidth_oct(20.0, 0.0) == 0.0


def test_suggested_cut_covers_the_drift_band_with_the_needed_depth_and_no_more():
    drift = drift_bandwidth_oct(20.0, 3.0)
    cut = suggest_cut(2000.0, 6.0, peak_bandwidth_oct=0.05)
    assert cut.gain_db is not None and -30 < cut.gain_db < -6.0
    assert cut.bandwidth_oct == pytest.approx(0.05 + drift, rel=1e-9)
    edges = np.array([2 ** (-drift / 2), 2 ** (drift / 2)])
    assert np.all(_db(analog_response(cut, edges)) <= -6.0 + 1e-6)
    shallower = Notch(cut.freq_hz, cut.gain_db + 0.05, cut.q)
    assert np.any(_db(analog_response(shallower, edges)) > -6.0)
    # the digital filter at 48 kHz is as deep (within 0.05 dB) over the drift band
    f = 2000.0 * np.linspace(edges[0], edges[1], 21)
    assert np.all(_db(cascade_response([cut], f, FS)) <= -6.0 + 0.05)


def test_suggested_cut_never_exceeds_a_third_of_an_octave():
    cut = suggest_cut(500.0, 3.0, peak_bandwidth_oct=1.0)
    assert cut.bandwidth_oct == pytest.approx(MAX_NOTCH_BANDWIDTH_OCT, rel=1e-9)


def test_a_cut_that_needs_more_than_30db_becomes_a_full_notch():
    cut = suggest_cut(1000.0, 45.0, peak_bandwidth_oct=0.05)
    assert cut.gain_db is None


def test_overlapping_cuts_merge_into_one_at_least_as_deep_at_both_centres():
    a = Notch(1000.0, -6.0, q_from_bandwidth_oct(1 / 12))
    b = Notch(1040.0, -9.0, q_from_bandwidth_oct(1 / 12))
    merged = merge_notches([b, a], FS)
    assert len(merged) == 1
    m = merged[0]
    assert m.bandwidth_oct <= MAX_NOTCH_BANDWIDTH_OCT
    assert a.freq_hz < m.freq_hz < b.freq_hz
    f = np.array([1000.0, 1040.0])
    assert np.all(_db(cascade_response(merged, f, FS)) <= _db(cascade_response([a, b], f, FS)) + 1e-3)


def test_distant_cuts_and_too_wide_merges_stay_separate():
    a = Notch(1000.0, -6.0, q_from_bandwidth_oct(1 / 6))
    far = Notch(3000.0, -6.0, q_from_bandwidth_oct(1 / 6))
    assert len(merge_notches([a, far], FS)) == 2
    w1 = Notch(1000.0, -6.0, q_from_bandwidth_oct(0.3))
    w2 = Notch(1150.0, -6.0, q_from_bandwidth_oct(0.3))  # overlap, but the union is wider than 1/3 oct
    assert len(merge_notches([w1, w2], FS)) == 2
