"""The current step each sweep delivers, and whether a sweep can be measured at all.

The sweeps themselves (:class:`~spikemeasure.io.sweep.Sweep` and
:class:`~spikemeasure.io.sweep.LazyTrace`) are the data model of :mod:`spikemeasure.io`, which
builds them from files; nothing here knows about file formats.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import median_filter

from ..errors import InvalidSettingError, UnmeasurableDataError
from ..io.sweep import LazyTrace, Sweep

__all__ = ["CurrentStep", "find_current_step", "step_from_times", "check_sweep",
           "parse_step_sizes", "protocol_steps", "COMMAND_MEDIAN_SAMPLES", "missing_stretches",
           "stretches_text", "spikes_measurable", "MIN_SAMPLING_RATE_HZ", "MIN_FINITE_RUN_SAMPLES"]

#: Below this an action potential (about 1 ms) spans two samples or fewer, and may fall
#: between samples altogether: spikes are neither counted nor measured, while the sweep's
#: passive values (baseline, steady state, sag) still are.
MIN_SAMPLING_RATE_HZ = 2_000.0

#: A sweep whose longest stretch of finite voltage samples is shorter than this has nothing
#: left to measure.
MIN_FINITE_RUN_SAMPLES = 3

#: Width of the running median that removes isolated noise samples from a recorded command
#: before its step is found.
COMMAND_MEDIAN_SAMPLES = 5


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

    def holds(self, times_s: np.ndarray) -> np.ndarray:
        """Whether each time lies in the step, [onset_s, offset_s): the rule that puts a
        spike in the step, by its time (:func:`~spikemeasure.analysis.spikes.spike_times`)."""
        t = np.asarray(times_s, dtype=float)
        return (t >= self.onset_s) & (t < self.offset_s)


def missing_stretches(values) -> np.ndarray:
    """Stretches of NaN or infinite samples (dropped samples, gaps) in a 1-D signal.

    Parameters
    ----------
    values : array_like
        1-D signal.

    Returns
    -------
    ndarray of int, shape (k, 2)
        One row (start, stop) per stretch of consecutive non-finite samples: samples start to
        stop - 1, in order; zero rows when every sample is finite.
    """
    x = np.asarray(values)
    if x.ndim != 1:
        raise InvalidSettingError("`values` must be a 1-D array")
    bad = ~np.isfinite(x)
    if not bad.any():
        return np.zeros((0, 2), dtype=np.int64)
    edges = np.diff(np.concatenate([[False], bad, [False]]).astype(np.int8))
    return np.stack([np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)], axis=1
                    ).astype(np.int64)


def stretches_text(stretches, sampling_rate_hz: float, limit: int = 3) -> str:
    """'0.0500-0.0550 s, 0.2000 s' for messages: the first `limit` stretches (start to last
    sample), then how many more."""
    rate = float(sampling_rate_hz)
    rows = np.asarray(stretches, dtype=np.int64).reshape(-1, 2)
    parts = []
    for start, stop in rows[:limit]:
        first, last = start / rate, (stop - 1) / rate
        parts.append(f"{first:.4f} s" if stop - start == 1 else f"{first:.4f}-{last:.4f} s")
    if rows.shape[0] > limit:
        parts.append(f"and {rows.shape[0] - limit} more")
    return ", ".join(parts)


def spikes_measurable(sampling_rate_hz: float) -> bool:
    """True when a sweep sampled at this rate resolves action potentials
    (:data:`MIN_SAMPLING_RATE_HZ`)."""
    return float(sampling_rate_hz) >= MIN_SAMPLING_RATE_HZ


def check_sweep(sweep: Sweep) -> None:
    """Raise :class:`UnmeasurableDataError` if a sweep cannot be measured at all.

    Catches a sampling rate that is not a positive number, traces too short to hold a
    measurement, a command channel whose length differs from the voltage, and a voltage with
    no stretch of at least :data:`MIN_FINITE_RUN_SAMPLES` finite samples (naming the missing
    stretches). A sweep with NaN or infinite stretches otherwise is measured around them, and
    one sampled below :data:`MIN_SAMPLING_RATE_HZ` has its passive values measured but not its
    spikes (see :func:`spikemeasure.tables.build.measure_sweep`).
    """
    v = sweep.voltage_mv
    rate = sweep.sampling_rate_hz
    if not (np.isfinite(rate) and rate > 0):
        raise UnmeasurableDataError(
            f"{sweep.where()}: the sampling rate is {rate:g} Hz; it must be a positive number")
    if v.ndim != 1 or v.size < 3:
        raise UnmeasurableDataError(
            f"{sweep.where()}: only {v.size} voltage samples; a sweep needs at least 3")
    if sweep.command_pa is not None and sweep.command_pa.shape != v.shape:
        raise UnmeasurableDataError(
            f"{sweep.where()}: the command has {sweep.command_pa.size} samples but the voltage "
            f"has {v.size}")
    if isinstance(v, LazyTrace):
        return  # its gaps are found piece by piece while it is measured
    gaps = missing_stretches(v)
    if gaps.shape[0]:
        edges = np.concatenate([[0], gaps.ravel(), [v.size]])
        longest = int(np.max(edges[1::2] - edges[0::2]))
        if longest < MIN_FINITE_RUN_SAMPLES:
            missing = int(np.sum(gaps[:, 1] - gaps[:, 0]))
            raise UnmeasurableDataError(
                f"{sweep.where()}: {missing} of {v.size} voltage samples are NaN or infinite "
                f"({stretches_text(gaps, rate)}), leaving no stretch of "
                f"{MIN_FINITE_RUN_SAMPLES} finite samples in a row: nothing is left to "
                "measure. Re-export the sweep or leave it out")


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
    4. The holding current is the mean of the command before the step, and the step size the
       mean over the step minus the holding current.
    Onset is the time of the first sample of the step, offset the time of the first sample
    after it, both from the sweep's first sample.
    """
    cmd = np.asarray(command_pa, dtype=float)
    if cmd.ndim != 1 or cmd.size < 3:
        raise InvalidSettingError("`command_pa` must be a 1-D array of at least 3 samples")
    if not (np.isfinite(sampling_rate_hz) and sampling_rate_hz > 0):
        raise InvalidSettingError(
            f"`sampling_rate_hz` must be a positive, finite number (got {sampling_rate_hz})")
    finite = np.isfinite(cmd)
    if not finite.all():
        # a command with missing samples: find the step on the samples that are there, and
        # place it back at their positions
        cmd = np.where(finite, cmd, np.nan)
        kept = np.flatnonzero(finite)
        if kept.size < 3:
            return None
        found = find_current_step(cmd[kept], sampling_rate_hz, min_step_pa=min_step_pa)
        if found is None:
            return None
        first = int(kept[int(round(found.onset_s * sampling_rate_hz))])
        last = int(kept[int(round(found.offset_s * sampling_rate_hz)) - 1])
        before, during = cmd[:first], cmd[first:last + 1]
        holding = float(np.nanmean(before)) if np.isfinite(before).any() else found.holding_pa
        return CurrentStep(onset_s=first / sampling_rate_hz,
                           offset_s=(last + 1) / sampling_rate_hz,
                           size_pa=float(np.nanmean(during)) - holding, holding_pa=holding)
    filtered = (median_filter(cmd, size=COMMAND_MEDIAN_SAMPLES, mode="nearest")
                if cmd.size >= COMMAND_MEDIAN_SAMPLES else cmd)
    n_head = max(3, int(round(1e-3 * sampling_rate_hz)))
    holding = float(np.median(filtered[:n_head]))
    deviation = filtered - holding
    largest = float(np.max(np.abs(deviation)))
    if not np.isfinite(largest) or largest < min_step_pa:
        return None
    inside = np.abs(deviation) > 0.5 * largest
    first = int(np.argmax(inside))
    last = int(cmd.size - 1 - np.argmax(inside[::-1]))
    if first > 0:
        holding = float(np.mean(cmd[:first]))
    size = float(np.mean(cmd[first:last + 1])) - holding
    return CurrentStep(onset_s=first / sampling_rate_hz, offset_s=(last + 1) / sampling_rate_hz,
                       size_pa=size, holding_pa=holding)


def step_from_times(start_s: float, end_s: float, duration_s: float,
                    size_pa: float = float("nan")) -> CurrentStep:
    """A step given by its times (no command channel); size known only when given."""
    if not (0 <= start_s < end_s):
        raise InvalidSettingError(
            f"the step must satisfy 0 <= START < END (got {start_s} s to {end_s} s)")
    if start_s >= duration_s:
        raise InvalidSettingError(
            f"the step starts at {start_s} s, after the sweep ends ({duration_s:.4f} s)")
    return CurrentStep(onset_s=float(start_s), offset_s=float(min(end_s, duration_s)),
                       size_pa=float(size_pa))


def parse_step_sizes(text: str) -> tuple[float, float]:
    """'FIRST:INCREMENT' in pA -> (first, increment); e.g. '-100:20'."""
    parts = str(text).split(":")
    try:
        if len(parts) != 2:
            raise ValueError
        first, increment = float(parts[0]), float(parts[1])
    except ValueError:
        raise InvalidSettingError(
            f"step sizes must be FIRST:INCREMENT in pA, such as -100:20 (got {text!r})") from None
    if not (np.isfinite(first) and np.isfinite(increment)):
        raise InvalidSettingError(f"step sizes must be finite numbers (got {text!r})")
    return first, increment


def protocol_steps(sweeps: list[Sweep], step_s: tuple[float, float] | None = None,
                   step_sizes_pa: tuple[float, float] | None = None) -> list[CurrentStep | None]:
    """The current step of every sweep of a recording.

    Parameters
    ----------
    sweeps : list of Sweep
    step_s : (start_s, end_s), optional
        For sweeps without a command channel.
    step_sizes_pa : (first_pa, increment_pa), optional
        With `step_s`: sweep k's step is first + k * increment.

    Returns
    -------
    list of CurrentStep or None

    Notes
    -----
    A sweep whose command channel shows no step (a 0 pA sweep of a step series) gets the
    protocol's window, the median onset and offset of the other sweeps' steps, with size 0 and
    the mean command as holding current; with no other steps to borrow from it has none.
    """
    steps: list[CurrentStep | None] = []
    for k, sweep in enumerate(sweeps):
        found = None
        if sweep.command_pa is not None and sweep.command_pa.size >= 3:
            found = find_current_step(sweep.command_pa, sweep.sampling_rate_hz)
        if found is None and step_s is not None and sweep.command_pa is None:
            size = step_sizes_pa[0] + k * step_sizes_pa[1] if step_sizes_pa else float("nan")
            found = step_from_times(step_s[0], step_s[1], sweep.duration_s, size)
        steps.append(found)
    known = [s for s in steps if s is not None]
    for k, sweep in enumerate(sweeps):
        if steps[k] is not None or sweep.command_pa is None:
            continue
        if known:
            onset = float(np.median([s.onset_s for s in known]))
            offset = float(np.median([s.offset_s for s in known]))
            rate = sweep.sampling_rate_hz
            window = sweep.command_pa[max(0, int(round(onset * rate)) - 1):
                                      int(round(offset * rate)) + 1]
            if not np.isfinite(window).all():
                continue  # a gap in the command may hide this sweep's step: not 0 pA
            steps[k] = CurrentStep(onset, min(offset, sweep.duration_s), 0.0,
                                   float(np.mean(sweep.command_pa)))
        elif step_s is not None:
            steps[k] = step_from_times(step_s[0], step_s[1], sweep.duration_s, 0.0)
    return steps
