"""Write tables and run records to files, atomically: a result is complete or absent.

Each file is written to a temporary name in the same folder, flushed to disk, then renamed
over the final name, so an interrupted run never leaves a half-written table.

Text cells of a CSV (file names, flags, messages) that a spreadsheet would run as a formula
are written with a leading ``'`` and in quotes (:func:`escape_csv_text`);
:func:`unescape_csv_text` gives the text back. Text that is not valid Unicode (a file name
whose bytes are not UTF-8) is written with backslash escapes (:func:`~spikemeasure.errors.
valid_text`), never refused.
"""
from __future__ import annotations

import csv
import io
import json
import os
import tempfile
from collections.abc import Mapping
from pathlib import Path

from ..columns import SPIKE_COLUMNS, Column
from ..errors import InvalidSettingError, valid_text
from .build import format_rows

__all__ = ["write_text_atomic", "write_bytes_atomic", "write_files_atomic", "write_table_csv",
           "write_rows_csv", "write_json", "rows_csv_text", "json_text", "escape_csv_text",
           "unescape_csv_text", "TEXT_COLUMN_NAMES"]

#: Columns of the tables that hold text (all others hold numbers, empty when not measured).
TEXT_COLUMN_NAMES = frozenset({"file", "flags", "stage", "message", "stimulus_shape"})
#: First characters that make a spreadsheet read a cell as a formula (common practice, as
#: the OWASP guidance on CSV injection lists them).
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_FIRST_TO_CHECK = frozenset(FORMULA_START + ("'",))


def _read_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _read_umask()  # read once at import: os.umask can only be read by setting it


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write `text` to `path` through a temporary file and a rename, as UTF-8 (lone
    surrogates, from file names that are not UTF-8, as ``\\xNN``)."""
    return write_bytes_atomic(path, valid_text(text).encode("utf-8"))


def _write_temporary(target: Path, data: bytes) -> str:
    """Write `data` to a new temporary file beside `target` (flushed to disk); its path. On
    any failure nothing is left behind."""
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_UMASK)  # as an ordinary new file: mkstemp makes it private
    except BaseException:
        _remove(tmp)
        raise
    return tmp


def _remove(tmp: str) -> None:
    try:
        os.unlink(tmp)
    except FileNotFoundError:
        pass


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> Path:
    """Write `data` to `path` through a temporary file in the same folder, fsync, rename."""
    return write_files_atomic({path: data})[0]


def write_files_atomic(contents: Mapping[str | os.PathLike, bytes]) -> list[Path]:
    """Write several files all or none: every one to a temporary file first, then all renamed.

    Parameters
    ----------
    contents : mapping of path to bytes
        Each file's new content.

    Returns
    -------
    list of Path
        The files written, in the order given.

    Raises
    ------
    OSError
        A temporary file could not be written (a full disk, permissions): every temporary file
        is removed and none of the files is changed. The error's ``filename`` is the file
        whose content could not be written.
    """
    if not isinstance(contents, Mapping):
        raise TypeError("`contents` must map paths to bytes")
    pending: list[tuple[str, Path]] = []
    try:
        for path, data in contents.items():
            target = Path(path)
            try:
                pending.append((_write_temporary(target, bytes(data)), target))
            except OSError as exc:
                exc.filename = str(target)
                raise
        for tmp, target in pending:
            os.replace(tmp, target)
    except BaseException:
        for tmp, _ in pending:
            _remove(tmp)
        raise
    return [target for _, target in pending]


def write_table_csv(path: str | os.PathLike, table: dict[str, list],
                    columns: tuple[Column, ...] = SPIKE_COLUMNS) -> Path:
    """Write a table (dict of column lists) as CSV with the declared header and formats."""
    return write_rows_csv(path, columns, format_rows(table, columns))


def escape_csv_text(text: str) -> str:
    """A text cell as a spreadsheet shows it but never runs it.

    A cell that starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return gets a
    leading ``'`` (as the OWASP guidance on CSV injection recommends), and so does a cell that
    starts with ``'`` followed by one of those or by another ``'``, so that
    :func:`unescape_csv_text` gives every text back exactly. Any other text is unchanged.

    Parameters
    ----------
    text : str

    Returns
    -------
    str
    """
    if not isinstance(text, str):
        raise InvalidSettingError(f"`text` must be a str (got {type(text).__name__})")
    if text.startswith(FORMULA_START) or (text[:1] == "'" and
                                          text[1:].startswith(FORMULA_START + ("'",))):
        return "'" + text
    return text


def unescape_csv_text(cell: str) -> str:
    """The text that :func:`escape_csv_text` turned into `cell`.

    Parameters
    ----------
    cell : str

    Returns
    -------
    str
    """
    if not isinstance(cell, str):
        raise InvalidSettingError(f"`cell` must be a str (got {type(cell).__name__})")
    if cell[:1] == "'" and cell[1:].startswith(FORMULA_START + ("'",)):
        return cell[1:]
    return cell


def _csv_cell(text: str) -> str:
    """One field as csv's QUOTE_MINIMAL writes it."""
    if any(c in text for c in ',"\r\n'):
        return '"' + text.replace('"', '""') + '"'
    return text


def rows_csv_text(columns: tuple[Column, ...], rows: list[list[str]]) -> str:
    """Already formatted rows under the declared header, as CSV text.

    Cells of :data:`TEXT_COLUMN_NAMES` pass through :func:`escape_csv_text` and, when escaped,
    are quoted; numbers never change.
    """
    text_columns = [k for k, c in enumerate(columns) if c.name in TEXT_COLUMN_NAMES]
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([c.name for c in columns])
    for row in rows:
        if len(row) != len(columns):
            raise InvalidSettingError(f"a row of {len(row)} cells under a header of "
                                      f"{len(columns)}")
        escaped = {k for k in text_columns
                   if row[k][:1] in _FIRST_TO_CHECK and row[k] != escape_csv_text(row[k])}
        if not escaped:
            writer.writerow(row)
            continue
        buffer.write(",".join('"' + escape_csv_text(v).replace('"', '""') + '"' if k in escaped
                              else _csv_cell(v) for k, v in enumerate(row)) + "\n")
    return buffer.getvalue()


def write_rows_csv(path: str | os.PathLike, columns: tuple[Column, ...],
                   rows: list[list[str]]) -> Path:
    """Write already formatted rows under the declared header, atomically
    (:func:`rows_csv_text`)."""
    return write_text_atomic(path, rows_csv_text(columns, rows))


def json_text(record: dict) -> str:
    """A record as the indented JSON text of :func:`write_json`; strings that are not valid
    Unicode (lone surrogates) are written with backslash escapes."""
    return json.dumps(_valid_strings(record), indent=2, default=str) + "\n"


def _valid_strings(value):
    """`value` (JSON data) with every string made valid Unicode (:func:`valid_text`)."""
    if isinstance(value, str):
        return valid_text(value)
    if isinstance(value, dict):
        return {_valid_strings(k): _valid_strings(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_valid_strings(v) for v in value]
    return value


def write_json(path: str | os.PathLike, record: dict) -> Path:
    """Write `record` as indented JSON (:func:`json_text`), atomically."""
    return write_text_atomic(path, json_text(record))
