"""The membrane time constant: one exponential with one time constant fitted to the
charging of the membrane under the hyperpolarizing steps, and the SD the recording's noise
gives it.

Functions take voltage traces, their sampling rate and the steps, and return a small
dataclass or a value; nothing here reads files or prints.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy.ndimage import uniform_filter1d
from scipy.optimize import minimize_scalar

from .fluctuation import weighted_sums_covariance
from .line_noise import LineNoise, corrected_weights

__all__ = ["ExponentialFit", "SharedTauFit", "fit_membrane_tau", "fit_shared_tau",
           "exponential_fit_sd", "shared_tau_sd", "END_FRACTION", "TAU_SMOOTHING_MS",
           "FILTER_DELAY_MS", "WINDOW_TAUS", "TURN_NOISE"]

#: The time-constant fit ends where the fitted exponential has come this close (as a
#: fraction of its deflection) to its end value: after WINDOW_TAUS = ln(1 / END_FRACTION)
#: time constants (3.9 for 2 %), since the flat stretch after carries noise but little
#: information about tau.
END_FRACTION = 0.02
#: The fit's window in time constants, from onset: ln(1 / END_FRACTION).
WINDOW_TAUS = math.log(1.0 / END_FRACTION)
#: Width of the moving average on which the time-constant fit finds the response's minimum
#: (a window never reaches past it: a sag or an active membrane's undershoot turns the
#: response back there).
TAU_SMOOTHING_MS = 1.0
#: A response turns back from its minimum (a sag) when it rises after it by more than this
#: many SDs of the moving average's noise as well as by END_FRACTION of the deflection: the
#: lowest of the tens of averages along a flat stretch lies 2-3 SDs below its level, and
#: the level's own mean adds one more (a rule of our own).
TURN_NOISE = 5.0
#: The time-constant fit leaves out this much after onset: a 4-pole low-pass Bessel filter
#: at 3 kHz or above delays and rounds the response's start by about this much (its group
#: delay at 3 kHz is 0.11 ms: scipy.signal.group_delay of scipy.signal.bessel); after it
#: the filtered exponential keeps the membrane's tau. Kept short, since a conductance-based
#: membrane's early response is not one exponential and a longer skip would move its tau.
FILTER_DELAY_MS = 0.1
#: The search for tau spans this factor either side of the starting value (log-spaced grid
#: of _GRID points, then a bounded Brent refinement between the best point's neighbours).
_SEARCH_FACTOR = 30.0
_GRID = 61
#: ... and, once a first tau is found, within this factor (_NEAR_GRID points) of the last.
_NEAR_FACTOR = 1.2
_NEAR_GRID = 9
_MAX_ITERATIONS = 60


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


@dataclass(frozen=True)
class SharedTauFit:
    """V_j(t) = v_inf_j + (v0_j - v_inf_j) exp(-t / tau_ms) on each step j, t from onset."""

    tau_ms: float
    #: Per step: the fitted curve's value at onset and its end value, mV.
    v0_mv: np.ndarray
    v_inf_mv: np.ndarray
    #: Per step: samples fitted, from start_ms on.
    n_samples: np.ndarray
    #: Time of the first fitted sample from onset (the skipped settling), ms.
    start_ms: float
    #: R^2 over the fitted samples of all steps (each about its own mean).
    r_squared: float
    rms_residual_mv: float
    #: Per step: the fitted samples minus the fitted curve, mV.
    residual_mv: tuple[np.ndarray, ...]
    #: The positions, among the segments given, of the steps fitted (a step too short to
    #: leave 5 samples, or with a missing sample, is left out).
    steps: tuple[int, ...] = ()

    def step(self, j: int) -> ExponentialFit:
        """The fit on step `j` alone, as an :class:`ExponentialFit`."""
        res = self.residual_mv[j]
        return ExponentialFit(self.tau_ms, float(self.v0_mv[j]), float(self.v_inf_mv[j]),
                              self.r_squared, float(np.sqrt(np.mean(res ** 2))),
                              int(self.n_samples[j]), self.start_ms, res)


def _line_and_decay(ys: list[np.ndarray], ts: list[np.ndarray], tau: np.ndarray
                    ) -> np.ndarray:
    """Sum over steps of the least-squares residual of a + b exp(-t / tau) for each tau
    of the array `tau` (a and b solved in closed form per step and tau)."""
    total = np.zeros(tau.size)
    for y, t in zip(ys, ts):
        x = np.exp(-t[None, :] / tau[:, None])
        n = y.size
        sx, sy = x.sum(axis=1), y.sum()
        sxx, sxy = (x * x).sum(axis=1), x @ y
        cxx = sxx - sx * sx / n
        cxy = sxy - sx * sy / n
        cyy = float(np.sum((y - sy / n) ** 2))
        with np.errstate(divide="ignore", invalid="ignore"):
            explained = np.where(cxx > 0, cxy * cxy / cxx, 0.0)
        total += cyy - explained
    return total


def _minima(spans: list[np.ndarray], width_ms: float, rate: float) -> list[int]:
    """Each span's minimum on a centred moving average `width_ms` wide (the ends padded with
    the end samples)."""
    width = max(1, int(round(width_ms * 1e-3 * rate)))
    return [int(np.argmin(uniform_filter1d(s, size=min(width, s.size), mode="nearest")))
            for s in spans]


def _turns(spans: list[np.ndarray], width_ms: float, rate: float,
           noise_mv: Sequence[float]) -> list[int | None]:
    """Each span's minimum (:func:`_minima`) where the response turns back from it: the mean
    of the span's last `width_ms` lies over the minimum by more than END_FRACTION of the
    deflection (the first 3 samples' mean less the minimum) and by more than TURN_NOISE
    SDs of a `width_ms` average of white noise of SD `noise_mv`; None where it does not."""
    width = max(1, int(round(width_ms * 1e-3 * rate)))
    out: list[int | None] = []
    for s, low, noise in zip(spans, _minima(spans, width_ms, rate), noise_mv):
        smooth = uniform_filter1d(s, size=min(width, s.size), mode="nearest")
        rise = float(np.mean(s[-width:]) - smooth[low])
        depth = float(np.mean(s[:3]) - smooth[low])
        turned = (rise > END_FRACTION * depth
                  and rise > TURN_NOISE * float(noise) / np.sqrt(min(width, s.size)))
        out.append(low if turned else None)
    return out


def _best_tau(ys: list[np.ndarray], ts: list[np.ndarray], around: float,
              factor: float = _SEARCH_FACTOR, points: int = _GRID) -> float | None:
    """The tau minimizing the summed residual, searched over a log-spaced grid of `points`
    within `factor` either side of `around`, then refined by a bounded Brent search between
    the best point's neighbours (None when the best point is at the grid's edge: no minimum
    inside)."""
    grid = around * np.exp(np.linspace(-np.log(factor), np.log(factor), points))
    cost = _line_and_decay(ys, ts, grid)
    best = int(np.argmin(cost))
    if best == 0 or best == grid.size - 1:
        return None
    found = minimize_scalar(lambda u: float(_line_and_decay(ys, ts, np.array([np.exp(u)]))[0]),
                            bounds=(np.log(grid[best - 1]), np.log(grid[best + 1])),
                            method="bounded", options={"xatol": 1e-7})
    return float(np.exp(found.x))


def fit_shared_tau(segments: Sequence[np.ndarray], sampling_rate_hz: float,
                   skip_ms: float = FILTER_DELAY_MS, smooth_ms: float = TAU_SMOOTHING_MS,
                   noise_mv: Sequence[float] | None = None) -> SharedTauFit | None:
    """Fit one time constant to the charging of the membrane under several steps.

    Parameters
    ----------
    segments : sequence of ndarray
        Each step's voltage (mV) from its onset to its offset, as recorded (one
        hyperpolarizing step each).
    sampling_rate_hz : float
    skip_ms : float, optional
        Samples this close after onset are left out of the fit (time still counts from
        onset): the low-pass filter's delay (:data:`FILTER_DELAY_MS`), or an electrode's
        voltage jump at the step edge and the filter settling after it
        (:mod:`spikemeasure.analysis.bridge`).
    smooth_ms : float, optional
        The least width of the moving average on which each step's minimum is found (the
        width is the larger of this and tau).
    noise_mv : sequence of float, optional
        Each segment's noise SD (white, per sample), mV: a turn back from the minimum must
        stand over what noise gives a moving average's minimum (none by default, for a
        noise-free trace).

    Returns
    -------
    SharedTauFit or None
        None when no step leaves 5 samples to fit or no time constant minimizes the
        residual within a factor of 30 of the starting value.

    Notes
    -----
    Each step j is fitted with V_j(t) = v_inf_j + delta_j exp(-t / tau), its own end value
    and size, and one tau for all, by least squares over its samples from `skip_ms` after
    onset to the window's end: :data:`WINDOW_TAUS` (ln 50, 3.9) time constants after onset,
    where the fitted exponential has come within :data:`END_FRACTION` (2 %) of its
    deflection, or the step's minimum (of its centred moving average over max(`smooth_ms`,
    tau)) where the response turns back from it (a sag or an active membrane's undershoot):
    where the mean of the step's last max(`smooth_ms`, tau) lies above that minimum by more
    than :data:`END_FRACTION` of the deflection (closer counts as flat, as the window's own
    end does) and by more than :data:`TURN_NOISE` SDs of such an average of the noise (the
    minimum of a noisy flat stretch lies about that far below its level), or the step's
    end, whichever comes first.
    The window depends on tau, so the fit is repeated with the windows of its last tau until
    they repeat (a fixed point, or a cycle of windows a sample apart, whose first repeated
    windows' fit is taken; at most 60 passes; a window set by the noisy samples
    themselves, such as where they first come near their minimum, would end where the noise
    happens to be low, and bias the end value and tau). For a given tau, v_inf_j and delta_j
    are linear and solved in closed form (variable projection: Golub and Pereyra 1973), and
    tau minimizes the summed squared residual: a log-spaced grid over a factor of 30 either
    side of the starting value (the time to 63 % of the largest step's deflection on the
    moving average), then scipy.optimize.minimize_scalar (bounded Brent) between the best
    grid point's neighbours. The quality is R^2 = 1 - SS_res / SS_tot over the fitted
    samples, SS_tot about each step's mean.

    References
    ----------
    .. [1] G. H. Golub and V. Pereyra, "The differentiation of pseudo-inverses and
       nonlinear least squares problems whose variables separate", SIAM J. Numer. Anal. 10,
       413-432, 1973.
    """
    rate = float(sampling_rate_hz)
    given = [np.asarray(s, dtype=float) for s in segments]
    positions = [k for k, s in enumerate(given) if s.size >= 5 and np.isfinite(s).all()]
    spans = [given[k] for k in positions]
    if not spans or not rate > 0:
        return None
    skip = int(np.ceil(max(0.0, skip_ms) * 1e-3 * rate - 1e-9))
    noises = ([0.0] * len(given) if noise_mv is None
              else [float(noise_mv[k]) for k in range(len(given))])
    noises = [noises[k] for k in positions]
    lows = _minima(spans, smooth_ms, rate)
    depths, halves = [], []
    for s, low in zip(spans, lows):
        smooth = uniform_filter1d(s, size=min(max(1, int(round(smooth_ms * 1e-3 * rate))),
                                              s.size), mode="nearest")
        depths.append(float(smooth[0] - smooth[low]))
        below = np.flatnonzero(smooth[:low + 1] <= smooth[0] - 0.632 * depths[-1])
        halves.append(int(below[0]) if below.size else low)
    largest = int(np.argmax(depths))
    tau = max(halves[largest], 1) / rate * 1e3
    ys: list[np.ndarray] = []
    ts: list[np.ndarray] = []
    windows: tuple[tuple[int, int], ...] = ()
    seen: dict[tuple[tuple[int, int], ...], float] = {}
    for _ in range(_MAX_ITERATIONS):
        turns = _turns(spans, max(smooth_ms, tau), rate, noises)
        end = int(np.floor(WINDOW_TAUS * tau * 1e-3 * rate))
        stops = [min(end, s.size - 1) if low is None else min(low, end, s.size - 1)
                 for low, s in zip(turns, spans)]
        now = tuple((k, stop) for k, stop in enumerate(stops) if stop - skip >= 4)
        if now in seen:
            # a fixed point (tau was fitted on the windows it sets), or a cycle of windows
            # a sample apart: the fit on these windows
            windows, tau = now, seen[now]
            break
        if not now:
            return None
        windows = now
        ys = [spans[k][skip:stop + 1] for k, stop in windows]
        ts = [(skip + np.arange(y.size)) / rate * 1e3 for y in ys]
        # after the first pass the window moves tau a little: a narrow grid first
        new = _best_tau(ys, ts, tau, _NEAR_FACTOR, _NEAR_GRID) if seen else None
        new = _best_tau(ys, ts, tau) if new is None else new
        if new is None:
            return None
        seen[windows] = tau = new
    ys = [spans[k][skip:stop + 1] for k, stop in windows]
    ts = [(skip + np.arange(y.size)) / rate * 1e3 for y in ys]
    keep = [k for k, _ in windows]
    v0, v_inf, residuals = [], [], []
    ss_res = ss_tot = 0.0
    for y, t in zip(ys, ts):
        design = np.column_stack([np.ones_like(t), np.exp(-t / tau)])
        (a, b), *_ = np.linalg.lstsq(design, y, rcond=None)
        residual = y - design @ np.array([a, b])
        v0.append(float(a + b))
        v_inf.append(float(a))
        residuals.append(residual)
        ss_res += float(np.sum(residual ** 2))
        ss_tot += float(np.sum((y - y.mean()) ** 2))
    n = np.array([y.size for y in ys])
    r2 = 1.0 - ss_res / ss_tot if ss_tot > 0 else float("nan")
    rms = float(np.sqrt(ss_res / n.sum()))
    return SharedTauFit(float(tau), np.array(v0), np.array(v_inf), n, skip / rate * 1e3,
                        r2, rms, tuple(residuals), tuple(positions[k] for k in keep))


def fit_membrane_tau(voltage_mv: np.ndarray, sampling_rate_hz: float, onset_s: float,
                     offset_s: float, smooth_ms: float = TAU_SMOOTHING_MS,
                     skip_ms: float = 0.0) -> ExponentialFit | None:
    """Fit a single exponential to the charging under one step (:func:`fit_shared_tau`
    with that step alone).

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    sampling_rate_hz : float
    onset_s, offset_s : float
        The (hyperpolarizing) step.
    smooth_ms : float, optional
        The moving average on which the response's minimum is found.
    skip_ms : float, optional
        Samples this close after onset are left out of the fit (time still counts from
        onset).

    Returns
    -------
    ExponentialFit or None
        None when the fit finds no time constant or the span is too short (fewer than 5
        samples).

    Notes
    -----
    See :func:`fit_shared_tau`: the window runs from `skip_ms` to 3.9 fitted time
    constants, the step's minimum or its end, whichever comes first.
    """
    start = int(round(onset_s * sampling_rate_hz))
    stop = min(np.asarray(voltage_mv).size, int(round(offset_s * sampling_rate_hz)))
    if stop - start < 5:
        return None
    fit = fit_shared_tau([np.asarray(voltage_mv, dtype=float)[start:stop]], sampling_rate_hz,
                         skip_ms=skip_ms, smooth_ms=smooth_ms)
    return fit.step(0) if fit is not None else None


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


def shared_tau_sd(fit: SharedTauFit, sampling_rate_hz: float,
                  noise_mv: Sequence[np.ndarray | None], *,
                  line_noise: Sequence[LineNoise | None] | None = None,
                  first_sample: Sequence[int] | None = None) -> float:
    """SD of a shared time constant (:func:`fit_shared_tau`) that the recording's noise
    implies.

    Parameters
    ----------
    fit : SharedTauFit
    sampling_rate_hz : float
    noise_mv : sequence of ndarray or None
        Per segment given to the fit (indexed as ``fit.steps``): a stretch of that sweep's
        noise (its baseline); None for the step's own residual.
    line_noise : sequence of LineNoise or None, optional
        Per segment: the hum and drift removed before the fit
        (:func:`~spikemeasure.analysis.sweep_passive.passive_voltage`).
    first_sample : sequence of int, optional
        Per segment: the sweep's sample of the step's first fitted sample (with
        `line_noise`).

    Returns
    -------
    float
        ms; NaN when a step's noise is too short to estimate its spectrum (under 16 samples).

    Notes
    -----
    Linearized at the solution, the least-squares fit moves its parameters (v_inf_j,
    delta_j for each step, tau) by P e for noise e, P = (J^T J)^-1 J^T the pseudo-inverse of
    the Jacobian J of the stacked model at the fitted samples (block-diagonal in the
    steps' own parameters, with a common column for tau). tau's row of P splits into one
    weight vector per step; the steps' noises are independent, so tau's variance is the sum
    over steps of each vector's variance under that sweep's noise spectrum
    (:func:`~spikemeasure.analysis.fluctuation.weighted_sums_covariance`: the sandwich
    P C P^T; for white noise of SD s, s^2 [(J^T J)^-1]_tau,tau, the covariance curve_fit
    reports, Press et al. 2007, section 15.5, from memory). A drift left in a step (its
    slope not significant on the baseline, `line_noise`) moves tau by s (w . t), w the
    step's weights and t the samples' times; the drift is taken as common to the sweeps (a
    rig's drift is), so the steps' shares add before squaring, and s^2 is estimated by the
    slope pooled over the sweeps' baselines (inverse-variance weights) squared, less its
    variance (unbiased, floored at 0); this adds in quadrature to the noise's share.
    The window's end moves with tau
    (:func:`fit_shared_tau`), but where one exponential fits, the samples it adds or drops
    carry no residual, so to first order it adds nothing.
    """
    rate = float(sampling_rate_hz)
    m = len(fit.steps)
    if m == 0 or not rate > 0:
        return float("nan")
    columns, rows_of = [], []
    total = int(np.sum(fit.n_samples))
    jac = np.zeros((total, 2 * m + 1))
    at = 0
    for j in range(m):
        n = int(fit.n_samples[j])
        t = fit.start_ms + np.arange(n) / rate * 1e3
        decay = np.exp(-t / fit.tau_ms)
        delta = fit.v0_mv[j] - fit.v_inf_mv[j]
        jac[at:at + n, 2 * j] = 1.0
        jac[at:at + n, 2 * j + 1] = decay
        jac[at:at + n, -1] = delta * t / fit.tau_ms ** 2 * decay
        rows_of.append(slice(at, at + n))
        at += n
    tau_row = np.linalg.pinv(jac)[-1]
    variance = ramp = 0.0
    slopes, errors = [], []
    for j, k in enumerate(fit.steps):
        weights = tau_row[rows_of[j]][None, :]
        found = line_noise[k] if line_noise is not None else None
        if (found is not None and not np.isfinite(found.drift_mv_per_s)
                and np.isfinite(found.drift_estimate_mv_per_s)
                and found.drift_sd_mv_per_s > 0):
            # a drift the baseline could not tell from noise stayed in this step
            t_s = (fit.start_ms + np.arange(weights.shape[1]) / rate * 1e3) * 1e-3
            ramp += float(weights[0] @ t_s)
            slopes.append(found.drift_estimate_mv_per_s)
            errors.append(found.drift_sd_mv_per_s)
        if line_noise is not None and line_noise[k] is not None:
            weights, _ = corrected_weights(weights, int(first_sample[k]), line_noise[k])
        noise = fit.residual_mv[j] if noise_mv[k] is None else noise_mv[k]
        cov = weighted_sums_covariance(weights, noise, rate)
        if cov is None:
            return float("nan")
        variance += max(0.0, float(cov[0, 0]))
    drift = 0.0
    if slopes:
        # one drift common to the sweeps (a rig's is): its slope pooled over their
        # baselines (inverse-variance weights), whose square less its variance estimates
        # the slope's square without bias (floored at 0)
        inverse = 1.0 / np.square(errors)
        pooled = float(np.sum(np.asarray(slopes) * inverse) / np.sum(inverse))
        drift = ramp * np.sqrt(max(0.0, pooled ** 2 - 1.0 / float(np.sum(inverse))))
    return float(np.sqrt(variance + drift ** 2))
