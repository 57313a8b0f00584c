"""The fastest rise and fall of each spike: max and min dV/dt at the limit of the data.

Functions take arrays and a sampling rate and return arrays aligned with the spikes given;
nothing here reads files or prints. The noise before each spike decides how much the samples
are smoothed; an interpolating spline finds the extreme between samples.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy.interpolate import make_interp_spline

from .detection import savgol_coeffs, smoothing_window_samples
from .local_fits import fitted_extremes, matched_windows

__all__ = ["rate_extremes", "max_rate_weights", "noise_before", "RATE_SPLINE_HALF_SAMPLES", "NOISE_SAMPLES",
           "RATE_NOISE_FRACTION", "RATE_POLYORDER", "FALL_ORDER", "FALL_NOISE_FRACTION",
           "FALL_WIDTH_FACTOR"]

_SPLINE_STEPS = 400  # grid points from -1 to +1 sample around the extreme

#: Half the support, in samples, of the quintic spline whose derivative gives max and min
#: dV/dt (13 samples around the extreme).
RATE_SPLINE_HALF_SAMPLES = 6
#: Samples before each spike's threshold in which its recording noise is measured.
NOISE_SAMPLES = 48
#: The rate window is the shortest whose dV/dt noise SD stays below this fraction of the
#: spike's own rate.
RATE_NOISE_FRACTION = 0.03
#: Polynomial order of the local fit that smooths the voltage before the rates are taken: a
#: quartic passes the peak of dV/dt (a cubic stretch of voltage) with no h**2 bias.
RATE_POLYORDER = 4
_MAD_TO_SD = 1.4826
_rate_weights_cache: list[np.ndarray] = []


def _rate_spline_weights() -> np.ndarray:
    """Weights D (steps+1, 13): D @ y is the derivative (per sample) of the not-a-knot quintic
    spline through samples y[-6..6] (unit spacing), on a grid from -1 to +1 sample."""
    if not _rate_weights_cache:
        half = RATE_SPLINE_HALF_SAMPLES
        nodes = np.arange(-half, half + 1, dtype=float)
        grid = np.linspace(-1.0, 1.0, _SPLINE_STEPS + 1)
        eye = np.eye(nodes.size)
        _rate_weights_cache.append(np.stack(
            [make_interp_spline(nodes, eye[k], k=5)(grid, 1) for k in range(nodes.size)], axis=1))
    return _rate_weights_cache[0]


@lru_cache(maxsize=64)
def _quartic_smoothing(window: int) -> np.ndarray:
    """Coefficients of the local quartic fit's smoothed value over `window` samples."""
    return savgol_coeffs(window, RATE_POLYORDER, use="conv")


@lru_cache(maxsize=64)
def _rate_noise_gain(window: int) -> float:
    """SD of the rate (per sample) that unit white noise gives with this smoothing window."""
    weights = _rate_spline_weights()[_SPLINE_STEPS // 2]  # the derivative at the centre sample
    if window > RATE_POLYORDER + 1:
        weights = np.convolve(weights, _quartic_smoothing(window))
    return float(np.sqrt(np.sum(weights ** 2)))


def noise_before(voltage_mv: np.ndarray, position: np.ndarray,
                 n_samples: int = NOISE_SAMPLES) -> np.ndarray:
    """Recording noise (SD, mV) in the `n_samples` samples before each position.

    Notes
    -----
    The robust SD (1.4826 x median absolute deviation) of the second differences, divided by
    sqrt(6): for white noise of SD sigma the second difference has SD sigma sqrt(6), while a
    slowly changing membrane voltage adds almost nothing to it; the median ignores the few
    large differences of a spike in the span [1]_. NaN where the span leaves the trace.

    References
    ----------
    .. [1] P. J. Rousseeuw and C. Croux, "Alternatives to the median absolute deviation",
       J. Am. Stat. Assoc. 88(424):1273-1283, 1993.
    """
    v = np.asarray(voltage_mv, dtype=float)
    position = np.asarray(position, dtype=float)
    out = np.full(position.size, np.nan)
    ok = np.isfinite(position)
    start = np.floor(np.where(ok, position, 0)).astype(np.int64) - n_samples
    ok &= start >= 0
    if ok.any():
        rows = v[start[ok, None] + np.arange(n_samples)]
        second = rows[:, 2:] - 2.0 * rows[:, 1:-1] + rows[:, :-2]
        out[ok] = _MAD_TO_SD * np.median(np.abs(second), axis=1) / np.sqrt(6.0)
    return out


def _rate_windows(noise_mv: np.ndarray, pilot_per_sample: np.ndarray, longest: int
                  ) -> np.ndarray:
    """Per spike, the shortest smoothing window (1: none, then 7, 9, ...) whose rate noise SD
    is at most RATE_NOISE_FRACTION of the pilot rate; the longest allowed when none is, and 1
    where the noise or the pilot rate is unknown or not positive."""
    candidates = [1] + list(range(RATE_POLYORDER + 3, longest + 1, 2))
    window = np.full(noise_mv.size, candidates[-1], dtype=np.int64)
    chosen = np.zeros(noise_mv.size, dtype=bool)
    allowed = RATE_NOISE_FRACTION * pilot_per_sample
    for candidate in candidates:
        fits = ~chosen & (noise_mv * _rate_noise_gain(candidate) <= allowed)
        window[fits] = candidate
        chosen |= fits
    return np.where(np.isfinite(noise_mv) & (pilot_per_sample > 0), window, 1)


def rate_extremes(voltage_mv: np.ndarray, sampling_rate_hz: float,
                  threshold_position: np.ndarray, peak_position: np.ndarray,
                  trough_position: np.ndarray, smoothing_ms: float = 0.1,
                  noise_mv: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Largest dV/dt from threshold to peak and most negative from peak to trough.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    sampling_rate_hz : float
    threshold_position, peak_position, trough_position : ndarray
        Fractional sample positions per spike (NaN where unknown: that extreme is then NaN).
    smoothing_ms : float, optional
        The longest smoothing window the recording's noise may call for (default 0.1 ms).
    noise_mv : ndarray, optional
        The noise SD before each spike, ``noise_before(voltage_mv, threshold_position)``
        (computed here when not given).

    Returns
    -------
    max_dvdt_v_per_s, min_dvdt_v_per_s : ndarray

    Notes
    -----
    The most negative dV/dt is the extreme of a local quintic fit's derivative
    (:func:`_fall_rates`: its window the shortest whose rate noise is at most
    :data:`FALL_NOISE_FRACTION` of the fall's rate and at most :data:`FALL_WIDTH_FACTOR`
    times the fall's width). The largest, per spike:

    1. The noise SD sigma is measured before threshold (:func:`noise_before`).
    2. The smoothing window is the shortest (none, then 7, 9, ... samples up to
       `smoothing_ms`) for which the dV/dt noise SD, sigma times the noise gain of the
       estimator, is below :data:`RATE_NOISE_FRACTION` of the spike's rate (its largest
       central difference). Smoothing is a local quartic least-squares fit [1]_, which
       leaves a cubic stretch (the peak of dV/dt) unchanged, so where the noise calls for
       it the bias stays of order h**4.
    3. The derivative of the not-a-knot quintic spline through the 13 (smoothed) samples
       around the largest central difference of the smoothed samples is maximized on a grid of 1/200 sample within
       one sample of it, and refined with a parabola: the extreme of dV/dt between samples,
       which a difference at the samples misses [2]_.

    The extreme is NaN when the 13 samples (and the smoothing window) around it leave the
    trace.

    References
    ----------
    .. [1] A. Savitzky and M. J. E. Golay, "Smoothing and differentiation of data by simplified
       least squares procedures", Analytical Chemistry 36(8):1627-1639, 1964.
    .. [2] C. de Boor, "A Practical Guide to Splines", Springer, 1978 (not-a-knot end
       conditions; from memory).
    """
    v = np.asarray(voltage_mv, dtype=float)
    fs = float(sampling_rate_hz)
    longest = smoothing_window_samples(smoothing_ms, fs)
    noise = (noise_before(v, threshold_position) if noise_mv is None
             else np.asarray(noise_mv, dtype=float))
    found = _max_rate_extremes(v, threshold_position, peak_position, noise, longest)
    largest = np.where(found.valid, found.value * fs / 1e3, np.nan)
    smallest = _fall_rates(v, peak_position, trough_position, noise, longest) * fs / 1e3
    return largest, smallest


@dataclass(frozen=True)
class _MaxRates:
    """The largest dV/dt of each spike as :func:`rate_extremes` finds it (per sample), with
    the choices that make it a weighted sum of the samples: the centre sample, the smoothing
    window, the spline's grid point and the fourth difference's place (see
    :func:`_extreme_weights`); `valid` false where the estimator's samples leave the trace."""

    value: np.ndarray
    centre: np.ndarray
    window: np.ndarray
    best: np.ndarray
    at: np.ndarray
    valid: np.ndarray


def _gathered(v: np.ndarray, lo: np.ndarray, width: int) -> np.ndarray:
    """Rows v[lo .. lo + width - 1] (indices clipped into v: the caller masks what leaves
    it)."""
    return v[np.clip(lo[:, None] + np.arange(width), 0, v.size - 1)]


def _smoothed_rows(v: np.ndarray, lo: np.ndarray, width: int, window: int) -> np.ndarray:
    """Rows of the samples lo .. lo + width - 1 after a local quartic fit over `window`
    samples (1: raw). Each row's samples with `window` // 2 more either side are laid end to
    end and convolved once: every smoothed value is the same dot product of the same
    coefficients with the same samples as a convolution of that row alone (values reaching
    past a row's own samples are dropped)."""
    if window == 1:
        return _gathered(v, lo, width)
    half = window // 2
    rows = _gathered(v, lo - half, width + 2 * half)
    flat = np.convolve(rows.ravel(), _quartic_smoothing(window), mode="valid")
    flat = np.concatenate([flat, np.zeros(2 * half)])
    return flat.reshape(rows.shape)[:, :width]


def _max_rate_extremes(v: np.ndarray, threshold_position: np.ndarray,
                       peak_position: np.ndarray, noise_mv: np.ndarray, longest: int
                       ) -> _MaxRates:
    """The largest dV/dt (per sample) from each spike's threshold to its peak, as
    :func:`rate_extremes` defines it, every spike at once: the pilot rate and window (the
    largest central difference of the raw samples), the largest central difference of the
    smoothed samples, then the quintic spline's derivative on the grid around it and the
    parabola through its largest grid value. Spikes are taken in blocks of bounded memory."""
    threshold_position = np.asarray(threshold_position, dtype=float)
    peak_position = np.asarray(peak_position, dtype=float)
    n = peak_position.size
    found = _MaxRates(np.full(n, np.nan), np.zeros(n, dtype=np.int64),
                      np.ones(n, dtype=np.int64), np.zeros(n, dtype=np.int64),
                      np.zeros(n, dtype=np.int64), np.zeros(n, dtype=bool))
    known = np.isfinite(threshold_position) & np.isfinite(peak_position)
    a = np.where(known, np.floor(np.where(known, threshold_position, 0.0)), 0).astype(np.int64)
    b = np.where(known, np.round(np.where(known, peak_position, 0.0)), 0).astype(np.int64)
    a, b = np.maximum(a, 1), np.minimum(b, v.size - 2)
    rows = np.flatnonzero(known & (b > a))
    if rows.size == 0:
        return found
    noise_mv = np.asarray(noise_mv, dtype=float)
    for r in _blocks(rows, b[rows] - a[rows] + 3 + longest):
        _max_rate_block(v, a[r], b[r], noise_mv[r], longest, r, found)
    return found


_GATHER_ELEMENTS = 1_000_000  # samples gathered at once, to bound memory


def _blocks(rows: np.ndarray, length: np.ndarray):
    """Yield the rows in blocks, shortest spans first, each block's rows times its longest
    span at most _GATHER_ELEMENTS (a longer span alone)."""
    order = np.argsort(length, kind="stable")
    rows, length = rows[order], length[order]
    start = 0
    while start < rows.size:
        # rows [start, stop) fit when their count times the last (longest) length fits
        count = np.arange(1, rows.size - start + 1)
        fits = count * length[start:] <= _GATHER_ELEMENTS
        stop = start + max(1, int(np.count_nonzero(fits)))
        yield np.sort(rows[start:stop])
        start = stop


def _max_rate_block(v: np.ndarray, a: np.ndarray, b: np.ndarray, noise_mv: np.ndarray,
                    longest: int, rows: np.ndarray, found: _MaxRates) -> None:
    """:func:`_max_rate_extremes` for spans a..b (a < b, inside v), written into `found` at
    `rows`."""
    width = int((b - a).max()) + 1
    inside = np.arange(width) < (b - a + 1)[:, None]
    raw = _gathered(v, a - 1, width + 2)
    pilot = np.max(np.where(inside, 0.5 * (raw[:, 2:] - raw[:, :-2]), -np.inf), axis=1)
    window = _rate_windows(noise_mv, pilot, longest)
    half = window // 2
    a, b = np.maximum(a, 1 + half), np.minimum(b, v.size - 2 - half)
    j = np.zeros(a.size, dtype=np.int64)
    samples = np.zeros((a.size, 2 * RATE_SPLINE_HALF_SAMPLES + 1))
    ok = b > a
    spline_half = RATE_SPLINE_HALF_SAMPLES
    for w in np.unique(window[ok]):
        k = np.flatnonzero(ok & (window == w))
        span = int((b[k] - a[k]).max()) + 1
        smooth = _smoothed_rows(v, a[k] - 1, span + 2, int(w))
        rate = np.where(np.arange(span) < (b[k] - a[k] + 1)[:, None],
                        0.5 * (smooth[:, 2:] - smooth[:, :-2]), -np.inf)
        j[k] = a[k] + np.argmax(rate, axis=1)
        edge = (j[k] - spline_half - w // 2 < 0) | (j[k] + spline_half + w // 2 >= v.size)
        ok[k[edge]] = False
        k = k[~edge]
        samples[k] = _smoothed_rows(v, j[k] - spline_half, 2 * spline_half + 1, int(w))
    # one matrix-vector product per spike, as for a single spike (the same sums)
    curve = np.matmul(_rate_spline_weights(), samples[:, :, None])[:, :, 0]
    best = np.clip(np.argmax(curve, axis=1), 1, _SPLINE_STEPS - 1)
    pick = np.arange(best.size)
    prev, here, nxt = curve[pick, best - 1], curve[pick, best], curve[pick, best + 1]
    curvature = prev - 2.0 * here + nxt
    with np.errstate(divide="ignore", invalid="ignore"):
        delta = np.where(curvature < 0,
                         np.minimum(0.5, np.maximum(-0.5, 0.5 * (prev - nxt) / curvature)), 0.0)
    value = here - 0.25 * (prev - nxt) * delta
    # the largest fourth difference of the spline's samples around its extreme
    at = np.argmax(np.abs(np.diff(samples[:, spline_half - 3:spline_half + 4], 4, axis=1)),
                   axis=1)
    keep = rows[ok]
    found.value[keep] = value[ok]
    found.centre[keep] = j[ok]
    found.window[keep] = window[ok]
    found.best[keep] = best[ok]
    found.at[keep] = at[ok]
    found.valid[keep] = True


@lru_cache(maxsize=4096)
def _extreme_weights(best: int, window: int, at: int
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(weights of the value, of the smoothing's bias, of the fourth difference at centre
    j - 1 + `at`) on the raw samples around the centre, for the spline's grid point `best`
    and the smoothing `window` (read-only: cached)."""
    spline_half = RATE_SPLINE_HALF_SAMPLES
    weights = _rate_spline_weights()[best]
    fourth = np.zeros(2 * spline_half + 1)
    fourth[spline_half - 3 + at:spline_half + 2 + at] = (1.0, -4.0, 6.0, -4.0, 1.0)
    if window > 1:
        half = window // 2
        smoothing = _quartic_smoothing(window)
        # the smoothing's bias read on the smoothed samples (smoothed once more, less once)
        twice = np.convolve(smoothing, smoothing)
        twice[half:half + window] -= smoothing
        out = (np.convolve(weights, smoothing), np.convolve(weights, twice),
               np.convolve(fourth, smoothing))
    else:
        out = (weights.copy(), np.zeros(1), fourth)
    for row in out:
        row.flags.writeable = False
    return out


def max_rate_weights(voltage_mv: np.ndarray, sampling_rate_hz: float,
                     threshold_position: np.ndarray, peak_position: np.ndarray,
                     smoothing_ms: float = 0.1, smoothing_bias: bool = False,
                     noise_mv: np.ndarray | None = None) -> tuple:
    """The linear weights through which each spike's max dV/dt depends on its samples.

    Parameters
    ----------
    voltage_mv, sampling_rate_hz, threshold_position, peak_position, smoothing_ms
        As for :func:`rate_extremes`.
    smoothing_bias : bool, optional
        Also return the weights of the smoothing's bias and of a fourth difference (see
        Notes).
    noise_mv : ndarray, optional
        As for :func:`rate_extremes`: the noise SD before each spike,
        ``noise_before(voltage_mv, threshold_position)``, computed here when not given.

    Returns
    -------
    centre : ndarray of int, shape (n,)
        The sample the weights are centred on.
    weights : ndarray, shape (n, L)
        max_dvdt_v_per_s is (to first order) ``weights[k] @ v[centre[k] - L // 2:
        centre[k] + L // 2 + 1]``, in V/s per mV; rows of NaN where it is not measured.
    bias_weights : ndarray, shape (n, L)
        Only with `smoothing_bias`: ``bias_weights[k]`` dotted with the same samples is the
        estimate of how far the smoothing moved the value (V/s; 0 where none smoothed).
    fourth_weights : ndarray, shape (n, L)
        Only with `smoothing_bias`: the largest (in size) fourth difference of the samples
        the spline passes through, at centres within a sample of its extreme (mV), as
        weights on the same samples: h**4 times the fourth derivative somewhere in its span
        (mean value theorem), for the spline's interpolation error.

    Notes
    -----
    The estimator of :func:`rate_extremes` is linear in the samples once its smoothing
    window and the grid point of its extreme are chosen (a local quartic fit S, then the
    quintic spline's derivative D at that point): the weights are the spline's derivative
    weights at that point convolved with the fit's. Noise moves those choices too, which
    first-order propagation leaves out (the grid point lies at an extreme, where moving it
    changes the value only to second order).

    The smoothing's bias on the signal f is D (S - I) f. It is read on the recording as
    D (S - I) S v: the smoothed samples stand for f, the first term of twicing [1]_, whose
    noise is small (two smoothings). It leaves out the spike's content where the smoothing's
    gain is far below 1, which the smoothed samples no longer hold: on a fast spike at
    25 kHz smoothed over 9 samples it reads about a quarter of the bias (docs/accuracy.md).

    References
    ----------
    .. [1] J. W. Tukey, "Exploratory Data Analysis", Addison-Wesley, 1977, ch. 16
       (twicing; from memory).
    """
    v = np.asarray(voltage_mv, dtype=float)
    fs = float(sampling_rate_hz)
    longest = smoothing_window_samples(smoothing_ms, fs)
    noise = (noise_before(v, threshold_position) if noise_mv is None
             else np.asarray(noise_mv, dtype=float))
    found = _max_rate_extremes(v, threshold_position, peak_position, noise, longest)
    n = found.value.size
    choices = np.stack([found.best, found.window, found.at], axis=1)[found.valid]
    unique, which = (np.unique(choices, axis=0, return_inverse=True) if choices.size
                     else (np.zeros((0, 3), dtype=np.int64), np.zeros(0, dtype=np.int64)))
    rows = [_extreme_weights(int(best), int(window), int(at)) for best, window, at in unique]
    width = max([max(w.size, b.size) for w, b, _ in rows] + [1])
    centre = np.where(found.valid, found.centre, 0)
    weights = np.full((n, width), np.nan)
    bias = np.full((n, width), np.nan)
    fourth = np.full((n, width), np.nan)
    # each distinct set of weights padded and scaled once, then one row per spike
    for out, part, scale in ((weights, 0, fs / 1e3), (bias, 1, fs / 1e3), (fourth, 2, 1.0)):
        table = np.zeros((len(rows), width))
        for u, found_rows in enumerate(rows):
            row = found_rows[part]
            pad = (width - row.size) // 2
            table[u, pad:pad + row.size] = row * scale
        out[found.valid] = table[which.ravel()]
    return (centre, weights, bias, fourth) if smoothing_bias else (centre, weights)


#: Polynomial order of the local fit whose derivative gives min dV/dt.
FALL_ORDER = 5
#: The fit's window is the shortest whose rate noise SD is at most this fraction of the rate.
FALL_NOISE_FRACTION = 0.03
#: ... and at most this many times the width of the fall (where dV/dt is beyond half its
#: extreme).
FALL_WIDTH_FACTOR = 0.7
_FALL_PILOT_ORDER = 2


def _fall_pilots(v: np.ndarray, peak_position: np.ndarray, trough_position: np.ndarray,
                 pilot_window: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per spike, from a local quadratic fit's dV/dt over `pilot_window` samples between peak
    and trough: the sample of the steepest fall, its rate (per sample) and the fall's width
    (samples where the rate is beyond half of it); -1, NaN, 0 where not measurable."""
    peak_position = np.asarray(peak_position, dtype=float)
    trough_position = np.asarray(trough_position, dtype=float)
    n = peak_position.size
    centre, rate, width = np.full(n, -1, dtype=np.int64), np.full(n, np.nan), np.zeros(n, int)
    half = pilot_window // 2
    coeffs = savgol_coeffs(pilot_window, _FALL_PILOT_ORDER, deriv=1, use="conv")
    known = np.isfinite(peak_position) & np.isfinite(trough_position)
    a = np.round(np.where(known, peak_position, 0.0)).astype(np.int64)
    b = np.minimum(np.ceil(np.where(known, trough_position, 0.0)).astype(np.int64),
                   v.size - 1 - half)
    rows = np.flatnonzero(known & (a - half >= 0) & (b > a))
    for r in _blocks(rows, b[rows] - a[rows] + 1 + 2 * half):
        centre[r], rate[r], width[r] = _fall_pilot_block(v, a[r], b[r], coeffs)
    return centre, rate, width


def _fall_pilot_block(v: np.ndarray, a: np.ndarray, b: np.ndarray, coeffs: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`_fall_pilots` for spans a..b (a < b, the fit's window inside v): each span's
    samples, with half a window more either side, laid end to end and convolved once (every
    rate the same dot product as over that span alone); the extremes and runs found per span
    with ``reduceat`` over the spans' rates."""
    half = coeffs.size // 2
    count = b - a + 1                           # rates per span
    length = count + 2 * half                   # samples per span
    first_sample = np.cumsum(length) - length
    samples = v[np.arange(length.sum()) - np.repeat(first_sample - (a - half), length)]
    fitted = np.convolve(samples, coeffs, mode="valid")
    first = np.cumsum(count) - count            # each span's first rate in `slope`
    slope = fitted[np.arange(count.sum()) + np.repeat(first_sample - first, count)]
    t = np.arange(slope.size) - np.repeat(first, count)   # sample within its span
    steepest = np.minimum.reduceat(slope, first)
    lowest = np.repeat(steepest, count)
    # the first sample of the steepest rate (of the first NaN, as argmin, where one is)
    at = (slope == lowest) | (np.isnan(slope) & np.isnan(lowest))
    j = np.minimum.reduceat(np.where(at, t, np.iinfo(np.int64).max), first)
    steepest = slope[first + j]
    # the run of rates beyond half the steepest around it: from the sample after the last
    # one before j that is not, to the sample before the first one after j that is not
    beyond = slope <= 0.5 * np.repeat(steepest, count)
    at_j = np.repeat(j, count)
    hi = np.minimum.reduceat(np.where(~beyond & (t >= at_j), t, np.repeat(count, count)),
                             first) - 1
    lo = np.maximum.reduceat(np.where(~beyond & (t <= at_j), t, -1), first) + 1
    return a + j, steepest, hi - lo + 1


def _fall_rates(v: np.ndarray, peak_position: np.ndarray, trough_position: np.ndarray,
                noise: np.ndarray, pilot_window: int) -> np.ndarray:
    """Most negative dV/dt (per sample) from peak to trough: the extreme of a local
    polynomial fit's derivative over a window matched to the noise and the fall's width."""
    centre, rate, width = _fall_pilots(v, peak_position, trough_position, pilot_window)
    out = np.full(centre.size, np.nan)
    ok = centre >= 0
    if ok.any():
        windows = matched_windows(noise[ok], rate[ok], FALL_WIDTH_FACTOR * width[ok],
                                  FALL_ORDER, 1, FALL_NOISE_FRACTION)
        out[ok] = fitted_extremes(v, centre[ok], windows, FALL_ORDER, 1, largest=False)[1]
    return out
