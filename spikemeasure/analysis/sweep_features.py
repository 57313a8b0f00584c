"""Per-sweep features: baseline, drift, firing over the current step, and the table row that
gathers them with the passive response (:mod:`~spikemeasure.analysis.sweep_passive`).

Functions take arrays, a sampling rate and the sweep's current step, and return plain values
or a small dataclass; nothing here reads files or prints.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from ..errors import InvalidSettingError
from .fluctuation import BASELINE_WINDOW_MS
from .line_noise import LineNoise, remove_line_noise
from .block import (BLOCK_MAX_ISI_MS, BLOCK_MIN_SILENCE_MS, BLOCK_SILENCE_TO_ISI,
                    depolarization_block)
from .sweeps import MIN_SAMPLING_RATE_HZ, CurrentStep, missing_stretches
# the passive measurements, importable from here as before
from .sweep_passive import (MIN_WINDOW_MS, SAG_NOISE_FACTOR, SAG_SD_FACTOR,
                            STEADY_STATE_WINDOW_MS,
                            TROUGH_WINDOW_FRACTION, PassiveResponse, passive_line_noise,
                            passive_response, passive_voltage, rest_start)

__all__ = ["SweepFeatures", "baseline", "first_spike_current", "baseline_drift", "firing", "adaptation_index",
           "passive_response", "sweep_features", "MIN_WINDOW_MS", "DRIFT_WINDOW_MS",
           "BASELINE_WINDOW_MS", "STEADY_STATE_WINDOW_MS", "SWEEP_FLAG_TEXT", "PassiveResponse",
           "TROUGH_WINDOW_FRACTION", "SAG_NOISE_FACTOR", "SAG_SD_FACTOR", "passive_voltage",
           "sweep_line_noise"]


#: Length of the window at the end of the sweep, after the step, whose mean voltage is
#: compared with the baseline to measure drift.
DRIFT_WINDOW_MS = 100.0


#: Every flag a sweep can carry, with what it means (written to the docs). "Gap": a stretch
#: of missing (NaN or infinite) voltage samples, or of command samples at the step's edge.
SWEEP_FLAG_TEXT = {
    "gap_in_baseline_window": "a gap lies in the baseline window before the step: baseline_mv, "
                              "baseline_noise_mv, baseline_drift_mv and sag_fraction are empty",
    "gap_in_drift_window": "a gap lies in the window at the end of the sweep: "
                           "baseline_drift_mv is empty",
    "gap_in_step": "a gap lies inside the current step: min_mv and sag_fraction are empty, and "
                   "so are firing_rate_hz, mean_isi_ms, isi_cv and adaptation_index (spikes in "
                   "the gap are not seen); first_spike_latency_ms is kept only when the first "
                   "spike comes before the gap",
    "gap_in_steady_state_window": f"a gap lies in the last {STEADY_STATE_WINDOW_MS:g} ms of the "
                                  "step: steady_state_mv "
                                  "and sag_fraction are empty",
    "spike_count_lower_bound": "a gap lies where spikes are counted (the step, or the whole "
                               "sweep without a step), or a spike beside a gap has no time: "
                               "spike_count and clipped_spike_count are the spikes found "
                               "outside the gap, a lower bound",
    "gap_at_step_edge_in_command": "the command channel has a gap at the step's onset or "
                                   "offset, so the step's edge is known only to within the "
                                   "gap: the values whose windows touch that gap are empty, "
                                   "as for a gap in the voltage",
    "step_unknown_command_gap": "the command channel has a gap where the sweep's step would "
                                "be, so its step is unknown: the sweep is measured as one "
                                "without a step (step values empty, spikes counted over the "
                                "whole sweep)",
    "too_slow_for_spikes": f"sampled below {MIN_SAMPLING_RATE_HZ:g} Hz, where an action "
                           "potential (about 1 ms) spans two samples or fewer and may fall "
                           "between samples: spikes are neither counted nor measured, so "
                           "spike_count, firing_rate_hz, first_spike_latency_ms, mean_isi_ms, "
                           "isi_cv, adaptation_index and clipped_spike_count are empty and "
                           "spikes.csv has no rows for the sweep; baseline, steady state, "
                           "minimum, sag and drift are measured",
    "baseline_window_cut_by_epoch": "another epoch of the command (a test pulse) ends less "
                                    f"than {BASELINE_WINDOW_MS:g} ms before the main stimulus: "
                                    "baseline_mv and baseline_noise_mv are over the quiet "
                                    "stretch between them only, empty when there is none",
    "ramp_has_no_steady_state": "the main stimulus is a ramp, whose current never settles: "
                                "steady_state_mv and sag_fraction are empty",
    "sag_within_noise": "the sag of this hyperpolarizing step is not over "
                        f"{SAG_SD_FACTOR:g} times its own SD (sag_fraction_sd), or "
                        "steady_state_mv - min_mv is not over "
                        f"{SAG_NOISE_FACTOR:g} times the SD the baseline's noise "
                        "(drawn with its spectrum) leaves on the smoothing under min_mv, so "
                        "the recording cannot resolve it: sag_fraction is 0",
    "depolarization_block": "full (overshooting) spikes stopped before the end of the "
                            f"depolarizing step after intervals under {BLOCK_MAX_ISI_MS:g} "
                            "ms, with no full spike for at "
                            f"least {BLOCK_SILENCE_TO_ISI:g} of those intervals and "
                            f"{BLOCK_MIN_SILENCE_MS:g} ms: the cell stopped firing under the "
                            "current (depolarization block)",
}


@dataclass(frozen=True)
class SweepFeatures:
    """Features of one sweep (NaN where not measurable; `flags` say why)."""

    stimulus_pa: float
    holding_pa: float
    stimulus_start_s: float
    stimulus_end_s: float
    baseline_mv: float
    baseline_noise_mv: float
    spike_count: int
    firing_rate_hz: float
    first_spike_latency_ms: float
    mean_isi_ms: float
    isi_cv: float
    adaptation_index: float
    steady_state_mv: float
    min_mv: float
    sag_fraction: float
    sampling_rate_hz: float
    baseline_drift_mv: float
    clipped_spike_count: int
    flags: tuple[str, ...] = ()
    stimulus_shape: str = "none"
    test_pulse_pa: float = float("nan")
    ramp_rate_pa_per_s: float = float("nan")
    first_spike_current_pa: float = float("nan")
    sag_fraction_sd: float = float("nan")
    #: SD of steady_state_mv - baseline_mv that the baseline's noise implies (hyperpolarizing
    #: steps); not a column of sweeps.csv, read by the input resistance's SD.
    deflection_sd_mv: float = float("nan")
    #: steady_state_mv - baseline_mv with the sweep's drift left in (its hum removed); not a
    #: column of sweeps.csv, read by the input resistance (see :class:`PassiveResponse`).
    deflection_mv: float = float("nan")
    test_pulse_start_s: float = float("nan")
    #: Start of the quiet stretch before the stimulus (after any test pulse); not a column
    #: of sweeps.csv, read by the time constant's hum and drift removal.
    baseline_start_s: float = float("nan")

    def as_dict(self) -> dict:
        out = asdict(self)
        out["flags"] = ";".join(self.flags)
        return out


def baseline(voltage_mv: np.ndarray, sampling_rate_hz: float, onset_s: float,
             window_ms: float = BASELINE_WINDOW_MS, earliest_s: float = 0.0
             ) -> tuple[float, float]:
    """Mean and standard deviation (ddof=0) of the voltage over `window_ms` before `onset_s`.

    The window starts no earlier than `earliest_s` (the start of the quiet stretch before the
    stimulus, after any test pulse): all of the stretch from there when it is shorter;
    (NaN, NaN) when there is none.
    """
    stop = int(round(onset_s * sampling_rate_hz))
    start = max(0, int(round(earliest_s * sampling_rate_hz)),
                stop - int(round(window_ms * 1e-3 * sampling_rate_hz)))
    if stop - start < 1:
        return float("nan"), float("nan")
    part = voltage_mv[start:stop]
    return float(np.mean(part)), float(np.std(part))


def baseline_drift(voltage_mv: np.ndarray, sampling_rate_hz: float, offset_s: float,
                   baseline_mv: float, window_ms: float = DRIFT_WINDOW_MS) -> float:
    """How far the resting voltage moved over a sweep: end of the sweep minus the baseline.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV.
    sampling_rate_hz : float
    offset_s : float
        End of the current step (its first sample after the step), s from the first sample.
    baseline_mv : float
        Mean voltage before the step (:func:`baseline`).
    window_ms : float, optional
        Length of the final window, default :data:`DRIFT_WINDOW_MS`.

    Returns
    -------
    float
        Mean voltage over the last `window_ms` of the sweep minus `baseline_mv`, in mV;
        positive when the cell ends the sweep more depolarized than it started. The window
        starts no earlier than `offset_s`, so it never holds the step itself (all of the
        post-step stretch when that is shorter). NaN when the step runs to the end of the
        sweep or the baseline is unknown.

    Notes
    -----
    Both windows sit where no current is injected, so for a cell at rest the difference is the
    drift of the membrane potential (or of the electrode's offset) across the sweep. For a
    voltage rising linearly at k mV/s, the drift is k times the time between the centres of
    the two windows. A slow after-hyperpolarization or rebound still under way in the final
    window counts as drift: sweeps should leave the cell time to settle after the step.
    """
    stop = voltage_mv.size
    first = max(int(round(offset_s * sampling_rate_hz)),
                stop - int(round(window_ms * 1e-3 * sampling_rate_hz)))
    if stop - first < 1 or not np.isfinite(baseline_mv):
        return float("nan")
    return float(np.mean(voltage_mv[first:stop]) - baseline_mv)


def adaptation_index(isi_ms: np.ndarray) -> float:
    """Mean normalized change of consecutive interspike intervals.

    Parameters
    ----------
    isi_ms : ndarray
        Interspike intervals in order.

    Returns
    -------
    float
        ``mean((ISI[k+1] - ISI[k]) / (ISI[k+1] + ISI[k]))`` over consecutive pairs; NaN with
        fewer than 2 intervals. Positive when intervals lengthen (adaptation), 0 for regular
        firing, negative when they shorten.

    References
    ----------
    .. [1] S. Druckmann, Y. Banitt, A. Gidon, F. Schuermann, H. Markram and I. Segev, "A novel
       multiple objective optimization framework for constraining conductance-based neuron
       models by experimental data", Frontiers in Neuroscience 1(1):7-18, 2007 (the
       adaptation index as a mean of normalized ISI differences; from memory).
    """
    isi = np.asarray(isi_ms, dtype=float)
    if isi.size < 2:
        return float("nan")
    return float(np.mean((isi[1:] - isi[:-1]) / (isi[1:] + isi[:-1])))


def firing(spike_times_s: np.ndarray, step: CurrentStep) -> dict:
    """Spike count, rate, latency and interval statistics within a step.

    Parameters
    ----------
    spike_times_s : ndarray
        Threshold times of the sweep's spikes, s from the first sample (a spike whose threshold
        is unknown counts by its peak time).
    step : CurrentStep

    Returns
    -------
    dict
        spike_count, firing_rate_hz, first_spike_latency_ms, mean_isi_ms, isi_cv and
        adaptation_index.

    Notes
    -----
    Spikes count when their time lies in [onset, offset). firing_rate_hz = count / step
    duration; the latency is the first spike time minus onset. Interspike intervals are those
    between consecutive spikes inside the step; isi_cv is their SD (ddof=1) over their mean,
    and needs at least 2 intervals, as does the adaptation index (:func:`adaptation_index`).
    """
    t = np.asarray(spike_times_s, dtype=float)
    inside = t[step.holds(t)]
    isi = np.diff(inside) * 1e3
    nan = float("nan")
    return {
        "spike_count": int(inside.size),
        "firing_rate_hz": inside.size / step.duration_s if step.duration_s > 0 else nan,
        "first_spike_latency_ms": (inside[0] - step.onset_s) * 1e3 if inside.size else nan,
        "mean_isi_ms": float(np.mean(isi)) if isi.size else nan,
        "isi_cv": float(np.std(isi, ddof=1) / np.mean(isi)) if isi.size >= 2 else nan,
        "adaptation_index": adaptation_index(isi),
    }




def _touches(gaps: np.ndarray, lo: int, hi: int) -> bool:
    """True when a gap (rows start, stop) overlaps samples lo to hi - 1."""
    return bool(gaps.size and hi > lo and np.any((gaps[:, 0] < hi) & (gaps[:, 1] > lo)))


def sweep_features(voltage_mv: np.ndarray, sampling_rate_hz: float, step: CurrentStep | None,
                   spike_times_s: np.ndarray, *,
                   baseline_window_ms: float = BASELINE_WINDOW_MS,
                   steady_window_ms: float = STEADY_STATE_WINDOW_MS,
                   clipped_spike_count: int = 0,
                   duration_s: float | None = None, gaps: np.ndarray | None = None,
                   spikes_counted: bool | None = None,
                   command_pa: np.ndarray | None = None,
                   line_noise: LineNoise | None = None) -> SweepFeatures:
    """All features of one sweep.

    Parameters
    ----------
    voltage_mv : ndarray
        Raw voltage in mV; NaN or infinite where samples are missing.
    sampling_rate_hz : float
    step : CurrentStep or None
        Without a step (a gap-free recording) the step features are NaN, and the spike count,
        rate and interval statistics are those of the whole sweep (the latency is NaN).
    spike_times_s : ndarray
        Threshold (or, where unknown, peak) time of each spike; NaN for a spike beside a gap
        with neither.
    baseline_window_ms, steady_window_ms : float, optional
        Windows before the step (baseline) and at its end (steady state), default 100 ms.
    clipped_spike_count : int, optional
        Spikes of the sweep whose peak is clipped (flag ``clipped_peak`` of
        :func:`~spikemeasure.analysis.spikes.measure_spikes`), passed through to the table.
    duration_s : float, optional
        The sweep's length, when `voltage_mv` is not all of it (a long recording read in
        pieces); by default its length.
    gaps : ndarray of int, shape (k, 2), optional
        (start, stop) samples of the missing stretches
        (:func:`~spikemeasure.analysis.sweeps.missing_stretches`); by default those of `voltage_mv`.
        Give them for a long recording read in pieces, and to add a gap in the command at the
        step's edge.
    spikes_counted : bool, optional
        False when spikes could not be counted (a sweep sampled below
        :data:`~spikemeasure.analysis.sweeps.MIN_SAMPLING_RATE_HZ`); by default, whether the rate
        reaches it.
    command_pa : ndarray, optional
        The command current, for the current at the first spike when the stimulus is
        neither a step nor a ramp (read at the nearest sample).
    line_noise : LineNoise, optional
        The sweep's hum and drift (:func:`sweep_line_noise`), when already estimated (the
        spikes were measured without them); by default estimated here.

    Returns
    -------
    SweepFeatures

    Notes
    -----
    A value whose window holds a missing sample is NaN, and `flags` (:data:`SWEEP_FLAG_TEXT`)
    say which windows: the baseline window, the step (minimum, sag and the firing values), the
    steady-state window and the drift window. A gap where spikes are counted leaves the count
    as the spikes found outside it, a lower bound (flag ``spike_count_lower_bound``); rate and
    interval statistics are NaN, as a gap may hide spikes and intervals, and the latency is
    kept only when the first spike precedes every gap in the step. Without the spikes
    (``spikes_counted`` false) every firing value and the clipped count are NaN.

    The baseline window ends at onset and starts no earlier than the step's
    ``baseline_start_s`` (flag ``baseline_window_cut_by_epoch`` when that shortens it). A
    ramp's firing values count from its start; its steady state and sag are NaN (flag
    ``ramp_has_no_steady_state``). The current at the first spike is the command at the
    first spike's time in the stimulus (:meth:`CurrentStep.current_at`, or `command_pa`
    for another shape).
    """
    if not (baseline_window_ms > 0 and steady_window_ms > 0):
        raise InvalidSettingError("`baseline_window_ms` and `steady_window_ms` must be positive")
    nan = float("nan")
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    voltage_mv = np.asarray(voltage_mv, dtype=float)
    if gaps is None:
        gaps = missing_stretches(voltage_mv)
    gaps = np.asarray(gaps, dtype=np.int64).reshape(-1, 2)
    if gaps.size and voltage_mv.size:
        voltage_mv = np.where(np.isfinite(voltage_mv), voltage_mv, np.nan)
        for a, b in gaps:
            voltage_mv[a:b] = np.nan
    if spikes_counted is None:
        spikes_counted = rate >= MIN_SAMPLING_RATE_HZ
    times = np.asarray(spike_times_s, dtype=float)
    flags: list[str] = []
    n_total = voltage_mv.size if duration_s is None else int(round(float(duration_s) * rate))

    if step is None:
        # no current step (a gap-free recording): the firing over the whole sweep
        length_s = n_total / rate if duration_s is None else float(duration_s)
        fire = _firing_around_gaps(times, CurrentStep(0.0, length_s), 0, n_total, gaps, rate,
                                   spikes_counted, clipped_spike_count, flags)
        fire["first_spike_latency_ms"] = nan
        return SweepFeatures(
            stimulus_pa=nan, holding_pa=nan, stimulus_start_s=nan, stimulus_end_s=nan,
            baseline_mv=nan, baseline_noise_mv=nan, steady_state_mv=nan, min_mv=nan,
            sag_fraction=nan, sampling_rate_hz=rate, baseline_drift_mv=nan,
            flags=tuple(flags), **fire)
    onset_i = int(round(step.onset_s * rate))
    offset_i = min(voltage_mv.size, int(round(step.offset_s * rate)))
    base_lo = _baseline_first_sample(step, rate, baseline_window_ms, flags)
    if _touches(gaps, base_lo, onset_i):
        flags.append("gap_in_baseline_window")
    drift_lo = max(int(round(step.offset_s * rate)),
                   voltage_mv.size - int(round(DRIFT_WINDOW_MS * 1e-3 * rate)))
    if _touches(gaps, drift_lo, voltage_mv.size):
        flags.append("gap_in_drift_window")
    if _touches(gaps, onset_i, offset_i):
        flags.append("gap_in_step")
    n_tail = max(1, int(round(steady_window_ms * 1e-3 * rate)))
    if _touches(gaps, max(onset_i, offset_i - n_tail), offset_i):
        flags.append("gap_in_steady_state_window")
    base, noise = baseline(voltage_mv, sampling_rate_hz, step.onset_s, baseline_window_ms,
                           step.baseline_start_s)
    drift = baseline_drift(voltage_mv, sampling_rate_hz, step.offset_s, base)
    fire = _firing_around_gaps(times, step, onset_i, offset_i, gaps, rate, spikes_counted,
                               clipped_spike_count, flags)
    if (spikes_counted and step.shape == "step" and step.size_pa > 0
            and "gap_in_step" not in flags
            and depolarization_block(voltage_mv, rate, times, step.onset_s,
                                     step.offset_s).blocked):
        flags.append("depolarization_block")
    if line_noise is None:
        line_noise = sweep_line_noise(voltage_mv, rate, step, times,
                                      baseline_window_ms=baseline_window_ms,
                                      steady_window_ms=steady_window_ms,
                                      spikes_counted=spikes_counted)
    passive = remove_line_noise(voltage_mv, line_noise)
    response = passive_response(passive, sampling_rate_hz, step, base, steady_window_ms,
                                drift_mv=(baseline_drift(passive, rate, step.offset_s, base)
                                          if line_noise.found else drift),
                                baseline_window_ms=baseline_window_ms, line_noise=line_noise)
    steady, lowest, sag = response.steady_state_mv, response.min_mv, response.sag_fraction
    sag_sd, deflection_sd = response.sag_fraction_sd, response.deflection_with_drift_sd_mv
    # the input resistance reads the deflection with the drift left in: a drift common to
    # a cell's sweeps moves every deflection alike and leaves the slope as it is, while a
    # drift found significant in some sweeps and not in others would scatter them
    deflection = steady - base + _drift_over(line_noise, offset_i - n_tail, offset_i)
    if step.shape == "ramp":
        steady = sag = sag_sd = deflection_sd = deflection = nan
        flags.append("ramp_has_no_steady_state")
    elif response.sag_within_noise and np.isfinite(sag):
        flags.append("sag_within_noise")
    return SweepFeatures(
        stimulus_pa=step.size_pa, holding_pa=step.holding_pa, stimulus_start_s=step.onset_s,
        stimulus_end_s=step.offset_s, baseline_mv=base, baseline_noise_mv=noise,
        steady_state_mv=steady, min_mv=lowest, sag_fraction=sag, sag_fraction_sd=sag_sd,
        deflection_sd_mv=deflection_sd, deflection_mv=deflection, sampling_rate_hz=rate,
        baseline_drift_mv=drift, flags=tuple(flags),
        **_stimulus_values(step, fire["first_spike_latency_ms"], rate, command_pa), **fire)



def sweep_line_noise(voltage_mv: np.ndarray, sampling_rate_hz: float, step: CurrentStep,
                     spike_times_s: np.ndarray | None, *,
                     baseline_window_ms: float = BASELINE_WINDOW_MS,
                     steady_window_ms: float = STEADY_STATE_WINDOW_MS,
                     spikes_counted: bool = True) -> LineNoise:
    """The hum and drift of a sweep with a step, as every value of the sweep reads them.

    Parameters
    ----------
    voltage_mv : ndarray
        The sweep's recorded voltage, mV, before any removal.
    sampling_rate_hz : float
        Samples per second.
    step : CurrentStep
        The sweep's main stimulus (its onset ends the baseline window).
    spike_times_s : ndarray or None
        The sweep's spike times (s); None when unknown (the fit then reads the baseline
        alone).
    baseline_window_ms, steady_window_ms : float, optional
    spikes_counted : bool, optional
        False when spikes could not be counted (the fit then reads the baseline alone).

    Returns
    -------
    LineNoise
        From :func:`~spikemeasure.analysis.sweep_passive.passive_line_noise`: fitted on the
        baseline window; on a step without spikes, also on its steady-state window (a
        plateau); where spikes are known, also on the stretch after the step where the
        membrane is back at rest (:func:`~spikemeasure.analysis.sweep_passive.rest_start`:
        the second half of it, spikes after the step left out).
    """
    rate = float(sampling_rate_hz)
    known = spikes_counted and spike_times_s is not None
    times = np.asarray(spike_times_s if known else [], dtype=float)
    in_step = times[(times >= step.onset_s) & (times < step.offset_s)]
    # a step without spikes settles to a plateau, whose slope tells the drift too
    plateau_ms = steady_window_ms if known and in_step.size == 0 else None
    rest = rest_start(step, voltage_mv.size / rate, times) if known else None
    return passive_line_noise(voltage_mv, rate, step, baseline_window_ms,
                              steady_window_ms=plateau_ms, rest_start_s=rest)


def _firing_around_gaps(times: np.ndarray, window: CurrentStep, lo: int, hi: int,
                        gaps: np.ndarray, rate: float, spikes_counted: bool,
                        clipped_spike_count: int, flags: list[str]) -> dict:
    """:func:`firing` over `window` (samples `lo` to `hi` - 1) as :func:`sweep_features`
    reports it: every value NaN when spikes could not be counted (flag
    ``too_slow_for_spikes``); with a gap in the window or a spike time unknown, the count a
    lower bound (flag ``spike_count_lower_bound``), rate and interval statistics NaN, and the
    latency kept only when there is a gap in the window and the first spike precedes it.
    Appends its flags to `flags`."""
    nan = float("nan")
    fire = firing(times[np.isfinite(times)], window)
    fire["clipped_spike_count"] = int(clipped_spike_count)
    if not spikes_counted:
        fire = {key: nan for key in fire}
        flags.append("too_slow_for_spikes")
        return fire
    gap_inside = _touches(gaps, lo, hi)
    if gap_inside or not np.isfinite(times).all():
        flags.append("spike_count_lower_bound")
        first_gap_s = (max(lo, int(gaps[(gaps[:, 0] < hi) & (gaps[:, 1] > lo)][0, 0])) / rate
                       if gap_inside else nan)
        for key in ("firing_rate_hz", "mean_isi_ms", "isi_cv", "adaptation_index"):
            fire[key] = nan
        latency = fire["first_spike_latency_ms"]
        if not (np.isfinite(latency) and gap_inside
                and window.onset_s + latency * 1e-3 < first_gap_s):
            fire["first_spike_latency_ms"] = nan
    return fire


def _drift_over(line_noise: LineNoise, first: int, stop: int) -> float:
    """Mean over samples [first, stop) of the drift `line_noise` removed (0 without one)."""
    if not np.isfinite(line_noise.drift_mv_per_s) or stop <= first:
        return 0.0
    return float(np.mean(line_noise.artefact_mv(first, stop)
                         - line_noise.hum_only().artefact_mv(first, stop)))


def _baseline_first_sample(step: CurrentStep, rate: float, window_ms: float,
                           flags: list[str]) -> int:
    """First sample of the baseline window: `window_ms` before onset, but not before the
    quiet stretch starts (flag ``baseline_window_cut_by_epoch`` when a test pulse cuts it)."""
    first = max(0, int(round(step.onset_s * rate)) - int(round(window_ms * 1e-3 * rate)))
    quiet = int(round(step.baseline_start_s * rate))
    if quiet > first:
        flags.append("baseline_window_cut_by_epoch")
    return max(first, quiet)


def _stimulus_values(step: CurrentStep, latency_ms: float, sampling_rate_hz: float,
                     command_pa: np.ndarray | None) -> dict:
    """The stimulus fields of :class:`SweepFeatures` beyond its size and times."""
    return {"stimulus_shape": step.shape, "test_pulse_pa": step.test_pulse_pa,
            "baseline_start_s": step.baseline_start_s,
            "test_pulse_start_s": step.test_pulse_start_s,
            "ramp_rate_pa_per_s": step.ramp_rate_pa_per_s,
            "first_spike_current_pa": first_spike_current(step, latency_ms, sampling_rate_hz,
                                                          command_pa)}


def first_spike_current(step: CurrentStep, latency_ms: float, sampling_rate_hz: float,
                        command_pa: np.ndarray | None = None) -> float:
    """The command current (holding included) at the first spike in the stimulus.

    Parameters
    ----------
    step : CurrentStep
        The sweep's main stimulus.
    latency_ms : float
        First spike time in the stimulus minus onset (NaN without one).
    sampling_rate_hz : float
    command_pa : ndarray, optional
        The command, read at the sample nearest the spike for a stimulus that is neither a
        step nor a ramp.

    Returns
    -------
    float
        pA; NaN without a first spike, with an unknown holding current, or for another shape
        without `command_pa`.

    Notes
    -----
    A step's current is holding_pa + size_pa and a ramp's its fitted line
    (:meth:`CurrentStep.current_at`): the epochs' fits, free of the command's noise.
    """
    if not np.isfinite(latency_ms):
        return float("nan")
    t = step.onset_s + latency_ms * 1e-3
    if step.shape in ("step", "ramp"):
        return float(step.current_at(t))
    if command_pa is None:
        return float("nan")
    k = min(len(command_pa) - 1, int(round(t * sampling_rate_hz)))
    return float(command_pa[k])
