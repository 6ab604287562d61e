"""The low lane's decimation filter, designed with numpy: the same taps as scipy.signal's Kaiser design."""

from __future__ import annotations

import numpy as np
import pytest

from howl.listen._lane import Decimator, kaiser_lowpass


@pytest.mark.parametrize("atten_db", [30.0, 60.0, 70.0])
@pytest.mark.parametrize("width", [0.0125, 0.05, 0.2])
def test_kaiser_lowpass_is_scipy_firwin_with_kaiserord(atten_db, width):
    # reference: scipy.signal.kaiserord + scipy.signal.firwin (Kaiser window), what the lane used before
    from scipy.signal import firwin, kaiserord

    n, beta = kaiserord(atten_db, width)
    ref = firwin(n | 1, 0.5 * width * 2, window=("kaiser", beta))
    np.testing.assert_allclose(kaiser_lowpass(atten_db, width, width), ref, rtol=0, atol=1e-15)


def test_the_decimator_at_48_khz_has_the_documented_length_and_stop_band():
    dec = Decimator(48000.0, 20)
    assert 340 <= dec.h.size <= 360  # "about 350 taps" (docstring); Kaiser's formula gives 347
    # reference: scipy.signal.freqz of the taps; stop band from 0.625 * 2400 Hz = 1500 Hz down by >= 70 dB
    from scipy.signal import freqz

    f, h = freqz(dec.h, worN=np.linspace(1500.0, 24000.0, 4000), fs=48000.0)
    # Kaiser's length formula is an empirical fit: the 70 dB design reaches 69.5 dB at the band edge
    assert 20 * np.log10(np.max(np.abs(h))) < -69.0


def test_the_lane_does_not_import_scipy_signal():
    import subprocess
    import sys

    code = "import sys\nfrom howl.listen._lane import Decimator\nDecimator(48000.0, 20)\nprint('scipy.signal' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
