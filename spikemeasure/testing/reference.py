"""Reference measurements of a noise-free trace, for the accuracy benchmark.

An independent, deliberately plain implementation of the definitions in
docs/measurements.md, meant for a noise-free trace sampled densely (the simulation rate,
100-200 kHz): no smoothing and no sub-sample refinement beyond linear interpolation and a
parabola through three samples, since such a trace needs neither. It shares no code with the
measuring pipeline, so the benchmark compares the tool with the definitions themselves.
numpy and scipy only.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import curve_fit

__all__ = ["ReferenceSpikes", "ReferenceSweep", "derivative_v_per_s", "reference_spikes",
           "reference_sweep", "reference_cell"]

ONSET_RATE_V_PER_S = 20.0   # docs/measurements.md, Detection
MIN_RISE_MV = 20.0
LOWEST_PEAK_MV = -20.0
PEAK_WINDOW_S = 0.005
SEARCH_WINDOW_S = 0.2
WINDOW_S = 0.1              # baseline and steady-state windows
MOVING_AVERAGE_S = 0.001    # min_mv and the latest end of the time-constant fit


@dataclass(frozen=True)
class ReferenceSpikes:
    """Per-spike values of one sweep (NaN where a definition leaves a value empty)."""

    threshold_s: np.ndarray
    threshold_mv: np.ndarray
    peak_s: np.ndarray
    peak_mv: np.ndarray
    amplitude_mv: np.ndarray
    half_width_ms: np.ndarray
    rise_time_ms: np.ndarray
    max_dvdt_v_per_s: np.ndarray
    min_dvdt_v_per_s: np.ndarray
    trough_mv: np.ndarray
    ahp_depth_mv: np.ndarray
    isi_ms: np.ndarray


@dataclass(frozen=True)
class ReferenceSweep:
    """Per-sweep values (NaN where a definition leaves a value empty)."""

    spike_count: int
    baseline_mv: float
    first_spike_latency_ms: float
    adaptation_index: float
    steady_state_mv: float
    min_mv: float
    sag_fraction: float
    firing_rate_hz: float


def derivative_v_per_s(voltage_mv: np.ndarray, sampling_rate_hz: float) -> np.ndarray:
    """dV/dt by the fourth-order central difference (mV/ms = V/s).

    (-v[k+2] + 8 v[k+1] - 8 v[k-1] + v[k-2]) / (12 dt), error O(dt^4) (Fornberg 1988, from
    memory); the two samples at each end use numpy.gradient.
    """
    v = np.asarray(voltage_mv, dtype=float)
    dt_ms = 1e3 / sampling_rate_hz
    out = np.gradient(v, dt_ms)
    if v.size >= 5:
        out[2:-2] = (-v[4:] + 8 * v[3:-1] - 8 * v[1:-3] + v[:-4]) / (12 * dt_ms)
    return out


def _crossing(x: np.ndarray, i: int, level: float) -> float:
    """Fractional index where x passes `level` between samples i and i + 1."""
    step = x[i + 1] - x[i]
    return i + (level - x[i]) / step if step != 0 else float(i)


def _parabola(x: np.ndarray, i: int) -> tuple[float, float]:
    """Vertex (fractional index, value) of the parabola through x[i-1], x[i], x[i+1]."""
    if i <= 0 or i >= x.size - 1:
        return float(i), float(x[i])
    a, b, c = x[i - 1], x[i], x[i + 1]
    curvature = a - 2 * b + c
    if curvature == 0:
        return float(i), float(b)
    shift = 0.5 * (a - c) / curvature
    return i + shift, float(b - 0.25 * (a - c) * shift)


def _peaks(v: np.ndarray, rate: np.ndarray, fs: float) -> list[tuple[int, int]]:
    """(onset crossing, peak) sample pairs of the spikes: the Detection rule, on raw samples."""
    up = np.nonzero((rate[:-1] < ONSET_RATE_V_PER_S) & (rate[1:] >= ONSET_RATE_V_PER_S))[0] + 1
    window = int(round(PEAK_WINDOW_S * fs))
    found: dict[int, int] = {}
    for onset in up:
        falls = np.nonzero(rate[onset:onset + window] <= 0)[0]
        end = onset + (falls[0] if falls.size else window)
        peak = onset + int(np.argmax(v[onset:end + 1]))
        if v[peak] >= v[onset] + MIN_RISE_MV and v[peak] > LOWEST_PEAK_MV:
            found.setdefault(peak, onset)
    return sorted((onset, peak) for peak, onset in found.items())


def reference_spikes(voltage_mv: np.ndarray, sampling_rate_hz: float,
                     step_end_s: float | None = None) -> ReferenceSpikes:
    """The spikes of a noise-free trace by the definitions of spikes.csv.

    Threshold: the last upward crossing of 20 V/s by dV/dt before the peak. Peak: the largest
    sample, refined by a parabola. Half-width: between the crossings of threshold + amplitude/2
    around the peak. Max and min dV/dt: from threshold to peak, and from peak to trough.
    Trough: the minimum after the peak, before the next threshold (the last spike: the end
    of `step_end_s` when the spike lies before it, else of the trace), at most 200 ms on.
    """
    v = np.asarray(voltage_mv, dtype=float)
    fs = float(sampling_rate_hz)
    rate = derivative_v_per_s(v, fs)
    pairs = _peaks(v, rate, fs)
    n = len(pairs)
    values = {name: np.full(n, np.nan) for name in ReferenceSpikes.__dataclass_fields__}
    below = rate < ONSET_RATE_V_PER_S
    thresholds = []
    for onset, peak in pairs:
        # the last upward crossing before the peak; the onset is one, so one is always found
        last_up = int(np.nonzero(below[:peak - 1] & ~below[1:peak])[0][-1])
        thresholds.append(_crossing(rate, last_up, ONSET_RATE_V_PER_S))
    search = int(round(SEARCH_WINDOW_S * fs))
    for k, (onset, peak) in enumerate(pairs):
        threshold_at = thresholds[k]
        thr_mv = float(np.interp(threshold_at, np.arange(v.size), v))
        peak_at, peak_mv = _parabola(v, peak)
        if k + 1 < n:
            stop = int(np.floor(thresholds[k + 1]))
        elif step_end_s is not None and peak < step_end_s * fs:
            stop = int(step_end_s * fs)
        else:
            stop = v.size
        stop = min(stop, peak + search, v.size)
        level = thr_mv + (peak_mv - thr_mv) / 2
        rising = np.nonzero(v[:peak] < level)[0]
        falling = np.nonzero(v[peak:stop] < level)[0]
        if rising.size and falling.size:
            up = _crossing(v, int(rising[-1]), level)
            down = _crossing(v, peak + int(falling[0]) - 1, level)
            values["half_width_ms"][k] = (down - up) / fs * 1e3
            trough = peak + int(np.argmin(v[peak:stop]))
            values["trough_mv"][k] = v[trough]
            values["ahp_depth_mv"][k] = thr_mv - v[trough]
            values["min_dvdt_v_per_s"][k] = _parabola(rate, peak + int(np.argmin(
                rate[peak:trough + 1])))[1]
        first = int(np.ceil(threshold_at))
        values["max_dvdt_v_per_s"][k] = _parabola(rate, first + int(np.argmax(
            rate[first:peak + 1])))[1]
        values["threshold_s"][k] = threshold_at / fs
        values["threshold_mv"][k] = thr_mv
        values["peak_s"][k] = peak_at / fs
        values["peak_mv"][k] = peak_mv
        values["amplitude_mv"][k] = peak_mv - thr_mv
        values["rise_time_ms"][k] = (peak_at - threshold_at) / fs * 1e3
        if k:
            values["isi_ms"][k] = (threshold_at - thresholds[k - 1]) / fs * 1e3
    return ReferenceSpikes(**values)


def _moving_average(v: np.ndarray, n: int) -> np.ndarray:
    return np.convolve(v, np.ones(n) / n, mode="valid")


def reference_sweep(voltage_mv: np.ndarray, sampling_rate_hz: float, onset_s: float,
                    end_s: float, stimulus_pa: float,
                    spikes: ReferenceSpikes) -> ReferenceSweep:
    """The step values of sweeps.csv: baseline, count, latency, adaptation, steady state,
    minimum (of a 1 ms moving average) and sag (hyperpolarizing steps only)."""
    v = np.asarray(voltage_mv, dtype=float)
    fs = float(sampling_rate_hz)
    on, off, window = int(round(onset_s * fs)), int(round(end_s * fs)), int(round(WINDOW_S * fs))
    baseline = float(np.mean(v[max(0, on - window):on]))
    steady = float(np.mean(v[off - window:off]))
    lowest = float(_moving_average(v[on:off], int(round(MOVING_AVERAGE_S * fs))).min())
    inside = spikes.threshold_s[(spikes.threshold_s >= onset_s) & (spikes.threshold_s < end_s)]
    latency = (inside[0] - onset_s) * 1e3 if inside.size else np.nan
    intervals = np.diff(inside)
    adaptation = (float(np.mean((intervals[1:] - intervals[:-1])
                                / (intervals[1:] + intervals[:-1])))
                  if intervals.size >= 2 else np.nan)
    sag = (steady - lowest) / (baseline - lowest) if stimulus_pa < 0 else np.nan
    return ReferenceSweep(spike_count=int(inside.size), baseline_mv=baseline,
                          first_spike_latency_ms=float(latency), adaptation_index=adaptation,
                          steady_state_mv=steady, min_mv=lowest, sag_fraction=float(sag),
                          firing_rate_hz=inside.size / (end_s - onset_s))


TAU_SKIP_S = 0.0001          # membrane_tau_ms: the filter's delay left out after onset
TAU_END_FRACTION = 0.02      # ... and the fitted exponential's end, 2 % from its end value


def _turn(v: np.ndarray, n: int) -> int:
    """Where the centred moving average of n samples (the ends padded with the end values)
    is lowest, if the mean of the last n samples lies over that by more than 2 % of the
    drop to it from the first 3 samples' mean (the response turns back: a sag); else the
    last sample."""
    padded = np.pad(v, (n // 2, n - 1 - n // 2), mode="edge")
    average = np.convolve(padded, np.ones(n) / n, mode="valid")
    low = int(np.argmin(average))
    rise = v[-n:].mean() - average[low]
    return low if rise > TAU_END_FRACTION * (v[:3].mean() - average[low]) else v.size - 1


def reference_tau_ms(voltage_mv: np.ndarray, sampling_rate_hz: float, onset_s: float,
                     end_s: float) -> float:
    """The one time constant of exponentials fitted (scipy.optimize.curve_fit, each sweep
    its own end value and size) to the charging of every sweep given (rows of `voltage_mv`:
    the hyperpolarizing spike-free steps), each from 0.1 ms after onset to where the fitted
    exponential comes within 2 % of its end value (ln 50 time constants) or the sweep's
    moving average over max(1 ms, tau) has its minimum, if the response turns back from it
    by over 2 % of its drop, whichever comes first; refitted with the windows of the last
    tau until it stays put."""
    fs = float(sampling_rate_hz)
    on, off = int(round(onset_s * fs)), int(round(end_s * fs))
    sweeps = np.atleast_2d(np.asarray(voltage_mv, dtype=float))[:, on:off]
    first = int(np.ceil(TAU_SKIP_S * fs - 1e-9))
    # a start: the time to 1 - 1/e of the largest sweep's drop to its minimum
    lowest = [_turn(v, int(round(MOVING_AVERAGE_S * fs))) for v in sweeps]
    big = int(np.argmax([v[0] - v[k] for v, k in zip(sweeps, lowest)]))
    drop = sweeps[big][:lowest[big] + 1]
    tau_ms = float(np.nonzero(drop <= drop[0] - 0.632 * (drop[0] - drop[-1]))[0][0]) / fs * 1e3
    for _ in range(100):
        n = int(round(max(MOVING_AVERAGE_S * 1e3, tau_ms) * 1e-3 * fs))
        last = [min(_turn(v, n),
                    int(np.floor(np.log(1 / TAU_END_FRACTION) * tau_ms * 1e-3 * fs)),
                    v.size - 1) for v in sweeps]
        t_ms = [np.arange(first, stop + 1) / fs * 1e3 for stop in last]
        y = np.concatenate([v[first:stop + 1] for v, stop in zip(sweeps, last)])

        def model(_, *p, t_ms=t_ms):
            return np.concatenate([p[2 * j] + p[2 * j + 1] * np.exp(-t / p[-1])
                                   for j, t in enumerate(t_ms)])

        guess = [x for v, stop in zip(sweeps, last)
                 for x in (float(v[stop]), float(v[first] - v[stop]))] + [tau_ms]
        fitted, _ = curve_fit(model, np.zeros(y.size), y, p0=guess, maxfev=20_000)
        done = abs(fitted[-1] - tau_ms) <= 1e-7 * tau_ms
        tau_ms = float(fitted[-1])
        if done:
            break
    return tau_ms


def reference_cell(stimulus_pa: np.ndarray, sweeps: list[ReferenceSweep],
                   tau_ms: float) -> dict[str, float]:
    """Cell values of cells.csv from the step sweeps: input resistance (slope over
    hyperpolarizing spike-free steps), rheobase, f-I slope (steps at or above rheobase)."""
    stimulus = np.asarray(stimulus_pa, dtype=float)
    counts = np.array([s.spike_count for s in sweeps])
    passive = (stimulus < 0) & (counts == 0)
    deflection = np.array([s.steady_state_mv - s.baseline_mv for s in sweeps])
    resistance = (np.polyfit(stimulus[passive], deflection[passive], 1)[0] * 1e3
                  if passive.sum() >= 2 else np.nan)
    firing = stimulus[(counts > 0) & (stimulus > 0)]
    rheobase = float(firing.min()) if firing.size else np.nan
    above = stimulus >= rheobase
    rates = np.array([s.firing_rate_hz for s in sweeps])
    slope = np.polyfit(stimulus[above], rates[above], 1)[0] if above.sum() >= 2 else np.nan
    return {"input_resistance_mohm": float(resistance), "membrane_tau_ms": tau_ms,
            "rheobase_pa": rheobase, "fi_slope_hz_per_pa": float(slope)}
