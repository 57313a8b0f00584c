"""Errors raised by spikemeasure.

Every message names the file (and the sweep, where there is one), says what is wrong and,
where possible, how to fix it. The command-line layer turns these into ``Error: ...`` lines.
Files are named in messages and outputs by :func:`printable_name`, so a name whose bytes are
not UTF-8, or that holds control characters, never breaks a table, a page or a terminal.
"""
from __future__ import annotations

__all__ = ["SpikemeasureError", "UnreadableInputError", "UnmeasurableDataError",
           "InvalidSettingError", "UnusableOutputError", "OutputWriteError", "valid_text",
           "printable_name"]


class SpikemeasureError(Exception):
    """Base class of every error spikemeasure raises on purpose."""


class UnreadableInputError(SpikemeasureError):
    """A file cannot be read as a current-clamp recording (format, units, channels)."""


class UnmeasurableDataError(SpikemeasureError):
    """Data were read but cannot be measured (NaN stretch, too short, wrong mode)."""


class InvalidSettingError(SpikemeasureError, ValueError):
    """A parameter is out of range or inconsistent with another."""


def valid_text(text: str) -> str:
    """`text` with every lone surrogate written as a backslash escape, so it encodes as UTF-8.

    Python holds the bytes of a file name that are not UTF-8 as lone surrogates (U+DC80 to
    U+DCFF, "surrogateescape"); such a string cannot be written to a UTF-8 file. Each of them
    becomes ``\\xNN`` (the byte it stands for), any other lone surrogate ``\\uNNNN``. Text
    without surrogates is returned unchanged.

    Parameters
    ----------
    text : str

    Returns
    -------
    str
    """
    if not isinstance(text, str):
        raise InvalidSettingError(f"`text` must be a str (got {type(text).__name__})")
    try:
        text.encode("utf-8")
        return text
    except UnicodeEncodeError:
        pass
    return "".join(_escape_char(c) if "\ud800" <= c <= "\udfff" else c for c in text)


def printable_name(name: str) -> str:
    """A file name or path as text that can be shown anywhere: valid UTF-8, one line.

    Bytes that are not UTF-8 (held as surrogates) become ``\\xNN``; characters that are not
    printable (control characters, line breaks, tabs, invisible separators) become ``\\xNN``,
    ``\\uNNNN`` or ``\\UNNNNNNNN``. Every other character, and the ordinary space, is kept.
    A name that is already printable is returned unchanged.

    Parameters
    ----------
    name : str

    Returns
    -------
    str
    """
    if not isinstance(name, str):
        raise InvalidSettingError(f"`name` must be a str (got {type(name).__name__})")
    if name.isprintable():  # surrogates are not printable either
        return name
    return "".join(c if c.isprintable() else _escape_char(c) for c in name)


def _escape_char(c: str) -> str:
    code = ord(c)
    if 0xDC80 <= code <= 0xDCFF:  # a byte that was not UTF-8 (surrogateescape)
        return f"\\x{code - 0xDC00:02x}"
    if code < 0x100:
        return f"\\x{code:02x}"
    if code < 0x10000:
        return f"\\u{code:04x}"
    return f"\\U{code:08x}"


class UnusableOutputError(SpikemeasureError):
    """The output folder given cannot hold results (a file is in its place or above it, or
    files cannot be created in it); nothing was measured."""


class OutputWriteError(SpikemeasureError):
    """Results could not be written during a run (a full disk); the message says what was and
    was not written."""
