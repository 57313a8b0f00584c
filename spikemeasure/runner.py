"""Measure a list of files and folders into an output folder: the job behind ``measure``.

One bad file never stops the run: its error is recorded and the others go on. The spike
table and the run record are written atomically at the end.
"""
from __future__ import annotations

import hashlib
import platform
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from . import __version__
from .detection import DetectionSettings
from .errors import SpikemeasureError
from .output import write_json, write_table_csv
from .reading import find_recordings, read_recording
from .columns import CELL_COLUMNS, SWEEP_COLUMNS
from .tables import (cell_summary, cell_table, count_spikes, flag_counts, measure_recording,
                     spike_table, sweep_table)

__all__ = ["RunSummary", "measure_paths", "file_sha256", "SPIKES_FILE", "SWEEPS_FILE", "CELLS_FILE",
           "RUN_RECORD_FILE"]

SPIKES_FILE = "spikes.csv"
SWEEPS_FILE = "sweeps.csv"
CELLS_FILE = "cells.csv"
RUN_RECORD_FILE = "run.json"


@dataclass
class RunSummary:
    """What a run did: files measured, spikes found, and every failure with its reason."""

    out_dir: Path
    files_measured: int = 0
    sweeps_measured: int = 0
    spikes: int = 0
    failures: list[dict] = field(default_factory=list)
    inputs: list[dict] = field(default_factory=list)

    @property
    def nothing_measured(self) -> bool:
        return self.sweeps_measured == 0

    @property
    def spikes_path(self) -> Path:
        return self.out_dir / SPIKES_FILE

    @property
    def sweeps_path(self) -> Path:
        return self.out_dir / SWEEPS_FILE

    @property
    def cells_path(self) -> Path:
        return self.out_dir / CELLS_FILE

    @property
    def record_path(self) -> Path:
        return self.out_dir / RUN_RECORD_FILE


def file_sha256(path: Path, chunk: int = 1 << 20) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk), b""):
            digest.update(block)
    return digest.hexdigest()


def _count(n: int, noun: str) -> str:
    return f"{n} {noun}" + ("" if n == 1 else "s")


def _versions() -> dict:
    import numpy
    import scipy

    try:
        from importlib.metadata import version
        neo_version = version("neo")
    except Exception:  # metadata missing in an odd install: say so rather than fail the run
        neo_version = "unknown"
    return {"spikemeasure": __version__, "python": platform.python_version(),
            "numpy": numpy.__version__, "scipy": scipy.__version__, "neo": neo_version}


def measure_paths(paths: list[str], out_dir: str | Path,
                  settings: DetectionSettings = DetectionSettings(), *,
                  step_times: tuple[float, float] | None = None,
                  step_sizes: tuple[float, float] | None = None,
                  sampling_rate_hz: float | None = None,
                  progress: Callable[[str], None] | None = None) -> RunSummary:
    """Measure every recording under `paths` and write spikes.csv and run.json to `out_dir`.

    Parameters
    ----------
    paths : list of str
        Files and folders (searched recursively).
    out_dir : str or Path
        Created if missing; skipped when searching an input folder that contains it.
    settings : DetectionSettings
    step_times : (start_s, end_s), optional
        The current step for sweeps without a command channel.
    step_sizes : (first_pa, increment_pa), optional
        With `step_times`: the step sizes of such sweeps, by sweep index.
    sampling_rate_hz : float, optional
        For text files without a time column.
    progress : callable, optional
        Called with one line of text per file.

    Returns
    -------
    RunSummary
    """
    out = Path(out_dir)
    say = progress or (lambda line: None)
    started = time.time()
    summary = RunSummary(out_dir=out)
    all_results = []
    cells = []
    files = find_recordings(paths, exclude=out)
    for given in paths:
        if not Path(given).exists():
            summary.failures.append({"file": str(given), "sweep": None,
                                     "message": f"{given}: no such file or folder"})
    if not files and not summary.failures:
        summary.failures.append({"file": ", ".join(map(str, paths)), "sweep": None,
                                 "message": "no recordings found (looked for NWB, NIX, text "
                                            "and other formats neo reads)"})
    for path, shown in files:
        entry = {"path": str(path), "file": shown}
        if path.exists() and path.is_file():
            entry.update(size_bytes=path.stat().st_size, sha256=file_sha256(path))
        try:
            recording = read_recording(path, shown_as=shown, sampling_rate_hz=sampling_rate_hz)
        except SpikemeasureError as exc:
            entry["status"] = "failed"
            summary.inputs.append(entry)
            summary.failures.append({"file": shown, "sweep": None, "message": str(exc)})
            say(f"failed   {exc}")
            continue
        results = measure_recording(recording, settings, step_times, step_sizes)
        measured = [r for r in results if r.error is None]
        for problem in recording.problems:
            summary.failures.append({"file": shown, "sweep": None, "message": problem})
        for r in results:
            if r.error:
                summary.failures.append({"file": shown, "sweep": r.sweep.index,
                                         "message": r.error})
        n_spikes = count_spikes(results)
        flagged = flag_counts(results)
        entry.update(format=recording.format, sweeps=len(recording.sweeps),
                     sweeps_measured=len(measured), spikes=n_spikes, spike_flags=flagged,
                     status="measured" if measured else "failed")
        summary.inputs.append(entry)
        if measured:
            cells.append((shown, cell_summary(results)))
            summary.files_measured += 1
            summary.sweeps_measured += len(measured)
            summary.spikes += n_spikes
        all_results.extend(results)
        skipped = len(results) - len(measured) + len(recording.problems)
        notes = [_count(skipped, "sweep") + " skipped"] if skipped else []
        notes += [f"{_count(count, 'spike')} {flag}" for flag, count in sorted(flagged.items())]
        say(f"measured {shown}: {_count(len(measured), 'sweep')}, {_count(n_spikes, 'spike')}"
            + (f" ({'; '.join(notes)})" if notes else ""))
    record = {
        "tool": "spikemeasure",
        "versions": _versions(),
        "command": sys.argv,
        "started": time.strftime("%Y-%m-%dT%H:%M:%S%z", time.localtime(started)),
        "seconds": round(time.time() - started, 3),
        "parameters": {**settings.as_dict(),
                       "step_s": list(step_times) if step_times else None,
                       "step_sizes_pa": list(step_sizes) if step_sizes else None,
                       "sampling_rate_hz": sampling_rate_hz},
        "inputs": summary.inputs,
        "failures": summary.failures,
        "totals": {"files_measured": summary.files_measured,
                   "sweeps_measured": summary.sweeps_measured, "spikes": summary.spikes},
    }
    # always written, header only when nothing was measured, so no stale table survives
    write_table_csv(summary.spikes_path, spike_table(all_results))
    write_table_csv(summary.sweeps_path, sweep_table(all_results), SWEEP_COLUMNS)
    write_table_csv(summary.cells_path, cell_table(cells), CELL_COLUMNS)
    write_json(summary.record_path, record)
    return summary
