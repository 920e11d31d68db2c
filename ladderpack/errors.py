"""User-facing error types.

Every mistake a user can make (a bad file, a bad option value, a rate the
clock cannot reach) is reported through :class:`LadderpackError` or one of
its subclasses.  The message names the file and the field involved and says
what was expected, so the command line can print it as a single line and exit
with status 2, without a stack trace.
"""

from __future__ import annotations

__all__ = [
    "AudioFileError",
    "ClockError",
    "LadderpackError",
    "OptionError",
    "OutputError",
    "SignalError",
]


class LadderpackError(Exception):
    """A problem with the user's input, reported without a traceback.

    Parameters
    ----------
    message : str
        What is wrong and what was expected, e.g. ``"must be 1..16, got 20"``.
    file : str, optional
        The file the problem is in (input clip, output folder, manifest).
    field : str, optional
        The option, key or quantity that is wrong (``"bits"``, ``"rate_hz"``).

    Examples
    --------
    >>> str(LadderpackError("must be 1..16, got 20", field="bits"))
    'bits: must be 1..16, got 20'
    """

    exit_code = 2

    def __init__(self, message: str, *, file: str | None = None, field: str | None = None):
        self.message = message
        self.file = file
        self.field = field
        super().__init__(self.__str__())

    def __str__(self) -> str:
        parts = [p for p in (self.file, self.field) if p]
        parts.append(self.message)
        # One line, whatever a file name holds: control characters are shown escaped.
        text = ": ".join(parts)
        return "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in text)


class OptionError(LadderpackError, ValueError):
    """An option or parameter has a value outside what is allowed."""


class AudioFileError(LadderpackError):
    """An input sound file is missing, unreadable or not audio."""


class SignalError(LadderpackError, ValueError):
    """Sample data is unusable (empty, not finite, wrong shape)."""


class ClockError(LadderpackError, ValueError):
    """The requested sample rate cannot be produced by the state-machine clock."""


class OutputError(LadderpackError):
    """An output folder or file cannot be written."""


class DeprecatedOptionWarning(FutureWarning):
    """An option given by an old spelling, which keeps working for one more release.

    The command line prints it as a warning line; a program can turn it into an error
    with :func:`warnings.simplefilter`.
    """
