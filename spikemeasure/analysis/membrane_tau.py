"""The membrane time constant: a single exponential fitted to the response to a
hyperpolarizing step, and the SD the recording's noise gives it.

Functions take a voltage trace, its sampling rate and the step, and return a small
dataclass or a value; nothing here reads files or prints.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import uniform_filter1d
from scipy.optimize import OptimizeWarning, curve_fit

from .fluctuation import weighted_sums_covariance
from .line_noise import LineNoise, corrected_weights

__all__ = ["ExponentialFit", "fit_membrane_tau", "exponential_fit_sd", "END_FRACTION",
           "TAU_SMOOTHING_MS", "FILTER_DELAY_MS"]

#: The time-constant fit ends where the response is this close (as a fraction of its
#: deflection) to its minimum.
END_FRACTION = 0.02
#: Width of the moving average on which the time-constant fit finds the response's minimum.
TAU_SMOOTHING_MS = 1.0
#: The time-constant fit leaves out this much after onset: a 4-pole low-pass Bessel filter
#: at 3 kHz or above delays and rounds the response's start by about this much (its group
#: delay at 3 kHz is 0.11 ms: scipy.signal.group_delay of scipy.signal.bessel); after it
#: the filtered exponential keeps the membrane's tau. Kept short, since a conductance-based
#: membrane's early response is not one exponential and a longer skip would move its tau.
FILTER_DELAY_MS = 0.1


@dataclass(frozen=True)
class ExponentialFit:
    """V(t) = v_inf + (v0 - v_inf) exp(-t / tau_ms), t from step onset."""

    tau_ms: float
    v0_mv: float
    v_inf_mv: float
    r_squared: float
    rms_residual_mv: float
    n_samples: int
    #: Time of the first fitted sample from onset (the skipped settling), ms.
    start_ms: float = 0.0
    #: The fitted samples minus the fitted curve, mV (the noise the SD copies).
    residual_mv: np.ndarray | None = None


def _exponential(t, v_inf, delta, tau):
    return v_inf + delta * np.exp(-t / tau)


def fit_membrane_tau(voltage_mv: np.ndarray, sampling_rate_hz: float, onset_s: float,
                     offset_s: float, smooth_ms: float = TAU_SMOOTHING_MS,
                     skip_ms: float = 0.0) -> ExponentialFit | None:
    """Fit a single exponential to the voltage from step onset to its minimum.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    sampling_rate_hz : float
    onset_s, offset_s : float
        The (hyperpolarizing) step.
    smooth_ms : float, optional
        The minimum that ends the fit is found on a moving average of this width, so noise
        does not end it early.
    skip_ms : float, optional
        Samples this close after onset are left out of the fit (time still counts from
        onset): an electrode's voltage jump at the step edge, and the filter settling after
        it, are not the membrane's charging (:mod:`spikemeasure.analysis.bridge`).

    Returns
    -------
    ExponentialFit or None
        None when the fit does not converge or the span is too short (fewer than 5 samples).

    Notes
    -----
    ``scipy.optimize.curve_fit`` fits V(t) = v_inf + (v0 - v_inf) exp(-t / tau) to the raw
    samples from onset towards the minimum of the smoothed response (for a cell with sag, the
    minimum before the sag; for a passive cell, the end of the step), ending where the
    smoothed response first comes within :data:`END_FRACTION` (2 %) of the deflection from
    that minimum, about 4 tau for an exponential; the first `skip_ms` are left out. Starting
    values: the end value, the drop,
    and the time to 63 % of the drop. The quality is R^2 = 1 - SS_res / SS_tot over the
    fitted samples.
    """
    start = int(round(onset_s * sampling_rate_hz))
    stop = min(voltage_mv.size, int(round(offset_s * sampling_rate_hz)))
    if stop - start < 5:
        return None
    span = voltage_mv[start:stop]
    width = max(1, int(round(smooth_ms * 1e-3 * sampling_rate_hz)))
    smooth = uniform_filter1d(span, size=min(width, span.size), mode="nearest")
    low = int(np.argmin(smooth))
    # end where the response first comes within END_FRACTION of the deflection from its
    # minimum (about 4 tau for an exponential): a long flat stretch after that adds noise but
    # no information about tau
    near = smooth <= smooth[low] + END_FRACTION * (smooth[0] - smooth[low])
    low = min(low, int(np.argmax(near)))
    skip = int(np.ceil(max(0.0, skip_ms) * 1e-3 * sampling_rate_hz))
    if low - skip < 5:
        return None
    y = span[skip:low + 1]
    t = (skip + np.arange(y.size)) / sampling_rate_hz * 1e3
    v_inf0, v00 = float(y[-max(1, y.size // 20):].mean()), float(y[:3].mean())
    drop = v00 - v_inf0
    target = v00 - 0.632 * drop
    crossed = np.flatnonzero(y <= target) if drop > 0 else np.flatnonzero(y >= target)
    tau0 = float(t[crossed[0]]) if crossed.size and crossed[0] > 0 else float(t[-1]) / 3
    try:
        # the optimizer may try a negative tau on its way, where exp overflows harmlessly
        with warnings.catch_warnings(), np.errstate(over="ignore"):
            warnings.simplefilter("error", OptimizeWarning)
            params, _ = curve_fit(_exponential, t, y, p0=(v_inf0, drop, max(tau0, 1e-3)),
                                  maxfev=5000)
    except (RuntimeError, OptimizeWarning, ValueError):
        return None
    v_inf, delta, tau = (float(p) for p in params)
    if not (np.isfinite(tau) and tau > 0):
        return None
    residual = y - _exponential(t, v_inf, delta, tau)
    total = float(np.sum((y - y.mean()) ** 2))
    r2 = 1.0 - float(np.sum(residual ** 2)) / total if total > 0 else float("nan")
    rms = float(np.sqrt(np.mean(residual ** 2)))
    return ExponentialFit(tau, v_inf + delta, v_inf, r2, rms, int(y.size), float(t[0]),
                          residual)


def exponential_fit_sd(fit: ExponentialFit, sampling_rate_hz: float,
                       noise_mv: np.ndarray | None = None, *,
                       line_noise: LineNoise | None = None, first_sample: int = 0) -> float:
    """SD of an exponential fit's time constant that the recording's noise implies.

    Parameters
    ----------
    fit : ExponentialFit
        From :func:`fit_membrane_tau` (with its residual).
    sampling_rate_hz : float
    noise_mv : ndarray, optional
        A stretch of the recording's noise (the sweep's baseline); by default the fit's
        residual.
    line_noise : LineNoise, optional
        The hum and drift removed from the voltage before the fit
        (:func:`~spikemeasure.analysis.sweep_passive.passive_voltage`): the SD then holds
        what their estimate leaves (:func:`~spikemeasure.analysis.line_noise.corrected_weights`).
    first_sample : int, optional
        The sweep's sample of the first fitted sample (with `line_noise`).

    Returns
    -------
    float
        ms; NaN when the noise is too short to estimate its spectrum (under 16 samples).

    Notes
    -----
    Linearized at the solution, the least-squares fit moves (v_inf, delta, tau) by
    P e for noise e, P = (J^T J)^-1 J^T the pseudo-inverse of the Jacobian J of
    v_inf + delta exp(-t / tau) at the fitted samples. The covariance of P e for noise with
    the spectrum of `noise_mv` (:func:`~spikemeasure.analysis.fluctuation.weighted_sums_covariance`)
    is the sandwich P C P^T, C the noise's covariance: for white noise, sigma^2 (J^T J)^-1,
    the covariance curve_fit reports (Press et al. 2007, section 15.5, from memory); for
    correlated noise (filtered, hum, synaptic background) larger, as neighbouring samples
    then bring less new information.

    References
    ----------
    .. [1] W. H. Press, S. A. Teukolsky, W. T. Vetterling and B. P. Flannery, *Numerical
       Recipes*, 3rd ed., Cambridge University Press, 2007.
    """
    if fit.residual_mv is None or not sampling_rate_hz > 0:
        return float("nan")
    t = fit.start_ms + np.arange(fit.n_samples) / sampling_rate_hz * 1e3
    decay = np.exp(-t / fit.tau_ms)
    delta = fit.v0_mv - fit.v_inf_mv
    jacobian = np.column_stack([np.ones_like(t), decay, delta * t / fit.tau_ms ** 2 * decay])
    noise = fit.residual_mv if noise_mv is None else noise_mv
    rows = np.linalg.pinv(jacobian)
    if line_noise is not None:
        rows, _ = corrected_weights(rows, first_sample, line_noise)
    cov = weighted_sums_covariance(rows, noise, sampling_rate_hz)
    return float(np.sqrt(max(0.0, cov[2, 2]))) if cov is not None else float("nan")
