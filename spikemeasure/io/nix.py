"""NIX files (``.nix``): one sweep per neo segment.

Files as neo's NixIO writes them are read straight from HDF5, one segment at a time
(:mod:`~spikemeasure.io.nix_hdf5`); other NIX files through neo's NixIO, to the same sweeps.
Files with long or very large signals are read through neo's lazy NIX reader, so that long
sweeps stay in the file and sweeps too large are refused before they are read.
"""
from __future__ import annotations

import os
import warnings
from dataclasses import replace
from pathlib import Path
from typing import Callable

import numpy as np

from ..errors import UnreadableInputError
from . import limits
from .lazy import LongSignal, is_long
from .messages import library_failure, os_reason, safe_name
from .nix_hdf5 import nix_array_sizes, nix_segments
from .nwb_hdf5 import FastPathUnsupported
from .recording import Recording
from .safety import HDF5_SIGNATURE
from .signals import Segment, close_rawio, segments_to_recording, sweep_where

__all__ = ["read_nix"]


def _nix_array_sizes(path: Path | str) -> tuple[int, int]:
    """The most rows and the most values of any data array in a NIX file, from the HDF5
    layout alone (nothing is read)."""
    import h5py

    longest = largest = 0

    def visit(name, obj):
        nonlocal longest, largest
        if isinstance(obj, h5py.Dataset) and name.endswith("/data") and obj.ndim >= 1:
            longest = max(longest, int(obj.shape[0]))
            largest = max(largest, int(np.prod([int(d) for d in obj.shape], dtype=object)))

    with h5py.File(path, "r") as fh:
        fh.visititems(visit)
    return longest, largest


def _read_nix_lazily(path: Path | str, shown: str, max_sweep_samples: int) -> Recording:
    """A NIX file with long or very large signals: neo's lazy NIX reader, long signals left
    in the file, and sweeps declaring more than `max_sweep_samples` samples (or more than the
    memory available, for those read whole) refused before they are read."""
    import neo

    io = neo.io.NixIOFr(str(path))
    try:
        blocks = io.read(lazy=True)
        segments = []
        for block in blocks:
            for segment in block.segments:
                where = sweep_where(shown, len(segments), safe_name(segment.name))
                refused = next((problem for problem in (
                    limits.size_problem(where, p.shape, max_sweep_samples, whole=not is_long(p))
                    for p in segment.analogsignals) if problem), "")
                signals = [] if refused else [LongSignal(p, shown) if is_long(p) else p.load()
                                              for p in segment.analogsignals]
                segments.append(Segment(segment.name or "", signals, refused))
        recording = segments_to_recording(segments, shown, "NIX (one sweep per segment)")
    except BaseException:
        close_rawio(io)
        raise
    if not any(sw.is_lazy for sw in recording.sweeps):
        close_rawio(io)
        return recording
    return replace(recording, release=lambda: close_rawio(io))


def _openable_text_path(path: Path) -> tuple[str, Callable[[], None]]:
    """A path as text that HDF5 libraries accept, and what to call when done with it.

    nixio refuses a path whose bytes are not UTF-8 (Python holds those bytes as surrogates);
    such a file is opened here and given by its descriptor's name (``/proc/self/fd/N``), so
    it is still read by its real path.
    """
    text = str(path)
    try:
        text.encode("utf-8")
        return text, lambda: None
    except UnicodeEncodeError:
        pass
    for folder in ("/proc/self/fd", "/dev/fd"):
        if os.path.isdir(folder):
            fd = os.open(path, os.O_RDONLY)
            closed = []

            def close() -> None:
                if not closed:
                    closed.append(True)
                    os.close(fd)

            return f"{folder}/{fd}", close
    return text, lambda: None  # no descriptor folder: the library says what it refuses


def read_nix(path: Path, shown: str, max_sweep_samples: int) -> Recording:
    """Read a NIX file: one sweep per neo segment; long signals stay in the file.

    Parameters
    ----------
    path : Path
        The file.
    shown : str
        How the file is named in sweeps and messages.
    max_sweep_samples : int
        Sweeps declaring more samples are refused before they are read.

    Returns
    -------
    Recording
        Close it (or use it in ``with``) when long sweeps were left in the file.

    Raises
    ------
    UnreadableInputError
        The file is not HDF5, cannot be read as NIX, or holds no measurable sweep.
    """
    try:
        path_text, done = _openable_text_path(path)
    except OSError as exc:
        raise UnreadableInputError(f"{shown}: cannot be opened ({os_reason(exc)})") from None
    try:
        recording = _read_nix_from(path, path_text, shown, max_sweep_samples)
    except BaseException:
        done()
        raise
    if recording.release is None:
        done()
        return recording
    release = recording.release
    return replace(recording, release=lambda: (release(), done()))


def _read_lazily(longest: int, largest: int, max_sweep_samples: int) -> bool:
    """Whether a file whose data arrays are this long and this large is read lazily (long
    signals left in the file, sweeps too large refused before they are read)."""
    available = limits.available_memory_bytes()
    return (longest > limits.LONG_SWEEP_SAMPLES or largest > max_sweep_samples
            or (available is not None and 8 * largest > available))


def _read_nix_fast(path_text: str, shown: str, max_sweep_samples: int) -> Recording:
    """A NIX file as neo's NixIO writes it, read from HDF5 one segment at a time;
    FastPathUnsupported when it must be read through neo (or lazily)."""
    import h5py

    try:
        fh = h5py.File(path_text, "r")
    except Exception as exc:  # h5py raises many types on files it cannot open
        raise FastPathUnsupported("not opened by h5py") from exc
    try:
        try:
            sizes = nix_array_sizes(fh)
        except FastPathUnsupported:
            raise
        except Exception as exc:  # a layout not read here
            raise FastPathUnsupported("layout not read from HDF5") from exc
        if _read_lazily(*sizes, max_sweep_samples):
            raise FastPathUnsupported("long or large signals: read lazily through neo")
        recording = segments_to_recording(_guarded(nix_segments(fh)), shown,
                                          "NIX (one sweep per segment)")
    except BaseException:
        fh.close()
        raise
    if not any(sw.is_stored for sw in recording.sweeps):
        fh.close()
        return recording
    return replace(recording, release=fh.close)  # the sweeps' samples are read from it


def _guarded(segments):
    """The segments, any failure of reading them made FastPathUnsupported (neo then says
    what is wrong)."""
    try:
        yield from segments
    except FastPathUnsupported:
        raise
    except Exception as exc:  # h5py and neo raise many types; neo's path names the cause
        raise FastPathUnsupported("layout not read from HDF5") from exc


def _read_nix_from(path: Path, path_text: str, shown: str,
                   max_sweep_samples: int) -> Recording:
    import neo

    with open(path, "rb") as fh:
        if fh.read(8) != HDF5_SIGNATURE:
            raise UnreadableInputError(
                f"{shown}: not a NIX file (NIX files are HDF5, and this one does not start with "
                "the HDF5 signature; it may be truncated or of another format)")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                return _read_nix_fast(path_text, shown, max_sweep_samples)
            except FastPathUnsupported:
                pass
            if _read_lazily(*_nix_array_sizes(path_text), max_sweep_samples):
                return _read_nix_lazily(path_text, shown, max_sweep_samples)
            with neo.io.NixIO(path_text, mode="ro") as io:
                blocks = io.read_all_blocks(lazy=False)
    except UnreadableInputError:
        raise
    except Exception as exc:  # nixio and h5py raise many types; keep the cause
        raise UnreadableInputError(
            f"{shown}: cannot be read as NIX ({library_failure(exc)})") from exc
    segments = [seg for blk in blocks for seg in blk.segments]
    return segments_to_recording(segments, shown, "NIX (one sweep per segment)")
