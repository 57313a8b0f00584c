"""A table as typed columns: float64 arrays for numbers and counts, lists of str for text.

Results travel between the stages (a worker, the run, the report, the checks) as
:class:`ColumnTable` objects and become CSV text only when a file is written
(:meth:`ColumnTable.formatted_rows`). :meth:`ColumnTable.to_data` and
:meth:`ColumnTable.from_data` turn one into JSON data with explicit column kinds and back;
nothing there is evaluated or unpickled.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Sequence

import numpy as np

from ..columns import Column
from .build import format_rows
from .write import TEXT_COLUMN_NAMES

__all__ = ["ColumnTable", "COLUMN_KINDS", "column_kind"]

#: How a column's values are held: ``text`` as a list of str, ``count`` and ``float`` as
#: float64 arrays (a count that could not be measured is NaN).
COLUMN_KINDS = ("text", "count", "float")


def column_kind(column: Column) -> str:
    """``text``, ``count`` (whole numbers, NaN when missing) or ``float``."""
    if column.name in TEXT_COLUMN_NAMES:
        return "text"
    return "count" if column.decimals is None else "float"


class _PlainColumns:
    """A table's columns as the plain Python values :func:`~spikemeasure.tables.build.format_rows`
    formats, each made when it is read: one column's values at a time, not every column's
    at once, while the cells' text is made (a long recording's spike table holds hundreds
    of thousands)."""

    def __init__(self, table: "ColumnTable") -> None:
        self.table = table

    def __getitem__(self, name: str) -> list:
        column = self.table.columns[[c.name for c in self.table.columns].index(name)]
        v = self.table.values[name]
        if column_kind(column) == "count":  # whole numbers are written without a point
            return [int(x) if math.isfinite(x) else float("nan") for x in v]
        if column_kind(column) == "float":
            return v.tolist()
        return list(v)


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
        """From a dict of column lists (as :mod:`spikemeasure.tables.build` builds them)."""
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

    def sliced(self, start: int, stop: int) -> "ColumnTable":
        """Rows [start, stop) (views of the number columns)."""
        return replace(self, values={name: v[start:stop] for name, v in self.values.items()})

    def column(self, name: str):
        """One column's values (float64 array or list of str)."""
        return self.values[name]

    def renamed(self, file: str) -> "ColumnTable":
        """The same rows with the ``file`` column set to `file`."""
        return replace(self, values=dict(self.values, file=[file] * len(self)))

    def formatted_rows(self) -> list[list[str]]:
        """The rows as CSV cell text, as :func:`spikemeasure.tables.build.format_rows` formats them."""
        return format_rows(_PlainColumns(self), self.columns)

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
