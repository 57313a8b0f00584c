"""Limits on the size of what is read, checked before anything is read.

The constants are read through this module (``limits.LONG_SWEEP_SAMPLES``) by the readers, so
that a test can lower them for one call.
"""
from __future__ import annotations

import os

import numpy as np

from ..params import DEFAULT_MAX_SWEEP_SAMPLES

__all__ = ["LONG_SWEEP_SAMPLES", "DEFAULT_MAX_SWEEP_SAMPLES", "available_memory_bytes",
           "size_problem", "is_long_shape"]

#: NWB and NIX sweeps longer than this (about 3.5 min at 20 kHz) stay in the file and are read
#: in pieces through neo's lazy loading, when their command current is constant (gap-free).
LONG_SWEEP_SAMPLES = 1 << 22

#: Sweeps declaring more samples than this are refused before anything is read from them
#: (the run parameter ``max_sweep_samples``). 10^9 samples is about 14 hours at 20 kHz, or
#: 8 GB as float64: more than any single current-clamp sweep, while a file that declares more
#: (a damaged or hostile header over a few kB of compressed fill values) would otherwise be
#: read for hours. Declared with the run parameter, in :mod:`spikemeasure.params`.


def available_memory_bytes() -> int | None:
    """Memory the system can give this process now (MemAvailable on Linux), or None."""
    try:
        with open("/proc/meminfo", "rb") as fh:
            for line in fh:
                if line.startswith(b"MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    except (AttributeError, ValueError, OSError):
        return None


def size_problem(where: str, shape, max_sweep_samples: int, *, whole: bool) -> str | None:
    """Why a signal of the declared `shape` is not read, or None: more samples than
    `max_sweep_samples`, or (`whole`: read at once) more float64 bytes than the memory
    available."""
    dims = [int(d) for d in (shape or (0,))]
    n_samples = dims[0] if dims else 0
    n_values = int(np.prod(dims, dtype=object)) if dims else 0
    if n_samples > max_sweep_samples or n_values > max_sweep_samples:
        return (f"{where}: the file declares {n_values:,} samples for this sweep, more than "
                f"max_sweep_samples ({max_sweep_samples:,}); it was not read. Raise "
                "--max-sweep-samples if the recording really is that long")
    if whole:
        available = available_memory_bytes()
        needed = 8 * n_values
        if available is not None and needed > available:
            return (f"{where}: the file declares {n_values:,} samples for this sweep, "
                    f"{needed / 2 ** 30:.1f} GiB as float64, more than the "
                    f"{available / 2 ** 30:.1f} GiB of memory available; it was not read")
    return None


def is_long_shape(shape) -> bool:
    """Whether a signal of the declared `shape` is one channel longer than
    :data:`LONG_SWEEP_SAMPLES`, so it stays in its file and is read in pieces."""
    return len(shape) >= 1 and int(shape[0]) > LONG_SWEEP_SAMPLES and (
        len(shape) == 1 or int(shape[1]) == 1)
