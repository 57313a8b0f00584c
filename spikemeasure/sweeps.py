"""Sweeps as plain objects, and the current step each one delivers.

A :class:`Sweep` holds the membrane voltage in mV, the command current in pA (or ``None`` when
the file has no command channel), the sampling rate in Hz and where it came from. Nothing here
knows about file formats; :mod:`spikemeasure.reading` builds sweeps from files.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.ndimage import median_filter

from .errors import InvalidSettingError, UnmeasurableDataError

__all__ = ["Sweep", "CurrentStep", "find_current_step", "step_from_times", "check_sweep",
           "MIN_SAMPLING_RATE_HZ"]

#: Below this an action potential (about 1 ms) spans two samples or fewer: not measurable.
MIN_SAMPLING_RATE_HZ = 2_000.0


@dataclass(frozen=True)
class CurrentStep:
    """A rectangular current step within a sweep.

    Attributes
    ----------
    onset_s, offset_s : float
        Step start and end, seconds from the sweep's first sample (offset is the first sample
        back at the holding level).
    size_pa : float
        Step current relative to the holding current, in pA; NaN when unknown (the step was
        given as times on the command line and the file has no command channel).
    holding_pa : float
        Current before the step, in pA; NaN when unknown.
    """

    onset_s: float
    offset_s: float
    size_pa: float = float("nan")
    holding_pa: float = float("nan")

    @property
    def duration_s(self) -> float:
        return self.offset_s - self.onset_s


@dataclass(frozen=True)
class Sweep:
    """One sweep of a current-clamp recording.

    Attributes
    ----------
    voltage_mv : ndarray
        Membrane voltage in mV, 1-D float64.
    sampling_rate_hz : float
        Samples per second.
    command_pa : ndarray or None
        Command (injected) current in pA, same length as the voltage, or None.
    file : str
        The path the sweep was read from, as given to the reader.
    index : int
        0-based sweep index in file order.
    label : str
        A name the file gives the sweep (segment name, NWB series name), for messages.
    """

    voltage_mv: np.ndarray
    sampling_rate_hz: float
    command_pa: np.ndarray | None = None
    file: str = ""
    index: int = 0
    label: str = ""
    channel_info: tuple = field(default=(), compare=False)

    @property
    def n_samples(self) -> int:
        return int(self.voltage_mv.shape[0])

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sampling_rate_hz

    def where(self) -> str:
        """'file, sweep N' for messages."""
        return f"{self.file}, sweep {self.index}" + (f" ({self.label})" if self.label else "")


def check_sweep(sweep: Sweep) -> None:
    """Raise :class:`UnmeasurableDataError` if a sweep cannot be measured at all.

    Catches a sampling rate below :data:`MIN_SAMPLING_RATE_HZ`, NaN or infinite samples
    (reporting the stretch), traces too short to hold a spike, and a command channel whose
    length differs from the voltage.
    """
    v = sweep.voltage_mv
    if not sweep.sampling_rate_hz >= MIN_SAMPLING_RATE_HZ:
        raise UnmeasurableDataError(
            f"{sweep.where()}: sampled at {sweep.sampling_rate_hz:g} Hz, too slow to resolve "
            f"action potentials (at least {MIN_SAMPLING_RATE_HZ:g} Hz; 10 kHz or more is usual)")
    if v.ndim != 1 or v.size < 3:
        raise UnmeasurableDataError(
            f"{sweep.where()}: only {v.size} voltage samples; a sweep needs at least 3")
    bad = ~np.isfinite(v)
    if bad.any():
        idx = np.flatnonzero(bad)
        rate = sweep.sampling_rate_hz
        raise UnmeasurableDataError(
            f"{sweep.where()}: {idx.size} voltage samples are NaN or infinite "
            f"(first at {idx[0] / rate:.4f} s, last at {idx[-1] / rate:.4f} s); "
            "the sweep was not measured. Remove or re-export the gap")
    if sweep.command_pa is not None and sweep.command_pa.shape != v.shape:
        raise UnmeasurableDataError(
            f"{sweep.where()}: the command has {sweep.command_pa.size} samples but the voltage "
            f"has {v.size}")


def find_current_step(command_pa: np.ndarray, sampling_rate_hz: float, *,
                      min_step_pa: float = 1.0) -> CurrentStep | None:
    """Find the main rectangular current step in a command-current trace.

    Parameters
    ----------
    command_pa : ndarray
        Command current in pA, 1-D.
    sampling_rate_hz : float
        Samples per second.
    min_step_pa : float, optional
        Deviations from the holding current smaller than this (pA) are not a step.

    Returns
    -------
    CurrentStep or None
        None when the command never leaves the holding level by ``min_step_pa``.

    Notes
    -----
    1. A 5-sample running median removes isolated noise samples from a recorded command.
    2. The holding current is the median of the first 1 ms (at least 3 samples).
    3. The step is the stretch from the first to the last sample whose deviation from holding
       exceeds half of the largest deviation; so a step riding on noise, or with a small
       overshoot, is still found once, and the largest step wins in a multi-step protocol.
    4. The holding current is then re-estimated as the median of every sample outside the
       step, and the step size is the median over the step minus the holding current.
    Onset is the time of the first sample of the step, offset the time of the first sample
    after it, both from the sweep's first sample.
    """
    cmd = np.asarray(command_pa, dtype=float)
    if cmd.ndim != 1 or cmd.size < 3:
        raise InvalidSettingError("`command_pa` must be a 1-D array of at least 3 samples")
    if not sampling_rate_hz > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    filtered = median_filter(cmd, size=5, mode="nearest") if cmd.size >= 5 else cmd
    n_head = max(3, int(round(1e-3 * sampling_rate_hz)))
    holding = float(np.median(filtered[:n_head]))
    deviation = filtered - holding
    largest = float(np.max(np.abs(deviation)))
    if not np.isfinite(largest) or largest < min_step_pa:
        return None
    inside = np.abs(deviation) > 0.5 * largest
    first = int(np.argmax(inside))
    last = int(cmd.size - 1 - np.argmax(inside[::-1]))
    outside = np.concatenate([cmd[:first], cmd[last + 1:]])
    if outside.size >= n_head:
        holding = float(np.median(outside))
    size = float(np.median(cmd[first:last + 1])) - holding
    return CurrentStep(onset_s=first / sampling_rate_hz, offset_s=(last + 1) / sampling_rate_hz,
                       size_pa=size, holding_pa=holding)


def step_from_times(start_s: float, end_s: float, duration_s: float) -> CurrentStep:
    """A step given by its times (no command channel): size and holding current unknown."""
    if not (0 <= start_s < end_s):
        raise InvalidSettingError(
            f"the step must satisfy 0 <= START < END (got {start_s} s to {end_s} s)")
    if start_s >= duration_s:
        raise InvalidSettingError(
            f"the step starts at {start_s} s, after the sweep ends ({duration_s:.4f} s)")
    return CurrentStep(onset_s=float(start_s), offset_s=float(min(end_s, duration_s)))
