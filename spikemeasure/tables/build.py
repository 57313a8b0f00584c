"""From recordings to tables: measure every sweep and lay the results out in columns.

Nothing here reads or writes files; :mod:`spikemeasure.tables.write` writes the tables.
"""
from __future__ import annotations

from dataclasses import dataclass, replace
from collections.abc import Sequence
from typing import Callable

import numpy as np

from ..analysis.cell_features import CellFeatures, cell_features
from ..columns import CELL_COLUMNS, KEY_COLUMN_NAMES, SPIKE_COLUMNS, SWEEP_COLUMNS, Column
from ..analysis.detection import DetectionSettings, detect_spikes, smoothed_trace
from ..errors import InvalidSettingError, SpikemeasureError, UnmeasurableDataError
from ..analysis.spikes import (PIECE_SAMPLES, SpikeMeasurements, first_in_step, measure_spikes,
                               spike_times)
from ..analysis.spikes_in_parts import measure_around_gaps, measure_in_pieces_with_gaps
from ..analysis.spike_uncertainty import with_uncertainty
from ..io import Recording, Sweep
from ..io.sweep import StoredTrace
from ..analysis.line_noise import LineNoise, remove_line_noise
from ..analysis.sweep_features import SweepFeatures, sweep_features, sweep_line_noise
from ..analysis.sweeps import (CurrentStep, check_sweep, missing_stretches, protocol_steps,
                     spikes_measurable, stretches_text)

__all__ = ["SweepResult", "measure_sweep", "measure_recording", "measured_results",
           "cell_summary", "first_spike_in_step", "rheobase_result", "spike_table",
           "spike_values", "sweep_table", "cell_table", "format_value", "format_rows",
           "count_spikes", "flag_counts"]


@dataclass(frozen=True)
class SweepResult:
    """The outcome for one sweep: its step, spikes and features, or why it failed."""

    sweep: Sweep
    step: CurrentStep | None
    spikes: SpikeMeasurements | None
    features: SweepFeatures | None = None
    error: str | None = None


def _command_edge_gaps(sweep: Sweep, step: CurrentStep | None) -> np.ndarray:
    """Gaps of the command channel that touch the step's onset or offset: the step's edge
    lies somewhere in them."""
    if step is None or sweep.command_pa is None:
        return np.zeros((0, 2), dtype=np.int64)
    gaps = missing_stretches(np.asarray(sweep.command_pa, dtype=float))
    rate = sweep.sampling_rate_hz
    edges = (int(round(step.onset_s * rate)), int(round(step.offset_s * rate)))
    near = [any(a - 1 <= e <= b for e in edges) for a, b in gaps]
    return gaps[np.asarray(near, dtype=bool)] if gaps.size else gaps


def _nothing_measured(spikes: SpikeMeasurements, features: SweepFeatures) -> bool:
    values = (features.baseline_mv, features.baseline_noise_mv, features.steady_state_mv,
              features.min_mv, features.baseline_drift_mv, features.firing_rate_hz,
              features.first_spike_latency_ms)
    return len(spikes) == 0 and not np.isfinite(values).any()


def _clipped(spikes: SpikeMeasurements) -> int:
    return sum("clipped_peak" in f for f in spikes.flags)


def measure_sweep(sweep: Sweep, settings: DetectionSettings = DetectionSettings(),
                  step: CurrentStep | None = None,
                  cancel: Callable[[], None] | None = None) -> SweepResult:
    """Measure one sweep given its current step (see
    :func:`~spikemeasure.analysis.sweeps.protocol_steps`); a sweep that cannot be measured gives a result
    with `error` set.

    A long gap-free sweep kept in its file (:attr:`Sweep.is_lazy`) is measured in pieces
    (:func:`~spikemeasure.analysis.spikes_in_parts.measure_in_pieces`), with the same spikes as whole; one
    given a step (``--step``) is read whole, as its step features need all of it.

    Missing (NaN or infinite) voltage samples cost only the values whose windows reach them
    (:func:`~spikemeasure.analysis.spikes_in_parts.measure_around_gaps`,
    :func:`~spikemeasure.analysis.sweep_features.sweep_features`); a gap in the command channel at the
    step's edge counts as a gap there. A sweep sampled below
    :data:`~spikemeasure.analysis.sweeps.MIN_SAMPLING_RATE_HZ` has no spikes measured and its passive
    values kept (flag ``too_slow_for_spikes``). A sweep missing more than half its samples,
    with no spike and no value left, is an error naming the gaps; with less missing, "no spike
    in what is there" is reported (a count of 0, flagged as a lower bound).

    `cancel` (optional) is called between the pieces of a long sweep, and stops the work by
    raising (see :func:`~spikemeasure.analysis.spikes_in_parts.measure_in_pieces`).
    """
    rate = sweep.sampling_rate_hz
    kept = sweep  # the result keeps the sweep as given: samples waiting in the file stay there
    try:
        sweep = sweep.loaded()
        if sweep.is_lazy and step is not None:
            sweep = replace(sweep, voltage_mv=np.asarray(sweep.voltage_mv))
        check_sweep(sweep)
        counted = spikes_measurable(rate)
        if sweep.is_lazy:
            if counted:
                spikes, gaps = measure_in_pieces_with_gaps(sweep.voltage_mv, rate, settings,
                                                           cancel=cancel)
            else:
                spikes, gaps = SpikeMeasurements.empty(), _lazy_gaps(sweep, cancel)
            features = sweep_features(np.zeros(0), rate, None,
                                      spike_times(spikes), clipped_spike_count=_clipped(spikes),
                                      duration_s=sweep.duration_s, gaps=gaps,
                                      spikes_counted=counted)
        else:
            voltage = np.asarray(sweep.voltage_mv, dtype=float)
            gaps = missing_stretches(voltage)
            if gaps.size:
                voltage = np.where(np.isfinite(voltage), voltage, np.nan)
            spikes, line_noise = _spikes_without_line_noise(voltage, rate, step, settings,
                                                            gaps, counted)
            edge_gaps = _command_edge_gaps(sweep, step)
            all_gaps = np.concatenate([gaps, edge_gaps]) if edge_gaps.size else gaps
            features = sweep_features(voltage, rate, step, spike_times(spikes),
                                      clipped_spike_count=_clipped(spikes), gaps=all_gaps,
                                      spikes_counted=counted, command_pa=sweep.command_pa,
                                      line_noise=line_noise)
            if edge_gaps.size:
                features = replace(features,
                                   flags=features.flags + ("gap_at_step_edge_in_command",))
            if (step is None and sweep.command_pa is not None
                    and not np.isfinite(sweep.command_pa).all()):
                features = replace(features,
                                   flags=features.flags + ("step_unknown_command_gap",))
        missing = int(np.sum(gaps[:, 1] - gaps[:, 0])) if gaps.size else 0
        if 2 * missing > sweep.n_samples and _nothing_measured(spikes, features):
            raise UnmeasurableDataError(
                f"{sweep.where()}: {missing} of {sweep.n_samples} voltage samples are NaN or "
                f"infinite ({stretches_text(gaps, rate)}); every window a value is measured "
                "over reaches them, so nothing is left to measure. Re-export the sweep or "
                "leave it out")
    except SpikemeasureError as exc:
        msg = str(exc)
        if msg.startswith(f"{sweep.file}: "):  # named the file but not the sweep
            msg = msg[len(sweep.file) + 2:]
        if not msg.startswith(sweep.file):
            msg = f"{sweep.where()}: {msg}"
        return SweepResult(kept, None, None, None, msg)
    return SweepResult(kept, step, spikes, features)


def _spikes_without_line_noise(voltage: np.ndarray, rate: float, step: CurrentStep | None,
                               settings: DetectionSettings, gaps: np.ndarray, counted: bool
                               ) -> tuple[SpikeMeasurements, LineNoise | None]:
    """The spikes of a whole sweep in memory, with their SDs, measured on the voltage less
    the sweep's hum and drift (:func:`~spikemeasure.analysis.sweep_features.sweep_line_noise`,
    fitted with the spikes' times as a first detection on the recorded voltage gives them),
    and that estimate, for the sweep's other values (None where :func:`sweep_features`
    estimates it: without a step, with a gap, without spikes counted)."""
    if not counted:
        return with_uncertainty(SpikeMeasurements.empty(), voltage, rate, step, settings), None
    if gaps.size:
        # the baseline's fit alone: the spikes' times are not known before the gaps' rules
        line_noise = (sweep_line_noise(voltage, rate, step, None) if step is not None
                      else None)
        corrected = (remove_line_noise(voltage, line_noise) if line_noise is not None
                     else voltage)
        spikes = measure_around_gaps(corrected, rate, settings, step)
        return with_uncertainty(spikes, corrected, rate, step, settings, line_noise), None
    trace = smoothed_trace(voltage, rate, settings.smoothing_ms,
                           second_derivative=settings.needs_second_derivative)
    detected = detect_spikes(trace, settings)
    line_noise = None
    if step is not None:
        line_noise = sweep_line_noise(voltage, rate, step,
                                      np.asarray(detected.peak_sample) / rate)
        if line_noise.found:
            voltage = remove_line_noise(voltage, line_noise)
            trace = smoothed_trace(voltage, rate, settings.smoothing_ms,
                                   second_derivative=settings.needs_second_derivative)
            detected = detect_spikes(trace, settings)
    spikes = measure_spikes(trace, detected, settings, step)
    return with_uncertainty(spikes, voltage, rate, step, settings, line_noise), line_noise


def _lazy_gaps(sweep: Sweep, cancel=None) -> np.ndarray:
    """Missing stretches of a long sweep kept in its file, read piece by piece."""
    found = []
    n = sweep.n_samples
    for start in range(0, n, PIECE_SAMPLES):
        if cancel is not None:
            cancel()
        part = sweep.voltage_mv[start:min(n, start + PIECE_SAMPLES)]
        for a, b in missing_stretches(part):
            if found and found[-1][1] == start + a:
                found[-1][1] = start + b
            else:
                found.append([start + int(a), start + int(b)])
    return np.array(found, dtype=np.int64).reshape(-1, 2)


def measure_recording(recording: Recording, settings: DetectionSettings = DetectionSettings(),
                      step_s: tuple[float, float] | None = None,
                      step_sizes_pa: tuple[float, float] | None = None, *,
                      cancel: Callable[[], None] | None = None) -> list[SweepResult]:
    """Measure every sweep of a recording, in file order, one sweep at a time.

    The steps of all sweeps come first (:func:`~spikemeasure.analysis.sweeps.protocol_steps`,
    which reads one command at a time); then each sweep's samples waiting in the file
    (:meth:`~spikemeasure.io.sweep.Sweep.loaded`) are read, measured and dropped: the results
    hold the sweeps as given, no samples read for them.

    `step_s` (start_s, end_s) and `step_sizes_pa` (first_pa, increment_pa) describe the step
    of sweeps without a command channel. `cancel` (optional) is called with no arguments
    before each sweep and between the pieces of long sweeps; it stops the work by raising
    (a run being stopped raises ``KeyboardInterrupt``), and its exception propagates.
    """
    if cancel is not None and not callable(cancel):
        raise InvalidSettingError("`cancel` must be callable or None")
    steps = protocol_steps(recording.sweeps, step_s, step_sizes_pa)
    results = []
    for s, step in zip(recording.sweeps, steps):
        if cancel is not None:
            cancel()
        results.append(measure_sweep(s, settings, step, cancel))
    return results


def measured_results(results: list[SweepResult]) -> list[SweepResult]:
    """The sweeps that were measured (those of sweeps.csv), in order: the sweeps
    :func:`cell_summary` passes to :func:`~spikemeasure.analysis.cell_features.cell_features`,
    whose ``rheobase_sweep`` is a position in this list."""
    return [r for r in results if r.features is not None]


def cell_summary(results: list[SweepResult]) -> CellFeatures:
    """Cell features from the measured sweeps of one cell: one recording's sweeps of one
    electrode (InvalidSettingError when `results` hold several electrodes' sweeps)."""
    if len({r.sweep.electrode for r in results}) > 1:
        raise InvalidSettingError("`results` must be the sweeps of one cell (one electrode); "
                                  "measure each electrode's sweeps on their own")
    measured = measured_results(results)
    firsts = []
    for r in measured:
        k = first_in_step(r.spikes, r.step)
        firsts.append(None if k is None else
                      {name: float(getattr(r.spikes, name)[k]) for name in
                       ("threshold_mv", "amplitude_mv", "half_width_ms", "ahp_depth_mv")})
    return cell_features([r.features.as_dict() for r in measured],
                         _VoltagesOnDemand([r.sweep for r in measured]), firsts)


class _VoltagesOnDemand(Sequence):
    """(voltage_mv, sampling_rate_hz) of each sweep, a voltage waiting in the file read when
    its item is asked for and not kept: the cell summary reads only the few sweeps it fits."""

    def __init__(self, sweeps: list[Sweep]) -> None:
        self._sweeps = sweeps

    def __len__(self) -> int:
        return len(self._sweeps)

    def __getitem__(self, position):
        if isinstance(position, slice):
            return [self[k] for k in range(*position.indices(len(self)))]
        sweep = self._sweeps[position]
        voltage = sweep.voltage_mv
        if isinstance(voltage, StoredTrace):
            voltage = np.asarray(voltage)
        return voltage, sweep.sampling_rate_hz


def sweep_table(results: list[SweepResult]) -> dict[str, list]:
    """One row per measured sweep, columns of :data:`~spikemeasure.columns.SWEEP_COLUMNS`."""
    table: dict[str, list] = {c.name: [] for c in SWEEP_COLUMNS}
    for r in results:
        if r.features is None:
            continue
        keys = {"file": r.sweep.file, "electrode": r.sweep.electrode, "sweep": r.sweep.index}
        for c in SWEEP_COLUMNS:
            table[c.name].append(keys[c.name] if c.name in KEY_COLUMN_NAMES
                                 else c.values_from(r.features))
    return table


def cell_table(cells: list[tuple]) -> dict[str, list]:
    """One row per cell, columns of :data:`~spikemeasure.columns.CELL_COLUMNS`.

    `cells` holds ``(file, electrode, CellFeatures)`` per cell (``(file, CellFeatures)``: the
    electrode is "").
    """
    table: dict[str, list] = {c.name: [] for c in CELL_COLUMNS}
    for row in cells:
        file, electrode, features = row if len(row) == 3 else (row[0], "", row[1])
        keys = {"file": file, "electrode": electrode}
        for c in CELL_COLUMNS:
            table[c.name].append(keys[c.name] if c.name in KEY_COLUMN_NAMES
                                 else c.values_from(features))
    return table


def spike_values(spikes: SpikeMeasurements, file: str, sweep: int,
                 electrode: str = "") -> dict[str, list]:
    """The spike rows of one sweep, columns of :data:`~spikemeasure.columns.SPIKE_COLUMNS`,
    each computed by its declaration."""
    n = len(spikes)
    keys = {"file": [file] * n, "electrode": [electrode] * n, "sweep": [sweep] * n,
            "spike": list(range(n))}
    return {c.name: keys[c.name] if c.name in KEY_COLUMN_NAMES else list(c.values_from(spikes))
            for c in SPIKE_COLUMNS}


def spike_table(results: list[SweepResult]) -> dict[str, list]:
    """One row per spike, columns in the order of :data:`~spikemeasure.columns.SPIKE_COLUMNS`.

    Returns a dict of equal-length lists (zero-length with no spikes).
    """
    table: dict[str, list] = {c.name: [] for c in SPIKE_COLUMNS}
    for result in results:
        if result.spikes is None or len(result.spikes) == 0:
            continue
        for name, values in spike_values(result.spikes, result.sweep.file,
                                         result.sweep.index, result.sweep.electrode).items():
            table[name].extend(values)
    return table


def format_value(column: Column, value) -> str:
    """Text of one CSV cell: empty for a missing value, fixed decimals for numbers, no '-0'."""
    return _format_column(column, [value])[0]


def _format_column(column: Column, values: list) -> list[str]:
    if column.decimals is None:
        # a whole number that could not be measured (a count) is NaN: empty, like the others
        return ["" if v is None or (isinstance(v, float) and v != v) else str(v)
                for v in values]
    spec = f".{column.decimals}f"
    zero = format(0.0, spec)
    # every value through format's own rounding at once, then the texts of NaN and the
    # infinities emptied and a negative zero ("-0.00") written as zero
    texts = map(f"{{:{spec}}}".format, map(float, values))
    replaced = {"nan": "", "inf": "", "-inf": "", "-" + zero: zero}
    return [replaced.get(text, text) for text in texts]


def format_rows(table: dict[str, list], columns: tuple[Column, ...] = SPIKE_COLUMNS
                ) -> list[list[str]]:
    """The table as rows of text cells (see :func:`format_value`), header excluded."""
    formatted = [_format_column(c, table[c.name]) for c in columns]
    return [list(row) for row in zip(*formatted)]


def count_spikes(results: list[SweepResult]) -> int:
    return int(sum(len(r.spikes) for r in results if r.spikes is not None))


def flag_counts(results: list[SweepResult]) -> dict[str, int]:
    """How many spikes carry each flag."""
    counts: dict[str, int] = {}
    for r in results:
        if r.spikes is None:
            continue
        for flags in r.spikes.flags:
            for f in flags:
                counts[f] = counts.get(f, 0) + 1
    return counts


def first_spike_in_step(result: SweepResult) -> int | None:
    """Position of the sweep's first spike inside its current step, or None.

    Parameters
    ----------
    result : SweepResult

    Returns
    -------
    int or None
        Index into ``result.spikes`` of the first spike whose time (threshold, or peak where
        the threshold is unknown) lies in ``[step.onset_s, step.offset_s)``: the spike whose
        values fill the cell table's ``rheobase_*`` columns when this is the rheobase sweep.
        None without a step, without spikes, or with none in the step.
    """
    if result.spikes is None:
        return None
    return first_in_step(result.spikes, result.step)


def rheobase_result(results: list[SweepResult], cell: CellFeatures) -> SweepResult | None:
    """The rheobase sweep: the result the cell's ``rheobase_*`` values were taken from.

    Parameters
    ----------
    results : list of SweepResult
        The results `cell` was summarized from (:func:`cell_summary`).
    cell : CellFeatures

    Returns
    -------
    SweepResult or None
        The measured sweep at ``cell.rheobase_sweep``, the one
        :func:`~spikemeasure.analysis.cell_features.cell_features` took rheobase from (the
        first of the smallest step with a spike); None when the cell has no rheobase.
    """
    if cell.rheobase_sweep < 0:
        return None
    return measured_results(results)[cell.rheobase_sweep]
