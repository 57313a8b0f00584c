"""Every check on a run: the quality limits, then the comparison with the accepted results.

:func:`check_tables` checks typed tables (a run's, in the same process, or read back);
:func:`check_run` reads a results folder, then calls it.
"""
from __future__ import annotations

import os

from .findings import CheckReport
from .limits import quality_cases
from .regression import regression_cases
from .run_tables import CheckInputError, RunTables, check_finished, read_tables
from .settings import CheckSettings

__all__ = ["check_tables", "check_run"]


def check_tables(tables: RunTables, settings: CheckSettings, *,
                 accepted: RunTables | None = None) -> CheckReport:
    """Apply the quality limits and the regression comparison to a run's typed tables.

    Parameters
    ----------
    tables : RunTables
        The run's tables (:func:`~spikemeasure.checks.run_tables.read_tables`, or
        :func:`~spikemeasure.checks.run_tables.tables_from_columns` for a run held in memory).
    settings : CheckSettings
    accepted : RunTables, optional
        The accepted results; by default read from ``settings.accepted_dir`` when
        ``settings.compare`` (ignored otherwise).

    Returns
    -------
    CheckReport

    Raises
    ------
    CheckInputError
        When the run names no file at all, it did not finish or its tables and run.json
        disagree (:func:`~spikemeasure.checks.run_tables.check_finished`), or (with
        ``settings.compare``) the accepted results are missing or unreadable.
    """
    if not isinstance(tables, RunTables):
        raise TypeError(f"tables must be RunTables (got {type(tables).__name__})")
    if not isinstance(settings, CheckSettings):
        raise TypeError(f"settings must be CheckSettings (got {type(settings).__name__})")
    label = tables.label or str(tables.folder)
    if not tables.files():
        raise CheckInputError(f"{label}: the run's tables name no file, so there is "
                              f"nothing to check; measure the recordings into it first")
    check_finished(tables)
    if settings.compare and accepted is None:
        accepted = read_tables(settings.accepted_dir, "accepted results")
    report = CheckReport(label, str(settings.accepted_dir) if settings.compare
                         else None, settings.config_file)
    report.cases = quality_cases(tables, settings.quality)
    if settings.compare:
        cases, notes = regression_cases(tables, accepted, settings)
        report.cases += cases
        report.notes += notes
    return report


def check_run(results_dir: str | os.PathLike, settings: CheckSettings) -> CheckReport:
    """Read a run's folder (:func:`~spikemeasure.checks.run_tables.read_tables`), then
    :func:`check_tables`.

    Parameters
    ----------
    results_dir : str or path-like
        A folder holding a run's tables.
    settings : CheckSettings

    Returns
    -------
    CheckReport

    Raises
    ------
    CheckInputError
        When the tables are missing or unreadable, or as :func:`check_tables`.
    """
    return check_tables(read_tables(results_dir), settings)
