"""Command currents for tests and sample data: a step family with a test pulse before each
step, and ramps of given slopes (numpy only).

Sample ``k`` lies at time ``k / sampling_rate_hz``; it carries an epoch that runs from
``start_s`` to ``end_s`` when ``start_s <= k / sampling_rate_hz < end_s``.
"""
from __future__ import annotations

from typing import Sequence

import numpy as np

__all__ = ["steps_after_test_pulse", "ramps"]


def _times(duration_s: float, sampling_rate_hz: float) -> np.ndarray:
    rate = float(sampling_rate_hz)
    if not (np.isfinite(rate) and rate > 0):
        raise ValueError(f"`sampling_rate_hz` must be a positive number (got {sampling_rate_hz})")
    if not (np.isfinite(duration_s) and duration_s > 0):
        raise ValueError(f"`duration_s` must be a positive number (got {duration_s})")
    return np.arange(int(round(duration_s * rate))) / rate


def _check_window(name: str, start_s: float, end_s: float, duration_s: float) -> None:
    if not (0 <= start_s < end_s <= duration_s):
        raise ValueError(f"`{name}` must satisfy 0 <= start < end <= duration_s "
                         f"(got {start_s} to {end_s} s in {duration_s} s)")


def steps_after_test_pulse(step_sizes_pa: Sequence[float], *, sampling_rate_hz: float,
                     duration_s: float = 1.0, step_s: tuple[float, float] = (0.3, 0.8),
                     pulse_pa: float = -50.0, pulse_s: tuple[float, float] = (0.02, 0.07),
                     holding_pa: float = 0.0) -> np.ndarray:
    """One sweep per step size: holding, a test pulse, holding again, then the step.

    Parameters
    ----------
    step_sizes_pa : sequence of float
        Step size of each sweep relative to holding, pA (0 gives a sweep with the test pulse
        only).
    sampling_rate_hz : float
    duration_s : float, optional
    step_s, pulse_s : (start_s, end_s), optional
        Times of the step and of the test pulse.
    pulse_pa : float, optional
        Test pulse size relative to holding, pA.
    holding_pa : float, optional

    Returns
    -------
    ndarray, shape (n_sweeps, n_samples)
        Command current in pA.
    """
    t = _times(duration_s, sampling_rate_hz)
    _check_window("step_s", *step_s, duration_s)
    _check_window("pulse_s", *pulse_s, duration_s)
    sizes = np.asarray(step_sizes_pa, dtype=float).reshape(-1, 1)
    in_step = (t >= step_s[0]) & (t < step_s[1])
    in_pulse = (t >= pulse_s[0]) & (t < pulse_s[1])
    return holding_pa + in_pulse * float(pulse_pa) + in_step * sizes


def ramps(slopes_pa_per_s: Sequence[float], *, sampling_rate_hz: float,
          duration_s: float = 3.0, ramp_s: tuple[float, float] = (0.5, 2.5),
          holding_pa: float = 0.0) -> np.ndarray:
    """One sweep per slope: holding, then a ramp from holding that ends back at holding.

    Parameters
    ----------
    slopes_pa_per_s : sequence of float
        Slope of each sweep's ramp, pA/s.
    sampling_rate_hz : float
    duration_s : float, optional
    ramp_s : (start_s, end_s), optional
        The ramp starts at holding at ``start_s`` and rises to ``slope * (end_s - start_s)``
        above it, just before ``end_s``, where the command drops back to holding.
    holding_pa : float, optional

    Returns
    -------
    ndarray, shape (n_sweeps, n_samples)
        Command current in pA: ``holding_pa + slope * (t - start_s)`` on the ramp.
    """
    t = _times(duration_s, sampling_rate_hz)
    _check_window("ramp_s", *ramp_s, duration_s)
    slopes = np.asarray(slopes_pa_per_s, dtype=float).reshape(-1, 1)
    on = (t >= ramp_s[0]) & (t < ramp_s[1])
    return holding_pa + slopes * np.where(on, t - ramp_s[0], 0.0)
