"""Measuring: exponential sweeps and their deconvolution (Farina), measurement sessions,
and the audio layer (the only module that imports sounddevice, lazily).

The names below are the public API; each is imported from its module on first use.
"""

from howl._lazy import lazy_exports

_NAMES = {
    "Sweep": "sweep",
    "Analysis": "sweep",
    "exponential_sweep": "sweep",
    "deconvolve": "sweep",
    "analyse": "sweep",
    "Session": "session",
    "Pair": "session",
    "SweepSettings": "session",
    "LevelPolicy": "session",
    "QualityPolicy": "session",
    "GainChain": "session",
    "InterfaceCalibration": "session",
    "rig_pairs": "session",
    "cautions": "session",
    "summary": "session",
    "combine_acoustic_to_loop": "session",
    "AudioBackend": "audio",
    "PortAudioBackend": "audio",
    "FakeBackend": "audio",
    "DeviceInfo": "audio",
    "LiveInput": "audio",
    "PlayRecordResult": "audio",
}

__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy_exports(__name__, _NAMES)
