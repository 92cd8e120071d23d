"""The one exception hierarchy of the package.

A :class:`MeasureError` is a user mistake or an unusable input: the command line prints it as
one line, ``error: what was wrong; what to do``, and exits with status 2. Anything else is a bug
and keeps its traceback. Each subclass also inherits the matching built-in so that callers who
catch ``ValueError`` or ``OSError`` keep working.
"""

from __future__ import annotations

__all__ = [
    "MeasureError",
    "ParameterError",
    "AudioFileError",
    "DeviceError",
    "MissingDependencyError",
    "FitError",
]


class MeasureError(Exception):
    """Base class: an input or situation the user can fix."""


class ParameterError(MeasureError, ValueError):
    """A parameter is out of range, inconsistent with another, or of the wrong kind."""


class AudioFileError(MeasureError, OSError):
    """An audio file or sidecar is missing, unreadable, malformed or unusable."""


class DeviceError(MeasureError, RuntimeError):
    """A sound device refused, failed or delivered an unusable recording."""


class MissingDependencyError(MeasureError, ImportError):
    """An optional or native dependency is not installed."""


class FitError(MeasureError, RuntimeError):
    """A model could not be fitted to the data given."""
