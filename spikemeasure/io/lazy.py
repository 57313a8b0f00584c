"""Long sweeps left in their file and read in pieces through neo's lazy loading.

NWB and NIX sweeps longer than :data:`~spikemeasure.io.limits.LONG_SWEEP_SAMPLES` samples stay
in the file as :class:`~spikemeasure.io.sweep.LazyTrace` objects when their command current is
constant (gap-free); a sweep whose command steps is read whole.
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..errors import UnreadableInputError
from .sweep import LazyTrace, Sweep
from . import limits
from .messages import library_failure, safe_name

__all__ = ["LongSignal", "is_long", "settle_long_sweep"]


class LongSignal:
    """A one-channel neo signal proxy left in its file: what the readers need of a signal,
    with the samples as a :class:`LazyTrace` read through the proxy's ``load(time_slice=)``."""

    def __init__(self, proxy, shown: str) -> None:
        self.proxy = proxy
        self.shown = shown
        self.units = proxy.units
        self.sampling_rate = proxy.sampling_rate
        self.t_start = proxy.t_start
        self.sampling_period = getattr(proxy, "sampling_period", None)
        self.name = proxy.name
        self.annotations = getattr(proxy, "annotations", {})
        self.array_annotations = getattr(proxy, "array_annotations", {}) or {}
        self.n_samples = int(proxy.shape[0])

    def trace(self) -> LazyTrace:
        import quantities as pq

        proxy = self.proxy
        t0 = proxy.t_start.rescale("s")
        rate = float(proxy.sampling_rate.rescale("Hz"))

        def read(start: int, stop: int) -> np.ndarray:
            # neo rounds times to the nearest sample, so sample times give these samples
            try:
                part = proxy.load(time_slice=(t0 + start / rate * pq.s,
                                              t0 + stop / rate * pq.s), strict_slicing=False)
                return np.asarray(part.magnitude, dtype=np.float64)[:, 0]
            except Exception as exc:  # h5py and neo raise many types; keep the cause
                raise UnreadableInputError(
                    f"{self.shown}: samples {start}-{stop} of "
                    f"{safe_name(self.name, 'the signal')} "
                    f"({start / rate:.1f}-{stop / rate:.1f} s) cannot be read "
                    f"({library_failure(exc)})") from exc

        return LazyTrace(read, self.n_samples)


def is_long(proxy) -> bool:
    """Whether a neo signal proxy is one long channel, to be left in its file."""
    return limits.is_long_shape(getattr(proxy, "shape", (0,)))


def settle_long_sweep(sweep: Sweep) -> Sweep:
    """Keep a long sweep in its file only when it is gap-free (no current step): check its
    command piece by piece; a constant command is dropped (there is no step to find), a
    varying one makes the sweep be read whole, as the step features need it all.

    Raises UnreadableInputError when a sweep to be read whole does not fit in memory.
    """
    if not sweep.is_lazy:
        if isinstance(sweep.command_pa, LazyTrace):  # a long stimulus cut to a short response
            return replace(sweep, command_pa=np.asarray(sweep.command_pa))
        return sweep
    command = sweep.command_pa
    if isinstance(command, LazyTrace):
        low, high = np.inf, -np.inf
        piece = 1 << 21
        for start in range(0, command.size, piece):
            part = command[start:start + piece]
            low, high = min(low, float(part.min())), max(high, float(part.max()))
            if high - low > 1.0:  # pA: the command steps, so the step features need it all
                problem = limits.size_problem(sweep.where(), (sweep.n_samples, 2), 1 << 62,
                                              whole=True)
                if problem:
                    raise UnreadableInputError(
                        problem + " (its command current steps, so it must be read whole)")
                return replace(sweep, voltage_mv=np.asarray(sweep.voltage_mv),
                               command_pa=np.asarray(command))
        command = None
    return replace(sweep, command_pa=command)
