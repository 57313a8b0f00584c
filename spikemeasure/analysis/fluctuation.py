"""How much a trace fluctuates before a step once fast measurement noise is averaged out:
synaptic background, hum, slow noise.

Functions take a voltage trace, its sampling rate and a step onset, and return a value;
nothing here reads files or prints.
"""
from __future__ import annotations

import numpy as np
from scipy.ndimage import uniform_filter1d

from ..errors import InvalidSettingError
from .sweep_features import BASELINE_WINDOW_MS

__all__ = ["slow_fluctuation_mv"]


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
