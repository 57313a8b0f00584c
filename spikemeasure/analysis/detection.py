"""Find action potentials by derivative and height criteria.

The detector works on one sweep at a time and returns sample indices; the measurement stage
(:mod:`spikemeasure.analysis.spikes`) turns them into thresholds, peaks, widths and troughs.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy.linalg import lstsq
from scipy.ndimage import convolve1d, maximum_filter1d

from ..errors import InvalidSettingError
from ..params import check_value, default_of, parameter

__all__ = ["DetectionSettings", "THRESHOLD_METHODS", "DetectedSpikes", "SmoothedSamples",
           "smoothing_window_samples", "smoothed_trace", "detect_spikes", "savgol_coeffs",
           "savgol_filter"]

#: Threshold definitions offered (see :func:`spikemeasure.analysis.spike_features.spike_thresholds`).
THRESHOLD_METHODS = parameter("threshold_method").choices

#: Savitzky-Golay polynomial order: a local quadratic fit, so the smoothed derivative of any
#: quadratic stretch is exact and the noise gain stays low at the window lengths used.
SMOOTHING_POLYORDER = 2

#: Samples per block of :class:`SmoothedSamples`: a block is smoothed when one of its samples
#: is first read.
SMOOTHING_BLOCK_SAMPLES = 1 << 16


@dataclass(frozen=True)
class DetectionSettings:
    """Every number the detector and the spike measurements use.

    Attributes
    ----------
    onset_rate_v_per_s : float
        dV/dt (V/s) whose upward crossing starts a spike and, by default, defines threshold.
    min_rise_mv : float
        The peak must be at least this far (mV) above the voltage at the onset crossing.
    lowest_peak_mv : float
        The peak must be above this voltage (mV).
    peak_window_ms : float
        The peak must come within this time (ms) of the onset crossing.
    smoothing_ms : float
        Length (ms) of the zero-phase Savitzky-Golay window used for the dV/dt of detection and
        threshold, for d2V/dt2 and for the smoothed voltage (rounded to an odd number of
        samples, at least 3).
    rate_smoothing_ms : float
        The shorter window for the maximum and minimum dV/dt of each spike, whose sharp
        extremes a long window would flatten.
    threshold_method : str
        One of :data:`THRESHOLD_METHODS`.
    threshold_fraction : float
        For ``max_rate_fraction``: the fraction of the spike's maximum dV/dt that defines
        threshold.
    min_samples_across_width : int
        A half-width spanned by fewer samples than this is not reported (too coarse sampling).
    search_window_ms : float
        How far (ms) each spike's searches may reach: back from the onset crossing for the
        threshold, forward from the peak for the repolarization, the trough and the fall rate.
        Bounding them keeps a trough 10 s after a spike in a sparse recording from counting as
        its afterhyperpolarization, and lets a long recording be measured in pieces with the
        same result as whole.
    """

    onset_rate_v_per_s: float = default_of("onset_rate_v_per_s")
    min_rise_mv: float = default_of("min_rise_mv")
    lowest_peak_mv: float = default_of("lowest_peak_mv")
    peak_window_ms: float = default_of("peak_window_ms")
    smoothing_ms: float = default_of("smoothing_ms")
    rate_smoothing_ms: float = default_of("rate_smoothing_ms")
    threshold_method: str = default_of("threshold_method")
    threshold_fraction: float = default_of("threshold_fraction")
    min_samples_across_width: int = default_of("min_samples_across_width")
    search_window_ms: float = default_of("search_window_ms")

    def __post_init__(self) -> None:
        # each value by its declaration in spikemeasure.params (one message wherever it was
        # given), stored as the declared type; then how the windows must relate
        for name in self.__dataclass_fields__:
            object.__setattr__(self, name, check_value(name, getattr(self, name)))
        if self.search_window_ms < self.peak_window_ms:
            raise InvalidSettingError(
                f"`search_window_ms` ({self.search_window_ms}) must be at least `peak_window_ms` "
                f"({self.peak_window_ms})")
        if self.smoothing_ms >= self.peak_window_ms:
            raise InvalidSettingError(
                f"`smoothing_ms` ({self.smoothing_ms}) must be shorter than `peak_window_ms` "
                f"({self.peak_window_ms})")

    def as_dict(self) -> dict:
        return asdict(self)

    def search_window_samples(self, sampling_rate_hz: float) -> int:
        """:attr:`search_window_ms` in samples (at least 2)."""
        return max(2, int(round(self.search_window_ms * 1e-3 * sampling_rate_hz)))

    @property
    def needs_second_derivative(self) -> bool:
        return self.threshold_method == "second_derivative_peak"


def savgol_coeffs(window_length: int, polyorder: int, deriv: int = 0, delta: float = 1.0,
                  pos: int | None = None, use: str = "conv") -> np.ndarray:
    """Weights of a Savitzky-Golay filter: the value (or derivative) at `pos` of the
    least-squares polynomial through `window_length` samples.

    Parameters
    ----------
    window_length : int
        Samples in the window.
    polyorder : int
        Order of the polynomial, less than `window_length`.
    deriv : int, optional
        Order of the derivative (0: the value).
    delta : float, optional
        Spacing of the samples, for a derivative.
    pos : int, optional
        Position in the window where the polynomial is evaluated; by default its centre.
    use : {"conv", "dot"}, optional
        ``"conv"``: the weights reversed, for a convolution; ``"dot"``: in sample order.

    Returns
    -------
    ndarray, shape (window_length,)
        Read-only: computed once per distinct set of arguments and shared.

    Notes
    -----
    The computation of ``scipy.signal.savgol_coeffs`` (SciPy 1.17), operation for operation,
    so that the weights are equal to the last bit (tests/analysis/test_detection.py compares
    them): the rows of the Vandermonde matrix of the window's positions relative to `pos`
    and the least-squares solution (LAPACK's gelsd through ``scipy.linalg.lstsq``, cutoff
    eps times the larger dimension) that picks the coefficient of order `deriv`, times
    deriv! / delta**deriv. Written here so that measuring imports neither scipy.signal nor,
    through it, scipy.stats (about a quarter of a run's memory and half a second).

    References
    ----------
    .. [1] A. Savitzky and M. J. E. Golay, "Smoothing and differentiation of data by
       simplified least squares procedures", Analytical Chemistry 36(8):1627-1639, 1964.
    """
    halflen, rem = divmod(window_length, 2)
    if pos is None:
        pos = halflen - 0.5 if rem == 0 else halflen
    if not 0 <= pos < window_length:
        raise InvalidSettingError("`pos` must be nonnegative and less than `window_length`")
    if polyorder >= window_length:
        raise InvalidSettingError("`polyorder` must be less than `window_length`")
    if use not in ("conv", "dot"):
        raise InvalidSettingError("`use` must be 'conv' or 'dot'")
    key = (window_length, polyorder, deriv, delta, pos, use)
    weights = _SAVGOL_WEIGHTS.get(key)
    if weights is None:
        if len(_SAVGOL_WEIGHTS) >= _SAVGOL_KEPT:
            _SAVGOL_WEIGHTS.clear()
        weights = _savgol_weights(window_length, polyorder, deriv, delta, pos, use)
        weights.flags.writeable = False
        _SAVGOL_WEIGHTS[key] = weights
    return weights


#: Weights already computed, by their arguments: each sweep asks again for the same few.
_SAVGOL_WEIGHTS: dict[tuple, np.ndarray] = {}
_SAVGOL_KEPT = 512


def _savgol_weights(window_length: int, polyorder: int, deriv: int, delta: float,
                    pos: float, use: str) -> np.ndarray:
    """:func:`savgol_coeffs` of checked arguments, computed."""
    if deriv > polyorder:
        return np.zeros(window_length, dtype=np.float64)
    x = np.arange(-pos, window_length - pos, dtype=np.float64)
    if use == "conv":
        x = np.flip(x)
    design = x ** np.arange(polyorder + 1, dtype=np.float64).reshape(-1, 1)
    y = np.zeros(polyorder + 1, dtype=np.float64)
    y[deriv] = float(math.factorial(deriv)) / (delta ** deriv)
    cutoff = np.finfo(np.float64).eps * max(design.shape)
    return lstsq(design, y, cond=cutoff)[0]


def _edge_polynomial_values(x: np.ndarray, window_start: int, window_stop: int,
                            interp_start: int, interp_stop: int, polyorder: int, deriv: int,
                            delta: float) -> np.ndarray:
    """The least-squares polynomial through x[window_start:window_stop] (or its derivative)
    at samples interp_start .. interp_stop - 1: the edges of :func:`savgol_filter`."""
    edge = x[window_start:window_stop].reshape(-1, 1)
    t = np.arange(0, window_stop - window_start, dtype=x.dtype)
    # the Vandermonde matrix with its columns scaled to unit length, as a polynomial fit
    # conditions it, then the least squares (cutoff: samples times eps)
    powers = np.flip(np.arange(polyorder + 1, dtype=x.dtype))
    vander = t[:, None] ** powers[None, :]
    scale = np.sqrt(np.sum(vander * vander, axis=0))
    vander /= scale
    coeffs = (lstsq(vander, edge, cond=t.shape[0] * np.finfo(x.dtype).eps)[0].T / scale).T
    n = coeffs.shape[0]
    if deriv > 0:  # the derivative's coefficients, highest power first
        if n <= deriv:
            coeffs = np.zeros_like(coeffs[:1, ...])
        else:
            derived = np.array(coeffs[:-deriv, ...], copy=True)
            for k in range(deriv):
                derived *= np.arange(n - k - 1, deriv - k - 1, -1,
                                     dtype=coeffs.dtype).reshape(n - deriv, 1)
            coeffs = derived
    at = np.arange(interp_start - window_start, interp_stop - window_start,
                   dtype=coeffs.dtype).reshape(-1, 1)
    values = np.zeros_like(at)
    for j in range(coeffs.shape[0]):  # Horner's scheme
        values = values * at + coeffs[j, ...]
    return (values / (delta ** deriv)).reshape(interp_stop - interp_start)


def savgol_filter(x: np.ndarray, window_length: int, polyorder: int, deriv: int = 0,
                  delta: float = 1.0, mode: str = "interp") -> np.ndarray:
    """A 1-D trace through a Savitzky-Golay filter, its ends fitted (mode ``"interp"``).

    Parameters
    ----------
    x : ndarray
        1-D, float64 or float32 (other types are made float64).
    window_length, polyorder, deriv, delta
        As for :func:`savgol_coeffs`.
    mode : {"interp"}
        Within half a window of either end, the value of the polynomial fitted to the
        first (last) `window_length` samples (the only mode used here).

    Returns
    -------
    ndarray
        The filtered trace, of `x`'s length.

    Notes
    -----
    The computation of ``scipy.signal.savgol_filter(x, ..., mode="interp")`` (SciPy 1.17),
    operation for operation, so that the result is equal to the last bit
    (tests/analysis/test_detection.py compares them): the weights of :func:`savgol_coeffs`
    convolved with the trace (``scipy.ndimage.convolve1d``, zero beyond the ends), then the
    `window_length` // 2 samples at each end replaced by the polynomial fitted to the end
    window (its columns scaled to unit length) evaluated there by Horner's scheme.
    """
    if mode != "interp":
        raise InvalidSettingError("`mode` must be 'interp'")
    x = np.asarray(x)
    if x.dtype != np.float64 and x.dtype != np.float32:
        x = x.astype(np.float64)
    if x.ndim != 1:
        raise InvalidSettingError("`x` must be a 1-D array")
    coeffs = savgol_coeffs(window_length, polyorder, deriv=deriv, delta=delta)
    if window_length > x.shape[0]:
        raise InvalidSettingError("`window_length` must be at most the length of `x`")
    y = convolve1d(x, coeffs, axis=-1, mode="constant")
    halflen, n = window_length // 2, x.shape[0]
    y[:halflen] = _edge_polynomial_values(x, 0, window_length, 0, halflen, polyorder,
                                          deriv, delta)
    y[n - halflen:] = _edge_polynomial_values(x, n - window_length, n, n - halflen, n,
                                              polyorder, deriv, delta)
    return y


class SmoothedSamples:
    """A Savitzky-Golay filtered trace whose samples are computed where they are read.

    Reads like a read-only 1-D float64 array (``size``, ``shape``, ``len``, indexing by an
    integer, a slice, an integer or boolean array; ``np.asarray`` gives the whole trace). A
    sample is computed, with the rest of its block of :data:`SMOOTHING_BLOCK_SAMPLES`, the first
    time it is read, by ``scipy.signal.savgol_filter`` over the block and half a window either
    side: every value equals, to the last bit, that of the filter run over the whole trace
    (the filter's result at a sample depends only on the window around it, and the trace's own
    ends are fitted from the same end windows). A sweep whose smoothed voltage is read only
    around its spikes is smoothed only there; a quiet sweep not at all.

    Parameters
    ----------
    voltage_mv : ndarray
        The raw trace, float64, 1-D, at least `window` samples.
    window : int
        Odd filter length in samples.
    deriv : int
        Order of the derivative (0 for the smoothed trace itself).
    delta_ms : float
        Sample spacing passed to ``savgol_filter`` as `delta`.
    scale : float
        Factor applied to every value (unit conversion).
    """

    def __init__(self, voltage_mv: np.ndarray, window: int, deriv: int = 0,
                 delta_ms: float = 1.0, scale: float = 1.0):
        if not (isinstance(voltage_mv, np.ndarray) and voltage_mv.ndim == 1
                and voltage_mv.dtype == float):
            raise InvalidSettingError("`voltage_mv` must be a 1-D float64 array")
        if not (window >= 3 and window % 2 == 1 and window <= voltage_mv.size):
            raise InvalidSettingError(
                f"`window` must be odd, at least 3 and at most the trace's {voltage_mv.size} "
                f"samples (got {window})")
        self._source = voltage_mv
        self._window, self._deriv, self._delta, self._scale = window, deriv, delta_ms, scale
        # np.empty reserves the memory; pages are touched only by the blocks computed
        self._values = np.empty(voltage_mv.size, dtype=float)
        n_blocks = -(-voltage_mv.size // SMOOTHING_BLOCK_SAMPLES)
        self._done = np.zeros(n_blocks, dtype=bool)

    @property
    def size(self) -> int:
        return int(self._source.size)

    @property
    def shape(self) -> tuple[int]:
        return (self.size,)

    ndim = 1
    dtype = np.dtype(float)

    def __len__(self) -> int:
        return self.size

    def _compute(self, first_block: int, last_block: int) -> None:
        """Fill blocks first_block .. last_block (inclusive) that are not computed yet."""
        todo = np.flatnonzero(~self._done[first_block:last_block + 1]) + first_block
        if todo.size == 0:
            return
        # neighbouring missing blocks are filtered in one call
        runs = np.split(todo, np.flatnonzero(np.diff(todo) > 1) + 1)
        n, half = self.size, self._window // 2
        for run in runs:
            start = int(run[0]) * SMOOTHING_BLOCK_SAMPLES
            stop = min(n, (int(run[-1]) + 1) * SMOOTHING_BLOCK_SAMPLES)
            hi = min(n, max(stop + half, start + self._window))
            lo = max(0, min(start - half, hi - self._window))
            part = savgol_filter(self._source[lo:hi], self._window, SMOOTHING_POLYORDER,
                                 deriv=self._deriv, delta=self._delta, mode="interp")
            if self._scale != 1.0:
                part *= self._scale
            self._values[start:stop] = part[start - lo:stop - lo]
            self._done[run] = True

    def _indices(self, key) -> np.ndarray:
        index = np.asarray(key)
        if index.dtype == bool:
            if index.shape != self.shape:
                raise IndexError("a boolean index must have the trace's length")
            return np.flatnonzero(index)
        if index.dtype.kind not in "iu":
            raise IndexError("only integers, slices and integer or boolean arrays are valid "
                             "indices")
        index = index.astype(np.int64, copy=False)
        if index.size and (index.min() < -self.size or index.max() >= self.size):
            raise IndexError(f"index out of range for a trace of {self.size} samples")
        return np.where(index < 0, index + self.size, index)

    def __getitem__(self, key):
        if isinstance(key, slice):
            start, stop, step = key.indices(self.size)
            if step == 1:
                if stop > start:
                    self._compute(start // SMOOTHING_BLOCK_SAMPLES,
                                  (stop - 1) // SMOOTHING_BLOCK_SAMPLES)
                view = self._values[start:stop]
                view.flags.writeable = False
                return view
            key = np.arange(start, stop, step)
        if isinstance(key, (int, np.integer)):
            i = int(key) + self.size if key < 0 else int(key)
            if not 0 <= i < self.size:
                raise IndexError(f"index {key} out of range for a trace of {self.size} samples")
            self._compute(i // SMOOTHING_BLOCK_SAMPLES, i // SMOOTHING_BLOCK_SAMPLES)
            return self._values[i]
        index = self._indices(key)
        if index.size:
            blocks = np.unique(index // SMOOTHING_BLOCK_SAMPLES)
            for block in blocks[~self._done[blocks]].tolist():
                self._compute(block, block)
        return self._values[index]

    def __array__(self, dtype=None, copy=None) -> np.ndarray:
        values = self[:]
        return values.astype(dtype) if dtype is not None else values.copy()


@dataclass(frozen=True)
class SmoothedTrace:
    """A voltage trace with its zero-phase smoothed version and derivatives.

    ``voltage_mv`` is the raw trace; ``smooth_mv``, ``dvdt_v_per_s`` and ``d2vdt2_v_per_s2``
    come from Savitzky-Golay fits of ``window`` samples (mV/ms equals V/s);
    ``d2vdt2_v_per_s2`` is None unless it was asked for. dV/dt, which detection scans from end
    to end, is an array; the smoothed voltage and d2V/dt2, read only around spikes, are
    :class:`SmoothedSamples`, computed where they are read.
    """

    voltage_mv: np.ndarray
    smooth_mv: SmoothedSamples
    dvdt_v_per_s: np.ndarray
    d2vdt2_v_per_s2: SmoothedSamples | None
    sampling_rate_hz: float
    window: int


@dataclass(frozen=True)
class DetectedSpikes:
    """Sample indices of detected spikes, aligned arrays of equal length.

    Attributes
    ----------
    onset_index : ndarray of int
        For each spike, the first sample at or above the onset rate after the last upward
        crossing of it before the peak (the crossing lies between this sample and the one
        before).
    peak_sample : ndarray of int
        The largest raw voltage sample of the spike.
    """

    onset_index: np.ndarray
    peak_sample: np.ndarray

    def __len__(self) -> int:
        return int(self.peak_sample.size)


def smoothing_window_samples(smoothing_ms: float, sampling_rate_hz: float) -> int:
    """Odd window length in samples for a smoothing time, at least 3."""
    half = int(round(smoothing_ms * 1e-3 * sampling_rate_hz / 2.0))
    return max(3, 2 * half + 1)


def smoothed_trace(voltage_mv: np.ndarray, sampling_rate_hz: float,
                   smoothing_ms: float = 0.3, *, second_derivative: bool = False
                   ) -> SmoothedTrace:
    """Smooth a voltage trace and take its first and second time derivatives.

    Parameters
    ----------
    voltage_mv : ndarray
        Membrane voltage in mV, 1-D, finite.
    sampling_rate_hz : float
        Samples per second.
    smoothing_ms : float, optional
        Window length in ms, default 0.3 (rounded to an odd number of samples, at least 3).
    second_derivative : bool, optional
        Also provide d2V/dt2 (needed only by the ``second_derivative_peak`` threshold).

    Returns
    -------
    SmoothedTrace
        dV/dt computed over every sample (detection scans it whole); the smoothed voltage and
        d2V/dt2 as :class:`SmoothedSamples`, computed only where they are read (around
        spikes), equal to the filter run over the whole trace.

    Notes
    -----
    A Savitzky-Golay filter fits a quadratic to each window by least squares and takes the
    fitted value and derivatives at the window centre [1]_. It is a symmetric FIR filter, so it
    is zero-phase: events are not shifted in time. For white noise of SD sigma at sampling rate
    fs, the derivative noise SD of a window of N samples is
    ``sigma * fs * sqrt(12 / (N (N**2 - 1)))``: 0.3 mV at 50 kHz gives about 21 V/s for a raw
    first difference, 4.7 V/s for a 0.1 ms (5-sample) window and 0.9 V/s for the default
    0.3 ms (15-sample) one. Near threshold dV/dt rises slowly, so noise there moves the
    crossing of the onset rate by up to millivolts; the price of the long window is a bias at
    sharp extremes of dV/dt of about ``f''' * h**2 / 10`` for a half-window h (the fitted
    slope of a cubic), which is why each spike's maximum and minimum rates use a shorter
    window of their own (``rate_smoothing_ms``).
    Edges use a polynomial fit to the end window (``mode='interp'``).

    References
    ----------
    .. [1] A. Savitzky and M. J. E. Golay, "Smoothing and differentiation of data by simplified
       least squares procedures", Analytical Chemistry 36(8):1627-1639, 1964.
    """
    v = np.asarray(voltage_mv, dtype=float)
    if v.ndim != 1:
        raise InvalidSettingError("`voltage_mv` must be a 1-D array")
    if not sampling_rate_hz > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    window = smoothing_window_samples(smoothing_ms, sampling_rate_hz)
    dt_ms = 1e3 / sampling_rate_hz
    if v.size < window:
        raise InvalidSettingError(
            f"the trace has {v.size} samples, fewer than the {window}-sample smoothing window")
    # one pass over every sample: dV/dt, which detection scans whole; the smoothed voltage
    # and d2V/dt2 are computed only where they are read (around spikes)
    dvdt = savgol_filter(v, window, SMOOTHING_POLYORDER, deriv=1, delta=dt_ms, mode="interp")
    smooth = SmoothedSamples(v, window)
    # d2V/dt2 in mV/ms^2 is 1e3 V/s^2
    d2 = SmoothedSamples(v, window, 2, dt_ms, 1e3) if second_derivative else None
    return SmoothedTrace(v, smooth, dvdt, d2, float(sampling_rate_hz), window)


def _upward_crossings(x: np.ndarray, level: float) -> np.ndarray:
    """Indices i with x[i-1] < level <= x[i]."""
    return np.flatnonzero((x[:-1] < level) & (x[1:] >= level)) + 1


def _forward_max_at(x: np.ndarray, starts: np.ndarray, width: int,
                    chunk_elements: int = 4_000_000) -> np.ndarray:
    """max(x[i : i + width]) for each i in `starts` (shorter windows at the end of x)."""
    if starts.size * width > 4 * x.size:
        # many candidates (a low onset rate in noise): one running maximum over the trace is
        # cheaper; maximum_filter1d centres its window at i - origin, so shift it to start at i
        full = maximum_filter1d(x, size=width, origin=-(width // 2), mode="nearest")
        return full[starts]
    out = np.empty(starts.size, dtype=x.dtype)
    offsets = np.arange(width)
    step = max(1, chunk_elements // width)
    for lo in range(0, starts.size, step):
        idx = np.minimum(starts[lo:lo + step, None] + offsets, x.size - 1)
        out[lo:lo + step] = x[idx].max(axis=1)
    return out


def _first_rise_ends(dvdt: np.ndarray, starts: np.ndarray, width: int,
                     chunk_elements: int = 4_000_000) -> np.ndarray:
    """For each i in `starts`, the first r in (i, i + width] with dvdt[r - 1] > 0 >= dvdt[r]
    (the end of the rise), or -1 where there is none within `width` samples of i."""
    out = np.full(starts.size, -1, dtype=np.int64)
    offsets = np.arange(width + 1)
    step = max(1, chunk_elements // (width + 1))
    for lo in range(0, starts.size, step):
        # positions past the end repeat the last sample, which cannot end a rise there
        idx = np.minimum(starts[lo:lo + step, None] + offsets, dvdt.size - 1)
        rate = dvdt[idx]
        ends = (rate[:, :-1] > 0) & (rate[:, 1:] <= 0)
        found = ends.any(axis=1)
        out[lo:lo + step][found] = starts[lo:lo + step][found] + 1 + np.argmax(ends[found],
                                                                               axis=1)
    return out


def detect_spikes(trace: SmoothedTrace, settings: DetectionSettings = DetectionSettings()
                  ) -> DetectedSpikes:
    """Detect action potentials in one smoothed sweep.

    Parameters
    ----------
    trace : SmoothedTrace
        From :func:`smoothed_trace`.
    settings : DetectionSettings, optional

    Returns
    -------
    DetectedSpikes
        Zero-length arrays when there are no spikes.

    Notes
    -----
    1. Candidates are the upward crossings of ``onset_rate_v_per_s`` by the smoothed dV/dt.
    2. A vectorized pre-check keeps candidates for which the raw voltage, within
       ``peak_window_ms`` after the crossing, reaches ``min_rise_mv`` above the smoothed
       voltage at the crossing and exceeds ``lowest_peak_mv``.
    3. For each survivor the end of the rise is the first sample after it where the smoothed
       dV/dt is at or below zero; it must come within ``peak_window_ms``. The peak is the
       largest raw sample from the crossing to that point plus half a smoothing window (the
       raw maximum may lie a few samples from the smoothed one). The height criteria of step 2
       are checked again against that peak.
    4. Several crossings leading to the same peak (a noisy rising phase) are one spike; the last
       crossing before the peak is kept, as the threshold definition requires.
    """
    v, dvdt = trace.voltage_mv, trace.dvdt_v_per_s
    n = v.size
    rate = trace.sampling_rate_hz
    empty = DetectedSpikes(np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64))
    if n < 3:
        return empty
    window = max(2, int(round(settings.peak_window_ms * 1e-3 * rate)))
    crossings = _upward_crossings(dvdt, settings.onset_rate_v_per_s)
    if crossings.size == 0:
        return empty
    reach = _forward_max_at(v, crossings, window + 1)
    # the smoothed voltage is read only at crossings that pass the cheaper test
    high = reach > settings.lowest_peak_mv
    crossings, reach = crossings[high], reach[high]
    base = trace.smooth_mv[crossings]
    keep = reach - base >= settings.min_rise_mv
    crossings, base = crossings[keep], base[keep]
    if crossings.size == 0:
        return empty
    rise_ends = _first_rise_ends(dvdt, crossings, window)
    half = trace.window // 2
    onsets: list[int] = []
    peaks: list[int] = []
    for i, end, onset_mv in zip(crossings.tolist(), rise_ends.tolist(), base.tolist()):
        if end < 0:
            # a slow depolarization (the rise lasts past the peak window), or still rising
            # at the end of the trace: no spike to measure
            continue
        stop = min(n, end + half + 1)
        p = i + int(np.argmax(v[i:stop]))
        if v[p] - onset_mv < settings.min_rise_mv or v[p] <= settings.lowest_peak_mv:
            continue
        if peaks and peaks[-1] == p:
            onsets[-1] = i
            continue
        if peaks and i <= peaks[-1]:
            continue  # a crossing inside the previous spike's search span
        onsets.append(i)
        peaks.append(p)
    return DetectedSpikes(np.asarray(onsets, dtype=np.int64), np.asarray(peaks, dtype=np.int64))
