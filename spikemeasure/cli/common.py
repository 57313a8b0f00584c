"""What the commands share: the --debug state, errors as exit codes, the progress display and
the one call that measures recordings into a folder."""
from __future__ import annotations

import signal
import sys
from typing import Any, NoReturn, Sequence

import click

from ..errors import UnusableOutputError

__all__ = ["CliState", "InputError", "debugging", "fail", "input_error", "Progress",
           "measure_into"]


class CliState:
    """The group's options, passed to every command."""

    def __init__(self, debug: bool):
        self.debug = debug


class InputError(click.ClickException):
    """A usage error (a bad project file or option value, an --out that cannot be used), or an
    input problem of check or accept: 'Error: ...' and exit code 2."""

    exit_code = 2


def debugging(ctx: click.Context) -> bool:
    """Whether --debug asks for tracebacks."""
    state = ctx.find_object(CliState)
    return bool(state and state.debug)


def fail(ctx: click.Context, exc: Exception) -> NoReturn:
    """Library errors become one 'Error:' line, unless --debug asks for the traceback: exit
    2 for a usage error (a bad project file or option value), 1 for the rest."""
    from ..config import ConfigError
    from ..errors import InvalidSettingError

    if debugging(ctx):
        raise exc
    if isinstance(exc, (ConfigError, InvalidSettingError, UnusableOutputError)):
        raise InputError(str(exc)) from exc
    raise click.ClickException(str(exc)) from exc


def input_error(ctx: click.Context, exc: Exception) -> NoReturn:
    """Any library error of check or accept: 'Error:' and exit 2, or the traceback."""
    if debugging(ctx):
        raise exc
    raise InputError(str(exc)) from exc


class Progress:
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


def measure_into(ctx: click.Context, paths: Sequence[str], out_dir: str, params: Any, *,
                 jobs: int | None, quiet: bool, on_interrupt: str, **options: Any):
    """Measure `paths` into `out_dir` with the run's parameters (a
    :class:`~spikemeasure.config.RunParameters`), showing progress unless `quiet`.

    Stopped by a signal, it says so (`on_interrupt` after "Interrupted (SIGNAL): ") and exits
    with 128 + the signal's number. `options` go to
    :func:`spikemeasure.run.measure_paths` as they are.
    """
    from ..run import default_jobs, measure_paths

    progress = None if quiet else Progress(sys.stderr.isatty())
    try:
        return measure_paths(list(paths), out_dir, params.settings, step_s=params.step_s,
                             step_sizes_pa=params.step_sizes_pa,
                             sampling_rate_hz=params.sampling_rate_hz,
                             max_sweep_samples=params.max_sweep_samples,
                             jobs=jobs or default_jobs(), config_file=params.config_file,
                             progress=progress, **options)
    except KeyboardInterrupt as exc:
        if progress is not None:
            progress.close()
            progress = None
        signum = int(getattr(exc, "signum", signal.SIGINT))
        click.echo(f"Interrupted ({signal.Signals(signum).name}): {on_interrupt}", err=True)
        ctx.exit(128 + signum)
    finally:
        if progress is not None:
            progress.close()

