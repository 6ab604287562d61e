"""howl.listen._fft gives bit for bit what scipy.fft gives (the reference library: the detector's
spectra were computed by scipy.fft.rfft before; _fft calls the same compiled routine without
importing the scipy.fft package), and the fallback path is scipy.fft itself."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.fft

from howl.listen import _fft


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("n", [816, 1360, 4096, 5440, 16384])
def test_rfft_is_bitwise_scipy_rfft(dtype, n):
    x = np.random.default_rng(n).standard_normal((5, n)).astype(dtype)
    got = _fft.rfft(x)
    want = scipy.fft.rfft(x, axis=-1)
    assert got.dtype == want.dtype
    assert np.array_equal(got, want)
    assert np.array_equal(_fft.rfft(x[2]), scipy.fft.rfft(x[2]))


def test_next_fast_len_is_scipys():
    for n in (1, 7, 97, 816, 4080, 4081, 16320, 65537):
        assert _fft.next_fast_len(n) == scipy.fft.next_fast_len(n, real=True)


def test_the_extension_is_loaded_directly_here():
    # in this environment scipy keeps its pocketfft extension where _fft looks for it; if a scipy
    # release moves it, this fails and says so (the detector still works, through scipy.fft)
    assert _fft._backend()[0] == "direct"


def test_the_fallback_is_scipy_fft(monkeypatch):
    monkeypatch.setattr(_fft, "_BACKEND", ("scipy", scipy.fft))
    x = np.random.default_rng(1).standard_normal((3, 4096)).astype(np.float32)
    assert np.array_equal(_fft.rfft(x), scipy.fft.rfft(x, axis=-1))
    assert _fft.next_fast_len(4080) == 4096
