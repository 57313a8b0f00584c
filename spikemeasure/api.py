"""The Python API: measure a recording, or one voltage trace, from a script or a notebook.

``import spikemeasure as sm`` gives :func:`measure`, :func:`measure_trace`,
:func:`read_recording`, :class:`Table` and :class:`Results`. Settings are keywords named as
the project file's keys (``onset_rate_v_per_s=30``); a wrong name or value raises
:class:`~spikemeasure.errors.InvalidSettingError` naming the argument, before any file is read.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, field, replace
from typing import Any, Iterator, Mapping, Sequence

import numpy as np

from .columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS, Column
from .analysis.detection import DetectionSettings
from .errors import InvalidSettingError
from .analysis.spikes import measure_trace as _measure_spikes_of_trace
from .io import Recording, read_recording
from .params import SETTING_PARAMETERS, check_value
from .tables.build import (cell_summary, cell_table, measure_recording, spike_table, spike_values,
                           sweep_table)

__all__ = ["Table", "Results", "measure", "measure_trace", "read_recording"]

#: The settings :func:`measure` and :func:`measure_trace` take by keyword, with their types
#: (declared in :data:`spikemeasure.params.PARAMETERS`).
SETTING_TYPES: dict[str, type] = {p.name: p.python_type for p in SETTING_PARAMETERS}


class Table:
    """Columns of one output table (spikes, sweeps or cells) as numpy arrays.

    The columns and their order are those of the CSV file of the same name; numbers are float
    arrays (NaN where a value could not be measured), labels are arrays of str. ``table[name]``
    gives a column, ``len(table)`` the number of rows, :meth:`to_frame` a pandas DataFrame.
    """

    def __init__(self, columns: Sequence[Column], values: Mapping[str, Sequence]) -> None:
        self.columns: tuple[Column, ...] = tuple(columns)
        self._data: dict[str, np.ndarray] = {}
        for column in self.columns:
            raw = list(values[column.name])
            if column.decimals is None:
                self._data[column.name] = _label_array(raw)
            else:
                self._data[column.name] = np.asarray(raw, dtype=float).reshape(len(raw))
        lengths = {len(v) for v in self._data.values()}
        if len(lengths) > 1:
            raise ValueError("columns of one table must have the same length")

    @property
    def names(self) -> list[str]:
        """Column names, in the CSV's order."""
        return [c.name for c in self.columns]

    def __getitem__(self, name: str) -> np.ndarray:
        try:
            return self._data[name]
        except KeyError:
            raise KeyError(f"no column {name!r}; columns: {', '.join(self.names)}") from None

    def __iter__(self) -> Iterator[str]:
        return iter(self.names)

    def __len__(self) -> int:
        return len(next(iter(self._data.values()))) if self._data else 0

    def __repr__(self) -> str:
        return f"<Table: {len(self)} rows x {len(self.columns)} columns>"

    def to_dict(self) -> dict[str, np.ndarray]:
        """The columns by name (copies)."""
        return {name: values.copy() for name, values in self._data.items()}

    def to_frame(self):
        """The table as a pandas DataFrame (pandas is needed only here: the `frames` extra)."""
        try:
            import pandas as pd
        except ImportError:
            raise ImportError("Table.to_frame needs pandas: pip install 'spikemeasure[frames]'"
                              ) from None
        return pd.DataFrame({name: self._data[name] for name in self.names})


def _label_array(raw: list) -> np.ndarray:
    """Labels and counts: whole numbers stay integers (NaN-free), anything else is text."""
    if all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in raw):
        return np.asarray(raw, dtype=np.int64).reshape(len(raw))
    if all(isinstance(v, (int, float, np.integer, np.floating)) for v in raw):
        return np.asarray(raw, dtype=float).reshape(len(raw))  # counts with NaN
    return np.asarray([str(v) for v in raw], dtype=str).reshape(len(raw))


@dataclass(frozen=True)
class Results:
    """What :func:`measure` found in one recording.

    Attributes
    ----------
    spikes, sweeps, cells : Table
        The tables of ``spikes.csv``, ``sweeps.csv`` and ``cells.csv`` for this recording
        (``cells`` has one row per cell: per electrode of a file that holds several; none
        for a cell with no sweep measured). The ``electrode`` column tells the cells apart.
    problems : list of str
        Sweeps that could not be measured and parts of the file that could not be read, each
        naming the file and the sweep, as in ``errors.csv``.
    """

    spikes: Table
    sweeps: Table
    cells: Table
    problems: list[str] = field(default_factory=list)


def _checked_settings(settings: Mapping[str, Any]) -> DetectionSettings:
    """:class:`DetectionSettings` from keywords, each name and value checked first."""
    for name in settings:
        if name not in SETTING_TYPES:
            raise InvalidSettingError(
                f"`{name}` is not a setting; settings are: {', '.join(SETTING_TYPES)}")
    return DetectionSettings(**settings)  # each value checked by its declaration there


def _checked_option(name: str, value: Any) -> Any:
    """A run option checked by its declaration; None: not given."""
    return None if value is None else check_value(name, value)


def measure(recording: str | os.PathLike | Recording, *, step_s: Sequence[float] | None = None,
            step_sizes_pa: Sequence[float] | None = None,
            sampling_rate_hz: float | None = None, **settings: Any) -> Results:
    """Measure every sweep of one recording: the spikes, sweeps and cell tables.

    Parameters
    ----------
    recording : str, path-like or Recording
        A file (NWB, NIX, text, or another format neo reads) or a :class:`Recording` already
        read with :func:`read_recording`.
    step_s : (start_s, end_s), optional
        The current step's times, for sweeps without a command channel.
    step_sizes_pa : (first_pa, increment_pa) or "FIRST:INCREMENT", optional
        The step sizes of sweeps without a command channel.
    sampling_rate_hz : float, optional
        The sampling rate of a text file without a time column.
    **settings
        Detection settings by name (``onset_rate_v_per_s``, ``smoothing_ms``, ...: the
        fields of :class:`~spikemeasure.detection.DetectionSettings`, the same keys as the
        project file's ``[measure]`` table).

    Returns
    -------
    Results
        ``spikes``, ``sweeps`` and ``cells`` as :class:`Table`, and the ``problems``.

    Raises
    ------
    InvalidSettingError
        A setting that is unknown or out of range, named.
    UnreadableInputError, UnmeasurableDataError
        The file cannot be read, or nothing in it can be measured; the message names it.

    Notes
    -----
    The values are those ``spikemeasure measure`` writes for the same file and settings; the
    definitions of every column are in docs/measurements.md.
    """
    detection = _checked_settings(settings)
    step_s = _checked_option("step_s", step_s)
    step_sizes_pa = _checked_option("step_sizes_pa", step_sizes_pa)
    sampling_rate_hz = _checked_option("sampling_rate_hz", sampling_rate_hz)
    if isinstance(recording, Recording):
        return _measure_recording(recording, detection, step_s, step_sizes_pa)
    if not isinstance(recording, (str, os.PathLike)):
        raise InvalidSettingError(
            f"`recording` must be a file path or a Recording (got {type(recording).__name__})")
    with read_recording(recording, sampling_rate_hz=sampling_rate_hz) as opened:
        return _measure_recording(opened, detection, step_s, step_sizes_pa)


def _measure_recording(recording: Recording, settings: DetectionSettings,
                       step_s, step_sizes_pa) -> Results:
    """Each electrode's sweeps measured as one cell (its own step series)."""
    results, cells = [], []
    for electrode in recording.electrodes():
        one_cell = replace(recording, sweeps=recording.sweeps_of(electrode), problems=[],
                           problem_electrodes=[], release=None)
        found = measure_recording(one_cell, settings, step_s, step_sizes_pa)
        results += found
        if any(r.error is None and r.features is not None for r in found):
            cells.append((recording.path, electrode, cell_summary(found)))
    problems = list(recording.problems)
    problems += [f"{recording.path}, sweep {r.sweep.index}: {r.error}"
                 for r in results if r.error]
    return Results(spikes=Table(SPIKE_COLUMNS, spike_table(results)),
                   sweeps=Table(SWEEP_COLUMNS, sweep_table(results)),
                   cells=Table(CELL_COLUMNS, cell_table(cells)), problems=problems)


def measure_trace(voltage_mv, sampling_rate_hz: float, **settings: Any) -> Table:
    """Detect and measure the spikes of one voltage trace.

    Parameters
    ----------
    voltage_mv : array_like
        Membrane voltage in mV, 1-D and finite.
    sampling_rate_hz : float
        Samples per second.
    **settings
        Detection settings by name, as for :func:`measure`.

    Returns
    -------
    Table
        One row per spike, with the spike columns of ``spikes.csv`` (``file`` and
        ``electrode`` empty, ``sweep`` 0); zero rows when there is no spike.

    Raises
    ------
    InvalidSettingError
        A setting, the voltage or the rate that cannot be used, named.
    """
    detection = _checked_settings(settings)
    rate = check_value("sampling_rate_hz", sampling_rate_hz)
    spikes = _measure_spikes_of_trace(np.asarray(voltage_mv, dtype=float), rate, detection)
    return Table(SPIKE_COLUMNS, spike_values(spikes, "", 0))
