"""Finding the recordings among the files and folders given, each once and by a distinct name.

Folders are searched for the open formats (:data:`~spikemeasure.io.RECORDING_SUFFIXES`) and
for files matching the patterns given; nothing is read here but folder listings and the
``run.json`` that tells a folder of this tool's own tables.
"""
from __future__ import annotations

import json
import os
import re
import stat
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InvalidSettingError, UnreadableInputError, printable_name
from ..io import RECORDING_SUFFIXES
from ..io.messages import os_reason

__all__ = ["is_temporary", "RecordingSearch", "search_recordings", "find_recordings",
           "GROUPS_FILE_SUFFIX"]

#: A file whose name ends so is a groups file (:func:`spikemeasure.report.read_groups`) kept
#: beside the recordings, never taken for a recording in a folder.
GROUPS_FILE_SUFFIX = ".groups.csv"

_TEMPORARY = re.compile(r"^(~|\.~|\.#)|(~|\.tmp|\.temp|\.part|\.swp|\.crdownload|\.partial)$",
                        re.IGNORECASE)


def is_temporary(name: str) -> bool:
    """Editor, download and copy leftovers (``~$x``, ``x~``, ``x.tmp``, ``x.part``, ...).

    Parameters
    ----------
    name : str
        A file name (not a path).

    Returns
    -------
    bool
    """
    if not isinstance(name, str):
        raise InvalidSettingError(f"`name` must be a str (got {type(name).__name__})")
    return bool(_TEMPORARY.search(name))


@dataclass
class RecordingSearch:
    """What :func:`search_recordings` found.

    Attributes
    ----------
    files : list of (Path, str)
        Each recording once: the path to read it by, and its name in every output (distinct
        from every other file's, valid UTF-8, printable; see :func:`search_recordings`).
    problems : list of (str, str)
        Paths that could not be searched or were not followed: (the path as a printable
        name, what is wrong). Each is a failure of the run.
    notes : list of str
        Messages that are not failures (a file reached twice, measured once).
    """

    files: list[tuple[Path, str]] = field(default_factory=list)
    problems: list[tuple[str, str]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def _inside(path: str, folder: str) -> bool:
    return path == folder or path.startswith(folder.rstrip(os.sep) + os.sep)


@dataclass
class _Found:
    path: Path
    unit: int          # which given path it came from
    base: tuple        # the given folder's absolute parts (a given file: its folder's)
    rel: tuple         # parts shown at least (a given file: its name)
    identity: tuple    # (device, inode): the same file reached twice is measured once
    via_link: bool = False  # reached through a symbolic link in a folder searched


def _holds_own_output(folder: str) -> bool:
    """Whether `folder` is a results or accepted folder of this tool: its CSV tables are not
    recordings. Told by its run.json (read as JSON data, at most 64 MiB), never by its name."""
    record = os.path.join(folder, "run.json")
    try:
        if os.path.getsize(record) > 1 << 26:
            return False
        with open(record, "rb") as fh:
            data = json.loads(fh.read())
    except (OSError, ValueError):
        return False
    return isinstance(data, dict) and data.get("tool") == "spikemeasure"


def _walk_folder(given: Path, unit: int, root_real: str, skip: str | None, wanted,
                 search: RecordingSearch) -> list[_Found]:
    """Every wanted file under `given`, by os.scandir: a folder that cannot be entered and a
    symbolic link leading out of `given` are problems, never skipped in silence."""
    base = Path(os.path.abspath(given)).parts[1:]
    found: list[_Found] = []
    seen_folders = {root_real}
    stack: list[tuple[Path, tuple, bool]] = [(given, (), False)]
    while stack:
        folder, rel, linked = stack.pop()
        try:
            with os.scandir(folder) as it:
                entries = sorted(it, key=lambda e: e.name)
        except OSError as exc:
            search.problems.append((printable_name(str(folder)),
                                    f"{printable_name(str(folder))}: cannot search this folder "
                                    f"({os_reason(exc)}); its files are not measured"))
            continue
        for entry in entries:
            name = entry.name
            if name.startswith("."):
                continue  # hidden files and folders
            shown = printable_name(os.path.join(str(folder), name))
            try:
                link = entry.is_symlink()
                target = os.path.realpath(entry.path) if link else None
                is_dir = os.path.isdir(target) if link else entry.is_dir(follow_symlinks=False)
                if not is_dir and (name.lower().startswith("readme") or is_temporary(name)
                                   or name.lower().endswith(GROUPS_FILE_SUFFIX)
                                   or not wanted(rel + (name,), name)):
                    continue
                if link and not _inside(target, root_real):
                    search.problems.append((shown, (
                        f"{shown}: a symbolic link to outside the folder searched; not "
                        "followed (give the file itself on the command line to measure it)")))
                    continue
                if link and not os.path.exists(target):
                    search.problems.append((shown, f"{shown}: a symbolic link to a path that "
                                                   "does not exist"))
                    continue
                real = target if link else os.path.realpath(entry.path)
                if skip is not None and _inside(real, skip):
                    continue  # the output folder
                if is_dir and _holds_own_output(real):
                    search.notes.append(f"{shown}: holds tables spikemeasure wrote (a results "
                                        "or accepted folder); not searched for recordings")
                    continue
                if is_dir:
                    if real not in seen_folders:  # else reached twice, through a link
                        seen_folders.add(real)
                        stack.append((Path(entry.path), rel + (name,), linked or link))
                    continue
                st = entry.stat()
                if not stat.S_ISREG(st.st_mode):
                    search.problems.append((shown, f"{shown}: not a regular file (a pipe, "
                                                   "socket or device); not read"))
                    continue
            except OSError as exc:
                search.problems.append((shown, f"{shown}: cannot be looked at "
                                               f"({os_reason(exc)})"))
                continue
            found.append(_Found(Path(entry.path), unit, base, rel + (name,),
                                (st.st_dev, st.st_ino), linked or link))
    found.sort(key=lambda f: "/".join(f.rel))  # as a path: "a b/x" before "a/x"
    return found


def _display(parts: tuple) -> str:
    return printable_name("/".join(parts))


def _distinct_names(found: list[_Found]) -> list[str]:
    """Each file's shown name: its name (a given file) or its path relative to the given
    folder; where two files would share a name, the files of those given paths are named by
    as many more of their folders as tells them apart (``day1/cell.nwb``,
    ``day2/cell.nwb``). Names still alike (escaped bytes alike to typed text) get `` (2)``,
    `` (3)``, ... in order."""
    depth: dict[int, int] = {f.unit: 0 for f in found}
    max_depth = {f.unit: len(f.base) for f in found}

    def name(f: _Found) -> str:
        d = depth[f.unit]
        return _display((f.base[len(f.base) - d:] if d else ()) + f.rel)

    while True:
        names = [name(f) for f in found]
        by_name: dict[str, set[int]] = {}
        for f, n in zip(found, names):
            by_name.setdefault(n, set()).add(f.unit)
        clashing = {u for units in by_name.values() if len(units) > 1 for u in units}
        grow = [u for u in clashing if depth[u] < max_depth[u]]
        if not grow:
            break
        for u in grow:
            depth[u] += 1
    out, used = [], set()
    for n in names:
        candidate, k = n, 1
        while candidate in used:
            k += 1
            candidate = f"{n} ({k})"
        used.add(candidate)
        out.append(candidate)
    return out


def search_recordings(paths, *, exclude: str | os.PathLike | None = None,
                      extra_patterns: tuple[str, ...] = ()) -> RecordingSearch:
    """Expand files and folders into recordings, each once and by a distinct name.

    Parameters
    ----------
    paths : iterable of path-like
        Files are taken as given (a symbolic link is followed) and shown by their file name.
        Folders are searched recursively for the open formats (:data:`RECORDING_SUFFIXES`:
        NWB, NIX, text) and for files matching any of `extra_patterns`; each is shown by its
        path relative to that folder.
    exclude : path-like, optional
        A folder to skip (the output folder).
    extra_patterns : tuple of str, optional
        Glob patterns (``*.dat``, ``cells/**/*.dat``) matched against the path relative to the
        folder and against the file name, for other formats neo reads.

    Returns
    -------
    RecordingSearch

    Notes
    -----
    - Hidden files and folders, README files, groups files (:data:`GROUPS_FILE_SUFFIX`) and
      temporary files (:func:`is_temporary`) are skipped. Files are sorted by their relative
      path, so the order is the same on every run.
    - In a folder, a symbolic link is followed only when its target lies inside the folder
      given; any other is a problem ("not followed"), as is a folder that cannot be entered
      or listed (no permission, a path longer than the system allows), a path given that does
      not exist, and a file that is not a regular file (a pipe, a device).
    - The same file reached twice (given twice, given and found in a folder, through a link
      or a second hard link) is measured once, under the first name; a note says so.
    - Names are distinct: when two files would be shown alike (``day1/cell.nwb`` and
      ``day2/cell.nwb`` given, or two folders each holding ``cell.nwb``), the files of each
      of those given paths are shown with as many of the given path's folders as tell them
      apart. Bytes of a name that are not UTF-8 are shown as ``\\xNN``, characters that are
      not printable as backslash escapes (:func:`~spikemeasure.errors.printable_name`); the
      file is still read by its real path.
    """
    from fnmatch import fnmatch

    def wanted(rel: tuple, name: str) -> bool:
        posix = "/".join(rel)
        return Path(name).suffix.lower() in RECORDING_SUFFIXES or any(
            fnmatch(posix, p) or fnmatch(name, p) for p in extra_patterns)

    search = RecordingSearch()
    skip = os.path.realpath(exclude) if exclude is not None else None
    found: list[_Found] = []
    for unit, given in enumerate(paths):
        g = Path(given)
        shown = printable_name(str(given))
        try:
            st = os.stat(g)
        except FileNotFoundError:
            search.problems.append((shown, f"{shown}: no such file or folder"))
            continue
        except OSError as exc:
            search.problems.append((shown, f"{shown}: cannot be looked at ({os_reason(exc)})"))
            continue
        if stat.S_ISDIR(st.st_mode):
            found.extend(_walk_folder(g, unit, os.path.realpath(g), skip, wanted, search))
        elif stat.S_ISREG(st.st_mode):
            absolute = Path(os.path.abspath(g)).parts[1:]
            found.append(_Found(g, unit, absolute[:-1], absolute[-1:], (st.st_dev, st.st_ino)))
        else:
            search.problems.append((shown, f"{shown}: not a regular file (a pipe, socket or "
                                           "device); not read"))
    # each file once: by the first path given that holds it, and there by its own path
    # rather than through a link
    best: dict[tuple, _Found] = {}
    for f in found:
        other = best.get(f.identity)
        if other is None or (f.unit, f.via_link, f.rel) < (other.unit, other.via_link, other.rel):
            best[f.identity] = f
    kept = [f for f in found if best[f.identity] is f]
    again = [(f, best[f.identity]) for f in found if best[f.identity] is not f]
    names = _distinct_names(kept)
    name_of = {id(f): n for f, n in zip(kept, names)}
    for f, original in again:
        search.notes.append(f"{printable_name(str(f.path))}: the same file as "
                            f"{name_of[id(original)]}; measured once")
    search.files = [(f.path, n) for f, n in zip(kept, names)]
    return search


def find_recordings(paths, *, exclude: str | os.PathLike | None = None,
                    extra_patterns: tuple[str, ...] = ()) -> list[tuple[Path, str]]:
    """Expand files and folders into (path, name to show) pairs, in a stable order.

    The files of :func:`search_recordings`, which takes the same arguments and says more.

    Raises
    ------
    UnreadableInputError
        When a path given or a folder in it cannot be searched, or a link was not followed
        (:attr:`RecordingSearch.problems`; the message names the first of them).
    """
    search = search_recordings(paths, exclude=exclude, extra_patterns=extra_patterns)
    if search.problems:
        more = len(search.problems) - 1
        raise UnreadableInputError(search.problems[0][1] + (f" (and {more} more)" if more
                                                            else ""))
    return search.files
