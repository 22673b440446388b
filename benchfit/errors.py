"""One exception tree for benchfit.

::

    BenchfitError            base; the CLI prints its message as one line
    ├── CaptureError         a capture file or stream cannot be read (exit 2)
    ├── DeviceError          the audio device is missing or refuses the request (exit 3)
    ├── MeasureError         a measurement cannot be made on the given data (exit 2)
    ├── FitError             a fit cannot be made or its inputs are wrong (exit 2)
    ├── SpecError            a specification file is wrong (exit 2)
    ├── DesignError          a design request is impossible or malformed (exit 2)
    └── LogError             the measurement log cannot be used (exit 2)

Every message names the file or parameter at fault and, where there is one, the fix:
``"<file>: <what is wrong> — <what to do>"``. Library errors are translated at the
boundary with ``raise ... from e`` so the cause stays available to developers.
"""

from __future__ import annotations

__all__ = [
    "BenchfitError",
    "CaptureError",
    "DeviceError",
    "MeasureError",
    "FitError",
    "SpecError",
    "DesignError",
    "LogError",
]


class BenchfitError(Exception):
    """Base class of every error benchfit raises on purpose."""

    #: process exit code the command line uses for this error
    exit_code: int = 2


class CaptureError(BenchfitError):
    """A capture (file or live stream) cannot be read or is not usable."""


class DeviceError(BenchfitError):
    """An audio device is missing, busy, or does not support the request."""

    exit_code = 3


class MeasureError(BenchfitError):
    """A measurement cannot be made on the data given."""


class FitError(BenchfitError):
    """A model fit cannot be made, or its inputs are inconsistent."""


class SpecError(BenchfitError):
    """A specification file is malformed or names an unknown quantity."""


class DesignError(BenchfitError):
    """A design or trim request is impossible or malformed."""


class LogError(BenchfitError):
    """The measurement log cannot be opened, read or written."""
