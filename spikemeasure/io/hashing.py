"""The SHA-256 of an input file, taken from the bytes as they are read.

Text files are parsed from a stream that hashes every byte it hands on
(:class:`HashingStream`), so the bytes parsed are the bytes hashed, in one pass. HDF5 files
(NWB, NIX) are read by the HDF5 library in scattered, partial reads (metadata first, each
dataset's chunks where they lie), while SHA-256 needs the bytes in order; holding the whole
file in memory to hash and read it once would break the memory bound of a run. So they, and
the formats neo reads itself, are hashed in one sequential pass (:func:`sha256_of_file`)
immediately before the reader opens them, in the same process: the disk is read once, and
the reader's reads come from the system's file cache.
"""
from __future__ import annotations

import hashlib
import io
import os

__all__ = ["HashingStream", "sha256_of_file"]

#: Bytes read at a time by :func:`sha256_of_file`.
HASH_CHUNK_BYTES = 1 << 20


def sha256_of_file(path: str | os.PathLike, chunk: int = HASH_CHUNK_BYTES) -> str:
    """The SHA-256 of a file's bytes, as hex, in one sequential pass.

    Parameters
    ----------
    path : str or path-like
    chunk : int, optional
        Bytes read at a time.

    Returns
    -------
    str
        64 hex digits.

    Raises
    ------
    OSError
        The file cannot be read.
    """
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk), b""):
            digest.update(block)
    return digest.hexdigest()


class HashingStream(io.RawIOBase):
    """A read-only binary stream over a file that hashes every byte it hands on.

    Wrap it in :class:`io.BufferedReader` (and :class:`io.TextIOWrapper` for text) and give it
    to a parser; :meth:`hexdigest` reads what the parser left unread (nothing, for a parser
    that reads to the end) and returns the SHA-256 of the whole file. Closing the stream
    hashes the rest first, so the digest is whole even when a wrapper closed it.

    Parameters
    ----------
    path : str or path-like
    """

    def __init__(self, path: str | os.PathLike) -> None:
        super().__init__()
        self._file = open(path, "rb", buffering=0)
        self._digest = hashlib.sha256()

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:
        count = self._file.readinto(buffer)
        if count:
            self._digest.update(memoryview(buffer)[:count])
        return count

    def hexdigest(self) -> str:
        """The SHA-256 of the file: the bytes read so far and the rest, read now."""
        self._finish()
        return self._digest.hexdigest()

    def _finish(self) -> None:
        if not self._file.closed:
            for block in iter(lambda: self._file.read(HASH_CHUNK_BYTES), b""):
                self._digest.update(block)

    def close(self) -> None:
        """Hash what is left unread, then close the file (a wrapper closing the stream
        leaves the digest whole)."""
        if not self.closed:
            try:
                self._finish()
            finally:
                self._file.close()
        super().close()
