"""Per-cell features across a step series: rest, rheobase, f-I slope, input resistance,
membrane time constant, sag, and the first spike at rheobase.

Functions take per-sweep values (arrays aligned by sweep) or one voltage trace, and return
plain values or a small dataclass; nothing here reads files or prints.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from .bridge import MIN_TAU_TO_SETTLE, SETTLE_MS, bridge_error, edge_jump
from .fluctuation import baseline_stretch, slow_fluctuation_mv
from .membrane_tau import (END_FRACTION, FILTER_DELAY_MS, TAU_SMOOTHING_MS, ExponentialFit,
                           exponential_fit_sd, fit_membrane_tau)
from .sweep_features import BASELINE_WINDOW_MS, SAG_NOISE_FACTOR, passive_voltage
from .sweeps import CurrentStep

__all__ = ["CellFeatures", "ExponentialFit", "fit_membrane_tau", "rheobase", "ramp_rheobase",
           "fi_slope", "input_resistance", "input_resistance_sd", "exponential_fit_sd",
           "cell_features", "passive_sweeps", "CELL_FLAG_TEXT", "MAX_RESIDUAL_TO_NOISE",
           "MIN_DEFLECTION_TO_NOISE", "MAX_TAU_SD_FRACTION", "NOISE_FLOOR_MV", "FILTER_DELAY_MS", "END_FRACTION",
           "TAU_SMOOTHING_MS",
           "HOLDING_TOLERANCE_PA", "SLOW_SWEEP_MAX_RISE_MV", "MAX_FLUCTUATION_TO_DEFLECTION",
           "SAG_NOISE_FACTOR"]

#: A time-constant fit is poor when its residual RMS exceeds this multiple of the sweep's
#: baseline noise (the response is not one exponential: resonance, sag, active currents) ...
MAX_RESIDUAL_TO_NOISE = 1.5
#: ... or when the deflection is smaller than this multiple of the noise (too small to fit).
MIN_DEFLECTION_TO_NOISE = 5.0
#: ... unless the time constant's SD (:func:`exponential_fit_sd`) is at most this fraction
#: of it: the noise then pins it (2 SD within the 10 % a time constant is judged by).
MAX_TAU_SD_FRACTION = 0.05
#: Noise below this (mV) counts as this much, so a noise-free trace is not held to zero.
NOISE_FLOOR_MV = 0.05
#: Sweeps whose holding current is within this of zero count as "no holding current".
HOLDING_TOLERANCE_PA = 1.0
#: A hyperpolarizing sweep sampled too slowly to count spikes is taken as spike-free when no
#: sample of its step lies more than this above its baseline (a rule of our own: a spike
#: rises tens of mV, noise and rebound a few).
SLOW_SWEEP_MAX_RISE_MV = 10.0
#: The time constant is left empty when the baseline's slow fluctuation (SD of its
#: TAU_SMOOTHING_MS moving average) exceeds this fraction of the deflection fitted: synaptic
#: background moves the voltage on the time constant's own time scale, which no residual
#: test against that same background can see (a rule of our own).
MAX_FLUCTUATION_TO_DEFLECTION = 0.05

#: Sweep flags that mean a gap emptied some of a sweep's passive values.
_GAP_FLAGS = ("gap_in_baseline_window", "gap_in_step", "gap_in_steady_state_window",
              "gap_at_step_edge_in_command")

CELL_FLAG_TEXT = {
    "no_current_steps": "no sweep has a current step (a gap-free recording, or a file without a "
                        "command channel measured without --step), so resting potential, "
                        "rheobase, f-I slope, input resistance, time constant and sag are empty",
    "step_sizes_unknown": "the step sizes are unknown (no command channel and no "
                          "--step-sizes), so rheobase, f-I slope, input resistance, time "
                          "constant and sag are empty",
    "holding_current_in_every_sweep": "every sweep has a holding current, so resting_mv is empty",
    "no_spiking_step": "no step evoked a spike: rheobase, f-I slope and the rheobase_* values "
                       "are empty",
    "rheobase_is_first_step": "the smallest step tested already evoked a spike: rheobase is at "
                              "most that step",
    "too_few_fi_points": "fewer than 2 steps at or above rheobase: f-I slope is empty",
    "too_few_passive_sweeps": "fewer than 2 hyperpolarizing spike-free sweeps: input "
                              "resistance is empty",
    "no_hyperpolarizing_step": "no hyperpolarizing step: time constant and sag are empty",
    "tau_fit_failed": "the exponential fit for the time constant did not converge",
    "spikes_not_counted_in_slow_sweeps": "some sweeps were sampled too slowly to count spikes "
                                         "(sweep flag too_slow_for_spikes) and could change "
                                         "rheobase, f-I slope or the largest firing rate: "
                                         "those, and the rheobase_* values, are empty",
    "slow_sweeps_taken_as_spike_free": "hyperpolarizing sweeps sampled too slowly to count "
                                       "spikes are used for input resistance, time constant "
                                       "and sag, taken as spike-free since no sample of their "
                                       f"step rises over {SLOW_SWEEP_MAX_RISE_MV:g} mV above "
                                       "their baseline",
    "resting_skips_gap_sweeps": "a gap emptied the baseline of some sweeps: resting_mv is the "
                                "median of the others",
    "rheobase_skips_gap_sweeps": "a gap in the step of a smaller step's sweep, with no spike "
                                 "found outside the gap, leaves open whether it fired: "
                                 "rheobase is the smallest step seen to fire, and "
                                 "rheobase_resolution_pa reaches down to the largest smaller "
                                 "step known not to fire",
    "fi_slope_skips_gap_sweeps": "sweeps at or above rheobase whose firing rate a gap emptied "
                                 "are left out of the f-I slope",
    "max_firing_rate_skips_gap_sweeps": "sweeps whose firing rate a gap emptied are left out "
                                        "of max_firing_rate_hz",
    "input_resistance_skips_gap_sweeps": "hyperpolarizing sweeps whose baseline or steady "
                                         "state a gap emptied, or whose spikes a gap left "
                                         "uncounted, are left out of the input resistance",
    "membrane_tau_skips_gap_sweeps": "the smallest hyperpolarizing spike-free sweep has a gap "
                                     "in its step or baseline: the time constant is fitted on "
                                     "the next one without a gap",
    "sag_skips_gap_sweeps": "the most hyperpolarizing sweep has a gap in a window sag is "
                            "measured over: sag_fraction is that of the most hyperpolarizing "
                            "sweep without one",
    "no_step_stimuli": "no sweep's stimulus is a step (only ramps or other shapes), so "
                       "rheobase, f-I slope, input resistance, time constant and sag are empty",
    "no_spiking_ramp": "ramp sweeps were measured but none fired: ramp_rheobase_pa is empty",
    "tau_fit_poor": f"the exponential fit leaves a residual over {MAX_RESIDUAL_TO_NOISE:g} "
                    "times the recording noise (the response is not one exponential), or the "
                    f"deflection is under {MIN_DEFLECTION_TO_NOISE:g} times the noise with "
                    f"membrane_tau_ms_sd over {MAX_TAU_SD_FRACTION:.0%} of it, or the "
                    "fitted time constant spans under 2 samples: the "
                    "time constant is left empty",
    "bridge_error_not_separable": "the membrane charges too fast after the step edges (time "
                                  f"constant under {MIN_TAU_TO_SETTLE * SETTLE_MS:g} ms) to "
                                  "tell an electrode's voltage jump from the charging: "
                                  "bridge_error_mohm is empty",
    "baseline_fluctuates": "the baseline fluctuates (synaptic background): the SD of its "
                           f"{TAU_SMOOTHING_MS:g} ms moving average over the "
                           f"{BASELINE_WINDOW_MS:g} ms before the step, beyond the share "
                           "white noise of the baseline's SD leaves on it, exceeds "
                           f"{MAX_FLUCTUATION_TO_DEFLECTION:g} of the deflection "
                           "(baseline_mv - min_mv, or the fitted one when smaller), "
                           "where one exponential means nothing, so the time constant is "
                           "left empty",
    "sag_within_noise": "the most hyperpolarizing sweep has the sweep flag "
                        "`sag_within_noise` (its sag is not over "
                        f"{SAG_NOISE_FACTOR:g} times the SD its baseline's noise leaves on "
                        "the smoothing under min_mv, plus its drift): sag_fraction is 0",
}


@dataclass(frozen=True)
class CellFeatures:
    """Features of one cell (NaN where not measurable; flags say why)."""

    sweeps: int
    resting_mv: float
    rheobase_pa: float
    rheobase_resolution_pa: float
    fi_slope_hz_per_pa: float
    max_firing_rate_hz: float
    block_stimulus_pa: float
    input_resistance_mohm: float
    bridge_error_mohm: float
    membrane_tau_ms: float
    membrane_tau_fit_r2: float
    membrane_tau_residual_to_noise: float
    sag_fraction: float
    rheobase_threshold_mv: float
    rheobase_amplitude_mv: float
    rheobase_half_width_ms: float
    rheobase_ahp_depth_mv: float
    flags: tuple[str, ...] = ()
    #: Position of the rheobase sweep among the sweeps given to :func:`cell_features` (-1
    #: without a rheobase); not a column of cells.csv.
    rheobase_sweep: int = -1
    #: The smallest first_spike_current_pa over ramp sweeps (:func:`ramp_rheobase`).
    ramp_rheobase_pa: float = float("nan")
    input_resistance_mohm_sd: float = float("nan")
    membrane_tau_ms_sd: float = float("nan")

    def as_dict(self) -> dict:
        out = asdict(self)
        out["flags"] = ";".join(self.flags)
        return out


def rheobase(stimulus_pa: np.ndarray, spike_count: np.ndarray,
             count_known: np.ndarray | None = None) -> tuple[float, float, int]:
    """Smallest step that evokes at least one spike.

    Parameters
    ----------
    stimulus_pa : ndarray
        Step size of each sweep.
    spike_count : ndarray
        Spikes in each step (NaN where not counted).
    count_known : ndarray of bool, optional
        False for sweeps whose count is only a lower bound or unknown (a gap, or too slow
        sampling): such a sweep counts as firing when spikes were seen, and otherwise neither
        as firing nor as silent, so it does not narrow the resolution. All true by default.

    Returns
    -------
    rheobase_pa : float
        NaN when no step evoked a spike.
    resolution_pa : float
        The gap between rheobase and the largest smaller step tested, i.e. the true rheobase
        lies in (rheobase - resolution, rheobase]; NaN when rheobase is the smallest step.
    sweep : int
        Position of the rheobase sweep in the arrays (-1 when none).
    """
    stim = np.asarray(stimulus_pa, dtype=float)
    count = np.asarray(spike_count, dtype=float)
    known = (np.ones(stim.shape, dtype=bool) if count_known is None
             else np.asarray(count_known, dtype=bool))
    ok = np.isfinite(stim)
    spiking = np.flatnonzero(ok & (count > 0))
    if spiking.size == 0:
        return float("nan"), float("nan"), -1
    k = int(spiking[np.argmin(stim[spiking])])
    smaller = stim[ok & known & (count == 0) & (stim < stim[k])]
    resolution = float(stim[k] - smaller.max()) if smaller.size else float("nan")
    return float(stim[k]), resolution, k


def fi_slope(stimulus_pa: np.ndarray, rate_hz: np.ndarray, rheobase_pa: float) -> float:
    """Least-squares slope (Hz/pA) of firing rate on step size, over steps >= rheobase.

    NaN with fewer than 2 distinct steps.
    """
    stim = np.asarray(stimulus_pa, dtype=float)
    rate = np.asarray(rate_hz, dtype=float)
    use = np.isfinite(stim) & np.isfinite(rate) & (stim >= rheobase_pa)
    if np.unique(stim[use]).size < 2:
        return float("nan")
    return float(np.polyfit(stim[use], rate[use], 1)[0])


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
        True for hyperpolarizing sweeps known to be spike-free (see :func:`cell_features`)
        with a finite steady_state_mv - baseline_mv.
    """
    if len(sweep_rows) != len(traces):
        raise ValueError("`sweep_rows` and `traces` must have the same length")
    if not sweep_rows:
        return np.zeros(0, dtype=bool)
    col = {k: np.array([r[k] for r in sweep_rows], dtype=float) for k in
           ("stimulus_pa", "spike_count", "baseline_mv", "steady_state_mv", "stimulus_start_s",
            "stimulus_end_s")}
    _steps_only(sweep_rows, col)
    flags = [set(filter(None, str(r.get("flags", "")).split(";"))) for r in sweep_rows]
    slow = np.array(["too_slow_for_spikes" in f for f in flags], dtype=bool)
    lower = np.array(["spike_count_lower_bound" in f for f in flags], dtype=bool)
    return (_spike_free_hyperpolarizing(col, slow, lower, traces)
            & np.isfinite(col["steady_state_mv"] - col["baseline_mv"]))


def _before_block(col: dict, sweep_flags: list[set], values: dict) -> None:
    """block_stimulus_pa (see :func:`cell_features`) into `values`, and into `col` the key
    ``rate_before_block_hz``: firing_rate_hz, NaN from that step up."""
    stim = col["stimulus_pa"]
    blocked = np.array(["depolarization_block" in f for f in sweep_flags], dtype=bool)
    blocked &= np.isfinite(stim)
    if blocked.any():
        values["block_stimulus_pa"] = float(stim[blocked].min())
    after = stim >= values["block_stimulus_pa"]  # all False without block (NaN compares so)
    col["rate_before_block_hz"] = np.where(after, np.nan, col["firing_rate_hz"])


def ramp_rheobase(shapes: list[str], first_spike_current_pa: np.ndarray) -> float:
    """The smallest current at a first spike over the ramp sweeps.

    Parameters
    ----------
    shapes : list of str
        Each sweep's stimulus_shape.
    first_spike_current_pa : ndarray
        Each sweep's command current at its first spike in the stimulus (NaN without one).

    Returns
    -------
    float
        pA; NaN when no ramp sweep has a first spike.
    """
    current = np.asarray(first_spike_current_pa, dtype=float)
    ramps = np.array([shape == "ramp" for shape in shapes], dtype=bool)
    fired = current[ramps & np.isfinite(current)]
    return float(fired.min()) if fired.size else float("nan")


def _steps_only(sweep_rows: list[dict], col: dict) -> np.ndarray:
    """Blank stimulus_pa of sweeps whose stimulus is not a step (a ramp, another shape), so
    the step-only values leave them out; returns which sweeps are not steps."""
    other = np.array([r.get("stimulus_shape", "step") not in ("step", "none")
                      for r in sweep_rows], dtype=bool)
    if other.size:
        col["stimulus_pa"] = np.where(other, np.nan, col["stimulus_pa"])
    return other


def _resting(col: dict, sweep_flags: list[set], flags: list[str]) -> float:
    """resting_mv (see :func:`cell_features`); appends its flags to `flags`."""
    resting = float("nan")
    free = np.isfinite(col["holding_pa"]) & (np.abs(col["holding_pa"]) <= HOLDING_TOLERANCE_PA)
    no_command = ~np.isfinite(col["holding_pa"])  # sizes from --step-sizes: no holding known
    pick = free | no_command
    if pick.any() and np.isfinite(col["baseline_mv"][pick]).any():
        resting = float(np.nanmedian(col["baseline_mv"][pick]))
        base_gap = np.array(["gap_in_baseline_window" in f for f in sweep_flags])
        if (pick & base_gap).any():
            flags.append("resting_skips_gap_sweeps")
    elif np.isfinite(col["holding_pa"]).any():
        flags.append("holding_current_in_every_sweep")
    return resting


def _firing_values(col: dict, slow: np.ndarray, lower: np.ndarray,
                   first_spikes: list[dict | None], values: dict, flags: list[str]) -> int:
    """rheobase_pa, its resolution, the f-I slope and the rheobase_* spike values (see
    :func:`cell_features`) into `values`, their flags into `flags`; returns the position of
    the rheobase sweep (-1 when no rheobase)."""
    stim, count = col["stimulus_pa"], col["spike_count"]
    known = np.isfinite(count) & ~lower       # counts that are exact
    undecided = np.isfinite(stim) & ~known & ~(count > 0)  # may or may not have fired
    rb, resolution, k = rheobase(stim, count, known)
    below = undecided & ((stim < rb) if k >= 0 else True)
    if slow.any():
        flags.append("spikes_not_counted_in_slow_sweeps")  # max_firing_rate_hz is empty
    if (below & slow).any() or (k < 0 and slow.any()):
        pass  # a slow sweep below the smallest firing step may have fired: no rheobase
    elif k < 0:
        flags.append("no_spiking_step")
        if below.any():
            flags.append("rheobase_skips_gap_sweeps")
    else:
        values.update(rheobase_pa=rb, rheobase_resolution_pa=resolution)
        if below.any():
            flags.append("rheobase_skips_gap_sweeps")
        if not np.isfinite(resolution):
            flags.append("rheobase_is_first_step")
        if not (slow & (stim >= rb)).any():
            values["fi_slope_hz_per_pa"] = fi_slope(stim, col["rate_before_block_hz"], rb)
            if (lower & (stim >= rb) & ~np.isfinite(col["firing_rate_hz"])).any():
                flags.append("fi_slope_skips_gap_sweeps")
            if not np.isfinite(values["fi_slope_hz_per_pa"]):
                flags.append("too_few_fi_points")
        first = first_spikes[k]
        if first is not None:
            values.update(rheobase_threshold_mv=first["threshold_mv"],
                          rheobase_amplitude_mv=first["amplitude_mv"],
                          rheobase_half_width_ms=first["half_width_ms"],
                          rheobase_ahp_depth_mv=first["ahp_depth_mv"])
    return k if np.isfinite(values["rheobase_pa"]) else -1


def _passive_values(col: dict, slow: np.ndarray, lower: np.ndarray, gapped: np.ndarray,
                    traces: list[tuple[np.ndarray, float]], sweep_flags: list[set],
                    values: dict, flags: list[str]) -> None:
    """Input resistance, sag and the membrane time constant (see :func:`cell_features`) into
    `values`, their flags into `flags`."""
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
        if pool.size and (fit_ok.size == 0 or stim[fit_ok].max() < stim[pool].max()):
            flags.append("membrane_tau_skips_gap_sweeps")
        if fit_ok.size:
            _tau_value(col, int(fit_ok[np.argmax(stim[fit_ok])]), traces, sweep_flags, values,
                       flags)


def _bridge_median(col: dict, sweeps: np.ndarray, traces: list[tuple[np.ndarray, float]]
                   ) -> float:
    """bridge_error_mohm (see :func:`cell_features`): the median over `sweeps` of
    :func:`~spikemeasure.analysis.bridge.bridge_error`, and over the onsets of every sweep's
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


def _tau_value(col: dict, j: int, traces: list[tuple[np.ndarray, float]],
               sweep_flags: list[set], values: dict, flags: list[str]) -> None:
    """membrane_tau_ms and its fit's quality (see :func:`cell_features`) from sweep `j` into
    `values`, their flags into `flags`."""
    raw, rate = traces[j]
    onset, offset = col["stimulus_start_s"][j], col["stimulus_end_s"][j]
    quiet_s = col["baseline_start_s"][j]
    # the fit and its tests read the membrane without the sweep's hum and drift
    v, line_noise = passive_voltage(np.asarray(raw, dtype=float), rate, CurrentStep(
        onset, offset, baseline_start_s=float(quiet_s) if np.isfinite(quiet_s) else 0.0,
        test_pulse_start_s=float(col["test_pulse_start_s"][j])))
    base_noise = (float(np.std(baseline_stretch(v, rate, onset, earliest_s=quiet_s)))
                  if line_noise.found else float(col["baseline_noise_mv"][j]))
    noise = max(base_noise, NOISE_FLOOR_MV) if np.isfinite(base_noise) else NOISE_FLOOR_MV
    # an electrode jump (the cell's bridge error times this step) above the noise is left
    # out with the filter's settling after it; without one, only the low-pass filter's
    # delay, which lengthens a fast membrane's tau (4 % at 1.5 ms behind a 3 kHz Bessel)
    jump = values["bridge_error_mohm"] * col["stimulus_pa"][j] * 1e-3
    skip = SETTLE_MS if np.isfinite(jump) and abs(jump) > noise else FILTER_DELAY_MS
    fit = fit_membrane_tau(v, rate, onset, offset, skip_ms=skip)
    if fit is None:
        flags.append("tau_fit_failed")
        return
    ratio = fit.rms_residual_mv / noise
    values["membrane_tau_fit_r2"] = fit.r_squared
    values["membrane_tau_residual_to_noise"] = ratio
    deflection = abs(fit.v0_mv - fit.v_inf_mv)
    # what the moving average keeps beyond white noise's share, noise / sqrt(samples):
    # white noise is in the fit's residual test and its SD already
    width = max(1, int(round(TAU_SMOOTHING_MS * 1e-3 * rate)))
    fluctuation = float(np.sqrt(max(0.0, slow_fluctuation_mv(v, rate, onset, TAU_SMOOTHING_MS)
                                    ** 2 - noise ** 2 / width)))
    # the deflection as measured, not as fitted: a fit bent by fluctuations can put v0 and
    # v_inf anywhere
    measured = min(deflection, abs(col["min_mv"][j] - col["baseline_mv"][j]))
    # the baseline is the longer stretch of noise (a steadier spectrum) unless a test
    # pulse cut it short
    stretch = (None if "baseline_window_cut_by_epoch" in sweep_flags[j]
               else baseline_stretch(v, rate, onset))
    sd = exponential_fit_sd(
        fit, rate, stretch, line_noise=line_noise,
        first_sample=int(round(onset * rate)) + int(round(fit.start_ms * 1e-3 * rate)))
    # a small deflection still gives tau when the noise leaves it precise enough, for a fit
    # that is a charging curve at all: falling (a hyperpolarizing step) over at least a few
    # samples per tau, where the linearized SD means something
    pinned = (np.isfinite(sd) and sd <= MAX_TAU_SD_FRACTION * fit.tau_ms
              and fit.v0_mv > fit.v_inf_mv and fit.tau_ms * 1e-3 * rate >= 3)
    if (ratio > MAX_RESIDUAL_TO_NOISE or fit.tau_ms * 1e-3 * rate < 2
            or (deflection < MIN_DEFLECTION_TO_NOISE * noise and not pinned)):
        flags.append("tau_fit_poor")
    elif np.isfinite(fluctuation) and fluctuation > MAX_FLUCTUATION_TO_DEFLECTION * measured:
        flags.append("baseline_fluctuates")
    else:
        values["membrane_tau_ms"] = fit.tau_ms
        values["membrane_tau_ms_sd"] = sd


def cell_features(sweep_rows: list[dict], traces: list[tuple[np.ndarray, float]],
                  first_spikes: list[dict | None]) -> CellFeatures:
    """Cell features from its sweeps.

    Parameters
    ----------
    sweep_rows : list of dict
        One :class:`~spikemeasure.analysis.sweep_features.SweepFeatures` ``as_dict()`` per measured sweep.
    traces : list of (voltage_mv, sampling_rate_hz)
        The raw voltage of the same sweeps, for the time-constant fit.
    first_spikes : list of dict or None
        The first spike in each sweep's step (keys threshold_mv, amplitude_mv, half_width_ms,
        ahp_depth_mv), or None.

    Returns
    -------
    CellFeatures

    Notes
    -----
    - resting_mv: the median baseline_mv over sweeps whose holding current is within
      :data:`HOLDING_TOLERANCE_PA` of zero.
    - rheobase_pa: :func:`rheobase`, over steps of known size; rheobase_resolution_pa says how
      finely the protocol pinned it down.
    - block_stimulus_pa: the smallest step whose sweep has the flag ``depolarization_block``
      (:func:`~spikemeasure.analysis.block.depolarization_block`).
    - fi_slope_hz_per_pa: :func:`fi_slope`; max_firing_rate_hz: the largest firing_rate_hz;
      both over the steps below block_stimulus_pa only (all steps without block).
    - input_resistance_mohm: :func:`input_resistance` of steady_state_mv - baseline_mv over
      hyperpolarizing, spike-free sweeps, with each sweep's drift left in (the sweep's
      ``deflection_mv``).
    - bridge_error_mohm: the median over those sweeps (without gaps) of
      :func:`~spikemeasure.analysis.bridge.bridge_error`, and over every sweep's
      hyperpolarizing test pulse of its onset's :func:`~spikemeasure.analysis.bridge.edge_jump`
      over the pulse size.
    - membrane_tau_ms: :func:`fit_membrane_tau` on the smallest hyperpolarizing spike-free
      step; empty (flag ``tau_fit_poor``) when the residual RMS exceeds
      :data:`MAX_RESIDUAL_TO_NOISE` times the sweep's baseline noise or the deflection is under
      :data:`MIN_DEFLECTION_TO_NOISE` times it with membrane_tau_ms_sd over
      :data:`MAX_TAU_SD_FRACTION` of tau (noise taken as at least :data:`NOISE_FLOOR_MV`),
      or the fitted tau spans under 2 samples.
      The fit reads the voltage less the sweep's significant hum and drift
      (:func:`~spikemeasure.analysis.sweep_features.passive_voltage`). R^2 alone would reject good fits to small, noisy deflections,
      since noise caps it. Empty too (flag ``baseline_fluctuates``) when the baseline's slow
      fluctuation (:func:`~spikemeasure.analysis.fluctuation.slow_fluctuation_mv` over a
      :data:`TAU_SMOOTHING_MS` average, less in quadrature the s / sqrt(samples) white
      noise of the baseline's SD s leaves on it) exceeds :data:`MAX_FLUCTUATION_TO_DEFLECTION` of the
      deflection (baseline_mv - min_mv, or the fitted v0 - v_inf when smaller). The first
      :data:`FILTER_DELAY_MS` after onset (the low-pass filter's delay) are left out of the
      fit; when bridge_error_mohm times that sweep's step is over its noise, the first
      :data:`~spikemeasure.analysis.bridge.SETTLE_MS` (the jump and the filter's settling).
      membrane_tau_ms_sd: :func:`exponential_fit_sd` with the sweep's baseline noise.
    - input_resistance_mohm_sd: :func:`input_resistance_sd` of the sweeps' deflection_sd_mv.
    - sag_fraction: that of the most hyperpolarizing sweep, with the flag
      ``sag_within_noise`` when that sweep has it (its sag, 0, could not be told from noise:
      :func:`~spikemeasure.analysis.sweep_features.passive_response`): one rule for both
      tables.
    - rheobase_*: threshold, amplitude, half-width and AHP depth of the rheobase sweep's first
      spike in the step.

    Sweeps with gaps or sampled too slowly for spikes (sweep flags in ``flags`` of the rows):

    - A count flagged ``spike_count_lower_bound`` shows the sweep fired when it is above 0;
      at 0 it leaves open whether the sweep fired, so that sweep is neither a firing nor a
      silent step for rheobase (the resolution reaches down to the largest smaller step known
      silent), nor a spike-free one for input resistance and time constant. Sweeps whose rate
      a gap emptied are left out of the f-I slope and the largest rate. Each value that left a
      sweep out for a gap has a ``*_skips_gap_sweeps`` flag.
    - Sweeps sampled too slowly to count spikes (``too_slow_for_spikes``) empty the largest
      firing rate, the rheobase when one lies below the smallest step seen to fire (or no
      step was seen to fire), and the f-I slope when one lies at or above rheobase (flag
      ``spikes_not_counted_in_slow_sweeps``). Hyperpolarizing ones count as spike-free for
      input resistance and time constant when no sample of the step lies more than
      :data:`SLOW_SWEEP_MAX_RISE_MV` above their baseline (flag
      ``slow_sweeps_taken_as_spike_free``).
    - The time constant is fitted on the smallest hyperpolarizing spike-free sweep without a
      gap in its baseline window or step, and sag taken from the most hyperpolarizing sweep
      without one.
    """
    nan = float("nan")
    flags: list[str] = []
    n = len(sweep_rows)
    col = {k: np.array([r[k] for r in sweep_rows], dtype=float) for k in
           ("stimulus_pa", "holding_pa", "baseline_mv", "baseline_noise_mv", "spike_count",
            "firing_rate_hz", "steady_state_mv", "sag_fraction", "stimulus_start_s",
            "stimulus_end_s")} if n else {}
    for k in ("min_mv", "baseline_drift_mv", "deflection_sd_mv", "test_pulse_pa",
              "test_pulse_start_s", "baseline_start_s", "deflection_mv"):  # optional
        if n:
            col[k] = np.array([r.get(k, nan) for r in sweep_rows], dtype=float)
    sweep_flags = [set(filter(None, str(r.get("flags", "")).split(";"))) for r in sweep_rows]
    shapes = [str(r.get("stimulus_shape", "step")) for r in sweep_rows]
    ramp_rb = ramp_rheobase(shapes, [r.get("first_spike_current_pa", nan) for r in sweep_rows])
    if "ramp" in shapes and not np.isfinite(ramp_rb):
        flags.append("no_spiking_ramp")
    not_steps = _steps_only(sweep_rows, col) if n else np.zeros(0, dtype=bool)
    slow = np.array(["too_slow_for_spikes" in f for f in sweep_flags], dtype=bool)
    lower = np.array(["spike_count_lower_bound" in f for f in sweep_flags], dtype=bool)
    gapped = np.array([any(g in f for g in _GAP_FLAGS) for f in sweep_flags], dtype=bool)
    resting = _resting(col, sweep_flags, flags) if n else nan
    values = dict(rheobase_pa=nan, rheobase_resolution_pa=nan, fi_slope_hz_per_pa=nan,
                  max_firing_rate_hz=nan, block_stimulus_pa=nan, input_resistance_mohm=nan,
                  bridge_error_mohm=nan, membrane_tau_ms=nan,
                  membrane_tau_fit_r2=nan, membrane_tau_residual_to_noise=nan, sag_fraction=nan, rheobase_threshold_mv=nan,
                  rheobase_amplitude_mv=nan, rheobase_half_width_ms=nan,
                  rheobase_ahp_depth_mv=nan, input_resistance_mohm_sd=nan,
                  membrane_tau_ms_sd=nan)
    if n:
        _before_block(col, sweep_flags, values)
    if n and np.isfinite(col["rate_before_block_hz"]).any() and not slow.any():
        values["max_firing_rate_hz"] = float(np.nanmax(col["rate_before_block_hz"]))
        if (lower & ~np.isfinite(col["firing_rate_hz"])).any():
            flags.append("max_firing_rate_skips_gap_sweeps")
    if not n or not np.isfinite(col["stimulus_pa"]).any():
        if n:
            flags.append("no_step_stimuli" if not_steps.any() else
                         "step_sizes_unknown" if np.isfinite(col["stimulus_start_s"]).any()
                         else "no_current_steps")
        return CellFeatures(n, resting, flags=tuple(flags), ramp_rheobase_pa=ramp_rb, **values)
    rheobase_sweep = _firing_values(col, slow, lower, first_spikes, values, flags)
    _passive_values(col, slow, lower, gapped, traces, sweep_flags, values, flags)
    return CellFeatures(n, resting, flags=tuple(flags), rheobase_sweep=rheobase_sweep,
                        ramp_rheobase_pa=ramp_rb, **values)
