"""The data model of a recording: sweeps as plain objects.

A :class:`Sweep` holds the membrane voltage in mV, the command current in pA (or ``None`` when
the file has no command channel), the sampling rate in Hz and where it came from; a
:class:`LazyTrace` is a long voltage left in its file and read by slices; a :class:`StoredTrace` is
a sweep's signal left in its file until that sweep is measured (:meth:`Sweep.loaded`). The
readers of this package build them; :mod:`spikemeasure.analysis` measures them.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Callable

import numpy as np

__all__ = ["Sweep", "LazyTrace", "StoredTrace"]


class _TraceInFile:
    """A 1-D signal left in its file: ``trace[a:b]`` reads samples a to b-1 as float64, scaled
    by `scale` (a unit conversion); ``trace * k`` gives the same trace scaled by k;
    ``numpy.asarray`` reads all of it."""

    ndim = 1
    dtype = np.dtype(np.float64)

    def __init__(self, read: Callable[[int, int], np.ndarray], n_samples: int,
                 scale: float = 1.0) -> None:
        self._read = read
        self.size = int(n_samples)
        self.shape = (self.size,)
        self.scale = float(scale)

    def __len__(self) -> int:
        return self.size

    def __mul__(self, factor: float):
        return type(self)(self._read, self.size, self.scale * float(factor))

    __rmul__ = __mul__

    def __getitem__(self, key) -> np.ndarray:
        if not isinstance(key, slice):
            raise TypeError(f"a {type(self).__name__} is read by slices, such as trace[a:b]")
        start, stop, step = key.indices(self.size)
        if stop <= start:
            return np.zeros(0)
        part = np.asarray(self._read(start, stop), dtype=np.float64).reshape(-1)
        if part.size != stop - start:
            raise ValueError(f"reading samples {start}-{stop} gave {part.size} samples")
        if self.scale != 1.0:
            part = part * self.scale
        return part[::step] if step != 1 else part

    def __array__(self, dtype=None, copy=None) -> np.ndarray:
        whole = self[0:self.size]
        return whole.astype(dtype) if dtype is not None else whole

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.size} samples, scale {self.scale:g})"


class LazyTrace(_TraceInFile):
    """A long 1-D signal that stays in its file: ``trace[a:b]`` reads samples a to b-1.

    Long gap-free recordings are handed to the measurement stage this way, so that they can be
    measured in pieces in bounded memory. Slicing returns float64 arrays, scaled by `scale`
    (a unit conversion); ``trace * k`` gives the same trace scaled by k. ``numpy.asarray``
    reads all of it.

    Parameters
    ----------
    read : callable
        ``read(start, stop)`` returns samples ``start`` to ``stop - 1`` as a 1-D array.
    n_samples : int
    scale : float, optional
    """


class StoredTrace(_TraceInFile):
    """A sweep's signal of ordinary length left in its file until the sweep is measured.

    A file is measured one sweep at a time: its sweeps are handed out with their samples
    still in the file, and :meth:`Sweep.loaded` reads one sweep's voltage and command whole
    (float64, scaled as a :class:`LazyTrace` is) just before it is measured; they are dropped
    once it is. Slices (``trace[a:b]``) read only those samples, for the checks a reader makes
    on a sweep's first samples; any other index reads it all, then picks.

    Parameters
    ----------
    read : callable
        ``read(start, stop)`` returns samples ``start`` to ``stop - 1`` as a 1-D array.
    n_samples : int
    scale : float, optional
    """

    def __getitem__(self, key) -> np.ndarray:
        if isinstance(key, slice):
            return super().__getitem__(key)
        return np.asarray(self)[key]  # an index or a mask: read it all, then pick


@dataclass(frozen=True)
class Sweep:
    """One sweep of a current-clamp recording.

    Attributes
    ----------
    voltage_mv : ndarray, LazyTrace or StoredTrace
        Membrane voltage in mV, 1-D float64 (a :class:`LazyTrace` for a long recording read
        in pieces; a :class:`StoredTrace` while the samples wait in the file, see
        :meth:`loaded`).
    sampling_rate_hz : float
        Samples per second.
    command_pa : ndarray, StoredTrace or None
        Command (injected) current in pA, same length as the voltage, or None.
    file : str
        The path the sweep was read from, as given to the reader.
    index : int
        0-based sweep index in file order.
    label : str
        A name the file gives the sweep (segment name, NWB series name), for messages.
    electrode : str
        The electrode (the cell) the sweep was recorded from: the electrode's name in NWB;
        in other formats the voltage channel's name (or index) when the file holds several,
        else "". A file's sweeps of one electrode are one cell.
    cells_in_file : int
        How many electrodes (cells) the sweep's file holds; messages name the electrode only
        when there are several.
    """

    voltage_mv: np.ndarray
    sampling_rate_hz: float
    command_pa: np.ndarray | None = None
    file: str = ""
    index: int = 0
    label: str = ""
    channel_info: tuple = field(default=(), compare=False)
    electrode: str = ""
    cells_in_file: int = field(default=1, compare=False)

    @property
    def n_samples(self) -> int:
        return int(self.voltage_mv.shape[0])

    @property
    def is_lazy(self) -> bool:
        """True when the voltage stays in the file and is read in pieces."""
        return isinstance(self.voltage_mv, LazyTrace)

    @property
    def is_stored(self) -> bool:
        """True when the voltage or command waits in the file (:class:`StoredTrace`)."""
        return (isinstance(self.voltage_mv, StoredTrace)
                or isinstance(self.command_pa, StoredTrace))

    def loaded(self) -> "Sweep":
        """The sweep with a voltage and command waiting in the file read now (float64
        arrays); the sweep itself when nothing waits. The arrays belong to the returned sweep
        alone: drop it once measured, and the samples go with it."""
        if not self.is_stored:
            return self
        voltage, command = self.voltage_mv, self.command_pa
        return replace(self,
                       voltage_mv=(np.asarray(voltage) if isinstance(voltage, StoredTrace)
                                   else voltage),
                       command_pa=(np.asarray(command) if isinstance(command, StoredTrace)
                                   else command))

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sampling_rate_hz

    def where(self) -> str:
        """'file, sweep N' (or 'file, electrode E, sweep N') for messages."""
        shown_label = self.label and self.label != f"sweep {self.index}"
        named = self.electrode and self.cells_in_file > 1
        cell = f", electrode {self.electrode}" if named else ""
        return (f"{self.file}{cell}, sweep {self.index}"
                + (f" ({self.label})" if shown_label else ""))
