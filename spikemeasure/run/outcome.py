"""One file's outcome as typed data: its tables as column arrays, its failures and counts.

A worker returns a :class:`FileOutcome`; its tables
(:class:`~spikemeasure.tables.typed.ColumnTable`) stay numbers until a file is written.
:meth:`FileOutcome.to_data` and
:meth:`FileOutcome.from_data` turn it into JSON data with explicit column types and back,
for the outcome cache; nothing there is evaluated or unpickled.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

from ..columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS
from ..tables.typed import ColumnTable

__all__ = ["FileOutcome", "INTERNAL_ERROR_STAGE", "failure", "internal_error_outcome"]

#: The stage of a file's failure when its task raised an unexpected exception (a bug).
INTERNAL_ERROR_STAGE = "internal error"

def failure(file: str, stage: str, message: str, electrode: str = "") -> dict:
    """One row of errors.csv as a dict (``file``, ``electrode``, ``stage``, ``message``);
    the electrode is "" for a failure of the file as a whole."""
    return {"file": file, "electrode": electrode, "stage": stage, "message": message}


_TABLES = (("spikes", SPIKE_COLUMNS), ("sweeps", SWEEP_COLUMNS), ("cells", CELL_COLUMNS))


@dataclass
class FileOutcome:
    """What measuring one file gave: its three tables (one cell per electrode), its failures
    and counts.

    Attributes
    ----------
    file : str
        The file as the tables name it.
    spikes, sweeps, cells : ColumnTable
        Its rows of spikes.csv, sweeps.csv and cells.csv.
    failures : list of dict
        Rows of errors.csv (``file``, ``electrode``, ``stage``, ``message``; ``traceback``
        for a bug).
    sweep_count, sweeps_measured, spike_count : int
        Sweeps in the file, sweeps measured, spikes found.
    spike_flags : dict
        Flag -> number of spikes carrying it.
    format : str or None
        The file's format, as the reader names it (None when it could not be read).
    figures : list of str
        Its figures, relative to the output folder (each cell's in a folder of its own).
    figure_format : str or None
        The format the figures were asked in (None: none asked).
    input_sha256 : str or None
        The SHA-256 of the file, when its task hashed it while reading it (not kept: the
        kept outcome is named by it).
    """

    file: str
    spikes: ColumnTable = field(default_factory=lambda: ColumnTable.empty(SPIKE_COLUMNS))
    sweeps: ColumnTable = field(default_factory=lambda: ColumnTable.empty(SWEEP_COLUMNS))
    cells: ColumnTable = field(default_factory=lambda: ColumnTable.empty(CELL_COLUMNS))
    failures: list = field(default_factory=list)
    sweep_count: int = 0
    sweeps_measured: int = 0
    spike_count: int = 0
    spike_flags: dict = field(default_factory=dict)
    format: str | None = None
    figures: list = field(default_factory=list)
    figure_format: str | None = None
    input_sha256: str | None = field(default=None, compare=False)

    @property
    def is_internal_error(self) -> bool:
        return any(f.get("stage") == INTERNAL_ERROR_STAGE for f in self.failures)

    def renamed(self, file: str) -> "FileOutcome":
        """The outcome as it reads when its file is named `file` (moved or renamed since)."""
        old = self.file
        return replace(self, file=file, spikes=self.spikes.renamed(file),
                       sweeps=self.sweeps.renamed(file), cells=self.cells.renamed(file),
                       failures=[dict(f, file=file, message=f["message"].replace(old, file, 1))
                                 for f in self.failures])

    def to_data(self) -> dict:
        """JSON data with explicit types (see :meth:`ColumnTable.to_data`)."""
        return {"file": self.file, "format": self.format, "sweeps": self.sweep_count,
                "sweeps_measured": self.sweeps_measured, "spikes": self.spike_count,
                "spike_flags": dict(self.spike_flags), "failures": list(self.failures),
                "figures": list(self.figures), "figure_format": self.figure_format,
                "tables": {name: getattr(self, name).to_data() for name, _ in _TABLES}}

    @classmethod
    def from_data(cls, data) -> "FileOutcome":
        """The inverse of :meth:`to_data`; ValueError when `data` is not of that shape."""
        if not isinstance(data, dict) or not isinstance(data.get("file"), str):
            raise ValueError("not a file's outcome")
        counts = [data.get(k) for k in ("sweeps", "sweeps_measured", "spikes")]
        if not all(isinstance(n, int) and not isinstance(n, bool) for n in counts):
            raise ValueError("the counts are not whole numbers")
        failures = data.get("failures")
        if not isinstance(failures, list) or not all(
                isinstance(f, dict) and all(isinstance(f.get(k), str)
                                            for k in ("file", "electrode", "stage", "message"))
                for f in failures):
            raise ValueError("the failures are not rows of errors.csv")
        flags, figures = data.get("spike_flags"), data.get("figures")
        if not isinstance(flags, dict) or not all(
                isinstance(k, str) and isinstance(v, int) for k, v in flags.items()):
            raise ValueError("the flag counts are not counts")
        if not isinstance(figures, list) or not all(isinstance(p, str) for p in figures):
            raise ValueError("the figures are not paths")
        for key in ("format", "figure_format"):
            if data.get(key) is not None and not isinstance(data[key], str):
                raise ValueError(f"`{key}` is not text")
        tables = data.get("tables")
        if not isinstance(tables, dict):
            raise ValueError("no tables")
        typed = {name: ColumnTable.from_data(tables.get(name), columns)
                 for name, columns in _TABLES}
        return cls(data["file"], failures=failures, sweep_count=counts[0],
                   sweeps_measured=counts[1], spike_count=counts[2], spike_flags=flags,
                   format=data.get("format"), figures=figures,
                   figure_format=data.get("figure_format"), **typed)


def internal_error_outcome(shown: str, exc: BaseException, trace: str) -> FileOutcome:
    """The outcome of a file whose task raised `exc` (a bug): one ``internal error`` failure,
    with the traceback kept for run.json."""
    return FileOutcome(shown, failures=[dict(
        failure(shown, INTERNAL_ERROR_STAGE,
                f"{shown}: internal error ({type(exc).__name__}) while measuring it; the "
                "other files are not affected. This is a bug: please report it with the "
                "traceback in run.json (or run with --debug)"),
        traceback=trace)])
