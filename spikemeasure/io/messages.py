"""How files, names and failures of the reading libraries appear in messages.

Messages never quote what a file holds: names the file gives are kept only when they are
short plain identifiers, and a library's exception is reduced to its type and a fixed
description.
"""
from __future__ import annotations

import errno
import re

__all__ = ["safe_name", "library_failure", "os_reason"]

_SAFE_NAME = re.compile(r"[A-Za-z0-9_ .()\[\]+-]{1,64}")


def safe_name(name, fallback: str = "") -> str:
    """A name the file gives (a series, segment or channel) as it may appear in messages: kept
    only when it is a short plain identifier, else `fallback`, so that no other text of the
    file (a line of a system file read by mistake, say) reaches a message or a table."""
    text = str(name) if name is not None else ""
    return text if _SAFE_NAME.fullmatch(text) and text.strip() else fallback


def library_failure(exc: BaseException) -> str:
    """A read failure of neo, pynwb, hdmf, nixio or h5py as its type and a fixed description.

    The libraries' own texts can quote the file (names, values, units as written), so only
    HDF5's own error-stack texts (``OSError`` from h5py, which never hold data) and the
    truncation numbers are kept.
    """
    text = str(exc)
    m = re.search(r"truncated file: eof = (\d+).*?stored_eof = (\d+)", text)
    if m:
        return (f"the file is truncated: {int(m.group(1)):,} of {int(m.group(2)):,} bytes are "
                "there; copy it again from its source")
    kind = type(exc).__name__
    if isinstance(exc, OSError) and type(exc).__module__ in ("builtins", "h5py._objects") and (
            re.fullmatch(r"[\w ,.;:()'=<>-]{1,200}", text)
            and not re.search(r"[\\/]", text)):
        return f"{kind}: {text}; the file may be truncated or damaged"
    return f"{kind} in the reading library; the file may be truncated, damaged or not valid"


def os_reason(exc: OSError) -> str:
    """What an OSError of the file system means, without the path it quotes."""
    if exc.errno == errno.ENAMETOOLONG:
        return "the path is longer than the system allows (ENAMETOOLONG)"
    if isinstance(exc, PermissionError):
        return "permission denied"
    if exc.errno == errno.ELOOP:
        return "a loop of symbolic links"
    return exc.strerror or type(exc).__name__
