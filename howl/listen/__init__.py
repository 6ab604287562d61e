"""Listening: the ringing detector (spectra, candidates, tracking, decisions, the low lane,
cuts and reports) and the live loop that feeds it from an input.

The names below are the public API; each is imported from its module on first use.
"""

from howl._lazy import lazy_exports

_NAMES = {
    "Detector": "detect",
    "DetectorConfig": "detect",
    "report": "detect",
    "event_record": "detect",
    "summarise_notches": "detect",
    "LoopDelayFromIR": "detect",
    "loop_delay_s": "detect",
    "margin_from_decay_db": "detect",
    "ArraySource": "live",
    "listen": "live",
    "CAUTIONS": "live",
}

__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy_exports(__name__, _NAMES)
