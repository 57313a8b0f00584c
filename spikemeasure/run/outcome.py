"""One file's outcome as typed data: its tables as column arrays, its failures and counts.

A worker returns a :class:`FileOutcome`; its tables stay numbers until a file is written
(:meth:`ColumnTable.formatted_rows`). :meth:`FileOutcome.to_data` and
:meth:`FileOutcome.from_data` turn it into JSON data with explicit column types and back,
for the outcome cache; nothing there is evaluated or unpickled.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Sequence

import numpy as np

from ..columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS, Column
from ..tables.write import TEXT_COLUMN_NAMES
from ..tables.build import format_rows

__all__ = ["ColumnTable", "FileOutcome", "INTERNAL_ERROR_STAGE", "failure", "column_kind",
           "internal_error_outcome"]

#: The stage of a file's failure when its task raised an unexpected exception (a bug).
INTERNAL_ERROR_STAGE = "internal error"

#: How a column's values are held: ``text`` as a list of str, ``count`` and ``float`` as
#: float64 arrays (a count that could not be measured is NaN).
COLUMN_KINDS = ("text", "count", "float")


def column_kind(column: Column) -> str:
    """``text``, ``count`` (whole numbers, NaN when missing) or ``float``."""
    if column.name in TEXT_COLUMN_NAMES:
        return "text"
    return "count" if column.decimals is None else "float"


def failure(file: str, stage: str, message: str) -> dict:
    """One row of errors.csv as a dict (``file``, ``stage``, ``message``)."""
    return {"file": file, "stage": stage, "message": message}


@dataclass(frozen=True)
class ColumnTable:
    """A table as typed columns, in the order of its declared `columns`.

    Attributes
    ----------
    columns : tuple of Column
        The declared columns (e.g. :data:`~spikemeasure.columns.SPIKE_COLUMNS`).
    values : dict
        Column name -> float64 array (``count`` and ``float`` columns) or list of str
        (``text`` columns), all of one length.
    """

    columns: tuple[Column, ...]
    values: dict

    @classmethod
    def empty(cls, columns: tuple[Column, ...]) -> "ColumnTable":
        return cls.from_lists({c.name: [] for c in columns}, columns)

    @classmethod
    def from_lists(cls, table: dict[str, list], columns: tuple[Column, ...]) -> "ColumnTable":
        """From a dict of column lists (as :mod:`spikemeasure.tables` builds them)."""
        values = {}
        for c in columns:
            raw = table[c.name]
            if column_kind(c) == "text":
                values[c.name] = [str(v) for v in raw]
            else:
                values[c.name] = np.array([np.nan if v is None else float(v) for v in raw],
                                          dtype=np.float64)
        lengths = {len(v) for v in values.values()}
        if len(lengths) > 1:
            raise ValueError(f"`table` columns differ in length: {sorted(lengths)}")
        return cls(columns, values)

    @classmethod
    def concatenate(cls, tables: Sequence["ColumnTable"], columns: tuple[Column, ...]
                    ) -> "ColumnTable":
        """The rows of `tables`, in order, under `columns`."""
        values = {}
        for c in columns:
            if column_kind(c) == "text":
                values[c.name] = [v for t in tables for v in t.values[c.name]]
            else:
                parts = [t.values[c.name] for t in tables]
                values[c.name] = (np.concatenate(parts) if parts
                                  else np.zeros(0, dtype=np.float64))
        return cls(columns, values)

    def __len__(self) -> int:
        return len(self.values[self.columns[0].name])

    def column(self, name: str):
        """One column's values (float64 array or list of str)."""
        return self.values[name]

    def renamed(self, file: str) -> "ColumnTable":
        """The same rows with the ``file`` column set to `file`."""
        return replace(self, values=dict(self.values, file=[file] * len(self)))

    def formatted_rows(self) -> list[list[str]]:
        """The rows as CSV cell text, as :func:`spikemeasure.tables.format_rows` formats them."""
        plain = {}
        for c in self.columns:
            v = self.values[c.name]
            if column_kind(c) == "count":  # whole numbers are written without a point
                plain[c.name] = [int(x) if math.isfinite(x) else float("nan") for x in v]
            elif column_kind(c) == "float":
                plain[c.name] = v.tolist()
            else:
                plain[c.name] = list(v)
        return format_rows(plain, self.columns)

    def to_data(self) -> dict:
        """JSON data: per column its kind and values (NaN as null, infinities as text)."""
        return {c.name: {"kind": column_kind(c), "values": _json_values(self.values[c.name],
                                                                        column_kind(c))}
                for c in self.columns}

    @classmethod
    def from_data(cls, data, columns: tuple[Column, ...]) -> "ColumnTable":
        """The inverse of :meth:`to_data`; ValueError when `data` does not fit `columns`."""
        if not isinstance(data, dict) or list(data) != [c.name for c in columns]:
            raise ValueError("the kept columns are not the declared ones")
        values = {}
        for c in columns:
            entry = data[c.name]
            kind = column_kind(c)
            if not isinstance(entry, dict) or entry.get("kind") != kind or \
                    not isinstance(entry.get("values"), list):
                raise ValueError(f"column {c.name}: not of kind {kind}")
            values[c.name] = _values_from_json(entry["values"], kind, c.name)
        table = cls(columns, values)
        if len({len(v) for v in values.values()}) > 1:
            raise ValueError("the kept columns differ in length")
        return table


def _json_values(values, kind: str) -> list:
    if kind == "text":
        return list(values)
    return [x if math.isfinite(x) else (None if math.isnan(x) else ("inf" if x > 0 else "-inf"))
            for x in values.tolist()]


def _values_from_json(values: list, kind: str, name: str):
    if kind == "text":
        if not all(isinstance(v, str) for v in values):
            raise ValueError(f"column {name}: a value is not text")
        return list(values)
    out = np.empty(len(values), dtype=np.float64)
    for k, v in enumerate(values):
        if v is None:
            out[k] = np.nan
        elif v in ("inf", "-inf"):
            out[k] = float(v)
        elif isinstance(v, (int, float)) and not isinstance(v, bool):
            out[k] = float(v)
        else:
            raise ValueError(f"column {name}: a value is not a number")
    if kind == "count" and not all(math.isnan(x) or x == int(x) for x in out.tolist()):
        raise ValueError(f"column {name}: a count is not a whole number")
    return out


_TABLES = (("spikes", SPIKE_COLUMNS), ("sweeps", SWEEP_COLUMNS), ("cells", CELL_COLUMNS))


@dataclass
class FileOutcome:
    """What measuring one file gave: its three tables, its failures and counts.

    Attributes
    ----------
    file : str
        The file as the tables name it.
    spikes, sweeps, cells : ColumnTable
        Its rows of spikes.csv, sweeps.csv and cells.csv.
    failures : list of dict
        Rows of errors.csv (``file``, ``stage``, ``message``; ``traceback`` for a bug).
    sweep_count, sweeps_measured, spike_count : int
        Sweeps in the file, sweeps measured, spikes found.
    spike_flags : dict
        Flag -> number of spikes carrying it.
    format : str or None
        The file's format, as the reader names it (None when it could not be read).
    figures : list of str
        Its figures, relative to the output folder.
    figure_format : str or None
        The format the figures were asked in (None: none asked).
    """

    file: str
    spikes: ColumnTable = field(default_factory=lambda: ColumnTable.empty(SPIKE_COLUMNS))
    sweeps: ColumnTable = field(default_factory=lambda: ColumnTable.empty(SWEEP_COLUMNS))
    cells: ColumnTable = field(default_factory=lambda: ColumnTable.empty(CELL_COLUMNS))
    failures: list = field(default_factory=list)
    sweep_count: int = 0
    sweeps_measured: int = 0
    spike_count: int = 0
    spike_flags: dict = field(default_factory=dict)
    format: str | None = None
    figures: list = field(default_factory=list)
    figure_format: str | None = None

    @property
    def is_internal_error(self) -> bool:
        return any(f.get("stage") == INTERNAL_ERROR_STAGE for f in self.failures)

    def renamed(self, file: str) -> "FileOutcome":
        """The outcome as it reads when its file is named `file` (moved or renamed since)."""
        old = self.file
        return replace(self, file=file, spikes=self.spikes.renamed(file),
                       sweeps=self.sweeps.renamed(file), cells=self.cells.renamed(file),
                       failures=[dict(f, file=file, message=f["message"].replace(old, file, 1))
                                 for f in self.failures])

    def to_data(self) -> dict:
        """JSON data with explicit types (see :meth:`ColumnTable.to_data`)."""
        return {"file": self.file, "format": self.format, "sweeps": self.sweep_count,
                "sweeps_measured": self.sweeps_measured, "spikes": self.spike_count,
                "spike_flags": dict(self.spike_flags), "failures": list(self.failures),
                "figures": list(self.figures), "figure_format": self.figure_format,
                "tables": {name: getattr(self, name).to_data() for name, _ in _TABLES}}

    @classmethod
    def from_data(cls, data) -> "FileOutcome":
        """The inverse of :meth:`to_data`; ValueError when `data` is not of that shape."""
        if not isinstance(data, dict) or not isinstance(data.get("file"), str):
            raise ValueError("not a file's outcome")
        counts = [data.get(k) for k in ("sweeps", "sweeps_measured", "spikes")]
        if not all(isinstance(n, int) and not isinstance(n, bool) for n in counts):
            raise ValueError("the counts are not whole numbers")
        failures = data.get("failures")
        if not isinstance(failures, list) or not all(
                isinstance(f, dict) and all(isinstance(f.get(k), str)
                                            for k in ("file", "stage", "message"))
                for f in failures):
            raise ValueError("the failures are not rows of errors.csv")
        flags, figures = data.get("spike_flags"), data.get("figures")
        if not isinstance(flags, dict) or not all(
                isinstance(k, str) and isinstance(v, int) for k, v in flags.items()):
            raise ValueError("the flag counts are not counts")
        if not isinstance(figures, list) or not all(isinstance(p, str) for p in figures):
            raise ValueError("the figures are not paths")
        for key in ("format", "figure_format"):
            if data.get(key) is not None and not isinstance(data[key], str):
                raise ValueError(f"`{key}` is not text")
        tables = data.get("tables")
        if not isinstance(tables, dict):
            raise ValueError("no tables")
        typed = {name: ColumnTable.from_data(tables.get(name), columns)
                 for name, columns in _TABLES}
        return cls(data["file"], failures=failures, sweep_count=counts[0],
                   sweeps_measured=counts[1], spike_count=counts[2], spike_flags=flags,
                   format=data.get("format"), figures=figures,
                   figure_format=data.get("figure_format"), **typed)


def internal_error_outcome(shown: str, exc: BaseException, trace: str) -> FileOutcome:
    """The outcome of a file whose task raised `exc` (a bug): one ``internal error`` failure,
    with the traceback kept for run.json."""
    return FileOutcome(shown, failures=[dict(
        failure(shown, INTERNAL_ERROR_STAGE,
                f"{shown}: internal error ({type(exc).__name__}) while measuring it; the "
                "other files are not affected. This is a bug: please report it with the "
                "traceback in run.json (or run with --debug)"),
        traceback=trace)])
