"""The plan of a run: its inputs, the outcomes kept from an earlier run that it reuses, and
the files it must measure."""
from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import printable_name
from ..io import TEXT_SUFFIXES
from .cache import OutcomeCache, file_sha256
from .discovery import search_recordings
from .execute import StopRequest, Task
from .outcome import FileOutcome, failure
from .task import figures_present

__all__ = ["RunPlan", "plan_run", "input_entry"]


@dataclass
class RunPlan:
    """What a run starts from.

    Attributes
    ----------
    entries : list of dict
        run.json's entry of each file found (``path``, ``file``, ``size_bytes``, ``sha256``;
        ``status`` ``reused`` or ``failed`` when known before measuring).
    outcomes : list
        Per file, its outcome when known before measuring (kept, or unreadable), else None.
    tasks : list of Task
        The files to measure.
    failures : list of dict
        Failures of stage ``input`` (paths that do not exist, folders that cannot be searched).
    notes : list of str
    """

    entries: list[dict] = field(default_factory=list)
    outcomes: list[FileOutcome | None] = field(default_factory=list)
    tasks: list[Task] = field(default_factory=list)
    failures: list[dict] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def input_entry(path: Path, shown: str) -> dict:
    """A file's entry in run.json: its name in the tables, its path as text and, when the
    path's bytes are not UTF-8 text (or hold control characters), those bytes in hex, which
    find the real file (``bytes.fromhex``, then ``os.fsdecode``)."""
    text = printable_name(str(path))
    entry = {"path": text, "file": shown}
    if text != str(path):
        entry["path_bytes_hex"] = os.fsencode(path).hex()
    return entry


def plan_run(paths: list[str], out: Path, cache: OutcomeCache, stop: StopRequest, *,
             force: bool, extra_patterns: tuple[str, ...], figures: dict | None) -> RunPlan:
    """Find the recordings under `paths`, hash each and look up its kept outcome (when the
    cache holds none, or with `force`, the files are hashed as their tasks read them).

    A kept outcome is reused unless `force`, or unless figures are asked for and its figures
    are missing or in another format; reused without figures, it lists none.
    """
    plan = RunPlan()
    search = search_recordings(paths, exclude=out, extra_patterns=extra_patterns)
    plan.failures.extend(failure(where, "input", message) for where, message in search.problems)
    plan.notes.extend(search.notes)
    if not search.files and not plan.failures:
        plan.failures.append(failure(", ".join(printable_name(str(p)) for p in paths), "input",
                                     "no recordings found (looked for .nwb, .nix, .txt, .csv "
                                     "and .tsv files; --glob adds other patterns)"))
    # with no kept outcome to look up, each file is hashed while its task reads it
    hash_now = not force and cache.has_kept()
    for k, (path, shown) in enumerate(search.files):
        stop.check()
        entry = input_entry(path, shown)
        plan.entries.append(entry)
        plan.outcomes.append(None)
        try:
            entry.update(size_bytes=path.stat().st_size,
                         sha256=file_sha256(path) if hash_now else None)
        except OSError as exc:
            entry["status"] = "failed"
            reason = exc.strerror or type(exc).__name__  # without the path it quotes
            plan.outcomes[k] = FileOutcome(shown, failures=[failure(shown, "read",
                                                                    f"{shown}: {reason}")])
            continue
        if not hash_now:
            plan.tasks.append(Task(k, path, shown, None, hash_while_reading=True))
            continue
        cache_path = cache.path(entry["sha256"], path.suffix.lower() in TEXT_SUFFIXES)
        kept, note = (None, None) if force else cache.load(cache_path, shown)
        if note:
            plan.notes.append(note)
        if kept is not None and figures and not figures_present(out, kept, shown,
                                                                 figures["format"]):
            kept = None  # its figures are missing or in another format: draw them again
        elif kept is not None and not figures:
            kept.figures = []  # not drawn in this run: not in its report
        if kept is not None:
            plan.outcomes[k] = kept
            entry["status"] = "reused"
        else:
            plan.tasks.append(Task(k, path, shown, cache_path))
    return plan
