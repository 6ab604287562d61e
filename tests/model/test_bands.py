"""Fractional-octave bands against IEC 61260-1:2014 / ISO 266 values and against pyfar."""

from __future__ import annotations

import numpy as np
import pytest

from howl.bands import G, band_centres_hz, band_edges_hz, nominal_hz, nominal_label
from howl.errors import InputError

# IEC 61260-1:2014 base-10 exact mid-band frequencies and edges for the one-third-octave
# bands 20 Hz – 20 kHz, with their ISO 266:1997 nominal values. Exact centres are
# 1000·10^(x/10) (IEC 61260-1:2014, Eq. 2 with G = 10^0.3, b = 3); edges ·10^(∓1/20) (Eqs. 4–5).
# Rows: (nominal, exact centre, lower edge, upper edge), printed to 4 decimals.
THIRDS = [
    ("20", 19.9526, 17.7828, 22.3872), ("25", 25.1189, 22.3872, 28.1838), ("31.5", 31.6228, 28.1838, 35.4813),
    ("40", 39.8107, 35.4813, 44.6684), ("50", 50.1187, 44.6684, 56.2341), ("63", 63.0957, 56.2341, 70.7946),
    ("80", 79.4328, 70.7946, 89.1251), ("100", 100.0000, 89.1251, 112.2018), ("125", 125.8925, 112.2018, 141.2538),
    ("160", 158.4893, 141.2538, 177.8279), ("200", 199.5262, 177.8279, 223.8721), ("250", 251.1886, 223.8721, 281.8383),
    ("315", 316.2278, 281.8383, 354.8134), ("400", 398.1072, 354.8134, 446.6836), ("500", 501.1872, 446.6836, 562.3413),
    ("630", 630.9573, 562.3413, 707.9458), ("800", 794.3282, 707.9458, 891.2509), ("1k", 1000.0000, 891.2509, 1122.0185),
    ("1.25k", 1258.9254, 1122.0185, 1412.5375), ("1.6k", 1584.8932, 1412.5375, 1778.2794),
    ("2k", 1995.2623, 1778.2794, 2238.7211), ("2.5k", 2511.8864, 2238.7211, 2818.3829),
    ("3.15k", 3162.2777, 2818.3829, 3548.1339), ("4k", 3981.0717, 3548.1339, 4466.8359),
    ("5k", 5011.8723, 4466.8359, 5623.4133), ("6.3k", 6309.5734, 5623.4133, 7079.4578),
    ("8k", 7943.2823, 7079.4578, 8912.5094), ("10k", 10000.0000, 8912.5094, 11220.1845),
    ("12.5k", 12589.2541, 11220.1845, 14125.3754), ("16k", 15848.9319, 14125.3754, 17782.7941),
    ("20k", 19952.6231, 17782.7941, 22387.2114),
]


def test_third_octave_centres_edges_and_labels_match_the_standard_table():
    centres = band_centres_hz(3, 20, 20000)
    lo, hi = band_edges_hz(centres, 3)
    assert len(centres) == len(THIRDS) == 31
    for (label, fm, f1, f2), c, a, b in zip(THIRDS, centres, lo, hi):
        assert c == pytest.approx(fm, abs=6e-5), label
        assert a == pytest.approx(f1, abs=6e-5), label
        assert b == pytest.approx(f2, abs=6e-5), label
        assert nominal_label(c, 3) == label


def test_octave_centres_and_labels_match_the_standard():
    # IEC 61260-1 exact octave centres 1000·G^x, x = -6..4, ISO 266 nominal 16 .. 16k
    exact = [15.8489, 31.6228, 63.0957, 125.8925, 251.1886, 501.1872, 1000, 1995.2623, 3981.0717, 7943.2823, 15848.9319]
    labels = ["16", "31.5", "63", "125", "250", "500", "1k", "2k", "4k", "8k", "16k"]
    c = band_centres_hz(1, 16, 16000)
    np.testing.assert_allclose(c, exact, atol=6e-5)
    assert [nominal_label(f, 1) for f in c] == labels
    lo, hi = band_edges_hz(np.array([1000.0]), 1)
    # 1 kHz octave edges 1000·10^(∓0.15) = 707.946 / 1412.538 Hz (IEC 61260-1 Eqs. 4–5)
    assert lo[0] == pytest.approx(707.946, abs=1e-3) and hi[0] == pytest.approx(1412.538, abs=1e-3)


@pytest.mark.parametrize("fraction", [1, 3])
def test_exact_centres_and_edges_agree_with_pyfar(fraction):
    pf_const = pytest.importorskip("pyfar.constants")
    centre, lower, upper = pf_const.fractional_octave_frequencies_exact(fraction, (20, 20000))
    keep = centre > 19.0  # pyfar's octave list also starts at the 16 Hz band (its docs); compare from 20 Hz
    centre, lower, upper = centre[keep], lower[keep], upper[keep]
    c = band_centres_hz(fraction, 20, 20000)
    lo, hi = band_edges_hz(c, fraction)
    np.testing.assert_allclose(c, centre, rtol=1e-12)
    np.testing.assert_allclose(lo, lower, rtol=1e-12)
    np.testing.assert_allclose(hi, upper, rtol=1e-12)


@pytest.mark.parametrize("fraction", [1, 3])
def test_nominal_values_agree_with_pyfar(fraction):
    pf_const = pytest.importorskip("pyfar.constants")
    nominal = pf_const.fractional_octave_frequencies_nominal(fraction, (20, 20000))
    mine = [nominal_hz(f, fraction) for f in band_centres_hz(fraction, 20, 20000)]
    # pyfar's octave list starts at 16 Hz (its docs); compare the common range
    common = [n for n in nominal if 19 <= n <= 20001]
    assert [m for m in mine if 19 <= m <= 20001] == pytest.approx(common)


@pytest.mark.parametrize("fraction", [6, 12, 24])
def test_even_fractions_follow_the_half_step_rule_and_tile_the_axis(fraction):
    # IEC 61260-1:2014 Eq. 3: b even -> fm = 1000·G^((2x+1)/(2b)); no band is centred on 1 kHz,
    # 1 kHz is the shared edge of the two bands around it; the bands tile without gaps.
    c = band_centres_hz(fraction, 500, 2000)
    lo, hi = band_edges_hz(c, fraction)
    assert not np.any(np.isclose(c, 1000.0))
    assert np.any(np.isclose(hi, 1000.0)) and np.any(np.isclose(lo, 1000.0))
    np.testing.assert_allclose(hi[:-1], lo[1:], rtol=1e-12)
    np.testing.assert_allclose(hi / lo, G ** (1 / fraction), rtol=1e-12)


def test_sixth_octave_centres_agree_with_pyfar():
    pf_const = pytest.importorskip("pyfar.constants")
    centre, _, _ = pf_const.fractional_octave_frequencies_exact(6, (800, 1300))
    mine = band_centres_hz(6, 800, 1300)
    np.testing.assert_allclose(mine, centre[: len(mine)], rtol=1e-12)


def test_fine_fractions_get_rounded_labels_of_our_own():
    c = band_centres_hz(6, 1000, 1100)  # 1059.25 Hz
    assert nominal_label(c[0], 6) == "1.06k"
    assert nominal_label(944.06, 6) == "944"


def test_a_band_count_per_octave_is_the_fraction():
    for b in (1, 3, 6, 12, 24):
        assert len(band_centres_hz(b, 1000 * G**0.01, 2000 * G**-0.01)) in (b, b + 1)


@pytest.mark.parametrize("bad", [0, 2, 5, 1.0, True])
def test_unsupported_fractions_are_input_errors(bad):
    with pytest.raises(InputError):
        band_centres_hz(bad, 100, 1000)


def test_bad_ranges_are_input_errors():
    with pytest.raises(InputError):
        band_centres_hz(3, 1000, 100)
    with pytest.raises(InputError):
        band_centres_hz(3, float("nan"), 100)
    with pytest.raises(InputError):
        band_centres_hz(3, -1, 100)
