"""A run's tables as typed columns, for the checks: read from a results folder, or taken from
a run in the same process.

:func:`read_tables` is the one place that turns the CSV text of a run's folder into values:
each declared column (:mod:`spikemeasure.columns`) becomes one array, text for the text
columns, whole numbers for the row keys ``sweep`` and ``spike``, floats (NaN where a cell is
empty, not measured) for every other column. :func:`tables_from_columns` builds the same
from the tables of a run held in memory, so the checks see the same values either way.
:func:`check_finished` refuses a run that did not finish.
"""
from __future__ import annotations

import csv
import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np

from ..columns import CELL_COLUMNS, ERROR_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS, Column
from ..errors import SpikemeasureError
from ..tables.write import TEXT_COLUMN_NAMES, unescape_csv_text
from ..tables.build import format_value

__all__ = ["CheckInputError", "RunTables", "TABLE_FILES", "ERRORS_FILE", "RUN_RECORD_FILE",
           "COMPLETE_STATUS", "INDEX_COLUMNS", "OPTIONAL_KEY", "Table", "read_tables", "tables_from_columns",
           "typed_columns", "cell_text", "check_finished"]

#: The tables a run's folder must hold, with their key columns and declarations.
TABLE_FILES: dict[str, tuple[tuple[str, ...], tuple[Column, ...]]] = {
    "spikes.csv": (("file", "electrode", "sweep", "spike"), SPIKE_COLUMNS),
    "sweeps.csv": (("file", "electrode", "sweep"), SWEEP_COLUMNS),
    "cells.csv": (("file", "electrode"), CELL_COLUMNS),
}
#: A key column that accepted results of older versions lack: read as "" (one cell per file).
OPTIONAL_KEY = "electrode"
ERRORS_FILE = "errors.csv"
RUN_RECORD_FILE = "run.json"

#: Whole-number columns that key rows and are never empty: held as int64.
INDEX_COLUMNS = frozenset({"sweep", "spike"})

#: The ``status`` of a run record whose run finished (``running`` and ``interrupted`` did not).
COMPLETE_STATUS = "complete"

#: A table as typed columns, by column name, in the order of its declaration.
Table = dict[str, np.ndarray]


class CheckInputError(SpikemeasureError):
    """The tables or the accepted results are missing, unreadable or not spikemeasure's."""


@dataclass(frozen=True)
class RunTables:
    """A run's tables as typed columns (see :func:`typed_columns`).

    Attributes
    ----------
    folder : Path
        The run's folder.
    spikes, sweeps, cells, errors : dict of str to ndarray
        The tables, by column name; a declared column the file did not hold (accepted
        results of an older version) is absent.
    record : dict
        run.json (empty when the folder has none).
    headers : dict of str to tuple of str
        The columns each table's file held, in its order (undeclared ones too).
    label : str
        The folder as given, for messages and reports.
    """

    folder: Path
    spikes: Table
    sweeps: Table
    cells: Table
    errors: Table
    record: dict
    headers: dict = field(default_factory=dict)
    label: str = ""

    def table(self, file_name: str) -> Table:
        """The table of ``spikes.csv``, ``sweeps.csv`` or ``cells.csv``."""
        return {"spikes.csv": self.spikes, "sweeps.csv": self.sweeps,
                "cells.csv": self.cells}[file_name]

    def files(self) -> list[str]:
        """Every recording the run names (measured or failed), in order of first mention."""
        names = [*self.cells["file"], *self.sweeps["file"], *self.errors["file"]]
        names += [i["file"] for i in self.record.get("inputs", []) if "file" in i]
        return list(dict.fromkeys(names))


def _kind(column: Column) -> str:
    if column.name in TEXT_COLUMN_NAMES:
        return "text"
    return "index" if column.name in INDEX_COLUMNS else "number"


def _value(column: Column, kind: str, cell) -> object:
    """One value of a column: text as is, a number (from text or a number) at the resolution
    the tables are written with; raises ValueError when it is neither."""
    if kind == "text":
        if not isinstance(cell, str):
            raise ValueError("not text")
        return cell
    if cell is None or (isinstance(cell, str) and cell.strip() == ""):
        if kind == "index":
            raise ValueError("empty")
        return math.nan
    if isinstance(cell, (bool, np.bool_)):
        raise ValueError("a true/false value")
    if kind == "index":
        number = float(cell)
        if number != int(number):
            raise ValueError("not a whole number")
        return int(number)
    number = float(cell)
    if isinstance(cell, str) or column.decimals is None or not math.isfinite(number):
        return number if math.isfinite(number) else math.nan
    return float(format(number, f".{column.decimals}f"))


def typed_columns(values: Mapping[str, Sequence], columns: Sequence[Column], where: str,
                  first_line: int = 1) -> Table:
    """A table of cells (text as in the CSV, or values as a run holds them) as typed columns.

    Parameters
    ----------
    values : mapping of str to sequence
        Cells by column name, all of one length; columns not declared are left out, declared
        ones that are missing stay absent.
    columns : sequence of Column
        The table's declaration.
    where : str
        The table, for messages (a path, or a name).
    first_line : int, optional
        The line number of the first row, for messages (2 for a CSV file under its header).

    Returns
    -------
    dict of str to ndarray
        Text columns (:data:`~spikemeasure.tables.write.TEXT_COLUMN_NAMES`) as object arrays of
        str, ``sweep`` and ``spike`` as int64, every other column as float64 with NaN for an
        empty or non-finite cell. Numbers given as values are taken at the resolution the CSV
        is written with (rounded to the column's decimals), so a run checked in memory and
        the same run read from its folder give the same values.

    Raises
    ------
    CheckInputError
        When a cell is not of its column's kind (naming `where`, the line and the column).
    """
    typed: Table = {}
    for column in columns:
        if column.name not in values:
            continue
        kind = _kind(column)
        cells = values[column.name]
        out = []
        for k, cell in enumerate(cells):
            try:
                out.append(_value(column, kind, cell))
            except (TypeError, ValueError, OverflowError):
                expected = {"text": "text", "index": "a whole number",
                            "number": "a number or empty"}[kind]
                raise CheckInputError(f"{where}, line {first_line + k}: column {column.name} "
                                      f"is not {expected}; the file is damaged (measure "
                                      f"again)") from None
        dtype = {"text": object, "index": np.int64, "number": np.float64}[kind]
        typed[column.name] = np.array(out, dtype=dtype) if out else np.zeros(0, dtype=dtype)
    return typed


def cell_text(column: Column, value) -> str:
    """A typed value as the CSV writes it: empty for NaN, whole numbers without a point,
    numbers with the column's decimals, text as is."""
    if isinstance(value, str):
        return value
    if column.decimals is None:
        number = float(value)
        return "" if not math.isfinite(number) else str(int(number))
    return format_value(column, value)


def _read_csv(path: Path, what: str, required: tuple[str, ...]
              ) -> tuple[list[str], dict[str, list[str]]]:
    """Header and cells by column of a CSV table, checked for the required columns and for
    rows as long as the header."""
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            reader = csv.reader(fh)
            header = next(reader, [])
            rows = [row for row in reader if row]  # blank lines are no rows, as in DictReader
    except FileNotFoundError:
        raise CheckInputError(f"{path}: no such file; {what}") from None
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise CheckInputError(f"{path}: cannot be read as CSV ({exc})") from exc
    missing = [c for c in required if c not in header]
    if missing:
        raise CheckInputError(
            f"{path}: no column {', '.join(missing)}; it was not written by this version of "
            f"spikemeasure (measure again, or accept the results again)")
    for k, row in enumerate(rows, start=2):
        if len(row) != len(header):
            raise CheckInputError(f"{path}, line {k}: the number of cells differs from the "
                                  f"header; the file is damaged (measure again)")
    cells: dict[str, list[str]] = {}
    for index, name in enumerate(header):
        if name in cells:
            continue  # a repeated header name: the first column of that name counts
        column = [row[index] for row in rows]
        if name in TEXT_COLUMN_NAMES:  # '=cell.nwb back to =cell.nwb
            column = [unescape_csv_text(cell) for cell in column]
        cells[name] = column
    return header, cells


def _with_electrode(table: Table) -> Table:
    """A table of an older version, without the electrode column, as one cell per file: its
    electrode "" on every row (the column stays absent from the headers)."""
    if OPTIONAL_KEY in table or "file" not in table:
        return table
    typed = {}
    for name, values in table.items():
        typed[name] = values
        if name == "file":
            typed[OPTIONAL_KEY] = np.array([""] * len(values), dtype=object)
    return typed


def _folder_hints(what: str, suggest_out: bool) -> tuple[str, str]:
    """What to do when the folder is missing, and when it holds no tables."""
    measure_first = ", or recordings with --out DIR to measure them first" if suggest_out else ""
    if what == "accepted results":
        return ("run `spikemeasure accept RESULTS_DIR` to save a run as the accepted results, "
                "or set enabled = false under [regression] in the project file",
                "the folder does not hold accepted results (`spikemeasure accept "
                "RESULTS_DIR` writes them)")
    return (f"give a folder written by `spikemeasure measure --out`{measure_first}",
            f"the folder does not hold {what} (give the folder `spikemeasure measure --out` "
            f"wrote{measure_first})")


def _read_record(path: Path) -> dict:
    if not path.exists():
        return {}
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise CheckInputError(f"{path}: not a readable run record ({exc})") from exc
    if not isinstance(record, dict):
        raise CheckInputError(f"{path}: not a run record (a JSON object)")
    return record


def read_tables(folder: str | os.PathLike, what: str = "results", *,
                suggest_out: bool = True) -> RunTables:
    """Read a run's tables from its folder into typed columns.

    Parameters
    ----------
    folder : str or path-like
        A folder written by ``spikemeasure measure`` (or by ``spikemeasure accept``).
    what : str, optional
        ``"results"`` or ``"accepted results"``, for messages. Accepted results may come
        from an older version: only their key columns must be there.
    suggest_out : bool, optional
        Whether messages suggest ``check``'s ``--out`` (measure recordings first).

    Returns
    -------
    RunTables
        Each declared column the file holds, typed by :func:`typed_columns`; errors.csv
        (empty when absent) and run.json (an empty record when absent).

    Raises
    ------
    CheckInputError
        If the folder or a table is missing or unreadable, a table lacks a column of this
        version's declaration, or a cell is not of its column's kind (naming the file, the
        line and the column).
    """
    base = Path(folder)
    missing_hint, empty_hint = _folder_hints(what, suggest_out)
    if not base.is_dir():
        raise CheckInputError(f"{base}: no such folder of {what}; {missing_hint}")
    tables, headers = {}, {}
    for name, (keys, columns) in TABLE_FILES.items():
        # accepted results may come from an older version: only their keys must be there
        required = (tuple(k for k in keys if k != OPTIONAL_KEY) if what == "accepted results"
                    else tuple(c.name for c in columns))
        header, cells = _read_csv(base / name, empty_hint, required)
        headers[name] = tuple(header)
        tables[name] = _with_electrode(typed_columns(cells, columns, str(base / name),
                                                     first_line=2))
    errors: Table = typed_columns({c.name: [] for c in ERROR_COLUMNS}, ERROR_COLUMNS, "")
    if (base / ERRORS_FILE).exists():
        _, cells = _read_csv(base / ERRORS_FILE, "", ("file", "stage", "message"))
        errors = _with_electrode(typed_columns(cells, ERROR_COLUMNS, str(base / ERRORS_FILE),
                                               first_line=2))
    return RunTables(base, tables["spikes.csv"], tables["sweeps.csv"], tables["cells.csv"],
                     errors, _read_record(base / RUN_RECORD_FILE), headers, str(folder))


def tables_from_columns(folder: str | os.PathLike, spikes: Mapping[str, Sequence],
                        sweeps: Mapping[str, Sequence], cells: Mapping[str, Sequence],
                        errors: Mapping[str, Sequence] | None = None,
                        record: Mapping | None = None) -> RunTables:
    """A run's tables from the columns a run holds in memory, typed as :func:`read_tables`
    types a folder's.

    Parameters
    ----------
    folder : str or path-like
        The run's folder, for messages and reports.
    spikes, sweeps, cells : mapping of str to sequence
        Every declared column of spikes.csv, sweeps.csv and cells.csv, by name (values, or
        cells as written).
    errors : mapping of str to sequence, optional
        The columns of errors.csv (default: no failures).
    record : mapping, optional
        The run record, as run.json holds it (default: empty).

    Returns
    -------
    RunTables

    Raises
    ------
    CheckInputError
        When a declared column is missing or a value is not of its column's kind.
    """
    given = {"spikes.csv": spikes, "sweeps.csv": sweeps, "cells.csv": cells,
             ERRORS_FILE: errors if errors is not None else {c.name: [] for c in ERROR_COLUMNS}}
    declared = {**{name: columns for name, (_, columns) in TABLE_FILES.items()},
                ERRORS_FILE: ERROR_COLUMNS}
    typed = {}
    for name, values in given.items():
        missing = [c.name for c in declared[name] if c.name not in values]
        if missing:
            raise CheckInputError(f"{name}: no column {', '.join(missing)} in the run's table")
        typed[name] = typed_columns(values, declared[name], name)
    headers = {name: tuple(c.name for c in TABLE_FILES[name][1]) for name in TABLE_FILES}
    return RunTables(Path(folder), typed["spikes.csv"], typed["sweeps.csv"], typed["cells.csv"],
                     typed[ERRORS_FILE], dict(record or {}), headers, str(folder))


# --------------------------------------------------------------------------- finished runs


def _whole(value) -> int | None:
    return value if isinstance(value, int) and not isinstance(value, bool) else None


def count_of(n: int, what: str) -> str:
    """``1 file``, ``2 files``."""
    return f"{n} {what}{'' if n == 1 else 's'}"


def some_of(names: list[str], limit: int = 3) -> str:
    """The first few names, and how many more."""
    more = f" and {len(names) - limit} more" if len(names) > limit else ""
    return ", ".join(names[:limit]) + more


def _refuse_unfinished(tables: RunTables, again: str) -> None:
    path = tables.folder / RUN_RECORD_FILE
    if not tables.record:
        raise CheckInputError(f"{path}: no run record, so there is no telling whether the "
                              f"run finished; {again}")
    status = tables.record.get("status")
    if status is not None and status != COMPLETE_STATUS:
        raise CheckInputError(f"{path}: the run did not finish (status {str(status)[:40]!r}, "
                              f"not {COMPLETE_STATUS!r}); {again}")
    if status is None and tables.record.get("interrupted"):
        raise CheckInputError(f"{path}: the run was interrupted before every file was "
                              f"measured; {again}")


def check_finished(tables: RunTables) -> None:
    """Refuse a run that did not finish, or whose tables and run.json disagree.

    Parameters
    ----------
    tables : RunTables
        A run's tables (:func:`read_tables`, :func:`tables_from_columns`).

    Raises
    ------
    CheckInputError
        When the folder has no run.json; its ``status`` is not ``complete`` (``running``:
        the run is still going or was killed; ``interrupted``), or, in a record without
        ``status``, ``interrupted`` is true; or the tables and run.json disagree: a file in
        the tables that run.json does not list, a file run.json lists as measured without
        rows, or a number of sweeps or spikes of a file that differs from run.json's.

    Notes
    -----
    The checks of a file's counts use the ``sweeps_measured`` and ``spikes`` of its entry in
    ``inputs``, when the entry has them.
    """
    if not isinstance(tables, RunTables):
        raise TypeError(f"tables must be RunTables (got {type(tables).__name__})")
    again = "run the same measure command again to finish the run, then check or accept it"
    _refuse_unfinished(tables, again)
    inputs = [i for i in tables.record.get("inputs", []) if isinstance(i, dict) and "file" in i]
    listed = {i["file"]: i for i in inputs}
    rows: dict[str, dict[str, int]] = {}
    for name in TABLE_FILES:
        for file in tables.table(name)["file"]:
            rows.setdefault(file, dict.fromkeys(TABLE_FILES, 0))[name] += 1
    cells_of: dict[str, set] = {}  # the cells each file's measured sweeps belong to
    for file, electrode in zip(tables.sweeps["file"], tables.sweeps["electrode"]):
        cells_of.setdefault(file, set()).add(electrode)
    problems = []
    unlisted = [f for f in rows if f not in listed]
    if unlisted:
        problems.append(f"the tables hold {count_of(len(unlisted), 'file')} that run.json "
                        f"does not list ({some_of(unlisted)})")
    missing = [f for f, i in listed.items() if _whole(i.get("sweeps_measured")) != 0
               and str(i.get("status", "")).startswith(("measured", "reused"))
               and str(i.get("status")) != "reused (failed)" and f not in rows]
    if missing:
        problems.append(f"run.json lists {count_of(len(missing), 'file')} as measured that "
                        f"the tables do not hold ({some_of(missing)})")
    for file, entry in listed.items():
        have = rows.get(file, dict.fromkeys(TABLE_FILES, 0))
        expected_cells = len(cells_of.get(file, ()))
        if file in rows and have["sweeps.csv"] and have["cells.csv"] != expected_cells:
            problems.append(f"{file}: cells.csv holds {have['cells.csv']} rows of it, "
                            f"not {expected_cells} (one per electrode of sweeps.csv)")
        for key, name, what in (("sweeps_measured", "sweeps.csv", "sweep"),
                                ("spikes", "spikes.csv", "spike")):
            expected = _whole(entry.get(key))
            if expected is not None and file not in missing and expected != have[name]:
                problems.append(f"{file}: run.json counts {count_of(expected, what)}, "
                                f"{name} holds {have[name]}")
    if problems:
        shown = "; ".join(problems[:5]) + (f"; and {len(problems) - 5} more"
                                           if len(problems) > 5 else "")
        raise CheckInputError(f"{tables.folder}: the tables and {RUN_RECORD_FILE} disagree: "
                              f"{shown}. The folder was changed after the run or written by "
                              f"two runs at once; {again}")
