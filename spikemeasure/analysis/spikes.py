"""Per-spike measurements: threshold, peak, amplitude, widths, rates and troughs.

Functions take arrays and a sampling rate (through :class:`~spikemeasure.detection.SmoothedTrace`)
and return arrays aligned with the detected spikes; nothing here reads files or prints. Times
are seconds from the sweep's first sample. A value that cannot be measured is NaN and the
spike's flags say why.
"""
from __future__ import annotations

from dataclasses import dataclass, fields, replace
from typing import Callable

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.signal import savgol_coeffs

from .detection import (SMOOTHING_POLYORDER, DetectedSpikes, DetectionSettings, SmoothedTrace,
                        detect_spikes, smoothed_trace, smoothing_window_samples)
from ..errors import InvalidSettingError
from .sweeps import CurrentStep

__all__ = ["SpikeMeasurements", "spike_thresholds", "interpolated_peaks", "half_widths",
           "troughs", "rate_extremes", "search_ends", "measure_spikes", "measure_trace",
           "measure_in_pieces", "measure_around_gaps", "measure_in_pieces_with_gaps", "piece_margin_samples", "PIECE_SAMPLES",
           "FLAG_TEXT", "GAP_FLAG",
           "CLIPPED_RUN_SAMPLES", "flat_peak_runs"]

#: Samples per piece when a long trace is measured in pieces (about 16 MB of float64 each).
PIECE_SAMPLES = 1 << 21

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
                    "`CLIPPED_RUN_SAMPLES` (3) consecutive samples, as when the amplifier or "
                    "digitizer range was exceeded: the true peak was higher, so peak, amplitude "
                    "and half-width are too small",
}

#: The flag of a spike with a value left empty because a missing stretch reaches it.
GAP_FLAG = "touches_gap"

#: Consecutive samples equal to a spike's largest sample that mark its peak as clipped. A
#: smooth peak sampled finely enough to measure has distinct samples around its maximum;
#: two equal samples can straddle a maximum by chance, three in a row hardly ever.
CLIPPED_RUN_SAMPLES = 3


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

    def subset(self, keep: np.ndarray) -> "SpikeMeasurements":
        """The spikes where the boolean array `keep` is true."""
        keep = np.asarray(keep, dtype=bool)
        values = {f.name: getattr(self, f.name)[keep] for f in fields(self) if f.name != "flags"}
        return SpikeMeasurements(flags=tuple(fl for fl, k in zip(self.flags, keep) if k),
                                 **values)

    def as_columns(self) -> dict[str, np.ndarray | list]:
        out: dict[str, np.ndarray | list] = {}
        for f in fields(self):
            out[f.name] = getattr(self, f.name)
        out["flags"] = [";".join(fl) for fl in self.flags]
        return out


_GATHER_CAP = 256           # spans longer than this are searched one by one
_GATHER_ELEMENTS = 2_000_000  # samples gathered at once, to bound memory
_FIRST_BELOW_HEAD = 128     # a spike falls through half amplitude within this many samples


def _interp_many(x: np.ndarray, frac_index: np.ndarray) -> np.ndarray:
    """Linear interpolation of x at fractional indices (NaN stays NaN)."""
    frac_index = np.asarray(frac_index, dtype=float)
    out = np.full(frac_index.shape, np.nan)
    ok = np.isfinite(frac_index)
    if ok.any():
        f = np.clip(frac_index[ok], 0, x.size - 1)
        i = np.minimum(np.floor(f).astype(np.int64), x.size - 2) if x.size > 1 else np.zeros(
            f.size, dtype=np.int64)
        nxt = np.minimum(i + 1, x.size - 1)
        out[ok] = x[i] + (f - i) * (x[nxt] - x[i])
    return out


def _vertices(x: np.ndarray, index: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sub-sample extrema near integer indices: the vertex of the parabola through i-1, i, i+1.

    Returns (fractional indices, values), the vertex kept within half a sample of i; the
    sample itself at the ends of x or where the three points are collinear.
    """
    index = np.asarray(index, dtype=np.int64)
    frac = index.astype(float)
    value = x[index].astype(float) if index.size else np.zeros(0)
    inner = (index > 0) & (index < x.size - 1)
    if inner.any():
        i = index[inner]
        a, b, c = x[i - 1], x[i], x[i + 1]
        curvature = a - 2.0 * b + c
        with np.errstate(divide="ignore", invalid="ignore"):
            delta = np.where(curvature != 0.0, 0.5 * (a - c) / curvature, 0.0)
        delta = np.clip(delta, -0.5, 0.5)
        frac[inner] = i + delta
        value[inner] = b - 0.25 * (a - c) * delta
    return frac, value


def _span_blocks(lo: np.ndarray, length: np.ndarray):
    """Yield (rows, offsets-matrix validity, index matrix) for spans lo .. lo+length-1 that are
    at most _GATHER_CAP long, in blocks of bounded size."""
    rows = np.flatnonzero((length > 0) & (length <= _GATHER_CAP))
    if rows.size == 0:
        return
    width = int(length[rows].max())
    offsets = np.arange(width)
    per_block = max(1, _GATHER_ELEMENTS // width)
    for start in range(0, rows.size, per_block):
        r = rows[start:start + per_block]
        yield r, offsets[None, :] < length[r, None], lo[r, None] + offsets[None, :]


def _span_argmax(x: np.ndarray, lo: np.ndarray, hi: np.ndarray, largest: bool = True
                 ) -> np.ndarray:
    """Index of the largest (or smallest) x in each inclusive span [lo, hi]; -1 if empty.

    Short spans are gathered into one array; long ones (where gathering would move more memory
    than a loop costs in calls) are searched one by one.
    """
    lo = np.asarray(lo, dtype=np.int64)
    hi = np.minimum(np.asarray(hi, dtype=np.int64), x.size - 1)
    length = hi - lo + 1
    out = np.full(lo.size, -1, dtype=np.int64)
    for r, valid, idx in _span_blocks(lo, length):
        vals = x[np.minimum(idx, x.size - 1)]
        if largest:
            out[r] = lo[r] + np.argmax(np.where(valid, vals, -np.inf), axis=1)
        else:
            out[r] = lo[r] + np.argmin(np.where(valid, vals, np.inf), axis=1)
    pick = np.argmax if largest else np.argmin
    for k in np.flatnonzero(length > _GATHER_CAP):
        out[k] = lo[k] + int(pick(x[lo[k]:hi[k] + 1]))
    return out


def _first_below(x: np.ndarray, level: np.ndarray, lo: np.ndarray, hi: np.ndarray
                 ) -> np.ndarray:
    """First index j in [lo, hi) with x[j] < level, per span; -1 where there is none.

    Searches the first _FIRST_BELOW_HEAD samples of every span at once, then the rest of the few
    spans not settled there one by one.
    """
    lo = np.asarray(lo, dtype=np.int64)
    hi = np.minimum(np.asarray(hi, dtype=np.int64), x.size)
    length = np.clip(hi - lo, 0, None)
    out = np.full(lo.size, -1, dtype=np.int64)
    head = np.minimum(length, _FIRST_BELOW_HEAD)
    for r, valid, idx in _span_blocks(lo, head):
        below = valid & (x[np.minimum(idx, x.size - 1)] < level[r, None])
        hit = below.any(axis=1)
        out[r[hit]] = lo[r[hit]] + np.argmax(below[hit], axis=1)
    for k in np.flatnonzero((out < 0) & (length > _FIRST_BELOW_HEAD)):
        rest = np.flatnonzero(x[lo[k] + _FIRST_BELOW_HEAD:hi[k]] < level[k])
        if rest.size:
            out[k] = lo[k] + _FIRST_BELOW_HEAD + int(rest[0])
    return out


def _last_below(x: np.ndarray, level: np.ndarray, lo: np.ndarray, hi: np.ndarray
                ) -> np.ndarray:
    """Last index j in [lo, hi) with x[j] < level, per span (spans <= _GATHER_CAP long are
    vectorized, longer ones searched one by one); -1 where there is none."""
    lo = np.asarray(lo, dtype=np.int64)
    hi = np.minimum(np.asarray(hi, dtype=np.int64), x.size)
    length = np.clip(hi - lo, 0, None)
    out = np.full(lo.size, -1, dtype=np.int64)
    for r, valid, idx in _span_blocks(lo, length):
        below = valid & (x[np.minimum(idx, x.size - 1)] < level[r, None])
        hit = below.any(axis=1)
        last = below.shape[1] - 1 - np.argmax(below[:, ::-1], axis=1)
        out[r[hit]] = lo[r[hit]] + last[hit]
    for k in np.flatnonzero(length > _GATHER_CAP):
        found = np.flatnonzero(x[lo[k]:hi[k]] < level[k])
        if found.size:
            out[k] = lo[k] + int(found[-1])
    return out


def _upward_crossings_before(x: np.ndarray, level: np.ndarray, lo: np.ndarray, hi: np.ndarray
                             ) -> np.ndarray:
    """Fractional index of the last upward crossing of `level` by x within [lo, hi], NaN where
    there is none: j = the last sample below the level, then linear interpolation to j + 1."""
    j = _last_below(x, level, lo, hi)
    out = np.full(lo.size, np.nan)
    ok = (j >= 0) & (j + 1 <= np.asarray(hi)) & (j + 1 < x.size)
    if ok.any():
        jj = j[ok]
        nxt = x[jj + 1]
        ok_rise = nxt >= level[ok]
        frac = jj + (level[ok] - x[jj]) / np.where(nxt != x[jj], nxt - x[jj], 1.0)
        out[np.flatnonzero(ok)[ok_rise]] = frac[ok_rise]
    return out


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
    to an end of `x` fall back to the 3-point parabola (:func:`_vertices`).
    """
    index = np.asarray(index, dtype=np.int64)
    frac = index.astype(float)
    value = x[index].astype(float) if index.size else np.zeros(0)
    inner = (index >= _SPLINE_HALF) & (index < x.size - _SPLINE_HALF)
    if (~inner).any():
        frac[~inner], value[~inner] = _vertices(x, index[~inner])
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
    Searches never reach back past the previous spike's peak, nor further than
    ``search_window_ms`` before the onset crossing. The voltage is read from the
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
    onset, peak = detected.onset_index, detected.peak_sample
    floor = np.concatenate([[0], peak[:-1] + 1]) if peak.size else peak
    floor = np.maximum(floor, onset - settings.search_window_samples(trace.sampling_rate_hz))
    method = settings.threshold_method
    if method == "onset_rate":
        # the detector guarantees dvdt[onset - 1] < rate <= dvdt[onset]
        a, b = dvdt[onset - 1], dvdt[onset]
        index = (onset - 1) + (settings.onset_rate_v_per_s - a) / (b - a)
    else:
        top = _span_argmax(dvdt, onset, peak)
        if method == "max_rate_fraction":
            level = settings.threshold_fraction * dvdt[top]
            index = _upward_crossings_before(dvdt, level, floor, top)
        else:  # second_derivative_peak
            one_ms = max(1, int(round(1e-3 * trace.sampling_rate_hz)))
            lo = np.maximum(floor, onset - one_ms)
            index = _vertices(d2, _span_argmax(d2, lo, top))[0]
    return index, _interp_many(trace.smooth_mv, index)


def interpolated_peaks(voltage_mv: np.ndarray, peak_sample: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Peak of each spike between samples.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    peak_sample : ndarray of int
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
    index, value = _spline_peaks(voltage_mv, peak_sample)
    at_edge = (peak_sample <= 0) | (peak_sample >= voltage_mv.size - 1)
    return index, value, at_edge


def flat_peak_runs(voltage_mv: np.ndarray, peak_sample: np.ndarray) -> np.ndarray:
    """Length of the run of samples equal to each spike's largest sample.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    peak_sample : ndarray of int
        Index of each spike's largest sample.

    Returns
    -------
    ndarray of int
        For each spike, the number of consecutive samples, through ``peak_sample``, whose
        value equals ``voltage_mv[peak_sample]`` exactly: 1 for an unclipped peak, the width
        of the plateau for a peak cut off at the top of a recording range.

    Notes
    -----
    A recording that exceeds the amplifier's or the digitizer's range holds the largest
    value it can represent for as long as the signal stays above it, so the top of a clipped
    spike is a run of identical samples. A spike is flagged ``clipped_peak`` when the run is
    at least :data:`CLIPPED_RUN_SAMPLES` long. (A digitizer step as coarse as the change of a
    smooth peak over two samples could also give such runs; at usual resolutions, 16 bits over
    a range of volts, that needs sampling far faster than a spike's width requires.)
    """
    v = np.asarray(voltage_mv)
    runs = np.ones(len(peak_sample), dtype=int)
    for k, p in enumerate(np.asarray(peak_sample, dtype=int)):
        top = v[p]
        lo = p
        while lo > 0 and v[lo - 1] == top:
            lo -= 1
        hi = p
        while hi < v.size - 1 and v[hi + 1] == top:
            hi += 1
        runs[k] = hi - lo + 1
    return runs


def half_widths(voltage_mv: np.ndarray, sampling_rate_hz: float, threshold_position: np.ndarray,
                threshold_mv: np.ndarray, peak_sample: np.ndarray, peak_mv: np.ndarray,
                end_index: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Width of each spike at half its amplitude above threshold.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    sampling_rate_hz : float
    threshold_position, threshold_mv : ndarray
        Threshold of each spike (fractional index, mV).
    peak_sample : ndarray of int
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
    peak_sample = np.asarray(peak_sample, dtype=np.int64)
    n = peak_sample.size
    width = np.full(n, np.nan)
    up = np.full(n, np.nan)
    down = np.full(n, np.nan)
    above = np.zeros(n, dtype=np.int64)
    ok = np.isfinite(threshold_mv) & np.isfinite(threshold_position)
    if not ok.any():
        return width, up, down, above
    v = voltage_mv
    level = threshold_mv + 0.5 * (peak_mv - threshold_mv)
    k = np.flatnonzero(ok)
    p = peak_sample[k]
    up[k] = _upward_crossings_before(v, level[k], np.floor(threshold_position[k]).astype(np.int64), p)
    j = _first_below(v, level[k], p, np.asarray(end_index, dtype=np.int64)[k])
    found = j > 0
    jj = j[found]
    down[k[found]] = (jj - 1) + (v[jj - 1] - level[k][found]) / (v[jj - 1] - v[jj])
    both = np.isfinite(up) & np.isfinite(down)
    width[both] = (down[both] - up[both]) / sampling_rate_hz * 1e3
    above[both] = (np.floor(down[both]) - np.ceil(up[both]) + 1).astype(np.int64)
    return width, up, down, above


def troughs(smooth_mv: np.ndarray, peak_sample: np.ndarray, end_index: np.ndarray
            ) -> tuple[np.ndarray, np.ndarray]:
    """Minimum of the smoothed voltage from each peak to its search end.

    Returns (fractional index, value in mV); the extremum is refined with a parabola when it
    lies inside the span. The smoothed trace is used so that recording noise does not pull the
    minimum down.
    """
    peak_sample = np.asarray(peak_sample, dtype=np.int64)
    end_index = np.asarray(end_index, dtype=np.int64)
    index = np.full(peak_sample.size, np.nan)
    value = np.full(peak_sample.size, np.nan)
    ok = end_index > peak_sample + 1
    if not ok.any():
        return index, value
    p, e = peak_sample[ok], end_index[ok]
    j = _span_argmax(smooth_mv, p, e - 1, largest=False)
    inside = (j > p) & (j < e - 1)
    frac, val = _vertices(smooth_mv, j)
    index[ok] = np.where(inside, frac, j)
    value[ok] = np.where(inside, val, smooth_mv[j])
    return index, value


def rate_extremes(voltage_mv: np.ndarray, sampling_rate_hz: float,
                  threshold_position: np.ndarray, peak_position: np.ndarray,
                  trough_position: np.ndarray, smoothing_ms: float = 0.1
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Largest dV/dt from threshold to peak and most negative from peak to trough.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    sampling_rate_hz : float
    threshold_position, peak_position, trough_position : ndarray
        Fractional sample positions per spike (NaN where unknown: that extreme is then NaN).
    smoothing_ms : float, optional
        Savitzky-Golay window for this derivative (default 0.1 ms), shorter than the one used
        for detection and threshold.

    Returns
    -------
    max_dvdt_v_per_s, min_dvdt_v_per_s : ndarray

    Notes
    -----
    The extremes of dV/dt are sharp, so a long smoothing window flattens them (for a window of
    half-length h the bias is about f''' h**2 / 10), while near threshold dV/dt changes slowly
    and noise matters more. So the rates use their own, shorter window, evaluated only over
    each spike's span (a local quadratic fit, as in
    :func:`~spikemeasure.detection.smoothed_trace`), and the extreme sample is refined with a
    parabola through it and its neighbours.
    """
    v = np.asarray(voltage_mv, dtype=float)
    window = smoothing_window_samples(smoothing_ms, sampling_rate_hz)
    half = window // 2
    coeffs = savgol_coeffs(window, SMOOTHING_POLYORDER, deriv=1, delta=1e3 / sampling_rate_hz,
                           use="conv")
    n = np.asarray(peak_position).size
    largest = np.full(n, np.nan)
    smallest = np.full(n, np.nan)
    first, last = half, v.size - 1 - half  # centres where the window fits
    for k in range(n):
        p = int(round(peak_position[k]))
        t, tr = threshold_position[k], trough_position[k]
        a = max(first, int(np.floor(t))) if np.isfinite(t) else p
        b = min(last, int(np.ceil(tr))) if np.isfinite(tr) else p
        if b < a or p < first or p > last:
            continue
        lo = a - 1 if a - 1 >= first else a
        hi = b + 1 if b + 1 <= last else b
        rates = np.convolve(v[lo - half:hi + half + 1], coeffs, mode="valid")  # centres lo..hi
        if np.isfinite(t) and p >= a:
            largest[k] = _refined_extreme(rates, a - lo, p - lo, True)
        if np.isfinite(tr) and b >= p:
            smallest[k] = _refined_extreme(rates, p - lo, b - lo, False)
    return largest, smallest


def _refined_extreme(x: np.ndarray, a: int, b: int, largest: bool) -> float:
    """Extreme of x[a:b+1], refined by a parabola where it has a neighbour on both sides."""
    seg = x[a:b + 1]
    j = a + int(np.argmax(seg) if largest else np.argmin(seg))
    if 0 < j < x.size - 1:
        prev, here, nxt = float(x[j - 1]), float(x[j]), float(x[j + 1])
        curvature = prev - 2.0 * here + nxt
        if curvature != 0.0:  # the same vertex as _vertices, for one point
            delta = min(0.5, max(-0.5, 0.5 * (prev - nxt) / curvature))
            return here - 0.25 * (prev - nxt) * delta
        return here
    return float(x[j])


def search_ends(n_samples: int, sampling_rate_hz: float, threshold_position: np.ndarray,
                onset_index: np.ndarray, step: CurrentStep | None,
                peak_sample: np.ndarray | None = None, window_samples: int | None = None
                ) -> np.ndarray:
    """Where each spike's trough search stops (exclusive sample index).

    Notes
    -----
    Before the next spike's threshold (its onset crossing when that threshold is unknown);
    for the last spike, at the end of the current step when the spike lies inside it, else
    at the end of the sweep; never more than `window_samples` after `peak_sample` when both
    are given.
    """
    n = onset_index.size
    ends = np.empty(n, dtype=np.int64)
    for k in range(n - 1):
        nxt = threshold_position[k + 1]
        ends[k] = int(np.floor(nxt)) + 1 if np.isfinite(nxt) else int(onset_index[k + 1])
    if n:
        ends[-1] = n_samples
        t_last = threshold_position[-1] if np.isfinite(threshold_position[-1]) else onset_index[-1]
        if step is not None:
            onset_i = step.onset_s * sampling_rate_hz
            offset_i = step.offset_s * sampling_rate_hz
            if onset_i <= t_last < offset_i:
                ends[-1] = min(n_samples, int(round(offset_i)))
    if peak_sample is not None and window_samples is not None:
        ends = np.minimum(ends, np.asarray(peak_sample, dtype=np.int64) + window_samples)
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
    - max dV/dt: the largest dV/dt from threshold to peak; min dV/dt: the most negative from
      peak to trough (:func:`rate_extremes`, with the shorter ``rate_smoothing_ms`` window).
    - trough: :func:`troughs`, searched up to :func:`search_ends` (to the end of the sweep
      instead when the last spike repolarizes only after the step ends); AHP depth =
      threshold - trough.
    - ISI: threshold time minus the previous spike's threshold time.
    """
    return _measure_spikes(trace, detected, settings, step)[0]


def _measure_spikes(trace: SmoothedTrace, detected: DetectedSpikes, settings: DetectionSettings,
                    step: CurrentStep | None) -> tuple[SpikeMeasurements, dict]:
    """:func:`measure_spikes`, and the sample positions its searches used (for the gap test)."""
    rate = trace.sampling_rate_hz
    n = len(detected)
    v = trace.voltage_mv
    thr_i, thr_mv = spike_thresholds(trace, detected, settings)
    peak_pos, peak_mv, at_edge = interpolated_peaks(v, detected.peak_sample)
    # the step end bounds only the trough of a sweep's last spike, not its repolarization
    reach = settings.search_window_samples(rate)
    width_ends = search_ends(v.size, rate, thr_i, detected.onset_index, None,
                             detected.peak_sample, reach)
    width, _, down_i, above = half_widths(v, rate, thr_i, thr_mv, detected.peak_sample, peak_mv,
                                          width_ends)
    trough_ends = search_ends(v.size, rate, thr_i, detected.onset_index, step,
                              detected.peak_sample, reach)
    late = np.isfinite(down_i) & (down_i >= trough_ends - 1)
    trough_ends = np.where(late, width_ends, trough_ends)
    trough_i, trough_mv = troughs(trace.smooth_mv, detected.peak_sample, trough_ends)
    repolarized = np.isfinite(down_i)
    trough_i = np.where(repolarized, trough_i, np.nan)
    trough_mv = np.where(repolarized, trough_mv, np.nan)
    coarse = repolarized & (above < settings.min_samples_across_width)
    width = np.where(coarse, np.nan, width)
    max_rate, min_rate = rate_extremes(v, rate, thr_i, peak_pos, trough_i,
                                       settings.rate_smoothing_ms)
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
        isi_ms=isi, flags=tuple(flags))
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


_SPIKE_FIELDS_BY_WINDOW = {
    "threshold": ("threshold_s", "threshold_mv", "amplitude_mv", "half_width_ms", "rise_time_ms",
                  "max_dvdt_v_per_s", "ahp_depth_mv"),
    "peak": ("peak_s", "peak_mv", "amplitude_mv", "half_width_ms", "rise_time_ms",
             "max_dvdt_v_per_s", "min_dvdt_v_per_s"),
    "width": ("half_width_ms",),
    "trough": ("trough_s", "trough_mv", "ahp_depth_mv", "min_dvdt_v_per_s"),
}


def _finite_runs(finite: np.ndarray) -> list[tuple[int, int]]:
    """(start, stop) of each stretch of True in a boolean array."""
    edges = np.diff(np.concatenate([[False], finite, [False]]).astype(np.int8))
    return list(zip(np.flatnonzero(edges == 1).tolist(), np.flatnonzero(edges == -1).tolist()))


def _blank_near_gaps(spikes: SpikeMeasurements, detected: DetectedSpikes, extra: dict,
                     trace: SmoothedTrace, settings: DetectionSettings, gap_before: bool,
                     gap_after: bool) -> SpikeMeasurements:
    """Empty the values of the spikes of one finite stretch whose windows reach a gap.

    `gap_before` / `gap_after`: whether missing samples lie just before the stretch's first /
    after its last sample (rather than the ends of the sweep). The smoothing filters' values
    differ from those of the unbroken trace within half a window of a gap, and a search that
    would have gone on past a gap was cut short; a value is kept only when neither happened to
    any window it is measured over.
    """
    n_spikes = len(spikes)
    if n_spikes == 0 or not (gap_before or gap_after):
        return spikes
    rate = trace.sampling_rate_hz
    n = trace.voltage_mv.size
    rate_half = smoothing_window_samples(settings.rate_smoothing_ms, rate) // 2
    edge = max(trace.window // 2, rate_half, _SPLINE_HALF) + 1
    low = edge if gap_before else -np.inf            # first sample not disturbed by a gap
    high = n - 1 - edge if gap_after else np.inf     # last one
    onset, peak = detected.onset_index, detected.peak_sample
    reach = settings.search_window_samples(rate)
    if settings.threshold_method == "onset_rate":
        thr_lo, thr_hi = onset - 1, onset
    else:
        prev_peak = np.concatenate([[-np.iinfo(np.int64).max // 2], peak[:-1] + 1])
        thr_lo, thr_hi = np.maximum(prev_peak, onset - reach), peak
    touched = {
        "threshold": (thr_lo < low) | (thr_hi > high),
        "peak": (peak - _SPLINE_HALF < low) | (peak + trace.window // 2 + _SPLINE_HALF > high),
        # a half-width whose downward crossing was found is the first crossing, as without the
        # gap; one not found may have been cut short by it
        "width": ~np.isfinite(extra["down"]) & (extra["width_ends"] > high),
        # the last spike before a gap may not be the sweep's last: its trough search would
        # have run on to the next spike or the search window, past the gap
        "trough": (extra["trough_ends"] > high)
                  | ((np.arange(n_spikes) == n_spikes - 1) & (peak + reach > high)),
    }
    values = {name: np.array(getattr(spikes, name), dtype=float)
              for names in _SPIKE_FIELDS_BY_WINDOW.values() for name in names}
    any_touch = np.zeros(n_spikes, dtype=bool)
    for window, names in _SPIKE_FIELDS_BY_WINDOW.items():
        hit = np.asarray(touched[window], dtype=bool)
        any_touch |= hit
        for name in names:
            values[name][hit] = np.nan
    flags = []
    for k, f in enumerate(spikes.flags):
        if touched["width"][k]:
            f = tuple(x for x in f if x != "no_repolarization")  # the gap, not the cell
        flags.append(f + (GAP_FLAG,) if any_touch[k] else f)
    return replace(spikes, flags=tuple(flags), **values)


def _measure_stretches(voltage_mv: np.ndarray, sampling_rate_hz: float,
                       settings: DetectionSettings, step: CurrentStep | None
                       ) -> tuple[SpikeMeasurements, np.ndarray]:
    """Measure each stretch of finite samples on its own (times from the trace's first
    sample); returns the spikes and their onset indices in the trace. ISIs are not fixed."""
    v = voltage_mv
    rate = float(sampling_rate_hz)
    window = smoothing_window_samples(settings.smoothing_ms, rate)
    parts: list[SpikeMeasurements] = []
    onsets: list[np.ndarray] = []
    for a, b in _finite_runs(np.isfinite(v)):
        if b - a < window:
            continue  # too short to smooth: nothing to detect in it
        trace = smoothed_trace(v[a:b], rate, settings.smoothing_ms,
                               second_derivative=settings.needs_second_derivative)
        detected = detect_spikes(trace, settings)
        if len(detected) == 0:
            continue
        local = None if step is None else CurrentStep(step.onset_s - a / rate,
                                                      step.offset_s - a / rate,
                                                      step.size_pa, step.holding_pa)
        spikes, extra = _measure_spikes(trace, detected, settings, local)
        spikes = _blank_near_gaps(spikes, detected, extra, trace, settings, a > 0, b < v.size)
        parts.append(_shifted(spikes, a / rate))
        onsets.append(detected.onset_index + a)
    return _concatenate(parts), (np.concatenate(onsets) if onsets
                                 else np.zeros(0, dtype=np.int64))


def _intervals_across_gaps(spikes: SpikeMeasurements, gaps_s: np.ndarray
                           ) -> SpikeMeasurements:
    """Interspike intervals of the whole sweep, empty (and flagged) where a gap lies between a
    spike and the previous one, since the gap may hide a spike."""
    n = len(spikes)
    isi = np.full(n, np.nan)
    if n < 2:
        return replace(spikes, isi_ms=isi)
    times = np.where(np.isfinite(spikes.threshold_s), spikes.threshold_s, spikes.peak_s)
    isi[1:] = np.diff(spikes.threshold_s) * 1e3
    flags = list(spikes.flags)
    for k in range(1, n):
        between = (gaps_s[:, 0] < times[k]) & (gaps_s[:, 1] > times[k - 1]) \
            if gaps_s.size else np.zeros(0, dtype=bool)
        if between.any():
            isi[k] = np.nan
            if GAP_FLAG not in flags[k]:
                flags[k] = flags[k] + (GAP_FLAG,)
    return replace(spikes, isi_ms=isi, flags=tuple(flags))


def measure_around_gaps(voltage_mv: np.ndarray, sampling_rate_hz: float,
                        settings: DetectionSettings = DetectionSettings(),
                        step: CurrentStep | None = None) -> SpikeMeasurements:
    """Detect and measure the spikes of a trace that may hold missing (NaN or infinite)
    stretches.

    Parameters
    ----------
    voltage_mv : ndarray
        Membrane voltage in mV, 1-D; NaN or infinite where samples are missing.
    sampling_rate_hz : float
    settings : DetectionSettings, optional
    step : CurrentStep, optional

    Returns
    -------
    SpikeMeasurements
        With every sample finite, the same as :func:`measure_trace`.

    Notes
    -----
    Each stretch of finite samples at least one smoothing window long is smoothed, detected
    and measured on its own, and no search crosses a gap. A spike keeps every value whose
    windows stay clear of the gaps: those values come from the same samples through the same
    filters as in the unbroken trace (the Savitzky-Golay filters differ only within half a
    window of a stretch's end), so they equal the values the unbroken trace would give. A value
    whose window comes within that distance of a gap, or whose search was cut short by one, is
    NaN, and the spike is flagged :data:`GAP_FLAG`: threshold (the threshold search, and for
    ``onset_rate`` the onset crossing); peak (the spline's samples and the end of the rise);
    half-width (only when the downward crossing was not found before the gap); trough, AHP
    depth and fall rate (the trough search); and the interspike interval when a gap lies between
    the spike and the previous one, as it may hide a spike. A spike within a gap is not seen.
    """
    v = np.array(voltage_mv, dtype=float)
    if v.ndim != 1:
        raise InvalidSettingError("`voltage_mv` must be a 1-D array")
    if not sampling_rate_hz > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    finite = np.isfinite(v)
    if finite.all():
        trace = smoothed_trace(v, sampling_rate_hz, settings.smoothing_ms,
                               second_derivative=settings.needs_second_derivative)
        return measure_spikes(trace, detect_spikes(trace, settings), settings, step)
    v[~finite] = np.nan
    spikes, _ = _measure_stretches(v, sampling_rate_hz, settings, step)
    runs = _finite_runs(~finite)
    gaps_s = np.array(runs, dtype=float).reshape(-1, 2) / sampling_rate_hz
    return _intervals_across_gaps(spikes, gaps_s)


def piece_margin_samples(settings: DetectionSettings, sampling_rate_hz: float) -> int:
    """Samples read on either side of a piece so that every spike whose onset lies in the
    piece is measured from the same samples as in the whole trace.

    A spike's measurements reach at most ``search_window_ms`` back from its onset crossing
    and forward from its peak, which comes within ``peak_window_ms`` of the onset; add the
    next spike's own detection span, the 1 ms of the second-derivative threshold and a few
    smoothing windows for the filters' edges.
    """
    rate = sampling_rate_hz
    window = smoothing_window_samples(settings.smoothing_ms, rate)
    rate_window = smoothing_window_samples(settings.rate_smoothing_ms, rate)
    peak = int(np.ceil(settings.peak_window_ms * 1e-3 * rate))
    one_ms = int(np.ceil(1e-3 * rate))
    return (settings.search_window_samples(rate) + 2 * peak + one_ms + 4 * window
            + 2 * rate_window + 16)


def _concatenate(parts: list[SpikeMeasurements]) -> SpikeMeasurements:
    names = [f.name for f in fields(SpikeMeasurements) if f.name != "flags"]
    values = {name: np.concatenate([getattr(p, name) for p in parts]) if parts else np.zeros(0)
              for name in names}
    flags = tuple(fl for p in parts for fl in p.flags)
    return SpikeMeasurements(flags=flags, **values)


def _shifted(m: SpikeMeasurements, shift_s: float) -> SpikeMeasurements:
    """The same spikes with their times moved by `shift_s`."""
    return replace(m, threshold_s=m.threshold_s + shift_s, peak_s=m.peak_s + shift_s,
                   trough_s=m.trough_s + shift_s)


def measure_in_pieces(voltage_mv, sampling_rate_hz: float,
                      settings: DetectionSettings = DetectionSettings(), *,
                      piece_samples: int | None = None,
                      cancel: Callable[[], None] | None = None) -> SpikeMeasurements:
    """Detect and measure the spikes of a long gap-free trace, one piece at a time.

    Parameters
    ----------
    voltage_mv : ndarray or LazyTrace
        Membrane voltage in mV, 1-D; anything that returns float arrays for slices
        ``voltage_mv[a:b]`` and has a length, so a trace kept in its file
        (:class:`~spikemeasure.sweeps.LazyTrace`) is read piece by piece.
    sampling_rate_hz : float
    settings : DetectionSettings, optional
    piece_samples : int, optional
        Samples per piece (default :data:`PIECE_SAMPLES`); memory use is a small multiple of
        it and of the margins, whatever the length of the trace.
    cancel : callable, optional
        Called with no arguments before each piece is read; it stops the work by raising
        (a run being stopped raises ``KeyboardInterrupt`` from it). Its exception propagates.

    Returns
    -------
    SpikeMeasurements
        The same spikes as :func:`measure_around_gaps` on the whole trace with no current step
        (:func:`measure_trace` when every sample is finite).

    Notes
    -----
    Each piece is read with a margin of :func:`piece_margin_samples` on both sides, detected
    and measured whole, and keeps the spikes whose onset crossing lies in the piece itself, so
    a spike on the border between pieces is measured exactly once, in the piece holding its
    onset. Every search of a spike's measurements stays within the margin (bounded by
    ``search_window_ms``), and the Savitzky-Golay filters give the same values away from the
    ends of what they are given, so each spike is measured from the same numbers as in one
    pass over the whole trace; only times differ, by rounding, as they are shifted by the
    piece's start. Interspike intervals are taken across pieces. Missing (NaN or infinite)
    samples are handled as by :func:`measure_around_gaps`: the stretches between them are
    measured on their own, and values whose windows reach a gap are empty and flagged
    (:func:`measure_in_pieces_with_gaps` also returns where the gaps are).
    """
    return measure_in_pieces_with_gaps(voltage_mv, sampling_rate_hz, settings,
                                       piece_samples=piece_samples, cancel=cancel)[0]


def measure_in_pieces_with_gaps(voltage_mv, sampling_rate_hz: float,
                                settings: DetectionSettings = DetectionSettings(), *,
                                piece_samples: int | None = None,
                                cancel: Callable[[], None] | None = None
                                ) -> tuple[SpikeMeasurements, np.ndarray]:
    """:func:`measure_in_pieces`, and the missing stretches found while reading.

    Takes the arguments of :func:`measure_in_pieces`.

    Returns
    -------
    spikes : SpikeMeasurements
    gaps : ndarray of int, shape (k, 2)
        (start, stop) sample indices of each stretch of NaN or infinite samples, in order.
    """
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    piece_samples = int(PIECE_SAMPLES if piece_samples is None else piece_samples)
    if piece_samples < 1:
        raise InvalidSettingError("`piece_samples` must be at least 1")
    if cancel is not None and not callable(cancel):
        raise InvalidSettingError("`cancel` must be callable or None")
    n = len(voltage_mv)
    margin = piece_margin_samples(settings, rate)
    parts: list[SpikeMeasurements] = []
    gaps: list[list[int]] = []
    for start in range(0, n, piece_samples):
        if cancel is not None:
            cancel()
        stop = min(n, start + piece_samples)
        lo, hi = max(0, start - margin), min(n, stop + margin)
        v = np.asarray(voltage_mv[lo:hi], dtype=float)
        finite = np.isfinite(v)
        if finite.all():
            trace = smoothed_trace(v, rate, settings.smoothing_ms,
                                   second_derivative=settings.needs_second_derivative)
            detected = detect_spikes(trace, settings)
            measured, onset = measure_spikes(trace, detected, settings, None), detected.onset_index
        else:
            for a, b in _finite_runs(~finite[start - lo:stop - lo]):
                if gaps and gaps[-1][1] == start + a:
                    gaps[-1][1] = start + b      # a gap running on from the previous piece
                else:
                    gaps.append([start + a, start + b])
            v = np.where(finite, v, np.nan)
            measured, onset = _measure_stretches(v, rate, settings, None)
        onset = onset + lo
        keep = (onset >= start) & (onset < stop)
        if keep.any():
            parts.append(_shifted(measured.subset(keep), lo / rate))
    whole = _concatenate(parts)
    stretches = np.array(gaps, dtype=np.int64).reshape(-1, 2)
    return _intervals_across_gaps(whole, stretches / rate), stretches
