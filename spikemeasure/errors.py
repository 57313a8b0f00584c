"""Errors raised by spikemeasure.

Every message names the file (and the sweep, where there is one), says what is wrong and,
where possible, how to fix it. The command-line layer turns these into ``Error: ...`` lines.
"""
from __future__ import annotations


class SpikemeasureError(Exception):
    """Base class of every error spikemeasure raises on purpose."""


class UnreadableInputError(SpikemeasureError):
    """A file cannot be read as a current-clamp recording (format, units, channels)."""


class UnmeasurableDataError(SpikemeasureError):
    """Data were read but cannot be measured (NaN stretch, too short, wrong mode)."""


class InvalidSettingError(SpikemeasureError, ValueError):
    """A parameter is out of range or inconsistent with another."""


class UnusableOutputError(SpikemeasureError):
    """The output folder given cannot hold results (a file is in its place or above it, or
    files cannot be created in it); nothing was measured."""


class OutputWriteError(SpikemeasureError):
    """Results could not be written during a run (a full disk); the message says what was and
    was not written."""
