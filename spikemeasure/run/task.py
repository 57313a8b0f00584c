"""One file's task: read it, measure every sweep of each of its cells (one per electrode), draw
their figures; a typed outcome.

It runs in this process, in a worker process or on a cluster's worker, so it takes plain
values and returns a :class:`~spikemeasure.run.outcome.FileOutcome`.
"""
from __future__ import annotations

import traceback
from dataclasses import replace
from pathlib import Path
from typing import Callable

from ..columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS
from ..analysis.detection import DetectionSettings
from ..analysis.line_noise import forget_designs
from ..errors import InvalidSettingError, SpikemeasureError
from ..io import read_recording
from ..tables.build import (cell_summary, cell_table, count_spikes, flag_counts, measure_recording,
                      spike_table, sweep_table)
from ..tables.typed import ColumnTable
from .outcome import FileOutcome, failure, internal_error_outcome

__all__ = ["measure_file", "cell_figure_folder", "cell_folders", "figures_present",
           "FIGURES_FOLDER"]

FIGURES_FOLDER = "figures"


def cell_figure_folder(shown: str, electrode: str = "") -> str:
    """Where a cell's figures go, relative to the output folder (``/`` separated): the
    file's folder, or for a cell of a file that holds several, the folder of the file's name
    and the electrode's (``cell.nwb/electrode_1`` named as one path)."""
    from ..figures import figure_folder_name  # matplotlib itself is imported only to draw

    return f"{FIGURES_FOLDER}/{figure_folder_name(f'{shown}/{electrode}' if electrode else shown)}"


def measure_file(path: str, shown: str, parameters: dict, figures: dict | None = None, *,
                 cancel: Callable[[], None] | None = None,
                 hash_input: bool = False) -> FileOutcome:
    """Read and measure one file.

    Parameters
    ----------
    path : str
        The file.
    shown : str
        Its name in the tables.
    parameters : dict
        ``settings`` (:meth:`DetectionSettings.as_dict`), ``step_s``, ``step_sizes_pa``,
        ``sampling_rate_hz`` and ``max_sweep_samples``, as plain values.
    figures : dict, optional
        ``{"out": output folder, "format": "png"}``: write the cell's figures too.
    cancel : callable, optional
        Called between sweeps and between the pieces of long sweeps; it stops the work by
        raising (``KeyboardInterrupt`` when a run is stopped), which propagates.
    hash_input : bool, optional
        Take the file's SHA-256 as it is read (``input_sha256`` of the outcome; None when
        the file could not be read).

    Returns
    -------
    FileOutcome
        Its tables, failures and counts; ``figures`` lists the figures written, relative to
        the output folder.

    Notes
    -----
    An unexpected exception (a bug) does not escape: the outcome holds one failure of stage
    ``internal error`` naming the file and the exception's type, with its traceback under
    ``traceback``; such an outcome is never kept for a rerun.
    """
    if cancel is not None and not callable(cancel):
        raise InvalidSettingError("`cancel` must be callable or None")
    try:
        return _measure_file(path, shown, parameters, figures, cancel, hash_input)
    except Exception as exc:  # a bug in one file's task must not stop the batch
        return internal_error_outcome(shown, exc, traceback.format_exc())


def _measure_file(path: str, shown: str, parameters: dict, figures: dict | None,
                  cancel: Callable[[], None] | None, hash_input: bool) -> FileOutcome:
    settings = DetectionSettings(**parameters["settings"])
    step_s = tuple(parameters["step_s"]) if parameters.get("step_s") else None
    step_sizes_pa = tuple(parameters["step_sizes_pa"]) if parameters.get("step_sizes_pa") else None
    outcome = FileOutcome(shown, figure_format=figures["format"] if figures else None)
    try:
        recording = read_recording(path, shown_as=shown,
                                   sampling_rate_hz=parameters.get("sampling_rate_hz"),
                                   max_sweep_samples=parameters.get("max_sweep_samples"),
                                   hash_input=hash_input)
    except SpikemeasureError as exc:
        outcome.failures.append(failure(shown, "read", str(exc)))
        return outcome
    with recording:  # open until its figures are drawn: long sweeps are read from it
        _measure_recording(recording, outcome, shown, settings, step_s, step_sizes_pa,
                           figures, cancel)
    return outcome


def _measure_recording(recording, outcome: FileOutcome, shown: str,
                       settings: DetectionSettings, step_s, step_sizes_pa,
                       figures: dict | None, cancel: Callable[[], None] | None) -> None:
    """Fill `outcome` with the tables of `recording`'s cells (and draw their figures)."""
    outcome.input_sha256 = recording.sha256
    outcome.format = recording.format
    outcome.sweep_count = len(recording.sweeps)
    for position, problem in enumerate(recording.problems):
        outcome.failures.append(failure(shown, "read", problem,
                                        recording.electrode_of_problem(position)))
    electrodes = recording.electrodes()
    spikes, sweeps, cells, all_results = [], [], [], []
    for electrode in electrodes:
        one_cell = replace(recording, sweeps=recording.sweeps_of(electrode), problems=[],
                           problem_electrodes=[], release=None)
        results = measure_recording(one_cell, settings, step_s, step_sizes_pa,
                                    cancel=cancel)
        all_results.extend(results)
        for r in results:
            if r.error:
                outcome.failures.append(failure(shown, f"sweep {r.sweep.index}", r.error,
                                                electrode))
        measured = any(r.error is None for r in results)
        cell = cell_summary(results) if measured else None
        # the hum fits' designs of the cell's sweeps (its summary's fits reuse them): not
        # kept past them, nor while its tables are made
        forget_designs()
        spikes.append(ColumnTable.from_lists(spike_table(results), SPIKE_COLUMNS))
        sweeps.append(ColumnTable.from_lists(sweep_table(results), SWEEP_COLUMNS))
        if not measured:
            continue
        cells.append(ColumnTable.from_lists(cell_table([(shown, electrode, cell)]),
                                            CELL_COLUMNS))
        if figures:
            named = electrode if len(electrodes) > 1 else ""  # a file of several cells
            outcome.figures += _cell_figures(one_cell, results, cell, settings, shown,
                                             figures, outcome.failures, electrode, named)
    outcome.sweeps_measured = sum(r.error is None for r in all_results)
    outcome.spike_count = count_spikes(all_results)
    outcome.spike_flags = flag_counts(all_results)
    outcome.spikes = ColumnTable.concatenate(spikes, SPIKE_COLUMNS)
    outcome.sweeps = ColumnTable.concatenate(sweeps, SWEEP_COLUMNS)
    outcome.cells = ColumnTable.concatenate(cells, CELL_COLUMNS)


def _cell_figures(recording, results, cell, settings: DetectionSettings, shown: str,
                  figures: dict, failures: list[dict], electrode: str,
                  named: str) -> list[str]:
    """Draw one cell's figures while its recording is in memory; their paths, relative to the
    output folder. `named` is the cell's electrode in a file of several cells (its own folder,
    and named in messages), else "". A figure that cannot be written (disk full, permissions) is a failure of
    the file's ``figures`` stage, and so is an unexpected exception while drawing (with its
    traceback); its tables stand either way."""
    from ..figures import write_cell_figures

    folder = cell_figure_folder(shown, named)
    try:
        names = write_cell_figures(recording, results, Path(figures["out"]) / folder,
                                   figures["format"], settings=settings, cell=cell)
    except OSError as exc:
        failures.append(failure(shown, "figures", f"{_cell_name(shown, named)}: cannot "
                                f"write its figures ({exc})", electrode))
        return []
    except Exception as exc:  # a bug in drawing: the measurements stand
        failures.append(dict(failure(
            shown, "figures", f"{_cell_name(shown, named)}: internal error "
            f"({type(exc).__name__}) while drawing its figures; its tables stand. This is a "
            "bug: please report it with the traceback in run.json (or run with --debug)",
            electrode), traceback=traceback.format_exc()))
        return []
    return [f"{folder}/{name}" for name in names]


def _cell_name(shown: str, electrode: str) -> str:
    """'file' or 'file, electrode E', for messages."""
    return f"{shown}, electrode {electrode}" if electrode else shown


def cell_folders(shown: str, electrodes: list[str]) -> list[str]:
    """The figure folders of a file's cells (see :func:`cell_figure_folder`)."""
    if len(electrodes) <= 1:
        return [cell_figure_folder(shown)]
    return [cell_figure_folder(shown, e) for e in electrodes]


def figures_present(out: Path, outcome: FileOutcome, shown: str, fmt: str | None) -> bool:
    """Whether a kept outcome's figures are those this run asks for, and all on disk."""
    if outcome.figure_format != fmt:
        return False
    electrodes = list(dict.fromkeys(outcome.cells.column("electrode")))
    folders = [cell_figure_folder(shown)] + [cell_figure_folder(shown, e) for e in electrodes]
    if outcome.sweeps_measured and not outcome.figures:
        return False
    return all(any(p.startswith(folder + "/") for folder in folders) and p.endswith("." + fmt)
               and (out / p).is_file() for p in outcome.figures)
