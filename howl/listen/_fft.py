"""Real FFT for the detector without the start-up cost of ``import scipy.fft`` (private).

``scipy.fft.rfft`` is a thin wrapper around scipy's compiled pocketfft extension
(``scipy/fft/_pocketfft/pypocketfft``); importing the ``scipy.fft`` package to reach it also
imports ``scipy.special`` and scipy's array-API layer: about 0.3 s of CPU at every start of
``howl scan`` and ``howl listen`` (issue 21), for two functions. This module loads that same
extension file on its own and calls the same routine with the same arguments, so the spectra
are bit for bit those of ``scipy.fft.rfft`` (tests/listen/test_detect_fft.py checks it), in
float32 as in float64.

When the extension is not where this scipy keeps it, or does not have the expected functions,
it falls back to ``scipy.fft`` itself (the same results, the import cost again).
"""

from __future__ import annotations

import importlib.machinery
import importlib.util
import os

import numpy as np

_BACKEND = None


def _load():
    """The pocketfft extension module, loaded from scipy's package folder, or None."""
    try:
        spec0 = importlib.util.find_spec("scipy")
        if spec0 is None or not spec0.submodule_search_locations:
            return None
        folder = os.path.join(list(spec0.submodule_search_locations)[0], "fft", "_pocketfft")
        for suffix in importlib.machinery.EXTENSION_SUFFIXES:
            path = os.path.join(folder, "pypocketfft" + suffix)
            if os.path.isfile(path):
                spec = importlib.util.spec_from_file_location("pypocketfft", path)
                mod = importlib.util.module_from_spec(spec)
                spec.loader.exec_module(mod)
                if callable(getattr(mod, "r2c", None)) and callable(getattr(mod, "good_size", None)):
                    return mod
        return None
    except Exception:  # any failure: scipy.fft itself (same results)
        return None


def _backend():
    global _BACKEND
    if _BACKEND is None:
        mod = _load()
        if mod is not None:
            _BACKEND = ("direct", mod)
        else:
            import scipy.fft

            _BACKEND = ("scipy", scipy.fft)
    return _BACKEND


def rfft(x: np.ndarray) -> np.ndarray:
    """Real FFT along the last axis of a float32 or float64 array (``scipy.fft.rfft(x, axis=-1)``)."""
    kind, mod = _backend()
    if kind == "scipy":
        return mod.rfft(x, axis=-1)
    a = np.asarray(x)
    if a.dtype not in (np.float32, np.float64):
        a = a.astype(np.float64)
    # scipy.fft.rfft(x, axis=-1) calls r2c(x, (axis,), forward=True, inorm=0, out=None, workers=1)
    return mod.r2c(a, (a.ndim - 1,), True, 0, None, 1)


def next_fast_len(n: int) -> int:
    """The smallest length ≥ n that the real FFT handles fast (``scipy.fft.next_fast_len(n, real=True)``)."""
    kind, mod = _backend()
    if kind == "scipy":
        return int(mod.next_fast_len(int(n), real=True))
    return int(mod.good_size(int(n), True))
