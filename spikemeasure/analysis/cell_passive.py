"""Per-cell passive measurements across a step series: which sweeps are passive, the input
resistance and its SD, the bridge error, the sag taken from the most hyperpolarizing sweep and
the membrane time constant with its quality tests.

Functions take per-sweep values (arrays aligned by sweep) and the sweeps' voltage traces, and
return plain values; nothing here reads files or prints. The cell's table row is gathered by
:func:`~spikemeasure.analysis.cell_features.cell_features`.
"""
from __future__ import annotations

import numpy as np

from .bridge import SETTLE_MS, bridge_error, edge_jump
from .fluctuation import baseline_stretch, slow_fluctuation_mv
from .membrane_tau import FILTER_DELAY_MS, TAU_SMOOTHING_MS, fit_shared_tau, shared_tau_sd
from .sweep_passive import passive_voltage
from .sweeps import CurrentStep

__all__ = ["input_resistance", "input_resistance_sd", "passive_sweeps", "passive_values",
           "steps_only", "MAX_RESIDUAL_TO_NOISE", "MAX_MISFIT_TO_DEFLECTION", "TAU_STEPS",
           "MAX_TAU_SD_FRACTION", "NOISE_FLOOR_MV", "SLOW_SWEEP_MAX_RISE_MV",
           "MAX_FLUCTUATION_TO_DEFLECTION"]

#: A time-constant fit is poor when its residual RMS exceeds this multiple of the steps'
#: baseline noise (the response is not one exponential: resonance, sag, active currents).
MAX_RESIDUAL_TO_NOISE = 1.5
#: ... and the residual beyond the noise, sqrt(RMS^2 - noise^2), is over this fraction of the
#: steps' RMS deflection: the time constant is that of one exponential fitted to whatever
#: the charging is (an active membrane's is not one exponential), but a curve it misses by
#: more than this is no charging curve (a rule of our own: the models' charging, active
#: or with a sag, is followed to within about 1 %).
MAX_MISFIT_TO_DEFLECTION = 0.05
#: The time constant is left empty when its SD (:func:`shared_tau_sd`) is over this fraction
#: of it: the noise then cannot pin it within the 10 % a time constant is judged by (2 SD).
MAX_TAU_SD_FRACTION = 0.05
#: The time constant is fitted over at most this many hyperpolarizing spike-free steps, the
#: smallest: they disturb an active membrane's gates least, and three hold about three
#: times one step's information (a rule of our own).
TAU_STEPS = 3
#: Noise below this (mV) counts as this much, so a noise-free trace is not held to zero.
NOISE_FLOOR_MV = 0.05
#: A hyperpolarizing sweep sampled too slowly to count spikes is taken as spike-free when no
#: sample of its step lies more than this above its baseline (a rule of our own: a spike
#: rises tens of mV, noise and rebound a few).
SLOW_SWEEP_MAX_RISE_MV = 10.0
#: The time constant is left empty when the baseline's slow fluctuation (SD of its
#: TAU_SMOOTHING_MS moving average) exceeds this fraction of the deflection fitted: synaptic
#: background moves the voltage on the time constant's own time scale, which no residual
#: test against that same background can see (a rule of our own).
MAX_FLUCTUATION_TO_DEFLECTION = 0.05


def input_resistance(stimulus_pa: np.ndarray, deflection_mv: np.ndarray) -> float:
    """Least-squares slope of the steady-state deflection on the step size, in MOhm.

    (mV / pA is GOhm; times 1000.) NaN with fewer than 2 distinct steps.
    """
    stim = np.asarray(stimulus_pa, dtype=float)
    dv = np.asarray(deflection_mv, dtype=float)
    use = np.isfinite(stim) & np.isfinite(dv)
    if np.unique(stim[use]).size < 2:
        return float("nan")
    return float(np.polyfit(stim[use], dv[use], 1)[0] * 1e3)


def input_resistance_sd(stimulus_pa: np.ndarray, deflection_sd_mv: np.ndarray) -> float:
    """SD (MOhm) of :func:`input_resistance` given each deflection's SD.

    Parameters
    ----------
    stimulus_pa : ndarray
        Step sizes of the sweeps fitted.
    deflection_sd_mv : ndarray
        SD of each sweep's steady_state_mv - baseline_mv (the sweep's deflection_sd_mv).

    Returns
    -------
    float
        NaN with fewer than 2 distinct steps or an unknown SD.

    Notes
    -----
    The least-squares slope is sum w_j d_j with w_j = (I_j - mean I) / sum (I - mean I)^2;
    with independent deflections its variance is sum w_j^2 sd_j^2 (the slope's standard
    error for known, unequal errors: Bevington and Robinson 2003, section 6.4, from memory).
    """
    stim = np.asarray(stimulus_pa, dtype=float)
    sd = np.asarray(deflection_sd_mv, dtype=float)
    if np.unique(stim).size < 2 or not np.isfinite(stim).all() or not np.isfinite(sd).all():
        return float("nan")
    weights = (stim - stim.mean()) / np.sum((stim - stim.mean()) ** 2)
    return float(np.sqrt(np.sum(weights ** 2 * sd ** 2)) * 1e3)



def _spike_free_hyperpolarizing(col: dict, slow: np.ndarray, lower: np.ndarray,
                                traces: list[tuple[np.ndarray, float]]) -> np.ndarray:
    """Hyperpolarizing sweeps known to be spike-free: counted 0 exactly, or sampled too slowly
    to count and with no sample of the step over SLOW_SWEEP_MAX_RISE_MV above baseline."""
    stim, count = col["stimulus_pa"], col["spike_count"]
    hyper = np.isfinite(stim) & (stim < 0)
    out = hyper & np.isfinite(count) & ~lower & (count == 0)
    for j in np.flatnonzero(hyper & slow):
        v, rate = traces[j]
        lo = int(round(col["stimulus_start_s"][j] * rate))
        hi = int(round(col["stimulus_end_s"][j] * rate))
        part = np.asarray(v[lo:hi], dtype=float)
        part = part[np.isfinite(part)]
        out[j] = bool(part.size and np.isfinite(col["baseline_mv"][j])
                      and part.max() <= col["baseline_mv"][j] + SLOW_SWEEP_MAX_RISE_MV)
    return out


def passive_sweeps(sweep_rows: list[dict], traces: list[tuple[np.ndarray, float]]
                   ) -> np.ndarray:
    """Which sweeps the input resistance is fitted to.

    Parameters
    ----------
    sweep_rows : list of dict
        One :class:`~spikemeasure.analysis.sweep_features.SweepFeatures` ``as_dict()`` per sweep.
    traces : list of (voltage_mv, sampling_rate_hz)
        The raw voltage of the same sweeps.

    Returns
    -------
    ndarray of bool
        True for hyperpolarizing sweeps known to be spike-free (see
        :func:`~spikemeasure.analysis.cell_features.cell_features`) with a finite
        steady_state_mv - baseline_mv.
    """
    if len(sweep_rows) != len(traces):
        raise ValueError("`sweep_rows` and `traces` must have the same length")
    if not sweep_rows:
        return np.zeros(0, dtype=bool)
    col = {k: np.array([r[k] for r in sweep_rows], dtype=float) for k in
           ("stimulus_pa", "spike_count", "baseline_mv", "steady_state_mv", "stimulus_start_s",
            "stimulus_end_s")}
    steps_only(sweep_rows, col)
    flags = [set(filter(None, str(r.get("flags", "")).split(";"))) for r in sweep_rows]
    slow = np.array(["too_slow_for_spikes" in f for f in flags], dtype=bool)
    lower = np.array(["spike_count_lower_bound" in f for f in flags], dtype=bool)
    return (_spike_free_hyperpolarizing(col, slow, lower, traces)
            & np.isfinite(col["steady_state_mv"] - col["baseline_mv"]))



def steps_only(sweep_rows: list[dict], col: dict) -> np.ndarray:
    """Blank stimulus_pa of sweeps whose stimulus is not a step (a ramp, another shape), so
    the step-only values leave them out; returns which sweeps are not steps."""
    other = np.array([r.get("stimulus_shape", "step") not in ("step", "none")
                      for r in sweep_rows], dtype=bool)
    if other.size:
        col["stimulus_pa"] = np.where(other, np.nan, col["stimulus_pa"])
    return other



def passive_values(col: dict, slow: np.ndarray, lower: np.ndarray, gapped: np.ndarray,
                    traces: list[tuple[np.ndarray, float]], sweep_flags: list[set],
                    values: dict, flags: list[str]) -> None:
    """Input resistance, sag and the membrane time constant (see
    :func:`~spikemeasure.analysis.cell_features.cell_features`) into `values`, their flags
    into `flags`; `col`, `slow`, `lower`, `gapped` and `sweep_flags` as that function
    gathers them from the sweep rows."""
    stim, count = col["stimulus_pa"], col["spike_count"]
    hyper_all = np.isfinite(stim) & (stim < 0)
    candidates = _spike_free_hyperpolarizing(col, slow, lower, traces)
    slow_silent = candidates & slow
    # with the drift left in (sweep_features): a drift common to the sweeps cancels
    deflection = np.where(np.isfinite(col["deflection_mv"]), col["deflection_mv"],
                          col["steady_state_mv"] - col["baseline_mv"])
    passive = np.flatnonzero(candidates & np.isfinite(deflection))
    if slow_silent[passive].any():
        flags.append("slow_sweeps_taken_as_spike_free")
    if (hyper_all & ((candidates & ~np.isfinite(deflection))
                     | (lower & ~(count > 0) & ~slow))).any():
        flags.append("input_resistance_skips_gap_sweeps")
    values["input_resistance_mohm"] = input_resistance(stim[passive], deflection[passive])
    if np.isfinite(values["input_resistance_mohm"]):
        values["input_resistance_mohm_sd"] = input_resistance_sd(
            stim[passive], col["deflection_sd_mv"][passive])
    if not np.isfinite(values["input_resistance_mohm"]):
        flags.append("too_few_passive_sweeps")
    values["bridge_error_mohm"] = _bridge_median(col, passive[~gapped[passive]], traces)
    if passive[~gapped[passive]].size and not np.isfinite(values["bridge_error_mohm"]):
        flags.append("bridge_error_not_separable")
    hyper = np.flatnonzero(hyper_all)
    if hyper.size == 0:
        flags.append("no_hyperpolarizing_step")
    else:
        deepest = hyper[np.argmin(stim[hyper])]
        clear = hyper[~gapped[hyper]]
        if gapped[deepest] and clear.size:
            flags.append("sag_skips_gap_sweeps")
            deepest = clear[np.argmin(stim[clear])]
        values["sag_fraction"] = float(col["sag_fraction"][deepest])
        if "sag_within_noise" in sweep_flags[deepest]:
            flags.append("sag_within_noise")
        # hyperpolarizing and spike-free, or it would be but for a gap in its step
        pool = np.flatnonzero(hyper_all & (candidates | (lower & ~(count > 0) & ~slow)))
        fit_ok = np.flatnonzero(candidates & ~gapped)
        if pool.size > fit_ok.size:
            flags.append("membrane_tau_skips_gap_sweeps")
        if fit_ok.size:
            # the smallest steps, of one sampling rate: that of the smallest
            rate = traces[int(fit_ok[np.argmax(stim[fit_ok])])][1]
            same = fit_ok[[traces[j][1] == rate for j in fit_ok]]
            _tau_value(col, same[np.argsort(-stim[same], kind="stable")][:TAU_STEPS], traces,
                       sweep_flags, values, flags)


def _bridge_median(col: dict, sweeps: np.ndarray, traces: list[tuple[np.ndarray, float]]
                   ) -> float:
    """bridge_error_mohm (see :func:`~spikemeasure.analysis.cell_features.cell_features`):
    the median over `sweeps` of :func:`~spikemeasure.analysis.bridge.bridge_error`, and over the onsets of every sweep's
    hyperpolarizing test pulse (a test pulse is there to show the electrode's jump; with one
    per sweep the median rests on many edges, not only on the few hyperpolarizing steps)."""
    found = [bridge_error(traces[j][0], traces[j][1], col["stimulus_start_s"][j],
                          col["stimulus_end_s"][j], col["stimulus_pa"][j]).bridge_error_mohm
             for j in sweeps]
    pulse_pa = np.asarray(col.get("test_pulse_pa", []), dtype=float)
    pulse_s = np.asarray(col.get("test_pulse_start_s", []), dtype=float)
    for j in np.flatnonzero(np.isfinite(pulse_s) & (pulse_pa < 0)) if pulse_s.size else ():
        jump = edge_jump(traces[j][0], traces[j][1], float(pulse_s[j]))
        found.append(jump / float(pulse_pa[j]) * 1e3)  # mV / pA = GOhm
    found = [r for r in found if np.isfinite(r)]
    return float(np.median(found)) if found else float("nan")


def _tau_value(col: dict, sweeps: np.ndarray, traces: list[tuple[np.ndarray, float]],
               sweep_flags: list[set], values: dict, flags: list[str]) -> None:
    """membrane_tau_ms and its fit's quality (see
    :func:`~spikemeasure.analysis.cell_features.cell_features`) from the steps of `sweeps`
    (one sampling rate) into `values`, their flags into `flags`."""
    rate = traces[int(sweeps[0])][1]
    width = max(1, int(round(TAU_SMOOTHING_MS * 1e-3 * rate)))
    # per sweep, only what the fit and its tests read: the step, the baseline, the noise
    steps, stretches, line_noises, noises, jumps, slows, starts = [], [], [], [], [], [], []
    for j in sweeps:
        onset, offset = col["stimulus_start_s"][j], col["stimulus_end_s"][j]
        quiet_s = col["baseline_start_s"][j]
        # the fit and its tests read the membrane without the sweep's hum and drift
        v, line_noise = passive_voltage(np.asarray(traces[j][0], dtype=float), rate,
                                        CurrentStep(onset, offset, baseline_start_s=float(
                                            quiet_s) if np.isfinite(quiet_s) else 0.0,
                                            test_pulse_start_s=float(
                                                col["test_pulse_start_s"][j])))
        base_noise = (float(np.std(baseline_stretch(v, rate, onset, earliest_s=quiet_s)))
                      if line_noise.found else float(col["baseline_noise_mv"][j]))
        noise = (max(base_noise, NOISE_FLOOR_MV) if np.isfinite(base_noise)
                 else NOISE_FLOOR_MV)
        on, off = int(round(onset * rate)), min(v.size, int(round(offset * rate)))
        steps.append(v[on:off].copy())
        starts.append(on)
        # the baseline is the longer stretch of noise (a steadier spectrum) unless a test
        # pulse cut it short
        stretches.append(None if "baseline_window_cut_by_epoch" in sweep_flags[j]
                         else baseline_stretch(v, rate, onset).copy())
        # what the baseline's moving average keeps beyond white noise's share, noise /
        # sqrt(samples): white noise is in the fit's residual test and its SD already
        slow = slow_fluctuation_mv(v, rate, onset, TAU_SMOOTHING_MS)
        slows.append(float(np.sqrt(max(0.0, slow ** 2 - noise ** 2 / width))))
        line_noises.append(line_noise)
        noises.append(noise)
        jumps.append(values["bridge_error_mohm"] * col["stimulus_pa"][j] * 1e-3)
        del v
    # an electrode jump (the cell's bridge error times a step) above that sweep's noise is
    # left out with the filter's settling after it; without one, only the low-pass
    # filter's delay, which lengthens a fast membrane's tau (4 % at 1.5 ms behind a 3 kHz
    # Bessel)
    jumped = any(np.isfinite(jump) and abs(jump) > noise for jump, noise in zip(jumps, noises))
    skip = SETTLE_MS if jumped else FILTER_DELAY_MS
    fit = fit_shared_tau(steps, rate, skip_ms=skip, noise_mv=noises)
    if fit is None:
        flags.append("tau_fit_failed")
        return
    used = list(fit.steps)
    # the steps' noise, pooled over their fitted samples
    noise = float(np.sqrt(np.sum(fit.n_samples * np.square([noises[k] for k in used]))
                          / np.sum(fit.n_samples)))
    ratio = fit.rms_residual_mv / noise
    values["membrane_tau_fit_r2"] = fit.r_squared
    values["membrane_tau_residual_to_noise"] = ratio
    # the baseline's slow fluctuation against each deflection as measured, not as fitted (a
    # fit bent by fluctuations can put v0 and v_inf anywhere), combined as the fit combines
    # the steps (each step's weight on tau grows with its deflection squared)
    pinning = 0.0
    for n, k in enumerate(used):
        j = sweeps[k]
        measured = min(abs(fit.v0_mv[n] - fit.v_inf_mv[n]),
                       abs(col["min_mv"][j] - col["baseline_mv"][j]))
        if np.isfinite(slows[k]):
            pinning += np.inf if slows[k] == 0 else (measured / slows[k]) ** 2
    skipped = int(round(fit.start_ms * 1e-3 * rate))
    firsts = [a + skipped for a in starts]
    # the noise as the baselines show it, or as the residuals do when they hold more: what
    # one exponential leaves of the charging (an active membrane's, drift left in) moves
    # tau as noise of the residual's spectrum would (the sandwich with the residuals'
    # covariance)
    sds = [x for x in (shared_tau_sd(fit, rate, stretches, line_noise=line_noises,
                                     first_sample=firsts),
                       shared_tau_sd(fit, rate, [None] * len(sweeps), line_noise=line_noises,
                                     first_sample=firsts)) if np.isfinite(x)]
    sd = max(sds) if sds else float("nan")
    misfit = float(np.sqrt(max(0.0, fit.rms_residual_mv ** 2 - noise ** 2)))
    size = float(np.sqrt(np.mean((fit.v0_mv - fit.v_inf_mv) ** 2)))
    if ((ratio > MAX_RESIDUAL_TO_NOISE and misfit > MAX_MISFIT_TO_DEFLECTION * size)
            or fit.tau_ms * 1e-3 * rate < 2 or not np.all(fit.v0_mv > fit.v_inf_mv)):
        flags.append("tau_fit_poor")
    elif pinning and 1.0 / np.sqrt(pinning) > MAX_FLUCTUATION_TO_DEFLECTION:
        flags.append("baseline_fluctuates")
    elif not (np.isfinite(sd) and sd <= MAX_TAU_SD_FRACTION * fit.tau_ms):
        flags.append("tau_within_noise")
    else:
        values["membrane_tau_ms"] = fit.tau_ms
        values["membrane_tau_ms_sd"] = sd
