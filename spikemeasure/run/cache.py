"""Outcomes kept under the output folder, so a rerun measures only what changed.

Each file's outcome is kept as JSON data with explicit column types
(:meth:`FileOutcome.to_data`), named by the file's SHA-256 and a hash of what affects its
outcome (the parameters, the tool's version, the output columns' declarations and the layout
of the kept data), and carries the SHA-256 of its own content, so an edited, damaged or
older copy is never reused. It is read as JSON data only: nothing is evaluated or unpickled.
"""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

from .. import __version__
from ..columns import CELL_COLUMNS, ERROR_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS
from ..io import TEXT_SUFFIXES
from ..io.hashing import sha256_of_file
from ..tables.write import write_text_atomic
from .outcome import FileOutcome

__all__ = ["OutcomeCache", "CACHE_FOLDER", "file_sha256"]

CACHE_FOLDER = ".spikemeasure-cache"
#: The layout of a kept outcome; a new layout never reads an older one.
CACHE_LAYOUT = 3


def file_sha256(path: Path, chunk: int = 1 << 20) -> str:
    """The SHA-256 of a file's bytes, as hex, in a pass of its own (a run that has kept
    outcomes to look up hashes its inputs before measuring; otherwise each file is hashed
    while it is read, :func:`~spikemeasure.io.read.read_recording`'s `hash_input`)."""
    return sha256_of_file(path, chunk)


def columns_hash() -> str:
    """Hash of the output columns' declarations (names, units, decimals, order): a changed
    declaration measures files again."""
    declared = [[(c.name, c.unit, c.decimals) for c in columns]
                for columns in (SPIKE_COLUMNS, SWEEP_COLUMNS, CELL_COLUMNS, ERROR_COLUMNS)]
    return hashlib.sha256(json.dumps(declared).encode()).hexdigest()[:16]


def _content_sha256(data: dict, piece: int = 1 << 20) -> str:
    # json.dumps writes ASCII (non-ASCII escaped): its text hashed a piece at a time is the
    # hash of the whole text's bytes, without a second copy of a long outcome's text
    text = json.dumps(data, sort_keys=True, separators=(",", ":"))
    digest = hashlib.sha256()
    for start in range(0, len(text), piece):
        digest.update(text[start:start + piece].encode())
    return digest.hexdigest()


class OutcomeCache:
    """The kept outcomes of one output folder, for one set of parameters.

    Parameters
    ----------
    out : Path
        The output folder; outcomes are kept in its :data:`CACHE_FOLDER`.
    parameters : dict
        The run's parameters, as :func:`~spikemeasure.run.task.measure_file` takes them.
    """

    def __init__(self, out: Path, parameters: dict) -> None:
        self.folder = Path(out) / CACHE_FOLDER
        self.parameters = parameters

    def parameter_hash(self, is_text: bool) -> str:
        """Hash of what affects a file's outcome: every parameter (the sampling rate option
        only for text files, the only ones it applies to), the tool's version, the output
        columns' declarations and the cache layout."""
        relevant = dict(self.parameters, version=__version__, columns=columns_hash(),
                        layout=CACHE_LAYOUT)
        if not is_text:
            relevant.pop("sampling_rate_hz", None)
        if relevant.get("max_sweep_samples") is None:  # the default
            relevant.pop("max_sweep_samples", None)
        return hashlib.sha256(json.dumps(relevant, sort_keys=True).encode()).hexdigest()[:16]

    def has_kept(self) -> bool:
        """Whether any outcome is kept in the folder (so that inputs are worth hashing
        before they are measured, to look theirs up)."""
        try:
            return any(p.suffix == ".json" for p in self.folder.iterdir())
        except OSError:
            return False

    def path(self, sha256: str, is_text: bool) -> Path:
        """Where the outcome of a file with this content is kept."""
        return self.folder / f"{sha256[:32]}-{self.parameter_hash(is_text)}.json"

    def path_of_read(self, path: Path, outcome: FileOutcome, entry: dict) -> Path | None:
        """Where the outcome of a file hashed while it was read is kept, with run.json's
        `entry` given its ``sha256``; a file its task could not hash (it failed before
        reading it, or its worker died) is hashed now; None when it cannot be read."""
        sha256 = outcome.input_sha256
        if sha256 is None:
            try:
                sha256 = file_sha256(path)
            except OSError:
                return None
        entry["sha256"] = sha256
        return self.path(sha256, Path(path).suffix.lower() in TEXT_SUFFIXES)

    @staticmethod
    def text(outcome: FileOutcome) -> str:
        """A kept outcome's text: its data with the SHA-256 of that data. TypeError or
        ValueError when the outcome is not plain data (a bug in the file's task)."""
        data = outcome.to_data()
        return json.dumps({"content_sha256": _content_sha256(data), "outcome": data},
                          allow_nan=False)

    @staticmethod
    def store(path: Path, text: str) -> None:
        """Keep an outcome's :meth:`text` (atomically); OSError when it cannot be written."""
        write_text_atomic(path, text)

    @staticmethod
    def load(path: Path, shown: str) -> tuple[FileOutcome | None, str | None]:
        """A kept outcome, shown by its name in this run; or None, with a note when the kept
        file is there but not usable (edited, damaged, of another shape)."""
        try:
            text = path.read_text(encoding="utf-8")
        except FileNotFoundError:
            return None, None
        except (OSError, ValueError):
            text = None
        outcome = None
        try:
            kept = json.loads(text) if text is not None else None
            if isinstance(kept, dict) and kept.get("content_sha256") == _content_sha256(
                    kept.get("outcome")):
                outcome = FileOutcome.from_data(kept["outcome"])
        except (ValueError, TypeError, RecursionError):
            outcome = None
        if outcome is None:
            return None, (f"{shown}: its kept outcome ({CACHE_FOLDER}/{path.name}) does not "
                          "match its checksum or is damaged; it was ignored and the file "
                          "measured again")
        # the file may have moved or been renamed since: show it by its name in this run
        return outcome.renamed(shown), None
