"""What a run writes as it goes: run.json, the tables, the batch figure and the report.

The tables and run.json are written as one set (all or none, so that they never disagree):
at the start (run.json only, ``"status": "running"``), every :data:`TABLE_REFRESH_S` during
the run, and at the end, also after an interruption (``"interrupted"``) or an error
(``"failed"``). The tables are formatted to text here, from the typed outcomes, and nowhere
earlier.
"""
from __future__ import annotations

import platform
import sys
import time
import traceback
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__
from ..columns import CELL_COLUMNS, ERROR_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS
from ..errors import OutputWriteError
from ..tables.write import json_text, rows_csv_text, write_files_atomic, write_json
from ..params import parameters_record
from .cache import OutcomeCache
from .folder import (CELLS_FILE, ERRORS_FILE, REPORT_FILE, RUN_RECORD_FILE, SPIKES_FILE,
                     SWEEPS_FILE)
from ..tables.typed import ColumnTable
from .outcome import FileOutcome, internal_error_outcome
from .task import FIGURES_FOLDER

__all__ = ["RunSummary", "RunRecord", "TABLE_REFRESH_S"]

#: Tables are rewritten at most this often (s) during a run, so a killed run loses little.
TABLE_REFRESH_S = 5.0
#: Rows of a table formatted to CSV text at a time.
ROWS_PER_BLOCK = 1024


@dataclass
class RunSummary:
    """What a run did: files measured or reused, spikes found, every failure with its reason;
    its tables as typed columns (``tables``: ``spikes``, ``sweeps``, ``cells``, each a
    :class:`~spikemeasure.run.outcome.ColumnTable`) and its run record (``record``, as
    run.json holds it), for a step in the same process that would otherwise read them back."""

    out_dir: Path
    files_measured: int = 0
    files_reused: int = 0
    files_failed: int = 0
    sweeps_measured: int = 0
    spikes: int = 0
    failures: list[dict] = field(default_factory=list)
    inputs: list[dict] = field(default_factory=list)
    interrupted: bool = False
    notes: list[str] = field(default_factory=list)
    tables: dict[str, ColumnTable] = field(default_factory=dict)
    record: dict = field(default_factory=dict)

    @property
    def error_columns(self) -> dict[str, list[str]]:
        """The rows of errors.csv as columns (``file``, ``stage``, ``message``)."""
        return {c.name: [f[c.name] for f in self.failures] for c in ERROR_COLUMNS}

    @property
    def nothing_measured(self) -> bool:
        return self.sweeps_measured == 0

    @property
    def spikes_path(self) -> Path:
        return self.out_dir / SPIKES_FILE

    @property
    def sweeps_path(self) -> Path:
        return self.out_dir / SWEEPS_FILE

    @property
    def cells_path(self) -> Path:
        return self.out_dir / CELLS_FILE

    @property
    def errors_path(self) -> Path:
        return self.out_dir / ERRORS_FILE

    @property
    def record_path(self) -> Path:
        return self.out_dir / RUN_RECORD_FILE

    @property
    def report_path(self) -> Path:
        return self.out_dir / REPORT_FILE


def count_text(n: int, noun: str) -> str:
    return f"{n} {noun}" + ("" if n == 1 else "s")


def _versions() -> dict:
    import numpy
    import scipy

    try:
        from importlib.metadata import version
        neo_version = version("neo")
    except Exception:  # metadata missing in an odd install: say so rather than fail the run
        neo_version = "unknown"
    return {"spikemeasure": __version__, "python": platform.python_version(),
            "numpy": numpy.__version__, "scipy": scipy.__version__, "neo": neo_version}


def _tables() -> tuple[tuple[str, tuple], ...]:
    """The three tables of a run: their names (FileOutcome's attributes) and columns."""
    return (("spikes", SPIKE_COLUMNS), ("sweeps", SWEEP_COLUMNS), ("cells", CELL_COLUMNS))


def combined_tables(outcomes: list[FileOutcome]) -> dict[str, ColumnTable]:
    """The rows of every outcome, in file order, as the three typed tables."""
    return {"spikes": ColumnTable.concatenate([o.spikes for o in outcomes], SPIKE_COLUMNS),
            "sweeps": ColumnTable.concatenate([o.sweeps for o in outcomes], SWEEP_COLUMNS),
            "cells": ColumnTable.concatenate([o.cells for o in outcomes], CELL_COLUMNS)}


class RunRecord:
    """One run's state and everything it writes: kept outcomes, the tables and run.json (as one
    set, so they never disagree), the batch figure and the report.

    Parameters
    ----------
    summary : RunSummary
        Filled in by :meth:`finish`.
    parameters : dict
        The run's parameters (as the file tasks take them).
    started : float
        The run's start (``time.time()``).
    config_file, figure_format, groups, report_mode
        As :func:`~spikemeasure.run.measure_paths` takes them.
    """

    def __init__(self, summary: RunSummary, parameters: dict, started: float,
                 config_file: str | None, figure_format: str | None, groups,
                 report_mode: str | None = None) -> None:
        self.summary = summary
        self.out = summary.out_dir
        self.parameters = parameters
        self.started = started
        self.config_file = config_file
        self.figure_format = figure_format
        self.groups = groups
        self.report_mode = report_mode
        self.status = "complete"
        self.entries: list[dict] = []
        self.outcomes: list[FileOutcome | None] = []
        self.early: list[dict] = []
        self.started_record = False
        self.last_refresh = time.time()
        self.refresh_failed = False
        # each finished file's rows as CSV text, formatted once however often the tables
        # are written (every TABLE_REFRESH_S, then at the end): {id: (outcome, texts)}
        self.rows_texts: dict[int, tuple[FileOutcome, dict[str, str]]] = {}

    def keep(self, k: int, outcome: FileOutcome, cache_path: Path | None) -> FileOutcome:
        """Keep a file's outcome for a rerun (first: a table never holds a file a rerun would
        redo), then for this run's tables. An internal error is not kept: a rerun retries."""
        try:
            text = OutcomeCache.text(outcome)
        except (TypeError, ValueError, AttributeError) as exc:  # a bug in the file's task
            outcome = internal_error_outcome(getattr(outcome, "file", str(cache_path)), exc,
                                             traceback.format_exc())
        if cache_path is not None and not outcome.is_internal_error:
            try:
                OutcomeCache.store(cache_path, text)
            except OSError as exc:
                self.summary.notes.append(
                    f"{cache_path}: cannot keep the outcome of {outcome.file} for a rerun "
                    f"({exc.strerror or exc}); a rerun measures it again")
        self.outcomes[k] = outcome
        return outcome

    def done(self) -> list[FileOutcome]:
        return [o for o in self.outcomes if o is not None]

    def tally(self, final: bool) -> RunSummary:
        """Counts, failures and run.json's entries of the files so far."""
        counts = RunSummary(out_dir=self.out)
        counts.failures = list(self.early)
        unfinished = {"running": "pending", "interrupted": "not measured (run interrupted)"}
        for entry, outcome in zip(self.entries, self.outcomes):
            entry = dict(entry)
            if outcome is None:
                entry["status"] = unfinished.get(self.status, "not measured (run failed)") \
                    if final else "pending"
                counts.inputs.append(entry)
                continue
            entry.setdefault("status", "measured" if outcome.sweeps_measured else "failed")
            if not outcome.sweeps_measured:
                entry["status"] = "failed" if entry["status"] != "reused" else "reused (failed)"
            entry.update(format=outcome.format, sweeps=outcome.sweep_count,
                         sweeps_measured=outcome.sweeps_measured, spikes=outcome.spike_count,
                         spike_flags=outcome.spike_flags)
            traces = [f["traceback"] for f in outcome.failures if f.get("traceback")]
            if traces:
                entry["traceback"] = "\n".join(traces)
            counts.inputs.append(entry)
            counts.failures.extend(outcome.failures)
            if outcome.sweeps_measured:
                if entry["status"] == "reused":
                    counts.files_reused += 1
                else:
                    counts.files_measured += 1
                counts.sweeps_measured += outcome.sweeps_measured
                counts.spikes += outcome.spike_count
            else:
                counts.files_failed += 1
        return counts

    def record(self, status: str, counts: RunSummary, batch_figure: str | None = None) -> dict:
        """run.json's content."""
        groups = self.groups
        parameters = self.parameters
        return {
            "tool": "spikemeasure",
            "versions": _versions(),
            "command": sys.argv,
            "started": time.strftime("%Y-%m-%dT%H:%M:%S%z", time.localtime(self.started)),
            "seconds": round(time.time() - self.started, 3),
            "status": status,
            "interrupted": status == "interrupted",
            "config_file": self.config_file,
            "parameters": parameters_record(parameters["settings"], parameters),
            "inputs": counts.inputs,
            "failures": [{k: v for k, v in f.items() if k != "traceback"}
                         for f in counts.failures],
            "totals": {"files_measured": counts.files_measured,
                       "files_reused": counts.files_reused,
                       "files_failed": counts.files_failed,
                       "sweeps_measured": counts.sweeps_measured, "spikes": counts.spikes},
            "figures": {"format": self.figure_format, "batch": batch_figure,
                        "cells": {o.file: o.figures for o in self.done() if o.figures},
                        "report_mode": self.report_mode},
            "groups": None if groups is None else {"file": groups.path, "column": groups.label,
                                                   "members": groups.mapping},
            "notes": list(self.summary.notes),
        }

    def table_files(self, record: dict) -> dict[Path, bytes]:
        """The tables of the files finished so far (formatted to text here) and run.json, as
        one set of files."""
        done = self.done()
        failures = self.early + [f for o in done for f in o.failures]
        summary = self.summary
        tables = {name: rows_csv_text(columns, []) + "".join(self._rows_text(o)[name]
                                                             for o in done)
                  for name, columns in _tables()}
        texts = {
            summary.spikes_path: tables["spikes"],
            summary.sweeps_path: tables["sweeps"],
            summary.cells_path: tables["cells"],
            summary.errors_path: rows_csv_text(
                ERROR_COLUMNS, [[f[c.name] for c in ERROR_COLUMNS] for f in failures]),
            summary.record_path: json_text(record),
        }
        return {path: text.encode("utf-8") for path, text in texts.items()}

    def _rows_text(self, outcome: FileOutcome) -> dict[str, str]:
        """One file's rows of each table as CSV text (the lines below the header): made the
        first time its tables are written, then kept. The rows of a table are formatted one
        by one, so a table's text is its header followed by each file's rows in turn."""
        kept = self.rows_texts.get(id(outcome))
        if kept is None or kept[0] is not outcome:
            texts = {}
            for name, columns in _tables():
                rows = ColumnTable.concatenate([getattr(outcome, name)], columns)
                header = len(rows_csv_text(columns, []))
                # a block of rows at a time: the cells' text of a long recording's spikes,
                # each a Python string, would otherwise all be held at once
                texts[name] = "".join(
                    rows_csv_text(columns, rows.sliced(a, a + ROWS_PER_BLOCK)
                                  .formatted_rows())[header:]
                    for a in range(0, len(rows), ROWS_PER_BLOCK))
            kept = self.rows_texts[id(outcome)] = (outcome, texts)
        return kept[1]

    def write_start(self) -> None:
        """Before any file is measured: run.json says ``running`` (with the parameters and
        inputs of this run) and report.html says so too, so neither can pass for an earlier
        run's."""
        from ..report import write_report

        record = self.record("running", self.tally(final=False))
        try:
            write_json(self.summary.record_path, record)
            self.started_record = True
            if self.report_mode == "none":  # an earlier run's report must not pass for this one's
                self.summary.report_path.unlink(missing_ok=True)
            else:
                write_report(self.summary.report_path, record, ColumnTable.empty(CELL_COLUMNS))
        except OSError as exc:
            raise OutputWriteError(
                f"{exc.filename or self.out}: cannot write ({exc.strerror or exc}); nothing "
                "was measured" + ("" if not self.started_record else
                                  f"; {self.summary.record_path} says the run is running, "
                                  "and the tables are as they were")) from exc
        self.last_refresh = time.time()

    def refresh_if_due(self) -> None:
        """Every :data:`TABLE_REFRESH_S`: the tables of the files finished and run.json (``running``)
        describing them, as one set. A failure is a note; the run goes on."""
        if time.time() - self.last_refresh <= TABLE_REFRESH_S:
            return
        counts = self.tally(final=False)
        try:
            write_files_atomic(self.table_files(self.record("running", counts)))
        except OSError as exc:
            if not self.refresh_failed:
                self.summary.notes.append(
                    f"{exc.filename or self.out}: cannot refresh the tables during the run "
                    f"({exc.strerror or exc}); the last ones written were left as they were")
            self.refresh_failed = True
        self.last_refresh = time.time()

    def finish(self) -> None:
        """Count, write the batch figure, the tables with run.json (one set), and the report
        (also after an interruption)."""
        summary = self.summary
        if not self.started_record and self.status == "failed":
            return  # an error before the run began (its first record): nothing to record
        counts = self.tally(final=True)
        summary.inputs = counts.inputs
        summary.failures = counts.failures
        for name in ("files_measured", "files_reused", "files_failed", "sweeps_measured",
                     "spikes"):
            setattr(summary, name, getattr(counts, name))
        done = self.done()
        if self.groups is not None:
            summary.notes.extend(self.groups.notes([o.file for o in done if len(o.cells)]))
        summary.tables = combined_tables(done)
        batch_figure = self._batch_figure(summary.tables["cells"])
        record = self.record(self.status, counts, batch_figure)
        summary.record = record
        files = self.table_files(record)
        try:
            write_files_atomic(files)
        except OSError as exc:
            said = ("run.json there says this run is running" if self.started_record else
                    "run.json there is as it was")
            left = (f"the tables left in {summary.out_dir} are those written before"
                    if summary.spikes_path.exists() else
                    f"no tables are in {summary.out_dir}")
            raise OutputWriteError(
                f"{exc.filename or summary.out_dir}: cannot write ({exc.strerror or exc}). Not "
                f"written: {', '.join(p.name for p in files)} (all or none, so that they never "
                f"disagree) and {REPORT_FILE}; {left}, and {said} "
                f"({count_text(len(done), 'file')} finished in this run, kept "
                "for a rerun where there was room). Free some space and run the same command "
                "again") from exc
        if self.report_mode == "none":
            return
        from ..report import write_report

        try:
            write_report(summary.report_path, record, summary.tables["cells"],
                         mode=self.report_mode)
        except OSError as exc:
            raise OutputWriteError(
                f"{summary.report_path}: cannot write the report ({exc.strerror or exc}); the "
                "tables and run.json are written; the report left in the folder is that of "
                "the run's start, which says it is running") from exc

    def _batch_figure(self, cells: ColumnTable) -> str | None:
        """Draw the figure across cells; its path relative to the output folder, or None."""
        if not self.figure_format or not len(cells):
            return None
        from ..figures import BATCH_FIGURE_NAME, write_batch_figure
        from ..report import cell_values

        batch_figure = f"{FIGURES_FOLDER}/{BATCH_FIGURE_NAME}.{self.figure_format}"
        groups = self.groups
        try:
            write_batch_figure(self.out / batch_figure, cell_values(cells),
                               groups.mapping if groups is not None else None,
                               groups.label if groups is not None else "group",
                               self.figure_format)
        except OSError as exc:
            self.summary.notes.append(f"{self.out / batch_figure}: cannot write the batch "
                                      f"figure ({exc.strerror or exc})")
            return None
        return batch_figure
