"""Measure files and folders into an output folder: the job behind ``spikemeasure measure``.

- Each file is one task, run in this process (``jobs=1``) or in a pool of processes; its
  rows come back as formatted text and are laid out in file order, so the tables are
  byte-identical whatever the number of jobs.
- One bad file never stops the run: its failure is recorded (``errors.csv``, ``run.json``)
  and the others go on.
- Each file's outcome is kept in a cache under the output folder, named by the file's SHA-256
  and a hash of the parameters that affect it (and the tool's version). A rerun reuses the
  outcomes of unchanged files and measures only the rest; ``force=True`` redoes all.
- Tables are written atomically, again every few seconds during a long run and at the end
  (also after Ctrl-C), so an interrupted run leaves complete tables for the files finished.
- Figures (optional) are drawn in each file's task while its recording is in memory, into
  ``figures/<file>/``; the batch figure and ``report.html`` are written at the end of the run
  (also after Ctrl-C), from the outcomes. Figure options never change the tables, and are not
  part of the parameter hash: a kept outcome whose figures are missing (or in another format)
  is measured again only when figures are asked for.
"""
from __future__ import annotations

import hashlib
import json
import os
import platform
import signal
import sys
import threading
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from . import __version__
from .columns import CELL_COLUMNS, ERROR_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS
from .detection import DetectionSettings
from .errors import InvalidSettingError, SpikemeasureError, printable_name
from .output import write_json, write_rows_csv, write_text_atomic
from .reading import TEXT_SUFFIXES, read_recording, search_recordings
from .tables import (cell_summary, cell_table, count_spikes, flag_counts, format_rows,
                     measure_recording, spike_table, sweep_table)

__all__ = ["RunSummary", "measure_paths", "measure_file", "file_sha256", "SPIKES_FILE",
           "SWEEPS_FILE", "CELLS_FILE", "ERRORS_FILE", "RUN_RECORD_FILE", "CACHE_FOLDER",
           "FIGURES_FOLDER", "REPORT_FILE", "cell_figure_folder"]

SPIKES_FILE = "spikes.csv"
SWEEPS_FILE = "sweeps.csv"
CELLS_FILE = "cells.csv"
ERRORS_FILE = "errors.csv"
RUN_RECORD_FILE = "run.json"
CACHE_FOLDER = ".spikemeasure-cache"
FIGURES_FOLDER = "figures"
REPORT_FILE = "report.html"
#: Tables are rewritten at most this often (s) during a run, so a killed run loses little.
TABLE_REFRESH_S = 5.0


@dataclass
class RunSummary:
    """What a run did: files measured or reused, spikes found, every failure with its reason."""

    out_dir: Path
    files_measured: int = 0
    files_reused: int = 0
    files_failed: int = 0
    sweeps_measured: int = 0
    spikes: int = 0
    failures: list[dict] = field(default_factory=list)
    inputs: list[dict] = field(default_factory=list)
    interrupted: bool = False
    notes: list[str] = field(default_factory=list)

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
    def errors_path(self) -> Path:
        return self.out_dir / ERRORS_FILE

    @property
    def record_path(self) -> Path:
        return self.out_dir / RUN_RECORD_FILE

    @property
    def report_path(self) -> Path:
        return self.out_dir / REPORT_FILE


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


def _failure(file: str, stage: str, message: str) -> dict:
    return {"file": file, "stage": stage, "message": message}


def _input_entry(path: Path, shown: str) -> dict:
    """A file's entry in run.json: its name in the tables, its path as text and, when the
    path's bytes are not UTF-8 text (or hold control characters), those bytes in hex, which
    find the real file (``bytes.fromhex``, then ``os.fsdecode``)."""
    text = printable_name(str(path))
    entry = {"path": text, "file": shown}
    if text != str(path):
        entry["path_bytes_hex"] = os.fsencode(path).hex()
    return entry


def cell_figure_folder(shown: str) -> str:
    """Where a file's figures go, relative to the output folder (``/`` separated)."""
    from .figures import figure_folder_name  # matplotlib itself is imported only to draw

    return f"{FIGURES_FOLDER}/{figure_folder_name(shown)}"


def measure_file(path: str, shown: str, parameters: dict, figures: dict | None = None) -> dict:
    """Read and measure one file; its outcome as plain data (formatted rows, failures, counts).

    Runs in a worker process as well as in this one, so it takes and returns plain values.
    With `figures` (``{"out": output folder, "format": "png"}``) the cell's figures are
    written too, and listed in the outcome (``figures``: paths relative to the output folder).
    """
    settings = DetectionSettings(**parameters["settings"])
    step_times = tuple(parameters["step_s"]) if parameters.get("step_s") else None
    step_sizes = tuple(parameters["step_sizes_pa"]) if parameters.get("step_sizes_pa") else None
    outcome = {"file": shown, "failures": [], "spike_rows": [], "sweep_rows": [],
               "cell_rows": [], "sweeps": 0, "sweeps_measured": 0, "spikes": 0,
               "spike_flags": {}, "format": None, "figures": [],
               "figure_format": figures["format"] if figures else None}
    try:
        recording = read_recording(path, shown_as=shown,
                                   sampling_rate_hz=parameters.get("sampling_rate_hz"),
                                   max_sweep_samples=parameters.get("max_sweep_samples"))
    except SpikemeasureError as exc:
        outcome["failures"].append(_failure(shown, "read", str(exc)))
        return outcome
    with recording:  # open until its figures are drawn: long sweeps are read from it
        results = measure_recording(recording, settings, step_times, step_sizes)
        measured = [r for r in results if r.error is None]
        for problem in recording.problems:
            outcome["failures"].append(_failure(shown, "read", problem))
        for r in results:
            if r.error:
                outcome["failures"].append(_failure(shown, f"sweep {r.sweep.index}", r.error))
        outcome.update(format=recording.format, sweeps=len(recording.sweeps),
                       sweeps_measured=len(measured), spikes=count_spikes(results),
                       spike_flags=flag_counts(results))
        outcome["spike_rows"] = format_rows(spike_table(results), SPIKE_COLUMNS)
        outcome["sweep_rows"] = format_rows(sweep_table(results), SWEEP_COLUMNS)
        if measured:
            cell = cell_summary(results)
            outcome["cell_rows"] = format_rows(cell_table([(shown, cell)]), CELL_COLUMNS)
            if figures:
                outcome["figures"] = _cell_figures(recording, results, cell, settings, shown,
                                                   figures, outcome["failures"])
    return outcome


def _cell_figures(recording, results, cell, settings: DetectionSettings, shown: str,
                  figures: dict, failures: list[dict]) -> list[str]:
    """Draw one cell's figures while its recording is in memory; their paths, relative to the
    output folder. A figure that cannot be written (disk full, permissions) is a failure of
    the file's ``figures`` stage; its tables stand."""
    from .figures import write_cell_figures

    folder = cell_figure_folder(shown)
    try:
        names = write_cell_figures(recording, results, Path(figures["out"]) / folder,
                                   figures["format"], settings=settings, cell=cell)
    except OSError as exc:
        failures.append(_failure(shown, "figures", f"{shown}: cannot write its figures ({exc})"))
        return []
    return [f"{folder}/{name}" for name in names]


def _figures_present(out: Path, outcome: dict, shown: str, fmt: str) -> bool:
    """Whether a kept outcome's figures are those this run asks for, and all on disk."""
    if outcome.get("figure_format") != fmt:
        return False
    folder = cell_figure_folder(shown)
    listed = outcome.get("figures") or []
    if outcome.get("sweeps_measured") and not listed:
        return False
    return all(p.startswith(folder + "/") and p.endswith("." + fmt) and (out / p).is_file()
               for p in listed)


class _StopRequest:
    """Ctrl-C during a run: the first one lets the file being measured finish and stops at the
    next file boundary (so no library half-way through a read can swallow or mangle it); a
    second one stops at once. Only in the main thread, where signals are delivered."""

    def __init__(self) -> None:
        self.requested = False
        self._previous = None

    def __enter__(self) -> "_StopRequest":
        if threading.current_thread() is threading.main_thread():
            self._previous = signal.signal(signal.SIGINT, self._handle)
        return self

    def _handle(self, signum, frame) -> None:
        if self.requested:
            raise KeyboardInterrupt
        self.requested = True

    def check(self) -> None:
        if self.requested:
            raise KeyboardInterrupt

    def __exit__(self, *exc) -> None:
        if self._previous is not None:
            signal.signal(signal.SIGINT, self._previous)


def _ignore_interrupts() -> None:
    """Worker processes leave Ctrl-C to the parent, which stops the run cleanly."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _parameter_hash(parameters: dict, is_text: bool) -> str:
    """Hash of what affects a file's outcome: every parameter (the sampling rate option only
    for text files, the only ones it applies to) and the tool's version."""
    relevant = dict(parameters, version=__version__)
    if not is_text:
        relevant.pop("sampling_rate_hz", None)
    if relevant.get("max_sweep_samples") is None:  # the default: outcomes kept before it stay
        relevant.pop("max_sweep_samples", None)
    return hashlib.sha256(json.dumps(relevant, sort_keys=True).encode()).hexdigest()[:16]


def _cache_path(out: Path, sha: str, parameter_hash: str) -> Path:
    return out / CACHE_FOLDER / f"{sha[:32]}-{parameter_hash}.json"


def _load_cached(path: Path, shown: str) -> dict | None:
    try:
        outcome = json.loads(path.read_text())
    except (OSError, ValueError):
        return None  # absent or damaged: measure again
    if not isinstance(outcome, dict) or "spike_rows" not in outcome:
        return None
    # the file may have moved or been renamed since: show it by its name in this run
    outcome = dict(outcome, file=shown)
    for table in ("spike_rows", "sweep_rows", "cell_rows"):
        outcome[table] = [[shown] + row[1:] for row in outcome[table]]
    outcome["failures"] = [dict(f, file=shown, message=f["message"].replace(
        f["file"], shown, 1)) for f in outcome["failures"]]
    return outcome


def _describe(outcome: dict) -> str:
    shown = outcome["file"]
    if not outcome["sweeps_measured"]:
        return f"failed   {outcome['failures'][0]['message']}" if outcome["failures"] else \
            f"failed   {shown}"
    skipped = len(outcome["failures"])
    notes = [_count(skipped, "problem")] if skipped else []
    notes += [f"{_count(c, 'spike')} {flag}" for flag, c in sorted(outcome["spike_flags"].items())]
    return (f"measured {shown}: {_count(outcome['sweeps_measured'], 'sweep')}, "
            f"{_count(outcome['spikes'], 'spike')}" + (f" ({'; '.join(notes)})" if notes else ""))


def _write_tables(summary: RunSummary, outcomes: list[dict | None], early: list[dict]) -> None:
    done = [o for o in outcomes if o is not None]
    rows = {name: [r for o in done for r in o[name]] for name in
            ("spike_rows", "sweep_rows", "cell_rows")}
    write_rows_csv(summary.spikes_path, SPIKE_COLUMNS, rows["spike_rows"])
    write_rows_csv(summary.sweeps_path, SWEEP_COLUMNS, rows["sweep_rows"])
    write_rows_csv(summary.cells_path, CELL_COLUMNS, rows["cell_rows"])
    failures = early + [f for o in done for f in o["failures"]]
    write_rows_csv(summary.errors_path, ERROR_COLUMNS,
                   [[f["file"], f["stage"], f["message"]] for f in failures])


def measure_paths(paths: list[str], out_dir: str | Path,
                  settings: DetectionSettings = DetectionSettings(), *,
                  step_times: tuple[float, float] | None = None,
                  step_sizes: tuple[float, float] | None = None,
                  sampling_rate_hz: float | None = None, max_sweep_samples: int | None = None,
                  jobs: int = 1, force: bool = False,
                  extra_patterns: tuple[str, ...] = (), config_file: str | None = None,
                  cluster: str | None = None, cluster_timeout_s: float = 20.0,
                  figure_format: str | None = None, groups=None,
                  progress: Callable[[dict], None] | None = None) -> RunSummary:
    """Measure every recording under `paths`; write spikes.csv, sweeps.csv, cells.csv,
    errors.csv and run.json to `out_dir`.

    Parameters
    ----------
    paths : list of str
        Files and folders (searched recursively; see
        :func:`~spikemeasure.reading.search_recordings`: how files are named, each once;
        folders that cannot be searched and links not followed are failures of stage
        ``input``, files reached twice a note).
    out_dir : str or Path
        Created if missing; skipped when searching an input folder that contains it.
    settings : DetectionSettings
    step_times : (start_s, end_s), optional
        The current step for sweeps without a command channel.
    step_sizes : (first_pa, increment_pa), optional
        With `step_times`: the step sizes of such sweeps, by sweep index.
    sampling_rate_hz : float, optional
        For text files without a time column.
    max_sweep_samples : int, optional
        Sweeps declaring more samples are refused before they are read (default
        :data:`spikemeasure.reading.DEFAULT_MAX_SWEEP_SAMPLES`).
    jobs : int, optional
        Processes to measure files in (1: this process).
    force : bool, optional
        Measure every file again, ignoring outcomes kept from earlier runs.
    extra_patterns : tuple of str, optional
        Glob patterns of further files to pick up in folders.
    config_file : str, optional
        The project file the parameters came from, for the run record.
    cluster : str, optional
        Address of a Dask distributed scheduler (``tcp://host:8786``): files are measured by
        its workers, which must have spikemeasure installed and see the files at the same
        paths. Outcomes are kept and tables written here, as in a local run.
    cluster_timeout_s : float, optional
        How long to wait for the scheduler to answer.
    figure_format : {'png', 'svg', 'pdf'} or None, optional
        Draw each cell's figures (under ``figures/``) and the batch figure in this format;
        None draws none. ``report.html`` is written either way. On a cluster, the workers
        write the figures, so `out_dir` must be at the same path for them.
    groups : spikemeasure.report.Groups, optional
        Files to groups, for the batch figure and the report (see
        :func:`~spikemeasure.report.read_groups`).
    progress : callable, optional
        Called with ``{"done", "total", "file", "line", "elapsed_s"}`` after each file.

    Returns
    -------
    RunSummary
        ``notes`` holds messages that are not failures (files of `groups` not in the run,
        files of the run not in `groups`).

    Raises
    ------
    InvalidSettingError
        `max_sweep_samples` is not a positive whole number.
    KeyboardInterrupt
        After writing the tables of the files finished (the summary says ``interrupted``).
    """
    if max_sweep_samples is not None and (isinstance(max_sweep_samples, bool) or not isinstance(
            max_sweep_samples, int) or max_sweep_samples < 1):
        raise InvalidSettingError(
            f"`max_sweep_samples` must be a positive whole number (got {max_sweep_samples!r})")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    started = time.time()
    summary = RunSummary(out_dir=out)
    parameters = {"settings": settings.as_dict(),
                  "step_s": list(step_times) if step_times else None,
                  "step_sizes_pa": list(step_sizes) if step_sizes else None,
                  "sampling_rate_hz": sampling_rate_hz,
                  "max_sweep_samples": max_sweep_samples}
    if figure_format is not None:
        from .figures import FIGURE_FORMATS

        if figure_format not in FIGURE_FORMATS:
            raise SpikemeasureError(f"figure format must be one of "
                                    f"{', '.join(FIGURE_FORMATS)} (got {figure_format!r})")
    # absolute: workers elsewhere (a cluster) may start in another folder
    figures = {"out": str(out.resolve()), "format": figure_format} if figure_format else None
    search = search_recordings(paths, exclude=out, extra_patterns=extra_patterns)
    files = search.files
    early = [_failure(where, "input", message) for where, message in search.problems]
    summary.notes.extend(search.notes)
    if not files and not early:
        early.append(_failure(", ".join(printable_name(str(p)) for p in paths), "input",
                              "no recordings found (looked for .nwb, .nix, .txt, .csv and "
                              ".tsv files; --glob adds other patterns)"))
    entries, outcomes, pending = [], [None] * len(files), []
    for k, (path, shown) in enumerate(files):
        entry = _input_entry(path, shown)
        try:
            entry.update(size_bytes=path.stat().st_size, sha256=file_sha256(path))
        except OSError as exc:
            entry["status"] = "failed"
            reason = exc.strerror or type(exc).__name__  # without the path it quotes
            outcomes[k] = {"file": shown, "failures": [_failure(shown, "read",
                                                                f"{shown}: {reason}")],
                           "spike_rows": [], "sweep_rows": [], "cell_rows": [], "sweeps": 0,
                           "sweeps_measured": 0, "spikes": 0, "spike_flags": {},
                           "figures": []}
            entries.append(entry)
            continue
        is_text = path.suffix.lower() in TEXT_SUFFIXES
        cache = _cache_path(out, entry["sha256"], _parameter_hash(parameters, is_text))
        cached = None if force else _load_cached(cache, shown)
        if cached is not None and figures and not _figures_present(out, cached, shown,
                                                                     figure_format):
            cached = None  # its figures are missing or in another format: draw them again
        elif cached is not None and not figures:
            cached = dict(cached, figures=[])  # not drawn in this run: not in its report
        if cached is not None:
            outcomes[k] = cached
            entry["status"] = "reused"
        else:
            pending.append((k, path, shown, cache))
        entries.append(entry)
    total = len(files)
    done_count = [sum(o is not None for o in outcomes)]
    last_write = [time.time()]

    def finish(k: int, outcome: dict, cache: Path | None) -> None:
        if cache is not None:  # kept first: a table never holds a file a rerun would redo
            write_text_atomic(cache, json.dumps(outcome))
        outcomes[k] = outcome
        done_count[0] += 1
        if progress is not None:
            progress({"done": done_count[0], "total": total, "file": outcome["file"],
                      "line": _describe(outcome), "elapsed_s": time.time() - started})
        if time.time() - last_write[0] > TABLE_REFRESH_S:
            _write_tables(summary, outcomes, early)
            last_write[0] = time.time()

    if progress is not None:
        for k, o in enumerate(outcomes):
            if o is not None and entries[k].get("status") == "reused":
                progress({"done": None, "total": total, "file": o["file"],
                          "line": f"unchanged {o['file']} (kept from an earlier run)",
                          "elapsed_s": time.time() - started})
    try:
        with _StopRequest() as stop:
            if cluster and pending:
                _run_on_cluster(cluster, pending, parameters, finish, cluster_timeout_s, stop,
                                figures)
            elif jobs <= 1 or len(pending) <= 1:
                for k, path, shown, cache in pending:
                    stop.check()
                    finish(k, measure_file(str(path), shown, parameters, figures), cache)
                stop.check()
            else:
                pool = ProcessPoolExecutor(max_workers=min(jobs, len(pending)),
                                           initializer=_ignore_interrupts)
                try:
                    futures = {pool.submit(measure_file, str(path), shown, parameters, figures):
                               (k, cache) for k, path, shown, cache in pending}
                    for future in as_completed(futures):
                        k, cache = futures[future]
                        finish(k, future.result(), cache)
                        stop.check()
                finally:
                    pool.shutdown(wait=True, cancel_futures=True)
    except KeyboardInterrupt:
        summary.interrupted = True
        raise
    finally:
        _finish_run(summary, entries, outcomes, early, parameters, started, config_file,
                    figure_format, groups)
    return summary


def _run_on_cluster(address: str, pending: list, parameters: dict,
                    finish: Callable[[int, dict, Path], None], timeout_s: float,
                    stop: _StopRequest, figures: dict | None = None) -> None:
    """Measure the pending files on a Dask distributed cluster."""
    try:
        from distributed import Client, as_completed as completed
    except ImportError:
        raise SpikemeasureError(
            "--cluster needs Dask distributed: pip install \"spikemeasure[cluster]\"") from None
    try:
        client = Client(address, timeout=f"{timeout_s:g}s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise SpikemeasureError(
            f"cannot reach the Dask scheduler at {address} ({exc}); check the address and "
            "that the scheduler is running") from exc
    try:
        futures = {}
        for k, path, shown, cache in pending:
            future = client.submit(measure_file, str(path), shown, parameters, figures,
                                   pure=False,
                                   key=f"spikemeasure-{k}-{cache.stem}")
            futures[future] = (k, cache)
        for future in completed(list(futures)):
            k, cache = futures[future]
            finish(k, future.result(), cache)
            stop.check()
    finally:
        if stop.requested:
            client.cancel(list(futures))
        client.close()


def _finish_run(summary: RunSummary, entries: list[dict], outcomes: list[dict | None],
                early: list[dict], parameters: dict, started: float,
                config_file: str | None, figure_format: str | None = None,
                groups=None) -> None:
    """Count, write the tables, the run record, the batch figure and the report (also after
    an interruption)."""
    summary.failures = list(early)
    for entry, outcome in zip(entries, outcomes):
        if outcome is None:
            entry["status"] = "not measured (run interrupted)"
            summary.inputs.append(entry)
            continue
        entry.setdefault("status", "measured" if outcome["sweeps_measured"] else "failed")
        if not outcome["sweeps_measured"]:
            entry["status"] = "failed" if entry["status"] != "reused" else "reused (failed)"
        entry.update(format=outcome.get("format"), sweeps=outcome["sweeps"],
                     sweeps_measured=outcome["sweeps_measured"], spikes=outcome["spikes"],
                     spike_flags=outcome["spike_flags"])
        summary.inputs.append(entry)
        summary.failures.extend(outcome["failures"])
        if outcome["sweeps_measured"]:
            if entry["status"] == "reused":
                summary.files_reused += 1
            else:
                summary.files_measured += 1
            summary.sweeps_measured += outcome["sweeps_measured"]
            summary.spikes += outcome["spikes"]
        else:
            summary.files_failed += 1
    _write_tables(summary, outcomes, early)
    done = [o for o in outcomes if o is not None]
    batch_figure = None
    if groups is not None:
        summary.notes.extend(groups.notes([o["file"] for o in done if o["cell_rows"]]))
    cells = [row for o in done for row in o["cell_rows"]]
    if figure_format and cells:
        from .report import cell_values
        from .figures import BATCH_FIGURE_NAME, write_batch_figure

        batch_figure = f"{FIGURES_FOLDER}/{BATCH_FIGURE_NAME}.{figure_format}"
        try:
            write_batch_figure(summary.out_dir / batch_figure, cell_values(cells),
                               groups.mapping if groups is not None else None,
                               groups.label if groups is not None else "group", figure_format)
        except OSError as exc:
            summary.notes.append(f"{summary.out_dir / batch_figure}: cannot write the batch "
                                 f"figure ({exc})")
            batch_figure = None
    record = {
        "tool": "spikemeasure",
        "versions": _versions(),
        "command": sys.argv,
        "started": time.strftime("%Y-%m-%dT%H:%M:%S%z", time.localtime(started)),
        "seconds": round(time.time() - started, 3),
        "interrupted": summary.interrupted,
        "config_file": config_file,
        "parameters": {**parameters["settings"], "step_s": parameters["step_s"],
                       "step_sizes_pa": parameters["step_sizes_pa"],
                       "sampling_rate_hz": parameters["sampling_rate_hz"],
                       "max_sweep_samples": parameters["max_sweep_samples"]},
        "inputs": summary.inputs,
        "failures": summary.failures,
        "totals": {"files_measured": summary.files_measured,
                   "files_reused": summary.files_reused, "files_failed": summary.files_failed,
                   "sweeps_measured": summary.sweeps_measured, "spikes": summary.spikes},
        "figures": {"format": figure_format, "batch": batch_figure,
                    "cells": {o["file"]: o.get("figures", []) for o in done
                              if o.get("figures")}},
        "groups": None if groups is None else {"file": groups.path, "column": groups.label,
                                               "members": groups.mapping},
        "notes": summary.notes,
    }
    write_json(summary.record_path, record)
    from .report import write_report

    try:
        write_report(summary.report_path, record, cells)
    except OSError as exc:
        raise SpikemeasureError(f"{summary.report_path}: cannot write the report ({exc}); the "
                                "tables and run.json are written") from exc


def default_jobs() -> int:
    """The machine's cores available to this process."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on every platform
        return max(1, os.cpu_count() or 1)
