"""A lab's project file, ``spikemeasure.toml``: the settings a team measures with.

The file's ``[measure]`` table holds parameters by name, as declared in
:data:`spikemeasure.params.PARAMETERS` (the detection settings and four run options), each
value checked by :func:`spikemeasure.params.check_value`::

    [measure]
    threshold_method = "max_rate_fraction"
    step_s = [0.1, 0.7]          # current step start and end, s
    step_sizes_pa = "-100:20"    # FIRST:INCREMENT, pA

Values given on the command line win over the file, and the file wins over the declared
defaults. The file is only ever parsed as TOML; nothing in it is executed.
"""
from __future__ import annotations

import difflib
import os
import re
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

from .checks.rules import QUALITY_KEYS, REGRESSION_KEYS
from .analysis.detection import DetectionSettings
from .errors import InvalidSettingError, SpikemeasureError
from .params import (RUN_OPTION_PARAMETERS, SETTING_PARAMETERS, check_value, parameter,
                     parameters_record)

if sys.version_info >= (3, 11):
    import tomllib
else:  # Python 3.10: the same parser, packaged separately
    try:
        import tomli as tomllib
    except ImportError:  # reported when a file is read, so the rest of the tool still works
        tomllib = None

__all__ = ["CONFIG_FILE_NAME", "CONFIG_SECTION", "SETTING_KEYS", "RUN_KEYS", "KNOWN_KEYS",
           "QUALITY_SECTION", "REGRESSION_SECTION", "SECTIONS", "ConfigError", "RunParameters",
           "find_config_file", "find_project_file", "load_config", "merge_parameters"]

#: Name of the project file looked for in the first folder given.
CONFIG_FILE_NAME = "spikemeasure.toml"

#: The one table the file may hold.
CONFIG_SECTION = "measure"

#: Keys that set :class:`DetectionSettings` fields, in field order.
SETTING_KEYS: tuple[str, ...] = tuple(p.name for p in SETTING_PARAMETERS)

#: Keys for the run options outside :class:`DetectionSettings`.
RUN_KEYS: tuple[str, ...] = tuple(p.name for p in RUN_OPTION_PARAMETERS)

#: Every key ``[measure]`` accepts.
KNOWN_KEYS: tuple[str, ...] = SETTING_KEYS + RUN_KEYS


#: The table of quality limits, read by ``spikemeasure check``.
QUALITY_SECTION = "quality"

#: The table of the comparison with accepted results, read by ``spikemeasure check``.
REGRESSION_SECTION = "regression"

#: Every table the file may hold.
SECTIONS: tuple[str, ...] = (CONFIG_SECTION, QUALITY_SECTION, REGRESSION_SECTION)


class ConfigError(SpikemeasureError):
    """The project file cannot be read, or holds an unknown key, a wrong type or a bad value."""


@dataclass(frozen=True)
class RunParameters:
    """The settings of one run, after the command line, the project file and the defaults.

    Attributes
    ----------
    settings : DetectionSettings
        Detection and measurement settings.
    step_s : (float, float) or None
        Start and end of the current step in s, for files without a command channel.
    step_sizes_pa : (float, float) or None
        First step size and increment in pA (sweep k gets first + k * increment).
    sampling_rate_hz : float or None
        Sampling rate for text files without a time column.
    config_file : str or None
        The project file the values came from, or None when none was used.
    max_sweep_samples : int or None
        Sweeps declaring more samples are refused before they are read; None: the reader's
        default (:data:`spikemeasure.io.DEFAULT_MAX_SWEEP_SAMPLES`).
    """

    settings: DetectionSettings
    step_s: tuple[float, float] | None
    step_sizes_pa: tuple[float, float] | None
    sampling_rate_hz: float | None
    config_file: str | None
    max_sweep_samples: int | None = None

    def as_dict(self) -> dict:
        """The parameters as one flat, JSON-ready dictionary, keyed as in the project file.

        Returns
        -------
        dict
            Every :class:`DetectionSettings` field, ``step_s`` and ``step_sizes_pa`` (lists of
            two numbers, or None), ``sampling_rate_hz``, ``max_sweep_samples`` and
            ``config_file``.

        Notes
        -----
        :meth:`from_dict` turns the result (also after a JSON round trip) back into an equal
        :class:`RunParameters`.
        """
        run_options = {"step_s": self.step_s, "step_sizes_pa": self.step_sizes_pa,
                       "sampling_rate_hz": self.sampling_rate_hz,
                       "max_sweep_samples": self.max_sweep_samples}
        return {**parameters_record(self.settings, run_options), "config_file": self.config_file}

    @classmethod
    def from_dict(cls, values: Mapping[str, Any]) -> "RunParameters":
        """Rebuild parameters from the output of :meth:`as_dict`.

        Parameters
        ----------
        values : mapping
            As written by :meth:`as_dict`, for example the parameters of a run record.
            Missing setting keys take their defaults.

        Returns
        -------
        RunParameters

        Raises
        ------
        InvalidSettingError
            For a key :meth:`as_dict` does not write, or a value out of range.
        """
        unknown = sorted(set(values) - set(KNOWN_KEYS) - {"config_file"})
        if unknown:
            raise InvalidSettingError(
                f"unknown parameter key(s) {', '.join(map(repr, unknown))}; expected the keys "
                f"RunParameters.as_dict writes: {', '.join(KNOWN_KEYS + ('config_file',))}")
        settings = DetectionSettings(**{k: values[k] for k in SETTING_KEYS if k in values})
        run_options = {k: None if values.get(k) is None else check_value(k, values[k])
                       for k in RUN_KEYS}
        return cls(settings=settings, config_file=values.get("config_file"), **run_options)


def find_config_file(paths: Sequence[str | os.PathLike]) -> Path | None:
    """``spikemeasure.toml`` in the first folder given (the commands look in the current folder
    first: :func:`find_project_file`).

    Parameters
    ----------
    paths : sequence of str or path-like
        The files and folders named on the command line, in order.

    Returns
    -------
    Path or None
        ``<first folder>/spikemeasure.toml`` if that file exists, else None.

    Notes
    -----
    Only the first argument that is a folder is looked in, and only at its top level:
    subfolders are not searched, later folders are not tried, and file arguments are passed
    over (their parent folder is not looked in). Arguments that do not exist are passed over
    too; reporting them is the reader's job.
    """
    for p in paths:
        folder = Path(p)
        if folder.is_dir():
            candidate = folder / CONFIG_FILE_NAME
            return candidate if candidate.is_file() else None
    return None


def load_config(path: str | os.PathLike) -> dict:
    """Read and check the ``[measure]`` table of a project file.

    Parameters
    ----------
    path : str or path-like
        The TOML file.

    Returns
    -------
    dict
        The keys the file sets, named as in the file, with values checked and converted by
        :func:`spikemeasure.params.check_value` (floats, ints, text, and pairs of floats for
        ``step_s`` and ``step_sizes_pa``). A file without ``[measure]`` gives an empty dict.

    Raises
    ------
    ConfigError
        If the file cannot be read or is not valid TOML (the message gives the line), holds a
        top-level key other than ``[measure]`` or an unknown key in it (the message lists the
        known keys and suggests the closest), a value of the wrong type, or a value the
        settings reject.

    Notes
    -----
    The settings the file gives are checked together against the defaults of the rest, so a
    file must be consistent on its own (for example ``smoothing_ms`` shorter than the
    effective ``peak_window_ms``).
    """
    name = str(path)
    document = _read_document(path)

    _check_sections(document, name)
    table = document.get(CONFIG_SECTION, {})
    if not isinstance(table, dict):
        raise ConfigError(
            f"{name}: `{CONFIG_SECTION}` must be a table, written as a [{CONFIG_SECTION}] "
            f"header line followed by `key = value` lines (got {_describe(table)})")
    for key in table:
        if key not in KNOWN_KEYS:
            raise ConfigError(f"{name}: {_unknown_key_message(key, f'[{CONFIG_SECTION}]')}")

    values = {key: _checked(key, value, f"{name}: [{CONFIG_SECTION}]", ConfigError)
              for key, value in table.items()}
    _settings_from(values, lambda keys, exc: ConfigError(
        f"{name}: [{CONFIG_SECTION}] {_keys_phrase(keys)}: {exc}; change "
        f"{'it' if len(keys) == 1 else 'one of them'} in {name}"))
    return values


def _read_document(path: str | os.PathLike) -> dict:
    """The project file parsed as TOML, or a ConfigError naming the file and the problem."""
    name = str(path)
    if tomllib is None:
        raise ConfigError(
            f"{name}: reading a project file on Python 3.10 needs the 'tomli' package; "
            f"install it (pip install tomli) or use Python 3.11 or newer")
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except OSError as exc:
        raise ConfigError(f"{name}: cannot read the project file ({exc.strerror or exc}); "
                          f"check that it exists and is readable") from exc
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{name}: the project file is not UTF-8 text; save it as UTF-8") from exc
    except tomllib.TOMLDecodeError as exc:
        found = re.search(r"line (\d+)", str(exc))
        where = f" at line {found.group(1)}" if found else ""
        raise ConfigError(
            f"{name}: not valid TOML{where}: {exc}. Check that line: keys are written "
            f"`name = value`, text values need quotes and lists square brackets") from exc


def _check_sections(document: dict, name: str) -> None:
    """Every top-level entry must be one of the known tables."""
    extra = [k for k in document if k not in SECTIONS]
    if extra:
        close = difflib.get_close_matches(extra[0], SECTIONS, n=1)
        hint = f"did you mean [{close[0]}]? " if close else ""
        raise ConfigError(
            f"{name}: unknown top-level key or table {_quote(extra[0])}; {hint}the file may "
            f"hold the tables [{CONFIG_SECTION}] (keys {', '.join(KNOWN_KEYS)}), "
            f"[{QUALITY_SECTION}] (keys {', '.join(QUALITY_KEYS)}) and [{REGRESSION_SECTION}] "
            f"(keys {', '.join(REGRESSION_KEYS)}). Move the setting under "
            f"[{CONFIG_SECTION}] or the table it belongs to, or remove it")
    for section in SECTIONS:
        if section in document and not isinstance(document[section], dict):
            raise ConfigError(
                f"{name}: `{section}` must be a table, written as a [{section}] header line "
                f"followed by `key = value` lines (got {_describe(document[section])})")


def merge_parameters(file_values: Mapping[str, Any], cli_values: Mapping[str, Any],
                     config_file: str | None) -> RunParameters:
    """Combine command-line options, project-file values and defaults into run parameters.

    Parameters
    ----------
    file_values : mapping
        Values from :func:`load_config` (empty when there is no project file).
    cli_values : mapping
        Only the options the user gave on the command line, keyed by parameter name
        (:data:`spikemeasure.params.PARAMETERS`).
    config_file : str or None
        The project file `file_values` came from, for messages and the run record.

    Returns
    -------
    RunParameters
        Each value from the command line if given there, else from the file, else the
        :class:`DetectionSettings` default (None for the run options).

    Raises
    ------
    ConfigError
        If a value from the file is of the wrong type, or the combined settings are
        inconsistent and a value from the file takes part (the message says which value
        came from where), or the file gives ``step_sizes_pa`` and no step times are given
        anywhere.
    InvalidSettingError
        For the same problems when only command-line values take part, or for a key that is
        not a known parameter.

    Notes
    -----
    A None value counts as not given. Keys are merged one by one: command-line ``step_s``
    with file ``step_sizes_pa`` gives both.
    """
    source_name = config_file or CONFIG_FILE_NAME
    for label, given in (("project-file", file_values), ("command-line", cli_values)):
        for key in given:
            if key not in KNOWN_KEYS:
                raise InvalidSettingError(_unknown_key_message(key, f"the {label} values"))
    origin: dict[str, str] = {}
    values: dict[str, Any] = {}
    for key, value in file_values.items():
        if value is not None:
            values[key] = _checked(key, value, f"{source_name}: [{CONFIG_SECTION}]",
                                   ConfigError)
            origin[key] = "file"
    for key, value in cli_values.items():
        if value is not None:
            values[key] = _checked(key, value, "the command line:", InvalidSettingError)
            origin[key] = "command line"

    def error_for(keys: list[str]) -> type[SpikemeasureError]:
        return ConfigError if any(origin.get(k) == "file" for k in keys) else InvalidSettingError

    def blame(keys: list[str], exc: InvalidSettingError) -> SpikemeasureError:
        parts = [f"`{k}` from " + (source_name if origin[k] == "file" else "the command line")
                 for k in keys]
        places = sorted({source_name if origin[k] == "file" else "the command line"
                         for k in keys})
        return error_for(keys)(f"the settings ({', '.join(parts)}): {exc}; change "
                               f"{'it' if len(keys) == 1 else 'one of them'} in "
                               f"{' or '.join(places)}")

    settings = _settings_from(values, blame)

    if "step_sizes_pa" in values and "step_s" not in values:
        where = (source_name if origin["step_sizes_pa"] == "file" else "the command line")
        raise error_for(["step_sizes_pa"])(
            f"`step_sizes_pa` (from {where}) needs the step times `step_s`: add "
            f"step_s = {parameter('step_s').example} (start and end in s) under "
            f"[{CONFIG_SECTION}] in "
            f"{source_name}, or give the step's start and end on the command line")
    return RunParameters(settings=settings, step_s=values.get("step_s"),
                         step_sizes_pa=values.get("step_sizes_pa"),
                         sampling_rate_hz=values.get("sampling_rate_hz"),
                         config_file=config_file,
                         max_sweep_samples=values.get("max_sweep_samples"))


def _settings_from(values: Mapping[str, Any],
                   blame: Callable[[list[str], InvalidSettingError], SpikemeasureError]
                   ) -> DetectionSettings:
    """DetectionSettings from the setting keys of `values`.

    A rejection is passed to `blame` with the keys of `values` its message names (the
    settings name fields in backquotes), or all setting keys given if it names none of them.
    The defaults are consistent, so a rejection always involves a given key.
    """
    given = {k: values[k] for k in SETTING_KEYS if k in values}
    try:
        return DetectionSettings(**given)
    except InvalidSettingError as exc:
        named = [k for k in dict.fromkeys(re.findall(r"`(\w+)`", str(exc))) if k in given]
        raise blame(named or list(given), exc) from exc


def _checked(key: str, value: Any, where: str, error: type[SpikemeasureError]) -> Any:
    """`value` for `key` checked and converted by its declaration; a bad one raises `error`
    with the parameter's own message after `where`, and an example of the key."""
    try:
        return check_value(key, value)
    except InvalidSettingError as exc:
        raise error(f"{where} {exc}; write for example {key} = {parameter(key).example}"
                    ) from exc


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _describe(value: Any) -> str:
    kind = {bool: "a true/false value", str: "text", int: "a whole number",
            float: "a decimal number", list: "a list", tuple: "a list",
            dict: "a table"}.get(type(value), type(value).__name__)
    shown = str(value).lower() if isinstance(value, bool) else repr(value)
    return f"{shown}, {kind}"


def _quote(key: str) -> str:
    return f"`{key}`"


def _keys_phrase(keys: list[str]) -> str:
    return ("key " if len(keys) == 1 else "keys ") + ", ".join(map(_quote, keys))


def _unknown_key_message(key: str, where: str) -> str:
    close = difflib.get_close_matches(key, KNOWN_KEYS, n=1)
    hint = f"did you mean `{close[0]}`? " if close else ""
    return (f"unknown key `{key}` in {where}; {hint}The known keys are "
            f"{', '.join(KNOWN_KEYS)}")


def find_project_file(paths: Sequence[str | os.PathLike] = (),
                      cwd: str | os.PathLike | None = None) -> Path | None:
    """The project file of a command: in the current folder, else in the first folder given.

    Parameters
    ----------
    paths : sequence of str or path-like, optional
        The paths named on the command line.
    cwd : str or path-like, optional
        The current folder (default: the process's).

    Returns
    -------
    Path or None
        ``spikemeasure.toml`` of the current folder (the top of a lab's repository, where CI
        runs) if it exists, else that of the first folder given (:func:`find_config_file`).
    """
    here = Path(cwd) if cwd is not None else Path(".")
    candidate = here / CONFIG_FILE_NAME
    if candidate.is_file():
        return candidate
    return find_config_file(paths)
