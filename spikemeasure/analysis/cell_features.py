"""Per-cell features across a step series: rest, rheobase, f-I slope, the first spike at
rheobase, and the cell's row gathering them with the passive values (input resistance, bridge
error, membrane time constant, sag: :mod:`~spikemeasure.analysis.cell_passive`).

Functions take per-sweep values (arrays aligned by sweep) or one voltage trace, and return
plain values or a small dataclass; nothing here reads files or prints.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from .bridge import MIN_TAU_TO_SETTLE, SETTLE_MS
from .fluctuation import BASELINE_WINDOW_MS
from .membrane_tau import (END_FRACTION, FILTER_DELAY_MS, TAU_SMOOTHING_MS, WINDOW_TAUS,
                           ExponentialFit, SharedTauFit, exponential_fit_sd, fit_membrane_tau,
                           fit_shared_tau, shared_tau_sd)
# the passive values, importable from here as before
from .cell_passive import (MAX_FLUCTUATION_TO_DEFLECTION, MAX_MISFIT_TO_DEFLECTION,
                           MAX_RESIDUAL_TO_NOISE,
                           MAX_TAU_SD_FRACTION, NOISE_FLOOR_MV,
                           SLOW_SWEEP_MAX_RISE_MV, input_resistance, input_resistance_sd,
                           passive_sweeps, passive_values, steps_only)
from .sweep_passive import SAG_NOISE_FACTOR, SAG_SD_FACTOR

__all__ = ["CellFeatures", "ExponentialFit", "SharedTauFit", "fit_membrane_tau",
           "fit_shared_tau", "rheobase", "ramp_rheobase", "fi_slope", "input_resistance",
           "input_resistance_sd", "exponential_fit_sd", "shared_tau_sd", "cell_features",
           "passive_sweeps", "CELL_FLAG_TEXT", "MAX_RESIDUAL_TO_NOISE", "MAX_MISFIT_TO_DEFLECTION",
           "MAX_TAU_SD_FRACTION", "NOISE_FLOOR_MV", "FILTER_DELAY_MS", "END_FRACTION", "WINDOW_TAUS",
           "TAU_SMOOTHING_MS",
           "HOLDING_TOLERANCE_PA", "SLOW_SWEEP_MAX_RISE_MV", "MAX_FLUCTUATION_TO_DEFLECTION",
           "SAG_NOISE_FACTOR", "SAG_SD_FACTOR"]

#: Sweeps whose holding current is within this of zero count as "no holding current".
HOLDING_TOLERANCE_PA = 1.0

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
    "membrane_tau_skips_gap_sweeps": "a hyperpolarizing spike-free sweep has a gap in its "
                                     "step or baseline: the time constant is fitted on the "
                                     "smallest steps without one",
    "sag_skips_gap_sweeps": "the most hyperpolarizing sweep has a gap in a window sag is "
                            "measured over: sag_fraction is that of the most hyperpolarizing "
                            "sweep without one",
    "no_step_stimuli": "no sweep's stimulus is a step (only ramps or other shapes), so "
                       "rheobase, f-I slope, input resistance, time constant and sag are empty",
    "no_spiking_ramp": "ramp sweeps were measured but none fired: ramp_rheobase_pa is empty",
    "tau_fit_poor": f"the exponential fit leaves a residual over {MAX_RESIDUAL_TO_NOISE:g} "
                    "times the recording noise, and beyond the noise over "
                    f"{MAX_MISFIT_TO_DEFLECTION:.0%} of the deflection (no charging curve), or "
                    "rises on a hyperpolarizing step, or the fitted time constant spans under "
                    "2 samples: the time constant is left empty",
    "tau_within_noise": "the recording's noise leaves the time constant an SD over "
                        f"{MAX_TAU_SD_FRACTION:.0%} of it (membrane_tau_ms_sd), so it cannot be "
                        "told within 10 % (deflections too small or charging too short for "
                        "the noise): the time constant is left empty",
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
                        "`sag_within_noise` (the recording cannot resolve its sag: not over "
                        f"{SAG_SD_FACTOR:g} times its own SD, or not over "
                        f"{SAG_NOISE_FACTOR:g} times the SD its baseline's noise leaves on "
                        "the smoothing under min_mv): sag_fraction is 0",
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
    - membrane_tau_ms: :func:`fit_shared_tau`, one time constant over the
      :data:`~spikemeasure.analysis.cell_passive.TAU_STEPS` smallest hyperpolarizing
      spike-free steps without a gap (of the smallest step's sampling rate); empty (flag
      ``tau_fit_poor``) when the residual RMS exceeds :data:`MAX_RESIDUAL_TO_NOISE` times the
      steps' baseline noise (noise taken as at least :data:`NOISE_FLOOR_MV`) and what it
      holds beyond the noise over :data:`MAX_MISFIT_TO_DEFLECTION` of their RMS deflection, a step's
      fitted curve rises, or the fitted tau spans under 2 samples; empty (flag
      ``tau_within_noise``) when membrane_tau_ms_sd is over :data:`MAX_TAU_SD_FRACTION` of
      tau. The fit reads the voltage less each sweep's significant hum and drift
      (:func:`~spikemeasure.analysis.sweep_passive.passive_voltage`). R^2 alone would reject
      good fits to small, noisy deflections, since noise caps it. Empty too (flag
      ``baseline_fluctuates``) when the baselines' slow fluctuation
      (:func:`~spikemeasure.analysis.fluctuation.slow_fluctuation_mv` over a
      :data:`TAU_SMOOTHING_MS` average, less in quadrature the s / sqrt(samples) white
      noise of the baseline's SD s leaves on it) against the deflections (baseline_mv -
      min_mv, or the fitted v0 - v_inf when smaller), combined over the steps as
      1 / sqrt(sum (deflection / fluctuation)^2), exceeds
      :data:`MAX_FLUCTUATION_TO_DEFLECTION`. The first :data:`FILTER_DELAY_MS` after onset
      (the low-pass filter's delay) are left out of the fit; when bridge_error_mohm times a
      step is over that sweep's noise, the first
      :data:`~spikemeasure.analysis.bridge.SETTLE_MS` (the jump and the filter's settling).
      membrane_tau_ms_sd: :func:`shared_tau_sd` with each sweep's baseline noise, or with
      each step's fit residual when that gives more.
    - input_resistance_mohm_sd: :func:`input_resistance_sd` of the sweeps' deflection_sd_mv.
    - sag_fraction: that of the most hyperpolarizing sweep, with the flag
      ``sag_within_noise`` when that sweep has it (its sag, 0, could not be told from noise:
      :func:`~spikemeasure.analysis.sweep_passive.passive_response`): one rule for both
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
    not_steps = steps_only(sweep_rows, col) if n else np.zeros(0, dtype=bool)
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
    passive_values(col, slow, lower, gapped, traces, sweep_flags, values, flags)
    return CellFeatures(n, resting, flags=tuple(flags), rheobase_sweep=rheobase_sweep,
                        ramp_rheobase_pa=ramp_rb, **values)
