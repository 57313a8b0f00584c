"""The suffix table: which reader reads a file, by the file's suffix.

spikemeasure's own readers take the open formats (:data:`OWN_FORMATS`); every other suffix
goes to the one vetted neo reader that declares it (:data:`~spikemeasure.io.safety.
VETTED_NEO_READERS`, the first in that order when several do). A suffix in neither is an
error that lists the suffixes read; no reader is tried on a file it was not chosen for.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from ..errors import UnreadableInputError, printable_name
from .neo_formats import read_with_neo
from .nix import read_nix
from .nwb import read_nwb
from .recording import Recording
from .safety import PICKLE_SUFFIXES, VETTED_NEO_READERS
from .text import TEXT_SUFFIXES, read_text

__all__ = ["FormatReader", "OWN_FORMATS", "RECORDING_SUFFIXES", "suffix_table", "reader_for"]


@dataclass(frozen=True)
class FormatReader:
    """One entry of the suffix table.

    Attributes
    ----------
    format_name : str
        The format, as messages name it.
    read : callable
        ``read(path, shown, sampling_rate_hz, max_sweep_samples) -> Recording``.
    neo_class : type or None
        The neo reader class, for formats read through neo; None for spikemeasure's own.
    reads_hashed : bool
        Whether ``read`` takes ``hash_input=True`` and hashes the bytes it parses (text);
        other formats are hashed in a pass of their own (:mod:`~spikemeasure.io.hashing`).
    """

    format_name: str
    read: Callable[..., Recording]
    neo_class: type | None = None
    reads_hashed: bool = False


def _without_rate(read: Callable[[Path, str, int], Recording]
                  ) -> Callable[[Path, str, float | None, int], Recording]:
    """A reader of a format whose files carry their own sampling rate."""
    return lambda path, shown, sampling_rate_hz, max_sweep_samples: read(
        path, shown, max_sweep_samples)


_NWB = FormatReader("NWB", _without_rate(read_nwb))
_NIX = FormatReader("NIX", _without_rate(read_nix))
_TEXT = FormatReader("text", read_text, reads_hashed=True)

#: The open formats spikemeasure reads itself, by suffix (lower case, with the dot).
OWN_FORMATS: dict[str, FormatReader] = {".nwb": _NWB, ".nix": _NIX,
                                        **{suffix: _TEXT for suffix in TEXT_SUFFIXES}}

#: The open formats a folder search picks up; other formats neo reads come in by pattern.
RECORDING_SUFFIXES = tuple(OWN_FORMATS)


def _neo_reader(cls: type) -> FormatReader:
    return FormatReader(f"neo {cls.__name__}", functools.partial(_read_through_neo, cls), cls)


def _read_through_neo(cls: type, path: Path, shown: str, sampling_rate_hz: float | None,
                      max_sweep_samples: int) -> Recording:
    return read_with_neo(cls, path, shown, max_sweep_samples)


@functools.lru_cache(maxsize=1)
def suffix_table() -> dict[str, FormatReader]:
    """Every suffix read, lower case with its dot (``""``: a file without a suffix), and its
    reader: :data:`OWN_FORMATS`, then each vetted neo reader's declared suffixes that no
    earlier entry holds. Pickle suffixes are never in it.

    Returns
    -------
    dict of str to FormatReader
        Built on first use (it imports neo), then the same table.
    """
    import neo.io

    table = dict(OWN_FORMATS)
    for name in VETTED_NEO_READERS:
        cls = getattr(neo.io, name)
        for extension in cls.extensions:
            suffix = f".{extension.lower()}" if extension else ""
            if suffix not in table and suffix not in PICKLE_SUFFIXES:
                table[suffix] = _neo_reader(cls)
    return table


def _suffix_list() -> str:
    neo_suffixes = [s for s in suffix_table() if s not in OWN_FORMATS]
    # numbered parts (.1, .2, ...) and files without a suffix are named once, not one by one
    named = sorted(s for s in neo_suffixes if s and not s[1:].isdigit())
    if any(s[1:].isdigit() for s in neo_suffixes if s):
        named.append("numbered parts (.1, .2, ...)")
    if "" in neo_suffixes:
        named.append("no suffix")
    return (f"NWB (.nwb), NIX (.nix), text ({', '.join(TEXT_SUFFIXES)}) and, through neo, "
            f"{', '.join(named)}")


def reader_for(path: Path, shown: str) -> FormatReader:
    """The reader of a file, by its suffix (case ignored).

    Parameters
    ----------
    path : Path
        The file.
    shown : str
        How the file is named in the message.

    Returns
    -------
    FormatReader

    Raises
    ------
    UnreadableInputError
        No reader takes this suffix; the message lists the suffixes read.
    """
    suffix = path.suffix.lower()
    reader = OWN_FORMATS.get(suffix) or suffix_table().get(suffix)
    if reader is None:
        raise UnreadableInputError(
            f"{shown}: no reader for files with this suffix ({printable_name(suffix)}); "
            f"spikemeasure reads {_suffix_list()}")
    return reader
