"""The one place that declares every output column: name, unit, decimals, definition, whether
it is a time, and the function that computes it from the measured results.

The CSV headers and their formatting, ``docs/measurements.md`` (``spikemeasure columns
--markdown``), the key of kept outcomes and the tests all read these declarations. Adding a
spike column is one declaration here, with its function (it takes the
:class:`~spikemeasure.analysis.spikes.SpikeMeasurements` of a sweep and returns one value per
spike), and its test.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import partial
from typing import Any, Callable

import numpy as np

from .analysis.detection import DetectionSettings, smoothing_window_samples
from .analysis.bridge import CHARGING_FIT_MS, EDGE_FIT_MS, SETTLE_MS
from .analysis.cell_features import (CELL_FLAG_TEXT, END_FRACTION, FILTER_DELAY_MS,
                            HOLDING_TOLERANCE_PA, TAU_SMOOTHING_MS, WINDOW_TAUS)
from .analysis.cell_passive import (MAX_MISFIT_TO_DEFLECTION, MAX_RESIDUAL_TO_NOISE,
                                    MAX_TAU_SD_FRACTION, NOISE_FLOOR_MV,
                                    SLOW_SWEEP_MAX_RISE_MV, TAU_STEPS)
from .analysis.membrane_tau import TURN_NOISE
from .analysis.epochs import (MAX_EDGE_MS, MIN_LEVEL_CHANGE_PA, NOISE_MULTIPLE,
                              RESIDUAL_WINDOW_MS)
from .analysis.spike_features import (ONSET_NOISE_FRACTION, ONSET_WINDOW_FACTOR, PEAK_NOISE_MV,
                                      PEAK_WIDTH_FACTOR, SECOND_DERIVATIVE_LOOKBACK_MS,
                                      TROUGH_LONGEST_MS, TROUGH_NOISE_MV, extreme_lines)
from .analysis.spike_rates import FALL_NOISE_FRACTION, FALL_WIDTH_FACTOR
from .analysis.noise_model import MIN_QUIET_MS
from .analysis.spike_uncertainty import sd_values, uncertainty_lines
from .analysis.line_noise import line_noise_lines
from .analysis.sweeps import COMMAND_MEDIAN_SAMPLES
from .analysis.spikes import CLIPPED_RUN_SAMPLES, FLAG_TEXT, PIECE_SAMPLES
from .analysis.sweep_features import BASELINE_WINDOW_MS, DRIFT_WINDOW_MS, SWEEP_FLAG_TEXT
from .analysis.sweep_passive import (MIN_WINDOW_MS, SAG_NOISE_FACTOR, SAG_SD_FACTOR,
                                     STEADY_STATE_WINDOW_MS,
                                     TROUGH_WINDOW_FRACTION)
from .params import parameter

__all__ = ["Column", "SPIKE_COLUMNS", "SPIKE_MARKS", "SWEEP_COLUMNS", "CELL_COLUMNS",
           "ERROR_COLUMNS", "KEY_COLUMN_NAMES", "spike_column_names",
           "columns_markdown"]

#: Columns that name the row (the file, the electrode, the sweep, the spike) rather than hold
#: a measurement; the table builders fill them.
KEY_COLUMN_NAMES = frozenset({"file", "electrode", "sweep", "spike"})


@dataclass(frozen=True)
class Column:
    """One output column.

    Attributes
    ----------
    name : str
        Header text; the unit is its suffix.
    unit : str
        Unit, or "" for labels and counts.
    definition : str
        Exact definition, as used in the code.
    decimals : int or None
        Digits after the point in the CSV; None for text and integers.
    shown_decimals : int or None
        Digits after the point where a person reads the value without its SD (the report's
        cells table and batch figure): what the measurement supports, fewer than the CSV
        keeps. None: as `decimals`. See :attr:`report_decimals`.
    is_time : bool
        A time in seconds from the sweep's first sample. For the spike columns these are the
        fields :meth:`~spikemeasure.analysis.spikes.SpikeMeasurements.shifted` moves when a
        trace is measured in parts (``analysis.spikes.TIME_FIELDS``; a test keeps them equal).
    compute : callable or None
        Takes the measured results of one row group (a sweep's ``SpikeMeasurements``, a
        ``SweepFeatures``, a ``CellFeatures``) and returns this column's values. None: the
        results' field of the same name (for the columns of :data:`KEY_COLUMN_NAMES`, the
        table builder fills them).
    """

    name: str
    unit: str
    definition: str
    decimals: int | None = None
    is_time: bool = False
    compute: Callable[[Any], Any] | None = None
    shown_decimals: int | None = None

    @property
    def report_decimals(self) -> int | None:
        """Digits after the point the report shows without an SD."""
        return self.decimals if self.shown_decimals is None else self.shown_decimals

    def values_from(self, measured: Any) -> Any:
        """This column's values from measured results (see `compute`)."""
        if self.compute is not None:
            return self.compute(measured)
        return getattr(measured, self.name)


def _option(name: str) -> str:
    """The command-line option of parameter `name`, as the definitions quote it."""
    return f"`{parameter(name).option}`"


def _default(name: str) -> str:
    """The default of parameter `name` with its unit, as the definitions quote it."""
    declared = parameter(name)
    value = declared.default
    text = f"{value:g}" if isinstance(value, (int, float)) else str(value)
    return f"{text} {declared.unit}".strip()


def _spike_flags_text(spikes: Any) -> list[str]:
    """Each spike's flags, ';' separated."""
    return [";".join(flags) for flags in spikes.flags]


def _flags_text(features: Any) -> str:
    """A sweep's or a cell's flags, ';' separated."""
    return ";".join(features.flags)


def peak_to_trough_ms(spikes: Any) -> np.ndarray:
    """Time from each spike's peak to its trough.

    Parameters
    ----------
    spikes : SpikeMeasurements
        The spikes of one sweep.

    Returns
    -------
    ndarray
        ``(trough_s - peak_s) * 1000`` per spike, in ms; NaN where either time is NaN.
    """
    return (np.asarray(spikes.trough_s, dtype=float)
            - np.asarray(spikes.peak_s, dtype=float)) * 1e3


SPIKE_COLUMNS: tuple[Column, ...] = (
    Column("file", "", "The input file: its path relative to the folder given on the command "
           "line, or its file name when the file itself was given; distinct for every file "
           "(see *File names* above)."),
    Column("electrode", "", "The cell within the file: in NWB the name of the intracellular "
           "electrode that recorded it; in other formats, when a file holds several voltage "
           "channels, that channel's name (its position, from 0, when the names are missing "
           "or alike), else empty. A file and electrode name one cell."),
    Column("sweep", "", "0-based sweep index in file order (for NWB, in order of the "
           "simultaneous recordings, or of sweep number in files without them)."),
    Column("spike", "", "0-based index of the spike within its sweep."),
    Column("threshold_s", "s", "Time of threshold, seconds from the sweep's first sample. By "
           f"default (`{parameter('threshold_method').option} "
           f"{_default('threshold_method')}`) the last upward crossing of the onset rate "
           f"({_option('onset_rate_v_per_s')}, {_default('onset_rate_v_per_s')}) by the "
           "smoothed dV/dt before the peak; that dV/dt is a local quadratic fit over the "
           "shortest window (3 samples or more) whose noise SD, from the noise measured before "
           f"the onset, is at most {ONSET_NOISE_FRACTION * 100:g} % of the onset rate, never longer than "
           f"{ONSET_WINDOW_FACTOR:g} times {_option('smoothing_ms')}. The rising phase accelerates about exponentially there, "
           "so the crossing is placed between the two samples around it as that of an "
           "exponentially growing rate (its growth from the two fitted rates), and moved by "
           "how much the fit's window reads such a rate high (without that, the crossing came "
           "up to 0.04 ms early at 10 kHz). `max_rate_fraction`: the last upward crossing of "
           f"{_option('threshold_fraction')} ({_default('threshold_fraction')}) times the "
           "spike's maximum dV/dt before that maximum. "
           "`second_derivative_peak`: the time of the largest d2V/dt2 from "
           f"{SECOND_DERIVATIVE_LOOKBACK_MS:g} ms before the onset "
           "crossing to the maximum of dV/dt (Sekerli et al. 2004 compare such definitions).", 7,
           is_time=True),
    Column("threshold_mv", "mV", "Smoothed membrane voltage at threshold_s: linearly "
           "interpolated between samples, and with the default threshold method as a voltage "
           "whose rate grows exponentially between them (its growth that of the crossing).",
           4),
    Column("threshold_mv_sd", "mV", "SD of threshold_mv that the recording's noise implies, "
           "with the biases it measures (the onset window's smoothing, drift since the quiet "
           "stretch; see *Uncertainty of spike values*). Empty with `--threshold-method "
           "second_derivative_peak`, and when the sweep has no stimulus or no quiet stretch "
           f"of {MIN_QUIET_MS:g} ms before it.", 4, compute=partial(sd_values, name="threshold_mv_sd")),
    Column("peak_s", "s", "Time of the peak, between samples: the maximum of a local quartic "
           "least-squares fit around the largest raw sample between threshold and the end of "
           "the rise, over the shortest window whose noise at the peak, from the noise "
           f"measured before threshold, is at most {PEAK_NOISE_MV:g} mV, and at most "
           f"{PEAK_WIDTH_FACTOR:g} times the spike's "
           "width at half amplitude; where even 7 samples are wider than that (a narrow spike "
           "sampled coarsely), the maximum of the cubic spline through the largest sample and "
           "three samples either side. See *Extremes between samples*.", 7, is_time=True),
    Column("peak_mv", "mV", "Voltage at that maximum.", 4),
    Column("peak_mv_sd", "mV", "SD of peak_mv that the recording's noise implies, with the "
           "biases it measures (the spline between samples, drift since the quiet stretch).", 4,
           compute=partial(sd_values, name="peak_mv_sd")),
    Column("amplitude_mv", "mV", "peak_mv - threshold_mv.", 4),
    Column("half_width_ms", "ms", "Time between the upward crossing (the last before the peak) "
           "and the downward crossing (the first after it) of threshold_mv + amplitude_mv / 2 "
           "by the raw voltage, each linearly interpolated between samples. Empty when the "
           "voltage does not come back down before the next spike, within "
           f"{_option('search_window_ms')} ({_default('search_window_ms')}) of the peak, or "
           f"when fewer than {_option('min_samples_across_width')} "
           f"({_default('min_samples_across_width')}) samples lie above the level.", 5),
    Column("half_width_ms_sd", "ms", "SD of half_width_ms that the recording's noise "
           "implies, with the biases it measures (the crossings' interpolation, the level's "
           "biases).", 5, compute=partial(sd_values, name="half_width_ms_sd")),
    Column("rise_time_ms", "ms", "peak_s - threshold_s.", 5),
    Column("max_dvdt_v_per_s", "V/s", "Largest dV/dt from threshold to peak, between samples: "
           "the maximum of the derivative of the quintic spline through the 13 samples around "
           "the largest difference. The samples are smoothed (local quartic fit) only as much "
           "as the noise measured before threshold demands, at most over "
           f"{_option('rate_smoothing_ms')} ({_default('rate_smoothing_ms')}); see the "
           "detection section.", 3),
    Column("max_dvdt_v_per_s_sd", "V/s", "SD of max_dvdt_v_per_s that the recording's noise "
           "implies, with the biases it measures (the spline between samples, the "
           "smoothing).", 3, compute=partial(sd_values, name="max_dvdt_v_per_s_sd")),
    Column("min_dvdt_v_per_s", "V/s", "Most negative dV/dt from peak to trough, between "
           "samples: the minimum of the derivative of a local quintic least-squares fit around "
           "the steepest fall, over the shortest window whose rate noise, from the noise "
           f"measured before threshold, is at most {FALL_NOISE_FRACTION * 100:g} % of the fall's "
           f"rate, and at most {FALL_WIDTH_FACTOR:g} times the fall's width (where dV/dt is "
           "beyond half its extreme). See *Extremes "
           "between samples*.", 3),
    Column("trough_s", "s", "Time of the lowest voltage after the peak and "
           "before the next spike's threshold; for a sweep's last spike, up to the end of the "
           "current step when the spike lies inside one (a voltage still falling there has its "
           "trough at the step's end, interpolated between samples), else to the end of the "
           "sweep. (A last "
           "spike that falls through half amplitude only after the step ends is searched to the "
           "end of the sweep and flagged `trough_after_step_end`.) Never more than "
           f"{_option('search_window_ms')} ({_default('search_window_ms')}) after the peak. "
           "Between samples: the smoothed voltage's minimum refined by a parabola; where the "
           "noise the smoothing leaves there (from the noise measured before threshold) is "
           f"more than {TROUGH_NOISE_MV:g} mV, the minimum of a local quartic least-squares fit "
           "to the raw samples around it, over the shortest window whose noise at the trough "
           f"is at most {TROUGH_NOISE_MV:g} mV and at most {TROUGH_LONGEST_MS:g} ms, unless "
           "that window would reach the peak or the end of the search. See *Extremes between "
           "samples*.", 7,
           is_time=True),
    Column("trough_mv", "mV", "Voltage at trough_s.", 4),
    Column("ahp_depth_mv", "mV", "Depth of the afterhyperpolarization: threshold_mv - trough_mv "
           "(positive when the trough lies below threshold).", 4),
    Column("ahp_depth_mv_sd", "mV", "SD of ahp_depth_mv that the recording's noise implies, "
           "with the onset window's smoothing bias of the threshold.", 4,
           compute=partial(sd_values, name="ahp_depth_mv_sd")),
    Column("isi_ms", "ms", "Interspike interval: threshold_s minus the previous spike's "
           "threshold_s in the same sweep; empty for a sweep's first spike.", 5),
    Column("peak_to_trough_ms", "ms", "trough_s - peak_s, in ms: how long after its peak the "
           "spike reaches its trough. Empty when either is empty.", 5, compute=peak_to_trough_ms),
    Column("flags", "", "Why values of this spike are empty or less certain, separated by ';' "
           "(see the list of flags).", compute=_spike_flags_text),
)

#: Positions kept in the spike results for the figures, not written to spikes.csv: where the
#: voltage crosses the level of the half-width, so a figure draws what was measured.
SPIKE_MARKS: tuple[Column, ...] = (
    Column("half_width_start_s", "s", "Time of the upward crossing that starts half_width_ms "
           "(empty when half_width_ms is).", 7, is_time=True),
    Column("half_width_end_s", "s", "Time of the downward crossing that ends half_width_ms "
           "(empty when half_width_ms is).", 7, is_time=True),
)


_FILE = Column("file", "", "The input file, named as in spikes.csv.")
_ELECTRODE = Column("electrode", "", "The cell within the file, named as in spikes.csv.")

SWEEP_COLUMNS: tuple[Column, ...] = (
    _FILE,
    _ELECTRODE,
    Column("sweep", "", "0-based sweep index in file order."),
    Column("stimulus_pa", "pA", "Step size: the mean command current during the step minus the "
           "holding current (0 for a sweep of a step series whose command has no step; from "
           "`--step-sizes` when the file has no command channel). For a ramp, its fitted "
           "current at its end minus holding; for another shape, the mean command over it "
           "minus holding.", 2),
    Column("holding_pa", "pA", "Mean command current at holding before the main stimulus (see "
           "*Stimulus epochs*), never across a test pulse.", 2),
    Column("stimulus_start_s", "s", "Onset of the main stimulus (a ramp's start): the first "
           "sample of its first epoch, from the command channel (see *Stimulus epochs*; a "
           f"{COMMAND_MEDIAN_SAMPLES}-sample running median removes isolated noise samples "
           "first), or `--step`.", 6, is_time=True),
    Column("stimulus_end_s", "s", "Offset of the main stimulus (a ramp's end): the first "
           "sample after it.", 6, is_time=True),
    Column("stimulus_shape", "", "The main stimulus: `step` (one constant level), `ramp` (one "
           "linear ramp), `other` (any other run of epochs away from holding; still measured "
           "for spikes), or `none` (the command never leaves holding, or the sweep has no "
           "command and no `--step`)."),
    Column("test_pulse_pa", "pA", "Size of a short pulse before the main stimulus: the mean "
           "command over it minus holding_pa (the last single level away from holding before "
           "the main stimulus). Empty when there is none.", 2),
    Column("ramp_rate_pa_per_s", "pA/s", "Slope of the line fitted to the ramp. Empty unless "
           "stimulus_shape is `ramp`.", 3),
    Column("baseline_mv", "mV", f"Mean voltage over the {BASELINE_WINDOW_MS:g} ms before onset "
           "(all of it if "
           "shorter), starting no earlier than the end of the epoch before the quiet stretch "
           "(a test pulse; flag `baseline_window_cut_by_epoch`).", 4),
    Column("baseline_noise_mv", "mV", "Standard deviation (ddof=0) of the voltage over the same "
           "window.", 4),
    Column("spike_count", "", "Spikes whose threshold time lies in [stimulus_start_s, "
           "stimulus_end_s); for a sweep without a current step (a gap-free recording), all "
           "its spikes. With a gap (missing samples) in that window, the spikes found outside "
           "the gap, a lower bound (flag `spike_count_lower_bound`); empty for a sweep sampled "
           "too slowly to count spikes (flag `too_slow_for_spikes`)."),
    Column("firing_rate_hz", "Hz", "spike_count / step duration (the sweep's duration when it "
           "has no step).", 4),
    Column("first_spike_latency_ms", "ms", "First threshold time in the step minus onset "
           "(empty without a step).", 4),
    Column("first_spike_current_pa", "pA", "The command current, holding included, at that "
           "first spike's threshold time: holding_pa + stimulus_pa for a step, the ramp's "
           "fitted line for a ramp, the command's nearest sample for another shape. Empty "
           "when first_spike_latency_ms is, or when the holding current is unknown (no "
           "command channel).", 2),
    Column("mean_isi_ms", "ms", "Mean interval between consecutive spikes inside the step (of "
           "the whole sweep when it has no step).", 4),
    Column("isi_cv", "", "Standard deviation (ddof=1) over mean of those intervals; needs at "
           "least 2.", 5),
    Column("adaptation_index", "", "Mean over consecutive interval pairs of (ISI[k+1] - ISI[k]) "
           "/ (ISI[k+1] + ISI[k]) (Druckmann et al. 2007); needs at least 2 intervals. Positive "
           "when firing slows during the step, near 0 for regular firing.", 5),
    Column("steady_state_mv", "mV", f"Mean voltage over the last {STEADY_STATE_WINDOW_MS:g} ms "
           "of the step; empty for a ramp (flag `ramp_has_no_steady_state`). This, min_mv, "
           "sag_fraction and the cell's passive values read the voltage less the sweep's "
           "mains hum and drift where they are significant (see Hum and drift).", 4),
    Column("min_mv", "mV", "Minimum during the step of the voltage averaged over a sliding "
           f"{MIN_WINDOW_MS:g} ms window, so noise does not pull it down. For a "
           "hyperpolarizing step it is found on a wider average, over "
           f"{TROUGH_WINDOW_FRACTION:g} x the charging time (from onset until the "
           f"{MIN_WINDOW_MS:g} ms average first falls 63 % of the way from the mean of the "
           f"{MIN_WINDOW_MS:g} ms before onset to its minimum; at least {MIN_WINDOW_MS:g} ms), "
           "placed wholly inside the step, which averages noise away on a plateau; where the "
           "sag is over noise (see sag_fraction) it is then read at the vertex of a parabola "
           "fitted by least squares to one such window either side of that minimum, plus c "
           f"m^2 / 12 (c its curvature, m = {MIN_WINDOW_MS:g} ms: the average of the "
           "parabola), so that the trough's curvature does not raise it as it raises a "
           "wide average (by c w^2 / 12); the average's minimum stays where the parabola "
           "does not open upwards or its vertex lies outside the middle half of its window.",
           4),
    Column("sag_fraction", "", "Hyperpolarizing steps only: (steady_state_mv - min_mv) / "
           "(baseline_mv - min_mv); 0 for no sag, and 0 with the sweep flag "
           "`sag_within_noise` when the recording cannot resolve it: when it is not over "
           f"{SAG_SD_FACTOR:g} times its own SD (sag_fraction_sd, which holds the drift the "
           "hum and drift removal could not exclude), or steady_state_mv - min_mv (min_mv "
           f"on the wider average) is not over {SAG_NOISE_FACTOR:g} times the SD of that "
           "average (noise alone pulls the lowest of a flat response's many window means "
           "about 3 SD down).", 5),
    Column("sag_fraction_sd", "", "SD of sag_fraction that the recording's noise implies: "
           "baseline_mv, steady_state_mv and min_mv are weighted sums of samples (window "
           "means; the parabola's vertex with its position held fixed), whose covariance "
           "follows from the noise's power spectrum (the Hann-tapered periodogram of the "
           "baseline window, smoothed over 15 frequency bins with hum lines kept; "
           "Wiener-Khinchin theorem, Percival and Walden 1993), carried to the sag by its "
           "gradient (the delta method, Bevington and Robinson 2003). Leaves out how noise "
           "picks the minimum's position, which matters only on a flat plateau, where the "
           "sag is within noise. With hum or drift removed, the weights carry their "
           "estimate's own uncertainty. A drift left in (one tested and not kept; with the "
           "steady-state window in its fit, that window's own settling) adds, to each "
           "window, its size beyond noise (sqrt(max(0, b^2 - var b)), b the fitted slope) "
           "times the window's mean time (see Hum and drift). "
           "With the flag `sag_within_noise` (sag 0), at least "
           f"half the sag that noise and drift could hide ({SAG_NOISE_FACTOR:g} times the SD "
           "of min_mv's average plus abs(baseline_drift_mv)), so +/- 2 SD spans it. Empty where "
           "sag_fraction is.", 5),
    Column("sampling_rate_hz", "Hz", "Samples per second of the sweep's voltage, as the file "
           "declares it (or `--sampling-rate`).", 3),
    Column("baseline_drift_mv", "mV", f"Mean voltage over the last {DRIFT_WINDOW_MS:g} ms of the "
           "sweep (starting no earlier than stimulus_end_s; all of the stretch after the step "
           "when shorter) minus baseline_mv: how far the resting voltage moved between before "
           "and after the step; positive when it ends more depolarized. Empty when the step "
           "runs to the end of the sweep.", 4),
    Column("clipped_spike_count", "", "Spikes of the sweep flagged `clipped_peak`: their largest "
           f"sample repeats over at least {CLIPPED_RUN_SAMPLES} consecutive samples, as when the "
           "recording range was exceeded."),
    Column("flags", "", "Why values of this sweep are empty or less certain, separated by ';' "
           "(see the list of sweep flags): gaps of missing samples in the windows values are "
           "measured over, or a sampling rate too low for spikes. A value whose window holds "
           "a missing sample is empty; the others are as without the gap.",
           compute=_flags_text),
)

CELL_COLUMNS: tuple[Column, ...] = (
    _FILE,
    _ELECTRODE,
    Column("sweeps", "", "Sweeps measured."),
    Column("resting_mv", "mV", f"Median baseline_mv over sweeps whose holding current is within "
           f"{HOLDING_TOLERANCE_PA:g} pA of zero.", 4, shown_decimals=1),
    Column("rheobase_pa", "pA", "The smallest step (stimulus_pa) with at least one spike in it; "
           "this and the other step values (f-I slope, input resistance, time constant, sag) "
           "use only sweeps whose stimulus_shape is `step`. "
           "It is known only to the protocol's resolution: see rheobase_resolution_pa. A "
           "smaller step whose spikes a gap may hide widens that resolution "
           "(`rheobase_skips_gap_sweeps`); one sampled too slowly to count spikes empties "
           "rheobase (`spikes_not_counted_in_slow_sweeps`).", 2, shown_decimals=1),
    Column("ramp_rheobase_pa", "pA", "The smallest first_spike_current_pa over the sweeps "
           "whose stimulus is a ramp (flag `no_spiking_ramp` when ramps were measured and none "
           "fired). Empty without ramps.", 2, shown_decimals=1),
    Column("fi_slope_hz_per_pa", "Hz/pA", "Least-squares slope of firing_rate_hz on "
           "stimulus_pa over the steps at or above rheobase (at least 2) and below "
           "block_stimulus_pa.", 5, shown_decimals=3),
    Column("max_firing_rate_hz", "Hz", "The largest firing_rate_hz of the cell's sweeps below "
           "block_stimulus_pa.", 4, shown_decimals=1),
    Column("block_stimulus_pa", "pA", "The smallest step whose sweep has the flag "
           "`depolarization_block` (full spikes stopped early under the current); the f-I "
           "slope and the largest firing rate use only the steps below it. Empty when no "
           "sweep shows block.", 2, shown_decimals=1),
    Column("input_resistance_mohm", "MOhm", "Least-squares slope of (steady_state_mv - "
           "baseline_mv) on stimulus_pa over hyperpolarizing, spike-free sweeps (at least 2), "
           f"times 1000. A sweep sampled too slowly to count spikes counts as spike-free when no "
           f"sample of its step lies more than {SLOW_SWEEP_MAX_RISE_MV:g} mV above its baseline "
           "(`slow_sweeps_taken_as_spike_free`). The deflections keep the sweeps' drift "
           "(their hum removed): a drift common to the sweeps moves them alike and leaves "
           "the slope, while one found in some sweeps only would scatter them.", 3,
           shown_decimals=1),
    Column("input_resistance_mohm_sd", "MOhm", "SD of input_resistance_mohm that the "
           "recording's noise implies: sqrt(sum w_j^2 s_j^2), w_j = (I_j - mean I) / "
           "sum (I - mean I)^2 the slope's weights and s_j the SD of sweep j's "
           "steady_state_mv - baseline_mv from its baseline's noise spectrum (as for "
           "sag_fraction_sd); the slope's standard error for known errors (Bevington and "
           "Robinson 2003). Noise only: a sweep-to-sweep drift or a membrane that is not "
           "linear is not in it.", 3, shown_decimals=1),
    Column("bridge_error_mohm", "MOhm", "Uncompensated electrode (series) resistance: the "
           "median over the sweeps of input_resistance_mohm (those without gaps) of the "
           "instantaneous voltage jump at the step's onset over the step size (the offset, "
           "often followed by a rebound, is not used), together with the same at the onset of "
           "every sweep's hyperpolarizing test pulse (test_pulse_pa below 0). The jump is the charging curve after "
           "the onset "
           f"(one exponential fitted from {SETTLE_MS:g} ms, past the filter's settling, to "
           f"{SETTLE_MS + EDGE_FIT_MS:g} ms, with the time constant of the charging over up to "
           f"{CHARGING_FIT_MS:g} ms) extrapolated back to the onset, minus a straight "
           f"line over the {EDGE_FIT_MS:g} ms before it. Empty, flagged "
           "`bridge_error_not_separable`, when the charging is too fast to tell from the "
           "jump. input_resistance_mohm includes it.",
           3, shown_decimals=1),
    Column("membrane_tau_ms", "ms", "The membrane's time constant near rest: the one "
           "time constant of exponentials V_j(t) = v_inf_j + (v0_j - v_inf_j) exp(-t / tau), "
           "each step j its own end value and size, fitted together by least squares to the "
           f"charging of the {TAU_STEPS} smallest hyperpolarizing spike-free steps (fewer "
           "when there are fewer; they disturb an active membrane's gates least; t from "
           "onset), each from "
           f"{FILTER_DELAY_MS:g} ms after onset, the delay of the amplifier's low-pass "
           "filter (a 4-pole Bessel at 3 kHz or above), after which the filtered exponential "
           "keeps the membrane's tau, so a fast membrane (tau 1-2 ms) is not read long, to "
           f"{WINDOW_TAUS:.1f} fitted time constants (where the fitted exponential has come "
           f"within {END_FRACTION * 100:g} % of its end value: the flat stretch after carries "
           "noise but little information about tau), or the step's minimum (on a centred "
           f"moving average over the larger of {TAU_SMOOTHING_MS:g} ms and tau) where the "
           "response turns back from it (a sag or an active membrane's undershoot: one "
           "exponential describes the charging up to it, not the turn), that is where the "
           f"mean of the step's last such stretch lies above the minimum by more than "
           f"{END_FRACTION * 100:g} % of the deflection and by more than {TURN_NOISE:g} SDs "
           "of such an average of the sweep's noise, or the step's end, whichever comes "
           "first; the window follows the fitted tau until both agree. The first "
           f"{SETTLE_MS:g} ms are left out instead when an electrode jump (bridge_error_mohm "
           "times a step) is over that sweep's noise. "
           f"Empty, flagged `tau_fit_poor`, when the residual RMS is over "
           f"{MAX_RESIDUAL_TO_NOISE:g} times the steps' baseline noise and what it holds "
           f"beyond the noise over {MAX_MISFIT_TO_DEFLECTION:.0%} of the steps' RMS "
           "deflection (no charging curve), a fitted curve rises, or the fitted tau spans "
           "under 2 samples; "
           f"flagged `tau_within_noise` when membrane_tau_ms_sd is over "
           f"{MAX_TAU_SD_FRACTION:.0%} of tau (the noise then cannot pin it within 10 %). "
           "Fitted, with those tests, on the voltage less each sweep's mains hum and drift "
           "(see Hum and drift).", 4,
           shown_decimals=2),
    Column("membrane_tau_ms_sd", "ms", "SD of membrane_tau_ms that the recording's noise "
           "implies: the fit linearized at its solution moves the parameters by P e for "
           "noise e (P the pseudo-inverse of the Jacobian of all steps' curves, with tau "
           "common to them), whose covariance P C P^T (the sandwich form; for white noise "
           "the covariance curve_fit reports, Press et al. 2007) takes C from the power "
           "spectrum of each sweep's baseline window (of the fit's residual when a test "
           "pulse cut that window), the sweeps' noises independent, as for "
           "sag_fraction_sd: filtered, correlated noise and hum count for what they are; "
           "or from the spectrum of each step's fit residual when that gives more (what "
           "one exponential leaves of an active membrane's charging moves tau as noise of "
           "that spectrum would). With hum or drift removed, P is carried through the "
           "removal, so the SD holds what their estimate leaves; a drift left in (not "
           "significant on the baselines) adds s times the sum over the steps of w . t (w "
           "a step's weights, t its samples' times: a drift common to the sweeps), s^2 "
           "estimated by the slope pooled over the baselines squared less its variance. The "
           "window's end follows tau, but where one exponential fits the samples it "
           "moves over carry no residual, so it adds nothing to first order.", 4,
           shown_decimals=2),
    Column("sag_fraction", "", "sag_fraction of the most hyperpolarizing sweep; 0, flagged "
           "`sag_within_noise`, when that sweep has the flag (see sag_fraction in sweeps.csv).",
           5, shown_decimals=3),
    Column("rheobase_threshold_mv", "mV", "threshold_mv of the first spike in the step of the "
           "rheobase sweep.", 4, shown_decimals=1),
    Column("rheobase_amplitude_mv", "mV", "amplitude_mv of that spike.", 4, shown_decimals=1),
    Column("rheobase_half_width_ms", "ms", "half_width_ms of that spike.", 5, shown_decimals=3),
    Column("rheobase_ahp_depth_mv", "mV", "ahp_depth_mv of that spike.", 4, shown_decimals=1),
    Column("rheobase_resolution_pa", "pA", "The gap between rheobase and the largest smaller "
           "step tested: the true rheobase lies in (rheobase_pa - this, rheobase_pa]. Empty when "
           "the smallest step already evoked a spike.", 2, shown_decimals=1),
    Column("membrane_tau_fit_r2", "", "R^2 of the time-constant fit over the fitted samples "
           "(noise caps it: a good fit to a small deflection can have a low R^2).", 5,
           shown_decimals=3),
    Column("membrane_tau_residual_to_noise", "", "RMS residual of that fit over the sweep's "
           f"baseline_noise_mv (at least {NOISE_FLOOR_MV:g} mV): near 1 when one exponential "
           "explains all but "
           "the noise.", 4, shown_decimals=2),
    Column("flags", "", "Why values are empty or less certain, separated by ';' (see the list of "
           "cell flags).", compute=_flags_text),
)


ERROR_COLUMNS: tuple[Column, ...] = (
    Column("file", "", "The input file, or the path given or found that could not be "
           "searched or followed."),
    Column("electrode", "", "The cell within the file the failure concerns, named as in "
           "spikes.csv; empty for a failure of the file as a whole."),
    Column("stage", "", "Where it failed: `input` (a path given that does not exist, a folder "
           "that cannot be searched, a path longer than the system allows, a symbolic link not "
           "followed, a file that is not a regular file), `read` (the file or one of its "
           "sweeps could not be read), `sweep N` (sweep N could not be measured), `figures` "
           "(the cell's figures could not be written), or `internal error` (an unexpected "
           "exception while measuring the file, a bug: its traceback is in run.json, under "
           "the file's entry in `inputs`; the file is tried again by the next run)."),
    Column("message", "", "What is wrong, naming the file and sweep, and how to fix it."),
)


def spike_column_names() -> list[str]:
    """The header of spikes.csv."""
    return [c.name for c in SPIKE_COLUMNS]


def _column_rows(columns: tuple[Column, ...]) -> list[str]:
    """A markdown table of the columns: name, unit, definition."""
    return (["| column | unit | definition |", "| --- | --- | --- |"]
            + [f"| `{c.name}` | {c.unit or '-'} | {c.definition} |" for c in columns])


def _flag_rows(flag_text: dict[str, str]) -> list[str]:
    """A markdown table of flags and their meaning."""
    return (["| flag | meaning |", "| --- | --- |"]
            + [f"| `{name}` | {text} |" for name, text in flag_text.items()])


def columns_markdown() -> str:
    """The text of ``docs/measurements.md``."""
    lines = _introduction_lines() + ["## spikes.csv", "",
                                     "One row per detected action potential. An empty cell is "
                                     "a value that could not be measured; the `flags` column "
                                     "says why.", ""]
    lines += _column_rows(SPIKE_COLUMNS) + ["", "## Spike flags", ""] + _flag_rows(FLAG_TEXT)
    for title, intro, cols in (
            ("sweeps.csv", "One row per measured sweep; times are seconds from the sweep's "
             "first sample.", SWEEP_COLUMNS),
            ("cells.csv", "One row per cell: per recording file, and per electrode in a file "
             "that holds several (a cell's step series).", CELL_COLUMNS),
            ("errors.csv", "One row per failure; the run goes on with the other files.",
             ERROR_COLUMNS)):
        lines += ["", f"## {title}", "", intro, ""] + _column_rows(cols)
    lines += ["", "## Sweep flags", "", "A gap is a stretch of missing samples: NaN or "
              "infinite values in the file (dropped samples). A sweep is refused only when no "
              "value is left to measure; otherwise the values whose windows stay clear of its "
              "gaps are measured as without them.", ""] + _flag_rows(SWEEP_FLAG_TEXT)
    lines += ["", "## Cell flags", ""] + _flag_rows(CELL_FLAG_TEXT)
    lines += _stimulus_lines()
    lines += _detection_lines(DetectionSettings()) + _long_recording_lines()
    lines += extreme_lines()
    lines += uncertainty_lines() + line_noise_lines()
    return "\n".join(lines)


def _introduction_lines() -> list[str]:
    """Title, text cells and file names of ``docs/measurements.md``."""
    return [
        "# Measurements",
        "",
        "Generated by `spikemeasure columns --markdown` from `spikemeasure/columns.py`, the one "
        "place that defines the output columns; a test keeps this file in step. Do not edit by "
        "hand.",
        "",
        "## Text cells in the CSV files",
        "",
        "Every table is UTF-8 CSV. A text cell (`file`, `electrode`, `flags`, `stage`, "
        "`message`) that starts with `=`, `+`, `-`, `@`, a tab or a carriage return, which a spreadsheet would "
        "run as a formula, is written with a leading `'` and in double quotes "
        "(`\"'=cell.nwb\"`), as the OWASP guidance on CSV injection recommends; so is a text "
        "cell that starts with `'` followed by one of those characters or by another `'`, so "
        "that every name reads back exactly. Numbers (`-55.2`) are never changed. A spreadsheet "
        "shows `=cell.nwb`; `spikemeasure check`, `accept` and the groups file read the cell "
        "back as `=cell.nwb`, the name run.json and report.html give.",
        "",
        "## File names",
        "",
        "- A file given on the command line is named by its file name, a file found in a "
        "folder by its path relative to that folder (`/` separated).",
        "- When two files would get the same name (`day1/cell.nwb` and `day2/cell.nwb` given, "
        "or two folders given that each hold `cell.nwb`), the files of each of those given "
        "paths are named with as many of its folders as tell them apart (`day1/cell.nwb`, "
        "`day2/cell.nwb`); names still alike get ` (2)`, ` (3)` in order.",
        "- The same file reached twice (given twice, given and found in a folder, through a "
        "symbolic link or a second hard link) is measured once, under its first name; a note "
        "in run.json, report.html and the summary says so.",
        "- Bytes of a name that are not UTF-8 are written `\\xNN` (a Latin-1 `café.nwb` is "
        "`caf\\xe9.nwb`), characters that are not printable (line breaks, tabs, control "
        "characters) `\\xNN`, `\\uNNNN` or `\\UNNNNNNNN`. The file is read by its real path; "
        "run.json keeps that path with these escapes (`path`) and its bytes in hex "
        "(`path_bytes_hex`).",
        "- In a folder searched, a symbolic link is followed only when its target lies inside "
        "that folder; any other is listed in errors.csv as not followed (give the file itself "
        "on the command line to measure it). A file named on the command line is read as "
        "given, through any link.",
        "- Each file's figures are in `figures/<name>/`, the name with `/` as `__`; when the "
        "name had to be changed further (characters some file systems refuse made `_`, `__` "
        "in the name, more than 120 characters), the first 8 hex digits of the name's "
        "SHA-256 follow a `-`, so every file has its own folder.",
        "",
    ]


def _stimulus_lines() -> list[str]:
    """The stimulus epochs section of ``docs/measurements.md``."""
    return [
        "",
        "## Stimulus epochs",
        "",
        "A sweep's command channel is cut into epochs, each a constant level or a linear "
        f"ramp. A {COMMAND_MEDIAN_SAMPLES}-sample running median first removes isolated noise "
        f"samples. The tolerance is {NOISE_MULTIPLE:g} times the command's noise SD (1.4826 "
        "times the median absolute deviation of its sample-to-sample differences, over "
        f"sqrt(2)), at least {MIN_LEVEL_CHANGE_PA:g} pA. A stretch is one epoch when its "
        f"residual from a least-squares line, averaged over {RESIDUAL_WINDOW_MS:g} ms, stays "
        "within half the tolerance; otherwise it is split where two separate lines fit best "
        "(for a step, at its first sample) and each part tested again. A piece shorter than "
        f"{MAX_EDGE_MS:g} ms between two epochs is the edge between them, cut at its first "
        "sample past half-way. A level that a ramp leaves or reaches without a jump ends "
        "where the ramp's fitted line meets it. An epoch whose fitted line changes by no more "
        "than the tolerance is a level, otherwise a ramp. Missing command samples are left "
        "out; a gap at the border between two epochs belongs to neither.",
        "",
        "The holding level is the level the sweep starts at; an epoch is at holding when it "
        "is a level within the tolerance of it. A stimulus is a run of epochs away from "
        "holding. The main stimulus, the one the sweep is measured over, is the longest "
        "(of equally long ones, the later): a short pulse followed later by a longer stimulus "
        "is a test pulse, whatever their sizes. holding_pa is the mean command over the "
        "epochs at holding before the main stimulus (after it when none lies before), so "
        "never across a pulse. A sweep whose only stimulus lies where the other sweeps of "
        "its file have their test pulse has no stimulus of its own: like a 0 pA sweep, it "
        "gets the window of the others' steps, with stimulus_pa 0.",
        "",
        "The baseline is measured over the quiet stretch: the epoch at holding that ends at "
        f"the main stimulus's onset, its last {BASELINE_WINDOW_MS:g} ms. When less than that "
        "is free because another epoch (a test pulse) ends closer to onset, the baseline is "
        "the mean over the free stretch only, however short, and the sweep is flagged "
        "`baseline_window_cut_by_epoch` (empty when nothing is free); when the sweep itself "
        "starts less than that before onset, the baseline is all of the stretch before "
        "onset, as without a test pulse.",
        "",
        "A ramp's spike count, firing rate and latency are counted from its start to its "
        "end; first_spike_current_pa is read on its fitted line. Rheobase, f-I slope, input "
        "resistance, time constant and sag use step sweeps only; ramp_rheobase_pa is the "
        "smallest first_spike_current_pa over the ramps.",
    ]


def _detection_lines(d: DetectionSettings) -> list[str]:
    """The detection section of ``docs/measurements.md``, with the settings' defaults."""
    return [
        "",
        "## Detection",
        "",
        f"A spike starts where the smoothed dV/dt rises through the onset rate "
        f"({d.onset_rate_v_per_s:g} V/s, `--onset-rate`). It counts only if the voltage then "
        f"peaks at least {d.min_rise_mv:g} mV above the voltage at that point "
        f"(`--min-rise`) and above {d.lowest_peak_mv:g} mV (`--lowest-peak`), within "
        f"{d.peak_window_ms:g} ms (`--peak-window`). The peak is the largest sample before "
        "the smoothed dV/dt first falls to zero. Several onset crossings leading to one peak "
        "make one spike.",
        "",
        f"The dV/dt of detection and threshold, d2V/dt2 and the smoothed voltage come from one "
        f"Savitzky-Golay filter (local quadratic least-squares fit) over {d.smoothing_ms:g} ms "
        "(`--smoothing`, rounded to an odd number of samples, at least 3). The filter is "
        "symmetric, hence zero-phase: it does not shift times. For white noise of SD sigma at "
        "sampling rate fs and a window of N samples the derivative noise has SD "
        "sigma * fs * sqrt(12 / (N (N^2 - 1))): 0.3 mV of noise at 50 kHz gives about 21 V/s "
        f"for a raw first difference, {derivative_noise_v_per_s(0.3, 50e3, 0.1):.1f} V/s over "
        f"0.1 ms and {derivative_noise_v_per_s(0.3, 50e3, d.smoothing_ms):.1f} V/s over the "
        f"default {d.smoothing_ms:g} ms. "
        "Near threshold dV/dt rises slowly, so noise there moves the crossing of the onset "
        "rate: in a Hodgkin-Huxley (1952) spike train with 0.3 mV of noise at 50 kHz, "
        "thresholds moved by up to 2.9 mV with a 0.1 ms window and 0.8 mV with 0.3 ms. A long "
        "window flattens sharp extremes of dV/dt (bias about f''' h^2 / 10 for half-window h: "
        "12 % on the same spikes at 0.3 ms), so each spike's maximum and minimum rates are "
        "measured on their own: the noise SD is measured in the 48 samples before threshold "
        "(1.4826 x the median absolute second difference / sqrt(6); Rousseeuw and Croux "
        "1993), the voltage is smoothed by a local quartic least-squares fit (which leaves "
        "the cubic stretch around an extreme of dV/dt unchanged) over the shortest window, "
        "none or 7, 9, ... samples, whose dV/dt noise stays below 3 % of the spike's rate, at "
        f"most {d.rate_smoothing_ms:g} ms (`--rate-smoothing`), and the extreme is that of "
        "the derivative of the not-a-knot quintic spline through the 13 samples around it "
        "(de Boor 1978), so an extreme between samples is not missed. Against the noise-free "
        "filtered recordings of three published models (4-pole Bessel 3-10 kHz, 10-50 kHz), "
        "noise-free: within 1 % at 20 kHz and above, within 5-8 % at 10 kHz behind 3 kHz, "
        "where the narrowest rising phases fall between samples (a 0.1 ms window had read 3-25 % "
        "low).",
        "",
        f"Each spike's searches reach at most {d.search_window_ms:g} ms (`--search-window`): "
        "back from the onset crossing for the threshold, forward from the peak for the "
        "repolarization (half-width), the trough and the fall rate. In a sparse gap-free "
        "recording the next spike may come seconds later, and the lowest point of those "
        "seconds is not the spike's afterhyperpolarization.",
    ]


def derivative_noise_v_per_s(noise_mv: float, sampling_rate_hz: float,
                             smoothing_ms: float) -> float:
    """SD of the smoothed dV/dt of white noise, as the detection section quotes it.

    Parameters
    ----------
    noise_mv : float
        SD of the white noise on the voltage, in mV.
    sampling_rate_hz : float
        Samples per second.
    smoothing_ms : float
        Savitzky-Golay window, rounded to an odd number of samples N (at least 3) as the
        detection rounds it.

    Returns
    -------
    float
        ``noise_mv * sampling_rate_hz * sqrt(12 / (N (N^2 - 1)))`` in V/s.

    Notes
    -----
    The first-derivative Savitzky-Golay filter of a quadratic (or linear) fit over N samples
    is the least-squares slope, with weights ``k / sum(k^2)`` for k = -(N-1)/2 .. (N-1)/2;
    the SD of white noise through it is sigma * fs / sqrt(sum(k^2)) and
    ``sum(k^2) = N (N^2 - 1) / 12``.

    References
    ----------
    Savitzky A, Golay MJE (1964) Smoothing and differentiation of data by simplified least
    squares procedures. Anal Chem 36:1627-1639.
    """
    n = smoothing_window_samples(smoothing_ms, sampling_rate_hz)
    return noise_mv * sampling_rate_hz * np.sqrt(12.0 / (n * (n * n - 1))) / 1e3


def _long_recording_lines() -> list[str]:
    """The long recordings section of ``docs/measurements.md``."""
    return [
        "",
        "## Long recordings",
        "",
        f"NWB and NIX sweeps of more than {2 * PIECE_SAMPLES:,} samples "
        f"({2 * PIECE_SAMPLES / 20e3 / 60:.1f} min at 20 kHz) whose command current is constant "
        "(gap-free recordings) stay in the file and are read through neo's lazy loading in "
        f"pieces of {PIECE_SAMPLES:,} samples, each with a margin on both sides longer "
        "than any search of a spike. A spike belongs to the piece holding its onset crossing, so "
        "one on the border between pieces is measured once, from the same samples as in a "
        "whole read: the tables are the same (times differ from a whole read by rounding, "
        "below 1e-8 s). Memory stays flat in the recording's length. Missing (NaN or "
        "infinite) samples are handled as in any sweep: the stretches between them are "
        "measured, and a gap running across pieces is one gap. Such a sweep has no "
        "current step, so its sweep features are empty, as for any sweep without one; long "
        "sweeps whose command steps, and text files, are read whole.",
        "",
    ]
