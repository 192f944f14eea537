"""The one family of errors printcheck raises on purpose.

Every message says what was wrong, the value, and what to do, on one line.  The CLI
catches :class:`PrintcheckError` once and exits 2 with its message.
"""

from __future__ import annotations

__all__ = [
    "PrintcheckError",
    "PhotoError",
    "LayoutError",
    "SpecError",
    "LocateError",
    "NoCompoundError",
    "OptionError",
    "HistoryError",
    "ReportError",
    "Interrupted",
]


class PrintcheckError(Exception):
    """Base of every error printcheck raises for bad input or an unusable photo."""


class PhotoError(PrintcheckError, OSError):
    """A photo could not be read or used (missing, truncated, too large, not an image)."""


class LayoutError(PrintcheckError, ValueError):
    """A layout file is malformed or inconsistent."""


class SpecError(PrintcheckError, ValueError):
    """A spec file or spec name is malformed or unknown."""


class LocateError(PrintcheckError, ValueError):
    """The layout's markers could not be found or do not fit the layout."""


class NoCompoundError(PrintcheckError, ValueError):
    """No marking compound can be found in a photo: it is not a measurement of zero."""


class OptionError(PrintcheckError, ValueError):
    """An option (of the library, a job setting or the command line) has an unusable value.

    ``parameter`` names the option in the library's words (``"px_per_mm"``) when the
    message starts with it, so that the command line can say its own flag instead.
    """

    def __init__(self, message: str, *, parameter: str | None = None) -> None:
        super().__init__(message)
        self.parameter = parameter


class HistoryError(PrintcheckError, OSError):
    """The history database could not be opened, read or written."""


class ReportError(PrintcheckError, OSError):
    """An output file could not be written."""


class Interrupted(KeyboardInterrupt):
    """A run stopped by Ctrl-C (SIGINT) or ``kill`` (SIGTERM), with a one-line account.

    Not a :class:`PrintcheckError`: nothing was wrong with the input.  The message says
    what was kept and how to go on; ``signum`` is the signal that stopped the run (the CLI
    exits with 128 + ``signum``, 130 for Ctrl-C).
    """

    def __init__(self, message: str = "", *, signum: int = 2) -> None:
        super().__init__(message)
        self.signum = signum
