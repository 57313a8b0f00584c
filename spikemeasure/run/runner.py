"""Measure files and folders into an output folder: the job behind ``spikemeasure measure``.

A run is planned (:mod:`.plan`: the files, the outcomes kept from an earlier run, the files
to measure), executed (:mod:`.execute`: one loop over an executor, in this process, a pool of
processes or a Dask cluster) and recorded (:mod:`.record`: the tables and run.json as one set,
refreshed during the run, and the report).

- Each file is one task; its outcome comes back as typed columns and is laid out in file
  order, so the tables are byte-identical whatever the number of jobs.
- One bad file never stops the run: its failure is recorded (``errors.csv``, ``run.json``)
  and the others go on.
- Each file's outcome is kept under the output folder (:mod:`.cache`), named by the file's
  SHA-256 and a hash of the parameters that affect it (and the tool's version). A rerun reuses
  the outcomes of unchanged files and measures only the rest; ``force=True`` redoes all.
- run.json is written before any file is measured (``"status": "running"``), then with the
  tables, as one set (all or none), every few seconds during a long run and at the end (also
  after Ctrl-C, SIGTERM or SIGHUP: ``"interrupted"``), so an interrupted run leaves complete
  tables for the files finished and a record that agrees with them.
- Worker processes end with the run, however it ends; a worker that dies fails only its file;
  a bug in one file's task fails that file (``internal error``), never the batch.
- Figures (optional) are drawn in each file's task while its recording is in memory, into
  ``figures/<file>/``; the batch figure and ``report.html`` are written at the end of the run
  (also after Ctrl-C), from the outcomes. Figure options never change the tables, and are not
  part of the parameter hash: a kept outcome whose figures are missing (or in another format)
  is measured again only when figures are asked for.
"""
from __future__ import annotations

import os
import signal
import time
from pathlib import Path
from typing import Callable

from ..analysis.detection import DetectionSettings
from ..errors import InvalidSettingError, SpikemeasureError
from ..params import REPORT_PARAMETER
from .cache import OutcomeCache
from .execute import RunStopped, StopRequest, Task, execute_tasks
from .folder import RunLock, prepare_output, remove_stale_temporaries
from .outcome import FileOutcome
from .plan import plan_run
from .record import RunRecord, RunSummary, count_text

__all__ = ["measure_paths", "default_jobs", "describe_outcome"]


def describe_outcome(outcome: FileOutcome) -> str:
    """One line of progress about a finished file."""
    shown = outcome.file
    if not outcome.sweeps_measured:
        return f"failed   {outcome.failures[0]['message']}" if outcome.failures else \
            f"failed   {shown}"
    skipped = len(outcome.failures)
    notes = [count_text(skipped, "problem")] if skipped else []
    notes += [f"{count_text(c, 'spike')} {flag}"
              for flag, c in sorted(outcome.spike_flags.items())]
    return (f"measured {shown}: {count_text(outcome.sweeps_measured, 'sweep')}, "
            f"{count_text(outcome.spike_count, 'spike')}"
            + (f" ({'; '.join(notes)})" if notes else ""))


def measure_paths(paths: list[str], out_dir: str | Path,
                  settings: DetectionSettings = DetectionSettings(), *,
                  step_s: tuple[float, float] | None = None,
                  step_sizes_pa: tuple[float, float] | None = None,
                  sampling_rate_hz: float | None = None, max_sweep_samples: int | None = None,
                  jobs: int = 1, force: bool = False,
                  extra_patterns: tuple[str, ...] = (), config_file: str | None = None,
                  cluster: str | None = None, cluster_timeout_s: float = 20.0,
                  figure_format: str | None = None, groups=None,
                  progress: Callable[[dict], None] | None = None,
                  report_mode: str | None = None) -> RunSummary:
    """Measure every recording under `paths`; write spikes.csv, sweeps.csv, cells.csv,
    errors.csv and run.json to `out_dir`.

    Parameters
    ----------
    paths : list of str
        Files and folders (searched recursively; see
        :func:`~spikemeasure.run.discovery.search_recordings`: how files are named, each once;
        folders that cannot be searched and links not followed are failures of stage
        ``input``, files reached twice a note).
    out_dir : str or Path
        Created if missing; skipped when searching an input folder that contains it.
    settings : DetectionSettings
    step_s : (start_s, end_s), optional
        The current step for sweeps without a command channel.
    step_sizes_pa : (first_pa, increment_pa), optional
        With `step_s`: the step sizes of such sweeps, by sweep index.
    sampling_rate_hz : float, optional
        For text files without a time column.
    max_sweep_samples : int, optional
        Sweeps declaring more samples are refused before they are read (default
        :data:`spikemeasure.io.DEFAULT_MAX_SWEEP_SAMPLES`).
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
    report_mode : {'self-contained', 'linked', 'none'}, optional
        How ``report.html`` holds the figures (see
        :data:`~spikemeasure.params.REPORT_PARAMETER`); ``none`` writes no report (and
        removes one an earlier run left in `out_dir`); None: self-contained up to
        :data:`~spikemeasure.params.SELF_CONTAINED_MAX_CELLS` cells, linked beyond.

    Returns
    -------
    RunSummary
        ``notes`` holds messages that are not failures (files of `groups` not in the run,
        files of the run not in `groups`); ``tables`` the run's spikes, sweeps and cells
        tables as typed columns (:class:`~spikemeasure.run.outcome.ColumnTable`).

    Raises
    ------
    InvalidSettingError
        `max_sweep_samples` is not a positive whole number, or `report_mode` not one of its
        choices.
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
    _check_arguments(max_sweep_samples, figure_format)
    if report_mode is not None:
        REPORT_PARAMETER.check(report_mode)  # the parameter's own message for a bad value
    out = Path(out_dir)
    prepare_output(out)
    started = time.time()
    summary = RunSummary(out_dir=out)
    parameters = {"settings": settings.as_dict(),
                  "step_s": list(step_s) if step_s else None,
                  "step_sizes_pa": list(step_sizes_pa) if step_sizes_pa else None,
                  "sampling_rate_hz": sampling_rate_hz,
                  "max_sweep_samples": max_sweep_samples}
    # absolute: workers elsewhere (a cluster) may start in another folder
    figures = {"out": str(out.resolve()), "format": figure_format} if figure_format else None
    run = RunRecord(summary, parameters, started, config_file, figure_format, groups,
                    report_mode)
    with RunLock(out), StopRequest() as stop:
        remove_stale_temporaries(out)
        try:
            cache = OutcomeCache(out, parameters)
            plan = plan_run(paths, out, cache, stop, force=force,
                            extra_patterns=extra_patterns, figures=figures)
            run.early.extend(plan.failures)
            summary.notes.extend(plan.notes)
            run.entries[:] = plan.entries
            run.outcomes[:] = plan.outcomes
            run.write_start()
            _report_reused(run, progress, started)
            total = len(plan.entries)
            done_count = [sum(o is not None for o in run.outcomes)]

            def finish(task: Task, outcome: FileOutcome) -> None:
                cache_path = task.cache_path
                if task.hash_while_reading:
                    cache_path = cache.path_of_read(task.path, outcome,
                                                    run.entries[task.index])
                outcome = run.keep(task.index, outcome, cache_path)
                done_count[0] += 1
                if progress is not None:
                    progress({"done": done_count[0], "total": total, "file": outcome.file,
                              "line": describe_outcome(outcome),
                              "elapsed_s": time.time() - started})
                run.refresh_if_due()

            execute_tasks(plan.tasks, parameters, figures, finish, stop, jobs=jobs,
                          cluster=cluster, cluster_timeout_s=cluster_timeout_s)
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


def _check_arguments(max_sweep_samples, figure_format) -> None:
    if max_sweep_samples is not None and (isinstance(max_sweep_samples, bool) or not isinstance(
            max_sweep_samples, int) or max_sweep_samples < 1):
        raise InvalidSettingError(
            f"`max_sweep_samples` must be a positive whole number (got {max_sweep_samples!r})")
    if figure_format is not None:
        from ..figures import FIGURE_FORMATS

        if figure_format not in FIGURE_FORMATS:
            raise SpikemeasureError(f"figure format must be one of "
                                    f"{', '.join(FIGURE_FORMATS)} (got {figure_format!r})")


def _report_reused(run: RunRecord, progress, started: float) -> None:
    if progress is None:
        return
    total = len(run.entries)
    for k, o in enumerate(run.outcomes):
        if o is not None and run.entries[k].get("status") == "reused":
            progress({"done": None, "total": total, "file": o.file,
                      "line": f"unchanged {o.file} (kept from an earlier run)",
                      "elapsed_s": time.time() - started})


def default_jobs() -> int:
    """The machine's cores available to this process."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on every platform
        return max(1, os.cpu_count() or 1)
