"""From recordings to tables: measure every sweep and lay the results out in columns.

Nothing here reads or writes files; :mod:`spikemeasure.output` writes the tables.
"""
from __future__ import annotations

from dataclasses import dataclass

from .columns import SPIKE_COLUMNS, Column
from .detection import DetectionSettings, detect_spikes, smoothed_trace
from .errors import SpikemeasureError
from .measurement import SpikeMeasurements, measure_spikes
from .reading import Recording
from .sweeps import CurrentStep, Sweep, check_sweep, find_current_step, step_from_times

__all__ = ["SweepResult", "measure_sweep", "measure_recording", "spike_table", "format_value",
           "format_rows", "count_spikes", "flag_counts", "sweep_errors", "sweep_step"]


@dataclass(frozen=True)
class SweepResult:
    """The outcome for one sweep: its step, its spikes, or why it could not be measured."""

    sweep: Sweep
    step: CurrentStep | None
    spikes: SpikeMeasurements | None
    error: str | None = None


def sweep_step(sweep: Sweep, step_times: tuple[float, float] | None) -> CurrentStep | None:
    """The sweep's current step: from the command channel, else from `step_times`."""
    if sweep.command_pa is not None:
        found = find_current_step(sweep.command_pa, sweep.sampling_rate_hz)
        if found is not None or step_times is None:
            return found
    if step_times is not None:
        return step_from_times(step_times[0], step_times[1], sweep.duration_s)
    return None


def measure_sweep(sweep: Sweep, settings: DetectionSettings = DetectionSettings(),
                  step_times: tuple[float, float] | None = None) -> SweepResult:
    """Measure one sweep; a sweep that cannot be measured gives a result with `error` set."""
    try:
        check_sweep(sweep)
        step = sweep_step(sweep, step_times)
        trace = smoothed_trace(sweep.voltage_mv, sweep.sampling_rate_hz, settings.smoothing_ms,
                               second_derivative=settings.needs_second_derivative)
    except SpikemeasureError as exc:
        msg = str(exc)
        if not msg.startswith(sweep.file):
            msg = f"{sweep.where()}: {msg}"
        return SweepResult(sweep, None, None, msg)
    spikes = measure_spikes(trace, detect_spikes(trace, settings), settings, step)
    return SweepResult(sweep, step, spikes)


def measure_recording(recording: Recording, settings: DetectionSettings = DetectionSettings(),
                      step_times: tuple[float, float] | None = None) -> list[SweepResult]:
    """Measure every sweep of a recording, in file order."""
    return [measure_sweep(s, settings, step_times) for s in recording.sweeps]


def spike_table(results: list[SweepResult]) -> dict[str, list]:
    """One row per spike, columns in the order of :data:`~spikemeasure.columns.SPIKE_COLUMNS`.

    Returns a dict of equal-length lists (zero-length with no spikes).
    """
    table: dict[str, list] = {c.name: [] for c in SPIKE_COLUMNS}
    for result in results:
        if result.spikes is None or len(result.spikes) == 0:
            continue
        n = len(result.spikes)
        table["file"].extend([result.sweep.file] * n)
        table["sweep"].extend([result.sweep.index] * n)
        table["spike"].extend(range(n))
        for name, values in result.spikes.as_columns().items():
            table[name].extend(list(values))
    return table


def format_value(column: Column, value) -> str:
    """Text of one CSV cell: empty for a missing value, fixed decimals for numbers, no '-0'."""
    return _format_column(column, [value])[0]


def _format_column(column: Column, values: list) -> list[str]:
    if column.decimals is None:
        return ["" if v is None else str(v) for v in values]
    spec = f".{column.decimals}f"
    zero = format(0.0, spec)
    out = []
    for v in values:
        v = float(v)
        if v != v or v in (float("inf"), float("-inf")):
            out.append("")
        else:
            text = format(v, spec)
            out.append(zero if text == "-" + zero else text)
    return out


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


def sweep_errors(results: list[SweepResult]) -> list[str]:
    return [r.error for r in results if r.error]

