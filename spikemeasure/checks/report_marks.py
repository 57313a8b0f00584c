"""The run's report, written again by ``check`` with the cells that failed a check marked."""
from __future__ import annotations

import json
import os
from dataclasses import asdict
from pathlib import Path

from ..columns import CELL_COLUMNS
from ..tables.typed import ColumnTable, column_kind
from .findings import CheckReport
from .run_tables import RUN_RECORD_FILE, read_tables

__all__ = ["REPORT_FILE", "mark_report"]

#: The report a run writes in its folder (``spikemeasure.run.folder.REPORT_FILE``).
REPORT_FILE = "report.html"


def mark_report(results_dir: str | os.PathLike, report: CheckReport) -> Path | None:
    """Write the run's report.html again, each cell with a finding of `report` marked.

    Parameters
    ----------
    results_dir : str or path-like
        The run's folder, holding the report, run.json and the tables that were checked.
    report : CheckReport
        What ``check`` found; without findings the report is written without marks (a
        check that now passes clears the marks of an earlier one).

    Returns
    -------
    Path or None
        The report written; None when the folder holds no report (a run with
        ``--report none``) or no run record of this tool.

    Notes
    -----
    A report that cannot be written is a note of `report`; the check's result stands.
    """
    from ..report import write_report

    folder = Path(results_dir)
    path = folder / REPORT_FILE
    if not path.is_file():
        return None
    try:
        record = json.loads((folder / RUN_RECORD_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or record.get("tool") != "spikemeasure":
        return None
    found = read_tables(folder).cells
    columns = tuple(c for c in CELL_COLUMNS if c.name in found)
    cells = ColumnTable(columns, {c.name: ([str(v) for v in found[c.name]]
                                           if column_kind(c) == "text" else found[c.name])
                                  for c in columns})
    mode = (record.get("figures") or {}).get("report_mode")
    try:
        return write_report(path, record, cells, mode=mode if mode != "none" else None,
                            findings=[asdict(f) for f in report.findings])
    except OSError as exc:
        report.notes.append(f"{path}: cannot mark the failed checks in the report "
                            f"({exc.strerror or exc}); it is as the run wrote it")
        return None
