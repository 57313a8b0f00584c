"""The current step each sweep delivers, and whether a sweep can be measured at all.

The sweeps themselves (:class:`~spikemeasure.io.sweep.Sweep` and
:class:`~spikemeasure.io.sweep.LazyTrace`) are the data model of :mod:`spikemeasure.io`, which
builds them from files; nothing here knows about file formats.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..errors import InvalidSettingError, UnmeasurableDataError, UnreadableInputError
from ..io.sweep import LazyTrace, Sweep
from .epochs import (EPOCH_MEDIAN_SAMPLES, Stimulus, find_epochs, main_stimulus,
                     sharing_index_sums)

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
#: before its step is found (the epochs' running median).
COMMAND_MEDIAN_SAMPLES = EPOCH_MEDIAN_SAMPLES


@dataclass(frozen=True)
class CurrentStep:
    """The main stimulus of a sweep: a rectangular current step, a ramp, or another shape.

    Attributes
    ----------
    onset_s, offset_s : float
        Stimulus start and end, seconds from the sweep's first sample (offset is the first
        sample after it); a ramp's start and end.
    size_pa : float
        Step current relative to the holding current, in pA; NaN when unknown (the step was
        given as times on the command line and the file has no command channel). A ramp's
        fitted current at its end (offset_s) relative to holding; for another shape, the mean
        command over it relative to holding.
    holding_pa : float
        Current at holding before the stimulus (never across a test pulse), in pA; NaN when
        unknown.
    shape : str
        ``"step"``, ``"ramp"`` or ``"other"`` (see
        :func:`~spikemeasure.analysis.epochs.main_stimulus`).
    test_pulse_pa : float
        Size of a short pulse before the stimulus, relative to holding; NaN when none.
    ramp_rate_pa_per_s : float
        A ramp's slope; NaN for other shapes.
    baseline_start_s : float
        Start of the quiet stretch before onset that the baseline may use (the end of a test
        pulse, or 0 when the sweep is at holding from its start).
    test_pulse_start_s, test_pulse_end_s : float
        The test pulse's first sample and the first sample after it, s; NaN when none.
    """

    onset_s: float
    offset_s: float
    size_pa: float = float("nan")
    holding_pa: float = float("nan")
    shape: str = "step"
    test_pulse_pa: float = float("nan")
    ramp_rate_pa_per_s: float = float("nan")
    baseline_start_s: float = 0.0
    test_pulse_start_s: float = float("nan")
    test_pulse_end_s: float = float("nan")

    @property
    def duration_s(self) -> float:
        return self.offset_s - self.onset_s

    def holds(self, times_s: np.ndarray) -> np.ndarray:
        """Whether each time lies in the step, [onset_s, offset_s): the rule that puts a
        spike in the step, by its time (:func:`~spikemeasure.analysis.spikes.spike_times`)."""
        t = np.asarray(times_s, dtype=float)
        return (t >= self.onset_s) & (t < self.offset_s)

    def current_at(self, times_s) -> np.ndarray:
        """The command current (holding included) at each time inside the stimulus, in pA.

        A step's holding_pa + size_pa; on a ramp, its fitted line; NaN outside the stimulus,
        for another shape, and when the holding current is unknown.
        """
        t = np.asarray(times_s, dtype=float)
        if self.shape == "step":
            level = np.full(t.shape, self.holding_pa + self.size_pa)
        elif self.shape == "ramp":
            level = (self.holding_pa + self.size_pa
                     - self.ramp_rate_pa_per_s * (self.offset_s - t))
        else:
            level = np.full(t.shape, np.nan)
        return np.where(self.holds(t), level, np.nan)


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
    """Find the main stimulus (a step, a ramp or another shape) in a command-current trace.

    Parameters
    ----------
    command_pa : ndarray
        Command current in pA, 1-D; NaN or infinite where samples are missing.
    sampling_rate_hz : float
        Samples per second.
    min_step_pa : float, optional
        Departures from the holding current smaller than this (pA) are not a stimulus (the
        smallest tolerance of :func:`~spikemeasure.analysis.epochs.find_epochs`).

    Returns
    -------
    CurrentStep or None
        None when the command never leaves the holding level.

    Notes
    -----
    The command is cut into levels and ramps
    (:func:`~spikemeasure.analysis.epochs.find_epochs`) and the main stimulus chosen among
    them (:func:`~spikemeasure.analysis.epochs.main_stimulus`): the longest stretch away from
    holding, so a short test pulse before a longer step is not taken for the step. For a
    rectangular step, onset is the time of the first sample of the step, offset the time of
    the first sample after it, the holding current the mean command before it (outside any
    test pulse) and the size the mean over the step minus the holding current.
    """
    cmd = np.asarray(command_pa, dtype=float)
    if cmd.ndim != 1 or cmd.size < 3:
        raise InvalidSettingError("`command_pa` must be a 1-D array of at least 3 samples")
    if not (np.isfinite(sampling_rate_hz) and sampling_rate_hz > 0):
        raise InvalidSettingError(
            f"`sampling_rate_hz` must be a positive, finite number (got {sampling_rate_hz})")
    found = main_stimulus(cmd, sampling_rate_hz, epochs=find_epochs(
        cmd, sampling_rate_hz, min_level_change_pa=min_step_pa))
    return _step_of(found)


def _step_of(found: Stimulus) -> CurrentStep | None:
    """A sweep's CurrentStep from its main stimulus (None when there is none)."""
    if found.shape == "none":
        return None
    return CurrentStep(onset_s=found.onset_s, offset_s=found.offset_s, size_pa=found.size_pa,
                       holding_pa=found.holding_pa, shape=found.shape,
                       test_pulse_pa=found.test_pulse_pa,
                       ramp_rate_pa_per_s=found.ramp_rate_pa_per_s,
                       baseline_start_s=found.baseline_start_s,
                       test_pulse_start_s=found.test_pulse_s[0],
                       test_pulse_end_s=found.test_pulse_s[1])


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
    """The main stimulus of every sweep of a recording.

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
    The commands are read one at a time (a command waiting in the file,
    :class:`~spikemeasure.io.sweep.StoredTrace`, is read and dropped), keeping only each
    sweep's stimulus. Each command is cut into epochs and its main stimulus chosen
    (:func:`~spikemeasure.analysis.epochs.main_stimulus`). A sweep whose only stimulus lies
    where other sweeps have their test pulse (within two samples) has no stimulus of its own
    but that test pulse. A sweep without a stimulus of its own (a 0 pA sweep of a step
    series) gets the protocol's window, the median onset and offset of the other sweeps'
    steps, with size 0, its own test pulse and quiet stretch, and as holding current the mean
    command at holding (outside any test pulse); with no other steps to borrow from it has
    none.
    """
    steps: list[CurrentStep | None] = []
    stimuli: list[Stimulus | None] = []
    with sharing_index_sums():  # the epoch search's sums formed once for the recording
        for k, sweep in enumerate(sweeps):
            found = stimulus = None
            if sweep.command_pa is not None and sweep.command_pa.size >= 3:
                cmd = _command_of(sweep)
                if cmd is not None:
                    stimulus = main_stimulus(cmd, sweep.sampling_rate_hz)
                    found = _step_of(stimulus)
                del cmd  # one command in memory at a time: only its stimulus is kept
            if found is None and step_s is not None and sweep.command_pa is None:
                size = (step_sizes_pa[0] + k * step_sizes_pa[1] if step_sizes_pa
                        else float("nan"))
                found = step_from_times(step_s[0], step_s[1], sweep.duration_s, size)
            steps.append(found)
            stimuli.append(stimulus)
    _drop_lone_test_pulses(sweeps, steps, stimuli)
    known = [s for s in steps if s is not None and s.shape == "step"]
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
            steps[k] = _zero_step(sweep, stimuli[k], onset, offset)
        elif step_s is not None:
            steps[k] = step_from_times(step_s[0], step_s[1], sweep.duration_s, 0.0)
    return steps


def _command_of(sweep: Sweep) -> np.ndarray | None:
    """A sweep's command as a float64 array, read now when it waits in the file; None when
    it cannot be read (the sweep's own measurement then says why)."""
    try:
        return np.asarray(sweep.command_pa, dtype=float)
    except UnreadableInputError:
        return None


def _drop_lone_test_pulses(sweeps: list[Sweep], steps: list[CurrentStep | None],
                           stimuli: list[Stimulus | None]) -> None:
    """Empty the step of a sweep whose only stimulus is where the others have a test pulse."""
    pulses = [s.test_pulse_s for s in stimuli if s is not None and np.isfinite(s.test_pulse_pa)]
    for k, stimulus in enumerate(stimuli):
        if stimulus is None or stimulus.shape != "step" or np.isfinite(stimulus.test_pulse_pa):
            continue
        near = 2.0 / sweeps[k].sampling_rate_hz
        if any(abs(stimulus.onset_s - a) <= near and abs(stimulus.offset_s - b) <= near
               for a, b in pulses):
            stimuli[k] = replace(stimulus, shape="none", test_pulse_pa=stimulus.size_pa,
                                 test_pulse_s=(stimulus.onset_s, stimulus.offset_s))
            steps[k] = None


def _zero_step(sweep: Sweep, stimulus: Stimulus | None, onset_s: float,
               offset_s: float) -> CurrentStep:
    """The 0 pA step of a sweep with no stimulus of its own, in the protocol's window."""
    cmd = np.asarray(sweep.command_pa, dtype=float)
    rate = sweep.sampling_rate_hz
    holding, pulse, quiet = float(np.mean(cmd)), float("nan"), 0.0
    pulse_s = (float("nan"), float("nan"))
    if stimulus is not None and np.isfinite(stimulus.test_pulse_pa):
        a, b = (int(round(x * rate)) for x in stimulus.test_pulse_s)
        outside = np.concatenate([cmd[:a], cmd[b:]])
        holding = float(np.mean(outside))
        pulse = float(np.mean(cmd[a:b])) - holding
        quiet = stimulus.test_pulse_s[1] if stimulus.test_pulse_s[1] <= onset_s else 0.0
        pulse_s = tuple(stimulus.test_pulse_s)
    return CurrentStep(onset_s, min(offset_s, sweep.duration_s), 0.0, holding,
                       test_pulse_pa=pulse, baseline_start_s=quiet,
                       test_pulse_start_s=pulse_s[0], test_pulse_end_s=pulse_s[1])
