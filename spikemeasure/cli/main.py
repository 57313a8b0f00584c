"""The ``spikemeasure`` command: a thin layer over the Python API.

Exit codes of ``measure`` and ``inspect``: 0 everything was measured; 1 any file or sweep
failed (the rest were measured and errors.csv says what failed), or an error (also a write
that failed during the run, e.g. a full disk); 2 a usage error (a bad option, a bad option
value, a malformed or invalid project file, an --out that cannot be used); 128 + the signal's
number when stopped by a signal (130 Ctrl-C, 143 SIGTERM, 129 SIGHUP), after writing the
tables of the files finished.
``check`` and ``accept``: 0 all checks passed (or the results were accepted); 1 a check
failed; 2 a usage or input error (missing tables, a bad project file); 128 + the signal's
number when stopped by a signal while measuring (130 Ctrl-C, 143 SIGTERM, 129 SIGHUP).
"""
from __future__ import annotations

import signal
import sys

import click

from .. import __version__
from ..columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS, columns_markdown
from ..detection import THRESHOLD_METHODS, DetectionSettings
from ..errors import SpikemeasureError, UnusableOutputError, printable_name



def _step_sizes(ctx: click.Context, param: click.Parameter, value):
    if value is None:
        return None
    from ..sweeps import parse_step_sizes

    try:
        return parse_step_sizes(value)
    except SpikemeasureError as exc:
        raise click.BadParameter(str(exc)) from exc


def _settings_options(func):
    """The detection and measurement options shared by `measure` and `inspect`."""
    d = DetectionSettings()
    options = [
        click.option("--onset-rate", "onset_rate_v_per_s", type=click.FloatRange(min=0, min_open=True),
                     default=d.onset_rate_v_per_s, show_default=True, metavar="V/S",
                     help="dV/dt whose upward crossing starts a spike (and defines threshold by "
                          "default), in V/s."),
        click.option("--min-rise", "min_rise_mv", type=click.FloatRange(min=0, min_open=True),
                     default=d.min_rise_mv, show_default=True, metavar="MV",
                     help="The peak must be at least this far above the onset voltage, in mV."),
        click.option("--lowest-peak", "lowest_peak_mv", type=float, default=d.lowest_peak_mv,
                     show_default=True, metavar="MV", help="The peak must be above this voltage, in mV."),
        click.option("--peak-window", "peak_window_ms", type=click.FloatRange(min=0, min_open=True),
                     default=d.peak_window_ms, show_default=True, metavar="MS",
                     help="The peak must come within this time of the onset, in ms."),
        click.option("--smoothing", "smoothing_ms", type=click.FloatRange(min=0, min_open=True),
                     default=d.smoothing_ms, show_default=True, metavar="MS",
                     help="Savitzky-Golay window for the dV/dt of detection and threshold and "
                          "for the smoothed voltage, in ms."),
        click.option("--rate-smoothing", "rate_smoothing_ms",
                     type=click.FloatRange(min=0, min_open=True), default=d.rate_smoothing_ms,
                     show_default=True, metavar="MS",
                     help="Shorter window for each spike's maximum and minimum dV/dt, in ms."),
        click.option("--threshold-method", type=click.Choice(THRESHOLD_METHODS),
                     default=d.threshold_method, show_default=True,
                     help="Threshold definition (see docs/measurements.md)."),
        click.option("--threshold-fraction", type=click.FloatRange(0, 1, min_open=True, max_open=True),
                     default=d.threshold_fraction, show_default=True, metavar="FRACTION",
                     help="Fraction of the maximum dV/dt, for --threshold-method max_rate_fraction."),
        click.option("--min-samples-across-width", type=click.IntRange(min=1),
                     default=d.min_samples_across_width, show_default=True, metavar="N",
                     help="Leave the half-width empty when fewer samples lie above half amplitude."),
        click.option("--search-window", "search_window_ms",
                     type=click.FloatRange(min=0, min_open=True), default=d.search_window_ms,
                     show_default=True, metavar="MS",
                     help="How far each spike's searches reach: back from onset for the "
                          "threshold, forward from the peak for repolarization and trough, in ms."),
        click.option("--step", "step_times", type=(float, float), default=None,
                     metavar="START END",
                     help="The current step's start and end in s, for files without a "
                          "command-current channel."),
        click.option("--step-sizes", "step_sizes", callback=_step_sizes, default=None,
                     metavar="FIRST:INCREMENT",
                     help="With --step: the step of sweep k is FIRST + k * INCREMENT pA "
                          "(for files without a command-current channel)."),
        click.option("--sampling-rate", "sampling_rate_hz", type=click.FloatRange(min=0, min_open=True),
                     default=None, metavar="HZ",
                     help="Sampling rate for text files without a time column, in Hz."),
        click.option("--max-sweep-samples", "max_sweep_samples", type=click.IntRange(min=1),
                     default=None, metavar="N",
                     help="Refuse, unread, any sweep whose file declares more samples than "
                          "this [default: 1000000000]."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def _check_step_options(step_times, step_sizes) -> None:
    if step_sizes is not None and step_times is None:
        raise click.UsageError("--step-sizes needs --step START END")


_FILE_KEYS = {"step_times": "step_s", "step_sizes": "step_sizes_pa",
              "sampling_rate_hz": "sampling_rate_hz", "max_sweep_samples": "max_sweep_samples",
              **{name: name for name in DetectionSettings.__dataclass_fields__}}


def _run_parameters(ctx: click.Context, paths, config_path, values: dict):
    """Command line over the project file over the defaults (see spikemeasure.config)."""
    from click.core import ParameterSource

    from ..config import find_project_file, merge_parameters

    path = config_path or find_project_file(list(paths))
    file_values = _checked_project_file(path)[0] if path else {}
    given = {_FILE_KEYS[name]: value for name, value in values.items()
             if name in _FILE_KEYS and ctx.get_parameter_source(name) == ParameterSource.COMMANDLINE}
    if not file_values.get("step_s"):
        _check_step_options(given.get("step_s"), given.get("step_sizes_pa"))
    return merge_parameters(file_values, given, str(path) if path else None)


def _checked_project_file(path):
    """The [measure] values and the check settings of a project file, every table checked:
    a bad project file is the same error in every command."""
    from ..config import load_check_settings, load_config

    return load_config(path), load_check_settings(path)


def _config_option(func):
    return click.option(
        "--config", "config_path", type=click.Path(exists=True, dir_okay=False), default=None,
        metavar="FILE",
        help="Project file of parameters (default: spikemeasure.toml in the current folder, "
             "else in the first folder given); command-line options override it.")(func)


class _Context:
    def __init__(self, debug: bool):
        self.debug = debug


class _InputError(click.ClickException):
    """A usage error (a bad project file or option value, an --out that cannot be used), or an
    input problem of check or accept: 'Error: ...' and exit code 2."""

    exit_code = 2


def _fail(ctx: click.Context, exc: Exception) -> None:
    """Library errors become one 'Error:' line, unless --debug asks for the traceback: exit
    2 for a usage error (a bad project file or option value), 1 for the rest."""
    from ..config import ConfigError
    from ..errors import InvalidSettingError

    if ctx.find_object(_Context).debug:
        raise exc
    if isinstance(exc, (ConfigError, InvalidSettingError, UnusableOutputError)):
        raise _InputError(str(exc)) from exc
    raise click.ClickException(str(exc)) from exc


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="spikemeasure")
@click.option("--debug", is_flag=True, help="Show tracebacks for errors.")
@click.pass_context
def main(ctx: click.Context, debug: bool) -> None:
    """Measure action potentials in whole-cell current-clamp recordings.

    Reads NWB, NIX, plain text and other formats neo reads; writes CSV tables. Results need
    review by a qualified person; not for clinical decisions.
    """
    ctx.obj = _Context(debug)


class _Progress:
    """A one-line progress display on a terminal; plain log lines elsewhere (CI)."""

    def __init__(self, on_terminal: bool):
        self.on_terminal = on_terminal
        self.width = 0

    def __call__(self, event: dict) -> None:
        if not self.on_terminal:
            click.echo(event["line"], err=True)
            return
        if event["done"] is None:
            return
        done, total, elapsed = event["done"], event["total"], event["elapsed_s"]
        remaining = elapsed / done * (total - done) if done else 0.0
        text = (f"[{done}/{total}] {event['file'][-40:]}  elapsed {_clock(elapsed)}  "
                f"remaining {_clock(remaining)}")
        click.echo("\r" + text.ljust(self.width), err=True, nl=False)
        self.width = len(text)

    def close(self) -> None:
        if self.on_terminal and self.width:
            click.echo("", err=True)


def _clock(seconds: float) -> str:
    minutes, secs = divmod(int(round(seconds)), 60)
    hours, minutes = divmod(minutes, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes:02d}:{secs:02d}"


@main.command()
@click.argument("paths", nargs=-1, required=True, type=click.Path())
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False),
              help="Folder for spikes.csv, sweeps.csv, cells.csv, errors.csv and run.json "
                   "(created if missing).")
@click.option("--jobs", type=click.IntRange(min=1), default=None, metavar="N",
              help="Files measured in parallel, in N processes.  [default: the machine's cores]")
@click.option("--force", is_flag=True,
              help="Measure every file again, also those unchanged since an earlier run.")
@click.option("--glob", "patterns", multiple=True, metavar="PATTERN",
              help="Also pick up files matching PATTERN in folders (e.g. '*.dat'); repeatable. "
                   "Open formats (.nwb, .nix, .txt, .csv, .tsv) are picked up anyway.")
@click.option("--cluster", envvar="SPIKEMEASURE_CLUSTER", default=None, metavar="ADDRESS",
              help="Measure the files on the Dask distributed scheduler at ADDRESS (e.g. "
                   "tcp://head-node:8786; also $SPIKEMEASURE_CLUSTER). Needs "
                   "pip install \"spikemeasure[cluster]\".")
@click.option("--quiet", is_flag=True, help="Print only the final summary.")
@click.option("--no-figures", "no_figures", is_flag=True,
              help="Do not draw figures (the tables and report.html are written anyway).")
@click.option("--format", "figure_format", type=click.Choice(["png", "svg", "pdf"]),
              default="png", show_default=True,
              help="File format of the figures. PNG and SVG are embedded in report.html, PDF "
                   "is linked.")
@click.option("--groups", "groups_path", type=click.Path(exists=True, dir_okay=False),
              default=None, metavar="FILE.csv",
              help="CSV with a header row naming a `file` column (files as in cells.csv) and "
                   "one group column (e.g. file,genotype): the batch figure and the report "
                   "show cells by group.")
@_config_option
@_settings_options
@click.pass_context
def measure(ctx: click.Context, paths, out_dir, jobs, force, patterns, cluster, quiet,
            no_figures, figure_format, groups_path, config_path, **kw):
    """Measure every spike, sweep and cell in PATHS (files or folders) into --out.

    Writes spikes.csv, sweeps.csv, cells.csv, errors.csv, run.json, each cell's figures
    (figures/) and report.html. A rerun measures only the files that changed (or whose
    parameters did) since the last run into the same --out.
    """
    from ..runner import default_jobs, measure_paths

    groups = None
    if groups_path is not None:
        from ..report import GroupsFileError, read_groups

        try:
            groups = read_groups(groups_path)
        except GroupsFileError as exc:
            raise click.BadParameter(str(exc), param_hint="--groups") from exc
    progress = None if quiet else _Progress(sys.stderr.isatty())
    try:
        params = _run_parameters(ctx, paths, config_path, kw)
        _check_step_options(params.step_s, params.step_sizes_pa)
        summary = measure_paths(list(paths), out_dir, params.settings,
                                step_times=params.step_s, step_sizes=params.step_sizes_pa,
                                sampling_rate_hz=params.sampling_rate_hz,
                                max_sweep_samples=params.max_sweep_samples,
                                jobs=jobs or default_jobs(), force=force,
                                extra_patterns=tuple(patterns), config_file=params.config_file,
                                cluster=cluster,
                                figure_format=None if no_figures else figure_format,
                                groups=groups, progress=progress)
    except KeyboardInterrupt as exc:
        if progress is not None:
            progress.close()
        signum = int(getattr(exc, "signum", signal.SIGINT))
        click.echo(f"Interrupted ({signal.Signals(signum).name}): the tables in {printable_name(str(out_dir))} hold "
                   "the files finished and run.json says the run was interrupted; run the "
                   "same command again to measure the rest.", err=True)
        ctx.exit(128 + signum)
        return
    except SpikemeasureError as exc:
        if progress is not None:
            progress.close()
        _fail(ctx, exc)
        return
    if progress is not None:
        progress.close()
    reused = f" ({summary.files_reused} unchanged, kept)" if summary.files_reused else ""
    done = summary.files_measured + summary.files_reused
    click.echo(f"{done} file{'' if done == 1 else 's'} measured{reused}, "
               f"{summary.files_failed} failed; {summary.sweeps_measured} sweeps, "
               f"{summary.spikes} spikes -> {printable_name(str(summary.out_dir))}", err=True)
    for note in summary.notes:
        click.echo(f"Note: {note}", err=True)
    click.echo(f"Report: {printable_name(str(summary.report_path))}", err=True)
    if summary.failures:
        n = len(summary.failures)
        click.echo(f"{n} problem{'' if n == 1 else 's'} (also in "
                   f"{printable_name(str(summary.errors_path))}):", err=True)
        for f in summary.failures:
            click.echo(f"  {f['message']}", err=True)
    if ctx.find_object(_Context).debug:
        for entry in summary.inputs:
            if entry.get("traceback"):
                click.echo(f"Traceback of the internal error in {entry['file']}:\n"
                           f"{entry['traceback']}", err=True)
    if summary.nothing_measured:
        click.echo("Error: nothing could be measured", err=True)
    if summary.failures or summary.nothing_measured:
        ctx.exit(1)


@main.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--show", is_flag=True,
              help="Also open the cell's figures (those `measure` writes) in windows.")
@_config_option
@_settings_options
@click.pass_context
def inspect(ctx: click.Context, file, show, config_path, **kw):
    """Show what FILE holds: format, channels, each sweep's step and spikes, the cell summary."""
    from ..inspection import inspect_file

    try:
        params = _run_parameters(ctx, [file], config_path, kw)
        _check_step_options(params.step_s, params.step_sizes_pa)
        found = inspect_file(file, params.settings, step_times=params.step_s,
                             step_sizes=params.step_sizes_pa,
                             sampling_rate_hz=params.sampling_rate_hz,
                             max_sweep_samples=params.max_sweep_samples)
    except SpikemeasureError as exc:
        _fail(ctx, exc)
        return
    click.echo(found.text)
    try:
        if show and found.ok:
            from ..figures import show_figures

            show_figures(found.results, settings=params.settings, file=file)
    except SpikemeasureError as exc:
        _fail(ctx, exc)
        return
    finally:
        found.close()
    if not found.ok:
        ctx.exit(1)


def _input_error(ctx: click.Context, exc: Exception) -> None:
    if ctx.find_object(_Context).debug:
        raise exc
    raise _InputError(str(exc)) from exc


def _project_option(func):
    return click.option(
        "--config", "config_path", type=click.Path(dir_okay=False), default=None,
        metavar="FILE",
        help="Project file with [measure], [quality] and [regression] (default: "
             "spikemeasure.toml in the current folder, else in the first folder given; "
             "without one: no quality limits, accepted results in ./accepted).")(func)


def _check_settings(paths, config_path):
    from pathlib import Path

    from ..config import find_project_file, load_check_settings

    path = Path(config_path) if config_path else find_project_file(list(paths))
    if path is None:
        return path, load_check_settings(None)
    return path, _checked_project_file(path)[1]


@main.command()
@click.argument("paths", nargs=-1, required=True, type=click.Path())
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None,
              metavar="DIR",
              help="Measure PATHS (recordings: files or folders) into DIR first, with the "
                   "project file's [measure] parameters, then check DIR. Without --out, PATHS "
                   "is one folder holding a run's tables.")
@click.option("--jobs", type=click.IntRange(min=1), default=None, metavar="N",
              help="With --out: files measured in parallel.  [default: the machine's cores]")
@click.option("--junit", "junit_path", type=click.Path(dir_okay=False), default=None,
              metavar="FILE",
              help="Also write the report as JUnit XML to FILE (one test case per file and "
                   "check), for CI services that show test reports.")
@click.option("--json", "as_json", is_flag=True,
              help="Print the report as JSON on stdout (the table then goes to stderr).")
@click.option("--rows", "max_rows", type=click.IntRange(min=0), default=40, show_default=True,
              metavar="N", help="Show at most N failures in the table (0: all).")
@click.option("--quiet", is_flag=True, help="Print only the summary line (and errors).")
@_project_option
@click.pass_context
def check(ctx: click.Context, paths, out_dir, jobs, junit_path, as_json, max_rows, quiet,
          config_path):
    """Check a run against the lab's quality limits and its accepted results.

    \b
    spikemeasure check results/                        check the tables in results/
    spikemeasure check recordings/ --out results/      measure first, then check

    Quality limits come from [quality] of the project file; the accepted results (from
    `spikemeasure accept`) from [regression]'s accepted_folder, with a tolerance per
    column. Exit codes: 0 all passed, 1 a check failed, 2 a usage or input error.
    """
    from ..checks import check_run, report_dict, report_text
    from ..junit import write_junit

    if out_dir is None and len(paths) != 1:
        raise click.UsageError("give one folder of a run's tables, or recordings with "
                               "--out DIR to measure them first")
    try:
        project, settings = _check_settings(paths, config_path)
        if out_dir is not None:
            from ..runner import default_jobs, measure_paths

            params = _run_parameters(ctx, paths, str(project) if project else None, {})
            _check_step_options(params.step_s, params.step_sizes_pa)
            progress = None if quiet else _Progress(sys.stderr.isatty())
            try:
                summary = measure_paths(list(paths), out_dir, params.settings,
                                        step_times=params.step_s,
                                        step_sizes=params.step_sizes_pa,
                                        sampling_rate_hz=params.sampling_rate_hz,
                                        max_sweep_samples=params.max_sweep_samples,
                                        jobs=jobs or default_jobs(),
                                        config_file=params.config_file, progress=progress)
            except KeyboardInterrupt as exc:
                if progress is not None:
                    progress.close()
                signum = int(getattr(exc, "signum", signal.SIGINT))
                click.echo(f"Interrupted ({signal.Signals(signum).name}): nothing was checked; "
                           f"the tables in {printable_name(str(out_dir))} hold the files "
                           "finished.", err=True)
                ctx.exit(128 + signum)
                return
            if progress is not None:
                progress.close()
            if not quiet:
                click.echo(f"measured {summary.files_measured + summary.files_reused} files "
                           f"({summary.files_failed} failed) -> {out_dir}", err=True)
            results = out_dir
        else:
            results = paths[0]
        report = check_run(results, settings)
        if junit_path:
            write_junit(junit_path, report)
    except SpikemeasureError as exc:
        _input_error(ctx, exc)
        return
    text = report_text(report, max_rows=max_rows or None)
    if as_json:
        import json

        click.echo(json.dumps(report_dict(report), indent=2))
        click.echo(text if not quiet else text.splitlines()[-1], err=True)
    else:
        click.echo(text if not quiet else text.splitlines()[-1])
    if not report.passed:
        ctx.exit(1)


@main.command()
@click.argument("results_dir", type=click.Path())
@_project_option
@click.pass_context
def accept(ctx: click.Context, results_dir, config_path):
    """Save the run in RESULTS_DIR as the lab's accepted results.

    Copies spikes.csv, sweeps.csv, cells.csv and the run's versions and parameters
    (run.json) into the accepted folder ([regression] accepted_folder of the project file;
    ./accepted without one), replacing only those four files; commit that folder.
    `spikemeasure check` compares later runs with it. Refuses (exit 2) a run that did not
    finish, and an accepted folder that is not a folder of its own inside the project
    folder (one holding recordings or the results, the project folder itself, or outside it).
    """
    from pathlib import Path

    from ..checks import accept_results

    try:
        project, settings = _check_settings([results_dir], config_path)
        project_dir = project.resolve().parent if project is not None else Path.cwd()
        info = accept_results(results_dir, settings.accepted_dir, project_dir=project_dir)
    except SpikemeasureError as exc:
        _input_error(ctx, exc)
        return
    click.echo(f"accepted {info['files']} files, {info['sweeps']} sweeps, {info['spikes']} "
               f"spikes from {results_dir} -> {settings.accepted_dir} (replaced "
               f"{', '.join(info['replaced'])}; commit that folder)")
    if info["failures"]:
        click.echo(f"note: {len(info['failures'])} failures of that run (errors.csv) are not "
                   "part of the accepted results:", err=True)
        for f in info["failures"]:
            click.echo(f"  {f['message']}", err=True)


@main.command()
@click.option("--markdown", is_flag=True, help="Print docs/measurements.md.")
def columns(markdown: bool) -> None:
    """List the output columns with their units and definitions."""
    if markdown:
        click.echo(columns_markdown(), nl=False)
        return
    for title, cols in (("spikes.csv", SPIKE_COLUMNS), ("sweeps.csv", SWEEP_COLUMNS),
                        ("cells.csv", CELL_COLUMNS)):
        click.echo(title)
        for c in cols:
            click.echo(f"  {c.name:<24} {c.unit or '-':<6} {c.definition}")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
