"""``spikemeasure check`` and ``spikemeasure accept``: a run against the lab's quality limits
and accepted results."""
from __future__ import annotations

import click

from ..errors import SpikemeasureError, printable_name
from .common import input_error, measure_into
from .options import checked_project_file, project_option

__all__ = ["check", "accept"]


def _check_settings(paths, config_path):
    """The project file of the command and its check settings (defaults without one)."""
    from pathlib import Path

    from ..checks.settings import load_check_settings
    from ..config import find_project_file

    path = Path(config_path) if config_path else find_project_file(list(paths))
    if path is None:
        return path, load_check_settings(None)
    return path, checked_project_file(path)[1]


@click.command()
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
@project_option
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
    from ..checks.apply import check_run, check_tables
    from ..checks.findings import report_dict, report_text
    from ..checks.junit import write_junit

    if out_dir is None and len(paths) != 1:
        raise click.UsageError("give one folder of a run's tables, or recordings with "
                               "--out DIR to measure them first")
    try:
        project, settings = _check_settings(paths, config_path)
        if out_dir is not None:
            from ..config import merge_parameters

            file_values = checked_project_file(project)[0] if project else {}
            params = merge_parameters(file_values, {}, str(project) if project else None)
            summary = measure_into(
                ctx, paths, out_dir, params, jobs=jobs, quiet=quiet,
                on_interrupt=f"nothing was checked; the tables in "
                             f"{printable_name(str(out_dir))} hold the files finished.")
            if not quiet:
                click.echo(f"measured {summary.files_measured + summary.files_reused} files "
                           f"({summary.files_failed} failed) -> {out_dir}", err=True)
            from ..checks.run_tables import tables_from_columns

            # the run's typed tables, as in memory: nothing is read back from its folder
            report = check_tables(tables_from_columns(
                out_dir, summary.tables["spikes"].values, summary.tables["sweeps"].values,
                summary.tables["cells"].values, errors=summary.error_columns,
                record=summary.record), settings)
        else:
            report = check_run(paths[0], settings)
        from ..checks.report_marks import mark_report
        mark_report(out_dir or paths[0], report)  # failed cells marked in report.html
        if junit_path:
            write_junit(junit_path, report)
    except SpikemeasureError as exc:
        input_error(ctx, exc)
    text = report_text(report, max_rows=max_rows or None)
    if as_json:
        import json

        click.echo(json.dumps(report_dict(report), indent=2))
        click.echo(text if not quiet else text.splitlines()[-1], err=True)
    else:
        click.echo(text if not quiet else text.splitlines()[-1])
    if not report.passed:
        ctx.exit(1)


@click.command()
@click.argument("results_dir", type=click.Path())
@project_option
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

    from ..checks.accept import accept_results

    try:
        project, settings = _check_settings([results_dir], config_path)
        project_dir = project.resolve().parent if project is not None else Path.cwd()
        info = accept_results(results_dir, settings.accepted_dir, project_dir=project_dir)
    except SpikemeasureError as exc:
        input_error(ctx, exc)
    cells = f" ({info['cells']} cells)" if info["cells"] != info["files"] else ""
    click.echo(f"accepted {info['files']} files{cells}, {info['sweeps']} sweeps, {info['spikes']} "
               f"spikes from {results_dir} -> {settings.accepted_dir} (replaced "
               f"{', '.join(info['replaced'])}; commit that folder)")
    if info["failures"]:
        click.echo(f"note: {len(info['failures'])} failures of that run (errors.csv) are not "
                   "part of the accepted results:", err=True)
        for f in info["failures"]:
            click.echo(f"  {f['message']}", err=True)
