"""Bridge error: the voltage an uncompensated electrode (series) resistance adds at a step's
onset, told apart from the membrane's charging.

Functions take a voltage trace, its sampling rate and the step's edges, and return a small
dataclass; nothing here reads files or prints.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import uniform_filter1d

from ..errors import InvalidSettingError

__all__ = ["BridgeEstimate", "bridge_error", "edge_jump", "SETTLE_MS", "EDGE_FIT_MS",
           "CHARGING_FIT_MS", "MIN_TAU_TO_SETTLE"]

#: Samples this close after an edge are left out: the recording's low-pass filter (a 4-pole
#: Bessel at 2-10 kHz on most amplifiers) is still settling there (its step response settles
#: to within 1 % in about 0.1 ms at 10 kHz and 0.5 ms at 2 kHz).
SETTLE_MS = 0.5
#: Length of the stretch fitted on each side of an edge (short, so hum and drift bend it
#: little).
EDGE_FIT_MS = 3.0
#: Length of the stretch after an edge whose charging curve gives the time constant used
#: over the short one (long, so noise moves it little).
CHARGING_FIT_MS = 20.0

#: The jump is told from the charging only when the charging's time constant is at least
#: this many times the settling time left out: a membrane that charges within the settling
#: hides where its curve started (a rule of our own).
MIN_TAU_TO_SETTLE = 10.0

#: Width of the moving average on which the charging curve's furthest point is found.
SMOOTHING_MS = 1.0

#: Time constants (ms) tried for the charging curve after an edge; the largest is a straight
#: line over :data:`EDGE_FIT_MS` in all but name.
_TAU_GRID_MS = np.geomspace(0.2, 500.0, 80)


@dataclass(frozen=True)
class BridgeEstimate:
    """The voltage jumps at a step's two edges and the resistance they imply.

    Attributes
    ----------
    onset_jump_mv, offset_jump_mv : float
        Instantaneous voltage change at the onset and at the offset (after minus before), mV;
        NaN where the trace is too short or has a gap there.
    bridge_error_mohm : float
        onset_jump_mv / step size, MOhm; NaN when the onset was not measured. The offset's
        jump, often bent by a rebound after a hyperpolarizing step, is not used.
    """

    onset_jump_mv: float
    offset_jump_mv: float
    bridge_error_mohm: float


def _level_before(voltage_mv: np.ndarray, edge: int, n_fit: int) -> float:
    """Straight-line fit to the `n_fit` samples before `edge`, evaluated at `edge`."""
    part = voltage_mv[max(0, edge - n_fit):edge]
    if part.size < 3 or not np.isfinite(part).all():
        return float("nan")
    t = np.arange(-part.size, 0, dtype=float)
    slope, intercept = np.polyfit(t, part, 1)
    return float(intercept)


def _best_exponential(t_ms: np.ndarray, part: np.ndarray) -> tuple[float, np.ndarray]:
    """(tau_ms, [a, b]) of the least-squares a + b exp(-t / tau), tau on a grid."""
    # every tau of the grid at once: about the means, the least-squares b of each
    # exponential is a ratio of sums, and the residual is summed, not formed by subtraction
    decay = np.exp(-t_ms[None, :] / _TAU_GRID_MS[:, None])
    decay -= decay.mean(axis=1, keepdims=True)
    centred = part - part.mean()
    power = np.sum(decay * decay, axis=1)
    b = np.sum(decay * centred, axis=1) / np.where(power > 0, power, 1.0)
    sse = np.sum((centred - b[:, None] * decay) ** 2, axis=1)
    if not np.isfinite(sse).any():
        return float("nan"), np.full(2, np.nan)
    tau = float(_TAU_GRID_MS[int(np.nanargmin(sse))])
    design = np.column_stack([np.ones_like(t_ms), np.exp(-t_ms / tau)])
    coef, *_ = np.linalg.lstsq(design, part, rcond=None)
    return tau, coef


def _charging_start(voltage_mv: np.ndarray, edge: int, n_settle: int, n_fit: int,
                    n_long: int, sampling_rate_hz: float) -> float:
    """Value at `edge` of the charging curve after it: the time constant of the best
    exponential over up to `n_long` samples from `edge + n_settle` (ending at the curve's
    furthest point from its start, before any sag or rebound turns it back), then
    a + b exp(-t / tau) with that tau fitted over the first `n_fit` of them."""
    part = voltage_mv[edge + n_settle:edge + n_settle + max(n_long, n_fit)]
    if part.size < max(5, n_fit) or not np.isfinite(part).all():
        return float("nan")
    t_ms = (n_settle + np.arange(part.size)) / sampling_rate_hz * 1e3
    width = max(1, int(round(SMOOTHING_MS * 1e-3 * sampling_rate_hz)))
    smooth = uniform_filter1d(part, size=min(width, part.size), mode="nearest")
    furthest = int(np.argmax(np.abs(smooth - smooth[0])))
    n_tau = max(n_fit, furthest + 1)
    tau, _ = _best_exponential(t_ms[:n_tau], part[:n_tau])
    if tau < MIN_TAU_TO_SETTLE * n_settle / sampling_rate_hz * 1e3:
        return float("nan")
    design = np.column_stack([np.ones(n_fit), np.exp(-t_ms[:n_fit] / tau)])
    coef, *_ = np.linalg.lstsq(design, part[:n_fit], rcond=None)
    return float(coef[0] + coef[1])


def edge_jump(voltage_mv: np.ndarray, sampling_rate_hz: float, edge_s: float,
              settle_ms: float = SETTLE_MS, fit_ms: float = EDGE_FIT_MS) -> float:
    """The instantaneous voltage change at a current edge, apart from membrane charging.

    Parameters
    ----------
    voltage_mv : ndarray
        Recorded voltage, mV.
    sampling_rate_hz : float
    edge_s : float
        Time of the edge (the first sample at the new current), s from the first sample.
    settle_ms : float, optional
        Samples this close after the edge are left out (the filter's settling).
    fit_ms : float, optional
        Length of the stretch fitted on each side.

    Returns
    -------
    float
        Voltage just after minus just before the edge, mV; NaN when a stretch is short or
        holds a missing sample, or the membrane charges too fast to tell the jump from it.

    Notes
    -----
    Before the edge the voltage is taken as a straight line over `fit_ms` (the membrane is
    at rest or at steady state there) and evaluated at the edge. After it the membrane
    charges along a sum of exponentials dominated by the slowest: the time constant of the
    best exponential (on a grid of time constants from 0.2 to 500 ms, amplitudes by linear
    least squares) over :data:`CHARGING_FIT_MS` from `settle_ms` on, where noise moves it
    little (ending earlier at the curve's furthest point from its start, on a
    :data:`SMOOTHING_MS` moving average, so a sag or a rebound does not bend it); then
    a + b exp(-t / tau) with that tau over `settle_ms` to `settle_ms + fit_ms`,
    extrapolated back to the edge (t = 0), where the membrane has not yet moved, so
    a + b - (the level before) is the jump the electrode adds. When that time constant is
    under :data:`MIN_TAU_TO_SETTLE` times `settle_ms`, most of the charging happens while
    the filter settles and the extrapolation would guess: NaN. Short stretches keep mains
    hum and drift from bending the two lines much; the fixed time constant keeps the
    extrapolation steady in noise.
    """
    rate = _checked_rate(sampling_rate_hz)
    if not (settle_ms >= 0 and fit_ms > 0):
        raise InvalidSettingError("`settle_ms` must be 0 or more and `fit_ms` positive")
    v = np.asarray(voltage_mv, dtype=float)
    edge = int(round(edge_s * rate))
    n_fit = max(5, int(round(fit_ms * 1e-3 * rate)))
    n_settle = int(np.ceil(settle_ms * 1e-3 * rate))
    if edge <= 0 or edge >= v.size:
        return float("nan")
    n_long = int(round(CHARGING_FIT_MS * 1e-3 * rate))
    return (_charging_start(v, edge, n_settle, n_fit, n_long, rate)
            - _level_before(v, edge, n_fit))


def _checked_rate(sampling_rate_hz: float) -> float:
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    return rate


def bridge_error(voltage_mv: np.ndarray, sampling_rate_hz: float, onset_s: float,
                 offset_s: float, step_pa: float, settle_ms: float = SETTLE_MS,
                 fit_ms: float = EDGE_FIT_MS) -> BridgeEstimate:
    """Estimate the uncompensated electrode resistance from one current step.

    Parameters
    ----------
    voltage_mv : ndarray
        Recorded voltage, mV.
    sampling_rate_hz : float
    onset_s, offset_s : float
        The step's edges, s from the first sample (``offset_s`` is the first sample after
        the step).
    step_pa : float
        Step size, pA (non-zero).
    settle_ms, fit_ms : float, optional
        See :func:`edge_jump`.

    Returns
    -------
    BridgeEstimate

    Notes
    -----
    A current I through an uncompensated series resistance R_s adds R_s I to the recorded
    voltage at once, while the membrane, a capacitor, cannot change its voltage
    instantaneously [1]_. The jump at the onset (:func:`edge_jump`) divided by the step is
    R_s. The jump at the offset is returned too but not used: after a hyperpolarizing step
    the membrane often rebounds at once (anode-break excitation, h-current, low-threshold
    calcium bursts), which the extrapolation back to the edge would take for a jump.

    The extrapolation goes back to the edge as the command gives it, while the filtered
    recording lags by the filter's group delay d (about 34 us for a 4-pole Bessel at 10 kHz),
    which biases the jump by about the membrane deflection times d / tau_m: negligible for
    membrane time constants of several ms, a few MOhm for a membrane near 1 ms.

    References
    ----------
    .. [1] B. Sakmann and E. Neher (eds.), "Single-Channel Recording", 2nd ed., Plenum,
       1995 (series resistance and bridge balance in current clamp; from memory).
    """
    rate = _checked_rate(sampling_rate_hz)
    if not (np.isfinite(step_pa) and step_pa != 0):
        raise InvalidSettingError("`step_pa` must be a finite non-zero current")
    if not offset_s > onset_s:
        raise InvalidSettingError("`offset_s` must be after `onset_s`")
    on = edge_jump(voltage_mv, rate, onset_s, settle_ms, fit_ms)
    off = edge_jump(voltage_mv, rate, offset_s, settle_ms, fit_ms)
    return BridgeEstimate(on, off, on / step_pa * 1e3)  # mV / pA = GOhm
