"""How much each spike's values could move with the recording's own noise: their SDs.

The noise of a recording is measured on its quiet stretch, where it is all there is, and kept
as its autocovariance, so its spectrum (white noise, filtered noise, mains hum) carries over.
Each spike value is, to first order, a weighted sum of the samples around the spike; its SD is
that sum applied to the measured noise (:mod:`~spikemeasure.analysis.noise_model`):
``sqrt(w' C w)`` with C the noise autocovariance. The weights follow the estimators of
:mod:`~spikemeasure.analysis.spike_features` step by step. The biases the recording measures
(between samples, from smoothing, from drift) are added in quadrature, per estimator.
Functions take arrays and a sampling rate and return arrays; nothing here reads files or prints.
"""
from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
from scipy.interpolate import CubicSpline

from ..errors import InvalidSettingError
from .detection import (SMOOTHING_POLYORDER, DetectionSettings, savgol_coeffs,
                        smoothing_window_samples)
from .spikes import SpikeMeasurements
from .local_fits import fit_weights_at
from .spike_features import PEAK_ORDER, onset_window, peak_windows
from .spike_rates import max_rate_weights, noise_before
from .sweeps import CurrentStep
from .line_noise import LineNoise, removal_sd_mv
# the noise the SDs are computed from, importable from here as before
from .noise_model import (DRIFT_BLOCK_MS, MAX_QUIET_MS, MIN_QUIET_MS, SPIKE_CLEARANCE_MS,
                          NoiseModel, measured_noise, quiet_stretch)

__all__ = ["NoiseModel", "SpikeUncertainty", "SpikesWithUncertainty", "SD_COLUMNS",
           "MIN_QUIET_MS", "MAX_QUIET_MS", "SPIKE_CLEARANCE_MS", "quiet_stretch",
           "measured_noise", "spike_uncertainty", "with_uncertainty", "sd_values"]

#: The columns this module fills, each named after its value's column.
SD_COLUMNS: tuple[str, ...] = ("threshold_mv_sd", "peak_mv_sd", "half_width_ms_sd",
                               "max_dvdt_v_per_s_sd", "ahp_depth_mv_sd")


@dataclass(frozen=True)
class SpikeUncertainty:
    """SDs of spike values, aligned with the spikes (NaN where the value or the noise is
    unknown); the columns of :data:`SD_COLUMNS`."""

    threshold_mv_sd: np.ndarray
    peak_mv_sd: np.ndarray
    half_width_ms_sd: np.ndarray
    max_dvdt_v_per_s_sd: np.ndarray
    ahp_depth_mv_sd: np.ndarray


@dataclass(frozen=True)
class SpikesWithUncertainty(SpikeMeasurements):
    """:class:`~spikemeasure.analysis.spikes.SpikeMeasurements` with the SDs of
    :data:`SD_COLUMNS` beside the values (kept by ``shifted``, not by ``subset``)."""

    threshold_mv_sd: np.ndarray
    peak_mv_sd: np.ndarray
    half_width_ms_sd: np.ndarray
    max_dvdt_v_per_s_sd: np.ndarray
    ahp_depth_mv_sd: np.ndarray


def sd_values(spikes: SpikeMeasurements, name: str) -> np.ndarray:
    """The SD column `name` of a sweep's spikes: NaN per spike when they carry no SDs."""
    if name not in SD_COLUMNS:
        raise InvalidSettingError(f"`name` must be one of {', '.join(SD_COLUMNS)}, got {name!r}")
    found = getattr(spikes, name, None)
    return np.full(len(spikes), np.nan) if found is None else np.asarray(found, dtype=float)


# each the kernel's dot product with the samples around the centre, times the coefficient;
# the kernel is a smoothing filter (see _Filter.at) or one row of weights (a unit sample).
_Term = tuple["_Filter | np.ndarray", np.ndarray, np.ndarray]


@dataclass(frozen=True)
class _Filter:
    """A Savitzky-Golay filter of the estimators, with its weights at the window centre."""

    window: int
    deriv: int
    delta: float
    centre_weights: np.ndarray

    def at(self, centre: np.ndarray, n_samples: int) -> tuple[np.ndarray, np.ndarray]:
        """(weights per spike, window centres) of the filtered value at each sample `centre`:
        within half a window of an end of the trace, the fit to the end window evaluated off
        its centre, as ``savgol_filter(mode='interp')`` does."""
        half = self.window // 2
        centre = np.asarray(centre, dtype=np.int64)
        inner = np.clip(centre, half, max(half, n_samples - 1 - half))
        shift = np.clip(centre - inner, -half, half)
        weights = np.empty((centre.size, self.window))
        for k in np.unique(shift):
            weights[shift == k] = (self.centre_weights if k == 0 else savgol_coeffs(
                self.window, SMOOTHING_POLYORDER, deriv=self.deriv, delta=self.delta,
                pos=half + int(k), use="dot"))
        return weights, inner
_UNIT = np.ones(1)
_FOURTH_DIFFERENCE = np.array([1.0, -4.0, 6.0, -4.0, 1.0])
#: Bounds of a cubic spline's interpolation error, per h**4 times the largest fourth
#: derivative: 5/384 on the value and sqrt(3)/216 + 1/24 on its first derivative (per sample)
#: (Hall and Meyer 1976, from memory).
SPLINE_VALUE_BOUND = 5.0 / 384.0
SPLINE_SLOPE_BOUND = np.sqrt(3.0) / 216.0 + 1.0 / 24.0
#: An error known only to lie within +/- a bound counts with the SD of a uniform distribution
#: over that range, bound / sqrt(3) (JCGM 100:2008, the Guide to the expression of
#: uncertainty in measurement, 4.3.7).
BOUND_TO_SD = 1.0 / np.sqrt(3.0)
_QUADRATIC_ELEMENTS = 4_000_000   # (spikes x weights^2) evaluated at once, to bound memory
#: Weights spanning at most this many samples take their quadratic form with one block of
#: the autocovariance's Toeplitz matrix (:func:`_toeplitz_forms`); wider ones pair by pair.
_TOEPLITZ_SPAN = 256
_spline_cache: list[CubicSpline] = []


def _peak_spline() -> CubicSpline:
    """The not-a-knot cubic splines through the unit vectors at nodes -3..3: evaluated at an
    offset, the weights of the seven samples in the spline's value there."""
    if not _spline_cache:
        nodes = np.arange(-3.0, 4.0)
        _spline_cache.append(CubicSpline(nodes, np.eye(nodes.size), axis=0))
    return _spline_cache[0]


def _windows(v: np.ndarray, kernel: np.ndarray, centre: np.ndarray) -> np.ndarray:
    """The kernel's dot product with v around each centre; NaN where the window leaves v."""
    half = kernel.size // 2
    idx = np.asarray(centre, dtype=np.int64)[..., None] + np.arange(-half, half + 1)
    inside = ((idx >= 0) & (idx < v.size)).all(axis=-1)
    out = v[np.clip(idx, 0, v.size - 1)] @ kernel
    return np.where(inside, out, np.nan)


def _span_argmax(v: np.ndarray, kernel: np.ndarray, lo: np.ndarray, hi: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Centre of the largest filtered value in each span [lo, hi], and the filtered values at
    it and its two neighbours (n, 3)."""
    width = int(max(1, (hi - lo).max() + 1)) if lo.size else 1
    centre = lo[:, None] + np.arange(width)
    values = _windows(v, kernel, np.minimum(centre, hi[:, None]))
    values = np.where(centre <= hi[:, None], values, -np.inf)
    top = lo + np.argmax(np.nan_to_num(values, nan=-np.inf), axis=1)
    around = _windows(v, kernel, top[:, None] + np.arange(-1, 2))
    return top, around


def _vertex_terms(kernel: _Filter, centre: np.ndarray, offset: np.ndarray) -> list[_Term]:
    """The value at `offset` of the parabola through the filtered values at centre-1, centre,
    centre+1: the extreme refined between samples (first order: its position held fixed)."""
    d = offset
    return [(kernel, centre - 1, 0.5 * (d * d - d)), (kernel, centre, 1.0 - d * d),
            (kernel, centre + 1, 0.5 * (d * d + d))]


def _parabola_offset(around: np.ndarray) -> np.ndarray:
    """Vertex offset of the parabola through three values, within half a sample."""
    a, b, c = around[:, 0], around[:, 1], around[:, 2]
    curvature = a - 2.0 * b + c
    with np.errstate(divide="ignore", invalid="ignore"):
        d = np.where(curvature != 0.0, 0.5 * (a - c) / curvature, 0.0)
    return np.clip(np.nan_to_num(d), -0.5, 0.5)


def _scaled(terms: list[_Term], factor) -> list[_Term]:
    return [(k, c, w * factor) for k, c, w in terms]


def _onset_slopes_and_windows(v: np.ndarray, rate_hz: float, position: np.ndarray,
                              longest: int, level: float) -> tuple[np.ndarray, np.ndarray]:
    """Per spike, the dV/dt weights (V/s per mV) of the local quadratic fit whose window
    :func:`~spikemeasure.analysis.spike_features.onset_window` chose for its threshold
    crossing, padded to a common odd length (n, longest), and that window. Computed once
    per sweep, for the threshold's terms and for its smoothing bias."""
    noise = noise_before(v, np.asarray(position, dtype=float) - longest)
    windows = onset_window(noise, rate_hz, level, longest)
    # onset_window may pick a window longer than the smoothing window
    longest = int(max([longest] + list(windows)))
    out = np.zeros((np.asarray(position).size, longest))
    # Few distinct windows among many spikes: one set of weights per window.
    for window in np.unique(windows):
        pad = (longest - window) // 2
        out[windows == window, pad:pad + window] = savgol_coeffs(
            int(window), SMOOTHING_POLYORDER, deriv=1, delta=1e3 / rate_hz, use="dot")
    return out, windows


def _onset_smoothing_bias(v: np.ndarray, kernels: dict, position: np.ndarray,
                          settings: DetectionSettings,
                          onset: tuple[np.ndarray, np.ndarray] | None) -> np.ndarray:
    """Per spike, how far (mV) the onset window's smoothing may still have moved the threshold
    voltage after the estimator's correction: 0 unless the threshold is the ``onset_rate``
    crossing.

    The estimator moves the crossing by the smoothing bias of an exponentially growing rate
    (:func:`~spikemeasure.analysis.spike_features.spike_thresholds`); what it may have left is
    estimated as the disagreement of two models of that bias: the exponential one the
    estimator used (:func:`_exponential_shift`) and the leading term of the local fit's
    series, which reads the rate's measured curvature instead of assuming its form
    (:func:`_series_shift`). Where the estimator kept the linear crossing (a rate that does
    not grow between the two samples) nothing was corrected and the series term is the whole
    bias. The shift in samples times the smoothed voltage's step per sample is the voltage.
    `onset`: :func:`_onset_slopes_and_windows` of the spikes (None unless the threshold is
    the ``onset_rate`` crossing).
    """
    n = np.asarray(position).size
    if settings.threshold_method != "onset_rate" or n == 0:
        return np.zeros(n)
    smooth = kernels["smooth"]
    rate_hz = kernels["rate_hz"]
    slopes, windows = onset
    i = np.floor(np.nan_to_num(position)).astype(np.int64)
    before, after = _rows_dot(v, slopes, i), _rows_dot(v, slopes, i + 1)
    series = _series_shift(v, slopes, windows, position, after - before)
    exponential = _exponential_shift(slopes * (1e3 / rate_hz), before, after)
    left = np.where(np.isfinite(exponential), series - exponential, series)
    s_step = (_windows(v, smooth.centre_weights, i + 1)
              - _windows(v, smooth.centre_weights, i))
    moved = np.abs(s_step * left)
    return np.where(np.isfinite(moved), moved, 0.0)


def _series_shift(v: np.ndarray, slopes: np.ndarray, windows: np.ndarray,
                  position: np.ndarray, d_step: np.ndarray) -> np.ndarray:
    """Per spike, how many samples early the onset window's fit crosses the onset rate by the
    leading term of its smoothing bias: the dV/dt of a local quadratic fit over 2m + 1
    samples reads a rate whose own curvature (d3V/dt3, per sample**2) is c high by
    c (3 m**2 + 3 m - 1) / 30 [1]_ (the fit's sums of x**4 and x**2), which moves the crossing
    by that over the rate's step per sample `d_step`. The curvature is read from the same
    dV/dt, m samples (at least one) either side of the crossing.

    References
    ----------
    .. [1] A. Savitzky and M. J. E. Golay, "Smoothing and differentiation of data by
       simplified least squares procedures", Analytical Chemistry 36(8):1627-1639, 1964.
    """
    centre = np.round(np.nan_to_num(position)).astype(np.int64)
    half = windows // 2
    spacing = np.maximum(1, half)
    bend = (_rows_dot(v, slopes, centre + spacing) - 2.0 * _rows_dot(v, slopes, centre)
            + _rows_dot(v, slopes, centre - spacing)) / spacing ** 2
    excess = bend * (3 * half * half + 3 * half - 1) / 30.0
    with np.errstate(divide="ignore", invalid="ignore"):
        return excess / d_step


def _exponential_shift(weights: np.ndarray, before: np.ndarray, after: np.ndarray
                       ) -> np.ndarray:
    """Per spike, how many samples early the fit crosses a rate growing as exp(k t) between
    its fitted values `before` and `after` at two consecutive samples (k = log(after /
    before) per sample): log(R) / k, with R = (weights . exp(k x)) / k the fit's reading of
    such a rate over the true one, `weights` its slope weights per sample on x = -m .. m
    (rows padded with zeros to a common odd length). NaN where the rate does not grow or R
    is not positive: the estimator keeps the linear crossing there
    (:func:`~spikemeasure.analysis.spike_features.spike_thresholds`)."""
    grows = (before > 0) & (after > before)
    k = np.log(np.where(grows, after, 2.0) / np.where(grows, before, 1.0))
    half = weights.shape[1] // 2
    x = np.arange(-half, half + 1, dtype=float)
    ratio = np.einsum("ij,ij->i", np.exp(k[:, None] * x[None, :]), weights) / k
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = np.log(ratio) / k
    return np.where(grows & (ratio > 0) & np.isfinite(shift), shift, np.nan)


def _rows_dot(v: np.ndarray, rows: np.ndarray, centre: np.ndarray) -> np.ndarray:
    """Each row's dot product with v around its centre; NaN where the window leaves v."""
    half = rows.shape[1] // 2
    idx = np.asarray(centre, dtype=np.int64)[:, None] + np.arange(-half, half + 1)
    inside = ((idx >= 0) & (idx < v.size)).all(axis=1)
    out = np.einsum("ij,ij->i", v[np.clip(idx, 0, v.size - 1)], rows)
    return np.where(inside, out, np.nan)


def _threshold_terms(v: np.ndarray, kernels: dict, position: np.ndarray, peak: np.ndarray,
                     settings: DetectionSettings,
                     onset: tuple[np.ndarray, np.ndarray] | None) -> list[_Term]:
    """Threshold voltage: the smoothed voltage at the linear crossing of a level by the
    smoothed dV/dt between samples i and i+1. Moving dV/dt there by e moves the crossing by
    -e / (dV/dt[i+1] - dV/dt[i]) samples and the voltage by that times the voltage step."""
    i = np.floor(np.nan_to_num(position)).astype(np.int64)
    b = position - i
    smooth, slope = kernels["smooth"], kernels["slope"]
    s_step = (_windows(v, smooth.centre_weights, i + 1)
              - _windows(v, smooth.centre_weights, i))
    if settings.threshold_method == "onset_rate":
        # the crossing is found again with a window matched to the noise before it
        # (spike_features._noise_matched_onsets): that window's slope weights, per spike
        slopes = onset[0]
        d_step = _rows_dot(v, slopes, i + 1) - _rows_dot(v, slopes, i)
        slope_terms = (slopes, slopes)
    else:
        d_step = (_windows(v, slope.centre_weights, i + 1)
                  - _windows(v, slope.centre_weights, i))
        slope_terms = (slope, slope)
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = s_step / d_step
    terms = [(smooth, i, 1.0 - b), (smooth, i + 1, b),
             (slope_terms[0], i, -gain * (1.0 - b)), (slope_terms[1], i + 1, -gain * b)]
    if settings.threshold_method == "max_rate_fraction":
        # the level is a fraction of the largest smoothed dV/dt, itself noisy
        top, _ = _span_argmax(v, slope.centre_weights, i + 1, np.maximum(peak, i + 1))
        terms.append((slope, top, gain * settings.threshold_fraction))
    elif settings.threshold_method != "onset_rate":
        # the time of the largest d2V/dt2 is not a smooth function of the samples
        terms = _scaled(terms, np.nan)
    return terms


def _peak_terms(v: np.ndarray, position: np.ndarray, noise_mv: np.ndarray,
                threshold_mv: np.ndarray) -> tuple[list[_Term], list[_Term]]:
    """Peak voltage at its maximum (the position's own shift changes the value only to second
    order there): the local quartic fit over the window
    :func:`~spikemeasure.analysis.spike_features.peak_windows` chooses again, centred on the
    nearest sample; where the spike is too narrow for a fit, the spline through the largest
    sample p and three either side; and the weights of that spline's interpolation error
    bound (zero where the fit is used). `noise_mv`: the noise before each threshold
    (:func:`~spikemeasure.analysis.spike_rates.noise_before`)."""
    near = np.round(np.nan_to_num(position)).astype(np.int64)
    around = np.clip(near[:, None] + np.arange(-1, 2), 0, v.size - 1)
    p = around[np.arange(near.size), np.argmax(v[around], axis=1)]
    weights = _peak_spline()(np.clip(position - p, -1.0, 1.0))  # (n, 7)
    windows = peak_windows(v, p, threshold_mv, noise_mv)
    fit = windows > 0
    weights[fit] = 0.0
    spline = [(_UNIT, p + k, weights[:, k + 3]) for k in range(-3, 4)]
    rows = fit_weights_at(windows, np.where(fit, position - near, 0.0), PEAK_ORDER, 0)
    # where the spline is kept, its interpolation error: the largest fourth difference of
    # its samples within a sample of the largest, times the bound's constant
    idx = np.clip(p[:, None] + np.arange(-3, 4), 0, v.size - 1)
    fourth = np.diff(v[idx], 4, axis=1)                      # centres p - 1, p, p + 1
    at = np.argmax(np.abs(np.nan_to_num(fourth)), axis=1) - 1
    bound = np.where(fit, 0.0, SPLINE_VALUE_BOUND * BOUND_TO_SD)
    return (spline + [(rows, near, fit.astype(float))],
            [(_FOURTH_DIFFERENCE, p + at, bound)])


def _crossing_terms(v: np.ndarray, position: np.ndarray, level: list[_Term]) -> list[_Term]:
    """Position (samples) of the linear crossing of a level between samples k and k+1:
    (level - v[k]) / (v[k+1] - v[k]) from k."""
    k = np.floor(np.nan_to_num(position)).astype(np.int64)
    b = position - k
    inside = (k >= 0) & (k + 1 < v.size)
    step = np.where(inside, v[np.clip(k + 1, 0, v.size - 1)] - v[np.clip(k, 0, v.size - 1)],
                    np.nan)
    inverse = 1.0 / np.where(step != 0.0, step, np.nan)
    return (_scaled(level, inverse)
            + [(_UNIT, k, -(1.0 - b) * inverse), (_UNIT, k + 1, -b * inverse)])


def _crossing_time_per_mv(v: np.ndarray, rate: float, start: np.ndarray, end: np.ndarray
                          ) -> np.ndarray:
    """How much (ms) the half-width changes per mV of its level: the level moves both
    crossings, each by the change over the voltage's slope between the samples around it;
    0 where a crossing is unknown."""
    total = np.zeros(np.asarray(start).size)
    for position in (start, end):
        k = np.clip(np.floor(np.nan_to_num(position)).astype(np.int64), 0, v.size - 2)
        step = np.abs(v[k + 1] - v[k])
        with np.errstate(divide="ignore"):
            total += np.where(np.isfinite(position) & (step > 0), 1.0 / step, 0.0)
    return total * 1e3 / rate


def _width_terms(v: np.ndarray, rate: float, start: np.ndarray, end: np.ndarray,
                 threshold: list[_Term], peak: list[_Term]) -> list[_Term]:
    """Half-width in ms: the downward minus the upward crossing of (threshold + peak) / 2."""
    level = _scaled(threshold, 0.5) + _scaled(peak, 0.5)
    ms = 1e3 / rate
    return (_scaled(_crossing_terms(v, end, level), ms)
            + _scaled(_crossing_terms(v, start, level), -ms))


def _max_rate_terms(v: np.ndarray, rate: float, threshold: np.ndarray, peak: np.ndarray,
                    settings: DetectionSettings, noise_mv: np.ndarray
                    ) -> tuple[list[_Term], list[_Term], list[_Term]]:
    """Largest dV/dt: the estimator's own weights on the samples
    (:func:`~spikemeasure.analysis.spike_rates.max_rate_weights`: the noise-matched local
    quartic fit, then the quintic spline's derivative at its extreme), and those of its
    smoothing's bias read on the recording and of its spline's interpolation error bound
    (the cubic spline's, which a quintic through the same samples meets as well or better
    where the samples resolve the rise). `noise_mv`: the noise before each threshold."""
    centre, weights, bias, fourth = max_rate_weights(
        v, rate, threshold, peak, settings.rate_smoothing_ms, smoothing_bias=True,
        noise_mv=noise_mv)
    one = np.ones(centre.size)
    return ([(weights, centre, one)], [(bias, centre, one)],
            [(fourth, centre, np.full(centre.size,
                                      SPLINE_SLOPE_BOUND * BOUND_TO_SD * rate / 1e3))])


def _trough_terms(kernels: dict, position: np.ndarray) -> list[_Term]:
    """Trough voltage: the parabola through the smoothed voltage around the lowest sample."""
    centre = np.round(np.nan_to_num(position)).astype(np.int64)
    return _vertex_terms(kernels["smooth"], centre, position - centre)


def _crossing_interpolation_terms(v: np.ndarray, position: np.ndarray) -> list[_Term]:
    """How far (samples) the linear interpolation moved a crossing between samples k and
    k+1, as weights on the samples: the chord lies c b (1 - b) / 2 above a curve of second
    difference c at fraction b [1]_, which moves the crossing by that over the step
    v[k+1] - v[k]; c is the second difference at k and at k+1, interpolated at b.

    References
    ----------
    .. [1] F. B. Hildebrand, "Introduction to Numerical Analysis", 2nd ed., McGraw-Hill,
       1974, sec. 2.6 (the error of linear interpolation; from memory).
    """
    k = np.floor(np.nan_to_num(position)).astype(np.int64)
    b = position - k
    inside = (k >= 1) & (k + 2 < v.size)
    kk = np.clip(k, 1, max(1, v.size - 3))
    step = np.where(inside, v[np.clip(kk + 1, 0, v.size - 1)] - v[kk], np.nan)
    scale = 0.5 * b * (1.0 - b) / np.where(step != 0.0, step, np.nan)
    # second differences at k and k + 1, on samples k - 1 .. k + 2 (centred between k, k+1:
    # a kernel of four samples around the centre k + 1, padded to five)
    rows = np.stack([(1.0 - b), -2.0 * (1.0 - b) + b, (1.0 - b) - 2.0 * b, b,
                     np.zeros_like(b)], axis=1)
    return [(rows * scale[:, None], k + 1, -np.ones(k.size))]


def _bias_sd(terms: list[_Term], v: np.ndarray, noise: NoiseModel) -> np.ndarray:
    """The size of a bias estimated from the recording as the weighted sum `terms` of its
    samples: sqrt(max(b**2 - s**2, 0)), b the sum and s its noise SD, whose expectation is
    the squared bias (the noise's share of b**2 taken out); 0 where unknown."""
    pos, w, valid = _combined(terms, v.size)
    value = np.einsum("ij,ij->i", w, v[np.clip(pos, 0, v.size - 1)])
    sd = _combined_sd(pos, w, valid, noise)
    size = np.sqrt(np.clip(value * value - sd * sd, 0.0, None))
    return np.where(valid & np.isfinite(size), size, 0.0)


def _combined(terms: list[_Term], n_samples: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(positions, weights, valid) per spike of a sum of terms: the samples and their
    weights (zero in rows not valid: a coefficient NaN or a kernel off the trace)."""
    positions, weights = [], []
    for kernel, centre, coef in terms:
        if isinstance(kernel, _Filter):
            kernel, centre = kernel.at(centre, n_samples)
        half = kernel.shape[-1] // 2
        positions.append(np.asarray(centre, dtype=np.int64)[:, None]
                         + np.arange(-half, half + 1))
        weights.append(np.asarray(coef, dtype=float)[:, None] * np.atleast_2d(kernel))
    pos, w = np.concatenate(positions, axis=1), np.concatenate(weights, axis=1)
    valid = np.isfinite(w).all(axis=1) & ((pos >= 0) & (pos < n_samples)).all(axis=1)
    return pos, np.where(valid[:, None], w, 0.0), valid


def _sd(terms: list[_Term], noise: NoiseModel, n_samples: int) -> np.ndarray:
    """sqrt(w' C w) per spike, C the noise autocovariance; NaN where a coefficient is NaN or
    a kernel leaves the trace."""
    return _combined_sd(*_combined(terms, n_samples), noise)


def _combined_sd(pos: np.ndarray, w: np.ndarray, valid: np.ndarray, noise: NoiseModel
                 ) -> np.ndarray:
    """:func:`_sd` of terms already combined (:func:`_combined`).

    Notes
    -----
    The noise covariance of samples i and j is the autocovariance at lag |i - j| (a
    Toeplitz matrix), so a spike whose weights span few samples needs only the top-left
    corner of that matrix, the same for every spike: its weights are laid out on its span
    (repeated positions summed in the order :func:`_merged` sums them) and the quadratic
    form is taken with that one block (:func:`_toeplitz_forms`), spikes of similar spans
    together. Spikes whose weights lie in two groups far apart (the AHP depth's threshold
    and trough) take each group's form so and the pairs between the groups as one
    correlation of the groups' weights (:func:`_two_group_forms`); any other looks up the
    autocovariance pair by pair (:func:`_paired_forms`).
    """
    acov = noise.autocovariance_mv2
    variance = np.zeros(pos.shape[0])
    nonzero = w != 0.0
    used = nonzero.any(axis=1)
    if used.any():
        lo = np.where(nonzero, pos, np.iinfo(np.int64).max).min(axis=1)
        span = np.where(used, np.where(nonzero, pos, np.iinfo(np.int64).min).max(axis=1)
                        - lo + 1, 0)
        compact = used & (span <= _TOEPLITZ_SPAN)
        for rows, width in _by_width(np.flatnonzero(compact), span):
            variance[rows] = _toeplitz_forms(pos[rows] - lo[rows, None], w[rows], width,
                                             acov)
        rows = np.flatnonzero(used & ~compact)
        if rows.size:
            variance[rows] = _two_group_forms(pos[rows], w[rows], acov)
    return np.where(valid, np.sqrt(np.clip(variance, 0.0, None)), np.nan)


def _by_width(rows: np.ndarray, span: np.ndarray):
    """Yield (rows, width): the rows in groups of spans up to 16, 32, 64, ... samples, each
    with its longest span."""
    size = np.ceil(np.log2(np.maximum(span[rows], 16))).astype(np.int64)
    for bits in np.unique(size):
        some = rows[size == bits]
        yield some, int(span[some].max())


def _dense(offset: np.ndarray, w: np.ndarray, width: int) -> np.ndarray:
    """Each row's weights laid out on `width` samples, the weight `w` at `offset` (0 <=
    offset < `width` where w is not zero), repeated offsets summed."""
    n = w.shape[0]
    # zero weights may sit anywhere: at offset 0 they add nothing
    offset = np.where(w != 0.0, offset, 0)
    slot = (np.arange(n)[:, None] * width + offset).ravel()
    # np.bincount adds each row's weights in their order, as _merged does
    return np.bincount(slot, weights=w.ravel(), minlength=n * width).reshape(n, width)


def _autocovariance_at(acov: np.ndarray, lag: np.ndarray) -> np.ndarray:
    """The autocovariance at each lag (its size, either sign), 0 from its length on."""
    return np.append(acov, 0.0)[np.minimum(np.abs(lag), acov.size)]


def _toeplitz_forms(offset: np.ndarray, w: np.ndarray, width: int, acov: np.ndarray
                    ) -> np.ndarray:
    """w' C w per row, the weights `w` at sample `offset` from the row's first weighted
    sample (0 <= offset < `width` where w is not zero), C the autocovariance's Toeplitz
    matrix (0 from its length on)."""
    return _toeplitz_quadratic(_dense(offset, w, width), acov)


def _toeplitz_quadratic(dense: np.ndarray, acov: np.ndarray) -> np.ndarray:
    """d' C d per row of weights `dense` on consecutive samples."""
    width = dense.shape[1]
    block = _autocovariance_at(acov, np.arange(width)[:, None] - np.arange(width)[None, :])
    # einsum, not the @ operator: no BLAS call (and so no BLAS threads) for these small
    # products
    return np.einsum("ni,ni->n", np.einsum("ni,ij->nj", dense, block), dense)


def _two_group_forms(pos: np.ndarray, w: np.ndarray, acov: np.ndarray) -> np.ndarray:
    """w' C w per row whose weights span more than a Toeplitz block: split at the row's
    widest gap between weighted samples into groups A (before) and B, each within
    :data:`_TOEPLITZ_SPAN` samples, it is a' C a + b' C b + 2 a' C b. With a laid out from
    sample a0 and b from b0, a' C b = sum over k of acov[|b0 - a0 + k|] x[k], x the
    cross-correlation x[k] = sum_i a[i] b[i + k] (k from -(len a - 1) to len b - 1). Rows
    whose groups are wider go pair by pair (:func:`_paired_forms`)."""
    n = pos.shape[0]
    nonzero = w != 0.0
    count = nonzero.sum(axis=1)
    ordered = np.sort(np.where(nonzero, pos, np.iinfo(np.int64).max), axis=1)
    gaps = np.diff(ordered, axis=1)
    gaps = np.where(np.arange(gaps.shape[1]) < (count - 1)[:, None], gaps, -1)
    last_a = np.argmax(gaps, axis=1)
    pick = np.arange(n)
    a0, b0 = ordered[:, 0], ordered[pick, last_a + 1]
    span_a = ordered[pick, last_a] - a0 + 1
    span_b = ordered[pick, count - 1] - b0 + 1
    two = (count > 1) & (span_a <= _TOEPLITZ_SPAN) & (span_b <= _TOEPLITZ_SPAN)
    variance = np.empty(n)
    rows = np.flatnonzero(~two)
    if rows.size:
        variance[rows] = _paired_forms(*_nonzero_first(*_merged(pos[rows], w[rows])), acov)
    rows = np.flatnonzero(two)
    if rows.size == 0:
        return variance
    p, ww = pos[rows], w[rows]
    in_a = p < b0[rows, None]
    width_a, width_b = int(span_a[rows].max()), int(span_b[rows].max())
    a = _dense(p - a0[rows, None], np.where(in_a, ww, 0.0), width_a)
    b = _dense(p - b0[rows, None], np.where(in_a, 0.0, ww), width_b)
    # b padded so that row s of its windows of width_a is b[s - (width_a - 1) + i], i.e.
    # the cross-correlation's lag k = s - (width_a - 1)
    padded = np.zeros((rows.size, width_b + 2 * (width_a - 1)))
    padded[:, width_a - 1:width_a - 1 + width_b] = b
    windows = np.lib.stride_tricks.sliding_window_view(padded, width_a, axis=1)
    cross = np.einsum("nsi,ni->ns", windows, a)
    lag = (b0 - a0)[rows, None] + np.arange(cross.shape[1]) - (width_a - 1)
    between = np.einsum("ns,ns->n", cross, _autocovariance_at(acov, lag))
    variance[rows] = (_toeplitz_quadratic(a, acov) + _toeplitz_quadratic(b, acov)
                      + 2.0 * between)
    return variance


def _paired_forms(pos: np.ndarray, w: np.ndarray, acov: np.ndarray) -> np.ndarray:
    """w' C w per row, looking up the autocovariance of each pair of positions (rows of
    :func:`_nonzero_first`)."""
    # the autocovariance at every lag, 0 from its length on: one look-up per pair of samples
    padded = np.append(acov, 0.0)
    small = pos.size == 0 or int(np.abs(pos).max()) < 2 ** 30
    pos = pos.astype(np.int32 if small else np.int64)
    variance = np.empty(pos.shape[0])
    per_block = max(1, _QUADRATIC_ELEMENTS // max(1, pos.shape[1] ** 2))
    for a in range(0, pos.shape[0], per_block):
        p, ww = pos[a:a + per_block], w[a:a + per_block]
        lag = np.subtract(p[:, :, None], p[:, None, :])
        np.abs(lag, out=lag)
        np.minimum(lag, acov.size, out=lag)
        variance[a:a + per_block] = np.einsum("ni,nij,nj->n", ww, padded.take(lag), ww)
    return variance


def _nonzero_first(pos: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The same weights with each spike's zero weights (padding of shorter windows) moved to
    the end and the columns no spike needs dropped, so the quadratic form runs over the
    positions that count."""
    order = np.argsort(w == 0.0, axis=1, kind="stable")
    width = max(1, int(np.count_nonzero(w, axis=1).max())) if w.size else 1
    order = order[:, :width]
    return np.take_along_axis(pos, order, axis=1), np.take_along_axis(w, order, axis=1)


def _merged(pos: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The same weights with each spike's repeated positions summed into one (terms of one
    value overlap: the smoothed voltage and dV/dt around one crossing share their samples),
    so the quadratic form runs over far fewer pairs."""
    order = np.argsort(pos, axis=1, kind="stable")
    pos = np.take_along_axis(pos, order, axis=1)
    w = np.take_along_axis(w, order, axis=1)
    new = np.ones(pos.shape, dtype=bool)
    new[:, 1:] = pos[:, 1:] != pos[:, :-1]
    slot = np.cumsum(new, axis=1) - 1
    width = int(slot[:, -1].max()) + 1 if pos.size else 0
    n = pos.shape[0]
    slot += np.arange(n)[:, None] * width       # one flat index: the rows laid end to end
    merged_w = np.zeros(n * width)
    np.add.at(merged_w, slot.ravel(), w.ravel())
    merged_pos = np.zeros(n * width, dtype=np.int64)
    merged_pos[slot[new]] = pos[new]
    return merged_pos.reshape(n, width), merged_w.reshape(n, width)


def _kernels(rate: float, settings: DetectionSettings) -> dict:
    """The estimators' Savitzky-Golay filters as (window, derivative order, sample spacing in
    ms; slopes come out in mV/ms = V/s) and their dot-product weights at the window centre."""
    dt_ms = 1e3 / rate
    window = smoothing_window_samples(settings.smoothing_ms, rate)
    short = smoothing_window_samples(settings.rate_smoothing_ms, rate)
    specs = {"smooth": (window, 0, dt_ms), "slope": (window, 1, dt_ms),
             "rate": (short, 1, dt_ms)}
    kernels = {name: _Filter(*spec, savgol_coeffs(spec[0], SMOOTHING_POLYORDER,
                                                  deriv=spec[1], delta=spec[2], use="dot"))
               for name, spec in specs.items()}
    kernels["rate_hz"] = rate
    return kernels


def spike_uncertainty(voltage_mv: np.ndarray, sampling_rate_hz: float,
                      spikes: SpikeMeasurements, noise: NoiseModel | None,
                      settings: DetectionSettings = DetectionSettings()) -> SpikeUncertainty:
    """SD of each spike's threshold, peak, half-width, largest dV/dt and AHP depth that the
    recording's noise implies.

    Parameters
    ----------
    voltage_mv : ndarray
        The sweep's raw voltage in mV, as the spikes were measured on it.
    sampling_rate_hz : float
        Samples per second.
    spikes : SpikeMeasurements
        The sweep's spikes (times from its first sample).
    noise : NoiseModel or None
        From :func:`~spikemeasure.analysis.noise_model.measured_noise`; None gives NaN everywhere.
    settings : DetectionSettings, optional
        The settings the spikes were measured with (windows, threshold definition).

    Returns
    -------
    SpikeUncertainty
        NaN where the value is NaN, where the noise is unknown, and for the threshold (and the
        values built on it) of the ``second_derivative_peak`` definition.

    Notes
    -----
    Each value is linearized around the measured trace: a small change e of the samples
    changes it by ``w . e``, with w from the estimator's own steps (the Savitzky-Golay
    weights of the smoothed voltage and dV/dt [1]_, the linear interpolation of crossings,
    the weights of the cubic spline at the peak, the parabola at an extreme). The noise is a
    stationary process with the measured autocovariance C, so the SD is ``sqrt(w' C w)``
    (first-order propagation of error, [2]_ ch. 3). At a maximum or minimum the shift of its
    position changes the value only to second order (the derivative is zero there), so the
    peak, the largest dV/dt and the trough are the estimator's curve at its extreme. The
    threshold voltage moves with the smoothed voltage and with its time: a change e of dV/dt
    at the crossing of the onset rate shifts it by ``-e / d2V/dt2``. The half-width moves
    with both crossings of its level, each by (change of the level - change of the voltage)
    / slope; the level is (threshold + peak) / 2. AHP depth is threshold minus trough, one
    functional, so noise common to both (a slow hum) cancels as it does in the value.

    Besides the noise, each SD holds, in quadrature, the biases the recording itself
    measures (:func:`_biases`: what the threshold's correction of the onset window's
    smoothing may have left, the max dV/dt's smoothing, the splines
    and the linear crossings between samples, a drift since the quiet stretch), each
    estimated from the samples; a bias read as a weighted sum b of them counts as
    sqrt(max(b**2 - s**2, 0)), s the noise SD of b.

    References
    ----------
    .. [1] A. Savitzky and M. J. E. Golay, "Smoothing and differentiation of data by
       simplified least squares procedures", Analytical Chemistry 36(8):1627-1639, 1964.
    .. [2] P. R. Bevington and D. K. Robinson, "Data Reduction and Error Analysis for the
       Physical Sciences", 3rd ed., McGraw-Hill, 2003.
    """
    v = np.asarray(voltage_mv, dtype=float)
    if v.ndim != 1:
        raise InvalidSettingError("`voltage_mv` must be a 1-D array")
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    n = len(spikes)
    empty = np.full(n, np.nan)
    if noise is None or n == 0:
        return SpikeUncertainty(*(empty.copy() for _ in SD_COLUMNS))
    kernels = _kernels(rate, settings)
    thr = np.asarray(spikes.threshold_s, dtype=float) * rate
    peak_at = np.asarray(spikes.peak_s, dtype=float) * rate
    peak_sample = np.round(np.nan_to_num(peak_at)).astype(np.int64)
    # the noise-matched onset window of each threshold crossing, for its terms and its bias
    onset = (_onset_slopes_and_windows(v, rate, thr, kernels["slope"].window,
                                       settings.onset_rate_v_per_s)
             if settings.threshold_method == "onset_rate" else None)
    threshold = _threshold_terms(v, kernels, thr, peak_sample, settings, onset)
    # the noise before each threshold, which the peak's and the max dV/dt's windows follow
    noise_mv = noise_before(v, thr)
    peak, peak_interpolation = _peak_terms(v, peak_at, noise_mv,
                                           np.asarray(spikes.threshold_mv, dtype=float))
    up = np.asarray(spikes.half_width_start_s) * rate
    down = np.asarray(spikes.half_width_end_s) * rate
    width = _width_terms(v, rate, up, down, threshold, peak)
    ahp = threshold + _scaled(_trough_terms(kernels, np.asarray(spikes.trough_s) * rate), -1.0)
    max_rate, max_rate_bias, max_rate_interpolation = _max_rate_terms(v, rate, thr, peak_at,
                                                                      settings, noise_mv)
    values = {"threshold_mv_sd": (threshold, spikes.threshold_mv),
              "peak_mv_sd": (peak, spikes.peak_mv),
              "half_width_ms_sd": (width, spikes.half_width_ms),
              "max_dvdt_v_per_s_sd": (max_rate, spikes.max_dvdt_v_per_s),
              "ahp_depth_mv_sd": (ahp, spikes.ahp_depth_mv)}
    # biases are no noise, but the value is that uncertain too: each estimated from the
    # recording, added in quadrature (per estimator, see _biases)
    extra = _biases(v, rate, spikes, noise, kernels, settings, thr, up, down,
                    {"peak": peak_interpolation, "max_rate": max_rate_bias,
                     "max_rate_interpolation": max_rate_interpolation}, onset)
    out = {}
    for name, (terms, value) in values.items():
        known = np.isfinite(np.asarray(value, dtype=float))
        sd = _sd(terms, noise, v.size)
        for part in extra.get(name, ()):
            sd = np.hypot(sd, part)
        out[name] = np.where(known, sd, np.nan)
    return SpikeUncertainty(**out)


def _biases(v: np.ndarray, rate: float, spikes: SpikeMeasurements, noise: NoiseModel,
            kernels: dict, settings: DetectionSettings, thr: np.ndarray, up: np.ndarray,
            down: np.ndarray, estimated: dict[str, list[_Term]],
            onset: tuple[np.ndarray, np.ndarray] | None
            ) -> dict[str, list[np.ndarray]]:
    """Per SD column, the sizes of the biases it holds besides the noise, each estimated from
    the recording:

    - what the threshold's correction of the onset window's smoothing may have left
      (:func:`_onset_smoothing_bias`; threshold, AHP depth, and half of it through the
      half-amplitude level, the half-width);
    - the drift measured on the quiet stretch, continued to the threshold and to the peak
      (their absolute voltages; AHP depth and half-width are differences it leaves);
    - the linear interpolation of the half-width's two crossings between samples;
    - the smoothing bias of the largest dV/dt;
    - the interpolation error of the splines between samples (the peak where no fit was
      made, and through the half-amplitude level the half-width; the largest dV/dt): the
      bound of a cubic spline's error (Hall and Meyer 1976, from memory) with the largest fourth
      difference of its samples for h**4 times the fourth derivative, as the SD of a
      uniform error within it (:data:`BOUND_TO_SD`).
    `estimated` holds those read from the recording as weighted sums of its samples;
    `onset` the threshold crossings' onset windows (:func:`_onset_slopes_and_windows`).
    """
    onset = _onset_smoothing_bias(v, kernels, thr, settings, onset)
    peak = _bias_sd(estimated["peak"], v, noise)
    ms = 1e3 / rate
    crossings = (_scaled(_crossing_interpolation_terms(v, down), ms)
                 + _scaled(_crossing_interpolation_terms(v, up), -ms))
    per_mv = _crossing_time_per_mv(v, rate, up, down)
    return {"threshold_mv_sd": [onset, noise.drift_since_mv(spikes.threshold_s)],
            "ahp_depth_mv_sd": [onset],
            "half_width_ms_sd": [0.5 * onset * per_mv, 0.5 * peak * per_mv,
                                 _bias_sd(crossings, v, noise)],
            "peak_mv_sd": [noise.drift_since_mv(spikes.peak_s), peak],
            "max_dvdt_v_per_s_sd": [_bias_sd(estimated["max_rate"], v, noise),
                                    _bias_sd(estimated["max_rate_interpolation"], v, noise)]}


def with_uncertainty(spikes: SpikeMeasurements, voltage_mv: np.ndarray,
                     sampling_rate_hz: float, step: CurrentStep | None,
                     settings: DetectionSettings = DetectionSettings(),
                     line_noise: LineNoise | None = None) -> SpikesWithUncertainty:
    """The spikes of one sweep with their SDs (:data:`SD_COLUMNS`), the noise measured on the
    sweep's quiet stretch (:func:`~spikemeasure.analysis.noise_model.quiet_stretch`,
    :func:`~spikemeasure.analysis.noise_model.measured_noise`).

    Parameters
    ----------
    spikes : SpikeMeasurements
        The sweep's spikes, measured on `voltage_mv` with `settings`.
    voltage_mv : ndarray
        The sweep's raw voltage, mV (missing samples NaN).
    sampling_rate_hz : float
    step : CurrentStep or None
        The sweep's main stimulus.
    settings : DetectionSettings, optional
    line_noise : LineNoise, optional
        The hum and drift removed from `voltage_mv` before the spikes were measured
        (:func:`~spikemeasure.analysis.sweep_features.sweep_line_noise`): the SDs of the
        threshold and the peak then hold the removal's own uncertainty at their times
        (:func:`~spikemeasure.analysis.line_noise.removal_sd_mv`), in quadrature.

    Returns
    -------
    SpikesWithUncertainty
        The SDs are NaN when no quiet stretch of :data:`MIN_QUIET_MS` is found.
    """
    v = np.asarray(voltage_mv, dtype=float)
    noise = None
    if len(spikes):
        first = np.nanmin(np.where(np.isfinite(spikes.threshold_s), spikes.threshold_s,
                                   spikes.peak_s))
        stretch = quiet_stretch(v.size, sampling_rate_hz, step, float(first))
        if stretch is not None:
            # after a test pulse the membrane may still be settling, which is not drift
            noise = measured_noise(v, sampling_rate_hz, *stretch,
                                   drift=not np.isfinite(step.test_pulse_start_s))
    sds = spike_uncertainty(v, sampling_rate_hz, spikes, noise, settings)
    out = {name: getattr(sds, name) for name in SD_COLUMNS}
    if line_noise is not None and line_noise.found and noise is not None:
        lo, hi = line_noise.reference
        for name, times in (("threshold_mv_sd", spikes.threshold_s),
                            ("peak_mv_sd", spikes.peak_s)):
            out[name] = np.hypot(out[name], removal_sd_mv(line_noise, times, v[lo:hi]))
    values = {f.name: getattr(spikes, f.name) for f in fields(SpikeMeasurements)}
    return SpikesWithUncertainty(**values, **out)


def uncertainty_lines() -> list[str]:
    """The section of ``docs/measurements.md`` on the SD columns of spikes.csv."""
    return [
        "",
        "## Uncertainty of spike values",
        "",
        "threshold_mv_sd, peak_mv_sd, half_width_ms_sd, max_dvdt_v_per_s_sd and "
        "ahp_depth_mv_sd are the SDs that the recording's own noise implies for each value "
        "(how far the value would move if the same spike were recorded again with new noise "
        "of the same kind), with, added in quadrature, the biases between samples and from "
        "drift that the recording itself measures (see *Biases held by the SDs* below). They "
        "do not hold what no sample shows: a filter before the digitizer, a drift before "
        "the quiet stretch.",
        "",
        "The noise is measured on the sweep's quiet stretch: from the start of the stretch "
        "the baseline may use to the onset of the main stimulus (its last "
        f"{MAX_QUIET_MS:g} ms), ended {SPIKE_CLEARANCE_MS:g} ms before the first spike. A "
        "sweep without a stimulus has no SDs: before its first spike the membrane may be "
        "moving towards it (a fluctuating drive), which is signal, not noise of the "
        "recording, and would inflate them. A least-squares line is removed (a resting level or slow drift is not noise of "
        "a spike's values; a 50 or 60 Hz hum is, and stays), and the noise is kept as its "
        "biased autocovariance (Priestley 1981), so its spectrum (white, filtered, hum) "
        "carries over. With less than "
        f"{MIN_QUIET_MS:g} ms of finite samples there, the SDs are empty; so are they for a "
        "value whose windows reach an end of the sweep or a gap, and so in long gap-free "
        "recordings read in pieces (they have no stimulus). Synaptic background on the quiet stretch counts as noise (it is noise "
        "of the spike values too, if not of the recording).",
        "",
        "Each value is, to first order, a weighted sum w of the samples around its spike, "
        "with weights from the estimator's own steps: the Savitzky-Golay weights of the "
        "smoothed voltage and dV/dt (Savitzky and Golay 1964), the linear interpolation of a "
        "crossing, the local polynomial fit at the peak, the parabola at an extreme. The SD is "
        "sqrt(w' C w), C the measured autocovariance (first-order propagation of error, "
        "Bevington and Robinson 2003). Per value:",
        "",
        "- threshold: the smoothed voltage at the crossing of the onset rate by the dV/dt of "
        "the noise-matched window that found it, which a change e of dV/dt there shifts by "
        "-e / d2V/dt2 (for "
        "`max_rate_fraction`, the level moves with the largest dV/dt too); empty with "
        "`second_derivative_peak`, whose time is not a smooth function of the samples.",
        "- peak: the local quartic fit's value at its maximum, through the window the peak "
        "was fitted over (the spline's, where no fit was made); a shift of the maximum's "
        "position changes the value only to second order. Likewise the trough on the smoothed "
        "voltage.",
        "- max dV/dt: the derivative of the quintic spline at its extreme, through the samples "
        "smoothed by the noise-matched local quartic fit: those two sets of weights "
        "convolved.",
        "- half-width: both crossings of the level (threshold + peak) / 2 move by (change of "
        "the level - change of the voltage) / slope of the voltage there.",
        "- AHP depth: threshold minus trough as one weighted sum, so noise common to both (a "
        "slow hum) cancels as it does in the value.",
        "",
        "### Biases held by the SDs",
        "",
        "Each is estimated from the recording and added in quadrature; where a bias is read "
        "as a weighted sum b of the samples, its size is sqrt(max(b^2 - s^2, 0)), s the "
        "noise SD of that sum, whose expectation is the squared bias (the noise's share of "
        "b^2 taken out).",
        "",
        "- Hum and drift removed (threshold, peak): the spikes are measured on the voltage "
        "less the sweep's hum and drift (see *Hum and drift*); the removed terms' own "
        "uncertainty at the value's time, sqrt(b C b^T) (b the terms there, C their "
        "covariance under the baseline's noise spectrum), adds in quadrature.",
        "- Drift left in (threshold, peak): the slope of a line fitted by least squares on the quiet "
        f"stretch (on means over {DRIFT_BLOCK_MS:g} ms) together with the mains hum (50 and "
        "60 Hz and their harmonics, as in *Hum and drift*; a line alone takes part of a hum "
        "for drift), its SD under the autocovariance of the fit's residual (at least the "
        "white-noise SD), continued from the stretch's middle to the value's time: |t - "
        "middle| sqrt(max(slope^2 - SD^2, 0)). A drift moves absolute voltages, which the "
        "recording cannot tell from the membrane's; AHP depth and half-width are differences "
        "it leaves. Not after a test "
        "pulse, where the membrane may still be settling, which is not drift (as for the "
        "passive values).",
        "- Splines between samples (the peak where no fit was made; the largest dV/dt): a "
        "cubic spline's error is at most 5/384 h^4 max|f''''| on the value and (sqrt(3)/216 "
        "+ 1/24) h^3 max|f''''| on its derivative (Hall and Meyer 1976, from memory); "
        "h^4 max|f''''| is "
        "read as the largest fourth difference of the spline's samples within a sample of "
        "the extreme (each equals h^4 f'''' somewhere in its span), and the bound counts "
        "with the SD of a uniform error within it, bound / sqrt(3) (JCGM 100:2008, 4.3.7). "
        "For max dV/dt the quintic spline meets the cubic's bound as well or better where "
        "the samples resolve the rise, so there it holds more than the error. Half of the "
        "peak's moves the half-amplitude level, and so the half-width.",
        "- Linear interpolation of the half-width's crossings: between samples k and k+1 "
        "the chord lies c b (1 - b) / 2 above a curve of second difference c at fraction b, "
        "which moves the crossing by that over the step; c is the second difference at k and "
        "k+1 interpolated at b.",
        "- The largest dV/dt's smoothing (where the noise called for it): D (S - I) S v, the "
        "smoothed samples S v standing for the signal in D (S - I) f (twicing, Tukey 1977, "
        "from memory); "
        "it holds only part of a large smoothing bias (the rest is of order (S - I)^2 f).",
        "- What the threshold's correction of the onset window's smoothing may have left "
        "(threshold, AHP depth): the threshold estimator moves the crossing by the bias of "
        "an exponentially growing rate; a second model of the same bias, the leading term of "
        "the local quadratic fit's series (over 2m + 1 samples it reads a rate of curvature "
        "c, d3V/dt3 per sample squared, c (3 m^2 + 3 m - 1) / 30 high: the fit's sums of "
        "x^4 and x^2, Savitzky and Golay 1964; c read from the same dV/dt m samples, at "
        "least one, either side of the crossing), reads the rate's measured curvature "
        "instead of assuming its form. Their disagreement over the rate's step per sample, "
        "times the voltage's step, is the part kept (the whole series term where the "
        "estimator kept the linear crossing of a rate that does not grow). Half of it moves "
        "the half-amplitude level, and so the half-width by that over the voltage's slope "
        "at each crossing.",
        "",
        "Calibration (tests/analysis/test_spike_uncertainty.py): on recordings simulated "
        "from published models (Hodgkin and Huxley 1952, Wang and Buzsaki 1996, an adapting "
        "cortical cell after Pospischil et al. 2008) through a 4-pole Bessel filter of "
        "3-10 kHz, sampled at 10-50 kHz with 0.1-0.5 mV of noise, two with 50 Hz hum and "
        "drift, the truth (the reference measurement of the noise-free filtered trace at the "
        "simulation rate, without hum and drift) lies within 2 SD of the noisy value in "
        "85-99.5 % of spikes for each column. benchmarks/benchmark_sd_calibration.py "
        "measures the coverage per acquisition, noise level and artefacts and splits the "
        "error into bias and noise (docs/accuracy.md).",
    ]
