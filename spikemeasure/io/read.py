"""Reading one recording: the checks every file gets, then the reader its suffix names."""
from __future__ import annotations

import os
import stat
from dataclasses import replace
from pathlib import Path

import numpy as np

from ..errors import InvalidSettingError, UnreadableInputError, printable_name
from . import limits
from .hashing import sha256_of_file
from .messages import os_reason
from .recording import Recording
from .safety import refuse_code_formats
from .suffixes import reader_for

__all__ = ["read_recording"]


def read_recording(path: str | os.PathLike, *, shown_as: str | None = None,
                   sampling_rate_hz: float | None = None,
                   max_sweep_samples: int | None = None,
                   hash_input: bool = False) -> Recording:
    """Read one file into sweeps.

    Parameters
    ----------
    path : str or path-like
        The file.
    shown_as : str, optional
        How to name the file in sweeps and messages (default: the path as given, as a
        :func:`~spikemeasure.errors.printable_name`).
    sampling_rate_hz : float, optional
        For text files without a time column.
    max_sweep_samples : int, optional
        Sweeps declaring more samples than this are refused before they are read (default
        :data:`~spikemeasure.io.limits.DEFAULT_MAX_SWEEP_SAMPLES`); so are sweeps read whole
        whose declared float64 size exceeds the memory available. Each refusal is a problem
        of the recording, or the error when no sweep is left.
    hash_input : bool, optional
        Also take the SHA-256 of the file's bytes (:attr:`Recording.sha256`) as it is read:
        text from the bytes parsed, other formats in one pass just before their reader opens
        them (:mod:`~spikemeasure.io.hashing` says why).

    Returns
    -------
    Recording

    Raises
    ------
    UnreadableInputError
        The file does not exist, is empty, truncated, of an unknown or unsafe format, or holds
        no current-clamp voltage. The message names the file and, where it applies, the sweep,
        and never quotes the file's content.
    InvalidSettingError
        `max_sweep_samples` is not a positive whole number.
    """
    p = Path(path)
    shown = shown_as if shown_as is not None else printable_name(str(path))
    try:
        st = os.stat(p)
    except FileNotFoundError:
        raise UnreadableInputError(f"{shown}: no such file") from None
    except OSError as exc:
        raise UnreadableInputError(f"{shown}: cannot be looked at ({os_reason(exc)})") from None
    if stat.S_ISDIR(st.st_mode):
        raise UnreadableInputError(f"{shown}: is a folder; pass it to find_recordings")
    if not stat.S_ISREG(st.st_mode):
        raise UnreadableInputError(
            f"{shown}: not a regular file (a device, pipe or socket); spikemeasure reads "
            "recordings saved as files")
    if st.st_size == 0:
        raise UnreadableInputError(f"{shown}: the file is empty")
    if sampling_rate_hz is not None and not (np.isfinite(sampling_rate_hz)
                                             and sampling_rate_hz > 0):
        raise UnreadableInputError(f"{shown}: the sampling rate must be positive")
    if max_sweep_samples is None:
        max_sweep_samples = limits.DEFAULT_MAX_SWEEP_SAMPLES
    if (isinstance(max_sweep_samples, bool) or not isinstance(max_sweep_samples, (int, np.integer))
            or max_sweep_samples < 1):
        raise InvalidSettingError(
            f"`max_sweep_samples` must be a positive whole number (got {max_sweep_samples!r})")
    max_sweep_samples = int(max_sweep_samples)
    try:
        refuse_code_formats(p, shown)
        reader = reader_for(p, shown)
        if not hash_input:
            return reader.read(p, shown, sampling_rate_hz, max_sweep_samples)
        if reader.reads_hashed:
            return reader.read(p, shown, sampling_rate_hz, max_sweep_samples, hash_input=True)
        sha256 = sha256_of_file(p)
        return replace(reader.read(p, shown, sampling_rate_hz, max_sweep_samples),
                       sha256=sha256)
    except OSError as exc:  # opening or reading the file itself (permissions, I/O errors)
        raise UnreadableInputError(
            f"{shown}: cannot be read ({exc.strerror or type(exc).__name__})") from exc
