"""The output folder of a run: the names of what a run writes there, the checks before a run
writes anything, the lock that keeps two runs apart, and the clean-up of a killed run's
temporaries."""
from __future__ import annotations

import errno
import json
import os
import re
import tempfile
from pathlib import Path

from ..errors import OutputWriteError, UnusableOutputError
from .cache import CACHE_FOLDER
from .task import FIGURES_FOLDER

__all__ = ["SPIKES_FILE", "SWEEPS_FILE", "CELLS_FILE", "ERRORS_FILE", "RUN_RECORD_FILE",
           "REPORT_FILE", "OWN_OUTPUTS", "LOCK_FILE", "prepare_output", "RunLock",
           "remove_stale_temporaries"]

SPIKES_FILE = "spikes.csv"
SWEEPS_FILE = "sweeps.csv"
CELLS_FILE = "cells.csv"
ERRORS_FILE = "errors.csv"
RUN_RECORD_FILE = "run.json"
REPORT_FILE = "report.html"
#: What a run writes in its output folder (besides run.json): a folder holding any of these
#: without this tool's run.json holds files of someone else's, which a run never overwrites.
OWN_OUTPUTS = (SPIKES_FILE, SWEEPS_FILE, CELLS_FILE, ERRORS_FILE, REPORT_FILE, FIGURES_FOLDER,
               CACHE_FOLDER)
LOCK_FILE = ".spikemeasure-run.lock"
#: A temporary file of :mod:`spikemeasure.tables.write` (``.NAME.XXXXXXXX.part``, from mkstemp).
_TEMPORARY_NAME = re.compile(r"^\.(?P<name>.+)\.[A-Za-z0-9_]{8}\.part$")


def _record_kind(path: Path) -> str | None:
    """``"run"`` or ``"accepted"`` for a run.json this tool wrote, None for anything else.
    Read as JSON data only (at most 64 MiB)."""
    try:
        if path.stat().st_size > 1 << 26:
            return None
        record = json.loads(path.read_bytes())
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or record.get("tool") != "spikemeasure":
        return None
    return "accepted" if "accepted" in record else "run"


def _foreign_output_problem(out: Path) -> str | None:
    """Why writing a run into `out` would overwrite files this tool did not write, or None."""
    record = out / RUN_RECORD_FILE
    kind = _record_kind(record) if record.exists() else None
    if kind == "accepted":
        return (f"{out}: holds accepted results (written by `spikemeasure accept`), which a "
                "run would overwrite; give another folder with --out")
    if kind == "run":
        return None
    present = [name for name in (RUN_RECORD_FILE,) + OWN_OUTPUTS
               if (out / name).exists() or (out / name).is_symlink()]
    if not present:
        return None
    return (f"{out}: already holds {', '.join(present)} without a run.json written by "
            "spikemeasure, so they are not results of an earlier run and a run would overwrite "
            "them; give an empty or new folder with --out, or move them away")


class RunLock:
    """An advisory lock on the output folder for the whole run (POSIX ``flock``), so that two
    runs never write the same tables at once; the system drops it when the process ends,
    however it ends. Where ``fcntl`` is missing the run goes on unlocked."""

    def __init__(self, out: Path) -> None:
        self.path = out / LOCK_FILE
        self.fd: int | None = None

    def __enter__(self) -> "RunLock":
        try:
            import fcntl
        except ImportError:  # not POSIX
            return self
        try:
            self.fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise UnusableOutputError(f"{self.path}: cannot create the run's lock file "
                                      f"({exc.strerror or exc})") from exc
        try:
            fcntl.flock(self.fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(self.fd)
            self.fd = None
            raise UnusableOutputError(
                f"{self.path.parent}: another spikemeasure run is writing in this folder; "
                "wait for it to end, or give another folder with --out") from None
        return self

    def __exit__(self, *exc) -> None:
        if self.fd is not None:
            os.close(self.fd)  # releases the lock; the empty file stays for the next run
            self.fd = None


def remove_stale_temporaries(out: Path) -> list[Path]:
    """Remove the temporary files a killed run (SIGKILL, power loss) left beside its outputs.

    Only this tool's own temporaries go: in the output folder, those of its own files
    (``.spikes.csv.XXXXXXXX.part``, ...); in its figures and cache folders, any such
    temporary. Called under the run lock, so no other run is writing them. Returns what was
    removed."""
    own = {SPIKES_FILE, SWEEPS_FILE, CELLS_FILE, ERRORS_FILE, RUN_RECORD_FILE, REPORT_FILE}
    candidates = [p for p in out.glob(".*.part")
                  if (m := _TEMPORARY_NAME.match(p.name)) and m.group("name") in own]
    for folder in (out / FIGURES_FOLDER, out / CACHE_FOLDER):
        if folder.is_dir() and not folder.is_symlink():
            candidates += [p for p in folder.rglob(".*.part") if _TEMPORARY_NAME.match(p.name)]
    removed = []
    for path in candidates:
        try:
            if path.is_file() and not path.is_symlink():
                path.unlink()
                removed.append(path)
        except OSError:
            pass  # left for the next run: a stale temporary harms nothing
    return removed


def prepare_output(out: Path) -> None:
    """Create the output folder and make sure files can be created in it, before anything is
    measured; a path given wrongly, or a folder holding files this tool did not write, is an
    :class:`UnusableOutputError`."""
    for parent in [out, *out.parents]:
        if parent.exists() and not parent.is_dir():
            what = "the output folder" if parent == out else "a folder above it"
            raise UnusableOutputError(f"{out}: cannot use as the output folder: {what}, "
                                      f"{parent}, is a file, not a folder")
    if out.is_dir():
        problem = _foreign_output_problem(out)
        if problem:
            raise UnusableOutputError(problem)
    try:
        out.mkdir(parents=True, exist_ok=True)
        fd, probe = tempfile.mkstemp(prefix=".write-test.", suffix=".part", dir=out)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        if exc.errno in (errno.ENOSPC, errno.EDQUOT):
            raise OutputWriteError(f"{out}: cannot write in the output folder "
                                   f"({exc.strerror}); nothing was measured or written") from exc
        raise UnusableOutputError(f"{out}: cannot create files in the output folder "
                                  f"({exc.strerror or exc}); give a folder you can write to "
                                  "with --out") from exc
