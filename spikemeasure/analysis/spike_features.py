"""Per-spike measurements, one function each: threshold, peak, half-width and trough.

Functions take arrays and a sampling rate and return arrays aligned with the spikes given
(sample positions are fractional indices); nothing here reads files or prints. The searches
over many spans of one trace at once are in :mod:`~spikemeasure.analysis.span_search`.
"""
from __future__ import annotations

import numpy as np
from scipy.interpolate import CubicSpline

from ..errors import InvalidSettingError
from .detection import (SMOOTHING_POLYORDER, DetectedSpikes, DetectionSettings, SmoothedTrace,
                        savgol_coeffs)
from .local_fits import fit_noise_gain, fitted_extremes, matched_windows
from .span_search import (FIRST_BELOW_HEAD, first_below, interp_many, last_below, span_argmax,
                          upward_crossings_before, vertices)
from .spike_rates import FALL_NOISE_FRACTION, FALL_WIDTH_FACTOR, noise_before
from .sweeps import CurrentStep

__all__ = ["spike_thresholds", "interpolated_peaks", "fitted_peaks", "peak_windows", "extreme_lines",
           "PEAK_ORDER", "PEAK_NOISE_MV", "PEAK_WIDTH_FACTOR", "flat_peak_runs", "half_widths", "troughs",
           "search_ends", "fitted_troughs", "trough_windows", "TROUGH_ORDER", "TROUGH_NOISE_MV",
           "TROUGH_LONGEST_MS", "onset_window", "ONSET_NOISE_FRACTION", "ONSET_WINDOW_FACTOR",
           "SPLINE_HALF_SAMPLES",
           "SECOND_DERIVATIVE_LOOKBACK_MS"]

#: How far before the onset crossing the ``second_derivative_peak`` threshold searches for the
#: largest d2V/dt2.
SECOND_DERIVATIVE_LOOKBACK_MS = 1.0


SPLINE_HALF_SAMPLES = 3
_SPLINE_STEPS = 400
_spline_weights_cache: list[np.ndarray] = []


def _spline_weights() -> np.ndarray:
    """Weights W (steps+1, 7): W @ y is the not-a-knot cubic spline through samples y[-3..3]
    (unit spacing) evaluated on a fine grid from -1 to +1 sample.

    The spline is linear in the samples, so the weights are the splines of the unit vectors.
    """
    if not _spline_weights_cache:
        nodes = np.arange(-SPLINE_HALF_SAMPLES, SPLINE_HALF_SAMPLES + 1, dtype=float)
        grid = np.linspace(-1.0, 1.0, _SPLINE_STEPS + 1)
        eye = np.eye(nodes.size)
        _spline_weights_cache.append(
            np.stack([CubicSpline(nodes, eye[k])(grid) for k in range(nodes.size)], axis=1))
    return _spline_weights_cache[0]


def _spline_peaks(x: np.ndarray, index: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Maxima near samples `index` of the cubic splines through each index +- 3 samples.

    Vectorized over spikes: each spline is evaluated on a grid of 1/200 sample within one
    sample of its index, and the best grid point is refined with a parabola. Indices too close
    to an end of `x` fall back to the 3-point parabola
    (:func:`~spikemeasure.analysis.span_search.vertices`).
    """
    index = np.asarray(index, dtype=np.int64)
    frac = index.astype(float)
    value = x[index].astype(float) if index.size else np.zeros(0)
    inner = (index >= SPLINE_HALF_SAMPLES) & (index < x.size - SPLINE_HALF_SAMPLES)
    if (~inner).any():
        frac[~inner], value[~inner] = vertices(x, index[~inner])
    if inner.any():
        offsets = np.arange(-SPLINE_HALF_SAMPLES, SPLINE_HALF_SAMPLES + 1)
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


#: The onset crossing is found again with the shortest window whose dV/dt noise SD is at
#: most this fraction of the onset rate ...
ONSET_NOISE_FRACTION = 0.05
#: ... and at most this many times the smoothing window (`--smoothing`): its smoothing bias
#: is corrected as that of an exponentially growing rate, which the rising phase follows
#: over about that span.
ONSET_WINDOW_FACTOR = 1.5


def onset_window(noise_mv: float | np.ndarray, sampling_rate_hz: float, level: float,
                 smoothing_window: int) -> int | np.ndarray:
    """Shortest odd window (at least 3, at most the odd number of samples nearest below
    ONSET_WINDOW_FACTOR times `smoothing_window`) of a local quadratic fit whose dV/dt noise
    SD is at most ONSET_NOISE_FRACTION of `level` (V/s); the longest where the noise is
    unknown or none is quiet enough. Given an array of noise SDs, an array of windows (one
    per spike)."""
    noise = np.asarray(noise_mv, dtype=float)
    longest = max(3, 2 * int(ONSET_WINDOW_FACTOR * smoothing_window / 2) + 1)
    windows = np.full(noise.shape, longest, dtype=np.int64)
    chosen = ~np.isfinite(noise)
    for window in range(3, longest, 2):
        gain = np.sqrt(12.0 / (window * (window * window - 1)))
        quiet = ~chosen & (noise * sampling_rate_hz / 1e3 * gain <= ONSET_NOISE_FRACTION * level)
        windows[quiet] = window
        chosen |= quiet
    return int(windows) if noise.ndim == 0 else windows


def _noise_matched_onsets(trace: SmoothedTrace, onset: np.ndarray, level: float
                          ) -> tuple[np.ndarray, np.ndarray]:
    """The onset crossing of `level` again, with a window matched to the measured noise.

    Returns fractional indices: for each spike, the last upward crossing of `level`, before
    the span's largest dV/dt, by the dV/dt of a local quadratic fit over
    :func:`onset_window` samples, among the centres within half a smoothing window and half
    that window of the onset sample, placed between the two centres around it as the crossing of an
    exponentially growing rate and moved by the fit's smoothing bias of such a rate
    (:func:`_exponential_crossing`); NaN where the span leaves the trace or
    holds no such crossing (the smoothed trace's crossing is kept there). Second, the rate's
    growth per sample there (log of the ratio of the two fitted rates; NaN where it does not
    grow).
    """
    v, fs = trace.voltage_mv, trace.sampling_rate_hz
    out = np.full(onset.size, np.nan)
    growth = np.full(onset.size, np.nan)
    windows = onset_window(noise_before(v, onset - trace.window), fs, level, trace.window)
    for window in np.unique(windows):
        half = window // 2
        # a longer window moves the fitted crossing earlier, by up to about half of it
        back = ahead = trace.window // 2 + half
        pick = np.flatnonzero((windows == window) & (onset - back - half >= 0)
                              & (onset + ahead + half < v.size))
        if pick.size == 0:
            continue
        coeffs = savgol_coeffs(window, SMOOTHING_POLYORDER, deriv=1, delta=1e3 / fs,
                               use="dot")
        rows = v[onset[pick, None] + np.arange(-back - half, ahead + half + 1)]
        rate = np.lib.stride_tricks.sliding_window_view(rows, window, axis=1) @ coeffs
        r, columns = np.arange(rate.shape[0]), np.arange(rate.shape[1])
        top = np.argmax(rate, axis=1)
        below = (rate < level) & (columns[None, :] < top[:, None])
        found = below.any(axis=1) & (rate[r, top] >= level)
        last = below.shape[1] - 1 - np.argmax(below[:, ::-1], axis=1)
        before, after = rate[r, last], rate[r, np.minimum(last + 1, rate.shape[1] - 1)]
        frac = last + _exponential_crossing(before, after, level, coeffs * 1e3 / fs)
        out[pick[found]] = (onset[pick] - back + frac)[found]
        with np.errstate(invalid="ignore", divide="ignore"):
            k = np.where((before > 0) & (after > before), np.log(after / before), np.nan)
        growth[pick[found]] = k[found]
    return out, growth


def _exponential_crossing(before: np.ndarray, after: np.ndarray, level: float,
                          slope_weights: np.ndarray) -> np.ndarray:
    """Where, in samples after the first, the true rate crosses `level`, from two
    consecutive fitted rates `before` < `level` <= `after` (V/s).

    Under a rate growing as exp(k t) between the two samples (k = log(after / before) per
    sample), the fit's rate is the true rate times R = (slope_weights . exp(k x)) / k, with
    `slope_weights` the fit's slope weights per sample on x = -m .. m: the crossing of the
    fitted rate, log(level / before) / k, lies log(R) / k samples before the true one.
    Where the rate does not grow (or is not positive) the linear crossing is kept.
    """
    before, after = np.asarray(before, dtype=float), np.asarray(after, dtype=float)
    linear = (level - before) / np.where(after != before, after - before, 1.0)
    grows = (before > 0) & (after > before)
    k = np.log(np.where(grows, after, 2.0) / np.where(grows, before, 1.0))
    half = slope_weights.size // 2
    x = np.arange(-half, half + 1, dtype=float)
    ratio = np.exp(k[:, None] * x) @ slope_weights / k
    with np.errstate(invalid="ignore", divide="ignore"):
        moved = (np.log(level / np.where(grows, before, 1.0)) + np.log(ratio)) / k
    return np.where(grows & np.isfinite(moved) & (ratio > 0), moved, linear)


def _exponential_values(smooth: np.ndarray, index: np.ndarray, growth: np.ndarray
                        ) -> np.ndarray:
    """The smoothed voltage at fractional `index`, between its two samples as a voltage whose
    rate grows by exp(k) per sample (k = `growth`):
    V(i + f) = V(i) + (V(i + 1) - V(i)) (exp(k f) - 1) / (exp(k) - 1); linear where k is not
    positive or NaN. NaN where `index` is NaN."""
    index = np.asarray(index, dtype=float)
    out = np.full(index.size, np.nan)
    ok = np.isfinite(index) & (index >= 0) & (index < len(smooth) - 1)
    if not ok.any():
        return out
    i = np.floor(index[ok]).astype(np.int64)
    f = index[ok] - i
    v0, v1 = np.asarray(smooth[i], dtype=float), np.asarray(smooth[i + 1], dtype=float)
    k = np.asarray(growth, dtype=float)[ok]
    grows = np.isfinite(k) & (k > 1e-9)
    k = np.where(grows, k, 1.0)
    share = np.where(grows, np.expm1(k * f) / np.expm1(k), f)
    out[ok] = v0 + (v1 - v0) * share
    return out


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
        Smoothed voltage at that index, interpolated between samples: linearly, or for
        ``onset_rate`` as described below (NaN when not found).

    Notes
    -----
    ``onset_rate`` (default)
        The last upward crossing of ``onset_rate_v_per_s`` by dV/dt before the peak, linearly
        interpolated between the two samples around it. The detector's crossing (on the
        trace's smoothing window) is found again by the dV/dt of a local quadratic fit over
        the shortest window whose noise SD, from the noise measured before the onset
        (:func:`noise_before`), is at most :data:`ONSET_NOISE_FRACTION` of the onset rate:
        the smoothing bias of an accelerating rising phase (the third derivative times h**2 / 10,
        see :func:`~spikemeasure.analysis.detection.smoothed_trace`) moves the crossing
        earlier, so the window is no longer than the noise requires [2]_. The rising phase
        grows about exponentially at the onset rate: the crossing is placed between the two
        fitted rates around it as that of a rate growing by their ratio per sample, and moved
        later by how much the window reads such a rate high (:func:`_exponential_crossing`);
        the voltage there is the smoothed voltage between its two samples as the integral of
        that rate, exponential in time (:func:`_exponential_values`).
    ``max_rate_fraction``
        The last upward crossing, before the time of the spike's maximum dV/dt, of
        ``threshold_fraction`` times that maximum [1]_.
    ``second_derivative_peak``
        The time of the largest d2V/dt2 from :data:`SECOND_DERIVATIVE_LOOKBACK_MS` (1 ms)
        before the onset crossing to the time of
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
    .. [2] A. Savitzky and M. J. E. Golay, "Smoothing and differentiation of data by
       simplified least squares procedures", Analytical Chemistry 36(8):1627-1639, 1964.
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
        refined, growth = _noise_matched_onsets(trace, onset, settings.onset_rate_v_per_s)
        index = np.where(np.isfinite(refined), refined, index)
        return index, _exponential_values(trace.smooth_mv, index,
                                          np.where(np.isfinite(refined), growth, np.nan))
    else:
        top = span_argmax(dvdt, onset, peak)
        if method == "max_rate_fraction":
            level = settings.threshold_fraction * dvdt[top]
            index = upward_crossings_before(dvdt, level, floor, top)
        else:  # second_derivative_peak
            lookback = max(1, int(round(SECOND_DERIVATIVE_LOOKBACK_MS * 1e-3
                                        * trace.sampling_rate_hz)))
            lo = np.maximum(floor, onset - lookback)
            index = vertices(d2, span_argmax(d2, lo, top))[0]
    return index, interp_many(trace.smooth_mv, index)


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


#: Polynomial order of the local fit whose maximum is the peak.
PEAK_ORDER = 4
#: The peak's fit window is the shortest whose noise SD at the peak is at most this (mV) ...
PEAK_NOISE_MV = 0.2
#: ... and at most this many times the spike's width at half amplitude.
PEAK_WIDTH_FACTOR = 0.4


def peak_windows(voltage_mv: np.ndarray, centre: np.ndarray, threshold_mv: np.ndarray,
                 noise_mv: np.ndarray) -> np.ndarray:
    """Window (samples) of each spike's peak fit: the shortest whose noise SD at the peak is
    at most :data:`PEAK_NOISE_MV`, at most :data:`PEAK_WIDTH_FACTOR` times the number of
    samples around `centre` above half the spike's amplitude (the sample at `centre` less
    `threshold_mv`; where the threshold is unknown, the shortest window)."""
    v = np.asarray(voltage_mv, dtype=float)
    centre = np.asarray(centre, dtype=np.int64)
    level = threshold_mv + 0.5 * (v[centre] - threshold_mv)
    known = np.isfinite(level)
    level = np.where(known, level, np.inf)
    ends = np.minimum(centre + FIRST_BELOW_HEAD, v.size)
    after = first_below(v, level, centre, ends)
    before = last_below(v, level, np.maximum(centre - FIRST_BELOW_HEAD, 0), centre)
    width = np.where(known & (after > 0) & (before >= 0), after - before - 1, 0)
    widest = np.floor(PEAK_WIDTH_FACTOR * width).astype(np.int64)
    windows = matched_windows(noise_mv, np.full(centre.size, PEAK_NOISE_MV), widest,
                              PEAK_ORDER, 0, 1.0)
    return np.where(windows <= widest, windows, 0)


def fitted_peaks(voltage_mv: np.ndarray, peak_sample: np.ndarray, threshold_mv: np.ndarray,
                 noise_mv: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Peak of each spike: the maximum of a local quartic fit (:func:`peak_windows`).

    Returns (fractional index, value in mV); NaN where the window leaves the trace.
    """
    windows = peak_windows(voltage_mv, peak_sample, threshold_mv, noise_mv)
    position, value = np.full(windows.size, np.nan), np.full(windows.size, np.nan)
    fit = windows > 0
    position[fit], value[fit] = fitted_extremes(voltage_mv, np.asarray(peak_sample)[fit],
                                                windows[fit], PEAK_ORDER, 0, True)
    return position, value


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
    up[k] = upward_crossings_before(v, level[k], np.floor(threshold_position[k]).astype(np.int64), p)
    j = first_below(v, level[k], p, np.asarray(end_index, dtype=np.int64)[k])
    found = j > 0
    jj = j[found]
    down[k[found]] = (jj - 1) + (v[jj - 1] - level[k][found]) / (v[jj - 1] - v[jj])
    both = np.isfinite(up) & np.isfinite(down)
    width[both] = (down[both] - up[both]) / sampling_rate_hz * 1e3
    above[both] = (np.floor(down[both]) - np.ceil(up[both]) + 1).astype(np.int64)
    return width, up, down, above


def troughs(smooth_mv: np.ndarray, peak_sample: np.ndarray, end_index: np.ndarray,
            end_position: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Minimum of the smoothed voltage from each peak to its search end.

    Parameters
    ----------
    smooth_mv : array_like
        The smoothed voltage.
    peak_sample : ndarray of int
        Largest sample of each spike.
    end_index : ndarray of int
        Sample (exclusive) each search stops at.
    end_position : ndarray, optional
        Where each search ends between samples (fractional index, NaN: at its last sample),
        as a current step's end does.

    Returns
    -------
    index : ndarray
        Fractional index of the trough (NaN where the span holds fewer than two samples).
    value_mv : ndarray
        The trough's voltage.

    Notes
    -----
    The extremum is refined with a parabola through the lowest sample and its neighbours
    when it lies inside the span. When the lowest sample is the span's last and the span
    ends later (`end_position`), the voltage there, linearly interpolated between the
    samples either side, is the trough when it is lower: a voltage still falling
    when the search ends reaches its lowest at the end, not at the last sample before it.
    The smoothed trace is used so that recording noise does not pull the minimum down.
    """
    peak_sample = np.asarray(peak_sample, dtype=np.int64)
    end_index = np.asarray(end_index, dtype=np.int64)
    index = np.full(peak_sample.size, np.nan)
    value = np.full(peak_sample.size, np.nan)
    ok = end_index > peak_sample + 1
    if not ok.any():
        return index, value
    p, e = peak_sample[ok], end_index[ok]
    j = span_argmax(smooth_mv, p, e - 1, largest=False)
    inside = (j > p) & (j < e - 1)
    frac, val = vertices(smooth_mv, j)
    index[ok] = np.where(inside, frac, j)
    value[ok] = np.where(inside, val, smooth_mv[j])
    if end_position is not None:
        end = np.asarray(end_position, dtype=float)[ok]
        n = len(smooth_mv)
        later = (j == e - 1) & np.isfinite(end) & (end > j) & (end < n - 1)
        if later.any():
            at = end[later]
            k = np.floor(at).astype(np.int64)
            low, high = np.asarray(smooth_mv[k], float), np.asarray(smooth_mv[k + 1], float)
            there = low + (at - k) * (high - low)
            lower = there < np.asarray(smooth_mv[j[later]], float)
            rows = np.flatnonzero(ok)[later][lower]
            index[rows], value[rows] = at[lower], there[lower]
    return index, value


#: Polynomial order of the local fit whose minimum is the trough.
TROUGH_ORDER = 4
#: The trough's fit window is the shortest whose noise SD at the trough is at most this (mV) ...
TROUGH_NOISE_MV = 0.15
#: ... and at most this long (ms).
TROUGH_LONGEST_MS = 1.0


def trough_windows(noise_mv: np.ndarray, sampling_rate_hz: float) -> np.ndarray:
    """Window (samples) of each spike's trough fit: the shortest whose noise SD at the trough
    is at most :data:`TROUGH_NOISE_MV`, at most :data:`TROUGH_LONGEST_MS` long; 0 where even
    the shortest a quartic fit needs is longer (no fit)."""
    noise_mv = np.asarray(noise_mv, dtype=float)
    widest = int(np.floor(TROUGH_LONGEST_MS * 1e-3 * sampling_rate_hz))
    widest -= (widest + 1) % 2
    windows = matched_windows(noise_mv, np.full(noise_mv.size, TROUGH_NOISE_MV),
                              np.full(noise_mv.size, widest), TROUGH_ORDER, 0, 1.0)
    return np.where(windows <= widest, windows, 0)


def fitted_troughs(voltage_mv: np.ndarray, sampling_rate_hz: float,
                   trough_position: np.ndarray, peak_sample: np.ndarray,
                   end_index: np.ndarray, noise_mv: np.ndarray, smoothing_window: int
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Trough of each spike where the smoothed voltage is too noisy: the minimum of a local
    quartic fit to the raw samples.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    sampling_rate_hz : float
    trough_position : ndarray
        The smoothed voltage's minimum (:func:`troughs`), the fit's centre (NaN: none).
    peak_sample, end_index : ndarray of int
        Each trough's search span, from the peak to `end_index` (exclusive).
    noise_mv : ndarray
        Recording noise SD per spike (:func:`~spikemeasure.analysis.spike_rates.noise_before`).
    smoothing_window : int
        Samples of the smoothed voltage's quadratic fit (`--smoothing`).

    Returns
    -------
    position : ndarray
        Fractional sample index of the fit's minimum; NaN where no fit is made: the noise
        the smoothing leaves (`noise_mv` times its gain) is at most :data:`TROUGH_NOISE_MV`
        or unknown, the window (:func:`trough_windows`) would reach the peak or the span's
        last sample, or the fit's minimum lies outside the span.
    value_mv : ndarray
        The fit's minimum (NaN likewise).

    Notes
    -----
    Among many noisy samples around a broad minimum the lowest is picked, so the minimum of
    the samples, or of a short smoothing of them, reads low; a least-squares polynomial over
    a window of samples has few degrees of freedom and follows the noise far less (see
    *Extremes between samples* in docs/measurements.md).
    """
    position = np.asarray(trough_position, dtype=float)
    n = position.size
    out_position, out_value = np.full(n, np.nan), np.full(n, np.nan)
    windows = trough_windows(noise_mv, sampling_rate_hz)
    centre = np.round(np.nan_to_num(position, nan=-1.0)).astype(np.int64)
    peak = np.asarray(peak_sample, dtype=np.int64)
    end = np.asarray(end_index, dtype=np.int64)
    half = windows // 2
    left = np.asarray(noise_mv, dtype=float) * fit_noise_gain(int(smoothing_window), 2, 0)
    fit = (np.isfinite(position) & (left > TROUGH_NOISE_MV) & (windows > 0)
           & (centre - half > peak) & (centre + half < end - 1))
    if not fit.any():
        return out_position, out_value
    at, value = fitted_extremes(voltage_mv, centre[fit], windows[fit], TROUGH_ORDER, 0, False)
    inside = np.isfinite(value) & (at > peak[fit]) & (at < end[fit] - 1)
    rows = np.flatnonzero(fit)[inside]
    out_position[rows], out_value[rows] = at[inside], value[inside]
    return out_position, out_value


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


def extreme_lines() -> list[str]:
    """The section of ``docs/measurements.md`` on the extremes found between samples."""
    return [
        "",
        "## Extremes between samples",
        "",
        "The largest sample of a noisy spike lies above its true peak on average (among many "
        "noisy values the largest is picked), and so does the largest value of a spline through "
        "those samples; likewise the most negative value of a noisy derivative lies beyond the "
        "true fastest fall. peak_mv and min_dvdt_v_per_s are instead the extreme of one "
        "least-squares polynomial fitted to the raw samples around it (Savitzky and Golay "
        "1964: a local polynomial fit; Fan and Gijbels 1996, ch. 3, on choosing its window "
        "between noise and bias). A fit has few degrees of freedom, so its extreme follows "
        "the noise far less than a curve through every sample does.",
        "",
        "Each window is matched twice: to the noise, measured before the spike's threshold "
        "(1.4826 times the median absolute second difference, divided by sqrt(6); Rousseeuw "
        "and Croux 1993), as the shortest window whose noise at the extreme is small enough; "
        "and to the extreme itself, never wider than a fraction of its own width, where a "
        "low-order polynomial still follows it. A quartic (peak) passes a symmetric extreme's "
        "curvature and its fourth-order term; a quintic (fall) passes the asymmetry of the "
        "fall's dV/dt too. Numbers: peak, the shortest window whose noise SD at the peak is at "
        f"most {PEAK_NOISE_MV:g} mV, at most {PEAK_WIDTH_FACTOR:g} times the width at half "
        "amplitude (where even the seven samples a quartic fit needs are wider than that, "
        "the cubic spline through the largest sample and three samples either side is kept); "
        f"fall, at most {FALL_NOISE_FRACTION * 100:g} % of the fall's rate, at most "
        f"{FALL_WIDTH_FACTOR:g} times the span where dV/dt is beyond half its most negative "
        "value (on a local quadratic fit's dV/dt over `--rate-smoothing`). The extreme is "
        "searched on a grid of 1/100 sample within a quarter of the window of its centre and "
        "refined with a parabola; the window moves once when the extreme lies at the end of "
        "that span.",
        "",
        "max_dvdt_v_per_s keeps the quintic spline through the (noise-matched smoothed) "
        "samples: the rise's peak of dV/dt is narrow, a few samples at 10 kHz, and the spline "
        "already meets its target there. The trough is the smoothed voltage's minimum where "
        f"the noise the smoothing leaves there is at most {TROUGH_NOISE_MV:g} mV; where it is "
        "more (a short smoothing window in samples, a noisy recording), the minimum of a "
        "quartic fit, over the shortest window whose noise SD at the trough is at most "
        f"{TROUGH_NOISE_MV:g} mV and at most {TROUGH_LONGEST_MS:g} ms long (the fast afterhyperpolarizations of the "
        "published models still follow a quartic over that span), fitted only where the "
        "window stays between the peak and the end of the trough's search; elsewhere the "
        "smoothed voltage's minimum is kept. At 10 kHz with 0.5 mV of noise the smoothed "
        "minimum (no smoothing at all: the smoothing window is 3 samples there) read 0.3 mV "
        "low in median.",
    ]
