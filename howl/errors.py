"""The exception family of howl.

Every error that a user can cause by what they feed howl (a file, an option, a
device choice) is a :class:`HowlError`. The CLI turns it into one line on
stderr and exit status 2; nothing else in the package prints errors.

``HowlError``
    base class; ``str(err)`` is the one-line message.
``InputError`` (also a ``ValueError``)
    a bad file, key, option or value. Carries the file, the key path, the
    value and what was expected, so the message always names them.
``AudioUnavailableError``
    PortAudio missing, no such device, the audio server went away.
``MeasurementQualityError``
    a recording that must not be used (silence, clipping, dropouts, repeats
    that disagree).

``HowlWarning`` is for input that can be computed but is doubtful.
"""

from __future__ import annotations


class HowlError(Exception):
    """Base class of all errors howl reports to the user as one line."""


class InputError(HowlError, ValueError):
    """Bad input: a file, a key in it, an option or a value.

    Parameters
    ----------
    message:
        what is wrong and what was expected, e.g. ``"must be > 0 m, got -2"``.
    file:
        the file the value came from, if any.
    key:
        the key path inside the file (``"speakers[1].position_m"``) or the
        option name (``"--gain-db"``).
    """

    def __init__(self, message: str, *, file: str | None = None, key: str | None = None):
        self.message = message
        self.file = None if file is None else str(file)
        self.key = key
        super().__init__(self._render())

    def _render(self) -> str:
        where = []
        if self.file:
            where.append(self.file)
        if self.key:
            where.append(self.key)
        prefix = ": ".join(where)
        return f"{prefix}: {self.message}" if prefix else self.message

    def located(self, *, file: str | None = None, key_prefix: str | None = None) -> "InputError":
        """Return a copy with the file set and/or the key path prefixed."""
        key = self.key
        if key_prefix:
            key = f"{key_prefix}.{key}" if key else key_prefix
        return InputError(self.message, file=file if file is not None else self.file, key=key)

    def __str__(self) -> str:  # keep the rendered line even after attribute changes
        return self._render()


class AudioUnavailableError(HowlError):
    """No usable audio: PortAudio missing, no such device, server went away."""


class MeasurementQualityError(HowlError):
    """A recording failed a quality gate and must not be used silently."""


class Terminated(KeyboardInterrupt):
    """SIGTERM or SIGHUP, raised where Ctrl-C would be so the same clean-up runs."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = int(signum)


class HowlWarning(UserWarning):
    """Computable but doubtful input or result."""
