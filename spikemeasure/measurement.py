"""Per-spike measurements: threshold, peak, amplitude, widths, rates and troughs.

Functions take arrays and a sampling rate (through :class:`~spikemeasure.detection.SmoothedTrace`)
and return arrays aligned with the detected spikes; nothing here reads files or prints. Times
are seconds from the sweep's first sample. A value that cannot be measured is NaN and the
spike's flags say why.
"""
from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
from scipy.interpolate import CubicSpline

from .detection import (DetectedSpikes, DetectionSettings, SmoothedTrace, detect_spikes,
                        smoothed_trace)
from .errors import InvalidSettingError
from .sweeps import CurrentStep

__all__ = ["SpikeMeasurements", "spike_thresholds", "interpolated_peaks", "half_widths",
           "troughs", "extreme_rates", "search_ends", "measure_spikes", "measure_trace",
           "FLAG_TEXT"]

#: Every flag a spike can carry, with what it means (written to the docs).
FLAG_TEXT = {
    "threshold_not_found": "the threshold criterion was not met before the peak; threshold, "
                           "amplitude, half-width, rise time and AHP are empty",
    "peak_at_trace_edge": "the largest sample is the first or last of the trace, so the peak "
                          "could not be interpolated",
    "no_repolarization": "the voltage does not fall back below half amplitude before the next "
                         "spike or the end of the search span (often: the trace ends first); "
                         "half-width, trough, AHP and fall rate are empty",
    "too_few_samples_across_spike": "fewer samples than `min_samples_across_width` lie above the "
                                    "half-amplitude level: the sampling rate is too low to "
                                    "measure the width, which is left empty",
}


@dataclass(frozen=True)
class SpikeMeasurements:
    """Measurements of the spikes of one sweep, aligned arrays (NaN where not measurable)."""

    threshold_s: np.ndarray
    threshold_mv: np.ndarray
    peak_s: np.ndarray
    peak_mv: np.ndarray
    amplitude_mv: np.ndarray
    half_width_ms: np.ndarray
    rise_time_ms: np.ndarray
    max_dvdt_v_per_s: np.ndarray
    min_dvdt_v_per_s: np.ndarray
    trough_s: np.ndarray
    trough_mv: np.ndarray
    ahp_depth_mv: np.ndarray
    isi_ms: np.ndarray
    flags: tuple[tuple[str, ...], ...]

    def __len__(self) -> int:
        return int(self.peak_s.size)

    def as_columns(self) -> dict[str, np.ndarray | list]:
        out: dict[str, np.ndarray | list] = {}
        for f in fields(self):
            out[f.name] = getattr(self, f.name)
        out["flags"] = [";".join(fl) for fl in self.flags]
        return out


def _interp(x: np.ndarray, frac_index: float) -> float:
    """Linear interpolation of x at a fractional sample index."""
    i = int(np.floor(frac_index))
    if i >= x.size - 1:
        return float(x[-1])
    w = frac_index - i
    return float(x[i] + w * (x[i + 1] - x[i]))


def _vertex(x: np.ndarray, i: int) -> tuple[float, float]:
    """Sub-sample extremum of x near sample i: the vertex of the parabola through i-1, i, i+1.

    Returns (fractional index, value); falls back to the sample itself at the edges or when
    the three points are collinear.
    """
    if i <= 0 or i >= x.size - 1:
        return float(i), float(x[i])
    a, b, c = float(x[i - 1]), float(x[i]), float(x[i + 1])
    curvature = a - 2.0 * b + c
    if curvature == 0.0:
        return float(i), b
    delta = 0.5 * (a - c) / curvature
    delta = min(0.5, max(-0.5, delta))
    return i + delta, b - 0.25 * (a - c) * delta


_SPLINE_HALF = 3
_SPLINE_STEPS = 400
_spline_weights_cache: list[np.ndarray] = []


def _spline_weights() -> np.ndarray:
    """Weights W (steps+1, 7): W @ y is the not-a-knot cubic spline through samples y[-3..3]
    (unit spacing) evaluated on a fine grid from -1 to +1 sample.

    The spline is linear in the samples, so the weights are the splines of the unit vectors.
    """
    if not _spline_weights_cache:
        nodes = np.arange(-_SPLINE_HALF, _SPLINE_HALF + 1, dtype=float)
        grid = np.linspace(-1.0, 1.0, _SPLINE_STEPS + 1)
        eye = np.eye(nodes.size)
        _spline_weights_cache.append(
            np.stack([CubicSpline(nodes, eye[k])(grid) for k in range(nodes.size)], axis=1))
    return _spline_weights_cache[0]


def _spline_peaks(x: np.ndarray, index: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Maxima near samples `index` of the cubic splines through each index +- 3 samples.

    Vectorized over spikes: each spline is evaluated on a grid of 1/200 sample within one
    sample of its index, and the best grid point is refined with a parabola. Indices too close
    to an end of `x` fall back to the 3-point parabola.
    """
    index = np.asarray(index, dtype=np.int64)
    frac = index.astype(float)
    value = x[index].astype(float) if index.size else np.zeros(0)
    inner = (index >= _SPLINE_HALF) & (index < x.size - _SPLINE_HALF)
    for k in np.flatnonzero(~inner):
        frac[k], value[k] = _vertex(x, int(index[k]))
    if inner.any():
        offsets = np.arange(-_SPLINE_HALF, _SPLINE_HALF + 1)
        samples = x[index[inner, None] + offsets]            # (n, 7)
        curve = samples @ _spline_weights().T                # (n, steps + 1)
        best = np.clip(np.argmax(curve, axis=1), 1, _SPLINE_STEPS - 1)
        rows = np.arange(best.size)
        a, b, c = curve[rows, best - 1], curve[rows, best], curve[rows, best + 1]
        curvature = a - 2 * b + c
        with np.errstate(divide="ignore", invalid="ignore"):
            delta = np.where(curvature < 0, 0.5 * (a - c) / curvature, 0.0)
        delta = np.clip(delta, -0.5, 0.5)
        step = 2.0 / _SPLINE_STEPS
        frac[inner] = index[inner] - 1.0 + (best + delta) * step
        value[inner] = b - 0.25 * (a - c) * delta
    return frac, value


def _last_upward_crossing(x: np.ndarray, level: float, lo: int, hi: int) -> float:
    """Fractional index of the last upward crossing of `level` by x in [lo, hi], or NaN.

    The crossing lies between samples j-1 and j with x[j-1] < level <= x[j].
    """
    lo = max(lo, 0)
    if hi <= lo:
        return float("nan")
    below = np.flatnonzero(x[lo:hi] < level)
    if below.size == 0:
        return float("nan")
    j0 = lo + int(below[-1])
    j = j0 + 1
    if j > hi or j >= x.size or x[j] < level:
        return float("nan")
    return j0 + (level - x[j0]) / (x[j] - x[j0])


def spike_thresholds(trace: SmoothedTrace, detected: DetectedSpikes,
                     settings: DetectionSettings) -> tuple[np.ndarray, np.ndarray]:
    """Threshold of each spike as a fractional sample index and a voltage.

    Parameters
    ----------
    trace : SmoothedTrace
    detected : DetectedSpikes
    settings : DetectionSettings
        ``threshold_method`` chooses the definition; ``onset_rate_v_per_s`` and
        ``threshold_fraction`` are its numbers.

    Returns
    -------
    index : ndarray
        Fractional sample index of threshold (NaN when not found).
    voltage_mv : ndarray
        Smoothed voltage at that index, linearly interpolated (NaN when not found).

    Notes
    -----
    ``onset_rate`` (default)
        The last upward crossing of ``onset_rate_v_per_s`` by dV/dt before the peak, linearly
        interpolated between the two samples around it.
    ``max_rate_fraction``
        The last upward crossing, before the time of the spike's maximum dV/dt, of
        ``threshold_fraction`` times that maximum [1]_.
    ``second_derivative_peak``
        The time of the largest d2V/dt2 from 1 ms before the onset crossing to the time of
        maximum dV/dt, refined to sub-sample precision with a parabola through the three
        samples around it [1]_.
    Searches never reach back past the previous spike's peak. The voltage is read from the
    zero-phase smoothed trace, which removes most recording noise without shifting time.

    References
    ----------
    .. [1] M. Sekerli, C. A. Del Negro, R. H. Lee and R. J. Butera, "Estimating action potential
       thresholds from neuronal time-series: new metrics and evaluation of methodologies",
       IEEE Trans. Biomed. Eng. 51(9):1665-1672, 2004.
    """
    dvdt, d2 = trace.dvdt_v_per_s, trace.d2vdt2_v_per_s2
    if settings.needs_second_derivative and d2 is None:
        raise InvalidSettingError("the second_derivative_peak threshold needs a trace made with "
                                  "smoothed_trace(..., second_derivative=True)")
    n_spikes = len(detected)
    index = np.full(n_spikes, np.nan)
    one_ms = max(1, int(round(1e-3 * trace.sampling_rate_hz)))
    for k, (onset, peak) in enumerate(zip(detected.onset_index.tolist(),
                                          detected.peak_index.tolist())):
        floor = int(detected.peak_index[k - 1]) + 1 if k > 0 else 0
        method = settings.threshold_method
        if method == "onset_rate":
            a, b = dvdt[onset - 1], dvdt[onset]
            level = settings.onset_rate_v_per_s
            index[k] = (onset - 1) + (level - a) / (b - a) if onset >= 1 and b != a else onset
            continue
        top = onset + int(np.argmax(dvdt[onset:peak + 1]))
        if method == "max_rate_fraction":
            level = settings.threshold_fraction * dvdt[top]
            index[k] = _last_upward_crossing(dvdt, level, floor, top)
        else:  # second_derivative_peak
            lo = max(floor, onset - one_ms)
            j = lo + int(np.argmax(d2[lo:top + 1]))
            index[k] = _vertex(d2, j)[0]
    voltage = np.array([_interp(trace.smooth_mv, i) if np.isfinite(i) else np.nan for i in index])
    return index, voltage


def interpolated_peaks(voltage_mv: np.ndarray, peak_index: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Peak of each spike between samples.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    peak_index : ndarray of int
        Index of each spike's largest sample.

    Returns
    -------
    index : ndarray
        Fractional sample index of the peak.
    value_mv : ndarray
        Peak voltage.
    at_edge : ndarray of bool
        True where the largest sample is the first or last of the trace (not interpolated).

    Notes
    -----
    The peak is the maximum, within one sample of the largest sample, of the cubic spline
    (not-a-knot) through the largest sample and three samples either side; it is found from the
    roots of the spline's derivative. A narrow spike sampled at 10 kHz may peak half a sample
    away from its largest sample and several mV above it: for a Gaussian spike of SD 0.15 ms at
    10 kHz the largest sample is up to 5.4 mV low, a 3-point parabola 1.2 mV, this spline
    0.3 mV.
    """
    index, value = _spline_peaks(voltage_mv, peak_index)
    at_edge = (peak_index <= 0) | (peak_index >= voltage_mv.size - 1)
    return index, value, at_edge


def half_widths(voltage_mv: np.ndarray, sampling_rate_hz: float, threshold_index: np.ndarray,
                threshold_mv: np.ndarray, peak_index: np.ndarray, peak_mv: np.ndarray,
                end_index: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Width of each spike at half its amplitude above threshold.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    sampling_rate_hz : float
    threshold_index, threshold_mv : ndarray
        Threshold of each spike (fractional index, mV).
    peak_index : ndarray of int
        Largest sample of each spike.
    peak_mv : ndarray
        Interpolated peak voltage.
    end_index : ndarray of int
        Last sample (exclusive) the downward crossing may be searched in.

    Returns
    -------
    width_ms : ndarray
        Half-width in ms (NaN when a crossing is missing).
    up_index, down_index : ndarray
        Fractional indices of the upward and downward crossings.
    samples_above : ndarray of int
        How many samples lie at or above the half level between the crossings.

    Notes
    -----
    The level is ``threshold_mv + (peak_mv - threshold_mv) / 2``. The upward crossing is the
    last one before the peak, the downward crossing the first one after it; each is linearly
    interpolated between the samples either side, as ``scipy.signal.peak_widths`` does.
    """
    n = peak_index.size
    width = np.full(n, np.nan)
    up = np.full(n, np.nan)
    down = np.full(n, np.nan)
    above = np.zeros(n, dtype=np.int64)
    v = voltage_mv
    for k in range(n):
        if not (np.isfinite(threshold_mv[k]) and np.isfinite(threshold_index[k])):
            continue
        level = threshold_mv[k] + 0.5 * (peak_mv[k] - threshold_mv[k])
        p = int(peak_index[k])
        up[k] = _last_upward_crossing(v, level, int(np.floor(threshold_index[k])), p)
        after = np.flatnonzero(v[p:int(end_index[k])] < level)
        if after.size:
            j = p + int(after[0])
            down[k] = (j - 1) + (v[j - 1] - level) / (v[j - 1] - v[j])
        if np.isfinite(up[k]) and np.isfinite(down[k]):
            width[k] = (down[k] - up[k]) / sampling_rate_hz * 1e3
            above[k] = int(np.floor(down[k]) - np.ceil(up[k]) + 1)
    return width, up, down, above


def troughs(smooth_mv: np.ndarray, peak_index: np.ndarray, end_index: np.ndarray
            ) -> tuple[np.ndarray, np.ndarray]:
    """Minimum of the smoothed voltage from each peak to its search end.

    Returns (fractional index, value in mV); the extremum is refined with a parabola when it
    lies inside the span. The smoothed trace is used so that recording noise does not pull the
    minimum down.
    """
    n = peak_index.size
    index = np.full(n, np.nan)
    value = np.full(n, np.nan)
    for k in range(n):
        p, e = int(peak_index[k]), int(end_index[k])
        if e <= p + 1:
            continue
        j = p + int(np.argmin(smooth_mv[p:e]))
        if p < j < e - 1:
            index[k], value[k] = _vertex(smooth_mv, j)
        else:
            index[k], value[k] = float(j), float(smooth_mv[j])
    return index, value


def extreme_rates(dvdt: np.ndarray, start_index: np.ndarray, stop_index: np.ndarray,
                  largest: bool) -> np.ndarray:
    """Largest (or most negative) dV/dt in each span [start, stop], refined with a parabola.

    NaN where a bound is NaN or the span is empty.
    """
    n = start_index.size
    out = np.full(n, np.nan)
    sign = 1.0 if largest else -1.0
    for k in range(n):
        if not (np.isfinite(start_index[k]) and np.isfinite(stop_index[k])):
            continue
        a, b = int(np.floor(start_index[k])), int(np.ceil(stop_index[k]))
        if b < a:
            continue
        j = a + int(np.argmax(sign * dvdt[a:b + 1]))
        if a < j < b:
            out[k] = sign * _vertex(sign * dvdt[j - 1:j + 2], 1)[1]
        else:
            out[k] = dvdt[j]
    return out


def search_ends(n_samples: int, sampling_rate_hz: float, threshold_index: np.ndarray,
                onset_index: np.ndarray, step: CurrentStep | None) -> np.ndarray:
    """Where each spike's trough search stops (exclusive sample index).

    Notes
    -----
    Before the next spike's threshold (its onset crossing when that threshold is unknown);
    for the last spike, at the end of the current step when the spike lies inside it, else
    at the end of the sweep.
    """
    n = onset_index.size
    ends = np.empty(n, dtype=np.int64)
    for k in range(n - 1):
        nxt = threshold_index[k + 1]
        ends[k] = int(np.floor(nxt)) + 1 if np.isfinite(nxt) else int(onset_index[k + 1])
    if n:
        ends[-1] = n_samples
        t_last = threshold_index[-1] if np.isfinite(threshold_index[-1]) else onset_index[-1]
        if step is not None:
            onset_i = step.onset_s * sampling_rate_hz
            offset_i = step.offset_s * sampling_rate_hz
            if onset_i <= t_last < offset_i:
                ends[-1] = min(n_samples, int(round(offset_i)))
    return ends


def measure_spikes(trace: SmoothedTrace, detected: DetectedSpikes,
                   settings: DetectionSettings = DetectionSettings(),
                   step: CurrentStep | None = None) -> SpikeMeasurements:
    """Measure every detected spike of one sweep.

    Parameters
    ----------
    trace : SmoothedTrace
        From :func:`spikemeasure.detection.smoothed_trace`.
    detected : DetectedSpikes
        From :func:`spikemeasure.detection.detect_spikes`.
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
    - peak: :func:`interpolated_peaks`; amplitude = peak - threshold.
    - half-width: :func:`half_widths`; rise time = peak time - threshold time.
    - max dV/dt: the largest smoothed dV/dt from threshold to peak; min dV/dt: the most negative
      from peak to trough (each refined between samples with a parabola).
    - trough: :func:`troughs`, searched up to :func:`search_ends`; AHP depth = threshold - trough.
    - ISI: threshold time minus the previous spike's threshold time.
    """
    rate = trace.sampling_rate_hz
    n = len(detected)
    v = trace.voltage_mv
    thr_i, thr_mv = spike_thresholds(trace, detected, settings)
    peak_i, peak_mv, at_edge = interpolated_peaks(v, detected.peak_index)
    ends = search_ends(v.size, rate, thr_i, detected.onset_index, step)
    width, _, down_i, above = half_widths(v, rate, thr_i, thr_mv, detected.peak_index, peak_mv,
                                          ends)
    trough_i, trough_mv = troughs(trace.smooth_mv, detected.peak_index, ends)
    repolarized = np.isfinite(down_i)
    trough_i = np.where(repolarized, trough_i, np.nan)
    trough_mv = np.where(repolarized, trough_mv, np.nan)
    coarse = repolarized & (above < settings.min_samples_across_width)
    width = np.where(coarse, np.nan, width)
    max_rate = extreme_rates(trace.dvdt_v_per_s, thr_i, peak_i, largest=True)
    min_rate = extreme_rates(trace.dvdt_v_per_s, peak_i, trough_i, largest=False)
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
        if coarse[k]:
            f.append("too_few_samples_across_spike")
        flags.append(tuple(f))
    return SpikeMeasurements(
        threshold_s=thr_s, threshold_mv=thr_mv, peak_s=peak_i / rate, peak_mv=peak_mv,
        amplitude_mv=peak_mv - thr_mv, half_width_ms=width,
        rise_time_ms=(peak_i - thr_i) / rate * 1e3,
        max_dvdt_v_per_s=max_rate, min_dvdt_v_per_s=min_rate,
        trough_s=trough_i / rate, trough_mv=trough_mv, ahp_depth_mv=thr_mv - trough_mv,
        isi_ms=isi, flags=tuple(flags))


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
        raise InvalidSettingError("`voltage_mv` contains NaN or infinite samples")
    trace = smoothed_trace(v, sampling_rate_hz, settings.smoothing_ms,
                           second_derivative=settings.needs_second_derivative)
    return measure_spikes(trace, detect_spikes(trace, settings), settings, step)
