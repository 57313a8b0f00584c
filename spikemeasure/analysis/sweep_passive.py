"""Passive measurements of one sweep: the response to a step (steady state, minimum on a
window matched to the charging time, sag with the one ``sag_within_noise`` rule, their SDs)
and the voltage they read, with its mains hum and drift removed.

Functions take arrays, a sampling rate and the sweep's current step, and return plain values
or a small dataclass; nothing here reads files or prints.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import uniform_filter1d

from .fluctuation import BASELINE_WINDOW_MS, baseline_stretch, weighted_sums_covariance
from .line_noise import (REST_AFTER_SPIKE_MS, REST_AFTER_STEP_FRACTION, REST_AFTER_STEP_MS,
                         LineNoise,
                         corrected_weights, estimate_line_noise, remove_line_noise)
from .sweeps import CurrentStep

__all__ = ["PassiveResponse", "passive_response", "passive_voltage", "passive_line_noise",
           "rest_start",
           "REST_AFTER_STEP_FRACTION", "REST_AFTER_STEP_MS", "REST_AFTER_SPIKE_MS", "MIN_WINDOW_MS",
           "TROUGH_WINDOW_FRACTION", "SAG_NOISE_FACTOR", "SAG_SD_FACTOR",
           "STEADY_STATE_WINDOW_MS"]

#: Width of the moving average whose minimum during the step is min_mv (noise would pull a
#: raw minimum down by two to three noise SDs); for a hyperpolarizing step, the shortest
#: trough smoothing.
MIN_WINDOW_MS = 1.0

#: For a hyperpolarizing step, the minimum is that of a moving average over this multiple
#: of the response's charging time (from onset until the MIN_WINDOW_MS average first falls
#: 63 % of the way from the voltage at onset (the mean of the MIN_WINDOW_MS before it) to
#: its minimum; the time constant of a passive membrane):
#: a window matched to the response's own time course, wide enough to average noise away
#: yet narrow enough to raise the bottom of a sag's trough, which lasts several charging
#: times, only slightly (a rule of our own).
TROUGH_WINDOW_FRACTION = 1.0

#: A sag is reported only when it exceeds this many times its own SD (sag_fraction_sd:
#: the noise of the baseline, steady state and minimum, with the drift the hum and drift
#: removal could not exclude); at or below it, it is 0 with ``sag_within_noise``.
SAG_SD_FACTOR = 2.0

#: ... and only when steady_state_mv - min_mv exceeds this many times the SD that the
#: baseline's noise (with its spectrum) leaves on the moving average under min_mv (the
#: trough smoothing's minimum, whatever min_mv is read at): the SD holds no account of how
#: noise picks the lowest of many window means, and over a 0.5 s step noise alone pulls the smoothed minimum about
#: 3 SD below the mean (the expected largest of ~500 Gaussian values), beyond 5 SD with a
#: chance of about 1e-4 (500 x the Gaussian tail beyond 5, 3e-7).
SAG_NOISE_FACTOR = 5.0

#: Length of the window at the end of the step whose mean is the steady-state voltage.
STEADY_STATE_WINDOW_MS = 100.0


@dataclass(frozen=True)
class PassiveResponse:
    """The response to a step that the passive values read (see :func:`passive_response`)."""

    steady_state_mv: float
    min_mv: float
    sag_fraction: float
    sag_fraction_sd: float
    #: SD of steady_state_mv - baseline_mv that the baseline's noise implies (hyperpolarizing
    #: steps only; for the input resistance's SD).
    deflection_sd_mv: float
    sag_within_noise: bool = False
    #: The SD of steady_state_mv - baseline_mv with the drift left in (the hum removed), as
    #: the input resistance reads it (see
    #: :func:`~spikemeasure.analysis.sweep_features.sweep_features`).
    deflection_with_drift_sd_mv: float = float("nan")


def passive_response(voltage_mv: np.ndarray, sampling_rate_hz: float, step: CurrentStep,
                     baseline_mv: float, steady_window_ms: float = STEADY_STATE_WINDOW_MS, *,
                     drift_mv: float = 0.0, baseline_window_ms: float = BASELINE_WINDOW_MS,
                     line_noise: LineNoise | None = None) -> PassiveResponse:
    """Steady state, minimum and sag of the response to a step, with the sag's SD.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    sampling_rate_hz : float
    step : CurrentStep
    baseline_mv : float
        Mean voltage before the step (:func:`~spikemeasure.analysis.sweep_features.baseline`).
    steady_window_ms : float, optional
        Length of the window at the end of the step whose mean is the steady state.
    drift_mv : float, optional
        The sweep's baseline drift
        (:func:`~spikemeasure.analysis.sweep_features.baseline_drift`; NaN counts as 0):
        with a sag within noise, what noise plus this could hide sets its SD.
    baseline_window_ms : float, optional
        The baseline window, whose noise the SDs copy.
    line_noise : LineNoise, optional
        The hum and drift already removed from `voltage_mv` (:func:`passive_voltage`): the
        SDs then hold the uncertainty of that removal too.

    Returns
    -------
    PassiveResponse
        steady_state_mv: mean voltage over the last `steady_window_ms` of the step (all of
        it if shorter). min_mv: the minimum during the step of the voltage's
        :data:`MIN_WINDOW_MS` moving average; for a hyperpolarizing step with a sag over
        noise, read at the vertex of a parabola fitted around the trough, else the
        minimum of the trough smoothing (see Notes). sag_fraction (hyperpolarizing steps only):
        (steady_state_mv - min_mv) / (baseline_mv - min_mv), 0 for no sag, 1 when the voltage
        returns all the way to baseline; 0 with ``sag_within_noise`` when the recording
        cannot resolve it (see Notes). sag_fraction_sd: the SD the baseline's noise and a drift the
        hum and drift removal could not exclude imply; deflection_sd_mv: the SD the
        baseline's noise implies. NaN where not defined.

    Notes
    -----
    The trough smoothing is a moving average over :data:`TROUGH_WINDOW_FRACTION` times the
    charging time: from onset until the :data:`MIN_WINDOW_MS` moving average first falls
    63 % of the way from the voltage at onset (the mean over that window before onset) to
    its minimum (at least that window), evaluated where the whole window lies in the step. A moving average of white
    noise of SD s over m samples still dips about 3 s / sqrt(m) below the truth somewhere in
    a long step; a window matched to the trough makes m large on a wide trough or a plateau.
    On a trough of curvature c (V = V_min + c x^2) a window of w raises the minimum by
    c w^2 / 12, a few hundredths of a mV for an Ih-like sag; unlike a local polynomial
    (Savitzky-Golay) smoothing, an average never dips below a monotone response where the
    charging bends into the plateau.

    For a hyperpolarizing step, min_mv is read without the average's c w^2 / 12 where it
    can be: a parabola a + b x + c x^2 is fitted by
    least squares to the samples within one trough window w either side of the average's
    minimum, and min_mv is its vertex plus c m^2 / 12 (the :data:`MIN_WINDOW_MS` average of
    the parabola, m that window, so that min_mv keeps its definition). For a parabola the
    vertex is exact; its noise is that of a fit over 2 w, about that of the average over w.
    The fit is used only when it opens upwards and its vertex lies in its middle half, so
    that the vertex is not extrapolated; otherwise the average's minimum stays.

    baseline_mv, steady_state_mv and min_mv are weighted sums of samples (min_mv: the
    trough window's mean, or the vertex's weights with its position held fixed), so noise
    moves them by weighted sums of its samples: their covariance C follows from the
    baseline's noise spectrum
    (:func:`~spikemeasure.analysis.fluctuation.weighted_sums_covariance`). A drift that
    the hum and drift removal could not exclude (``LineNoise.untested_drift_sd_mv_per_s``:
    a drift tested and not kept, or a plateau's settling its agreement test could not tell
    from drift) adds s^2 l l^T, l the weights' mean times (the lever of each window) and s
    that SD.
    sag_fraction_sd is sqrt(g^T C g), g the gradient of the sag in the three (the delta
    method: Bevington and Robinson 2003, section 3.2, from memory); deflection_sd_mv is the
    SD of steady_state_mv - baseline_mv. The choice of the minimum's position among noisy
    candidates is left out: where it matters (a flat plateau) the sag is within noise.

    The sag is resolved, and reported, when it is over :data:`SAG_SD_FACTOR` times its own
    SD (noise and the drift the removal could not exclude) and steady_state_mv - min_mv
    (the trough smoothing's minimum) is over :data:`SAG_NOISE_FACTOR` times the SD of that
    window mean (what noise alone pulls the lowest of a flat response's window means down
    by stays below it), that SD at least the white-noise value of the baseline's variance
    (the spectrum of a short baseline scatters at low frequencies). Otherwise it is 0 with
    ``sag_within_noise``, min_mv the average's minimum, and the sag's SD at least half of
    :data:`SAG_NOISE_FACTOR` times that window mean's SD plus abs(drift_mv) (what noise and
    drift could hide), so that +/- 2 SD spans it.

    References
    ----------
    .. [1] P. R. Bevington and D. K. Robinson, *Data Reduction and Error Analysis for the
       Physical Sciences*, 3rd ed., McGraw-Hill, 2003.
    """
    nan = float("nan")
    rate = float(sampling_rate_hz)
    start = int(round(step.onset_s * rate))
    stop = min(voltage_mv.size, int(round(step.offset_s * rate)))
    if stop - start < 1:
        return PassiveResponse(nan, nan, nan, nan, nan)
    span = voltage_mv[start:stop]
    n_tail = max(1, int(round(steady_window_ms * 1e-3 * rate)))
    steady = float(np.mean(span[-n_tail:]))
    width = max(1, int(round(MIN_WINDOW_MS * 1e-3 * rate)))
    coarse = uniform_filter1d(span, size=min(width, span.size), mode="nearest")
    before = voltage_mv[max(0, start - width):start]
    level = float(np.mean(before)) if before.size and np.isfinite(before).all() else coarse[0]
    trough = _trough_window(coarse, width, level) if step.size_pa < 0 else None
    if trough is None:
        lowest = float(np.min(coarse))
        sag = nan
        if step.size_pa < 0 and np.isfinite(baseline_mv) and baseline_mv - lowest > 0:
            sag = (steady - lowest) / (baseline_mv - lowest)
        return PassiveResponse(steady, lowest, sag, nan, nan)
    smooth = _moving_average(span, trough)
    averaged = float(np.min(smooth))
    low = int(np.argmin(smooth))
    vertex = _trough_vertex(span, low + trough // 2, trough, width)
    if not (np.isfinite(baseline_mv) and baseline_mv - averaged > 0):
        # no sag to tell from noise: the trough as read
        return PassiveResponse(steady, averaged if vertex is None else vertex[0], nan, nan,
                               nan)
    base_lo = max(0, int(round(step.baseline_start_s * rate)),
                  start - int(round(baseline_window_ms * 1e-3 * rate)))
    # rows: baseline, steady state, the trough's average and (where it lies inside the
    # step) the trough's vertex
    weights = np.zeros((3 if vertex is None else 4, stop - base_lo))
    weights[0, :start - base_lo] = 1.0 / (start - base_lo) if start > base_lo else np.nan
    weights[1, stop - base_lo - n_tail:] = 1.0 / n_tail
    weights[2, start - base_lo + low:start - base_lo + low + trough] = 1.0 / trough
    if vertex is not None:
        weights[3, start - base_lo + vertex[1]:start - base_lo + vertex[1] + vertex[2].size] = (
            vertex[2])
    noise = baseline_stretch(voltage_mv, rate, step.onset_s, earliest_s=step.baseline_start_s,
                             window_ms=baseline_window_ms)
    with_drift = float("nan")
    raw_weights = weights
    if line_noise is not None and np.isfinite(weights).all():
        hum_rows, _ = corrected_weights(weights[:2], base_lo, line_noise.hum_only())
        hum_cov = weighted_sums_covariance(hum_rows, noise, rate)
        if hum_cov is not None:
            with_drift = float(np.sqrt(max(0.0, hum_cov[0, 0] + hum_cov[1, 1]
                                           - 2 * hum_cov[0, 1])))
        weights, _ = corrected_weights(weights, base_lo, line_noise)
    cov = (weighted_sums_covariance(weights, noise, rate)
           if np.isfinite(weights).all() else None)
    if cov is None:
        sag = (steady - averaged) / (baseline_mv - averaged)
        return PassiveResponse(steady, averaged, sag, nan, nan)
    # the drift the estimate could not exclude moves the sag (a difference of window means
    # at different times), not the noise under one window
    untested = _untested_drift_cov(raw_weights, base_lo, rate, line_noise)

    def read(use: int) -> tuple[float, float, float, float, float]:
        """(minimum, sag, its SD, the deflection's SD, the depth) with the trough read at
        row `use` of the weights (2: the average's minimum, 3: the vertex)."""
        lowest = averaged if use == 2 else vertex[0]
        pick = np.ix_([0, 1, use], [0, 1, use])
        depth = baseline_mv - lowest
        # d sag / d (baseline, steady state, minimum): the delta method
        gradient = np.array([-(steady - lowest) / depth ** 2, 1.0 / depth,
                             (steady - baseline_mv) / depth ** 2])
        sd = float(np.sqrt(max(0.0, gradient @ (cov[pick] + untested[pick]) @ gradient)))
        deflection = np.array([-1.0, 1.0, 0.0])
        return (lowest, (steady - lowest) / depth, sd,
                float(np.sqrt(max(0.0, deflection @ cov[pick] @ deflection))), depth)

    # the sag is read at the vertex where the parabola fits
    lowest, sag, sag_sd, deflection_sd, depth = read(3 if vertex is not None else 2)
    # noise alone pulls the trough smoothing's minimum below a flat response (the lowest of
    # many window means): a sag is resolved only beyond that and beyond its own SD. The
    # window mean's variance is at least white noise's of the baseline's variance: the
    # spectrum of a 100 ms baseline scatters at the low frequencies a long window passes,
    # and taken alone would now and then make the test too lenient
    # (a variance of at least 1e-12 mV^2, so that rounding on a noise-free trace is no sag)
    white = max(float(np.var(noise)) if noise.size else 0.0, 1e-12) / trough
    dip = SAG_NOISE_FACTOR * float(np.sqrt(max(0.0, cov[2, 2], white)))
    within = not (steady - averaged > dip and sag > SAG_SD_FACTOR * sag_sd)
    if within:
        # within noise, the average's minimum stays; reported as 0, the sag may be anything
        # up to what noise and drift could hide: +/- 2 SD spans it
        lowest, _, sag_sd, deflection_sd, depth = read(2)
        drift = abs(drift_mv) if np.isfinite(drift_mv) else 0.0
        hidden = SAG_NOISE_FACTOR * float(np.sqrt(max(0.0, cov[2, 2]))) + drift
        sag_sd = max(sag_sd, hidden / depth / 2)
    if not np.isfinite(with_drift):
        with_drift = deflection_sd
    return PassiveResponse(steady, lowest, 0.0 if within else sag, sag_sd, deflection_sd,
                           within, with_drift)


def _trough_vertex(span: np.ndarray, centre: int, trough: int, width: int
                   ) -> tuple[float, int, np.ndarray] | None:
    """The vertex of a parabola fitted by least squares to `span` over `trough` samples
    either side of `centre`, as the minimum of its :data:`MIN_WINDOW_MS` average (`width`
    samples): (value, first sample, weights whose dot product with the samples from it
    gives the value, the vertex's position held fixed). None where the fit leaves the
    span, does not open upwards, or puts its vertex outside its middle half."""
    half = max(int(trough), 2)
    first, last = centre - half, centre + half
    if first < 0 or last >= span.size:
        return None
    x = np.arange(-half, half + 1, dtype=float) / half
    design = np.column_stack([np.ones_like(x), x, x * x])
    solve = np.linalg.solve(design.T @ design, design.T)
    c0, c1, c2 = solve @ span[first:last + 1]
    if not c2 > 0:
        return None
    at = -c1 / (2 * c2)
    if abs(at) > 0.5:
        return None
    # the MIN_WINDOW_MS average of the parabola lies c2 (w / half)^2 / 12 above it
    lift = c2 * (width / half) ** 2 / 12
    rows = np.array([1.0, at, at * at]) @ solve + np.array([0.0, 0.0, 1.0]) @ solve * (
        (width / half) ** 2 / 12)
    return float(c0 + c1 * at + c2 * at * at + lift), int(first), rows


def _untested_drift_cov(weights: np.ndarray, first_sample: int, rate: float,
                        line_noise: LineNoise | None) -> np.ndarray:
    """Covariance that a drift the estimate could not exclude leaves in weighted means
    of the corrected voltage: each row's mean time times
    ``line_noise.untested_drift_sd_mv_per_s`` (zero without one)."""
    k = weights.shape[0]
    sd = line_noise.untested_drift_sd_mv_per_s if line_noise is not None else float("nan")
    if not (np.isfinite(sd) and sd > 0 and np.isfinite(weights).all()):
        return np.zeros((k, k))
    lever = weights @ (np.arange(first_sample, first_sample + weights.shape[1]) / rate)
    return sd ** 2 * np.outer(lever, lever)


def _trough_window(coarse: np.ndarray, width: int, level_mv: float) -> int | None:
    """Samples of the moving average under a hyperpolarizing step's minimum:
    TROUGH_WINDOW_FRACTION of the charging time in samples (see there) from `level_mv`, the
    voltage at onset (at least `width`, at most the step); None when the step holds a
    missing sample."""
    if coarse.size < 1 or not np.isfinite(coarse).all():
        return None
    low = int(np.argmin(coarse))
    charged = np.flatnonzero(coarse[:low + 1] <= level_mv - 0.632 * (level_mv - coarse[low]))
    charging = int(charged[0]) if charged.size else low
    return min(max(width, int(round(TROUGH_WINDOW_FRACTION * charging))), coarse.size)


def _moving_average(x: np.ndarray, length: int) -> np.ndarray:
    """Means of `length` consecutive samples along the last axis, where all lie in `x`."""
    total = np.cumsum(x, axis=-1)
    total = np.concatenate([np.zeros(x.shape[:-1] + (1,)), total], axis=-1)
    return (total[..., length:] - total[..., :-length]) / length


def passive_voltage(voltage_mv: np.ndarray, sampling_rate_hz: float, step: CurrentStep,
                    baseline_window_ms: float = BASELINE_WINDOW_MS, *,
                    steady_window_ms: float | None = None,
                    rest_start_s: float | None = None
                    ) -> tuple[np.ndarray, LineNoise]:
    """The voltage the passive values read: the sweep's mains hum and drift removed.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage, mV.
    sampling_rate_hz : float
    step : CurrentStep
    baseline_window_ms : float, optional
        The baseline window (:func:`~spikemeasure.analysis.sweep_features.baseline`): the
        hum and drift are fitted on it, and the removal keeps its mean.
    steady_window_ms : float, optional
        The steady-state window at the end of a step without spikes: given, the drift's
        slope is fitted on it too, where it follows the baseline's line (see Notes).
    rest_start_s : float, optional
        Given, the stretch from it to the sweep's end (after the step, where the membrane is
        back at rest: :func:`rest_start`) joins the drift's fit with the baseline's level,
        where it follows their line (see Notes).

    Returns
    -------
    (ndarray, LineNoise)
        The voltage less the hum and drift found significant
        (:func:`~spikemeasure.analysis.line_noise.estimate_line_noise`; the voltage itself
        when none is), and the estimate.

    Notes
    -----
    The hum and drift are fitted on the baseline window (not on all of the quiet stretch
    before it: early in that stretch the membrane may still be settling, from a test pulse
    or the start of the recording), where no current flows and the response has not begun
    (the hum alone when a test pulse precedes the stimulus: the membrane may still be
    settling from it, which is not drift), and removed from the whole sweep with the mean
    of their sum over the baseline window kept, so the baseline is unchanged and the
    passive values (steady state, minimum, sag, time constant) read the membrane without
    them; the input resistance keeps the drift (see
    :func:`~spikemeasure.analysis.sweep_features.sweep_features`).

    A baseline of 100 ms tells a slope only to about noise / sqrt(N T^2 / 12) (N samples over
    T s: 0.4 mV/s at 0.5 mV of white noise and 20 kHz), so a drift of 1 mV/s often fails
    its test there and stays in the values. With `steady_window_ms`, the steady-state window
    (where the response has settled, as steady_state_mv takes it) joins the drift's fit with
    a level of its own, when it shows no slope or bend of its own beside the baseline's line
    (:func:`~spikemeasure.analysis.line_noise.estimate_line_noise`, `plateau_s`): the
    slope's standard error falls by about sqrt(2), and the test that keeps the drift gains
    that much.

    With `rest_start_s`, the stretch after the step where the membrane is back at rest (the
    stretch ``baseline_drift_mv`` reads, spikes after the step left out) shares the
    baseline's level: the drift is then read from the change of the resting level across
    the sweep, a lever of several hundred ms, when each stretch's own slope and the rest
    stretch's bend agree with that line
    (:func:`~spikemeasure.analysis.line_noise.estimate_line_noise`, `rest_s`).
    """
    fit = passive_line_noise(voltage_mv, sampling_rate_hz, step, baseline_window_ms,
                             steady_window_ms=steady_window_ms, rest_start_s=rest_start_s)
    return remove_line_noise(voltage_mv, fit), fit


def passive_line_noise(voltage_mv: np.ndarray, sampling_rate_hz: float, step: CurrentStep,
                       baseline_window_ms: float = BASELINE_WINDOW_MS, *,
                       steady_window_ms: float | None = None,
                       rest_start_s: float | None = None) -> LineNoise:
    """The hum and drift estimate of :func:`passive_voltage` (same parameters and windows,
    see there) without removing it, for a caller that removes it where it needs to."""
    rate = float(sampling_rate_hz)
    onset = int(round(step.onset_s * rate))
    first = max(0, int(round(step.baseline_start_s * rate)),
                onset - int(round(baseline_window_ms * 1e-3 * rate)))
    # after a test pulse the membrane may still be settling, which a line would take for
    # drift: the hum alone then
    plateau = None
    if steady_window_ms is not None and step.shape == "step":
        plateau = (max(onset / rate, step.offset_s - steady_window_ms * 1e-3), step.offset_s)
    return estimate_line_noise(voltage_mv, rate, first / rate, onset / rate,
                               drift=not np.isfinite(step.test_pulse_start_s),
                               plateau_s=plateau,
                               rest_s=(None if rest_start_s is None or step.shape != "step"
                                       else (rest_start_s, voltage_mv.size / rate)))


def rest_start(step: CurrentStep, duration_s: float, spike_times_s: np.ndarray) -> float:
    """Where the membrane is taken to be back at rest after a step: the latest of the middle
    of the stretch from the step's end to the sweep's end (:data:`REST_AFTER_STEP_FRACTION`
    of it), :data:`REST_AFTER_STEP_MS` after the step's end and :data:`REST_AFTER_SPIKE_MS`
    after the last spike after the step's end, s from the sweep's first sample (at or
    after `duration_s` when no such stretch is left)."""
    after = step.offset_s + max(REST_AFTER_STEP_FRACTION * max(0.0, duration_s - step.offset_s),
                                REST_AFTER_STEP_MS * 1e-3)
    times = np.asarray(spike_times_s, dtype=float)
    later = times[np.isfinite(times) & (times >= step.offset_s)]
    if later.size:
        after = max(after, float(later.max()) + REST_AFTER_SPIKE_MS * 1e-3)
    return after

