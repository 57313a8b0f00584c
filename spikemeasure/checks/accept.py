"""A run saved as the lab's accepted results, touching only the files it writes.

:func:`accept_results` copies a finished run's tables and a record of its versions,
parameters and inputs into the accepted folder; :func:`accepted_folder_problem` says which
folders it refuses.
"""
from __future__ import annotations

import json
import os
import tempfile
import time
from pathlib import Path
from typing import Sequence

from .run_tables import (RUN_RECORD_FILE, TABLE_FILES, CheckInputError, check_finished,
                         count_of, read_tables, some_of)

__all__ = ["ACCEPTED_FILES", "accepted_folder_problem", "accept_results"]

#: The files ``accept`` writes in the accepted folder, and the only ones it ever replaces.
ACCEPTED_FILES: tuple[str, ...] = tuple(TABLE_FILES) + (RUN_RECORD_FILE,)


def _inside(path: Path, folder: Path) -> bool:
    """True when `path` lies strictly inside `folder` (both resolved)."""
    return folder in path.parents


def _is_accept_record(path: Path) -> bool:
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(record, dict) and record.get("tool") == "spikemeasure" \
        and "accepted" in record


def accepted_folder_problem(accepted_dir: str | os.PathLike, results_dir: str | os.PathLike,
                            project_dir: str | os.PathLike, *,
                            inputs: Sequence[str] = (),
                            extra_patterns: tuple[str, ...] = ()) -> str | None:
    """Why `accepted_dir` must not receive accepted results, or None when it may.

    Parameters
    ----------
    accepted_dir : str or path-like
        The accepted folder (need not exist).
    results_dir : str or path-like
        The run's folder being accepted.
    project_dir : str or path-like
        The project folder: the folder of the project file, or the current folder.
    inputs : list of str, optional
        Paths of the run's recordings (``path`` of run.json's ``inputs``).
    extra_patterns : tuple of str, optional
        Patterns the run's discovery used for other formats (``measure --glob``).

    Returns
    -------
    str or None
        A sentence naming the folder (as given, and resolved when that differs) and the
        reason; None when the folder is safe to write the accepted files in.

    Notes
    -----
    Paths are compared after resolving symlinks and ``..``: an accepted folder that is a
    symlink is judged, and written, as the folder it points to. The folder is refused when it
    is an existing file; is, contains or lies inside the results folder; is the project
    folder or contains it; lies outside the project folder; holds a recording of the run, or
    a file of a binary recording format (NWB, NIX, a ``--glob`` pattern) at any depth (text
    files that are not the run's recordings are taken for notes); or holds a file named like an accepted file that is not one (a
    folder or symlink, or tables without the run.json ``accept`` writes).
    """
    from ..io import TEXT_SUFFIXES
    from ..run.discovery import find_recordings

    given = Path(accepted_dir)
    target = given.resolve()
    name = str(given) if target == given.absolute() else f"{given} (that is {target})"
    results = Path(results_dir).resolve()
    project = Path(project_dir).resolve()
    if target.exists() and not target.is_dir():
        return f"{name}: is a file, not a folder; set accepted_folder to a folder"
    if target == project:
        return (f"{name}: is the project folder itself, which holds the lab's files; set "
                f"accepted_folder to a subfolder of its own, such as \"accepted\"")
    if _inside(project, target):
        return (f"{name}: contains the project folder {project}; set accepted_folder to a "
                f"subfolder of the project folder, such as \"accepted\"")
    if not _inside(target, project):
        return (f"{name}: lies outside the project folder {project} (the folder of "
                f"spikemeasure.toml, or the current folder without one); set accepted_folder "
                f"to a subfolder of the project folder")
    if target == results:
        return f"{name}: is the results folder being accepted; accept into a folder of its own"
    if _inside(target, results):
        return (f"{name}: lies inside the results folder being accepted ({results}), which "
                f"the next run rewrites; accept into a folder of its own")
    if _inside(results, target):
        return (f"{name}: contains the results folder being accepted ({results}); accept "
                f"into a folder of its own")
    for path in inputs:
        recording = Path(path).resolve()
        if _inside(recording, target):
            return (f"{name}: holds recordings of this run ({recording.relative_to(target)}); "
                    f"set accepted_folder to a folder of its own")
    if not target.is_dir():
        return None
    for own in ACCEPTED_FILES:
        entry = target / own
        if entry.is_symlink() or (entry.exists() and not entry.is_file()):
            return (f"{name}: {own} there is not a file accept wrote (a folder or a link); "
                    f"move it away or choose another accepted_folder")
    has_tables = any((target / own).exists() for own in TABLE_FILES)
    if has_tables and not _is_accept_record(target / RUN_RECORD_FILE):
        return (f"{name}: holds tables without the {RUN_RECORD_FILE} `spikemeasure accept` "
                f"writes, so they were not written by accept and would be overwritten; "
                f"choose another accepted_folder, or move them away")
    # Text files of the run were caught above by path; any other .txt or .csv is taken for a
    # note (a lab's notes.txt beside the accepted tables), not for a recording.
    found = [shown for path, shown in find_recordings([target], extra_patterns=extra_patterns)
             if shown not in TABLE_FILES and path.suffix.lower() not in TEXT_SUFFIXES]
    if found:
        return (f"{name}: holds {count_of(len(found), 'file')} that would be taken as "
                f"recordings ({some_of(found)}); set accepted_folder to a folder of its own")
    return None


def accept_results(results_dir: str | os.PathLike, accepted_dir: str | os.PathLike, *,
                   project_dir: str | os.PathLike | None = None,
                   extra_patterns: tuple[str, ...] = ()) -> dict:
    """Save a run's tables as the accepted results, replacing only accept's own files.

    Parameters
    ----------
    results_dir : str or path-like
        A folder holding a finished run's tables.
    accepted_dir : str or path-like
        The accepted folder (created if missing). It must be a folder of its own inside the
        project folder (see :func:`accepted_folder_problem`).
    project_dir : str or path-like, optional
        The project folder (the folder of the project file); default: the current folder.
    extra_patterns : tuple of str, optional
        Patterns the run's discovery used for other formats, for the recordings check.

    Returns
    -------
    dict
        ``files``, ``cells`` (rows of cells.csv), ``sweeps``, ``spikes`` (counts),
        ``failures`` (rows of errors.csv, which are not part of the accepted results),
        ``accepted_dir`` (the folder written, resolved) and ``replaced`` (the names written).

    Raises
    ------
    CheckInputError
        When the tables are missing or unreadable, the run did not finish or its tables and
        run.json disagree (:func:`check_finished`), it names no file, the accepted folder is
        refused (:func:`accepted_folder_problem`), or it cannot be written; the message says
        which files were replaced already, if any.

    Notes
    -----
    Only spikes.csv, sweeps.csv, cells.csv and run.json (the run's versions, parameters and
    inputs, with path and SHA-256) are written, each through a temporary file in the
    accepted folder, flushed to disk; only when all four are written do they replace the
    earlier ones, one by one (``os.replace``). Nothing else in the folder is removed, renamed
    or moved, and nothing outside it is touched.
    """
    for label, value in (("results_dir", results_dir), ("accepted_dir", accepted_dir)):
        if not isinstance(value, (str, os.PathLike)):
            raise TypeError(f"{label} must be a path (got {type(value).__name__})")
    tables = read_tables(results_dir, suggest_out=False)
    check_finished(tables)
    if not tables.files():
        raise CheckInputError(f"{results_dir}: the run's tables name no file; there is "
                              f"nothing to accept")
    inputs = [str(i["path"]) for i in tables.record.get("inputs", [])
              if isinstance(i, dict) and isinstance(i.get("path"), str)]
    problem = accepted_folder_problem(accepted_dir, results_dir,
                                      project_dir if project_dir is not None else Path.cwd(),
                                      inputs=inputs, extra_patterns=tuple(extra_patterns))
    if problem:
        raise CheckInputError(f"{problem}; nothing was written")
    source = Path(results_dir)
    target = Path(accepted_dir).resolve()
    record = {
        "tool": "spikemeasure",
        "accepted": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        "versions": tables.record.get("versions"),
        "config_file": tables.record.get("config_file"),
        "parameters": tables.record.get("parameters"),
        "inputs": [{k: i.get(k) for k in ("file", "sha256", "size_bytes", "status")}
                   for i in tables.record.get("inputs", [])],
    }
    contents = []
    for name in TABLE_FILES:
        try:
            contents.append((name, (source / name).read_bytes()))
        except OSError as exc:
            raise CheckInputError(f"{source / name}: cannot be read ({exc.strerror or exc})"
                                  ) from exc
    contents.append((RUN_RECORD_FILE,
                     (json.dumps(record, indent=2, default=str) + "\n").encode("utf-8")))
    try:
        target.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise CheckInputError(f"{target}: cannot create the accepted folder "
                              f"({exc.strerror or exc}); nothing was written") from exc
    replaced = _replace_files(target, contents)
    failures = [dict(zip(tables.errors, row)) for row in zip(*tables.errors.values())]
    return {"files": len(set(tables.cells["file"])), "cells": len(tables.cells["file"]),
            "sweeps": len(tables.sweeps["file"]),
            "spikes": len(tables.spikes["file"]), "failures": failures,
            "accepted_dir": str(target), "replaced": replaced}


def _replace_files(folder: Path, contents: list[tuple[str, bytes]]) -> list[str]:
    """Write every file to a temporary file in `folder` (fsync), then replace them one by one.

    On failure, removes the temporary files it made and raises CheckInputError saying which
    files were replaced already."""
    umask = os.umask(0)
    os.umask(umask)
    staged: list[tuple[str, str]] = []
    replaced: list[str] = []
    try:
        for name, data in contents:
            fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".part", dir=folder)
            staged.append((name, tmp))
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
            os.chmod(tmp, 0o666 & ~umask)  # as an ordinary new file: mkstemp's is private
        for name, tmp in staged:
            os.replace(tmp, folder / name)
            replaced.append(name)
    except OSError as exc:
        for name, tmp in staged:
            if name not in replaced:
                try:
                    os.unlink(tmp)
                except OSError:
                    pass
        if replaced:
            done = (f"{', '.join(replaced)} {'was' if len(replaced) == 1 else 'were'} replaced "
                    f"already, the other files keep their earlier content; fix the cause and "
                    f"accept again")
        else:
            done = "nothing was replaced"
        raise CheckInputError(f"{folder}: cannot write the accepted results "
                              f"({exc.strerror or exc}); {done}") from exc
    try:  # the renames themselves reach the disk
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
    except OSError:
        pass
    return replaced
