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
           "stretches_covariance", "stretch_bounds", "noise_density", "weights_transforms",
           "covariance_from_transforms",
           "BASELINE_WINDOW_MS"]

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
    density = noise_density(noise_mv, rate)
    if density is None:
        return None
    return _covariance_from_density(rows, density, np.size(noise_mv), rate)


def stretches_covariance(rows: np.ndarray, noise_mv: np.ndarray, rate: float
                         ) -> np.ndarray | None:
    """:func:`weighted_sums_covariance` of weights that are zero between separate stretches
    (a quiet stretch, a plateau, a rest stretch), as the sum of each stretch's own, from one
    spectrum of `noise_mv`: noise samples a hundred ms and more apart are taken as
    uncorrelated (what is not is a hum, which the fits of hum and drift hold), so the cost
    follows the stretches' lengths, not the span between them. None as there."""
    bounds = stretch_bounds(rows)
    if bounds is None:
        return weighted_sums_covariance(rows, noise_mv, rate)
    density = noise_density(noise_mv, rate)
    if density is None:
        return None  # as weighted_sums_covariance
    return sum(_covariance_from_density(rows[:, a:b], density, np.size(noise_mv), rate)
               for a, b in bounds)


def stretch_bounds(rows: np.ndarray, columns: np.ndarray | None = None
                   ) -> list[tuple[int, int]] | None:
    """The separate stretches [a, b) of `rows` that :func:`stretches_covariance` sums, or
    None when it takes the rows whole (no column is weighted, or the weighted columns are
    one run). `columns`, when given, are the positions of the rows' columns in a span whose
    other columns are zero (rows kept compact), and the stretches are positions there."""
    weighted = np.any(rows != 0, axis=0)
    used = np.flatnonzero(weighted) if columns is None else columns[weighted]
    breaks = np.flatnonzero(np.diff(used) > 1)
    if used.size == 0 or breaks.size == 0:
        return None
    starts = np.concatenate([[used[0]], used[breaks + 1]])
    stops = np.concatenate([used[breaks] + 1, [used[-1] + 1]])
    return [(int(a), int(b)) for a, b in zip(starts, stops)]


def noise_density(noise_mv: np.ndarray, rate: float) -> np.ndarray | None:
    """The smoothed noise density that :func:`weighted_sums_covariance` reads, or None where
    it returns None (too few samples, a missing one)."""
    noise = np.asarray(noise_mv, dtype=float)
    if noise.size < _MIN_NOISE_SAMPLES or not np.isfinite(noise).all():
        return None
    return _noise_density(noise, rate)


def weights_transforms(rows: np.ndarray) -> tuple[int, np.ndarray]:
    """The FFT length and the rows' transforms that :func:`weighted_sums_covariance` forms
    (they depend on the weights alone, so that rows used again keep them)."""
    n_fft = next_fast_len(2 * rows.shape[1])
    return n_fft, np.fft.rfft(rows, n=n_fft, axis=1)


def covariance_from_transforms(n_fft: int, transforms: np.ndarray, density: np.ndarray,
                               noise_size: int, rate: float) -> np.ndarray:
    """:func:`weighted_sums_covariance` of rows whose :func:`weights_transforms` are given,
    from the density of a noise stretch of `noise_size` samples."""
    spectrum = np.interp(np.fft.rfftfreq(n_fft, 1.0 / rate),
                         np.fft.rfftfreq(noise_size, 1.0 / rate), density)
    spectrum[1:(n_fft + 1) // 2] *= 2.0  # the negative frequencies, folded onto these
    weighted = transforms * spectrum[None, :]
    return (weighted @ transforms.conj().T).real * rate / n_fft


def _covariance_from_density(rows: np.ndarray, density: np.ndarray, noise_size: int,
                             rate: float) -> np.ndarray:
    """:func:`weighted_sums_covariance` of `rows` from the density :func:`_noise_density`
    gave for a noise stretch of `noise_size` samples (so that several sets of rows share
    one)."""
    n_fft, transforms = weights_transforms(rows)
    return covariance_from_transforms(n_fft, transforms, density, noise_size, rate)


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
