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
from pathlib import Path

from .columns import SPIKE_COLUMNS, Column
from .tables import format_rows

__all__ = ["write_text_atomic", "write_bytes_atomic", "write_table_csv", "write_rows_csv",
           "write_json"]


def _read_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _read_umask()  # read once at import: os.umask can only be read by setting it


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write `text` to `path` through a temporary file and a rename."""
    return write_bytes_atomic(path, text.encode("utf-8"))


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> Path:
    """Write `data` to `path` through a temporary file in the same folder, fsync, rename."""
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_UMASK)  # as an ordinary new file: mkstemp makes it private
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return target


def write_table_csv(path: str | os.PathLike, table: dict[str, list],
                    columns: tuple[Column, ...] = SPIKE_COLUMNS) -> Path:
    """Write a table (dict of column lists) as CSV with the declared header and formats."""
    return write_rows_csv(path, columns, format_rows(table, columns))


def write_rows_csv(path: str | os.PathLike, columns: tuple[Column, ...],
                   rows: list[list[str]]) -> Path:
    """Write already formatted rows under the declared header, atomically."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([c.name for c in columns])
    writer.writerows(rows)
    return write_text_atomic(path, buffer.getvalue())


def write_json(path: str | os.PathLike, record: dict) -> Path:
    return write_text_atomic(path, json.dumps(record, indent=2, default=str) + "\n")
