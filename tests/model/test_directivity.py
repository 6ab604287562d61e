"""Microphone and loudspeaker directivity: first-order patterns, the frequency model, coverage, Q."""

from __future__ import annotations

import math

import numpy as np
import pytest

from howl.model import directivity as d
from howl.errors import InputError
from howl.model.rig import Mic, Speaker

F_MID = np.array([1000.0])


def _mic(pattern: str, az_deg: float = 0.0, el_deg: float = 0.0) -> Mic:
    return Mic("m", (1.0, 1.0, 1.0), math.radians(az_deg), math.radians(el_deg), pattern)


def _dir(theta_deg: float) -> np.ndarray:
    t = math.radians(theta_deg)
    return np.array([math.cos(t), math.sin(t), 0.0])


# ---------------------------------------------------------------------------------- first order ----

def test_cardioid_is_minus_6_02_db_at_90_degrees_and_null_at_180():
    # HyperPhysics "Directional Patterns of Microphones": cardioid −6 dB at 90°, null at 180°
    g = d.mic_gain(_mic("cardioid"), np.stack([_dir(90.0), _dir(180.0)]), F_MID, ideal=True)[:, 0]
    assert 20 * math.log10(abs(g[0])) == pytest.approx(-6.0206, abs=0.001)
    assert abs(g[1]) < 1e-12


@pytest.mark.parametrize(
    "pattern, published_null_deg",
    [
        ("supercardioid", 127.0),  # HyperPhysics: supercardioid null ≈ 127° (a = 0.375); Eargle's 0.366 gives 125.3°
        ("hypercardioid", 110.0),  # HyperPhysics and Eargle Table 6-1: 109.5°/110°
        ("figure8", 90.0),  # HyperPhysics: figure-8 null at 90°
    ],
)
def test_first_order_null_angles_match_published_values(pattern, published_null_deg):
    a = d.first_order_coefficient(pattern)
    null = d.first_order_null_deg(a)
    assert null == pytest.approx(published_null_deg, abs=2.0)
    g = d.mic_gain(_mic(pattern), _dir(null)[None, :], F_MID, ideal=True)
    assert abs(g[0, 0]) < 1e-9


@pytest.mark.parametrize(
    "pattern, ree, di_db, dsf",
    [
        # Eargle, The Microphone Book 2nd ed., Table 6-1 (after Olson 1972): RE, DI, distance factor
        ("omni", 1.0, 0.0, 1.0),
        ("cardioid", 0.333, 4.8, 1.7),
        ("supercardioid", 0.268, 5.7, 1.9),
        ("hypercardioid", 0.250, 6.0, 2.0),
        ("figure8", 0.333, 4.8, 1.7),
    ],
)
def test_random_energy_efficiency_directivity_index_and_distance_factor_match_eargle(pattern, ree, di_db, dsf):
    a = d.first_order_coefficient(pattern)
    r = float(d.first_order_ree(a))
    assert r == pytest.approx(ree, abs=0.001)
    assert -10 * math.log10(r) == pytest.approx(di_db, abs=0.05)
    assert float(d.distance_factor(r)) == pytest.approx(dsf, abs=0.05)
    # the numerical integral of the (ideal) pattern gives the same number
    num = d.mic_random_energy_efficiency(_mic(pattern), [125.0, 1000.0, 8000.0], ideal=True)
    np.testing.assert_allclose(num, r, rtol=1e-12)


def test_figure8_rear_lobe_is_negative_and_front_positive():
    g = d.mic_gain(_mic("figure8"), np.stack([_dir(0.0), _dir(180.0)]), F_MID, ideal=True)[:, 0]
    assert g[0] == pytest.approx(1.0) and g[1] == pytest.approx(-1.0)


def test_mic_gain_follows_the_mic_aim():
    # a mic aimed along +y (azimuth 90°) hears +y on axis and −x at 90° off axis
    m = _mic("cardioid", az_deg=90.0)
    g = d.mic_gain(m, np.array([[0.0, 1.0, 0.0], [-1.0, 0.0, 0.0], [0.0, -1.0, 0.0]]), F_MID, ideal=True)[:, 0]
    np.testing.assert_allclose(g, [1.0, 0.5, 0.0], atol=1e-12)


def test_aim_vector_uses_room_coordinates():
    # howl.rig: azimuth 0 along +x, positive toward +y, elevation up
    np.testing.assert_allclose(d.aim_vector(math.pi / 2, 0.0), [0, 1, 0], atol=1e-12)
    np.testing.assert_allclose(d.aim_vector(0.0, math.pi / 2), [0, 0, 1], atol=1e-12)


# ------------------------------------------------------------------------------ frequency model ----

def test_mic_frequency_model_is_near_ideal_at_1_khz():
    # our model is built to leave the mid band alone (docs/plan.md)
    for pattern in ("cardioid", "supercardioid", "hypercardioid"):
        real = d.mic_gain(_mic(pattern), _dir(90.0)[None], F_MID)[0, 0]
        ideal = d.mic_gain(_mic(pattern), _dir(90.0)[None], F_MID, ideal=True)[0, 0]
        assert 20 * math.log10(abs(real) / abs(ideal)) == pytest.approx(0.0, abs=0.3)


def test_cardioid_widens_at_low_and_loses_rear_rejection_at_high_frequencies():
    # direction of the effects: Eargle, The Microphone Book, ch. 5-6 (from memory); sizes are our model
    m = _mic("cardioid")
    f = np.array([125.0, 1000.0, 8000.0])
    side = 20 * np.log10(np.abs(d.mic_gain(m, _dir(90.0)[None], f)[0]))
    rear = 20 * np.log10(np.abs(d.mic_gain(m, _dir(180.0)[None], f)[0]))
    assert side[0] > side[1] > side[2]  # wider at 125 Hz, narrower at 8 kHz
    assert rear[0] > -20.0 and rear[2] > -25.0 and rear[1] < -35.0  # the null only holds in the mid band
    ree = d.mic_random_energy_efficiency(m, f)
    assert ree[0] > ree[1] > ree[2]


def test_omni_becomes_directional_at_high_frequencies():
    ree = d.mic_random_energy_efficiency(_mic("omni"), [1000.0, 8000.0])
    assert ree[0] == pytest.approx(1.0, abs=0.01)
    assert ree[1] < 0.9


def test_unknown_pattern_is_an_input_error():
    with pytest.raises(InputError, match="cardioid"):
        d.first_order_coefficient("cardiod")


def test_zero_direction_is_an_input_error():
    with pytest.raises(InputError):
        d.mic_gain(_mic("omni"), np.zeros((1, 3)), F_MID)


# ---------------------------------------------------------------------------------- loudspeakers ----

def _speaker(h, v, az_deg=30.0, el_deg=-10.0) -> Speaker:
    return Speaker("s", (0.0, 0.0, 0.0), math.radians(az_deg), math.radians(el_deg), (h,) * 7, (v,) * 7)


def test_speaker_is_minus_6_db_at_half_its_coverage_angles_in_both_planes():
    # definition of the −6 dB coverage angle (AES2 beamwidth convention, from memory)
    s = _speaker(90.0, 40.0)
    fr = d._frame(s.azimuth_rad, s.elevation_rad)
    h = math.radians(45.0)
    v = math.radians(20.0)
    dirs = np.stack([fr[0], fr[0] * math.cos(h) + fr[1] * math.sin(h), fr[0] * math.cos(h) - fr[1] * math.sin(h),
                     fr[0] * math.cos(v) + fr[2] * math.sin(v), -fr[0]])
    g = 20 * np.log10(d.speaker_gain(s, dirs, F_MID)[:, 0])
    np.testing.assert_allclose(g[:4], [0.0, -6.0206, -6.0206, -6.0206], atol=1e-6)
    assert g[4] == pytest.approx(d.SPEAKER_REAR_FLOOR_DB, abs=0.1)


def _sphere_integral_q(s: Speaker, freq_hz: float) -> float:
    # independent check: brute-force quadrature of |p|² over the sphere in room coordinates
    nt, nphi = 361, 360
    th = np.linspace(0.0, np.pi, nt)
    ph = np.linspace(0.0, 2 * np.pi, nphi, endpoint=False)
    T, P = np.meshgrid(th, ph, indexing="ij")
    dirs = np.stack([np.sin(T) * np.cos(P), np.sin(T) * np.sin(P), np.cos(T)], axis=-1)
    g2 = d.speaker_gain(s, dirs, [freq_hz])[..., 0] ** 2
    from scipy.integrate import simpson

    inner = g2.mean(axis=1) * 2 * np.pi
    return 4 * np.pi / simpson(inner * np.sin(th), x=th)


@pytest.mark.parametrize("h, v", [(90.0, 40.0), (120.0, 60.0), (60.0, 60.0)])
def test_speaker_q_equals_the_sphere_integral_of_its_polar_model(h, v):
    s = _speaker(h, v)
    assert float(d.speaker_q(s, F_MID)[0]) == pytest.approx(_sphere_integral_q(s, 1000.0), rel=0.01)


def test_axisymmetric_power_cardioid_has_q_2n_plus_1_and_180_degrees_is_a_cardioid():
    # derived: ∫((1+u)/2)^(2n) du = 2/(2n+1) → Q = 2n + 1; n = 1 is the cardioid, whose DI is 4.77 dB
    # (Eargle Table 6-1), so a 180° × 180° coverage without a floor has Q = 3.
    assert float(d.coverage_exponent(180.0)) == pytest.approx(1.0, abs=1e-12)
    n = d.coverage_exponent(90.0)
    # derived: −6 dB (p = ½) at ±45°: n = ln ½ / ln((1 + cos 45°)/2) = −0.693147/−0.158352 = 4.3774
    assert float(n) == pytest.approx(4.377, abs=0.001)
    e2 = 10 ** (d.SPEAKER_REAR_FLOOR_DB / 10)
    nf = float(d.coverage_exponent(90.0, with_floor=True))
    q0 = 2 * nf + 1
    assert float(d.coverage_q(90.0, 90.0)) == pytest.approx((1 + e2) / (1 / q0 + e2), rel=1e-12)


@pytest.mark.parametrize(
    "h, v, molloy_q",
    [
        # Molloy's relation Q = 180/asin(sin(h/2)·sin(v/2)), values computed from the formula as quoted in
        # the Handbook for Sound Engineers (derived)
        (90.0, 40.0, 12.861),
        (40.0, 20.0, 52.865),
        (60.0, 40.0, 18.281),
        (90.0, 90.0, 6.000),
        (120.0, 60.0, 7.015),
    ],
)
def test_molloy_q_and_the_polar_model_q_agree_within_2_db_of_di(h, v, molloy_q):
    assert float(d.molloy_q(h, v)) == pytest.approx(molloy_q, abs=0.001)
    di_model = 10 * math.log10(float(d.coverage_q(h, v)))
    assert abs(di_model - 10 * math.log10(molloy_q)) < 2.0


def test_speaker_coverage_is_interpolated_on_log_frequency_and_held_outside():
    s = Speaker("s", (0, 0, 0), 0.0, 0.0, (200, 180, 150, 130, 120, 110, 100), (90,) * 7)
    h, _ = d.speaker_coverage_deg(s, [50.0, 125.0, math.sqrt(125 * 250), 8000.0, 16000.0])
    np.testing.assert_allclose(h, [200, 200, 190, 100, 100], atol=1e-9)
    q = d.speaker_q(s, [125.0, 8000.0])
    assert q[1] > q[0]


# ---------------------------------------------------------------------------------- table files ----

def _rows(values) -> str:
    return "[" + ", ".join("[" + ", ".join(f"{v:.6f}" for v in row) + "]" for row in values) + "]"


def _write_mic_table(path, a=0.5, floor_db=-60.0):
    ang = np.arange(0.0, 181.0, 5.0)
    g = np.abs(a + (1 - a) * np.cos(np.radians(ang)))
    db = np.maximum(20 * np.log10(np.maximum(g, 1e-12)), floor_db)
    freqs = [125, 250, 500, 1000, 2000, 4000, 8000]
    path.write_text(f"freq_hz = {freqs}\nangle_deg = {ang.tolist()}\ngain_db = {_rows([db] * len(freqs))}\n")
    return path


def test_a_mic_polar_table_of_a_cardioid_behaves_like_the_first_order_cardioid(tmp_path):
    # the table is sampled from Eargle's cardioid (Table 6-1) with a −60 dB floor at the null
    p = _write_mic_table(tmp_path / "card.toml")
    m = Mic("t", (1.0, 1.0, 1.0), 0.0, 0.0, "table", str(p))
    g = d.mic_gain(m, np.stack([_dir(0.0), _dir(90.0)]), [1000.0])[:, 0]
    assert 20 * math.log10(g[1] / g[0]) == pytest.approx(-6.0206, abs=0.01)
    ree = d.mic_random_energy_efficiency(m, [250.0, 4000.0])
    np.testing.assert_allclose(ree, 1 / 3, rtol=0.01)


def test_a_speaker_table_of_power_cardioid_planes_has_the_closed_form_q(tmp_path):
    # planes 20·n·log10((1+cos θ)/2) blended in dB around the axis are the floorless coverage model, whose
    # Q is √((2n_h+1)(2n_v+1)) (derived in howl.directivity); the table path must integrate to it
    ang = np.arange(0.0, 180.1, 1.0)
    base = np.log10(np.maximum((1 + np.cos(np.radians(ang))) / 2, 1e-30))
    n_h, n_v = float(d.coverage_exponent(90.0)), float(d.coverage_exponent(40.0))
    h = np.maximum(20 * n_h * base, -200.0)
    v = np.maximum(20 * n_v * base, -200.0)
    freqs = [125, 1000, 8000]
    p = tmp_path / "horn.toml"
    p.write_text(f"freq_hz = {freqs}\nangle_deg = {ang.tolist()}\nhorizontal_db = {_rows([h] * 3)}\n"
                 f"vertical_db = {_rows([v] * 3)}\n")
    st = Speaker("st", (0.0, 0.0, 0.0), 0.0, 0.0, (90.0,) * 7, (60.0,) * 7, 100.0, str(p))
    q0 = math.sqrt((2 * n_h + 1) * (2 * n_v + 1))
    assert float(d.speaker_q(st, [1000.0])[0]) == pytest.approx(q0, rel=0.01)
    g = d.speaker_gain(st, np.array([[math.cos(math.pi / 4), math.sin(math.pi / 4), 0.0]]), [500.0])
    assert 20 * math.log10(g[0, 0]) == pytest.approx(-6.02, abs=0.05)


def test_a_bad_table_file_is_an_input_error_naming_the_file_and_key(tmp_path):
    p = tmp_path / "bad.toml"
    p.write_text("freq_hz = [125, 250]\nangle_deg = [0, 90, 180]\ngain_db = [[0, -6, -40]]\n")
    m = Mic("t", (1.0, 1.0, 1.0), 0.0, 0.0, "table", str(p))
    with pytest.raises(InputError, match=r"bad\.toml.*gain_db.*shape"):
        d.mic_gain(m, _dir(90.0)[None], [1000.0])
    p.write_text("freq_hz = [125]\nangle_deg = [0, 180]\n")
    with pytest.raises(InputError, match="gain_db"):
        d.mic_random_energy_efficiency(Mic("t", (1, 1, 1), 0.0, 0.0, "table", str(p)), [1000.0])


def _sofar_writer_fix(monkeypatch):
    # sofar 1.3 × netCDF4 1.7.5: netCDF4.stringtochar fails on 2-D string arrays with an encoding; write
    # them flat and restore the shape (a work-around for the test's writer only; reading is untouched)
    import sofar.io
    from netCDF4 import stringtochar

    def flat_stringtochar(a, encoding="utf-8"):
        a = np.asarray(a)
        if a.dtype.kind == "S":
            return stringtochar(a)
        out = stringtochar(a.reshape(-1), encoding=encoding)
        return out.reshape(a.shape + out.shape[-1:])

    monkeypatch.setattr(sofar.io, "stringtochar", flat_stringtochar)


def test_a_sofa_directivity_file_read_with_sofar_gives_the_q_of_the_data_it_holds(tmp_path, monkeypatch):
    # AES69-2022 FreeFieldDirectivityTF written by sofar (the reference implementation of the format);
    # the data are the coverage model of a 90° × 60° loudspeaker on a 5° grid
    sofar = pytest.importorskip("sofar")
    _sofar_writer_fix(monkeypatch)
    s = _speaker(90.0, 60.0, az_deg=0.0, el_deg=0.0)
    az, el = np.meshgrid(np.arange(0.0, 360.0, 5.0), np.arange(-90.0, 90.1, 5.0))
    az, el = az.ravel(), el.ravel()
    dirs = np.stack([np.cos(np.radians(el)) * np.cos(np.radians(az)),
                     np.cos(np.radians(el)) * np.sin(np.radians(az)), np.sin(np.radians(el))], -1)
    freqs = np.array([250.0, 1000.0, 4000.0])
    g = d.speaker_gain(s, dirs, freqs)  # (R, F)
    sofa = sofar.Sofa("FreeFieldDirectivityTF")
    sofa.ReceiverPosition = np.stack([az, el, np.ones_like(az)], -1)
    sofa.N = freqs
    sofa.Data_Real = 3.0 * g.T[None, :, :].transpose(0, 2, 1)  # (M=1, R, N), a scale that is normalised away
    sofa.Data_Imag = np.zeros_like(sofa.Data_Real)
    path = tmp_path / "horn.sofa"
    sofar.write_sofa(str(path), sofa)
    st = Speaker("st", (0.0, 0.0, 0.0), 0.0, 0.0, (90.0,) * 7, (60.0,) * 7, 100.0, str(path))
    assert float(d.speaker_q(st, [1000.0])[0]) == pytest.approx(float(d.speaker_q(s, [1000.0])[0]), rel=0.05)
    on = d.speaker_gain(st, np.array([[1.0, 0.0, 0.0], [math.cos(math.pi / 4), math.sin(math.pi / 4), 0.0]]),
                        [1000.0])[:, 0]
    np.testing.assert_allclose(20 * np.log10(on), [0.0, -6.02], atol=0.1)


def test_the_piston_factor_matches_scipy_bessel_j1():
    # reference: scipy.special.j1; 2·J1(x)/x, the series to x = 16, the large-argument expansion beyond
    from scipy.special import j1

    from howl.model._piston import piston_factor as _piston

    x = np.linspace(1e-6, 16.0, 20001)
    assert np.max(np.abs(_piston(x) - 2.0 * j1(x) / x)) < 1e-10
    x = np.linspace(16.0, 400.0, 20001)
    assert np.max(np.abs(_piston(x) - 2.0 * j1(x) / x)) < 1e-8  # two-term expansion (A&S 9.2.9–10)
    assert _piston(0.0) == 1.0
