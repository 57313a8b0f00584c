"""How much a trace fluctuates before a step once fast measurement noise is averaged out
(synaptic background, hum, slow noise), and the covariance that noise with the spectrum the
trace shows there gives measurements that are weighted sums of samples.

Functions take a voltage trace, its sampling rate and a step onset, and return a value;
nothing here reads files or prints.
"""
from __future__ import annotations

import numpy as np
from scipy.fft import next_fast_len
from scipy.ndimage import median_filter, uniform_filter1d

from ..errors import InvalidSettingError

__all__ = ["slow_fluctuation_mv", "baseline_stretch", "weighted_sums_covariance",
           "weights_transforms", "covariance_from_transforms", "BASELINE_WINDOW_MS"]

#: Length of the window before the step whose mean is the baseline (and its SD the noise).
BASELINE_WINDOW_MS = 100.0

#: Fewest samples of noise whose spectrum is estimated.
_MIN_NOISE_SAMPLES = 16
#: Bins of the running mean that gives the noise's smooth spectrum, leaving out bins over
#: _TRIM_FACTOR times their running median / ln 2 (an exponential variable exceeds 6 x its
#: mean with probability 0.25 %) ...
_SMOOTH_SPECTRUM_BINS = 15
_TRIM_FACTOR = 6.0
#: ... and of the running mean that keeps lines (hum) standing out of it ...
_LINE_BINS = 3
#: ... by more than this factor (a 3-bin mean of pure noise exceeds 4 x its mean with
#: probability 5e-4: chi-square with 6 degrees of freedom).
_LINE_FACTOR = 4.0


def slow_fluctuation_mv(voltage_mv: np.ndarray, sampling_rate_hz: float, onset_s: float,
                        smooth_ms: float, window_ms: float = BASELINE_WINDOW_MS) -> float:
    """Standard deviation (ddof=0) of the voltage's `smooth_ms` moving average over the
    `window_ms` before `onset_s`: the fluctuation left once fast measurement noise is
    averaged out (synaptic background, hum). NaN without a finite baseline stretch.

    Parameters
    ----------
    voltage_mv : ndarray
        Voltage, mV.
    sampling_rate_hz : float
    onset_s : float
        Step onset, s from the first sample.
    smooth_ms, window_ms : float
        Width of the moving average, length of the window.

    Returns
    -------
    float
        mV.

    Notes
    -----
    White measurement noise of SD s sampled at rate f keeps about s / sqrt(f * smooth_ms
    * 1e-3) after the moving average; fluctuations slower than `smooth_ms` keep their full
    size. The time constant and the sag are judged against this, since both are read from
    a trace smoothed on that scale.
    """
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    if not (smooth_ms > 0 and window_ms > 0):
        raise InvalidSettingError("`smooth_ms` and `window_ms` must be positive")
    stop = int(round(onset_s * rate))
    part = np.asarray(voltage_mv[max(0, stop - int(round(window_ms * 1e-3 * rate))):stop],
                      dtype=float)
    if part.size < 2 or not np.isfinite(part).all():
        return float("nan")
    width = max(1, int(round(smooth_ms * 1e-3 * rate)))
    smooth = uniform_filter1d(part, size=min(width, part.size), mode="nearest")
    return float(np.std(smooth))


def baseline_stretch(voltage_mv: np.ndarray, sampling_rate_hz: float, onset_s: float, *,
                     earliest_s: float = 0.0, window_ms: float = BASELINE_WINDOW_MS
                     ) -> np.ndarray:
    """The voltage over the `window_ms` before `onset_s`, starting no earlier than
    `earliest_s` (the baseline window of
    :func:`~spikemeasure.analysis.sweep_features.baseline`)."""
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    stop = int(round(onset_s * rate))
    start = max(0, int(round(earliest_s * rate)), stop - int(round(window_ms * 1e-3 * rate)))
    return np.asarray(voltage_mv[start:max(start, stop)], dtype=float)


def weighted_sums_covariance(weights: np.ndarray, noise_mv: np.ndarray,
                             sampling_rate_hz: float) -> np.ndarray | None:
    """Covariance of weighted sums of a trace that noise like `noise_mv` implies.

    Parameters
    ----------
    weights : ndarray, shape (k, n)
        Each row weighs n consecutive samples (a mean over a window is 1 / length there and
        0 elsewhere; a fit's sensitivities are the rows of its pseudo-inverse).
    noise_mv : ndarray
        A stretch of the recording's noise, mV: the baseline, or the residual of a fit.
    sampling_rate_hz : float

    Returns
    -------
    ndarray, shape (k, k), or None
        mV^2 per unit weight squared; None when `noise_mv` has fewer than 16 samples or a
        missing one.

    Notes
    -----
    The noise is taken as stationary, its two-sided power spectral density estimated by the
    Hann-tapered periodogram of `noise_mv` minus its mean, S(f) = |FFT(x w)|^2 / (f_s sum w^2)
    (hum, synaptic background and the amplifier filter's shape included). Each bin of a
    periodogram scatters as an exponential variable (2 degrees of freedom) about the true
    spectrum, so it is smoothed: a running mean over 15 bins (the Daniell smoother), steady
    even where a weighted sum depends on a few low bins (a long window's mean), leaves out
    bins over 6 times the running median / ln 2 (the median of an exponential variable
    over its mean) so a hum line does not spread into its neighbours; where a 3-bin
    running mean stands more than 4 times over the smooth part (a line: hum), the running
    mean is kept. Below the taper's resolution (the two lowest bins, where the
    taper and the mean's removal hide the spectrum) S is taken flat at the next bin's
    value. For weighted sums a.x and b.x of
    stationary noise, cov = integral S(f) A(f) conj(B(f)) df, A and B the weights' Fourier
    transforms (the Wiener-Khinchin theorem; Percival and Walden 1993, chapter 4, from
    memory); the integral is a sum over the frequencies of an FFT of twice the weights'
    length, so that windows at the two ends do not wrap onto each other, with S
    interpolated linearly onto them. For white noise of SD s this is s^2 a.b.

    References
    ----------
    .. [1] D. B. Percival and A. T. Walden, *Spectral Analysis for Physical Applications*,
       Cambridge University Press, 1993.
    """
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    rows = np.atleast_2d(np.asarray(weights, dtype=float))
    part = np.asarray(noise_mv, dtype=float)
    if not _usable_noise(part):
        return None
    return _transforms_covariance(weights_transforms(rows), 2 * rows.shape[1], part, rate)


def weights_transforms(rows: np.ndarray) -> np.ndarray:
    """The Fourier transforms of weight rows (shape (k, n)) that
    :func:`weighted_sums_covariance` sums over: rfft of each row zero-padded to
    ``next_fast_len(2 n)`` samples. A caller whose rows stay the same from sweep to sweep
    may keep them for :func:`covariance_from_transforms`."""
    return np.fft.rfft(rows, n=next_fast_len(2 * rows.shape[1]), axis=1)


def covariance_from_transforms(transforms: np.ndarray, n_weights: int, noise_mv: np.ndarray,
                               sampling_rate_hz: float) -> np.ndarray | None:
    """:func:`weighted_sums_covariance` of rows of `n_weights` samples given as their
    :func:`weights_transforms`: the same numbers, the same operations."""
    part = np.asarray(noise_mv, dtype=float)
    if not _usable_noise(part):
        return None
    return _transforms_covariance(transforms, 2 * n_weights, part, float(sampling_rate_hz))


def _usable_noise(part: np.ndarray) -> bool:
    return part.size >= _MIN_NOISE_SAMPLES and bool(np.isfinite(part).all())


def _transforms_covariance(transforms: np.ndarray, padded: int, part: np.ndarray, rate: float
                           ) -> np.ndarray:
    density = _noise_density(part, rate)
    n_fft = next_fast_len(padded)
    spectrum = np.interp(np.fft.rfftfreq(n_fft, 1.0 / rate),
                         np.fft.rfftfreq(part.size, 1.0 / rate), density)
    spectrum[1:(n_fft + 1) // 2] *= 2.0  # the negative frequencies, folded onto these
    weighted = transforms * spectrum[None, :]
    return (weighted @ transforms.conj().T).real * rate / n_fft


def _noise_density(part: np.ndarray, rate: float) -> np.ndarray:
    """Two-sided power spectral density (mV^2/Hz) of `part` at its rfft frequencies: the
    Hann-tapered periodogram, smoothed as :func:`weighted_sums_covariance` describes."""
    taper = np.hanning(part.size)
    raw = np.abs(np.fft.rfft((part - part.mean()) * taper)) ** 2 / (rate * np.sum(taper ** 2))
    # the two lowest bins are hidden by the taper and the mean's removal
    above = raw[2:] if raw.size > 4 else raw
    size = min(_SMOOTH_SPECTRUM_BINS, above.size)
    scale = median_filter(above, size=size, mode="mirror") / np.log(2.0)
    kept = (above <= _TRIM_FACTOR * scale).astype(float)
    smooth = (uniform_filter1d(above * kept, size=size, mode="mirror")
              / np.maximum(uniform_filter1d(kept, size=size, mode="mirror"), 1e-12))
    lines = uniform_filter1d(above, size=min(_LINE_BINS, above.size), mode="mirror")
    density = np.where(lines > _LINE_FACTOR * smooth, lines, smooth)
    return np.concatenate([np.full(raw.size - above.size, density[0]), density])
