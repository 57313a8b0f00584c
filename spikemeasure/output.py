"""Write tables and run records to files, atomically: a result is complete or absent.

Each file is written to a temporary name in the same folder, flushed to disk, then renamed
over the final name, so an interrupted run never leaves a half-written table.
"""
from __future__ import annotations

import csv
import io
import json
import os
import tempfile
from collections.abc import Mapping
from pathlib import Path

from .columns import SPIKE_COLUMNS, Column
from .tables import format_rows

__all__ = ["write_text_atomic", "write_bytes_atomic", "write_files_atomic", "write_table_csv",
           "write_rows_csv", "write_json", "rows_csv_text", "json_text"]


def _read_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _read_umask()  # read once at import: os.umask can only be read by setting it


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write `text` to `path` through a temporary file and a rename."""
    return write_bytes_atomic(path, text.encode("utf-8"))


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


def rows_csv_text(columns: tuple[Column, ...], rows: list[list[str]]) -> str:
    """Already formatted rows under the declared header, as CSV text."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([c.name for c in columns])
    writer.writerows(rows)
    return buffer.getvalue()


def write_rows_csv(path: str | os.PathLike, columns: tuple[Column, ...],
                   rows: list[list[str]]) -> Path:
    """Write already formatted rows under the declared header, atomically."""
    return write_text_atomic(path, rows_csv_text(columns, rows))


def json_text(record: dict) -> str:
    """A record as the indented JSON text of :func:`write_json`."""
    return json.dumps(record, indent=2, default=str) + "\n"


def write_json(path: str | os.PathLike, record: dict) -> Path:
    """Write a record as indented JSON, atomically."""
    return write_text_atomic(path, json_text(record))
