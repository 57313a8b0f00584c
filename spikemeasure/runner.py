"""Measure files and folders into an output folder: the job behind ``spikemeasure measure``.

- Each file is one task, run in this process (``jobs=1``) or in a pool of processes; its
  rows come back as formatted text and are laid out in file order, so the tables are
  byte-identical whatever the number of jobs.
- One bad file never stops the run: its failure is recorded (``errors.csv``, ``run.json``)
  and the others go on.
- Each file's outcome is kept in a cache under the output folder, named by the file's SHA-256
  and a hash of the parameters that affect it (and the tool's version). A rerun reuses the
  outcomes of unchanged files and measures only the rest; ``force=True`` redoes all.
- run.json is written before any file is measured (``"status": "running"``), then with the
  tables, as one set (all or none), every few seconds during a long run and at the end (also
  after Ctrl-C, SIGTERM or SIGHUP: ``"interrupted"``), so an interrupted run leaves complete
  tables for the files finished and a record that agrees with them.
- Worker processes end with the run, however it ends; a worker that dies fails only its file;
  a bug in one file's task fails that file (``internal error``), never the batch.
- A kept outcome carries the SHA-256 of its content and is keyed by the output columns'
  declarations as well: an edited one, or one of an older layout, is not reused.
- Figures (optional) are drawn in each file's task while its recording is in memory, into
  ``figures/<file>/``; the batch figure and ``report.html`` are written at the end of the run
  (also after Ctrl-C), from the outcomes. Figure options never change the tables, and are not
  part of the parameter hash: a kept outcome whose figures are missing (or in another format)
  is measured again only when figures are asked for.
"""
from __future__ import annotations

import errno
import hashlib
import json
import os
import platform
import re
import signal
import sys
import tempfile
import threading
import time
import traceback
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from . import __version__
from .columns import CELL_COLUMNS, ERROR_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS
from .detection import DetectionSettings
from .errors import (InvalidSettingError, OutputWriteError, SpikemeasureError,
                     UnusableOutputError, printable_name)
from .output import json_text, rows_csv_text, write_files_atomic, write_json, write_text_atomic
from .params import parameters_record
from .reading import TEXT_SUFFIXES, read_recording, search_recordings
from .tables import (cell_summary, cell_table, count_spikes, flag_counts, format_rows,
                     measure_recording, spike_table, sweep_table)

__all__ = ["RunSummary", "measure_paths", "measure_file", "file_sha256", "SPIKES_FILE",
           "SWEEPS_FILE", "CELLS_FILE", "ERRORS_FILE", "RUN_RECORD_FILE", "CACHE_FOLDER",
           "FIGURES_FOLDER", "REPORT_FILE", "cell_figure_folder", "RunStopped",
           "STOP_SIGNALS", "INTERNAL_ERROR_STAGE"]

SPIKES_FILE = "spikes.csv"
SWEEPS_FILE = "sweeps.csv"
CELLS_FILE = "cells.csv"
ERRORS_FILE = "errors.csv"
RUN_RECORD_FILE = "run.json"
CACHE_FOLDER = ".spikemeasure-cache"
FIGURES_FOLDER = "figures"
REPORT_FILE = "report.html"
#: The stage of a file's failure when its task raised an unexpected exception (a bug).
INTERNAL_ERROR_STAGE = "internal error"
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


def cell_figure_folder(shown: str) -> str:
    """Where a file's figures go, relative to the output folder (``/`` separated)."""
    from .figures import figure_folder_name  # matplotlib itself is imported only to draw

    return f"{FIGURES_FOLDER}/{figure_folder_name(shown)}"


def measure_file(path: str, shown: str, parameters: dict, figures: dict | None = None, *,
                 cancel: Callable[[], None] | None = None) -> dict:
    """Read and measure one file; its outcome as plain data (formatted rows, failures, counts).

    Runs in a worker process as well as in this one, so it takes and returns plain values.
    With `figures` (``{"out": output folder, "format": "png"}``) the cell's figures are
    written too, and listed in the outcome (``figures``: paths relative to the output folder).
    `cancel` (optional) is called between sweeps and between the pieces of long sweeps; it
    stops the work by raising (``KeyboardInterrupt`` when a run is stopped), which propagates.

    An unexpected exception (a bug) does not escape: the outcome holds one failure of stage
    ``internal error`` naming the file and the exception's type, with its traceback under
    ``traceback``; such an outcome is never kept for a rerun.
    """
    if cancel is not None and not callable(cancel):
        raise InvalidSettingError("`cancel` must be callable or None")
    try:
        return _measure_file(path, shown, parameters, figures, cancel)
    except Exception as exc:  # a bug in one file's task must not stop the batch
        return _internal_error_outcome(shown, exc, traceback.format_exc())


def _empty_outcome(shown: str, figure_format: str | None = None) -> dict:
    return {"file": shown, "failures": [], "spike_rows": [], "sweep_rows": [],
            "cell_rows": [], "sweeps": 0, "sweeps_measured": 0, "spikes": 0,
            "spike_flags": {}, "format": None, "figures": [], "figure_format": figure_format}


def _internal_error_outcome(shown: str, exc: BaseException, trace: str) -> dict:
    outcome = _empty_outcome(shown)
    outcome["failures"].append(dict(
        _failure(shown, INTERNAL_ERROR_STAGE,
                 f"{shown}: internal error ({type(exc).__name__}) while measuring it; the "
                 "other files are not affected. This is a bug: please report it with the "
                 "traceback in run.json (or run with --debug)"),
        traceback=trace))
    return outcome


def _is_internal_error(outcome: dict) -> bool:
    return any(f.get("stage") == INTERNAL_ERROR_STAGE for f in outcome["failures"])


def _measure_file(path: str, shown: str, parameters: dict, figures: dict | None,
                  cancel: Callable[[], None] | None) -> dict:
    settings = DetectionSettings(**parameters["settings"])
    step_times = tuple(parameters["step_s"]) if parameters.get("step_s") else None
    step_sizes = tuple(parameters["step_sizes_pa"]) if parameters.get("step_sizes_pa") else None
    outcome = _empty_outcome(shown, figures["format"] if figures else None)
    try:
        recording = read_recording(path, shown_as=shown,
                                   sampling_rate_hz=parameters.get("sampling_rate_hz"),
                                   max_sweep_samples=parameters.get("max_sweep_samples"))
    except SpikemeasureError as exc:
        outcome["failures"].append(_failure(shown, "read", str(exc)))
        return outcome
    with recording:  # open until its figures are drawn: long sweeps are read from it
        results = measure_recording(recording, settings, step_times, step_sizes, cancel=cancel)
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
    the file's ``figures`` stage, and so is an unexpected exception while drawing (with its
    traceback); its tables stand either way."""
    from .figures import write_cell_figures

    folder = cell_figure_folder(shown)
    try:
        names = write_cell_figures(recording, results, Path(figures["out"]) / folder,
                                   figures["format"], settings=settings, cell=cell)
    except OSError as exc:
        failures.append(_failure(shown, "figures", f"{shown}: cannot write its figures ({exc})"))
        return []
    except Exception as exc:  # a bug in drawing: the measurements stand
        failures.append(dict(_failure(
            shown, "figures", f"{shown}: internal error ({type(exc).__name__}) while drawing "
            "its figures; its tables stand. This is a bug: please report it with the traceback "
            "in run.json (or run with --debug)"), traceback=traceback.format_exc()))
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


class RunStopped(KeyboardInterrupt):
    """A run stopped by a signal (Ctrl-C, SIGTERM, SIGHUP) after writing the tables of the files
    finished and a run record saying ``interrupted``; `signum` is the signal's number."""

    def __init__(self, signum: int = signal.SIGINT) -> None:
        super().__init__(signum)
        self.signum = int(signum)


#: Signals that stop a run cleanly: Ctrl-C, a polite kill, a closed terminal or session.
STOP_SIGNALS = tuple(getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP")
                     if hasattr(signal, name))


class _StopRequest:
    """Ctrl-C, SIGTERM or SIGHUP during a run: the first one stops the work at the next sweep,
    piece of a long sweep or file boundary (never inside a library call, which could swallow
    or mangle it) and ends the worker processes; a second one stops at once. Only in the main
    thread, where signals are delivered."""

    def __init__(self) -> None:
        self.requested = False
        self.signum = int(signal.SIGINT)
        self._previous: dict = {}

    def __enter__(self) -> "_StopRequest":
        if threading.current_thread() is threading.main_thread():
            for signum in STOP_SIGNALS:
                self._previous[signum] = signal.signal(signum, self._handle)
        return self

    def _handle(self, signum, frame) -> None:
        if self.requested:
            raise RunStopped(self.signum)
        self.requested = True
        self.signum = int(signum)

    def check(self) -> None:
        if self.requested:
            raise RunStopped(self.signum)

    def __exit__(self, *exc) -> None:
        for signum, previous in self._previous.items():
            signal.signal(signum, previous)
        self._previous = {}


#: prctl(2) option: the signal a process gets when the thread that started it ends (Linux).
_PR_SET_PDEATHSIG = 1
#: How often (s) a worker's watchdog looks whether its parent process is still there.
WORKER_WATCH_S = 1.0


def _start_worker(parent_pid: int) -> None:
    """Initializer of each worker process: leave Ctrl-C and hang-ups to the parent, which
    stops the run cleanly and ends the workers; and end this worker when the parent ends,
    however it ends (also SIGKILL): on Linux through prctl(PR_SET_PDEATHSIG), everywhere
    through a watchdog thread that exits when the parent process id changes."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if hasattr(signal, "SIGHUP"):
        signal.signal(signal.SIGHUP, signal.SIG_IGN)
    # a forked worker inherits the parent's stop handler: SIGTERM (how the parent ends it)
    # must end it at once, silently
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):  # no prctl here: the watchdog does the job
            pass
    if os.getppid() != parent_pid:  # the parent ended before the line above
        os._exit(1)

    def watch() -> None:
        while True:
            time.sleep(WORKER_WATCH_S)
            if os.getppid() != parent_pid:
                os._exit(1)

    threading.Thread(target=watch, name="spikemeasure-parent-watch", daemon=True).start()


def _end_pool(pool: ProcessPoolExecutor) -> None:
    """End a pool's workers now (the run stops): their files are not finished."""
    processes = list((getattr(pool, "_processes", None) or {}).values())
    for process in processes:
        if process.is_alive():
            process.terminate()
    for process in processes:
        process.join(10.0)
        if process.is_alive():
            process.kill()
            process.join(10.0)
    pool.shutdown(wait=True, cancel_futures=True)


def _columns_hash() -> str:
    """Hash of the output columns' declarations (names, units, decimals, order): a kept outcome
    holds formatted rows, so a changed declaration must measure files again."""
    declared = [[(c.name, c.unit, c.decimals) for c in columns]
                for columns in (SPIKE_COLUMNS, SWEEP_COLUMNS, CELL_COLUMNS, ERROR_COLUMNS)]
    return hashlib.sha256(json.dumps(declared).encode()).hexdigest()[:16]


def _parameter_hash(parameters: dict, is_text: bool) -> str:
    """Hash of what affects a file's outcome: every parameter (the sampling rate option only
    for text files, the only ones it applies to), the tool's version and the output columns'
    declarations."""
    relevant = dict(parameters, version=__version__, columns=_columns_hash())
    if not is_text:
        relevant.pop("sampling_rate_hz", None)
    if relevant.get("max_sweep_samples") is None:  # the default: outcomes kept before it stay
        relevant.pop("max_sweep_samples", None)
    return hashlib.sha256(json.dumps(relevant, sort_keys=True).encode()).hexdigest()[:16]


def _cache_path(out: Path, sha: str, parameter_hash: str) -> Path:
    return out / CACHE_FOLDER / f"{sha[:32]}-{parameter_hash}.json"


def _outcome_checksum(outcome: dict) -> str:
    return hashlib.sha256(json.dumps(outcome, sort_keys=True, separators=(",", ":"))
                          .encode()).hexdigest()


def _cache_text(outcome: dict) -> str:
    """A kept outcome with the SHA-256 of its own content, so an edited copy is not reused."""
    return json.dumps({"content_sha256": _outcome_checksum(outcome), "outcome": outcome})


def _valid_outcome(outcome) -> bool:
    """Whether kept data have the shape of an outcome, with rows as wide as the tables."""
    if not isinstance(outcome, dict) or not isinstance(outcome.get("file"), str):
        return False
    for name, columns in (("spike_rows", SPIKE_COLUMNS), ("sweep_rows", SWEEP_COLUMNS),
                          ("cell_rows", CELL_COLUMNS)):
        rows = outcome.get(name)
        if not isinstance(rows, list) or not all(
                isinstance(r, list) and len(r) == len(columns) and
                all(isinstance(v, str) for v in r) for r in rows):
            return False
    failures = outcome.get("failures")
    if not isinstance(failures, list) or not all(
            isinstance(f, dict) and all(isinstance(f.get(k), str)
                                        for k in ("file", "stage", "message"))
            for f in failures):
        return False
    counts = ("sweeps", "sweeps_measured", "spikes")
    return all(isinstance(outcome.get(k), int) for k in counts) and \
        isinstance(outcome.get("spike_flags"), dict) and \
        isinstance(outcome.get("figures", []), list)


def _load_cached(path: Path, shown: str) -> tuple[dict | None, str | None]:
    """A kept outcome, shown by its name in this run; or None, with a note when the kept file
    is there but not usable (edited, damaged, of another shape)."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return None, None
    except (OSError, ValueError):
        text = None
    kept = None
    if text is not None:
        try:
            kept = json.loads(text)
        except ValueError:
            kept = None
    outcome = kept.get("outcome") if isinstance(kept, dict) else None
    if not (isinstance(kept, dict) and _valid_outcome(outcome) and
            kept.get("content_sha256") == _outcome_checksum(outcome)):
        return None, (f"{shown}: its kept outcome ({CACHE_FOLDER}/{path.name}) does not match "
                      "its checksum or is damaged; it was ignored and the file measured again")
    # the file may have moved or been renamed since: show it by its name in this run
    old = outcome["file"]
    outcome = dict(outcome, file=shown)
    for table in ("spike_rows", "sweep_rows", "cell_rows"):
        outcome[table] = [[shown] + row[1:] for row in outcome[table]]
    outcome["failures"] = [dict(f, file=shown, message=f["message"].replace(old, shown, 1))
                           for f in outcome["failures"]]
    return outcome, None


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


def _input_entry(path: Path, shown: str) -> dict:
    """A file's entry in run.json: its name in the tables, its path as text and, when the
    path's bytes are not UTF-8 text (or hold control characters), those bytes in hex, which
    find the real file (``bytes.fromhex``, then ``os.fsdecode``)."""
    text = printable_name(str(path))
    entry = {"path": text, "file": shown}
    if text != str(path):
        entry["path_bytes_hex"] = os.fsencode(path).hex()
    return entry


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
    RunStopped
        (a ``KeyboardInterrupt``) after Ctrl-C, SIGTERM or SIGHUP, once the tables of the files
        finished and run.json (``"status": "interrupted"``) are written; its ``signum`` is the
        signal's number.
    UnusableOutputError
        `out_dir` cannot be created or written in (nothing was measured).
    OutputWriteError
        A write failed during the run (a full disk); the message says what was written.

    Notes
    -----
    run.json is written before any file is measured, with ``"status": "running"``, this run's
    parameters and inputs (and report.html says the run is in progress); it is rewritten with
    the tables, as one set, at every refresh and at the end, when its status becomes
    ``"complete"``, ``"interrupted"`` or ``"failed"`` (an error stopped the run). A run killed
    outright leaves ``"running"``.
    """
    if max_sweep_samples is not None and (isinstance(max_sweep_samples, bool) or not isinstance(
            max_sweep_samples, int) or max_sweep_samples < 1):
        raise InvalidSettingError(
            f"`max_sweep_samples` must be a positive whole number (got {max_sweep_samples!r})")
    out = Path(out_dir)
    _prepare_output(out)
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
    run = _Run(summary, parameters, started, config_file, figure_format, groups)
    early = run.early
    with _RunLock(out), _StopRequest() as stop:
        _remove_stale_temporaries(out)
        try:
            search = search_recordings(paths, exclude=out, extra_patterns=extra_patterns)
            files = search.files
            early.extend(_failure(where, "input", message) for where, message in search.problems)
            summary.notes.extend(search.notes)
            if not files and not early:
                early.append(_failure(", ".join(printable_name(str(p)) for p in paths), "input",
                                      "no recordings found (looked for .nwb, .nix, .txt, .csv "
                                      "and .tsv files; --glob adds other patterns)"))
            run.entries[:] = [_input_entry(path, shown) for path, shown in files]
            run.outcomes[:] = [None] * len(files)
            pending = []
            for k, (path, shown) in enumerate(files):
                stop.check()
                pending.extend(run.look_up(k, path, shown, force, figures, figure_format))
            run.write_start()
            total = len(files)
            done_count = [sum(o is not None for o in run.outcomes)]

            def finish(k: int, outcome: dict, cache: Path | None) -> None:
                run.keep(k, outcome, cache)
                done_count[0] += 1
                if progress is not None:
                    progress({"done": done_count[0], "total": total, "file": outcome["file"],
                              "line": _describe(outcome), "elapsed_s": time.time() - started})
                run.refresh_if_due()

            if progress is not None:
                for k, o in enumerate(run.outcomes):
                    if o is not None and run.entries[k].get("status") == "reused":
                        progress({"done": None, "total": total, "file": o["file"],
                                  "line": f"unchanged {o['file']} (kept from an earlier run)",
                                  "elapsed_s": time.time() - started})
            if cluster and pending:
                _run_on_cluster(cluster, pending, parameters, finish, cluster_timeout_s, stop,
                                figures)
            elif jobs <= 1 or len(pending) <= 1:
                for k, path, shown, cache in pending:
                    stop.check()
                    finish(k, measure_file(str(path), shown, parameters, figures,
                                           cancel=stop.check), cache)
                stop.check()
            else:
                _run_in_pool(pending, parameters, figures, min(jobs, len(pending)), finish, stop)
        except KeyboardInterrupt as exc:
            summary.interrupted = True
            run.status = "interrupted"
            if not isinstance(exc, RunStopped):
                raise RunStopped(signal.SIGINT) from exc
            raise
        except BaseException:
            run.status = "failed"
            raise
        finally:
            run.finish()
    return summary


#: How often (s) the run looks whether it was asked to stop while worker processes measure.
STOP_POLL_S = 0.2


def _run_in_pool(pending: list, parameters: dict, figures: dict | None, workers: int,
                 finish: Callable[[int, dict, Path], None], stop: _StopRequest) -> None:
    """Measure the pending files in worker processes; on a stop, end the workers at once.

    A worker that dies (killed, out of memory, a crash in a library) breaks the whole pool and
    every file in it; those files are measured again one at a time, each in a pool of its own,
    so that only the file that kills its worker fails."""
    broken = _pool_round(pending, parameters, figures, workers, finish, stop)
    for task in broken:
        _pool_round([task], parameters, figures, 1, finish, stop, last_try=True)


def _pool_round(pending: list, parameters: dict, figures: dict | None, workers: int,
                finish: Callable[[int, dict, Path], None], stop: _StopRequest,
                last_try: bool = False) -> list:
    """One pool over `pending`; the tasks a broken pool took with it (unless `last_try`)."""
    pool = ProcessPoolExecutor(max_workers=workers, initializer=_start_worker,
                               initargs=(os.getpid(),))
    broken = []
    try:
        futures = {pool.submit(measure_file, str(path), shown, parameters, figures):
                   (k, path, shown, cache) for k, path, shown, cache in pending}
        waiting = set(futures)
        while waiting:
            done, waiting = wait(waiting, timeout=STOP_POLL_S, return_when=FIRST_COMPLETED)
            for future in sorted(done, key=lambda f: futures[f][0]):
                if stop.requested and future.exception() is not None:
                    continue  # a worker ended by the stop: no failure of its file
                k, path, shown, cache = futures[future]
                if not last_try and isinstance(future.exception(), BrokenProcessPool):
                    broken.append((k, path, shown, cache))
                    continue
                finish(k, _pool_outcome(future, shown), cache)
            stop.check()
    except BaseException:
        _end_pool(pool)
        raise
    pool.shutdown(wait=True)
    return sorted(broken, key=lambda task: task[0])


def _pool_outcome(future, shown: str) -> dict:
    """A finished task's outcome; a task that raised (a worker that died, a result that could
    not be sent back) becomes an internal error of its file."""
    try:
        return future.result()
    except BrokenProcessPool as exc:
        outcome = _internal_error_outcome(shown, exc, traceback.format_exc())
        outcome["failures"][0]["message"] = (
            f"{shown}: the worker process measuring it ended unexpectedly (killed, out of "
            "memory, or crashed in a library); the file was not measured. Run the same "
            "command again to retry it")
        return outcome
    except Exception as exc:
        return _internal_error_outcome(shown, exc, traceback.format_exc())


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
    pending_names = {k: shown for k, _, shown, _ in pending}
    futures = {}
    try:
        for k, path, shown, cache in pending:
            future = client.submit(measure_file, str(path), shown, parameters, figures,
                                   pure=False,
                                   key=f"spikemeasure-{k}-{cache.stem}")
            futures[future] = (k, cache)
        for future in completed(list(futures)):
            k, cache = futures[future]
            finish(k, _pool_outcome(future, pending_names[k]), cache)
            stop.check()
    finally:
        if stop.requested:
            client.cancel(list(futures))
        client.close()


#: What a run writes in its output folder (besides run.json): a folder holding any of these
#: without this tool's run.json holds files of someone else's, which a run never overwrites.
OWN_OUTPUTS = (SPIKES_FILE, SWEEPS_FILE, CELLS_FILE, ERRORS_FILE, REPORT_FILE, FIGURES_FOLDER,
               CACHE_FOLDER)
LOCK_FILE = ".spikemeasure-run.lock"


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


class _RunLock:
    """An advisory lock on the output folder for the whole run (POSIX ``flock``), so that two
    runs never write the same tables at once; the system drops it when the process ends,
    however it ends. Where ``fcntl`` is missing the run goes on unlocked."""

    def __init__(self, out: Path) -> None:
        self.path = out / LOCK_FILE
        self.fd: int | None = None

    def __enter__(self) -> "_RunLock":
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


#: A temporary file of :mod:`spikemeasure.output` (``.NAME.XXXXXXXX.part``, from mkstemp).
_TEMPORARY_NAME = re.compile(r"^\.(?P<name>.+)\.[A-Za-z0-9_]{8}\.part$")


def _remove_stale_temporaries(out: Path) -> list[Path]:
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


def _prepare_output(out: Path) -> None:
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


class _Run:
    """One run's state and everything it writes: kept outcomes, the tables and run.json (as one
    set, so they never disagree), and the report."""

    def __init__(self, summary: RunSummary, parameters: dict, started: float,
                 config_file: str | None, figure_format: str | None, groups) -> None:
        self.summary = summary
        self.out = summary.out_dir
        self.parameters = parameters
        self.started = started
        self.config_file = config_file
        self.figure_format = figure_format
        self.groups = groups
        self.status = "complete"
        self.entries: list[dict] = []
        self.outcomes: list[dict | None] = []
        self.early: list[dict] = []
        self.started_record = False
        self.last_refresh = time.time()
        self.refresh_failed = False

    def look_up(self, k: int, path: Path, shown: str, force: bool, figures: dict | None,
                figure_format: str | None) -> list[tuple]:
        """Hash file `k` and reuse its kept outcome; the file as a pending task, if any."""
        entry = self.entries[k]
        try:
            entry.update(size_bytes=path.stat().st_size, sha256=file_sha256(path))
        except OSError as exc:
            entry["status"] = "failed"
            outcome = _empty_outcome(shown)
            reason = exc.strerror or type(exc).__name__  # without the path it quotes
            outcome["failures"].append(_failure(shown, "read", f"{shown}: {reason}"))
            self.outcomes[k] = outcome
            return []
        is_text = path.suffix.lower() in TEXT_SUFFIXES
        cache = _cache_path(self.out, entry["sha256"], _parameter_hash(self.parameters, is_text))
        cached, note = (None, None) if force else _load_cached(cache, shown)
        if note:
            self.summary.notes.append(note)
        if cached is not None and figures and not _figures_present(self.out, cached, shown,
                                                                     figure_format):
            cached = None  # its figures are missing or in another format: draw them again
        elif cached is not None and not figures:
            cached = dict(cached, figures=[])  # not drawn in this run: not in its report
        if cached is not None:
            self.outcomes[k] = cached
            entry["status"] = "reused"
            return []
        return [(k, path, shown, cache)]

    def keep(self, k: int, outcome: dict, cache: Path | None) -> None:
        """Keep a file's outcome for a rerun (first: a table never holds a file a rerun would
        redo), then for this run's tables. An internal error is not kept: a rerun retries."""
        try:
            text = _cache_text(outcome)
        except (TypeError, ValueError) as exc:  # not plain data: a bug in the file's task
            outcome = _internal_error_outcome(outcome.get("file", str(cache)), exc,
                                              traceback.format_exc())
        if cache is not None and not _is_internal_error(outcome):
            try:
                write_text_atomic(cache, text)
            except OSError as exc:
                self.summary.notes.append(
                    f"{cache}: cannot keep the outcome of {outcome['file']} for a rerun "
                    f"({exc.strerror or exc}); a rerun measures it again")
        self.outcomes[k] = outcome

    def _tally(self, final: bool) -> tuple[RunSummary, list[dict]]:
        counts = RunSummary(out_dir=self.out)
        counts.failures = list(self.early)
        unfinished = {"running": "pending", "interrupted": "not measured (run interrupted)"}
        for entry, outcome in zip(self.entries, self.outcomes):
            entry = dict(entry)
            if outcome is None:
                entry["status"] = unfinished.get(self.status, "not measured (run failed)") \
                    if final else "pending"
                counts.inputs.append(entry)
                continue
            entry.setdefault("status", "measured" if outcome["sweeps_measured"] else "failed")
            if not outcome["sweeps_measured"]:
                entry["status"] = "failed" if entry["status"] != "reused" else "reused (failed)"
            entry.update(format=outcome.get("format"), sweeps=outcome["sweeps"],
                         sweeps_measured=outcome["sweeps_measured"], spikes=outcome["spikes"],
                         spike_flags=outcome["spike_flags"])
            traces = [f["traceback"] for f in outcome["failures"] if f.get("traceback")]
            if traces:
                entry["traceback"] = "\n".join(traces)
            counts.inputs.append(entry)
            counts.failures.extend(outcome["failures"])
            if outcome["sweeps_measured"]:
                if entry["status"] == "reused":
                    counts.files_reused += 1
                else:
                    counts.files_measured += 1
                counts.sweeps_measured += outcome["sweeps_measured"]
                counts.spikes += outcome["spikes"]
            else:
                counts.files_failed += 1
        return counts, counts.inputs

    def _record(self, status: str, counts: RunSummary, batch_figure: str | None = None) -> dict:
        done = [o for o in self.outcomes if o is not None]
        groups = self.groups
        return {
            "tool": "spikemeasure",
            "versions": _versions(),
            "command": sys.argv,
            "started": time.strftime("%Y-%m-%dT%H:%M:%S%z", time.localtime(self.started)),
            "seconds": round(time.time() - self.started, 3),
            "status": status,
            "interrupted": status == "interrupted",
            "config_file": self.config_file,
            "parameters": parameters_record(self.parameters["settings"], self.parameters),
            "inputs": counts.inputs,
            "failures": [{k: v for k, v in f.items() if k != "traceback"}
                         for f in counts.failures],
            "totals": {"files_measured": counts.files_measured,
                       "files_reused": counts.files_reused,
                       "files_failed": counts.files_failed,
                       "sweeps_measured": counts.sweeps_measured, "spikes": counts.spikes},
            "figures": {"format": self.figure_format, "batch": batch_figure,
                        "cells": {o["file"]: o.get("figures", []) for o in done
                                  if o.get("figures")}},
            "groups": None if groups is None else {"file": groups.path, "column": groups.label,
                                                   "members": groups.mapping},
            "notes": list(self.summary.notes),
        }

    def _table_files(self, record: dict) -> dict[Path, bytes]:
        """The tables and run.json, as one set of files."""
        done = [o for o in self.outcomes if o is not None]
        failures = self.early + [f for o in done for f in o["failures"]]
        texts = {
            self.summary.spikes_path: rows_csv_text(
                SPIKE_COLUMNS, [r for o in done for r in o["spike_rows"]]),
            self.summary.sweeps_path: rows_csv_text(
                SWEEP_COLUMNS, [r for o in done for r in o["sweep_rows"]]),
            self.summary.cells_path: rows_csv_text(
                CELL_COLUMNS, [r for o in done for r in o["cell_rows"]]),
            self.summary.errors_path: rows_csv_text(
                ERROR_COLUMNS, [[f["file"], f["stage"], f["message"]] for f in failures]),
            self.summary.record_path: json_text(record),
        }
        return {path: text.encode("utf-8") for path, text in texts.items()}

    def write_start(self) -> None:
        """Before any file is measured: run.json says ``running`` (with the parameters and
        inputs of this run) and report.html says so too, so neither can pass for an earlier
        run's."""
        from .report import write_report

        counts, _ = self._tally(final=False)
        record = self._record("running", counts)
        try:
            write_json(self.summary.record_path, record)
            self.started_record = True
            write_report(self.summary.report_path, record, [])
        except OSError as exc:
            raise OutputWriteError(
                f"{exc.filename or self.out}: cannot write ({exc.strerror or exc}); nothing "
                "was measured" + ("" if not self.started_record else
                                  f"; {self.summary.record_path} says the run is running, "
                                  "and the tables are as they were")) from exc
        self.last_refresh = time.time()

    def refresh_if_due(self) -> None:
        """Every TABLE_REFRESH_S: the tables of the files finished and run.json (``running``)
        describing them, as one set. A failure is a note; the run goes on."""
        if time.time() - self.last_refresh <= TABLE_REFRESH_S:
            return
        counts, _ = self._tally(final=False)
        try:
            write_files_atomic(self._table_files(self._record("running", counts)))
        except OSError as exc:
            if not self.refresh_failed:
                self.summary.notes.append(
                    f"{exc.filename or self.out}: cannot refresh the tables during the run "
                    f"({exc.strerror or exc}); the last ones written were left as they were")
            self.refresh_failed = True
        self.last_refresh = time.time()

    def finish(self) -> None:
        """Count, write the batch figure, the tables with run.json (one set), and the report
        (also after an interruption)."""
        summary = self.summary
        if not self.started_record and self.status == "failed":
            return  # an error before the run began (its first record): nothing to record
        counts, inputs = self._tally(final=True)
        summary.inputs = inputs
        summary.failures = counts.failures
        for name in ("files_measured", "files_reused", "files_failed", "sweeps_measured",
                     "spikes"):
            setattr(summary, name, getattr(counts, name))
        done = [o for o in self.outcomes if o is not None]
        if self.groups is not None:
            summary.notes.extend(self.groups.notes([o["file"] for o in done if o["cell_rows"]]))
        cells = [row for o in done for row in o["cell_rows"]]
        batch_figure = None
        if self.figure_format and cells:
            from .figures import BATCH_FIGURE_NAME, write_batch_figure
            from .report import cell_values

            batch_figure = f"{FIGURES_FOLDER}/{BATCH_FIGURE_NAME}.{self.figure_format}"
            try:
                write_batch_figure(summary.out_dir / batch_figure, cell_values(cells),
                                   self.groups.mapping if self.groups is not None else None,
                                   self.groups.label if self.groups is not None else "group",
                                   self.figure_format)
            except OSError as exc:
                summary.notes.append(f"{summary.out_dir / batch_figure}: cannot write the "
                                     f"batch figure ({exc.strerror or exc})")
                batch_figure = None
        record = self._record(self.status, counts, batch_figure)
        files = self._table_files(record)
        try:
            write_files_atomic(files)
        except OSError as exc:
            said = ("run.json there says this run is running" if self.started_record else
                    "run.json there is as it was")
            left = (f"the tables left in {summary.out_dir} are those written before"
                    if summary.spikes_path.exists() else
                    f"no tables are in {summary.out_dir}")
            raise OutputWriteError(
                f"{exc.filename or summary.out_dir}: cannot write ({exc.strerror or exc}). Not "
                f"written: {', '.join(p.name for p in files)} (all or none, so that they never "
                f"disagree) and {REPORT_FILE}; {left}, and {said} "
                f"({self._finished_text(done)} in this run, kept "
                "for a rerun where there was room). Free some space and run the same command "
                "again") from exc
        from .report import write_report

        try:
            write_report(summary.report_path, record, cells)
        except OSError as exc:
            raise OutputWriteError(
                f"{summary.report_path}: cannot write the report ({exc.strerror or exc}); the "
                "tables and run.json are written; the report left in the folder is that of "
                "the run's start, which says it is running") from exc

    @staticmethod
    def _finished_text(done: list[dict]) -> str:
        return _count(len(done), "file") + " finished"


def default_jobs() -> int:
    """The machine's cores available to this process."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on every platform
        return max(1, os.cpu_count() or 1)
