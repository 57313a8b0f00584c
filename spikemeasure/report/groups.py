"""The groups file: which group (genotype, region, ...) each file of a run belongs to, for
the report and the batch figure."""
from __future__ import annotations

import csv
import os
from dataclasses import dataclass, field
from typing import Sequence

from ..errors import SpikemeasureError
from ..tables.write import unescape_csv_text

__all__ = ["Groups", "GroupsFileError", "read_groups"]


class GroupsFileError(SpikemeasureError):
    """The groups file cannot be read or is not a table of files and groups."""


@dataclass(frozen=True)
class Groups:
    """Which group each file belongs to, from a groups file.

    Attributes
    ----------
    path : str
        The groups file.
    label : str
        The name of its group column (``genotype``, ``region``, ...).
    mapping : dict
        File (as the tables name it) -> group.
    """

    path: str
    label: str
    mapping: dict[str, str] = field(default_factory=dict)

    def notes(self, files: Sequence[str]) -> list[str]:
        """Messages about files of the run missing from the groups file, and the reverse."""
        run = set(files)
        missing = [f for f in files if f not in self.mapping]
        unknown = [f for f in self.mapping if f not in run]
        out = []
        if missing:
            out.append(f"{self.path}: {len(missing)} measured file(s) not listed, shown as "
                       f"'(no group)': {', '.join(missing[:10])}"
                       + (", ..." if len(missing) > 10 else ""))
        if unknown:
            out.append(f"{self.path}: {len(unknown)} listed file(s) not measured in this run "
                       f"(names must match the `file` column of cells.csv): "
                       f"{', '.join(unknown[:10])}" + (", ..." if len(unknown) > 10 else ""))
        return out


def read_groups(path: str | os.PathLike) -> Groups:
    """Read a groups file: a CSV table with a ``file`` column and one group column.

    Parameters
    ----------
    path : str or path-like
        Comma-separated, UTF-8, a header row naming the two columns, e.g.
        ``file,genotype``; each further row a file, named as in the ``file`` column of
        cells.csv (its path relative to the folder measured), and its group.

    Returns
    -------
    Groups

    Raises
    ------
    GroupsFileError
        If the file cannot be read, is not UTF-8, has no ``file`` column, has not exactly one
        other column, or a row has an empty file or group, the wrong number of cells, or names
        a file already given a different group. The message names the file and the line.
    """
    name = str(path)
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            rows = list(csv.reader(fh))
    except OSError as exc:
        raise GroupsFileError(f"{name}: cannot read the groups file "
                              f"({exc.strerror or exc})") from exc
    except UnicodeDecodeError as exc:
        raise GroupsFileError(f"{name}: the groups file is not UTF-8 text; save it as UTF-8 "
                              "CSV") from exc
    except csv.Error as exc:
        raise GroupsFileError(f"{name}: not a CSV table ({exc})") from exc
    rows = [r for r in rows if any(cell.strip() for cell in r)]
    if not rows:
        raise GroupsFileError(f"{name}: the groups file is empty; it needs a header row "
                              "`file,GROUP` and a row per file")
    header = [h.strip() for h in rows[0]]
    if "file" not in header:
        raise GroupsFileError(f"{name}: no `file` column in the header row ({', '.join(header)});"
                              " the first row must name the columns, e.g. `file,genotype`")
    others = [h for h in header if h != "file"]
    if len(others) != 1 or header.count("file") != 1 or not others[0]:
        raise GroupsFileError(f"{name}: the header must name `file` and exactly one group "
                              f"column (got {', '.join(header)})")
    fi, gi = header.index("file"), header.index(others[0])
    mapping: dict[str, str] = {}
    for line, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            raise GroupsFileError(f"{name}, line {line}: {len(row)} cells, the header has "
                                  f"{len(header)}")
        file = row[fi].strip().replace("\\", "/")
        file = file[2:] if file.startswith("./") else file
        file = unescape_csv_text(file)  # copied from cells.csv: '=cell.nwb is =cell.nwb
        group = row[gi].strip()
        if not file or not group:
            raise GroupsFileError(f"{name}, line {line}: the file and its {others[0]} must "
                                  "both be given")
        if mapping.get(file, group) != group:
            raise GroupsFileError(f"{name}, line {line}: {file} is in {mapping[file]!r} "
                                  f"already, now in {group!r}")
        mapping[file] = group
    return Groups(name, others[0], mapping)
