"""howl: gain before feedback for sound technicians.

The core is pure numpy/scipy on frozen dataclasses; the edges (files, audio,
plots, the CLI) are thin. Importing ``howl`` loads neither sounddevice nor
matplotlib.
"""

__version__ = "0.1.0"

__all__ = [
    "AudioUnavailableError",
    "HowlError",
    "HowlWarning",
    "InputError",
    "MeasurementQualityError",
    "__version__",
]

from howl.errors import (  # noqa: E402
    AudioUnavailableError,
    HowlError,
    HowlWarning,
    InputError,
    MeasurementQualityError,
)
