"""The spikes of one trace: what is measured of each spike, and measuring them.

:func:`measure_trace` detects and measures; :func:`measure_spikes` measures detected spikes
with the functions of :mod:`~spikemeasure.analysis.spike_features`. Functions take arrays and
a sampling rate (through :class:`~spikemeasure.analysis.detection.SmoothedTrace`) and return
arrays aligned with the detected spikes; nothing here reads files or prints. Times are seconds
from the sweep's first sample. A value that cannot be measured is NaN and the spike's flags
say why.
"""
from __future__ import annotations

from dataclasses import dataclass, field, fields, replace
from typing import Any

import numpy as np

from ..errors import InvalidSettingError
from .detection import (DetectedSpikes, DetectionSettings, SmoothedTrace, detect_spikes,
                        smoothed_trace)
from .spike_features import (fitted_peaks, fitted_troughs, flat_peak_runs, half_widths,
                             interpolated_peaks, search_ends, spike_thresholds, troughs)
from .spike_rates import noise_before, rate_extremes
from .sweeps import CurrentStep

__all__ = ["SpikeMeasurements", "spike_times", "first_in_step", "measure_spikes",
           "measure_spikes_with_positions", "measure_trace", "PIECE_SAMPLES", "FLAG_TEXT",
           "GAP_FLAG", "CLIPPED_RUN_SAMPLES", "TIME_FIELDS"]

#: Samples per piece when a long trace is measured in pieces (about 16 MB of float64 each).
PIECE_SAMPLES = 1 << 21

#: Consecutive samples equal to a spike's largest sample that mark its peak as clipped. A
#: smooth peak sampled finely enough to measure has distinct samples around its maximum;
#: two equal samples can straddle a maximum by chance, three in a row hardly ever.
CLIPPED_RUN_SAMPLES = 3

#: Every flag a spike can carry, with what it means (written to the docs).
FLAG_TEXT = {
    "threshold_not_found": "the threshold criterion was not met before the peak; threshold, "
                           "amplitude, half-width, rise time and AHP are empty",
    "peak_at_trace_edge": "the largest sample is the first or last of the trace, so the peak "
                          "could not be interpolated",
    "no_repolarization": "the voltage does not fall back below half amplitude before the next "
                         "spike or the end of the search span (often: the trace ends first); "
                         "half-width, trough, AHP and fall rate are empty",
    "trough_after_step_end": "the sweep's last spike repolarized only after the current step "
                             "ended, so its trough was searched to the end of the sweep",
    "too_few_samples_across_spike": "fewer samples than `min_samples_across_width` lie above the "
                                    "half-amplitude level: the sampling rate is too low to "
                                    "measure the width, which is left empty",
    "touches_gap": "a window this spike is measured over reaches a stretch of missing (NaN or "
                   "infinite) samples, or the interval before it spans one: the values that "
                   "depend on that window (threshold; peak; half-width; trough, AHP and fall "
                   "rate; interspike interval) are empty, the others are as without the gap",
    "clipped_peak": "the spike's largest sample repeats over at least "
                    f"`CLIPPED_RUN_SAMPLES` ({CLIPPED_RUN_SAMPLES}) consecutive samples, as when "
                    "the amplifier or digitizer range was exceeded: the true peak was higher, so "
                    "peak, amplitude and half-width are too small",
}

#: The flag of a spike with a value left empty because a missing stretch reaches it.
GAP_FLAG = "touches_gap"


def _time() -> Any:
    """A field holding times in s from the sweep's first sample (moved by
    :meth:`SpikeMeasurements.shifted`)."""
    return field(metadata={"is_time": True})


@dataclass(frozen=True)
class SpikeMeasurements:
    """Measurements of the spikes of one sweep, aligned arrays (NaN where not measurable).

    The columns of spikes.csv are declared, with what each field means, in
    :mod:`spikemeasure.columns` (``SPIKE_COLUMNS``); ``half_width_start_s`` and
    ``half_width_end_s``, the crossings that bound ``half_width_ms``, are kept for figures
    (``SPIKE_MARKS``). The fields declared times (``is_time`` in their metadata, listed in
    :data:`TIME_FIELDS`) are seconds from the sweep's first sample.
    """

    threshold_s: np.ndarray = _time()
    threshold_mv: np.ndarray
    peak_s: np.ndarray = _time()
    peak_mv: np.ndarray
    amplitude_mv: np.ndarray
    half_width_ms: np.ndarray
    rise_time_ms: np.ndarray
    max_dvdt_v_per_s: np.ndarray
    min_dvdt_v_per_s: np.ndarray
    trough_s: np.ndarray = _time()
    trough_mv: np.ndarray
    ahp_depth_mv: np.ndarray
    isi_ms: np.ndarray
    half_width_start_s: np.ndarray = _time()
    half_width_end_s: np.ndarray = _time()
    flags: tuple[tuple[str, ...], ...]

    @classmethod
    def empty(cls) -> "SpikeMeasurements":
        """No spikes: every array of length 0."""
        return cls(flags=(), **{f.name: np.zeros(0) for f in fields(cls) if f.name != "flags"})

    def __len__(self) -> int:
        return int(self.peak_s.size)

    def subset(self, keep: np.ndarray) -> "SpikeMeasurements":
        """The spikes where the boolean array `keep` is true."""
        keep = np.asarray(keep, dtype=bool)
        values = {f.name: getattr(self, f.name)[keep] for f in fields(self) if f.name != "flags"}
        return SpikeMeasurements(flags=tuple(fl for fl, k in zip(self.flags, keep) if k),
                                 **values)

    def shifted(self, offset_s: float) -> "SpikeMeasurements":
        """The same spikes with every time field (:data:`TIME_FIELDS`) moved by `offset_s`.

        Parameters
        ----------
        offset_s : float
            Seconds to add: for spikes measured on a part of a trace, the time of the part's
            first sample in the whole trace.

        Returns
        -------
        SpikeMeasurements
            Times from the whole trace's first sample; the other fields (intervals, widths,
            voltages, flags) unchanged.
        """
        offset_s = float(offset_s)
        if not np.isfinite(offset_s):
            raise InvalidSettingError(f"`offset_s` must be a finite number, got {offset_s}")
        return replace(self, **{name: np.asarray(getattr(self, name)) + offset_s
                                for name in TIME_FIELDS})


#: The fields of :class:`SpikeMeasurements` that hold times from the sweep's first sample.
TIME_FIELDS: tuple[str, ...] = tuple(f.name for f in fields(SpikeMeasurements)
                                     if f.metadata.get("is_time", False))


def spike_times(spikes: SpikeMeasurements) -> np.ndarray:
    """The time of each spike in s: its threshold time, or its peak time where the threshold
    is unknown. Spike counts, the step a spike falls in and intervals across gaps use it."""
    return np.where(np.isfinite(spikes.threshold_s), spikes.threshold_s, spikes.peak_s)


def first_in_step(spikes: SpikeMeasurements, step: CurrentStep | None) -> int | None:
    """Index of the first spike whose time (:func:`spike_times`) lies in the step
    (:meth:`~spikemeasure.analysis.sweeps.CurrentStep.holds`); None without a step or such a
    spike. The rheobase_* values of cells.csv are those of this spike of the rheobase sweep."""
    if step is None or len(spikes) == 0:
        return None
    inside = np.flatnonzero(step.holds(spike_times(spikes)))
    return int(inside[0]) if inside.size else None


def measure_spikes(trace: SmoothedTrace, detected: DetectedSpikes,
                   settings: DetectionSettings = DetectionSettings(),
                   step: CurrentStep | None = None) -> SpikeMeasurements:
    """Measure every detected spike of one sweep.

    Parameters
    ----------
    trace : SmoothedTrace
        From :func:`spikemeasure.analysis.detection.smoothed_trace`.
    detected : DetectedSpikes
        From :func:`spikemeasure.analysis.detection.detect_spikes`.
    settings : DetectionSettings, optional
    step : CurrentStep, optional
        The sweep's current step; bounds the last spike's trough search.

    Returns
    -------
    SpikeMeasurements

    Notes
    -----
    Definitions, per spike (times in s from the first sample; ``docs/measurements.md`` lists
    them with their columns):

    - threshold: see :func:`spike_thresholds`.
    - peak: :func:`fitted_peaks` (:func:`interpolated_peaks` where the spike is too narrow
      for a fit); amplitude = peak - threshold.
    - half-width: :func:`half_widths`; rise time = peak time - threshold time.
    - max dV/dt: the largest dV/dt from threshold to peak; min dV/dt: the most negative from
      peak to trough (:func:`rate_extremes`, with the shorter ``rate_smoothing_ms`` window).
    - trough: the smoothed minimum of :func:`troughs`, or where the smoothing leaves too
      much noise :func:`fitted_troughs` around it, searched up to :func:`search_ends`
      (to the end of the sweep instead when the last spike repolarizes only after the step
      ends); AHP depth = threshold - trough.
    - ISI: threshold time minus the previous spike's threshold time.
    """
    return measure_spikes_with_positions(trace, detected, settings, step)[0]


def measure_spikes_with_positions(trace: SmoothedTrace, detected: DetectedSpikes,
                                  settings: DetectionSettings, step: CurrentStep | None
                                  ) -> tuple[SpikeMeasurements, dict]:
    """:func:`measure_spikes`, and the sample positions its searches used (for the test of
    :func:`~spikemeasure.analysis.spikes_in_parts.measure_around_gaps` whether a search reached
    a gap)."""
    rate = trace.sampling_rate_hz
    n = len(detected)
    v = trace.voltage_mv
    thr_i, thr_mv = spike_thresholds(trace, detected, settings)
    peak_pos, peak_mv, at_edge = interpolated_peaks(v, detected.peak_sample)
    noise = noise_before(v, thr_i)
    fit_pos, fit_mv = fitted_peaks(v, detected.peak_sample, thr_mv, noise)
    fitted = np.isfinite(fit_mv)
    peak_pos, peak_mv = np.where(fitted, fit_pos, peak_pos), np.where(fitted, fit_mv, peak_mv)
    # the step end bounds only the trough of a sweep's last spike, not its repolarization
    reach = settings.search_window_samples(rate)
    width_ends = search_ends(v.size, rate, thr_i, detected.onset_index, None,
                             detected.peak_sample, reach)
    width, up_i, down_i, above = half_widths(v, rate, thr_i, thr_mv, detected.peak_sample,
                                             peak_mv, width_ends)
    trough_ends = search_ends(v.size, rate, thr_i, detected.onset_index, step,
                              detected.peak_sample, reach)
    late = np.isfinite(down_i) & (down_i >= trough_ends - 1)
    trough_ends = np.where(late, width_ends, trough_ends)
    # the last spike's search ends at the step's end, between samples
    step_end = np.full(n, np.nan)
    if step is not None and n and not late[-1]:
        offset_i = step.offset_s * rate
        if trough_ends[-1] == min(v.size, int(round(offset_i))):
            step_end[-1] = offset_i
    trough_i, trough_mv = troughs(trace.smooth_mv, detected.peak_sample, trough_ends, step_end)
    fit_i, fit_mv = fitted_troughs(v, rate, trough_i, detected.peak_sample, trough_ends,
                                   noise, trace.window)
    fitted = np.isfinite(fit_mv)
    trough_i, trough_mv = np.where(fitted, fit_i, trough_i), np.where(fitted, fit_mv, trough_mv)
    repolarized = np.isfinite(down_i)
    trough_i = np.where(repolarized, trough_i, np.nan)
    trough_mv = np.where(repolarized, trough_mv, np.nan)
    coarse = repolarized & (above < settings.min_samples_across_width)
    width = np.where(coarse, np.nan, width)
    measured_width = np.isfinite(width)
    max_rate, min_rate = rate_extremes(v, rate, thr_i, peak_pos, trough_i,
                                       settings.rate_smoothing_ms, noise)
    clipped = flat_peak_runs(v, detected.peak_sample) >= CLIPPED_RUN_SAMPLES
    thr_s = thr_i / rate
    isi = np.full(n, np.nan)
    if n > 1:
        isi[1:] = np.diff(thr_s) * 1e3
    flags = []
    for k in range(n):
        f = []
        if not np.isfinite(thr_i[k]):
            f.append("threshold_not_found")
        if at_edge[k]:
            f.append("peak_at_trace_edge")
        if np.isfinite(thr_i[k]) and not repolarized[k]:
            f.append("no_repolarization")
        if late[k]:
            f.append("trough_after_step_end")
        if coarse[k]:
            f.append("too_few_samples_across_spike")
        if clipped[k]:
            f.append("clipped_peak")
        flags.append(tuple(f))
    spikes = SpikeMeasurements(
        threshold_s=thr_s, threshold_mv=thr_mv, peak_s=peak_pos / rate, peak_mv=peak_mv,
        amplitude_mv=peak_mv - thr_mv, half_width_ms=width,
        rise_time_ms=(peak_pos - thr_i) / rate * 1e3,
        max_dvdt_v_per_s=max_rate, min_dvdt_v_per_s=min_rate,
        trough_s=trough_i / rate, trough_mv=trough_mv, ahp_depth_mv=thr_mv - trough_mv,
        isi_ms=isi, half_width_start_s=np.where(measured_width, up_i / rate, np.nan),
        half_width_end_s=np.where(measured_width, down_i / rate, np.nan), flags=tuple(flags))
    return spikes, {"down": down_i, "width_ends": width_ends, "trough_ends": trough_ends}


def measure_trace(voltage_mv: np.ndarray, sampling_rate_hz: float,
                  settings: DetectionSettings = DetectionSettings(),
                  step: CurrentStep | None = None) -> SpikeMeasurements:
    """Detect and measure the spikes of one voltage trace: the one-call public entry point.

    Parameters
    ----------
    voltage_mv : ndarray
        Membrane voltage in mV, 1-D and finite.
    sampling_rate_hz : float
        Samples per second.
    settings : DetectionSettings, optional
    step : CurrentStep, optional

    Returns
    -------
    SpikeMeasurements
    """
    v = np.asarray(voltage_mv, dtype=float)
    if v.ndim != 1:
        raise InvalidSettingError("`voltage_mv` must be a 1-D array")
    if not np.all(np.isfinite(v)):
        raise InvalidSettingError("`voltage_mv` contains NaN or infinite samples; "
                                  "measure_around_gaps measures a trace with gaps")
    trace = smoothed_trace(v, sampling_rate_hz, settings.smoothing_ms,
                           second_derivative=settings.needs_second_derivative)
    return measure_spikes(trace, detect_spikes(trace, settings), settings, step)
