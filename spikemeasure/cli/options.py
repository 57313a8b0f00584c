"""The parameter options, made from :data:`spikemeasure.params.PARAMETERS`, and the project
file layered under them.

Each parameter becomes one option whose type checks the value with
:func:`spikemeasure.params.check_value`, so a bad value gets the parameter's own message. The
project file's ``[measure]`` values reach the options through click's ``default_map``: the
command line wins, then the file, then the declared default, and click records where each
value came from (:class:`click.core.ParameterSource`).
"""
from __future__ import annotations

from pathlib import Path
from typing import Any, Callable

import click
from click.core import ParameterSource

from ..errors import InvalidSettingError
from ..params import PARAMETERS, Parameter
from .common import InputError, debugging

__all__ = ["ParameterType", "parameter_options", "config_option", "project_option",
           "ProjectFileCommand", "run_parameters", "checked_project_file",
           "check_step_options"]

#: Key of ``Context.meta`` holding the project file a command's values came from.
PROJECT_FILE_META = "spikemeasure.project_file"


class ParameterType(click.ParamType):
    """The click type of one parameter: text from the command line is parsed, then every value
    (also one from the project file) is checked by the parameter's declaration."""

    def __init__(self, declared: Parameter) -> None:
        self.declared = declared
        self.name = declared.kind
        if declared.kind == "time_span":
            self.is_composite = True
            self.arity = 2

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None
                ) -> Any:
        try:
            return self.declared.check(_parsed(self.declared.kind, value))
        except InvalidSettingError as exc:
            self.fail(str(exc), param, ctx)


def _parsed(kind: str, value: Any) -> Any:
    """Numbers from command-line text; anything that does not parse is left for the check to
    name."""
    if kind == "time_span" and isinstance(value, (tuple, list)):
        return tuple(_parsed("number", v) for v in value)
    if kind in ("number", "whole_number") and isinstance(value, str):
        try:
            return int(value) if kind == "whole_number" else float(value)
        except ValueError:
            try:
                return float(value)
            except ValueError:
                return value
    return value


def _option(declared: Parameter) -> Callable:
    unit = f", in {declared.unit}" if declared.unit else ""
    meaning = ""  # what a default of None stands for, when it is more than "not given"
    if declared.default is None and declared.default_text != "none":
        meaning = f"  [default: {declared.default_text}]"
    return click.option(declared.option, declared.name, type=ParameterType(declared),
                        default=declared.default, show_default=declared.default is not None,
                        metavar=declared.metavar, help=f"{declared.help}{unit}.{meaning}")


def declared_option(declared: Parameter) -> Callable:
    """The option of a parameter declared outside PARAMETERS (the report mode)."""
    return _option(declared)


def parameter_options(func: Callable) -> Callable:
    """Add one option per parameter, in declaration order."""
    for declared in reversed(PARAMETERS):
        func = _option(declared)(func)
    return func


def config_option(func: Callable) -> Callable:
    """``--config`` of the measuring commands."""
    return click.option(
        "--config", "config_path", type=click.Path(exists=True, dir_okay=False), default=None,
        metavar="FILE",
        help="Project file of parameters (default: spikemeasure.toml in the current folder, "
             "else in the first folder given); command-line options override it.")(func)


def project_option(func: Callable) -> Callable:
    """``--config`` of ``check`` and ``accept``."""
    return click.option(
        "--config", "config_path", type=click.Path(dir_okay=False), default=None,
        metavar="FILE",
        help="Project file with [measure], [quality] and [regression] (default: "
             "spikemeasure.toml in the current folder, else in the first folder given; "
             "without one: no quality limits, accepted results in ./accepted).")(func)


def checked_project_file(path: str | Path) -> tuple[dict, Any]:
    """The [measure] values and the check settings of a project file, every table checked:
    a bad project file is the same error in every command."""
    from ..checks.settings import load_check_settings
    from ..config import load_config

    return load_config(path), load_check_settings(path)


class ProjectFileCommand(click.Command):
    """A command whose parameter options take their defaults from the project file: the
    ``--config`` file, else ``spikemeasure.toml`` in the current folder, else in the first
    folder given. A bad file is a usage error naming the file and the key (exit 2)."""

    def parse_args(self, ctx: click.Context, args: list[str]) -> list[str]:
        if not ctx.resilient_parsing and not set(args) & set(ctx.help_option_names):
            path = self._project_file(ctx, args)
            if path is not None:
                from ..config import ConfigError

                try:
                    values = checked_project_file(path)[0]
                except ConfigError as exc:
                    if debugging(ctx):
                        raise
                    raise InputError(str(exc)) from exc
                ctx.default_map = {**(ctx.default_map or {}), **values}
                ctx.meta[PROJECT_FILE_META] = str(path)
        return super().parse_args(ctx, args)

    def _project_file(self, ctx: click.Context, args: list[str]) -> Path | None:
        """The file the arguments point to, from a first reading that forgives every error
        (the real reading reports them)."""
        from ..config import find_project_file

        probe = click.Context(self, info_name=ctx.info_name, parent=ctx.parent,
                              resilient_parsing=True)
        with probe:
            super().parse_args(probe, list(args))
        given = probe.params.get("config_path")
        if given:
            return Path(given)
        if any(arg == "--config" or arg.startswith("--config=") for arg in args):
            return None  # a --config that cannot be used: the real reading says why
        paths = probe.params.get("paths") or [probe.params.get("file")]
        return find_project_file([p for p in paths if p])


def check_step_options(step_s, step_sizes_pa) -> None:
    if step_sizes_pa is not None and step_s is None:
        raise click.UsageError("--step-sizes needs --step START END")


def run_parameters(ctx: click.Context, values: dict):
    """The run's parameters from a command's option values: command line over project file
    over the declared defaults (:func:`spikemeasure.config.merge_parameters` says which
    source a conflict between values came from)."""
    from ..config import merge_parameters

    names = [p.name for p in PARAMETERS]
    sources = {name: ctx.get_parameter_source(name) for name in names}
    from_file = {name: values[name] for name in names
                 if sources[name] == ParameterSource.DEFAULT_MAP}
    given = {name: values[name] for name in names
             if sources[name] == ParameterSource.COMMANDLINE}
    if not from_file.get("step_s"):
        check_step_options(given.get("step_s"), given.get("step_sizes_pa"))
    return merge_parameters(from_file, given, ctx.meta.get(PROJECT_FILE_META))
