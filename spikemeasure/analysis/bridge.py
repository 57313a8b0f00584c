"""Bridge error: the voltage an uncompensated electrode (series) resistance adds at a step's
edges, told apart from the membrane's charging.

Functions take a voltage trace, its sampling rate and the step's edges, and return a small
dataclass; nothing here reads files or prints.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InvalidSettingError

__all__ = ["BridgeEstimate", "bridge_error", "edge_jump", "SETTLE_MS", "EDGE_FIT_MS"]

#: Samples this close after an edge are left out: the recording's low-pass filter (a 4-pole
#: Bessel at 2-10 kHz on most amplifiers) is still settling there (its step response settles
#: to within 1 % in about 0.1 ms at 10 kHz and 0.5 ms at 2 kHz).
SETTLE_MS = 0.5
#: Length of the stretch fitted on each side of an edge.
EDGE_FIT_MS = 3.0

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
        The mean over the edges measured of jump / current change at that edge, MOhm
        (+step at the onset, -step at the offset); NaN when neither edge was measured.
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


def _charging_start(voltage_mv: np.ndarray, edge: int, n_settle: int, n_fit: int,
                    sampling_rate_hz: float) -> float:
    """Value at `edge` of the best single exponential a + b exp(-t / tau) fitted to the
    samples from `edge + n_settle` on (tau on a grid; a and b by linear least squares)."""
    part = voltage_mv[edge + n_settle:edge + n_settle + n_fit]
    if part.size < max(5, n_fit // 2) or not np.isfinite(part).all():
        return float("nan")
    t_ms = (n_settle + np.arange(part.size)) / sampling_rate_hz * 1e3
    best, start = np.inf, float("nan")
    for tau in _TAU_GRID_MS:
        design = np.column_stack([np.ones_like(t_ms), np.exp(-t_ms / tau)])
        coef, *_ = np.linalg.lstsq(design, part, rcond=None)
        sse = float(np.sum((design @ coef - part) ** 2))
        if sse < best:
            best, start = sse, float(coef[0] + coef[1])
    return start


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
        holds a missing sample.

    Notes
    -----
    Before the edge the voltage is taken as a straight line over `fit_ms` (the membrane is
    at rest or at steady state there) and evaluated at the edge. After it the membrane
    charges along a sum of exponentials dominated by the slowest; one exponential
    a + b exp(-t / tau) is fitted from `settle_ms` to `settle_ms + fit_ms` after the edge
    and extrapolated back to the edge (t = 0), where the membrane has not yet moved, so
    a + b - (the level before) is the jump the electrode adds.
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
    return (_charging_start(v, edge, n_settle, n_fit, rate)
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
    instantaneously [1]_. The jump at each edge (:func:`edge_jump`) divided by the current
    change there is R_s; the two edges are averaged. An offset that is not inside the trace
    (a step running to the end) leaves the onset alone.

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
    per_edge = np.array([on / step_pa, off / -step_pa]) * 1e3  # mV / pA = GOhm
    finite = per_edge[np.isfinite(per_edge)]
    return BridgeEstimate(on, off, float(finite.mean()) if finite.size else float("nan"))
