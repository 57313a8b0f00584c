"""The recording noise that spike values' SDs are computed from: the quiet stretch of a sweep
it is measured on, and its autocovariance there (:class:`NoiseModel`), so its spectrum (white
noise, filtered noise, mains hum) carries over to the SDs of
:mod:`~spikemeasure.analysis.spike_uncertainty`.

Functions take arrays and a sampling rate and return arrays or a small dataclass; nothing here
reads files or prints.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.fft import next_fast_len

from ..errors import InvalidSettingError
from .line_noise import HUM_HARMONICS, MAINS_FREQUENCIES_HZ
from .sweeps import CurrentStep

__all__ = ["NoiseModel", "MIN_QUIET_MS", "MAX_QUIET_MS", "SPIKE_CLEARANCE_MS", "quiet_stretch",
           "measured_noise"]

#: The shortest quiet stretch (ms) the noise is measured on; with less, the SDs are empty.
MIN_QUIET_MS = 20.0
#: The noise is measured on at most the last this many ms of the quiet stretch.
MAX_QUIET_MS = 1000.0
#: The quiet stretch ends at least this long (ms) before the first spike's threshold.
SPIKE_CLEARANCE_MS = 5.0
#: The drift is fitted on means over blocks of this many ms (at most; a whole number of
#: samples): well below a period of the mains' third harmonic (5.6 ms at 60 Hz).
DRIFT_BLOCK_MS = 0.5


@dataclass(frozen=True)
class NoiseModel:
    """The recording noise as its autocovariance.

    Attributes
    ----------
    autocovariance_mv2 : ndarray
        Biased autocovariance (divided by the stretch length, so positive semidefinite) at lags
        0, 1, ... samples, in mV^2; lags beyond it count as uncorrelated.
    sampling_rate_hz : float
    start, stop : int
        The stretch it was measured on (sample indices, stop exclusive).
    drift_mv_per_s : float
        Slope of the line fitted on the stretch together with the mains hum (0 when not
        measured: after a test pulse).
    drift_sd_mv_per_s : float
        That slope's SD under the measured noise (0 when not measured).
    """

    autocovariance_mv2: np.ndarray
    sampling_rate_hz: float
    start: int
    stop: int
    drift_mv_per_s: float = 0.0
    drift_sd_mv_per_s: float = 0.0

    @property
    def sd_mv(self) -> float:
        return float(np.sqrt(self.autocovariance_mv2[0]))

    def drift_since_mv(self, time_s: np.ndarray) -> np.ndarray:
        """How far the drift measured on the stretch moves the voltage from the stretch's
        middle to each time (s from the sweep's start), as its size: the slope's square less
        its noise variance (an unbiased estimate of the squared drift, 0 when negative),
        square-rooted, times the time since the middle (absolute)."""
        squared = self.drift_mv_per_s ** 2 - self.drift_sd_mv_per_s ** 2
        middle_s = 0.5 * (self.start + self.stop - 1) / self.sampling_rate_hz
        since = np.abs(np.asarray(time_s, dtype=float) - middle_s)
        return np.sqrt(max(squared, 0.0)) * since


def quiet_stretch(n_samples: int, sampling_rate_hz: float, step: CurrentStep | None,
                  first_spike_s: float) -> tuple[int, int] | None:
    """The stretch of a sweep the noise is measured on, (start, stop) sample indices.

    Parameters
    ----------
    n_samples : int
        Samples in the sweep.
    sampling_rate_hz : float
    step : CurrentStep or None
        The main stimulus; its quiet stretch is ``baseline_start_s`` to ``onset_s``. Without
        one no stretch is known to be quiet.
    first_spike_s : float
        Time of the sweep's first spike (NaN without spikes).

    Returns
    -------
    (int, int) or None
        The last :data:`MAX_QUIET_MS` of the stretch before the stimulus, ended
        :data:`SPIKE_CLEARANCE_MS` before the first spike. None without a stimulus or when
        that is shorter than :data:`MIN_QUIET_MS`.

    Notes
    -----
    Without a stimulus the membrane before the first spike may be moving towards it (a
    fluctuating drive, a gap-free recording of spontaneous firing): that is signal, not
    recording noise, and would inflate the SDs many times, so none are given.
    """
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    if step is None:
        return None
    stop_s, start_s = step.onset_s, step.baseline_start_s
    if np.isfinite(first_spike_s):
        stop_s = min(stop_s, first_spike_s - SPIKE_CLEARANCE_MS * 1e-3)
    stop = int(min(n_samples, np.floor(stop_s * rate)))
    start = max(int(np.ceil(start_s * rate)), stop - int(round(MAX_QUIET_MS * 1e-3 * rate)), 0)
    if stop - start < MIN_QUIET_MS * 1e-3 * rate:
        return None
    return start, stop


def measured_noise(voltage_mv: np.ndarray, sampling_rate_hz: float, start: int, stop: int,
                   *, drift: bool = True) -> NoiseModel | None:
    """Autocovariance of the noise on ``voltage_mv[start:stop]``.

    Parameters
    ----------
    voltage_mv : ndarray
        The sweep's raw voltage, mV.
    sampling_rate_hz : float
    start, stop : int
        The quiet stretch (see :func:`quiet_stretch`).
    drift : bool, optional
        Whether to measure the drift (default True); False after a test pulse, where the
        membrane may still be settling, which is not drift (the rule of
        :func:`~spikemeasure.analysis.sweep_passive.passive_voltage`).

    Returns
    -------
    NoiseModel or None
        None when the longest finite run of the stretch is shorter than :data:`MIN_QUIET_MS`.

    Notes
    -----
    A least-squares line is removed first (the resting level and a slow drift are not noise
    of a spike's values; a hum of 50 or 60 Hz is, and stays). The drift's slope and its SD
    are those of a line fitted together with the mains hum (:func:`_drift_with_hum`: a line
    alone would take part of a hum for drift) on means over blocks of
    :data:`DRIFT_BLOCK_MS`, for the drift's share of a spike's SDs
    (:meth:`NoiseModel.drift_since_mv`). The autocovariance is the
    biased estimate ``sum(x[i] x[i+k]) / n`` [1]_, computed with a zero-padded FFT; the
    biased estimate is positive semidefinite, so every SD computed from it is real.

    References
    ----------
    .. [1] M. B. Priestley, "Spectral Analysis and Time Series", Academic Press, 1981, sec. 5.3.
    """
    stretch = np.asarray(voltage_mv[start:stop], dtype=float)
    finite = np.isfinite(stretch)
    if not finite.all():
        start, stop = _longest_finite_run(finite, start)
        stretch = np.asarray(voltage_mv[start:stop], dtype=float)
    n = stretch.size
    if n < max(3, MIN_QUIET_MS * 1e-3 * sampling_rate_hz):
        return None
    x = _detrended(stretch)
    # zero-padded to at least 2 n - 1 samples, every lag's sum has no wrapped-around term
    size = next_fast_len(2 * n - 1, real=True)  # 2**a 3**b 5**c
    spectrum = np.fft.rfft(x, size)
    acov = np.fft.irfft(spectrum.real ** 2 + spectrum.imag ** 2, size)[:n] / n
    rate = float(sampling_rate_hz)
    if not drift:
        return NoiseModel(acov, rate, int(start), int(stop))
    # the drift fitted together with the hum (a line alone would take part of a hum for
    # drift), on means over blocks of DRIFT_BLOCK_MS: the mean of a line or a sinusoid over a block
    # is the same line, or the sinusoid scaled, at the block's centre, so the fit's slope is
    # the one of the samples, at a cost that does not grow with the sampling rate
    block = max(1, int(DRIFT_BLOCK_MS * 1e-3 * rate))
    blocks = n // block
    means = stretch[n - blocks * block:].reshape(blocks, block).mean(axis=1)
    slope, slope_sd = _drift_with_hum(means, rate / block,
                                      1 << int(np.ceil(np.log2(2 * max(1, blocks)))))
    return NoiseModel(acov, rate, int(start), int(stop), slope, slope_sd)


def _detrended(stretch: np.ndarray) -> np.ndarray:
    """The stretch less its least-squares line, from the closed form of the fit [1]_ on the
    time centred on the stretch's middle (where the slope and the mean are uncorrelated).
    Sums through einsum, not BLAS's dot product, whose threads cost more than a 50,000-sample
    sum on a loaded machine.

    References
    ----------
    .. [1] P. R. Bevington and D. K. Robinson, "Data Reduction and Error Analysis for the
       Physical Sciences", 3rd ed., McGraw-Hill, 2003, ch. 6.
    """
    n = stretch.size
    t = np.arange(n, dtype=float) - 0.5 * (n - 1)
    mean = stretch.mean()
    slope = np.einsum("i,i->", t, stretch - mean) / np.einsum("i,i->", t, t)
    return stretch - (mean + slope * t)


def _drift_with_hum(stretch: np.ndarray, rate: float, size: int) -> tuple[float, float]:
    """(slope, its SD) in mV/s of the line fitted together with the mains hum (the
    harmonics of :data:`~spikemeasure.analysis.line_noise.MAINS_FREQUENCIES_HZ` below
    Nyquist, :data:`~spikemeasure.analysis.line_noise.HUM_HARMONICS` of each) by least
    squares: the slope is u . x, u the slope's row of the design's pseudo-inverse, and its
    variance under the residual's biased autocovariance r is r[0] sum(u^2) + 2 sum over
    lags k of r[k] sum(u[i] u[i+k]) [1]_, at least the white-noise value r[0] sum(u^2)
    (corrected for the fitted terms): the fit leaves the residual no power at the lowest
    frequencies, where u has its own (the floor of
    :func:`~spikemeasure.analysis.line_noise.estimate_line_noise`). (0, 0) when it is not
    finite.

    References
    ----------
    .. [1] M. B. Priestley, "Spectral Analysis and Time Series", Academic Press, 1981,
       sec. 5.3 (the variance of a weighted sum of a stationary process).
    """
    n = stretch.size
    t = (np.arange(n) - 0.5 * (n - 1)) / rate
    columns = [np.ones(n), t]
    for frequency in MAINS_FREQUENCIES_HZ:
        for harmonic in range(1, HUM_HARMONICS + 1):
            if harmonic * frequency < rate / 2:
                phase = 2 * np.pi * harmonic * frequency * t
                columns += [np.cos(phase), np.sin(phase)]
    design = np.column_stack(columns)
    # the pseudo-inverse through the small Gram matrix: pinv(X) = pinv(X'X) X'
    inverse = np.linalg.pinv(design.T @ design)
    coefficients = inverse @ (design.T @ stretch)
    residual = stretch - design @ coefficients
    u = design @ inverse[1]
    spectra = np.fft.rfft(np.stack([residual, u]), size, axis=1)
    r = np.fft.irfft(spectra[0] * spectra[0].conj(), size)[:n] / n
    u_corr = np.fft.irfft(spectra[1] * spectra[1].conj(), size)[:n]
    spectral = r[0] * u_corr[0] + 2.0 * np.sum(r[1:] * u_corr[1:])
    # the fit leaves the residual no power at the lowest frequencies, where u has its own:
    # at least the white-noise variance of the residual's variance (as line_noise does)
    white = r[0] * n / max(1, n - design.shape[1]) * u_corr[0]
    variance = max(spectral, white)
    slope = float(coefficients[1])
    if not (np.isfinite(slope) and np.isfinite(variance)):
        return 0.0, 0.0
    return slope, float(np.sqrt(max(variance, 0.0)))


def _longest_finite_run(finite: np.ndarray, offset: int) -> tuple[int, int]:
    """(start, stop) of the longest run of True in `finite`, shifted by `offset`."""
    edges = np.diff(np.concatenate([[0], finite.astype(np.int8), [0]]))
    starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    if starts.size == 0:
        return offset, offset
    k = int(np.argmax(stops - starts))
    return offset + int(starts[k]), offset + int(stops[k])
