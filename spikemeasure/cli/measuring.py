"""``spikemeasure measure`` and ``spikemeasure inspect``: the commands that measure, with the
parameter options and the project file under them."""
from __future__ import annotations

import click

from ..errors import SpikemeasureError, printable_name
from .common import debugging, fail, measure_into
from ..params import REPORT_PARAMETER
from .options import (ProjectFileCommand, config_option, declared_option, parameter_options,
                      run_parameters)

__all__ = ["measure", "inspect"]


@click.command(cls=ProjectFileCommand)
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
              help="File format of the figures. PNG and SVG are shown in report.html, PDF "
                   "is linked.")
@click.option("--groups", "groups_path", type=click.Path(exists=True, dir_okay=False),
              default=None, metavar="FILE.csv",
              help="CSV with a header row naming a `file` column (files as in cells.csv) and "
                   "one group column (e.g. file,genotype): the batch figure and the report "
                   "show cells by group.")
@declared_option(REPORT_PARAMETER)
@config_option
@parameter_options
@click.pass_context
def measure(ctx: click.Context, paths, out_dir, jobs, force, patterns, cluster, quiet,
            no_figures, figure_format, groups_path, report_mode, config_path, **values):
    """Measure every spike, sweep and cell in PATHS (files or folders) into --out.

    Writes spikes.csv, sweeps.csv, cells.csv, errors.csv, run.json, each cell's figures
    (figures/) and report.html. A rerun measures only the files that changed (or whose
    parameters did) since the last run into the same --out.
    """
    groups = None
    if groups_path is not None:
        from ..report import GroupsFileError, read_groups

        try:
            groups = read_groups(groups_path)
        except GroupsFileError as exc:
            raise click.BadParameter(str(exc), param_hint="--groups") from exc
    try:
        params = run_parameters(ctx, values)
        summary = measure_into(
            ctx, paths, out_dir, params, jobs=jobs, quiet=quiet,
            on_interrupt=f"the tables in {printable_name(str(out_dir))} hold the files "
                         "finished and run.json says the run was interrupted; run the same "
                         "command again to measure the rest.",
            force=force, extra_patterns=tuple(patterns), cluster=cluster,
            figure_format=None if no_figures else figure_format, groups=groups,
            report_mode=report_mode)
    except SpikemeasureError as exc:
        fail(ctx, exc)
    _say_summary(ctx, summary)
    if summary.failures or summary.nothing_measured:
        ctx.exit(1)


def _say_summary(ctx: click.Context, summary) -> None:
    """The run's counts, notes and failures on stderr."""
    reused = f" ({summary.files_reused} unchanged, kept)" if summary.files_reused else ""
    done = summary.files_measured + summary.files_reused
    click.echo(f"{done} file{'' if done == 1 else 's'} measured{reused}, "
               f"{summary.files_failed} failed; {summary.sweeps_measured} sweeps, "
               f"{summary.spikes} spikes -> {printable_name(str(summary.out_dir))}", err=True)
    for note in summary.notes:
        click.echo(f"Note: {note}", err=True)
    if summary.report_path.is_file():  # not with --report none
        click.echo(f"Report: {printable_name(str(summary.report_path))}", err=True)
    if summary.failures:
        n = len(summary.failures)
        click.echo(f"{n} problem{'' if n == 1 else 's'} (also in "
                   f"{printable_name(str(summary.errors_path))}):", err=True)
        for f in summary.failures:
            click.echo(f"  {f['message']}", err=True)
    if debugging(ctx):
        for entry in summary.inputs:
            if entry.get("traceback"):
                click.echo(f"Traceback of the internal error in {entry['file']}:\n"
                           f"{entry['traceback']}", err=True)
    if summary.nothing_measured:
        click.echo("Error: nothing could be measured", err=True)


@click.command(cls=ProjectFileCommand)
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--show", is_flag=True,
              help="Also open the cell's figures (those `measure` writes) in windows.")
@config_option
@parameter_options
@click.pass_context
def inspect(ctx: click.Context, file, show, config_path, **values):
    """Show what FILE holds: format, channels, each sweep's step and spikes, the cell summary."""
    from ..inspection import inspect_file

    try:
        params = run_parameters(ctx, values)
        found = inspect_file(file, params.settings, step_s=params.step_s,
                             step_sizes_pa=params.step_sizes_pa,
                             sampling_rate_hz=params.sampling_rate_hz,
                             max_sweep_samples=params.max_sweep_samples)
    except SpikemeasureError as exc:
        fail(ctx, exc)
    click.echo(found.text)
    try:
        if show and found.ok:
            from ..figures import show_figures

            for electrode in dict.fromkeys(r.sweep.electrode for r in found.results):
                cell = [r for r in found.results if r.sweep.electrode == electrode]
                several = len({r.sweep.electrode for r in found.results}) > 1
                show_figures(cell, settings=params.settings,
                             file=f"{file}, electrode {electrode}" if several else file)
    except SpikemeasureError as exc:
        fail(ctx, exc)
    finally:
        found.close()
    if not found.ok:
        ctx.exit(1)
